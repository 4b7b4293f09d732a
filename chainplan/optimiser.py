"""Exact buffer placement: which candidate buffers to insert at which interfaces
so that the chain meets its targets (minimum end-to-end gain, minimum
headroom at every node, band edges, total follower power) at the least total
cost, ties broken by fewer buffers.

Cost model
----------
``power`` (default): the supply power of the inserted buffers at their
operating points where they are inserted (a follower's Id·(drain − v_low),
an op-amp's i_supply·(v_pos − v_neg), or the parts file's fixed ``power``);
``price``: the sum of the candidates' prices (every candidate must state one);
``parts``: the number of parts they add (``count``).  The default is ``price``
when every candidate states a price, else ``power``.

The search — a shortest path over a DAG of regions, with Pareto labels
---------------------------------------------------------------------
*Cuts.*  Some stages are unilateral in both the AC and the DC sense: their
input admittance and DC input current do not depend on what they drive, and
their output depends only on the voltage of the node they read (op-amp
followers and non-inverting stages, the amplifier macro model, a MOSFET
source follower without Cgs: ABCD with A·D − B·C = 0, Pozar, *Microwave
Engineering*, ch. 4, from memory; gate or fixed R‖C input).  Where such a
stage reads a node — an original stage, or a unilateral candidate inserted
there — the chain splits: nothing downstream changes any voltage upstream,
and everything downstream depends on upstream only through that node's DC
level ``v`` and its signal ``V(f)``.  Bilateral candidates (an emitter follower
draws base current; its input impedance β·R depends on its load) do not cut.

*Regions.*  A region starts at a cut element reading node X (or at the
source) and extends through every stage it drives up to the next cut
elements (its terminators), with the choices (no buffer, or a bilateral
candidate) made at the interfaces inside it.  The engine analyses a region
as a chain of its own, fed by an ideal source at X with DC level ``v`` and
unit signal (``chainplan.budget.evaluate``; the terminators appear as their
input admittance and DC input current only).  A region's node voltages are
then exactly ``V_X(f)·T_n(f)`` and its DC levels, operating points and device
validity are exactly those of the whole chain — whatever is placed elsewhere.

*States* are (cut position, cut element, DC level at its input).  The forward
pass evaluates every region reachable from the source, batching all DC
levels of a state group as the engine's samples; it also bounds, per state,
the upstream gain |V_X/Vs| at the gain frequencies and the upstream follower
power over all upstream placements.

*Labels.*  The backward pass gives every state the Pareto set of its
completions, each completion (the regions below the state) summarised by
cost, number of buffers, follower power, and what it needs from upstream:
an interval [lo, hi] for |V_X/Vs| at each gain frequency (headroom at a node
n needs a·G·t_n ≤ room_n − H, the gain target G·t_out ≥ Gmin), and — when a
band edge is required — the completion's normalised response shape.  A
completion dominates another when it costs no more (cost, then buffers), draws
no more power, accepts a superset of upstream gains, and has a response at
least as high at every frequency that can move the band edge (the −3 dB
edge found by the engine's interpolation is monotone in those values).
Intervals are clipped to the reachable upstream range before comparing, which
changes no decision.  A fan-out region combines the label sets of its
terminators (a product, pruned as it grows), so trees are handled by the same
recursion.  At the source the gain is exactly 1, and the cheapest label whose
interval contains 1 and whose band edges and power meet the targets is the
optimum: no placement is ever discarded unless another one at no greater cost
is feasible wherever it is (exactness).  Tests compare the result with brute
force enumeration through full analyses (tests/test_optimiser_bruteforce.py).

Floating point: decisions use a relative tolerance of 1e-9 (DC levels that
agree to 1e-12 V are one state); the chosen placement is re-analysed in full
and its figures are the ones reported.  The engine's own DC iteration (for
base currents) settles to 1e-9 V, so chains with emitter followers agree with
full analyses to that level.

Cost-bounded deepening: prices, part counts and fixed powers are known before
any analysis, so a run with cost bound B skips every region shape that would
take a path over B (bounds 0, the cheapest candidate, then doubling); a
solution within B is optimal because every placement costing at most B was
explored.

Complexity: one engine call per (state group, family of region shapes that
differ only in which unilateral candidate ends them), linear in the chain's
length for a fixed density of cuts and DC resets; the label sets are
bounded by the number of cost/gain trade-offs that stay non-dominated — the
problem contains knapsack (gains multiply, costs add), so no exact method is
polynomial in the worst case.
"""
from __future__ import annotations

import dataclasses
import heapq
import math
import time
import types
from dataclasses import dataclass, field

import numpy as np

from .budget import Evaluation, check_operating_points, evaluate, frequency_grid, nominal_params
from .cascade import run_ac
from .errors import UsageError, nearest
from .insert import buffer_names, insert_buffers
from .model import Analysis, Chain, Stage
from .parts import Candidate, candidates_of, default_cost_basis, supply_power
from .stages.base import NO_LOAD, DcLoad, Op
from .units import fmt

#: Kinds that cut the chain (unilateral input and output; DC from the input node voltage only).
CUT_KINDS = ("opamp_follower", "opamp_noninverting", "amplifier", "source_follower")
REL = 1e-9          # relative tolerance of feasibility and cost-tie decisions
V_KEY = 1e-12       # DC levels closer than this (V) are one state


# -- targets -------------------------------------------------------------------------------

@dataclass
class Targets:
    """What the placement must achieve.  Gains in dB at a frequency; headroom in V."""

    min_gain_db: dict = field(default_factory=dict)      # f (Hz) -> dB
    max_gain_db: dict = field(default_factory=dict)
    min_headroom_v: float | None = None                  # every node, the buffers' own included
    node_headroom_v: dict = field(default_factory=dict)  # node -> V
    min_f_high_hz: float | None = None
    max_f_low_hz: float | None = None
    max_power_w: float | None = None                     # all follower-type stages, the buffers included
    origin: dict = field(default_factory=dict)           # kind -> [where the target came from]
    skipped: list = field(default_factory=list)          # spec requirements the optimiser does not target

    KINDS = ("gain", "max_gain", "headroom", "f_high", "f_low", "power")

    def add_origin(self, kind: str, where: str) -> None:
        self.origin.setdefault(kind, []).append(where)

    def headroom_for(self, node: str) -> float | None:
        vals = [v for v in (self.min_headroom_v, self.node_headroom_v.get(node)) if v is not None]
        return max(vals) if vals else None

    def kinds(self) -> list[str]:
        have = {"gain": bool(self.min_gain_db), "max_gain": bool(self.max_gain_db),
                "headroom": self.min_headroom_v is not None or bool(self.node_headroom_v),
                "f_high": self.min_f_high_hz is not None, "f_low": self.max_f_low_hz is not None,
                "power": self.max_power_w is not None}
        return [k for k in self.KINDS if have[k]]

    def only(self, kinds) -> "Targets":
        """A copy keeping only the given kinds."""
        t = Targets(origin=self.origin)
        if "gain" in kinds:
            t.min_gain_db = dict(self.min_gain_db)
        if "max_gain" in kinds:
            t.max_gain_db = dict(self.max_gain_db)
        if "headroom" in kinds:
            t.min_headroom_v, t.node_headroom_v = self.min_headroom_v, dict(self.node_headroom_v)
        if "f_high" in kinds:
            t.min_f_high_hz = self.min_f_high_hz
        if "f_low" in kinds:
            t.max_f_low_hz = self.max_f_low_hz
        if "power" in kinds:
            t.max_power_w = self.max_power_w
        return t


