"""Noise analysis against handbook values and closed-form results (each
source named beside its check)."""
from __future__ import annotations

import numpy as np
import pytest

from chainplan.engine.budget import evaluate, nominal_params
from chainplan.engine.noise import analyse_noise, band_weights, density_at
from chainplan.stages.base import K_BOLTZMANN, Q_ELECTRON
from chainplan.stages.noise_sources import thermal_v
from conftest import chain_from


def noise_of(text: str, bandwidth_hz=None):
    ev = evaluate(chain_from(text))
    return ev, analyse_noise(ev, bandwidth_hz)


def contributor_density(ev, name, f_hz):
    """Output density (V/√Hz) of one contributor at f_hz, and |gain| there."""
    _, gain, gens = density_at(ev, [f_hz])
    return float(np.sqrt(dict(gens)[name][0, 0])), float(gain[0, 0])


def assert_densities(ev, expect, f_hz=1e3):
    for name, value in expect.items():
        assert contributor_density(ev, name, f_hz)[0] == pytest.approx(value, rel=1e-6), name


# -- resistor thermal noise ---------------------------------------------------------

def test_resistor_thermal_density_handbook_value():
    # 1 kΩ at 300 K ≈ 4.07 nV/√Hz (handbook value, e.g. Horowitz & Hill, *The Art
    # of Electronics*, noise chapter, from memory); CODATA 2019 Boltzmann constant.
    assert np.sqrt(thermal_v(1e3, 300.0)) == pytest.approx(4.07e-9, rel=1e-3)
    ev, res = noise_of("""
        name: r1k
        temperature: 300 K
        source: {name: src, kind: sensor, amplitude: 1 mV, r: 1k}
        stages:
          - {name: open, kind: load}
        analysis: {f_start: 1 Hz, f_stop: 100 kHz, points: 101}
        """)
    np.testing.assert_allclose(res.out_density[0], 4.07e-9, rtol=1e-3)
    # white noise over 1 Hz … 100 kHz: 4kTR·(f2 − f1), exact for the trapezoid rule
    assert res.out_vrms[0] == pytest.approx(np.sqrt(4 * K_BOLTZMANN * 300 * 1e3 * (1e5 - 1)), rel=1e-12)


@pytest.mark.parametrize("r, f_stop", [("10k", "100 GHz"), ("1meg", "1 GHz")])
def test_kt_over_c_of_an_rc_lowpass(r, f_stop):
    # kT/C: about 64 µV rms for 1 pF at 300 K, whatever the resistance (handbook
    # result, e.g. Razavi, *Design of Analog CMOS Integrated Circuits*, ch. 7, from memory).
    _, res = noise_of(f"""
        name: ktc
        temperature: 300 K
        source: {{name: src, kind: sensor, amplitude: 1 mV}}
        stages:
          - {{name: rc, kind: rc_lowpass, r: {r}, c: 1 pF}}
        analysis: {{f_start: 1 Hz, f_stop: {f_stop}, points: 1201}}
        """)
    assert res.out_vrms[0] == pytest.approx(64.4e-6, rel=5e-3)
    assert res.out_vrms[0] == pytest.approx(np.sqrt(K_BOLTZMANN * 300 / 1e-12), rel=2e-3)


def test_source_impedance_noise_is_4kt_re_zs():
    # Nyquist: the noise EMF of an impedance is 4kT·Re(Z) (Nyquist, Phys. Rev. 32, 1928);
    # R ‖ C at f = 1/(2πRC) has Re(Z) = R/2.
    ev, _ = noise_of("""
        name: rc-source
        temperature: 300 K
        source: {name: src, kind: sensor, amplitude: 1 mV, r: 1meg, c: 159.1549 pF}
        stages:
          - {name: open, kind: load}
        """)
    d, _ = contributor_density(ev, "src: r thermal", 1e3)
    assert d == pytest.approx(np.sqrt(4 * K_BOLTZMANN * 300 * 0.5e6), rel=1e-5)


# -- converter ---------------------------------------------------------------------

