"""MOSFET square-law (SPICE level-1) device equations, vectorised.

Sources (from memory): Sedra & Smith, *Microelectronic Circuits*, ch. on MOSFETs;
Razavi, *Design of Analog CMOS Integrated Circuits*, ch. 2; the SPICE2 level-1
model (Shichman–Hodges) as documented in the ngspice manual, where the
``(1 + λ·VDS)`` factor is kept in every derived quantity and PHI is 2φF.
Only NMOS polarity; voltages are node voltages in volts.
"""
from __future__ import annotations

import numpy as np

from .solve import newton_bracketed
from ..constants import K_BOLTZMANN, Q_ELECTRON

#: nominal temperature the parameters are stated at when nothing says otherwise (the chain default, 300 K;
#: SPICE's own TNOM default is 27 °C = 300.15 K)
T_NOM_K = 300.0
#: mobility temperature exponent of the level-1 model: KP ∝ (T/Tnom)^−1.5 (ngspice mos1temp, ratio4)
KP_EXPONENT = -1.5
#: the reference temperature of ngspice's band-gap forms (REFTEMP, 300.15 K)
_REFTEMP = 300.15


def _egap_ev(t):
    """Silicon band gap Eg(T) = 1.16 − 7.02e-4·T²/(T + 1108) eV (the Varshni form SPICE uses)."""
    return 1.16 - 7.02e-4 * t * t / (t + 1108.0)


def _pbfact(t):
    """ngspice's junction-potential temperature term −2·VT·(1.5·ln(T/REFTEMP) + q·arg)."""
    vt = K_BOLTZMANN * t / Q_ELECTRON
    arg = -_egap_ev(t) * Q_ELECTRON / (2.0 * K_BOLTZMANN * t) + 1.1150877 * Q_ELECTRON / (2.0 * K_BOLTZMANN * _REFTEMP)
    return -2.0 * vt * (1.5 * np.log(t / _REFTEMP) + arg)


def spice_threshold_at(vto, gamma, phi, t, t_nom):
    """(VTO(T), PHI(T)) as SPICE's level-1 model derives them from PHI and the band
    gap (ngspice source, mos1temp.c, from memory of its equations):
    PHI(T) = (T/Tr)·(PHI − pb(Tnom))/(Tnom/Tr) + pb(T),
    Vbi(T) = VTO − γ√PHI + (Eg(Tnom) − Eg(T))/2 + (PHI(T) − PHI)/2,  VTO(T) = Vbi(T) + γ√PHI(T)."""
    phio = (phi - _pbfact(t_nom)) / (t_nom / _REFTEMP)
    t_phi = (t / _REFTEMP) * phio + _pbfact(t)
    vbi = vto - gamma * np.sqrt(phi) + 0.5 * (_egap_ev(t_nom) - _egap_ev(t)) + 0.5 * (t_phi - phi)
    return vbi + gamma * np.sqrt(t_phi), t_phi


def at_temperature(p: dict) -> dict:
    """Level-1 parameters at the stage's temperature ``p['temp_k']`` from their values at
    ``p['t_nom_k']``: KP(T) = KP·(T/Tnom)^−1.5 (mobility ∝ T^−1.5, Sze, *Physics of
    Semiconductor Devices*, lattice scattering, from memory; the SPICE level-1 form);
    VTO(T) = VTO + vth_tc·(T − Tnom) for a data-sheet coefficient, or, with
    ``vth_tc: spice``, SPICE's own derivation from PHI and the band gap
    (:func:`spice_threshold_at`), which also moves PHI."""
    t = p.get("temp_k", T_NOM_K)
    t_nom = p.get("t_nom_k", T_NOM_K)
    tc = p.get("vth_tc", 0.0)
    if np.all(np.asarray(t) == t_nom):
        return p
    q = dict(p)
    q["kp"] = p["kp"] * (t / t_nom) ** KP_EXPONENT
    if isinstance(tc, str):          # 'spice'
        q["vth0"], q["phi"] = spice_threshold_at(p["vth0"], p["gamma"], p["phi"], t, t_nom)
    else:
        q["vth0"] = p["vth0"] + tc * (t - t_nom)
    return q


def threshold(vth0, gamma, phi, vsb):
    """Body effect: Vth = Vth0 + γ(√(2φF + VSB) − √(2φF)) (Sedra & Smith; Razavi eq. 2.22)."""
    vsb = np.maximum(vsb, -0.99 * phi)   # keep the root real for forward-biased bulk
    return vth0 + gamma * (np.sqrt(phi + vsb) - np.sqrt(phi))


def aspect(p):
    """W/L of the device: the spec's ``w_over_l``, or ``w/l`` when width and length are given."""
    w_over_l = p.get("w_over_l")
    return w_over_l if w_over_l is not None else p["w"] / p["l"]


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
    increasing function of VS, and Id falls as VS rises.  Returns VS, Id, Vov, Vth, VSB.

    Safeguarded Newton (``solve.newton_bracketed``) over a bracket 50 V below and 20 V above the
    gate, from the square-law guess VS = VG − Vth0 − √(2·i_out/(k'·W/L)) with i_out taken at
    VG − Vth0 (Sedra & Smith, saturation law inverted, from memory), body effect left to Newton.
    Slope: dId/dVS = −k'(W/L)·Vov·(1 + λVDS)·(1 + dVth/dVS) − ½k'(W/L)·Vov²·λ, with
    dVth/dVS = γ/(2√(2φF + VSB)) (the body-effect law differentiated); ``i_out`` is affine in VS
    for every caller (a bias sink and a Norton load), so its slope is i_out(VS + 1 V) − i_out(VS)."""
    kp, wl, lam, gamma, phi, vth0 = p["kp"], aspect(p), p["lambda"], p["gamma"], p["phi"], p["vth0"]
    beta = kp * wl

    def mismatch(vs):
        vsb = vs - v_bulk if v_bulk is not None else 0.0
        vth = threshold(vth0, gamma, phi, vsb)
        vov = v_g - vs - vth
        i_d = drain_current(kp, wl, vov, v_d - vs, lam)
        if v_bulk is not None:
            dvth = np.where(vsb > -0.99 * phi, gamma / (2.0 * np.sqrt(phi + np.maximum(vsb, -0.99 * phi))), 0.0)
        else:
            dvth = 0.0
        on = np.maximum(vov, 0.0)
        d_id = -beta * on * (1.0 + lam * (v_d - vs)) * (1.0 + dvth) - 0.5 * beta * on * on * lam
        i_load = i_out(vs)
        return i_d - i_load, d_id - (i_out(vs + 1.0) - i_load)

    with np.errstate(all="ignore"):
        v0 = v_g - vth0
        guess = v0 - np.sqrt(2.0 * i_out(v0) / beta)
        guess = np.where(np.isfinite(guess), guess, v0)
    vs = newton_bracketed(mismatch, np.minimum(v_g, v_d) - 50.0, v_g + 20.0, guess)
    vsb = vs - v_bulk if v_bulk is not None else 0.0 * vs
    vth = threshold(p["vth0"], p["gamma"], p["phi"], vsb)
    vov = v_g - vs - vth
    i_d = drain_current(p["kp"], aspect(p), vov, v_d - vs, p["lambda"])
    return vs, i_d, vov, vth, vsb


def bulk_voltage(p):
    """Bulk voltage, or None when the bulk is tied to the source (no body effect)."""
    b = p["bulk"]
    if isinstance(b, str):
        return None if b == "source" else p["v_low"]
    return b
