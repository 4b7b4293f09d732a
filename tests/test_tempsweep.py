"""``chainplan temperature``: the chain from cold to hot in one engine call, the
drift per kelvin (hottest − coldest)/ΔT, and its usage errors."""
from __future__ import annotations

import json

import numpy as np
import pytest

from chainplan.engine.budget import analyse
from chainplan.studies.tempsweep import sweep
from conftest import REPO, chain_from

EF = """
name: ef
temperature: 27 °C
t_nom: 27 °C
rails: {vdd: 5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, dc: 3 V, r: 10k}
stages:
  - {name: ef, kind: emitter_follower, beta: 120, i_s: 2e-15 A, r_e: 7.5k}
  - {name: rl, kind: load, r_in: 10k, ref: 1 V}
"""


def test_sweep_equals_single_analyses_at_each_temperature():
    """The vectorised sweep (temperatures on the sample axis) gives what one budget at each
    temperature gives, and the emitter rises as VBE falls (about +1.8 mV/K here)."""
    chain = chain_from(EF)
    temps = [273.15, 300.15, 323.15]
    res = sweep(chain, temps)
    rows = {r.key: r for r in res.rows}
    for i, t in enumerate(temps):
        single = analyse(chain_from(EF.replace("temperature: 27 °C", f"temperature: {t} K")))
        dc = {n.name: n.dc_v for n in single.nodes}
        assert rows["dc_v.ef"].values[i] == pytest.approx(dc["ef"], abs=1e-9)
        assert rows["gain_db"].values[i] == pytest.approx(single.gain_db, abs=1e-9)
    drift = res.drift(rows["dc_v.ef"])
    assert drift == pytest.approx((rows["dc_v.ef"].values[-1] - rows["dc_v.ef"].values[0]) / 50.0)
    assert 1.5e-3 < drift < 2.3e-3


def test_temperature_command_tables_json_and_caution(cli):
    path = str(REPO / "chains" / "ecg_patient_frontend.yaml")
    rc, out, _ = cli("temperature", path, "--temps", "0 °C, 25 °C, 50 °C", "--json")
    d = json.loads(out)
    assert rc == 0 and d["temperatures_k"] == pytest.approx([273.15, 298.15, 323.15])
    assert d["caution"] and "gain_db" in d["figures"] and "drift_per_k" in d["figures"]["gain_db"]
    rc, out, _ = cli("temperature", path)
    assert rc == 0 and "drift" in out and "/K" in out


@pytest.mark.parametrize("temps, msg", [("25", "no unit"), ("25 °C", "at least two"), ("0 °C, 5 V", "not a temperature"),
                                        ("0 K, 300 K", "outside")])
def test_temperature_command_usage_errors(cli, temps, msg):
    rc, out, err = cli("temperature", str(REPO / "chains" / "ph_probe_dc.yaml"), "--temps", temps)
    assert rc == 2 and out == "" and msg in err


def test_ph_probe_follower_moves_up_when_hot():
    """The pH-probe follower's source level rises from cold to hot (VTO falls, −2 mV/K by
    default, faster than Vov grows with KP ∝ T^−1.5): the issue's +42 mV over 0 → 50 °C is the
    level-1 SPICE figure; with the data-sheet default the rise is of the same sign and size."""
    from chainplan.spec.loader import load_chain
    chain = load_chain(str(REPO / "chains" / "ph_probe_dc.yaml"))
    res = sweep(chain, [273.15, 323.15])
    rise = np.diff({r.key: r for r in res.rows}["dc_v.follower"].values)[0]
    assert 0.03 < rise < 0.09


def test_opamp_gbw_and_noise_carry_a_tempco():
    """An op-amp's GBW written '1 MHz -3000ppm/K' (falling 0.3 %/K, a typical bipolar-input
    figure, common practice) moves the follower's −3 dB edge with it: f_3dB = GBW for a
    unity follower (single-pole op-amp, from memory); en with a tempco moves the noise."""
    spec = """
    name: oa
    t_nom: 25 °C
    rails: {vdd: 5 V}
    source: {name: src, kind: sensor, amplitude: 10 mV, dc: 2.5 V}
    stages:
      - {name: buf, kind: opamp_follower, gbw: 1 MHz -3000ppm/K, a0: 140 dB, en: 10 nV/√Hz 2000ppm/K}
      - {name: m, kind: load, r_in: inf}
    analysis: {f_ref: 1 kHz, f_start: 10 Hz, f_stop: 100 MHz, points: 2001}
    """
    res = sweep(chain_from(spec), [298.15, 348.15])
    rows = {r.key: r for r in res.rows}
    f_hi = rows["f_high_hz"].values
    assert f_hi[0] == pytest.approx(1e6, rel=0.01)
    assert f_hi[1] / f_hi[0] == pytest.approx(1 - 3000e-6 * 50, rel=0.01)
    n = rows["noise_out_vrms"].values
    assert n[1] > n[0]
