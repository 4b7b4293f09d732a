"""Terminal tables of the DC error budget: the contributors ranked by what they
leave after the calibration, and the totals in every unit."""
from __future__ import annotations

import math

from ..spec.numbers import celsius
from .console import eng, table_box
from .tables import chain_heading

CAL_WORDS = {"none": "no calibration", "one_point": "one-point calibration (offset)",
             "two_point": "two-point calibration (offset and gain)"}


def in_units(r, v_out: float, what: str = "") -> list:
    """One output error as text in V, LSB, %FS, at the input and (when declared) sensor units."""
    out = [eng(v_out, "V")]
    if r.lsb_v:
        out.append(_num(r.in_unit(v_out, "LSB", what), "LSB"))
    pct = r.in_unit(v_out, "%", what)
    out.append(_pct(pct))
    out.append(eng(r.in_unit(v_out, "input"), r.signal_unit) if r.gain_dc else "—")
    if r.sensor_unit:
        out.append(_num(r.in_unit(v_out, r.sensor_unit, what), r.sensor_unit))
    return out


def _num(x: float, unit: str) -> str:
    if not math.isfinite(x):
        return "—"
    return f"{x:.0f} {unit}" if abs(x) >= 1000 else f"{x:.3g} {unit}"


def accuracy_tables(r, console, reqs=()) -> None:
    """``r`` a DcErrorResult; ``reqs`` the DC-error requirement results of the chain."""
    from rich.table import Table
    bx = table_box(console)
    chain_heading(r.chain, console)
    rng = r.temp_range_k
    span = (f"drift over {celsius(rng[0]).removesuffix(' °C')} to {celsius(rng[1])}" if rng else "no drift range")
    console.print(f"DC error at '{r.output}'" + (f", converter '{r.converter}'" if r.converter else "") +
                  f"; initial at 25 °C, {span}; {CAL_WORDS[r.calibration]}")
    console.print(f"DC gain {r.gain_dc:.4g} V/{r.signal_unit}; gain errors at ±{eng(r.amplitude, r.signal_unit)} "
                  "from the zero point")
    if not r.contributors:
        console.print("no DC error sources in this spec: give the data-sheet limits (vos, ib, offset, gain_error, "
                      "…), tolerances or a temperature range (docs/accuracy.md)")
        for line in r.notes:
            console.print(f"note: {line}")
        return
    t = Table(title="Error contributors (at the output)", box=bx, title_justify="left")
    for col in ("contributor", "offset", "gain", "drift", "counted"):
        t.add_column(col, justify="left" if col == "contributor" else "right")
    rows = sorted(r.contributors, key=lambda c: -c.total_v(r.calibration))
    for c in rows:
        off = eng(abs(c.offset_v), "V") if c.offset_v else "—"
        gain = eng(abs(c.gain_v), "V") if c.gain_v else "—"
        drift = eng(c.drift_v, "V") if c.drift_v else "—"
        name = c.name + ("" if c.calibratable else " *")
        t.add_row(name, off, gain, drift, eng(c.total_v(r.calibration), "V"))
    console.print(t)
    if any(not c.calibratable for c in rows):
        console.print("* no calibration removes it")
    t = Table(title="Totals (worst case: linear sum of magnitudes; RSS: root sum of squares)", box=bx,
              title_justify="left")
    cols = ["", "output"] + (["LSB"] if r.lsb_v else []) + ["% FS", "at input"] + ([r.sensor_unit] if r.sensor_unit else [])
    for col in cols:
        t.add_column(col, justify="left" if not col else "right")
    for label, what, rule in (("offset error", "offset", "worst_case"), ("gain error", "gain", "worst_case"),
                              ("drift", "drift", "worst_case"), ("total (worst case)", "total", "worst_case"),
                              ("total (RSS)", "total", "rss")):
        t.add_row(label, *in_units(r, r.total(what, rule)))
    if r.calibration != "none":
        raw = sum(abs(c.offset_v) + abs(c.gain_v) + c.drift_v for c in rows)
        t.add_row("uncalibrated total", *in_units(r, raw))
    console.print(t)
    console.print("gain error in % FS above; as % of the gain: " +
                  _pct(r.in_unit(r.total("gain"), "%", "gain")))
    for q in reqs:
        from ..studies.requirements import show
        mark = "met" if bool(q.passed[0]) else "FAILED"
        console.print(f"requirement {q.name}: {show(float(q.value[0]), q.unit)} "
                      f"{q.requirement.describe(False)}  {mark}")
    for line in r.notes:
        console.print(f"note: {line}")


def _pct(x: float) -> str:
    return "—" if not math.isfinite(x) else f"{100 * x:.2g} %" if abs(x) < 1e-3 else f"{100 * x:.3g} %"