@pytest.mark.parametrize("bits", [8, 12, 16, 24])
def test_ideal_adc_snr_and_enob(bits):
    # ideal N-bit converter, full-scale sine: SNR = 6.02·N + 1.76 dB (Kester, Analog
    # Devices tutorial MT-001, from memory); exactly 10·log10(1.5·4^N).
    _, res = noise_of(f"""
        name: ideal-adc
        rails: {{vdd: 3.3 V}}
        source: {{name: src, kind: sensor, amplitude: 1 V, dc: 1.65 V}}
        stages:
          - {{name: adc, kind: adc, bits: {bits}, fs_low: 0 V, fs_high: vdd}}
        """)
    assert res.converter == "adc"
    assert res.snr_fs_db[0] == pytest.approx(6.02 * bits + 1.76, abs=0.01 * bits / 8 + 0.005)
    assert res.snr_fs_db[0] == pytest.approx(10 * np.log10(1.5 * 4.0 ** bits), abs=1e-9)
    assert res.enob_bits[0] == pytest.approx(bits, abs=0.002 * bits)
    # the node sits at mid-scale: the dynamic range is the full-scale SNR
    assert res.dynamic_range_db[0] == pytest.approx(res.snr_fs_db[0], abs=1e-9)
    # a 1 V peak sine against the same noise
    q = 3.3 / 2 ** bits
    assert res.snr_db[0] == pytest.approx(20 * np.log10((1 / np.sqrt(2)) / (q / np.sqrt(12))), abs=1e-9)


def test_converter_noise_adds_in_power():
    # independent noise powers add (common practice): q²/12 + noise_rms².
    _, res = noise_of("""
        name: adc-noise
        source: {name: src, kind: sensor, amplitude: 1 V, dc: 1 V}
        stages:
          - {name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: 2 V, noise_rms: 300 µV}
        """)
    q = 2 / 2 ** 12
    assert res.out_vrms[0] == pytest.approx(np.sqrt(q * q / 12 + 300e-6 ** 2), rel=1e-12)
    assert res.shares["adc: converter noise"][0] == pytest.approx(300e-6 ** 2 / (q * q / 12 + 300e-6 ** 2))


# -- op-amp stages: noise gain (Franco, *Design with Operational Amplifiers*,
#    noise chapter, from memory) --------------------------------------------------

OPAMP = "gbw: 100 GHz, a0: 200 dB, en: 10 nV/√Hz, in: 2 pA/√Hz, v_neg: -5 V"


def test_noninverting_noise_gain():
    # ideal op-amp, noise gain G = 1 + RF/RG: en, the source's EMF and in+·Rs see G,
    # RG's EMF sees RF/RG, RF's EMF sees 1, in− sees RF.
    ev, _ = noise_of(f"""
        name: noninv
        temperature: 300 K
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV, r: 100k}}
        stages:
          - {{name: amp, kind: opamp_noninverting, {OPAMP}, r_f: 9k, r_g: 1k}}
        """)
    four_kt = 4 * K_BOLTZMANN * 300
    expect = {"amp: en": 10e-9 * 10, "amp: in+": 2e-12 * 100e3 * 10, "amp: in−": 2e-12 * 9e3,
              "amp: r_g thermal": np.sqrt(four_kt * 1e3) * 9, "amp: r_f thermal": np.sqrt(four_kt * 9e3),
              "src: r thermal": np.sqrt(four_kt * 100e3) * 10}
    assert_densities(ev, expect)


def test_inverting_noise_gain():
    # inverting: en sees 1 + RF/(RG + Rs); RG's and the source's EMF see RF/(RG + Rs);
    # RF's EMF sees 1; in− sees RF (Franco, from memory).
    ev, _ = noise_of(f"""
        name: inv
        temperature: 300 K
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV, r: 1k}}
        stages:
          - {{name: amp, kind: opamp_inverting, {OPAMP}, r_f: 30k, r_g: 2k}}
        """)
    four_kt = 4 * K_BOLTZMANN * 300
    expect = {"amp: en": 10e-9 * (1 + 30 / 3), "amp: in−": 2e-12 * 30e3,
              "amp: r_g thermal": np.sqrt(four_kt * 2e3) * 10, "amp: r_f thermal": np.sqrt(four_kt * 30e3),
              "src: r thermal": np.sqrt(four_kt * 1e3) * 10}
    assert_densities(ev, expect)


