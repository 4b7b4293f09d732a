"""Terminations: an ADC input or a plain impedance (one-ports).

The ADC input is modelled as R ‖ C returning to a reference voltage; its
full-scale range sets the allowed range at the node it reads."""
from __future__ import annotations

from .base import DcLoad, Field, Op, StageKind, inv


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


class Adc(_Load):
    kind, title = "adc", "ADC input (R ‖ C, full-scale range, resolution)"
    FIELDS = {
        "bits": Field("1", "resolution in bits", required=True, positive=True, tolerable=False),
        "fs_low": Field("V", "lower end of the input range (full scale)", required=True, rail_ok=True),
        "fs_high": Field("V", "upper end of the input range (full scale)", required=True, rail_ok=True),
        "r_in": Field("ohm", "input resistance", default="inf", positive=True, allow_inf=True),
        "c_in": Field("F", "input capacitance (sampling capacitor, averaged)", default="0 F", minimum=0.0),
        "ref": Field("V", "voltage the input resistance returns to", default="0 V", rail_ok=True),
    }

    def op(self, p):
        return Op(in_range=(p["fs_low"], p["fs_high"]))


class Load(_Load):
    kind, title = "load", "plain load impedance (R ‖ C)"
    FIELDS = {
        "r_in": Field("ohm", "load resistance", default="inf", positive=True, allow_inf=True),
        "c_in": Field("F", "load capacitance", default="0 F", minimum=0.0),
        "ref": Field("V", "voltage the load resistance returns to", default="0 V", rail_ok=True),
    }


KINDS = [Adc, Load]
