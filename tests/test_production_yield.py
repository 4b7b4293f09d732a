"""Corners are operating conditions, tolerances are units (issue 13): every unit is
evaluated at every corner of the supply × temperature grid and passes only when it
passes at all of them; every yield carries its 95 % Wilson score interval."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.studies.montecarlo import requirement_frequencies, run, wilson
from chainplan.studies.tolerances import corner_points
from chainplan.engine.budget import evaluate, frequency_grid
from chainplan.studies.requirements import evaluate_requirements
from conftest import chain_from


@pytest.mark.parametrize("k, n", [(0, 10), (10, 10), (7, 10), (950, 1000), (1, 3)])
def test_wilson_against_its_closed_form(k, n):
    """Wilson (J. Am. Stat. Assoc. 22, 1927), from memory: centre (k + z²/2)/(n + z²),
    half-width z·√n/(n + z²)·√(p̂q̂ + z²/4n); z = 1.96 for 95 %.  Worked value: 7 of 10 gives
    0.3968 … 0.8922 (a standard textbook example, from memory)."""
    z = 1.959963984540054
    p = k / n
    centre = (k + z * z / 2) / (n + z * z)
    half = z * math.sqrt(n) / (n + z * z) * math.sqrt(p * (1 - p) + z * z / (4 * n))
    lo, hi = wilson(k, n)
    assert lo == pytest.approx(max(0.0, centre - half), abs=1e-12)
    assert hi == pytest.approx(min(1.0, centre + half), abs=1e-12)
    if (k, n) == (7, 10):
        assert (round(lo, 4), round(hi, 4)) == (0.3968, 0.8922)
    if k == 0:
        assert lo == 0.0 and hi > 0.2          # never an empty interval at 0 passes


SUPPLY = """
name: supply-corner
rails: {{vdd: 3.3 V}}
source: {{name: src, kind: sensor, amplitude: 0.1 V, dc: 1.65 V, r: 1k ±1%}}
stages:
  - {{name: buf, kind: opamp_follower, gbw: 10 MHz ±10%, a0: 100 dB, swing_low: 0.05 V, swing_high: {sh}}}
  - {{name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}}
corners:
  supply: ±5 %
  {extra}
requirements:
  - min_headroom: 0.1 V
"""


def test_unit_failing_at_one_supply_corner_gives_zero_production_yield():
    """Headroom at the −5 % supply: the op-amp's high swing limit sits 1.4 V below
    vdd, so at 3.135 V the follower's top is 1.735 V, less than 0.1 V above the 1.75 V peak: every unit
    fails there and production yield is 0 %, while the other corners pass."""
    chain = chain_from(SUPPLY.format(sh="1.4 V", extra=""))
    res = run(chain, 400, seed=2)
    labels = [c.label for c in res.corners]
    assert labels[0] == "supply nominal" and len(labels) == 3
    low = labels.index("supply −5 %")
    assert res.yield_at(low) == 0.0
    assert res.yield_at(labels.index("supply nominal")) == 1.0
    assert res.yield_all == 0.0
    assert res.limiting_corner == low
    lo, hi = res.interval(res.yield_all)
    assert lo == 0.0 and 0 < hi < 0.01


def test_corner_grid_full_and_extremes():
    text = SUPPLY.format(sh="0.1 V", extra="temperature: [0 °C, 50 °C]")
    full = corner_points(chain_from(text))
    assert len(full) == 9 and full[0].nominal and sum(c.nominal for c in full) == 1
    ext = corner_points(chain_from(text.replace("  temperature:", "  grid: extremes\n  temperature:")))
    assert len(ext) == 5 and ext[0].nominal
    assert {(c.temp_k, c.supply) for c in ext[1:]} == {(t, s) for t in (273.15, 323.15) for s in (0.95, 1.05)}


BAND = """
name: band
source: {{name: src, kind: sensor, amplitude: 10 mV, r: 1k}}
stages:
  - {{name: lp, kind: rc_lowpass, r: 10k ±5%, c: 10 nF ±10% 2000ppm/K}}
  - {{name: meter, kind: load, r_in: inf}}
