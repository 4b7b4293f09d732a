"""Differential pairs (stages/differential.py, engine/commonmode.py): a bridge read by a
four-resistor difference amplifier, against ngspice (differential gain and CMRR with
0.1 % mismatch, the exported netlist's gain and noise), the difference amplifier's
CMRR against its closed form and the common-practice worst case (1 + G)/(4·tol), and
the bridge's common mode and Thevenin legs by hand (Wheatstone)."""
from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from chainplan.engine.budget import analyse, evaluate, nominal_params
from chainplan.engine.commonmode import analyse_common_mode
from chainplan.engine.noise import density_at
from chainplan.render.spice import export
from chainplan.stages.differential import ideal_transfers, worst_case_cmrr
from chainplan.studies.requirements import check_chain
from conftest import chain_from
from helpers_ngspice import needs_ngspice, run_ac, run_noise, run_op

R1, R2, T = 10e3, 100e3, 1e-3
R3, R4 = R1 * (1 + T), R2 * (1 - T)          # the mismatch that spoils the CMRR most for ±0.1 %


def _chain(r3=R3, r4=R4, r=350.0, imbalance="0 %", extra="", match="0 %", ref="0 V"):
    return chain_from(f"""
        name: t
        rails: {{vdd: 5 V, vss: -5 V, vexc: 5 V}}
        source: {{name: cell, kind: bridge, excitation: vexc, r: {r}, amplitude: 10 mV, imbalance: {imbalance},
                  sensitivity: 2 mV/V at 50 kg}}
        stages:
          - {{name: amp, kind: difference_amplifier, gbw: 10 MHz, a0: 160 dB, r1: {R1}, r2: {R2}, r3: {r3},
              r4: {r4}, v_neg: vss, ref: {ref}, match: {match}, en: 10 nV/√Hz}}
          - {{name: out, kind: load}}
        analysis: {{f_ref: 10 Hz, f_start: 1 Hz, f_stop: 1 MHz, points: 121}}
        {extra}
        """)


def _spice_diff_amp(drive: str) -> str:
    """A 1e8 VCVS op-amp with the four resistors, the legs R/2 = 175 Ω in series; drive
    'dm': ±½ V on the legs, 'cm': 1 V on both."""
    vp, vn = ("AC 0.5", "AC 0.5 180") if drive == "dm" else ("AC 1", "AC 1")
    return f"""
Vp sp 0 DC 0 {vp}
Vn sn 0 DC 0 {vn}
Rlp sp tp 175
Rln sn tn 175
R1 tn inm {R1!r}
R2 out inm {R2!r}
R3 tp inp {R3!r}
R4 inp 0 {R4!r}
E1 out 0 inp inm 1e8
"""


@needs_ngspice
def test_difference_amplifier_gain_and_cmrr_against_ngspice():
    """0.1 % mismatch (R3 high, R4 low): differential gain within 0.5 % and CMRR within
    0.5 dB of ngspice (the issue's check)."""
    ad_sp = abs(run_ac(_spice_diff_amp("dm"), "out", [10.0])[0])
    acm_sp = abs(run_ac(_spice_diff_amp("cm"), "out", [10.0])[0])
    c = _chain()
    b = analyse(c)
    ad = 10 ** (b.gain_db / 20)
    assert ad == pytest.approx(ad_sp, rel=5e-3)
    (cm,) = analyse_common_mode(c, nominal_params(c))
    assert float(cm.cmrr_db[0]) == pytest.approx(20 * math.log10(ad_sp / acm_sp), abs=0.5)


