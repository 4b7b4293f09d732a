"""The square law's range of validity: the inversion-coefficient warning.

Reference: the charge-based EKV model in saturation (Enz & Vittoz, *Charge-Based
MOS Transistor Modeling*, 2006; Enz, Krummenacher & Vittoz, 1995; from memory):
the normalised source charge q gives IC = q² + q and (VP − VS)/UT = 2q + ln q.
gm is taken here by numerical differentiation of those two relations, not from
chainplan's closed form (1 + √(1 + 4·IC))/(2·√IC), which it checks.  Binkley's
region boundaries (IC 0.1 and 10) are the ones the warning names."""
from __future__ import annotations

import json

import numpy as np
import pytest

from chainplan.engine.validity import gm_overstatement, inversion_coefficient, mosfet_warnings
from chainplan.engine.budget import evaluate
from chainplan.spec.loader import load_chain
from chainplan.stages.base import K_BOLTZMANN, Q_ELECTRON
from conftest import REPO, chain_from


def _ekv_gm_over_id(ic: float, n: float, ut: float) -> float:
    """gm/Id of the charge-based EKV relations by a central difference in VP."""
    q = (np.sqrt(1 + 4 * ic) - 1) / 2
    h = 1e-6 * q

    def at(qq):
        return qq * qq + qq, ut * (2 * qq + np.log(qq))      # IC and VP − VS
    (i1, v1), (i2, v2) = at(q - h), at(q + h)
    # gm = (1/n)·dId/dVP  (VP = (VG − VT0)/n)
    return (i2 - i1) / (v2 - v1) / n / ic


@pytest.mark.parametrize("ic", [0.01, 0.1, 1.0, 2.5, 10.0, 100.0])
def test_overstatement_matches_the_ekv_charge_relations(ic):
    n, ut = 1.3, 0.025852
    vov_square = 2 * n * ut * np.sqrt(ic)                      # the square law at the same current
    square_gm_over_id = 2 / vov_square
    assert float(gm_overstatement(ic)) == pytest.approx(square_gm_over_id / _ekv_gm_over_id(ic, n, ut), rel=1e-6)


def test_overstatement_landmarks():
    # IC = 1: the golden ratio (1 + √5)/2; strong inversion → 1; weak inversion → 1/√IC
    assert float(gm_overstatement(1.0)) == pytest.approx((1 + 5 ** 0.5) / 2, rel=1e-12)
    assert float(gm_overstatement(1e6)) == pytest.approx(1.0, abs=1e-3)
    assert float(gm_overstatement(1e-6)) == pytest.approx(1e3, rel=1e-3)


def test_inversion_coefficient_is_the_square_law_overdrive_ratio():
    # on the square law Id = ½·KP·(W/L)·Vov², IC = (Vov/(2·n·UT))²
    kp, wl, vov, n, t = 100e-6, 20.0, 0.1, 1.25, 300.0
    ut = K_BOLTZMANN * t / Q_ELECTRON
    i_d = 0.5 * kp * wl * vov ** 2
    assert float(inversion_coefficient(i_d, kp, wl, n, t)) == pytest.approx((vov / (2 * n * ut)) ** 2, rel=1e-12)


def test_the_ph_demo_follower_is_in_moderate_inversion(cli):
    """10 µA in W/L = 20, KP = 100 µA/V²: Vov ≈ 93 mV, n = 1 + γ/(2√(PHI + VSB)) ≈ 1.24,
    IC ≈ 2.5 — moderate, not weak, inversion; the square law's gm about 37 % high."""
    path = str(REPO / "chains" / "ph_probe_dc.yaml")
    chain = load_chain(path)
    ev = evaluate(chain)
    v = ev.dc.ops["follower"].values
    vs = float(np.ravel(ev.dc.node_v["follower"])[0])
    n = 1 + 0.5 / (2 * np.sqrt(0.7 + vs))                      # gamma 0.5, phi 0.7, bulk at 0 V
    ut = K_BOLTZMANN * chain.temp_k / Q_ELECTRON
    kp = 100e-6 * (chain.temp_k / chain.t_nom_k) ** -1.5              # KP at 298 K from t_nom 25 °C
    ic = float(np.ravel(v["id_a"])[0]) / (2 * n * n * kp * 20 * ut * ut)
    assert 1 < ic < 4
    rc, out, err = cli("budget", path, "--json")
    (w,) = json.loads(out)["warnings"]
    assert w["stage"] == "follower" and w["region"] == "moderate"
    assert w["inversion_coefficient"] == pytest.approx(ic, rel=1e-6)
    assert w["gm_overstatement"] == pytest.approx(float(gm_overstatement(ic)), rel=1e-9)
    rc, out, err = cli("budget", path)
    assert "model warning" in out and "moderate inversion" in out


SF = """
name: sf
rails: {{vdd: 5 V}}
source: {{name: src, kind: sensor, amplitude: 1 mV, dc: 2.5 V}}
stages:
  - {{name: sf, kind: source_follower, kp: 100 µA/V², w_over_l: 10, vth0: 0.6 V, i_bias: {i}, bulk: source}}
  - {{name: rl, kind: load, r_in: 100G}}
"""


@pytest.mark.parametrize("i_bias, region", [("1 mA", None), ("20 µA", "moderate"), ("50 nA", "weak")])
def test_warning_appears_only_below_strong_inversion(i_bias, region):
    # 1 mA: Vov = √(2·1 mA/(100 µA/V²·10)) = 1.41 V, IC ≈ 440 — strong; 20 µA: Vov 0.2 V, IC ≈ 8.9;
    # 50 nA: IC ≈ 0.02 (γ = 0 here: n = 1.3, the typical figure)
    warns = mosfet_warnings(evaluate(chain_from(SF.format(i=i_bias))))
    assert [w["region"] for w in warns] == ([region] if region else [])
    if warns:
        assert warns[0]["slope_factor"] == pytest.approx(1.3)
