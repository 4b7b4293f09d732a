"""The charge amplifier and virtual-ground interfaces: ngspice on a hand-written netlist
(a piezo as an EMF in series with its capacitance Cs, a cable, the op-amp macro with
CF ‖ RF) for the AC gain and the output noise within 0.1 %, the charge transfer
against the textbook charge-amplifier result (Gautschi, *Piezoelectric Sensorics*,
charge amplifier chapter, from memory), and the budget, requirements, advice and
placement leaving the virtual-ground interfaces alone."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.engine.budget import analyse, evaluate
from chainplan.engine.noise import density_at
from chainplan.render.spice import export
from chainplan.stages.base import K_BOLTZMANN
from chainplan.stages.opamp import inv_open_loop
from conftest import REPO, chain_from
from helpers_ngspice import needs_ngspice, run_ac, run_noise, run_op

CS, RS, CC, RC, CIN, CF, RF = 1e-9, 10e9, 200e-12, 1.0, 10e-12, 100e-12, 1e9
A0_DB, GBW, RO, EN, IN = 100.0, 5e6, 30.0, 5e-9, 3e-15
QAMP = """
name: piezo
temperature: 300 K
rails: {vdd: 3 V, vmid: 1.5 V}
source: {name: pz, kind: sensor, amplitude: 10 mV, r: 10G, c: 1 nF}
stages:
  - {name: coax, kind: cable, length: 2 m, c_per_m: 100 pF/m, r_per_m: 0.5 Ω/m}
  - {name: qa, kind: charge_amplifier, c_f: 100 pF, r_f: 1G, ref: vmid, gbw: 5 MHz, a0: 100 dB,
     r_out: 30, c_in: 10 pF, en: 5 nV/√Hz, in: 3 fA/√Hz, swing_low: 0 V, swing_high: 0 V, v_pos: 3 V}
  - {name: end, kind: load, r_in: 10k, ref: 1 V}
analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 10 MHz, points: 201}
"""
A0 = 10 ** (A0_DB / 20)
_G = 1e-3


def _hand_netlist(noise: bool) -> str:
    """The circuit by hand: the piezo's EMF Vs behind Cs ‖ Rs (its leakage), the cable's
    series R and shunt C, the − input's c_in, CF ‖ RF, the single-pole op-amp
    A0/(1 + s·A0/(2π·GBW)) as a VCCS into G ‖ C read by a VCVS, Ro, the load; en and in−
    as noise sources made of resistors (ngspice manual, from memory)."""
    lines = [
        "Vref ref 0 DC 1.5", "Vl lref 0 DC 1",
        "Vs src 0 DC 0 AC 1", f"Rs src el {RS!r}", f"Cs src el {CS!r}",
        f"Rc el in {RC!r}", f"Cc in 0 {CC!r}", f"Cin in 0 {CIN!r}",
        f"Rf out in {RF!r}", f"Cf out in {CF!r}",
        f"Gp ref pole plus in {A0 * _G!r}", f"Gq pole ref pole ref {_G!r}",
        f"Cp pole ref {_G / (2 * math.pi * GBW / A0)!r}",
        "Eb core ref pole ref 1", f"Go core out core out {1 / RO!r}",
        "Rl out lref 10k",
    ]
    if noise:
        k4t = 4 * K_BOLTZMANN * 300.0
        lines += [f"Ren ens 0 {EN ** 2 / k4t!r}", "Een plus ref ens 0 1",
                  "Vs1 ins 0 DC 0", f"Rin ins 0 {k4t / IN ** 2!r}", "Fin 0 in Vs1 1",
                  ".options temp=26.85 tnom=26.85"]
    else:
        lines += ["Eplus plus ref ref ref 0"]
    return "\n".join(lines)


@needs_ngspice
def test_ac_gain_dc_and_output_noise_agree_with_ngspice():
    """ngspice (``ngspice -b``) on the hand netlist: Vout/Vs within 0.1 % in magnitude
    (and 1 mrad) from below the RF·CF corner through the loop's crossover; the output
    noise density within 0.1 % (the piezo's leakage, the cable's R, RF, en through the
    noise gain 1 + Ct/CF, in−, the load); DC within 1 mV."""
    chain = chain_from(QAMP)
    freqs = np.array([0.5, 10.0, 1e3, 3e4, 3e5, 1e6])
    ev = evaluate(chain, f_hz=np.concatenate(([1e3], freqs)))
    ours = ev.gain("qa")[0, 1:]
    spice = run_ac(_hand_netlist(False), "out", freqs)
    np.testing.assert_allclose(np.abs(ours), np.abs(spice), rtol=1e-3)
    assert np.all(np.abs(np.angle(spice / ours)) < 1e-3)
    # mid-band: −Cs/CF (the sensor's charge Cs·Vs integrated on CF)
    assert abs(ours[2]) == pytest.approx(CS / CF, rel=0.01)

    op = run_op(_hand_netlist(False))
    ev0 = evaluate(chain)
    assert abs(op["out"] - float(np.ravel(ev0.dc.node_v["qa"])[0])) < 1e-3

    total, _, _ = density_at(ev0, freqs)
    onoise, _ = run_noise(_hand_netlist(True), "out", "Vs", freqs)
    np.testing.assert_allclose(total[0], onoise, rtol=1e-3)


@needs_ngspice
def test_exported_netlist_gain_and_noise_agree():
    """chainplan's own SPICE export of the charge amplifier (same circuit) against its budget:
    gain and output noise within 0.1 % at 1 kHz and 100 kHz."""
    chain = chain_from(QAMP)
    freqs = np.array([1e3, 1e5])
    ev = evaluate(chain, f_hz=np.concatenate(([1e3], freqs)))
    nl = export(chain)
    spice = run_ac(nl.circuit_text(), nl.output, freqs)
    np.testing.assert_allclose(np.abs(ev.gain()[0, 1:]), np.abs(spice), rtol=1e-3)
    total, _, _ = density_at(evaluate(chain), freqs)
    onoise, _ = run_noise(nl.circuit_text(), nl.output, nl.source, freqs)
    np.testing.assert_allclose(total[0], onoise, rtol=1e-3)


def _textbook_chain(r_f="inf", a0="100 dB", gbw="5 MHz"):
    """Ideal parts around the op-amp's finite A(s): no leakage, no cable R, Ro = 0, no load."""
    return chain_from(QAMP.replace("r: 10G", "r: inf").replace("r_per_m: 0.5 Ω/m", "r_per_m: 0 Ω/m")
                      .replace("r_out: 30", "r_out: 0").replace("r_f: 1G", f"r_f: {r_f}")
                      .replace("a0: 100 dB", f"a0: {a0}").replace("gbw: 5 MHz", f"gbw: {gbw}")
                      .replace("  - {name: end, kind: load, r_in: 10k, ref: 1 V}\n", ""))


@pytest.mark.parametrize("a0,gbw", [("100 dB", "5 MHz"), ("40 dB", "50 kHz")])
def test_charge_transfer_is_the_textbook_charge_amplifier_form(a0, gbw):
    """The share of the piezo's charge that reaches CF, from the engine's own figures, is
    (1 + A)·CF/(Cs + Cc + Cin + (1 + A)·CF) with the op-amp's A(jω), and the output is
    Vout = −Q·A/((1 + A)·CF + Ct), Q = Cs·Vs, Ct = Cs + Cc + Cin (Gautschi, *Piezoelectric
    Sensorics*, charge amplifier chapter, from memory) — to 1e-9; a poor op-amp (40 dB,
    50 kHz) makes the transfer visibly less than 1."""
    chain = _textbook_chain(a0=a0, gbw=gbw)
    f = np.array([10.0, 1e3, 1e4, 1e5])
    ev = evaluate(chain, f_hz=np.concatenate(([1e3], f)))
    s = 2j * np.pi * f
    a = 1.0 / inv_open_loop(chain.stage("qa").params, s)
    ct = CS + CC + CIN
    eta = (1 + a) * CF / (ct + (1 + a) * CF)
    np.testing.assert_allclose(ev.input_transfer("qa")[0, 1:], eta, rtol=1e-9)
    np.testing.assert_allclose(ev.input_transfer("coax")[0, 1:], eta, rtol=1e-9)   # the cable is in the path
    np.testing.assert_allclose(ev.gain("qa")[0, 1:], -CS * a / ((1 + a) * CF + ct), rtol=1e-9)
    if a0 == "40 dB":
        assert abs(eta[1]) < 0.9                       # 100·100 pF against 1.21 nF at 1 kHz


