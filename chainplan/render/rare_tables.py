"""Terminal tables and JSON of a rare-event yield run (``chainplan rare``)."""
from __future__ import annotations

import math

from ..spec.numbers import figure
from ..spec.safety import safety_notice
from ..studies.montecarlo import Z95
from ..studies.rare import DEFENSIVE, RareResult
from .layout import Col, print_table
from .tables import chain_heading

def method(res: RareResult) -> str:
    """The estimator in words."""
    how = ("mixture importance sampling around the failure regions, with a defensive part "
           f"(λ = {DEFENSIVE:g})" if res.method.startswith("mixture") else res.method)
    return how + "; 95 % interval: normal approximation of the estimator"
#: inputs of the failure point shown; the others moved less than this (latent σ) are summarised
POINT_QUIET = 0.05


def rate(p: float) -> str:
    """A failure rate in the unit engineers count it in: % above 1 %, else ppm (3 figures)."""
    if p is None or not math.isfinite(p):
        return "—"
    if p >= 1e-2:
        return figure(p, "%", decimals=2)
    return f"{p * 1e6:.3g} ppm"


def _interval(lo: float, hi: float) -> str:
    return "—" if not math.isfinite(lo) else f"{rate(lo)} to {rate(hi)}"


def rare_tables(res: RareResult, console, gate=None) -> None:
    c = res.chain
    chain_heading(c, console)
    n_c = len(res.corners)
    run = (f"{res.samples} weighted units after {res.explored} exploring ones" if res.regions
           else f"{res.explored} exploring units")
    console.print(f"{run}, seed {res.seed}; "
                  f"{len(res.names)} varied input{'s' * (len(res.names) != 1)}; each unit at {n_c} operating "
                  f"corner{'s' * (n_c != 1)}")
    for note in res.notes:
        console.print(f"note: {note}")
    if res.regions or res.requirements:
        rows, styles = [], []
        for name, p, se in res.requirements:
            lo, hi = max(0.0, p - Z95 * se), p + Z95 * se
            rows.append([name, rate(p), _interval(lo, hi)] if p > 0 else [name, "none seen", "—"])
            styles.append(None)
        lo, hi = res.interval
        rows.append(["any (production)", rate(res.p_fail), _interval(lo, hi)])
        styles.append("bold")
        n_eq = res.equivalent_samples
        print_table(console, [Col("fails", wrap=2), Col("failure rate", right=True), Col("95 % interval", right=True)],
                    rows, title="Failure rate in production (a unit fails when it misses a requirement at any corner)",
                    styles=styles,
                    caption=(f"{res.failures} failing units among the weighted ones; brute force would need about "
                             f"{figure(n_eq, '', digits=2)} units for the same precision" if math.isfinite(n_eq)
                             else f"{res.failures} failing units among the weighted ones") + f"; {method(res)}")
    if res.point and res.beta > 0:
        shown = [t for t in res.point if abs(t[1]) >= POINT_QUIET]
        rows = [[name, _value(c, name, x0), _value(c, name, x), _where(c, name, u), f"{z:+.2f}"]
                for name, z, u, x, x0 in shown]
        rest = len(res.point) - len(shown)
        if rest:
            rows.append([f"({rest} more at their nominal)", "", "", "", ""])
        r0 = res.regions[0]
        print_table(console, [Col("input", wrap=2), Col("nominal", right=True), Col("at the point", right=True),
                              Col("of its limit", right=True), Col("z (σ)", right=True, drop=1)], rows,
                    title=f"Most likely failure point found: fails {r0.what}, β = {r0.beta:.2f}σ",
                    caption="the failing combination of tolerances nearest the nominal (in the inputs' own "
                            "probability); tighten the inputs that moved most. 'of its limit': where the value "
                            "sits within its ± limit (σ for a 'σ' tolerance)")
        if len(res.regions) > 1:
            others = ", ".join(f"{r.what} at β = {r.beta:.2f}σ" for r in res.regions[1:])
            console.print(f"other ways to fail: {others}")
    if gate is not None:
        verdict = "met" if gate["passed"] else "NOT met"
        on = (f"decided on the 95 % upper bound {rate(gate['upper_bound'])}, not the estimate"
              if gate["upper_bound"] is not None else "no failing unit was found")
        console.print(f"--max-failure {rate(gate['max_failure'])}: {verdict} ({on})")


def _tol(chain, name):
    """(unit symbol, tolerance) of an input name: 'stage.field', 'rails.NAME', '… .tc'."""
    if name.startswith("rails."):
        return "V", chain.extra.get("rail_tolerances", {}).get(name[6:])
    if name.endswith(".tc") or name.startswith("tracks."):
        return "ppm/K", None
    st, _, fld = name.partition(".")
    stage = chain.stage(st)
    f = stage.model.FIELDS.get(fld)
    return (f.unit if f is not None else ""), chain.extra.get("tolerances", {}).get((st, fld))


def _value(chain, name, x) -> str:
    unit, _ = _tol(chain, name)
    if unit == "ppm/K":
        return f"{x * 1e6:+.3g} ppm/K"
    from ..spec.units import UNITS
    return figure(x, UNITS[unit].symbol if unit in UNITS else unit)


def _where(chain, name, u) -> str:
    _, tol = _tol(chain, name)
    if tol is not None and tol.dist == "sigma":
        return f"{u:+.2f}σ"
    return f"{100 * u:+.0f} %"


def rare_dict(res: RareResult, gate=None) -> dict:
    from .json_out import clean
    lo, hi = res.interval
    return clean({
        "chain": res.chain.name, "file": res.chain.path, "hazards": res.chain.hazards,
        "caution": safety_notice(res.chain.hazards), "method": method(res), "seed": res.seed,
        "samples": res.samples, "explored": res.explored, "inputs": list(res.names),
        "corners": [cr.label for cr in res.corners], "exploration_scale": res.scale,
        "failure_rate": res.p_fail, "failure_rate_std_err": res.std_err,
        "failure_rate_interval_95": [lo, hi], "yield": 1.0 - res.p_fail if math.isfinite(res.p_fail) else None,
        "equivalent_samples": res.equivalent_samples, "failing_samples": res.failures,
        "rejected_units": res.rejected,
        "requirements": [{"name": name, "failure_rate": p, "std_err": se} for name, p, se in res.requirements],
        "regions": [{"fails": r.what, "beta": r.beta} for r in res.regions],
        "failure_point": [{"input": name, "z": z, "of_limit": u, "value": x, "nominal": x0}
                          for name, z, u, x, x0 in res.point],
        "max_failure": gate, "notes": list(res.notes),
    })
