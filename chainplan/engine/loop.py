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

POINTS_PER_DECADE = 48         # the fine loop grid (the fixes' searches)
COARSE_PER_DECADE = 12         # the coarse grid that brackets crossovers and peaks
REFINE_POINTS = 12             # per-sample points inside each bracket
DEFAULT_PM_DEG = 45.0          # the target of the recommended fixes without a min_phase_margin requirement
OPAMP_KINDS = ("opamp_follower", "opamp_noninverting", "opamp_inverting", "opamp_transimpedance", "charge_amplifier")
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
                f"peaks {self.peaking_db:.1f} dB; {self.effect}")


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


def loop_grid(chain, params, per_decade: int = POINTS_PER_DECADE) -> np.ndarray:
    """A log grid wide enough to hold every op-amp's crossover: from below the smallest
    GBW/10⁷ (a noise gain up to 10⁷) or f_start to 10× the largest GBW or f_stop."""
    a = chain.analysis
    lo, hi = a.f_start_hz, a.f_stop_hz
    for st in chain.stages:
        if is_loop_stage(st):
            g = np.asarray(params[st.name]["gbw"], dtype=float)
            lo, hi = min(lo, float(g.min()) * 1e-7), max(hi, 10 * float(g.max()))
    lo = max(lo, 1e-3)
    n = int(math.ceil(math.log10(hi / lo) * per_decade)) + 1
    return np.geomspace(lo, hi, n)


def loop_ac(ev, f_hz=None):
    """The cascade on the loop grid, reusing the evaluation's operating points."""
    f_hz = loop_grid(ev.chain, ev.params) if f_hz is None else f_hz
    with np.errstate(divide="ignore", invalid="ignore"):
        return run_ac(ev.chain, ev.params, ev.dc.ops, f_hz)


def stage_loop_gain(ev, ac, st, params=None, s=None):
    """T(jω) of one op-amp stage as connected, (S, F) (``s``: the AC pass's own complex
    frequencies when they are per sample)."""
    p = ev.params[st.name] if params is None else params
    s = (2j * np.pi * ac.f_hz)[None, :] if s is None else s
    return st.model.loop_gain(p, s, ac.branch_row[st.name], ac.node_y[st.name]) + 0.0 * s


def unwrapped_phase(t):
    """∠T in degrees, unwrapped along frequency and starting near 0° (T(0) > 0)."""
    ph = np.degrees(np.unwrap(np.angle(np.atleast_2d(t)), axis=1))
    return ph - 360.0 * np.round(ph[:, :1] / 360.0)


def crossover(f_hz, t, ph=None):
    """(f_c, PM°) per sample: |T| falling through 1 (the highest such crossing), the
    phase unwrapped from the lowest frequency; PM = inf where |T| < 1 everywhere and
    nan where |T| ≥ 1 still at the top of the grid."""
    t = np.atleast_2d(t)
    with np.errstate(divide="ignore", invalid="ignore"):
        lmag = np.log10(np.abs(t))
    ph = unwrapped_phase(t) if ph is None else ph
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