def test_flicker_corner_integral():
    # en²·(1 + fc/f) integrates to en²·((f2 − f1) + fc·ln(f2/f1)) (data-sheet 1/f
    # convention, Franco, from memory); a unity follower passes it unchanged.
    ev, res = noise_of(f"""
        name: flicker
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV}}
        stages:
          - {{name: buf, kind: opamp_follower, gbw: 100 GHz, a0: 200 dB, en: 10 nV/√Hz, en_corner: 1 kHz,
              v_neg: -5 V}}
        analysis: {{f_start: 1 Hz, f_stop: 100 kHz, points: 2001}}
        """)
    d, _ = contributor_density(ev, "buf: en", 10.0)
    assert d == pytest.approx(10e-9 * np.sqrt(1 + 1e3 / 10), rel=1e-6)
    exact = 1e-16 * ((1e5 - 1) + 1e3 * np.log(1e5))
    assert res.out_vrms[0] ** 2 == pytest.approx(exact, rel=2e-3)


# -- devices -------------------------------------------------------------------------

MOS = "kp: 100 µA/V², w_over_l: 20, vth0: 0.6 V, lambda: 0.05 /V"


@pytest.mark.parametrize("gamma, factor", [(None, 2 / 3), ("1", 1.0)])
def test_mosfet_channel_noise_referred_to_the_gate(gamma, factor):
    # gate-referred channel noise 4kTγ/gm, γ = 2/3 long channel (Razavi, ch. 7, from memory)
    extra = f", noise_gamma: {gamma}" if gamma else ""
    ev, _ = noise_of(f"""
        name: cs
        temperature: 300 K
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV, dc: 1.2 V}}
        stages:
          - {{name: cs, kind: common_source, {MOS}, r_d: 10k{extra}}}
        """)
    gm = float(ev.dc.ops["cs"].values["gm_s"])
    d, g = contributor_density(ev, "cs: channel", 1e3)
    assert (d / g) ** 2 == pytest.approx(4 * K_BOLTZMANN * 300 * factor / gm, rel=1e-9)


def test_bjt_collector_shot_noise_referred_to_the_base():
    # collector shot 2qIC referred to the base: 2qIC/gm² = 2q·VT²/IC (Gray & Meyer,
    # *Analysis and Design of Analog Integrated Circuits*, noise chapter, from memory)
    ev, _ = noise_of("""
        name: ce
        temperature: 300 K
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 1 mV, dc: 0.7 V}
        stages:
          - {name: ce, kind: common_emitter, beta: 100, i_s: 1e-15 A, r_c: 2k}
        """)
    ic = float(ev.dc.ops["ce"].values["ic_a"])
    vt = K_BOLTZMANN * 300 / Q_ELECTRON
    d, g = contributor_density(ev, "ce: collector shot", 1e3)
    # an ideal source: the correlated base-current part (1/β) sees no impedance
    assert (d / g) ** 2 == pytest.approx(2 * Q_ELECTRON * vt ** 2 / ic, rel=1e-9)


def test_current_noise_into_a_high_source_impedance():
    # in·Rs: a current noise into the source impedance becomes a voltage (common
    # practice); 1 pA/√Hz into 10 MΩ is 10 µV/√Hz at a unity follower.
    ev, _ = noise_of("""
        name: hi-z
        rails: {vdd: 5 V}
        source: {name: src, kind: sensor, amplitude: 1 mV, r: 10meg}
        stages:
          - {name: buf, kind: opamp_follower, gbw: 100 GHz, a0: 200 dB, in: 1 pA/√Hz, v_neg: -5 V}
        """)
    d, _ = contributor_density(ev, "buf: in+", 1e3)
    assert d == pytest.approx(1e-12 * 1e7, rel=1e-6)


# -- integration and bookkeeping -------------------------------------------------------

WHITE = """
name: white
temperature: 300 K
source: {name: src, kind: sensor, amplitude: 1 mV, r: 1k}
stages:
  - {name: open, kind: load}
analysis: {f_start: 1 Hz, f_stop: 1 MHz, points: 301}
"""


