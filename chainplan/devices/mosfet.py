"""MOSFET square-law (SPICE level-1) device equations, vectorised.

Sources (from memory): Sedra & Smith, *Microelectronic Circuits*, ch. on MOSFETs;
Razavi, *Design of Analog CMOS Integrated Circuits*, ch. 2; the SPICE2 level-1
model (Shichman–Hodges) as documented in the ngspice manual, where the
``(1 + λ·VDS)`` factor is kept in every derived quantity and PHI is 2φF.
Only NMOS polarity; voltages are node voltages in volts.
"""
from __future__ import annotations

import numpy as np

from .solve import bisect


def threshold(vth0, gamma, phi, vsb):
    """Body effect: Vth = Vth0 + γ(√(2φF + VSB) − √(2φF)) (Sedra & Smith; Razavi eq. 2.22)."""
    vsb = np.maximum(vsb, -0.99 * phi)   # keep the root real for forward-biased bulk
    return vth0 + gamma * (np.sqrt(phi + vsb) - np.sqrt(phi))


def drain_current(kp, w_over_l, vov, vds, lam):
    """Saturation: Id = ½·k'·(W/L)·Vov²·(1 + λ·VDS); zero below threshold (level-1)."""
    vov = np.maximum(vov, 0.0)
    return 0.5 * kp * w_over_l * vov * vov * (1.0 + lam * vds)


def small_signal(i_d, vov, vds, lam, gamma, phi, vsb):
    """gm = 2·Id/Vov, ro = (1/λ + VDS)/Id, gmb = gm·γ/(2√(2φF + VSB)) (SPICE level-1
    forms; the hand form ro = 1/(λ·Id) differs by the factor (1 + λ·VDS))."""
    gm = 2.0 * i_d / vov
    with np.errstate(divide="ignore"):
        ro = np.where(np.asarray(lam) > 0, (1.0 / np.where(np.asarray(lam) > 0, lam, 1.0) + vds) / i_d, np.inf)
    gmb = gm * gamma / (2.0 * np.sqrt(phi + np.maximum(vsb, -0.99 * phi)))
    return gm, gmb, ro


def solve_source(p, v_g, v_d, v_bulk, i_out):
    """Source voltage of a follower: find VS with Id(VS) = i_out(VS), where
    i_out is the current the source node must deliver (bias plus load), an
    increasing function of VS, and Id falls as VS rises.  Vectorised bisection
    over a bracket 50 V below and 20 V above the gate; returns VS and Id."""
    def mismatch(vs):
        vsb = vs - v_bulk if v_bulk is not None else 0.0
        vth = threshold(p["vth0"], p["gamma"], p["phi"], vsb)
        i_d = drain_current(p["kp"], p["w_over_l"], v_g - vs - vth, v_d - vs, p["lambda"])
        return i_d - i_out(vs)
    vs = bisect(mismatch, np.minimum(v_g, v_d) - 50.0, v_g + 20.0)
    vsb = vs - v_bulk if v_bulk is not None else 0.0 * vs
    vth = threshold(p["vth0"], p["gamma"], p["phi"], vsb)
    vov = v_g - vs - vth
    i_d = drain_current(p["kp"], p["w_over_l"], vov, v_d - vs, p["lambda"])
    return vs, i_d, vov, vth, vsb


def bulk_voltage(p):
    """Bulk voltage, or None when the bulk is tied to the source (no body effect)."""
    b = p["bulk"]
    if isinstance(b, str):
        return None if b == "source" else p["v_low"]
    return b
