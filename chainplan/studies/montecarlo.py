"""Tolerance Monte Carlo: every tolerance drawn per unit, every unit evaluated at
every operating corner, the chain evaluated by the same engine on
``(samples, frequencies)`` arrays, in chunks so memory stays bounded.

Production yield: a unit passes when it meets every requirement at every
corner of its operating range (supply × temperature grid,
chainplan.studies.tolerances.corner_points).  The corners are folded into the
sample axis — one engine call evaluates a chunk's units at all the other
corners at once (sample ``u·C + c``; split into calls of fewer units when the
corner samples would not fit the memory of one chunk, the chunk itself kept
whole) — and that call uses only the
frequencies the requirements read (:func:`requirement_frequencies`): the
reference frequency, any ``at:``/``band:`` points, and for a band-edge limit
the grid from f_ref up to (or down to) the limit, which decides pass or fail
exactly as the full grid does.  The figures' distributions are those of the
units at nominal conditions (the full analysis, noise included).  Each yield
carries its 95 % Wilson score interval (:func:`wilson`).

Per sample: the gain at f_ref, the band edges, every interface's loading loss,
every node's headroom, the supply power, noise/SNR/ENOB when the noise
analysis exists, and every requirement's value and pass/fail.  A sample whose
operating point is impossible (``Evaluation.valid``) or whose drawn values
break a field's limits fails every requirement and is left out of the metric
statistics.

Ranking of what drives the spread: a first-order (linear) variance
decomposition — least-squares regression of the metric on the independent
draws over the valid samples; with independent inputs the share of input i is
``b_i²·Var(x_i)/Var(y)``, the squared standardised regression coefficient
(Saltelli et al., *Global Sensitivity Analysis: The Primer*, Wiley 2008, §1.2,
from memory; the same first-order sum as the law of propagation of
uncertainty, GUM, JCGM 100:2008, eq. 10, from memory).  The shares sum to the
regression's R²; what is missing from 1 is the non-linear part.
"""
from __future__ import annotations

import dataclasses

import importlib.util
import math
import os
import threading
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import evaluate, frequency_grid
from ..engine.workspace import Workspace
from ..spec.model import Chain
from .requirements import ReqResult, evaluate_requirements, per_sample
from .tolerances import Corner, Draws, at_corners, corner_points, draw

#: working-memory budget of one chunk (bytes; one chunk per thread); the chunk size follows from it
CHUNK_BYTES = 256e6
#: complex (S, F) arrays alive per stage during one evaluation (from the peak RSS of
#: benchmarks/bench_montecarlo.py: about 11 per stage; rounded up)
ARRAYS_PER_STAGE = 16
PERCENTILES = (0.1, 50.0, 99.9)
#: threads evaluating chunks at once
MAX_WORKERS = 4


@dataclass
class Stats:
    mean: float
    std: float
    p_low: float        # 0.1 %
    median: float
    p_high: float       # 99.9 %
    count: int          # finite values among the valid samples


@dataclass
class McResult:
    chain: Chain
    samples: int
    seed: int
    metrics: dict                       # name -> (S,)
    requirements: list                  # ReqResult with (S,) arrays
    valid: np.ndarray                   # (S,) bool
    inputs: dict                        # independent draws, name -> (S,)
    key_metric: str = "gain_db"
    sensitivity: list = field(default_factory=list)    # [(input name, share of variance)]
    labels: list | None = None                          # corner runs: a label per sample
    corners: list = field(default_factory=list)         # tolerances.Corner, the nominal one first
    corner_pass: np.ndarray | None = None               # (R, S, C) bool: requirement r met by unit s at corner c
    corner_ok: np.ndarray | None = None                 # (S, C) bool: the operating point holds
    rejected: np.ndarray | None = None                  # (S,) bool: non-physical draws, outside every yield

    @property
    def accepted(self) -> np.ndarray:
        return ~self.rejected if self.rejected is not None else np.ones(self.samples, dtype=bool)

    @property
    def units(self) -> int:
        """Units that count in the yield (the rejected draws left out)."""
        return int(self.accepted.sum())

    def _passes(self, req_index=None) -> np.ndarray:
        """(S, C) bool: unit s meets requirement ``req_index`` (all: None) at corner c."""
        ok = self.corner_ok.copy()
        rows = range(len(self.requirements)) if req_index is None else [req_index]
        for i in rows:
            ok &= self.corner_pass[i]
        return ok

    def passes(self, req_index=None) -> np.ndarray:
        """(S,) bool: the unit meets the requirement(s) at every corner (production)."""
        return self._passes(req_index).all(axis=1) & self.accepted

    def _frac(self, ok) -> float:
        n = self.units
        return float(ok[self.accepted].sum() / n) if n else float("nan")

    @property
    def yield_all(self) -> float:
        """Production yield: the fraction of units meeting every requirement at every corner."""
        return self._frac(self.passes())

    def yield_of(self, r: ReqResult) -> float:
        """Fraction of units meeting ``r`` at every corner."""
        return self._frac(self.passes(self.requirements.index(r)))

    def yield_at(self, c: int) -> float:
        """Fraction of units meeting every requirement at corner ``c``."""
        return self._frac(self._passes()[:, c])

    def interval(self, y: float) -> tuple:
        """95 % Wilson score interval of a yield over this run's units."""
        n = self.units
        return wilson(round(y * n), n) if n else (float("nan"), float("nan"))

    def stats(self, name: str) -> Stats:
        return stats(self.metrics[name], self.valid)

    @property
    def limiting_corner(self) -> int | None:
        """The corner with the lowest yield (None when every corner yields 100 %)."""
        if not self.corners:
            return None
        ys = [self.yield_at(c) for c in range(len(self.corners))]
        c = min(range(len(ys)), key=lambda i: ys[i])
        return c if ys[c] < 1.0 else None