@pytest.mark.parametrize("band, width", [(10e3, 10e3 - 1), ((100.0, 20e3), 20e3 - 100), ((1e5, 1e9), 1e6 - 1e5)])
def test_brick_wall_bandwidth(band, width):
    # white noise over a brick-wall band: density²·width (definition of a PSD)
    _, res = noise_of(WHITE, band)
    assert res.out_vrms[0] ** 2 == pytest.approx(4 * K_BOLTZMANN * 300 * 1e3 * width, rel=1e-12)


def test_band_weights_integrate_a_line_exactly():
    f = np.geomspace(1, 1e3, 37)
    w = band_weights(f, 3.3, 470.0)
    assert w @ (2 * f + 1) == pytest.approx((470 ** 2 - 3.3 ** 2) + (470 - 3.3), rel=1e-12)


def test_band_outside_the_span_is_refused():
    with pytest.raises(ValueError):
        noise_of(WHITE, (2e6, 3e6))


def test_shares_sum_to_one_and_rank():
    _, res = noise_of(f"""
        name: mix
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV, r: 10k}}
        stages:
          - {{name: amp, kind: opamp_noninverting, {OPAMP}, r_f: 9k, r_g: 1k}}
          - {{name: rc, kind: rc_lowpass, r: 1k, c: 1 nF}}
        """)
    assert sum(v[0] for v in res.shares.values()) == pytest.approx(1.0, rel=1e-12)
    shares = [res.shares[n][0] for n in res.ranked]
    assert shares == sorted(shares, reverse=True)
    assert res.out_vrms[0] ** 2 == pytest.approx(sum(v[0] ** 2 for v in res.vrms.values()), rel=1e-12)
    assert res.out_over_gain_ref_vrms[0] == pytest.approx(res.out_vrms[0] / res.gain_ref[0])


def test_samples_run_through_the_same_path():
    # arrays shaped (samples, 1) give, row by row, what separate nominal runs give
    chain = chain_from(f"""
        name: samples
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV, r: 10k}}
        stages:
          - {{name: amp, kind: opamp_noninverting, {OPAMP}, r_f: 9k, r_g: 1k}}
          - {{name: adc, kind: adc, bits: 12, fs_low: -2 V, fs_high: 2 V}}
        """)
    values = np.array([[1e3], [10e3], [100e3]])
    params = nominal_params(chain)
    params["src"] = {**params["src"], "r": values}
    batch = analyse_noise(evaluate(chain, params))
    for i, r in enumerate(values[:, 0]):
        p = nominal_params(chain)
        p["src"] = {**p["src"], "r": r}
        one = analyse_noise(evaluate(chain, p))
        for attr in ("out_vrms", "in_vrms", "snr_db", "snr_fs_db", "enob_bits", "dynamic_range_db"):
            assert getattr(batch, attr)[i] == pytest.approx(getattr(one, attr)[0], rel=1e-12), attr
        np.testing.assert_allclose(batch.out_density[i], one.out_density[0], rtol=1e-12)


def test_samples_where_only_noise_data_vary():
    # a per-sample en leaves the gain one row wide; the noise still has one row per sample
    chain = chain_from(f"""
        name: en-spread
        rails: {{vdd: 5 V}}
        source: {{name: src, kind: sensor, amplitude: 1 mV}}
        stages:
          - {{name: amp, kind: opamp_noninverting, {OPAMP}, r_f: 0, r_g: 1k}}
          - {{name: adc, kind: adc, bits: 24, fs_low: -2 V, fs_high: 2 V, noise_rms: 1 nV}}
        analysis: {{f_start: 1 Hz, f_stop: 10 kHz, points: 201}}
        """)
    params = nominal_params(chain)
    params["amp"] = {**params["amp"], "en": np.array([[5e-9], [10e-9]]), "in": 0.0}
    ev = evaluate(chain, params)
    res = analyse_noise(ev)
    # unity gain (RF = 0): en over 1 Hz … 10 kHz, plus the converter's noise
    q2 = (4 / 2 ** 24) ** 2 / 12
    expect = np.sqrt(np.array([5e-9, 10e-9]) ** 2 * (1e4 - 1) + q2 + 1e-18)
    np.testing.assert_allclose(res.out_vrms, expect, rtol=1e-6)
    dens, _, _ = density_at(ev, [100.0])
    assert dens.shape == (2, 1) and dens[1, 0] > 1.9 * dens[0, 0]
