"""An op-amp declared without rails ('v_pos: inf', 'v_neg: -inf') for a quick estimate:
accepted, unlimited on that side, and every output says 'no rail' instead of a made-up
headroom or power figure; the SPICE export emits no infinite source and ngspice agrees
with the gain (non-inverting gain 1 + RF/RG: Franco, *Design with Operational
Amplifiers*, from memory)."""
from __future__ import annotations

import json
import math
import re
import subprocess

import pytest

from chainplan.engine.budget import analyse
from chainplan.render.spice import export
from conftest import chain_from
from helpers_ngspice import needs_ngspice

SPEC = """\
name: no-rails
rails:
  vdd: 5 V
source:
  name: src
  kind: sensor
  amplitude: 100 mV
  dc: 1 V
  r: 1k
stages:
  - name: amp
    kind: opamp_noninverting
    gbw: 1 MHz
    a0: 120 dB
    r_f: 90k
    r_g: 10k
    v_pos: {v_pos}
    v_neg: {v_neg}
    swing_low: 50 mV
    i_supply: 1 mA
  - name: out
    kind: load
    r_in: 10k
analysis:
  f_ref: 1 kHz
  f_start: 10 Hz
  f_stop: 10 MHz
  output: out
"""

GAIN = 1 + 90e3 / 10e3                       # 1 + RF/RG = 10 (A0 = 1e6 takes 1e-5 off it)


def _table_row(out: str, header: str, name: str) -> str:
    """The row of ``name`` in the table whose column header line starts with ``header``."""
    lines = out.splitlines()
    start = next(i for i, ln in enumerate(lines) if ln.startswith(header))
    return next(ln for ln in lines[start:] if ln.startswith(name + " "))


def _node(b, name):
    return next(n for n in b.nodes if n.name == name)


def test_no_top_rail_leaves_the_low_side_as_the_only_limit(spec_file, cli):
    f = spec_file(SPEC.format(v_pos="inf", v_neg="0 V"))
    b = analyse(chain_from(SPEC.format(v_pos="inf", v_neg="0 V")))
    n = _node(b, "amp")
    dc, pk = 1.0 * GAIN, 0.1 * GAIN
    # closed loop 1 + RF/RG with A0 = 1e6 (−1e-5) and the pole at GBW/10 = 100 kHz (−5e-5 at 1 kHz)
    assert n.dc_v == pytest.approx(dc, rel=2e-5) and n.peak_v == pytest.approx(pk, rel=1e-4)
    assert math.isinf(n.high_v) and n.low_v == pytest.approx(0.05)
    # headroom from the only rail there is: (DC − peak) − (v_neg + swing_low)
    assert n.headroom_v == pytest.approx(dc - pk - 0.05, rel=1e-4)
    assert n.limit_cause == (None, "no rail")
    rc, out, _ = cli("budget", f, env={"COLUMNS": "120"})
    assert rc == 0
    row = _table_row(out, "node ", "amp")
    assert "no rail" in row and "8.95 V" in row                     # the real low-side headroom
    rc, out, _ = cli("budget", f, "--json")
    node = next(x for x in json.loads(out)["nodes"] if x["name"] == "amp")
    assert node["high_limit_v"] is None and node["high_limit_cause"] == "no rail"
    assert node["low_limit_v"] == pytest.approx(0.05)


def test_no_rails_at_all_prints_no_fake_headroom_or_power(spec_file, cli):
    f = spec_file(SPEC.format(v_pos="inf", v_neg="-inf"))
    rc, out, _ = cli("budget", f, env={"COLUMNS": "120"})
    assert rc == 0
    row = _table_row(out, "node ", "amp")
    assert row.count("no rail") == 3                                # low limit, high limit, headroom
    active = _table_row(out, "stage  bias current", "amp")
    assert active.rstrip().endswith("no rail") and "W" not in active   # no power from an infinite span
    assert "∞ V" not in out and "∞ W" not in out and "inf" not in out
    rc, out, _ = cli("budget", f, "--json")
    d = json.loads(out)
    node = next(x for x in d["nodes"] if x["name"] == "amp")
    assert node["headroom_v"] is None and node["low_limit_v"] is None and node["high_limit_v"] is None
    assert (node["low_limit_cause"], node["high_limit_cause"]) == ("no rail", "no rail")
    assert next(s for s in d["stages"] if s["name"] == "amp")["operating_point"]["power_w"] is None
    rc, out, _ = cli("power", f, env={"COLUMNS": "120"})
    assert rc == 0 and "not known (no rail)" in out and "1.00 mA" in out


@pytest.mark.parametrize("field, value, words", [
    ("v_neg", "inf", "only −inf is accepted"),
    ("v_pos", "-inf", "not a finite number"),
])
def test_the_wrong_infinity_is_refused_at_its_line(spec_file, cli, field, value, words):
    text = SPEC.format(v_pos="inf" if field != "v_pos" else value, v_neg="-inf" if field != "v_neg" else value)
    f = spec_file(text)
    rc, _, err = cli("budget", f)
    line = next(i for i, ln in enumerate(text.splitlines(), 1) if ln.strip().startswith(f"{field}:"))
    assert rc == 2 and f":{line}: amp.{field}:" in err and words in err and "Traceback" not in err


@needs_ngspice
def test_spice_export_has_no_infinite_source_and_ngspice_agrees(tmp_path):
    chain = chain_from(SPEC.format(v_pos="inf", v_neg="−inf"))
    text = export(chain).text()
    body = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith("*")]
    assert not any(re.search(r"\binf\b|∞", ln, re.I) for ln in body), body
    assert "* amp is declared without a rail (v_pos, v_neg infinite" in text
    cir = tmp_path / "c.cir"
    cir.write_text(text, encoding="utf-8")
    proc = subprocess.run(["ngspice", "-b", str(cir)], capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0 and "rror" not in proc.stdout + proc.stderr, proc.stdout + proc.stderr
    m = re.search(r"^gain_ref_db\s+=\s+([-+0-9.eE]+)", proc.stdout, re.M)
    assert m and float(m.group(1)) == pytest.approx(20 * math.log10(GAIN), abs=0.01)
    assert analyse(chain).gain_db == pytest.approx(float(m.group(1)), abs=0.01)