def targets_from_requirements(chain: Chain, targets: Targets | None = None) -> Targets:
    """Add the spec's ``requirements:`` that the optimiser can target (the stricter wins)."""
    t = targets or Targets()
    for r in chain.extra.get("requirements", []):
        key, lim, src = r.key, r.limit, f"requirement '{r.name}'"
        f = r.at_hz if getattr(r, "at_hz", None) is not None else chain.analysis.f_ref_hz
        if key == "min_gain":
            t.min_gain_db[f] = max(lim, t.min_gain_db.get(f, -math.inf))
            t.add_origin("gain", src)
        elif key == "max_gain":
            t.max_gain_db[f] = min(lim, t.max_gain_db.get(f, math.inf))
            t.add_origin("max_gain", src)
        elif key == "min_headroom":
            if r.targets:
                for n in r.targets:
                    t.node_headroom_v[n] = max(lim, t.node_headroom_v.get(n, -math.inf))
            else:
                t.min_headroom_v = lim if t.min_headroom_v is None else max(lim, t.min_headroom_v)
            t.add_origin("headroom", src)
        elif key == "min_f_high":
            t.min_f_high_hz = lim if t.min_f_high_hz is None else max(lim, t.min_f_high_hz)
            t.add_origin("f_high", src)
        elif key == "max_f_low":
            t.max_f_low_hz = lim if t.max_f_low_hz is None else min(lim, t.max_f_low_hz)
            t.add_origin("f_low", src)
        elif key == "max_buffer_power" and not r.targets:
            t.max_power_w = lim if t.max_power_w is None else min(lim, t.max_power_w)
            t.add_origin("power", src)
        else:
            t.skipped.append(r.name)
    return t


def check_nodes(chain: Chain, nodes) -> None:
    """Refuse headroom targets on nodes the chain does not have."""
    for n in nodes:
        if n not in chain.nodes:
            raise UsageError(f"'{n}' is not a node of chain '{chain.name}'" + nearest(n, chain.nodes))


# -- results ---------------------------------------------------------------------------------

@dataclass
class Placement:
    reader: str                 # the interface (its reading stage)
    source: str                 # the node the buffer reads
    candidate: str
    buffer: str                 # the inserted stage's name
    power_w: float
    price: float | None
    count: int


@dataclass
class Measured:
    """A placement's figures from a full analysis."""
    valid: bool
    gain_db: dict               # f -> dB
    f_low_hz: float | None
    f_high_hz: float | None
    min_headroom_v: float | None
    min_headroom_node: str | None
    power_w: float              # all follower-type stages
    margins: dict               # kind -> margin (positive = met), only for kinds targeted

    def meets(self) -> bool:
        return self.valid and all(m >= -REL * max(1.0, abs(m)) for m in self.margins.values())


@dataclass
class Shortfall:
    kind: str                   # 'gain', 'headroom', 'f_high', 'f_low', 'power'
    target: str                 # the target in words
    best: str                   # best value reachable, in words
    best_value: float | None
    with_others: bool           # True: reachable while meeting the other targets


@dataclass
class Plan:
    chain: Chain
    feasible: bool
    cost_basis: str
    cost: float | None
    placements: list[Placement]
    buffered: Chain | None
    measured: Measured | None
    before: Measured
    targets: Targets
    shortfalls: list[Shortfall]
    stats: dict

    @property
    def n_buffers(self) -> int:
        return len(self.placements)


# -- the search ------------------------------------------------------------------------------

class _Memo:
    """A stage model whose DC solution is remembered per exact input.  ``dc_forward``
    is a pure function of its inputs (the parameters are fixed per element), so
    region shapes that feed an element the same DC inputs share one solution —
    the engine's numbers, computed once."""

    def __init__(self, inner):
        self.inner = inner
        self.memo: dict = {}

    def __getattr__(self, name):
        return getattr(self.inner, name)

    def dc_forward(self, p, st_in, v_in, out_load):
        key = (_bytes(st_in), _bytes(v_in), _bytes(out_load))
        hit = self.memo.get(key)
        if hit is None:
            hit = self.memo[key] = self.inner.dc_forward(p, st_in, v_in, out_load)
        return hit


def _bytes(x) -> bytes:
    if isinstance(x, tuple):
        return b"|".join(_bytes(e) for e in x)
    a = np.asarray(x, dtype=float)
    return a.tobytes() + bytes(str(a.shape), "ascii")


class _Terminal:
    """A cut element as seen from the region that drives it: only its input
    admittance and DC input current (the element's own model), no output.
    For the cut kinds both are independent of the operating point, so one
    operating point (the first one solved) serves every analysis."""

    role = "load"
    follower_type = False
    draws_input_current = False

    def __init__(self, inner):
        self.inner = inner
        self.op: Op | None = None

    def load_admittance(self, p, s, op):
        m = self.inner.abcd(p, s, self.op)
        return m.C / m.A            # unilateral: (C + D·YL)/(A + B·YL) = C/A for any load

    def dc_input_load(self, p, out_load, op):
        return self.inner.dc_input_load(p, NO_LOAD, op)

    def dc_forward(self, p, st_in, v_in, out_load):
        if self.op is None:
            first = lambda x: float(np.ravel(x)[0])  # noqa: E731
            st1 = type(st_in)(*(first(x) for x in st_in))
            _, op = self.inner.dc_forward(p, st1, first(v_in), NO_LOAD)
            self.op = Op(values={k: first(v) for k, v in op.values.items()})
        return None, self.op        # its limits and validity belong to its own region

    def noise(self, p, s, op, temp_k):
        return []


