"""BJT common-emitter gain stage (NPN) with a collector resistor and optional
emitter degeneration.

Small signal (Sedra & Smith, *Microelectronic Circuits*, CE amplifier with
emitter resistance, from memory; ro is neglected in the degeneration term):
    Rin  = rπ + (β + 1)·RE
    Av   = −β·(RC ‖ ro) / (rπ + (β + 1)·RE)
    Rout = RC ‖ ro
"""
from __future__ import annotations

import numpy as np

from ..devices import bjt
from .device_fields import bjt_fields
from .base import DcLoad, Field, Op, StageKind, dc_source, inv, unilateral
from .noise_sources import NoiseSource, shot, thermal_i, thermal_v


class CommonEmitter(StageKind):
    kind, title = "common_emitter", "BJT common-emitter stage (NPN)"
    draws_input_current = True
    FIELDS = {
        **bjt_fields(),
        "r_c": Field("ohm", "collector load resistor to the collector supply", required=True, positive=True),
        "r_e": Field("ohm", "emitter degeneration resistor to v_low", default="0 Ω", minimum=0.0),
    }

    def dc_input_load(self, p, out_load, op):
        return DcLoad(0.0, 0.0) if op is None else op.input_load

    def dc_forward(self, p, st_in, v_in, out_load):
        p = bjt.at_temperature(p)
        vt = bjt.thermal_voltage(p["temp_k"])
        re = np.asarray(p["r_e"], dtype=float)
        re_safe = np.where(re > 0, re, 1.0)
        vc = np.asarray(p["collector"], dtype=float) + 0.0 * np.asarray(v_in)
        for _ in range(6):  # alternate: emitter given collector, collector by KCL
            ve_bis = bjt.solve_emitter(p, v_in, vc, lambda v: (v - p["v_low"]) / re_safe, vt)[0]
            ve = np.where(re > 0, ve_bis, p["v_low"])
            ic = bjt.collector_current(p["i_s"], v_in - ve, vc - v_in, p["va"], vt)
            vc = (p["collector"] / p["r_c"] + out_load.I0 - ic) / (1.0 / p["r_c"] + out_load.G)
        ib = bjt.base_current(p["i_s"], v_in - ve, p["beta"], vt)
        gm, r_pi, ro = bjt.small_signal(ic, ib, p["va"], vc - v_in, vt)
        beta = ic / ib          # effective current gain at this bias
        r_out = inv(inv(p["r_c"]) + inv(ro))
        r_in = r_pi + (beta + 1.0) * re
        av = -beta * r_out / r_in
        op = Op(values=dict(vbe_v=v_in - ve, ic_a=ic, ib_a=ib, gm_s=gm, rpi_ohm=r_pi, ro_ohm=ro,
                            rin_ohm=r_in, av=av, rout_ohm=r_out, power_w=(ic + ib) * (p["collector"] - p["v_low"])))
        op.out_range = (ve + p["vce_sat"], p["collector"])
        # base current linearised at this bias (dIB/dVB = 1/Rin): a Newton step for the DC loop
        op.input_load = DcLoad(1.0 / r_in, v_in / r_in - ib)
        op.flag(vc - ve < p["vce_sat"], "r_c", f"the transistor saturates (VCE = {float(np.min(vc - ve)):.3g} V); "
                "lower r_c or the bias current")
        i_out = out_load.G * vc - out_load.I0
        return dc_source(vc + r_out * i_out, r_out), op

    def noise(self, p, s, op, temp_k):
        """Shot noise 2qIC and 2qIB (Gray & Meyer, noise chapter, from memory) and the
        thermal noise of RE and RC.  Solving the degenerated stage (ro neglected, as
        in abcd) with each generator in place: collector shot ≡ EMF (1 + RE/rπ)/gm
        with a correlated input current 1/β; base shot ≡ EMF RE with input current 1;
        RE's EMF acts at the base unchanged; RC's 4kT/RC enters the collector node."""
        v = op.values
        gm, r_pi, re = v["gm_s"], v["rpi_ohm"], p["r_e"]
        return [NoiseSource("collector shot", shot(v["ic_a"]), in_v=(1.0 + re / r_pi) / gm, in_i=v["ib_a"] / v["ic_a"]),
                NoiseSource("base shot", shot(v["ib_a"]), in_v=re, in_i=1.0),
                NoiseSource("r_e thermal", thermal_v(re, temp_k), in_v=1.0),
                NoiseSource("r_c thermal", thermal_i(p["r_c"], temp_k), out_i=1.0)]

    def abcd(self, p, s, op):
        v = op.values
        return unilateral(1.0 / v["rin_ohm"], 1.0 / v["av"], v["rout_ohm"])


KINDS = [CommonEmitter]
