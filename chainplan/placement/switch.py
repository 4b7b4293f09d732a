"""A stage whose element is chosen per sample: how many region shapes go through the
engine (``chainplan.engine.cascade``, ``chainplan.engine.dcpass``) in one call.

A :class:`Switch` holds variants, each ``(mode, Element or None)``:

* ``PASS``: a plain connection — the identity two-port ``[[1, 0], [0, 1]]`` whose DC
  passes the source relation and the load through unchanged — or, for a load, nothing;
* ``MODEL``: the element itself, its own stage model with its own parameters;
* ``TERMINAL``: a cut element that ends the region, present only as its input admittance
  (a shunt ``[[1, 0], [Y, 1]]``) and its DC input current, both independent of its
  operating point and its load for the cut kinds.

(Two-port algebra: Pozar, *Microwave Engineering*, ch. 4, from memory.)  ``use(choice)``
sets the variant of every sample.  Elements of one kind whose non-numeric parameters agree
form a :class:`Group` and are computed by one model call with their parameters stacked as
``(samples, 1)`` arrays, as a tolerance run does.  DC solutions of the devices solved by
bisection are remembered per element and exact input row (a pure function of them), so a
row met again — another Newton round, another shape, another region — is not solved again.
"""
from __future__ import annotations

import itertools

import numpy as np

from ..spec.model import Stage
from ..spec.parts import Candidate
from ..stages.base import ABCD, NO_LOAD, DcLoad, DcState, Op, at_temperature

PASS, MODEL, TERMINAL = 0, 1, 2
#: Kinds whose DC operating point is solved numerically (worth remembering per input row).
SOLVED_KINDS = ("source_follower", "emitter_follower", "common_source", "common_emitter")
_uids = itertools.count(1)
_ROW = np.dtype((np.void, 56))          # one memo row: element id and six DC inputs, as bytes


class Element:
    """An original stage, a candidate follower or a candidate's input bias network, with its
    parameters, as it can appear in regions."""

    def __init__(self, stage: Stage, temp_k: float, candidate: Candidate | None = None, t_nom_k: float = 300.0):
        self.stage, self.model, self.kind = stage, stage.model, stage.kind
        self.p = at_temperature(stage.raw.get("__tempco__"), {**stage.params, "temp_k": temp_k, "t_nom_k": t_nom_k})
        self.candidate = candidate                      # a buffer: its cost
        self.uid = float(next(_uids))
        self.term_op: Op | None = None
        self.term_y: dict = {}
        self._term_load: DcLoad | None = None
        self._sig = None

    def signature(self):
        """Elements with equal signatures can share one stacked model call."""
        if self._sig is None:
            fixed = tuple(sorted((k, v) for k, v in self.p.items() if not _numeric(v)))
            self._sig = self.kind, tuple(sorted(self.p)), fixed
        return self._sig

    # -- as a terminal: input admittance and DC input load only ------------------------------
    def terminal_seen(self, st_in: DcState, v_in) -> None:
        """Find an operating point for the terminal's admittance: for the cut kinds the input
        admittance C/A does not depend on it, as long as the device conducts (finite values)."""
        if self.term_op is not None:
            return
        _, op = self.model.dc_forward(self.p, st_in, v_in, NO_LOAD)
        probe = 2j * np.pi * np.ones((1, 1))
        for i in range(len(np.ravel(v_in))):
            one = Op(values={key: np.ravel(v)[i] if np.size(v) > 1 else v for key, v in op.values.items()})
            m = self.model.abcd(self.p, probe, one)
            if np.all(np.isfinite(m.C / m.A)):
                self.term_op = one
                return

    def terminal_load(self) -> DcLoad:
        """DC current the element's input draws (independent of its operating point and load for
        the cut kinds)."""
        if self._term_load is None:
            ld = self.model.dc_input_load(self.p, NO_LOAD, None)
            self._term_load = DcLoad(float(np.ravel(ld.G)[0]), float(np.ravel(ld.I0)[0]))
        return self._term_load

    def terminal_admittance(self, s):
        """Input admittance C/A over the grid ``s`` ((1, F)); nan until an operating point is known."""
        if self.term_op is None:
            return np.full(np.shape(s), np.nan + 0j)
        key = (s.shape, s.tobytes())
        if key not in self.term_y:
            m = self.model.abcd(self.p, s, self.term_op)
            self.term_y[key] = np.broadcast_to(m.C / m.A, np.shape(s))
        return self.term_y[key]


