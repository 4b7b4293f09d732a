"""Temperature sweep: the nominal chain at a list of temperatures, in one engine
call (the temperatures are the sample axis), and how each budget figure moves
from cold to hot.

Everything the models make temperature-dependent moves together: the device
laws (BJT IS(T) and β(T), MOSFET KP(T) and VTO(T)), every field with a
temperature coefficient (``10k ±1% 50ppm/K``), kT in every noise source.
The drift of a figure is the average over the range, (value at the hottest −
value at the coldest)/(ΔT) — the "box" reading of a data sheet's drift
(common practice); a figure that is not monotonic shows it in its columns.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..engine.budget import evaluate, nominal_params
from ..spec.model import Chain


@dataclass
class SweepRow:
    key: str            # e.g. 'gain_db', 'dc_v.follower'
    label: str          # words for tables
    unit: str           # display unit ('dB', 'V', 'Hz', 'bits')
    values: np.ndarray  # (T,)


@dataclass
class Sweep:
    chain: Chain
    temps_k: np.ndarray     # (T,) ascending
    valid: np.ndarray       # (T,) the operating point holds
    rows: list              # SweepRow

    def drift(self, row: SweepRow) -> float:
        """(value at the hottest − at the coldest)/ΔT, per kelvin (nan where either is missing)."""
        t, v = self.temps_k, row.values
        if t.size < 2 or not (np.isfinite(v[0]) and np.isfinite(v[-1])):
            return float("nan")
        dv = v[-1] - v[0]
        if abs(dv) <= 1e-9 * max(abs(v[0]), abs(v[-1])):
            dv = 0.0                        # floating-point residue, not a drift
        return float(dv / (t[-1] - t[0]))


def default_temperatures(chain: Chain) -> list:
    """The corners' temperature range and the chain's own temperature, else 0 °C, the chain's, 50 °C."""
    c = chain.extra.get("corners")
    lo, hi = (c.temp_k if c is not None and c.temp_k is not None else (273.15, 323.15))
    return sorted({lo, chain.temp_k, hi})


def sweep(chain: Chain, temps_k) -> Sweep:
    """The chain at each temperature (parts at nominal, supplies nominal)."""
    temps = np.sort(np.asarray(temps_k, dtype=float))
    col = temps[:, None]
    params = nominal_params(chain)
    for p in params.values():
        p["temp_k"] = col
    ev = evaluate(chain, params)
    n = temps.size
    per = lambda x: np.broadcast_to(np.ravel(np.asarray(x, dtype=float)), (n,)).copy()  # noqa: E731
    rows = [SweepRow("gain_db", "gain at f_ref", chain.gain_db_unit, per(20 * np.log10(np.abs(ev.gain()[:, 0]))))]
    f_lo, f_hi = ev.band_edges()
    rows += [SweepRow("f_low_hz", "lower −3 dB edge", "Hz", per(f_lo)),
             SweepRow("f_high_hz", "upper −3 dB edge", "Hz", per(f_hi))]
    for node in chain.nodes:
        rows.append(SweepRow(f"dc_v.{node}", f"DC level {node}", "V", per(ev.dc.node_v[node])))
    for node in chain.nodes:
        rows.append(SweepRow(f"headroom_v.{node}", f"headroom {node}", "V", per(ev.headroom(node))))
    from .montecarlo import has_noise
    if has_noise():
        from ..engine.noise import analyse_noise
        nr = analyse_noise(ev)
        rows += [SweepRow("noise_out_vrms", "output noise (rms)", "V", per(nr.out_vrms)),
                 SweepRow("noise_in_vrms", "input-referred noise (rms)", ev.signal_unit, per(nr.in_vrms)),
                 SweepRow("snr_db", "SNR", "dB", per(nr.snr_db))]
    rows = [r for r in rows if np.isfinite(r.values).any()]
    return Sweep(chain, temps, per(ev.valid).astype(bool), rows)