class _Terminals:
    """Several unilateral candidates that could end a region at the same place, one per
    sample: a region shape analysed once for all of them (``choice`` maps samples to them)."""

    role = "load"
    follower_type = False
    draws_input_current = False

    def __init__(self, variants):
        self.variants = variants            # [(_Terminal, params)]
        self.choice = np.zeros(1, dtype=int)

    def load_admittance(self, p, s, op):
        ys = [np.broadcast_to(t.load_admittance({**q, "temp_k": p["temp_k"]}, s, None), np.shape(s))
              for t, q in self.variants]
        return np.stack(ys)[self.choice, 0, :]

    def dc_input_load(self, p, out_load, op):
        loads = [t.dc_input_load({**q, "temp_k": p["temp_k"]}, out_load, None) for t, q in self.variants]
        g = np.array([float(np.ravel(x.G)[0]) for x in loads])[self.choice][:, None]
        i0 = np.array([float(np.ravel(x.I0)[0]) for x in loads])[self.choice][:, None]
        return DcLoad(g, i0)

    def dc_forward(self, p, st_in, v_in, out_load):
        for t, q in self.variants:          # each solves its (load-independent) operating point once
            t.dc_forward({**q, "temp_k": p["temp_k"]}, st_in, v_in, out_load)
        return None, Op()

    def noise(self, p, s, op, temp_k):
        return []


@dataclass
class _ModelStage(Stage):
    """A stage whose model is given (memoised or a terminal) rather than looked up by kind."""
    adapter: object = None

    @property
    def model(self):
        return self.adapter


def is_cut(st: Stage) -> bool:
    """Does this stage split the chain (see the module docstring)?"""
    if st.kind not in CUT_KINDS:
        return False
    return st.kind != "source_follower" or not np.any(np.asarray(st.params.get("cgs", 0.0)) != 0)


@dataclass
class _Struct:
    """One shape of a region: the stages it contains, its terminators and its choices."""
    stages: list
    terms: list            # (terminator stage name, child state group key)
    bufs: list             # (buffer stage name, candidate index)
    choices: dict          # reader -> candidate index or None, decided in this region


@dataclass
class _Sample:
    """A region analysed at one DC level."""
    valid: bool
    room: np.ndarray       # (nodes,) V, partial (this region's limits)
    t: np.ndarray          # (nodes,) |V_n/V_X| at f_ref
    term_v: np.ndarray     # (terms,) DC level at each terminator's node
    term_t: np.ndarray     # (terms, F) |V/V_X| at each terminator's node
    out_t: np.ndarray | None
    cost: float
    power: float           # follower-type stages in the region
    nbuf: int


class _Label:
    __slots__ = ("cost", "nbuf", "power", "lo", "hi", "shape", "back")

    def __init__(self, cost, nbuf, power, lo, hi, shape, back):
        self.cost, self.nbuf, self.power, self.lo, self.hi, self.shape, self.back = \
            cost, nbuf, power, lo, hi, shape, back


ROOT = ("", -1, -1)


class _Features:
    """Labels as arrays, for vectorised dominance tests.  ``a`` dominates ``b`` when it
    costs no more (a cost within REL is a tie, then fewer buffers), draws no more
    power (above the floor no upstream can exceed), needs no more upstream gain
    (lo) and tolerates no less (hi), and has a response shape at least as high at
    the relevant frequencies — all to a relative REL."""

    def __init__(self, labels, p_floor, rel):
        self.cost = np.array([lb.cost for lb in labels])
        self.nbuf = np.array([lb.nbuf for lb in labels])
        self.lo = np.array([lb.lo for lb in labels])
        self.hi = np.array([lb.hi for lb in labels])
        self.use_power = p_floor is not None
        if self.use_power:
            self.power = np.maximum(np.array([lb.power for lb in labels]), p_floor)
        self.shape = None
        if rel is not None and any(lb.shape is not None for lb in labels):
            n = int(rel.sum())
            self.shape = np.array([lb.shape[rel] if lb.shape is not None else np.full(n, -np.inf)
                                   for lb in labels])

    def nondominated(self) -> np.ndarray:
        """Indices of the labels no other label dominates (of two that dominate each other
        within the tolerance, the first is kept)."""
        n = len(self.cost)
        everyone = np.arange(n)
        keep = np.ones(n, dtype=bool)
        for start in range(0, n, 256):          # rows in blocks: memory stays bounded
            rows = everyone[start:start + 256]
            dom = self._test(rows[:, None], everyone[None, :])          # dom[i, b]: row i dominates b
            back = self._test(everyone[None, :], rows[:, None])         # back[i, b]: b dominates row i
            beaten = dom & (~back | (rows[:, None] < everyone[None, :]))
            beaten[np.arange(len(rows)), rows] = False
            keep &= ~beaten.any(axis=0)
        return np.nonzero(keep)[0]

    def _test(self, a, b):
        """Does label a dominate label b?  a and b are index arrays that broadcast."""
        tol = REL * np.maximum(np.maximum(np.abs(self.cost[a]), np.abs(self.cost[b])), 1e-30)
        d = self.cost[a] - self.cost[b]
        ok = (d < -tol) | ((np.abs(d) <= tol) & (self.nbuf[a] <= self.nbuf[b]))
        if self.use_power:
            ok &= self.power[a] <= self.power[b] * (1 + REL) + 1e-30
        ok &= np.all(self.lo[a] <= self.lo[b] * (1 + REL), axis=-1)
        ok &= np.all(self.hi[a] * (1 + REL) >= self.hi[b], axis=-1)
        if self.shape is not None:
            ok &= np.all(self.shape[a] * (1 + REL) >= self.shape[b], axis=-1)
        return ok


