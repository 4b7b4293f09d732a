"""Terminal tables of the power budget: every current drawn from a rail, the
totals per rail, the power and the battery life."""
from __future__ import annotations

import math

from .console import eng, table_box
from .tables import chain_heading


def life_text(seconds) -> str:
    """Battery life in hours, or days beyond two days."""
    if seconds is None:
        return "—"
    if math.isinf(seconds):
        return "∞"
    h = seconds / 3600.0
    return f"{h:.3g} h" if h < 48 else f"{h / 24:.3g} days ({h:.0f} h)"


def power_tables(r, chain, console) -> None:
    from rich.table import Table
    bx = table_box(console)
    chain_heading(chain, console)
    t = Table(title="Currents drawn from the rails (DC operating point)", box=bx, title_justify="left")
    for col in ("stage", "rail", "what", "current"):
        t.add_column(col, justify="right" if col == "current" else "left")
    shown = [d for d in r.draws if d.rail != "ground" and abs(float(d.current_a[0])) > 1e-15]
    for d in shown:
        t.add_row(d.stage, d.rail, d.what + ("" if d.quiescent else " †"), eng(d.current_a[0], "A"))
    console.print(t)
    if any(not d.quiescent for d in shown):
        console.print("† set by the DC levels of what the stage drives, not by its data sheet")
    t = Table(title="Per rail (drawn: out of a positive rail, into a negative one)", box=bx, title_justify="left")
    for col in ("rail", "voltage", "current drawn", "power"):
        t.add_column(col, justify="left" if col == "rail" else "right")
    for rail, (v, i) in r.rails.items():
        t.add_row(rail, eng(v[0], "V"), eng(i[0], "A"), eng(abs(v[0] * i[0]), "W"))
    t.add_row("total", "", "", eng(r.power_w[0], "W") if math.isfinite(r.power_w[0]) else "not known (no rail)")
    console.print(t)
    if r.battery_c is not None:
        console.print(f"battery {eng(r.battery_c / 3600.0, 'A')}h feeding {', '.join(r.battery_rails)}: "
                      f"{eng(r.battery_current_a, 'A')} → {life_text(r.battery_life_s)} "
                      "(linear regulation: the battery delivers the rails' current)")
    for line in r.notes:
        console.print(f"note: {line}")
