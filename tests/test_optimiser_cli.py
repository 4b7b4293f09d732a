"""The placement command end to end: tables and JSON, --write of a buffered
spec that the budget command reads back with the original text kept, the
input never touched without --in-place, nothing written when nothing fits."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from chainplan.engine.budget import analyse
from chainplan.cli import main
from chainplan.placement.optimiser import Targets, optimise
from chainplan.spec.loader import load_chain

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture
def project(tmp_path):
    """A copy of the demo chains and the parts file in a project folder of its own."""
    (tmp_path / "chains" / "parts").mkdir(parents=True)
    for name in ("hydrophone_buffered.yaml", "vibration_fanout.yaml", "hydrophone_direct.yaml"):
        shutil.copy(REPO / "chains" / name, tmp_path / "chains" / name)
    shutil.copy(REPO / "chains" / "parts" / "followers.yaml", tmp_path / "chains" / "parts" / "followers.yaml")
    return tmp_path / "chains"


#: hydrophone_buffered's placements for 31.8 dB pick opamp_micro, whose noise (parts/followers.yaml:
#: 55 nV/√Hz) fails the spec's min_snr, which the optimiser does not target: these tests of the
#: writing leave it out (--targets, reported only); test_the_cheapest_plan_is_told_its_snr_fails checks it.
NO_SNR = ["--targets", "min_gain,max_gain,min_headroom,max_buffer_power,max_loading_loss"]


def cli(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_write_keeps_the_text_and_reads_back(project, capsys):
    src = project / "hydrophone_buffered.yaml"
    original = src.read_bytes()
    new = project / "hydrophone_more.yaml"
    code, out, err = cli(["buffers", src, "--min-gain", "31.8 dB", *NO_SNR, "--write", new], capsys)
    assert code == 0, err
    assert src.read_bytes() == original                       # the input is never touched
    text = new.read_text(encoding="utf-8")
    old_lines = original.decode("utf-8").splitlines()
    new_lines = text.splitlines()
    added = [ln for ln in new_lines if ln not in old_lines]
    assert all(ln in new_lines for ln in old_lines)           # comments, order, formatting all kept
    assert added[0].strip().startswith("- name: buf_")
    chain = load_chain(str(new))
    b = analyse(chain)
    assert b.gain_db >= 31.8
    plan = optimise(load_chain(str(src)), Targets(min_gain_db={1e3: 31.8}))
    bufs = {p.buffer for p in plan.placements}
    assert bufs and bufs <= {s.name for s in chain.stages}
    assert f"wrote {new}" in out


def test_write_with_from_fields_repoints_the_reader(project, capsys):
    src = project / "vibration_fanout.yaml"
    new = project / "fan_buffered.yaml"
    code, out, err = cli(["buffers", src, "--min-gain", "19.9 dB", "--cost", "power", "--time-limit", "0",
                          "--write", new], capsys)
    assert code == 0, err
    chain = load_chain(str(new))
    adc = chain.stage("adc")
    assert adc.parent.startswith("buf_")                      # the converter now reads the buffer...
    assert chain.stage(adc.parent).parent == "antialias"      # ...which reads the filter
    assert chain.stage("panel_cable").parent == "gain"        # the other branch is untouched
    assert analyse(chain).gain_db >= 19.9


def test_in_place_rewrites_the_input(project, capsys):
    src = project / "hydrophone_buffered.yaml"
    before = src.read_text(encoding="utf-8")
    code, out, err = cli(["buffers", src, "--min-gain", "31.8 dB", *NO_SNR, "--in-place"], capsys)
    assert code == 0, err
    after = src.read_text(encoding="utf-8")
    assert after != before and "buf_" in after
    assert not list(project.glob(".chainplan-*"))             # no temporary file left behind


def test_nothing_written_when_nothing_fits(project, capsys):
    src = project / "hydrophone_buffered.yaml"
    new = project / "never.yaml"
    code, out, err = cli(["buffers", src, "--min-gain", "60 dB", "--write", new], capsys)
    assert code == 2 and "nothing written" in err
    assert not new.exists()
    code, out, err = cli(["buffers", src, "--min-gain", "60 dB"], capsys)
    # the spec's max_gain is 33 dB: said before any search, both named
    assert code == 1 and "contradict" in out and "60.00 dB" in out and "33.00 dB" in out
    assert "max_gain" in out and "--min-gain" in out
    # a generous time limit: the default (10 s of wall time) runs out on a loaded machine, and the
    # explanation is then "not found within the time limit" instead of the best reachable value
    code, out, err = cli(["buffers", src, "--min-gain", "34 dB", "--targets", "min_headroom", "--time-limit", "0"],
                         capsys)
    assert code == 1 and "cannot be met" in out and "34.00 dB" in out and "best reachable" in out


def test_json_of_a_placement(project, capsys):
    code, out, err = cli(["buffers", project / "hydrophone_buffered.yaml", "--min-gain", "31.8 dB",
                          "--min-headroom", "0.1 V", *NO_SNR, "--json"], capsys)
    d = json.loads(out)
    assert code == 0 and d["feasible"] and d["n_buffers"] == len(d["placements"]) >= 1
    assert d["after"]["gain_db"][0]["db"] >= 31.8 and d["after"]["min_headroom_v"] >= 0.1
    assert {"from", "to", "buffer", "candidate", "power_w", "price"} <= set(d["placements"][0])
    assert d["targets"]["from"]["gain"][0] == "--min-gain"
    # the spec's own requirements, on the result: all met but those left out (reported only)
    assert all(r["passed"] for r in d["requirements"] if r["name"] not in d["targets"]["report_only"])


def test_the_cheapest_plan_is_told_its_snr_fails(project, capsys):
    """Without --targets the spec's min_snr (70 dB) is checked on the plan: the op-amp follower that
    meets the gain brings 55 nV/√Hz (its data sheet figure in the parts file), so the plan fails it and
    the command exits 1 naming it (with a noiseless op-amp, as before its noise data, it passed)."""
    code, out, err = cli(["buffers", project / "hydrophone_buffered.yaml", "--min-gain", "31.8 dB", "--json"],
                         capsys)
    d = json.loads(out)
    assert code == 1 and d["feasible"] and d["placements"][0]["candidate"] == "opamp_micro"
    snr = next(r for r in d["requirements"] if r["name"] == "min_snr")
    assert not snr["passed"] and snr["value"] < 70.0


def test_infeasible_json_names_the_target(project, capsys):
    code, out, err = cli(["buffers", project / "hydrophone_direct.yaml", "--min-gain", "40 dB",
                          "--min-headroom", "0.05 V", "--json"], capsys)
    d = json.loads(out)
    # the spec's own max_gain (33 dB) contradicts --min-gain 40 dB: reported, no search
    assert code == 1 and not d["feasible"] and d["after"] is None and d["search"]["seconds"] == 0.0
    assert len(d["conflicts"]) == 1 and "40.00 dB" in d["conflicts"][0] and "33.00 dB" in d["conflicts"][0]
    code, out, err = cli(["buffers", project / "hydrophone_direct.yaml", "--min-gain", "40 dB",
                          "--min-headroom", "0.05 V", "--targets", "none", "--json"], capsys)
    d = json.loads(out)
    assert code == 1 and not d["feasible"] and d["after"] is None and d["proven"]
    kinds = {s["kind"] for s in d["shortfalls"]}
    assert "gain" in kinds
    gain = next(s for s in d["shortfalls"] if s["kind"] == "gain")
    assert gain["proven"] and "worst interface" in gain["limited_by"]
    assert {"max_gain", "min_gain", "max_loading_loss"} <= set(d["targets"]["report_only"])


def test_write_outside_the_project_is_refused(project, tmp_path_factory, capsys):
    elsewhere = tmp_path_factory.mktemp("elsewhere") / "x.yaml"
    code, out, err = cli(["buffers", project / "hydrophone_buffered.yaml", "--min-gain", "31.8 dB",
                          "--write", elsewhere], capsys)
    assert code == 2 and "would not read back" in err and not elsewhere.exists()


def test_write_to_another_folder_of_the_project_moves_the_include(project, capsys):
    (project.parent / ".git").mkdir()                          # the project is the git work tree
    (project.parent / "variants").mkdir()
    new = project.parent / "variants" / "more.yaml"
    code, out, err = cli(["buffers", project / "hydrophone_buffered.yaml", "--min-gain", "31.8 dB", *NO_SNR,
                          "--write", new], capsys)
    assert code == 0, err
    assert "include: [../chains/parts/followers.yaml]" in new.read_text(encoding="utf-8")
    assert analyse(load_chain(str(new))).gain_db >= 31.8


def test_a_candidate_with_its_own_bias_is_written_as_two_blocks(project, capsys):
    """The element of hydrophone_direct.yaml sits at 0 V: only a follower behind its own gate bias
    can buffer it; --write inserts its ac_coupling and the follower, the pair reading back as one."""
    src = project / "hydrophone_direct.yaml"
    new = project / "direct_buffered.yaml"
    code, out, err = cli(["buffers", src, "--min-gain", "30 dB", "--json", "--write", new], capsys)
    assert code == 0, err
    d = json.loads(out)
    (pl,) = d["placements"]
    assert pl["candidate"].endswith("_gate")
    chain = load_chain(str(new))
    buf = chain.stage(pl["buffer"])
    bias = chain.stage(buf.parent)
    assert bias.kind == "ac_coupling" and bias.name == pl["buffer"] + "_bias"
    assert bias.parent == pl["from"] and chain.stage(pl["to"]).parent == buf.name
    assert bias.params["r_bias"] == pytest.approx(100e6) and bias.params["bias"] == pytest.approx(3.3)
    assert bias.raw["__rails__"]["bias"] == "vdd"                  # written by rail name, as in the parts file
    after = analyse(chain)
    assert after.gain_db == pytest.approx(d["after"]["gain_db"][0]["db"], abs=1e-9)
    assert after.gain_db >= 30.0
