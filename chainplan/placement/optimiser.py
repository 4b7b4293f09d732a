"""Exact buffer placement: which candidate buffers to insert at which interfaces
so that the chain meets its targets (minimum end-to-end gain, minimum
headroom at every node, band edges, total follower power) at the least total
cost, ties broken by fewer buffers, then fewer parts.

Cost model
----------
``power`` (default): the supply power of the inserted buffers at their
operating points where they are inserted (a follower's Id·(drain − v_low),
an op-amp's i_supply·(v_pos − v_neg), or the parts file's fixed ``power``);
``price``: the sum of the candidates' prices (every candidate must state one);
``parts``: the number of parts they add (``count``).  The default is ``price``
when every candidate states a price, else ``power``.  A candidate with its own
input bias network (``input_bias``) is one choice: the AC coupling and the
follower are inserted, costed and written together.

The search — a shortest path over a DAG of regions, with Pareto labels
---------------------------------------------------------------------
*Cuts.*  Some stages are unilateral in both the AC and the DC sense: their
input admittance and DC input current do not depend on what they drive, and
their output depends only on the voltage of the node they read (op-amp
followers and non-inverting stages, the amplifier macro model, a MOSFET
source follower without Cgs: ABCD with A·D − B·C = 0, Pozar, *Microwave
Engineering*, ch. 4, from memory; gate or fixed R‖C input).  Where such a
stage reads a node — an original stage, or a unilateral candidate inserted
there (behind its bias network, if it has one) — the chain splits: nothing
downstream changes any voltage upstream, and everything downstream depends on
upstream only through that node's DC level ``v`` and its signal ``V(f)``.
Bilateral candidates (an emitter follower draws base current; its input
impedance β·R depends on its load) do not cut.

*Regions.*  A region starts at a cut element reading node X (or at the
source) and extends through every stage it drives up to the next cut
elements (its terminals), with the choices (no buffer, or a bilateral
candidate) made at the interfaces inside it; a candidate's bias network sits
in the region that drives it (it loads X), the candidate itself starts the next
one.  The engine analyses a region as a chain of its own, fed by an ideal
source at X with DC level ``v`` and unit signal (``chainplan.engine.budget.evaluate``;
the terminals appear as their input admittance and DC input current only).
A region's node voltages are then exactly ``V_X(f)·T_n(f)`` and its DC levels,
operating points and device validity are exactly those of the whole chain —
whatever is placed elsewhere.  Every region starting at one interface — each
cut element that can start there, each shape below it, each DC level — is one
sample of a single engine call (``chainplan.placement.regions``): a stage at each place
chooses per sample between a plain connection (the identity two-port, which
changes no number), the element itself, or a terminal's input admittance
(``chainplan.placement.switch``).

*States* are (cut position, cut element, DC level at its input).  The forward
pass processes the interfaces in chain order; it analyses each state's shapes
that a placement within the cost bound can use, and bounds, per state, the
upstream gain |V_X/Vs| at the gain frequencies, the upstream follower power
over all upstream placements, and the least cost of reaching the state.

*Labels.*  The backward pass gives every state the Pareto set of its
completions, each completion (the regions below the state) summarised by
cost, number of buffers and parts, follower power, and what it needs from
upstream: an interval [lo, hi] for |V_X/Vs| at each gain frequency (headroom
at a node n needs a·G·t_n ≤ room_n − H, the gain target G·t_out ≥ Gmin), and —
when a band edge is required — the completion's normalised response shape.  A
completion dominates another when it costs no more (cost, then buffers, then
parts), draws no more power, accepts a superset of upstream gains, and has a
response at least as high at every frequency that can move the band edge (the
−3 dB edge found by the engine's interpolation is monotone in those values).
Intervals are clipped to the reachable upstream range before comparing, which
changes no decision.  A fan-out region combines the label sets of its
terminals (a product, pruned as it grows), so trees are handled by the same
recursion.  At the source the gain is exactly 1, and the cheapest label whose
interval contains 1 and whose band edges and power meet the targets is the
optimum: no placement is ever discarded unless another one at no greater cost
is feasible wherever it is (exactness).  Tests compare the result with brute
force enumeration through full analyses (tests/test_optimiser_bruteforce.py).

*Cost bounds.*  Prices, part counts and fixed powers are known before any
analysis, so the search with cost bound B needs only the region shapes with
cmin + (a lower bound of their cost) ≤ B, the edges with cmin + cost ≤ B and
the completions with cmin + cost ≤ B, cmin the least cost of reaching the
state: every placement costing at most B passes all three tests everywhere
along it.  The bound grows 0, the cheapest candidate, then doubling; a
solution within B is optimal.  Each bound's forward pass reuses the analyses
of the previous ones and analyses only what is new.

Floating point: decisions use a relative tolerance of 1e-9 (DC levels that
agree to 1e-12 V are one state); the chosen placement is re-analysed in full
and its figures are the ones reported.  The engine's own DC iteration (for
base currents) settles to 1e-9 V, so chains with emitter followers agree with
full analyses to that level.

Complexity: one engine call per interface and cost bound, linear in the
chain's length for a fixed density of cuts and DC resets; the label sets are
bounded by the number of cost/gain trade-offs that stay non-dominated — the
problem contains knapsack (gains multiply, costs add), so no exact method is
polynomial in the worst case.
"""
from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import check_operating_points, evaluate, frequency_grid
from ..engine.cascade import run_ac
from ..errors import UsageError, nearest
from ..spec.insert import insert_buffers
from .labels import REL
from ..spec.model import Chain
from ..spec.parts import Candidate, candidates_of, default_cost_basis, supply_power
from .search import MAX_LABELS, Limits, Run, Search, Stopped
from ..spec.units import fmt


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
    max_loss_db: float | None = None                     # loading loss at every interface (dB lost, ≥ 0), at f_ref
    origin: dict = field(default_factory=dict)           # kind -> [where the target came from]
    skipped: list = field(default_factory=list)          # spec requirements the optimiser does not target
    report_only: list = field(default_factory=list)      # spec requirements left out of the targets (--targets)
    gain_unit: str = "dB"                                # 'dBΩ' on a transimpedance chain (Chain.gain_db_unit)

    KINDS = ("gain", "max_gain", "headroom", "f_high", "f_low", "power", "loss")

    def add_origin(self, kind: str, where: str) -> None:
        self.origin.setdefault(kind, []).append(where)

    def headroom_for(self, node: str) -> float | None:
        vals = [v for v in (self.min_headroom_v, self.node_headroom_v.get(node)) if v is not None]
        return max(vals) if vals else None

    def kinds(self) -> list[str]:
        have = {"gain": bool(self.min_gain_db), "max_gain": bool(self.max_gain_db),
                "headroom": self.min_headroom_v is not None or bool(self.node_headroom_v),
                "f_high": self.min_f_high_hz is not None, "f_low": self.max_f_low_hz is not None,
                "power": self.max_power_w is not None, "loss": self.max_loss_db is not None}
        return [k for k in self.KINDS if have[k]]

    def only(self, kinds) -> "Targets":
        """A copy keeping only the given kinds."""
        t = Targets(origin=self.origin, gain_unit=self.gain_unit)
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
        if "loss" in kinds:
            t.max_loss_db = self.max_loss_db
        return t