def test_noise_gain_is_one_plus_ct_over_cf():
    """Mid-band, A → ∞: the op-amp's en reaches the output times 1 + Ct/CF (Ct = Cs + Cc + Cin;
    Gautschi, charge amplifier noise, from memory)."""
    chain = chain_from(QAMP.replace("a0: 100 dB", "a0: 200 dB").replace("gbw: 5 MHz", "gbw: 1e12 Hz")
                       .replace("in: 3 fA/√Hz", "in: 0 A/√Hz").replace("r: 10G", "r: inf")
                       .replace("r_f: 1G", "r_f: inf").replace("r_per_m: 0.5 Ω/m", "r_per_m: 0 Ω/m")
                       .replace("r_in: 10k", "r_in: inf"))
    total, _, gens = density_at(evaluate(chain), np.array([1e3]))
    assert float(total[0, 0]) == pytest.approx(EN * (1 + (CS + CC + CIN) / CF), rel=1e-6)


def test_budget_reports_a_charge_transfer_not_a_loss(cli, tmp_path):
    """The demo chain: both interfaces in the charge path (piezo → cable → charge amplifier)
    read as a charge transfer near 100 % in the table and in JSON, with no loading loss;
    the stage gain is −1/CF in mV/pC; the loading requirement leaves them out with a note."""
    path = REPO / "chains" / "piezo_charge_amp.yaml"
    rc, out, _ = cli("budget", str(path), "--json")
    assert rc == 0
    d = json.loads(out)
    rows = {r["to"]: r for r in d["interfaces"]}
    for name in ("coax", "qamp"):
        assert rows[name]["input_mode"] == "charge" and rows[name]["loading_loss_db"] is None
        assert 0.999 < rows[name]["transfer"] <= 1.0 and rows[name]["transfer_db"] < 0
    assert rows["antialias"]["input_mode"] == "voltage" and rows["antialias"]["transfer"] is None
    qamp = next(s for s in d["stages"] if s["name"] == "qamp")
    assert qamp["gain_unit"] == "V/C" and qamp["gain"] == pytest.approx(1 / 100e-12, rel=0.01)
    req = next(r for r in d["requirements"] if r["kind"] == "max_loading_loss_db")
    assert req["passed"] and "coax" in req["note"] and "qamp" in req["note"]
    rc, text, _ = cli("budget", str(path))
    assert "charge transfer" in text and "10.0 mV/pC" in text


def test_naming_a_virtual_ground_in_a_loading_requirement_is_refused(cli, spec_file):
    text = QAMP + "requirements:\n  - max_loading_loss: 1 dB\n    interfaces: [qa]\n"
    rc, _, err = cli("budget", spec_file(text))
    assert rc == 2 and "virtual ground" in err and "interfaces" in err


def test_advisor_and_placement_leave_the_charge_path_alone():
    """No buffer is advised or placed in front of the charge amplifier or its cable, even
    though a voltage reading of those interfaces would show tens of dB 'lost'."""
    from chainplan.placement.advisor import advise
    from chainplan.placement.optimiser import Targets, optimise
    from chainplan.spec.parts import load_parts
    chain = chain_from(QAMP)
    load_parts(chain, REPO / "chains" / "parts" / "followers.yaml")
    ev = evaluate(chain)
    assert float(ev.interface_loss_db("coax")[0, 0]) > 20      # what a voltage reading would say
    a = advise(chain)
    assert [i.reader for i in a.interfaces] == ["end"]           # only the amplifier's output is advised on
    assert {r for _, r, _, _ in a.virtual_ground} == {"coax", "qa"}
    plan = optimise(chain, Targets(max_loss_db=0.1), time_limit=None)
    assert not {p.reader for p in plan.placements} & {"coax", "qa"}


