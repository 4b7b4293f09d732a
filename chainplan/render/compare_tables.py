"""Terminal tables, JSON and Markdown (for a pull-request comment) of a spec diff."""
from __future__ import annotations

import math

from ..studies.diffing import Diff
from ..studies.requirements import show
from ..spec.safety import safety_notice
from ..spec.numbers import figure, ratio_unit
from .layout import Col, print_table

MARK = {"worse": "worse", "clips now": "CLIPS NOW", "fails now": "FAILS NOW"}


def _delta(c) -> str:
    """new − old in the figure's unit, and relative for figures that are not in dB or bits."""
    if c.old is None or c.new is None or not (math.isfinite(c.old) and math.isfinite(c.new)):
        return ""
    d = figure(c.new - c.old, ratio_unit(c.unit), signed=True)
    if c.unit not in ("dB", "dBΩ", "bits") and c.old != 0:
        d += f" ({figure((c.new - c.old) / abs(c.old), '%', signed=True)})"
    return d


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


def sections(d: Diff) -> list:
    """The changed rows, shared by the terminal and Markdown forms: (title, columns
    (name, right-aligned), [(cells, regression)]) per non-empty section."""
    dash = lambda x: "—" if x is None else x  # noqa: E731
    out = []
    if d.params:
        out.append(("Parameters", [("where", False), ("was", False), ("now", False)],
                    [((p.where, dash(p.old), dash(p.new)), False) for p in d.params]))
    if d.budget:
        out.append(("Budget (nominal)", [("figure", False), ("was", True), ("now", True), ("change", True),
                                         ("", False)],
                    [((c.label, show(c.old, c.unit), show(c.new, c.unit), _delta(c), MARK.get(c.verdict, c.verdict)),
                      c.regression) for c in d.budget]))
    if d.requirements:
        out.append(("Requirements", [("requirement", False), ("was", False), ("now", False), ("", False)],
                    [((r.name, _req_cell(r.old), _req_cell(r.new), MARK.get(r.verdict, r.verdict)), r.regression)
                     for r in d.requirements]))
    return out


def compare_tables(d: Diff, console) -> None:
    from rich.text import Text
    console.print(Text(f"{d.old.label}  →  {d.new.label}", style="bold"))
    note = caution(d)
    if note:
        console.print(Text(note, style="bold red"))
    console.print(headline(d), style="bold red" if d.regressions else "bold")
    for title, cols, rows in sections(d):
        print_table(console, [Col(name, right=right, wrap=0 if right or not name else (2 if i == 0 else 1))
                              for i, (name, right) in enumerate(cols)],
                    [list(cells) for cells, _ in rows], title=title,
                    styles=["bold red" if regression else None for _, regression in rows])


def hazards(d: Diff) -> list:
    """The hazards of either side (a change may add or remove one: both count)."""
    return sorted(set(d.old.chain.hazards) | set(d.new.chain.hazards))


def caution(d: Diff) -> str | None:
    return safety_notice(hazards(d))


def compare_dict(d: Diff) -> dict:
    from .json_out import clean
    return clean({
        "old": d.old.label, "new": d.new.label, "chain": d.new.chain.name,
        "hazards": hazards(d), "caution": caution(d),
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
           *([f"> **{_md(caution(d))}**", ""] if caution(d) else []),
           ("**" + headline(d) + "**") if d.regressions else headline(d), ""]
    for title, cols, rows in sections(d):
        out += [f"#### {title}", "", "| " + " | ".join(n for n, _ in cols) + " |",
                "|" + "|".join("---:" if right else "---" for _, right in cols) + "|"]
        for cells, regression in rows:
            cells = [_code(c) if title == "Parameters" and i else _md(c) for i, c in enumerate(cells)]
            if title == "Parameters":
                cells[0] = f"`{cells[0]}`"
            if regression:
                cells[-1] = f"**{cells[-1]}**"
            out.append("| " + " | ".join(cells) + " |")
        out.append("")
    return "\n".join(out)


def _code(x) -> str:
    return x if x == "—" else f"`{_md(x)}`"
