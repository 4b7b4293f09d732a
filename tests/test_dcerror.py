"""The DC error budget (engine/dcerror.py) against ngspice with the op-amp macro's
offset source and bias-current sources, the pH-electrode case of the trade, the
calibration rules, and the spec's accuracy section and error requirements."""
from __future__ import annotations

import json
import textwrap

import pytest

from chainplan.engine.dcerror import analyse_dc_errors
from chainplan.studies.requirements import check_chain
from conftest import REPO, chain_from
from helpers_ngspice import needs_ngspice, run_op

RS, RF, RG = 100e3, 90e3, 10e3
VOS, IB, IOS = 1e-3, 10e-9, 2e-9


def _amp_chain(kind):
    return chain_from(f"""
        name: t
        rails: {{vdd: 5 V, vss: -5 V}}
        source: {{name: s, kind: sensor, amplitude: 10 mV, r: {RS}}}
        stages:
          - {{name: amp, kind: {kind}, gbw: 1 MHz, a0: 160 dB, r_f: {RF}, r_g: {RG}, v_neg: vss,
              vos: {VOS}, ib: {IB}, ios: {IOS}}}
          - {{name: out, kind: load}}
        """)


def _by_name(res):
    return {c.name.split(": ", 1)[1]: c for c in res.contributors}


def _spice(kind, vos=0.0, i_p=0.0, i_n=0.0):
    """The op-amp macro: a VCVS of gain 1e8 (160 dB), the offset as a source in series with
    the + input (V+ raised by vos), the bias currents as current sources drawn from each pin."""
    if kind == "opamp_noninverting":
        net = f"""Vs src 0 dc 0
Rs src inp {RS}
Ip inp 0 dc {i_p}
Vos pint inp dc {vos}
E1 out 0 pint inn 1e8
Rf out inn {RF}
Rg inn 0 {RG}
In inn 0 dc {i_n}"""
    else:
        net = f"""Vs src 0 dc 0
Rs src a {RS}
Rg a inn {RG}
Vos pint 0 dc {vos}
Ip pint 0 dc {i_p}
E1 out 0 pint inn 1e8
Rf out inn {RF}
In inn 0 dc {i_n}"""
    return run_op(net)["out"]


@needs_ngspice
@pytest.mark.parametrize("kind", ["opamp_noninverting", "opamp_inverting"])
def test_offset_and_bias_current_errors_against_ngspice(kind):
    c = _by_name(analyse_dc_errors(_amp_chain(kind)))
    assert c["input offset voltage"].offset_v == pytest.approx(_spice(kind, vos=VOS), rel=1e-5)
    assert c["input bias current"].offset_v == pytest.approx(_spice(kind, i_p=IB, i_n=IB), rel=1e-5)
    assert c["input offset current"].offset_v == pytest.approx(_spice(kind, i_p=IOS / 2, i_n=-IOS / 2), rel=1e-5)


def test_franco_static_limitations_noninverting():
    """Eo = (1 + RF/RG)·[Vos + (Rp − Rs)·IB − (Rp + Rs)·IOS/2] (Franco, static limitations, from memory)."""
    c = _by_name(analyse_dc_errors(_amp_chain("opamp_noninverting")))
    g, rp = 1 + RF / RG, RF * RG / (RF + RG)
    assert abs(c["input offset voltage"].offset_v) == pytest.approx(g * VOS, rel=1e-6)
    assert abs(c["input bias current"].offset_v) == pytest.approx(g * abs(rp - RS) * IB, rel=1e-6)
    assert abs(c["input offset current"].offset_v) == pytest.approx(g * (rp + RS) * IOS / 2, rel=1e-6)


PH = """
name: ph
rails: {vdd: 3.3 V, vref: 1.2 V}
source: {name: e, kind: sensor, amplitude: 100 mV, dc: vref, r: 250M}
stages:
  - {name: buf, kind: opamp_follower, gbw: 1 MHz, a0: 200 dB, ib: 1 nA}
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: 2.4 V}
accuracy:
  sensitivity: 59.16 mV/pH
"""


def test_ph_electrode_one_nanoampere_is_four_ph():
    """1 nA into a 250 MΩ electrode: 0.25 V at the follower's input, about 4.2 pH at the
    Nernst slope of 59.16 mV/pH at 25 °C (a fact of the trade)."""
    r = analyse_dc_errors(chain_from(PH))
    ib = _by_name(r)["input bias current"]
    assert abs(ib.offset_v) == pytest.approx(0.25, rel=1e-6)
    assert r.in_unit(abs(ib.offset_v), "input") == pytest.approx(0.25, rel=1e-6)
    assert r.in_unit(abs(ib.offset_v), "pH") == pytest.approx(0.25 / 59.16e-3, rel=1e-6)
    assert r.in_unit(abs(ib.offset_v), "LSB") == pytest.approx(0.25 / (2.4 / 4096), rel=1e-6)
    assert r.in_unit(abs(ib.offset_v), "%") == pytest.approx(0.25 / 2.4, rel=1e-6)


