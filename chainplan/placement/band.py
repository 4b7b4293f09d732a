"""Band-edge bounds of the placement search (``chainplan.placement.search``).

A completion label carries its response shape s(f) = |T(f)/T(f_ref)| over the
span (T: the transfer from the state's input node to the output); a state
knows the range [u_lo(f), u_hi(f)] of the upstream response u(f) = |V_X(f)/V_X(f_ref)|
over every placement that reaches it (the forward pass multiplies the regions'
own responses).  The whole chain's normalised response is u·s, exactly,
because a cut separates the two sides.

The engine's −3 dB edges (``Evaluation.band_edges``) are measured from the
*passband gain*: the gain at ``analysis.mid_band`` when the spec declares one
(log-log interpolation between the two grid points around it), else the
largest gain over the signal band (or over the span).  The edge above is the
first grid point beyond the passband frequency below 1/√2 of it, interpolated
towards the point before (and mirrored below).

*Declared mid-band* (a fixed reference): the response divided by its own
value at mid-band, s/s_mid, multiplies like s does (the interpolation is a
geometric mean, so the reference of a product is the product of the
references), and the edge moves monotonically with every point of it between
the mid-band and the limit.  Exact rules:

* a label is dropped when, with the most favourable upstream at every point,
  some point strictly inside the required band still falls below 1/√2
  (``need``): the edge would lie inside;
* in the dominance comparison a point is capped at +inf where even the least
  favourable upstream keeps it at or above 1/√2 (the edge cannot fall there,
  so no other label can do better at that point); in the grid cell that holds
  the limit the engine interpolates between two points, so the inner one is
  capped only when the outer one is.

*Largest gain in the band* (no mid-band): the reference is the peak of the
response itself, and raising the response at the peak raises the threshold,
so the edge is **not** monotone in the response.  Exact rules that hold
there:

* the peak can only lie where the response with the most favourable upstream
  reaches the lowest possible peak (u_hi·s ≥ max u_lo·s over the band);
* a label whose every point from the first such place out to the limit's grid
  cell stays at or above 1/√2 of the highest peak any upstream could give
  (u_lo·s ≥ max u_hi·s / √2) meets the edge whatever is placed upstream: its
  response is capped at +inf in the comparison;
* a label below 1/√2 of the lowest possible peak at a point beyond every place
  the peak can lie and inside the required band is dropped;
* otherwise two labels are compared on equality of their responses over the
  band and the edge ranges (proportional responses have the same edges): a
  label that is not sure of its edge is dominated only by one that is, or by
  one with the same response.  Exact, but it prunes little where the edges
  are tight — there the time limit of the search is what bounds it.
"""
from __future__ import annotations

import math
import types

import numpy as np

from ..engine.budget import Evaluation, frequency_grid
from ..spec.model import Chain
from .labels import REL

SQRT_HALF = math.sqrt(0.5)


