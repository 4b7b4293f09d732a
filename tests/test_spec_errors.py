"""Bad input through the CLI: one line naming file, line and field, exit code 2,
never a traceback.  In each spec the line the message must point at carries
the marker ``#<`` (a YAML comment), so the expected line number is read from
the text rather than counted by hand."""
from __future__ import annotations

import os
import subprocess
import sys
import textwrap

import pytest

from conftest import REPO

HEAD = """\
name: bad
rails:
  vdd: 3.3 V
source:
  name: src
  kind: sensor
  amplitude: 10 mV
  dc: 2 V
  r: 1k
stages:
"""
FOLLOWER = """\
  - name: sf
    kind: source_follower
    kp: 100 µA/V²
    w_over_l: 50
    vth0: 0.6 V
    i_bias: 50 µA
"""

CASES = {
    # id: (spec text, field named in the message or None, words the message must contain)
    "yaml-indentation": (HEAD.replace("  r: 1k", " r: 1k  #<") + FOLLOWER, None, ["YAML"]),
    "yaml-tab": (HEAD.replace("  dc: 2 V", "\tdc: 2 V  #<") + FOLLOWER, None, ["YAML", "tab"]),
    "yaml-control-character": (HEAD.replace("  dc: 2 V", "  dc: 2 V\x01  #<") + FOLLOWER, None, ["U+0001"]),
    "unknown-kind": (HEAD + FOLLOWER.replace("kind: source_follower", "kind: source_folower  #<"),
                     "kind", ["source_folower", "did you mean 'source_follower'"]),
    "unknown-key": (HEAD + FOLLOWER.replace("w_over_l: 50", "w_over_1: 50  #<"),
                    "sf.w_over_1", ["did you mean 'w_over_l'"]),
    "geometry-both-ways": (HEAD + FOLLOWER.replace("    vth0: 0.6 V\n", "    w: 100u  #<\n    l: 2 µm\n    vth0: 0.6 V\n"),
                           "sf.w", ["give exactly one of: w_over_l, or w and l", "got w_over_l, w, l"]),
    "geometry-width-alone": (HEAD + FOLLOWER.replace("w_over_l: 50", "w: 100u  #<"),
                             "sf.w", ["'w' needs 'l' beside it"]),
    "geometry-mixed": (HEAD + FOLLOWER.replace("    vth0: 0.6 V\n", "    l: 2 µm  #<\n    vth0: 0.6 V\n"),
                       "sf.l", ["'l' needs 'w' beside it", "w_over_l, or w and l"]),
    "geometry-missing": (HEAD + FOLLOWER.replace("  - name: sf", "  - name: sf  #<").replace("    w_over_l: 50\n", ""),
                         "sf.w_over_l", ["give exactly one of: w_over_l, or w and l"]),
    "missing-required": (HEAD + FOLLOWER.replace("  - name: sf", "  - name: sf  #<")
                         .replace("    kp: 100 µA/V²\n", ""), "sf.kp", ["missing required field 'kp'"]),
    "bad-prefix": (HEAD.replace("  r: 1k", "  r: 4.7q  #<") + FOLLOWER, "src.r", ["'4.7q'", "resistance"]),
    "volts-for-ohms": (HEAD.replace("  r: 1k", "  r: 3 V  #<") + FOLLOWER, "src.r",
                       ["volts given where a resistance"]),
    "negative-resistance": (HEAD + FOLLOWER + "  - {name: lp, kind: rc_lowpass, r: -10k, c: 1 nF}  #<\n",
                            "lp.r", ["greater than zero"]),
    "zero-gain": (HEAD + "  - name: amp\n    kind: amplifier\n    gain: 0  #<\n", "amp.gain", ["gain of zero"]),
    "bias-current-too-large": (HEAD + FOLLOWER.replace("i_bias: 50 µA", "i_bias: 20 mA  #<"), "sf.i_bias",
                               ["cannot carry this bias current in saturation"]),
    "adc-empty-range": (HEAD + FOLLOWER + "  - name: adc\n    kind: adc\n    bits: 12\n    fs_low: 3 V\n"
                        "    fs_high: 1 V  #<\n", "adc.fs_high", ["full-scale range is empty"]),
    "floating-node": (HEAD.replace("  r: 1k", "  r: inf").replace("  name: src", "  name: src  #<") + FOLLOWER,
                      "src", ["no DC path"]),
    "cycle": (HEAD + FOLLOWER + "  - name: a\n    kind: series_r\n    r: 1k\n    from: b  #<\n"
              "  - name: b\n    kind: series_r\n    r: 1k\n    from: a\n", "from", ["loop", "a → b → a"]),
    "dangling-from": (HEAD + FOLLOWER + "  - name: lp\n    kind: rc_lowpass\n    from: sff  #<\n"
                      "    r: 1k\n    c: 1 nF\n", "from", ["'sff' is not a stage", "did you mean 'sf'"]),
}


