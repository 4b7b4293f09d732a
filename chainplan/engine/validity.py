"""Where a device model leaves its range of validity, said in the budget.

MOSFET square law in moderate and weak inversion.  The inversion coefficient
IC = Id/I_spec, I_spec = 2·n·µCox·(W/L)·UT², tells how strongly the channel is
inverted: below 0.1 weak, 0.1 to 10 moderate, above 10 strong inversion
(Binkley, *Tradeoffs and Optimization in Analog CMOS Design*, 2008; Enz,
Krummenacher & Vittoz, *Analog Integrated Circuits and Signal Processing* 8,
1995; from memory).  Level 1's KP is the strong-inversion fit µCox/n, so
IC = Id/(2·n²·KP·(W/L)·UT²), which on the square law is (Vov/(2·n·UT))².  The
EKV interpolation of the transconductance efficiency,
gm·n·UT/Id = 2/(1 + √(1 + 4·IC)), joins weak inversion's 1/(n·UT) to strong
inversion's 2/Vov; at the same current the square law's gm = 2·Id/Vov is
larger by (1 + √(1 + 4·IC))/(2·√IC): 1.17 at IC = 10, 1.62 at IC = 1.
The slope factor n = 1 + γ/(2·√(PHI + VSB)) (the body-effect form, Tsividis,
*Operation and Modeling of the MOS Transistor*, from memory), or 1.3 (a typical
figure, common practice) when γ is 0.
"""
from __future__ import annotations

import numpy as np

from ..constants import K_BOLTZMANN, Q_ELECTRON
from ..devices import mosfet
from ..spec.numbers import figure

#: Binkley's boundaries of moderate inversion (inversion coefficient)
STRONG_IC, WEAK_IC = 10.0, 0.1
#: slope factor taken when the spec gives no body effect (γ = 0): a typical bulk-CMOS figure
N_TYPICAL = 1.3


def slope_factor(p: dict, vsb):
    """n = 1 + γ/(2·√(PHI + VSB)), or N_TYPICAL when γ is 0."""
    gamma = np.asarray(p["gamma"], dtype=float)
    n = 1.0 + gamma / (2.0 * np.sqrt(p["phi"] + np.maximum(vsb, -0.99 * p["phi"])))
    return np.where(gamma > 0, n, N_TYPICAL)


def inversion_coefficient(i_d, kp, w_over_l, n, temp_k):
    """IC = Id/(2·n²·KP·(W/L)·UT²), UT = kT/q (module docstring)."""
    ut = K_BOLTZMANN * temp_k / Q_ELECTRON
    return np.abs(i_d) / (2.0 * n * n * kp * w_over_l * ut * ut)


def gm_overstatement(ic):
    """Square-law gm over the EKV-interpolated gm at the same drain current:
    (1 + √(1 + 4·IC))/(2·√IC)."""
    ic = np.asarray(ic, dtype=float)
    return (1.0 + np.sqrt(1.0 + 4.0 * ic)) / (2.0 * np.sqrt(ic))


def _is_mosfet(st) -> bool:
    return "kp" in st.model.FIELDS and "vth0" in st.model.FIELDS


def mosfet_warnings(ev) -> list[dict]:
    """One entry per MOSFET stage of the nominal evaluation that runs below IC = 10."""
    out = []
    for st in ev.chain.stages:
        if not _is_mosfet(st):
            continue
        v = ev.dc.ops[st.name].values
        vov = float(np.ravel(v["vov_v"])[0])
        if not vov > 0:
            continue                       # cut off: a bias problem of its own
        p = mosfet.at_temperature(ev.params[st.name])
        gm, gmb = float(np.ravel(v["gm_s"])[0]), float(np.ravel(v["gmb_s"])[0])
        bulk_at_source = isinstance(p["bulk"], str) and p["bulk"] == "source"
        if not bulk_at_source and float(np.ravel(p["gamma"])[0]) > 0 and gm > 0:
            n = 1.0 + gmb / gm             # γ/(2√(PHI + VSB)) at the device's own VSB
        else:
            n = float(np.ravel(slope_factor(p, 0.0))[0])
        t = float(np.ravel(p["temp_k"])[0])
        ic = float(np.ravel(inversion_coefficient(v["id_a"], p["kp"], mosfet.aspect(p), n, t))[0])
        if not ic < STRONG_IC:
            continue
        over = float(gm_overstatement(ic))
        region = "weak" if ic < WEAK_IC else "moderate"
        ut = K_BOLTZMANN * t / Q_ELECTRON
        vov_strong = float(2.0 * n * ut * np.sqrt(STRONG_IC))
        out.append({
            "stage": st.name, "kind": st.kind, "model": "mosfet_square_law", "region": region,
            "inversion_coefficient": ic, "slope_factor": n, "vov_v": vov, "vov_strong_v": vov_strong,
            "gm_overstatement": over,
            "message": (f"{st.name}: {region} inversion (inversion coefficient {figure(ic, 'V/V')}, "
                        f"Vov {figure(vov, 'V')} where strong inversion needs about {figure(vov_strong, 'V')}): "
                        f"the square law overstates gm by about {figure(over - 1, '%', decimals=0)} "
                        "(EKV interpolation); the stage's gain, output resistance and noise are optimistic"),
        })
    return out


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: a ``model warning`` row per stage outside its model's range, ``warnings`` in JSON."""
    warns = mosfet_warnings(b.ev)
    if not warns:
        return
    b.extra_summary.extend(("model warning", w["message"]) for w in warns)
    b.extra_json["warnings"] = warns
