"""Candidates compared on noise like with like: every demo candidate carries
noise data, a candidate without any is marked "no noise data" (no SNR figure,
never the pick on an SNR it does not have), and the SNR change of a candidate
with data is the textbook sum of uncorrelated noise powers."""
from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from chainplan.cli import main
from chainplan.constants import K_BOLTZMANN
from chainplan.placement.advisor import advise
from chainplan.spec.loader import load_chain
from chainplan.spec.parts import candidates_of

REPO = Path(__file__).resolve().parent.parent

CHAIN = """\
name: noise-data-test
temperature: 300 K
rails:
  vdd: 3.3 V
  vmid: 1.65 V
source:
  name: probe
  kind: sensor
  amplitude: 50 mV
  dc: vmid
  r: {r}
stages:
  - name: adc
    kind: adc
    bits: {bits}
    fs_low: 0 V
    fs_high: vdd
    r_in: {r_in}
    c_in: 0 F
    ref: vmid
analysis:
  f_ref: 1 kHz
  f_start: 10 Hz
  f_stop: 1 MHz
  points: 201
  noise_band: [10 Hz, 10 kHz]
candidates:
{cands}"""

OPAMP = """\
  - name: {name}
    kind: opamp_follower
    gbw: 100 MHz
    a0: 120 dB
    r_out: 0 Ω
    swing_low: 10 mV
    swing_high: 10 mV
    cm_low: -0.1 V
    cm_high: -0.1 V
{noise}    cost:
      price: {price}
"""


def chain_with(tmp_path, cands: str, r="2k", r_in="10k", bits=12):
    f = tmp_path / "chain.yaml"
    f.write_text(CHAIN.format(r=r, r_in=r_in, bits=bits, cands=cands), encoding="utf-8")
    return f


def test_every_demo_candidate_has_noise_data():
    # Common practice: a data sheet gives every amplifier's en and in, and a MOSFET's 1/f noise;
    # a candidate without them would look noiseless in the SNR column.
    chain = load_chain(str(REPO / "chains" / "hydrophone_direct.yaml"))       # includes parts/followers.yaml
    cands = candidates_of(chain)
    assert len(cands) >= 8
    for c in cands:
        m, p = c.stage.model, c.stage.params
        assert m.has_noise_data(p), c.name
        assert m.noise_gaps(p) == [], (c.name, m.noise_gaps(p))
        if c.kind == "opamp_follower":
            assert p["en"] > 0 and p["in"] > 0 and p["en_corner"] > 0
        if c.kind == "source_follower":
            assert p["flicker_corner"] > 0


def test_gaps_of_each_kind(tmp_path):
    """What counts as missing: an op-amp without en and in is noiseless only by absent data; a
    MOSFET follower still has its channel's thermal noise (from gm) but no 1/f noise without a
    corner; a sink's noise only counts when the follower has a sink."""
    from chainplan.stages import REGISTRY
    op, sf, ef = REGISTRY["opamp_follower"], REGISTRY["source_follower"], REGISTRY["emitter_follower"]
    assert not op.has_noise_data({"en": 0.0, "in": 0.0}) and op.noise_gaps({"en": 0.0, "in": 0.0}) == ["en", "in"]
    assert op.has_noise_data({"en": 10e-9, "in": 0.0}) and op.noise_gaps({"en": 10e-9, "in": 0.0}) == ["in"]
    p = {"flicker_corner": 0.0, "i_bias": 50e-6, "i_bias_noise": 0.0}
    assert sf.has_noise_data(p) and sf.noise_gaps(p) == ["flicker_corner or kf", "i_bias_noise"]
    assert sf.noise_gaps({**p, "kf": 1e-28, "i_bias_noise": 3e-12}) == []     # the KF/AF form is flicker data too
    assert sf.noise_gaps({"flicker_corner": 1e3, "r_s": 10e3, "i_bias_noise": 0.0}) == []
    assert ef.has_noise_data({"i_bias": 1e-4, "i_bias_noise": 0.0})


def test_a_candidate_without_noise_data_is_marked_and_not_picked_on_it(tmp_path, capsys, monkeypatch):
    # 2 kΩ into 10 kΩ loses 20·log10(12/10) = 1.58 dB (divider): "worth it" for a follower.  The cheap
    # op-amp declares no noise; the dearer one does (8 nV/√Hz, hardly visible behind 12-bit quantisation).
    noisy = "    en: 8 nV/√Hz\n    en_corner: 100 Hz\n    in: 5 fA/√Hz\n"
    f = chain_with(tmp_path, OPAMP.format(name="bare", noise="", price="0.10")
                   + OPAMP.format(name="specified", noise=noisy, price="0.90"))
    (row,) = advise(load_chain(str(f))).interfaces
    assert row.loss_now_db == pytest.approx(20 * math.log10(12 / 10), abs=1e-3)
    assert row.verdict == "worth it"
    assert row.best == "specified"                        # not the cheaper part with its absent noise
    bare, spec = row.candidates
    assert not bare.noise_data and bare.snr_after_db is None and bare.snr_change_db is None
    assert spec.noise_data and spec.snr_change_db is not None and spec.snr_change_db > -1.0
    monkeypatch.setenv("COLUMNS", "120")
    assert main(["buffers", str(f), "--details"]) == 0        # every candidate: the long form
    out = capsys.readouterr().out
    line = next(ln for ln in out.splitlines() if ln.startswith("bare "))
    assert "no noise data" in line
    assert "bare: no noise data (en and in are 0)" in out
    assert main(["buffers", str(f), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    js = {e["candidate"]: e for e in d["interfaces"][0]["candidates"]}
    assert js["bare"]["noise_data"] is False and js["bare"]["snr_change_db"] is None
    assert js["bare"]["noise_gaps"] == ["en", "in"]
    assert js["specified"]["noise_data"] is True and js["specified"]["noise_gaps"] == []


def test_only_candidate_without_data_is_picked_with_the_reason_saying_so(tmp_path):
    (row,) = advise(load_chain(str(chain_with(tmp_path, OPAMP.format(name="bare", noise="", price="0.10"))))).interfaces
    assert row.verdict == "worth it" and row.best == "bare"
    assert "no noise data" in row.reason


def test_snr_change_is_the_sum_of_uncorrelated_noise_powers(tmp_path):
    """A follower with white en behind a 100 kΩ source into an unloaded 24-bit converter: the
    noise at the converter goes from 4kT·Rs·B to (4kT·Rs + en²)·B, so the SNR changes by
    −10·log10(1 + en²/(4kT·Rs)) (uncorrelated powers add; Motchenbacher & Connelly, from memory).
    en² = 4kT·Rs makes it −3.01 dB; quantisation (q²/12 = 3e-15 V²) is 0.02 % of the noise."""
    rs = 100e3
    en = math.sqrt(4 * K_BOLTZMANN * 300.0 * rs)           # 40.7 nV/√Hz
    noise = f"    en: {en:.6e} V/√Hz\n    in: 1e-18 A/√Hz\n"
    f = chain_with(tmp_path, OPAMP.format(name="op", noise=noise, price="1"), r="100k", r_in="inf", bits=24)
    (row,) = advise(load_chain(str(f))).interfaces
    (e,) = row.candidates
    assert e.snr_change_db == pytest.approx(-10 * math.log10(2.0), abs=0.02)
