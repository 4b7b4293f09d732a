"""JUnit XML from ``chainplan check --junit``: parses with the standard library,
one test case per requirement, failures carry value, limit and margin, and
the file is written whole or not at all."""
from __future__ import annotations

import os
import xml.etree.ElementTree as ET

CHAIN = """
name: {name}
rails: {{vdd: 3.3 V}}
source: {{kind: sensor, amplitude: 100 mV, dc: 1 V, r: 1k}}
stages:
  - {{name: div, kind: divider, r_top: 1k, r_bottom: 3k}}
  - {{name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}}
requirements:
  - min_gain: {min_gain}
  - min_headroom: 100 mV
  - max_loading_loss: 3 dB
    name: no heavy loading
"""


def test_one_case_per_requirement_and_failures_with_their_numbers(cli, spec_file, tmp_path):
    a = spec_file(CHAIN.format(name="first", min_gain="-10 dB"), "a.yaml")
    b = spec_file(CHAIN.format(name="second", min_gain="0 dB"), "b.yaml")
    out = tmp_path / "ci" / "requirements.xml"
    rc, _, _ = cli("check", a, b, "--junit", str(out))
    assert rc == 1
    root = ET.parse(out).getroot()
    assert root.tag == "testsuites" and root.get("tests") == "6" and root.get("failures") == "1"
    suites = root.findall("testsuite")
    assert [s.get("name") for s in suites] == ["first", "second"]
    for s in suites:
        cases = s.findall("testcase")
        assert [c.get("name") for c in cases] == ["min_gain", "min_headroom", "no heavy loading"]
        assert s.get("tests") == "3"
    failed = [(s.get("name"), c.get("name"), c.find("failure")) for s in suites for c in s.findall("testcase")
              if c.find("failure") is not None]
    assert [(n, c) for n, c, _ in failed] == [("second", "min_gain")]
    msg = failed[0][2].get("message")
    # gain 3k/(1k + 1k + 3k) = 0.6 → −4.44 dB (voltage divider, common practice); limit 0 dB
    assert msg == "−4.44 dB, needs ≥ 0.00 dB (margin −4.44 dB)"
    assert suites[1].find("testcase").get("line") == "9"


def test_all_passing_writes_a_clean_report_and_exits_0(cli, spec_file, tmp_path):
    a = spec_file(CHAIN.format(name="first", min_gain="-10 dB"))
    out = tmp_path / "r.xml"
    rc, _, _ = cli("check", a, "--junit", str(out), "--json")
    root = ET.parse(out).getroot()
    assert rc == 0 and root.get("failures") == "0" and root.findall(".//failure") == []
    assert len(root.findall(".//testcase")) == 3


def test_bad_input_writes_nothing_and_an_unwritable_path_exits_2(cli, spec_file, tmp_path):
    good = spec_file(CHAIN.format(name="first", min_gain="-10 dB"), "good.yaml")
    bad = spec_file(CHAIN.format(name="first", min_gain="-10 V"), "bad.yaml")
    out = tmp_path / "r.xml"
    out.write_text("previous report", encoding="utf-8")
    rc, stdout, err = cli("check", good, bad, "--junit", str(out))
    assert rc == 2 and stdout == "" and "volts given where" in err
    assert out.read_text(encoding="utf-8") == "previous report"         # untouched
    blocker = tmp_path / "blocker"
    blocker.write_text("a file, not a folder", encoding="utf-8")
    rc, _, err = cli("check", good, "--junit", str(blocker / "r.xml"))
    assert rc == 2 and "cannot write" in err and "Traceback" not in err
    assert sorted(os.listdir(tmp_path)) == ["bad.yaml", "blocker", "good.yaml", "r.xml"]   # no stray temp files