def _coarse_ac(ev):
    """(AcResult, {stage: T}): the evaluation's own span when it holds every loop's
    crossover (|T| above 1 at its bottom, below at its top, in every sample), else one
    pass on the loop grid."""
    span = ev.f_hz[1:]
    if span.size > 8 and np.all(np.diff(span) > 0):
        step = max(1, int(span.size / math.log10(span[-1] / span[0]) // COARSE_PER_DECADE))   # thin it out
        span = span[::step]
        ac = _columns(ev.ac, slice(1, None, step), span)
        ts, ok = {}, True
        for st in ev.chain.stages:
            if is_loop_stage(st):
                t = ts[st.name] = stage_loop_gain(ev, ac, st)
                mag = np.abs(t[:, [0, -1]])
                ok &= bool(np.all(mag[:, 1] < 1.0) and np.all(mag[:, 0] > 1.0))
        if ok:
            return ac, ts
    return loop_ac(ev, loop_grid(ev.chain, ev.params, COARSE_PER_DECADE)), {}


def _columns(ac, col, f_hz):
    """A view of an AcResult on some frequency columns (only what the loop analysis reads)."""
    from .cascade import AcResult, NodeGains
    take = lambda x: x[:, col] if np.ndim(x) == 2 else x  # noqa: E731
    rows = {k: tuple(take(np.asarray(v)) for v in r) for k, r in ac.row.items()}
    ny = {k: take(np.asarray(v)) for k, v in ac.node_y.items()}
    br = {k: tuple(take(np.asarray(v)) for v in r) for k, r in ac.branch_row.items()}
    ex = {k: take(np.asarray(v)) for k, v in ac.row_exp.items()}
    return AcResult(f_hz, NodeGains(rows, ny, ex), ny, rows, br, {}, {}, ex)


def _local_ac(ev, f_loc):
    """The cascade at per-sample frequencies f_loc (S, K), in the evaluation's workspace
    if it has one (what the loop analysis keeps is computed from it afresh)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return run_ac(ev.chain, ev.params, ev.dc.ops, None, s=2j * np.pi * f_loc, ws=ev.ws)


#: memory of one shared refinement pass (bytes): brackets beyond it go into further passes
LOCAL_PASS_BYTES = 64e6


def _shared_local_ac(ev, brackets):
    """The cascade at every bracket's per-sample frequencies: brackets side by side in
    as few passes as the memory bound allows, a bracket that repeats another exactly
    (a long chain of equal stages) computed once.  The cascade is elementwise per
    column, so a bracket's columns are what a pass on that bracket alone gives.
    Returns (passes, where): ``where[i]`` = (pass index, column slice) of bracket i."""
    n_s, k = ev.samples, brackets[0].shape[1]
    per_column = 16 * 12 * n_s * (len(ev.chain.stages) + 1)      # ~12 complex (S,) arrays per stage
    per_pass = max(1, int(LOCAL_PASS_BYTES // (per_column * k)))  # brackets per pass
    seen, unique, where = {}, [], []
    for b in brackets:
        b = np.ascontiguousarray(np.broadcast_to(b, (n_s, k)))
        key = b.tobytes()
        if key not in seen:
            seen[key] = len(unique)
            unique.append(b)
        j = seen[key]
        where.append((j // per_pass, slice((j % per_pass) * k, (j % per_pass + 1) * k)))
    passes = [_local_ac(ev, np.concatenate(unique[i:i + per_pass], axis=1))
              for i in range(0, len(unique), per_pass)]
    return passes, where


def _stage_columns(local, st, i):
    """What the loop analysis of stage ``st`` reads of the shared passes, on bracket ``i``'s columns."""
    from .cascade import AcResult, NodeGains
    passes, where = local
    j, col = where[i]
    ac = passes[j]
    take = lambda x: x[:, col] if np.ndim(x) == 2 else x  # noqa: E731
    rows = {st.name: tuple(take(v) for v in ac.row[st.name])} if st.name in ac.row else {}
    ny = {st.name: take(ac.node_y[st.name])}
    br = {st.name: tuple(take(v) for v in ac.branch_row[st.name])}
    ex = {n: take(ac.row_exp[n]) for n in (st.name, st.parent) if n in ac.row_exp}
    return AcResult(ac.f_hz[col], NodeGains(rows, ny, ex), ny, rows, br, {}, {}, ex)


def _bracket_grid(f, k_lo, k_hi, n):
    """(S, n) log grids from f[k_lo] to f[k_hi] per sample."""
    lf = np.log10(f)
    a, b = lf[k_lo], lf[k_hi]
    return 10 ** (a[:, None] + (b - a)[:, None] * np.linspace(0.0, 1.0, n)[None, :])


def _response(st, ev, ac, s=None):
    """T/(1+T) and T of an op-amp stage, or a follower's V_out/V_th (and None)."""
    if is_loop_stage(st):
        t = stage_loop_gain(ev, ac, st, s=s)
        with np.errstate(divide="ignore", invalid="ignore"):
            return t / (1.0 + t), t
    with np.errstate(divide="ignore", invalid="ignore"):
        return ac.node_h[st.name] * ac.full_branch_row(st.name, st.parent)[0], None


def analyse_loops(ev, ac=None, fixes: bool = False, target_pm_deg: float | None = None,
                  refine: bool = True) -> list[LoopResult]:
    """Every op-amp stage's loop and every follower's pole/peaking, vectorised over samples.
    A coarse grid (the evaluation's span, or the loop grid) brackets each crossover and
    peak per sample; ``refine`` then evaluates the cascade on a fine grid inside each
    bracket (per-sample frequencies, REFINE_POINTS each).  ``fixes``: add the recommended
    fixes (nominal chains)."""
    chain = ev.chain
    stages = [st for st in chain.stages if is_loop_stage(st) or st.kind in FOLLOWER_KINDS]
    if not stages:
        return []
    ac, cached = _coarse_ac(ev) if ac is None else (ac, {})
    f = ac.f_hz
    n_s = ev.samples
    rows = np.arange(n_s)
    todo = []                       # per stage: what the coarse grid gave, and the brackets to refine
    brackets = []                   # (S, REFINE_POINTS) per-sample grids, all refined in one pass
    for st in stages:
        if st.name in cached:
            t = cached[st.name]
            with np.errstate(divide="ignore", invalid="ignore"):
                resp = t / (1.0 + t)
        else:
            resp, t = _response(st, ev, ac)
        resp = np.broadcast_to(resp, (n_s, f.size))
        notes = []
        job = {"st": st, "t": t, "resp": resp, "notes": notes}
        if t is not None:
            t = job["t"] = np.broadcast_to(t, (n_s, f.size))
            ph = unwrapped_phase(t)
            fc, pm = crossover(f, t, ph)
            p = ev.params[st.name]
            if np.all(np.isinf(np.asarray(p.get("f_p2", np.inf)))):
                notes.append("single-pole op-amp model (no f_p2): this phase margin is an upper bound")
            if np.any(np.isnan(pm)):
                notes.append("|T| is still above 1 at the top of the loop grid: the crossover lies beyond it")
            has = np.isfinite(fc)
            if refine and has.any():
                k = np.clip(np.searchsorted(f, np.where(has, fc, f[0])) - 1, 0, f.size - 2)
                job["cross"] = (len(brackets), has, ph[rows, k])
                brackets.append(_bracket_grid(f, k, k + 1, REFINE_POINTS))
        else:
            fc = pm = np.full(n_s, np.nan)
        job["fc"], job["pm"] = fc, pm
        pk, fpk = peak_of(f, resp)
        if refine and np.any(pk > 0):
            k = np.clip(np.argmax(np.abs(resp), axis=1), 1, f.size - 2)
            job["peak"] = len(brackets)
            brackets.append(_bracket_grid(f, k - 1, k + 1, REFINE_POINTS))
        job["pk"], job["fpk"] = pk, fpk
        todo.append(job)
    local = _shared_local_ac(ev, brackets) if brackets else None
    out = []
    for job in todo:
        st, t, resp, fc, pm, pk, fpk = (job[k] for k in ("st", "t", "resp", "fc", "pm", "pk", "fpk"))
        if "cross" in job:
            i, has, ph_k = job["cross"]
            f_loc = brackets[i]
            _, t_loc = _response(st, ev, _stage_columns(local, st, i), s=2j * np.pi * f_loc)
            t_loc = np.broadcast_to(t_loc, f_loc.shape)
            fc2, pm2 = _local_crossover(f_loc, t_loc, ph_k)
            good = has & np.isfinite(fc2)
            fc, pm = np.where(good, fc2, fc), np.where(good, pm2, pm)
        if "peak" in job:
            i = job["peak"]
            f_loc = brackets[i]
            r_loc = np.broadcast_to(_response(st, ev, _stage_columns(local, st, i), s=2j * np.pi * f_loc)[0],
                                    f_loc.shape)
            with np.errstate(divide="ignore"):
                ref = 20 * np.log10(np.abs(resp[:, 0]))
            pk2, fpk2 = _local_peak(f_loc, r_loc, ref)
            pk = np.where(pk > 0, pk2, pk)
            fpk = np.where(pk > 0, fpk2, fpk)
        out.append(LoopResult(st.name, st.kind, f, t, resp, fc, pm, pk, fpk, f_minus3db(f, resp), job["notes"]))
    if fixes:
        target = DEFAULT_PM_DEG if target_pm_deg is None else target_pm_deg
        fine = None
        for res in out:
            if res.is_loop and np.ravel(res.pm_deg)[0] < target:
                fine = loop_ac(ev) if fine is None else fine
                res.fixes = recommend(ev, fine, chain.stage(res.stage), res, target)
    return out


def _local_crossover(f_loc, t_loc, ph_start):
    """Crossover inside per-sample grids (S, K), the phase continued from ph_start (the
    coarse unwrapped phase at the bracket's lower end)."""
    lmag = np.log10(np.abs(t_loc))
    ph = np.degrees(np.unwrap(np.angle(t_loc), axis=1))
    ph = ph + 360.0 * np.round((ph_start - ph[:, 0]) / 360.0)[:, None]
    above = lmag >= 0
    cross = above[:, :-1] & ~above[:, 1:]
    n = f_loc.shape[1]
    k = n - 2 - np.argmax(cross[:, ::-1], axis=1)
    rows = np.arange(f_loc.shape[0])
    y0, y1 = lmag[rows, k], lmag[rows, k + 1]
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.clip(y0 / (y0 - y1), 0.0, 1.0)
    lf = np.log10(f_loc)
    fc = 10 ** (lf[rows, k] + w * (lf[rows, k + 1] - lf[rows, k]))
    pc = ph[rows, k] + w * (ph[rows, k + 1] - ph[rows, k])
    has = cross.any(axis=1)
    return np.where(has, fc, np.nan), np.where(has, 180.0 + pc, np.nan)


def _local_peak(f_loc, h, ref_db):
    """Peak of |h| on per-sample grids (S, K), parabola-refined, in dB above ref_db."""
    with np.errstate(divide="ignore"):
        db = 20 * np.log10(np.abs(h))
    rows = np.arange(db.shape[0])
    k = np.clip(np.argmax(db, axis=1), 1, db.shape[1] - 2)
    ym, y0, yp = db[rows, k - 1], db[rows, k], db[rows, k + 1]
    den = ym - 2 * y0 + yp
    with np.errstate(divide="ignore", invalid="ignore"):
        off = np.clip(np.where(den < 0, 0.5 * (ym - yp) / den, 0.0), -1.0, 1.0)
    top = np.maximum(y0 - 0.25 * (ym - yp) * off, db.max(axis=1))
    lf = np.log10(f_loc)
    f_pk = 10 ** (lf[rows, k] + off * (lf[rows, 1] - lf[rows, 0]))
    return np.maximum(top - ref_db, 0.0), f_pk


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
                             f"the load ({fmt(c_eff, 'F')}) then sees a pole at "
                             f"{fmt(pole, 'Hz')} and {loss:+.3f} dB at f_ref".replace("-", "−")))
    # capacitance at the − input
    zf, y = st.model.loop_network(p, np.array([[s_c]]), tuple(np.asarray(x)[:1, k:k + 1]
                                                             for x in ac.branch_row[st.name]))
    ci = float(np.imag(np.ravel(y)[0]) / (2 * np.pi * fc))
    # (a charge amplifier's c_f is its gain, not a compensation: its noise gain 1 + Ct/CF is flat
    # at the crossover, so there is no capacitor fix to offer)
    if "r_f" in p and ci > 0 and st.kind not in ("opamp_follower", "charge_amplifier"):
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
    edge = (f"band edge {fmt(hi2, 'Hz')} (now {fmt(hi1, 'Hz')})" if np.isfinite(hi1) and np.isfinite(hi2)
            else "band edge beyond the span")
    from ..spec.numbers import figure
    return f"{edge}, gain {figure(dg, 'dB')}"


