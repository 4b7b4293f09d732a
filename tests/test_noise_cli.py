"""The noise command, the budget hook's noise keys, and bad noise input."""
from __future__ import annotations

import json

import pytest

from conftest import REPO

BUFFERED = str(REPO / "chains" / "hydrophone_buffered.yaml")

CHAIN = """
name: noisy
temperature: {temp}
rails:
  vdd: 3.3 V
  vmid: 1.65 V
source:
  name: src
  kind: sensor
  amplitude: 10 mV
  dc: vmid
  r: 10k
stages:
  - name: amp
    kind: opamp_noninverting
    gbw: 10 MHz
    r_f: 9k
    r_g: 1k
    ref: vmid
    en: {en}
    en_corner: {corner}
  - name: fet
    kind: source_follower
    kp: 120 µA/V²
    w_over_l: 40
    vth0: 0.3 V
    i_bias: 100 µA
    drain: vdd
    bulk: source
    flicker_corner: {fcorner}
  - name: adc
    kind: adc
    bits: {bits}
    fs_low: 0 V
    fs_high: vdd
"""
GOOD = dict(temp="300 K", en="8 nV/√Hz", corner="100 Hz", fcorner="1 kHz", bits=12)


def spec(**over):
    return CHAIN.format(**{**GOOD, **over})


def test_noise_tables(cli):
    rc, out, err = cli("noise", BUFFERED)
    assert rc == 0, err
    for title in ("Output noise density", "Contributors", "Converter budget", "ENOB", "follower: channel"):
        assert title in out


def test_noise_json_keys_and_density_points(cli, spec_file):
    rc, out, err = cli("noise", spec_file(spec()), "--json", "--spot", "10 Hz, 1 kHz,100kHz")
    assert rc == 0, err
    d = json.loads(out)
    for key in ("noise_out_vrms", "noise_in_vrms", "snr_db", "snr_fs_db", "dynamic_range_db", "enob_bits"):
        assert isinstance(d[key], float), key
    assert [p["f_hz"] for p in d["density"]] == [10.0, 1e3, 1e5]
    # 1/f corners: the density at 10 Hz is above the one at 1 kHz
    assert d["density"][0]["out_v_per_rthz"] > 1.5 * d["density"][1]["out_v_per_rthz"]
    names = [c["name"] for c in d["contributors"]]
    assert {"amp: en", "fet: channel", "adc: quantisation", "src: r thermal"} <= set(names)
    assert sum(c["share"] for c in d["contributors"]) == pytest.approx(1.0)
    assert d["enob_bits"] == pytest.approx((d["snr_fs_db"] - 1.76) / 6.02)


def test_bandwidth_option_narrows_the_noise(cli, spec_file):
    path = spec_file(spec())
    full = json.loads(cli("noise", path, "--json")[1])
    narrow = json.loads(cli("noise", path, "--json", "--bandwidth", "20 kHz")[1])
    band = json.loads(cli("noise", path, "--json", "--bandwidth", "100 Hz:20 kHz")[1])
    assert narrow["band_hz"] == [1.0, 20e3]
    assert band["noise_out_vrms"] < narrow["noise_out_vrms"] < full["noise_out_vrms"]


def test_budget_json_carries_the_noise_keys(cli, spec_file):
    rc, out, err = cli("budget", spec_file(spec()), "--json")
    assert rc == 0, err
    d = json.loads(out)
    for key in ("noise_out_vrms", "noise_in_vrms", "snr_db", "enob_bits"):
        assert key in d
    assert all(set(c) >= {"name", "share"} for c in d["contributors"])
    rc, out, _ = cli("budget", spec_file(spec()))
    assert "ENOB" in out and "SNR of the signal" in out


@pytest.mark.parametrize("args, words", [
    (["--bandwidth", "1 THz:2 THz"], "--bandwidth"),
    (["--bandwidth", "1 kV"], "--bandwidth"),
    (["--spot", "1 kHz,oops"], "--spot"),
])
def test_bad_options(cli, spec_file, args, words):
    rc, out, err = cli("noise", spec_file(spec()), *args)
    assert rc == 2 and out == ""
    assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


@pytest.mark.parametrize("over, field, words", [
    (dict(en="-5 nV/√Hz"), "amp.en", "at least 0"),
    (dict(corner="1 kV"), "amp.en_corner", "frequency"),
    (dict(fcorner="10 nV/√Hz"), "fet.flicker_corner", "frequency"),
    (dict(temp="-3 K"), "temperature", "0 K"),
    (dict(temp="-280 °C"), "temperature", "0 K"),
    (dict(bits=0), "adc.bits", "greater than zero"),
])
def test_bad_noise_input(cli, spec_file, over, field, words):
    text = spec(**over)
    key = field.split(".")[-1] + ":"
    line = next(i for i, ln in enumerate(text.splitlines(), 1) if ln.strip().startswith(key))
    path = spec_file(text)
    for cmd in ("noise", "budget"):
        rc, out, err = cli(cmd, path)
        assert rc == 2 and out == ""
        assert err.startswith(f"chainplan: {path}:{line}: {field}: "), err
        assert words in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err
