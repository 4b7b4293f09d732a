"""The cascade engine: loading-aware two-port analysis of a chain over frequency.

Every stage is an ABCD two-port (stages/base.py).  Two passes over the tree:

* backward: the admittance loading every node, the sum over its readers of
  ``Yin = (C + D·YL)/(A + B·YL)`` (input admittance of a terminated two-port);
* forward: from the source, a row vector ``[A_n, B_n]`` per node such that
  ``Vs = A_n·V + B_n·I`` (I drawn from the node): the product of the source's
  ``[1, Zs]`` with every ABCD matrix on the path.  Then the node voltage is
  ``V = Vs/(A_n + B_n·YL)``, the Thevenin impedance ``Zth = B_n/A_n``, and an
  interface's loading loss ``20·log10|1/(1 + Zth·Yin)|``.

For a fan-out branch the sibling branches' admittance is folded into the row
first, so each branch sees the source as loaded by its siblings.  Working with
admittances and rows keeps ideal stages exact (an open gate has Yin = 0; an
ideal output has B = 0) with no stand-in large numbers.  All arrays are shaped
``(samples, frequencies)``; the four ABCD entries stay separate arrays
(two-port theory as in Pozar, *Microwave Engineering*, ch. 4, from memory).
"""
from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field

import numpy as np

from . import workspace as wsa
from .workspace import Workspace
from ..spec.model import Chain


#: rows are renormalised every RESCALE_DEPTH two-ports along a path, when an entry
#: has left 2^±RESCALE_BITS: stages change a row by far less than 2^(1023 − RESCALE_BITS)
#: each, so no row overflows or underflows in between
RESCALE_DEPTH, RESCALE_BITS = 16, 128


class NodeGains(dict):
    """node -> V_node/Vs = 2^−e·1/(A_n + B_n·Y_n), (S, F), computed when first read:
    most nodes are only ever read at the reference frequency (``at(node, 0)``).
    ``e`` is the node's carried row exponent (``AcResult.row_exp``; 0 in short chains)."""

    def __init__(self, row: dict, node_y: dict, row_exp: dict | None = None):
        super().__init__()
        self.row, self.node_y, self.row_exp = row, node_y, row_exp if row_exp is not None else {}

    def __missing__(self, node):
        h = self[node] = self.at(node)
        return h

    def at(self, node, col=slice(None)):
        """V_node/Vs at frequency columns ``col`` only (0 where it underflows)."""
        h = self.scaled(node, col)
        e = self.row_exp.get(node, 0)
        return h if wsa.plain(e, 0) else h * np.ldexp(1.0, -np.asarray(e)[:, col])

    def scaled(self, node, col=slice(None)):
        """1/(A_n + B_n·Y_n) of the carried (scaled) row: the gain times 2^e (the gain itself
        in short chains).  Noise transfers multiply it with scaled rows before unscaling."""
        if isinstance(col, slice) and col == slice(None) and node in self and wsa.plain(self.row_exp.get(node, 0), 0):
            return self[node]
        a, b = (x[:, col] for x in self.row[node])
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1.0 / (a + b * self.node_y[node][:, col])


@dataclass
class AcResult:
    f_hz: np.ndarray          # (F,)
    node_h: NodeGains         # node -> V_node/Vs, (S, F), computed on first use
    node_y: dict              # node -> total load admittance, (S, F)
    row: dict                 # node -> (A_n, B_n) carried row, driver without siblings (× 2^row_exp)
    branch_row: dict          # stage -> (A, B) carried row seen at its input, siblings folded in
    y_in: dict                # stage -> input admittance as connected, (S, F)
    abcd: dict                # stage -> ABCD of the stage
    #: node -> exponent e (int array (S, F), or 0) with true row = carried row·2^e; a
    #: stage's branch_row carries its parent's exponent
    row_exp: dict = field(default_factory=dict)

    def exp(self, node):
        return self.row_exp.get(node, 0)

    def full_row(self, node):
        """The true row (A_n, B_n) of a node, its carried scale applied (may overflow
        where the chain is very long: ratios of carried rows never do)."""
        return _unscale(self.row[node], self.exp(node))

    def full_branch_row(self, stage, parent):
        """The true row a stage sees at its input (``parent``: the node it reads)."""
        return _unscale(self.branch_row[stage], self.exp(parent))

    def scale_between(self, node, ref):
        """2^(e_node − e_ref): carried rows of ``node`` expressed in the scale of ``ref``
        (plain 1.0 in short chains)."""
        e1, e2 = self.exp(node), self.exp(ref)
        if wsa.plain(e1, 0) and wsa.plain(e2, 0):
            return 1.0
        return np.ldexp(1.0, np.asarray(e1) - np.asarray(e2))


