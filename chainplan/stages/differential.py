"""Differential stages: a Wheatstone bridge source and the four-resistor difference
amplifier that turns its pair of legs into one single-ended signal.

How a pair is carried (docs/models.md, "Differential pairs"): the chain's cascade
carries the differential-mode signal Vd = V+ − V− exactly as it carries a
single-ended one (the bridge's row is (1, Zd), the amplifier's input the
differential admittance Yd), and the common mode Vcm = (V+ + V−)/2 is carried
beside it by engine/commonmode.py, which converts it to the output through the
amplifier's own four resistors with the source's leg impedances in series —
mismatch of either is the mode conversion.  DM → CM conversion (the unequal
currents the amplifier's two inputs draw) acts back on the differential signal
only at second order in the mismatch and is left out.

Bridge: four arms R from the excitation to ground; each output leg is R ‖ R = R/2,
the differential source impedance the two legs in series, R, and the common-mode
source impedance the two legs in parallel, R/4; the common mode sits at half the
excitation (Wheatstone; Horowitz & Hill, *The Art of Electronics*, ch. 1, from memory).

Difference amplifier (R1 from the − terminal to the − input, R2 feedback, R3 from
the + terminal to the + input, R4 from the + input to ref), with an ideal op-amp:
    Vout − ref = (1 + R2/R1)·h·V+ − (R2/R1)·V− − (1 + R2/R1)·h·ref,   h = R4/(R3 + R4)
    Ad = ½·[(1 + R2/R1)·h + R2/R1],  Acm = (R1·R4 − R2·R3)/(R1·(R3 + R4))
(Franco, *Design with Operational Amplifiers*, difference amplifier, from memory);
CMRR = |Ad/Acm|; with each resistor within ±t the worst case is CMRR ≈ (1 + G)/(4t),
G = R2/R1 (common practice).  With the open-loop gain A(s) both transfers are
multiplied by T/(1 + T), T = A·R1/(R1 + R2) (the loop of the noise gain 1 + R2/R1).
"""
from __future__ import annotations

import numpy as np

from .base import DcLoad, DcState, Field, Op, StageKind, chain, dc_source, inv, shunt_y, unilateral
from .dc_sources import drifted, err, limit
from .noise_sources import NoiseSource, density, thermal_v
from .opamp import COMMON, inv_open_loop
from .sensor import SENSITIVITY


class Bridge(StageKind):
    kind, title, role = "bridge", "Wheatstone bridge: a differential source (Vd behind R, common mode at half " \
                                  "the excitation)", "source"
    signal_unit = "V"
    differential = True
    FIELDS = {
        "amplitude": Field("V", "differential signal amplitude V+ − V−, a peak (or rms or peak-to-peak)",
                           required=True, positive=True),
        "dc": Field("V", "differential DC level of the bridge at the zero point (its offset)", default="0 V"),
        "excitation": Field("V", "excitation across the bridge, a rail or a voltage; the common mode sits at half of "
                            "it (the other end on ground)", required=True, rail_ok=True),
        "r": Field("ohm", "resistance of each of the four arms", default="350 Ω", positive=True),
        "imbalance": Field("%", "difference of the two legs' source resistances, relative to R/2 (converts common "
                           "mode to differential in the amplifier)", default="0 %"),
        "offset": limit("V", "differential offset at the zero point, a limit at 25 °C"),
        "offset_drift": limit("V/K", "drift of the bridge's offset"),
        **SENSITIVITY,
        "i_excitation": Field("A", "current drawn from the excitation rail (excitation/R for a full bridge of four "
                              "equal arms)", default="0 A", minimum=0.0, tolerable=False),
    }

    def z_source(self, p, s):
        """The differential source impedance: the two legs R/2 in series, R."""
        return p["r"] + 0.0 * s

    def legs(self, p):
        """The + and − legs' source resistances R/2·(1 ± imbalance/2) and the common mode."""
        half = 0.5 * p["r"]
        return half * (1.0 + 0.5 * p["imbalance"]), half * (1.0 - 0.5 * p["imbalance"]), 0.5 * p["excitation"]

    def source_row(self, p, s):
        zs = self.z_source(p, s)
        return np.ones_like(s) + 0.0 * zs, zs

    @staticmethod
    def emf(p):
        if "_err" not in p and "_dx" not in p:
            return p["dc"]
        return p["dc"] + p.get("_dx", 0.0) * (1.0 + err(p, "sensitivity_error")) + drifted(p, "offset", "offset_drift")

    def dc_state(self, p) -> DcState:
        return DcState(self.emf(p), 1.0, p["r"])

    def dc_forward(self, p, st_in, v_in, out_load):
        return self.dc_state(p), Op()

    def noise(self, p, s, op, temp_k):
        """Nyquist noise of the differential source resistance R (the two legs in series)."""
        return [NoiseSource("arms thermal", thermal_v(p["r"] + 0.0 * np.real(s), temp_k), out_v=1.0)]


def ideal_transfers(r1, r2, r3, r4):
    """(Ad, Acm, h) of the four-resistor difference amplifier with an ideal op-amp (module docstring)."""
    h = r4 / (r3 + r4)
    g = r2 / r1
    ad = 0.5 * ((1.0 + g) * h + g)
    acm = (r1 * r4 - r2 * r3) / (r1 * (r3 + r4))
    return ad, acm, h


