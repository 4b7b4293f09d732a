"""Noise generators of the stage kinds, and where each one acts in its stage.

A stage kind's ``noise(p, s, op, temp_k)`` returns a list of
:class:`NoiseSource`.  Each is one independent generator ``n`` of one-sided
power spectral density ``psd`` (V²/Hz for an EMF, A²/Hz for a current;
broadcastable to ``(samples, freqs)``), and four coefficients say how it
enters the stage's ABCD description — the chain (ABCD) noise representation of
a two-port (Hillbrand & Russer, IEEE Trans. CAS 23, 1976, from memory)::

    V1 = A·(V2 − out_v·n) + B·(I2 − out_i·n) + in_v·n
    I1 = C·(V2 − out_v·n) + D·(I2 − out_i·n) + in_i·n

* ``in_v``: an EMF in series with the stage input (the input pin sits
  ``in_v·n`` above what the noiseless stage would need);
* ``in_i``: a current drawn from the driving node into the stage input;
* ``out_v``: an EMF in series with the output (before any fan-out);
* ``out_i``: a current injected into the output node.

One generator may act at several places at once (a base shot current leaves the
base and enters the emitter): the coefficients are then correlated and
chainplan.engine.noise adds their transfers before squaring.  Coefficients may be
complex and frequency dependent.  A converter's noise is no density but a
power added at the output (``power_v2``, V²); chainplan.engine.noise spreads it flat
over the integration band.
"""
from __future__ import annotations

from typing import Any, NamedTuple

import numpy as np

from .base import K_BOLTZMANN, Q_ELECTRON, Field, inv


class NoiseSource(NamedTuple):
    label: str
    psd: Any = 0.0
    in_v: Any = 0.0
    in_i: Any = 0.0
    out_v: Any = 0.0
    out_i: Any = 0.0
    power_v2: Any = None


def thermal_v(r, temp_k):
    """EMF PSD of a resistor, 4kTR (Johnson–Nyquist; Nyquist, Phys. Rev. 32, 1928)."""
    return 4.0 * K_BOLTZMANN * temp_k * np.asarray(r, dtype=float)


def thermal_i(r, temp_k):
    """Current PSD of a resistor, 4kT/R (Norton form of 4kTR); zero for R = ∞."""
    return 4.0 * K_BOLTZMANN * temp_k * inv(r)


def shot(i_a):
    """Shot-noise current PSD 2qI (Schottky; Gray & Meyer, *Analysis and Design of
    Analog Integrated Circuits*, noise chapter, from memory)."""
    return 2.0 * Q_ELECTRON * np.abs(i_a)


def flicker(s, corner_hz):
    """Shaping of a white density with a 1/f corner: 1 + fc/f (power), i.e. the
    1/f part equals the white part at fc (data-sheet convention, e.g. Franco,
    *Design with Operational Amplifiers*, noise chapter, from memory)."""
    f = np.abs(np.imag(s)) / (2 * np.pi)
    with np.errstate(divide="ignore"):
        return 1.0 + np.asarray(corner_hz) / f


def density(d, s, corner_hz):
    """PSD of a data-sheet density d (V/√Hz or A/√Hz) with its 1/f corner: d²·(1 + fc/f)."""
    return np.asarray(d, dtype=float) ** 2 * flicker(s, corner_hz)


def mosfet_noise_fields() -> dict:
    """Noise fields of the MOSFET stages."""
    return {
        "noise_gamma": Field("1", "channel thermal-noise factor γ in 4kTγ·gm (default 2/3, long channel; "
                             "the SPICE level-1 value)", minimum=0.0),
        "flicker_corner": Field("Hz", "1/f corner of the channel noise (0: no flicker noise)",
                                default="0 Hz", minimum=0.0),
    }


def mosfet_channel_psd(p, s, gm, temp_k):
    """Drain-current noise 4kTγ·gm·(1 + fc/f) (van der Ziel; Razavi, *Design of Analog
    CMOS Integrated Circuits*, ch. 7, from memory); referred to the gate it is
    4kTγ/gm."""
    gamma = p.get("noise_gamma")
    gamma = 2.0 / 3.0 if gamma is None else gamma
    return 4.0 * K_BOLTZMANN * temp_k * gamma * gm * flicker(s, p["flicker_corner"])


def sink_noise_field(current: str, what: str) -> dict:
    """``<current>_noise``: the noise current density of a bias current source (zero: noiseless)."""
    return {f"{current}_noise": Field("A/rtHz", f"noise current density of the {what} (0: an ideal, noiseless "
                                      "source)", default="0 A/√Hz", minimum=0.0)}


def input_noise_fields() -> dict:
    """Data-sheet input noise of an amplifier or op-amp: en, in and their 1/f corners."""
    return {
        "en": Field("V/rtHz", "input voltage noise density (white part; 0: noiseless)",
                    default="0 V/√Hz", minimum=0.0),
        "en_corner": Field("Hz", "1/f corner of the voltage noise", default="0 Hz", minimum=0.0),
        "in": Field("A/rtHz", "input current noise density, each input (white part; 0: noiseless)",
                    default="0 A/√Hz", minimum=0.0),
        "in_corner": Field("Hz", "1/f corner of the current noise", default="0 Hz", minimum=0.0),
    }


def follower_low_side_noise(p, s, temp_k, r_field: str) -> NoiseSource:
    """The noise current of what pulls a follower's output low, into the output
    node: the current sink's declared noise, or the resistor's 4kT/R."""
    if p.get("i_bias") is not None:
        return NoiseSource("i_bias noise", density(p["i_bias_noise"], s, 0.0), out_i=1.0)
    return NoiseSource(f"{r_field} thermal", thermal_i(p[r_field], temp_k), out_i=1.0)
