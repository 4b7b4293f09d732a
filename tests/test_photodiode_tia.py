"""Current-output sensors and the op-amp transimpedance stage: the textbook limits
(Graeme, *Photodiode Amplifiers*, from memory), ngspice on a hand-written netlist
(AC, DC and noise over frequency, through the noise-peaking region), the
exported netlist, the budget's transimpedance units, and bad input."""
from __future__ import annotations

import math

import numpy as np
import pytest

from chainplan.engine.budget import analyse, evaluate
from chainplan.engine.noise import density_at
from chainplan.render.spice import export
from chainplan.stages import REGISTRY
from chainplan.stages.base import K_BOLTZMANN, Q_ELECTRON
from conftest import REPO, chain_from
from helpers_ngspice import needs_ngspice, run_ac, run_noise, run_op

RF, CF, CD, RSH, A0_DB, GBW = 100e3, 2e-12, 50e-12, 1e9, 100.0, 10e6
TIA = f"""
name: pd
temperature: 300 K
rails: {{vmid: 1.5 V}}
source: {{name: pd, kind: current_sensor, amplitude: 1 µA, dc: 300 nA, r: 1G, c: 50 pF}}
stages:
  - {{name: tia, kind: opamp_transimpedance, gbw: 10 MHz, a0: 100 dB, r_f: 100k, c_f: 2 pF, ref: vmid,
      r_out: 30, c_in: 4 pF, en: 8 nV/√Hz, in: 20 fA/√Hz, swing_low: 0 V, swing_high: 0 V, v_pos: 3 V}}
  - {{name: end, kind: load, r_in: 10k, ref: 1 V}}
analysis: {{f_ref: 1 kHz, f_start: 10 Hz, f_stop: 10 MHz, points: 201}}
"""

#: The same circuit by hand: Norton source, RF ‖ CF, the single-pole op-amp
#: A(s) = A0/(1 + s·A0/(2π·GBW)) as a VCCS into G ‖ C read by a VCVS, Ro, the load;
#: en and in− as noise sources made of resistors (ngspice manual, from memory).
A0 = 10 ** (A0_DB / 20)
T = 300.0
_G = 1e-3


def _hand_netlist(noise: bool) -> str:
    en, i_n = 8e-9, 20e-15
    lines = [
        "Vref ref 0 DC 1.5", "Vl lref 0 DC 1",
        "Ipd 0 in DC 3e-7 AC 1",
        f"Rsh in 0 {RSH!r}", f"Cd in 0 {CD!r}", "Cin in 0 4e-12",
        f"Rf out in {RF!r}", f"Cf out in {CF!r}",
        f"Gp ref pole plus in {A0 * _G!r}", f"Gq pole ref pole ref {_G!r}",
        f"Cp pole ref {_G / (2 * math.pi * GBW / A0)!r}",
        "Eb core ref pole ref 1", "Go core out core out 0.0333333333333333333",
        "Rl out lref 10k",
    ]
    if noise:
        k4t = 4 * K_BOLTZMANN * T
        lines += [f"Ren ens 0 {en ** 2 / k4t!r}", "Een plus ref ens 0 1",
                  "Vs1 ins 0 DC 0", f"Rin ins 0 {k4t / i_n ** 2!r}", "Fin 0 in Vs1 1",
                  "Vs2 shs 0 DC 0", f"Rsht shs 0 {k4t / (2 * Q_ELECTRON * 3e-7)!r}", "Fsh 0 in Vs2 1",
                  ".options temp=26.85 tnom=26.85"]
    else:
        lines += ["Eplus plus ref ref ref 0"]
    return "\n".join(lines)


def _dc(ev, node) -> float:
    return float(np.ravel(ev.dc.node_v[node])[0])


def _ideal(a0="200 dB", gbw="1e15 Hz", c_f="2 pF"):
    return chain_from(TIA.replace("a0: 100 dB", f"a0: {a0}").replace("gbw: 10 MHz", f"gbw: {gbw}")
                      .replace("c_f: 2 pF", f"c_f: {c_f}").replace("r_out: 30", "r_out: 0")
                      .replace("c_in: 4 pF", "c_in: 0 F"))


def test_ideal_transimpedance_is_minus_rf_with_the_rf_cf_pole():
    """Vout/Iin → −RF ‖ 1/(sCF): −RF well below 1/(2π·RF·CF), and −RF/(1 + j) at the
    pole (Graeme, *Photodiode Amplifiers*, ch. 2, from memory)."""
    fp = 1 / (2 * math.pi * RF * CF)
    ev = evaluate(_ideal(), f_hz=np.array([1.0, 10.0, fp]))
    z = ev.gain("tia")[0] / (ev.ac.node_h["pd"][0] * ev.ac.y_in["tia"][0])   # V_out / I_in
    assert z[0] == pytest.approx(-RF, rel=1e-5)
    assert z[2] == pytest.approx(-RF / (1 + 1j), rel=1e-6)
    np.testing.assert_allclose(z, -1 / (1 / RF + 2j * np.pi * ev.f_hz * CF), rtol=1e-6)


def test_closed_loop_bandwidth_with_finite_gbw():
    """Without CF the photodiode capacitance and the op-amp's GBW set a second-order
    response whose −3 dB point is near √(GBW/(2π·RF·C_total)) (Graeme, ch. 2, from memory);
    chainplan's exact figure lies within 30 % of that estimate and far below GBW."""
    b = analyse(_ideal(a0="120 dB", gbw="10 MHz", c_f="0 F"))
    est = math.sqrt(10e6 / (2 * math.pi * RF * CD))
    assert 0.7 * est < b.f_high_hz < 1.6 * est
    assert b.gain_unit == "dBΩ" and b.gain_db == pytest.approx(20 * math.log10(RF), abs=0.01)


