"""Budget diffs: a spec against itself, two files, one file at git revisions
(in a temporary repository made here), and the bad inputs."""
from __future__ import annotations

import json
import os
import shutil
import subprocess

import pytest

from conftest import DEMO_CHAINS

CHAIN = """\
name: amp
rails:
  vdd: 3.3 V
  vmid: 1.65 V
source:
  kind: sensor
  amplitude: 20 mV
  dc: vmid
  r: 10k
stages:
  - name: gain
    kind: opamp_noninverting
    gbw: 10 MHz
    r_f: {rf}
    r_g: 1k
    ref: vmid
  - name: adc
    kind: adc
    bits: 12
    fs_low: 0 V
    fs_high: vdd
requirements:
  - min_gain: 20 dB
  - min_headroom: 0.9 V
"""


@pytest.mark.parametrize("path", DEMO_CHAINS, ids=lambda p: p.name)
def test_a_spec_against_itself_shows_no_change(cli, path):
    rc, out, _ = cli("compare", str(path), str(path), "--json")
    d = json.loads(out)
    assert rc == 0 and d["parameters"] == [] and d["budget"] == [] and d["requirements"] == []
    assert d["regressions"] == 0 and d["unchanged"] > 0
    rc, out, _ = cli("compare", str(path), str(path))
    assert "no parameter changes and no budget changes" in out


def test_two_files_parameter_and_budget_changes_with_regressions(cli, spec_file):
    old = spec_file(CHAIN.format(rf="19k"), "old.yaml")      # gain 20 (26 dB)
    new = spec_file(CHAIN.format(rf="8k"), "new.yaml")       # gain 9 (19.1 dB): fails min_gain
    rc, out, _ = cli("compare", old, new, "--json")
    d = json.loads(out)
    assert rc == 0
    assert d["parameters"] == [{"where": "gain.r_f", "old": "19k", "new": "8k"}]
    by_key = {c["key"]: c for c in d["budget"]}
    assert by_key["gain_db"]["verdict"] == "changed" and not by_key["gain_db"]["regression"]
    assert by_key["headroom_v.gain"]["verdict"] == "better"          # less gain, more headroom
    req = {r["name"]: r for r in d["requirements"]}
    assert req["min_gain"]["verdict"] == "fails now" and req["min_gain"]["regression"]
    assert req["min_headroom"]["verdict"] == "margin up"
    worse = [c for c in d["budget"] if c["verdict"] == "worse"]       # e.g. SNR, when noise is analysed
    assert all(c["regression"] for c in worse) and d["regressions"] == 1 + len(worse)
    assert cli("compare", old, new, "--strict")[0] == 1
    rc, out, _ = cli("compare", new, old, "--strict")                # the way back regresses headroom
    assert rc == 1 and "worse" in out and "passes now" in out


def test_markdown_for_a_pull_request(cli, spec_file):
    old = spec_file(CHAIN.format(rf="19k"), "old.yaml")
    new = spec_file(CHAIN.format(rf="8k"), "new.yaml")
    rc, out, _ = cli("compare", old, new, "--markdown")
    assert rc == 0 and out.startswith("### chainplan: `amp` budget change")
    assert "| `gain.r_f` | `19k` | `8k` |" in out
    # gains 1 + RF/RG = 20 and 9 → 26.02 dB and 19.08 dB (non-inverting amplifier, common practice)
    assert "| min_gain | pass (26.02 dB) | FAIL (19.08 dB) | **FAILS NOW** |" in out


def _git(repo, *args):
    subprocess.run(["git", *args], cwd=repo, check=True, capture_output=True,
                   env={**os.environ, "GIT_AUTHOR_NAME": "t", "GIT_AUTHOR_EMAIL": "t@example.invalid",
                        "GIT_COMMITTER_NAME": "t", "GIT_COMMITTER_EMAIL": "t@example.invalid"})


