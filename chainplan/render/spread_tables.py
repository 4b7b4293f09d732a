"""Terminal tables and JSON of a tolerance run (``chainplan spread``)."""
from __future__ import annotations

import math

from ..studies.montecarlo import McResult, metric_info, metrics, stats
from ..studies.requirements import evaluate_requirements, show
from ..spec.numbers import figure, figures, ratio_unit
from ..spec.safety import safety_notice
from .layout import Col, print_table
from .tables import chain_heading

#: inputs with a smaller share of the variance are summarised in one row
MIN_SHARE = 5e-4
#: interfaces losing less than this in every sample are summarised in one row (dB)
LOSS_QUIET_DB = 0.005


def _rows(res: McResult, nominal):
    """(key, nominal value, Stats) of every metric with a finite spread to show."""
    nom = metrics(nominal)
    out = []
    for key, x in res.metrics.items():
        s = res.stats(key)
        n0 = float(nom[key][0])
        if s.count == 0 and not math.isfinite(n0):
            continue                       # e.g. headroom at a node without limits
        out.append((key, n0, s))
    return out


def spread_tables(res: McResult, nominal, corners: McResult, console, gate=None) -> None:
    c = res.chain
    chain_heading(c, console)
    n_rej = res.samples - res.units
    n_bad = int((~res.valid & res.accepted).sum())
    n_c = len(res.corners)
    console.print(f"{res.samples} units, seed {res.seed}; {len(res.inputs)} varied input"
                  f"{'s' * (len(res.inputs) != 1)}; each unit at {n_c} operating corner{'s' * (n_c != 1)}"
                  + (f"; {n_bad} units with an impossible operating point count as failures" if n_bad else ""))
    if n_rej:
        console.print(f"{n_rej} units rejected: a drawn value stayed outside its field's physical range after "
                      "redrawing; they are left out of every yield (not design failures)")
    if not res.inputs:
        console.print("no tolerances in this spec: every unit is the nominal chain")

    rows, quiet = [], 0
    for key, n0, s in _rows(res, nominal):
        text, unit, _ = metric_info(c, key)
        if key.startswith("loading_loss_db.") and max(abs(n0), abs(s.p_low), abs(s.p_high)) < LOSS_QUIET_DB:
            quiet += 1                      # interfaces that never lose a measurable amount
            continue
        nom, mean, lo, med, hi = _row_figures([n0, s.mean, s.p_low, s.median, s.p_high], unit, key)
        rows.append([text.replace("loading loss ", "loss "), nom, mean, _sigma(s.std, s.mean, ratio_unit(unit)), lo, med, hi])
    print_table(console, [Col("figure", wrap=2), Col("nominal", right=True), Col("mean", right=True, drop=2),
                          Col("σ", right=True), Col("0.1 %", right=True), Col("median", right=True, drop=1),
                          Col("99.9 %", right=True)], rows, title="Distribution (valid units, nominal conditions)",
                caption=(f"{quiet} more interface{'s' * (quiet != 1)} lose less than {LOSS_QUIET_DB} dB in every "
                         "sample") if quiet else None)

    if res.requirements:
        nom_req = evaluate_requirements(nominal)
        rows, styles = [], []
        for r, r0 in zip(res.requirements, nom_req):
            y = res.yield_of(r)
            worst = stats(r.margin, res.valid).p_low
            rows.append([r.name, r.requirement.describe(full=False), show(float(r0.value[0]), r.unit),
                         show(float(r.limit + worst if r.sense == "min" else r.limit - worst), r.unit)
                         if math.isfinite(worst) else "—", _pct(y), _ci(res, y)])
            styles.append("bold red" if y < 1 else None)
        rows.append(["all together", "", "", "", _pct(res.yield_all), _ci(res, res.yield_all)])
        styles.append("bold")
        where = (f"at all {n_c} operating corners" if n_c > 1 else "(no corners: nominal conditions)")
        print_table(console, [Col("requirement", wrap=2), Col("limit", right=True), Col("nominal", right=True),
                              Col("worst 0.1 %", right=True, drop=1), Col("yield", right=True),
                              Col("95 % interval", right=True)], rows,
                    title="Yield in production (every unit at every corner)", styles=styles,
                    caption=f"nominal, worst 0.1 %: at nominal conditions; yield: units meeting it {where}; "
                            "interval: Wilson score, 95 %")
        if gate is not None:
            verdict = "met" if gate["passed"] else "NOT met"
            console.print(f"--min-yield {_pct(gate['min_yield'])}: {verdict} (decided on the 95 % lower bound "
                          f"{_pct(gate['lower_bound'])}, not the estimate)")

    if res.sensitivity:
        key = res.key_metric
        what = key if key not in res.metrics else metric_info(c, key)[0]
        shown = [(n, s) for n, s in res.sensitivity if s >= MIN_SHARE][:10]
        rows = [[name, _pct(share)] for name, share in shown]
        if len(shown) < len(res.sensitivity):
            rest = len(res.sensitivity) - len(shown)
            rows.append([f"({rest} more input{'s, each' if rest != 1 else ','} below {_pct(MIN_SHARE)})", ""])
        rest = 1.0 - sum(s for _, s in res.sensitivity)
        rows.append(["(non-linear and interaction part)", _pct(max(rest, 0.0))])
        print_table(console, [Col("input", wrap=2), Col("share", right=True)], rows,
                    title=f"What drives the spread of {what} (share of variance, linear)")

    if corners.samples and n_c > 1:
        limit = res.limiting_corner
        rows, styles = [], []
        for i, cr in enumerate(res.corners):
            y = res.yield_at(i) if res.requirements else float("nan")
            fails = [r.name for r in corners.requirements if not r.passed[i]]
            more = f" +{len(fails) - 1}" if len(fails) > 1 else ""
            status = "impossible bias" if not corners.valid[i] else \
                (f"fails {fails[0]}{more}" if fails else ("all met" if corners.requirements else "—"))
            mark = ", ".join(m for m, on in (("nominal", cr.nominal), ("limits", i == limit)) if on)
            rows.append([cr.label, _pct(y), _ci(res, y) if res.requirements else "—",
                         show(float(corners.metrics["gain_db"][i]), c.gain_db_unit), status, mark])
            styles.append("bold red" if fails or not corners.valid[i] or i == limit else None)
        print_table(console, [Col("corner", wrap=2), Col("yield", right=True), Col("95 % interval", right=True),
                              Col("gain", right=True, drop=1), Col("nominal unit", wrap=True), Col("", wrap=True)],
                    rows, title="Operating corners", styles=styles,
                    caption="yield: units meeting every requirement at that corner; gain and status: the nominal "
                            "unit; limits: the corner with the lowest yield")


