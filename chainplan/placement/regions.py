"""Region analyses for the exact buffer placement (``chainplan.placement.optimiser``), batched.

A *region* runs from a cut (or the source) through the stages it drives up to
the next cuts, with a choice made at each interface inside it: no buffer, a
bilateral candidate (it stays inside), or a unilateral candidate (it ends the
region there; see ``is_cut``).  The placement search needs region shapes
analysed at the DC levels their input node can have.

Every region that starts at one interface — every cut element that can read
that node, every shape below it, every DC level — is analysed by **one**
engine call (``chainplan.engine.budget.evaluate``), stacked along the engine's samples
axis.  The chain the engine sees is the *superset* of the shapes (a
:class:`Wave`): at every place where an original stage, a candidate or a
candidate's bias network can sit there is a ``chainplan.placement.switch.Switch`` that
is, per sample, a plain connection, the element itself, or a terminal.  A
sample's stages below a terminal are all plain connections, so each sample is
exactly the region shape it stands for, analysed as a chain of its own.
Nodes that a plain connection or a terminal joins to the node before it are
one electrical node: their limits are merged (the tighter wins) and the
figures are read at the real node.  Switches that are a plain connection for
every sample of a call are left out of that call's chain (an identity changes
no number).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import evaluate, nominal_params, virtual_grounds
from ..spec.insert import bias_names, buffer_names
from ..spec.model import Analysis, Chain, Stage
from ..spec.parts import Candidate
from ..spec.rules import banned
from .switch import MODEL, PASS, TERMINAL, Element, Switch

#: Kinds that cut the chain (unilateral input and output; DC from the input node voltage only).
#: A source follower is unilateral too, but its output range is not: its class-A swing
#: limit depends on the load it drives (engine/swing.py), so it stays inside a region.
CUT_KINDS = ("opamp_follower", "opamp_noninverting", "amplifier")
#: Samples × frequencies of one engine call at most (bounds the arrays' memory, ~2 MB each).
MAX_CELLS = 1 << 17
ROOT = ("", -1, -1)
#: Newton rounds after which a region sample with an impossible operating point no longer holds
#: up the DC iteration of its batch (it is discarded as invalid; see chainplan.engine.dcpass).
BAD_SETTLES_AFTER = 6


def is_cut(st: Stage) -> bool:
    """Does this stage split the chain?  Unilateral in both senses: input admittance and DC input
    current independent of what it drives, output a function of its input node's voltage only (ABCD
    with A·D − B·C = 0: op-amp followers and non-inverting stages, the amplifier macro model) and an
    output range that does not depend on the load (a follower's class-A limit does)."""
    return st.kind in CUT_KINDS


@dataclass
class _SwitchStage(Stage):
    """A stage of the superset chain: its model is a :class:`Switch`."""
    switch: Switch | None = None

    @property
    def model(self):
        return self.switch


# -- region shapes ----------------------------------------------------------------------------------

@dataclass
class Shape:
    """One shape of the region below a start: the non-default variant of each switch, the terminals
    (switch, child key), the buffers it places (switch, candidate index), the choices made at each
    interface (reader -> candidate index, −1 for none), and the node the output is read at (or −1)."""
    assign: dict
    terms: list
    bufs: list
    choices: dict
    out: int = -1


@dataclass
class Wave:
    """The superset of every region starting at one interface (or at the source), its shapes, and the
    analyses made so far: ``rows[(key, vkey)][shape]`` is the row of that analysis in the result
    arrays ``data`` (−1: not made yet)."""
    reader: str | None                      # the interface; None at the source
    switches: list = field(default_factory=list)
    parent: list = field(default_factory=list)          # switch -> node index it reads
    node: list = field(default_factory=list)            # switch -> node index it drives (−1 for a load)
    names: list = field(default_factory=list)           # node -> name (node 0: per key)
    start: int | None = None                             # the start switch
    start_var: dict = field(default_factory=dict)        # candidate index (−1: none) -> its variant
    shapes: list = field(default_factory=list)
    keys: list = field(default_factory=list)
    key_index: dict = field(default_factory=dict)
    src_names: dict = field(default_factory=dict)        # key -> name of the region's input node
    rows: dict = field(default_factory=dict)
    data: dict | None = None
    subs: dict = field(default_factory=dict)             # the superset as chains for the engine
    assign: np.ndarray | None = None
    modes: list = field(default_factory=list)            # switch -> mode per variant (array)
    term_node: np.ndarray | None = None                  # (shapes, T) node each terminal reads, −1 none
    term_kid: np.ndarray | None = None                   # (shapes, T) child key of each terminal (index)
    child_keys: list = field(default_factory=list)
    out_node: np.ndarray | None = None
    lb: np.ndarray | None = None
    nbuf: np.ndarray | None = None


class Regions:
    """Every region of one chain over one frequency grid, analysed on demand and kept for every
    optimisation run on the chain (targets change; the analyses do not)."""

    def __init__(self, chain: Chain, cands: list[Candidate], basis: str, grid: np.ndarray, lb_of):
        self.chain, self.cands, self.basis, self.grid = chain, cands, basis, grid
        self.banned = banned(chain, cands)             # (reader, candidate) pairs placement rules forbid
        self.lb_of = lb_of                               # candidate index -> a lower bound of its cost
        self.names, self.bias_at = buffer_names(chain), bias_names(chain)
        self.by_name = {st.name: st for st in chain.all_stages}
        self.readers = {st.name: [] for st in chain.all_stages}
        for st in chain.stages:
            self.readers[st.parent].append(st)
        self.cut = {st.name: is_cut(st) for st in chain.stages}
        #: virtual-ground inputs (a transimpedance or charge amplifier): no buffer goes in front of
        #: them, and their interface (the reader, its buffer and bias switches) has no loading loss
        self.vground = set(virtual_grounds(chain))
        self.no_loss = {x for n in self.vground for x in (n, self.names.get(n), self.bias_at.get(n)) if x}
        self.uni = [is_cut(c.stage) for c in cands]
        self.out_stage = _output_stage(chain)
        t = chain.temp_k
        tn = chain.t_nom_k
        self.orig = {st.name: Element(st, t, t_nom_k=tn) for st in chain.stages}
        self.cand_el = [Element(c.stage, t, c, t_nom_k=tn) for c in cands]
        self.bias_el = [Element(c.input_bias, t, t_nom_k=tn) if c.input_bias is not None else None for c in cands]
        self.shared = {"memo": {}, "layouts": {}, "groups": {}}   # DC solutions per element and input row
        self.waves: dict = {}
        self.calls = 0
        self.samples = 0

    # -- waves and keys -------------------------------------------------------------------------
    def wave_of(self, key) -> Wave:
        """The wave a state key belongs to: keys are (reader, phase, candidate); phase 1 is an
        original cut reading the bilateral buffer in front of it."""
        reader = None if key == ROOT else key[0]
        w = self.waves.get(reader)
        if w is None:
            w = self.waves[reader] = self._build(reader)
        if key not in w.key_index:
            w.key_index[key] = len(w.keys)
            w.keys.append(key)
            w.src_names[key] = self._src_name(key)
        return w

    def _src_name(self, key) -> str:
        if key == ROOT:
            return self.chain.source.name
        reader, phase, e = key
        if phase == 1:
            return self.names[reader]
        if e >= 0 and self.cands[e].input_bias is not None:
            return self.bias_at[reader]
        return self.by_name[reader].parent

    # -- the superset of a wave --------------------------------------------------------------------
    def _build(self, reader) -> Wave:
        w = Wave(reader)
        w.names.append("")                               # node 0: the region's input (per key)
        if reader is None:
            below = [(q, 0) for q in self.readers[self.chain.source.name]]
        else:
            st = self.by_name[reader]
            variants = [(PASS, None)] + [(MODEL, self.cand_el[o]) for o in range(len(self.cands)) if self.uni[o]]
            w.start_var = {-1: 0, **{o: i + 1 for i, o in enumerate(o for o in range(len(self.cands))
                                                                   if self.uni[o])}}
            w.start = self._add(w, self._switch("two_port", variants), 0, self.names[reader])
            top = self._add(w, self._switch(st.role, [(MODEL, self.orig[reader])]), w.node[w.start], reader)
            below = [(q, w.node[top]) for q in self.readers[reader]] if st.role == "two_port" else []
        slots = [self._slot(w, q, at) for q, at in below]
        w.shapes = [Shape({}, [], [], {})]
        for slot in slots:
            w.shapes = [_merge(a, b) for a in w.shapes for b in slot]
        if reader is not None:
            rsw = w.start + 1
            out = w.node[rsw] if self.by_name[reader].role == "two_port" else w.node[w.start]
            if self.out_stage == reader:
                for sh in w.shapes:
                    sh.out = out
        elif self.out_stage == self.chain.source.name:
            for sh in w.shapes:
                sh.out = 0
        self._tables(w)
        return w

    def _switch(self, role: str, variants: list) -> Switch:
        return Switch(role, variants, self.shared)

    def _add(self, w: Wave, sw: Switch, parent_node: int, name: str) -> int:
        w.switches.append(sw)
        w.parent.append(parent_node)
        if sw.role == "two_port":
            w.node.append(len(w.names))
            w.names.append(name)
        else:
            w.node.append(-1)
        w.modes.append(sw.modes)
        return len(w.switches) - 1

    def _slot(self, w: Wave, q: Stage, at: int) -> list[Shape]:
        """Switches for the interface into ``q`` (its bias network, its buffer) and for ``q`` and
        what it drives; returns the shapes of that part (one per combination of choices)."""
        cands = self.cands
        bias_sw = None
        biased = [o for o, c in enumerate(cands) if c.input_bias is not None]
        if biased:
            variants = [(PASS, None)] + [(MODEL, self.bias_el[o]) for o in biased]
            bias_sw = self._add(w, self._switch("two_port", variants), at, self.bias_at[q.name])
            at = w.node[bias_sw]
        variants = [(PASS, None)] + [((TERMINAL if self.uni[o] else MODEL), self.cand_el[o]) for o in range(len(cands))]
        buf_sw = self._add(w, self._switch("two_port", variants), at, self.names[q.name])
        ends = q.role == "two_port" and self.cut[q.name]
        q_sw = self._add(w, self._switch(q.role, [(PASS, None), (TERMINAL if ends else MODEL, self.orig[q.name])]),
                         w.node[buf_sw], q.name)
        below = []
        if q.role == "two_port" and not ends:
            below = [self._slot(w, r, w.node[q_sw]) for r in self.readers[q.name]]
        out_at = -1                  # the output node, when this region computes it
        if self.out_stage == q.name and not ends:
            out_at = w.node[buf_sw] if q.role == "load" else w.node[q_sw]
        out = []
        for o in [-1] if q.name in self.vground else [-1, *range(len(cands))]:
            if o >= 0 and (q.name, o) in self.banned:      # the spec's placement rules keep it out of here
                continue
            assign, terms, bufs = {}, [], []
            if o >= 0:
                if cands[o].input_bias is not None:
                    assign[bias_sw] = 1 + biased.index(o)
                assign[buf_sw] = 1 + o
                if self.uni[o]:
                    out.append(Shape(assign, [(buf_sw, (q.name, 0, o))], [], {q.name: o}))
                    continue
                bufs.append((buf_sw, o))
            assign[q_sw] = 1
            if ends:
                terms.append((q_sw, (q.name, 0 if o < 0 else 1, -1)))
            base = Shape(assign, terms, bufs, {q.name: o}, out_at)
            shapes = [base]
            for sub in below:
                shapes = [_merge(a, b) for a in shapes for b in sub]
            out.extend(shapes)
        return out

    def _tables(self, w: Wave) -> None:
        n_sw, n_sh = len(w.switches), len(w.shapes)
        w.assign = np.zeros((n_sh, n_sw), dtype=int)
        T = max((len(sh.terms) for sh in w.shapes), default=0)
        w.term_node = np.full((n_sh, T), -1, dtype=int)
        w.term_kid = np.full((n_sh, T), -1, dtype=int)
        index: dict = {}
        for i, sh in enumerate(w.shapes):
            for j, v in sh.assign.items():
                w.assign[i, j] = v
            for k, (j, key) in enumerate(sh.terms):
                w.term_node[i, k] = w.parent[j]
                w.term_kid[i, k] = index.setdefault(key, len(index))
        w.child_keys = list(index)
        w.out_node = np.array([sh.out for sh in w.shapes], dtype=int)
        w.nbuf = np.array([len(sh.bufs) for sh in w.shapes], dtype=int)
        w.lb = np.array([sum(self.lb_of(o) for _, o in sh.bufs) +
                         sum(self.lb_of(key[2]) for _, key in sh.terms if key[2] >= 0) for sh in w.shapes])

    # -- analyses -------------------------------------------------------------------------------------
    def rows_of(self, w: Wave, key, vk) -> np.ndarray:
        """Row of each shape's analysis at state (key, DC level key) in the wave's results (−1: not
        analysed yet)."""
        r = w.rows.get((key, vk))
        if r is None:
            r = w.rows[(key, vk)] = np.full(len(w.shapes), -1)
        return r

    def analyse(self, w: Wave, key_of, shape_of, v_of, vk_of) -> None:
        """Analyse the samples (key index, shape, DC level) not analysed yet: one engine call (or a
        few, to bound the arrays' size: MAX_CELLS samples × frequencies)."""
        if not len(key_of):
            return
        per = max(1, MAX_CELLS // len(self.grid))                   # samples per engine call
        blocks = [self._call(w, key_of[i:i + per], shape_of[i:i + per], v_of[i:i + per])
                  for i in range(0, len(key_of), per)]
        base = 0 if w.data is None else len(w.data["valid"])
        blocks = ([w.data] if w.data is not None else []) + blocks
        w.data = {k: np.concatenate([blk[k] for blk in blocks]) for k in blocks[0]}
        for i, (k, d, vk) in enumerate(zip(key_of, shape_of, vk_of)):
            w.rows[(w.keys[k], vk)][d] = base + i

    def _superset_chain(self, w: Wave, kept: tuple) -> tuple[Chain, list]:
        """The superset as a chain for the engine, without the switches that are a plain
        connection for every sample (``kept``: the others); and, per node, the name of the node it
        is the same as in that chain."""
        if kept in w.subs:
            return w.subs[kept]
        src = self.chain.source if w.reader is None else \
            Stage(name="@0", kind="sensor", params={"amplitude": 1.0, "dc": 0.0, "r": 0.0, "c": 0.0}, parent=None)
        alias = [src.name] + [""] * (len(w.names) - 1)
        stages = []
        for j, sw in enumerate(w.switches):
            parent = alias[w.parent[j]]
            if w.node[j] > 0:
                alias[w.node[j]] = f"@{w.node[j]}" if j in kept else parent
            if j in kept:
                stages.append(_SwitchStage(name=alias[w.node[j]] if w.node[j] > 0 else f"@load{j}", kind="switch",
                                           params={}, parent=parent, switch=sw))
        sub = Chain(name=self.chain.name, description="", source=src, stages=stages, rails=self.chain.rails,
                    temp_k=self.chain.temp_k, t_nom_k=self.chain.t_nom_k, analysis=Analysis(f_ref_hz=self.chain.analysis.f_ref_hz),
                    path=self.chain.path)
        w.subs[kept] = (sub, alias)
        return sub, alias

    def _call(self, w: Wave, key_of, shape_of, v_of) -> dict:
        """One engine call: sample i is shape ``shape_of[i]`` of key ``key_of[i]`` fed at DC ``v_of[i]``."""
        n = len(key_of)
        choice = w.assign[shape_of].copy()
        if w.start is not None:
            starts = np.array([w.start_var[key[2]] for key in w.keys])
            choice[:, w.start] = starts[key_of]
        kept = tuple(j for j in range(len(w.switches)) if np.any(w.modes[j][choice[:, j]] != PASS))
        for j in kept:
            w.switches[j].use(choice[:, j])
        sub, alias = self._superset_chain(w, kept)
        params = nominal_params(sub)
        if w.reader is not None:
            params[sub.source.name]["dc"] = v_of.reshape(n, 1)
        with np.errstate(all="ignore"):
            ev = evaluate(sub, params, self.grid, bad_settles_after=BAD_SETTLES_AFTER)
            self.calls += 1
            self.samples += n
            return self._extract(w, ev, sub, alias, choice, shape_of, key_of, n)

    def _extract(self, w: Wave, ev, sub, names, choice, shape_of, key_of, n) -> dict:
        N = len(names)        # the real node each node belongs to: a pass or a terminal joins its output to its input
        rep = np.tile(np.arange(N), (n, 1))
        for j in range(len(w.switches)):
            if w.node[j] > 0:
                is_model = w.modes[j][choice[:, j]] == MODEL
                rep[:, w.node[j]] = np.where(is_model, w.node[j], rep[:, w.parent[j]])
        rows = np.arange(n)
        dc = np.stack([np.broadcast_to(np.ravel(ev.dc.node_v[nm]), (n,)) for nm in names], axis=1)
        lo = np.full((n, N), -np.inf)
        hi = np.full((n, N), np.inf)
        for i, nm in enumerate(names):
            a, b = ev.dc.limits[nm]
            np.maximum.at(lo, (rows, rep[:, i]), np.broadcast_to(np.ravel(a), (n,)))
            np.minimum.at(hi, (rows, rep[:, i]), np.broadcast_to(np.ravel(b), (n,)))
        real = rep == np.arange(N)[None, :]
        t = np.where(real, np.stack([np.abs(np.broadcast_to(ev.ac.node_h.at(nm, 0), (n,))) for nm in names],
                                    axis=1), np.nan)
        room = np.where(real, np.minimum(hi - dc, dc - lo), np.nan)
        valid = np.ones(n, dtype=bool)
        power, cost, parts = np.zeros(n), np.zeros(n), np.zeros(n)
        for st in sub.stages:
            op = ev.dc.ops[st.name]
            valid &= ~np.broadcast_to(np.ravel(op.bad), (n,))
            pw, c, k = st.switch.spend(op, self.basis)
            power, cost, parts = power + pw, cost + c, parts + k
        valid &= np.all(np.isfinite(np.where(real, dc, 0.0)) & np.isfinite(np.where(real, t, 0.0)), axis=1)
        # the worst loading loss (dB lost) at the region's interfaces at f_ref: a plain connection
        # repeats the loss of the real interface below it, a terminal is the next cut's input
        loss = np.zeros(n)
        for st in sub.stages:
            if st.name in self.no_loss:
                continue
            lost = np.broadcast_to(np.ravel(ev.interface_loss_db(st.name, 0)), (n,))
            loss = np.fmax(loss, lost)
        tn = w.term_node[shape_of]                                   # (n, T) node each terminal reads
        tr = np.where(tn >= 0, rep[rows[:, None], np.maximum(tn, 0)], -1)
        term_v = np.where(tn >= 0, dc[rows[:, None], np.maximum(tr, 0)], np.nan)
        on = w.out_node[shape_of]
        orep = np.where(on >= 0, rep[rows, np.maximum(on, 0)], -1)
        F = len(self.grid)
        term_t = np.full((*tn.shape, F), np.nan)
        out_t = np.full((n, F), np.nan)
        for m in np.unique(np.concatenate((tr.ravel(), orep))):     # |V/V_X| over the grid where needed
            if m < 0:
                continue
            mag = np.abs(np.broadcast_to(ev.ac.node_h.at(names[m]), (n, F)))
            hit = np.nonzero(tr == m)
            term_t[hit] = mag[hit[0]]
            sel = np.nonzero(orep == m)[0]
            out_t[sel] = mag[sel]
        valid &= np.all(np.isfinite(term_t) | (tn < 0)[:, :, None], axis=(1, 2))
        valid &= np.all(np.isfinite(out_t), axis=1) | (on < 0)
        nbuf = w.nbuf[shape_of] + ((choice[:, w.start] > 0) if w.start is not None else 0)
        return {"valid": valid, "room": room, "t": t, "term_v": term_v, "term_t": term_t, "out_t": out_t,
                "power": power, "cost": cost, "nbuf": nbuf, "parts": parts, "key": key_of, "loss": loss}

    def node_names(self, w: Wave, key) -> list:
        return [w.src_names[key]] + w.names[1:]


def _merge(a: Shape, b: Shape) -> Shape:
    if not (b.assign or b.terms or b.bufs or b.choices):
        return a
    if not (a.assign or a.terms or a.bufs or a.choices):
        return b
    return Shape({**a.assign, **b.assign}, a.terms + b.terms, a.bufs + b.bufs, {**a.choices, **b.choices},
                 a.out if a.out >= 0 else b.out)


def _output_stage(chain: Chain) -> str:
    """The stage (or node) the end-to-end figures refer to, before any buffer is inserted."""
    out = chain.analysis.output
    if out is None:
        adcs = [st for st in chain.stages if st.kind == "adc"]
        out = adcs[0].name if adcs else chain.stages[-1].name if chain.stages else chain.source.name
    return out
