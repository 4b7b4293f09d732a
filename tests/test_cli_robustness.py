"""Every command's help shows, and a railed amplifier is not reported as working."""
from __future__ import annotations

import pytest

from chainplan.cli import COMMANDS, main


@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_every_command_has_help(command, capsys):
    with pytest.raises(SystemExit) as exc:
        main([command, "--help"])
    out = capsys.readouterr().out
    assert exc.value.code == 0 and out.startswith("usage: chainplan " + command)


RAILED = """
name: railed
rails: {vdd: 3.3 V, vmid: 1.65 V}
source: {name: bridge, kind: sensor, amplitude: 1 mV, dc: 1.75 V, r: 1k}
stages:
  - name: amp
    kind: opamp_noninverting
    gbw: 1 MHz
    r_f: 100k
    r_g: 1k
    ref: vmid          #<
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd}
requirements:
  - min_gain: 30 dB
"""


@pytest.mark.parametrize("command", ["budget", "check", "noise"])
def test_an_op_amp_railed_at_dc_is_an_error_not_a_pass(command, cli, spec_file):
    """100 mV of offset times a gain of 101 puts the output at 11.7 V on a 3.3 V supply:
    the op-amp saturates (common practice), so no gain or SNR figure may be reported."""
    path = spec_file(RAILED)
    rc, out, err = cli(command, path)
    line = RAILED.splitlines().index("    ref: vmid          #<") + 1
    assert rc == 2 and out == ""
    assert f":{line}: amp.ref:" in err and "saturates" in err


@pytest.mark.parametrize("samples", ["1", "200"])
def test_spread_of_a_chain_without_tolerances_reports_the_nominal_chain(cli, samples):
    from conftest import REPO
    rc, out, err = cli("spread", str(REPO / "chains" / "vibration_fanout.yaml"), "-n", samples, "--json")
    import json
    d = json.loads(out)
    assert rc == 0 and err == ""
    assert d["samples"] == int(samples)
    assert all(r["yield"] == 1.0 for r in d["requirements"])


@pytest.mark.parametrize("text", ["25", "300", "2.5e2"])
def test_a_temperature_without_unit_is_refused(cli, spec_file, text):
    """25 could be °C or K: a 12x error in kT either way (common practice: always state the unit)."""
    path = spec_file(f"name: t\ntemperature: {text}\nsource: {{kind: sensor, amplitude: 1 mV}}\n"
                     "stages:\n  - {name: r, kind: series_r, r: 1k}\n")
    rc, out, err = cli("budget", path)
    assert rc == 2 and ":2: temperature:" in err and "°C" in err


def test_buffers_write_refuses_to_overwrite_its_own_input(cli, tmp_path):
    """The input spec changes only with --in-place (docs/buffers.md)."""
    import shutil
    from conftest import REPO
    shutil.copytree(REPO / "chains", tmp_path / "chains")
    spec = tmp_path / "chains" / "hydrophone_direct.yaml"
    before = spec.read_text()
    rc, out, err = cli("buffers", str(spec), "--min-gain", "20 dB", "--write", str(spec))
    assert rc == 2 and "--in-place" in err and spec.read_text() == before
