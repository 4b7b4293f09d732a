"""Rare-event production yield: the probability that a unit fails, down to parts per
million and below, without the ~10/p units brute force needs to see a failure rate p.

Method: mixture importance sampling around the failure regions (Hocevar, Lightner
and Trick, "A study of variance reduction techniques for estimating circuit
yields", IEEE Trans. CAD 2(3), 1983; Kanj, Joshi and Nassif, "Mixture importance
sampling and its application to the analysis of SRAM designs in the presence of
rare failure events", DAC 2006; both from memory), with a defensive component
(Hesterberg, "Weighted average importance sampling and defensive mixture
distributions", Technometrics 37(2), 1995; Owen and Zhou, JASA 95, 2000; from
memory), in three steps:

1. **Latent space.**  Every independent draw that makes a unit
   (``tolerances.sources``) is a function of one standard-normal coordinate z:
   a uniform tolerance is ``u = erf(z/√2)`` (the probability integral transform:
   exactly U(−1, 1) for z ~ N(0, 1)), a ``normal`` one (limit = 3σ, truncated)
   is ``u = z/3`` with z restricted to |z| < 3, a ``σ`` one is ``u = z``.  The
   density of a unit is then ``p(z) = Π φ(z_i)`` (times 1/(1 − 2Φ(−3)) per
   truncated coordinate, zero beyond).
2. **Exploration** (scaled-sigma sampling: z ~ N(0, s²·I), the truncated coordinates
   kept inside their limit; s = 6 first — nothing failing there ends the run — then
   s = 3, else 4.5, the narrowest scale that finds failing units): a normal
   distribution is fitted to the failing units of each way of failing (each
   requirement, and the operating point) with their weights p/q — the
   cross-entropy update of a normal family (Rubinstein and Kroese, *The
   Cross-Entropy Method*, Springer 2004, from memory) — its covariance widened
   by INFLATE, then refitted once on draws from the mixture.  Along the ray from
   the nominal to the nearest failing unit of each way of failing, the boundary
   is found on a grid (32 points, refined by 16): the nearest boundary point
   is the **most likely failure point** found (its |z| is the reliability index
   β: a one-sided normal tail Φ(−β) where the boundary is a plane).
3. **Importance sampling** from ``q(z) = λ·p(z) + (1 − λ)/K·Σ_k N_k(z)``, the
   fitted normals and the units' own distribution, λ = 0.1.  Each unit is
   weighted ``w = p(z)/q(z) ≤ 1/λ``; the failure probability among the
   accepted units is the ratio ``Σ w·fail / Σ w·accepted``, its standard error
   from the delta method, and its 95 % interval the normal one (±1.96 σ), which
   needs enough failing samples (a warning below MIN_FAILURES).  The equivalent
   brute-force count is ``p(1 − p)/σ²``: the units plain Monte Carlo would need
   for the same standard error.

A unit fails as in ``chainplan spread``: it misses a requirement at some corner of
its operating range, or its operating point cannot hold; rejected draws (values
outside a field's physical range) are neither.  What the estimate cannot see: a
failure region that exploration never reaches (none of its units fails within
6σ scaled draws) and more than one disjoint region per requirement — the
nearest one is sampled, the others only through the defensive component.
"""
from __future__ import annotations

import math
import os
import zlib
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from ..spec.model import Chain
from ..engine.budget import frequency_grid
from .montecarlo import MAX_WORKERS, Z95, _workspace, chunk_size, corner_passes, requirement_frequencies
from .tolerances import corner_points, draw_from_units, sources

#: scale factors of the exploration draws: the widest first (nothing fails there: no estimate
#: is needed, one round spent), then the narrowest that finds failing units (its weights
#: locate the regions best)
EXPLORE_SCALES = (6.0, 3.0, 4.5)
#: weight of the unit's own distribution in the sampling mixture (defensive part)
DEFENSIVE = 0.1
#: points of the coarse and the refining grid along each ray to a failing unit
RAY_POINTS = (32, 16)
#: a failure rate above this is not a rare event (the note says so)
NOT_RARE = 1e-2
#: failing importance samples below which the normal interval is flagged as rough
MIN_FAILURES = 30
#: truncation of a 'normal' tolerance, in σ of its latent coordinate (the 3σ limit)
TRUNC = 3.0
#: the covariance of each fitted component, widened by this factor (heavier tails than the
#: failing units' spread: a proposal narrower than the target is what makes importance sampling
#: unreliable)
INFLATE = 2.0
_LOG_2PI = math.log(2 * math.pi)


