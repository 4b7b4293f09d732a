"""Spec fields of the device models (chainplan.devices), shared by the stages built on them."""
from __future__ import annotations

from .base import Field

#: the MOSFET stages' choice of geometry: the aspect ratio alone, or width and length
MOSFET_ONE_OF = ("w_over_l", ("w", "l"))


def mosfet_fields():
    """Spec fields shared by every MOSFET stage (level-1 parameter names in words)."""
    return {
        "kp": Field("A/V2", "transconductance parameter k' = µn·Cox (SPICE KP)", required=True, positive=True),
        "w_over_l": Field("1", "aspect ratio W/L (or give the channel width w and length l)", positive=True),
        "w": Field("m", "channel width W (SPICE W; with l, instead of w_over_l)", positive=True, tiny=1e-9,
                   maximum=1.0),
        "l": Field("m", "channel length L (SPICE L; with w, instead of w_over_l)", positive=True, tiny=1e-9,
                   maximum=1.0),
        "vth0": Field("V", "zero-bias threshold voltage (SPICE VTO)", required=True),
        "lambda": Field("1/V", "channel-length modulation (SPICE LAMBDA)", default="0 /V", minimum=0.0),
        "gamma": Field("sqrtV", "body-effect coefficient (SPICE GAMMA)", default="0 √V", minimum=0.0),
        "phi": Field("V", "surface potential 2φF (SPICE PHI)", default="0.6 V", positive=True),
        "vth_tc": Field("V/K", "threshold temperature coefficient dVth/dT from t_nom (−2 mV/K: a typical "
                        "figure, common practice), or 'spice' for SPICE level 1's own derivation from PHI "
                        "and the band gap", default="-2 mV/K", choices=("spice",), tolerable=True),
        "drain": Field("V", "drain supply", default="vdd", rail_ok=True),
        "v_low": Field("V", "rail the source side returns to", default="0 V", rail_ok=True),
        "bulk": Field("V", "bulk connection: 'source', 'low' (the v_low rail), or a voltage/rail",
                      default="low", rail_ok=True, choices=("source", "low")),
    }


def bjt_fields():
    """Spec fields shared by the BJT stages (NPN)."""
    return {
        "beta": Field("1", "current gain β (SPICE BF)", default="100", positive=True),
        "va": Field("V", "Early voltage (SPICE VAF)", default="inf", positive=True, allow_inf=True),
        "i_s": Field("A", "saturation current (SPICE IS)", default="1e-15 A", positive=True),
        "xti": Field("1", "saturation-current temperature exponent (SPICE XTI; 3 for silicon junctions)",
                     default="3", minimum=0.0),
        "eg": Field("eV", "band-gap energy in the IS(T) law (SPICE EG; 1.11 eV for silicon)", default="1.11 eV",
                    positive=True),
        "xtb": Field("1", "current-gain temperature exponent, β ∝ (T/Tnom)^XTB (SPICE XTB; 1.5 is a typical "
                     "small-signal silicon figure, common practice; SPICE's own default is 0)", default="1.5",
                     minimum=0.0),
        "vce_sat": Field("V", "collector–emitter saturation voltage", default="0.2 V", minimum=0.0),
        "collector": Field("V", "collector supply", default="vdd", rail_ok=True),
        "v_low": Field("V", "rail the emitter side returns to", default="0 V", rail_ok=True),
    }
