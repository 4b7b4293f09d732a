"""The exact placement search: forward reachability over search states and backward Pareto
labels, over the batched region analyses of ``chainplan.placement.regions``.  The argument for
exactness is in ``chainplan.placement.optimiser``'s docstring.

A *state* is (key, DC level): the cut element a region starts with — ``ROOT`` for the
source, ``(reader, phase, candidate)`` otherwise — and the DC level of the node it reads.
States are processed interface by interface in chain order (a *wave*): every region that
starts at one interface is analysed in one engine call, and the per-state work below is
vectorised over the wave's (state, shape) pairs.
"""
from __future__ import annotations

import math
import time


import numpy as np

from .labels import REL, Labels, Pool, nondominated, order
from ..spec.model import Chain
from ..spec.parts import Candidate
from .band import BandRule
from .regions import ROOT, Regions

V_KEY = 1e-12       # DC levels that round to the same multiple of this (V) are one state
#: Labels one run may hold at most (the memory bound of the search state: about 1 kB a label
#: with a band-edge response of a few hundred points, so ~200 MB at most).
MAX_LABELS = 200_000


class Stopped(Exception):
    """The search ran out of its time or memory budget (``reason``: 'time' or 'memory')."""

    def __init__(self, reason: str):
        super().__init__(reason)
        self.reason = reason


class Limits:
    """The budget shared by every run of one optimisation: a deadline (perf_counter seconds, or
    None), a cap on the labels of a run, and a progress callback (or None)."""

    def __init__(self, seconds: float | None = None, max_labels: int = MAX_LABELS, progress=None):
        self.deadline = None if seconds is None else time.perf_counter() + seconds
        self.max_labels, self.progress = max_labels, progress
        self.states = 0

    def check(self, labels: int = 0) -> None:
        if self.deadline is not None and time.perf_counter() > self.deadline:
            raise Stopped("time")
        if labels > self.max_labels:
            raise Stopped("memory")

    def extend(self, seconds: float) -> None:
        """Give the budget ``seconds`` more from now (for a last heuristic pass)."""
        if self.deadline is not None:
            self.deadline = time.perf_counter() + seconds


class Search:
    """Region analyses of one chain over one frequency grid, reused by every optimisation run on
    it (targets change; the analyses do not)."""

    def __init__(self, chain: Chain, cands: list[Candidate], basis: str, grid: np.ndarray, gain_cols: dict):
        self.chain, self.cands, self.basis = chain, cands, basis
        self.grid, self.gain_cols = grid, gain_cols      # gain_cols: f -> column
        self.cols = np.array(sorted(set(gain_cols.values())))
        self.col_of = {c: i for i, c in enumerate(self.cols)}
        self.amp = float(np.ravel(chain.source.params["amplitude"])[0])
        self.regions = Regions(chain, cands, basis, grid, self.cand_lb)
        self.wave_order = [None] + [st.name for st in chain.stages]

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
            span = float(p["v_pos"] - p["v_neg"])
            # declared without a rail (v_pos: inf): no power figure exists; counted as none
            return float(p["i_supply"] * span) if math.isfinite(span) else 0.0
        return 0.0


class _States:
    """Search states as growable parallel arrays: DC level, the reachable upstream gain range
    [glo, ghi] per gain column, the reachable upstream normalised response [ulo, uhi] at each
    span point (when a band edge is targeted), upstream follower power [plo, phi], least
    upstream cost."""

    def __init__(self, ncol: int, npts: int = 0):
        self.n, self.cap, self.ncol = 0, 64, ncol
        self.v = np.zeros(self.cap)
        self.glo, self.ghi = np.zeros((self.cap, ncol)), np.zeros((self.cap, ncol))
        self.ulo, self.uhi = np.zeros((self.cap, npts)), np.zeros((self.cap, npts))
        self.plo, self.phi, self.cmin = np.zeros(self.cap), np.zeros(self.cap), np.zeros(self.cap)
        self.key: list = []
        self.vk: list = []

    def new(self, key, vk, v) -> int:
        if self.n == self.cap:
            self.cap *= 2
            for name in ("v", "glo", "ghi", "ulo", "uhi", "plo", "phi", "cmin"):
                old = getattr(self, name)
                grown = np.zeros((self.cap, *old.shape[1:]))
                grown[:self.n] = old[:self.n]
                setattr(self, name, grown)
        i = self.n
        self.n += 1
        self.v[i] = v
        self.glo[i], self.ghi[i] = np.inf, -np.inf
        self.ulo[i], self.uhi[i] = np.inf, -np.inf
        self.plo[i], self.phi[i], self.cmin[i] = np.inf, -np.inf, np.inf
        self.key.append(key)
        self.vk.append(vk)
        return i