def targets_from_requirements(chain: Chain, targets: Targets | None = None, chosen=None) -> Targets:
    """Add the spec's ``requirements:`` that the optimiser can target (the stricter wins); with
    ``chosen`` (a list of requirements) only those, the others are only reported."""
    t = targets or Targets()
    t.gain_unit = chain.gain_db_unit
    for r in chain.extra.get("requirements", []):
        if chosen is not None and r not in chosen:
            t.report_only.append(r.name)
            continue
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
        elif key == "max_loading_loss" and not r.targets and getattr(r, "at_hz", None) is None:
            t.max_loss_db = lim if t.max_loss_db is None else min(lim, t.max_loss_db)
            t.add_origin("loss", src)
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
    loss_db: float = 0.0        # the worst interface's loading loss (dB lost) at f_ref

    def meets(self) -> bool:
        return self.valid and all(m >= -REL * max(1.0, abs(m)) for m in self.margins.values())


@dataclass
class Shortfall:
    kind: str                   # 'gain', 'headroom', 'f_high', 'f_low', 'power'
    target: str                 # the target in words
    best: str                   # best value reachable, in words
    best_value: float | None
    with_others: bool           # True: reachable while meeting the other targets
    proven: bool = True         # False: the time budget ran out; the value is reachable, maybe not the best
    limiter: str = ""           # what limits the best reachable placement, in words


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
    conflicts: list = field(default_factory=list)   # contradictory targets, in words (no search made)
    proven: bool = True          # feasible: the optimum; infeasible: nothing fits (else: the budget ran out)
    lower_bound: float | None = None   # the least cost the search proved any feasible placement has
    ties: int = 0                # other placements of the same cost the margin rule passed over

    @property
    def gap(self) -> float | None:
        """Cost above the proved lower bound (0 when proven optimal)."""
        if self.cost is None or self.lower_bound is None:
            return None
        return max(0.0, self.cost - self.lower_bound)

    @property
    def n_buffers(self) -> int:
        return len(self.placements)