def expected_line(text: str) -> int:
    lines = [i for i, ln in enumerate(text.splitlines(), 1) if "#<" in ln]
    assert len(lines) == 1, "a case marks exactly one line"
    return lines[0]


@pytest.mark.parametrize("case", list(CASES))
def test_bad_spec(case, spec_file, cli):
    text, field, words = CASES[case]
    path = spec_file(text)
    rc, out, err = cli("budget", path)
    assert rc == 2
    assert out == ""
    assert "Traceback" not in err
    assert err.endswith("\n") and err.count("\n") == 1, f"one line expected, got: {err!r}"
    head = f"chainplan: {path}:{expected_line(text)}: "
    assert err.startswith(head), f"{err!r} should start with {head!r}"
    if field is not None:
        assert err.startswith(head + field + ": "), err
    for w in words:
        assert w in err, f"{w!r} missing from {err!r}"


def test_each_case_is_valid_without_its_fault(spec_file, cli):
    """The base spec itself runs, so each case above fails for its own fault only."""
    rc, out, err = cli("budget", spec_file(HEAD + FOLLOWER))
    assert (rc, err) == (0, "")


@pytest.mark.parametrize("case", ["yaml-tab", "bias-current-too-large", "floating-node"])
def test_bad_spec_in_a_real_process(case, spec_file):
    """The same through a separate Python process: exit status 2, one line on stderr, no traceback
    and no numpy warnings (pytest would swallow those in-process)."""
    text = CASES[case][0]
    path = spec_file(text)
    proc = subprocess.run([sys.executable, "-m", "chainplan.cli", "budget", path], capture_output=True, text=True,
                          cwd=REPO, env={**os.environ, "CHAINPLAN_DEBUG": ""}, timeout=60)
    assert proc.returncode == 2
    assert proc.stdout == ""
    assert "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1 and f"{path}:{expected_line(text)}:" in proc.stderr, proc.stderr


def test_missing_file(cli, tmp_path):
    path = str(tmp_path / "nowhere.yaml")
    rc, out, err = cli("budget", path)
    assert rc == 2 and err == f"chainplan: {path}: no such file\n"


@pytest.mark.parametrize("args, words", [
    (["--at", "3 V"], ["--at", "volts given where a frequency"]),
    (["--at", "-1 kHz"], ["--at", "positive"]),
    (["--span", "1 kHz"], ["--span", "LOW:HIGH"]),
    (["--span", "10 kHz:1 kHz"], ["--span", "below"]),
])
def test_bad_options(args, words, cli):
    path = str(REPO / "chains" / "hydrophone_direct.yaml")
    rc, out, err = cli("budget", path, *args)
    assert rc == 2 and out == "" and err.count("\n") == 1 and "Traceback" not in err
    for w in words:
        assert w in err, err


def test_unknown_option_exits_2(cli):
    with pytest.raises(SystemExit) as exc:
        cli("budget", "--colour", "x.yaml")
    assert exc.value.code == 2


def test_spec_text_is_dedented_yaml():
    """Guard for this file: the marker lines are YAML comments, not part of values."""
    import yaml
    for case, (text, _, _) in CASES.items():
        if not case.startswith("yaml"):
            yaml.safe_load(textwrap.dedent(text))
