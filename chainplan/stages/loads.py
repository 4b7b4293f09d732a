"""Terminations: an ADC input or a plain impedance (one-ports).

The ADC input is modelled as R ‖ C returning to a reference voltage; its
full-scale range sets the allowed range at the node it reads."""
from __future__ import annotations

import numpy as np

from .base import DcLoad, Field, Op, StageKind, inv
from .dc_sources import limit
from .noise_sources import NoiseSource, thermal_i


class _Load(StageKind):
    role = "load"

    def load_admittance(self, p, s, op):
        """Input admittance 1/R + sC."""
        return inv(p["r_in"]) + s * p["c_in"]

    def dc_input_load(self, p, out_load, op):
        g = inv(p["r_in"])
        return DcLoad(g, p["ref"] * g)

    def dc_forward(self, p, st_in, v_in, out_load):
        return None, self.op(p)

    def op(self, p):
        return Op()

    def noise(self, p, s, op, temp_k):
        """Thermal noise of the input resistance: a current 4kT/R at the node (Nyquist, 1928)."""
        return [NoiseSource("r_in thermal", thermal_i(p["r_in"], temp_k), in_i=1.0)]


class Adc(_Load):
    kind, title = "adc", "ADC input (R ‖ C, full-scale range, resolution)"
    FIELDS = {
        "bits": Field("1", "resolution in bits", required=True, positive=True, tolerable=False),
        "fs_low": Field("V", "lower end of the input range (full scale)", required=True, rail_ok=True),
        "fs_high": Field("V", "upper end of the input range (full scale)", required=True, rail_ok=True),
        "r_in": Field("ohm", "input resistance", default="inf", positive=True, allow_inf=True),
        "c_in": Field("F", "input capacitance (sampling capacitor, averaged)", default="0 F", minimum=0.0),
        "ref": Field("V", "voltage the input resistance returns to", default="0 V", rail_ok=True),
        "noise_rms": Field("V", "the converter's own noise referred to its input, rms, besides quantisation "
                           "(data sheet: transition noise, input-referred noise)", default="0 V", minimum=0.0),
        "dither": Field("V", "rms of a dither added at the converter input (white over 0…f_sample/2, counted as "
                        "noise); makes the quantisation error white when the analog noise alone is below ½ LSB",
                        default="0 V", minimum=0.0),
        "f_sample": Field("Hz", "sample rate (output word rate); given, converter noise spreads over 0…f_sample/2 "
                          "and the anti-alias rejection is checked", positive=True, tolerable=False),
        "offset": limit("V", "offset error referred to the input, a limit at 25 °C"),
        "offset_drift": limit("V/K", "drift of the offset error"),
        "gain_error": limit("%", "gain error (full-scale error with an ideal reference), a limit at 25 °C"),
        "inl": limit("1", "integral non-linearity in LSB, a limit (no calibration removes it)"),
        "ref_tolerance": limit("%", "initial accuracy of the reference that sets the full scale"),
        "ref_drift": limit("ppm/K", "temperature coefficient of the reference"),
        "i_supply": Field("A", "quiescent supply current of the converter and its reference", default="0 A",
                          minimum=0.0, tolerable=False),
        "supply": Field("V", "rail that feeds the converter's supply current", rail_ok=True),
        "c_sample": Field("F", "sampling (hold) capacitor of a SAR-type input; with t_acq (or t_conv and "
                          "f_sample) the kickback and its settling in the acquisition time are checked",
                          default="0 F", minimum=0.0),
        "t_acq": Field("s", "acquisition time: how long the sampling switch is closed", positive=True,
                       tolerable=False),
        "t_conv": Field("s", "conversion time; with f_sample, t_acq = 1/f_sample − t_conv", positive=True,
                        tolerable=False),
        "sampling": Field("choice", "input architecture: 'reset' (the capacitor is reset every cycle, the "
                          "kickback is up to full scale) or 'track' (it holds the previous sample, the kickback "
                          "is the signal's change between samples)", default="reset", choices=("reset", "track"),
                          tolerable=False),
    }

    def op(self, p):
        op = Op(in_range=(p["fs_low"], p["fs_high"]))
        period = 1.0 / p["f_sample"] if p.get("f_sample") is not None else np.inf
        for key in ("t_acq", "t_conv"):
            if p.get(key) is not None:
                op.flag(np.asarray(p[key]) >= period, key, f"{key} must be shorter than the sample period "
                        "1/f_sample")
        if p.get("t_acq") is None and (p.get("t_conv") is None or p.get("f_sample") is None):
            op.flag(np.asarray(p.get("c_sample", 0.0)) > 0, "c_sample", "a sampling capacitor needs t_acq, or t_conv and f_sample, "
                    "to check its settling")
        op.flag(np.asarray(p["fs_high"]) <= np.asarray(p["fs_low"]), "fs_high",
                "the full-scale range is empty: fs_high must be above fs_low")
        return op

    def noise(self, p, s, op, temp_k):
        """Quantisation noise q²/12 with q = FS/2^N, uniform error over one step
        (Kester, *Taking the Mystery out of the Infamous Formula SNR = 6.02N + 1.76 dB*,
        Analog Devices MT-001, from memory), and the converter's own rms noise."""
        q = np.abs(p["fs_high"] - p["fs_low"]) / 2.0 ** p["bits"]
        return [*super().noise(p, s, op, temp_k), NoiseSource("quantisation", power_v2=q * q / 12.0),
                NoiseSource("converter noise", power_v2=np.asarray(p["noise_rms"], dtype=float) ** 2),
                NoiseSource("dither", power_v2=np.asarray(p["dither"], dtype=float) ** 2)]


class Load(_Load):
    kind, title = "load", "plain load impedance (R ‖ C)"
    FIELDS = {
        "r_in": Field("ohm", "load resistance", default="inf", positive=True, allow_inf=True),
        "c_in": Field("F", "load capacitance", default="0 F", minimum=0.0),
        "ref": Field("V", "voltage the load resistance returns to", default="0 V", rail_ok=True),
    }


KINDS = [Adc, Load]
