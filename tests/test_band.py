"""Peaks over the signal band and band edges from the passband gain (issue 11 item 2),
against the textbook first-order sections: |H| = 1/√(1 + (f/fc)²) for an RC low-pass,
(f/fc)/√(1 + (f/fc)²) for an RC high-pass, fc = 1/(2πRC) (any circuits text)."""
from __future__ import annotations

import math

import pytest

from chainplan.engine.budget import analyse
from conftest import chain_from

RC = """
name: rc
source: {{name: src, kind: sensor, amplitude: 1 V, r: 0}}
stages:
  - {{name: lp, kind: rc_lowpass, r: 1k, c: 1 µF}}
analysis: {{f_ref: 300 Hz, f_start: 1 Hz, f_stop: 100 kHz, points: 2001{extra}}}
"""
FC = 1 / (2 * math.pi * 1e3 * 1e-6)      # 159.15 Hz


def test_upper_edge_of_a_plain_rc_with_f_ref_on_the_slope():
    """Measured from |H(300 Hz)| the edge came out near 1.3·fc; from the passband (the
    largest gain over the span, the DC end) it is fc."""
    b = analyse(chain_from(RC.format(extra="")))
    assert b.f_high_hz == pytest.approx(FC, rel=2e-3)


def test_declared_mid_band_sets_the_passband():
    """With mid_band at 300 Hz the reference gain is |H(300 Hz)| = 0.469, so the −3 dB
    point is where |H| = g/√2, i.e. f = fc·√(2/g² − 1)."""
    b = analyse(chain_from(RC.format(extra=", mid_band: 300 Hz")))
    g = 1 / math.sqrt(1 + (300 / FC) ** 2)
    f_edge = FC * math.sqrt(2 / g ** 2 - 1)
    assert b.f_high_hz == pytest.approx(f_edge, rel=2e-3)


HP = """
name: hp
source: {{name: src, kind: sensor, amplitude: 100 mV, dc: 1 V, r: 0}}
stages:
  - {{name: hp, kind: rc_highpass, c: 100 nF, r: 10k, ref: 1 V}}
  - {{name: load, kind: load, r_in: inf}}
analysis: {{f_ref: 50 Hz, f_start: 1 Hz, f_stop: 1 MHz, points: 601{extra}}}
"""


def test_peak_is_the_largest_over_the_signal_band():
    """High-pass, fc = 159 Hz, f_ref 50 Hz on the slope: over a 20 Hz … 2 kHz band the
    peak is at the band's top, 0.1 V·|H(2 kHz)|."""
    fc = 1 / (2 * math.pi * 10e3 * 100e-9)
    at_ref = analyse(chain_from(HP.format(extra="")))
    banded = analyse(chain_from(HP.format(extra=", signal_band: [20 Hz, 2 kHz]")))
    row0 = next(n for n in at_ref.nodes if n.name == "hp")
    row = next(n for n in banded.nodes if n.name == "hp")
    x = 50 / fc
    assert row0.peak_v == pytest.approx(0.1 * x / math.sqrt(1 + x * x), rel=1e-6)
    x = 2e3 / fc
    assert row.peak_v == pytest.approx(0.1 * x / math.sqrt(1 + x * x), rel=1e-3)
    assert row.f_peak_hz == pytest.approx(2e3, rel=0.01)
    assert row.headroom_v < row0.headroom_v or math.isinf(row.headroom_v)
