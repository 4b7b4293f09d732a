"""Stability of every feedback stage and follower, as connected: loop gain,
crossover, phase margin, closed-loop peaking, and the classic fixes with values.

* Op-amp stages: the loop gain ``T(jω) = A·β/(1 + Ro·(YL + gfb))`` (stages/opamp.py,
  ``loop_gain``) with the real load YL at the output (node_y of the cascade: the
  next stages, a cable, the ADC) and the driving source's impedance at the input
  (row of the cascade).  Crossover: where |T| falls through 1 (the highest such
  frequency); phase margin ``PM = 180° + ∠T`` there, the phase unwrapped from DC.
  Closed-loop peaking: the maximum of ``|T/(1 + T)|`` above its low-frequency
  value — the closed-loop response normalised by the ideal one (exact for a
  follower, and for the inverting and transimpedance stages with Ro = 0), the
  quantity the textbook second-order relation between PM and peaking is about.
* Followers (source, emitter): no loop to break; the transfer from the open-circuit
  voltage of the node that drives them to their output as connected,
  ``V_out/V_th``, gives the pole (−3 dB) and any peaking (Cgs with a high source
  impedance and a capacitive load: the follower's inductive-looking output).

Everything is vectorised over samples on one logarithmic grid (``loop_grid``,
one extra AC pass of the cascade).  The crossover is interpolated in log f
between grid points (log|T| and the unwrapped phase linear), the peak refined by
a parabola through the three grid points around it (dB against log f).
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

import numpy as np

from .cascade import run_ac
from ..spec.units import fmt

POINTS_PER_DECADE = 48
DEFAULT_PM_DEG = 45.0          # the target of the recommended fixes without a min_phase_margin requirement
OPAMP_KINDS = ("opamp_follower", "opamp_noninverting", "opamp_inverting", "opamp_transimpedance")
FOLLOWER_KINDS = ("source_follower", "emitter_follower")


def is_loop_stage(st) -> bool:
    return hasattr(st.model, "loop_gain")


def second_order_peaking_db(pm_deg):
    """Closed-loop peaking of the second-order loop T = ωn²/(s·(s + 2ζωn)) with phase
    margin PM: PM = atan(2ζ/√(√(1 + 4ζ⁴) − 2ζ²)), peak 1/(2ζ·√(1 − ζ²)) for ζ < 1/√2
    (0 dB above); the textbook relation (Ogata, *Modern Control Engineering*, frequency
    response chapter; Franco, stability chapter; from memory): 45° ≈ 2.4 dB, 60° ≈ 0.3 dB."""
    pm = np.radians(np.asarray(pm_deg, dtype=float))
    zeta = np.linspace(1e-4, 1.0, 20001)
    pm_of = np.arctan(2 * zeta / np.sqrt(np.sqrt(1 + 4 * zeta ** 4) - 2 * zeta ** 2))
    z = np.interp(pm, pm_of, zeta)
    with np.errstate(invalid="ignore", divide="ignore"):
        peak = np.where(z < 1 / math.sqrt(2), -20 * np.log10(2 * z * np.sqrt(np.abs(1 - z * z))), 0.0)
    return peak


@dataclass
class Fix:
    """One recommended change and what it does (nominal chain)."""

    stage: str
    what: str                 # 'c_f' or 'r_iso'
    value: float              # F or Ω
    purpose: str              # e.g. "45° (Graeme)"
    pm_deg: float             # the phase margin with it
    peaking_db: float
    effect: str               # what it does to the budget, in words

    def describe(self) -> str:
        unit = "F" if self.what == "c_f" else "Ω"
        name = "c_f" if self.what == "c_f" else "isolation resistor"
        return (f"{name} {fmt(self.value, unit)} ({self.purpose}): PM {self.pm_deg:.0f}°, "
                f"peaking {self.peaking_db:.1f} dB; {self.effect}")


@dataclass
class LoopResult:
    stage: str
    kind: str
    f_hz: np.ndarray                  # (F,) the loop grid
    t: np.ndarray | None              # (S, F) loop gain (op-amp stages), None for followers
    response: np.ndarray              # (S, F) T/(1 + T), or a follower's V_out/V_th
    f_cross_hz: np.ndarray            # (S,) nan: no crossover (|T| < 1 everywhere) or beyond the grid
    pm_deg: np.ndarray                # (S,) inf: |T| < 1 everywhere; nan: crossover beyond the grid
    peaking_db: np.ndarray            # (S,) ≥ 0
    f_peak_hz: np.ndarray             # (S,) nan without peaking
    f_3db_hz: np.ndarray              # (S,) followers: the −3 dB pole; op-amps: closed-loop −3 dB
    notes: list = field(default_factory=list)
    fixes: list = field(default_factory=list)

    @property
    def is_loop(self) -> bool:
        return self.t is not None


def loop_grid(chain, params) -> np.ndarray:
    """A log grid wide enough to hold every op-amp's crossover: from below the smallest
    GBW/10⁷ (a noise gain up to 10⁷) or f_start to 10× the largest GBW or f_stop."""
    a = chain.analysis
    lo, hi = a.f_start_hz, a.f_stop_hz
    for st in chain.stages:
        if is_loop_stage(st):
            g = np.asarray(params[st.name]["gbw"], dtype=float)
            lo, hi = min(lo, float(g.min()) * 1e-7), max(hi, 10 * float(g.max()))
    lo = max(lo, 1e-3)
    n = int(math.ceil(math.log10(hi / lo) * POINTS_PER_DECADE)) + 1
    return np.geomspace(lo, hi, n)


def loop_ac(ev, f_hz=None):
    """The cascade on the loop grid, reusing the evaluation's operating points."""
    f_hz = loop_grid(ev.chain, ev.params) if f_hz is None else f_hz
    with np.errstate(divide="ignore", invalid="ignore"):
        return run_ac(ev.chain, ev.params, ev.dc.ops, f_hz)