# -- measuring a placement by full analysis ---------------------------------------------------

def measure(chain: Chain, targets: Targets, buffered: Chain | None = None, ev=None) -> Measured:
    """Figures of a chain (as buffered) from a full analysis (``ev`` if already made), with each
    targeted kind's margin."""
    c = buffered or chain
    with np.errstate(all="ignore"):
        ev = evaluate(c) if ev is None else ev
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
    with np.errstate(all="ignore"):
        worst_loss = max((float(ev.interface_loss_db(n, 0)[0]) for n in ev.loading_interfaces()), default=0.0)
    if targets.max_loss_db is not None:
        margins["loss"] = targets.max_loss_db - worst_loss
    finite = [(r, n) for n, (r, _) in rooms.items() if math.isfinite(r)]
    worst = min(finite) if finite else (None, None)
    return Measured(valid, gains, None if f_lo == 0.0 else f_lo, None if math.isinf(f_hi) else f_hi,
                    worst[0], worst[1], power, margins, worst_loss)


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
                             "has none (add cost: price: <value> in its parts file, or use --cost power)")
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


#: Default time budget of one optimisation (seconds): the best plan found by then is returned.
TIME_LIMIT_S = 10.0
#: Labels per state kept by the heuristic (beam) run that finds a first plan.
BEAM = 6


def optimise(chain: Chain, targets: Targets, candidates: list[Candidate] | None = None,
             basis: str | None = None, explain: bool = True, time_limit: float | None = None,
             max_labels: int = MAX_LABELS, progress=None) -> Plan:
    """The cheapest placement of candidate buffers meeting ``targets`` (see the module docstring).
    When none does and ``explain`` is set, the plan's shortfalls say which target cannot be met
    and the best value reachable (a few more searches over the same region analyses).

    ``time_limit`` (seconds, None: none) and ``max_labels`` bound the search; when either runs
    out the plan is the best one found so far (``proven`` False) with the lower bound the search
    had proved on the cost (``lower_bound``; ``gap`` = cost − lower bound).  ``progress(dict)`` is
    called after each cost bound (states, best cost, bound, seconds)."""
    t0 = time.perf_counter()
    cands = candidates_of(chain) if candidates is None else candidates
    basis = cost_basis_for(cands, basis)
    check_nodes(chain, targets.node_headroom_v)
    conflicts = contradictions(targets)
    with np.errstate(all="ignore"):
        ev0 = evaluate(chain)
    check_operating_points(chain, ev0.dc)
    before = measure(chain, targets, ev=ev0)
    grid, cols = _grid(chain, targets)
    search = Search(chain, cands, basis, grid, cols)
    limits = Limits(time_limit, max_labels, progress)
    if conflicts:
        return Plan(chain, False, basis, None, [], None, None, before, targets, [], {"seconds": 0.0},
                    conflicts=conflicts)
    state = {"picks": None, "proven": False, "lower": 0.0, "incumbent": None, "stopped": None,
             "infeasible": False, "run": None}
    try:
        _deepen(chain, search, targets, before, limits, state, t0)
    except Stopped as stop:
        state["stopped"] = stop.reason
        if state["incumbent"] is None:             # a last quick try for some plan
            limits.extend(max(1.0, 0.5 * (time_limit or 1.0)))
            try:
                state["incumbent"] = _beam(search, targets, limits)
            except Stopped:
                pass
    run = state["run"]
    regions = search.regions
    stats = {"states": run.st.n if run is not None else 0,
             "region_shapes": sum(len(w.shapes) for w in regions.waves.values()),
             "analyses": regions.samples, "engine_calls": regions.calls,
             "cost_bound": run.cap if run is not None and hasattr(run, "cap") else None,
             "stopped": state["stopped"]}
    picks = state["picks"] if state["picks"] is not None else state["incumbent"]
    if picks is None:
        stats["seconds"] = time.perf_counter() - t0
        limits.extend(max(1.0, time_limit or 1.0)) if state["stopped"] else None
        proven = state["infeasible"]
        short = []
        if explain and (proven or state["stopped"] is None):
            short = shortfalls(search, targets, Limits(time_limit, max_labels))
        plan = Plan(chain, False, basis, None, [], None, None, before, targets, short, stats,
                    proven=proven, lower_bound=state["lower"])
        stats["seconds"] = time.perf_counter() - t0
        return plan
    plan = _plan(chain, search, picks, targets, before, stats)
    plan.proven = state["picks"] is not None
    plan.lower_bound = plan.cost if plan.proven else min(state["lower"], plan.cost)
    plan.ties = state.get("ties", 0)
    stats["seconds"] = time.perf_counter() - t0
    return plan