class Run:
    """Forward reachability and backward Pareto labels for one set of targets and cost bound."""

    def __init__(self, search: Search, targets, bound: float = math.inf, cheapest: bool = True,
                 limits: Limits | None = None, beam: int | None = None):
        """``cheapest=False``: any feasible placement will do, so completions are compared by what
        they accept and need (gain intervals, power, response), not by cost.  ``limits``: the time
        and memory budget (``Stopped`` is raised when it runs out).  ``beam``: a heuristic run
        keeping only a few labels per state (the ``beam`` cheapest, those accepting the lowest and
        the highest upstream gains, and with band edges the best responses): what it finds is a
        real placement, but not proven optimal, and finding nothing proves nothing."""
        self.s, self.t, self.bound, self.cheapest = search, targets, bound, cheapest
        self.limits, self.beam = limits or Limits(), beam
        self.tol = REL * max(1.0, abs(bound)) if math.isfinite(bound) else math.inf
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
        self.pmax = targets.max_power_w
        P = search.chain.analysis.points if self.band else 0
        self.st = _States(ncol, P)
        if self.band:
            self.rule = BandRule(search.chain, targets)
        self.index: dict = {}          # (key, vkey) -> state
        self.keys_at: dict = {}        # reader -> {key: [its states]}, in order of appearance
        self.edges: dict = {}          # reader -> the wave's surviving (state, shape) pairs
        self.span: dict = {}           # state -> (reader, start, end) of its pairs
        self.thresholds: dict = {}
        self.multi: list = []          # child label rows of fan-out regions' labels
        self._state(ROOT, 0.0, 0.0)
        st = self.st
        st.glo[0], st.ghi[0], st.plo[0], st.phi[0], st.cmin[0] = 1.0, 1.0, 0.0, 0.0, 0.0
        st.ulo[0], st.uhi[0] = 1.0, 1.0

    def _state(self, key, vk, v) -> int:
        i = self.index.get((key, vk))
        if i is None:
            i = self.index[(key, vk)] = self.st.new(key, vk, v)
            reader = None if key == ROOT else key[0]
            self.keys_at.setdefault(reader, {}).setdefault(key, []).append(i)
        return i

    # -- forward -------------------------------------------------------------------------------
    def forward(self) -> None:
        for reader in self.s.wave_order:
            if reader in self.keys_at:
                self._wave(reader)

    def _wave(self, reader) -> None:
        self.limits.check()
        s, st, regions = self.s, self.st, self.s.regions
        keys = self.keys_at[reader]
        w = None
        for key in keys:
            w = regions.wave_of(key)
        sids = np.array([i for group in keys.values() for i in group], dtype=int)
        sids = sids[st.cmin[sids] <= self.bound - w.lb.min() + self.tol]
        if not len(sids):
            return
        allowed = w.lb[None, :] <= (self.bound - st.cmin[sids])[:, None] + self.tol
        rows = np.array([regions.rows_of(w, st.key[i], st.vk[i]) for i in sids])
        todo = np.nonzero(allowed & (rows < 0))
        if len(todo[0]):                  # the shapes within the bound not analysed yet, in one call
            ts = sids[todo[0]]
            regions.analyse(w, np.array([w.key_index[st.key[i]] for i in ts]), todo[1], st.v[ts],
                            [st.vk[i] for i in ts])
            rows = np.array([w.rows[(st.key[i], st.vk[i])] for i in sids])
        si, d = np.nonzero(allowed)
        sid, row = sids[si], rows[si, d]
        data = w.data
        cols = s.cols
        with np.errstate(all="ignore"):
            own_hi = self._own_hi(w, data, row)
            out_t = data["out_t"][row]
            has_out = w.out_node[d] >= 0
            ot = out_t[:, cols]
            olo = np.where(has_out[:, None], self.lo_gain / ot, 0.0)
            ohi = np.where(has_out[:, None], self.hi_gain / ot, np.inf)
            glo, ghi = st.glo[sid], st.ghi[sid]
            power, cost = data["power"][row], data["cost"][row]
            keep = data["valid"][row] & ~(own_hi < glo[:, 0] * (1 - REL))
            keep &= ~np.any(olo > ghi * (1 + REL), axis=1) & ~np.any(ohi < glo * (1 - REL), axis=1)
            if self.pmax is not None:
                keep &= ~(st.plo[sid] + power > self.pmax * (1 + REL))
            if self.t.max_loss_db is not None:          # region-local: every interface lies in one region
                keep &= ~(data["loss"][row] > self.t.max_loss_db * (1 + REL) + 1e-12)
            keep &= ~(st.cmin[sid] + cost > self.bound + self.tol)
        k = np.nonzero(keep)[0]
        si, sid, row, d, glo, ghi = si[k], sid[k], row[k], d[k], glo[k], ghi[k]
        power, cost = power[k], cost[k]
        T = w.term_node.shape[1]
        child = np.full((len(k), T), -1, dtype=int)
        for j in range(T):
            has = np.nonzero(w.term_node[d, j] >= 0)[0]
            if not len(has):
                continue
            cv = data["term_v"][row[has], j]
            kid = w.term_kid[d[has], j]
            vks = np.round(cv / V_KEY) * V_KEY              # the state's DC level key
            combos, first, back = np.unique(np.stack((kid, vks), axis=1), axis=0, return_index=True,
                                            return_inverse=True)
            made = np.array([self._state(w.child_keys[int(kk)], float(vk), float(cv[f]))
                             for (kk, vk), f in zip(combos, first)])
            c = child[has, j] = made[back.reshape(-1)]
            t = data["term_t"][row[has], j][:, cols]
            np.minimum.at(st.glo, c, glo[has] * t)
            np.maximum.at(st.ghi, c, ghi[has] * t)
            if self.band:
                full = data["term_t"][row[has], j]
                ratio = full[:, 1:1 + st.ulo.shape[1]] / full[:, :1]
                np.minimum.at(st.ulo, c, st.ulo[sid[has]] * ratio)
                np.maximum.at(st.uhi, c, st.uhi[sid[has]] * ratio)
            np.minimum.at(st.plo, c, st.plo[sid[has]] + power[has])
            np.maximum.at(st.phi, c, st.phi[sid[has]] + power[has])
            np.minimum.at(st.cmin, c, st.cmin[sid[has]] + cost[has])
        self.edges[reader] = {"sid": sid, "row": row, "d": d, "own_hi": own_hi[k], "olo": olo[k], "ohi": ohi[k],
                              "child": child}
        at = np.arange(len(sids))                       # the pairs are grouped by state, in sids' order
        bounds = np.searchsorted(si, at, side="left"), np.searchsorted(si, at, side="right")
        for i, a, b in zip(sids, *bounds):
            self.span[int(i)] = (reader, int(a), int(b))

    def _own_hi(self, w, data, row):
        """The largest upstream gain |V_X/Vs| the headroom targets allow in each region:
        a·G·t_n ≤ room_n − H_n at every node with a target."""
        key = data["key"][row]
        have = self.thresholds.setdefault(id(w), [])
        for kk in w.keys[len(have):]:
            have.append([_nan(self.t.headroom_for(n)) for n in self.s.regions.node_names(w, kk)])
        h = np.array(have)[key]
        room, t = data["room"][row], data["t"][row]
        use = ~np.isnan(h) & np.isfinite(room)
        lim = np.where(t > 0, (room - h) / (self.s.amp * t), np.where(room < h, -np.inf, np.inf))
        return np.where(use, lim, np.inf).min(axis=1, initial=np.inf)

    # -- backward ------------------------------------------------------------------------------
    def backward(self, bound: float | None = None) -> Labels:
        """The root's Pareto labels over the placements costing at most ``bound`` (default: the
        forward pass's bound, which must not be lower): every edge such a placement uses has
        cmin + cost ≤ bound, cmin the least cost of reaching its state."""
        self.cap = self.bound if bound is None else bound
        self.cap_tol = REL * max(1.0, abs(self.cap)) if math.isfinite(self.cap) else math.inf
        self.pool = Pool(self.st.n)
        self.multi = []
        cmin = self.st.cmin
        for reader in reversed(self.s.wave_order):
            if reader not in self.keys_at:
                continue
            for group in self.keys_at[reader].values():
                for i in group:
                    if cmin[i] <= self.cap + self.cap_tol:
                        self.pool.add(i, self._labels(i))
                        self.limits.check(self.pool.size)
        a, b = self.pool.start[0], self.pool.end[0]
        return self.pool.take(np.arange(a, b)) if b > a else _EMPTY

    def _labels(self, i: int) -> Labels:
        """The Pareto labels of state i: each of its edges (a region shape) joined with the labels
        of the state its terminal leads to (all at once; fan-out regions one by one)."""
        if i not in self.span:
            return _EMPTY
        reader, a, b = self.span[i]
        if b <= a:
            return _EMPTY
        e = self.edges[reader]
        w = self.s.regions.waves[reader]
        data, cols, pool = w.data, self.s.cols, self.pool
        sel = np.arange(a, b)
        if self.cap < self.bound:
            sel = sel[self.st.cmin[i] + data["cost"][e["row"][sel]] <= self.cap + self.cap_tol]
        child = e["child"][sel]
        nterm = (child >= 0).sum(axis=1)
        parts = [self._join_all(i, e, int(q)) for q in sel[nterm >= 2]]
        sel, child = sel[nterm <= 1], child[nterm <= 1]
        j = np.argmax(child >= 0, axis=1) if child.shape[1] else np.zeros(len(sel), dtype=int)
        c = child[np.arange(len(sel)), j] if child.shape[1] else np.full(len(sel), -1)
        start, end = pool.start[np.maximum(c, 0)], pool.end[np.maximum(c, 0)]
        counts = np.where(c < 0, 1, end - start)
        e_idx = np.repeat(np.arange(len(sel)), counts)
        offsets = np.cumsum(counts) - counts
        k = np.where(c[e_idx] < 0, -1, start[e_idx] + np.arange(len(e_idx)) - offsets[e_idx])
        q = sel[e_idx]
        rows, jj = e["row"][q], j[e_idx]
        has = k >= 0
        if not len(k):
            return self._prune(Labels.concat(parts), i)
        kid = pool.take(np.maximum(k, 0)) if has.any() else _zeros(len(k), len(cols), self.s.chain.analysis.points)
        with np.errstate(all="ignore"):
            tt = data["term_t"][rows, jj] if data["term_t"].shape[1] else np.ones((len(q), len(self.s.grid)))
            t = np.where(has[:, None], tt[:, cols], 1.0)
            hi = e["ohi"][q].copy()
            hi[:, 0] = np.minimum(hi[:, 0], e["own_hi"][q])
            out = Labels(cost=data["cost"][rows] + np.where(has, kid.cost, 0.0),
                         nbuf=data["nbuf"][rows] + np.where(has, kid.nbuf, 0.0),
                         parts=data["parts"][rows] + np.where(has, kid.parts, 0.0),
                         power=data["power"][rows] + np.where(has, kid.power, 0.0),
                         lo=np.where(has[:, None], np.maximum(e["olo"][q], kid.lo / t), e["olo"][q]),
                         hi=np.where(has[:, None], np.minimum(hi, kid.hi / t), hi),
                         state=np.full(len(q), i), d=e["d"][q], kid=k)
            if self.band:
                own = self._own_shape(data, rows)
                scaled = kid.shape * (tt[:, 1:1 + own.shape[1]] / tt[:, :1])
                kid_has = has & kid.has_shape
                out.shape = np.where(kid_has[:, None], scaled, own)
                out.has_shape = kid_has | (w.out_node[e["d"][q]] >= 0)
        return self._prune(Labels.concat([out, *parts]), i)

    def _own_shape(self, data, rows):
        """The output's response over the span, normalised at f_ref (nan where the region has none)."""
        out_t = data["out_t"][rows]
        return out_t[:, 1:1 + self.s.chain.analysis.points] / out_t[:, :1]

    def _combine(self, b: Labels, kid: Labels, rows, j, kid_rows) -> Labels:
        """Base labels b (of one state) joined with child labels ``kid`` met through terminal j."""
        w = self.s.regions.waves[self._reader_of(int(b.state[0]))]
        tt = w.data["term_t"][rows, j]                              # (n, F)
        t = tt[:, self.s.cols]
        out = Labels(cost=b.cost + kid.cost, nbuf=b.nbuf + kid.nbuf, parts=b.parts + kid.parts,
                     power=b.power + kid.power,
                     lo=np.maximum(b.lo, kid.lo / t), hi=np.minimum(b.hi, kid.hi / t), state=b.state, d=b.d,
                     kid=kid_rows)
        if self.band:
            P = kid.shape.shape[1]
            scaled = kid.shape * (tt[:, 1:1 + P] / tt[:, :1])
            out.shape = np.where(kid.has_shape[:, None], scaled, b.shape)
            out.has_shape = kid.has_shape | b.has_shape
        return out

    def _reader_of(self, i: int):
        return self.span[i][0]

    def _join_all(self, i: int, e: dict, q: int) -> Labels:
        """A fan-out region's edge q of state i: its label joined with every combination of its
        terminals' labels, pruned after each terminal."""
        w = self.s.regions.waves[self._reader_of(i)]
        data, row, d = w.data, int(e["row"][q]), int(e["d"][q])
        hi = e["ohi"][q:q + 1].copy()
        hi[:, 0] = np.minimum(hi[:, 0], e["own_hi"][q])
        partial = Labels(cost=data["cost"][[row]], nbuf=data["nbuf"][[row]].astype(float),
                         parts=data["parts"][[row]], power=data["power"][[row]], lo=e["olo"][q:q + 1], hi=hi,
                         state=np.array([i]), d=np.array([d]), kid=np.array([-1]))
        if self.band:
            partial.shape = self._own_shape(data, [row])
            partial.has_shape = np.array([w.out_node[d] >= 0])
        kids_of = [()]
        for j in np.nonzero(e["child"][q] >= 0)[0]:
            c = int(e["child"][q, j])
            a, b = self.pool.start[c], self.pool.end[c]
            if b <= a:
                return _EMPTY
            n = len(partial)
            pi = np.repeat(np.arange(n), b - a)
            ki = np.tile(np.arange(a, b), n)
            joined = self._combine(partial.take(pi), self.pool.take(ki), np.full(len(pi), row), np.full(len(pi), j),
                                   ki)
            kids_of = [kids_of[p] + (k,) for p, k in zip(pi, ki)]
            keep = self._dominance(joined, None, i)
            partial, kids_of = joined.take(keep), [kids_of[x] for x in keep]
        partial.kid = np.array([-2 - len(self.multi) - x for x in range(len(partial))], dtype=int)
        self.multi.extend(kids_of)
        return partial

    def _prune(self, lb: Labels, i: int) -> Labels:
        """Drop labels infeasible for every reachable upstream gain or dearer than the cost bound
        allows after the cheapest way here, clip their intervals to the reachable range (which
        changes no decision), then drop the dominated ones."""
        if not len(lb):
            return lb
        st = self.st
        glo, ghi = st.glo[i], st.ghi[i]
        lo, hi = np.maximum(lb.lo, glo), np.minimum(lb.hi, ghi)
        ok = ~np.any(lo > hi * (1 + REL), axis=1) & ~np.any(lo > ghi * (1 + REL), axis=1) & \
            ~np.any(hi < glo * (1 - REL), axis=1) & (st.cmin[i] + lb.cost <= self.cap + self.cap_tol)
        if self.pmax is not None:
            ok &= ~(lb.power + st.plo[i] > self.pmax * (1 + REL))
        if self.band:
            ok &= self._band_possible(lb, i)
        lb.lo, lb.hi = lo, hi
        lb = lb.take(np.nonzero(ok)[0])
        p_floor = (self.pmax - st.phi[i]) if self.pmax is not None else None
        lb = lb.take(self._dominance(lb, p_floor, i))
        return self._narrow(lb, i) if self.beam is not None and len(lb) > 3 * self.beam else lb

    def _narrow(self, lb: Labels, i: int) -> Labels:
        """A beam run's labels of one state: the cheapest few, the few accepting the lowest and the
        highest upstream gains, and with band edges the few with the best response."""
        k = self.beam
        picks = [np.arange(min(k, len(lb)))]                      # lb is in cost order
        picks.append(np.argsort(lb.lo.max(axis=1), kind="stable")[:k])
        picks.append(np.argsort(-lb.hi.min(axis=1), kind="stable")[:k])
        key = self._shape_key(lb, i)
        if key is not None and key.shape[1]:
            picks.append(np.argsort(-np.min(np.where(np.isinf(key), 1e300, key), axis=1), kind="stable")[:k])
        return lb.take(np.unique(np.concatenate(picks)))

    def _band_possible(self, lb: Labels, i: int) -> np.ndarray:
        """Labels that can still meet the band edges (``chainplan.placement.band``)."""
        if lb.shape is None:
            return np.ones(len(lb), dtype=bool)
        return self.rule.possible(lb.shape, lb.has_shape, self.st.ulo[i], self.st.uhi[i])

    def _shape_key(self, lb: Labels, i: int):
        """Dominance columns of the band edges (``chainplan.placement.band``), None without them."""
        if not self.band or lb.shape is None:
            return None
        return self.rule.key(lb.shape, lb.has_shape, self.st.ulo[i], self.st.uhi[i])

    def _dominance(self, lb: Labels, p_floor, i: int) -> np.ndarray:
        if len(lb) <= 1:
            return np.arange(len(lb))
        idx = order(lb)
        ranked = lb.take(idx)
        if not self.cheapest:
            if lb.lo.shape[1] == 1 and self.pmax is None and not self.band:
                return interval_cover(lb.lo[:, 0], lb.hi[:, 0])
            ranked.cost, ranked.nbuf, ranked.parts = (np.zeros(len(idx)),) * 3
        key = self._shape_key(ranked, i)
        return idx[nondominated(ranked, p_floor if self.pmax is not None else None, key, self.limits.check)]

    # -- at the source ---------------------------------------------------------------------------
    def best(self, root: Labels):
        """(row in ``root`` of the cheapest label meeting every target, or None; the other rows
        meeting every target that tie with it on cost, buffers and parts)."""
        ok = [q for q in range(len(root)) if self._meets(root, q)]
        if not ok:
            return None, []
        key = lambda q: (root.cost[q], root.nbuf[q], root.parts[q])  # noqa: E731
        first = min(ok, key=key)
        c0 = root.cost[first]
        tied = [q for q in ok if q != first and abs(root.cost[q] - c0) <= REL * max(1.0, abs(c0))
                and root.nbuf[q] == root.nbuf[first] and root.parts[q] == root.parts[first]]
        return first, tied

    def _meets(self, lb: Labels, q: int) -> bool:
        if np.any(lb.lo[q] > 1 + REL) or np.any(lb.hi[q] < 1 - REL):
            return False
        if self.pmax is not None and lb.power[q] > self.pmax * (1 + REL):
            return False
        if self.band:
            return self.rule.meets(lb.shape[q])
        return True

    def choices(self, root: Labels, q: int) -> dict:
        """reader -> candidate index, collected along the label's back pointers."""
        out = {}
        stack = [(int(root.state[q]), int(root.d[q]), int(root.kid[q]))]
        allp = self.pool.take(slice(0, self.pool.size))
        while stack:
            i, d, kid = stack.pop()
            w = self.s.regions.waves[self._reader_of(i)]
            for reader, o in w.shapes[d].choices.items():
                if o >= 0:
                    out[reader] = o
            kids = [kid] if kid >= 0 else list(self.multi[-2 - kid]) if kid <= -2 else []
            stack.extend((int(allp.state[k]), int(allp.d[k]), int(allp.kid[k])) for k in kids)
        return out


