"""Stability and dynamics in the budget, the requirements, Monte Carlo and JSON
(the physics is checked against ngspice in tests/test_stability_ngspice.py)."""
from __future__ import annotations

import json

import numpy as np
import pytest

from chainplan.engine.budget import evaluate
from chainplan.studies.requirements import check_chain
from conftest import REPO, chain_from

FOLLOWER = """
name: follower-10nf
rails: {vdd: 5 V, vss: -5 V}
source: {name: src, kind: sensor, amplitude: 100 mV}
stages:
  - {name: buf, kind: opamp_follower, gbw: 10 MHz ±20%, a0: 110 dB, r_out: 40, v_neg: vss, slew_rate: 5 V/µs}
  - {name: cl, kind: load, c_in: 10 nF}
analysis: {f_ref: 1 kHz, f_start: 10 Hz, f_stop: 100 MHz, points: 601}
requirements:
  - min_phase_margin: 45°
  - max_peaking: 3 dB
  - min_slew_margin: 0 dB
  - max_settling_time: 10 µs
    error: 1 %
"""


def test_dynamics_requirements_judge_the_follower():
    res = {r.key: r for r in (x.requirement for x in check_chain(chain_from(FOLLOWER)))}
    out = {r.requirement.key: r for r in check_chain(chain_from(FOLLOWER))}
    assert set(res) == {"min_phase_margin", "max_peaking", "min_slew_margin", "max_settling_time"}
    pm = out["min_phase_margin"]
    assert 10 < pm.value[0] < 12.5 and not pm.passed[0]              # 11° by hand (test_stability_ngspice)
    assert out["max_peaking"].value[0] == pytest.approx(14.0, abs=0.2) and not out["max_peaking"].passed[0]
    # 100 mV at 1 kHz: slope 2π·1 kHz·0.1 V = 0.63 V/ms against 5 V/µs
    assert out["min_slew_margin"].value[0] == pytest.approx(20 * np.log10(5e6 / (2 * np.pi * 1e3 * 0.1)), rel=1e-3)
    assert out["min_slew_margin"].passed[0]


def test_isolation_resistor_fix_reaches_its_target():
    from chainplan.engine.loop import analyse_loops
    chain = chain_from(FOLLOWER)
    (res,) = analyse_loops(evaluate(chain), fixes=True, target_pm_deg=45.0)
    (fix,) = [f for f in res.fixes if f.what == "r_iso"]
    assert fix.pm_deg >= 45.0 and 1.0 < fix.value < 20.0
    # with that resistor in series (feedback at the op-amp pin) the loop really has ≥ 45°
    text = FOLLOWER.replace("  - {name: cl, kind: load, c_in: 10 nF}",
                            f"  - {{name: iso, kind: series_r, r: {fix.value}}}\n  - {{name: cl, kind: load, c_in: 10 nF}}")
    (res2,) = analyse_loops(evaluate(chain_from(text)))
    assert res2.pm_deg[0] == pytest.approx(fix.pm_deg, abs=0.5)


def test_photodiode_demo_fails_its_phase_margin_and_gets_graeme_cf():
    from chainplan.spec.loader import load_chain
    from chainplan.engine.loop import analyse_loops
    chain = load_chain(str(REPO / "chains" / "photodiode_tia.yaml"))
    (res,) = analyse_loops(evaluate(chain), fixes=True)
    assert 37 < res.pm_deg[0] < 40
    cfs = {f.purpose: f for f in res.fixes if f.what == "c_f"}
    g45 = cfs["45°, Graeme"]
    # Graeme (from memory): CF = (1 + √(1 + 8π·RF·Ci·GBW))/(4π·RF·GBW), Ci = 50 pF + 5 pF
    rf, ci, gbw = 100e3, 55e-12, 10e6
    assert g45.value == pytest.approx((1 + np.sqrt(1 + 8 * np.pi * rf * ci * gbw)) / (4 * np.pi * rf * gbw), rel=0.01)
    assert g45.pm_deg > 45 and cfs["flat response, Graeme"].value > g45.value
    reqs = {r.requirement.key: r for r in check_chain(chain)}
    assert not reqs["min_phase_margin"].passed[0]


def test_spread_gives_phase_margin_and_settling_distributions():
    from chainplan.studies.montecarlo import metric_names, run
    chain = chain_from(FOLLOWER)
    res = run(chain, 200, seed=3)
    pm = res.metrics["phase_margin_deg.buf"]
    assert pm.shape == (200,) and np.std(pm) > 0.1          # GBW ±20 % moves the crossover
    assert "settling_s" in res.metrics and "phase_margin_deg.buf" in metric_names(chain)
    req = next(r for r in res.requirements if r.requirement.key == "min_phase_margin")
    assert req.passed.mean() == 0.0


def test_budget_json_has_stability_sampling_step_startup(cli, spec_file):
    text = FOLLOWER.replace("  - {name: cl, kind: load, c_in: 10 nF}",
                            "  - {name: filt, kind: rc_lowpass, r: 470, c: 3.3 nF}\n"
                            "  - {name: adc, kind: adc, bits: 16, fs_low: -5 V, fs_high: 5 V, c_sample: 30 pF, "
                            "t_conv: 8 us, f_sample: 50 kHz}")
    rc, out, err = cli("budget", spec_file(text), "--json")
    assert rc in (0, 1), err
    doc = json.loads(out)
    (loop,) = doc["stability"]
    assert loop["stage"] == "buf" and loop["phase_margin_deg"] > 0
    assert doc["sampling"]["t_acq_s"] == pytest.approx(1 / 50e3 - 8e-6)
    assert doc["step"]["settling_s"] > 0


def test_dynamics_requirement_errors(spec_file, cli):
    bad = FOLLOWER.replace("  - min_phase_margin: 45°", "  - min_phase_margin: 45°\n    stages: [cl]")
    rc, out, err = cli("check", spec_file(bad))
    assert rc == 2 and "'cl' is not an op-amp stage" in err
    bad = FOLLOWER.replace("  - min_phase_margin: 45°", "  - min_settled_bits: 12")
    rc, out, err = cli("check", spec_file(bad))
    assert rc == 2 and "needs an ADC with c_sample" in err
