"""Tolerances read as data sheets state them (issue 13): '±1%' a limit, uniform
within it by default (GUM, JCGM 100:2008 §4.3.7: a rectangular distribution
when only bounds are known, from memory); 'normal' puts the limit at 3σ
(common practice) and truncates there; 'σ' is a true standard deviation.
Temperature coefficients on any field: R(T) = R0·(1 + α·ΔT)."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import analyse, evaluate, nominal_params
from chainplan.spec.units import Tempco, Tolerance, UnitError, parse_field_value, parse_toleranced
from chainplan.studies.tolerances import draw, unit_draw
from conftest import chain_from


@pytest.mark.parametrize("text, nominal, tol, tc", [
    ("10k ±1%", 1e4, Tolerance("uniform", 0.01, None), None),
    ("10k ±1% normal", 1e4, Tolerance("normal", 0.01, None), None),
    ("10k ±1% σ", 1e4, Tolerance("sigma", 0.01, None), None),
    ("10k ±1% sigma", 1e4, Tolerance("sigma", 0.01, None), None),
    ("10k σ=1%", 1e4, Tolerance("sigma", 0.01, None), None),
    ("0.55 V σ=20 mV", 0.55, Tolerance("sigma", None, 0.02), None),
    ("10k ±1% 50ppm/K", 1e4, Tolerance("uniform", 0.01, None), Tempco(5e-5, None, False)),
    ("10k ±1% ±25ppm/K", 1e4, Tolerance("uniform", 0.01, None), Tempco(2.5e-5, None, True)),
    ("10k -0.1 %/°C", 1e4, None, Tempco(-1e-3, None, False)),
    ("1.2 V ±5 mV -2mV/K", 1.2, Tolerance("uniform", None, 5e-3), Tempco(None, -2e-3, False)),
    ("1 MHz ±20% -3000 ppm/K", 1e6, Tolerance("uniform", 0.2, None), Tempco(-3e-3, None, False)),
])
def test_field_value_syntax(text, nominal, tol, tc):
    unit = {"V": "V", "MHz": "Hz"}.get(text.split()[1] if len(text.split()) > 1 else "", "ohm")
    got = parse_field_value(text, unit)
    assert got[0] == pytest.approx(nominal) and got[1] == tol and got[2] == tc


def test_tempco_syntax_errors():
    with pytest.raises(UnitError, match="temperature coefficient"):
        parse_field_value("1.2 V 2 mA/K", "V")
    with pytest.raises(UnitError, match="unknown distribution"):
        parse_toleranced("10k ±1% gaussian", "ohm")


def test_draws_stay_within_the_limit_and_have_the_stated_spread():
    """uniform: σ = w/√3; normal: σ of N(0, 1/3) truncated at ±1 (≈ 0.3283, the truncated-normal
    variance 1 − 2φ(3)·3/(2Φ(3) − 1) scaled by 1/9), never beyond ±1; σ: unit standard deviation."""
    rng = np.random.default_rng(5)
    u = unit_draw("uniform", rng, 200_000)
    assert np.abs(u).max() <= 1 and u.std() == pytest.approx(1 / np.sqrt(3), rel=0.01)
    z = unit_draw("normal", rng, 200_000)
    phi3 = np.exp(-4.5) / np.sqrt(2 * np.pi)
    from math import erf, sqrt
    big_phi = 0.5 * (1 + erf(3 / sqrt(2)))
    sd = np.sqrt(1 - 2 * 3 * phi3 / (2 * big_phi - 1)) / 3
    assert np.abs(z).max() <= 1.0 and z.std() == pytest.approx(sd, rel=0.01)
    s = unit_draw("sigma", rng, 200_000)
    assert s.std() == pytest.approx(1.0, rel=0.01) and np.abs(s).max() > 3


NONPHYS = """
name: nonphys
source: {name: src, kind: sensor, amplitude: 1 V, r: 1k σ=80%}
stages:
  - {name: div, kind: divider, r_top: 10k ±1%, r_bottom: 10k ±1%}
"""


def test_non_physical_draws_are_redrawn_not_failures():
    """A σ of 80 % draws a negative source resistance in about 11 % of first draws; they are
    drawn again from the same distribution, so no unit is rejected and every value is positive."""
    chain = chain_from(NONPHYS)
    d = draw(chain, 20_000, seed=3)
    r = d.assign[("src", "r")]
    assert (r > 0).all() and d.valid.all()


RT = """
name: rt
temperature: 75 °C
t_nom: 25 °C
source: {name: src, kind: sensor, amplitude: 1 V, r: 0 Ω}
stages:
  - {name: div, kind: divider, r_top: 10k 100ppm/K, r_bottom: 10k {bottom}}
  - {name: meter, kind: load, r_in: inf}
