"""Power budget per rail (engine/power.py) against hand sums of the currents, and the
advisor's figure (each stage's power_w) against the per-rail currents it is made of."""
from __future__ import annotations

import numpy as np
import pytest

import chainplan
from chainplan.engine.budget import evaluate
from chainplan.engine.power import analyse_power
from conftest import REPO, chain_from


def test_hydrophone_vdd_current_is_the_hand_sum():
    """hydrophone_buffered: vdd feeds the follower's drain (the 50 µA sink plus Vs/2 MΩ through
    its r_bias) and the gain op-amp's 1.1 mA; the gate bias sits at vdd (no current) and
    the 10 kΩ bias network at vmid carries none (the gain stage's input draws nothing)."""
    c = chainplan.load(str(REPO / "chains" / "hydrophone_buffered.yaml"))
    ev = evaluate(c)
    r = analyse_power(c, ev)
    vs = float(np.ravel(ev.dc.node_v["follower"])[0])
    hand = 50e-6 + vs / 2e6 + 1.1e-3
    assert r.rails["vdd"][1][0] == pytest.approx(hand, rel=1e-9)
    assert r.power_w[0] == pytest.approx(3.3 * hand, rel=1e-9)


def test_output_current_and_negative_rail():
    """A non-inverting stage at +1 V into 1 kΩ to ground, RF + RG = 20 kΩ back to ref 0 V:
    it sources 1 mA + 50 µA from vdd; the quiescent 2 mA flows from vdd into vss."""
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: s, kind: sensor, amplitude: 1 mV, dc: 0.5 V}
        stages:
          - {name: amp, kind: opamp_noninverting, gbw: 1 MHz, a0: 200 dB, r_f: 10k, r_g: 10k, v_neg: vss,
             i_supply: 2 mA}
          - {name: out, kind: load, r_in: 1k}
        power: {battery: 1000 mAh, battery_rails: [vdd, vss]}
        """)
    r = analyse_power(c, evaluate(c))
    assert r.rails["vdd"][1][0] == pytest.approx(2e-3 + 1e-3 + 50e-6, rel=1e-9)
    assert r.rails["vss"][1][0] == pytest.approx(2e-3, rel=1e-9)           # drawn: into the negative rail
    assert r.power_w[0] == pytest.approx(5 * 3.05e-3 + 5 * 2e-3, rel=1e-9)
    assert r.battery_life_s == pytest.approx(3600.0 / 5.05e-3, rel=1e-9)   # 1 Ah (3600 C) over 5.05 mA: 198 h
    assert r.stage_power_w("amp")[0] == pytest.approx(2e-3 * 10, rel=1e-12)   # the advisor's i_supply·(v_pos − v_neg)


@pytest.mark.parametrize("name", ["hydrophone_buffered", "ph_probe_dc", "photodiode_tia", "vibration_fanout"])
def test_stage_power_is_the_operating_points_power(name):
    c = chainplan.load(str(REPO / "chains" / f"{name}.yaml"))
    ev = evaluate(c)
    r = analyse_power(c, ev)
    for st in c.stages:
        pw = ev.dc.ops[st.name].values.get("power_w")
        if pw is not None:
            assert r.stage_power_w(st.name)[0] == pytest.approx(float(pw), rel=1e-9, abs=1e-15), st.name


def test_max_rail_current_requirement(cli, spec_file):
    path = spec_file("""
        name: t
        rails: {vdd: 5 V}
        source: {name: s, kind: sensor, amplitude: 1 mV, dc: 1 V}
        stages:
          - {name: amp, kind: opamp_follower, gbw: 1 MHz, i_supply: 2 mA}
          - {name: out, kind: load}
        requirements:
          - max_rail_current: 1.5 mA
            rails: [vdd]
        """)
    rc, out, _ = cli("check", path)
    assert rc == 1 and "max_rail_current" in out
    rc, out, _ = cli("power", path)
    assert rc == 0 and "2.00 mA" in out


def test_bad_power_section_names_the_field():
    from chainplan.errors import SpecError
    with pytest.raises(SpecError) as e:
        chain_from("""
            name: t
            rails: {vdd: 5 V}
            source: {name: s, kind: sensor, amplitude: 1 mV}
            stages: [{name: out, kind: load}]
            power: {battery: 1200 mA}
            """)
    assert e.value.field == "power.battery"
