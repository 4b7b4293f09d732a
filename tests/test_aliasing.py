"""The ADC sample rate (oversampling gain of quantisation noise, anti-alias
rejection and its requirement) and the spec's declared noise band."""
from __future__ import annotations

import json
import math

import numpy as np
import pytest

from chainplan.engine.budget import evaluate
from chainplan.engine.noise import analyse_noise
from conftest import chain_from

# A 1 kΩ source, an ideal follower, an RC low-pass (1 kΩ, 10 nF) into an ADC with 1 mV rms
# of dither (more than ½ LSB, so the quantisation error is white and spreads over 0…fs/2).
CHAIN = """
name: sampled
rails: {vdd: 3.3 V}
source: {name: src, kind: sensor, amplitude: 100 mV, dc: 1 V, r: 1k}
stages:
  - {name: buf, kind: opamp_follower, gbw: 1 GHz, a0: 200 dB, swing_low: 0 V, swing_high: 0 V}
  - {name: lp, kind: rc_lowpass, r: 1k, c: 10 nF}
  - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: vdd, dither: 1 mV, f_sample: 48 kHz}
analysis: {f_ref: 10 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: 301}
"""
FC_HZ = 1 / (2 * math.pi * 1e3 * 10e-9)        # RC corner 1/(2πRC), 15.9 kHz (common practice)
FS_HZ = 48e3
Q2_12 = (3.3 / 2 ** 12) ** 2 / 12               # q²/12, q = FS/2^N (Kester, Analog Devices MT-001, from memory)


def with_band(text: str, band: str) -> str:
    return text.replace("points: 301}", f"points: 301, noise_band: {band}}}")


def quant_power(text: str, bandwidth=None) -> float:
    r = analyse_noise(evaluate(chain_from(text)), bandwidth)
    return float(r.vrms["adc: quantisation"][0]) ** 2


def test_quantisation_noise_spreads_over_nyquist():
    # in-band share of q²/12 spread flat over 0…fs/2: q²/12·B/(fs/2); oversampling gain
    # 10·log10(fs/(2B)) dB (Kester, Analog Devices MT-001, from memory)
    p = quant_power(with_band(CHAIN, "[100 Hz, 5 kHz]"))
    assert p == pytest.approx(Q2_12 * 4900 / (FS_HZ / 2), rel=1e-9)
    full = quant_power(CHAIN.replace(", f_sample: 48 kHz", ""), (100.0, 5e3))
    assert full == pytest.approx(Q2_12, rel=1e-9)                  # no sample rate: all of q²/12
    assert 10 * math.log10(full / p) == pytest.approx(10 * math.log10(FS_HZ / (2 * 4900)), abs=1e-9)
    # a band reaching past fs/2 holds all of it, never more
    assert quant_power(CHAIN) == pytest.approx(Q2_12, rel=1e-9)
    # without the dither the analog noise (under 1 µV) is far below ½ LSB: the error is not
    # white, no oversampling gain (Widrow & Kollár, from memory)
    assert quant_power(with_band(CHAIN.replace("dither: 1 mV, ", ""), "[100 Hz, 5 kHz]")) == \
        pytest.approx(Q2_12, rel=1e-9)


def test_noise_band_equals_the_bandwidth_option(spec_file, cli):
    rc, out, _ = cli("noise", spec_file(with_band(CHAIN, "[100 Hz, 5 kHz]")), "--json")
    declared = json.loads(out)
    rc2, out2, _ = cli("noise", spec_file(CHAIN, "b.yaml"), "--json", "--bandwidth", "100 Hz:5 kHz")
    option = json.loads(out2)
    assert rc == rc2 == 0
    assert declared["band_hz"] == [100.0, 5000.0]
    for key in ("noise_out_vrms", "snr_db", "enob_bits"):
        assert declared[key] == pytest.approx(option[key], rel=1e-12), key
    # the option still overrides the declared band
    rc3, out3, _ = cli("noise", spec_file(with_band(CHAIN, "[100 Hz, 5 kHz]"), "c.yaml"), "--json",
                       "--bandwidth", "10 Hz:1 kHz")
    assert json.loads(out3)["band_hz"] == [10.0, 1000.0]


def test_alias_rejection_of_a_single_pole_rc():
    from chainplan.engine.aliasing import alias_check
    ev = evaluate(chain_from(CHAIN))
    chk = alias_check(ev)
    h = lambda f: 1 / (1 + 1j * f / FC_HZ)         # noqa: E731  first-order low-pass response (textbook)
    expected = 20 * math.log10(abs(h(10.0)) / abs(h(FS_HZ / 2)))
    assert chk.f_hz == (FS_HZ / 2,)
    assert chk.value_db[0] == pytest.approx(expected, abs=1e-6)
    assert expected == pytest.approx(-20 * math.log10(abs(1 / (1 + 1j * FS_HZ / (2 * FC_HZ)))), abs=1e-5)
    # with a declared band the first frequency folding into it is fs − f_high
    chk_b = alias_check(evaluate(chain_from(with_band(CHAIN, "[100 Hz, 5 kHz]"))))
    assert chk_b.f_hz[chk_b.binding] == FS_HZ - 5e3
    assert chk_b.value_db[0] == pytest.approx(20 * math.log10(abs(h(10.0)) / abs(h(FS_HZ - 5e3))), abs=1e-6)


