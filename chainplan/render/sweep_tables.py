"""Terminal table and JSON of a temperature sweep (``chainplan temperature``)."""
from __future__ import annotations

import math

from ..spec.safety import safety_notice
from ..spec.numbers import celsius, ratio_unit
from ..spec.units import fmt
from ..studies.requirements import show
from ..studies.tempsweep import Sweep
from .layout import Col, print_table
from .tables import chain_heading


def _t(t_k: float) -> str:
    return celsius(t_k)


def _drift(x: float, unit: str) -> str:
    """Drift per kelvin in the figure's unit (ppm/K for a frequency, relative)."""
    if not math.isfinite(x):
        return "—"
    if unit in ("dB", "dBΩ", "bits"):
        return f"{x:+.4f} {ratio_unit(unit)}/K".replace("-", "−")
    return fmt(x, unit) + "/K"          # engineering notation: a drift is small by nature


def sweep_tables(res: Sweep, console) -> None:
    chain_heading(res.chain, console)
    console.print(f"parts stated at {_t(res.chain.t_nom_k)} (t_nom); nominal parts and supplies; "
                  "drift = (hottest − coldest)/ΔT")
    rows = [[row.label, *(show(float(v), row.unit) if math.isfinite(v) else "—" for v in row.values),
             _drift(res.drift(row), row.unit)] for row in res.rows]
    caption = None
    if not res.valid.all():
        bad = ", ".join(_t(tk) for tk, ok in zip(res.temps_k, res.valid) if not ok)
        caption = f"impossible operating point at {bad}: a device cannot hold its bias there"
    cols = [Col("figure", wrap=2)] + [Col(_t(tk), right=True) for tk in res.temps_k] + [Col("drift", right=True)]
    print_table(console, cols, rows, title="Over temperature", caption=caption)


def sweep_dict(res: Sweep) -> dict:
    from .json_out import clean
    c = res.chain
    return clean({"chain": c.name, "file": c.path, "hazards": c.hazards, "caution": safety_notice(c.hazards),
                  "t_nom_k": c.t_nom_k, "temperatures_k": [float(x) for x in res.temps_k],
                  "valid": [bool(x) for x in res.valid],
                  "drift_method": "(value at the hottest − at the coldest) / ΔT, per kelvin",
                  "figures": {r.key: {"unit": r.unit, "values": [float(v) for v in r.values],
                                      "drift_per_k": res.drift(r)} for r in res.rows}})