def _deepen(chain, search, targets, before, limits, state, t0) -> None:
    """Iterative deepening over cost bounds (see ``_bounds``), recording into ``state`` the optimum
    (``picks``, proven), the largest bound proved to hold no feasible placement (``lower``), a
    plan found on the way (``incumbent``) and whether nothing is feasible at all."""
    run = None
    bounds = list(_bounds(search))
    k = 0
    while k < len(bounds):
        bound = bounds[k]
        if k == CHECK_AFTER and math.isinf(bounds[-1]):
            # deeper bounds reach ever more states: first find some plan (a quick heuristic run,
            # then an exact feasibility search), and let its cost be the last bound
            some = _beam(search, targets, limits)
            if some is None:
                some = _feasible(search, targets, limits)
            if some is None:
                state["infeasible"] = True
                return
            state["incumbent"] = some
            top = _plan(chain, search, some, targets, before, {}).cost
            bounds = [b for b in bounds[k:] if b < top] + [top]
            k = 0
            continue
        if run is None or bound > run.bound:            # reach further: a new forward pass
            reach = bounds[min(k + 1, len(bounds) - 1)] if bound == 0 else bound
            run = Run(search, targets, reach, limits=limits)
            state["run"] = run
            run.forward()
        root = run.backward(bound)
        q, tied = run.best(root)
        if q is not None and root.cost[q] <= bound + REL * max(1.0, abs(bound)):
            state["picks"], state["proven"] = run.choices(root, q), True
            if tied:
                state["picks"], state["ties"] = _most_margin(chain, search, targets, before,
                                                             [run.choices(root, x) for x in [q, *tied[:MAX_TIES]]])
            return
        if math.isinf(bound):
            state["infeasible"] = True
            return
        state["lower"] = max(state["lower"], bound)
        if limits.progress is not None:
            limits.progress({"states": run.st.n, "bound": bound, "seconds": time.perf_counter() - t0,
                             "best": None if state["incumbent"] is None else
                             _plan(chain, search, state["incumbent"], targets, before, {}).cost})
        k += 1
    state["infeasible"] = True


#: Placements of equal cost compared by their margins at most (each is analysed in full).
MAX_TIES = 7


def _most_margin(chain, search, targets, before, options: list) -> tuple[dict, int]:
    """Of placements that tie on cost, buffers and parts, the one with the most margin on its
    tightest target (margins from full analyses, each in dB: gain and loading loss as they are,
    headroom as 20·log10(room/target), band edges as 20·log10 of the edge over its limit, power as
    20·log10(limit/power)); returns it and the number passed over."""
    def tightest(picks):
        m = _plan(chain, search, picks, targets, before, {}).measured
        return min(margin_db(targets, m).values(), default=0.0)
    scored = [(tightest(p), -i, p) for i, p in enumerate(options)]
    return max(scored, key=lambda x: (x[0], x[1]))[2], len(options) - 1


def margin_db(t: Targets, m: Measured) -> dict:
    """Each targeted kind's margin in dB (positive = met): see ``_most_margin``."""
    out = {}
    with np.errstate(all="ignore"):
        for k, v in m.margins.items():
            if k in ("gain", "max_gain", "loss"):
                out[k] = v
            elif k == "headroom":
                h = max([x for x in (t.min_headroom_v, *t.node_headroom_v.values()) if x is not None] or [0.0])
                out[k] = 20 * math.log10(max((h + v) / h, 1e-12)) if h > 0 else v
            elif k in ("f_high", "f_low"):
                out[k] = 20 * math.log10(max(1 + v, 1e-12))
            elif k == "power":
                lim = t.max_power_w
                out[k] = 20 * math.log10(lim / max(lim - v, 1e-30)) if lim and lim > 0 else v
    return out


