"""Tolerance Monte Carlo: every tolerance and corner drawn per sample, the chain
evaluated by the same engine on ``(samples, frequencies)`` arrays, in chunks so
memory stays bounded.

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
import os
import threading
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import evaluate, frequency_grid
from ..engine.workspace import Workspace
from ..spec.model import Chain
from .requirements import ReqResult, evaluate_requirements, per_sample
from .tolerances import Draws, draw

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

    @property
    def yield_all(self) -> float:
        """Fraction of samples that are valid and meet every requirement."""
        ok = self.valid.copy()
        for r in self.requirements:
            ok &= r.passed
        return float(ok.mean()) if self.samples else float("nan")

    def yield_of(self, r: ReqResult) -> float:
        return float(r.passed.mean()) if self.samples else float("nan")

    def stats(self, name: str) -> Stats:
        return stats(self.metrics[name], self.valid)


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
    for st in chain.stages:
        out[f"loading_loss_db.{st.name}"] = per(ev.interface_loss_db(st.name, 0))
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
           "enob_bits": ("ENOB", "bits", +1)}


def metric_info(chain: Chain, key: str) -> tuple[str, str, int]:
    """(label, unit, better direction) of a metric key, e.g. ('loading loss element → lead', 'dB', -1)."""
    base, _, target = key.partition(".")
    text, unit, better = METRICS[base]
    if base == "loading_loss_db":
        target = f"{chain.stage(target).parent} → {target}"
    return (f"{text} {target}" if target else text), unit, better


def has_noise() -> bool:
    return importlib.util.find_spec("chainplan.engine.noise") is not None


def metric_names(chain: Chain) -> list:
    """The keys :func:`metrics` returns for this chain."""
    return (["gain_db", "f_low_hz", "f_high_hz"] + [f"loading_loss_db.{st.name}" for st in chain.stages]
            + [f"headroom_v.{n}" for n in chain.nodes] + ["power_w", "buffer_power_w"]
            + (["noise_out_vrms", "noise_in_vrms", "snr_db", "enob_bits"] if has_noise() else []))


def chunk_size(chain: Chain) -> int:
    """Samples per chunk so one evaluation stays within CHUNK_BYTES."""
    per_sample = len(frequency_grid(chain)) * 16 * ARRAYS_PER_STAGE * (len(chain.stages) + 1)
    return int(max(50, min(5000, CHUNK_BYTES // per_sample)))


def run(chain: Chain, samples: int, seed: int = 1, chunk: int | None = None, progress=None,
        key: str | None = None, workers: int | None = None) -> McResult:
    """Monte Carlo over every tolerance and corner of ``chain``.  ``progress(done, total)``
    is called after each chunk; ``key`` names the metric or requirement to rank inputs for
    (default: the requirement with the lowest yield, else the gain)."""
    return run_draws(draw(chain, samples, seed), seed, chunk, progress, key, workers)


_local = threading.local()


def _workspace() -> Workspace:
    """This thread's recycled work arrays (chunks on one thread run one after another)."""
    ws = getattr(_local, "ws", None)
    if ws is None:
        ws = _local.ws = Workspace()
    return ws


def _chunk(d: Draws, sl: slice):
    """(metrics, requirement results, validity) of samples ``sl``.  The evaluation's
    arrays live in the thread's workspace: every figure is copied out (``wide``)
    before the workspace is recycled for the next chunk."""
    ws = _workspace()
    try:
        ev = evaluate(d.chain, d.params(sl), ws=ws)
        n = sl.stop - sl.start
        wide = lambda x: np.array(np.broadcast_to(x, (n,)))  # noqa: E731 - nothing varied: one sample stands for all
        reqs = [dataclasses.replace(r, value=wide(r.value), margin=wide(r.margin), passed=wide(r.passed),
                                    where=None if r.where is None else (r.where[0], wide(r.where[1])))
                for r in evaluate_requirements(ev)]
        return ({k: wide(v) for k, v in metrics(ev).items()}, reqs, wide(ev.valid) & d.valid[sl])
    finally:
        ws.recycle()


def run_draws(d: Draws, seed: int = 0, chunk: int | None = None, progress=None, key: str | None = None,
              workers: int | None = None) -> McResult:
    """Evaluate prepared draws (a Monte Carlo set or the corner combinations) in chunks.
    Chunks run on ``workers`` threads (default: one per core, at most 4): numpy releases
    the interpreter lock in its array arithmetic, and results are collected in order,
    so the numbers do not depend on the thread count."""
    from concurrent.futures import ThreadPoolExecutor
    chunk = chunk or chunk_size(d.chain)
    slices = [slice(i, min(i + chunk, d.n)) for i in range(0, d.n, chunk)]
    workers = min(workers or os.cpu_count() or 1, MAX_WORKERS, max(len(slices), 1))
    parts_m, parts_r, parts_v = [], [], []
    with ThreadPoolExecutor(max_workers=workers) as pool:
        for sl, (m, r, v) in zip(slices, pool.map(lambda sl: _chunk(d, sl), slices)):
            parts_m.append(m)
            parts_r.append(r)
            parts_v.append(v)
            if progress is not None:
                progress(sl.stop, d.n)
    valid = np.concatenate(parts_v) if parts_v else np.zeros(0, dtype=bool)
    mets = {k: np.concatenate([p[k] for p in parts_m]) for k in parts_m[0]} if parts_m else {}
    reqs = [_join([p[i] for p in parts_r], valid) for i in range(len(parts_r[0]))] if parts_r else []
    res = McResult(d.chain, d.n, seed, mets, reqs, valid, d.inputs, labels=d.labels)
    if d.n:
        res.key_metric, y = key_values(res, key)
        res.sensitivity = rank(y, d.inputs, valid)
    return res


def _join(parts: list[ReqResult], valid) -> ReqResult:
    first = parts[0]
    cat = lambda attr: np.concatenate([getattr(p, attr) for p in parts])  # noqa: E731
    where = None
    if first.where is not None:
        where = (first.where[0], np.concatenate([p.where[1] for p in parts]))
    return ReqResult(first.name, first.kind, cat("value"), first.limit, cat("margin"), cat("passed") & valid,
                     first.unit, first.sense, first.requirement, where)


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
