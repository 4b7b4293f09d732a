"""Supply rejection: rail ripple and noise carried to the output beside the noise.

A rail's ripple is declared as a density (``power: ripple: {vdd: 2 µV/√Hz}``, or
``[2 µV/√Hz, 100 Hz]`` with a 1/f corner, like an op-amp's en).  It enters the
chain where the rail does, as extra generators of the noise analysis
(engine/noise.py adds them to each stage's own), so it is carried through the
same rows and reported, integrated and counted in the SNR like any noise:

* an op-amp's ``v_pos``/``v_neg``: referred to its + input divided by the
  supply rejection, ``PSRR(f) = PSRR_dc/(1 + j·f/f_c)`` (single-pole roll-off
  above ``psrr_corner``, the data-sheet curve's common shape), acting where en
  acts; an op-amp without ``psrr`` is taken as ideal and a note says so;
* an op-amp's ``ref`` on a rail: the non-inverting stage's ref is an EMF in
  series with RG (it acts where RG's thermal EMF does), the inverting and
  transimpedance stages' ref sits at the + input (where en acts);
* a resistor returning to a rail (a bias network's ``r_bias`` to vdd, a
  divider's bottom, a high-pass's shunt): the ripple drives the current
  ``v/R`` into the node, where the resistor's thermal current acts — exact,
  so the hydrophone's gate bias off vdd reaches the gate through its own
  divider with the sensor impedance.

* a follower's drain (``source_follower``) or collector (``emitter_follower``)
  supply: the channel's (collector's) output conductance 1/ro carries the
  supply's ripple v_d as a current v_d/ro into the output node, where the
  channel (collector shot) noise current acts, and a MOSFET's Cgd carries
  s·Cgd·v_d into the gate — the small-signal drain terminal driven instead of
  grounded (i_d = gm·v_gs + gmb·v_bs + v_ds/ro; Razavi, *Design of Analog CMOS
  Integrated Circuits*, §3.4, and Gray & Meyer, *Analysis and Design of Analog
  Integrated Circuits*, ch. 1 (the Early effect), from memory).  The body
  effect enters where it sets the output conductance gm + gmb + 1/ro, so the
  rejection of an ideally biased follower is about gm·ro (plus gmb·ro); ro
  comes from the device model (λ, or the Early voltage VA);

Not carried (listed in the notes): the supply of common-source and
common-emitter stages, and the converter's reference (its ripple would be an
error in proportion to the reading, −(V − fs_low)/span·v_r).
"""
from __future__ import annotations

import math

import numpy as np

from ..errors import SpecError, nearest
from ..spec.units import UnitError, parse_value
from ..stages.noise_sources import NoiseSource, density

RAIL_FIELDS_OPAMP = ("v_pos", "v_neg")


def parse_ripple(chain, node, path, line=None) -> dict:
    """``power: ripple:`` -> {rail: (density V/√Hz, corner Hz)}."""
    from ..spec.yamlsrc import LDict
    if not hasattr(node, "items"):
        raise SpecError("'ripple' maps rail names to densities, e.g. 'vdd: 2 µV/√Hz'", path,
                        getattr(node, "line", None) or line, "power.ripple")
    out = {}
    for rail, raw in node.items():
        where, line = f"power.ripple.{rail}", node.line_of(rail) if isinstance(node, LDict) else None
        if rail not in chain.rails:
            raise SpecError(f"'{rail}' is not a declared rail" + nearest(str(rail), chain.rails), path, line, where)
        items = raw if isinstance(raw, list) else [raw]
        if len(items) not in (1, 2):
            raise SpecError("a ripple is a density or [density, 1/f corner], e.g. [2 µV/√Hz, 100 Hz]", path, line,
                            where)
        try:
            d = parse_value(items[0], "V/rtHz")
            fc = parse_value(items[1], "Hz") if len(items) == 2 else 0.0
        except UnitError as exc:
            raise SpecError(str(exc), path, line, where) from None
        if not (d >= 0 and math.isfinite(d) and fc >= 0 and math.isfinite(fc)):
            raise SpecError("a ripple density and its corner are finite and not negative", path, line, where)
        out[rail] = (d, fc)
    return out


