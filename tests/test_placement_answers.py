"""The placement command always answers: the new user's accelerometer chain
(piezo on 5 m of coax into a JFET-style follower, band-edge requirements) and
the ECG demo asked for a gain it cannot reach (48 and 60 dB) get a proven
answer — the best reachable gain and what limits it — instead of a stall;
contradictory targets are said before any search; a tight time budget gives
the best plan found so far, marked not proven, with its gap; the spec's
requirements are honoured (hydrophone_direct's max_loading_loss and
max_buffer_power) or the command exits 1 naming them.  No wall-clock asserts:
the figures are in benchmarks/bench_optimiser.py; the generous time limits
here only turn a stall into a failure."""
from __future__ import annotations

import json
from pathlib import Path

import pytest

from chainplan.cli import main
from chainplan.placement.optimiser import Targets, contradictions, optimise, targets_from_requirements
from chainplan.spec.loader import load_chain
from chainplan.spec.parts import load_parts

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
ACCEL = HERE / "fixtures" / "accelerometer_jfet.yaml"
ECG = REPO / "chains" / "ecg_patient_frontend.yaml"
PARTS = REPO / "chains" / "parts" / "followers.yaml"


def cli(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_accelerometer_with_band_edges_answers(capsys):
    code, out, err = cli(["buffers", ACCEL, "--min-gain", "33 dB", "--time-limit", "30", "--json"], capsys)
    d = json.loads(out)
    assert code == 1 and not d["feasible"]
    # an answer within the limit either way: proven (nothing fits; about 2 s of CPU on a quiet
    # machine), or — on a machine too busy to finish in 30 s — stopped on time, saying so
    # (the contract of --time-limit; no verdict here depends on the machine's speed)
    assert d["proven"] or d["search"]["stopped"] == "time"
    assert set(d["targets"]["from"]) == {"gain", "headroom", "f_high", "f_low"}
    # the explanation is bounded by the time limit: each shortfall is a reachable value or says it
    # was not found in time (the band edges here are measured from the peak, where the exact
    # search prunes little; see chainplan/placement/band.py)
    gain = next(s for s in d["shortfalls"] if s["kind"] == "gain")
    if "dB" in gain["best_reachable"]:
        best = float(gain["best_reachable"].split(" dB")[0].split()[-1])
        assert 26.42 < best < 33.0
    else:
        assert "time limit" in gain["best_reachable"] and not gain["proven"]
    code, out, err = cli(["buffers", ACCEL, "--min-gain", "28 dB", "--time-limit", "0", "--json"], capsys)
    d = json.loads(out)
    assert code == 0 and d["feasible"] and d["proven"] and d["gap"] == 0.0
    assert d["after"]["gain_db"][0]["db"] >= 28.0
    assert d["after"]["f_low_hz"] <= 5.0 and d["after"]["f_high_hz"] >= 4000.0
    assert all(r["passed"] for r in d["requirements"])


@pytest.mark.parametrize("ask", [48.0, 60.0])
def test_ecg_unreachable_gain_says_the_best_reachable(ask):
    chain = load_chain(ECG)
    load_parts(chain, PARTS)
    chain.analysis.points = 201      # a coarser grid than the demo's 501: the same verdicts, 2.5x less work
    t = targets_from_requirements(chain, Targets(min_gain_db={chain.analysis.f_ref_hz: ask}))
    plan = optimise(chain, t, time_limit=None)      # no time limit: the answer cannot depend on the machine's load
    assert not plan.feasible and plan.proven
    gain = next(s for s in plan.shortfalls if s.kind == "gain")
    assert gain.proven and gain.with_others
    # the same best reachable value whatever was asked: 46 dB (the spec's) is met as it is, 48 is not
    assert -ask + 46.0 < gain.best_value < 0.0
    assert 46.0 < ask + gain.best_value < 48.0
    assert "worst interface" in gain.limiter


def test_contradictory_targets_are_said_before_any_search(capsys):
    t = Targets(min_gain_db={1e3: 45.0}, max_gain_db={1e3: 33.0})
    t.add_origin("gain", "--min-gain")
    t.add_origin("max_gain", "requirement 'max_gain'")
    (line,) = contradictions(t)
    assert "45.00 dB" in line and "33.00 dB" in line and "--min-gain" in line and "max_gain" in line
    code, out, err = cli(["buffers", REPO / "chains" / "hydrophone_direct.yaml", "--min-gain", "45 dB"], capsys)
    assert code == 1 and "contradict" in out and "nothing was searched" in out


def test_a_tight_time_limit_gives_the_best_plan_so_far_with_its_gap():
    chain = load_chain(ACCEL)
    t = targets_from_requirements(chain, Targets(min_gain_db={chain.analysis.f_ref_hz: 28.0}))
    exact = optimise(chain, t, time_limit=None)
    assert exact.feasible and exact.proven and exact.gap == 0.0
    quick = optimise(chain, t, time_limit=1e-6)
    assert quick.stats["stopped"] == "time" and not quick.proven
    if quick.feasible:                     # the heuristic's plan: real, at least as dear, with its gap
        assert quick.measured.meets() and quick.cost >= exact.cost - 1e-12
        assert quick.gap == pytest.approx(quick.cost - quick.lower_bound) and quick.lower_bound <= exact.cost
    small = optimise(chain, t, time_limit=None, max_labels=5)
    assert small.stats["stopped"] == "memory" and not small.proven


def test_hydrophone_direct_honours_its_spec(capsys):
    """max_loading_loss (1 dB) is a target now: the follower goes at the element, not after the lead."""
    code, out, err = cli(["buffers", REPO / "chains" / "hydrophone_direct.yaml", "--place", "--json"], capsys)
    d = json.loads(out)
    assert code == 0 and d["feasible"] and d["targets"]["max_loading_loss_db"] == 1.0
    assert d["after"]["worst_loading_loss_db"] <= 1.0 and d["after"]["follower_power_w"] <= 500e-6
    assert [p["to"] for p in d["placements"]] == ["lead"]
    assert all(r["passed"] for r in d["requirements"])
    # left out of the targets, the loading loss is only reported; a failing requirement that was
    # not left out makes the exit status 1
    code, out, err = cli(["buffers", REPO / "chains" / "hydrophone_direct.yaml", "--targets", "min_gain,max_gain",
                          "--json"], capsys)
    d = json.loads(out)
    assert "max_loading_loss" in d["targets"]["report_only"] and d["targets"]["max_loading_loss_db"] is None
    assert d["feasible"]
    failing = {r["name"] for r in d["requirements"] if not r["passed"]}
    assert code == (1 if failing - set(d["targets"]["report_only"]) else 0)


def test_targets_option_is_checked(capsys):
    code, out, err = cli(["buffers", REPO / "chains" / "hydrophone_direct.yaml", "--targets", "min_gian"], capsys)
    assert code == 2 and "min_gian" in err and "min_gain" in err
