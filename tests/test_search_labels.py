"""The label machinery of the placement search against plain definitions: the Pareto filter
keeps exactly the labels no other label dominates (checked pair by pair in Python), and the
interval cover used for feasibility keeps the union of the accepted upstream gains."""
from __future__ import annotations

import numpy as np

from chainplan.placement.labels import REL, Labels, nondominated, order
from chainplan.placement.search import interval_cover


def naive_front(lb: Labels) -> list[int]:
    """Label b survives unless some a dominates it (the earlier of two that dominate each other
    is kept): cost lower, or tied and fewer buffers, or also tied and no more parts; lo no higher
    and hi no lower in every column."""
    def dom(a, b):
        tol = REL * max(abs(lb.cost[a]), abs(lb.cost[b]), 1e-30)
        d = lb.cost[a] - lb.cost[b]
        cheaper = d < -tol or (abs(d) <= tol and (lb.nbuf[a] < lb.nbuf[b] or
                                                  (lb.nbuf[a] == lb.nbuf[b] and lb.parts[a] <= lb.parts[b])))
        return cheaper and np.all(lb.lo[a] <= lb.lo[b] * (1 + REL)) and np.all(lb.hi[a] * (1 + REL) >= lb.hi[b])
    n = len(lb)
    return [b for b in range(n)
            if not any(a != b and dom(a, b) and (not dom(b, a) or a < b) for a in range(n))]


def test_pareto_filter_matches_the_definition():
    rng = np.random.default_rng(7)
    for _ in range(60):
        n = int(rng.integers(2, 60))
        lb = Labels(cost=rng.integers(0, 4, n) * 0.1, nbuf=rng.integers(0, 3, n).astype(float),
                    parts=rng.integers(0, 3, n).astype(float), power=rng.random(n),
                    lo=rng.integers(0, 4, (n, 2)) * 1.0, hi=rng.integers(3, 7, (n, 2)) * 1.0)
        lb = lb.take(order(lb))
        assert list(nondominated(lb, None, None)) == naive_front(lb)


def test_interval_cover_keeps_the_union():
    rng = np.random.default_rng(3)
    points = np.linspace(-1.0, 27.0, 561)
    for _ in range(300):
        n = int(rng.integers(1, 30))
        lo = rng.integers(0, 20, n) * 1.0
        hi = lo + rng.integers(0, 6, n)
        k = interval_cover(lo, hi)
        covered = [np.any((lo <= p) & (p <= hi)) for p in points]
        assert [np.any((lo[k] <= p) & (p <= hi[k])) for p in points] == covered
        assert len(k) <= len(set(zip(lo, hi)))