def erfc(x: np.ndarray) -> np.ndarray:
    """Complementary error function, vectorised, fractional error below 1.2e-7 everywhere
    (the Chebyshev fit 'erfcc' of Press et al., *Numerical Recipes*, §6.2, from memory)."""
    z = np.abs(x)
    t = 1.0 / (1.0 + 0.5 * z)
    poly = -1.26551223 + t * (1.00002368 + t * (0.37409196 + t * (0.09678418 + t * (
        -0.18628806 + t * (0.27886807 + t * (-1.13520398 + t * (1.48851587 + t * (
            -0.82215223 + t * 0.17087277))))))))
    ans = t * np.exp(-z * z + poly)
    return np.where(x >= 0, ans, 2.0 - ans)


def to_units(z: np.ndarray, dists: list[str]) -> list[np.ndarray]:
    """Latent coordinates (n, D) to each source's draw in units of its limit (see the module
    docstring): uniform ``erf(z/√2)``, normal ``z/3``, σ ``z``."""
    out = []
    for j, dist in enumerate(dists):
        zj = z[:, j]
        if dist == "uniform":
            out.append(np.where(zj >= 0, 1.0 - erfc(zj / math.sqrt(2)), erfc(-zj / math.sqrt(2)) - 1.0))
        elif dist == "normal":
            out.append(zj / TRUNC)
        else:
            out.append(zj.copy())
    return out


def log_density(z: np.ndarray, truncated: np.ndarray) -> np.ndarray:
    """log p(z) of the units' latent coordinates: standard normal, the truncated ones
    renormalised to |z| < 3 and zero beyond (−inf)."""
    d = z.shape[1]
    lp = -0.5 * np.einsum("ij,ij->i", z, z) - 0.5 * d * _LOG_2PI
    k = int(truncated.sum())
    if k:
        lp -= k * math.log(math.erf(TRUNC / math.sqrt(2)))
        lp[(np.abs(z[:, truncated]) >= TRUNC).any(axis=1)] = -np.inf
    return lp


@dataclass
class Region:
    """A failure region: what fails there and the boundary point nearest the nominal found."""
    what: str                  # requirement name, or 'operating point'
    shift: np.ndarray          # (D,) latent point on the failure boundary
    beta: float                # |shift|: the reliability index of this region


@dataclass
class RareResult:
    chain: Chain
    names: list
    dists: list
    samples: int                            # importance samples
    explored: int                           # units evaluated finding the regions
    seed: int
    p_fail: float                           # failure probability of an accepted unit
    std_err: float
    failures: int                           # failing importance samples
    requirements: list = field(default_factory=list)    # [(name, p, std_err)]
    regions: list = field(default_factory=list)         # Region, nearest first
    point: list = field(default_factory=list)           # most likely failure point: [(name, z, u, value, nominal)]
    rejected: int = 0
    corners: list = field(default_factory=list)         # tolerances.Corner, the nominal one first
    scale: float | None = None              # exploration scale that found a failure
    method: str = "mixture importance sampling"
    notes: list = field(default_factory=list)

    @property
    def interval(self) -> tuple[float, float]:
        """95 % interval of the failure probability (normal approximation of the estimator)."""
        if not math.isfinite(self.p_fail):
            return float("nan"), float("nan")
        return max(0.0, self.p_fail - Z95 * self.std_err), min(1.0, self.p_fail + Z95 * self.std_err)

    @property
    def equivalent_samples(self) -> float:
        """Brute-force units giving the same standard error: p(1 − p)/σ²."""
        p, s = self.p_fail, self.std_err
        return p * (1 - p) / (s * s) if s > 0 and 0 < p < 1 else float("nan")

    @property
    def beta(self) -> float:
        return self.regions[0].beta if self.regions else float("inf")


