"""Terminal tables of a budget: stages, interfaces, nodes and a summary.

The worst interface and the tightest node carry a text marker ('worst',
'tightest', 'CLIPS') so they stand out without colour."""
from __future__ import annotations

import math

from ..engine.budget import Budget
from ..spec.safety import safety_notice
from ..spec.numbers import loss
from .console import db, end_gain, eng, stage_gain, table_box

def chain_heading(chain, console) -> None:
    """The chain's name and file, and the safety caution when it is hazardous."""
    from rich.text import Text
    console.print(Text(chain.name, style="bold"), Text(f"  ({chain.path})" if chain.path else ""))
    note = safety_notice(chain.hazards)
    if note:
        console.print(Text(note, style="bold red"))


def budget_tables(b: Budget, console) -> None:
    from rich.table import Table
    from rich.text import Text
    bx = table_box(console)
    c = b.chain
    chain_heading(c, console)
    f_ref = eng(c.analysis.f_ref_hz, "Hz")

    t = Table(title=f"Stages as connected (at {f_ref})", box=bx, title_justify="left")
    for col in ("stage", "kind", "Zin", "Zout", "gain", "gain dB"):
        t.add_column(col, justify="left" if col in ("stage", "kind") else "right")
    for s in b.stages:
        t.add_row(s.name, s.kind, eng(s.zin_ohm, "Ω"), eng(s.zout_ohm, "Ω"), *stage_gain(s))
    console.print(t)
    _active_table(b, console, bx)

    worst = b.worst_interface
    t = Table(title="Interfaces (loading)", box=bx, title_justify="left")
    for col in ("from", "to", "Z source", "Z load", "loading loss", ""):
        t.add_column(col, justify="left" if col in ("from", "to", "") else "right")
    for r in b.interfaces:
        mark = "worst" if r is worst and r.loss_db > 0.005 else ""
        style = "bold yellow" if mark else None
        t.add_row(r.source, r.to, eng(r.z_source_ohm, "Ω"), eng(r.z_load_ohm, "Ω"), loss(r.loss_db), mark,
                  style=style)
    t.caption = ("each row: the loss recovered if that stage's input were an open circuit; rows along one "
                 "passive network overlap and do not add")
    t.caption_justify = "left"
    console.print(t)

    tight = b.tightest_node
    band = c.analysis.band_hz
    where = f"over {eng(band[0], 'Hz')} … {eng(band[1], 'Hz')}" if band else f"at {f_ref}"
    t = Table(title=f"Nodes (DC, signal peak {where}, limits, headroom)", box=bx, title_justify="left")
    for col in ("node", "DC", "peak", "low limit", "high limit", "headroom", "(dB)", "set by", ""):
        t.add_column(col, justify="left" if col in ("node", "set by", "") else "right", no_wrap=col != "set by")
    for n in b.nodes:
        mark = "CLIPS" if n.clips else ("tightest" if n is tight else "")
        style = "bold red" if n.clips else ("bold yellow" if mark else None)
        t.add_row(n.name, eng(n.dc_v, "V"), eng(n.peak_v, "V"), _lim(n.low_v), _lim(n.high_v),
                  eng(n.headroom_v, "V") if math.isfinite(n.headroom_v) else "—",
                  db(n.headroom_db, 1) if math.isfinite(n.headroom_db) else "—", _set_by(n), mark, style=style)
    if band:
        t.caption = ("peak: the largest over the signal band, the sensor's amplitude assumed flat over it"
                     + "; class A: a follower's bias current sets its negative swing into the load"
                     * any(n.limit_cause[0] == "class A" for n in b.nodes))
        t.caption_justify = "left"
    elif any(n.limit_cause[0] == "class A" for n in b.nodes):
        t.caption = "class A: a follower's bias current sets its negative swing into the load"
        t.caption_justify = "left"
    console.print(t)

    t = Table(title="Summary", box=bx, title_justify="left", show_header=False)
    t.add_column("what")
    t.add_column("value")
    t.add_row(*end_gain(b, f_ref))
    t.add_row("−3 dB band", f"{eng(b.f_low_hz, 'Hz') if b.f_low_hz else 'below span'} … "
                            f"{eng(b.f_high_hz, 'Hz') if b.f_high_hz else 'above span'}")
    if b.peak_gain_db is not None and b.peak_gain_db - b.gain_db > 1.0:
        t.add_row("note", f"f_ref is on a slope: the gain peaks {b.peak_gain_db - b.gain_db:.1f} dB higher "
                          f"at {eng(b.f_peak_hz, 'Hz')}")
    if worst is not None and worst.loss_db > 0.005:
        t.add_row("worst interface", f"{worst.source} → {worst.to}: {loss(worst.loss_db)} lost")
    elif worst is not None:
        t.add_row("worst interface", "none loses more than 0.005 dB")
    if tight is not None:
        t.add_row("tightest node", f"{tight.name}: {eng(tight.headroom_v, 'V')} headroom")
    if b.signal_dbfs is not None:
        t.add_row("signal at the converter", f"{b.signal_dbfs:+.1f} dBFS".replace("-", "−"))
    for extra in b.extra_summary:
        t.add_row(*extra)
    clips = [n.name for n in b.nodes if n.clips]
    if clips:
        t.add_row("clipping", ", ".join(clips), style="bold red")
    console.print(t)


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


def _active_table(b: Budget, console, bx) -> None:
    """Operating points of the stages that draw power: what each one costs."""
    from rich.table import Table
    rows = [s for s in b.stages if s.op.get("power_w") is not None]
    if not rows:
        return
    t = Table(title="Active stages (operating point)", box=bx, title_justify="left")
    for col in ("stage", "bias current", "DC shift", "gm", "power"):
        t.add_column(col, justify="left" if col == "stage" else "right")
    dc = {n.name: n.dc_v for n in b.nodes}
    parents = {st.name: st.parent for st in b.chain.stages}
    for s in rows:
        i = s.op.get("id_a", s.op.get("ic_a"))
        shift = dc[s.name] - dc[parents[s.name]] if s.name in dc else None
        t.add_row(s.name, eng(i, "A"), eng(shift, "V"), eng(s.op.get("gm_s"), "S"), eng(s.op["power_w"], "W"))
    console.print(t)


def _lim(v):
    return "—" if not math.isfinite(v) else eng(v, "V")
