"""Rare-event production yield (issue 19, item 1): mixture importance sampling must
agree with the exact tail of a normal distribution where the failure region is a
half-space, and with brute-force Monte Carlo within the two intervals where brute
force is feasible (a failure rate near 1e-3), with fixed seeds."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.engine.budget import analyse, frequency_grid
from chainplan.studies.montecarlo import corner_passes, requirement_frequencies
from chainplan.studies.rare import erfc, estimate, to_units
from chainplan.studies.tolerances import corner_points, draw
from conftest import chain_from

TAIL = """
name: tail
description: one gain with a σ tolerance; the chain's gain is proportional to it
source: {{name: src, kind: sensor, amplitude: 10 mV, r: 100}}
stages:
  - {{name: amp, kind: amplifier, gain: 10 ±1% σ, r_in: 1meg, r_out: 10}}
  - {{name: adc, kind: adc, bits: 12, fs_low: -2 V, fs_high: 2 V}}
analysis: {{points: 41}}
requirements:
  - min_gain: {limit} dB
"""


def normal_tail(k: float) -> float:
    """Φ(−k) = erfc(k/√2)/2 (Abramowitz & Stegun 26.2.29, from memory)."""
    return 0.5 * math.erfc(k / math.sqrt(2))


def test_erfc_against_the_standard_library():
    x = np.linspace(-7, 7, 1401)
    exact = np.array([math.erfc(v) for v in x])
    assert np.max(np.abs(erfc(x) / exact - 1)) < 1.2e-7          # the stated accuracy of the fit
    u = to_units(np.array([[-1.0], [0.0], [1.0]]), ["uniform"])[0]
    assert u == pytest.approx([math.erf(-1 / math.sqrt(2)), 0.0, math.erf(1 / math.sqrt(2))], abs=1e-7)


@pytest.mark.parametrize("k", [4.753, 5.998])                     # about 1 ppm and 1 ppb
def test_half_space_failure_matches_the_normal_tail(k):
    """gain_dB = G0 + 20·log10(g/10) with g ~ N(10, 0.1): the unit fails when g < 10·(1 − 0.01·k),
    a half-space whose probability is exactly Φ(−k)."""
    g0 = analyse(chain_from(TAIL.format(limit=0))).gain_db
    limit = g0 + 20 * math.log10(1 - 0.01 * k)
    res = estimate(chain_from(TAIL.format(limit=f"{limit:.9f}")), samples=4000, explore=1000, seed=3)
    exact = normal_tail(k)
    lo, hi = res.interval
    assert lo <= exact <= hi
    assert res.p_fail == pytest.approx(exact, rel=0.08)
    assert res.beta == pytest.approx(k, abs=0.02)                 # the boundary point on the ray, 1/512 steps
    assert res.equivalent_samples > 100 / exact                   # far beyond what brute force could afford
    (name, z, u, value, nominal), = res.point
    assert name == "amp.gain" and value == pytest.approx(10 * (1 - 0.01 * k), rel=2e-4) and nominal == 10


FILTER = """
name: filter-gain
description: filter and gain with uniform, normal and rail tolerances and a supply corner
rails: {vdd: 3.3 V ±2%}
source: {name: src, kind: sensor, amplitude: 0.2 V, dc: 1.2 V, r: 1k ±5%}
stages:
  - {name: lp, kind: rc_lowpass, r: 10k ±5%, c: 10 nF ±10% normal}
  - {name: amp, kind: amplifier, gain: 2 ±3%, r_in: 1meg, r_out: 10, out_ref: 0 V}
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
analysis: {points: 61}
corners:
  supply: ±5 %
requirements:
  - min_f_high: 1.3 kHz
  - min_headroom: 0.3 V
"""


def test_agrees_with_brute_force_near_one_in_a_thousand():
    """Five inputs (uniform, truncated-normal and rail tolerances), three supply corners, two
    requirements failing in different regions.  Brute force: 300 000 units drawn by
    `spread`'s own sampler (tolerances.draw), judged at every corner as `spread` judges them."""
    chain = chain_from(FILTER)
    corners = corner_points(chain)
    f = requirement_frequencies(chain, frequency_grid(chain))
    n = 300_000
    d = draw(chain, n, seed=11)
    fails = 0
    for i in range(0, n, 20_000):
        cp, ok = corner_passes(d, slice(i, i + 20_000), corners, f)
        fails += int((~(ok & cp.all(axis=0)).all(axis=1)).sum())
    p_bf = fails / n
    se_bf = math.sqrt(p_bf * (1 - p_bf) / n)
    res = estimate(chain, samples=20000, explore=2000, seed=5)
    assert 1e-3 < p_bf < 1e-2
    assert abs(res.p_fail - p_bf) <= 1.96 * math.hypot(res.std_err, se_bf)
    assert res.equivalent_samples > 5 * 20000                     # worth more than five times as many plain units
    assert {r.what for r in res.regions} >= {"min_f_high", "min_headroom"}


def test_cli_table_json_and_gate(cli, tmp_path):
    path = tmp_path / "tail.yaml"
    g0 = analyse(chain_from(TAIL.format(limit=0))).gain_db
    path.write_text(TAIL.format(limit=f"{g0 + 20 * math.log10(1 - 0.04753):.9f}"), encoding="utf-8")
    code, out, err = cli("rare", str(path), "-n", "3000", "--explore", "500")
    assert code == 0 and "ppm" in out and "Most likely failure point" in out and "amp.gain" in out
    code, out, err = cli("rare", str(path), "-n", "3000", "--explore", "500", "--max-failure", "0.1 ppm",
                          "--json")
    d = json.loads(out)
    assert code == 1 and d["max_failure"]["passed"] is False
    assert d["failure_rate_interval_95"][0] <= normal_tail(4.753) <= d["failure_rate_interval_95"][1]
    code, out, err = cli("rare", str(path), "-n", "3000", "--explore", "500", "--max-failure", "10 ppm")
    assert code == 0 and "met" in out
    code, out, err = cli("rare", str(path), "--max-failure", "ten")
    assert code == 2 and "not a failure rate" in err and "Traceback" not in err


def test_geophone_demo_at_parts_per_million():
    """The demo's ±0.024 dB gain window: every unit of 20 000 brute-force draws passes, the
    importance-sampling estimate is a few ppm with a resolved interval (30 or more failing
    samples), and the failure point puts the gain and filter parts near their limits."""
    from chainplan.spec.loader import load_chain
    from conftest import REPO
    chain = load_chain(REPO / "chains" / "geophone_production.yaml")
    res = estimate(chain, samples=20000, explore=2000, seed=1)
    lo, hi = res.interval
    assert 1e-6 < lo < res.p_fail < hi < 1e-4 and res.failures >= 30
    moved = {name for name, z, u, x, x0 in res.point[:4]}
    assert moved == {"gain.r_f", "gain.r_g", "antialias.r", "antialias.c"}
    assert all(abs(u) > 0.5 for name, z, u, x, x0 in res.point[:4])      # beyond half their limits
