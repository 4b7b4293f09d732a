"""JSON form of a budget (schema in docs/json.md)."""
from __future__ import annotations

import json
import math

from ..engine.budget import Budget
from ..spec.safety import safety_notice


def clean(x):
    """Plain JSON values: non-finite floats become null, numpy scalars floats."""
    if isinstance(x, dict):
        return {k: clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [clean(v) for v in x]
    if x is None or isinstance(x, (str, bool, int)):
        return x
    x = float(x)
    return x if math.isfinite(x) else None


def budget_dict(b: Budget) -> dict:
    c = b.chain
    return clean({
        "chain": c.name,
        "file": c.path,
        "hazards": c.hazards,
        "caution": safety_notice(c.hazards),
        "f_ref_hz": c.analysis.f_ref_hz,
        "output": b.output,
        "gain_db": b.gain_db,
        "gain_unit": b.gain_unit,
        "f_low_hz": b.f_low_hz,
        "f_high_hz": b.f_high_hz,
        "signal_dbfs": b.signal_dbfs,
        "peak_gain_db": b.peak_gain_db,
        "f_peak_hz": b.f_peak_hz,
        "stages": [{"name": s.name, "kind": s.kind, "zin_ohm": s.zin_ohm, "zout_ohm": s.zout_ohm,
                    "gain": s.gain, "gain_db": s.gain_db, "gain_unit": s.gain_unit,
                    "operating_point": s.op} for s in b.stages],
        "interfaces": [{"from": r.source, "to": r.to, "z_source_ohm": r.z_source_ohm,
                        "z_load_ohm": r.z_load_ohm, "loading_loss_db": r.loss_db, "input_mode": r.mode,
                        "transfer": r.transfer, "transfer_db": r.transfer_db} for r in b.interfaces],
        "nodes": [{"name": n.name, "dc_v": n.dc_v, "peak_v": n.peak_v, "low_limit_v": n.low_v,
                   "high_limit_v": n.high_v, "headroom_v": n.headroom_v, "headroom_db": n.headroom_db,
                   "low_limit_by": n.limited_by[0], "high_limit_by": n.limited_by[1],
                   "low_limit_cause": n.limit_cause[0], "high_limit_cause": n.limit_cause[1],
                   "peak_f_hz": n.f_peak_hz,
                   "clips": n.clips} for n in b.nodes],
        **b.extra_json,
    })


def dumps(d: dict) -> str:
    return json.dumps(d, indent=2, ensure_ascii=False)
