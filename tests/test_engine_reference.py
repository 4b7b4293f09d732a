"""The optimised engine against a plain reference implementation.

The cascade engine (engine/cascade.py) writes its 2×2 algebra out by hand,
skips the plain 0 and 1 of series and shunt sections, works in place in
recycled arrays (engine/workspace.py) and carries scaled rows; the Monte
Carlo's noise path integrates powers without densities.  Here the same stage
models are multiplied out the straightforward way — every two-port and every
fan-out sibling as a full 2×2 matrix stacked over (samples, frequencies),
multiplied with ``numpy.matmul`` from the source row on, the loads as
``(C + D·YL)/(A + B·YL)`` — and every gain, admittance, row, loading loss and
noise figure must agree to 1e-12 relative, on random chains (with fan-out)
whose parts are spread per sample.
"""
from __future__ import annotations

import numpy as np
import pytest

from chaingen import random_chain_text
from conftest import DEMO_CHAINS, chain_from
from chainplan.engine.budget import evaluate, nominal_params
from chainplan.engine.noise import analyse_noise
from chainplan.engine.workspace import Workspace
from chainplan.spec.loader import load_chain

RTOL = 1e-12
#: fields spread per sample (each by its own random factor)
SPREAD = ("r", "c", "r_top", "r_bottom", "r_f", "r_g", "r_bias", "i_bias", "gbw", "c_per_m", "c_in", "length")


def spread_params(chain, n: int, seed: int) -> dict:
    """Nominal parameters with every SPREAD field drawn per sample, ±20 %, as (n, 1) arrays."""
    rng = np.random.default_rng(seed)
    out = {}
    for st, p in nominal_params(chain).items():
        q = dict(p)
        for k in SPREAD:
            v = q.get(k)
            if isinstance(v, float) and np.isfinite(v) and v > 0:
                q[k] = v * rng.uniform(0.8, 1.2, size=(n, 1))
        out[st] = q
    return out


def reference_ac(chain, params, ops, f_hz):
    """Node gains, input admittances and rows by the straightforward full 2×2 product."""
    s = (2j * np.pi * np.asarray(f_hz, dtype=float))[None, :]
    n = max((np.shape(v)[0] for p in params.values() for v in p.values() if np.ndim(v) >= 1), default=1)
    shape = (n, s.shape[1])
    full = lambda x: np.broadcast_to(np.asarray(x, dtype=complex) + 0j * s, shape)  # noqa: E731
    mats, y_in = {}, {}
    node_y = {nd: np.zeros(shape, complex) for nd in chain.nodes}
    for st in reversed(chain.stages):
        p, op = params[st.name], ops[st.name]
        if st.role == "load":
            y = full(st.model.load_admittance(p, s, op))
        else:
            m = st.model.abcd(p, s, op)
            mats[st.name] = np.stack([np.stack([full(m.A), full(m.B)], -1), np.stack([full(m.C), full(m.D)], -1)], -2)
            yl = node_y[st.name]
            y = (mats[st.name][..., 1, 0] + mats[st.name][..., 1, 1] * yl) / (
                mats[st.name][..., 0, 0] + mats[st.name][..., 0, 1] * yl)
        y_in[st.name] = y
        node_y[st.parent] = node_y[st.parent] + y
    a, b = chain.source.model.source_row(params[chain.source.name], s)
    rows = {chain.source.name: np.stack([full(a), full(b)], -1)[..., None, :]}       # (n, F, 1, 2)
    branch = {}
    for st in chain.stages:
        sib = node_y[st.parent] - y_in[st.name]                 # the siblings: a shunt admittance
        shunt = np.zeros(shape + (2, 2), complex)
        shunt[..., 0, 0] = shunt[..., 1, 1] = 1.0
        shunt[..., 1, 0] = sib
        branch[st.name] = np.matmul(rows[st.parent], shunt)
        if st.role == "two_port":
            rows[st.name] = np.matmul(branch[st.name], mats[st.name])
    gains = {nd: 1.0 / (r[..., 0, 0] + r[..., 0, 1] * node_y[nd]) for nd, r in rows.items()}
    return gains, y_in, rows, branch


def _close(x, ref, what):
    x, ref = np.broadcast_arrays(np.asarray(x), np.asarray(ref))
    fin = np.isfinite(ref)
    assert np.array_equal(fin, np.isfinite(x)), what
    err = np.abs(x[fin] - ref[fin])
    assert np.all(err <= RTOL * np.abs(ref[fin])), f"{what}: {np.max(err / np.maximum(np.abs(ref[fin]), 1e-300)):.3g}"


def _chains():
    out = [pytest.param(lambda seed=seed: chain_from(random_chain_text(seed, 6, fanout=seed % 2 == 0)),
                        id=f"random-{seed}") for seed in range(8)]
    out += [pytest.param(lambda p=p: load_chain(str(p)), id=p.stem) for p in DEMO_CHAINS]
    return out


@pytest.mark.parametrize("make", _chains())
@pytest.mark.parametrize("recycled", [False, True])
def test_engine_matches_plain_product(make, recycled):
    """Gains at every node, every input admittance, every row (up to its carried scale)
    and every loading loss equal the plain 2×2 product, with and without recycled arrays."""
    chain = make()
    params = spread_params(chain, 5, seed=len(chain.stages))
    ws = Workspace() if recycled else None
    for _ in range(2 if recycled else 1):         # the second pass runs in recycled arrays
        if ws is not None:
            ws.recycle()
        ev = evaluate(chain, params, ws=ws)
    gains, y_in, rows, branch = reference_ac(chain, params, ev.dc.ops, ev.f_hz)
    for nd, h in gains.items():
        _close(ev.ac.node_h[nd], h, f"gain at {nd}")
    for st in chain.stages:
        _close(ev.ac.y_in[st.name], y_in[st.name], f"Yin of {st.name}")
        a, b = ev.ac.branch_row[st.name]
        ref = branch[st.name]
        _close(b / a, ref[..., 0, 1] / ref[..., 0, 0], f"source impedance seen by {st.name}")
        ref_ratio = np.abs(ref[..., 0, 0] / (ref[..., 0, 0] + ref[..., 0, 1] * y_in[st.name]))
        if chain.source.model.signal_unit == "V" or st.parent != chain.source.name:
            # compared as a ratio (dB near 0 have no relative precision), whatever the sign convention
            got = 10 ** (-np.abs(ev.interface_loss_db(st.name)) / 20)
            _close(got, np.minimum(ref_ratio, 1 / ref_ratio), f"loading loss at {st.name}")
    for nd, r in rows.items():
        a, b = ev.ac.full_row(nd)
        _close(a, r[..., 0, 0], f"row A at {nd}")
        _close(b, r[..., 0, 1], f"row B at {nd}")


@pytest.mark.parametrize("make", _chains())
def test_noise_powers_match_densities(make):
    """The Monte Carlo's powers-only noise path gives the figures of the full analysis
    (densities per generator integrated with the trapezoid weights) to 1e-12."""
    chain = make()
    params = spread_params(chain, 4, seed=7)
    full = analyse_noise(evaluate(chain, params))
    ws = Workspace()
    fast = analyse_noise(evaluate(chain, params, ws=ws), powers_only=True)
    assert fast.out_density is None and fast.contributors == []
    assert set(fast.vrms) == set(full.vrms)
    for key in ("out_vrms", "in_vrms", "snr_db", "snr_fs_db", "enob_bits", "dynamic_range_db"):
        _close(getattr(fast, key), getattr(full, key), key)
    for name in full.vrms:
        _close(fast.vrms[name], full.vrms[name], f"noise of {name}")

