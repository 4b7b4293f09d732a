"""Terminal tables and JSON of a tolerance run (``chainplan spread``)."""
from __future__ import annotations

import math

from ..studies.montecarlo import McResult, metric_info, metrics, stats
from ..studies.requirements import evaluate_requirements, show
from .tables import chain_heading
from .console import table_box

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


def spread_tables(res: McResult, nominal, corners: McResult, console) -> None:
    from rich.table import Table
    bx = table_box(console)
    c = res.chain
    chain_heading(c, console)
    n_valid = int(res.valid.sum())
    console.print(f"{res.samples} samples, seed {res.seed}; {len(res.inputs)} varied input"
                  f"{'s' * (len(res.inputs) != 1)}" + (f"; {res.samples - n_valid} samples with an impossible "
                                                         "operating point count as failures"
                                                         if n_valid < res.samples else ""))
    if not res.inputs:
        console.print("no tolerances or corners in this spec: every sample is the nominal chain")

    t = Table(title="Distribution (valid samples)", box=bx, title_justify="left", show_edge=False)
    for col in ("figure", "nominal", "mean", "σ", "0.1 %", "median", "99.9 %"):
        t.add_column(col, justify="left" if col == "figure" else "right", no_wrap=True)
    quiet = 0
    for key, n0, s in _rows(res, nominal):
        text, unit, _ = metric_info(c, key)
        if key.startswith("loading_loss_db.") and max(abs(n0), abs(s.p_low), abs(s.p_high)) < LOSS_QUIET_DB:
            quiet += 1                      # interfaces that never lose a measurable amount
            continue
        t.add_row(text.replace("loading loss ", "loss "), show(n0, unit), show(s.mean, unit), _sigma(s.std, s.mean, unit),
                  show(s.p_low, unit), show(s.median, unit), show(s.p_high, unit))
    if quiet:
        t.caption = f"{quiet} more interface{'s' * (quiet != 1)} lose less than {LOSS_QUIET_DB} dB in every sample"
        t.caption_justify = "left"
    console.print(t)

    if res.requirements:
        nom_req = evaluate_requirements(nominal)
        t = Table(title="Yield", box=bx, title_justify="left")
        for col in ("requirement", "limit", "nominal", "worst 0.1 %", "yield"):
            t.add_column(col, justify="left" if col == "requirement" else "right")
        for r, r0 in zip(res.requirements, nom_req):
            y = res.yield_of(r)
            worst = stats(r.margin, res.valid).p_low
            t.add_row(r.name, r.requirement.describe(full=False), show(float(r0.value[0]), r.unit),
                      show(float(r.limit + worst if r.sense == "min" else r.limit - worst), r.unit)
                      if math.isfinite(worst) else "—", _pct(y), style="bold red" if y < 1 else None)
        t.add_row("all together", "", "", "", _pct(res.yield_all), style="bold")
        console.print(t)

    if res.sensitivity:
        key = res.key_metric
        what = key if key not in res.metrics else metric_info(c, key)[0]
        t = Table(title=f"What drives the spread of {what} (share of variance, linear)", box=bx,
                  title_justify="left")
        t.add_column("input")
        t.add_column("share", justify="right")
        shown = [(n, s) for n, s in res.sensitivity if s >= MIN_SHARE][:10]
        for name, share in shown:
            t.add_row(name, _pct(share))
        if len(shown) < len(res.sensitivity):
            rest = len(res.sensitivity) - len(shown)
            t.add_row(f"({rest} more input{'s, each' if rest != 1 else ','} below {_pct(MIN_SHARE)})", "")
        rest = 1.0 - sum(s for _, s in res.sensitivity)
        t.add_row("(non-linear and interaction part)", _pct(max(rest, 0.0)))
        console.print(t)

    if corners.samples:
        t = Table(title="Corners (parts at nominal)", box=bx, title_justify="left")
        t.add_column("corner")
        t.add_column("gain", justify="right")
        t.add_column("requirements")
        for i, lab in enumerate(corners.labels):
            fails = [r.name for r in corners.requirements if not r.passed[i]]
            status = "impossible bias" if not corners.valid[i] else \
                (f"failing: {', '.join(fails)}" if fails else ("all met" if corners.requirements else "—"))
            t.add_row(lab, show(float(corners.metrics["gain_db"][i]), "dB"), status,
                      style="bold red" if fails or not corners.valid[i] else None)
        console.print(t)


def _pct(x) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:.2f} %"


def _sigma(x, mean, unit) -> str:
    """σ, shown as 0 where it is floating-point noise (below 1e-9 of the mean)."""
    if math.isfinite(x) and math.isfinite(mean) and x <= 1e-9 * abs(mean):
        x = 0.0
    return show(x, unit).replace("−", "")


def spread_dict(res: McResult, nominal, corners: McResult) -> dict:
    from .json_out import clean
    nom_req = evaluate_requirements(nominal)
    return clean({
        "chain": res.chain.name, "file": res.chain.path, "samples": res.samples, "seed": res.seed,
        "valid_fraction": float(res.valid.mean()) if res.samples else None,
        "inputs": sorted(res.inputs),
        "metrics": {key: {"nominal": n0, "mean": s.mean, "std": s.std, "p0_1": s.p_low, "p50": s.median,
                          "p99_9": s.p_high, "count": s.count} for key, n0, s in _rows(res, nominal)},
        "requirements": [{"name": r.name, "kind": r.kind, "limit": r.limit, "unit": r.unit,
                          "nominal": float(r0.value[0]), "yield": res.yield_of(r),
                          "margin_p0_1": stats(r.margin, res.valid).p_low}
                         for r, r0 in zip(res.requirements, nom_req)],
        "yield_all": res.yield_all,
        "ranking": {"of": res.key_metric, "method": "squared standardised regression coefficients",
                    "shares": [{"input": k, "share": s} for k, s in res.sensitivity]},
        "corners": [{"corner": lab, "gain_db": float(corners.metrics["gain_db"][i]), "valid": bool(corners.valid[i]),
                     "failing": [r.name for r in corners.requirements if not r.passed[i]]}
                    for i, lab in enumerate(corners.labels or [])],
    })
