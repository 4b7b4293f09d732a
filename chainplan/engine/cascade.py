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
from dataclasses import dataclass

import numpy as np

from ..spec.model import Chain


class NodeGains(dict):
    """node -> V_node/Vs = 1/(A_n + B_n·Y_n), (S, F), computed when first read:
    most nodes are only ever read at the reference frequency (``at(node, 0)``)."""

    def __init__(self, row: dict, node_y: dict):
        super().__init__()
        self.row, self.node_y = row, node_y

    def __missing__(self, node):
        h = self[node] = self.at(node)
        return h

    def at(self, node, col=slice(None)):
        """V_node/Vs at frequency columns ``col`` only."""
        a, b = (x[:, col] for x in self.row[node])
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1.0 / (a + b * self.node_y[node][:, col])


@dataclass
class AcResult:
    f_hz: np.ndarray          # (F,)
    node_h: NodeGains         # node -> V_node/Vs, (S, F), computed on first use
    node_y: dict              # node -> total load admittance, (S, F)
    row: dict                 # node -> (A_n, B_n), driver row without siblings
    branch_row: dict          # stage -> (A, B) row seen at its input, siblings folded in
    y_in: dict                # stage -> input admittance as connected, (S, F)
    abcd: dict                # stage -> ABCD of the stage


def run_ac(chain: Chain, params: dict, ops: dict, f_hz: np.ndarray) -> AcResult:
    s = (2j * np.pi * np.asarray(f_hz, dtype=float))[None, :]
    abcd, y_in = {}, {}
    node_y = {n: 0.0 * s for n in chain.nodes}
    for st in reversed(chain.stages):                      # backward: loads
        p, op = params[st.name], ops[st.name]
        if st.role == "load":
            y = st.model.load_admittance(p, s, op) + 0.0 * s
        else:
            m = abcd[st.name] = st.model.abcd(p, s, op)
            yl = node_y[st.name]
            y = (m.C + m.D * yl) / (m.A + m.B * yl)
        y_in[st.name] = y
        node_y[st.parent] = node_y[st.parent] + y
    src = chain.source
    row = {src.name: src.model.source_row(params[src.name], s)}   # (1, Zs) or Norton (Ys, 1)
    branch_row = {}
    readers = Counter(st.parent for st in chain.stages)
    for st in chain.stages:                                 # forward: Thevenin rows
        a, b = row[st.parent]
        a_br = a + b * (node_y[st.parent] - y_in[st.name]) if readers[st.parent] > 1 else a   # siblings
        branch_row[st.name] = (a_br, b)
        if st.role == "two_port":
            m = abcd[st.name]
            row[st.name] = (a_br * m.A + b * m.C, a_br * m.B + b * m.D)
    return AcResult(np.asarray(f_hz, dtype=float), NodeGains(row, node_y), node_y, row, branch_row, y_in, abcd)