def _beam(search: Search, targets: Targets, limits) -> dict | None:
    """A first placement meeting the targets from a heuristic run (a few labels per state), or None
    (which proves nothing)."""
    run = Run(search, targets, limits=limits, beam=BEAM)
    run.forward()
    root = run.backward()
    q, _ = run.best(root)
    return None if q is None else run.choices(root, q)


def contradictions(t: Targets) -> list[str]:
    """Targets that no chain can meet together, in words, before any search: a minimum gain above
    a maximum gain at the same frequency, a negative power limit."""
    out = []
    for f, lo in t.min_gain_db.items():
        hi = t.max_gain_db.get(f)
        if hi is not None and lo > hi:
            out.append(f"gain ≥ {lo:.2f} dB at {fmt(f, 'Hz')} ({_src(t, 'gain')}) and gain ≤ {hi:.2f} dB at "
                       f"{fmt(f, 'Hz')} ({_src(t, 'max_gain')}) contradict each other")
    if t.max_power_w is not None and t.max_power_w < 0:
        out.append(f"follower power ≤ {fmt(t.max_power_w, 'W')} ({_src(t, 'power')}) cannot be met: power is "
                   "never negative")
    if t.max_loss_db is not None and t.max_loss_db < 0:
        out.append(f"loading loss ≤ {t.max_loss_db:.2f} dB ({_src(t, 'loss')}) cannot be met: a passive "
                   "interface never gains")
    return out


def _src(t: Targets, kind: str) -> str:
    return ", ".join(t.origin.get(kind, [])) or "given"


#: Cost bounds tried before checking that any placement is feasible at all (see optimise).
CHECK_AFTER = 4


def _bounds(search: Search):
    """Cost bounds for iterative deepening: 0, the cheapest candidate, then doubling up to
    every interface buffered with the dearest one, then none.  A search with bound B finds
    every placement costing at most B, so a solution within B is optimal."""
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


def _plan(chain, search, picks, targets, before, stats) -> Plan:
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
    return Plan(chain, True, search.basis, cost, rows, buffered, measure(chain, targets, buffered, ev), before,
                targets, [], stats)


# -- when nothing works: what cannot be met, and the best reachable ---------------------------

def _feasible(search: Search, targets: Targets, limits=None):
    """Some placement meeting ``targets`` (reader -> candidate index), or None."""
    run = Run(search, targets, cheapest=False, limits=limits)
    run.forward()
    root = run.backward()
    q, _ = run.best(root)
    return None if q is None else run.choices(root, q)


#: Labels an exact feasibility search of the explanation may hold before it falls back to the
#: heuristic (beam) run: what that finds is reachable, but not proven the best.
EXPLAIN_LABELS = 2_000


class _Some:
    """Feasibility checks of one explanation: exact while the label sets stay small, else the
    heuristic run; remembers whether every answer was exact."""

    def __init__(self, search, limits):
        self.search, self.limits, self.exact = search, limits, True

    def __call__(self, targets):
        small = Limits(None, min(EXPLAIN_LABELS, self.limits.max_labels))
        small.deadline = self.limits.deadline
        try:
            return _feasible(self.search, targets, small)
        except Stopped as stop:
            if stop.reason == "time":
                raise
        self.exact = False
        return _beam(self.search, targets, self.limits)


def shortfalls(search: Search, targets: Targets, limits=None) -> list[Shortfall]:
    """Which targets cannot be met, and the best value reachable for each: while
    meeting the other targets if that is possible, else on its own.  When ``limits`` run out the
    values found so far are reported (reachable, but not proven the best)."""
    limits = limits or Limits(None)
    some = _Some(search, limits)
    kinds = targets.kinds()
    blocking = []
    try:
        for k in kinds:
            if some(targets.only([x for x in kinds if x != k])) is not None:
                blocking.append(k)
    except Stopped:
        return [Shortfall(k, target_text(targets, k), "not found within the time limit", None, False, False)
                for k in kinds]
    with_others = bool(blocking)
    out = []
    for k in (blocking or kinds):
        others = [x for x in kinds if x != k] if with_others else []
        out.append(_best_reachable(search, targets, k, others, with_others, some))
    return out


