"""Shared test fixtures: chains from YAML text, spec files on disk, the CLI in-process."""
from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
DEMO_CHAINS = sorted((REPO / "chains").glob("*.yaml"))


#: One node ('feed') driving three branches: RC into an ADC, a loaded divider, a cable.
FAN_OUT_SPEC = """
name: fan
source: {name: src, kind: sensor, amplitude: 1 V, r: 2k, c: 1 nF}
stages:
  - {name: feed, kind: series_r, r: 1k}
  - {name: lp, kind: rc_lowpass, from: feed, r: 4.7k, c: 10 nF}
  - {name: adc, kind: adc, from: lp, bits: 12, fs_low: -5 V, fs_high: 5 V, r_in: 50k, c_in: 20 pF}
  - {name: div, kind: divider, from: feed, r_top: 10k, r_bottom: 10k}
  - {name: meter, kind: load, from: div, r_in: 20k}
  - {name: cab, kind: cable, from: feed, length: 10 m, c_per_m: 100 pF/m, r_per_m: 0.1 Ω/m}
"""


def par(*zs):
    """Parallel combination of impedances (numbers or arrays)."""
    return 1 / sum(1 / z for z in zs)


def chain_from(text: str, path: str = "<test>"):
    """A validated Chain from (indented) YAML text."""
    from chainplan.spec.loader import load_chain_text
    return load_chain_text(textwrap.dedent(text), path)


@pytest.fixture
def spec_file(tmp_path):
    """Write YAML text (dedented) to a file and return its path as a string."""
    def write(text: str, name: str = "chain.yaml") -> str:
        p = tmp_path / name
        p.write_text(textwrap.dedent(text), encoding="utf-8")
        return str(p)
    return write


@pytest.fixture
def cli(capsys, monkeypatch):
    """Run ``chainplan.cli.main(args)`` in-process; returns (exit code, stdout, stderr)."""
    from chainplan.cli import main

    def run(*args: str, env: dict | None = None):
        for k, v in (env or {}).items():
            monkeypatch.setenv(k, v)
        rc = main(list(args))
        out, err = capsys.readouterr()
        return rc, out, err
    return run