#: z of a two-sided 95 % interval (the normal quantile 0.975)
Z95 = 1.959963984540054


def wilson(k: int, n: int, z: float = Z95) -> tuple[float, float]:
    """Wilson score interval of a proportion k/n (E. B. Wilson, J. Am. Stat. Assoc. 22, 1927;
    also NIST/SEMATECH e-Handbook of Statistical Methods, from memory):
    (p̂ + z²/2n ± z·√(p̂(1 − p̂)/n + z²/4n²)) / (1 + z²/n).  It stays inside [0, 1] and is
    not empty at 0 or n passes, where the plain normal interval collapses."""
    if n <= 0:
        return float("nan"), float("nan")
    p = k / n
    den = 1.0 + z * z / n
    mid = p + z * z / (2 * n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    lo = 0.0 if k == 0 else max(0.0, (mid - half) / den)        # exact ends: no rounding residue
    hi = 1.0 if k == n else min(1.0, (mid + half) / den)
    return lo, hi


def stats(x: np.ndarray, valid: np.ndarray) -> Stats:
    """Mean, sample standard deviation and the 0.1/50/99.9 % percentiles of the valid, finite values."""
    v = x[valid & np.isfinite(x)]
    if v.size == 0:
        return Stats(*(float("nan"),) * 5, 0)
    lo, med, hi = np.percentile(v, PERCENTILES)
    return Stats(float(v.mean()), float(v.std(ddof=1)) if v.size > 1 else 0.0, float(lo), float(med),
                 float(hi), int(v.size))


def metrics(ev) -> dict:
    """Per-sample figures of an evaluation, each ``(S,)``."""
    n = ev.samples
    per = lambda x: per_sample(x, n)  # noqa: E731
    chain = ev.chain
    out = {"gain_db": per(20 * np.log10(np.abs(ev.gain()[:, 0])))}
    f_lo, f_hi = ev.band_edges()
    out["f_low_hz"], out["f_high_hz"] = per(f_lo), per(f_hi)
    for name in ev.loading_interfaces():           # virtual-ground inputs have no loading loss
        out[f"loading_loss_db.{name}"] = per(ev.interface_loss_db(name, 0))
    for node in chain.nodes:
        out[f"headroom_v.{node}"] = per(ev.headroom(node))
    power = buffers = 0.0
    for st in chain.stages:
        pw = ev.dc.ops[st.name].values.get("power_w")
        if pw is not None:
            power = power + per(pw)
            buffers = buffers + (per(pw) if st.model.follower_type else 0.0)
    out["power_w"], out["buffer_power_w"] = per(power), per(buffers)
    if has_noise():
        from ..engine.noise import noise_powers
        nr = noise_powers(ev)
        for key in ("out_vrms", "in_vrms"):
            out[f"noise_{key}"] = per(getattr(nr, key))
        out["snr_db"], out["enob_bits"] = per(nr.snr_db), per(nr.enob_bits)
    if dc_error_declared(chain):
        from ..engine.dcerror import unit_errors_of
        ue = unit_errors_of(ev, any_run=True)
        for what, key in DC_ERROR_METRICS.items():
            out[key] = per(ue[what])
    out.update(dynamics_metrics(ev))
    return out


#: a unit's DC error (engine/dcerror.py unit_errors) -> metric key, output volts
DC_ERROR_METRICS = {"offset": "dc_offset_error_v", "gain": "dc_gain_error_v", "drift": "dc_drift_v",
                    "total": "dc_total_error_v"}


def dc_error_declared(chain: Chain) -> bool:
    from ..engine.dcerror import declared
    return declared(chain)


def dynamics_metrics(ev) -> dict:
    """Phase margin and peaking of every loop and follower, the chain's step settling,
    a sampling converter's settled bits and the start-up time, each ``(S,)``."""
    from ..engine.loop import analyse_loops
    from ..engine.sampling import analyse_sampling
    from ..engine.startup import analyse_startup
    from ..engine.step import analyse_step
    n = ev.samples
    per = lambda x: per_sample(x, n)  # noqa: E731
    out = {}
    for r in analyse_loops(ev):
        if r.is_loop:
            out[f"phase_margin_deg.{r.stage}"] = per(r.pm_deg)
        out[f"peaking_db.{r.stage}"] = per(r.peaking_db)
    st = analyse_step(ev)
    if st is not None:
        out["settling_s"] = per(st.settling_s)
    sm = analyse_sampling(ev)
    if sm is not None:
        out["settled_bits"] = per(sm.settled_bits)
    su = analyse_startup(ev)
    if su is not None and su.worst_node is not None:
        out["startup_s"] = per(su.startup_s)
    return out


#: metric key (before the '.') -> (words, unit symbol, better direction: +1 higher, −1 lower, 0 neither).
#: Every figure of merit has a direction (``compare --strict`` fails when one moves the wrong way;
#: a wider band is better); only the gain, a design choice, has none.  A new metric must name one
#: (tests/test_compare_sees.py checks it).
METRICS = {"gain_db": ("gain at f_ref", "dB", 0), "f_low_hz": ("lower −3 dB edge", "Hz", -1),
           "f_high_hz": ("upper −3 dB edge", "Hz", +1), "loading_loss_db": ("loading loss", "dB", -1),
           "headroom_v": ("headroom", "V", +1), "power_w": ("supply power", "W", -1),
           "buffer_power_w": ("buffer power", "W", -1), "noise_out_vrms": ("output noise", "V", -1),
           "noise_in_vrms": ("input-referred noise", "V", -1), "snr_db": ("SNR", "dB", +1),
           "enob_bits": ("ENOB", "bits", +1), "phase_margin_deg": ("phase margin", "°", +1),
           "peaking_db": ("peaking", "dB", -1), "settling_s": ("step settling time", "s", -1),
           "settled_bits": ("settled bits", "bits", +1), "startup_s": ("start-up time", "s", -1),
           "dc_offset_error_v": ("DC offset error", "V", -1), "dc_gain_error_v": ("DC gain error", "V", -1),
           "dc_drift_v": ("DC drift", "V", -1), "dc_total_error_v": ("DC total error", "V", -1)}


def metric_info(chain: Chain, key: str) -> tuple[str, str, int]:
    """(label, unit, better direction) of a metric key, e.g. ('loading loss element → lead', 'dB', -1)."""
    base, _, target = key.partition(".")
    text, unit, better = METRICS[base]
    if base == "gain_db":
        unit = chain.gain_db_unit                # dBΩ for a transimpedance chain
    if base == "noise_in_vrms":
        unit = chain.source.model.signal_unit    # a current sensor's input noise is a current (A rms)
    if base == "loading_loss_db":
        target = f"{chain.stage(target).parent} → {target}"
    return (f"{text} {target}" if target else text), unit, better


def has_noise() -> bool:
    return importlib.util.find_spec("chainplan.engine.noise") is not None


def metric_names(chain: Chain) -> list:
    """The keys :func:`metrics` returns for this chain."""
    from ..engine.budget import virtual_grounds
    vg = virtual_grounds(chain)
    return (["gain_db", "f_low_hz", "f_high_hz"] + [f"loading_loss_db.{st.name}" for st in chain.stages if st.name not in vg]
            + [f"headroom_v.{n}" for n in chain.nodes] + ["power_w", "buffer_power_w"]
            + (["noise_out_vrms", "noise_in_vrms", "snr_db", "enob_bits"] if has_noise() else [])
            + (list(DC_ERROR_METRICS.values()) if dc_error_declared(chain) else [])
            + dynamics_names(chain))


def dynamics_names(chain: Chain) -> list:
    """The keys :func:`dynamics_metrics` returns for this chain (the nominal chain decides)."""
    from ..engine.budget import evaluate
    with np.errstate(all="ignore"):
        return list(dynamics_metrics(evaluate(chain)))


def chunk_size(chain: Chain) -> int:
    """Samples per chunk so one evaluation stays within CHUNK_BYTES."""
    per_sample = len(frequency_grid(chain)) * 16 * ARRAYS_PER_STAGE * (len(chain.stages) + 1)
    return int(max(50, min(5000, CHUNK_BYTES // per_sample)))


def run(chain: Chain, samples: int, seed: int = 1, chunk: int | None = None, progress=None,
        key: str | None = None, workers: int | None = None, client=None) -> McResult:
    """Monte Carlo over every tolerance and corner of ``chain``.  ``progress(done, total)``
    is called after each chunk; ``key`` names the metric or requirement to rank inputs for
    (default: the requirement with the lowest yield, else the gain); ``client``: a dask
    client to run the chunks on (chainplan.studies.cluster), else threads in this process."""
    return run_draws(draw(chain, samples, seed), seed, chunk, progress, key, workers, corners=corner_points(chain),
                     client=client)


_local = threading.local()


def _workspace() -> Workspace:
    """This thread's recycled work arrays (chunks on one thread run one after another)."""
    ws = getattr(_local, "ws", None)
    if ws is None:
        ws = _local.ws = Workspace()
    return ws


#: requirement kinds decided by f_ref, at:/band points, the signal band and band-edge windows, or
#: by DC alone (the DC error kinds); any other kind (noise, flatness, aliasing, a kind added later)
#: gets the whole grid
NARROW_KINDS = ("min_gain", "max_gain", "min_headroom", "max_loading_loss", "max_buffer_power", "min_f_high",
                "max_f_low", "max_offset_error", "max_gain_error", "max_drift", "max_total_error")


def requirement_frequencies(chain: Chain, f_hz: np.ndarray) -> np.ndarray:
    """The columns of ``f_hz`` (f_ref first) that decide the chain's requirements at the
    corners, so that pass or fail there is what the full grid gives: f_ref, the signal
    band (signal peaks and headroom are the worst over it), and for a band-edge limit L
    the passband's columns (the grid around ``mid_band``, or the signal band) and the grid
    from there to the first point beyond L — the first −3 dB crossing is then the one of
    the full grid, and beyond the last kept point the edge is known to pass (that point
    stands in for it).  The whole grid for any other kind (NARROW_KINDS), or when a band
    edge is read against the largest gain over the whole span (no ``mid_band``, no signal
    band)."""
    reqs = chain.extra.get("requirements", [])
    a = chain.analysis
    edges = [r for r in reqs if r.key in ("min_f_high", "max_f_low")]
    if any(r.key not in NARROW_KINDS for r in reqs) or (edges and a.mid_band_hz is None and a.band_hz is None):
        return f_hz
    span, f_ref = f_hz[1:], f_hz[0]
    idx = np.arange(span.size)
    keep = np.zeros(span.size, dtype=bool)
    if a.band_hz is not None:
        lo_b, hi_b = a.band_hz
        keep |= (span >= lo_b * (1 - 1e-12)) & (span <= hi_b * (1 + 1e-12))
    if edges:
        if a.mid_band_hz is not None:          # the two grid points around mid_band
            j = int(np.clip(np.searchsorted(span, a.mid_band_hz) - 1, 0, span.size - 2))
            keep[j:j + 2] = True
            first, last = j, j + 1
        else:
            inside = np.nonzero(keep)[0]
            first, last = (inside[0], inside[-1]) if inside.size else (0, span.size - 1)
        for r in edges:
            if r.key == "min_f_high":
                beyond = np.nonzero(span >= r.limit)[0]
                stop = beyond[0] if beyond.size else span.size - 1
                keep |= (idx >= first) & (idx <= max(stop, last))
            else:
                before = np.nonzero(span <= r.limit)[0]
                start = before[-1] if before.size else 0
                keep |= (idx >= min(start, first)) & (idx <= last)
    return np.concatenate(([f_ref], span[keep]))


def _chunk(d: Draws, sl: slice, corners: list, f_corner, corner_units: int | None = None):
    """(metrics, requirement results, validity, corner passes (R, n, C), corner validity (n, C))
    of units ``sl``: the full analysis at nominal conditions, then every other corner at once
    (one engine call per ``corner_units`` units, all corners of a unit in the same call) on
    the frequencies the requirements read."""
    ws = _workspace()
    n = sl.stop - sl.start
    wide = lambda x: np.array(np.broadcast_to(x, (n,)))  # noqa: E731 - nothing varied: one sample stands for all
    try:
        ev = evaluate(d.chain, d.params(sl), ws=ws)
        reqs = [dataclasses.replace(r, value=wide(r.value), margin=wide(r.margin), passed=wide(r.passed),
                                    where=None if r.where is None else (r.where[0], wide(r.where[1])))
                for r in evaluate_requirements(ev)]
        mets = {k: wide(v) for k, v in metrics(ev).items()}
        valid = wide(ev.valid) & d.valid[sl]
    finally:
        ws.recycle()        # every figure is copied out before the arrays are lent again
    c_n = len(corners)
    cpass = np.zeros((len(reqs), n, c_n), dtype=bool)
    cok = np.zeros((n, c_n), dtype=bool)
    others = [i for i, c in enumerate(corners) if not c.nominal]
    for i, c in enumerate(corners):
        if c.nominal:
            cok[:, i] = valid
            for j, r in enumerate(reqs):
                cpass[j, :, i] = r.passed
    if others:
        per = corner_units or n        # units per corner call: the memory of one nominal chunk
        picked = [corners[i] for i in others]
        for a in range(0, n, per):
            b = min(a + per, n)
            cpass[:, a:b, others], cok[a:b, others] = corner_passes(
                d, slice(sl.start + a, sl.start + b), picked, f_corner, ws)
    return (mets, reqs, valid, cpass, cok)


def corner_passes(d: Draws, sl: slice, corners: list, f_hz: np.ndarray, ws: Workspace | None = None):
    """(requirement passes (R, n, C), operating point holds (n, C)) of units ``sl`` at
    ``corners``, in one engine call on the frequencies ``f_hz`` (requirement_frequencies)."""
    n, k = sl.stop - sl.start, len(corners)
    n_req = len(d.chain.extra.get("requirements", []))
    cpass = np.zeros((n_req, n, k), dtype=bool)
    try:
        ev = evaluate(d.chain, at_corners(d, sl, corners), f_hz=f_hz, ws=ws)
        cok = np.broadcast_to(ev.valid, (n * k,)).reshape(n, k) & d.valid[sl, None]
        for j, r in enumerate(evaluate_requirements(ev)):
            cpass[j] = np.broadcast_to(r.passed, (n * k,)).reshape(n, k)
    finally:
        if ws is not None:
            ws.recycle()
    return cpass, cok


def _remote_chunk(part: Draws, corners: list, f_corner, corner_units):
    """One chunk on a cluster worker: ``part`` holds just the chunk's draws."""
    return _chunk(part, slice(0, part.n), corners, f_corner, corner_units)


def run_draws(d: Draws, seed: int = 0, chunk: int | None = None, progress=None, key: str | None = None,
              workers: int | None = None, corners: list | None = None, client=None) -> McResult:
    """Evaluate prepared draws (a Monte Carlo set or the corner combinations) in chunks.
    Chunks run on ``workers`` threads (default: one per core, at most 4): numpy releases
    the interpreter lock in its array arithmetic, and results are collected in order,
    so the numbers do not depend on the thread count."""
    from concurrent.futures import ThreadPoolExecutor
    corners = corners or [Corner("nominal", d.chain.temp_k, 1.0, True)]
    f_full = frequency_grid(d.chain)
    f_corner = requirement_frequencies(d.chain, f_full)
    chunk = chunk or chunk_size(d.chain)
    # a corner call holds units·(C − 1) samples on f_corner: keep it within the memory of one
    # chunk by splitting the chunk's corner work, not the chunk (the nominal analysis — noise,
    # step, start-up — has a cost per call that small chunks would pay many times over)
    others = sum(1 for c in corners if not c.nominal)
    corner_units = max(1, min(chunk, int(chunk * len(f_full) / (others * len(f_corner))))) if others else None
    slices = [slice(i, min(i + chunk, d.n)) for i in range(0, d.n, chunk)]
    workers = min(workers or os.cpu_count() or 1, MAX_WORKERS, max(len(slices), 1))
    parts_m, parts_r, parts_v, parts_cp, parts_ck = [], [], [], [], []
    with ThreadPoolExecutor(max_workers=workers) as pool:
        if client is not None:          # a dask cluster (chainplan.studies.cluster): the same chunks, in order
            from .cluster import map_in_order
            results = map_in_order(client, _remote_chunk, [d.take(sl) for sl in slices], corners=corners,
                                   f_corner=f_corner, corner_units=corner_units)
        else:
            results = pool.map(lambda sl: _chunk(d, sl, corners, f_corner, corner_units), slices)
        for sl, (m, r, v, cp, ck) in zip(slices, results):
            parts_m.append(m)
            parts_r.append(r)
            parts_v.append(v)
            parts_cp.append(cp)
            parts_ck.append(ck)
            if progress is not None:
                progress(sl.stop, d.n)
    valid = np.concatenate(parts_v) if parts_v else np.zeros(0, dtype=bool)
    mets = {k: np.concatenate([p[k] for p in parts_m]) for k in parts_m[0]} if parts_m else {}
    reqs = [_join([p[i] for p in parts_r], valid) for i in range(len(parts_r[0]))] if parts_r else []
    res = McResult(d.chain, d.n, seed, mets, reqs, valid, d.inputs, labels=d.labels, corners=corners,
                   corner_pass=np.concatenate(parts_cp, axis=1) if parts_cp else np.zeros((0, 0, len(corners)), bool),
                   corner_ok=np.concatenate(parts_ck) if parts_ck else np.zeros((0, len(corners)), bool),
                   rejected=~d.valid)
    if d.n:
        res.key_metric, y = key_values(res, key)
        res.sensitivity = rank(y, d.inputs, valid)
    return res


def nominal_unit_at_corners(chain: Chain, corners: list) -> McResult:
    """The nominal design (parts at nominal) evaluated at each corner, one sample per corner."""
    d = Draws(chain, 1, valid=np.ones(1, dtype=bool))
    ev = evaluate(chain, at_corners(d, slice(0, 1), corners))
    n = len(corners)
    wide = lambda x: np.broadcast_to(x, (n,))  # noqa: E731
    reqs = [dataclasses.replace(r, value=wide(r.value), margin=wide(r.margin), passed=wide(r.passed))
            for r in evaluate_requirements(ev)]
    return McResult(chain, n, 0, {"gain_db": wide(metrics(ev)["gain_db"])}, reqs, wide(ev.valid), {},
                    labels=[c.label for c in corners], corners=corners)


def _join(parts: list[ReqResult], valid) -> ReqResult:
    first = parts[0]
    cat = lambda attr: np.concatenate([getattr(p, attr) for p in parts])  # noqa: E731
    where = None
    if first.where is not None:
        where = (first.where[0], np.concatenate([p.where[1] for p in parts]))
    return ReqResult(first.name, first.kind, cat("value"), first.limit, cat("margin"), cat("passed") & valid,
                     first.unit, first.sense, first.requirement, where, first.note)


def key_values(res: McResult, key: str | None):
    """The metric or requirement values to rank inputs for."""
    if key is None:
        failing = [r for r in res.requirements if res.yield_of(r) < 1.0]
        if failing:
            worst = min(failing, key=res.yield_of)
            return worst.name, worst.value
        return "gain_db", res.metrics["gain_db"]
    for r in res.requirements:
        if r.name == key:
            return r.name, r.value
    return key, res.metrics[key]


def rank(y: np.ndarray, inputs: dict, valid: np.ndarray) -> list:
    """First-order variance shares of ``y`` by input (squared standardised regression
    coefficients; see the module docstring), largest first."""
    ok = valid & np.isfinite(y)
    names = [k for k, v in inputs.items() if ok.any() and np.ptp(v[ok]) > 0]
    if not names or ok.sum() < len(names) + 3:
        return []
    x = np.column_stack([inputs[k][ok] for k in names])
    yy = y[ok]
    sy = yy.std()
    if not sy > 0:
        return [(k, 0.0) for k in names]
    xs = (x - x.mean(axis=0)) / x.std(axis=0)
    coef, *_ = np.linalg.lstsq(np.column_stack([np.ones(len(yy)), xs]), (yy - yy.mean()) / sy, rcond=None)
    shares = coef[1:] ** 2
    return sorted(zip(names, (float(s) for s in shares)), key=lambda t: -t[1])
