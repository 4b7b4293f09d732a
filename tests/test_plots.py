"""Figures: the plotted data are the budget's numbers, hazardous chains carry the
safety caution, files are written (PNG and SVG, non-empty, all or nothing)."""
from __future__ import annotations

import math
import textwrap
import xml.etree.ElementTree as ET

import numpy as np
import pytest

pytest.importorskip("matplotlib")

from chainplan.api import budget_for                                    # noqa: E402
from chainplan.render import plots                                      # noqa: E402
from chainplan.render.tables import safety_notice                       # noqa: E402
from chainplan.spec.loader import load_chain                                   # noqa: E402
from chainplan.spec.units import fmt                                         # noqa: E402
from conftest import REPO                                               # noqa: E402

CHAINS = {p: REPO / "chains" / f"{p}.yaml" for p in ("ph_probe_dc", "vibration_fanout", "ecg_patient_frontend")}


@pytest.fixture(scope="module")
def budgets():
    return {k: budget_for(load_chain(str(p))) for k, p in CHAINS.items()}


@pytest.fixture(scope="module")
def levels(budgets):
    return {k: plots.level_diagram(b) for k, b in budgets.items()}


def _by_gid(fig, gid):
    found = [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == gid]
    assert found, f"nothing drawn with gid {gid}"
    return found


@pytest.mark.parametrize("name", CHAINS)
def test_level_diagram_draws_the_budget_numbers(budgets, levels, name):
    b, fig = budgets[name], levels[name]
    ax = fig.axes[0]
    dc = _by_gid(fig, "dc")[0]
    two_port = [n for n in b.nodes]
    assert np.allclose(dc.get_ydata(), [n.dc_v for n in two_port], rtol=0, atol=1e-12)
    for n in b.nodes:
        (bar,) = [p for p in ax.patches if p.get_gid() == f"band:{n.name}"]
        assert bar.get_y() == pytest.approx(n.dc_v - n.peak_v, abs=1e-12)
        assert bar.get_height() == pytest.approx(2 * n.peak_v, abs=1e-12)
        expected = plots.CLIP if n.clips else plots.TIGHT if n is b.tightest_node else plots.BAND
        assert bar.get_facecolor()[:3] == pytest.approx(_rgb(expected))
        for lim in (n.low_v, n.high_v):
            if math.isfinite(lim):
                ys = [ln.get_ydata()[0] for ln in _by_gid(fig, f"limit:{n.name}")]
                assert any(y == pytest.approx(lim) for y in ys)
    for r in b.interfaces:
        (t,) = _by_gid(fig, f"loss:{r.source}>{r.to}")
        words = t.get_text().split()                       # '0.08 dB', '< 0.01 dB' (dB lost)
        if words[0] == "<":
            assert 0 < r.loss_db < 0.005
        else:
            assert float(words[0].replace("−", "-")) == pytest.approx(r.loss_db, abs=0.0051)


def _rgb(hex_colour):
    from matplotlib.colors import to_rgb
    return to_rgb(hex_colour)


def test_clipping_and_headroom_are_marked(budgets, levels):
    b, fig = budgets["ph_probe_dc"], levels["ph_probe_dc"]
    clipped = [n for n in b.nodes if n.clips]
    assert [n.name for n in clipped] == ["follower"]          # the scenario this demo chain shows
    (label,) = _by_gid(fig, "headroom:follower")
    assert label.get_text().startswith("CLIPS")
    ok = next(n for n in b.nodes if not n.clips and math.isfinite(n.headroom_v))
    (label,) = _by_gid(fig, f"headroom:{ok.name}")
    assert label.get_text().split()[-2:] == fmt(ok.headroom_v, "V").split()


def test_gain_plot_lines_are_the_chain_response(budgets):
    b = budgets["vibration_fanout"]
    fig = plots.gain_plot(b)
    for node in b.chain.nodes:
        (line,) = _by_gid(fig, f"gain:{node}")
        expect = 20 * np.log10(np.abs(np.asarray(b.ev.gain(node))[0, 1:]))
        assert np.allclose(line.get_xdata(), b.ev.span) and np.allclose(line.get_ydata(), expect)
    (edge,) = _by_gid(fig, "edge:f_high")
    assert edge.get_xdata()[0] == pytest.approx(b.f_high_hz)
    assert not [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == "edge:f_low"]


def test_noise_plot_shows_density_and_shares(budgets):
    noise = pytest.importorskip("chainplan.engine.noise")
    b = budgets["ecg_patient_frontend"]
    nr = noise.analyse_noise(b.ev)
    fig = plots.noise_plot(nr, b.chain)
    (total,) = _by_gid(fig, "noise:total")
    assert np.allclose(total.get_ydata(), np.asarray(nr.out_density)[0])
    bars = [p for p in fig.axes[1].patches]
    widths = sorted(p.get_width() for p in bars)
    assert np.allclose(widths, sorted(100 * float(s[0]) for s in nr.shares.values()))
    assert sum(widths) == pytest.approx(100.0, abs=1e-6)


def test_montecarlo_histograms_hold_every_valid_sample_and_the_limits(budgets):
    mcmod = pytest.importorskip("chainplan.studies.montecarlo")
    chain = load_chain(str(CHAINS["ecg_patient_frontend"]))
    mc = mcmod.run(chain, 200, seed=3)
    fig = plots.montecarlo_plot(mc)
    assert mc.requirements
    for r in mc.requirements:
        v = np.asarray(r.value)
        bars = _by_gid(fig, f"hist:{r.name}")
        assert sum(p.get_height() for p in bars) == int(np.sum(mc.valid & np.isfinite(v)))
        (lim,) = _by_gid(fig, f"limit:{r.name}")
        assert lim.get_xdata()[0] == pytest.approx(r.limit)