class Search:
    """Region analyses of one chain over one frequency grid, reused by every
    optimisation run on it (targets change; the analyses do not)."""

    def __init__(self, chain: Chain, cands: list[Candidate], basis: str, grid: np.ndarray, gain_cols: dict):
        self.chain, self.cands, self.basis = chain, cands, basis
        self.grid, self.gain_cols = grid, gain_cols      # gain_cols: f -> column
        self.cols = np.array(sorted(set(gain_cols.values())))
        self.col_of = {c: i for i, c in enumerate(self.cols)}
        self.names = buffer_names(chain)
        self.by_name = {st.name: st for st in chain.all_stages}
        self.readers = {n: [] for n in [chain.source.name] + [st.name for st in chain.stages]}
        for st in chain.stages:
            self.readers[st.parent].append(st)
        self.order = {st.name: i for i, st in enumerate(chain.stages)}
        self.cut = {st.name: is_cut(st) for st in chain.stages}
        self.uni = [is_cut(c.stage) for c in cands]
        self.amp = float(np.ravel(chain.source.params["amplitude"])[0])
        self.out_stage = _output_stage(chain)
        self.structs: dict = {}
        self.cache: dict = {}
        self.models: dict = {}
        self.terminals: dict = {}
        self.lbs: dict = {}
        self.family: dict = {}
        self.evaluations = 0

    # -- region shapes --------------------------------------------------------------------
    def _element(self, st: Stage, ident, name: str, parent: str, terminal=False) -> Stage:
        """A copy of ``st`` connected as ``name`` reading ``parent``, with its model memoised
        per element (``ident``: an original stage's name or a candidate's index)."""
        models = self.terminals if terminal else self.models
        if ident not in models:
            models[ident] = _Terminal(st.model) if terminal else _Memo(st.model)
        return _ModelStage(name=name, kind=st.kind, params=st.params, parent=parent, adapter=models[ident])

    def _start(self, key):
        """(source stage, start element, downstream readers with their 'free' flag, reading node)."""
        if key == ROOT:
            src = self.chain.source
            return src, None, [(r, True) for r in self.readers[src.name]], src.name
        reader, phase, e = key
        st = self.by_name[reader]
        x = st.parent if phase == 0 else self.names[reader]
        src = Stage(name=x, kind="sensor", params={"amplitude": 1.0, "dc": 0.0, "r": 0.0, "c": 0.0}, parent=None)
        if e < 0:
            return src, self._element(st, reader, reader, x), [(r, True) for r in self.readers[reader]], reader
        buf = self._element(self.cands[e].stage, e, self.names[reader], x)
        return src, buf, [(st, False)], buf.name

    def shapes(self, key) -> list[_Struct]:
        if key not in self.structs:
            _, start, readers, node = self._start(key)
            out = list(self._grow(node, readers))
            if start is not None and key[2] >= 0:
                for s in out:
                    s.bufs = [(start.name, key[2]), *s.bufs]
            self.structs[key] = out
        return self.structs[key]

    def _grow(self, node, readers):
        if not readers:
            yield _Struct([], [], [], {})
            return
        (first, free), rest = readers[0], readers[1:]
        for a in self._options(node, first, free):
            for b in self._grow(node, rest):
                yield _Struct(a.stages + b.stages, a.terms + b.terms, a.bufs + b.bufs, {**a.choices, **b.choices})

    def _options(self, node, st: Stage, free: bool):
        opts = [-1] + list(range(len(self.cands))) if free else [-1]
        for o in opts:
            choice = {st.name: o} if free else {}
            if o < 0:
                if st.role == "load":
                    yield _Struct([self._element(st, st.name, st.name, node)], [], [], choice)
                elif self.cut[st.name]:
                    term = self._element(st, st.name, st.name, node, terminal=True)
                    yield _Struct([term], [(term.name, (st.name, 0 if free else 1, -1))], [], choice)
                else:
                    for sub in self._grow(st.name, [(r, True) for r in self.readers[st.name]]):
                        yield _Struct([self._element(st, st.name, st.name, node), *sub.stages], sub.terms,
                                      sub.bufs, {**choice, **sub.choices})
            elif self.uni[o]:
                term = self._element(self.cands[o].stage, o, self.names[st.name], node, terminal=True)
                yield _Struct([term], [(term.name, (st.name, 0, o))], [], choice)
            else:
                buf = self._element(self.cands[o].stage, o, self.names[st.name], node)
                for sub in self._options(buf.name, st, False):
                    yield _Struct([buf, *sub.stages], sub.terms, [(buf.name, o), *sub.bufs],
                                  {**choice, **sub.choices})

    # -- region analyses ----------------------------------------------------------------------
    def samples(self, key, si, vs: list) -> list[_Sample]:
        """The region shape ``si`` of group ``key`` analysed at each DC level in ``vs``.  Shapes
        that differ only in which unilateral candidate ends them are analysed together."""
        memo = self.cache.setdefault((key, si), {})
        missing = [v for v in vs if _vkey(v) not in memo]
        if missing:
            family = self.families(key)[si]
            for sj, smps in zip(family, self._analyse(key, family, missing)):
                got = self.cache.setdefault((key, sj), {})
                for v, smp in zip(missing, smps):
                    got[_vkey(v)] = smp
        return [memo[_vkey(v)] for v in vs]

    def families(self, key) -> dict:
        """Shape index -> the indices of the shapes that differ from it only in which
        unilateral candidate ends the region at each of its ends."""
        if key not in self.family:
            groups: dict = {}
            for si, st in enumerate(self.shapes(key)):
                sig = (tuple(x.name for x in st.stages), tuple((n, c[:2], c[2] < 0 and c[2]) for n, c in st.terms),
                       tuple(st.bufs))
                groups.setdefault(sig, []).append(si)
            self.family[key] = {si: g for g in groups.values() for si in g}
        return self.family[key]

    def _analyse(self, key, family: list, vs: list) -> list[list[_Sample]]:
        src, start, _, _ = self._start(key)
        struct = self.shapes(key)[family[0]]
        n, g = len(vs), len(family)
        stages = [start] if start is not None else []
        for x in struct.stages:
            slot = next((j for j, (nm, c) in enumerate(struct.terms) if nm == x.name and c[2] >= 0), None)
            if slot is None:
                stages.append(x)
                continue
            picks = [self.shapes(key)[sj].terms[slot][1][2] for sj in family]
            multi = _Terminals([(self.terminals[o], self.cands[o].stage.params) for o in sorted(set(picks))])
            order = sorted(set(picks))
            multi.choice = np.repeat([order.index(o) for o in picks], n)
            stages.append(_ModelStage(name=x.name, kind=x.kind, params={}, parent=x.parent, adapter=multi))
        sub = Chain(name=self.chain.name, description="", source=src, stages=stages, rails=self.chain.rails,
                    temp_k=self.chain.temp_k, analysis=Analysis(f_ref_hz=self.chain.analysis.f_ref_hz),
                    path=self.chain.path)
        params = nominal_params(sub)
        vs = list(vs) * g                  # samples: every shape of the family at every DC level
        n = len(vs)
        if key != ROOT:
            params[src.name]["dc"] = np.asarray(vs, dtype=float).reshape(n, 1)
        with np.errstate(all="ignore"):
            ev = evaluate(sub, params, self.grid)
        self.evaluations += 1
        f = len(self.grid)
        terms = {name for name, _ in struct.terms}
        valid = np.ones(n, dtype=bool)
        for name, op in ev.dc.ops.items():
            if name not in terms:
                valid &= ~np.broadcast_to(np.ravel(np.asarray(op.bad, dtype=bool)), (n,))
        for v in ev.dc.node_v.values():
            valid &= np.broadcast_to(np.isfinite(np.ravel(v)), (n,))
        nodes = sub.nodes
        room = np.empty((len(nodes), n))
        t = np.empty((len(nodes), n))
        for i, nd in enumerate(nodes):
            lo, hi = ev.dc.limits[nd]
            dc = np.broadcast_to(np.ravel(ev.dc.node_v[nd]), (n,))
            room[i] = np.minimum(np.broadcast_to(np.ravel(hi), (n,)) - dc, dc - np.broadcast_to(np.ravel(lo), (n,)))
            t[i] = np.broadcast_to(np.abs(np.asarray(ev.ac.node_h[nd]))[:, 0], (n,))
        mag = lambda nd: np.broadcast_to(np.abs(np.asarray(ev.ac.node_h[nd])), (n, f))  # noqa: E731
        term_v = np.array([np.broadcast_to(np.ravel(ev.dc.node_v[self._parent(stages, nm)]), (n,))
                           for nm, _ in struct.terms]).reshape(len(struct.terms), n)
        term_t = np.array([mag(self._parent(stages, nm)) for nm, _ in struct.terms]).reshape(len(struct.terms), n, f)
        out_node = self._output_node(src, stages, terms)
        out_t = mag(out_node) if out_node is not None else None
        bufs = dict(struct.bufs)
        power = np.zeros(n)
        cost = np.zeros(n)
        for st in stages:
            if st.name in terms or not st.model.follower_type:
                continue
            c = self.cands[bufs[st.name]] if st.name in bufs else None
            pw = np.broadcast_to(np.ravel(supply_power(c, ev.dc.ops[st.name])), (n,))
            power = power + pw
            if c is not None:
                cost = cost + (pw if self.basis == "power" else c.price if self.basis == "price" else c.count)
        finite = np.all(np.isfinite(t), axis=0) & np.all(np.isfinite(term_t), axis=(0, 2))
        if out_t is not None:
            finite &= np.all(np.isfinite(out_t), axis=1)
        valid &= finite
        per = n // len(family)
        return [[_Sample(bool(valid[i]), room[:, i], t[:, i], term_v[:, i], term_t[:, i, :],
                         None if out_t is None else out_t[i], float(cost[i]), float(power[i]), len(bufs))
                 for i in range(k * per, (k + 1) * per)] for k in range(len(family))]

    @staticmethod
    def _parent(stages, name):
        return next(s.parent for s in stages if s.name == name)

    def _output_node(self, src, stages, terms):
        """The chain's output node if this region computes it, else None."""
        if self.out_stage == self.chain.source.name:
            return src.name if src is self.chain.source else None
        for st in stages:
            if st.name == self.out_stage and st.name not in terms:
                return st.parent if st.role == "load" else st.name
        return None

    def cand_lb(self, o: int) -> float:
        """A lower bound of candidate ``o``'s cost known before any analysis: its price or part
        count; for power, a fixed ``power`` or an op-amp's i_supply·(v_pos − v_neg), else 0."""
        c = self.cands[o]
        if self.basis == "price":
            return c.price
        if self.basis == "parts":
            return float(c.count)
        if c.power_w is not None:
            return c.power_w
        p = c.stage.params
        if "i_supply" in p:
            return float(p["i_supply"] * (p["v_pos"] - p["v_neg"]))
        return 0.0

    def cost_lb(self, key, si) -> float:
        """Lower bound of what a path pays for this shape: its own buffers and the
        unilateral buffers it ends at (paid in the regions they start)."""
        if (key, si) not in self.lbs:
            shape = self.shapes(key)[si]
            own = [o for name, o in shape.bufs if not (key != ROOT and key[2] == o and name == self.names[key[0]])]
            self.lbs[(key, si)] = sum(self.cand_lb(o) for o in own) + \
                sum(self.cand_lb(child[2]) for _, child in shape.terms if child[2] >= 0)
        return self.lbs[(key, si)]

    def node_names(self, key, si) -> list[str]:
        src, start, _, _ = self._start(key)
        terms = {name for name, _ in self.shapes(key)[si].terms}
        stages = ([start] if start is not None else []) + self.shapes(key)[si].stages
        return [src.name] + [s.name for s in stages if s.role == "two_port" and s.name not in terms]


