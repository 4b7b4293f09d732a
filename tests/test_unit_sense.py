"""Unit sense: a bare number in a dB field that is more likely a ratio is refused with
the unit to write; amplitudes written as rms, peak or peak-to-peak are converted to
the peak (a sine: peak = √2·rms = pp/2, common practice) and the budget says what was
understood; a wrong source kind lists the source kinds; a stage with no DC path says so."""
from __future__ import annotations

import math

import pytest

from conftest import chain_from

CHAIN = """
name: u
rails: {{vdd: 3.3 V, vmid: 1.65 V}}
source: {{name: s, kind: {kind}, amplitude: {amp}, r: 1k, dc: vmid}}
stages:
  - {{name: g, kind: opamp_noninverting, r_f: 9k, r_g: 1k, a0: {a0}, gbw: 1 MHz, ref: vmid}}
"""


def _spec(kind="sensor", amp="10 mV", a0="120 dB"):
    return CHAIN.format(kind=kind, amp=amp, a0=a0)


@pytest.mark.parametrize("a0,hint", [("1e6", "'120 dB' for a ratio of 1e+06"), ("300", "'300 dB' if you mean"),
                                     ("'200'", "write the unit")])
def test_a_bare_number_in_a_db_field_above_the_bound_is_refused(cli, spec_file, a0, hint):
    rc, out, err = cli("budget", spec_file(_spec(a0=a0)))
    assert rc == 2 and out == "" and "g.a0" in err and "decibels" in err and hint in err, err
    assert err.count("\n") == 1


@pytest.mark.parametrize("a0,db", [("100", 100.0), ("140 dB", 140.0), ("'200 dB'", 200.0)])
def test_plausible_or_explicit_decibels_are_taken(a0, db):
    assert chain_from(_spec(a0=a0)).stage("g").params["a0"] == pytest.approx(db)


@pytest.mark.parametrize("amp,peak", [
    ("14 mV rms", 14e-3 * math.sqrt(2)), ("14 mVrms", 14e-3 * math.sqrt(2)), ("40 mVpp", 20e-3),
    ("40 mV p-p", 20e-3), ("20 mV pk", 20e-3), ("20 mV peak", 20e-3), ("20 mV", 20e-3),
])
def test_amplitudes_in_rms_peak_or_peak_to_peak_become_the_peak(amp, peak):
    assert chain_from(_spec(amp=amp)).source.params["amplitude"] == pytest.approx(peak, rel=1e-12)


def test_an_amplitude_tolerance_follows_the_conversion():
    from chainplan.spec.loader import load_chain_text
    c = load_chain_text(_spec(amp="14 mV rms ±1 mV"), "<t>")
    tol = c.extra["tolerances"][("s", "amplitude")]
    assert tol.abs == pytest.approx(1e-3 * math.sqrt(2))
    c = load_chain_text(_spec(amp="40 mVpp ±5%"), "<t>")
    assert c.source.params["amplitude"] == pytest.approx(20e-3)


def test_the_budget_shows_what_was_understood(cli, spec_file):
    rc, out, _ = cli("budget", spec_file(_spec(amp="14 mV rms")), env={"COLUMNS": "100"})
    assert rc == 0 and "19.8 mV peak (written '14 mV rms', a sine)" in out
    rc, out, _ = cli("budget", spec_file(_spec(amp="20 mV")), env={"COLUMNS": "100"})
    assert "source amplitude" not in out


def test_an_unknown_source_kind_lists_the_source_kinds(cli, spec_file):
    rc, _, err = cli("budget", spec_file(_spec(kind="photodiode")))
    assert rc == 2 and "unknown source kind 'photodiode'" in err
    assert "current_sensor" in err and "sensor" in err and "opamp" not in err and "cable" not in err
    rc, _, err = cli("budget", spec_file(_spec(kind="sensr")))
    assert rc == 2 and "did you mean 'sensor'" in err and "source kinds: bridge, current_sensor, sensor" in err


def test_an_emitter_follower_without_a_bias_path_says_so(cli, spec_file):
    """A 1 GΩ source at 0 V cannot feed the base current of a 200 µA follower: the
    message names the missing DC path, not a nonsense emitter voltage."""
    spec = spec_file("""
        name: nobias
        rails: {vdd: 3.3 V}
        source: {name: element, kind: sensor, amplitude: 10 mV, r: 1G, dc: 0 V}
        stages:
          - {name: ef, kind: emitter_follower, beta: 150, va: 80 V, i_s: 10f, i_bias: 200 µA, r_bias: 1M}
    """)
    rc, out, err = cli("budget", spec)
    assert rc == 2 and out == "" and "no DC bias path" in err and "1.00 GΩ" in err, err
    assert "sits at" not in err