_EMPTY = Labels(cost=np.zeros(0))


def interval_cover(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Indices of a few of the intervals [lo, hi] whose union is the union of them all (greedy:
    from the left, the interval reaching furthest).  For feasibility alone, one gain frequency and
    nothing else compared, a completion is worth only the upstream gains it accepts, and joining
    maps every accepted gain on its own (G' accepted iff G'·t is and G' is in the region's own
    range), so the union is all that matters."""
    o = np.argsort(lo, kind="stable")
    keep, reach, i, n = [], -np.inf, 0, len(o)
    while i < n:
        limit = max(reach, lo[o[i]])
        best, best_hi = -1, reach
        while i < n and lo[o[i]] <= limit:
            if hi[o[i]] > best_hi:
                best, best_hi = o[i], hi[o[i]]
            i += 1
        if best >= 0:
            keep.append(best)
            reach = best_hi
    return np.array(sorted(keep), dtype=int)


def _zeros(n: int, ncol: int, points: int) -> Labels:
    z = np.zeros(n)
    return Labels(cost=z, nbuf=z, parts=z, power=z, lo=np.zeros((n, ncol)), hi=np.zeros((n, ncol)),
                  shape=np.zeros((n, points)), has_shape=np.zeros(n, dtype=bool))


def _nan(x):
    return math.nan if x is None else x
