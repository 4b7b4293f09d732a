"""The common-mode budget of every differential interface (a bridge read by a
difference amplifier; stages/differential.py): the common mode the source puts on
both legs, its conversion to the output through the amplifier's four resistors with
the legs' source resistances in series (their mismatch, and the resistors', is the
mode conversion), the worst case of the declared resistor ``match`` and the op-amp's
own finite CMRR, giving the CMRR as connected, the output error Acm·(Vcm − ref), the
same referred to the input (÷ Ad) and the common-mode range at the op-amp's inputs.

Per differential interface, vectorised over samples (parameters may be (S, 1) arrays):

    R1' = R1 + R_leg−,  R3' = R3 + R_leg+                 (the legs in series with the inputs)
    Ad, Acm_net from R1', R2, R3', R4                     (stages/differential.ideal_transfers)
    |Acm| ≤ |Acm_net| + Ad/((1 + G)/(4·match)) + h·(1 + G)/CMRR_opamp
    CMRR = Ad/|Acm|

The three terms add as magnitudes (their signs are unknown: the worst case, as the
DC error budget adds its sources).  The op-amp's own term is its input common mode
h·Vcm over its CMRR, times the noise gain 1 + G (data-sheet CMRR referred to the
input, Franco, *Design with Operational Amplifiers*, from memory).  Common-mode range:
the op-amp's inputs sit at V+ = h·V_leg+ + (1 − h)·ref at both ends of the signal
(V_leg+ = Vcm ± Vd/2 ± the signal's peak/2), inside [v_neg + cm_low, v_pos − cm_high].
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..stages.differential import ideal_transfers


@dataclass
class CmInterface:
    source: str
    amplifier: str
    vcm_v: np.ndarray            # (S,) common mode of the legs
    ad: np.ndarray               # (S,) differential gain at DC (ideal op-amp)
    acm: np.ndarray              # (S,) worst-case |Acm|
    acm_network: np.ndarray      # (S,) the resistors' and legs' own Acm (signed)
    cmrr_db: np.ndarray          # (S,) 20·log10(Ad/|Acm|)
    error_out_v: np.ndarray      # (S,) |Acm·(Vcm − ref)| at the output
    error_in_v: np.ndarray       # (S,) the same ÷ Ad (referred to Vd)
    cm_in_v: tuple               # ((S,), (S,)) lowest and highest level at the op-amp's inputs
    cm_limits_v: tuple           # ((S,), (S,)) the op-amp's input common-mode range
    cm_margin_v: np.ndarray      # (S,) distance to the nearer limit (negative: outside)


def _s(x, n):
    """A figure per sample, (S,)."""
    return np.broadcast_to(np.ravel(np.asarray(x, dtype=float)), (n,))


def interfaces(chain) -> list:
    """(source stage, amplifier stage) of every differential interface."""
    return [(chain.stage(st.parent), st) for st in chain.stages if getattr(st.model, "reads_differential", False)]


def analyse_common_mode(chain, params, n: int = 1) -> list:
    """The common-mode budget of every differential interface (module docstring)."""
    out = []
    for src, amp in interfaces(chain):
        ps, pa = params[src.name], params[amp.name]
        r_p, r_n, vcm = src.model.legs(ps)
        r1, r2, r3, r4 = amp.model.resistors(pa)
        ad, acm_net, h = ideal_transfers(r1 + r_n, r2, r3 + r_p, r4)
        g = r2 / (r1 + r_n)
        match = pa.get("match", 0.0)
        acm_match = np.where(np.asarray(match) > 0, ad * 4.0 * np.asarray(match) / (1.0 + g), 0.0)
        acm_op = h * (1.0 + g) * 10.0 ** (-pa["cmrr"] / 20.0) if "cmrr" in pa else 0.0
        acm = np.abs(acm_net) + acm_match + acm_op
        with np.errstate(divide="ignore"):
            cmrr_db = 20.0 * np.log10(np.abs(ad) / acm)
        ref = pa["ref"]
        err_out = acm * np.abs(vcm - ref)
        amp_pk = ps["amplitude"]
        d = 0.5 * (np.abs(ps["dc"]) + amp_pk)
        lo_in = h * (vcm - d) + (1.0 - h) * ref
        hi_in = h * (vcm + d) + (1.0 - h) * ref
        lo_lim, hi_lim = pa["v_neg"] + pa["cm_low"], pa["v_pos"] - pa["cm_high"]
        margin = np.minimum(hi_lim - np.maximum(lo_in, hi_in), np.minimum(lo_in, hi_in) - lo_lim)
        out.append(CmInterface(src.name, amp.name, _s(vcm, n), _s(ad, n), _s(acm, n), _s(acm_net, n),
                               _s(cmrr_db, n), _s(err_out, n), _s(err_out / np.abs(ad), n),
                               (_s(lo_in, n), _s(hi_in, n)), (_s(lo_lim, n), _s(hi_lim, n)), _s(margin, n)))
    return out


def cm_json(r: CmInterface) -> dict:
    f = lambda x: float(np.ravel(x)[0])  # noqa: E731
    return {"source": r.source, "amplifier": r.amplifier, "common_mode_v": f(r.vcm_v), "ad": f(r.ad),
            "acm": f(r.acm), "cmrr_db": f(r.cmrr_db), "error_out_v": f(r.error_out_v), "error_in_v": f(r.error_in_v),
            "cm_in_v": [f(r.cm_in_v[0]), f(r.cm_in_v[1])], "cm_range_v": [f(r.cm_limits_v[0]), f(r.cm_limits_v[1])],
            "cm_margin_v": f(r.cm_margin_v), "cm_inside": bool(f(r.cm_margin_v) >= 0)}


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: CMRR, common-mode error and range per differential interface."""
    from ..spec.numbers import figure
    from .budget import nominal_params
    res = analyse_common_mode(b.chain, nominal_params(b.chain))
    if not res:
        return
    from .measurand import measurand, show
    m = measurand(b.chain)
    for r in res:
        j = cm_json(r)
        tag = f"{r.source} → {r.amplifier}"
        b.extra_summary.append((f"CMRR as connected, {tag}", figure(j["cmrr_db"], "dB", signed=False, decimals=1)))
        err = figure(j["error_out_v"], "V") + f" at the output ({figure(j['error_in_v'], 'V')} at the input"
        err += (f", {show(m.of(j['error_in_v']), m.unit)})" if m is not None else ")")
        b.extra_summary.append((f"common-mode error ({figure(j['common_mode_v'], 'V')} common mode)", err))
        lo, hi = j["cm_in_v"]
        verdict = "inside" if j["cm_inside"] else "OUTSIDE"
        b.extra_summary.append((f"op-amp input common mode, {r.amplifier}",
                                f"{figure(lo, 'V')} to {figure(hi, 'V')}, {verdict} its range "
                                f"{figure(j['cm_range_v'][0], 'V')} to {figure(j['cm_range_v'][1], 'V')}"))
    b.extra_json["common_mode"] = [cm_json(r) for r in res]