def _rail_of(st, fld):
    return st.raw.get("__rails__", {}).get(fld)


FOLLOWER_SUPPLY = {"source_follower": ("drain", "channel"), "emitter_follower": ("collector", "collector shot")}


def ripple_generators(chain, st, p, s, gens, op=None) -> list:
    """Extra generators of stage ``st`` for the declared rail ripple (``gens``: its own noise
    sources, ``op``: its operating point)."""
    spec = chain.extra.get("power")
    ripple = getattr(spec, "ripple", None) or {}
    if not ripple:
        return []
    by_label = {g.label: g for g in gens}
    out = []

    def psd(rail):
        d, fc = ripple[rail]
        return density(d, s, fc)

    if st.kind.startswith("opamp_"):
        en = by_label.get("en")
        for fld in RAIL_FIELDS_OPAMP:
            rail = _rail_of(st, fld)
            if rail in ripple and en is not None and p.get("psrr") is not None:
                rej = (1.0 + s / (2 * np.pi * p["psrr_corner"])) * 10.0 ** (-p["psrr"] / 20.0)
                out.append(en._replace(label=f"ripple {rail} ({fld}, PSRR)",
                                       psd=psd(rail) * (rej.real ** 2 + rej.imag ** 2)))
        rail = _rail_of(st, "ref")
        if rail in ripple:
            g = by_label.get("r_g thermal") if st.kind == "opamp_noninverting" else en
            if g is not None:
                out.append(g._replace(label=f"ripple {rail} (ref)", psd=psd(rail)))
    elif st.kind in FOLLOWER_SUPPLY and op is not None:
        fld, label = FOLLOWER_SUPPLY[st.kind]
        rail = _rail_of(st, fld)
        base = by_label.get(label)
        if rail in ripple and base is not None:
            g_ds = 1.0 / np.asarray(op.values["ro_ohm"], dtype=float)
            c_gd = p.get("cgd", 0.0) if st.kind == "source_follower" else 0.0
            out.append(NoiseSource(f"ripple {rail} ({fld}, ro)", psd(rail), in_i=-s * c_gd, out_i=g_ds))
    elif hasattr(st.model, "sections"):
        rails = st.raw.get("__rails__", {})
        fld = next((f for f in ("ref", "bias") if f in rails), None)
        if fld is not None and rails[fld] in ripple:
            for sec in st.model.sections(p):
                g = by_label.get(f"{sec.name or sec.what} thermal")
                if sec.what == "shunt_r" and g is not None:
                    out.append(g._replace(label=f"ripple {rails[fld]} via {sec.name}",
                                          psd=psd(rails[fld]) * np.abs(1.0 / np.asarray(sec.value, dtype=float)) ** 2))
    return out


def ripple_notes(chain) -> list:
    """What the ripple analysis leaves out for this chain."""
    spec = chain.extra.get("power")
    ripple = getattr(spec, "ripple", None) or {}
    if not ripple:
        return []
    notes = []
    for st in chain.stages:
        rails = st.raw.get("__rails__", {})
        if st.kind.startswith("opamp_") and st.params.get("psrr") is None and \
                any(rails.get(f) in ripple for f in RAIL_FIELDS_OPAMP):
            notes.append(f"'{st.name}' has no psrr: its supply ripple counts as rejected")
        if st.kind in ("common_source", "common_emitter") and any(r in ripple for r in rails.values()):
            notes.append(f"'{st.name}': ripple on its supply is not carried")
        if st.kind == "adc" and any(rails.get(f) in ripple for f in ("fs_high", "fs_low")):
            notes.append(f"'{st.name}': ripple on its reference is not carried")
    return notes
