"""Requirements: parsing, values against hand formulas, the check command and
the budget hook."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.errors import SpecError
from chainplan.studies.requirements import check_chain, evaluate_requirements
from conftest import chain_from

# An ideal 1 V source, 1 kΩ source resistance, a 1 kΩ/3 kΩ divider and an RC
# low-pass (1 kΩ, 10 nF) into an open ADC input, all by hand below.
RC_CHAIN = """
name: rc
rails: {vdd: 3.3 V}
source: {name: src, kind: sensor, amplitude: 100 mV, dc: 1 V, r: 1k}
stages:
  - {name: div, kind: divider, r_top: 1k, r_bottom: 3k}
  - {name: buf, kind: opamp_follower, gbw: 1 GHz, a0: 200 dB, swing_low: 0 V, swing_high: 0 V}
  - {name: lp, kind: rc_lowpass, r: 1k, c: 10 nF}
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
analysis: {f_ref: 10 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: 301}
"""
FC_HZ = 1 / (2 * math.pi * 1e3 * 10e-9)        # RC corner 1/(2πRC), 15.9 kHz (common practice)


def rc_with(reqs: str):
    return chain_from(RC_CHAIN + "requirements:\n" + reqs)


def results(reqs: str):
    return {r.name: r for r in check_chain(rc_with(reqs))}


def test_gain_matches_divider_formula_and_margin_sign():
    # divider after a 1 kΩ source: 3k/(1k + 1k + 3k) = 0.6 (Ohm's law, common practice);
    # the low-pass adds |1/(1 + j·f/fc)| at 10 Hz
    expected = 20 * math.log10(0.6 / math.sqrt(1 + (10 / FC_HZ) ** 2))
    r = results("  - min_gain: -5 dB\n  - max_gain: -5 dB\n")
    lo, hi = r["min_gain"], r["max_gain"]
    assert lo.value[0] == pytest.approx(expected, abs=1e-6)
    assert lo.margin[0] == pytest.approx(expected + 5, abs=1e-6) and bool(lo.passed[0])
    assert hi.margin[0] == pytest.approx(-5 - expected, abs=1e-6) and not hi.passed[0]


def test_gain_at_an_off_grid_frequency_is_exact():
    f = 12345.0          # not a grid point: evaluated by an extra AC pass
    r = results(f"  - min_gain: -20 dB\n    at: {f} Hz\n")["min_gain at 12.3 kHz"]
    expected = 20 * math.log10(0.6 / math.sqrt(1 + (f / FC_HZ) ** 2))   # first-order low-pass (common practice)
    assert r.value[0] == pytest.approx(expected, abs=1e-6)


def test_flatness_over_a_band_of_a_low_pass():
    # monotonic response: the variation is |H(fc/10)|/|H(fc)| in dB = 10·log10(2/1.01)
    r = results(f"  - flatness: 3 dB\n    band: [{FC_HZ / 10} Hz, {FC_HZ} Hz]\n    name: flat\n")["flat"]
    assert r.value[0] == pytest.approx(10 * math.log10(2 / 1.01), abs=1e-6)
    assert bool(r.passed[0]) and r.margin[0] == pytest.approx(3 - r.value[0])


def test_band_edges_against_the_rc_corner():
    r = results("  - min_f_high: 20 kHz\n  - max_f_low: 1 Hz\n")
    # the grid is interpolated in log f: 301 points over 7 decades, within 0.5 %
    assert r["min_f_high"].value[0] == pytest.approx(FC_HZ, rel=5e-3)
    assert not r["min_f_high"].passed[0]
    # DC-coupled: no lower edge in the span, so f_start (1 Hz) stands in for it and meets 1 Hz
    assert r["max_f_low"].value[0] == 1.0 and r["max_f_low"].passed[0]


def test_a_band_edge_limit_beyond_the_span_fails_until_the_span_is_widened():
    """No upper edge below f_stop only shows the edge lies above f_stop."""
    c = chain_from(RC_CHAIN.replace("f_stop: 10 MHz", "f_stop: 10 kHz") + "requirements:\n  - min_f_high: 50 kHz\n")
    r = {x.name: x for x in check_chain(c)}
    assert r["min_f_high"].value[0] == 10e3 and not r["min_f_high"].passed[0]


def test_headroom_and_loading_loss_by_hand():
    r = results("  - min_headroom: 100 mV\n    nodes: [lp]\n  - max_loading_loss: 1 dB\n")
    # node lp: DC 1 V·0.6 = 0.6 V, peak 60 mV·|H(10 Hz)|; limits 0 … 3.3 V -> headroom 0.6 − 0.06 = 0.54 V
    peak = 0.06 / math.sqrt(1 + (10 / FC_HZ) ** 2)
    assert r["min_headroom lp"].value[0] == pytest.approx(0.6 - peak, abs=1e-9)
    # worst interface: 1 kΩ source into the divider's 4 kΩ: 20·log10(4/5) (voltage divider, common practice)
    ll = r["max_loading_loss"]
    assert ll.value[0] == pytest.approx(-20 * math.log10(4 / 5), abs=1e-6)
    assert not ll.passed[0]
    from chainplan.studies.requirements import where_of
    assert where_of(ll) == "src → div"


def test_power_of_followers():
    c = chain_from(RC_CHAIN.replace("swing_high: 0 V}", "swing_high: 0 V, i_supply: 2 mA}")
                   + "requirements:\n  - max_buffer_power: 5 mW\n")
    (r,) = check_chain(c)
    assert r.value[0] == pytest.approx(2e-3 * 3.3) and not r.passed[0]      # P = I·V


def test_every_kind_accepts_its_spec_form():
    from chainplan.studies.requirements import COMMON_MODE_KINDS, DYNAMICS_KINDS, KINDS, NOISE_KINDS
    text = """
  - min_gain: -10 dB
  - max_gain: 0 dB
    at: 1 kHz
  - flatness: 1 dB
    band: [10 Hz, 1 kHz]
  - min_f_high: 1 kHz
  - max_f_low: 10 Hz
  - min_headroom: 0 V
  - max_loading_loss: 3 dB
    interfaces: [div]
  - max_buffer_power: 1 W
    stages: [buf]
  - max_offset_error: 1 mV
  - max_gain_error: 0.5 %
  - max_drift: 2 mV
    rule: rss
  - max_total_error: 1 %
  - max_rail_current: 10 mA
