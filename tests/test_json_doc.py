"""docs/json.md names every key each command's JSON carries: every command with
--json runs on every demo chain and each key (at any depth) must appear, in
backticks, in the section of its command (or in the shared section of the
requirement results).  Keys of maps keyed by names (metrics, figures, operating
points, nodes, target kinds) are names, not keys; their values' keys count."""
from __future__ import annotations

import json
import re

import pytest

from conftest import DEMO_CHAINS, REPO

DOC = REPO / "docs" / "json.md"
#: maps whose keys are names (metric keys, node names, target kinds, DC values)
NAME_MAPS = {"metrics", "figures", "operating_point", "node_headroom_v", "from", "margins", "nodes"}
COMMANDS = {
    "chainplan budget --json": ["budget"],
    "chainplan noise --json": ["noise"],
    "chainplan check --json": ["check"],
    "chainplan spread --json": ["spread", "-n", "40"],
    "chainplan rare --json": ["rare", "-n", "200", "--explore", "200"],
    "chainplan compare --json": ["compare", "{other}"],
    "chainplan buffers --json": ["buffers"],
    "chainplan buffers --place --json": ["buffers", "--place"],
    "chainplan accuracy --json": ["accuracy"],
    "chainplan power --json": ["power"],
    "chainplan temperature --json": ["temperature"],
}
SHARED = "Requirement results"


def _sections() -> dict:
    text = DOC.read_text(encoding="utf-8")
    parts = re.split(r"^## ", text, flags=re.M)
    out = {}
    for part in parts[1:]:
        title, _, body = part.partition("\n")
        out[title.strip()] = set(re.findall(r"`([A-Za-z_][A-Za-z0-9_]*)(?:\[\])?`", body + title))
    return out


def _keys(x, out: set, parent: str = "") -> None:
    if isinstance(x, dict):
        for k, v in x.items():
            if parent in NAME_MAPS:             # a mapping keyed by names (a list under such a key is not)
                _keys(v, out, "")               # a name, not a key: look inside its value
                continue
            out.add(k)
            _keys(v, out, k)
    elif isinstance(x, list):
        for v in x:
            _keys(v, out, "")                   # a list of objects: their keys are keys


@pytest.mark.parametrize("title", list(COMMANDS))
def test_every_json_key_is_documented(cli, monkeypatch, title):
    monkeypatch.chdir(REPO)
    sections = _sections()
    section = next((v for k, v in sections.items() if k.startswith(f"`{title}`")), None)
    assert section is not None, f"docs/json.md has no section '## `{title}`'"
    shared = next(v for k, v in sections.items() if k.startswith(SHARED))
    seen, ran = set(), 0
    for path in DEMO_CHAINS:
        args = COMMANDS[title]
        rel = f"chains/{path.name}"
        argv = [args[0], rel] + [("chains/hydrophone_direct.yaml" if a == "{other}" else a) for a in args[1:]]
        rc, out, err = cli(*argv, "--json")
        if rc == 2:                             # e.g. buffers on a chain without candidates
            continue
        assert rc in (0, 1), err
        _keys(json.loads(out), seen)
        ran += 1
    assert ran, title
    missing = sorted(k for k in seen if k not in section and k not in shared)
    assert not missing, f"keys of '{title}' not named in its section of docs/json.md: {missing}"


def test_analysis_defaults_are_documented():
    """docs/spec.md's table of the analysis: defaults says what Analysis() holds."""
    from chainplan.spec.model import Analysis
    from chainplan.spec.units import fmt
    text = (REPO / "docs" / "spec.md").read_text(encoding="utf-8")
    table = text[text.index("| `analysis:` key |"):]
    rows = {m.group(1): m.group(2).strip() for m in re.finditer(r"^\| `(\w+)` \| ([^|]+) \|", table, re.M)}
    a = Analysis()
    assert rows["f_ref"] == f"`{fmt(a.f_ref_hz, 'Hz')}`"
    assert rows["f_start"] == f"`{fmt(a.f_start_hz, 'Hz')}`"
    assert rows["f_stop"] == f"`{fmt(a.f_stop_hz, 'Hz')}`"
    assert rows["points"] == f"`{a.points}`"
    for key in ("output", "noise_band", "signal_band", "mid_band"):
        assert key in rows
