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

from ..constants import EPS_OX
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
    """Noise fields of the MOSFET stages: the channel's thermal-noise factor and its
    flicker noise, either as a corner (a shorthand) or as SPICE's KF/AF coefficients."""
    return {
        "noise_gamma": Field("1", "channel thermal-noise factor γ in 4kTγ·gm (default 2/3, long channel; "
                             "the SPICE level-1 value)", minimum=0.0),
        "flicker_corner": Field("Hz", "1/f corner of the channel noise at the nominal operating point "
                                "(nominal parts, the chain's temperature); elsewhere the 1/f part follows "
                                "Id^af as the kf form does (0: no flicker noise)", default="0 Hz", minimum=0.0),
        "kf": Field("1", "flicker-noise coefficient (SPICE KF) of SPICE level 1's 1/f drain-current noise "
                    "KF·Id^AF/(f·Cox²·W·L), in SI units (0: none; needs w, l and tox; instead of "
                    "flicker_corner)", default="0", minimum=0.0, tiny=1e-60, maximum=1.0),
        "af": Field("1", "flicker-noise current exponent (SPICE AF): the 1/f drain-current noise grows as "
                    "Id^AF (kf, and flicker_corner away from its bias)", default="1", minimum=0.0, maximum=3.0),
        "tox": Field("m", "gate-oxide thickness (SPICE TOX): Cox = 3.9·ε0/tox in the kf form (no "
                     "capacitances are derived from it)", positive=True, tiny=1e-10, maximum=1e-5),
    }


def mosfet_noise_problems(p: dict) -> list:
    """(field, message) for flicker fields that do not go together (spec time, nominal values)."""
    kf, fc = float(np.max(p.get("kf", 0.0))), float(np.max(p.get("flicker_corner", 0.0)))
    out = []
    if kf > 0 and fc > 0:
        out.append(("kf", "give the flicker noise one way: kf (SPICE's coefficient, with af and tox) or "
                          "flicker_corner (a corner at the nominal bias), not both"))
    elif kf > 0 and p.get("tox") is None:
        out.append(("kf", "kf needs the oxide thickness tox (Cox = 3.9·ε0/tox, as SPICE takes it), "
                          "e.g. tox: 10 nm"))
    elif kf > 0 and p.get("w_over_l") is not None:
        out.append(("kf", "kf needs the channel width and length: give w and l (e.g. w: 100 µm, l: 2 µm) "
                          "instead of w_over_l"))
    return out


def oxide_capacitance(tox):
    """Cox = εox/tox, F/m² (εox = 3.9·ε0: the parallel-plate gate capacitance per area, Sze, from memory)."""
    return EPS_OX / np.asarray(tox, dtype=float)


def mosfet_flicker_coefficient(p, v, temp_k):
    """The 1/f drain-current noise as a coefficient c (A²): S_id,1/f = c/f.

    * ``kf``: SPICE level 1's form c = KF·Id^AF/(Cox²·W·L) — the form ngspice's level-1
      MOSFET computes (mos1noi.c, flicker term; measured here with ngspice 39: the
      density scales as Id^AF/(W·L·Cox²), not as the KF·Id^AF/(Cox·L²) of the SPICE2
      manual).  With AF = 1 its gate-referred level c/(gm²·f) = KF/(2·KP·Cox²·W²·f) does
      not depend on the bias: the physical (McWhorter number-fluctuation) behaviour of
      a long-channel device (Razavi, ch. 7, from memory).
    * ``flicker_corner`` fc: c = 4kTγ·gm0·fc·(Id/Id0)^AF, with gm0, Id0 (and T) those of
      the nominal operating point (``p['flicker_gm0_s']``, ``['flicker_id0_a']``,
      ``['flicker_t0_k']``, put there by the engine for studies; a nominal analysis is
      its own reference).  At the nominal bias the
      corner is where the 1/f part equals the white part (data-sheet convention);
      across bias choices and Monte Carlo samples it scales like the kf form."""
    i_d = np.abs(v["id_a"])
    af = p.get("af", 1.0)
    kf = p.get("kf", 0.0)
    if np.any(np.asarray(kf) > 0):
        cox = oxide_capacitance(p["tox"])
        return kf * i_d ** af / (cox * cox * p["w"] * p["l"])
    fc = p.get("flicker_corner", 0.0)
    if not np.any(np.asarray(fc) > 0):
        return 0.0
    gamma = _gamma(p)
    if "flicker_id0_a" in p:
        gm0, i0, t0 = p["flicker_gm0_s"], abs(p["flicker_id0_a"]), p["flicker_t0_k"]
    else:
        gm0, i0, t0 = v["gm_s"], np.abs(v["id_a"]), temp_k
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(i0 > 0, (i_d / np.where(i0 > 0, i0, 1.0)) ** af, 0.0)
    return 4.0 * K_BOLTZMANN * t0 * gamma * gm0 * fc * scale


def _gamma(p):
    gamma = p.get("noise_gamma")
    return 2.0 / 3.0 if gamma is None else gamma


def mosfet_channel_psd(p, s, v, temp_k):
    """Drain-current noise 4kTγ·gm + c/f (van der Ziel; Razavi, *Design of Analog
    CMOS Integrated Circuits*, ch. 7, from memory), ``v`` the operating-point values;
    the thermal part referred to the gate is 4kTγ/gm; c from
    :func:`mosfet_flicker_coefficient`."""
    white = 4.0 * K_BOLTZMANN * temp_k * _gamma(p) * v["gm_s"]
    c = mosfet_flicker_coefficient(p, v, temp_k)
    f = np.abs(np.imag(s)) / (2 * np.pi)
    with np.errstate(divide="ignore"):
        return white + c / f


def mosfet_flicker_reference(p: dict, op, probe: bool = False) -> dict:
    """What a study's evaluation needs from the nominal operating point for the corner
    shorthand (:func:`mosfet_flicker_coefficient`): gm0, Id0 and T0 as plain floats (a
    parameter array would count as samples); ``probe``: only whether it needs them."""
    if float(np.max(p.get("kf", 0.0))) > 0 or not float(np.max(p.get("flicker_corner", 0.0))) > 0:
        return {}
    if probe:
        return {"flicker_id0_a": None}
    v = op.values
    return {"flicker_gm0_s": float(np.ravel(v["gm_s"])[0]), "flicker_id0_a": float(np.ravel(v["id_a"])[0]),
            "flicker_t0_k": float(np.ravel(p["temp_k"])[0])}


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


class MosfetNoiseChecks:
    """What every MOSFET stage kind says about its flicker-noise fields: the spec checks
    (mosfet_noise_problems) and the nominal operating point a ``flicker_corner`` is
    defined at (mosfet_flicker_reference).  Mixed in before StageKind."""

    def spec_problems(self, p):
        return mosfet_noise_problems(p)

    def wants_reference(self, p):
        return bool(mosfet_flicker_reference(p, None, probe=True))

    def nominal_reference(self, p, op):
        return mosfet_flicker_reference(p, op)