def test_input_impedance_is_rf_over_one_plus_a0_at_dc():
    """Virtual ground: Zin = RF/(1 + A0) at DC (Sedra & Smith, inverting amplifier, from memory)."""
    p = {"a0": 80.0, "gbw": 1e6, "r_out": 0.0, "r_in": np.inf, "c_in": 0.0, "r_f": RF, "c_f": CF, "ref": 0.0}
    m = REGISTRY["opamp_transimpedance"].abcd(p, 2j * math.pi * 1e-6, None)
    assert abs(m.A / m.C) == pytest.approx(RF / (1 + 1e4), rel=1e-6)


def test_dc_level_is_ref_minus_current_times_rf():
    """Vout = ref − I·RF for a large A0 (Graeme, from memory); the diode node sits at ref,
    so its 1 GΩ shunt (returned to ground) takes ref/RSH = 1.5 nA of the 300 nA."""
    ev = evaluate(_ideal(a0="160 dB"))
    assert _dc(ev, "tia") == pytest.approx(1.5 - (300e-9 - 1.5 / RSH) * RF, abs=1e-7)
    assert _dc(ev, "pd") == pytest.approx(1.5, abs=1e-6)


@needs_ngspice
def test_hand_netlist_ac_dc_and_noise_agree_with_ngspice():
    """ngspice (``ngspice -b``) on the circuit written by hand: gain within 0.5 % from
    10 Hz to 2 MHz, DC within 2 mV, output noise density within 3 % at frequencies
    below, at and beyond the en noise-gain peak."""
    chain = chain_from(TIA)
    freqs = np.array([10.0, 1e3, 3e4, 3e5, 1e6, 2e6])
    ev = evaluate(chain, f_hz=np.concatenate(([1e3], freqs)))
    ours = ev.gain("tia")[0, 1:]
    spice = run_ac(_hand_netlist(False), "out", freqs)
    np.testing.assert_allclose(np.abs(spice), np.abs(ours), rtol=5e-3)
    assert np.all(np.abs(np.angle(spice / ours)) < 5e-3)

    op = run_op(_hand_netlist(False))
    assert abs(op["out"] - _dc(ev, "tia")) < 2e-3
    assert abs(op["in"] - _dc(ev, "pd")) < 2e-3

    ev_n = evaluate(chain)
    total, _, _ = density_at(ev_n, freqs)
    onoise, inoise = run_noise(_hand_netlist(True), "out", "Ipd", freqs)
    np.testing.assert_allclose(onoise, total[0], rtol=0.03)
    # the rising en noise gain: more output noise at 300 kHz than at 1 kHz
    assert total[0, 3] > 1.5 * total[0, 1]


@needs_ngspice
def test_exported_netlist_noise_follows_the_peaking():
    """The exported netlist (current source with its shot noise, RF ‖ CF) against
    chainplan's noise over frequency (3 %), beyond the single check at f_ref that
    tests/test_spice_export.py makes for every demo chain."""
    chain = chain_from(TIA)
    freqs = np.array([100.0, 1e5, 1e6])
    total, _, _ = density_at(evaluate(chain), freqs)
    nl = export(chain)
    onoise, _ = run_noise(nl.circuit_text(), nl.output, nl.source, freqs)
    np.testing.assert_allclose(onoise, total[0], rtol=0.03)


def test_demo_budget_reports_a_transimpedance(cli):
    rc, out, _ = cli("budget", str(REPO / "chains" / "photodiode_tia.yaml"), "--json")
    import json
    d = json.loads(out)
    assert rc in (0, 1)
    assert d["gain_unit"] == "dBΩ" and 99 < d["gain_db"] < 101     # 100 kΩ = 100 dBΩ
    tia = next(s for s in d["stages"] if s["name"] == "tia")
    assert tia["gain_unit"] == "Ω" and tia["gain"] == pytest.approx(100e3, rel=0.01)
    first = d["interfaces"][0]                                    # a virtual ground: a current transfer, no loss
    assert first["input_mode"] == "current" and first["loading_loss_db"] is None
    assert first["transfer"] > 0.999 and first["transfer_db"] > -0.01   # nearly all the current enters it


@pytest.mark.parametrize("field, bad, words", [
    ("amplitude", "-1 µA", "greater than zero"),
    ("r", "0 Ω", "greater than zero"),
    ("c", "-5 pF", "at least 0"),
    ("amplitude", "1 V", "A"),
])
def test_bad_current_sensor_fields_exit_2_naming_file_line_and_field(cli, spec_file, field, bad, words):
    text = TIA.replace("source: {name: pd, kind: current_sensor, amplitude: 1 µA, dc: 300 nA, r: 1G, c: 50 pF}",
                       "source:\n  name: pd\n  kind: current_sensor\n  amplitude: 1 µA\n  dc: 300 nA\n"
                       "  r: 1G\n  c: 50 pF")
    lines = text.splitlines()
    idx = next(i for i, ln in enumerate(lines) if ln.startswith(f"  {field}:"))
    lines[idx] = f"  {field}: {bad}"
    path = spec_file("\n".join(lines) + "\n")
    rc, out, err = cli("budget", path)
    assert rc == 2
    assert f"{path}:{idx + 1}: pd.{field}:" in err and words in err
    assert "Traceback" not in err


def test_ideal_current_source_into_nothing_floats(cli, spec_file):
    """An ideal current source (r: inf) read only by a high-impedance load has no DC path."""
    path = spec_file("""\
        name: open
        source: {name: pd, kind: current_sensor, amplitude: 1 µA, c: 10 pF}
        stages:
          - {name: end, kind: load, r_in: inf, c_in: 1 pF}
        """)
    rc, _, err = cli("budget", path)
    assert rc == 2 and "floats" in err
