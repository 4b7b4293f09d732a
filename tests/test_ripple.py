"""Supply rejection (engine/ripple.py): rail ripple carried through a rail-fed bias
network and an op-amp's PSRR, against ngspice's AC transfer from the rail."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import evaluate
from chainplan.engine.noise import analyse_noise, density_at
from conftest import chain_from
from helpers_ngspice import needs_ngspice, run_ac

D = 2e-6          # rail ripple density, V/√Hz
BIAS = """
name: r
rails: {vdd: 3.3 V}
source: {name: s, kind: sensor, amplitude: 10 mV, r: 1G, c: 2 nF}
stages:
  - {name: gate_bias, kind: ac_coupling, c: 100 nF, r_bias: 100M, bias: vdd}
  - {name: adc, kind: adc, bits: 16, fs_low: 0 V, fs_high: vdd}
analysis: {f_ref: 1 kHz, f_start: 10 mHz, f_stop: 100 kHz, points: 201}
power:
  ripple: {vdd: 2 µV/√Hz}
"""


def _ripple_density(chain, freqs, name):
    ev = evaluate(chain)
    _, _, gens = density_at(ev, freqs)
    return np.sqrt(dict(gens)[name][0])


@needs_ngspice
def test_ripple_through_the_gate_bias_network_matches_ngspice():
    """The hydrophone's gate bias off vdd: the ripple reaches the gate through 100 MΩ against
    the element's 1 GΩ ‖ 2 nF behind 100 nF — ngspice's AC transfer from the rail, exact."""
    freqs = [0.01, 0.1, 1.0, 10.0, 1e3]
    got = _ripple_density(chain_from(BIAS), freqs, "gate_bias: ripple vdd via r_bias")
    net = """Vs src 0 dc 0
Rs src a 1G
Cs src a 2n
C1 a g 100n
Rb g vddn 100Meg
Vdd vddn 0 dc 3.3 ac 1"""
    ref = np.abs(run_ac(net, "g", freqs)) * D
    np.testing.assert_allclose(got, ref, rtol=1e-6)


def test_psrr_refers_the_ripple_to_the_input_and_rolls_off():
    """A follower with 80 dB PSRR and a 1 kHz corner: 2 µV/√Hz on vdd is 0.2 nV/√Hz at its
    output at low frequency, √2 more at the corner (single-pole roll-off)."""
    c = chain_from("""
        name: r
        rails: {vdd: 5 V}
        source: {name: s, kind: sensor, amplitude: 10 mV}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 100 MHz, a0: 200 dB, psrr: 80 dB, psrr_corner: 1 kHz}
          - {name: out, kind: load}
        analysis: {f_ref: 10 Hz, f_start: 1 Hz, f_stop: 100 kHz}
        power: {ripple: {vdd: 2 µV/√Hz}}
        """)
    got = _ripple_density(c, [1.0, 1e3], "buf: ripple vdd (v_pos, PSRR)")
    assert got[0] == pytest.approx(D * 1e-4, rel=1e-5)
    assert got[1] == pytest.approx(D * 1e-4 * np.sqrt(2), rel=1e-4)
    res = analyse_noise(evaluate(c))
    assert "buf: ripple vdd (v_pos, PSRR)" in res.shares


def test_an_op_amp_without_psrr_says_its_ripple_is_not_counted():
    c = chain_from("""
        name: r
        rails: {vdd: 5 V}
        source: {name: s, kind: sensor, amplitude: 10 mV}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 100 MHz}
          - {name: out, kind: load}
        power: {ripple: {vdd: 2 µV/√Hz}}
        """)
    assert any("no psrr" in n for n in analyse_noise(evaluate(c)).notes)


def test_bad_ripple_names_the_rail():
    from chainplan.errors import SpecError
    with pytest.raises(SpecError) as e:
        chain_from(BIAS.replace("ripple: {vdd: 2 µV/√Hz}", "ripple: {vcc: 2 µV/√Hz}"))
    assert e.value.field == "power.ripple.vcc"


def test_a_scalar_ripple_is_located():
    """A bare number under 'ripple:' (a fuzz finding) names the file's line, not just the field."""
    from chainplan.errors import SpecError
    with pytest.raises(SpecError) as e:
        chain_from(BIAS.replace("ripple: {vdd: 2 µV/√Hz}", "ripple: 3"))
    assert e.value.field == "power.ripple" and e.value.line is not None
