"""BJT emitter follower (common collector, NPN).

Hybrid-π model (Sedra & Smith, *Microelectronic Circuits*, emitter follower, from memory):
    Rin  = rπ + (β + 1)·(RE ‖ ro ‖ RL)
    Rout = (Rsource + rπ)/(β + 1) ‖ RE ‖ ro
    Av   = (β + 1)·R / (rπ + (β + 1)·R)
The two-port is bilateral (input depends on load, output on source), so the
engine gets the full ABCD matrix and these follow from it.  The base draws
IB = IC/β from the node that drives it.
"""
from __future__ import annotations

import numpy as np

from ..devices import bjt
from .device_fields import bjt_fields
from .base import DcLoad, Field, Op, StageKind, dc_source, follower, inv
from .noise_sources import NoiseSource, follower_low_side_noise, shot, sink_noise_field


class EmitterFollower(StageKind):
    kind, title, follower_type = "emitter_follower", "BJT emitter follower (NPN)", True
    NOISE_DATA, intrinsic_noise = ("i_bias_noise",), True   # shot noise from the operating point
    draws_input_current = True
    FIELDS = {
        **bjt_fields(),
        "i_bias": Field("A", "bias current sink from the emitter to v_low", positive=True),
        "r_e": Field("ohm", "emitter resistor to v_low (instead of i_bias)", positive=True),
        "r_bias": Field("ohm", "output resistance of the bias current sink", default="inf",
                        positive=True, allow_inf=True),
        "v_compliance": Field("V", "minimum voltage across the current sink", default="0.2 V", minimum=0.0),
        **sink_noise_field("i_bias", "bias current sink"),
    }
    ONE_OF = (("i_bias", "r_e"),)

    def _r_to_low(self, p):
        return p["r_bias"] if p.get("i_bias") is not None else p["r_e"]

    def dc_input_load(self, p, out_load, op):
        return DcLoad(0.0, 0.0) if op is None else op.input_load

    def dc_forward(self, p, st_in, v_in, out_load):
        p = bjt.at_temperature(p)
        vt = bjt.thermal_voltage(p["temp_k"])
        r_low = self._r_to_low(p)
        i_src = p["i_bias"] if p.get("i_bias") is not None else 0.0
        ve, ic, ib = bjt.solve_emitter(
            p, v_in, p["collector"],
            lambda v: i_src + (v - p["v_low"]) * inv(r_low) + out_load.G * v - out_load.I0, vt)
        gm, r_pi, ro = bjt.small_signal(ic, ib, p["va"], p["collector"] - v_in, vt)
        beta = ic / ib          # effective current gain at this bias
        g_out = inv(ro) + inv(r_low)
        y = 1.0 / r_pi
        # Any slope gives exact downstream DC levels (the load is already in the
        # solve); the ideal-driver output resistance keeps the relation meaningful.
        r_out = inv(g_out + gm + y)
        op = Op(values=dict(vbe_v=v_in - ve, ic_a=ic, ib_a=ib, gm_s=gm, rpi_ohm=r_pi, ro_ohm=ro,
                            power_w=(ic + ib) * (p["collector"] - p["v_low"])))
        low = p["v_low"] + (p["v_compliance"] if p.get("i_bias") is not None else 0.0)
        op.out_range = (low, p["collector"] - p["vce_sat"])
        op.in_range = (-np.inf, p["collector"] - p["vce_sat"] + (v_in - ve))
        # Base current linearised at this bias, so the chain's DC loop is a Newton
        # iteration: dIB/dVB = 1/(rπ + (β + 1)·RE_dc), RE_dc the emitter's DC load.
        g_in = inv(r_pi + (beta + 1.0) * inv(g_out + out_load.G))
        op.input_load = DcLoad(g_in, g_in * v_in - ib)
        sat = p["collector"] - ve < p["vce_sat"]
        # No DC path for the base current: the driving node's DC resistance (b/a of
        # e = a·V + b·I) times IB exceeds the whole supply span, so no base bias exists
        # (an ac-coupled or electret-like source without a bias resistor).
        with np.errstate(divide="ignore", invalid="ignore"):
            r_dc = np.abs(np.asarray(st_in.b, dtype=float) / np.asarray(st_in.a, dtype=float))
            drop = ib * r_dc
        span = p["collector"] - p["v_low"]
        no_path = ~np.isfinite(r_dc) | (drop > span)
        if np.any(no_path):
            from ..spec.units import fmt
            r_txt = "an open circuit" if not np.all(np.isfinite(r_dc)) else fmt(float(np.max(r_dc)), "Ω")
            i_e = p["i_bias"] if p.get("i_bias") is not None else span / p["r_e"]
            ib_need = float(np.max(i_e / (np.asarray(p["beta"], dtype=float) + 1.0)))   # IB = IE/(β + 1)
            op.flag(no_path, "i_bias" if p.get("i_bias") is not None else "r_e",
                    f"the base has no DC bias path: what drives it has a DC resistance of {r_txt}, through "
                    f"which the base current (about {fmt(ib_need, 'A')}) cannot flow within the "
                    f"{span:.3g} V supply (bias the base through a resistor to a rail: an ac_coupling with "
                    "r_bias, or a candidate's input_bias)")
        op.flag(sat & ~no_path, "collector", "the transistor saturates at this bias")
        if p.get("i_bias") is not None:
            op.flag(~sat & ~no_path & (ve - p["v_low"] < p["v_compliance"]), "i_bias",
                    f"the emitter sits at {float(np.min(ve)):.3g} V, below the current "
                    "sink's compliance; the bias current cannot flow in the active region")
        i_load = out_load.G * ve - out_load.I0
        return dc_source(ve + r_out * i_load, r_out), op

    def class_a(self, p, op):
        """(emitter current, conductance from the output to v_low) for the class-A limit (engine/swing.py)."""
        return op.values["ic_a"] + op.values["ib_a"], inv(self._r_to_low(p))

    def noise(self, p, s, op, temp_k):
        """Shot noise (Gray & Meyer, noise chapter, from memory): 2qIC flows from the
        collector (AC ground) into the emitter, the output node; 2qIB leaves the base
        node and enters the emitter node (one generator acting at both, correlated).
        RE's 4kT/RE, or the sink's noise current, enters the emitter node."""
        v = op.values
        out = [NoiseSource("collector shot", shot(v["ic_a"]), out_i=1.0),
               NoiseSource("base shot", shot(v["ib_a"]), in_i=1.0, out_i=1.0)]
        return out + [follower_low_side_noise(p, s, temp_k, "r_e")]

    def abcd(self, p, s, op):
        v = op.values
        return follower(1.0 / v["rpi_ohm"], v["gm_s"], inv(v["ro_ohm"]) + inv(self._r_to_low(p)))


KINDS = [EmitterFollower]