class BandRule:
    """The band-edge tests of one run (targets ``t`` on ``chain``)."""

    def __init__(self, chain: Chain, t):
        self.chain, self.t = chain, t
        span = self.span = frequency_grid(chain)[1:]
        a = chain.analysis
        self.fixed = a.mid_band_hz is not None
        if self.fixed:
            mid = a.mid_band_hz
            lf = np.log10(span)
            j = int(np.clip(np.searchsorted(lf, math.log10(mid)) - 1, 0, span.size - 2))
            self.ref = (j, (math.log10(mid) - lf[j]) / (lf[j + 1] - lf[j]))
            split = mid
            self.band = np.zeros(span.size, dtype=bool)
        else:
            band = a.band_hz
            self.band = np.ones(span.size, dtype=bool) if band is None else (span >= band[0]) & (span <= band[1])
            if not self.band.any():
                self.band[:] = True
            split = None
        self.masks = []
        b_idx = np.nonzero(self.band)[0]
        if t.min_f_high_hz is not None:
            F = t.min_f_high_hz
            past = np.nonzero(span >= F)[0]
            last = past[0] if len(past) else span.size - 1
            if self.fixed:
                below = np.nonzero(span <= split)[0]
                first = below[-1] if len(below) else 0
                need = (span > split) & (span < F)
            else:
                first = b_idx[0]
                need = (span > span[b_idx[-1]]) & (span < F)
            rel = np.zeros(span.size, dtype=bool)
            rel[first:last + 1] = True
            n = int(rel.sum())
            cell = (n - 2, n - 1) if n >= 2 and len(past) else (None, None)
            self.masks.append((need, rel, *cell))
        if t.max_f_low_hz is not None:
            F = t.max_f_low_hz
            before = np.nonzero(span <= F)[0]
            first = before[-1] if len(before) else 0
            if self.fixed:
                above = np.nonzero(span > split)[0]
                last = above[0] if len(above) else span.size - 1
                need = (span <= split) & (span > F)
            else:
                last = b_idx[-1]
                need = (span < span[b_idx[0]]) & (span > F)
            rel = np.zeros(span.size, dtype=bool)
            rel[first:last + 1] = True
            n = int(rel.sum())
            cell = (1, 0) if n >= 2 and len(before) else (None, None)
            self.masks.append((need, rel, *cell))
        self.cols = self.band.copy()
        for _, rel, _, _ in self.masks:
            self.cols |= rel

    def _at_ref(self, x: np.ndarray) -> np.ndarray:
        """The value at mid-band (log-log interpolation), per row of x (n, P) or of x (P,)."""
        j, w = self.ref
        x = np.maximum(x, 1e-300)
        return x[..., j] ** (1 - w) * x[..., j + 1] ** w

    def possible(self, shape: np.ndarray, has: np.ndarray, ulo: np.ndarray, uhi: np.ndarray) -> np.ndarray:
        """Labels that can still meet every targeted edge with the most favourable upstream."""
        ok = np.ones(len(shape), dtype=bool)
        with np.errstate(all="ignore"):
            if self.fixed:
                best = shape * uhi / self._at_ref(ulo) / self._at_ref(shape)[:, None]
                thr = SQRT_HALF
            else:
                first, last, peak_lo, _ = self._peak_window(shape, ulo, uhi)
                low = (shape * uhi) < SQRT_HALF * peak_lo[:, None] * (1 - REL)
                j = np.arange(shape.shape[1])[None, :]
                span = self.span
                if self.t.min_f_high_hz is not None:      # beyond every place the peak can be, inside the band
                    ok &= ~np.any(low & (j > last[:, None]) & (span < self.t.min_f_high_hz)[None, :], axis=1)
                if self.t.max_f_low_hz is not None:
                    ok &= ~np.any(low & (j < first[:, None]) & (span > self.t.max_f_low_hz)[None, :], axis=1)
                return ok | ~has
            for need, _, _, _ in self.masks:
                if need.any():
                    ok &= ~np.any(best[:, need] < thr * (1 - REL), axis=1)
        return ok | ~has

    def key(self, shape: np.ndarray, has: np.ndarray, ulo: np.ndarray, uhi: np.ndarray) -> np.ndarray:
        """Dominance columns (n, K): larger is better in every column (see the module docstring)."""
        with np.errstate(all="ignore"):
            if self.fixed:
                s = shape / self._at_ref(shape)[:, None]
                low = ulo / self._at_ref(uhi)
                cols = []
                for _, rel, inner, outer in self.masks:
                    sr = s[:, rel]
                    sure = sr * low[rel] >= SQRT_HALF * (1 + REL)
                    if inner is not None:
                        sure[:, inner] &= sure[:, outer]
                    cols.append(np.where(sure, np.inf, sr))
                key = np.concatenate(cols, axis=1)
            else:
                sure = self._peak_sure(shape, ulo, uhi)
                c = shape[:, self.cols]
                key = np.where(sure[:, None], np.inf, np.concatenate((c, -c), axis=1))
        return np.where(has[:, None], key, -np.inf)

    def _peak_window(self, shape, ulo, uhi):
        """Per label, the first and last span points where the passband peak can lie (the
        response there can reach the lowest possible peak), the highest possible peak, and the
        points at or above 1/√2 of it for every upstream."""
        hi_resp, lo_resp = shape * uhi, shape * ulo
        peak_lo = np.max(np.where(self.band, lo_resp, -np.inf), axis=1)
        peak_hi = np.max(np.where(self.band, hi_resp, -np.inf), axis=1)
        can = self.band & (hi_resp >= peak_lo[:, None] * (1 - REL))
        S = shape.shape[1]
        first = np.argmax(can, axis=1)
        last = S - 1 - np.argmax(can[:, ::-1], axis=1)
        good = lo_resp >= SQRT_HALF * (1 + REL) * peak_hi[:, None]
        return first, last, peak_lo, good

    def _peak_sure(self, shape, ulo, uhi) -> np.ndarray:
        """Labels that meet every targeted edge whatever the upstream, the passband being the
        largest gain in the band: every point from where the peak can lie out to the limit's grid
        cell stays at or above 1/√2 of the highest possible peak."""
        first, last, _, good = self._peak_window(shape, ulo, uhi)
        bad = np.cumsum(~good, axis=1)
        pad = np.concatenate((np.zeros((len(shape), 1), dtype=bad.dtype), bad), axis=1)   # pad[:, j] = bad before j
        rows = np.arange(len(shape))
        sure = np.ones(len(shape), dtype=bool)
        span = self.span
        if self.t.min_f_high_hz is not None:
            past = np.nonzero(span >= self.t.min_f_high_hz)[0]
            outer = past[0] if len(past) else span.size - 1
            sure &= (pad[rows, outer + 1] - pad[rows, np.minimum(first, outer)]) == 0
        if self.t.max_f_low_hz is not None:
            before = np.nonzero(span <= self.t.max_f_low_hz)[0]
            outer = before[-1] if len(before) else 0
            sure &= (pad[rows, np.maximum(last, outer) + 1] - pad[rows, outer]) == 0
        return sure

    def edges(self, shape: np.ndarray) -> tuple[float, float]:
        """−3 dB edges of a normalised response over the span, by the engine's own definition
        (``Evaluation.band_edges``); no edge: 0 below, inf above."""
        mag = np.concatenate(([1.0], shape))[None, :]
        shim = types.SimpleNamespace(gain=lambda node=None: mag, span=self.span, chain=self.chain)
        lo, hi = Evaluation.band_edges(shim)
        lo, hi = float(lo[0]), float(hi[0])
        return (0.0 if math.isnan(lo) else lo), (math.inf if math.isnan(hi) else hi)

    def meets(self, shape: np.ndarray) -> bool:
        f_lo, f_hi = self.edges(shape)
        t = self.t
        if t.min_f_high_hz is not None and f_hi < t.min_f_high_hz * (1 - REL):
            return False
        if t.max_f_low_hz is not None and f_lo > t.max_f_low_hz * (1 + REL):
            return False
        return True