"""


def test_resistor_tempco_is_r0_times_one_plus_tc_dt():
    """R(T) = R0·(1 + α·(T − Tnom)) (any EE handbook, from memory): 10 kΩ at 100 ppm/K, 50 K
    above t_nom, is 10.05 kΩ; the divider 10k/(10k + 10.05k) shows it."""
    chain = chain_from(RT.replace("{bottom}", ""))
    ev = evaluate(chain)
    assert ev.params["div"]["r_top"] == pytest.approx(1e4 * (1 + 100e-6 * 50), rel=1e-12)
    assert ev.params["div"]["r_bottom"] == 1e4
    assert abs(ev.gain()[0, 0]) == pytest.approx(1e4 / (1e4 + 10050.0), rel=1e-9)


def test_ratio_tracks_when_both_parts_share_the_tempco():
    """Both resistors at 100 ppm/K: the ratio, so the divider gain, does not move with temperature."""
    chain = chain_from(RT.replace("{bottom}", "100ppm/K"))
    assert abs(evaluate(chain).gain()[0, 0]) == pytest.approx(0.5, rel=1e-12)
    assert nominal_params(chain)["div"]["r_top"] == 1e4          # stated at t_nom; moved in evaluate


def test_tempco_limit_is_drawn_per_unit():
    chain = chain_from(RT.replace("r_top: 10k 100ppm/K", "r_top: 10k ±100ppm/K").replace("{bottom}", ""))
    d = draw(chain, 4000, seed=1)
    tc = d.inputs["div.r_top.tc"]
    assert np.abs(tc).max() <= 100e-6 and tc.std() == pytest.approx(100e-6 / np.sqrt(3), rel=0.05)
    ev = evaluate(chain, d.params())
    r = ev.params["div"]["r_top"][:, 0]
    np.testing.assert_allclose(r, 1e4 * (1 + tc * 50), rtol=1e-12)


def test_sensor_sensitivity_tempco_moves_the_signal():
    """A pH electrode's Nernst slope is proportional to absolute temperature (2.303·RT/F,
    0.198 mV/(pH·K)): at 25 °C that is 1/298.15 K⁻¹ ≈ 3354 ppm/K of the slope; written on
    the amplitude, the peak at 50 °C is 59.16 mV·(1 + 3354e-6·25) per pH."""
    spec = """
    name: ph
    temperature: {t}
    t_nom: 25 °C
    source: {{name: el, kind: sensor, amplitude: 59.16 mV 3354ppm/K, r: 100M}}
    stages:
      - {{name: meter, kind: load, r_in: inf}}
    """
    b25, b50 = (analyse(chain_from(spec.format(t=t))) for t in ("25 °C", "50 °C"))
    pk = lambda b: next(n.peak_v for n in b.nodes if n.name == "el")  # noqa: E731
    assert pk(b25) == pytest.approx(59.16e-3, rel=1e-12)
    assert pk(b50) == pytest.approx(59.16e-3 * (1 + 3354e-6 * 25), rel=1e-12)
    assert (pk(b50) - pk(b25)) / 25 == pytest.approx(0.198e-3, rel=0.01)   # per pH per kelvin


def test_a_tempco_where_none_makes_sense_is_refused(spec_file):
    from chainplan.errors import SpecError
    from chainplan.spec.loader import load_chain
    path = spec_file("""
    name: bad
    source: {name: src, kind: sensor, amplitude: 1 V}
    stages:
      - {name: adc, kind: adc, bits: 12 5ppm/K, fs_low: 0 V, fs_high: 3 V}
    """)
    with pytest.raises(SpecError):
        load_chain(path)


def test_spice_export_writes_tempco_values_at_the_chain_temperature():
    """The netlist is at the chain's temperature: a 10 kΩ 100 ppm/K resistor 50 K above t_nom
    is written as 10.05 kΩ."""
    from chainplan.render.spice import export
    text = export(chain_from(RT.replace("{bottom}", ""))).text()
    assert "10050" in text and "10000" in text


def test_tracking_group_shares_the_drawn_coefficient():
    """'±25ppm/K tracks rnet' on both divider resistors: each unit draws one coefficient for
    the group, so the divider ratio does not move with temperature in any unit, while
    untracked ±25ppm/K parts drift apart."""
    spec = RT.replace("r_top: 10k 100ppm/K", "r_top: 10k ±25ppm/K{t}").replace("{bottom}", "±25ppm/K{t}")
    tracked = chain_from(spec.replace("{t}", " tracks rnet"))
    d = draw(tracked, 2000, seed=2)
    g = np.abs(evaluate(tracked, d.params()).gain()[:, 0])
    np.testing.assert_allclose(g, 0.5, rtol=1e-12)
    loose = chain_from(spec.replace("{t}", ""))
    d = draw(loose, 2000, seed=2)
    g = np.abs(evaluate(loose, d.params()).gain()[:, 0])
    assert g.std() > 1e-4
    with pytest.raises(UnitError, match="tracks"):
        parse_field_value("10k 25ppm/K tracks rnet", "ohm")
