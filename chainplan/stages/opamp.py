"""Op-amp stages: follower, non-inverting and inverting, with an open-loop gain
A(s) = A0/((1 + s·A0/(2π·GBW))·(1 + s/(2π·f_p2))) (single pole by default, f_p2 = ∞),
open-loop output resistance Ro and
input common-mode and output swing limits measured from each rail.

Two-ports are derived exactly for this macro model by nodal analysis; they
reduce to the textbook results (Sedra & Smith, *Microelectronic Circuits*,
op-amp chapter; Franco, *Design with Operational Amplifiers*; from memory):
    non-inverting  G = A/(1 + A·β), β = RG/(RF + RG);  Zout = Ro/(1 + A·β)
    inverting      G = −(RF/RG)·Aβ/(1 + Aβ),  Zin ≈ RG + RF/(1 + A)
    transimpedance Vout/Iin = −Zf·A/(1 + A),  Zin ≈ Zf/(1 + A),  Zf = RF ‖ 1/(sCF)
with Ro's loading by the feedback network kept.
"""
from __future__ import annotations

import numpy as np

from .base import ABCD, DcLoad, Field, Op, StageKind, chain, dc_source, inv, shunt_y
from .dc_sources import doubled, doubling_field, drifted, err, limit
from .noise_sources import NoiseSource, density, input_noise_fields, thermal_i, thermal_v

#: DC error sources of an op-amp (data-sheet limits; see stages/dc_sources.py and docs/accuracy.md)
DC_ERRORS = {
    "vos": limit("V", "input offset voltage, data-sheet limit at 25 °C (the error budget carries ±vos)"),
    "vos_drift": limit("V/K", "input offset voltage drift, data-sheet limit"),
    "ib": limit("A", "input bias current at each input, data-sheet limit at 25 °C (both inputs alike)"),
    "ios": limit("A", "input offset current (the difference of the two bias currents), limit at 25 °C"),
    **doubling_field("bias"),
    "cmrr": Field("dB", "common-mode rejection at DC (absent: ideal); the error is (Vcm − mid-supply)/CMRR",
                  positive=True, tolerable=False),
    "psrr": Field("dB", "supply rejection at DC (absent: ideal); rail ripple reaches the input divided by it",
                  positive=True, tolerable=False),
    "psrr_corner": Field("Hz", "frequency above which the supply rejection falls 20 dB/decade",
                         default="inf", positive=True, allow_inf=True, tolerable=False),
}

COMMON = {
    "gbw": Field("Hz", "gain–bandwidth product", required=True, positive=True),
    "a0": Field("dB", "open-loop DC gain", default="120 dB", positive=True),
    "f_p2": Field("Hz", "second (non-dominant) pole of the open-loop gain (inf: single pole); from a data "
                  "sheet's unity-gain phase margin PM at crossover fc: f_p2 ≈ fc·tan(PM)", default="inf",
                  positive=True, allow_inf=True),
    "r_out": Field("ohm", "open-loop output resistance", default="0 Ω", minimum=0.0),
    "slew_rate": Field("V/s", "output slew rate (e.g. 0.5 V/µs)", default="inf", positive=True, allow_inf=True),
    "r_in": Field("ohm", "common-mode input resistance, at each input", default="inf", positive=True,
                  allow_inf=True),
    "c_in": Field("F", "common-mode input capacitance, at each input (the − input's is in the feedback "
                  "network: it sets the noise gain and the phase margin)", default="0 F", minimum=0.0),
    "v_pos": Field("V", "positive supply (inf: no rail, a quick estimate with unlimited headroom on that side)",
                   default="vdd", rail_ok=True, allow_inf=True),
    "v_neg": Field("V", "negative supply (−inf: no rail, a quick estimate with unlimited headroom on that side)",
                   default="0 V", rail_ok=True, neg_inf=True),
    "swing_high": Field("V", "output swing limit below the positive supply", default="0.1 V", minimum=0.0),
    "swing_low": Field("V", "output swing limit above the negative supply", default="0.1 V", minimum=0.0),
    "cm_high": Field("V", "input common-mode limit below the positive supply (negative: beyond it)",
                     default="0 V"),
    "cm_low": Field("V", "input common-mode limit above the negative supply (negative: beyond it)",
                    default="0 V"),
    "i_supply": Field("A", "quiescent supply current", default="0 A", minimum=0.0),
    **input_noise_fields(),
    **DC_ERRORS,
}
FEEDBACK = {
    "r_f": Field("ohm", "feedback resistor (output to inverting input)", required=True, minimum=0.0),
    "r_g": Field("ohm", "gain-setting resistor (inverting input to ref)", required=True, positive=True),
    "c_f": Field("F", "feedback capacitor across r_f (phase-lead compensation of the − input's capacitance)",
                 default="0 F", minimum=0.0),
    "ref": Field("V", "reference voltage (r_g return, or the + input of the inverting stage)",
                 default="0 V", rail_ok=True),
}


