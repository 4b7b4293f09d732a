"""Work arrays for the hot loops, recycled from one Monte Carlo chunk to the next.

A tolerance run evaluates the chain chunk after chunk; every chunk needs the
same few dozen ``(samples, frequencies)`` complex arrays (admittances, rows).
Allocating them fresh costs more than the arithmetic: the C allocator hands
arrays of about a megabyte back to the kernel when they are freed, and every
new one is mapped and zeroed page by page again (measured: about a third of the
CPU time of a run).  A :class:`Workspace` keeps them: ``empty`` lends an array,
``recycle`` takes every lent array back once the chunk's results are copied
out.  The arithmetic helpers write into lent arrays (numpy's ``out=``) and skip
the plain 0 and 1 of series and shunt sections; with ``ws=None`` they allocate
as plain numpy does.  The values are the same either way: the same operations
in the same order.
"""
from __future__ import annotations

import numpy as np


class Workspace:
    """A pool of arrays by (shape, dtype); one per thread (the arrays are not shared)."""

    def __init__(self):
        self._free: dict = {}
        self._lent: list = []

    def empty(self, shape, dtype=np.complex128) -> np.ndarray:
        """An uninitialised array, recycled when one of that shape and dtype is free."""
        pool = self._free.get((shape, np.dtype(dtype)))
        a = pool.pop() if pool else np.empty(shape, dtype)
        self._lent.append(a)
        return a

    def recycle(self) -> None:
        """Take back every lent array: whatever was computed in them is overwritten later."""
        for a in self._lent:
            self._free.setdefault((a.shape, a.dtype), []).append(a)
        self._lent = []


def plain(x, v) -> bool:
    """``x`` is the Python number ``v`` (the 0 and 1 of series and shunt sections)."""
    return type(x) in (float, int) and x == v


def _out(ws, x, y):
    """A lent array for the result of ``x ∘ y`` when it is a 2-D array, else None (numpy allocates)."""
    if ws is None:
        return None
    shape = np.broadcast_shapes(np.shape(x), np.shape(y))
    if len(shape) != 2:
        return None
    return ws.empty(shape, np.result_type(x, y))


def mul(x, y, ws=None):
    """x·y, skipping a plain 1 or 0."""
    if plain(x, 1.0):
        return y
    if plain(y, 1.0):
        return x
    if plain(x, 0.0) or plain(y, 0.0):
        return 0.0
    return np.multiply(x, y, out=_out(ws, x, y))


def _owned_add(t, x, ws):
    """t + x where ``t`` is a fresh result of ours: added in place when it can hold the sum."""
    if plain(x, 0.0):
        return t
    if (isinstance(t, np.ndarray) and t.ndim == 2 and np.broadcast_shapes(t.shape, np.shape(x)) == t.shape
            and np.result_type(t, x) == t.dtype):
        return np.add(t, x, out=t)
    return np.add(x, t, out=_out(ws, x, t))


def add(x, y, ws=None):
    """x + y, skipping a plain 0."""
    if plain(x, 0.0):
        return y
    if plain(y, 0.0):
        return x
    return np.add(x, y, out=_out(ws, x, y))


def mul_add(x, y, z, ws=None):
    """x + y·z, skipping plain 0 and 1, with one array written (the product, then the sum into it)."""
    if plain(y, 0.0) or plain(z, 0.0):
        return x
    if plain(y, 1.0) or plain(z, 1.0):
        return add(x, z if plain(y, 1.0) else y, ws)
    return _owned_add(np.multiply(y, z, out=_out(ws, y, z)), x, ws)


def dot2(x1, y1, x2, y2, ws=None):
    """x1·y1 + x2·y2, skipping plain 0 and 1 (a row times a matrix column)."""
    if plain(x1, 0.0) or plain(y1, 0.0):
        return mul(x2, y2, ws)
    if plain(x2, 0.0) or plain(y2, 0.0):
        return mul(x1, y1, ws)
    if plain(x1, 1.0) or plain(y1, 1.0):
        return mul_add(y1 if plain(x1, 1.0) else x1, x2, y2, ws)
    first = np.multiply(x1, y1, out=_out(ws, x1, y1))
    if plain(x2, 1.0) or plain(y2, 1.0):
        return _owned_add(first, y2 if plain(x2, 1.0) else x2, ws)
    second = np.multiply(x2, y2, out=_out(ws, x2, y2))
    return _owned_add(first, second, ws)


def div(x, y, ws=None, owned: bool = False):
    """x/y; into ``x`` itself when it is a fresh result of ours (``owned``) that can hold the quotient."""
    if plain(y, 1.0):
        return x
    if (owned and isinstance(x, np.ndarray) and x.ndim == 2 and np.broadcast_shapes(x.shape, np.shape(y)) == x.shape
            and np.result_type(x, y) == x.dtype):
        return np.divide(x, y, out=x)
    return np.divide(x, y, out=_out(ws, x, y))


def add_into(t, x):
    """t += x for a node sum of ours (an array that holds the sum)."""
    if plain(x, 0.0):
        return t
    if np.broadcast_shapes(t.shape, np.shape(x)) == t.shape and np.result_type(t, x) == t.dtype:
        return np.add(t, x, out=t)
    return t + x


def lend(ws, x, y):
    """A lent array for ``x ∘ y`` (None without a workspace)."""
    return _out(ws, x, y)
