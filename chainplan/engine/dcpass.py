"""DC operating point of a whole chain: DC level of every node, each stage's
operating point, and the allowed voltage range at every node.

Loads are passed backward as Norton equivalents (I = G·V − I0), sources forward
as affine relations (e = a·V + b·I); active stages solve their own nonlinear
bias with the load current included (see stages/base.py).  Base currents make
the loads depend on the operating points, so the two passes repeat until the
levels settle.  Each stage that draws input current reports it linearised at
its last bias (``dIB/dVB``), which makes the repetition a Newton iteration
(Newton–Raphson, any numerical-analysis text): a plain fixed point (constant
base current) contracts by Rsource/(rπ + (β + 1)·RE) per round, so it crawls
or diverges for the high-impedance sensors this tool is for."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..spec.model import Chain
from ..stages.base import DcLoad, DcState, Op, dc_node_voltage, dc_with_sibling


@dataclass
class DcResult:
    node_v: dict            # node -> DC volts
    ops: dict               # stage -> Op
    limits: dict            # node -> (low, high) allowed volts
    limit_by: dict          # node -> (stage setting the low limit, stage setting the high limit)
    #: node -> (cause of the low limit, of the high limit) where it is not the stage's plain range,
    #: e.g. 'class A' (engine/swing.py)
    limit_cause: dict = field(default_factory=dict)


#: Newton rounds at most, and the settling tolerance on every node level (V).
MAX_ROUNDS, SETTLED_V = 60, 1e-9


def solve_dc(chain: Chain, params: dict, rounds: int | None = None, bad_settles_after: int | None = None) -> DcResult:
    """DC levels and operating points; ``rounds`` fixes the number of passes
    (default: one, or repeat until every level moves less than SETTLED_V).
    ``bad_settles_after``: from that round on, a sample whose operating point is impossible
    (some stage's ``bad``) counts as settled — its figures are discarded as invalid anyway,
    and such a sample can swing between two impossible states for all MAX_ROUNDS
    rounds, holding up every other sample of a batch (the placement search's region
    batches); samples are independent, so the others' numbers do not change."""
    iterate = any(st.model.draws_input_current for st in chain.stages)
    ops: dict[str, Op | None] = {st.name: None for st in chain.all_stages}
    node_v = None
    for k in range(rounds or (MAX_ROUNDS if iterate else 1)):
        loads = _backward(chain, params, ops)
        new_v, ops = _forward(chain, params, loads)
        skip = _bad(ops) if bad_settles_after is not None and k >= bad_settles_after else None
        settled = node_v is not None and all(_settled(new_v[n], node_v[n], skip) for n in new_v)
        node_v = new_v
        if settled and rounds is None:
            break
    res = DcResult(node_v, ops, *_limits(chain, ops))
    _no_rail_causes(chain, ops, res)
    return res


def _bad(ops) -> np.ndarray | None:
    """Samples with an impossible operating point in any stage ((S, 1) bool), or None."""
    out = None
    for op in ops.values():
        b = getattr(op, "bad", False)
        if b is not False and np.ndim(b):
            out = np.asarray(b, dtype=bool) if out is None else (out | b)
    return out


def _settled(new, old, skip=None) -> bool:
    d = np.abs(np.asarray(new) - np.asarray(old))
    ok = (d <= SETTLED_V) | (np.isnan(new) & np.isnan(old))
    if skip is not None and np.ndim(ok) and np.shape(ok)[0] == np.shape(skip)[0]:
        ok = ok | skip
    return bool(np.all(ok))


def _backward(chain, params, ops):
    """Input DC load of every stage and total DC load at every node."""
    stage_in: dict[str, DcLoad] = {}
    # a leakage current into a node (board, capacitor) that an error analysis switches on: I0 of the node
    node_load: dict[str, DcLoad] = {n: DcLoad(0.0, params[n].get("_leak_a", 0.0)) for n in chain.nodes}
    for st in reversed(chain.stages):
        out = node_load.get(st.name, DcLoad(0.0, 0.0))
        ld = st.model.dc_input_load(params[st.name], out, ops.get(st.name))
        stage_in[st.name] = ld
        tot = node_load[st.parent]
        node_load[st.parent] = DcLoad(tot.G + ld.G, tot.I0 + ld.I0)
    return stage_in, node_load


def _forward(chain, params, loads):
    stage_in, node_load = loads
    src = chain.source
    states: dict[str, DcState] = {src.name: src.model.dc_state(params[src.name])}
    node_v = {src.name: dc_node_voltage(states[src.name], node_load[src.name])}
    ops: dict[str, Op] = {src.name: Op()}
    for st in chain.stages:
        own = stage_in[st.name]
        tot = node_load[st.parent]
        sib = DcLoad(tot.G - own.G, tot.I0 - own.I0)
        st_in = dc_with_sibling(states[st.parent], sib)
        out_load = node_load.get(st.name, DcLoad(0.0, 0.0))
        st_out, op = st.model.dc_forward(params[st.name], st_in, node_v[st.parent], out_load)
        ops[st.name] = op
        if st.role == "two_port":
            states[st.name] = st_out = _normalised(st_out)
            node_v[st.name] = dc_node_voltage(st_out, out_load)
    return node_v, ops


def _normalised(st: DcState) -> DcState:
    """The same source relation with e, a, b scaled by one power of two (exact) when they
    have left 2^±128: ``e = a·V + b·I`` is homogeneous, and a long passive ladder would
    otherwise grow a and b past the float range (a chain of 1 000 dividers: 2^1000)."""
    mag = np.maximum(np.abs(st.a), np.abs(st.b))
    if not np.any((mag > 2.0 ** 128) | ((mag < 2.0 ** -128) & (mag > 0))):
        return st
    _, e = np.frexp(mag)
    k = np.ldexp(1.0, -e)
    return DcState(st.e * k, st.a * k, st.b * k)


def _no_rail_causes(chain, ops, res) -> None:
    """``limit_cause[node]`` = 'no rail' on a side left unlimited because a stage at the node
    (its driver or a reader) is declared without a rail there (an op-amp's 'v_pos: inf')."""
    for node in chain.nodes:
        lo, hi = res.limits[node]
        at = [ops[node], *(ops[rd.name] for rd in chain.readers(node))]
        low = "no rail" if not np.any(np.isfinite(lo)) and any(o.no_rail[0] for o in at) else None
        high = "no rail" if not np.any(np.isfinite(hi)) and any(o.no_rail[1] for o in at) else None
        if low or high:
            res.limit_cause[node] = (low, high)


def _limits(chain, ops):
    """Allowed range at each node: the tighter of the driver's output range and
    every reader's input range."""
    limits, limit_by = {}, {}
    for node in chain.nodes:
        lo, hi = ops[node].out_range
        lo_by = node if np.all(np.isfinite(lo)) else None
        hi_by = node if np.all(np.isfinite(hi)) else None
        for rd in chain.readers(node):
            rlo, rhi = ops[rd.name].in_range
            if np.all(np.asarray(rlo) > np.asarray(lo)):
                lo, lo_by = rlo, rd.name
            if np.all(np.asarray(rhi) < np.asarray(hi)):
                hi, hi_by = rhi, rd.name
            lo, hi = np.maximum(lo, rlo), np.minimum(hi, rhi)
        limits[node] = (lo, hi)
        limit_by[node] = (lo_by, hi_by)
    return limits, limit_by