def test_cmrr_closed_form_and_the_common_practice_worst_case():
    """Acm = (R1·R4 − R2·R3)/(R1·(R3 + R4)) (Franco, difference amplifier); over every corner
    of four resistors within ±0.1 % the lowest CMRR is (1 + G)/(4·tol) to first order in tol
    (common practice), and the declared 'match' gives that figure."""
    ad, acm, _ = ideal_transfers(R1, R2, R3, R4)
    assert acm == pytest.approx((R1 * R4 - R2 * R3) / (R1 * (R3 + R4)), rel=1e-12)
    cmrrs = []
    for signs in itertools.product((-1, 1), repeat=4):
        d, cm, _ = ideal_transfers(*(x * (1 + k * T) for x, k in zip((R1, R2, R1, R2), signs)))
        if abs(cm) > 1e-15:                  # corners that keep R2/R1 = R4/R3 reject perfectly
            cmrrs.append(abs(d / cm))
    worst = min(cmrrs)
    assert worst == pytest.approx(worst_case_cmrr(R2 / R1, T), rel=5e-3)
    c = _chain(r3=R1, r4=R2, r=1e-3, match="0.1 %")
    (cm,) = analyse_common_mode(c, nominal_params(c))
    assert float(cm.cmrr_db[0]) == pytest.approx(20 * math.log10(worst_case_cmrr(R2 / R1, T)), abs=0.01)


def test_bridge_legs_and_common_mode_by_hand():
    """Four arms R on 5 V: each leg R/2 at 2.5 V (Wheatstone); a 1 % leg imbalance with
    matched resistors gives Acm = (R1'·R2 − R2·R3')/(R1'·(R3' + R2)), R1' = R1 + R_leg−, and
    the output error Acm·(Vcm − ref) with ref at 0 V."""
    c = _chain(r3=R1, r4=R2, imbalance="1 %")
    src = c.source
    r_p, r_n, vcm = src.model.legs(src.params)
    assert (r_p, r_n, vcm) == pytest.approx((175 * 1.005, 175 * 0.995, 2.5))
    (cm,) = analyse_common_mode(c, nominal_params(c))
    r1, r3 = R1 + r_n, R1 + r_p
    acm = (r1 * R2 - R2 * r3) / (r1 * (r3 + R2))
    assert float(cm.error_out_v[0]) == pytest.approx(abs(acm) * 2.5, rel=1e-9)


@needs_ngspice
def test_exported_netlist_gain_noise_and_leg_levels_agree():
    c = _chain(imbalance="1 %")
    nl = export(c)
    circuit = nl.circuit_text()
    ops = run_op(circuit)
    # the + leg: half the excitation behind R_leg+ = 175·1.005 Ω, loaded by R3 + R4 to ref (0 V)
    load = R3 + R4
    assert ops["cell_p_tap"] == pytest.approx(2.5 * load / (load + 175 * 1.005), rel=1e-9)
    ev = evaluate(c)
    g = abs(run_ac(circuit, nl.output, [10.0])[0])
    assert g == pytest.approx(abs(ev.gain()[0, 0]), rel=5e-3)
    onoise, _ = run_noise(circuit, nl.output, nl.source, [1e3])
    dens, _, _ = density_at(ev, [1e3])
    assert float(dens[0, 0]) == pytest.approx(float(onoise[0]), rel=0.02)


def test_requirements_and_tolerance_runs_see_the_cmrr(cli, spec_file):
    """1 % match: (1 + 10)/(4·0.01) = 275 → 48.8 dB fails a 60 dB requirement; 0.01 % passes."""
    poor = _chain(r3=R1, r4=R2, r=1e-3, match="1 %", extra="requirements: [{min_cmrr: 60 dB}]")
    (res,) = check_chain(poor)
    assert float(res.value[0]) == pytest.approx(20 * math.log10(275.0), abs=0.01) and not bool(res.passed[0])
    good = _chain(r3=R1, r4=R2, match="0.01 %", extra="requirements: [{min_cmrr: 60 dB}]")
    assert bool(check_chain(good)[0].passed[0])


