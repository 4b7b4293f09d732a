"""Input-referred noise, the ENOB cap and folded noise (issue 11 items 3 and 4).

* Input-referred noise is √(∫ S_out(f)/|H(f)|² df) over the band (Motchenbacher &
  Connelly, *Low-Noise Electronic System Design*, ch. 1, from memory): a chain whose
  only noise is the sensor's own resistance refers back to exactly √(4kTR·B), whatever
  the gain does over the band; the old figure (output noise ÷ |H(f_ref)|) does not.
* White quantisation noise needs about ½ LSB rms of noise at the converter (Widrow &
  Kollár, *Quantization Noise*, from memory): below that no oversampling gain and ENOB
  no better than the converter's bits; a declared dither restores the credit.
* Noise above f_sample/2 folds into the band (Oppenheim & Schafer, ch. 4, from memory):
  white noise through a brick-wall-free single pole, folded images integrated by hand.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from chainplan.engine.budget import evaluate
from chainplan.engine.noise import alias_weights, analyse_noise
from chainplan.stages.base import K_BOLTZMANN
from chainplan.render.spice import export
from conftest import chain_from
from helpers_ngspice import _values, needs_ngspice, run

SLOPE = """
name: slope
source: {name: src, kind: sensor, amplitude: 1 mV, r: 10k}
stages:
  - {name: amp, kind: amplifier, gain: 100, f_3db: 1 kHz}
analysis: {f_ref: 100 Hz, f_start: 1 Hz, f_stop: 1 MHz, points: 1201, noise_band: [10 Hz, 10 kHz]}
"""


def test_input_referred_noise_of_the_source_alone_is_its_own():
    res = analyse_noise(evaluate(chain_from(SLOPE)))
    hand = math.sqrt(4 * K_BOLTZMANN * 300 * 10e3 * (10e3 - 10))
    assert res.in_vrms[0] == pytest.approx(hand, rel=2e-3)
    # the old figure divides by the gain at 100 Hz, where the gain is ~10× what it is at 10 kHz
    assert res.out_over_gain_ref_vrms[0] < 0.5 * hand


ADC = """
name: quiet
rails: {{vdd: 3.3 V}}
source: {{name: src, kind: sensor, amplitude: 1 V, dc: 1.65 V, r: 100}}
stages:
  - {{name: lp, kind: rc_lowpass, r: 1k, c: 100 nF}}
  - {{name: adc, kind: adc, bits: 12, fs_low: 0 V, fs_high: 3.3 V, f_sample: 100 kHz{extra}}}
analysis: {{f_ref: 10 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: 801, noise_band: [1 Hz, 100 Hz]}}
"""


def test_enob_capped_without_dither_and_credited_with_it():
    """12 bits, 3.3 V: LSB 806 µV; the analog noise (a few hundred nV) is far below ½ LSB.
    Without dither: q²/12 counts in full, ENOB = 12 exactly at most (MT-001: 6.02N + 1.76 dB
    for q²/12).  With 1 LSB rms of dither: white, the band's share of q²/12 + dither²
    counts (oversampling by 100 kHz/(2·100 Hz) = 500)."""
    plain = analyse_noise(evaluate(chain_from(ADC.format(extra=""))))
    q = 3.3 / 4096
    assert plain.enob_bits[0] <= 12.0 + 1e-9
    assert plain.out_vrms[0] == pytest.approx(q / math.sqrt(12), rel=1e-3)
    assert any("½ LSB" in n for n in plain.notes)
    dith = analyse_noise(evaluate(chain_from(ADC.format(extra=", dither: 806 µV"))))
    share = (100 - 1) / 50e3
    assert dith.out_vrms[0] == pytest.approx(math.sqrt((q * q / 12 + q * q) * share), rel=1e-3)
    assert dith.enob_bits[0] > 12.0


def test_folded_noise_of_a_white_source_through_one_pole():
    """White 4kTR at the output through a pole at fc: the power folded into [lo, hi] is
    Σ_k ∫ over the images k·fs ± [lo, hi] of S0/(1 + (f/fc)²) df, integrated by hand
    (arctan) over the images inside the span."""
    text = """
    name: fold
    source: {name: src, kind: sensor, amplitude: 1 V, dc: 1 V, r: 10k}
    stages:
      - {name: lp, kind: shunt_c, c: 1 nF}
      - {name: adc, kind: adc, bits: 24, fs_low: 0 V, fs_high: 2 V, f_sample: 10 kHz}
    analysis: {f_ref: 100 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: 4001, noise_band: [10 Hz, 1 kHz]}
    """
    res = analyse_noise(evaluate(chain_from(text)))
    fc = 1 / (2 * math.pi * 10e3 * 1e-9)
    s0 = 4 * K_BOLTZMANN * 300 * 10e3
    prim = lambda f: s0 * fc * math.atan(f / fc)  # noqa: E731
    fs, lo, hi = 10e3, 10.0, 1e3
    hand = 0.0
    for k in range(1, 2000):
        for a, b in ((k * fs - hi, k * fs - lo), (k * fs + lo, k * fs + hi)):
            a, b = max(a, fs / 2), min(b, 10e6)
            if b > a:
                hand += prim(b) - prim(a)
    assert res.folded_vrms[0] ** 2 == pytest.approx(hand, rel=5e-3)


def test_alias_weights_cover_the_images_once():
    f = np.linspace(0, 1e5, 100001)
    w = alias_weights(f, (100.0, 1e3), 1e4)
    # images inside 0…100 kHz: k·10 kHz − [100 Hz, 1 kHz] for k = 1…10 and k·10 kHz + [100 Hz, 1 kHz]
    # for k = 1…9: 19 images of 900 Hz each
    assert np.sum(w) == pytest.approx(19 * 900.0, rel=1e-6)


PIEZO = """
name: piezo-slope
rails: {vdd: 3.3 V, vmid: 1.65 V}
source: {name: element, kind: sensor, amplitude: 20 mV, dc: 0 V, r: 1G, c: 2 nF}
stages:
  - {name: bias, kind: ac_coupling, c: 1 µF, r_bias: 10k, bias: vmid}
  - {name: gain, kind: opamp_noninverting, gbw: 10 MHz, a0: 110 dB, r_f: 39k, r_g: 1k, ref: vmid,
     en: 7 nV/√Hz, in: 0.6 pA/√Hz}
analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 10 MHz, points: 1201, noise_band: [50 Hz, 5 kHz]}
"""


@needs_ngspice
def test_input_referred_noise_matches_ngspice_inoise_total():
    """ngspice's input-referred noise spectrum is S_out/|H|² at each frequency and
    inoise_total its integral over the sweep: the same definition, computed by the
    simulator on the exported netlist (50 Hz … 5 kHz, 400 points per decade).  The
    element's 2 nF against the 10 kΩ bias makes the gain rise ~40 dB over the band,
    so the old figure (÷ |H(1 kHz)|) is far off."""
    chain = chain_from(PIEZO)
    res = analyse_noise(evaluate(chain))
    nl = export(chain)
    out = run(nl.circuit_text(), [f"noise v({nl.output}) {nl.source} dec 400 50 5000", "print inoise_total"])
    spice = _values(out)["inoise_total"][-1]
    assert res.in_vrms[0] == pytest.approx(spice, rel=0.01)
    assert abs(res.out_over_gain_ref_vrms[0] / spice - 1) > 0.3