def _vkey(v: float) -> float:
    return round(float(v) / V_KEY) * V_KEY


def _output_stage(chain: Chain) -> str:
    """The stage (or node) the end-to-end figures refer to, before any buffer is inserted."""
    out = chain.analysis.output
    if out is None:
        adcs = [st for st in chain.stages if st.kind == "adc"]
        out = adcs[0].name if adcs else chain.stages[-1].name if chain.stages else chain.source.name
    return out


# -- one optimisation run ------------------------------------------------------------------

class _Run:
    """Forward reachability and backward Pareto labels for one set of targets."""

    def __init__(self, search: Search, targets: Targets, bound: float = math.inf):
        self.s, self.t, self.bound = search, targets, bound
        ncol = len(search.cols)
        self.lo_gain = np.zeros(ncol)
        self.hi_gain = np.full(ncol, np.inf)
        for f, db in targets.min_gain_db.items():
            i = search.col_of[search.gain_cols[f]]
            self.lo_gain[i] = max(self.lo_gain[i], 10 ** (db / 20))
        for f, db in targets.max_gain_db.items():
            i = search.col_of[search.gain_cols[f]]
            self.hi_gain[i] = min(self.hi_gain[i], 10 ** (db / 20))
        self.band = targets.min_f_high_hz is not None or targets.max_f_low_hz is not None
        self.rel = _relevant_mask(search, targets) if self.band else None
        self.pmax = targets.max_power_w
        self.states: dict = {}         # key -> {vkey: [v, glo, ghi, plo, phi, least upstream cost]}
        self.edges: dict = {}          # (key, vkey) -> [(si, sample)]
        self.order: list = []
        self.h_cache: dict = {}

    # per-region constraint from headroom targets: G ≤ hi_own at f_ref
    def _own_hi(self, key, si, smp: _Sample) -> float:
        hs = self.h_cache.get((key, si))
        if hs is None:
            names = self.s.node_names(key, si)
            hs = self.h_cache[(key, si)] = np.array([_nan(self.t.headroom_for(n)) for n in names])
        use = ~np.isnan(hs) & np.isfinite(smp.room)
        if not use.any():
            return math.inf
        room, t, h = smp.room[use], smp.t[use], hs[use]
        if np.any((t == 0) & (room < h)):
            return -math.inf
        with np.errstate(divide="ignore"):
            lim = np.where(t > 0, (room - h) / (self.s.amp * t), np.inf)
        return float(lim.min())

    def _out_bounds(self, smp: _Sample):
        if smp.out_t is None:
            return np.zeros(len(self.s.cols)), np.full(len(self.s.cols), np.inf)
        t = smp.out_t[self.s.cols]
        with np.errstate(divide="ignore"):
            return self.lo_gain / t, self.hi_gain / t

    def forward(self) -> None:
        s = self.s
        todo, seen = [], set()
        self._expand(ROOT, {0.0: [0.0, np.ones(len(s.cols)), np.ones(len(s.cols)), 0.0, 0.0, 0.0]}, todo, seen)
        while todo:
            _, key = heapq.heappop(todo)
            self.order.append(key)
            self._expand(key, self.states[key], todo, seen)

    def _expand(self, key, states, todo, seen):
        s = self.s
        for si in range(len(s.shapes(key))):
            struct = s.shapes(key)[si]
            limit = self.bound - s.cost_lb(key, si) + REL * max(1.0, abs(self.bound))
            vks = [k for k in states if states[k][5] <= limit]      # no placement within the bound skips it
            if not vks:
                continue
            for vk, smp in zip(vks, s.samples(key, si, [states[k][0] for k in vks])):
                v, glo, ghi, plo, phi, cmin = states[vk]
                if not smp.valid:
                    continue
                hi_own = self._own_hi(key, si, smp)
                olo, ohi = self._out_bounds(smp)
                if hi_own < glo[0] * (1 - REL) or np.any(olo > ghi * (1 + REL)) or np.any(ohi < glo * (1 - REL)):
                    continue
                if self.pmax is not None and plo + smp.power > self.pmax * (1 + REL):
                    continue
                if cmin + smp.cost > self.bound + REL * max(1.0, abs(self.bound)):
                    continue
                self.edges.setdefault((key, vk), []).append((si, smp))
                for j, (_, child) in enumerate(struct.terms):
                    t = smp.term_t[j][s.cols]
                    cv = float(smp.term_v[j])
                    ck = _vkey(cv)
                    group = self.states.setdefault(child, {})
                    if child not in seen:
                        seen.add(child)
                        heapq.heappush(todo, ((s.order[child[0]], child[1], child[2]), child))
                    if ck in group:
                        g = group[ck]
                        g[1], g[2] = np.minimum(g[1], glo * t), np.maximum(g[2], ghi * t)
                        g[3], g[4] = min(g[3], plo + smp.power), max(g[4], phi + smp.power)
                        g[5] = min(g[5], cmin + smp.cost)
                    else:
                        group[ck] = [cv, glo * t, ghi * t, plo + smp.power, phi + smp.power, cmin + smp.cost]

    # -- backward ------------------------------------------------------------------------------
    def backward(self) -> list:
        self.labels: dict = {}
        for key in reversed(self.order):
            for vk, st in self.states[key].items():
                self.labels[(key, vk)] = self._state_labels(key, vk, st)
        return self._state_labels(ROOT, 0.0, [0.0, np.ones(len(self.s.cols)), np.ones(len(self.s.cols)), 0.0, 0.0,
                                              0.0])

    def _state_labels(self, key, vk, st):
        s = self.s
        out = []
        for si, smp in self.edges.get((key, vk), []):
            struct = s.shapes(key)[si]
            lo, hi = self._out_bounds(smp)
            hi = hi.copy()
            hi[0] = min(hi[0], self._own_hi(key, si, smp))
            shape = None
            if self.band and smp.out_t is not None:
                shape = smp.out_t[1:1 + s.chain.analysis.points] / smp.out_t[0]
            partial = [_Label(smp.cost, smp.nbuf, smp.power, lo, hi, shape, (key, si, vk, ()))]
            for j, (_, child) in enumerate(struct.terms):
                kids = self.labels.get((child, _vkey(smp.term_v[j])), [])
                if not kids:
                    partial = []
                    break
                tt = smp.term_t[j]
                partial = self._prune([self._join(p, k, tt) for p in partial for k in kids], None)
            out.extend(partial)
        return self._prune(out, st)

    def _join(self, p: _Label, k: _Label, tt: np.ndarray) -> _Label:
        t = tt[self.s.cols]
        shape = p.shape
        if k.shape is not None:
            shape = k.shape * (tt[1:1 + len(k.shape)] / tt[0])
        back = (*p.back[:3], p.back[3] + (k,))
        return _Label(p.cost + k.cost, p.nbuf + k.nbuf, p.power + k.power, np.maximum(p.lo, k.lo / t),
                      np.minimum(p.hi, k.hi / t), shape, back)

    def _prune(self, labels: list, st) -> list:
        """Drop labels infeasible for every reachable upstream gain, then the dominated ones."""
        if st is not None:
            _, glo, ghi, plo, phi, _ = st
            keep = []
            for lb in labels:
                lo, hi = np.maximum(lb.lo, glo), np.minimum(lb.hi, ghi)
                if np.any(lo > hi * (1 + REL)) or np.any(lo > ghi * (1 + REL)) or np.any(hi < glo * (1 - REL)):
                    continue
                if self.pmax is not None and lb.power + plo > self.pmax * (1 + REL):
                    continue
                lb.lo, lb.hi = lo, hi
                keep.append(lb)
            labels = keep
            p_floor = (self.pmax - phi) if self.pmax is not None else None
        else:
            p_floor = None
        if len(labels) <= 1:
            return labels
        labels.sort(key=lambda lb: (lb.cost, lb.nbuf, lb.power))
        f = _Features(labels, p_floor if self.pmax is not None else None, self.rel if self.band else None)
        return [labels[i] for i in f.nondominated()]

    # -- at the source -----------------------------------------------------------------------
    def best(self, root_labels: list):
        """The cheapest root label that meets every target, or None."""
        ok = [lb for lb in root_labels if self._meets(lb)]
        return min(ok, key=lambda lb: (lb.cost, lb.nbuf), default=None)

    def _meets(self, lb: _Label) -> bool:
        if np.any(lb.lo > 1 + REL) or np.any(lb.hi < 1 - REL):
            return False
        if self.pmax is not None and lb.power > self.pmax * (1 + REL):
            return False
        if self.band:
            f_lo, f_hi = band_edges_of(self.s.chain, lb.shape)
            if self.t.min_f_high_hz is not None and f_hi < self.t.min_f_high_hz * (1 - REL):
                return False
            if self.t.max_f_low_hz is not None and f_lo > self.t.max_f_low_hz * (1 + REL):
                return False
        return True


