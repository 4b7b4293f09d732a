"""Bipolar transistor (NPN) DC and small-signal equations, vectorised.

Sources (from memory): Sedra & Smith, *Microelectronic Circuits*, BJT chapter
(IC = IS·exp(VBE/VT), gm = IC/VT, rπ = β/gm, ro = VA/IC), written as the
SPICE Gummel–Poon model reduces with only IS, BF and VAF set (ngspice manual,
BJT model): the Early factor acts on the collector current through VCB,
IC = IS·exp(VBE/VT)·(1 + VCB/VA), while the base current IB = (IS/BF)·exp(VBE/VT)
has none — so the effective current gain IC/IB grows with VCB, and
ro = (VA + VCB)/IC, rπ = VT/IB.
"""
from __future__ import annotations

import numpy as np

from .solve import newton_bracketed
from ..constants import K_BOLTZMANN, Q_ELECTRON


def thermal_voltage(temp_k):
    """VT = kT/q (CODATA constants); 25.85 mV at 300 K."""
    return K_BOLTZMANN * temp_k / Q_ELECTRON


#: nominal temperature the parameters are stated at when nothing says otherwise (the chain default, 300 K;
#: SPICE's own TNOM default is 27 °C = 300.15 K)
T_NOM_K = 300.0


def at_temperature(p: dict) -> dict:
    """Gummel–Poon temperature equations (as in SPICE-class simulators; ngspice
    manual, BJT temperature dependence, and bjttemp.c, from memory), with NF = 1:
    IS(T) = IS·(T/Tnom)^XTI·exp((EG/VT(T))·(T/Tnom − 1)),  β(T) = β·(T/Tnom)^XTB.
    With EG = 1.11 eV and XTI = 3 (silicon) VBE at a fixed current falls about
    2 mV/K.  Returns ``p`` with ``i_s`` and ``beta`` at ``p['temp_k']``."""
    t = p.get("temp_k", T_NOM_K)
    t_nom = p.get("t_nom_k", T_NOM_K)
    if np.all(np.asarray(t) == t_nom):
        return p
    ratio = t / t_nom
    q = dict(p)
    q["i_s"] = p["i_s"] * np.exp(p.get("eg", 1.11) / thermal_voltage(t) * (ratio - 1.0)
                                 + p.get("xti", 3.0) * np.log(ratio))
    q["beta"] = p["beta"] * ratio ** p.get("xtb", 0.0)
    return q


def collector_current(i_s, vbe, vcb, va, vt):
    """IC = IS·exp(VBE/VT)·(1 + VCB/VA) in the forward-active region."""
    return i_s * np.exp(np.minimum(vbe / vt, 200.0)) * (1.0 + vcb / va)


def base_current(i_s, vbe, beta, vt):
    """IB = (IS/β)·exp(VBE/VT): no Early factor (Gummel–Poon with VAF only)."""
    return i_s / beta * np.exp(np.minimum(vbe / vt, 200.0))


def small_signal(i_c, i_b, va, vcb, vt):
    """gm = IC/VT, rπ = VT/IB, ro = (VA + VCB)/IC."""
    return i_c / vt, vt / i_b, (va + vcb) / i_c


def solve_emitter(p, v_b, v_c, i_out, vt):
    """Emitter voltage with IE(VE) = IC + IB = i_out(VE); IE falls as VE rises.
    Returns VE, IC, IB.

    Solved by safeguarded Newton (``solve.newton_bracketed``) over the bracket 50 V below
    min(VB, VC) to VB, from the diode-law guess VE = VB − VT·ln(i_out/(IS·(1 + VCB/VA)·(1 + 1/β)))
    with i_out taken at VB − 0.65 V (Sedra & Smith, the exponential IC(VBE) inverted, from
    memory); dIE/dVE = −IE/VT where the exponential is not clipped.  ``i_out`` is affine in VE
    for every caller (a bias sink, a resistor and a Norton load), so its slope is the difference
    i_out(VE + 1 V) − i_out(VE)."""
    i_s, va, beta = p["i_s"], p["va"], p["beta"]
    early = 1.0 + (v_c - v_b) / va

    def currents(ve):
        e = np.exp(np.minimum((v_b - ve) / vt, 200.0))
        return i_s * e * early, i_s / beta * e

    def mismatch(ve):
        ic, ib = currents(ve)
        ie = ic + ib
        unclipped = (v_b - ve) / vt < 200.0
        i_load = i_out(ve)
        slope = np.where(unclipped, -ie / vt, 0.0) - (i_out(ve + 1.0) - i_load)
        return ie - i_load, slope

    with np.errstate(all="ignore"):
        v0 = v_b - 0.65
        guess = v_b - vt * np.log(i_out(v0) / (i_s * early * (1.0 + 1.0 / beta)))
    ve = newton_bracketed(mismatch, np.minimum(v_b, v_c) - 50.0, v_b + 0.0, guess)
    return (ve, *currents(ve))