def _numeric(v) -> bool:
    return isinstance(v, (int, float, np.floating, np.integer)) and not isinstance(v, bool)


class Group:
    """MODEL variants of one switch that share a model call: same kind, same non-numeric parameters."""

    def __init__(self, elements: list, memo: dict, layouts: dict):
        self.elements = elements
        self.model, self.kind = elements[0].model, elements[0].kind
        self.memo, self.layouts = memo, layouts
        self.fixed, self.varying = {}, {}
        for k, v in elements[0].p.items():
            vals = [el.p[k] for el in elements]
            if all(x == v for x in vals[1:]) or not _numeric(v):
                self.fixed[k] = v
            else:
                self.varying[k] = np.array(vals, dtype=float)
        self.uids = np.array([el.uid for el in elements])
        self.pos = {el.uid: i for i, el in enumerate(elements)}
        cands = [el.candidate for el in elements]
        self.follower = self.model.follower_type
        self.fixed_power = np.array([c.power_w if c is not None and c.power_w is not None else np.nan
                                     for c in cands])
        self.is_cand = np.array([c is not None for c in cands])
        self.price = np.array([c.price if c is not None and c.price is not None else 0.0 for c in cands])
        self.count = np.array([c.count if c is not None else 0 for c in cands], dtype=float)

    def params(self, which) -> dict:
        if not self.varying:
            return self.fixed
        return {**self.fixed, **{k: a[which][:, None] for k, a in self.varying.items()}}

    def dc_forward(self, which, st_in: DcState, v_in, out_load: DcLoad, k: int):
        if self.kind not in SOLVED_KINDS:
            return self.model.dc_forward(self.params(which), st_in, v_in, out_load)
        rows = np.empty((k, 7))
        rows[:, 0] = self.uids[which]
        for c, x in enumerate((*st_in, v_in, *out_load)):
            rows[:, c + 1:c + 2] = x
        uniq, back = np.unique(rows.view(_ROW).ravel(), return_inverse=True)
        keys = [u.tobytes() for u in uniq]                  # one per distinct input row
        back = back.reshape(-1)
        miss = [j for j, key in enumerate(keys) if key not in self.memo]
        if miss:
            m = np.frombuffer(b"".join(keys[j] for j in miss)).reshape(len(miss), 7)
            w = np.array([self.pos[u] for u in m[:, 0]])
            st, op = self.model.dc_forward(self.params(w), DcState(m[:, 1:2], m[:, 2:3], m[:, 3:4]), m[:, 4:5],
                                           DcLoad(m[:, 5:6], m[:, 6:7]))
            for j, flat in zip(miss, self._flatten(st, op, len(miss))):
                self.memo[keys[j]] = flat
        table = np.array([self.memo[key] for key in keys])
        return self._unflatten(table[back])

    def _flatten(self, st, op, n) -> np.ndarray:
        layout = self.layouts.setdefault(self.kind, sorted(op.values))
        cols = [*st, *op.in_range, *op.out_range, *op.input_load, op.bad, *(op.values[k] for k in layout)]
        return np.stack([np.broadcast_to(np.asarray(c, dtype=float).reshape(-1) if np.ndim(c) else
                                         np.asarray(c, dtype=float), (n,)) for c in cols], axis=1)

    def _unflatten(self, t: np.ndarray):
        c = [t[:, i:i + 1] for i in range(t.shape[1])]
        op = Op(values={k: c[10 + i] for i, k in enumerate(self.layouts[self.kind])}, in_range=(c[3], c[4]),
                out_range=(c[5], c[6]), input_load=DcLoad(c[7], c[8]))
        op.bad = c[9] != 0
        return DcState(c[0], c[1], c[2]), op

    def spend(self, which, op, basis: str):
        """Per sample of the group: supply power (followers), cost and parts (candidates)."""
        fixed = self.fixed_power[which]
        pw = np.broadcast_to(np.ravel(op.values.get("power_w", 0.0)), (len(which),))
        power = np.where(np.isnan(fixed), pw, fixed) if self.follower else np.zeros(len(which))
        cand = self.is_cand[which]
        cost = np.where(cand, power if basis == "power" else
                        (self.price[which] if basis == "price" else self.count[which]), 0.0)
        return power, cost, self.count[which]