def _row_figures(values, unit, key):
    """One row of a distribution in one prefix (dB and bits keep their decimals); only a
    gain is signed (losses, SNR and the rest are positive when good, docs/json.md)."""
    return figures(values, unit, signed=key == "gain_db")


def _pct(x) -> str:
    return "—" if x is None or not math.isfinite(x) else figure(x, "%", decimals=2)


def _ci(res: McResult, y: float) -> str:
    lo, hi = res.interval(y)
    return "—" if not math.isfinite(lo) else f"{figure(lo, '%', decimals=2)} to {figure(hi, '%', decimals=2)}"


def _sigma(x, mean, unit) -> str:
    """σ, shown as 0 where it is floating-point noise (below 1e-9 of the mean)."""
    if math.isfinite(x) and math.isfinite(mean) and x <= 1e-9 * abs(mean):
        x = 0.0
    return show(abs(x), unit)


def spread_dict(res: McResult, nominal, corners: McResult, gate=None) -> dict:
    from .json_out import clean
    nom_req = evaluate_requirements(nominal)
    ci = lambda y: list(res.interval(y))  # noqa: E731
    limit = res.limiting_corner
    return clean({
        "chain": res.chain.name, "file": res.chain.path, "hazards": res.chain.hazards,
        "caution": safety_notice(res.chain.hazards), "samples": res.samples, "seed": res.seed,
        "units": res.units, "rejected_units": res.samples - res.units,
        "valid_fraction": float(res.valid.mean()) if res.samples else None,
        "inputs": sorted(res.inputs),
        "metrics": {key: {"nominal": n0, "mean": s.mean, "std": s.std, "p0_1": s.p_low, "p50": s.median,
                          "p99_9": s.p_high, "count": s.count} for key, n0, s in _rows(res, nominal)},
        "requirements": [{"name": r.name, "kind": r.kind, "limit": r.limit, "unit": r.unit,
                          "nominal": float(r0.value[0]), "yield": res.yield_of(r),
                          "yield_interval_95": ci(res.yield_of(r)),
                          "margin_p0_1": stats(r.margin, res.valid).p_low}
                         for r, r0 in zip(res.requirements, nom_req)],
        "yield_all": res.yield_all,
        "yield_all_interval_95": ci(res.yield_all),
        "yield_interval_method": "Wilson score, 95 %",
        "min_yield": gate,
        "ranking": {"of": res.key_metric, "method": "squared standardised regression coefficients",
                    "shares": [{"input": k, "share": s} for k, s in res.sensitivity]},
        "corners": [{"corner": cr.label, "temperature_k": cr.temp_k, "supply_factor": cr.supply,
                     "nominal": cr.nominal,
                     "yield": res.yield_at(i) if res.requirements else None,
                     "yield_interval_95": ci(res.yield_at(i)) if res.requirements else None,
                     "limits_yield": i == limit,
                     "nominal_unit": {"gain_db": float(corners.metrics["gain_db"][i]), "valid": bool(corners.valid[i]),
                                      "failing": [r.name for r in corners.requirements if not r.passed[i]]}}
                    for i, cr in enumerate(res.corners)],
    })