SPEC = """
name: t
rails: {vdd: 5 V, vss: -5 V, vexc: 5 V}
source: {name: cell, kind: bridge, excitation: vexc, r: 350 ±0.5%, amplitude: 10 mV, sensitivity: 2 mV/V at 50 kg}
stages:
  - {name: amp, kind: difference_amplifier, gbw: 10 MHz, r1: 10k ±0.1%, r2: 100k ±0.1%, r3: 10k ±0.1%,
     r4: 100k ±0.1%, v_neg: vss, cm_low: 1 V, cm_high: 1 V}
  - {name: adc, kind: adc, bits: 16, fs_low: -5 V, fs_high: 5 V}
requirements: [{min_cmrr: 75 dB}, {max_common_mode_error: 5 mV}]
"""


@pytest.mark.parametrize("cmd", [["budget"], ["budget", "--json"], ["noise"], ["check"], ["spread", "-n", "200"],
                                 ["accuracy"], ["netlist"]])
def test_every_command_runs_on_a_bridge_chain(cli, spec_file, cmd):
    path = spec_file(SPEC)
    rc, out, err = cli(cmd[0], path, *cmd[1:])
    assert rc in (0, 1), err
    assert "Traceback" not in err


def test_spread_draws_the_resistors_into_the_cmrr(cli, spec_file):
    """Per unit the resistors' draws set the CMRR: some units fall below the nominal chain's
    (matched, infinite CMRR) and the yield of min_cmrr is below 100 %."""
    import json
    rc, out, err = cli("spread", spec_file(SPEC), "-n", "400", "--json")
    d = json.loads(out)
    req = next(r for r in d["requirements"] if r["kind"] == "min_cmrr_db")
    assert 0.0 < req["yield"] < 1.0


@pytest.mark.parametrize("stages, words", [
    ("[{name: out, kind: load}]", "read the pair with a difference_amplifier"),
])
def test_a_pair_into_a_single_ended_stage_is_refused(cli, spec_file, stages, words):
    path = spec_file(f"name: t\nrails: {{vexc: 5 V}}\nsource: {{name: cell, kind: bridge, excitation: vexc, "
                     f"amplitude: 1 mV}}\nstages: {stages}\n")
    rc, out, err = cli("budget", path)
    assert rc == 2 and words in err


def test_a_difference_amplifier_after_a_single_ended_stage_is_refused(cli, spec_file):
    path = spec_file("name: t\nrails: {vdd: 5 V}\nsource: {name: s, kind: sensor, amplitude: 1 mV}\nstages:\n"
                     "  - {name: amp, kind: difference_amplifier, gbw: 1 MHz, r1: 1k, r2: 10k}\n")
    rc, out, err = cli("budget", path)
    assert rc == 2 and "place it right after a bridge source" in err and ":5:" in err


def test_match_and_resistor_tolerances_are_not_both_given(cli, spec_file):
    path = spec_file(SPEC.replace("v_neg: vss,", "v_neg: vss, match: 0.1 %,"))
    rc, out, err = cli("budget", path)
    assert rc == 2 and "give one or the other" in err and "amp.match" in err


def test_common_mode_range_verdict():
    """ref 0 V, Vcm 2.5 V, h = 10/11: the op-amp's inputs sit near 2.27 V; with cm_high 3 V on a
    5 V rail the range ends at 2 V, so the verdict is outside (margin < 0)."""
    c = chain_from("""
        name: t
        rails: {vdd: 5 V, vss: -5 V, vexc: 5 V}
        source: {name: cell, kind: bridge, excitation: vexc, amplitude: 1 mV}
        stages:
          - {name: amp, kind: difference_amplifier, gbw: 1 MHz, r1: 10k, r2: 100k, v_neg: vss, cm_high: 3 V}
          - {name: out, kind: load}
        """)
    (cm,) = analyse_common_mode(c, nominal_params(c))
    h = 100e3 / (110e3 + 175)            # R4 over R3 + the + leg's R/2 + R4
    assert float(cm.cm_in_v[1][0]) == pytest.approx(h * (2.5 + 0.5e-3), rel=1e-12)
    assert float(cm.cm_margin_v[0]) == pytest.approx(2.0 - h * (2.5 + 0.5e-3), rel=1e-9)
    assert np.all(cm.cm_margin_v < 0)