def y_input(p, s):
    """Admittance of one input to AC ground: 1/r_in + s·c_in (the common-mode
    input impedance of a data sheet, at each input).  Without c_in it does not
    depend on frequency and stays per sample (the same values, fewer array
    operations in tolerance runs)."""
    if not np.any(p["c_in"]):
        return inv(p["r_in"])
    return inv(p["r_in"]) + s * p["c_in"]


def z_feedback(p, s):
    """Zf = RF ‖ 1/(s·CF) of the feedback branch, and Zf/RF (finite for RF = 0)."""
    ratio = 1.0 / (1.0 + s * p["r_f"] * p.get("c_f", 0.0))
    return p["r_f"] * ratio, ratio


def inv_open_loop(p, s):
    """1/A(s) = (1/A0 + s/(2π·GBW))·(1 + s/(2π·f_p2)): the dominant pole at GBW/A0 and
    a second pole f_p2 (f_p2 = ∞ and A0 → ∞ stay exact); the two-pole op-amp of
    Franco, *Design with Operational Amplifiers*, stability chapter, from memory."""
    return (10.0 ** (-p["a0"] / 20.0) + s / (2 * np.pi * p["gbw"])) * (1.0 + s / (2 * np.pi * p.get("f_p2", np.inf)))


class _OpAmp(StageKind):
    NOISE_DATA = ("en", "in")

    def _limits(self, p):
        out = (p["v_neg"] + p["swing_low"], p["v_pos"] - p["swing_high"])
        cm = (p["v_neg"] + p["cm_low"], p["v_pos"] - p["cm_high"])
        return out, cm

    def _power(self, p):
        """i_supply·(v_pos − v_neg); not a number (no figure) when a rail is declared infinite."""
        span = np.asarray(p["v_pos"] - p["v_neg"], dtype=float)
        with np.errstate(invalid="ignore"):
            return np.where(np.isfinite(span), p["i_supply"] * span, np.nan)

    @staticmethod
    def _no_rail(p) -> tuple[bool, bool]:
        """The sides declared without a rail ('v_neg: -inf', 'v_pos: inf'): a quick estimate."""
        return bool(np.all(np.isinf(p["v_neg"]))), bool(np.all(np.isinf(p["v_pos"])))

    def dc_errors(self, p, v_plus):
        """(offset at the + input, bias current into the + pin, into the − pin) of the
        error sources switched on, at the stage temperature.  Input offset: vos with its
        drift, plus the common-mode error (V+ − mid-supply)/CMRR — data sheets state vos at
        mid-supply (common practice; the differential-chains issue widens this seam).  Bias
        currents: I± = ib ± ios/2 (Franco, *Design with Operational Amplifiers*, static
        limitations, from memory), each doubling per ib_doubling."""
        # mid-supply with a rail declared infinite (no rail): 0 V, the error then referred to ground
        mid = 0.5 * (p["v_pos"] + p["v_neg"]) if not any(self._no_rail(p)) else 0.0
        vos = drifted(p, "vos", "vos_drift") + err(p, "cmrr") * (v_plus - mid)
        ib, half_ios = doubled(p, "ib", p["ib_doubling"]), 0.5 * doubled(p, "ios", p["ib_doubling"])
        return vos, ib + half_ios, ib - half_ios

    def _feedback(self, p, s):
        """(β, gfb) of the feedback network as the output sees it: Vm = β·Vout and the
        network draws gfb·Vout from the output.  With y = 1/RG + Ym at the − node
        (Ym = 1/r_in + s·c_in, the − input's own shunt): β = 1/(1 + RF·y), gfb = y·β
        (nodal analysis of the − node); the follower (RF = 0, no RG) has β = 1, gfb = Ym."""
        raise NotImplementedError

    def loop_network(self, p, s, row):
        """(Zf, y): the feedback branch from the output to the − node and the admittance
        from the − node to AC ground besides it, as connected (``row`` = (a, b), the
        Thevenin row driving the stage input, X = a·V + b·I)."""
        zf = z_feedback(p, s)[0] if "r_f" in p else 0.0
        return zf, (1.0 / p["r_g"] if "r_g" in p else 0.0) + y_input(p, s)

    def loop_gain(self, p, s, row, y_load):
        """Loop gain T = A·β/(1 + Ro·(YL + gfb)) as connected: the return ratio of the
        op-amp's internal source (behind Ro) with the signal source zeroed; β = 1/(1 + Zf·y)
        is the feedback factor to the − input, gfb = y·β what the feedback network draws
        from the output, YL the real load (next stages, cable, ADC).  Nodal analysis of
        the macro model; the classic T = A·β with Ro·CL's extra pole (Franco, stability
        chapter; Graeme, *Photodiode Amplifiers*, ch. 2; from memory).  Phase margin
        180° + ∠T at |T| = 1 (chainplan.engine.loop)."""
        zf, y = self.loop_network(p, s, row)
        with np.errstate(divide="ignore", invalid="ignore"):
            beta = 1.0 / (1.0 + zf * y)
            return beta / (inv_open_loop(p, s) * (1.0 + p["r_out"] * (y_load + y * beta)))

    def abcd(self, p, s, op):
        """Non-inverting topology: V1 = (β + (1 + Ro·gfb)/A)·V2 + (Ro/A)·I2, I1 = Yin·V1,
        with β and gfb of the feedback network loaded by the − input (``_feedback``)."""
        beta, g_fb = self._feedback(p, s)
        ia = inv_open_loop(p, s)
        core = ABCD(beta + (1.0 + p["r_out"] * g_fb) * ia, p["r_out"] * ia, 0.0, 0.0)
        y_in = y_input(p, s)
        return chain(shunt_y(y_in), core) if np.any(y_in != 0) else core   # an ideal input adds nothing

    def dc_input_load(self, p, out_load, op):
        """r_in to the common-mode reference, and the + pin's bias current (drawn from the node)."""
        g = inv(p["r_in"])
        i_plus = self.dc_errors(p, 0.0)[1] if "_err" in p else 0.0
        return DcLoad(g, (p["_cm_ref"] * g if "_cm_ref" in p else 0.0) - i_plus)

    def noise(self, p, s, op, temp_k):
        """en at the + input, in+ into it, in− into the − node, and the thermal noise
        of RF and RG.  Nodal analysis of the macro model with the generators in
        place gives V+ = Vc + Σ c·n, the noise behind the input shunt Yin (so
        in_i = Yin·in_v), with 1/A = ia and β, gfb of ``_feedback`` (the − input's
        shunt Ym included): c(en) = −1;  c(v_RF) = −β − Ro·ia·gfb;
        c(v_RG) = (Zf − Ro·ia)·β/RG;  c(in−) = (Zf − Ro·ia)·β, Zf = RF ‖ 1/(sCF), and RF's
        EMF reaches the branch as v_RF·Zf/RF (derived by nodal analysis, checked symbolically).  For ia → 0 and Ym = 0 the output sees each
        coefficient times the noise gain 1/β: en·(1 + RF/RG), v_RF, v_RG·RF/RG and
        in−·RF (Franco, *Design with Operational Amplifiers*, noise chapter, from memory)."""
        beta, g_fb = self._feedback(p, s)
        ro_ia = p["r_out"] * inv_open_loop(p, s)
        y_in = y_input(p, s)
        i_psd = density(p["in"], s, p["in_corner"])
        out = [NoiseSource("en", density(p["en"], s, p["en_corner"]), in_v=-1.0, in_i=-y_in),
               NoiseSource("in+", i_psd, in_i=1.0)]
        zf, ratio = z_feedback(p, s) if "r_f" in p else (0.0, 1.0)
        c_minus = (zf - ro_ia) * beta
        if "r_f" in p:      # RF's EMF behind CF: the Thevenin EMF v_RF·Zf/RF in series with Zf
            for name, c in (("r_f", (-beta - ro_ia * g_fb) * ratio), ("r_g", (zf - ro_ia) * beta / p["r_g"])):
                out.append(NoiseSource(f"{name} thermal", thermal_v(p[name], temp_k), in_v=c, in_i=c * y_in))
        out.append(NoiseSource("in−", i_psd, in_v=c_minus, in_i=c_minus * y_in))
        return out

    def dc_forward(self, p, st_in, v_in, out_load):
        """Vout = ref + (V+ + vos + Rp·I− − ref)/A_dc with the error sources of dc_errors:
        the − pin's bias current works into Rp = RF ‖ RG (nodal analysis at the − input;
        Franco, static limitations, from memory: Eo = (1 + RF/RG)·(Vos + Rp·I− − Rs·I+)
        with the + pin's I+ through the source resistance Rs, which the DC solution of
        the chain carries through dc_input_load)."""
        m = self.abcd(p, 0.0, None)
        v_open = self._v_open(p, v_in, p.get("ref", 0.0), m)
        out, cm = self._limits(p)
        op = Op(values=dict(power_w=self._power(p)), in_range=cm, out_range=out, no_rail=self._no_rail(p))
        railed = (v_open < out[0]) | (v_open > out[1])
        if np.any(railed):
            v = float(np.ravel(v_open + 0.0 * railed)[np.argmax(np.ravel(railed))])
            op.flag(railed, "ref" if "ref" in p else ("v_pos" if v > 0 else "v_neg"),
                    f"the output would sit at {v:.3g} V, outside its output range "
                    f"{float(np.min(out[0])):.3g} V to {float(np.max(out[1])):.3g} V: the op-amp saturates at DC "
                    "(check the input's DC level, the reference and the gain)")
        return dc_source(v_open, m.B / m.A), op

    def _v_open(self, p, v_in, ref, m):
        if "_err" in p:
            vos, _, i_minus = self.dc_errors(p, v_in)
            r_p = p["r_f"] * p["r_g"] / (p["r_f"] + p["r_g"]) if "r_f" in p else 0.0
            v_in = v_in + vos + r_p * i_minus
        return ref + (v_in - ref) / m.A


