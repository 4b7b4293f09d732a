"""Small vectorised numerical helpers used by the DC operating-point solvers."""
from __future__ import annotations

import numpy as np


def bisect(f, lo, hi, iterations: int = 80):
    """Root of a decreasing function ``f`` on [lo, hi], elementwise over arrays.

    Plain bisection: 80 halvings take a 50 V bracket below 1e-22 V, robust for
    the monotone device equations here and free of Python loops over samples."""
    lo = np.array(lo, dtype=float, copy=True)
    hi = np.array(hi, dtype=float, copy=True)
    lo, hi = np.broadcast_arrays(lo, hi)
    lo, hi = lo.copy(), hi.copy()
    for _ in range(iterations):
        mid = 0.5 * (lo + hi)
        pos = f(mid) > 0
        lo = np.where(pos, mid, lo)
        hi = np.where(pos, hi, mid)
    return 0.5 * (lo + hi)