@pytest.fixture
def repo(tmp_path):
    if shutil.which("git") is None:
        pytest.skip("git is not installed")
    r = tmp_path / "repo"
    (r / "chains").mkdir(parents=True)
    _git(r, "init", "-q")
    spec = r / "chains" / "amp.yaml"
    for rf in ("19k", "8k"):
        spec.write_text(CHAIN.format(rf=rf), encoding="utf-8")
        _git(r, "add", "chains/amp.yaml")
        _git(r, "commit", "-q", "-m", f"r_f {rf}")
    spec.write_text(CHAIN.format(rf="12k"), encoding="utf-8")      # uncommitted edit
    return r


def test_one_file_at_two_revisions_without_touching_the_working_tree(cli, repo, monkeypatch):
    spec = repo / "chains" / "amp.yaml"
    before = spec.read_text(encoding="utf-8")
    status = subprocess.run(["git", "status", "--porcelain"], cwd=repo, capture_output=True, text=True).stdout
    rc, out, _ = cli("compare", str(spec), "--old", "HEAD~1", "--new", "HEAD", "--json")
    d = json.loads(out)
    assert rc == 0 and d["parameters"] == [{"where": "gain.r_f", "old": "19k", "new": "8k"}]
    assert d["old"].endswith("amp.yaml@HEAD~1") and d["new"].endswith("amp.yaml@HEAD")
    monkeypatch.chdir(repo / "chains")                                 # a relative path, default: HEAD → file
    rc, out, _ = cli("compare", "amp.yaml", "--json")
    assert json.loads(out)["parameters"] == [{"where": "gain.r_f", "old": "8k", "new": "12k"}]
    assert spec.read_text(encoding="utf-8") == before
    assert subprocess.run(["git", "status", "--porcelain"], cwd=repo, capture_output=True,
                          text=True).stdout == status


def test_bad_revisions_and_paths_exit_2_with_one_line(cli, repo, tmp_path, spec_file):
    spec = str(repo / "chains" / "amp.yaml")
    outside = spec_file(CHAIN.format(rf="8k"), "loose.yaml")           # tmp_path is not a git repository
    (repo / "chains" / "new.yaml").write_text(CHAIN.format(rf="8k"), encoding="utf-8")
    for args, msg in (((spec, "--old", "no-such-rev"), "revision 'no-such-rev' does not exist"),
                      ((outside, "--old", "HEAD"), "is not in a git repository"),
                      ((outside,), "is not in a git repository"),
                      ((str(repo / "chains" / "new.yaml"),), "does not exist at revision 'HEAD'"),
                      ((spec, "--old=-x"), "revision '-x' does not exist")):
        rc, out, err = cli("compare", *args)
        assert rc == 2 and out == "", args
        assert msg in err and err.count("\n") == 1 and "Traceback" not in err, (args, err)


def test_a_tiny_move_the_wrong_way_is_not_a_regression():
    """Thresholds relative to the figure's size: 31 µV less headroom out of 0.727 V
    (0.004 %) is not listed, 3.6 mV (0.5 %) is listed as slightly worse but is no
    regression, 27 mV (3.7 %) is worse (common practice: a CI gate must not fail on
    numerical noise of a design change)."""
    from chainplan.studies.diffing import budget_changes, Side
    from conftest import chain_from
    base = chain_from("name: t\nsource: {kind: sensor, amplitude: 1 mV}\nstages:\n  - {name: r, kind: series_r, r: 1k}\n")
    old = Side("old", base, {"headroom_v.r": 0.727000}, {})
    new = Side("new", base, {"headroom_v.r": 0.726969}, {})
    assert budget_changes(old, new) == ([], 1)
    new = Side("new", base, {"headroom_v.r": 0.7234}, {})
    (c,), _ = budget_changes(old, new)
    assert c.verdict == "slightly worse" and not c.regression
    new = Side("new", base, {"headroom_v.r": 0.700}, {})
    (c,), _ = budget_changes(old, new)
    assert c.verdict == "worse" and c.regression
