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


SF_RIPPLE = """
name: sf-ripple
rails: {{vdd: 3.3 V}}
source: {{name: src, kind: sensor, amplitude: 10 mV, dc: 2.2 V, r: 10k}}
stages:
  - {{name: sf, kind: source_follower, kp: 120 µA/V², w_over_l: 40, vth0: 0.55 V, lambda: 0.04 /V,
     gamma: 0.45 √V, phi: 0.7 V, bulk: {bulk}, i_bias: 50 µA, r_bias: 2M, cgd: 1 pF}}
  - {{name: rl, kind: load, r_in: 20k, ref: 1 V}}
analysis: {{f_ref: 1 kHz, f_start: 1 Hz, f_stop: 100 MHz}}
power:
  ripple: {{vdd: 2 µV/√Hz}}
"""


@needs_ngspice
@pytest.mark.parametrize("body", [False, True], ids=["bulk-at-source", "body-effect"])
def test_drain_supply_ripple_through_a_source_follower_matches_ngspice(body):
    """Ripple on the drain supply reaches the source through ro (λ = 0.04/V: i = v_d/ro into
    the output node) against gm + gmb + 1/ro and the loads, and through Cgd into the gate at
    high frequency: ngspice's AC transfer from VDD, level 1, the same device."""
    freqs = [10.0, 1e3, 1e6, 3e7]
    got = _ripple_density(chain_from(SF_RIPPLE.format(bulk="low" if body else "source")), freqs,
                          "sf: ripple vdd (drain, ro)")
    net = f"""Vsrc e 0 dc 2.2
Rsrc e g 10k
VDD vdd 0 dc 3.3 ac 1
M1 vdd g s {'0' if body else 's'} nm w=40u l=1u
Cgd g vdd 1p
Ibias s 0 dc 50u
Rbias s 0 2meg
RL s l 20k
VL l 0 dc 1
.model nm nmos level=1 kp=120u vto=0.55 lambda=0.04 gamma=0.45 phi=0.7"""
    ref = np.abs(run_ac(net, "s", freqs)) * D
    np.testing.assert_allclose(got, ref, rtol=1e-5)
    assert got[0] < D / 10                         # rejected by about gm·ro


@needs_ngspice
def test_collector_supply_ripple_through_an_emitter_follower_matches_ngspice():
    """Collector ripple through the Early effect (VA = 50 V: ro = VA/IC; Gummel–Poon's base
    current carries no Early factor, ngspice manual): ngspice's AC transfer from VCC."""
    freqs = [10.0, 1e4]
    chain = chain_from("""
        name: ef-ripple
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 10 mV, dc: 3 V, r: 10k}
        stages:
          - {name: ef, kind: emitter_follower, beta: 100, i_s: 1e-15 A, r_e: 2k, va: 50 V}
          - {name: rl, kind: load, r_in: 10k, ref: 1 V}
        power:
          ripple: {vdd: 2 µV/√Hz}
        """)
    got = _ripple_density(chain, freqs, "ef: ripple vdd (collector, ro)")
    net = """Vsrc e 0 dc 3
Rsrc e b 10k
VCC vdd 0 dc 5 ac 1
Q1 vdd b x qn
Re x 0 2k
RL x l 10k
VL l 0 dc 1
.model qn npn is=1e-15 bf=100 vaf=50"""
    ref = np.abs(run_ac(net, "x", freqs)) * D
    # 4e-4 apart: the operating point (IC, VCE; levels agree to the DC_ABS of issue 2) sets ro
    np.testing.assert_allclose(got, ref, rtol=1e-3)
    assert got[0] < D / 50                         # rejected by about gm·ro
