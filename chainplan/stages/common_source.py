"""MOSFET common-source gain stage (NMOS) with a resistor or current-source load
and optional source degeneration, from level-1 device parameters.

Small signal (Razavi, *Design of Analog CMOS Integrated Circuits*, §3.3, from memory):
    Av   = −gm·ro·RD / (RD + ro + RS + (gm + gmb)·ro·RS)
    Rout = RD ‖ (ro + RS + (gm + gmb)·ro·RS)
written with gds = 1/ro so that ro → ∞ stays exact.  RD is the load resistor,
or the current source's output resistance.  Input: the gate (open).
"""
from __future__ import annotations

import numpy as np

from ..devices import mosfet
from ..devices.solve import bisect
from .device_fields import MOSFET_ONE_OF, mosfet_fields
from .base import Field, Op, StageKind, dc_source, inv, unilateral
from .noise_sources import (MosfetNoiseChecks, NoiseSource, density, mosfet_channel_psd, mosfet_noise_fields,
                            sink_noise_field, thermal_i, thermal_v)


class CommonSource(MosfetNoiseChecks, StageKind):
    kind, title = "common_source", "MOSFET common-source stage (NMOS)"
    FIELDS = {
        **mosfet_fields(),
        "r_d": Field("ohm", "drain load resistor to the drain supply", positive=True),
        "i_load": Field("A", "current-source load from the drain supply (instead of r_d)", positive=True),
        "r_load": Field("ohm", "output resistance of the current-source load", default="inf",
                        positive=True, allow_inf=True),
        "r_s": Field("ohm", "source degeneration resistor to v_low", default="0 Ω", minimum=0.0),
        **mosfet_noise_fields(),
        **sink_noise_field("i_load", "current-source load"),
    }
    ONE_OF = (MOSFET_ONE_OF, ("r_d", "i_load"))

    def _supply(self, p):
        if p.get("r_d") is not None:
            return (lambda vd: (p["drain"] - vd) / p["r_d"]), p["r_d"]
        return (lambda vd: p["i_load"] + (p["drain"] - vd) * inv(p["r_load"])), p["r_load"]

    def dc_forward(self, p, st_in, v_in, out_load):
        p = mosfet.at_temperature(p)
        supply, r_load = self._supply(p)
        v_b = mosfet.bulk_voltage(p)
        rs = np.asarray(p["r_s"], dtype=float)
        rs_safe = np.where(rs > 0, rs, 1.0)
        vd = np.asarray(p["drain"], dtype=float) + 0.0 * np.asarray(v_in)
        for _ in range(8):   # alternate: source node given drain, drain node given current
            vs = np.where(rs > 0, mosfet.solve_source(
                p, v_in, vd, v_b, lambda v: (v - p["v_low"]) / rs_safe)[0], p["v_low"])
            vsb = vs - v_b if v_b is not None else 0.0 * vs
            vth = mosfet.threshold(p["vth0"], p["gamma"], p["phi"], vsb)

            def kcl(v, vs=vs, vth=vth):   # decreasing in v: supply − device − load
                i_d = mosfet.drain_current(p["kp"], mosfet.aspect(p), v_in - vs - vth, v - vs, p["lambda"])
                return supply(v) - i_d - (out_load.G * v - out_load.I0)
            vd = bisect(kcl, vs, p["drain"] + 0.0 * vs)
        vov = v_in - vs - vth
        i_d = mosfet.drain_current(p["kp"], mosfet.aspect(p), vov, vd - vs, p["lambda"])
        gm, gmb, ro = mosfet.small_signal(i_d, vov, vd - vs, p["lambda"], p["gamma"], p["phi"], vsb)
        if v_b is None:
            gmb = 0.0 * gm
        gds = inv(ro)
        den = 1.0 + (gm + gmb) * rs + rs * gds
        g_out = inv(r_load) + gds / den
        av = -gm / (den * g_out)      # = −gm / (gds + gL·den), the Razavi form divided by ro·RD
        r_out = inv(g_out)
        op = Op(values=dict(vgs_v=v_in - vs, vov_v=vov, vth_v=vth, id_a=i_d, gm_s=gm, gmb_s=gmb, ro_ohm=ro,
                            av=av, rout_ohm=r_out, power_w=i_d * (p["drain"] - p["v_low"])))
        op.out_range = (vs + vov, p["drain"])
        op.in_range = (vs + vth, np.inf)
        field = "r_d" if p.get("r_d") is not None else "i_load"
        op.flag(vov <= 0, "vth0", "the device is cut off: the input DC level is below VS + Vth")
        op.flag((vov > 0) & (vd - vs < vov - 1e-9), field, f"the device leaves saturation (VDS = "
                f"{float(np.min(vd - vs)):.3g} V < Vov = {float(np.max(vov)):.3g} V)")
        i_out = out_load.G * vd - out_load.I0
        return dc_source(vd + r_out * i_out, r_out), op

    def noise(self, p, s, op, temp_k):
        """Channel noise referred to the gate, 4kTγ/gm (exact: the drain current is
        gm·(vg + i/gm − vs) + …); RS's EMF acts at the gate times (gm + gmb + gds)/gm;
        the load resistor's 4kT/RD, or the current source's noise, enters the drain node."""
        v = op.values
        gm = v["gm_s"]
        out = [NoiseSource("channel", mosfet_channel_psd(p, s, v, temp_k), in_v=1.0 / gm),
               NoiseSource("r_s thermal", thermal_v(p["r_s"], temp_k),
                           in_v=(gm + v["gmb_s"] + inv(v["ro_ohm"])) / gm)]
        if p.get("r_d") is not None:
            out.append(NoiseSource("r_d thermal", thermal_i(p["r_d"], temp_k), out_i=1.0))
        else:
            out.append(NoiseSource("i_load noise", density(p["i_load_noise"], s, 0.0), out_i=1.0))
        return out

    def abcd(self, p, s, op):
        v = op.values
        return unilateral(0.0, 1.0 / v["av"], v["rout_ohm"])


KINDS = [CommonSource]
