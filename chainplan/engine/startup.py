"""Start-up and overload recovery: the slowest natural time constants of the bias
and coupling networks, so the user sees how long after power-up (or after an
overload moved a coupling capacitor's charge) the chain is usable.

Method.  The natural frequencies of a linear network are the zeros of the total
admittance at a node, ``Y(s) = Y_load + 1/Z_th`` (the cascade's ``node_y`` plus the
driving side's row: ``Y = (a + b·Y_load)/b``), for every mode observable at that
node.  Bias and coupling networks are RC networks, whose natural frequencies lie
on the negative real axis (Guillemin, *Synthesis of Passive Networks*, RC
one-ports, from memory), so ``Y(−σ)`` is real and its zeros are found by a scan of
σ on a log grid (sign changes where |Y| dips, not where it passes through a pole),
refined by linear interpolation and two secant steps.  τ = 1/σ.  For the
hydrophone's 100 MΩ/100 nF gate bias behind a 2 nF, 1 GΩ element the slow mode
is the root of s²·Rb·Rs·C·Cs + s·(Rs·(C + Cs) + Rb·C) + 1: τ ≈ (Rb + Rs)(C + Cs)
≈ 112 s.  The start-up time reported is 5τ (within 0.7 % of the final value;
common practice).  Everything is vectorised over samples.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .cascade import run_ac

SETTLE_TAUS = 5.0          # start-up time = 5 τ (e^-5 = 0.7 %)
SCAN_PER_DECADE = 24
F_SCAN_LOW_HZ = 1e-6       # slowest mode looked for: τ ≈ 1.6e5 s


@dataclass
class StartupResult:
    nodes: list               # node names
    tau_s: dict               # node -> (S,) slowest time constant observable there (nan: none found)
    worst_node: str | None
    worst_tau_s: np.ndarray   # (S,)

    @property
    def startup_s(self) -> np.ndarray:
        return SETTLE_TAUS * np.nan_to_num(self.worst_tau_s, nan=0.0)


def _node_admittance(chain, params, ops, s, columns=None, ws=None):
    """Y(s) at every node for real or complex s of shape (S, K) or (1, K); with
    ``columns`` ({node: column}) each node's Y only at its own column, (S,).  The
    cascade's arrays come from the workspace ``ws`` (a Monte Carlo chunk's), if any:
    only the freshly computed Y is returned."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ac = run_ac(chain, params, ops, None, s=s, ws=ws)
        out = {}
        for n in (chain.nodes if columns is None else columns):
            a, b = ac.row[n]
            y = ac.node_y[n]
            if columns is not None:
                j = columns[n]
                a, b, y = (np.broadcast_to(x, np.shape(ac.node_y[n]))[:, j] if np.ndim(x) == 2 else x
                           for x in (a, b, y))
            out[n] = (a + b * y) / b
    return out


def analyse_startup(ev) -> StartupResult | None:
    """The slowest natural time constant observable at each node, per sample."""
    chain = ev.chain
    f_hi = chain.analysis.f_ref_hz          # modes faster than a signal period do not delay start-up
    if f_hi <= F_SCAN_LOW_HZ:
        return None
    n = int(math.ceil(math.log10(f_hi / F_SCAN_LOW_HZ) * SCAN_PER_DECADE)) + 1
    sigma = 2 * np.pi * np.geomspace(F_SCAN_LOW_HZ, f_hi, n)
    ys = _node_admittance(chain, ev.params, ev.dc.ops, -sigma[None, :] + 0j, ws=ev.ws)
    taus = {}
    for node, y in ys.items():
        y = np.real(np.broadcast_to(y, (ev.samples, n)))
        root = _lowest_zero(sigma, y)
        taus[node] = root
    # refine every node's root with secant steps on the per-sample σ: all nodes in one
    # cascade pass per step (node j's σ in column j; the cascade is elementwise per column)
    found = [node for node in taus if np.isfinite(taus[node]).any()]
    if found:
        cols = {node: j for j, node in enumerate(found)}
        oks = {node: np.broadcast_to(np.isfinite(taus[node]), (ev.samples,)) for node in found}
        s0 = np.stack([np.where(oks[node], taus[node], sigma[0]) * np.ones(ev.samples) for node in found], axis=1)
        s1 = s0 * 1.001

        def y_at(sig):
            ys = _node_admittance(chain, ev.params, ev.dc.ops, -sig + 0j, cols, ev.ws)
            return np.stack([np.real(np.broadcast_to(ys[node], (ev.samples,))) for node in found], axis=1)
        y0 = y_at(s0)
        for _ in range(3):
            y1 = y_at(s1)
            with np.errstate(divide="ignore", invalid="ignore"):
                s2 = s1 - y1 * (s1 - s0) / (y1 - y0)
            good = np.isfinite(s2) & (s2 > 0) & (np.abs(s2 / s1 - 1) < 0.5)
            s0, y0, s1 = s1, y1, np.where(good, s2, s1)
        for node in found:
            taus[node] = np.where(oks[node], 1.0 / s1[:, cols[node]], np.nan)
    stack = np.stack([np.broadcast_to(taus[k], (ev.samples,)) for k in taus])
    filled = np.where(np.isnan(stack), -np.inf, stack)
    idx = np.argmax(filled, axis=0)
    worst = stack[idx, np.arange(ev.samples)]
    names = list(taus)
    worst_node = names[int(idx[0])] if np.isfinite(worst[0]) else None
    return StartupResult(names, taus, worst_node, worst)


def _lowest_zero(sigma, y):
    """Per sample (row of y): the smallest σ where y changes sign at a zero (|y| dips
    there), linearly interpolated; nan without one, (S,)."""
    s_, n = y.shape
    sign = np.sign(y)
    change = sign[:, :-1] * sign[:, 1:] < 0
    a = np.abs(y)
    # a zero: |y| at the bracket below its outer neighbours (a pole crossing has |y| peaking)
    left = np.concatenate([a[:, :1], a[:, :-2]], axis=1)
    right = np.concatenate([a[:, 2:], a[:, -1:]], axis=1)
    dip = (a[:, :-1] + a[:, 1:]) <= (left + right)
    hit = change & dip
    k = np.argmax(hit, axis=1)
    has = hit.any(axis=1)
    rows = np.arange(s_)
    y0, y1 = y[rows, k], y[rows, np.minimum(k + 1, n - 1)]
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.clip(y0 / (y0 - y1), 0, 1)
    root = sigma[k] + w * (sigma[np.minimum(k + 1, n - 1)] - sigma[k])
    return np.where(has, root, np.nan)


def summary_rows(res: StartupResult) -> list:
    from ..spec.units import fmt
    if res is None or res.worst_node is None:
        return []
    tau = float(res.worst_tau_s[0])
    return [("slowest time constant", f"{fmt(tau, 's')} at {res.worst_node}: start-up / overload recovery "
                                      f"≈ {fmt(SETTLE_TAUS * tau, 's')} (5τ)")]


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: the slowest time constant in the summary, ``startup`` in JSON."""
    res = analyse_startup(b.ev)
    if res is None or res.worst_node is None:
        return
    b.extra_summary.extend(summary_rows(res))
    b.extra_json["startup"] = {
        "worst_node": res.worst_node, "tau_s": float(res.worst_tau_s[0]), "startup_s": float(res.startup_s[0]),
        "nodes": [{"node": n, "tau_s": None if not np.isfinite(float(np.ravel(t)[0])) else float(np.ravel(t)[0])}
                  for n, t in res.tau_s.items()]}
