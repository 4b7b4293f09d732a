"""MOSFET source follower (common drain) from level-1 device parameters.

Small signal (Sedra & Smith, *Microelectronic Circuits*; Razavi, *Design of
Analog CMOS Integrated Circuits*, §3.4; from memory):
    Av   = gm·R / (1 + (gm + gmb)·R),     R = RS ‖ ro (‖ RL, applied by the engine)
    Rout = 1/(gm + gmb) ‖ ro ‖ RS
    Rin  → ∞ (gate), plus sCgd and the bootstrapped sCgs if given.
gmb is zero when the bulk is tied to the source.  The DC level shift is
VGS = Vth(VSB) + Vov, solved with the load's DC current included.
"""
from __future__ import annotations

import numpy as np

from ..devices import mosfet
from .device_fields import MOSFET_ONE_OF, mosfet_fields
from .base import DcLoad, Field, Op, StageKind, dc_source, follower, inv
from .dc_sources import doubled, doubling_field, limit
from .noise_sources import (MosfetNoiseChecks, NoiseSource, follower_low_side_noise, mosfet_channel_psd,
                            mosfet_noise_fields, sink_noise_field)


class SourceFollower(MosfetNoiseChecks, StageKind):
    kind, title, follower_type = "source_follower", "MOSFET source follower (NMOS)", True
    NOISE_DATA, intrinsic_noise = (("flicker_corner", "kf"), "i_bias_noise"), True   # channel thermal noise from gm
    FIELDS = {
        **mosfet_fields(),
        "i_bias": Field("A", "bias current sink from the source to v_low", positive=True),
        "r_s": Field("ohm", "source resistor to v_low (instead of i_bias)", positive=True),
        "r_bias": Field("ohm", "output resistance of the bias current sink", default="inf",
                        positive=True, allow_inf=True),
        "v_compliance": Field("V", "minimum voltage across the current sink", default="0.2 V", minimum=0.0),
        "cgs": Field("F", "gate–source capacitance", default="0 F", minimum=0.0),
        "cgd": Field("F", "gate–drain capacitance", default="0 F", minimum=0.0),
        **mosfet_noise_fields(),
        **sink_noise_field("i_bias", "bias current sink"),
        "i_gate": limit("A", "gate leakage current, a limit at 25 °C (protection diodes, package)"),
        **doubling_field("gate"),
    }
    ONE_OF = (MOSFET_ONE_OF, ("i_bias", "r_s"))

    def _bias(self, p):
        """(bias current at vs, resistance from source to v_low) for either bias choice."""
        if p.get("i_bias") is not None:
            return (lambda vs: p["i_bias"] + (vs - p["v_low"]) * inv(p["r_bias"])), p["r_bias"]
        return (lambda vs: (vs - p["v_low"]) / p["r_s"]), p["r_s"]

    def dc_input_load(self, p, out_load, op):
        """The gate draws only its leakage (switched on by an error analysis), doubling per gate_doubling."""
        return DcLoad(0.0, -doubled(p, "i_gate", p["gate_doubling"])) if "_err" in p else DcLoad(0.0, 0.0)

    def dc_forward(self, p, st_in, v_in, out_load):
        p = mosfet.at_temperature(p)
        bias, r_to_low = self._bias(p)
        v_b = mosfet.bulk_voltage(p)
        vs, i_d, vov, vth, vsb = mosfet.solve_source(
            p, v_in, p["drain"], v_b, lambda v: bias(v) + out_load.G * v - out_load.I0)
        gm, gmb, ro = mosfet.small_signal(i_d, vov, p["drain"] - vs, p["lambda"], p["gamma"], p["phi"], vsb)
        if v_b is None:
            gmb = 0.0 * gm
        r_out = inv(gm + gmb + inv(ro) + inv(r_to_low))
        op = Op(values=dict(vgs_v=v_in - vs, vov_v=vov, vth_v=vth, id_a=i_d, gm_s=gm, gmb_s=gmb, ro_ohm=ro,
                            rout_ohm=r_out, power_w=i_d * (p["drain"] - p["v_low"])))
        low = p["v_low"] + (p["v_compliance"] if p.get("i_bias") is not None else 0.0)
        op.out_range = (low, p["drain"] - vov)
        op.in_range = (-np.inf, p["drain"] + vth)
        field = "i_bias" if p.get("i_bias") is not None else "r_s"
        cut = (vov <= 0) | (i_d <= 0)
        op.flag(cut, field, "the device is cut off at this bias")
        sat = ~cut & (p["drain"] - vs < vov)
        op.flag(sat, field, f"the device leaves saturation (VDS = {_f(p['drain'] - vs)} V < "
                            f"Vov = {_f(vov)} V); lower the bias current or raise the drain supply")
        if p.get("i_bias") is not None:
            op.flag(~cut & ~sat & (vs - p["v_low"] < p["v_compliance"]), field,
                    f"the source sits at {_f(vs)} V, leaving the current sink less than "
                    f"its {_f(p['v_compliance'])} V compliance; the device cannot carry "
                    "this bias current in saturation with this gate level")
        i_load = out_load.G * vs - out_load.I0
        return dc_source(vs + r_out * i_load, r_out), op

    def class_a(self, p, op):
        """(device current, conductance from the output to v_low) for the class-A limit (engine/swing.py)."""
        return op.values["id_a"], inv(self._bias(p)[1])

    def noise(self, p, s, op, temp_k):
        """The channel noise current flows from the drain (AC ground) into the
        source, the output node: exact, Cgs/Cgd included.  The source resistor's
        4kT/RS or the sink's noise current enter the same node."""
        out = [NoiseSource("channel", mosfet_channel_psd(p, s, op.values, temp_k), out_i=1.0)]
        return out + [follower_low_side_noise(p, s, temp_k, "r_s")]

    def abcd(self, p, s, op):
        v = op.values
        r_to_low = p["r_bias"] if p.get("i_bias") is not None else p["r_s"]
        g_out = v["gmb_s"] + inv(v["ro_ohm"]) + inv(r_to_low)
        return follower(s * p["cgs"], v["gm_s"], g_out, s * p["cgd"])


def _f(x):
    return f"{float(np.min(x)):.3g}"


KINDS = [SourceFollower]