class OpampFollower(_OpAmp):
    kind, title, follower_type = "opamp_follower", "op-amp voltage follower", True
    FIELDS = dict(COMMON)

    def _feedback(self, p, s):
        return 1.0, y_input(p, s) + 0.0 * s


class OpampNoninverting(_OpAmp):
    kind, title = "opamp_noninverting", "op-amp non-inverting amplifier, gain 1 + RF/RG"
    FIELDS = {**COMMON, **FEEDBACK}

    def _feedback(self, p, s):
        y = 1.0 / p["r_g"] + y_input(p, s)
        beta = 1.0 / (1.0 + z_feedback(p, s)[0] * y)
        return beta, y * beta


class OpampInverting(_OpAmp):
    kind, title = "opamp_inverting", "op-amp inverting amplifier, gain −RF/RG"
    FIELDS = {**COMMON, **FEEDBACK,
              "r_f": Field("ohm", "feedback resistor (output to inverting input)", required=True, positive=True)}

    def abcd(self, p, s, op):
        """Nodal analysis with the inverting input at Vm, A(s), Ro and the − input's
        shunt Ym = 1/r_in + s·c_in (the + input sits on ref, so its shunt does nothing):
        with Yf = 1/RF + s·CF: k = 1/(A − Ro·Yf); Vm = −k(1 + Ro·Yf)·V2 − k·Ro·I2;
        V1 = (1 + RG·Yf + RG·Ym)·Vm − RG·Yf·V2;  I1 = (Vm − V2)·Yf + Ym·Vm.
        Ym raises the noise gain to 1 + RF·(1/RG + Ym): with c_in that is the
        classic zero in the noise gain that eats the phase margin (Franco, *Design
        with Operational Amplifiers*, stability chapter, from memory)."""
        ia = inv_open_loop(p, s)
        rg, ro = p["r_g"], p["r_out"]
        yf = 1.0 / p["r_f"] + s * p.get("c_f", 0.0)
        ym = y_input(p, s)
        k = ia / (1.0 - ro * yf * ia)
        vm_v2 = -k * (1.0 + ro * yf)
        vm_i2 = -k * ro
        m = 1.0 + rg * yf + rg * ym
        return ABCD(m * vm_v2 - rg * yf, m * vm_i2, (vm_v2 - 1.0) * yf + ym * vm_v2, vm_i2 * yf + ym * vm_i2)

    def noise(self, p, s, op, temp_k):
        """en, in−, RF and RG thermal noise; the + input sits at ref (a stiff
        source), so in+ does nothing.  Nodal analysis of the macro model with
        the generators in place (k and Vm as in abcd, kA = 1/(1 − Ro·ia/RF)):
        Vm gains kA·en + k·Ro·Yf·e_f, e_f = v_RF·Zf/RF; then with M = 1 + RG·Yf + RG·Ym,
        e_n = M·Vm_n + RG·Yf·e_f − RG·in− − v_RG and i_n = (Yf + Ym)·Vm_n + Yf·e_f − in−
        (checked symbolically).  For A → ∞ this is the noise gain
        1 + RF·(1/(RG + Rsource) + Ym) on en (Franco, noise chapter, from memory)."""
        rf, rg, ro = p["r_f"], p["r_g"], p["r_out"]
        ia = inv_open_loop(p, s)
        ym = y_input(p, s)
        yf = 1.0 / rf + s * p.get("c_f", 0.0)
        m = 1.0 + rg * yf + rg * ym
        ka = 1.0 / (1.0 - ro * yf * ia)
        k_vf = ka * ia * ro * yf
        ratio = 1.0 / (rf * yf)          # RF's EMF behind CF: v_RF·Zf/RF in series with Zf
        i_psd = density(p["in"], s, p["in_corner"])
        return [NoiseSource("en", density(p["en"], s, p["en_corner"]), in_v=m * ka, in_i=ka * (yf + ym)),
                NoiseSource("in−", i_psd, in_v=-rg, in_i=-1.0),
                NoiseSource("r_f thermal", thermal_v(rf, temp_k), in_v=(m * k_vf + rg * yf) * ratio,
                            in_i=((k_vf + 1.0) * yf + ym * k_vf) * ratio),
                NoiseSource("r_g thermal", thermal_v(rg, temp_k), in_v=-1.0)]

    def _ref(self, p):
        """The virtual ground's level: ref, moved by the input offset (V+ = ref, so the
        common-mode error is (ref − mid-supply)/CMRR)."""
        return p["ref"] + (self.dc_errors(p, p["ref"])[0] if "_err" in p else 0.0)

    def loop_network(self, p, s, row):
        """RG in series with the driving source's Thevenin impedance b/a, and the − input's Ym."""
        a, b = row
        with np.errstate(divide="ignore", invalid="ignore"):
            return z_feedback(p, s)[0], a / (b + a * p["r_g"]) + y_input(p, s)

    def dc_input_load(self, p, out_load, op):
        """The input resistor returns to the virtual ground held at ref (+ vos)."""
        return DcLoad(1.0 / p["r_g"], self._ref(p) / p["r_g"])

    def _v_open(self, p, v_in, ref, m):
        """The + input sits at ref; vos moves it, and the − pin's bias current flows
        through RF: ΔVout = RF·I−/(1 + (1 + RF/RG)/A0) (nodal analysis at the − input;
        Franco, static limitations, from memory: Eo = RF·I− for A → ∞)."""
        if "_err" not in p:
            return ref + (v_in - ref) / m.A
        ref = self._ref(p)
        i_minus = self.dc_errors(p, p["ref"])[2]
        a0_inv = 10.0 ** (-p["a0"] / 20.0)
        return ref + (v_in - ref) / m.A + p["r_f"] * i_minus / (1.0 + (1.0 + p["r_f"] / p["r_g"]) * a0_inv)

    def dc_forward(self, p, st_in, v_in, out_load):
        st, op = super().dc_forward(p, st_in, v_in, out_load)
        out, cm = self._limits(p)
        op.in_range = (-np.inf, np.inf)
        op.flag((p["ref"] < cm[0]) | (p["ref"] > cm[1]), "ref",
                "the reference lies outside the op-amp's input common-mode range")
        return st, op