def worst_case_cmrr(gain, tol):
    """The common-practice worst case of four resistors each within ±tol: (1 + G)/(4·tol)."""
    return (1.0 + gain) / (4.0 * tol)


class DifferenceAmplifier(StageKind):
    kind, title = "difference_amplifier", "four-resistor difference amplifier on an op-amp (differential in, " \
                                          "single-ended out), gain R2/R1"
    reads_differential = True
    FIELDS = {
        **{k: v for k, v in COMMON.items() if k not in ("r_in", "c_in", "cmrr", "ib", "ios", "ib_doubling", "vos",
                                                        "vos_drift", "psrr", "psrr_corner")},
        "r1": Field("ohm", "input resistor of the − terminal", required=True, positive=True),
        "r2": Field("ohm", "feedback resistor (output to − input)", required=True, positive=True),
        "r3": Field("ohm", "input resistor of the + terminal (default: r1)", positive=True),
        "r4": Field("ohm", "resistor from the + input to ref (default: r2)", positive=True),
        "match": Field("%", "resistor tolerance for the worst-case CMRR (1 + G)/(4·match), common practice "
                       "(default 0: the nominal resistors' own CMRR); not with tolerances on r1 to r4, which a tolerance "
                       "run draws instead", default="0 %", minimum=0.0, tolerable=False),
        "cmrr": Field("dB", "the op-amp's own common-mode rejection (absent: ideal)", positive=True, tolerable=False),
        "ref": Field("V", "reference the output sits on at zero differential input", default="0 V", rail_ok=True),
    }

    @staticmethod
    def resistors(p):
        return p["r1"], p["r2"], p.get("r3", p["r1"]), p.get("r4", p["r2"])

    def _closed(self, p, s):
        """T/(1 + T) with T = A(s)·β, β = R1/(R1 + R2), as 1/(1 + 1/T)."""
        r1, r2, _, _ = self.resistors(p)
        beta = r1 / (r1 + r2)
        return 1.0 / (1.0 + inv_open_loop(p, s) / beta)

    def y_diff(self, p):
        """Differential input admittance Id/Vd, Id = (I+ − I−)/2, ideal op-amp:
        [1/(R3 + R4) + (1 + h)/R1]/4 (nodal analysis; 1/(2·R1) for matched resistors)."""
        r1, r2, r3, r4 = self.resistors(p)
        h = r4 / (r3 + r4)
        return 0.25 * (1.0 / (r3 + r4) + (1.0 + h) / r1)

    def abcd(self, p, s, op):
        """The differential input admittance, then Vout = Ad·T/(1 + T)·Vd behind Ro/(1 + T)."""
        ad = ideal_transfers(*self.resistors(p))[0]
        k = self._closed(p, s)
        return chain(shunt_y(self.y_diff(p) + 0.0 * s), unilateral(0.0, 1.0 / (ad * k), p["r_out"] * (1.0 - k)))

    def dc_input_load(self, p, out_load, op):
        """The differential input resistance (both terminals on the common mode)."""
        return DcLoad(self.y_diff(p), 0.0)

    def dc_forward(self, p, st_in, v_in, out_load):
        """Vout = ref + Ad·T/(1 + T)·Vd at DC; the common mode's share is engine/commonmode.py's."""
        ad = ideal_transfers(*self.resistors(p))[0]
        k = self._closed(p, 0.0)
        v = p["ref"] + ad * k * v_in
        out = (p["v_neg"] + p["swing_low"], p["v_pos"] - p["swing_high"])
        op = Op(values=dict(power_w=p["i_supply"] * (p["v_pos"] - p["v_neg"])), in_range=(-np.inf, np.inf),
                out_range=out)
        railed = (v < out[0]) | (v > out[1])
        if np.any(railed):
            op.flag(railed, "ref", "the output would sit outside its output range at DC: the op-amp saturates "
                                   "(check the bridge's offset, the reference and the gain)")
        return dc_source(v, p["r_out"] * (1.0 - k)), op

    def noise(self, p, s, op, temp_k):
        """en at the + input times the noise gain 1 + R2/R1; the thermal noise of the four
        resistors at the output: R1 by −R2/R1, R2 by 1, R3 by −h·(1 + R2/R1), R4 by
        (1 − h)·(1 + R2/R1) (superposition on the ideal-op-amp transfers, Franco, noise
        chapter, from memory), each carried as an output EMF times T/(1 + T)."""
        r1, r2, r3, r4 = self.resistors(p)
        g = r2 / r1
        h = r4 / (r3 + r4)
        k = self._closed(p, s)
        gens = [("en", density(p["en"], s, p["en_corner"]), (1.0 + g)),
                ("r1 thermal", thermal_v(r1, temp_k), g), ("r2 thermal", thermal_v(r2, temp_k), 1.0),
                ("r3 thermal", thermal_v(r3, temp_k), h * (1.0 + g)),
                ("r4 thermal", thermal_v(r4, temp_k), (1.0 - h) * (1.0 + g)),
                ("in−", density(p["in"], s, p["in_corner"]) * r2 ** 2, 1.0),
                ("in+", density(p["in"], s, p["in_corner"]) * (r3 * r4 / (r3 + r4)) ** 2, 1.0 + g)]
        return [NoiseSource(name, psd, out_v=c * k) for name, psd, c in gens]


KINDS = [Bridge, DifferenceAmplifier]
