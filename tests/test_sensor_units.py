"""Sensitivity and sensor units (spec/sensitivity.py, engine/measurand.py) against the
conversions of the trade: a hydrophone's level in dB re 1 V/µPa (Urick's definition of a
level), the Nernst slope ln(10)·kT/q of a pH electrode, a load cell's rated output in mV/V,
a piezo element's charge sensitivity over its capacitance (Q = C·V), a photodiode's
noise-equivalent power (input-referred current noise ÷ responsivity), and an ambient
floor's margin by a hand integral."""
from __future__ import annotations

import json
import math

import pytest

from chainplan.constants import K_BOLTZMANN, Q_ELECTRON
from chainplan.engine.budget import evaluate
from chainplan.engine.measurand import figures, measurand
from chainplan.engine.noise import analyse_noise
from chainplan.spec.sensitivity import parse_sensitivity
from chainplan.spec.units import UnitError
from conftest import REPO, chain_from


def test_hydrophone_level_converts_by_the_definition():
    """L = 20·log10(M / M_ref) (Urick, Principles of Underwater Sound, ch. 3): −190 dB re
    1 V/µPa is 10^(−9.5) V/µPa = 316.2 µV/Pa; a microphone's −45 dB re 1 V/Pa is 5.623 mV/Pa."""
    s = parse_sensitivity("-190 dB re 1 V/µPa", "V")
    assert s.unit == "µPa"
    assert s.value * 1e6 == pytest.approx(316.2278e-6, rel=1e-6)      # V/Pa
    m = parse_sensitivity("−45 dB re 1 V/Pa", "V")
    assert m.unit == "Pa" and m.value == pytest.approx(5.6234e-3, rel=1e-4)
    assert parse_sensitivity("-170 dB re 1 mV/µPa", "V").value == pytest.approx(1e-3 * 10 ** (-170 / 20), rel=1e-12)


def test_nernst_slope_and_its_temperature_coefficient():
    """The Nernst slope is ln(10)·kT/q: 59.16 mV/pH at 25 °C, growing as T (1/298.15 K =
    3354 ppm/K); declared with that coefficient, a chain at 37 °C refers its figures by
    ln(10)·k·310.15 K/q (Bard & Faulkner, Electrochemical Methods, ch. 2, from memory)."""
    slope = lambda t: math.log(10) * K_BOLTZMANN * t / Q_ELECTRON  # noqa: E731
    assert slope(298.15) == pytest.approx(59.16e-3, rel=2e-4)
    c = chain_from("""
        name: t
        temperature: 37 °C
        t_nom: 25 °C
        source: {name: e, kind: sensor, amplitude: 100 mV, r: 1k, sensitivity: 59.16 mV/pH 3354ppm/K}
        stages: [{name: out, kind: load}]
        """)
    m = measurand(c)
    assert m.unit == "pH"
    assert m.sensitivity == pytest.approx(slope(310.15), rel=3e-4)
    absolute = chain_from("""
        name: t
        temperature: 37 °C
        t_nom: 25 °C
        source: {name: e, kind: sensor, amplitude: 100 mV, r: 1k, sensitivity: 59.16 mV/pH 0.1984 mV/pH/K}
        stages: [{name: out, kind: load}]
        """)
    assert measurand(absolute).sensitivity == pytest.approx(59.16e-3 + 12 * 0.1984e-3, rel=1e-9)


def test_load_cell_rated_output_times_the_excitation():
    """A 2 mV/V load cell rated at 50 kg on 10 V gives 20 mV at 50 kg: 0.4 mV/kg (load-cell
    data-sheet practice); a 1 kg signal then reads 1 kg."""
    c = chain_from("""
        name: t
        rails: {vexc: 10 V}
        source: {name: cell, kind: sensor, amplitude: 0.4 mV, r: 350, excitation: vexc,
                 sensitivity: 2 mV/V at 50 kg}
        stages: [{name: out, kind: load}]
        """)
    m = measurand(c)
    assert m.unit == "kg" and m.sensitivity == pytest.approx(0.4e-3, rel=1e-12)
    f = figures(evaluate(c), analyse_noise(evaluate(c)))
    assert f["signal_amplitude"] == pytest.approx(1.0, rel=1e-12)


def test_piezo_charge_sensitivity_over_its_capacitance():
    """A charge source Q across the element's C has the EMF Q/C (Gautschi, Piezoelectric
    Sensorics, ch. 2): 10 pC/g on 1 nF is 10 mV/g."""
    c = chain_from("""
        name: t
        source: {name: acc, kind: sensor, amplitude: 10 mV, r: 1G, c: 1 nF, sensitivity: 10 pC/g}
        stages: [{name: out, kind: load}]
        """)
    assert measurand(c).sensitivity == pytest.approx(10e-3, rel=1e-12)