def band_edges_of(chain: Chain, shape: np.ndarray) -> tuple[float, float]:
    """−3 dB edges of a normalised response over the span, by the engine's own
    interpolation (``Evaluation.band_edges``); no edge: 0 below, inf above."""
    mag = np.concatenate(([1.0], shape))[None, :]
    span = frequency_grid(chain)[1:]
    shim = types.SimpleNamespace(gain=lambda node=None: mag, span=span, chain=chain)
    lo, hi = Evaluation.band_edges(shim)
    lo, hi = float(lo[0]), float(hi[0])
    return (0.0 if math.isnan(lo) else lo), (math.inf if math.isnan(hi) else hi)


def _relevant_mask(search: Search, t: Targets) -> np.ndarray:
    """Span points whose values can move a required band edge across its limit."""
    span = frequency_grid(search.chain)[1:]
    f_ref = search.chain.analysis.f_ref_hz
    mask = np.zeros(len(span), dtype=bool)
    below_ref = np.nonzero(span <= f_ref)[0]
    above_ref = np.nonzero(span > f_ref)[0]
    if t.min_f_high_hz is not None:
        first = below_ref[-1] if len(below_ref) else 0
        past = np.nonzero(span >= t.min_f_high_hz)[0]
        last = past[0] if len(past) else len(span) - 1
        mask[first:last + 1] = True
    if t.max_f_low_hz is not None:
        last = above_ref[0] if len(above_ref) else len(span) - 1
        before = np.nonzero(span <= t.max_f_low_hz)[0]
        first = before[-1] if len(before) else 0
        mask[first:last + 1] = True
    return mask


