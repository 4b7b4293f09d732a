"""Pareto labels of the placement search, held as arrays.

A label summarises one completion of the chain below a search state: its cost
and number of buffers, the supply power of its followers, the interval
``[lo, hi]`` of upstream gains |V_X/Vs| it accepts at each gain frequency,
and — when a band edge is targeted — its normalised response shape.  Labels
live in one :class:`Pool` (rows of parallel arrays); a state's labels are a
contiguous range of rows.  Dominance (see :func:`nondominated`) is decided for
a whole set at once, in blocks of rows so memory stays bounded.
"""
from __future__ import annotations

import numpy as np

REL = 1e-9          # relative tolerance of feasibility and cost-tie decisions


class Labels:
    """A set of labels as arrays (n rows): cost, nbuf (buffers), parts (parts they add), power,
    lo (n, C), hi (n, C), shape (n, P) or None, has_shape (n,), and back pointers: state, shape
    index and child label (−1 none)."""

    FIELDS = ("cost", "nbuf", "parts", "power", "lo", "hi", "shape", "has_shape", "state", "d", "kid")

    def __init__(self, **arrays):
        for f in self.FIELDS:
            setattr(self, f, arrays.get(f))

    def __len__(self) -> int:
        return len(self.cost)

    def take(self, idx) -> "Labels":
        return Labels(**{f: (None if getattr(self, f) is None else getattr(self, f)[idx]) for f in self.FIELDS})

    @staticmethod
    def concat(parts: list) -> "Labels":
        parts = [p for p in parts if len(p)]
        if not parts:
            return Labels(cost=np.zeros(0))
        out = {}
        for f in Labels.FIELDS:
            vals = [getattr(p, f) for p in parts]
            out[f] = None if any(v is None for v in vals) else np.concatenate(vals)
        return Labels(**out)


class Pool:
    """Every label of a run, in arrays that grow by doubling; a state's labels are the rows
    ``start[state]`` to ``end[state]`` (none until added)."""

    def __init__(self, states: int):
        self.size = 0
        self.start, self.end = np.zeros(states, dtype=int), np.zeros(states, dtype=int)
        self.store: dict = {}

    def add(self, state: int, labels: Labels) -> None:
        n = len(labels)
        self.start[state], self.end[state] = self.size, self.size + n
        if not n:
            return
        for f in Labels.FIELDS:
            v = getattr(labels, f)
            if v is None:
                continue
            have = self.store.get(f)
            if have is None or len(have) < self.size + n:
                cap = max(64, 2 * (self.size + n))
                grown = np.zeros((cap, *v.shape[1:]), dtype=v.dtype)
                if have is not None:
                    grown[:self.size] = have[:self.size]
                self.store[f] = have = grown
            have[self.size:self.size + n] = v
        self.size += n

    def take(self, idx) -> Labels:
        return Labels(**{f: a[idx] for f, a in self.store.items()})


def nondominated(lb: Labels, p_floor, shape_key, check=None) -> np.ndarray:
    """Indices of the labels no other label dominates, the labels sorted by :func:`order` first;
    of two that dominate each other within the tolerance the first is kept.  ``a`` dominates ``b``
    when it costs no more (a cost within REL is a tie, then fewer buffers, then fewer parts), draws no more power
    (above ``p_floor``, the power no upstream can push over the limit; None: power is free), needs
    no more upstream gain (lo) and tolerates no less (hi), and has a ``shape_key`` (n, K) at least
    as high in every column (the response at the frequencies that can move a required band edge,
    +inf where the label meets that edge whatever the upstream; None: no band edge targeted)."""
    n = len(lb)
    if n <= 1:
        return np.arange(n)
    cost, nbuf, parts = lb.cost, lb.nbuf, lb.parts
    power = np.maximum(lb.power, p_floor) if p_floor is not None else None
    shape = shape_key

    def dominates(a, b):
        tol = REL * np.maximum(np.maximum(np.abs(cost[a]), np.abs(cost[b])), 1e-30)
        d = cost[a] - cost[b]
        ok = (d < -tol) | ((np.abs(d) <= tol) & ((nbuf[a] < nbuf[b]) | ((nbuf[a] == nbuf[b]) & (parts[a] <= parts[b]))))
        if power is not None:
            ok &= power[a] <= power[b] * (1 + REL) + 1e-30
        ok &= np.all(lb.lo[a] <= lb.lo[b] * (1 + REL), axis=-1)
        ok &= np.all(lb.hi[a] * (1 + REL) >= lb.hi[b], axis=-1)
        if shape is not None:
            ok &= np.all(shape[a] * (1 + REL) >= shape[b], axis=-1)
        return ok

    width = 1 if shape is None else max(1, shape.shape[1])
    if n <= 2048 and n * n * width <= 1 << 24:    # the whole matrix at once: D[i, j] = label i dominates label j
        dom = dominates(np.arange(n)[:, None], np.arange(n)[None, :])
        beaten = dom & (~dom.T | np.tri(n, k=-1, dtype=bool).T)
        np.fill_diagonal(beaten, False)
        return np.nonzero(~beaten.any(axis=0))[0]
    everyone = np.arange(n)
    keep = np.ones(n, dtype=bool)
    step = max(1, min(256, (1 << 24) // (n * width)))     # blocks of rows: memory stays bounded
    for start in range(0, n, step):
        if check is not None:
            check()
        rows = everyone[start:start + step]
        beaten = dominates(rows[:, None], everyone[None, :]) & \
            (~dominates(everyone[None, :], rows[:, None]) | (rows[:, None] < everyone[None, :]))
        beaten[np.arange(len(rows)), rows] = False
        keep &= ~beaten.any(axis=0)
    return np.nonzero(keep)[0]


def order(lb: Labels) -> np.ndarray:
    """Rows sorted by cost, then buffers, then parts, then power."""
    return np.lexsort((lb.power, lb.parts, lb.nbuf, lb.cost))