def test_photodiode_nep_is_the_shot_noise_over_the_responsivity():
    """With only the diode's shot noise √(2qI) (Schottky) the noise-equivalent power is
    √(2qI)/R (definition of NEP; Graeme, Photodiode Amplifiers, ch. 1, from memory):
    1 µA at 0.5 A/W is 1.133 pW/√Hz.  The 1 GΩ feedback resistor's 4kT/R is 5e-5 of it."""
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: pd, kind: current_sensor, amplitude: 1 µA, dc: 1 µA, sensitivity: 0.5 A/W}
        stages:
          - {name: tia, kind: opamp_transimpedance, gbw: 1 THz, a0: 200 dB, r_f: 1G, en: 0 V/√Hz, in: 0 A/√Hz,
             v_neg: vss}
          - {name: out, kind: load}
        analysis: {f_ref: 1 Hz, f_start: 0.1 Hz, f_stop: 10 Hz, points: 50}
        """)
    ev = evaluate(c)
    f = figures(ev, analyse_noise(ev))
    nep = math.sqrt(2 * Q_ELECTRON * 1e-6) / 0.5
    assert f["unit"] == "W"
    assert f["noise_in_density_at_f_ref"] == pytest.approx(nep, rel=2e-4)


def _flat_chain(ambient: str) -> str:
    """A 10 kΩ source (4kTR, 12.87 nV/√Hz at 300 K) at 1 mV/Pa seen by an open load:
    12.87 µPa/√Hz at the sensor, flat."""
    return f"""
        name: t
        temperature: 300 K
        source: {{name: s, kind: sensor, amplitude: 1 mV, r: 10k, sensitivity: 1 mV/Pa}}
        stages: [{{name: out, kind: load}}]
        analysis: {{f_ref: 1 kHz, f_start: 10 Hz, f_stop: 100 kHz, points: 801, noise_band: [100 Hz, 10 kHz]}}
        ambient:
          density: {ambient}
        """


def test_ambient_margin_by_hand():
    """Flat chain noise e = √(4kTR)/S against (a) a flat floor 10× e: +20 dB over each band;
    (b) a floor falling as 1/f (−20 dB/decade of density) from d0 at 100 Hz to 1 kHz:
    ∫ d² df = d0²·100²·(1/100 − 1/1000) = 90·d0², against e²·900 Hz (by hand)."""
    e = math.sqrt(4 * K_BOLTZMANN * 300 * 10e3) / 1e-3          # Pa/√Hz
    c = chain_from(_flat_chain(f"[[10 Hz, {10 * e!r} Pa/√Hz], [1 kHz, {10 * e!r} Pa/√Hz], "
                               f"[100 kHz, {10 * e!r} Pa/√Hz]]"))
    ev = evaluate(c)
    bands = figures(ev, analyse_noise(ev))["ambient"]
    assert [b["band_hz"] for b in bands] == [[100.0, 1000.0], [1000.0, 1e4]]
    for b in bands:
        assert b["margin_db"] == pytest.approx(20.0, abs=1e-6)
    d0 = 1e-3
    c = chain_from(_flat_chain(f"[[100 Hz, {d0} Pa/√Hz], [1 kHz, {d0 / 10} Pa/√Hz]]"))
    ev = evaluate(c)
    (b,) = figures(ev, analyse_noise(ev))["ambient"]
    hand = 10 * math.log10(90 * d0 ** 2 / (e ** 2 * 900))
    assert b["margin_db"] == pytest.approx(hand, abs=0.02)
    # the spectrum-level form reads the same floor: 20·log10(d0 / 1 Pa) dB re 1 Pa²/Hz
    lv = 20 * math.log10(d0)
    c2 = chain_from(_flat_chain(f"[[100 Hz, {lv} dB re 1 Pa²/Hz], [1 kHz, {lv - 20} dB re 1 Pa²/Hz]]"))
    ev2 = evaluate(c2)
    assert figures(ev2, analyse_noise(ev2))["ambient"][0]["margin_db"] == pytest.approx(b["margin_db"], abs=1e-9)


def test_dc_error_in_ph_from_the_source_sensitivity():
    """1 nA into a 250 MΩ electrode is 0.25 V, 4.23 pH at 59.16 mV/pH (the trade's case of
    tests/test_dcerror.py, now with the sensitivity on the source); a limit in pH reads it."""
    from chainplan.engine.dcerror import analyse_dc_errors
    from chainplan.studies.requirements import check_chain
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V}
        source: {name: e, kind: sensor, amplitude: 100 mV, r: 250M, sensitivity: 59.16 mV/pH}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 1 MHz, a0: 160 dB, v_neg: vss, ib: 1 nA}
          - {name: out, kind: load}
        requirements:
          - max_offset_error: 5 pH
        """)
    r = analyse_dc_errors(c)
    (ib,) = [x for x in r.contributors if "bias" in x.name]
    assert r.sensor_unit == "pH"
    assert r.in_unit(abs(ib.offset_v), "pH") == pytest.approx(0.25 / 59.16e-3, rel=1e-6)
    (res,) = check_chain(c)
    assert res.unit == "pH" and bool(res.passed[0])


