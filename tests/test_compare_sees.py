"""compare sees every change: thresholds relative to each figure's size, every figure
that moved listed, one rule for "worse" that --strict applies to every figure of
merit, interfaces matched by their two ends."""
from __future__ import annotations

import json
import math
import shutil

import pytest

from conftest import REPO


@pytest.fixture(scope="module")
def noisier(tmp_path_factory):
    """hydrophone_buffered with the op-amp's en raised from 7 to 9 nV/√Hz (one change)."""
    folder = tmp_path_factory.mktemp("en9")
    shutil.copytree(REPO / "chains" / "parts", folder / "parts")
    old = (REPO / "chains" / "hydrophone_buffered.yaml").read_text(encoding="utf-8")
    assert old.count("en: 7 nV/√Hz") == 1
    (folder / "old.yaml").write_text(old, encoding="utf-8")
    (folder / "new.yaml").write_text(old.replace("en: 7 nV/√Hz", "en: 9 nV/√Hz"), encoding="utf-8")
    return str(folder / "old.yaml"), str(folder / "new.yaml")


def test_one_opamp_noise_change_lists_every_figure_it_moved_and_strict_fails(cli, noisier):
    from chainplan.studies.diffing import load_side, threshold
    old, new = noisier
    rc, out, _ = cli("compare", old, new, "--json")
    d = json.loads(out)
    assert rc == 0 and d["parameters"] == [{"where": "gain.en", "old": "7 nV/√Hz", "new": "9 nV/√Hz"}]
    listed = {c["key"]: c for c in d["budget"]}
    # every figure that moved by more than its threshold is listed, whatever its size
    a, b = load_side(old), load_side(new)
    moved = {k for k in a.metrics if math.isfinite(a.metrics[k]) and
             abs(b.metrics[k] - a.metrics[k]) > threshold(_unit(a, k), a.metrics[k], b.metrics[k])}
    assert moved == set(listed)
    assert {"noise_out_vrms", "noise_in_vrms", "snr_db", "enob_bits"} <= moved
    # the input-referred noise is about a µV (1.39 µV, √∫ S_out/|H|² df over the band) and moves
    # by a sizeable fraction: listed and worse
    rel = listed["noise_in_vrms"]["new"] / listed["noise_in_vrms"]["old"] - 1
    assert listed["noise_in_vrms"]["old"] < 2e-6 and 0.1 < rel < 0.25
    for key in ("noise_out_vrms", "noise_in_vrms", "snr_db", "enob_bits"):
        assert listed[key]["verdict"] == "worse" and listed[key]["regression"], key
    assert d["regressions"] >= 4 and d["unchanged"] == len(a.metrics) - len(moved) + (
        len(a.requirements) - sum(1 for r in d["requirements"]))
    assert cli("compare", old, new, "--strict")[0] == 1
    rc, out, _ = cli("compare", new, old, "--strict")     # the way back is an improvement only
    assert rc == 0 and "worse" not in out


def _unit(side, key):
    from chainplan.studies.diffing import figure_info
    return figure_info(side.chain, key)[1]


def test_interfaces_are_matched_by_their_two_ends(cli):
    """Inserting a follower before 'lead' removes element → lead and adds follower → lead;
    the old loss is never relabelled as the new interface's."""
    rc, out, _ = cli("compare", str(REPO / "chains" / "hydrophone_direct.yaml"),
                     str(REPO / "chains" / "hydrophone_buffered.yaml"), "--json")
    by_key = {c["key"]: c for c in json.loads(out)["budget"]}
    gone, added = by_key["loading_loss_db.element>lead"], by_key["loading_loss_db.follower>lead"]
    assert gone["verdict"] == "removed" and gone["label"] == "loading loss element → lead" and gone["old"] > 18
    assert added["verdict"] == "added" and added["new"] < 1
    assert by_key["loading_loss_db.lead>bias"]["verdict"] == "better"     # same two ends on both sides


def test_every_figure_of_merit_has_a_direction():
    """--strict applies to every figure of merit: a metric without a better direction
    would be reported as 'changed' and never fail; only the gain (a design choice) has none."""
    from chainplan.studies.montecarlo import METRICS
    assert [k for k, (_, _, better) in METRICS.items() if better == 0] == ["gain_db"]


@pytest.mark.parametrize("unit,x,y,listed,worse", [
    ("V", 0.727, 0.726969, False, False),      # 31 µV of 0.727 V: 0.004 %
    ("V", 674e-9, 690e-9, True, True),         # a sub-µV figure moving 2.4 %
    ("V", 674e-9, 676e-9, True, False),        # 0.3 %: listed, not significant
    ("dB", 80.0, 79.96, True, False),          # 0.04 dB
    ("dB", 80.0, 79.9, True, True),
    ("W", 3.63e-3, 3.80e-3, True, True),
    ("Hz", 90.2e3, 90.21e3, False, False),
])
def test_thresholds_are_relative_to_the_figure(unit, x, y, listed, worse):
    from chainplan.studies.diffing import threshold
    assert (abs(y - x) > threshold(unit, x, y)) == listed
    assert (abs(y - x) > threshold(unit, x, y, "worse")) == worse


def test_before_and_after_curves_overlaid_in_plot_and_report(cli, noisier, tmp_path):
    """plot --against draws both revisions' gain and output noise density; the report shows it."""
    pytest.importorskip("matplotlib")
    import numpy as np
    from chainplan.api import budget_for
    from chainplan.engine.noise import analyse_noise
    from chainplan.render.plots import comparison_plot
    from chainplan.spec.loader import load_chain
    old, new = noisier
    b_old, b_new = budget_for(load_chain(old)), budget_for(load_chain(new))
    n_old, n_new = analyse_noise(b_old.ev), analyse_noise(b_new.ev)
    fig = comparison_plot(b_old, b_new, n_old, n_new)
    lines = {ln.get_gid(): ln for ax in fig.axes for ln in ax.get_lines() if ln.get_gid()}
    assert np.allclose(lines["compare:noise:old"].get_ydata(), np.asarray(n_old.out_density)[0])
    assert np.allclose(lines["compare:noise:new"].get_ydata(), np.asarray(n_new.out_density)[0])
    ratio = lines["compare:noise:new"].get_ydata() / lines["compare:noise:old"].get_ydata()
    assert ratio.max() > 1.1                      # the 9 nV/√Hz op-amp is visibly noisier
    assert np.allclose(lines["compare:gain:old"].get_ydata(), lines["compare:gain:new"].get_ydata())
    rc, out, err = cli("plot", new, "--against", old, "--only", "compare", "-o", str(tmp_path))
    assert rc == 0, err
    assert out.split() == [str(tmp_path / "new-compare.png"), str(tmp_path / "new-compare.svg")]
    html = str(tmp_path / "r.html")
    assert cli("report", new, "--against", old, "-o", html)[0] == 0
    assert 'id="fig-compare"' in open(html, encoding="utf-8").read()
    rc, _, err = cli("plot", new, "--only", "compare", "-o", str(tmp_path))
    assert rc == 2 and "--against" in err
