"""Terminal tables, JSON and Markdown (for a pull-request comment) of a spec diff."""
from __future__ import annotations

import math

from ..diffing import Diff
from ..requirements import show
from .console import table_box

MARK = {"worse": "worse", "clips now": "CLIPS NOW", "fails now": "FAILS NOW"}


def _delta(c) -> str:
    if c.old is None or c.new is None or not (math.isfinite(c.old) and math.isfinite(c.new)):
        return ""
    d = show(c.new - c.old, c.unit)
    return d if d.startswith("−") else "+" + d


def _req_cell(r) -> str:
    if r is None:
        return "—"
    return f"{'pass' if r['passed'] else 'FAIL'} ({show(r['value'], r['unit'])})"


def headline(d: Diff) -> str:
    if d.empty:
        return "no parameter changes and no budget changes"
    n_better = sum(c.verdict == "better" for c in d.budget)
    fails = sum(r.verdict == "fails now" for r in d.requirements)
    fixed = sum(r.verdict == "passes now" for r in d.requirements)
    parts = [f"{len(d.params)} parameter change{'s' * (len(d.params) != 1)}",
             f"{d.regressions} regression{'s' * (d.regressions != 1)}, "
             f"{n_better} improvement{'s' * (n_better != 1)}"]
    if fails or fixed:
        parts.append(f"requirements: {fails} failing now, {fixed} passing now")
    return "; ".join(parts) + f" ({d.unchanged} figures unchanged)"


def compare_tables(d: Diff, console) -> None:
    from rich.table import Table
    from rich.text import Text
    bx = table_box(console)
    console.print(Text(f"{d.old.label}  →  {d.new.label}", style="bold"))
    console.print(headline(d), style="bold red" if d.regressions else "bold")
    if d.params:
        t = Table(title="Parameters", box=bx, title_justify="left")
        for col in ("where", "was", "now"):
            t.add_column(col)
        for p in d.params:
            t.add_row(p.where, p.old if p.old is not None else "—", p.new if p.new is not None else "—")
        console.print(t)
    if d.budget:
        t = Table(title="Budget (nominal)", box=bx, title_justify="left")
        for col in ("figure", "was", "now", "change", ""):
            t.add_column(col, justify="left" if col in ("figure", "") else "right")
        for c in d.budget:
            t.add_row(c.label, show(c.old, c.unit), show(c.new, c.unit), _delta(c), MARK.get(c.verdict, c.verdict),
                      style="bold red" if c.regression else None)
        console.print(t)
    if d.requirements:
        t = Table(title="Requirements", box=bx, title_justify="left")
        for col in ("requirement", "was", "now", ""):
            t.add_column(col)
        for r in d.requirements:
            t.add_row(r.name, _req_cell(r.old), _req_cell(r.new), MARK.get(r.verdict, r.verdict),
                      style="bold red" if r.regression else None)
        console.print(t)


def compare_dict(d: Diff) -> dict:
    from .json_out import clean
    return clean({
        "old": d.old.label, "new": d.new.label, "chain": d.new.chain.name,
        "regressions": d.regressions, "unchanged": d.unchanged,
        "parameters": [{"where": p.where, "old": p.old, "new": p.new} for p in d.params],
        "budget": [{"key": c.key, "label": c.label, "unit": c.unit, "old": c.old, "new": c.new,
                    "verdict": c.verdict, "regression": c.regression} for c in d.budget],
        "requirements": [{"name": r.name, "old": r.old, "new": r.new, "verdict": r.verdict,
                          "regression": r.regression} for r in d.requirements],
    })


def _md(text) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def compare_markdown(d: Diff) -> str:
    """A pull-request comment: headline, then only what changed, regressions in bold."""
    out = [f"### chainplan: `{_md(d.new.chain.name)}` budget change", "",
           f"`{_md(d.old.label)}` → `{_md(d.new.label)}`", "",
           ("**" + headline(d) + "**") if d.regressions else headline(d), ""]
    if d.params:
        out += ["#### Parameters", "", "| where | was | now |", "|---|---|---|"]
        out += [f"| `{_md(p.where)}` | {_code(p.old)} | {_code(p.new)} |" for p in d.params]
        out.append("")
    if d.budget:
        out += ["#### Budget (nominal)", "", "| figure | was | now | change | |", "|---|---:|---:|---:|---|"]
        for c in d.budget:
            mark = MARK.get(c.verdict, c.verdict)
            out.append(f"| {_md(c.label)} | {show(c.old, c.unit)} | {show(c.new, c.unit)} | {_delta(c)} | "
                       + (f"**{mark}**" if c.regression else mark) + " |")
        out.append("")
    if d.requirements:
        out += ["#### Requirements", "", "| requirement | was | now | |", "|---|---|---|---|"]
        for r in d.requirements:
            mark = MARK.get(r.verdict, r.verdict)
            out.append(f"| {_md(r.name)} | {_req_cell(r.old)} | {_req_cell(r.new)} | "
                       + (f"**{mark}**" if r.regression else mark) + " |")
        out.append("")
    return "\n".join(out)


def _code(x) -> str:
    return "—" if x is None else f"`{_md(x)}`"