def test_min_alias_rejection_requirement_and_budget(spec_file, cli):
    from chainplan.studies.requirements import check_chain
    text = CHAIN + "requirements:\n  - min_alias_rejection: 40 dB\n  - min_alias_rejection: 3 dB\n    name: low\n"
    strict, low = check_chain(chain_from(text))
    expected = -20 * math.log10(abs(1 / (1 + 1j * FS_HZ / (2 * FC_HZ))))   # first-order response (textbook)
    assert strict.value[0] == pytest.approx(expected, abs=1e-4)
    assert (strict.passed[0], low.passed[0]) == (False, True)
    assert strict.margin[0] == pytest.approx(expected - 40, abs=1e-4)
    rc, out, _ = cli("budget", spec_file(text), "--json")
    d = json.loads(out)
    assert d["alias"]["rejection_db"] == pytest.approx(expected, abs=1e-4)
    assert d["alias"]["f_alias_hz"] == FS_HZ / 2 and d["alias"]["warnings"] == []


def test_requirement_vectorised_over_samples():
    from chainplan.engine.budget import nominal_params
    from chainplan.studies.requirements import evaluate_requirements
    c = chain_from(CHAIN + "requirements:\n  - min_alias_rejection: 3 dB\n")
    params = nominal_params(c)
    caps = np.array([[1e-9], [10e-9], [47e-9]])          # (samples, 1), as a tolerance run passes them
    params["lp"] = {**params["lp"], "c": caps}
    (r,) = evaluate_requirements(evaluate(c, params))
    fc = 1 / (2 * math.pi * 1e3 * caps[:, 0])
    # first-order response, ratio of |H| at f_ref and fs/2 (textbook)
    expected = 20 * np.log10(np.abs((1 + 1j * FS_HZ / 2 / fc) / (1 + 1j * 10.0 / fc)))
    np.testing.assert_allclose(r.value, expected, atol=1e-6)
    assert r.passed.tolist() == [False, True, True]


def test_warning_when_f_stop_is_below_half_the_sample_rate():
    from chainplan.engine.aliasing import alias_check
    chk = alias_check(evaluate(chain_from(CHAIN.replace("f_stop: 10 MHz", "f_stop: 10 kHz"))))
    assert len(chk.warnings) == 1 and "f_stop" in chk.warnings[0]


def test_span_note_without_a_band(spec_file, cli):
    # f_stop at 10 kHz, below the RC corner: the response there is nowhere near 20 dB down
    narrow = CHAIN.replace("f_stop: 10 MHz", "f_stop: 10 kHz")
    r = analyse_noise(evaluate(chain_from(narrow)))
    assert any("noise_band" in n for n in r.notes)
    rc, out, _ = cli("budget", spec_file(narrow))
    assert rc == 0 and "noise note" in out
    assert not any("noise_band" in n for n in analyse_noise(evaluate(chain_from(CHAIN))).notes)   # 10 MHz: 56 dB down
    banded = analyse_noise(evaluate(chain_from(with_band(narrow, "[10 Hz, 5 kHz]"))))
    assert not any("noise_band" in n for n in banded.notes)


@pytest.mark.parametrize("change, field, words", [
    (("points: 301}", "points: 301, noise_band: [10 Hz, 20 MHz]}"), "analysis.noise_band", ["inside"]),
    (("points: 301}", "points: 301, noise_band: [5 kHz, 100 Hz]}"), "analysis.noise_band", ["below"]),
    (("points: 301}", "points: 301, noise_band: [100 Hz, 5 kV]}"), "analysis.noise_band", ["V"]),
    (("points: 301}", "points: 301, noise_band: 5 kHz}"), "analysis.noise_band", ["two"]),
    (("f_sample: 48 kHz", "f_sample: 48 kV"), "adc.f_sample", []),
    (("f_sample: 48 kHz", "f_sample: 48 kHz ±1%"), "adc.f_sample", ["tolerance"]),
])
def test_bad_input_exits_2(change, field, words, spec_file, cli):
    rc, out, err = cli("budget", spec_file(CHAIN.replace(*change)))
    assert rc == 2 and out == "" and "Traceback" not in err
    assert err.count("\n") == 1 and f": {field}: " in err, err
    for w in words:
        assert w in err, err


def test_alias_requirement_needs_a_sample_rate(spec_file, cli):
    text = CHAIN.replace(", f_sample: 48 kHz", "") + "requirements:\n  - min_alias_rejection: 40 dB\n"
    rc, out, err = cli("check", spec_file(text))
    assert rc == 2 and "f_sample" in err and err.count("\n") == 1


def test_demo_chains_declare_sample_rates():
    from conftest import DEMO_CHAINS
    from chainplan.engine.aliasing import alias_check
    from chainplan.spec.loader import load_chain
    for path in DEMO_CHAINS:
        c = load_chain(str(path))
        if any(st.kind == "adc" and "f_sample" in st.params for st in c.stages):
            chk = alias_check(evaluate(c))
            assert chk is not None and np.all(np.isfinite(chk.rejection_db)), path


def test_span_option_that_leaves_out_the_noise_band_is_a_usage_error(spec_file, cli):
    rc, out, err = cli("budget", spec_file(with_band(CHAIN, "[100 Hz, 5 kHz]")), "--span", "10 kHz:1 MHz",
                       "--at", "10 kHz")
    assert rc == 2 and out == "" and "noise_band" in err and err.count("\n") == 1


def test_span_option_cutting_the_noise_band_says_so():
    c = chain_from(with_band(CHAIN, "[100 Hz, 5 kHz]"))
    c.analysis.f_start_hz = 1e3                    # as --span 1 kHz:… leaves it
    r = analyse_noise(evaluate(c))
    assert r.band_hz == (1e3, 5e3) and any("cut to the span" in n for n in r.notes)