"""
    reqs = rc_with(text).extra["requirements"]
    assert {r.key for r in reqs} == (set(KINDS) - set(NOISE_KINDS) - {"min_alias_rejection"}  # tests/test_aliasing.py
                                     - set(DYNAMICS_KINDS)                                     # tests/test_stability.py
                                     - set(COMMON_MODE_KINDS))                                 # tests/test_differential.py
    assert [r.kind for r in reqs][:2] == ["min_gain_db", "max_gain_db"]


@pytest.mark.parametrize("text,msg,line", [
    ("  - min_headroom: 1 V\n    nodes: [nowhere]\n", "'nowhere' is not a node", 13),
    ("  - max_loading_loss: 1 dB\n    interfaces: [lpp]\n", "did you mean 'lp'", 13),
    ("  - min_gain: 3 V\n", "volts given where", 12),
    ("  - min_gain: 3 dB\n    max_gain: 4 dB\n", "exactly one limit key", 12),
    ("  - flatness: 1 dB\n", "band", 12),
    ("  - min_gain: 3 dB\n    band: [1 Hz, 2 Hz]\n", "does not apply to min_gain", 13),
    ("  - min_gain: 3 dB\n  - min_gain: 4 dB\n", "two requirements are called 'min_gain'", 13),
    ("  - flatness: 1 dB\n    band: [2 kHz, 1 kHz]\n", "low end must be below", 13),
    ("  - max_buffer_power: 1 mW\n    stages: [adc]\n", "draws no supply power", 13),
    ("  - minimum_gain: 3 dB\n", "exactly one limit key", 12),
    ("  min_gain: 3 dB\n", "is a list", 11),
])
def test_bad_requirements_name_file_line_and_field(text, msg, line):
    with pytest.raises(SpecError) as info:
        rc_with(text)
    assert msg in str(info.value)
    assert info.value.line == line


def test_unknown_node_through_the_cli_exits_2_without_traceback(cli, spec_file, tmp_path):
    path = spec_file(RC_CHAIN + "requirements:\n  - min_headroom: 1 V\n    nodes: [nowhere]\n")
    junit = tmp_path / "report.xml"
    rc, out, err = cli("check", path, "--junit", str(junit))
    assert rc == 2 and out == ""
    assert err.count("\n") == 1 and "nowhere" in err and "Traceback" not in err
    assert not junit.exists()


def test_impossible_sample_fails_every_requirement():
    c = rc_with("  - min_gain: -50 dB\n")
    from chainplan.engine.budget import evaluate, nominal_params
    p = nominal_params(c)
    p["src"]["dc"] = np.array([[1.0], [1.0]])
    ev = evaluate(c, p)
    ev.dc.ops["buf"].bad = np.array([[False], [True]])     # as a stage would flag it
    (r,) = evaluate_requirements(ev)
    assert r.passed.tolist() == [True, False]
    assert r.margin[0] == pytest.approx(r.margin[1])      # the value is still computed


def test_check_command_exit_codes_json_and_table(cli, spec_file):
    ok = spec_file(RC_CHAIN + "requirements:\n  - min_gain: -10 dB\n", "ok.yaml")
    bad = spec_file(RC_CHAIN + "requirements:\n  - min_gain: 0 dB\n", "bad.yaml")
    rc, out, _ = cli("check", ok)
    assert rc == 0 and "min_gain" in out and "pass" in out
    rc, out, _ = cli("check", ok, bad)
    assert rc == 1 and "FAIL" in out and "2 specs, 2 requirements: 1 met, 1 failing" in out
    rc, out, _ = cli("check", ok, bad, "--json")
    d = json.loads(out)
    assert rc == 1 and d["passed"] is False
    assert [s["passed"] for s in d["specs"]] == [True, False]
    # divider after the source: 3k/(1k + 1k + 3k) = 0.6 (Ohm's law, common practice), limit 0 dB
    assert d["specs"][1]["requirements"][0]["margin"] == pytest.approx(20 * math.log10(0.6), abs=1e-3)


def test_budget_json_and_summary_carry_requirement_status(cli, spec_file):
    path = spec_file(RC_CHAIN + "requirements:\n  - min_gain: 0 dB\n  - min_headroom: 0 V\n")
    rc, out, _ = cli("budget", path, "--json")
    reqs = json.loads(out)["requirements"]
    assert rc == 0 and [(r["name"], r["passed"]) for r in reqs] == [("min_gain", False), ("min_headroom", True)]
    rc, out, _ = cli("budget", path)
    assert "1 of 2 met; failing: min_gain" in out


def test_demo_chains_with_requirements_pass_or_fail_as_described(cli):
    """Demo chains say in their description whether their requirements are meant to fail."""
    from conftest import DEMO_CHAINS
    from chainplan.spec.loader import load_chain
    for path in DEMO_CHAINS:
        c = load_chain(str(path))
        if not c.extra.get("requirements"):
            continue
        rc, out, err = cli("check", str(path))
        meant_to_fail = "fail on purpose" in c.description
        assert rc == (1 if meant_to_fail else 0), (path, out, err)


def test_every_requirement_kind_is_documented():
    from conftest import REPO
    from chainplan.studies.requirements import KINDS
    text = (REPO / "docs" / "requirements.md").read_text(encoding="utf-8")
    for k in KINDS.values():
        assert f"| `{k.key}` | `{k.kind}` |" in text, k.key


def test_schema_describes_requirements_and_corners():
    jsonschema = pytest.importorskip("jsonschema")
    import yaml
    from chainplan.spec.schema import chain_schema
    schema = chain_schema()
    good = yaml.safe_load(RC_CHAIN + "requirements:\n  - min_gain: -10 dB\n  - flatness: 1 dB\n    band: [1 Hz, 1 kHz]\n"
                          "corners: {temperature: [0 °C, 50 °C], supply: ±5 %}\n")
    jsonschema.validate(good, schema)
    for bad in ("requirements:\n  - min_gain: 1 dB\n    max_gain: 2 dB\n",     # two limits in one item
                "requirements:\n  - min_gain: 3 V\n",                          # wrong unit
                "corners: {supply: 5 V}\n"):
        with pytest.raises(jsonschema.ValidationError):
            jsonschema.validate(yaml.safe_load(RC_CHAIN + bad), schema)


def test_snr_and_enob_requirements_read_the_noise_analysis():
    pytest.importorskip("chainplan.engine.noise")
    from chainplan.engine.budget import evaluate
    from chainplan.engine.noise import analyse_noise
    c = rc_with("  - min_snr: 60 dB\n  - min_enob: 16\n")
    ev = evaluate(c)
    snr, enob = evaluate_requirements(ev)
    nr = analyse_noise(ev)
    assert snr.value[0] == pytest.approx(float(np.ravel(nr.snr_db)[0]), rel=1e-12)
    assert enob.value[0] == pytest.approx(float(np.ravel(nr.enob_bits)[0]), rel=1e-12)
    # a 12-bit converter cannot reach 16 bits: ENOB ≤ N (ideal ADC, 6.02·N + 1.76 dB, common practice;
    # 0.01 bit for the rounded 6.02 dB per bit)
    assert enob.value[0] <= 12.01 and not enob.passed[0]