def _nan(x):
    return math.nan if x is None else x


def _choices(label: _Label, search: Search) -> dict:
    """reader -> candidate index, collected along the label's back pointers."""
    out = {}
    stack = [label]
    while stack:
        lb = stack.pop()
        key, si, _, kids = lb.back
        for reader, o in search.shapes(key)[si].choices.items():
            if o >= 0:
                out[reader] = o
        stack.extend(kids)
    return out


# -- measuring a placement by full analysis ---------------------------------------------------

def measure(chain: Chain, targets: Targets, buffered: Chain | None = None) -> Measured:
    """Figures of a chain (as buffered) from a full analysis, with each targeted kind's margin."""
    c = buffered or chain
    with np.errstate(all="ignore"):
        ev = evaluate(c)
        valid = bool(ev.valid[0])
        gains = {chain.analysis.f_ref_hz: float(20 * np.log10(np.abs(ev.gain()[0, 0])))}
        extra = sorted(set(targets.min_gain_db) | set(targets.max_gain_db) - {chain.analysis.f_ref_hz})
        extra = [f for f in extra if f != chain.analysis.f_ref_hz]
        if extra:
            ac = run_ac(c, ev.params, ev.dc.ops, np.asarray(extra))
            for i, f in enumerate(extra):
                gains[f] = float(20 * np.log10(np.abs(ac.node_h[ev.output][0, i])))
        f_lo, f_hi = ev.band_edges()
        rooms = {}
        for n in c.nodes:
            h = targets.headroom_for(n)
            rooms[n] = (float(ev.headroom(n)[0]), h)
    f_lo = 0.0 if math.isnan(float(f_lo[0])) else float(f_lo[0])
    f_hi = math.inf if math.isnan(float(f_hi[0])) else float(f_hi[0])
    inserted = c.extra.get("inserted", {})
    power = sum(float(np.ravel(supply_power(inserted.get(st.name, (None, None))[1], ev.dc.ops[st.name]))[0])
                for st in c.stages if st.model.follower_type)
    margins = {}
    if targets.min_gain_db:
        margins["gain"] = min(gains[f] - db for f, db in targets.min_gain_db.items())
    if targets.max_gain_db:
        margins["max_gain"] = min(db - gains[f] for f, db in targets.max_gain_db.items())
    marg = [(r - h, n) for n, (r, h) in rooms.items() if h is not None]
    if marg:
        margins["headroom"] = min(marg)[0]
    if targets.min_f_high_hz is not None:
        margins["f_high"] = f_hi / targets.min_f_high_hz - 1
    if targets.max_f_low_hz is not None:
        margins["f_low"] = 1 - f_lo / targets.max_f_low_hz if targets.max_f_low_hz > 0 else -f_lo
    if targets.max_power_w is not None:
        margins["power"] = targets.max_power_w - power
    finite = [(r, n) for n, (r, _) in rooms.items() if math.isfinite(r)]
    worst = min(finite) if finite else (None, None)
    return Measured(valid, gains, None if f_lo == 0.0 else f_lo, None if math.isinf(f_hi) else f_hi,
                    worst[0], worst[1], power, margins)


# -- the public entry points ---------------------------------------------------------------

def cost_basis_for(cands: list[Candidate], basis: str | None) -> str:
    if basis is None:
        return default_cost_basis(cands)
    if basis not in ("power", "price", "parts"):
        raise UsageError(f"unknown cost basis '{basis}'" + nearest(basis, ("power", "price", "parts")))
    if basis == "price":
        missing = [c.name for c in cands if c.price is None]
        if missing:
            raise UsageError(f"cost by price needs a price for every candidate; {', '.join(missing)} "
                             "has none (add cost: price: … in its parts file, or use --cost power)")
    return basis


def _grid(chain: Chain, targets: Targets) -> tuple[np.ndarray, dict]:
    """Frequencies for the region analyses: f_ref, the span when a band edge is
    targeted, and each gain target's frequency; returns the grid and f -> column."""
    f_ref = chain.analysis.f_ref_hz
    base = frequency_grid(chain) if (targets.min_f_high_hz is not None or targets.max_f_low_hz is not None) \
        else np.array([f_ref])
    extra = sorted({f for f in (*targets.min_gain_db, *targets.max_gain_db)} - {f_ref})
    grid = np.concatenate((base, extra))
    cols = {f_ref: 0, **{f: len(base) + i for i, f in enumerate(extra)}}
    return grid, cols


def optimise(chain: Chain, targets: Targets, candidates: list[Candidate] | None = None,
             basis: str | None = None, explain: bool = True) -> Plan:
    """The cheapest placement of candidate buffers meeting ``targets`` (see the module docstring).
    When none does and ``explain`` is set, the plan's shortfalls say which target cannot be met
    and the best value reachable (a few more searches over the same region analyses)."""
    t0 = time.perf_counter()
    cands = candidates_of(chain) if candidates is None else candidates
    basis = cost_basis_for(cands, basis)
    check_nodes(chain, targets.node_headroom_v)
    ev0 = evaluate(chain)
    check_operating_points(chain, ev0.dc)
    before = measure(chain, targets)
    grid, cols = _grid(chain, targets)
    search = Search(chain, cands, basis, grid, cols)
    best, run = None, None
    for bound in _bounds(search):
        run = _Run(search, targets, bound)
        run.forward()
        best = run.best(run.backward())
        if best is not None and best.cost <= bound + REL * max(1.0, abs(bound)):
            break
    stats = {"states": sum(len(v) for v in run.states.values()), "region_shapes": sum(len(v) for v in
             search.structs.values()), "analyses": search.evaluations, "cost_bound": run.bound}
    if best is None:
        stats["seconds"] = time.perf_counter() - t0
        return Plan(chain, False, basis, None, [], None, None, before, targets,
                    shortfalls(search, targets) if explain else [], stats)
    plan = _plan(chain, search, best, targets, before, stats)
    stats["seconds"] = time.perf_counter() - t0
    return plan


def _bounds(search: Search):
    """Cost bounds for iterative deepening: 0, the cheapest candidate, then doubling up to
    every interface buffered with the dearest one, then none.  A run with bound B analyses
    every region that a placement costing at most B uses, so a solution within B is optimal."""
    lbs = [search.cand_lb(o) for o in range(len(search.cands))]
    pos = [x for x in lbs if x > 0]
    yield 0.0
    if pos:
        top = max(lbs) * len(search.chain.stages)
        b = min(pos)
        while b < top:
            yield b
            b *= 2
    yield math.inf


