"""DC error sources of the stage models, switched on one at a time through the
real DC solution (``_err``), against Franco's static-limitation expressions
(Franco, *Design with Operational Amplifiers and Analog Integrated Circuits*,
static op-amp limitations, from memory):

* non-inverting, source resistance Rs at the + input, Rp = RF ‖ RG:
  Eo = (1 + RF/RG)·[Vos + (Rp − Rs)·IB − (Rp + Rs)·IOS/2]
* inverting, source resistance Rs in series with RG:
  Eo = (1 + RF/(RG + Rs))·Vos + RF·IN
"""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import nominal_params
from chainplan.engine.dcpass import solve_dc
from conftest import chain_from

RS, RF, RG = 100e3, 90e3, 10e3


def _chain(kind, rs=RS):
    return chain_from(f"""
        name: t
        rails: {{vdd: 5 V, vss: -5 V}}
        source: {{name: s, kind: sensor, amplitude: 1 mV, r: {rs}}}
        stages:
          - {{name: amp, kind: {kind}, gbw: 1 MHz, a0: 200 dB, r_f: {RF}, r_g: {RG}, v_neg: vss,
              vos: 1 mV, ib: 10 nA, ios: 2 nA, vos_drift: 5 µV/K, cmrr: 80 dB}}
          - {{name: out, kind: load}}
        """)


def _shift(chain, errs, temp_k=298.15, stage="amp"):
    p0 = nominal_params(chain)
    p1 = nominal_params(chain)
    for st in p1:
        p1[st]["temp_k"] = temp_k
    p1[stage]["_err"] = errs
    v0, v1 = (float(np.ravel(solve_dc(chain, p).node_v["amp"])[0]) for p in (p0, p1))
    return v1 - v0


def test_noninverting_offset_and_bias_currents_match_franco():
    c = _chain("opamp_noninverting")
    g, rp = 1 + RF / RG, RF * RG / (RF + RG)
    assert _shift(c, {"vos": 1e-3}) == pytest.approx(g * 1e-3, rel=1e-6)
    assert _shift(c, {"ib": 10e-9}) == pytest.approx(g * (rp - RS) * 10e-9, rel=1e-6)
    assert _shift(c, {"ios": 2e-9}) == pytest.approx(-g * (rp + RS) * 1e-9, rel=1e-6)
    # bias-current compensation: Rs = Rp cancels IB (Franco), only IOS remains
    c2 = _chain("opamp_noninverting", rs=rp)
    assert abs(_shift(c2, {"ib": 10e-9})) < 1e-12


def test_inverting_offset_sees_the_noise_gain_and_in_flows_through_rf():
    c = _chain("opamp_inverting")
    assert _shift(c, {"vos": 1e-3}) == pytest.approx((1 + RF / (RG + RS)) * 1e-3, rel=1e-6)
    assert _shift(c, {"ib": 10e-9}) == pytest.approx(RF * 10e-9, rel=1e-6)
    assert _shift(c, {"ios": 2e-9}) == pytest.approx(-RF * 1e-9, rel=1e-6)


def test_offset_drift_and_bias_doubling_with_temperature():
    c = _chain("opamp_noninverting")
    g, rp = 1 + RF / RG, RF * RG / (RF + RG)
    assert _shift(c, {"vos_drift": 5e-6}, temp_k=298.15 + 40) == pytest.approx(g * 5e-6 * 40, rel=1e-6)
    # doubling every 10 K (common practice): +20 K is four times the 25 °C current
    assert _shift(c, {"ib": 10e-9}, temp_k=318.15) == pytest.approx(4 * g * (rp - RS) * 10e-9, rel=1e-6)


def test_cmrr_error_is_the_common_mode_over_cmrr():
    """A follower whose input sits 1 V above mid-supply: Vcm/CMRR = 1 V/10⁴ at its input."""
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: s, kind: sensor, amplitude: 1 mV, dc: 1 V}
        stages:
          - {name: amp, kind: opamp_follower, gbw: 1 MHz, a0: 200 dB, v_neg: vss, cmrr: 80 dB}
          - {name: out, kind: load}
        """)
    assert _shift(c, {"cmrr": 1e-4}) == pytest.approx(1.0 * 1e-4, rel=1e-6)


def test_ph_electrode_bias_current_into_250_megohm():
    """1 nA into a 250 MΩ glass electrode is 0.25 V at the buffer's input, about 4 pH
    at the Nernst slope of 59.16 mV/pH at 25 °C (a fact of the trade)."""
    c = chain_from("""
        name: ph
        rails: {vdd: 3.3 V}
        source: {name: e, kind: sensor, amplitude: 100 mV, dc: 1.2 V, r: 250M}
        stages:
          - {name: amp, kind: opamp_follower, gbw: 1 MHz, a0: 200 dB, ib: 1 nA}
          - {name: out, kind: load}
        """)
    dv = _shift(c, {"ib": 1e-9})
    assert dv == pytest.approx(-0.25, rel=1e-6)
    assert abs(dv) / 59.16e-3 == pytest.approx(4.2, abs=0.05)


def test_declared_error_limits_never_move_the_nominal_budget():
    c = _chain("opamp_noninverting")
    v = solve_dc(c, nominal_params(c)).node_v["amp"]
    assert float(np.ravel(v)[0]) == pytest.approx(0.0, abs=1e-12)