# -- budget hook -------------------------------------------------------------------

def target_pm(chain) -> float:
    """The phase margin the fixes aim for: the chain's min_phase_margin requirement, else 45°."""
    lims = [r.limit for r in chain.extra.get("requirements", []) if r.key == "min_phase_margin"]
    return max(lims) if lims else DEFAULT_PM_DEG


def summary_rows(results) -> list:
    """(what, value) rows for the budget summary, one per stage and one per fix."""
    rows = []
    for r in results:
        pk = float(r.peaking_db[0])
        peak = f"peaks {pk:.1f} dB at {fmt(float(r.f_peak_hz[0]), 'Hz')}" if pk > 0.05 else "no peaking"
        if r.is_loop:
            pm, fc = float(r.pm_deg[0]), float(r.f_cross_hz[0])
            head = (f"PM {pm:.1f}° at {fmt(fc, 'Hz')}" if math.isfinite(pm) else
                    "|T| < 1 everywhere: no crossover" if pm == math.inf else "crossover beyond the loop grid")
            rows.append((f"loop {r.stage}", f"{head}; {peak}"))
        else:
            rows.append((f"response {r.stage}", f"pole {fmt(float(r.f_3db_hz[0]), 'Hz')} as connected; {peak}"))
        rows.extend((f"  fix {r.stage}", fx.describe()) for fx in r.fixes)
        rows.extend((f"  note {r.stage}", n) for n in r.notes if "single-pole" not in n or r.fixes)
    return rows


def result_json(r: LoopResult) -> dict:
    num = lambda x: None if not np.isfinite(float(np.ravel(x)[0])) else float(np.ravel(x)[0])  # noqa: E731
    return {"stage": r.stage, "kind": r.kind, "loop": r.is_loop, "f_cross_hz": num(r.f_cross_hz),
            "phase_margin_deg": num(r.pm_deg), "peaking_db": float(r.peaking_db[0]), "f_peak_hz": num(r.f_peak_hz),
            "f_3db_hz": num(r.f_3db_hz), "notes": list(r.notes),
            "fixes": [{"what": fx.what, "value": fx.value, "purpose": fx.purpose, "phase_margin_deg": fx.pm_deg,
                       "peaking_db": fx.peaking_db, "effect": fx.effect} for fx in r.fixes]}


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: loop and follower rows in the summary, ``stability`` in JSON."""
    results = analyse_loops(b.ev, fixes=True, target_pm_deg=target_pm(b.chain))
    if not results:
        return
    b.extra_summary.extend(summary_rows(results))
    b.extra_json["stability"] = [result_json(r) for r in results]
