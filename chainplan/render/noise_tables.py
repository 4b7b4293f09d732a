"""Terminal tables of a noise analysis: density at chosen frequencies, the
contributors ranked by share of the output noise power, and the converter budget."""
from __future__ import annotations

import math

import numpy as np

from .console import eng, table_box
from .tables import chain_heading


def _db(x: float) -> str:
    return "—" if not math.isfinite(x) else f"{x:.1f} dB".replace("-", "−")


def noise_tables(chain, r, freqs, dens, gain, gens, console) -> None:
    """``r`` a NoiseResult; ``dens``/``gain`` (S, K) and ``gens`` from noise.density_at at ``freqs``."""
    from rich.table import Table
    from rich.text import Text
    bx = table_box(console)
    first = lambda x: float(np.ravel(x)[0])  # noqa: E731
    chain_heading(chain, console)
    lo, hi = r.band_hz
    console.print(f"noise at '{r.output}'" + (f", converter '{r.converter}'" if r.converter else "") +
                  f"; integrated over {eng(lo, 'Hz')} … {eng(hi, 'Hz')} at {eng(chain.temp_k, 'K')}")

    unit = chain.source.model.signal_unit      # input referral: to the sensor's EMF (V) or current (A)
    t = Table(title="Output noise density", box=bx, title_justify="left")
    for col in ("frequency", "at the output", "referred to the input", "largest contributor there"):
        t.add_column(col, justify="left" if col.startswith("largest") else "right")
    for i, f in enumerate(freqs):
        tot = dens[0, i] ** 2
        name, psd = max(gens, key=lambda g: g[1][0, i]) if gens else ("—", np.zeros((1, i + 1)))
        where = f"{name} ({100 * psd[0, i] / tot:.0f} %)" if tot > 0 else "—"
        g = gain[0, i]
        t.add_row(eng(f, "Hz"), eng(dens[0, i], "V/√Hz"), eng(dens[0, i] / g, f"{unit}/√Hz") if g > 0 else "—",
                  where)
    console.print(t)

    t = Table(title="Contributors (share of the output noise power)", box=bx, title_justify="left")
    for col in ("contributor", "rms at the output", "share", "cumulative"):
        t.add_column(col, justify="left" if col == "contributor" else "right")
    cum = 0.0
    for name in r.ranked:
        share = first(r.shares[name])
        cum += share
        t.add_row(name, eng(first(r.vrms[name]), "V"), f"{100 * share:.1f} %", f"{100 * cum:.1f} %")
    console.print(t)

    t = Table(title="Converter budget", box=bx, title_justify="left", show_header=False)
    t.add_column("what")
    t.add_column("value", justify="right")
    t.add_row("noise at the output (rms)", eng(first(r.out_vrms), "V"))
    t.add_row(f"referred to the input (÷ gain at {eng(chain.analysis.f_ref_hz, 'Hz')})", eng(first(r.in_vrms), unit))
    t.add_row("SNR of the signal", _db(first(r.snr_db)))
    t.add_row("dynamic range (largest sine the output carries)", _db(first(r.dynamic_range_db)))
    if r.converter:
        t.add_row("SNR of a full-scale sine", _db(first(r.snr_fs_db)))
        t.add_row("ENOB", f"{first(r.enob_bits):.2f} bits")
    console.print(t)
    for line in r.notes:
        console.print(f"note: {line}")
    if r.neglected:
        console.print("note: noise of " + ", ".join(f"'{n}'" for n in r.neglected) +
                      " (side branches beyond their first stage) is not carried to the output")
