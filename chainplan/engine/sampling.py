"""Converter driver and sampling: the kickback of a SAR-type converter's sampling
capacitor and whether the driver and filter settle it in the acquisition time.

At the start of acquisition the sampling capacitor Cs (reset every cycle, or
holding the previous sample) is switched onto the node that drives the
converter, whose filter capacitor Cf shares charge with it:

    ΔV ≈ V_step·Cs/(Cs + Cf)          V_step = FS (reset) or the signal's change
                                       between two samples (track)
    τ  = (Cs + Cf)/G                   G = Re Y_th, the driving side's conductance
    t(½ LSB) = τ·ln(2^(N+1)·ΔV/FS)    single pole: the error decays as ΔV·e^(−t/τ)
    settled bits = log2(FS/e(t_acq)) − 1   (N when the error is ½ LSB)
    R_avg = 1/(f_sample·Cs)            the averaged input resistance of a converter
                                       that resets its capacitor every cycle

Cf and G come from the cascade: the admittance of the driving side at the
converter's node, ``Y_th = a/b`` of its row (driver's closed-loop output
impedance, the filter, any sibling loads): G = Re Y_th at the frequency of the
settling, 1/(2π·t_acq), and Cf = Im Y_th/ω a thousand times higher, where only
the capacitance right at the node is left (what the charge sharing sees).  The filter capacitor recommended is
at least 20·Cs (common practice), so the kickback is under 5 % of the step.
Sources, from memory: the SAR-converter input sections of the *Data Conversion
Handbook* (W. Kester, ed., Analog Devices, 2005) and of the converter makers'
SAR-driver application notes (charge kickback, the RC filter between driver and
converter, settling to ½ LSB).  Vectorised over samples.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .cascade import run_ac

CF_OVER_CS = 20.0       # recommended filter capacitor: ≥ 20·Cs (common practice)


@dataclass
class SamplingResult:
    adc: str
    node: str
    bits: int
    fs_v: np.ndarray          # (S,) full-scale range
    c_sample_f: np.ndarray
    c_filter_f: np.ndarray
    g_drive_s: np.ndarray     # conductance of the driving side
    t_acq_s: np.ndarray
    step_v: np.ndarray        # the voltage step across Cs at the start of acquisition
    kickback_v: np.ndarray    # ΔV
    tau_s: np.ndarray
    t_settle_s: np.ndarray    # to ½ LSB
    settled_bits: np.ndarray
    r_avg_ohm: np.ndarray     # 1/(f_sample·Cs), inf for a tracking input
    mode: str
    f_sample_hz: float | None

    @property
    def margin_s(self) -> np.ndarray:
        return self.t_acq_s - self.t_settle_s

    @property
    def error_lsb(self) -> np.ndarray:
        """The settling error at the end of acquisition in LSB."""
        return self.kickback_v * np.exp(-self.t_acq_s / self.tau_s) / (self.fs_v / 2.0 ** self.bits)

    def recommended(self):
        """(Cf ≥ 20·Cs, the largest filter resistance that settles to ½ LSB with it in t_acq)."""
        cs = self.c_sample_f
        cf = CF_OVER_CS * cs
        ln = np.log(2.0 ** (self.bits + 1) * cs / (cs + cf))
        return cf, self.t_acq_s / ((cs + cf) * np.maximum(ln, 1e-12))


def sampling_adc(chain):
    """The ADC reading the output node with a sampling capacitor declared (or None)."""
    out = chain.output_node()
    return next((s for s in chain.readers(out) if s.kind == "adc" and np.any(s.params.get("c_sample", 0) > 0)),
                None)


def acquisition_time(p):
    """t_acq as given, or 1/f_sample − t_conv."""
    if p.get("t_acq") is not None:
        return p["t_acq"]
    if p.get("t_conv") is not None and p.get("f_sample") is not None:
        return 1.0 / p["f_sample"] - p["t_conv"]
    return None


def analyse_sampling(ev) -> SamplingResult | None:
    chain = ev.chain
    adc = sampling_adc(chain)
    if adc is None:
        return None
    p = ev.params[adc.name]
    t_acq = acquisition_time(p)
    if t_acq is None:
        return None
    n = ev.samples
    per = lambda x: np.broadcast_to(np.ravel(np.asarray(x, dtype=float)), (n,)).astype(float)  # noqa: E731
    t_acq = per(t_acq)
    f_k = 1.0 / (2 * np.pi * float(np.median(t_acq)))
    f_inst = 1e3 * f_k                  # the charge sharing itself: only the capacitance at the node counts
    with np.errstate(divide="ignore", invalid="ignore"):
        ac = run_ac(chain, ev.params, ev.dc.ops, np.array([f_k, f_inst]))
        a, b = ac.branch_row[adc.name]
        y_th = a / b
    cf = per(np.maximum(np.imag(y_th[:, 1]) / (2 * np.pi * f_inst), 0.0))
    g = per(np.real(y_th[:, 0]))
    cs = per(p["c_sample"])
    fs = per(np.abs(p["fs_high"] - p["fs_low"]))
    bits = int(np.ravel(p["bits"])[0])
    mode = p.get("sampling", "reset")
    fsamp = p.get("f_sample")
    if mode == "reset":
        step = fs
    else:                                           # the signal's change between two samples, at most FS
        from .slew import signal_band
        fb = signal_band(chain)
        with np.errstate(divide="ignore", invalid="ignore"):
            acb = run_ac(chain, ev.params, ev.dc.ops, fb)
        amp = np.ravel(np.asarray(ev.params[chain.source.name]["amplitude"], dtype=float))[:, None]
        slope = per(np.max(2 * np.pi * fb[None, :] * np.abs(acb.node_h[adc.parent]) * amp, axis=1))
        step = np.minimum(fs, slope * (1.0 / fsamp if fsamp else t_acq))
    dv = step * cs / (cs + cf)
    with np.errstate(divide="ignore", invalid="ignore"):
        tau = (cs + cf) / g
        t_set = tau * np.maximum(np.log(2.0 ** (bits + 1) * dv / fs), 0.0)
        err = dv * np.exp(-t_acq / tau)
        bits_ok = np.log2(fs / err) - 1.0
        r_avg = per(1.0 / (fsamp * cs)) if (mode == "reset" and fsamp) else np.full(n, np.inf)
    return SamplingResult(adc.name, adc.parent, bits, fs, cs, cf, g, t_acq, step, dv, tau, t_set, bits_ok,
                          r_avg, mode, float(np.ravel(fsamp)[0]) if fsamp else None)


def summary_rows(r: SamplingResult) -> list:
    from ..spec.units import fmt
    i = 0
    cf_rec, r_max = r.recommended()
    rows = [(f"kickback {r.adc}", f"ΔV {fmt(float(r.kickback_v[i]), 'V')} (Cs {fmt(float(r.c_sample_f[i]), 'F')} "
                                  f"onto {fmt(float(r.c_filter_f[i]), 'F')}), τ {fmt(float(r.tau_s[i]), 's')}"),
            (f"settling {r.adc}", f"½ LSB after {fmt(float(r.t_settle_s[i]), 's')} of "
                                  f"{fmt(float(r.t_acq_s[i]), 's')} acquisition: "
                                  f"{min(float(r.settled_bits[i]), 99):.1f} settled bits of {r.bits}"
                                  + ("" if r.margin_s[i] >= 0 else " — DOES NOT SETTLE"))]
    if np.isfinite(r.r_avg_ohm[i]):
        rows.append((f"  input {r.adc}", f"averaged input resistance 1/(fs·Cs) = {fmt(float(r.r_avg_ohm[i]), 'Ω')}"))
    if r.c_filter_f[i] < CF_OVER_CS * r.c_sample_f[i]:
        rows.append((f"  fix {r.adc}", f"filter capacitor ≥ 20·Cs = {fmt(float(cf_rec[i]), 'F')} (common practice), "
                                       f"with at most {fmt(float(r_max[i]), 'Ω')} in series to settle in t_acq"))
    return rows


def result_json(r: SamplingResult) -> dict:
    f = lambda x: (None if not math.isfinite(float(x[0])) else float(x[0]))  # noqa: E731
    cf_rec, r_max = r.recommended()
    return {"adc": r.adc, "mode": r.mode, "c_sample_f": f(r.c_sample_f), "c_filter_f": f(r.c_filter_f),
            "t_acq_s": f(r.t_acq_s), "kickback_v": f(r.kickback_v), "tau_s": f(r.tau_s),
            "t_settle_s": f(r.t_settle_s), "settled_bits": f(r.settled_bits), "margin_s": f(r.margin_s),
            "r_avg_ohm": f(r.r_avg_ohm), "recommended_c_filter_f": f(cf_rec), "max_filter_r_ohm": f(r_max)}


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: kickback and settling rows in the summary, ``sampling`` in JSON."""
    r = analyse_sampling(b.ev)
    if r is None:
        return
    b.extra_summary.extend(summary_rows(r))
    b.extra_json["sampling"] = result_json(r)