class OpampTransimpedance(OpampInverting):
    kind, title = "opamp_transimpedance", "op-amp transimpedance amplifier, Vout = ref − Iin·(RF ‖ CF)"
    gain_unit = "Ω"          # the stage gain the budget reports: Vout/Iin, a transimpedance
    input_mode = "current"   # a virtual ground: it takes the source's current (StageKind.input_mode)
    FIELDS = {**COMMON,
              "r_f": Field("ohm", "feedback resistor (output to inverting input)", required=True, positive=True),
              "c_f": Field("F", "feedback capacitor across r_f", default="0 F", minimum=0.0),
              "ref": Field("V", "voltage at the + input (the virtual ground's level)", default="0 V", rail_ok=True)}

    def abcd(self, p, s, op):
        """The inverting stage's nodal analysis with RG → 0 and RF → Zf = RF ‖ 1/(sCF),
        Yf = 1/Zf: k = 1/(A − Ro·Yf); Vm = V1 = −k(1 + Ro·Yf)·V2 − k·Ro·I2;
        I1 = (Vm − V2)·Yf; the input shunt 1/r_in + s·c_in sits at the − input.
        For A → ∞ the transimpedance V2/I1 is −Zf (pole 1/(2π·RF·CF)), and
        Zin = Zf/(1 + A) at DC (Graeme, *Photodiode Amplifiers*, ch. 1–2, from memory)."""
        ia = inv_open_loop(p, s)
        yf, ro = self._yf(p, s), p["r_out"]
        k = ia / (1.0 - ro * yf * ia)
        vm_v2, vm_i2 = -k * (1.0 + ro * yf), -k * ro
        core = ABCD(vm_v2, vm_i2, (vm_v2 - 1.0) * yf, vm_i2 * yf)
        y_in = inv(p["r_in"]) + s * p["c_in"]
        return chain(shunt_y(y_in), core) if np.any(y_in != 0) else core

    def loop_network(self, p, s, row):
        """The − input is the stage input: the source's Thevenin admittance a/b (a photodiode's
        1/R + s·C) and the − input's Ym, against Zf = RF ‖ 1/(s·CF)."""
        a, b = row
        with np.errstate(divide="ignore", invalid="ignore"):
            return 1.0 / self._yf(p, s), a / b + y_input(p, s)

    @staticmethod
    def _yf(p, s):
        return 1.0 / p["r_f"] + s * p["c_f"]

    def input_shunt(self, p, s):
        """The − input's own shunt 1/r_in + s·c_in: its current bypasses the feedback network."""
        return y_input(p, s)

    def noise(self, p, s, op, temp_k):
        """en at the + input (on ref), in− into the − node, RF's thermal noise as a
        current 4kT/RF across Zf (it leaves the input node and enters the output
        node: in_i = out_i = 1).  Nodal analysis as in abcd with en in place gives
        Vm = V1 = (noiseless) + kA·en, kA = 1/(1 − Ro·Yf/A), and
        I1 = (noiseless) + kA·(Yin + Yf)·en; with a source admittance Ys the output
        sees en·(1 + Zf·(Ys + Yin)), the TIA's rising noise gain (Graeme,
        *Photodiode Amplifiers*, noise chapter, from memory); in+ works into the
        stiff ref and adds nothing."""
        yf = self._yf(p, s)
        ka = 1.0 / (1.0 - p["r_out"] * yf * inv_open_loop(p, s))
        y_in = inv(p["r_in"]) + s * p["c_in"]
        return [NoiseSource("en", density(p["en"], s, p["en_corner"]), in_v=ka, in_i=ka * (y_in + yf)),
                NoiseSource("in−", density(p["in"], s, p["in_corner"]), in_i=-1.0),
                NoiseSource("r_f thermal", thermal_i(p["r_f"], temp_k), in_i=1.0, out_i=1.0)]

    def dc_input_load(self, p, out_load, op):
        """The − input held near ref by the loop, solved exactly with the output load:
        with V' = V − ref, I2 = G_L·V2' + J (J = G_L·ref − I0_L), the DC two-port gives
        I1 = Y·V1' + J·(D − Y·B), Y = (C + D·G_L)/(A + B·G_L); plus r_in to ground and
        the − pin's bias current."""
        m = OpampTransimpedance.abcd(self, {**p, "r_in": np.inf, "c_in": 0.0}, 0.0, None)
        gl = out_load.G
        ref = self._ref(p)                   # ref moved by the input offset, when switched on
        j = gl * ref - out_load.I0
        y = (m.C + m.D * gl) / (m.A + m.B * gl)
        g_in = inv(p["r_in"])
        i_minus = self.dc_errors(p, p["ref"])[2] if "_err" in p else 0.0   # the − pin's bias current
        return DcLoad(y + g_in, y * ref - j * (m.D - y * m.B) - i_minus)

    def _v_open(self, p, v_in, ref, m):
        """The − pin's bias current is drawn from the input node (dc_input_load), so the
        output follows the node: ΔVout = RF·I− for A → ∞ (Graeme, *Photodiode Amplifiers*,
        DC error, from memory); vos moves the virtual ground."""
        ref = self._ref(p)
        return ref + (v_in - ref) / m.A


