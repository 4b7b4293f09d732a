"""Bipolar transistor (NPN) DC and small-signal equations, vectorised.

Sources (from memory): Sedra & Smith, *Microelectronic Circuits*, BJT chapter
(IC = IS·exp(VBE/VT), gm = IC/VT, rπ = β/gm, ro = VA/IC); the SPICE
Gummel–Poon model with only IS, BF and VAF set reduces to these, with the
Early factor (1 + VCE/VA) kept in IC and ro = (VA + VCE)/IC.
"""
from __future__ import annotations

import numpy as np

from ..solve import bisect
from ..stages.base import K_BOLTZMANN, Q_ELECTRON


def thermal_voltage(temp_k):
    """VT = kT/q (CODATA constants); 25.85 mV at 300 K."""
    return K_BOLTZMANN * temp_k / Q_ELECTRON


def collector_current(i_s, vbe, vce, va, vt):
    """IC = IS·exp(VBE/VT)·(1 + VCE/VA) in the forward-active region."""
    early = 1.0 + vce / va
    return i_s * np.exp(np.minimum(vbe / vt, 200.0)) * early


def small_signal(i_c, beta, va, vce, vt):
    """gm = IC/VT, rπ = β/gm, ro = (VA + VCE)/IC."""
    gm = i_c / vt
    r_pi = beta / gm
    ro = (va + vce) / i_c
    return gm, r_pi, ro


def solve_emitter(p, v_b, v_c, i_out, vt):
    """Emitter voltage with IE(VE) = i_out(VE); IE = IC·(β+1)/β falls as VE rises."""
    def mismatch(ve):
        ic = collector_current(p["i_s"], v_b - ve, v_c - ve, p["va"], vt)
        return ic * (p["beta"] + 1.0) / p["beta"] - i_out(ve)
    ve = bisect(mismatch, np.minimum(v_b, v_c) - 50.0, v_b + 0.0)
    ic = collector_current(p["i_s"], v_b - ve, v_c - ve, p["va"], vt)
    return ve, ic


def device_fields():
    """Spec fields shared by the BJT stages (NPN)."""
    from ..stages.base import Field
    return {
        "beta": Field("1", "current gain β (SPICE BF)", default="100", positive=True),
        "va": Field("V", "Early voltage (SPICE VAF)", default="inf", positive=True, allow_inf=True),
        "i_s": Field("A", "saturation current (SPICE IS)", default="1e-15 A", positive=True),
        "vce_sat": Field("V", "collector–emitter saturation voltage", default="0.2 V", minimum=0.0),
        "collector": Field("V", "collector supply", default="vdd", rail_ok=True),
        "v_low": Field("V", "rail the emitter side returns to", default="0 V", rail_ok=True),
    }