def test_no_bleed_resistor_is_said(cli, spec_file):
    """Without r_f the feedback has no DC path: the budget says the DC level is undefined and
    taken at the reset level (the output at ref); with an ideal (leak-free) piezo as well, the
    input floats and the error names the missing bleed."""
    chain = chain_from(QAMP.replace("r_f: 1G", "r_f: inf"))
    b = analyse(chain)
    notes = [v for k, v in b.extra_summary if k == "note"]
    assert any("no r_f" in n and "undefined" in n for n in notes)
    # ref behind Ro = 30 Ω into the 10 kΩ load to 1 V: a divider (Ohm's law)
    assert float(np.ravel(b.ev.dc.node_v["qa"])[0]) == pytest.approx(1 + 0.5 * 10e3 / 10030, abs=1e-9)
    rc, out, _ = cli("budget", spec_file(QAMP.replace("r_f: 1G", "r_f: inf")), "--json")
    assert any("undefined" in n for n in json.loads(out)["model_notes"])
    rc, _, err = cli("budget", spec_file(QAMP.replace("r_f: 1G", "r_f: inf").replace("r: 10G", "r: inf")))
    assert rc == 2 and "no DC path" in err and "r_f" in err


def test_loop_crosses_at_gbw_over_the_noise_gain():
    """The loop gain of a charge amplifier is A·CF/(CF + Ct) (β = CF/(CF + Ct), the capacitive
    divider at the − input): for a single-pole op-amp it crosses 1 at GBW·CF/(CF + Ct) with a
    phase margin just under 90° (Franco, *Design with Operational Amplifiers*, stability
    chapter, from memory); engine/loop.py finds both."""
    from chainplan.engine.loop import analyse_loops
    ev = evaluate(_textbook_chain())
    res = next(r for r in analyse_loops(ev) if r.stage == "qa")
    beta = CF / (CF + CS + CC + CIN)
    assert float(res.f_cross_hz[0]) == pytest.approx(GBW * beta, rel=0.01)
    # the dominant pole at GBW/A0 lies far below the crossover: PM = 90° − atan(f_p/f_c)
    assert float(res.pm_deg[0]) == pytest.approx(90 - math.degrees(math.atan(GBW / A0 / (GBW * beta))), abs=0.2)


def test_a_series_resistor_in_front_of_a_virtual_ground_keeps_its_voltage_loss():
    """A series resistor into a transimpedance stage is an inverting amplifier's input
    resistor: it turns the voltage into the current, so the sensor → resistor interface keeps
    its voltage divider loss 20·log10((Rs + R)/R) (the TIA's input ≈ 0 Ω; Ohm's law), and only
    the resistor → TIA interface is a current transfer, referred to the short-circuit current
    at the resistor's output, ≈ 100 %."""
    chain = chain_from("""
        name: inv
        temperature: 300 K
        rails: {vdd: 3 V}
        source: {name: s, kind: sensor, amplitude: 10 mV, dc: 1.5 V, r: 10k}
        stages:
          - {name: rin, kind: series_r, r: 10k}
          - {name: tia, kind: opamp_transimpedance, r_f: 100k, gbw: 10 MHz, a0: 140 dB, ref: 1.5 V,
             v_pos: 3 V, swing_low: 0 V, swing_high: 0 V}
        analysis: {f_ref: 100 Hz, f_start: 10 Hz, f_stop: 1 MHz, points: 61}
        """)
    b = analyse(chain)
    rows = {r.to: r for r in b.interfaces}
    assert rows["rin"].loading and rows["rin"].loss_db == pytest.approx(20 * math.log10(2), abs=1e-3)
    assert rows["tia"].mode == "current" and rows["tia"].transfer == pytest.approx(1.0, abs=1e-5)
