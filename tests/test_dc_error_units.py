"""DC errors drawn per unit in a tolerance run (issue 15, item 6): each unit's error
sources are drawn within their limits, the unit is solved at its calibration state and
at every corner, and the DC error requirements judge each unit's own error there;
production yield is the fraction of units within the limit at every corner.  A
converter whose reference comes from a toleranced rail reads with a gain error in
proportion to the reading (the ratiometric conversion)."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.dcerror import analyse_dc_errors
from chainplan.studies.montecarlo import run
from conftest import chain_from

RF, RG = 90e3, 10e3
G = 1 + RF / RG                    # non-inverting noise gain (Franco, static limitations, from memory)


def _amp(extra_amp="", tail="", corners=""):
    return chain_from(f"""
        name: t
        temperature: 25 °C
        rails: {{vdd: 5 V, vss: -5 V}}
        source: {{name: s, kind: sensor, amplitude: 10 mV, r: 1k}}
        stages:
          - {{name: amp, kind: opamp_noninverting, gbw: 1 MHz, a0: 160 dB, r_f: {RF}, r_g: {RG}, v_neg: vss,
              {extra_amp}}}
          - {{name: out, kind: load}}
        {corners}
        {tail}
        """)


def _req(res, key):
    return next(r for r in res.requirements if r.kind == key or r.name == key)


def test_each_unit_offset_is_its_drawn_vos_times_the_noise_gain():
    """Eo = (1 + RF/RG)·Vos for a non-inverting stage (Franco, *Design with Operational
    Amplifiers and Analog Integrated Circuits*, static limitations, from memory): each unit's
    offset error is its own drawn Vos times 10, drawn uniformly within the ±1 mV limit, so
    the worst units approach the budget's worst case 10 mV and the median is near 5 mV."""
    chain = _amp("vos: 1 mV", "requirements: [{max_offset_error: 6 mV}]")
    res = run(chain, 2000, seed=3, workers=1)
    vos = res.inputs["amp.vos"]
    r = _req(res, "max_offset_error")
    np.testing.assert_allclose(r.value, G * np.abs(vos), rtol=1e-6, atol=1e-12)   # a0 = 1e8: G·(1 − G/a0)
    assert np.max(r.value) <= analyse_dc_errors(chain).total("offset") * (1 + 1e-12)
    assert np.median(r.value) == pytest.approx(5e-3, rel=0.05)
    # uniform within the limit: P(10·|u|·1 mV ≤ 6 mV) = 0.6
    assert res.yield_of(r) == pytest.approx(np.mean(G * np.abs(vos) <= 6e-3), abs=1e-12)
    assert res.yield_of(r) == pytest.approx(0.6, abs=0.03)
    assert np.array_equal(res.metrics["dc_offset_error_v"], r.value)


def test_one_point_calibration_removes_each_units_own_offset_and_leaves_its_drift():
    """vos_drift 10 µV/K: after a one-point calibration at 25 °C a unit's error at 0 °C and
    50 °C is its own drift × 25 K × (1 + RF/RG) (linear drift, the data-sheet form); a
    limit of 1.5 mV passes units with |drift| ≤ 6 µV/K, 60 % of a uniform draw; the cold
    and hot corners are where it fails, and a unit passes only when it passes at both."""
    chain = _amp("vos: 2 mV, vos_drift: 10 µV/K",
                 "accuracy: {calibration: one_point}", "corners: {temperature: [0 °C, 50 °C]}\n"
                 "        requirements: [{max_total_error: 1.5 mV}]")
    res = run(chain, 2000, seed=5, workers=1)
    d = res.inputs["amp.vos_drift"]
    r = _req(res, "max_total_error")
    expect = G * np.abs(d) * 25.0
    np.testing.assert_allclose(r.value, expect, rtol=1e-6, atol=1e-12)   # the nominal corner sees the range ends too
    np.testing.assert_allclose(res.metrics["dc_offset_error_v"], 0.0, atol=1e-12)   # calibrated out
    assert res.yield_all == pytest.approx(np.mean(expect <= 1.5e-3), abs=1e-12)
    assert res.yield_all == pytest.approx(0.6, abs=0.03)


def test_supply_corner_moves_a_units_error_and_production_needs_every_corner():
    """A reference from a rail: the stage's ref on vdd/2 through a divider is not modelled here;
    instead the ADC reads the output with fs_high on vdd.  At the −10 % supply corner the span
    is 10 % smaller, so a 2 V reading reads 2·(1/0.9 − 1) = 0.222 V high (code ∝ V/Vref, the
    ratiometric conversion): every unit fails a 0.1 V limit there and passes at nominal."""
    chain = chain_from("""
        name: t
        temperature: 25 °C
        rails: {vdd: 4 V}
        source: {name: s, kind: sensor, amplitude: 10 mV, r: 1k, dc: 2 V}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 1 MHz, a0: 160 dB, v_pos: vdd, vos: 1 µV}
          - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
        corners: {supply: ±10 %}
        requirements:
          - max_total_error: 0.1 V
        """)
    res = run(chain, 200, seed=1, workers=1)
    labels = [c.label for c in res.corners]
    low, nom = labels.index("supply −10 %"), labels.index("supply nominal")
    assert res.yield_at(low) == 0.0 and res.yield_at(nom) == 1.0 and res.yield_all == 0.0
    assert res.limiting_corner in (low, labels.index("supply +10 %"))


def test_reference_from_a_toleranced_rail_is_a_gain_error_in_the_budget():
    """fs_high on vref 2.5 V ±1 %: the code of V is (V − fs_low)/(fs_high − fs_low)·2^N, so a
    reference 1 % high reads V/1.01: at the 1 V zero point an error of 1·(1/1.01 − 1) = −9.90 mV,
    and over the +10 mV amplitude a further 10 mV·(1/1.01 − 1) (ratiometric conversion)."""
    chain = chain_from("""
        name: t
        rails: {vdd: 5 V, vref: 2.5 V ±1%}
        source: {name: s, kind: sensor, amplitude: 10 mV, r: 1k, dc: 1 V}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 1 MHz, a0: 160 dB, v_pos: vdd}
          - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vref}
        accuracy: {calibration: none}
        """)
    res = analyse_dc_errors(chain)
    c = next(c for c in res.contributors if c.name == "rail vref tolerance")
    k = 1 / 1.01 - 1
    assert c.offset_v == pytest.approx(1.0 * k, rel=1e-6)
    assert c.gain_v == pytest.approx(10e-3 * k, rel=1e-4)
    assert res.total("gain") == pytest.approx(abs(10e-3 * k), rel=1e-4)