def test_hazardous_chains_carry_the_caution_on_every_figure(budgets, levels):
    b = budgets["ecg_patient_frontend"]
    note = safety_notice(b.chain.hazards)
    figs = [levels["ecg_patient_frontend"], plots.gain_plot(b)]
    for fig in figs:
        (t,) = _by_gid(fig, "safety")
        assert " ".join(t.get_text().split()) == note
    for fig in (levels["vibration_fanout"],):
        assert not [a for a in fig.findobj() if getattr(a, "get_gid", lambda: None)() == "safety"]


def test_save_writes_png_and_svg_with_the_caution(budgets, levels, tmp_path):
    paths = plots.save({"levels": levels["ecg_patient_frontend"]}, str(tmp_path / "pics"), "ecg")
    assert sorted(p.rsplit("/", 1)[1] for p in paths) == ["ecg-levels.png", "ecg-levels.svg"]
    png, svg = (tmp_path / "pics" / "ecg-levels.png"), (tmp_path / "pics" / "ecg-levels.svg")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n" and png.stat().st_size > 10_000
    root = ET.fromstring(svg.read_bytes())
    text = " ".join(t for t in root.itertext())
    assert "CAUTION" in text and "ecg-patch-frontend" in text
    assert plots.figure_bytes(levels["ecg_patient_frontend"], "svg") == svg.read_bytes()   # reproducible
    assert not [p for p in (tmp_path / "pics").iterdir() if p.name.startswith(".")]


def test_cli_plot_writes_files_and_refuses_bad_input(cli, tmp_path):
    path = str(CHAINS["vibration_fanout"])
    rc, out, err = cli("plot", path, "-o", str(tmp_path / "figs"), "--only", "levels")
    assert rc == 0, err
    assert sorted(p.name for p in (tmp_path / "figs").iterdir()) == [
        "vibration_fanout-levels.png", "vibration_fanout-levels.svg"]
    assert out.split() == [str(tmp_path / "figs" / n) for n in ("vibration_fanout-levels.png",
                                                                 "vibration_fanout-levels.svg")]
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("x")
    rc, out, err = cli("plot", path, "-o", str(blocker))
    assert rc == 2 and out == "" and err.count("\n") == 1 and "it is a file" in err
    rc, out, err = cli("plot", path, "-o", str(tmp_path / "x"), "--only", "levels,colours")
    assert rc == 2 and "colours" in err and not (tmp_path / "x").exists()


def test_cli_plot_bad_spec_writes_nothing(cli, spec_file, tmp_path):
    path = spec_file(textwrap.dedent("""
        name: broken
        source: {name: s, kind: sensor, amplitude: 1 mV, r: 4.7q}
        stages:
          - {name: r1, kind: series_r, r: 1k}
    """))
    rc, out, err = cli("plot", path, "-o", str(tmp_path / "figs"))
    assert rc == 2 and "4.7q" in err and err.count("\n") == 1
    assert not (tmp_path / "figs").exists()


def test_dynamics_figure_marks_the_phase_margin_and_settling():
    """The photodiode demo's loop gain with its 38° margin drawn at the crossover, and the
    step response with its settling time (ids in the SVG)."""
    from chainplan.api import budget_for
    from chainplan.render.plots import dynamics_plot, figure_bytes
    from chainplan.spec.loader import load_chain
    from conftest import REPO
    fig = dynamics_plot(budget_for(load_chain(str(REPO / "chains" / "photodiode_tia.yaml"))))
    svg = figure_bytes(fig, "svg").decode()
    for gid in ("loop:tia", "loop-phase:tia", "margin:tia", "step", "settling"):
        assert f'id="{gid}' in svg, gid
    assert "PM 38°" in svg


def test_advice_strip_draws_the_advice_numbers(tmp_path):
    from chainplan.cli import main
    from chainplan.placement.advisor import advise
    a = advise(load_chain(str(REPO / "chains" / "hydrophone_direct.yaml")))
    fig = plots.advice_strip(a)
    ax = fig.axes[0]
    for i in a.interfaces:
        key = f"{i.source}>{i.reader}"
        (lost,) = [p for p in ax.patches if p.get_gid() == f"lost:{key}"]
        assert lost.get_height() == pytest.approx(max(0.0, i.loss_now_db), abs=1e-12)
        back = [p for p in ax.patches if p.get_gid() == f"back:{key}"]
        if i.shown is not None and abs(i.shown.recovered_db) >= 0.005:
            assert back[0].get_height() == pytest.approx(max(0.0, i.shown.recovered_db), abs=1e-12)
            colour = plots.GIVEN_BACK if i.best is not None else plots.NOT_PICKED
            assert back[0].get_facecolor()[:3] == pytest.approx(_rgb(colour))
        (verdict,) = _by_gid(fig, f"verdict:{i.reader}")
        assert verdict.get_text().startswith(i.verdict)
        if i.best is not None:
            assert i.best in verdict.get_text()
    lead = next(i for i in a.interfaces if i.reader == "lead")
    assert lead.best == "nmos_50u_gate"               # the spec's 500 µW keeps the 1.69 mW follower out
    for st in a.chain.all_stages:
        _by_gid(fig, f"stage:{st.name}")
    assert main(["buffers", str(REPO / "chains" / "hydrophone_direct.yaml"), "--plot", str(tmp_path)]) == 0
    for ext in ("png", "svg"):
        assert (tmp_path / f"hydrophone_direct-advice.{ext}").stat().st_size > 1000