def test_bias_current_doubles_per_ten_kelvin_over_the_range():
    r = analyse_dc_errors(chain_from(PH + "  temperature: [25 °C, 45 °C]\n"))
    ib = _by_name(r)["input bias current"]
    assert abs(ib.drift_offset_v) == pytest.approx(3 * 0.25, rel=1e-6)   # 4 nA at 45 °C, 3 nA more


def test_calibration_removes_offset_then_gain_never_drift_or_inl():
    base = chain_from(PH.replace("ib: 1 nA", "ib: 1 nA, ib_doubling: inf, vos_drift: 10 µV/K").replace(
        "fs_high: 2.4 V}", "fs_high: 2.4 V, gain_error: 1 %, inl: 2}") + "  temperature: [0 °C, 50 °C]\n")
    out = {}
    for cal in ("none", "one_point", "two_point"):
        base.extra["accuracy"] = __import__("dataclasses").replace(base.extra["accuracy"], calibration=cal)
        r = analyse_dc_errors(base)
        out[cal] = {w: r.total(w) for w in ("offset", "gain", "drift", "total")}
    lsb = 2.4 / 4096
    assert out["none"]["offset"] == pytest.approx(0.25 + 2 * lsb + 0.01 * 1.2, rel=1e-6)
    assert out["one_point"]["offset"] == pytest.approx(2 * lsb, rel=1e-6)         # INL stays
    assert out["one_point"]["gain"] == pytest.approx(0.01 * 0.1, rel=1e-6)        # 1 % of the 100 mV span
    assert out["two_point"]["gain"] == 0.0
    drift = 10e-6 * 25
    for cal in out:
        assert out[cal]["drift"] == pytest.approx(drift, rel=1e-6)
    assert out["two_point"]["total"] == pytest.approx(drift + 2 * lsb, rel=1e-6)


def test_part_tolerance_is_a_gain_error():
    """RF ±1 % in a gain of 10: the gain moves by 0.9 % (∂G/∂RF·ΔRF = 0.9·1 %)."""
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: s, kind: sensor, amplitude: 10 mV}
        stages:
          - {name: amp, kind: opamp_noninverting, gbw: 1 MHz, a0: 200 dB, r_f: 90k ±1%, r_g: 10k, v_neg: vss}
          - {name: out, kind: load}
        accuracy: {calibration: none}
        """)
    r = analyse_dc_errors(c)
    tol = _by_name(r)["r_f tolerance"]
    assert tol.offset_v == 0.0
    assert r.in_unit(abs(tol.gain_v), "%", "gain") == pytest.approx(0.9 * 0.01 / 1.0, rel=1e-6)


def test_worst_case_is_the_linear_sum_and_rss_the_root_sum_of_squares():
    r = analyse_dc_errors(_amp_chain("opamp_noninverting"))
    parts = [abs(c.offset_v) for c in r.contributors]
    assert r.total("offset") == pytest.approx(sum(parts))
    assert r.total("offset", "rss") == pytest.approx(sum(x * x for x in parts) ** 0.5)


DEMO = REPO / "chains" / "ph_dosing_precision.yaml"


def test_demo_fails_before_calibration_and_passes_after(cli):
    res = {r.name: r for r in check_chain(__import__("chainplan").load(str(DEMO)))}
    assert bool(res["max_total_error"].passed[0])
    rc, out, _ = cli("accuracy", str(DEMO), "--calibration", "none")
    assert rc == 1 and "max_total_error" in out and "FAILED" in out
    rc, out, _ = cli("accuracy", str(DEMO))
    assert rc == 0 and "buffer: input bias current" in out
    rc, out, _ = cli("accuracy", str(DEMO), "--json")
    d = json.loads(out)
    assert d["sensor_unit"] == "pH" and d["calibration"] == "two_point"
    assert d["contributors"][0]["name"] == "buffer: input bias current"


@pytest.mark.parametrize("snippet, field", [
    ("accuracy: {calibration: three_point}", "accuracy.calibration"),
    ("accuracy: {sensitivity: 59 mV}", "accuracy.sensitivity"),
    ("accuracy: {leakage: {nowhere: 1 pA}}", "accuracy.leakage.nowhere"),
    ("accuracy: {temperature: [50 °C, 0 °C]}", "accuracy.temperature"),
    ("requirements: [{max_total_error: 3 furlongs}]", "requirements[0].max_total_error"),
    ("requirements: [{max_drift: 1 mV, rule: mean}]", "requirements[0].rule"),
])
def test_bad_accuracy_input_names_the_field(snippet, field):
    from chainplan.errors import SpecError
    text = textwrap.dedent("""
        name: t
        rails: {vdd: 5 V}
        source: {name: s, kind: sensor, amplitude: 10 mV}
        stages:
          - {name: out, kind: load}
        """) + snippet + "\n"
    with pytest.raises(SpecError) as e:
        chain_from(text)
    assert e.value.field == field
