"""Generic amplifier macro model for parts known only by their data sheet:
input R ‖ C, open-circuit gain with an optional single pole, output
resistance, and input/output voltage limits.  The two-port is the unilateral
form ``A = 1/Av, B = Zout/Av, C = Yin/Av, D = Yin·Zout/Av``."""
from __future__ import annotations

import numpy as np

from .base import DcLoad, Field, Op, StageKind, dc_source, inv, unilateral
from .noise_sources import NoiseSource, density, input_noise_fields


class Amplifier(StageKind):
    kind, title = "amplifier", "generic amplifier macro model"
    NOISE_DATA = ("en", "in")
    FIELDS = {
        "gain": Field("1", "open-circuit voltage gain (V/V, negative for inverting)", required=True),
        "f_3db": Field("Hz", "single-pole bandwidth", default="inf", positive=True, allow_inf=True),
        "r_in": Field("ohm", "input resistance", default="inf", positive=True, allow_inf=True),
        "c_in": Field("F", "input capacitance", default="0 F", minimum=0.0),
        "r_out": Field("ohm", "output resistance", default="0 Ω", minimum=0.0),
        "in_ref": Field("V", "input DC reference (r_in returns here; gain acts on V − in_ref)",
                        default="0 V", rail_ok=True),
        "out_ref": Field("V", "output DC level for an input at in_ref", default="0 V", rail_ok=True),
        "out_low": Field("V", "lowest output voltage", default=-np.inf, rail_ok=True),
        "out_high": Field("V", "highest output voltage", default=np.inf, rail_ok=True),
        "in_low": Field("V", "lowest allowed input voltage", default=-np.inf, rail_ok=True),
        "in_high": Field("V", "highest allowed input voltage", default=np.inf, rail_ok=True),
        **input_noise_fields(),
    }

    def abcd(self, p, s, op):
        """Single pole: Av(s) = gain/(1 + s/ωp)."""
        inv_av = (1.0 + s * inv(2 * np.pi * p["f_3db"])) / p["gain"]
        return unilateral(inv(p["r_in"]) + s * p["c_in"], inv_av, p["r_out"])

    def noise(self, p, s, op, temp_k):
        """Data-sheet input noise: en acts behind the input impedance (the input
        current Yin·V1 does not see it: in_i = Yin·in_v), in flows into the input."""
        y_in = inv(p["r_in"]) + s * p["c_in"]
        return [NoiseSource("en", density(p["en"], s, p["en_corner"]), in_v=1.0, in_i=y_in),
                NoiseSource("in", density(p["in"], s, p["in_corner"]), in_i=1.0)]

    def dc_input_load(self, p, out_load, op):
        g = inv(p["r_in"])
        return DcLoad(g, p["in_ref"] * g)

    def dc_forward(self, p, st_in, v_in, out_load):
        v_open = p["out_ref"] + p["gain"] * (v_in - p["in_ref"])
        return dc_source(v_open, p["r_out"]), Op(in_range=(p["in_low"], p["in_high"]),
                                                 out_range=(p["out_low"], p["out_high"]))


KINDS = [Amplifier]