def _col(x, n: int):
    if type(x) is np.ndarray and x.shape == (n, 1):
        return x
    a = np.asarray(x, dtype=float)
    return np.broadcast_to(a.reshape(-1, 1) if a.ndim == 1 else a, (n, 1))


def _put(arr, idx, val) -> None:
    if np.ndim(val) == 1:
        val = val[:, None]
    if idx is None:
        arr[...] = val
    else:
        arr[idx] = val


class _SwitchOp(Op):
    parts: dict


class Switch:
    """A stage whose element is chosen per sample among its variants (see the module docstring)."""

    follower_type = False

    def __init__(self, role: str, variants: list, shared: dict):
        """``shared`` holds what switches share: the DC memo, value layouts, and groups."""
        self.role, self.variants = role, variants
        self.modes = np.array([m for m, _ in variants])
        by_sig: dict = {}
        for v, (mode, el) in enumerate(variants):
            if mode == MODEL:
                by_sig.setdefault(el.signature(), []).append(v)
        self.groups = []
        self.slot = np.full(len(variants), -1)          # variant -> position in its group
        self.group_of = np.full(len(variants), -1)
        for gi, vs in enumerate(by_sig.values()):
            els = [variants[v][1] for v in vs]
            key = tuple(el.uid for el in els)
            if key not in shared["groups"]:
                shared["groups"][key] = Group(els, shared["memo"], shared["layouts"])
            self.groups.append(shared["groups"][key])
            for i, v in enumerate(vs):
                self.slot[v], self.group_of[v] = i, gi
        loads = [self.variants[v][1].terminal_load() if m == TERMINAL else DcLoad(0.0, 0.0)
                 for v, m in enumerate(self.modes)]
        self.t_g = np.array([ld.G for ld in loads])
        self.t_i0 = np.array([ld.I0 for ld in loads])
        self.n, self.active, self.last = 0, [], None

    def use(self, choice: np.ndarray) -> None:
        """Set each sample's variant."""
        self.n = n = len(choice)
        mode = self.modes[choice]
        self.active = []
        if len(self.groups) == 1 and len(self.variants) == 1:
            self.active.append((self.groups[0], None, np.zeros(n, dtype=int)))
        else:
            gid = self.group_of[choice]
            for gi in range(len(self.groups)):
                idx = np.nonzero(gid == gi)[0]
                if len(idx):
                    self.active.append((self.groups[gi], None if len(idx) == n else idx, self.slot[choice[idx]]))
        self.t_idx = np.nonzero(mode == TERMINAL)[0]
        self.t_var = choice[self.t_idx]
        self.last = None
        self.t_new = [int(v) for v in np.unique(self.t_var) if self.variants[v][1].term_op is None]
        self.tg, self.ti0 = self.t_g[self.t_var][:, None], self.t_i0[self.t_var][:, None]

    @property
    def draws_input_current(self) -> bool:
        return any(g.model.draws_input_current for g, _, _ in self.active)

    def _sub(self, x, idx):
        a = _col(x, self.n)
        return a if idx is None else a[idx]

    def dc_input_load(self, p, out_load, op):
        n = self.n
        if self.role == "two_port":
            g, i0 = np.array(_col(out_load.G, n)), np.array(_col(out_load.I0, n))
        else:
            g, i0 = np.zeros((n, 1)), np.zeros((n, 1))
        if len(self.t_idx):
            g[self.t_idx] += self.tg
            i0[self.t_idx] += self.ti0
        for grp, idx, which in self.active:
            part = op.parts[id(grp)] if op is not None else None
            ld = grp.model.dc_input_load(grp.params(which), DcLoad(self._sub(out_load.G, idx),
                                                                  self._sub(out_load.I0, idx)), part)
            _put(g, idx, ld.G)
            _put(i0, idx, ld.I0)
        return DcLoad(g, i0)

    def dc_forward(self, p, st_in, v_in, out_load):
        """Each sample's element's ``dc_forward``.  A Newton round that feeds the switch exactly
        what the previous round did gets the previous answer (a pure function of the inputs)."""
        key = b"|".join(np.ascontiguousarray(x, dtype=float).tobytes() + bytes(str(np.shape(x)), "ascii")
                        for x in (*st_in, v_in, *out_load))
        if self.last is not None and self.last[0] == key:
            return self.last[1]
        out = self._dc_forward(st_in, v_in, out_load)
        self.last = (key, out)
        return out

    def _dc_forward(self, st_in, v_in, out_load):
        n = self.n
        two = self.role == "two_port"
        if two:
            e, a, b = (np.array(_col(x, n)) for x in st_in)
        ranges = np.empty((n, 4))
        ranges[:] = (-np.inf, np.inf, -np.inf, np.inf)
        bad = np.zeros((n, 1), dtype=bool)
        parts = {}
        for v in self.t_new:
            sel = self.t_idx[self.t_var == v]
            self.variants[v][1].terminal_seen(DcState(*(_col(x, n)[sel] for x in st_in)), _col(v_in, n)[sel])
        self.t_new = [v for v in self.t_new if self.variants[v][1].term_op is None]
        if two and len(self.t_idx):
            ti = self.t_idx
            bt = b[ti]
            e[ti] += bt * self.ti0
            a[ti] += bt * self.tg
        for grp, idx, which in self.active:
            k = len(which)
            st, op = grp.dc_forward(which, DcState(*(self._sub(x, idx) for x in st_in)), self._sub(v_in, idx),
                                    DcLoad(self._sub(out_load.G, idx), self._sub(out_load.I0, idx)), k)
            parts[id(grp)] = op
            for c, x in enumerate((*op.in_range, *op.out_range)):
                if type(x) is not float or x != (np.inf if c % 2 else -np.inf):
                    _put(ranges[:, c:c + 1], idx, x)
            if op.bad is not False:
                _put(bad, idx, op.bad)
            if two:
                for arr, x in zip((e, a, b), st):
                    _put(arr, idx, x)
        op = _SwitchOp(in_range=(ranges[:, 0:1], ranges[:, 1:2]), out_range=(ranges[:, 2:3], ranges[:, 3:4]))
        op.bad, op.parts = bad, parts
        return (DcState(e, a, b) if two else None), op

    def abcd(self, p, s, op) -> ABCD:
        shape = (self.n, np.shape(s)[1])
        m = [np.ones(shape, complex), np.zeros(shape, complex), np.zeros(shape, complex), np.ones(shape, complex)]
        if len(self.t_idx):
            vs = np.unique(self.t_var)
            ys = np.concatenate([self.variants[v][1].terminal_admittance(s) for v in vs])
            m[2][self.t_idx] = ys[np.searchsorted(vs, self.t_var)]
        for grp, idx, which in self.active:
            for arr, x in zip(m, grp.model.abcd(grp.params(which), s, op.parts[id(grp)])):
                _put(arr, idx, x)
        return ABCD(*m)

    def load_admittance(self, p, s, op):
        y = np.zeros((self.n, np.shape(s)[1]), complex)
        for grp, idx, which in self.active:
            _put(y, idx, grp.model.load_admittance(grp.params(which), s, op.parts[id(grp)]))
        return y

    def noise(self, p, s, op, temp_k):
        return []

    def class_a(self, p, op):
        """Per sample: (device current, conductance to v_low) of a follower element for its
        class-A swing limit (engine/swing.py); no limit (infinite current) for the others."""
        i_dev, g_low = np.full((self.n, 1), np.inf), np.zeros((self.n, 1))
        for grp, idx, which in self.active:
            if hasattr(grp.model, "class_a"):
                i, g = grp.model.class_a(grp.params(which), op.parts[id(grp)])
                _put(i_dev, idx, i)
                _put(g_low, idx, g)
        return i_dev, g_low

    def spend(self, op, basis: str):
        """Per sample: supply power of the follower-type elements, cost and parts of the candidates."""
        power, cost, parts = np.zeros(self.n), np.zeros(self.n), np.zeros(self.n)
        for grp, idx, which in self.active:
            pw, c, k = grp.spend(which, op.parts[id(grp)], basis)
            sel = slice(None) if idx is None else idx
            power[sel] += pw
            cost[sel] += c
            parts[sel] += k
        return power, cost, parts
