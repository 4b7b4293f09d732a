"""``chainplan budget``: every demo chain runs, the JSON carries the figures
issue 2 lists, ``--at``/``--span`` move the reference frequency and span, and
the output is plain when piped or when NO_COLOR is set."""
from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest

from conftest import DEMO_CHAINS, REPO

ANSI = "\x1b["
DIRECT = str(REPO / "chains" / "hydrophone_direct.yaml")


@pytest.mark.parametrize("path", DEMO_CHAINS, ids=lambda p: p.stem)
def test_every_demo_chain_runs(path, cli):
    rc, out, err = cli("budget", str(path))
    assert (rc, err) == (0, "")
    for title in ("Stages as connected", "Interfaces (loading)", "Nodes", "Summary"):
        assert title in out


@pytest.mark.parametrize("path", DEMO_CHAINS, ids=lambda p: p.stem)
def test_json_has_the_issue_2_keys(path, cli):
    rc, out, err = cli("budget", str(path), "--json")
    assert (rc, err) == (0, "")
    d = json.loads(out)
    assert {"gain_db", "f_low_hz", "f_high_hz", "stages", "interfaces", "nodes"} <= set(d)
    assert isinstance(d["gain_db"], float)
    for s in d["stages"]:
        assert {"name", "kind", "zin_ohm", "zout_ohm", "gain"} <= set(s)
    for r in d["interfaces"]:
        assert {"from", "to", "z_source_ohm", "z_load_ohm", "loading_loss_db"} <= set(r)
    for n in d["nodes"]:
        assert {"name", "dc_v", "peak_v", "low_limit_v", "high_limit_v", "headroom_v"} <= set(n)
    # one row per stage, one interface per stage, one node per signal node
    assert len(d["stages"]) == len(d["interfaces"])
    assert d["nodes"][0]["name"] == d["interfaces"][0]["from"]


def _json(cli, *args):
    rc, out, err = cli("budget", DIRECT, "--json", *args)
    assert (rc, err) == (0, "")
    return json.loads(out)


def test_at_moves_the_reference_frequency(cli):
    """hydrophone_direct has its low edge near 700 Hz (2 nF element into 10 kΩ):
    at 100 Hz the gain is lower than at the spec's 1 kHz."""
    base, low = _json(cli), _json(cli, "--at", "100 Hz")
    assert base["f_ref_hz"] == 1e3 and low["f_ref_hz"] == 100.0
    assert low["gain_db"] < base["gain_db"] - 3
    # signal peaks are judged over the declared band (50 Hz … 5 kHz), not at f_ref:
    # they stay where they are, at the band's loudest frequency (its top, on the rising slope)
    assert low["nodes"][-1]["peak_v"] == base["nodes"][-1]["peak_v"]
    assert base["nodes"][-1]["peak_f_hz"] == pytest.approx(5e3, rel=0.01)


def test_span_limits_where_edges_are_found(cli):
    base = _json(cli)
    assert base["f_low_hz"] is not None and base["f_high_hz"] is not None
    # edges are 3 dB below the passband, the largest gain in the 50 Hz … 5 kHz band (at
    # its top, the response rises through it): about 3.2 kHz and 175 kHz, both outside 4 … 10 kHz
    narrow = _json(cli, "--span", "4 kHz:10 kHz", "--at", "5 kHz")
    assert narrow["f_low_hz"] is None and narrow["f_high_hz"] is None      # both edges lie outside
    wide = _json(cli, "--span", "10 Hz:10 MHz")
    assert wide["f_low_hz"] == pytest.approx(base["f_low_hz"], rel=0.02)
    assert wide["f_high_hz"] == pytest.approx(base["f_high_hz"], rel=0.02)
    assert wide["gain_db"] == pytest.approx(base["gain_db"], abs=1e-9)     # f_ref unchanged


def _clean_env(**extra):
    env = {k: v for k, v in os.environ.items() if k not in ("NO_COLOR", "FORCE_COLOR", "CLICOLOR_FORCE")}
    env.update(TERM="xterm-256color", **extra)
    return env


def test_piped_output_is_plain():
    proc = subprocess.run([sys.executable, "-m", "chainplan.cli", "budget", DIRECT], capture_output=True,
                          text=True, cwd=REPO, env=_clean_env(), timeout=60)
    assert proc.returncode == 0 and proc.stderr == ""
    assert ANSI not in proc.stdout
    assert "Summary" in proc.stdout
    assert all(ord(c) < 0x2500 or ord(c) > 0x257F for c in proc.stdout)   # no box-drawing characters


def _run_on_tty(env) -> str:
    """Run the CLI with stdout on a pseudo-terminal and return what it wrote."""
    pty = pytest.importorskip("pty")
    master, slave = pty.openpty()
    proc = subprocess.Popen([sys.executable, "-m", "chainplan.cli", "budget", DIRECT], stdout=slave,
                            stderr=slave, cwd=REPO, env=env)
    os.close(slave)
    chunks = []
    while True:
        try:
            data = os.read(master, 65536)
        except OSError:          # EIO once the child closed the terminal
            break
        if not data:
            break
        chunks.append(data)
    os.close(master)
    assert proc.wait(timeout=60) == 0
    return b"".join(chunks).decode("utf-8")


def test_no_color_is_respected_on_a_terminal():
    coloured = _run_on_tty(_clean_env())
    assert ANSI in coloured                      # a terminal gets styles by default ...
    plain = _run_on_tty(_clean_env(NO_COLOR="1"))
    assert ANSI not in plain                     # ... and none with NO_COLOR
    assert "Summary" in plain
