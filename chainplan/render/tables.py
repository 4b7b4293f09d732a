"""Terminal tables of a budget: stages, interfaces, nodes and a summary.

The worst interface and the tightest node carry a text marker ('worst',
'tightest', 'CLIPS') so they stand out without colour."""
from __future__ import annotations

import math

from ..engine.budget import Budget
from ..spec.safety import safety_notice
from ..spec.numbers import figures, loss
from .console import TRANSFER_NOTE, converter_of, db, end_gain, eng, interface_cell, stage_gain
from .layout import Col, print_table

def chain_heading(chain, console) -> None:
    """The chain's name and file, and the safety caution when it is hazardous."""
    from rich.text import Text
    console.print(Text(chain.name, style="bold"), Text(f"  ({chain.path})" if chain.path else ""))
    note = safety_notice(chain.hazards)
    if note:
        console.print(Text(note, style="bold red"))


def budget_tables(b: Budget, console) -> None:
    c = b.chain
    chain_heading(c, console)
    f_ref = eng(c.analysis.f_ref_hz, "Hz")

    gains = [stage_gain(s) for s in b.stages]
    print_table(console, [Col("stage", wrap=True), Col("kind", wrap=True, drop=1), Col("Zin", right=True),
                          Col("Zout", right=True), Col("gain", right=True), Col("gain dB", right=True)],
                list(zip([s.name for s in b.stages], [s.kind for s in b.stages],
                         figures([s.zin_ohm for s in b.stages], "Ω"), figures([s.zout_ohm for s in b.stages], "Ω"),
                         [g[0] for g in gains], [g[1] for g in gains])),
                title=f"Stages as connected (at {f_ref})")
    _active_table(b, console)

    worst = b.worst_interface
    marks = ["worst" if r is worst and r.loss_db > 0.005 else "" for r in b.interfaces]
    print_table(console, [Col("from", wrap=True), Col("to", wrap=True), Col("Z source", right=True),
                          Col("Z load", right=True), Col("loading loss", right=True), Col("")],
                list(zip([r.source for r in b.interfaces], [r.to for r in b.interfaces],
                         figures([r.z_source_ohm for r in b.interfaces], "Ω"),
                         figures([r.z_load_ohm for r in b.interfaces], "Ω"),
                         [interface_cell(r) for r in b.interfaces], marks)),
                title="Interfaces (loading): loss in dB lost", styles=["bold yellow" if m else None for m in marks],
                caption="each row: the loss recovered if that stage's input were an open circuit; rows along "
                        "one passive network overlap and do not add"
                        + ("; " + TRANSFER_NOTE if any(not r.loading for r in b.interfaces) else ""))

    tight = b.tightest_node
    band = c.analysis.band_hz
    where = f"over {eng(band[0], 'Hz')} to {eng(band[1], 'Hz')}" if band else f"at {f_ref}"
    class_a = any(n.limit_cause[0] == "class A" for n in b.nodes)
    caption = None
    if band:
        caption = ("peak: the largest over the signal band, the sensor's amplitude assumed flat over it"
                   + "; class A: a follower's bias current sets its negative swing into the load" * class_a)
    elif class_a:
        caption = "class A: a follower's bias current sets its negative swing into the load"
    ns = b.nodes
    marks = ["CLIPS" if n.clips else ("tightest" if n is tight else "") for n in ns]
    def lim(vs, causes):
        """Limits in one prefix; an infinite one reads 'no rail' where an op-amp is declared without
        that rail (a quick estimate: no headroom figure is made up), '—' where nothing limits it."""
        return [x if math.isfinite(v) else ("no rail" if "no rail" in cause else "—")
                for x, v, cause in zip(figures(vs, "V"), vs, causes)]
    no_rail = [tuple(c or "" for c in n.limit_cause) for n in ns]
    print_table(console, [Col("node", wrap=True), Col("DC", right=True), Col("peak", right=True),
                          Col("low limit", right=True), Col("high limit", right=True), Col("headroom", right=True),
                          Col("headroom dB", right=True, drop=2), Col("set by", wrap=True, drop=1), Col("")],
                list(zip([n.name for n in ns], figures([n.dc_v for n in ns], "V"), figures([n.peak_v for n in ns], "V"),
                         lim([n.low_v for n in ns], [c[0] for c in no_rail]),
                         lim([n.high_v for n in ns], [c[1] for c in no_rail]),
                         lim([n.headroom_v for n in ns], [" ".join(c) for c in no_rail]),
                         [db(n.headroom_db, 1) if math.isfinite(n.headroom_db) else "—" for n in ns],
                         [_set_by(n) for n in ns], marks)),
                title=f"Nodes (DC, signal peak {where}, limits, headroom)", caption=caption,
                styles=["bold red" if n.clips else ("bold yellow" if m else None) for n, m in zip(ns, marks)])

    rows = [*_amplitude_row(c), end_gain(b, f_ref),
            ("−3 dB band", f"{eng(b.f_low_hz, 'Hz') if b.f_low_hz else 'below span'} to "
                           f"{eng(b.f_high_hz, 'Hz') if b.f_high_hz else 'above span'}")]
    if b.peak_gain_db is not None and b.peak_gain_db - b.gain_db > 1.0:
        rows.append(("note", f"f_ref is on a slope: the gain peaks {b.peak_gain_db - b.gain_db:.1f} dB higher "
                             f"at {eng(b.f_peak_hz, 'Hz')}"))
    if worst is not None and worst.loss_db > 0.005:
        rows.append(("worst interface", f"{worst.source} → {worst.to}: {loss(worst.loss_db)} lost"))
    elif worst is not None:
        rows.append(("worst interface", "none loses more than 0.005 dB"))
    if tight is not None:
        rows.append(("tightest node", f"{tight.name}: {eng(tight.headroom_v, 'V')} headroom"))
    if b.signal_dbfs is not None:
        rows.append((f"signal at the converter{_converter(b)}", db(b.signal_dbfs, 1) + "FS"))
    rows.extend(tuple(extra) for extra in b.extra_summary)
    clips = [n.name for n in b.nodes if n.clips]
    styles = [None] * len(rows)
    if clips:
        rows.append(("clipping", ", ".join(clips)))
        styles.append("bold red")
    print_table(console, [Col("what", wrap=2), Col("value", wrap=True)], [list(r) for r in rows],
                title="Summary", styles=styles, show_header=False)