def test_demo_hydrophone_json_carries_the_measurand(cli, monkeypatch):
    monkeypatch.chdir(REPO)
    rc, out, _ = cli("budget", "chains/hydrophone_buffered.yaml", "--json")
    m = json.loads(out)["measurand"]
    assert m["unit"] == "µPa" and m["level_form"]
    assert m["sensitivity"] == pytest.approx(10 ** (-190 / 20), rel=1e-9)
    # the input-referred noise in µPa is the volts figure over 316 µV/Pa·1e-6 Pa/µPa
    assert m["noise_in_rms"] == pytest.approx(json.loads(out)["noise_in_vrms"] / 10 ** (-9.5), rel=1e-9)
    assert all(b["margin_db"] > 0 for b in m["ambient"])


@pytest.mark.parametrize("text, words", [
    ("12 mV", "no '/'"),
    ("12 mA/Pa", "amperes per unit given for a sensor"),
    ("12 mV/", "unit after '/' is missing"),
    ("-190 dB 1 V/µPa", "dB re"),
    ("2 mV at 50 kg", "rated output per volt"),
    ("12 mV/Pa 1 mV/kPa/K", "per 'kPa'"),
    ("12 qV/Pa", "not a known SI prefix"),
    ("0 mV/Pa", "not zero"),
    (12, "not a bare number"),
])
def test_sensitivity_errors_are_clear(text, words):
    with pytest.raises(UnitError) as exc:
        parse_sensitivity(text, "V")
    assert words in str(exc.value)


@pytest.mark.parametrize("source, extra, words, where", [
    ("{name: e, kind: sensor, amplitude: 1 mV, sensitivity: 12 mV/Pa}\naccuracy: {sensitivity: 12 mV/Pa}", "",
     "declared on the source already", ":3: accuracy.sensitivity"),
    ("{name: e, kind: current_sensor, amplitude: 1 µA, sensitivity: 10 pC/g}", "", "for a voltage source",
     ":2: e.sensitivity"),
    ("{name: e, kind: sensor, amplitude: 1 mV, sensitivity: 2 mV/V at 5 kg}", "", "give the source's 'excitation'",
     ":2: e.sensitivity"),
    ("{name: e, kind: sensor, amplitude: 1 mV, sensitivity: 10 pC/g}", "", "give the source's 'c'",
     ":2: e.sensitivity"),
    ("{name: e, kind: sensor, amplitude: 1 mV}", "ambient: {density: [[1 Hz, 1 Pa/√Hz], [2 Hz, 1 Pa/√Hz]]}",
     "declare the source's 'sensitivity'", ":4: ambient"),
    ("{name: e, kind: sensor, amplitude: 1 mV, sensitivity: 1 mV/Pa}",
     "ambient: {density: [[1 Hz, 1 mPa/√Hz], [2 Hz, 1 Pa/√Hz]]}", "not a density in the measurand's unit",
     ":4: ambient.density[0]"),
    ("{name: e, kind: sensor, amplitude: 1 mV, sensitivity: 1 mV/Pa}",
     "ambient: {density: [[2 Hz, 1 Pa/√Hz], [1 Hz, 1 Pa/√Hz]]}", "must rise", ":4: ambient.density[1]"),
])
def test_spec_errors_exit_2_naming_the_field(cli, spec_file, source, extra, words, where):
    path = spec_file(f"name: t\nsource: {source}\nstages: [{{name: out, kind: load}}]\n{extra}\n")
    rc, out, err = cli("budget", path)
    assert rc == 2, err
    assert words in err and "Traceback" not in err
    assert where in err                         # file:line: field


def test_hydrophone_noise_table_in_micropascal(cli, monkeypatch):
    monkeypatch.chdir(REPO)
    rc, out, _ = cli("noise", "chains/hydrophone_buffered.yaml")
    assert rc == 0
    assert "at the sensor" in out and "µPa/√Hz" in out and "below the ambient" in out