def _unscale(row, e):
    if wsa.plain(e, 0):
        return row
    k = np.ldexp(1.0, np.asarray(e))
    return tuple(x * k for x in row)


def _rescaled(a, b):
    """A row renormalised by a power of two per element (exact): (a', b', e) with
    (a, b) = (a', b')·2^e, or None when every entry is still within 2^±RESCALE_BITS."""
    mag = np.maximum(np.maximum(np.abs(np.real(a)), np.abs(np.imag(a))),
                     np.maximum(np.abs(np.real(b)), np.abs(np.imag(b))))
    _, e = np.frexp(mag)
    if not np.any(np.abs(e) > RESCALE_BITS):
        return None
    k = np.ldexp(1.0, -e)
    return a * k, b * k, e.astype(np.int64)


def run_ac(chain: Chain, params: dict, ops: dict, f_hz: np.ndarray | None, ws: Workspace | None = None,
           s=None) -> AcResult:
    """Both passes over the grid ``f_hz``.  With a :class:`Workspace` the admittances
    and rows are written into its recycled arrays (a Monte Carlo chunk); the values
    are the same as without one.  Or at complex frequencies ``s`` (shape (1, K) or
    (S, K); ``f_hz`` None), e.g. on the negative real axis (engine/startup.py)."""
    if s is None:
        s = (2j * np.pi * np.asarray(f_hz, dtype=float))[None, :]
    else:
        f_hz = np.full(np.shape(s)[-1], np.nan)
    abcd, y_in = {}, {}
    zero = 0.0 * s
    node_y = {n: zero for n in chain.nodes}
    own_y = set()                                          # node sums written into arrays of ours
    for st in reversed(chain.stages):                      # backward: loads
        p, op = params[st.name], ops[st.name]
        if st.role == "load":
            y = st.model.load_admittance(p, s, op) + zero
        else:
            m = abcd[st.name] = st.model.abcd(p, s, op)
            yl = node_y[st.name]
            y = _input_admittance(m, yl if yl is not zero else 0.0, ws)
            if np.ndim(y) < 2 or np.shape(y)[1] != s.shape[1]:
                y = y + zero                               # every admittance over the whole grid
        y_in[st.name] = y
        total = node_y[st.parent]
        if total is zero:
            node_y[st.parent] = y                          # one reader: its admittance is the node's
        elif st.parent in own_y:
            node_y[st.parent] = wsa.add_into(total, y)
        else:
            node_y[st.parent] = wsa.add(total, y, ws)
            own_y.add(st.parent)
    src = chain.source
    row = {src.name: src.model.source_row(params[src.name], s)}   # (1, Zs) or Norton (Ys, 1)
    branch_row, row_exp, depth = {}, {}, {src.name: 0}
    readers = Counter(st.parent for st in chain.stages)
    for st in chain.stages:                                 # forward: Thevenin rows
        a, b = row[st.parent]
        if readers[st.parent] > 1:                          # siblings folded in
            others = np.subtract(node_y[st.parent], y_in[st.name], out=wsa.lend(ws, node_y[st.parent], y_in[st.name]))
            a = wsa.mul_add(a, b, others, ws)
        branch_row[st.name] = (a, b)
        if st.role == "two_port":
            m = abcd[st.name]
            row[st.name] = (wsa.dot2(a, m.A, b, m.C, ws), wsa.dot2(a, m.B, b, m.D, ws))
            e = row_exp.get(st.parent, 0)
            depth[st.name] = depth[st.parent] + 1
            if depth[st.name] % RESCALE_DEPTH == 0:          # long chains: keep the row in range
                r = _rescaled(*row[st.name])
                if r is not None:
                    row[st.name], e = r[:2], r[2] + e
            if not wsa.plain(e, 0):
                row_exp[st.name] = e
    return AcResult(np.asarray(f_hz, dtype=float), NodeGains(row, node_y, row_exp), node_y, row, branch_row, y_in,
                    abcd, row_exp)


def _input_admittance(m, yl, ws):
    """Yin = (C + D·YL)/(A + B·YL) of a two-port terminated by YL (the quotient written
    into the numerator when that is a fresh array)."""
    num = wsa.mul_add(m.C, m.D, yl, ws)
    den = wsa.mul_add(m.A, m.B, yl, ws)
    return wsa.div(num, den, ws, owned=not any(num is x for x in (m.C, m.D, yl)))