class ChargeAmplifier(OpampTransimpedance):
    """The transimpedance macro model with the feedback capacitor as the gain element: the
    charge Q a sensor delivers into the virtual ground is integrated on CF, Vout = ref − Q/CF
    (A → ∞), and RF (optional) bleeds the DC away below 1/(2π·RF·CF).  With finite A(s):
    Vout = −Q·A/((1 + A)·CF + Ct), Ct = Cs + Ccable + Cin the capacitance at the − input
    (Gautschi, *Piezoelectric Sensorics*, charge amplifier chapter, from memory); it is the
    transimpedance kind's exact two-port with Zf = RF ‖ 1/(s·CF), so the loading by the cable,
    the noise gain 1 + Zf·(Ys + Yin) → 1 + Ct/CF and the loop all follow from the same equations."""

    kind, title = "charge_amplifier", "charge amplifier, Vout = ref − Q/CF (RF: the DC bleed)"
    gain_unit = "V/C"        # the stage gain the budget reports: Vout/Qin = s·Vout/Iin
    input_mode = "charge"
    FIELDS = {**COMMON,
              "c_f": Field("F", "feedback (integrating) capacitor, output to − input: the gain is −1/CF",
                           required=True, positive=True),
              "r_f": Field("ohm", "DC bleed resistor across c_f: the low corner 1/(2π·RF·CF); absent (inf): no DC "
                           "path through the feedback, the DC level is undefined (taken at the reset level ref, "
                           "and said so)", default="inf", positive=True, allow_inf=True),
              "ref": Field("V", "voltage at the + input (the virtual ground's level)", default="0 V", rail_ok=True)}

    def notes(self, p) -> list[str]:
        if np.all(np.isinf(p["r_f"])):
            return ["no r_f (DC bleed): the feedback has no DC path, so the DC level is undefined (the input "
                    "bias current integrates on c_f until a rail); taken at the reset level, the output at ref; "
                    "below the analysis span the gain is that of a pure integrator"]
        return []

    def dc_forward(self, p, st_in, v_in, out_load):
        """With RF: the transimpedance stage's DC.  Without: the reset state, the output at ref
        (plus the input offset) behind Ro: no DC path exists through CF (``notes``)."""
        if not np.all(np.isinf(p["r_f"])):
            return super().dc_forward(p, st_in, v_in, out_load)
        out, cm = self._limits(p)
        op = Op(values=dict(power_w=self._power(p)), in_range=(-np.inf, np.inf), out_range=out)
        op.flag((p["ref"] < cm[0]) | (p["ref"] > cm[1]), "ref",
                "the reference lies outside the op-amp's input common-mode range")
        return dc_source(self._ref(p), p["r_out"]), op


KINDS = [OpampFollower, OpampNoninverting, OpampInverting, OpampTransimpedance, ChargeAmplifier]