class _Evaluator:
    """Evaluates units given by latent coordinates at every operating corner, on the
    frequencies the requirements read (montecarlo.corner_passes), in chunks on threads:
    (fails anything, fails each requirement / the operating point, accepted)."""

    def __init__(self, chain: Chain, names, dists, workers=None):
        self.chain, self.names, self.dists = chain, names, dists
        self.corners = corner_points(chain)
        self.reqs = [r.name for r in chain.extra.get("requirements", [])]
        f_full = frequency_grid(chain)
        self.f_hz = requirement_frequencies(chain, f_full)
        self.chunk = max(1, chunk_size(chain) * len(f_full) // (len(self.corners) * len(self.f_hz)))
        self.workers = min(workers or os.cpu_count() or 1, MAX_WORKERS)
        self.count = 0

    def __call__(self, z: np.ndarray):
        d = draw_from_units(self.chain, dict(zip(self.names, to_units(z, self.dists))), len(z))
        n = len(z)
        self.count += n
        slices = [slice(i, min(i + self.chunk, n)) for i in range(0, n, self.chunk)]
        work = lambda sl: corner_passes(d, sl, self.corners, self.f_hz, _workspace())  # noqa: E731
        with ThreadPoolExecutor(max_workers=max(1, min(self.workers, len(slices)))) as pool:
            parts = list(pool.map(work, slices))
        cpass = np.concatenate([p[0] for p in parts], axis=1)          # (R, n, C)
        cok = np.concatenate([p[1] for p in parts])                    # (n, C)
        acc = d.valid
        every = {name: ~(cok & cpass[i]).all(axis=1) & acc for i, name in enumerate(self.reqs)}
        every["operating point"] = ~cok.all(axis=1) & acc
        return ~(cok & cpass.all(axis=0)).all(axis=1) & acc, every, acc


@dataclass
class _Gauss:
    """One normal component of the sampling mixture: mean, Cholesky factor of the covariance."""
    mean: np.ndarray
    chol: np.ndarray

    @classmethod
    def fit(cls, z: np.ndarray, w: np.ndarray) -> "_Gauss | None":
        """The weighted mean and covariance of failing units (the cross-entropy update of a
        normal family: Rubinstein and Kroese, *The Cross-Entropy Method*, Springer 2004, from
        memory); the identity covariance while the weights hold fewer than 2·D effective units."""
        tot = w.sum()
        if not tot > 0:
            return None
        dim = z.shape[1]
        mean = (w[:, None] * z).sum(axis=0) / tot
        n_eff = tot * tot / (w * w).sum()
        cov = np.eye(dim)
        if n_eff >= 2 * dim:
            dz = z - mean
            cov = (w[:, None] * dz).T @ dz / tot + 1e-2 * np.eye(dim)
        return cls(mean, np.linalg.cholesky(INFLATE * cov))

    def draw(self, rng, n: int) -> np.ndarray:
        return self.mean + rng.standard_normal((n, len(self.mean))) @ self.chol.T

    def log_pdf(self, z: np.ndarray) -> np.ndarray:
        y = np.linalg.solve(self.chol, (z - self.mean).T)                # (D, n)
        logdet = 2.0 * np.log(np.diag(self.chol)).sum()
        return -0.5 * np.einsum("ij,ij->j", y, y) - 0.5 * (len(self.mean) * _LOG_2PI + logdet)


def estimate(chain: Chain, samples: int = 20000, explore: int = 4000, seed: int = 1,
             workers: int | None = None) -> RareResult:
    """The failure probability of a unit of ``chain`` by mixture importance sampling (module
    docstring): ``explore`` units per exploration scale and for the refit, then ``samples``
    weighted units."""
    srcs = sources(chain)
    names, dists = [s[0] for s in srcs], [s[1] for s in srcs]
    trunc = np.array([d == "normal" for d in dists], dtype=bool)
    dim = len(names)
    ev = _Evaluator(chain, names, dists, workers)
    rng = np.random.default_rng([int(seed) & 0xFFFFFFFF, zlib.crc32(b"rare-event")])
    res = RareResult(chain, names, dists, samples, 0, seed, float("nan"), float("nan"), 0, corners=ev.corners)
    nominal_fail, nominal_every, _ = ev(np.zeros((1, dim)))
    if dim == 0:
        res.p_fail, res.std_err = float(nominal_fail[0]), 0.0
        res.notes.append("no tolerances in this spec: every unit is the nominal chain, which "
                         + ("fails" if nominal_fail[0] else "passes"))
        return res
    if nominal_fail[0]:
        what = [k for k, v in nominal_every.items() if v[0]]
        res.notes.append(f"the nominal unit fails ({', '.join(what)}): this is not a rare event, and the "
                         "estimate is plain Monte Carlo (`chainplan spread` shows the distributions)")
        res.regions = [Region(what[0], np.zeros(dim), 0.0)]
        comps, seen = [], None
        res.method = "plain Monte Carlo"
    else:
        comps, seen = _explore(ev, rng, trunc, explore, res)
        if not comps:
            res.p_fail, res.std_err, res.explored = 0.0, 0.0, ev.count
            res.notes.append(f"no unit failed in {ev.count} draws scaled up to {max(EXPLORE_SCALES):g}σ: the "
                             "failure probability is below what this run resolves (no estimate)")
            return res
        res.regions = _boundaries(ev, seen)
    res.explored = ev.count
    z, w, (fail, every, acc) = _mixture_run(ev, rng, trunc, comps, samples)
    res.rejected = int((~acc & (w > 0)).sum())
    res.failures = int((fail & (w > 0)).sum())
    res.p_fail, res.std_err = _ratio(w, fail, acc)
    res.requirements = [(name, *_ratio(w, f, acc)) for name, f in every.items()
                        if name != "operating point" or f.any()]
    if res.p_fail > NOT_RARE and res.method != "plain Monte Carlo":
        res.notes.append(f"failures are not rare here ({100 * res.p_fail:.3g} %): plain Monte Carlo "
                         "(`chainplan spread`) measures this as precisely, with the distributions")
    if res.failures < MIN_FAILURES:
        res.notes.append(f"only {res.failures} failing units among the {samples} weighted ones: the interval "
                         f"is rough (the normal approximation wants {MIN_FAILURES} or more); raise -n")
    if res.beta == 0:
        return res
    best = res.regions[0].shift[None, :]
    u = to_units(best, dists)
    d = draw_from_units(chain, dict(zip(names, u)))
    nominal = draw_from_units(chain, {n: np.zeros(1) for n in names})
    res.point = sorted(((n, float(best[0, j]), float(u[j][0]), float(d.inputs[n][0]), float(nominal.inputs[n][0]))
                        for j, n in enumerate(names)), key=lambda t: -abs(t[1]))
    return res


def _explore(ev, rng, trunc, n, res):
    """Scaled draws (EXPLORE_SCALES) until some unit fails; a normal component fitted to each
    way of failing (requirement or operating point), refitted once on draws from the
    mixture.  Returns (components, {what: nearest failing unit seen})."""
    dim = len(trunc)
    found = None
    for scale in EXPLORE_SCALES:
        z, lq = _scaled(rng, trunc, scale, n)
        w = _weights(log_density(z, trunc), lq)
        _, every, _ = ev(z)
        if any((f & (w > 0)).any() for f in every.values()):
            found = (scale, z, w, every)
            if scale != max(EXPLORE_SCALES):
                break
        elif found is None:
            return [], {}                  # nothing fails even at the widest scale
    scale, z, w, every = found
    res.scale = scale
    sets = [(z, w / n, every)]
    comps = _fit(sets)
    z2, w2, (_, every2, _) = _mixture_run(ev, rng, trunc, list(comps.values()), n)
    sets.append((z2, w2 / n, every2))
    comps = _fit(sets) or comps
    seen = {}
    for zz, ww, ee in sets:
        for what, f in ee.items():
            idx = np.nonzero(f & (ww > 0))[0]
            if idx.size:
                j = idx[np.argmin(np.einsum("ij,ij->i", zz[idx], zz[idx]))]
                if what not in seen or zz[j] @ zz[j] < seen[what] @ seen[what]:
                    seen[what] = zz[j]
    return list(comps.values()), seen


def _scaled(rng, trunc, scale: float, n: int):
    """``n`` draws of N(0, s²·I), the truncated coordinates kept inside |z| < 3 (drawn again),
    and the log of their density."""
    dim = len(trunc)
    z = scale * rng.standard_normal((n, dim))
    for j in np.nonzero(trunc)[0]:
        bad = np.abs(z[:, j]) >= TRUNC
        while bad.any():
            z[bad, j] = scale * rng.standard_normal(int(bad.sum()))
            bad = np.abs(z[:, j]) >= TRUNC
    lq = -0.5 * np.einsum("ij,ij->i", z, z) / scale ** 2 - 0.5 * dim * math.log(2 * math.pi * scale ** 2)
    return z, lq - int(trunc.sum()) * math.log(math.erf(TRUNC / (scale * math.sqrt(2))))


def _fit(sets) -> dict:
    """{what: _Gauss} fitted to the failing units of every set (weights p/q over the set's count)."""
    out = {}
    whats = {k for _, _, e in sets for k in e}
    for what in sorted(whats):
        zs = np.concatenate([z[e[what]] for z, _, e in sets])
        ws = np.concatenate([w[e[what]] for _, w, e in sets])
        g = _Gauss.fit(zs, ws) if zs.size else None
        if g is not None:
            out[what] = g
    return out


def _weights(lp: np.ndarray, lq: np.ndarray) -> np.ndarray:
    """p/q from their logarithms; zero where p is zero."""
    return np.where(np.isfinite(lp), np.exp(lp - lq), 0.0)


def _mixture_run(ev, rng, trunc, comps, n):
    """Draws from ``q = λ·p + (1 − λ)/K·Σ_k N_k``, their weights p/q (≤ 1/λ) and evaluation."""
    k = len(comps)
    dim = len(trunc)
    which = rng.choice(k + 1, size=n, p=[DEFENSIVE] + [(1 - DEFENSIVE) / k] * k) if k else np.zeros(n, int)
    z = rng.standard_normal((n, dim))
    own = which == 0
    for j in np.nonzero(trunc)[0]:        # the unit's own distribution: truncated coordinates redrawn
        bad = own & (np.abs(z[:, j]) >= TRUNC)
        while bad.any():
            z[bad, j] = rng.standard_normal(int(bad.sum()))
            bad = own & (np.abs(z[:, j]) >= TRUNC)
    for i, g in enumerate(comps):
        sel = which == i + 1
        z[sel] = g.draw(rng, int(sel.sum()))
    lp = log_density(z, trunc)
    if not k:                             # the units' own distribution alone: plain Monte Carlo
        return z, np.where(np.isfinite(lp), 1.0, 0.0), ev(z)
    terms = np.column_stack([math.log(DEFENSIVE) + lp]
                            + [math.log((1 - DEFENSIVE) / k) + g.log_pdf(z) for g in comps])
    top = terms.max(axis=1)
    lq = top + np.log(np.exp(terms - top[:, None]).sum(axis=1))
    return z, _weights(lp, lq), ev(z)


def _boundaries(ev, seen: dict) -> list[Region]:
    """Along the ray from the nominal to the nearest failing unit of each way of failing, the
    first grid point where it fails, on a coarse grid then refined inside the step that
    crossed (two engine calls); nearest first."""
    seeds = list(seen.items())
    lo = np.zeros(len(seeds))
    hi = np.ones(len(seeds))
    for points in RAY_POINTS:
        t = np.linspace(0.0, 1.0, points + 1)[1:]                    # fractions of each step
        ts = lo[:, None] + (hi - lo)[:, None] * t[None, :]           # (K, points)
        z = np.concatenate([ts[k][:, None] * s[None, :] for k, (_, s) in enumerate(seeds)])
        _, every, _ = ev(z)
        for k, (what, _) in enumerate(seeds):
            f = every[what][k * points:(k + 1) * points]
            j = int(np.argmax(f)) if f.any() else points - 1
            lo[k], hi[k] = (ts[k][j - 1] if j else lo[k]), ts[k][j]
    regions = [Region(what, hi[k] * s, float(hi[k] * np.linalg.norm(s))) for k, (what, s) in enumerate(seeds)]
    return sorted(regions, key=lambda r: r.beta)


def _ratio(w, fail, acc) -> tuple[float, float]:
    """Σ w·fail / Σ w·accepted and its standard error (delta method for a ratio estimator,
    e.g. Owen, *Monte Carlo theory, methods and examples*, §9, from memory)."""
    num, den = w * fail, w * acc
    m = den.mean()
    if not m > 0:
        return float("nan"), float("nan")
    p = num.mean() / m
    resid = (num - p * den) / m
    return float(p), float(resid.std(ddof=1) / math.sqrt(len(w))) if len(w) > 1 else float("nan")