def _best_reachable(search: Search, targets: Targets, kind: str, others: list, with_others: bool,
                    some) -> Shortfall:
    """Bisect the target of ``kind`` between a reachable value and the target itself."""
    chain = search.chain
    base = targets.only(others)
    try:
        picks = some(base)
    except Stopped:
        return Shortfall(kind, target_text(targets, kind), "not found within the time limit", None, with_others,
                         False)
    if picks is None:
        return Shortfall(kind, target_text(targets, kind), "no placement can be biased", None, with_others)
    best = insert_buffers(chain, {r: search.cands[o] for r, o in picks.items()})
    start = measure(chain, targets.only([kind]), best)
    lo_v, hi_v = _knob(targets, kind, start)        # knob values: reachable (lo_v) and target (hi_v)
    proven = True
    try:
        for _ in range(40):
            if _close(kind, lo_v, hi_v):
                break
            mid = _mid(kind, lo_v, hi_v)
            trial = _with_knob(targets, kind, mid, base)
            found = some(trial)
            if found is not None:
                lo_v, picks = mid, found
            else:
                hi_v = mid
    except Stopped:
        proven = False
    return Shortfall(kind, target_text(targets, kind), _knob_text(targets, kind, lo_v), lo_v, with_others,
                     proven and some.exact, _limiter(search, picks))


def _limiter(search: Search, picks: dict) -> str:
    """What limits the best reachable placement, in words: the interface that loses most in it,
    and the buffers it uses."""
    chain = search.chain
    b = insert_buffers(chain, {r: search.cands[o] for r, o in picks.items()})
    with np.errstate(all="ignore"):
        ev = evaluate(b)
        losses = [(float(ev.interface_loss_db(n, 0)[0]), b.stage(n)) for n in ev.loading_interfaces()]
    worst = max(losses, key=lambda x: x[0], default=None)
    used = ", ".join(f"{search.cands[o].name} at {r}" for r, o in sorted(picks.items())) or "no buffer"
    if worst is None or not math.isfinite(worst[0]):
        return f"with {used}"
    st = worst[1]
    return f"with {used}; the worst interface left is {st.parent} → {st.name} ({worst[0]:.2f} dB lost)"


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
    if kind == "loss":
        return min(-m.loss_db, -targets.max_loss_db), -targets.max_loss_db
    return min(-m.power_w, -targets.max_power_w), -targets.max_power_w


def _close(kind, a, b) -> bool:
    tol = {"gain": 0.005, "max_gain": 0.005, "headroom": 1e-4, "f_high": 0.002, "f_low": 0.002,
           "power": 1e-6, "loss": 0.005}[kind]
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
    elif kind == "loss":
        t.max_loss_db = -x
    else:
        t.max_power_w = -x
    return t


def target_text(t: Targets, kind: str) -> str:
    if kind == "gain":
        return "gain " + ", ".join(f"≥ {db:.2f} {t.gain_unit} at {fmt(f, 'Hz')}" for f, db in t.min_gain_db.items())
    if kind == "max_gain":
        return "gain " + ", ".join(f"≤ {db:.2f} {t.gain_unit} at {fmt(f, 'Hz')}" for f, db in t.max_gain_db.items())
    if kind == "headroom":
        parts = ([f"≥ {fmt(t.min_headroom_v, 'V')} at every node"] if t.min_headroom_v is not None else []) + \
            [f"≥ {fmt(h, 'V')} at {n}" for n, h in t.node_headroom_v.items()]
        return "headroom " + ", ".join(parts)
    if kind == "f_high":
        return f"upper band edge ≥ {fmt(t.min_f_high_hz, 'Hz')}"
    if kind == "f_low":
        return f"lower band edge ≤ {fmt(t.max_f_low_hz, 'Hz')}"
    if kind == "loss":
        return f"loading loss ≤ {t.max_loss_db:.2f} dB at every interface"
    return f"follower power ≤ {fmt(t.max_power_w, 'W')}"


def _knob_text(t: Targets, kind: str, x: float) -> str:
    if kind == "gain":
        return ", ".join(f"{db + x:.2f} {t.gain_unit} at {fmt(f, 'Hz')}" for f, db in t.min_gain_db.items())
    if kind == "max_gain":
        return ", ".join(f"{db - x:.2f} {t.gain_unit} at {fmt(f, 'Hz')}" for f, db in t.max_gain_db.items())
    if kind == "headroom":
        base = t.min_headroom_v if t.min_headroom_v is not None else min(t.node_headroom_v.values())
        return f"{fmt(base + x, 'V')} of headroom"
    if kind == "f_high":
        return f"upper edge {fmt(math.exp(x), 'Hz')}"
    if kind == "f_low":
        return f"lower edge {fmt(math.exp(-x), 'Hz')}"
    if kind == "loss":
        return f"{-x:.2f} dB of loading loss at the worst interface"
    return f"{fmt(-x, 'W')} of follower power"
