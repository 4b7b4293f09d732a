"""Terminal tables of a noise analysis: density at chosen frequencies, the
contributors ranked by share of the output noise power, and the converter budget."""
from __future__ import annotations

import math

import numpy as np

from ..spec.numbers import figure, figures, temperature
from .console import eng
from .layout import Col, print_table
from .tables import chain_heading


def _db(x: float) -> str:
    return "—" if not math.isfinite(x) else figure(x, "dB", signed=False, decimals=1)


def noise_tables(chain, r, freqs, dens, gain, gens, console, measurand: dict | None = None) -> None:
    """``r`` a NoiseResult; ``dens``/``gain`` (S, K) and ``gens`` from noise.density_at at ``freqs``;
    ``measurand``: the figures in sensor units (engine/measurand.py ``figures``) when the source
    declares a sensitivity."""
    from ..engine.measurand import show
    first = lambda x: float(np.ravel(x)[0])  # noqa: E731
    chain_heading(chain, console)
    lo, hi = r.band_hz
    console.print(f"noise at '{r.output}'" + (f", converter '{r.converter}'" if r.converter else "") +
                  f"; integrated over {eng(lo, 'Hz')} to {eng(hi, 'Hz')} at {temperature(chain.temp_k, chain.temp_text)}")

    unit = chain.source.model.signal_unit      # input referral: to the sensor's EMF (V) or current (A)
    where, ins = [], []
    for i, f in enumerate(freqs):
        tot = dens[0, i] ** 2
        name, psd = max(gens, key=lambda g: g[1][0, i]) if gens else ("—", np.zeros((1, i + 1)))
        where.append(f"{name} ({100 * psd[0, i] / tot:.0f} %)" if tot > 0 else "—")
        ins.append(dens[0, i] / gain[0, i] if gain[0, i] > 0 else None)
    cols = [Col("frequency", right=True), Col("at the output", right=True),
            Col("referred to the input", right=True), Col("largest contributor there", wrap=True)]
    table = [figures(freqs, "Hz"), figures([dens[0, i] for i in range(len(freqs))], "V/√Hz"),
             figures(ins, f"{unit}/√Hz"), where]
    if measurand:
        mu, s = measurand["unit"], abs(measurand["sensitivity"])
        cols.insert(3, Col("at the sensor", right=True))
        table.insert(3, [show(x / s, mu, True) if x is not None else "—" for x in ins])
    print_table(console, cols, list(zip(*table)), title="Output noise density")

    cum, shares = 0.0, []
    for name in r.ranked:
        share = first(r.shares[name])
        cum += share
        shares.append((share, cum))
    print_table(console, [Col("contributor", wrap=True), Col("rms at the output", right=True),
                          Col("share", right=True), Col("cumulative", right=True)],
                list(zip(r.ranked, figures([first(r.vrms[n]) for n in r.ranked], "V"),
                         [figure(x, "%") for x, _ in shares], [figure(c, "%") for _, c in shares])),
                title="Contributors (share of the output noise power)")

    rows = [("noise at the output (rms)", eng(first(r.out_vrms), "V")),
            ("referred to the input (√∫ S_out/|H|² df)", eng(first(r.in_vrms), unit)),
            (f"output noise ÷ gain at {eng(chain.analysis.f_ref_hz, 'Hz')}",
             eng(first(r.out_over_gain_ref_vrms), unit)),
            *([("referred to the sensor (rms)", show(measurand["noise_in_rms"], measurand["unit"])),
               ("full scale at the sensor (peak)", show(measurand["full_scale"], measurand["unit"]))]
              if measurand else []),
            ("SNR of the signal", _db(first(r.snr_db))),
            ("dynamic range (largest sine the output carries)", _db(first(r.dynamic_range_db)))]
    if r.converter:
        rows += [(f"SNR of a full-scale sine at '{r.converter}'", _db(first(r.snr_fs_db))),
                 (f"ENOB at '{r.converter}'", figure(first(r.enob_bits), "bits")
                  + (" (capped)" if first(r.enob_capped) else ""))]
        if first(r.folded_vrms) > 0:
            rows.append(("of the noise: folded from above f_sample/2", eng(first(r.folded_vrms), "V")))
    print_table(console, [Col("what", wrap=2), Col("value", right=True)], rows, title="Converter budget",
                show_header=False)
    if measurand and measurand.get("ambient"):
        from ..engine.measurand import summary_rows
        amb = [row for row in summary_rows(measurand) if row[0].startswith("noise below the ambient")]
        what = chain.extra["ambient"].what
        print_table(console, [Col("band", wrap=2), Col("margin", right=True, wrap=True)],
                    [(a[len("noise below the ambient, "):], b) for a, b in amb],
                    title="Input-referred noise below the ambient" + (f": {what}" if what else ""))
    for line in r.notes:
        console.print(f"note: {line}")
    if r.neglected:
        console.print("note: noise of " + ", ".join(f"'{n}'" for n in r.neglected) +
                      " (side branches beyond their first stage) is not carried to the output")