def _plan(chain, search, label, targets, before, stats) -> Plan:
    picks = _choices(label, search)
    placement = {r: search.cands[o] for r, o in picks.items()}
    buffered = insert_buffers(chain, placement)
    with np.errstate(all="ignore"):
        ev = evaluate(buffered)
    rows = []
    for st in chain.stages:
        if st.name in placement:
            buf = buffered.stage(st.name).parent
            c = placement[st.name]
            pw = float(np.ravel(supply_power(c, ev.dc.ops[buf]))[0])
            rows.append(Placement(st.name, st.parent, c.name, buf, pw, c.price, c.count))
    cost = sum(p.power_w if search.basis == "power" else p.price if search.basis == "price" else p.count
               for p in rows)
    return Plan(chain, True, search.basis, cost, rows, buffered, measure(chain, targets, buffered), before,
                targets, [], stats)


# -- when nothing works: what cannot be met, and the best reachable ---------------------------

def _feasible(search: Search, targets: Targets):
    run = _Run(search, targets)
    run.forward()
    best = run.best(run.backward())
    return None if best is None else _choices(best, search)


def shortfalls(search: Search, targets: Targets) -> list[Shortfall]:
    """Which targets cannot be met, and the best value reachable for each: while
    meeting the other targets if that is possible, else on its own."""
    kinds = targets.kinds()
    blocking = [k for k in kinds if _feasible(search, targets.only([x for x in kinds if x != k])) is not None]
    with_others = bool(blocking)
    out = []
    for k in (blocking or kinds):
        others = [x for x in kinds if x != k] if with_others else []
        out.append(_best_reachable(search, targets, k, others, with_others))
    return out


def _best_reachable(search: Search, targets: Targets, kind: str, others: list, with_others: bool) -> Shortfall:
    """Bisect the target of ``kind`` between a reachable value and the target itself."""
    chain = search.chain
    base = targets.only(others)
    picks = _feasible(search, base)
    if picks is None:
        return Shortfall(kind, target_text(targets, kind), "no placement can be biased", None, with_others)
    start = measure(chain, targets.only([kind]), insert_buffers(chain, {r: search.cands[o]
                                                                        for r, o in picks.items()}))
    lo_v, hi_v = _knob(targets, kind, start)        # knob values: reachable (lo_v) and target (hi_v)
    for _ in range(40):
        if _close(kind, lo_v, hi_v):
            break
        mid = _mid(kind, lo_v, hi_v)
        trial = _with_knob(targets, kind, mid, base)
        if _feasible(search, trial) is not None:
            lo_v = mid
        else:
            hi_v = mid
    return Shortfall(kind, target_text(targets, kind), _knob_text(targets, kind, lo_v), lo_v, with_others)


def _knob(targets: Targets, kind: str, m: Measured):
    """(knob value the measured placement reaches, the target's knob value), on a scale where
    larger is harder: gain targets and headroom as a shift of the targets, band edges as ±log f,
    power as −P."""
    if kind in ("gain", "max_gain", "headroom"):
        return min(m.margins[kind], 0.0), 0.0
    if kind == "f_high":
        b = math.log(targets.min_f_high_hz)
        return (min(math.log(m.f_high_hz), b) if m.f_high_hz else b), b
    if kind == "f_low":
        b = -math.log(targets.max_f_low_hz)
        return (min(-math.log(m.f_low_hz), b) if m.f_low_hz else b), b
    return min(-m.power_w, -targets.max_power_w), -targets.max_power_w


def _close(kind, a, b) -> bool:
    tol = {"gain": 0.005, "max_gain": 0.005, "headroom": 1e-4, "f_high": 0.002, "f_low": 0.002,
           "power": 1e-6}[kind]
    if kind == "power":
        tol = max(tol * abs(b), 1e-9)
    return abs(b - a) <= tol


def _mid(kind, a, b):
    return 0.5 * (a + b)


def _with_knob(targets: Targets, kind: str, x: float, base: Targets) -> Targets:
    """``base`` plus the target of ``kind`` moved to knob value ``x``."""
    t = dataclasses.replace(base, min_gain_db=dict(base.min_gain_db), max_gain_db=dict(base.max_gain_db),
                            node_headroom_v=dict(base.node_headroom_v))
    if kind == "gain":
        t.min_gain_db = {f: db + x for f, db in targets.min_gain_db.items()}
    elif kind == "max_gain":
        t.max_gain_db = {f: db - x for f, db in targets.max_gain_db.items()}
    elif kind == "headroom":
        t.min_headroom_v = None if targets.min_headroom_v is None else targets.min_headroom_v + x
        t.node_headroom_v = {n: h + x for n, h in targets.node_headroom_v.items()}
    elif kind == "f_high":
        t.min_f_high_hz = math.exp(x)
    elif kind == "f_low":
        t.max_f_low_hz = math.exp(-x)
    else:
        t.max_power_w = -x
    return t


def target_text(t: Targets, kind: str) -> str:
    if kind == "gain":
        return "gain " + ", ".join(f"≥ {db:.2f} dB at {fmt(f, 'Hz')}" for f, db in t.min_gain_db.items())
    if kind == "max_gain":
        return "gain " + ", ".join(f"≤ {db:.2f} dB at {fmt(f, 'Hz')}" for f, db in t.max_gain_db.items())
    if kind == "headroom":
        parts = ([f"≥ {fmt(t.min_headroom_v, 'V')} at every node"] if t.min_headroom_v is not None else []) + \
            [f"≥ {fmt(h, 'V')} at {n}" for n, h in t.node_headroom_v.items()]
        return "headroom " + ", ".join(parts)
    if kind == "f_high":
        return f"upper band edge ≥ {fmt(t.min_f_high_hz, 'Hz')}"
    if kind == "f_low":
        return f"lower band edge ≤ {fmt(t.max_f_low_hz, 'Hz')}"
    return f"follower power ≤ {fmt(t.max_power_w, 'W')}"


def _knob_text(t: Targets, kind: str, x: float) -> str:
    if kind == "gain":
        return ", ".join(f"{db + x:.2f} dB at {fmt(f, 'Hz')}" for f, db in t.min_gain_db.items())
    if kind == "max_gain":
        return ", ".join(f"{db - x:.2f} dB at {fmt(f, 'Hz')}" for f, db in t.max_gain_db.items())
    if kind == "headroom":
        base = t.min_headroom_v if t.min_headroom_v is not None else min(t.node_headroom_v.values())
        return f"{fmt(base + x, 'V')} of headroom"
    if kind == "f_high":
        return f"upper edge {fmt(math.exp(x), 'Hz')}"
    if kind == "f_low":
        return f"lower edge {fmt(math.exp(-x), 'Hz')}"
    return f"{fmt(-x, 'W')} of follower power"