corners:
  temperature: [-40 °C, 85 °C]
requirements:
  - min_f_high: 1.3 kHz
  - max_f_low: 10 Hz
analysis: {{f_ref: 100 Hz, f_start: 1 Hz, f_stop: 1 MHz, points: 301{extra}}}
"""


def test_band_edges_against_the_whole_span_need_the_whole_grid():
    """Without mid_band or a signal band the passband is the largest gain over the span, so
    the corners get the whole grid."""
    chain = chain_from(BAND.format(extra=""))
    f_full = frequency_grid(chain)
    assert len(requirement_frequencies(chain, f_full)) == len(f_full)


def test_corner_work_split_within_a_chunk_matches_every_unit_at_every_corner():
    """Without mid_band the corners take the whole grid, so a chunk's corner work is split
    into calls of chunk·F/((C − 1)·F_corner) units (here 300 units, 2 other corners: 150 a
    call) while the nominal chunk stays whole; every unit's pass/fail at every corner equals
    the plain engine's evaluation of all units at each corner in one call."""
    chain = chain_from(BAND.format(extra=""))
    res = run(chain, 300, seed=4, chunk=300, workers=1)
    from chainplan.studies.tolerances import at_corners, draw
    d = draw(chain, 300, seed=4)
    for c, corner in enumerate(res.corners):
        if corner.nominal:
            continue
        ev = evaluate(chain, at_corners(d, slice(0, 300), [corner]))
        for j, r in enumerate(evaluate_requirements(ev)):
            np.testing.assert_array_equal(res.corner_pass[j, :, c], np.broadcast_to(r.passed, (300,)))
        np.testing.assert_array_equal(res.corner_ok[:, c], np.broadcast_to(ev.valid, (300,)) & d.valid)
    assert 0 < res.yield_all < 1


@pytest.mark.parametrize("extra", [", mid_band: 100 Hz", ", signal_band: [50 Hz, 200 Hz]"])
def test_corner_frequencies_decide_band_edges_as_the_full_grid_does(extra):
    """The corner evaluation keeps only the passband's columns and the grid from there to the
    band-edge limits; its pass/fail equals the full grid's on every unit and corner
    (capacitance 2000 ppm/K moves the edge across the 1.3 kHz limit from cold to hot)."""
    chain = chain_from(BAND.format(extra=extra))
    f_full = frequency_grid(chain)
    f_sub = requirement_frequencies(chain, f_full)
    assert len(f_sub) < len(f_full) / 2
    res = run(chain, 300, seed=4)
    from chainplan.studies.tolerances import at_corners, draw
    d = draw(chain, 300, seed=4)
    others = [c for c in res.corners if not c.nominal]
    p = at_corners(d, slice(0, 300), others)
    full = evaluate_requirements(evaluate(chain, p))
    sub = evaluate_requirements(evaluate(chain, p, f_hz=f_sub))
    for a, b in zip(full, sub):
        np.testing.assert_array_equal(a.passed, b.passed)
    assert 0 < res.yield_all < 1                 # the hot corner fails some units
    assert res.corners[res.limiting_corner].temp_k == pytest.approx(358.15)


def test_spread_cli_reports_intervals_and_gates_on_the_lower_bound(cli, spec_file):
    path = spec_file(SUPPLY.format(sh="0.1 V", extra=""))
    code, out, _ = cli("spread", path, "-n", "200", "--json", "--min-yield", "99 %")
    data = json.loads(out)
    assert data["yield_all"] == 1.0
    lo, hi = data["yield_all_interval_95"]
    assert lo == pytest.approx(wilson(200, 200)[0]) and hi == 1.0
    assert lo < 0.99 and data["min_yield"]["decided_on"] == "wilson_lower_95"
    assert code == 1                             # 200 of 200 cannot show 99 % with 95 % confidence
    assert [c["corner"] for c in data["corners"]][0] == "supply nominal"
    code, out, _ = cli("spread", path, "-n", "200", "--min-yield", "95 %")
    assert code == 0 and "lower bound" in out and "95 % interval" in out
