"""Class-A follower swing under load against ngspice transients (issue 11 item 1).

A follower pushes current only; its bias and the load pull the output down, so
the output stops following where the device current reaches zero: V_DC −
I_dev/|G_bias + Y_load| (engine/swing.py; Sedra & Smith, output stages, from
memory).  Each case overdrives the follower with a large sine and reads the
lowest output voltage of the simulated transient (level-1 MOSFET, Gummel–Poon
BJT): the negative swing V_DC − V_min must match chainplan's V_DC − low limit
within 2 %.  The netlists are written by hand from the chain text."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import analyse
from conftest import chain_from
from helpers_ngspice import needs_ngspice, run, _values

pytestmark = needs_ngspice


def spice_min(netlist: str, node: str, t_stop: str = "2m", step: str = "0.5u") -> float:
    out = run(netlist, [f"tran {step} {t_stop}", f"let vlow = vecmin(v({node}))", "print vlow"])
    return _values(out)["vlow"][-1]


EF = """
name: ef-class-a
rails: {vdd: 5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, dc: 1.6 V, r: 100}
stages:
  - {name: ef, kind: emitter_follower, beta: 100, i_s: 1e-15 A, r_e: 4.7k}
  - {name: rl, kind: load, r_in: 2k, ref: 1 V}
"""

EF_NET = """
Vin in 0 dc 1.6 sin(1.6 1.5 1k)
Rs in b 100
Vcc c 0 dc 5
Q1 c b e qn
Re e 0 4.7k
Rl e l 2k
Vl l 0 dc 1
.model qn npn(is=1e-15 bf=100)
"""

SF = """
name: sf-class-a
rails: {vdd: 3.3 V}
source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.2 V, r: 1k}
stages:
  - {name: sf, kind: source_follower, kp: 120 µA/V², w_over_l: 200, vth0: 0.55 V, lambda: 0.04 /V,
     bulk: source, i_bias: 50 µA}
  - {name: couple, kind: ac_coupling, c: 100 µF, r_bias: 10k, bias: 0 V}
"""

SF_NET = """
Vin in 0 dc 2.2 sin(2.2 1.2 1k)
Rs in g 1k
Vdd d 0 dc 3.3
M1 d g s s nm l=1u w=200u
Isink s 0 dc 50u
Cc s o 100u
Rl o 0 10k
.model nm nmos(level=1 kp=120u vto=0.55 lambda=0.04)
"""


@pytest.mark.parametrize("text, net, node, spice_node", [
    (EF, EF_NET, "ef", "e"),   # resistor bias, DC-coupled load: cut-off at the Thevenin level of RE ‖ RL
    (SF, SF_NET, "sf", "s"),   # 50 µA sink, AC-coupled 10 kΩ: the swing is I_bias·RL,ac = 0.5 V
])
def test_class_a_negative_swing_matches_ngspice(text, net, node, spice_node):
    b = analyse(chain_from(text))
    row = next(n for n in b.nodes if n.name == node)
    swing = row.dc_v - row.low_v
    spice_swing = row.dc_v - spice_min(net, spice_node)
    assert swing == pytest.approx(spice_swing, rel=0.02)
    if node == "ef":       # hand value: 1 V·RE/(RE + RL) = 0.7015 V
        assert row.low_v == pytest.approx(1.0 * 4.7 / 6.7, rel=1e-6)
    else:                  # hand value: 50 µA · 10 kΩ
        assert swing == pytest.approx(0.5, rel=1e-3)
    assert row.limited_by[0] == node
    assert b.ev.dc.limit_cause[node][0] == "class A"
