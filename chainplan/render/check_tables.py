"""Terminal tables and JSON of requirement checks (``chainplan check``)."""
from __future__ import annotations

from ..studies.requirements import result_dict, show, show_margin, where_of
from .layout import Col, print_table
from ..spec.safety import safety_notice
from .tables import chain_heading


def check_tables(checked: list, console) -> None:
    """``checked``: (chain, [ReqResult]) pairs; one table per spec, then a tally."""
    n_req = n_fail = 0
    for chain, results in checked:
        chain_heading(chain, console)
        if not results:
            console.print("  no requirements in this spec (add a 'requirements:' block)")
            continue
        rows, styles = [], []
        for r in results:
            ok = bool(r.passed[0])
            rows.append([r.name, show(float(r.value[0]), r.unit), r.requirement.describe(full=False),
                         show_margin(float(r.margin[0]), r.unit), "pass" if ok else "FAIL", where_of(r) or ""])
            styles.append(None if ok else "bold red")
            n_fail += not ok
        n_req += len(results)
        print_table(console, [Col("requirement", wrap=2), Col("value", right=True), Col("limit", right=True),
                              Col("margin", right=True), Col("result"), Col("set by", wrap=True, drop=1)],
                    rows, styles=styles, caption="; ".join(["margin: positive when met",
                                                            *(f"{r.name}: {r.note}" for r in results if r.note)]))
    console.print(f"{len(checked)} spec{'s' * (len(checked) != 1)}, {n_req} requirement{'s' * (n_req != 1)}: "
                  f"{n_req - n_fail} met, {n_fail} failing", style="bold red" if n_fail else "bold")


def check_dict(checked: list) -> dict:
    from .json_out import clean
    specs = [{"chain": c.name, "file": c.path, "caution": safety_notice(c.hazards),
              "passed": all(bool(r.passed[0]) for r in res),
              "requirements": [result_dict(r) for r in res]} for c, res in checked]
    return clean({"passed": all(s["passed"] for s in specs), "specs": specs})
