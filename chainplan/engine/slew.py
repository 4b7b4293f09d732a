"""Slew rate and full-power bandwidth at every op-amp output and class-A follower.

The signal is the spec's sine, amplitude at the sensor, at every frequency of the
signal band (``analysis.noise_band`` where declared, else f_ref alone); its
steepest slope at a node is ``max over the band of 2π·f·|H(f)|·amplitude``.

* Op-amp: the slew rate is data (``slew_rate``); the full-power bandwidth for the
  node's signal peak is ``SR/(2π·Vpeak)`` (the highest frequency a sine of that
  peak can have without slewing; Franco, *Design with Operational Amplifiers*,
  dynamic limitations, from memory).
* Class-A follower (a source or emitter follower with a bias sink or resistor to
  v_low): it pulls its output up through the device but down only with the sink's
  current, so the falling slew is ``I_bias/C_L`` with C_L the capacitance of the
  load at the band's top (``Im Y_load/ω``; common practice, from memory).

``margin_db = 20·log10(slew limit / steepest signal slope)``: below 0 dB the
stage slews (the signal distorts).  Vectorised over samples.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .cascade import run_ac

FOLLOWERS = ("source_follower", "emitter_follower")


@dataclass
class SlewRow:
    stage: str
    kind: str
    limit_v_per_s: np.ndarray      # (S,) slew limit (inf: none given)
    slope_v_per_s: np.ndarray      # (S,) steepest signal slope at the output
    peak_v: np.ndarray             # (S,) largest signal peak over the band
    f_full_power_hz: np.ndarray    # (S,) SR/(2π·Vpeak)
    c_load_f: np.ndarray | None    # (S,) followers: the load capacitance

    @property
    def margin_db(self) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return 20 * np.log10(self.limit_v_per_s / self.slope_v_per_s)


def signal_band(chain) -> np.ndarray:
    """The frequencies the signal occupies: a log grid over the noise band, or f_ref."""
    a = chain.analysis
    if a.noise_band_hz is None:
        return np.array([a.f_ref_hz])
    lo, hi = a.noise_band_hz
    return np.unique(np.concatenate([[a.f_ref_hz] if lo <= a.f_ref_hz <= hi else [], np.geomspace(lo, hi, 41)]))


def analyse_slew(ev) -> list[SlewRow]:
    chain = ev.chain
    stages = [st for st in chain.stages if "slew_rate" in st.params or st.kind in FOLLOWERS]
    if not stages:
        return []
    f = signal_band(chain)
    with np.errstate(divide="ignore", invalid="ignore"):
        ac = run_ac(chain, ev.params, ev.dc.ops, f)
    amp = np.ravel(np.asarray(ev.params[chain.source.name]["amplitude"], dtype=float))[:, None]
    rows = []
    for st in stages:
        h = np.abs(ac.node_h[st.name]) * amp                  # peak at each band frequency
        slope = np.max(2 * np.pi * f[None, :] * h, axis=1)
        peak = np.max(h, axis=1)
        p, op = ev.params[st.name], ev.dc.ops[st.name].values
        c_load = None
        if st.kind in FOLLOWERS:
            y = ac.node_y[st.name][:, -1]
            c_load = np.maximum(np.imag(y) / (2 * np.pi * f[-1]), 0.0)
            i_sink = np.abs(np.ravel(op.get("id_a", op.get("ic_a", 0.0))))
            with np.errstate(divide="ignore"):
                limit = i_sink / c_load
        else:
            limit = np.ravel(np.asarray(p["slew_rate"], dtype=float))
        n = ev.samples
        limit = np.broadcast_to(limit, (n,)).astype(float)
        with np.errstate(divide="ignore", invalid="ignore"):
            fpb = limit / (2 * np.pi * np.broadcast_to(peak, (n,)))
        rows.append(SlewRow(st.name, st.kind, limit, np.broadcast_to(slope, (n,)), np.broadcast_to(peak, (n,)),
                            fpb, None if c_load is None else np.broadcast_to(c_load, (n,))))
    return rows


def summary_rows(rows) -> list:
    from ..spec.units import fmt
    out = []
    for r in rows:
        lim = float(r.limit_v_per_s[0])
        if not np.isfinite(lim):
            continue
        m = float(r.margin_db[0])
        what = (f"falling slew I/C_L = {fmt(lim, 'V/µs')} into {fmt(float(r.c_load_f[0]), 'F')}"
                if r.c_load_f is not None else f"slew rate {fmt(lim, 'V/µs')}, full power to "
                f"{fmt(float(r.f_full_power_hz[0]), 'Hz')} at {fmt(float(r.peak_v[0]), 'V')} peak")
        verdict = "SLEWS" if m < 0 else f"{m:.1f} dB to spare".replace("-", "−")
        out.append((f"slew {r.stage}", f"{what}; signal slope {fmt(float(r.slope_v_per_s[0]), 'V/µs')}: {verdict}"))
    return out


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: slew rows in the summary, ``slew`` in JSON."""
    rows = [r for r in analyse_slew(b.ev) if np.isfinite(float(r.limit_v_per_s[0]))]
    if not rows:
        return
    b.extra_summary.extend(summary_rows(rows))
    num = lambda x: None if x is None or not np.isfinite(float(x[0])) else float(x[0])  # noqa: E731
    b.extra_json["slew"] = [{"stage": r.stage, "kind": r.kind, "slew_limit_v_per_s": num(r.limit_v_per_s),
                             "signal_slope_v_per_s": num(r.slope_v_per_s), "peak_v": num(r.peak_v),
                             "f_full_power_hz": num(r.f_full_power_hz), "c_load_f": num(r.c_load_f),
                             "margin_db": num(r.margin_db)} for r in rows]
