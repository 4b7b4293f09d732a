"""Shared test fixtures: chains from YAML text, spec files on disk, the CLI in-process."""
from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parent.parent
DEMO_CHAINS = sorted((REPO / "chains").glob("*.yaml"))


def chain_from(text: str, path: str = "<test>"):
    """A validated Chain from (indented) YAML text."""
    from chainplan.spec import load_chain_text
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