def stage_loop_gain(ev, ac, st, params=None):
    """T(jω) of one op-amp stage as connected, (S, F)."""
    p = ev.params[st.name] if params is None else params
    s = (2j * np.pi * ac.f_hz)[None, :]
    return st.model.loop_gain(p, s, ac.branch_row[st.name], ac.node_y[st.name]) + 0.0 * s


def crossover(f_hz, t):
    """(f_c, PM°) per sample: |T| falling through 1 (the highest such crossing), the
    phase unwrapped from the lowest frequency; PM = inf where |T| < 1 everywhere and
    nan where |T| ≥ 1 still at the top of the grid."""
    t = np.atleast_2d(t)
    with np.errstate(divide="ignore", invalid="ignore"):
        lmag = np.log10(np.abs(t))
    ph = np.degrees(np.unwrap(np.angle(t), axis=1))
    ph = ph - 360.0 * np.round(ph[:, :1] / 360.0)        # T(0) > 0: the phase starts near 0°
    above = lmag >= 0
    cross = above[:, :-1] & ~above[:, 1:]
    n = t.shape[1]
    k = n - 2 - np.argmax(cross[:, ::-1], axis=1)
    rows = np.arange(t.shape[0])
    y0, y1 = lmag[rows, k], lmag[rows, k + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.clip(y0 / (y0 - y1), 0.0, 1.0)
    lf = np.log10(f_hz)
    fc = 10 ** (lf[k] + w * (lf[k + 1] - lf[k]))
    pc = ph[rows, k] + w * (ph[rows, k + 1] - ph[rows, k])
    has = cross.any(axis=1)
    pm = np.where(has, 180.0 + pc, np.where(above[:, -1], np.nan, np.inf))
    return np.where(has, fc, np.nan), pm


def peak_of(f_hz, h):
    """(peaking dB above the lowest-frequency value, f of the peak), refined by a parabola
    in (log f, dB) through the grid maximum and its neighbours; 0 dB / nan without a peak."""
    with np.errstate(divide="ignore"):
        db = 20 * np.log10(np.abs(np.atleast_2d(h)))
    rows = np.arange(db.shape[0])
    k = np.clip(np.argmax(db, axis=1), 1, db.shape[1] - 2)
    ym, y0, yp = db[rows, k - 1], db[rows, k], db[rows, k + 1]
    den = ym - 2 * y0 + yp
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.where(den < 0, 0.5 * (ym - yp) / den, 0.0)
    off = np.clip(off, -1.0, 1.0)
    top = y0 - 0.25 * (ym - yp) * off
    top = np.maximum(top, db.max(axis=1))
    lf = np.log10(f_hz)
    dlf = lf[1] - lf[0]
    peaking = top - db[:, 0]
    f_pk = 10 ** (lf[k] + off * dlf)
    has = peaking > 0.01
    return np.where(has, np.maximum(peaking, 0.0), 0.0), np.where(has, f_pk, np.nan)


def f_minus3db(f_hz, h):
    """The first frequency above which |h| stays 3 dB under its lowest-frequency value (nan: never)."""
    mag = np.abs(np.atleast_2d(h))
    below = mag < mag[:, :1] / math.sqrt(2)
    k = np.argmax(below, axis=1)
    has = below.any(axis=1) & (k > 0)
    k = np.maximum(k, 1)
    rows = np.arange(mag.shape[0])
    lf = np.log10(f_hz)
    with np.errstate(divide="ignore", invalid="ignore"):
        y0, y1 = np.log10(mag[rows, k - 1]), np.log10(mag[rows, k])
        tgt = np.log10(mag[:, 0] / math.sqrt(2))
        w = np.clip((tgt - y0) / (y1 - y0), 0, 1)
    return np.where(has, 10 ** (lf[k - 1] + w * (lf[k] - lf[k - 1])), np.nan)


def analyse_loops(ev, ac=None, fixes: bool = False, target_pm_deg: float | None = None) -> list[LoopResult]:
    """Every op-amp stage's loop and every follower's pole/peaking, vectorised over samples.
    ``fixes``: add the recommended fixes (nominal chains)."""
    chain = ev.chain
    stages = [st for st in chain.stages if is_loop_stage(st) or st.kind in FOLLOWER_KINDS]
    if not stages:
        return []
    ac = loop_ac(ev) if ac is None else ac
    f = ac.f_hz
    out = []
    for st in stages:
        if is_loop_stage(st):
            t = stage_loop_gain(ev, ac, st)
            with np.errstate(divide="ignore", invalid="ignore"):
                resp = t / (1.0 + t)
            fc, pm = crossover(f, t)
            notes = []
            p = ev.params[st.name]
            if np.all(np.isinf(np.asarray(p.get("f_p2", np.inf)))):
                notes.append("single-pole op-amp (no f_p2 given): the bare op-amp's own phase lag above "
                             "crossover is not modelled, so this phase margin is an upper bound")
            if np.any(np.isnan(pm)):
                notes.append("|T| is still above 1 at the top of the loop grid: the crossover lies beyond it")
        else:
            t = None
            a_in = ac.branch_row[st.name][0]
            with np.errstate(divide="ignore", invalid="ignore"):
                resp = ac.node_h[st.name] * a_in          # V_out / V_th of the driving node
            fc = pm = np.full(resp.shape[0], np.nan)
            notes = []
        pk, fpk = peak_of(f, resp)
        res = LoopResult(st.name, st.kind, f, t, resp, fc, pm, pk, fpk, f_minus3db(f, resp), notes)
        out.append(res)
    if fixes:
        target = DEFAULT_PM_DEG if target_pm_deg is None else target_pm_deg
        for res in out:
            if res.is_loop and np.ravel(res.pm_deg)[0] < target:
                res.fixes = recommend(ev, ac, chain.stage(res.stage), res, target)
    return out


# -- the classic fixes ------------------------------------------------------------

def _pm_with(ev, ac, st, params=None, y_load=None):
    p = ev.params[st.name] if params is None else params
    s = (2j * np.pi * ac.f_hz)[None, :]
    yl = ac.node_y[st.name][:1] if y_load is None else y_load
    row = tuple(np.asarray(x)[:1] for x in ac.branch_row[st.name])
    t = st.model.loop_gain(_first(p), s, row, yl) + 0.0 * s
    fc, pm = crossover(ac.f_hz, t)
    pk, _ = peak_of(ac.f_hz, t / (1 + t))
    return pm, pk


def _first(p):
    return {k: (np.ravel(v)[:1].reshape(1, 1) if np.ndim(v) >= 1 else v) for k, v in p.items()}


def recommend(ev, ac, st, res: LoopResult, target: float) -> list[Fix]:
    """Fixes with values for a stage short of ``target`` degrees (nominal, sample 0):

    * a capacitive load: the smallest isolation resistor between the output and the
      load (feedback taken at the op-amp pin) that brings the PM to the target
      (searched on a log grid of resistances), with the load's pole it adds and the
      loss it costs at f_ref (common practice; Franco, stability chapter, from memory);
    * capacitance at the − input of a transimpedance stage: Graeme's feedback capacitor
      for 45°, CF = (1 + √(1 + 8π·RF·Ci·GBW))/(4π·RF·GBW) (the noise-gain pole placed
      where the noise gain meets A), and for a maximally flat (Butterworth) response,
      CF = √(2·Ci/(RF·ωc) − 1/(RF·ωc)²), ωc = 2π·GBW, Ci the total capacitance at the
      − input (Graeme, *Photodiode Amplifiers: Op Amp Solutions*, ch. 2, from memory);
    * capacitance at the − input of a voltage-gain stage: CF = Ci/(RF·G) across RF, G
      the conductance from the − node to ground, which makes the noise gain flat
      (pole–zero cancellation; Franco, stability chapter, from memory).
    """
    chain = ev.chain
    fixes = []
    p = _first(ev.params[st.name])
    k = int(np.nanargmin(np.abs(np.log(ac.f_hz / np.ravel(res.f_cross_hz)[0])))) if np.isfinite(
        np.ravel(res.f_cross_hz)[0]) else len(ac.f_hz) // 2
    fc = ac.f_hz[k]
    s_c = 2j * np.pi * fc
    yl = ac.node_y[st.name][:1]
    f_ref = chain.analysis.f_ref_hz
    # capacitive load: an isolation resistor
    if np.imag(yl[0, k]) > 0:
        r = np.geomspace(0.1, 1e5, 121)[:, None]
        y_iso = yl / (1.0 + r * yl)
        pm, pk = _pm_with(ev, ac, st, y_load=y_iso)
        ok = np.nonzero(pm >= target)[0]
        if ok.size:
            i = ok[0]
            ri = float(r[i, 0])
            y_ref = _y_at(ev, st.name, f_ref)
            loss = 20 * math.log10(abs(1.0 / (1.0 + ri * y_ref)))
            pole = f_minus3db(ac.f_hz, 1.0 / (1.0 + ri * yl))[0]
            c_eff = float(np.imag(yl[0, k]) / (2 * np.pi * fc))
            fixes.append(Fix(st.name, "r_iso", ri, f"{target:.0f}°", float(pm[i]), float(pk[i]),
                             f"the load (≈ {fmt(c_eff, 'F')} at crossover) then sees a pole at "
                             f"{fmt(pole, 'Hz')} and {loss:+.3f} dB at f_ref".replace("-", "−")))
    # capacitance at the − input
    zf, y = st.model.loop_network(p, np.array([[s_c]]), tuple(np.asarray(x)[:1, k:k + 1]
                                                             for x in ac.branch_row[st.name]))
    ci = float(np.imag(np.ravel(y)[0]) / (2 * np.pi * fc))
    if "r_f" in p and ci > 0 and st.kind != "opamp_follower":
        rf = float(np.ravel(p["r_f"])[0])
        if rf > 0:
            gbw = float(np.ravel(p["gbw"])[0])
            wc = 2 * np.pi * gbw
            cands = []
            if st.kind == "opamp_transimpedance":
                cands.append(((1 + math.sqrt(1 + 8 * math.pi * rf * ci * gbw)) / (4 * math.pi * rf * gbw),
                              "45°, Graeme"))
                flat = 2 * ci / (rf * wc) - 1 / (rf * wc) ** 2
                if flat > 0:
                    cands.append((math.sqrt(flat), "flat response, Graeme"))
            else:
                y0 = st.model.loop_network(p, np.array([[0.0]]), tuple(np.asarray(x)[:1, :1]
                                                                        for x in ac.branch_row[st.name]))[1]
                g = float(np.real(np.ravel(y0)[0]))
                if g > 0:
                    cands.append((ci / (rf * g), "flat noise gain, CF = Ci/(RF·G)"))
            for cf, why in cands:
                q = {**p, "c_f": np.array([[cf]])}
                pm, pk = _pm_with(ev, ac, st, params=q)
                fixes.append(Fix(st.name, "c_f", cf, why, float(pm[0]), float(pk[0]),
                                 _cf_effect(ev, st, cf)))
    return fixes


def _y_at(ev, node, f_hz):
    ac = run_ac(ev.chain, {k: _first(v) for k, v in ev.params.items()}, ev.dc.ops, np.array([f_hz]))
    return complex(ac.node_y[node][0, 0])


def _cf_effect(ev, st, cf) -> str:
    """The upper band edge and the gain at f_ref of the chain with c_f changed."""
    from .budget import evaluate
    chain = ev.chain
    new = dataclasses.replace(st, params={**st.params, "c_f": cf})
    ch = dataclasses.replace(chain, stages=[new if s.name == st.name else s for s in chain.stages])
    with np.errstate(divide="ignore", invalid="ignore"):
        ev2 = evaluate(ch)
        ev1 = evaluate(chain)
    hi1, hi2 = float(ev1.band_edges()[1][0]), float(ev2.band_edges()[1][0])
    dg = 20 * math.log10(abs(ev2.gain()[0, 0]) / abs(ev1.gain()[0, 0]))
    edge = (f"upper band edge {fmt(hi2, 'Hz')} (now {fmt(hi1, 'Hz')})" if np.isfinite(hi1) and np.isfinite(hi2)
            else "upper band edge beyond the span")
    return f"{edge}, gain at f_ref {dg:+.2f} dB".replace("-", "−")