def _amplitude_row(chain) -> list:
    """What an amplitude written as rms or peak-to-peak was taken as (the engine uses the peak)."""
    from ..spec.loader import amplitude_form
    raw = chain.source.raw.get("amplitude")
    if raw is None or amplitude_form(raw)[1] == 1.0:
        return []
    unit = chain.source.model.signal_unit
    return [("source amplitude", f"{eng(chain.source.params['amplitude'], unit)} peak (written '{raw}', a sine)")]


def _converter(b: Budget) -> str:
    """' (adc)': the converter where the signal ends, when one reads the output."""
    adc = converter_of(b.chain, b.output)
    return f" '{adc}'" if adc else ""


def _set_by(n) -> str:
    """The stage whose limit is nearer the signal."""
    lo_by, hi_by = n.limited_by
    if not (math.isfinite(n.low_v) or math.isfinite(n.high_v)):
        return ""
    up = n.high_v - (n.dc_v + n.peak_v)
    down = (n.dc_v - n.peak_v) - n.low_v
    if up > down and lo_by and n.limit_cause[0]:
        return f"{lo_by} ({n.limit_cause[0]})"
    return (hi_by if up <= down else lo_by) or ""


def _active_table(b: Budget, console) -> None:
    """Operating points of the stages that draw power: what each one costs."""
    rows = [s for s in b.stages if s.op.get("power_w") is not None]
    if not rows:
        return
    dc = {n.name: n.dc_v for n in b.nodes}
    parents = {st.name: st.parent for st in b.chain.stages}
    shifts = [dc[s.name] - dc[parents[s.name]] if s.name in dc else None for s in rows]
    print_table(console, [Col("stage", wrap=True), Col("bias current", right=True), Col("DC shift", right=True),
                          Col("gm", right=True), Col("power", right=True)],
                list(zip([s.name for s in rows], figures([s.op.get("id_a", s.op.get("ic_a")) for s in rows], "A"),
                         figures(shifts, "V", signed=True), figures([s.op.get("gm_s") for s in rows], "S"),
                         [("no rail" if _no_rail_power(b, s) else x)
                          for s, x in zip(rows, figures([s.op["power_w"] for s in rows], "W"))])),
                title="Active stages (operating point)")


def _no_rail_power(b: Budget, s) -> bool:
    """A stage's power is no figure because it is declared without a rail."""
    return not math.isfinite(s.op["power_w"]) and any(b.ev.dc.ops[s.name].no_rail)


def _lim(v):
    return "—" if not math.isfinite(v) else eng(v, "V")
