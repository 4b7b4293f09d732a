"""SPICE netlist of a chain, so its budget can be checked in a circuit simulator.

Every stage becomes the circuit chainplan's own model stands for:

* the sensor: a voltage source ``DC <dc> AC 1 SIN(...)`` behind its R ‖ C
  (``AC 1``: every AC result is the transfer V(node)/Vs the budget reports);
  a current sensor: a current source ``AC 1`` into its node with R ‖ C across
  it (the AC results are then transimpedances V(node)/Is);
* passive stages: their ladder sections (stages/passive.py) as R and C elements;
* MOSFET stages: an NMOS with a ``level=1`` model card (KP, VTO, LAMBDA, GAMMA,
  PHI — SPICE's Shichman–Hodges model, which is the square law of
  devices/mosfet.py) and its bias: a current source or resistor to ``v_low``,
  the drain on its rail, explicit Cgs/Cgd capacitors;
* BJT stages: an NPN with a Gummel–Poon card holding only IS, BF, VAF;
* the amplifier and op-amp macro models: a voltage-controlled current source
  into a conductance ‖ capacitor (the single pole, A0 and GBW or gain and
  f_3db), a unity voltage-controlled buffer, and the output resistance; the
  op-amp feedback resistors RF and RG (a transimpedance stage's RF ‖ CF) as real
  elements;
* the ADC or load: R ‖ C to its reference.

Supplies and bias voltages are DC voltage sources, one per declared rail (a
value nobody named gets its own source).  The op-amp macro models are linear
and take no supply; an op-amp declared without a rail (``v_pos: inf``) gets a
comment saying so, never an infinite source.  Macro-model resistances (an amplifier's
or op-amp's input and output resistance, the pole network) are written as
voltage-controlled current sources across their own terminals — a noiseless
conductance in any SPICE — because a part's noise is its data-sheet noise, not
the thermal noise of its model's resistors.  The macro models' outputs are
referred to their reference voltage, as chainplan's model is (an op-amp output
rests at its ``ref`` for an input at ``ref``; a real part's offset is beyond
either model).

The netlist ends with dot analyses (.op, .ac, .noise) that any SPICE-class
simulator runs, and an ngspice ``.control`` block that prints the DC levels,
the gain at the reference frequency, the −3 dB band edges and the integrated
noise, for comparison with ``chainplan budget``.  The simulator is told to
analyse at the chain's temperature with TNOM equal to it, so no device
parameter is temperature-scaled.

Sources: SPICE element and model syntax as in the ngspice manual (level-1
MOSFET, Gummel–Poon BJT, E/G controlled sources; from memory); the circuits are
the ones each stage module's docstring names.
"""
from __future__ import annotations

import math
import re
import textwrap
from dataclasses import dataclass, field

import numpy as np

from ..errors import SpecError
from ..spec.model import Chain, Stage
from ..spec.safety import safety_notice
from ..stages.base import K_BOLTZMANN, Q_ELECTRON
from ..stages.passive import Passive

#: Conductance of the op-amp/amplifier pole node, S (sets the scale of the pole network only).
G_POLE = 1e-3
#: Channel length written on MOSFET instances given by W/L alone; W follows from W/L (level 1 has no
#: short-channel terms, so only the ratio matters there).
L_M = 10e-6
#: SPICE's default oxide thickness (TOX), m: the Cox ngspice's level-1 flicker term uses without TOX.
SPICE_TOX_DEFAULT_M = 1e-7
#: Node names SPICE reserves (ngspice treats 'gnd' as ground).
RESERVED = {"0", "gnd"}


@dataclass
class Netlist:
    """An exported chain: circuit lines, the node map, and what the checks need."""

    chain: Chain
    header: list[str]
    circuit: list[str]                 # element lines, .model cards and .options
    nodes: dict[str, str]              # chainplan node -> SPICE node
    source: str                        # the sensor's voltage source (noise input)
    output: str                        # SPICE node of the chain's output
    analyses: list[str] = field(default_factory=list)
    control: list[str] = field(default_factory=list)

    def circuit_text(self) -> str:
        """The circuit alone (no title, analyses, control block or .end)."""
        return "\n".join(self.circuit) + "\n"

    def text(self) -> str:
        """The whole netlist file."""
        return "\n".join([*self.header, "", *self.circuit, "", *self.analyses, "", *self.control, ".end", ""])


def _num(x) -> str:
    return f"{float(np.ravel(x)[0]):.10g}"


_ASCII = {"µ": "u", "μ": "u", "Ω": "ohm", "Ω": "ohm", "−": "-", "–": "-", "—": "-", "±": "+/-", "²": "^2",
          "√": "sqrt", "·": "*", "°": " deg", "‖": "||", "→": "->", "×": "x", "…": "..."}


def _ascii(text: str) -> str:
    """Comments in plain ASCII: not every simulator reads UTF-8."""
    out = "".join(_ASCII.get(ch, ch) for ch in text)
    return out.encode("ascii", "replace").decode("ascii")


def _val(x) -> float:
    return float(np.ravel(x)[0])


class _Builder:
    def __init__(self, chain: Chain):
        self.chain = chain
        self.lines: list[str] = []
        self.rail_lines: dict[str, tuple] = {}
        self.models: list[str] = []
        self.used_nodes = set(RESERVED)
        self.used_elems: set[str] = set()
        self.nodes: dict[str, str] = {}
        self.volt_nodes: dict[tuple, str] = {}
        self.source_elem = ""
        self.ops: dict = {}                # stage -> nominal Op (flicker noise on the model cards)

    # -- names ---------------------------------------------------------------
    def new_node(self, wanted: str) -> str:
        base = re.sub(r"[^a-z0-9_]", "_", wanted.lower())
        if not base or not base[0].isalpha():
            base = "n" + base
        name, k = base, 1
        while name in self.used_nodes:
            k += 1
            name = f"{base}_{k}"
        self.used_nodes.add(name)
        return name

    def elem(self, letter: str, wanted: str, *rest) -> str:
        base = letter + re.sub(r"[^a-z0-9_]", "_", wanted.lower())
        name, k = base, 1
        while name.lower() in self.used_elems:
            k += 1
            name = f"{base}_{k}"
        self.used_elems.add(name.lower())
        self.lines.append(" ".join([name, *map(str, rest)]))
        return name

    # -- elements ---------------------------------------------------------
    def r(self, wanted, a, b, ohms, noiseless=False):
        """A resistor; infinite means absent.  A noiseless one is a VCCS across its own terminals."""
        ohms = _val(ohms)
        if math.isinf(ohms):
            return
        if noiseless:
            self.elem("G", wanted, a, b, a, b, _num(1.0 / ohms))
        else:
            self.elem("R", wanted, a, b, _num(ohms))

    def c(self, wanted, a, b, farads):
        if _val(farads) > 0:
            self.elem("C", wanted, a, b, _num(farads))

    def volts(self, value, st: Stage | None = None) -> str:
        """A node held at ``value`` volts: ground, a declared rail, or a source of its own."""
        v = _val(value)
        if v == 0.0:
            return "0"
        names = list((st.raw.get("__rails__", {}) if st else {}).values()) + list(self.chain.rails)
        rail = next((n for n in names if n in self.chain.rails and self.chain.rails[n] == v), None)
        key = ("rail", rail) if rail else ("v", v)
        if key not in self.volt_nodes:
            node = self.new_node(rail if rail else f"vref{len(self.volt_nodes) + 1}")
            self.volt_nodes[key] = node
            self.rail_lines[node] = (v, rail)
        return self.volt_nodes[key]

    def noise_emf(self, wanted, plus, minus, density_v) -> str:
        """``plus`` with a white noise EMF of ``density_v`` V/√Hz added (the node returned): a
        resistor of 4kT·R = density² alone on a node, read by a unity VCVS in series."""
        d = _val(density_v)
        if d == 0:
            return plus
        node = self.new_node(f"{wanted}_n")
        src = self.new_node(f"{wanted}_src")
        self.elem("R", wanted, src, "0", _num(d * d / (4 * K_BOLTZMANN * self.chain.temp_k)))
        self.elem("E", wanted, node, plus, src, "0", "1")
        return node

    def noise_current(self, wanted, into, density_a) -> None:
        """A white noise current of ``density_a`` A/√Hz into node ``into``: a resistor of
        4kT/R = density² short-circuited by a 0 V source, whose current a CCCS copies."""
        d = _val(density_a)
        if d == 0:
            return
        src = self.new_node(f"{wanted}_src")
        sense = self.elem("V", f"{wanted}_sense", src, "0", "DC 0")
        self.elem("R", wanted, src, "0", _num(4 * K_BOLTZMANN * self.chain.temp_k / (d * d)))
        self.elem("F", wanted, "0", into, sense, "1")

    def note(self, text: str) -> None:
        self.lines.append(f"* note: {text}")

    def pole_buffer(self, wanted, out, ref, ctrl_p, ctrl_n, gain, f_pole_hz, f_pole2_hz=math.inf):
        """V(out) − V(ref) = gain·(V(ctrl_p) − V(ctrl_n)) / ((1 + s/(2π·f_pole))·(1 + s/(2π·f_pole2))),
        ideal output: a VCCS gain·G into a node with conductance G ‖ C = G/(2π·f_pole), read by a
        unity VCVS; the second pole is one more G ‖ C node driven by a unity-gain VCCS."""
        if math.isinf(f_pole_hz) and math.isinf(f_pole2_hz):
            self.elem("E", wanted, out, ref, ctrl_p, ctrl_n, _num(gain))
            return
        poles = [f for f in (f_pole_hz, f_pole2_hz) if not math.isinf(f)]
        node, p, n, g = None, ctrl_p, ctrl_n, gain
        for i, f in enumerate(poles):
            sfx = "" if i == 0 else str(i + 1)
            node = self.new_node(f"{wanted}_pole{sfx}")
            self.elem("G", f"{wanted}_gm{sfx}", ref, node, p, n, _num(g * G_POLE))
            self.elem("G", f"{wanted}_gp{sfx}", node, ref, node, ref, _num(G_POLE))
            self.elem("C", f"{wanted}_cp{sfx}", node, ref, _num(G_POLE / (2 * math.pi * f)))
            p, n, g = node, ref, 1.0        # the gain sits in the first section
        self.elem("E", f"{wanted}_buf", out, ref, node, ref, "1")


# -- one exporter per stage kind --------------------------------------------

def _sensor(b: _Builder, st: Stage, p, _in):
    a = b.chain.analysis
    r, c = _val(p["r"]), _val(p["c"])
    if math.isinf(r) and c == 0:
        raise _cannot(b.chain, st, "its source impedance is an open circuit (r: inf and no c), "
                                   "so no signal or DC level reaches the chain")
    node = b.new_node(st.name)
    emf = node if r == 0 else b.new_node(f"{st.name}_emf")
    b.source_elem = b.elem("V", st.name, emf, "0", "DC", _num(p["dc"]), "AC 1",
           f"SIN({_num(p['dc'])} {_num(p['amplitude'])} {_num(a.f_ref_hz)})")
    if r != 0:
        b.r(st.name, emf, node, r)
        b.c(st.name, emf, node, c)
    return node


def _current_sensor(b: _Builder, st: Stage, p, _in):
    """A current source ``DC <dc> AC 1 SIN(...)`` into the sensor node, with R ‖ C across it
    (``AC 1`` A: every AC result is the transimpedance V(node)/Is the budget reports)."""
    a = b.chain.analysis
    node = b.new_node(st.name)
    b.source_elem = b.elem("I", st.name, "0", node, "DC", _num(p["dc"]), "AC 1",
                           f"SIN({_num(p['dc'])} {_num(p['amplitude'])} {_num(a.f_ref_hz)})")
    b.r(st.name, node, "0", p["r"])
    b.c(st.name, node, "0", p["c"])
    b.noise_current(f"{st.name}_shot", node, math.sqrt(2 * Q_ELECTRON * abs(_val(p["dc"]))))   # 2q·|I|
    return node


def _bridge(b: _Builder, st: Stage, p, _in):
    """Both legs of a Wheatstone bridge: the excitation, each leg's two arms of 2·R_leg
    (so its Thevenin resistance is R_leg and its level half the excitation), and the
    differential EMF ``AC 1`` in series with the + leg (V+ − V− = Vd; the common mode
    then moves by Vd/2, which the difference amplifier rejects).  The legs are
    ``b.pairs[name]``; the node returned (chainplan's node of the bridge) is V+ − V−, made by
    a unity VCVS that loads nothing."""
    a = b.chain.analysis
    r_p, r_n, vcm = st.model.legs(p)
    exc = b.volts(p["excitation"], st)
    legs = []
    for tag, r_leg in (("p", r_p), ("n", r_n)):
        tap = b.new_node(f"{st.name}_{tag}_tap")
        b.r(f"{st.name}_{tag}_top", exc, tap, 2 * _val(r_leg))
        b.r(f"{st.name}_{tag}_bot", tap, "0", 2 * _val(r_leg))
        legs.append(tap)
    plus = b.new_node(f"{st.name}_p")
    b.source_elem = b.elem("V", st.name, plus, legs[0], "DC", _num(p["dc"]), "AC 1",
                           f"SIN({_num(p['dc'])} {_num(p['amplitude'])} {_num(a.f_ref_hz)})")
    b.__dict__.setdefault("pairs", {})[st.name] = (plus, legs[1])
    diff = b.new_node(f"{st.name}_d")
    b.elem("E", f"{st.name}_d", diff, "0", plus, legs[1], "1")
    return diff


def _difference_amplifier(b: _Builder, st: Stage, p, node_in):
    """The op-amp macro with the four resistors: R1 from the − terminal to the (−) input, R2
    back from the output, R3 from the + terminal to the (+) input, R4 from it to ``ref``."""
    pair = b.__dict__.get("pairs", {}).get(st.parent)
    if pair is None:
        raise _cannot(b.chain, st, "it reads no differential pair")
    node_in, minus_term = pair
    r1, r2, r3, r4 = st.model.resistors(p)
    a0 = 10.0 ** (_val(p["a0"]) / 20.0)
    ref = b.volts(p["ref"], st)
    out, core = _output_nodes(b, st, p)
    plus, minus = b.new_node(f"{st.name}_inp"), b.new_node(f"{st.name}_inm")
    b.r(f"{st.name}_1", minus_term, minus, r1)
    b.r(f"{st.name}_2", out, minus, r2)
    b.r(f"{st.name}_3", node_in, plus, r3)
    b.r(f"{st.name}_4", plus, ref, r4)
    if "cmrr" in p or _val(p.get("match", 0.0)) > 0:
        b.note(f"{st.name}: the op-amp's own CMRR and the 'match' worst case are the common-mode budget's; "
               "the netlist has the nominal resistors and an ideal-CMRR op-amp")
    sense = _input_noise(b, st, p, plus, minus)
    return _drive(b, st, p, out, core, ref, sense, minus, a0, _val(p["gbw"]) / a0)


def _passive(b: _Builder, st: Stage, p, node_in):
    """Any passive ladder from its own section list (series R/C, shunt R to a reference, shunt C)."""
    secs = st.model.sections(p)
    series = [i for i, s in enumerate(secs)
              if s.what == "series_c" or (s.what == "series_r" and _val(s.value) != 0)]
    cur = node_in
    for i, s in enumerate(secs):
        tag = f"{st.name}_{i + 1}" if len(secs) > 1 else st.name
        if i in series:
            nxt = b.new_node(st.name if i == series[-1] else f"{st.name}_{i + 1}")
            (b.r if s.what == "series_r" else b.c)(tag, cur, nxt, s.value)
            cur = nxt
        elif s.what == "shunt_r":
            b.r(tag, cur, b.volts(s.v_ref, st), s.value)
        elif s.what == "shunt_c":
            b.c(tag, cur, "0", s.value)
    return cur


def _load(b: _Builder, st: Stage, p, node_in):
    b.r(st.name, node_in, b.volts(p["ref"], st), p["r_in"])
    b.c(st.name, node_in, "0", p["c_in"])
    return None


def _output_nodes(b: _Builder, st: Stage, p):
    """The stage's output node and the controlled source's own node behind r_out
    (the same node when r_out is 0)."""
    out = b.new_node(st.name)
    return out, (out if _val(p["r_out"]) == 0 else b.new_node(f"{st.name}_int"))


def _drive(b: _Builder, st: Stage, p, out, core, ref, plus, minus, gain, f_pole_hz):
    """A one- or two-pole voltage amplifier of (+) − (−) into ``core`` (the op-amps'
    f_p2 the second pole), then r_out to ``out``."""
    b.pole_buffer(st.name, core, ref, plus, minus, gain, f_pole_hz, _val(p.get("f_p2", math.inf)))
    if _val(p["r_out"]) != 0:
        b.r(f"{st.name}_out", core, out, p["r_out"], noiseless=True)
    return out


def _amplifier(b: _Builder, st: Stage, p, node_in):
    in_ref, out_ref = b.volts(p["in_ref"], st), b.volts(p["out_ref"], st)
    b.r(f"{st.name}_in", node_in, in_ref, p["r_in"], noiseless=True)
    b.c(f"{st.name}_in", node_in, "0", p["c_in"])
    out, core = _output_nodes(b, st, p)
    plus = _input_noise(b, st, p, node_in)
    return _drive(b, st, p, out, core, out_ref, plus, in_ref, _val(p["gain"]), _val(p["f_3db"]))


def _opamp(b: _Builder, st: Stage, p, node_in):
    """Follower, non-inverting or inverting: open loop A0/(1 + s·A0/(2π·GBW)) from
    (+) − (−), output referred to ``ref``, Ro, the feedback resistors, and r_in ‖ c_in
    at each input (the (−) input's r_in returns to ``ref``, as in the model)."""
    a0 = 10.0 ** (_val(p["a0"]) / 20.0)
    f_pole = _val(p["gbw"]) / a0
    ref = b.volts(p.get("ref", 0.0), st)
    out, core = _output_nodes(b, st, p)
    if st.kind == "opamp_follower":
        plus, minus = node_in, out
    else:
        minus = out if _val(p["r_f"]) == 0 else b.new_node(f"{st.name}_inm")
        plus = node_in if st.kind == "opamp_noninverting" else ref
        if minus != out:
            b.r(f"{st.name}_f", out, minus, p["r_f"])
            b.c(f"{st.name}_f", out, minus, p["c_f"])
        b.r(f"{st.name}_g", minus, node_in if st.kind == "opamp_inverting" else ref, p["r_g"])
    if st.kind != "opamp_inverting":      # chainplan's inverting model has its (+) input on ref
        b.r(f"{st.name}_cm", node_in, "0", p["r_in"], noiseless=True)
        b.c(f"{st.name}_in", node_in, "0", p["c_in"])
    b.r(f"{st.name}_cmm", minus, ref, p["r_in"], noiseless=True)    # the (−) input's own shunt
    b.c(f"{st.name}_inm", minus, "0", p["c_in"])
    plus = _input_noise(b, st, p, plus, minus)
    return _drive(b, st, p, out, core, ref, plus, minus, a0, f_pole)


def _opamp_transimpedance(b: _Builder, st: Stage, p, node_in):
    """The op-amp macro with its (+) input on ``ref``, its (−) input on the stage input,
    RF ‖ CF from the output back to it, and the input's r_in ‖ c_in to ground."""
    a0 = 10.0 ** (_val(p["a0"]) / 20.0)
    ref = b.volts(p["ref"], st)
    out, core = _output_nodes(b, st, p)
    if math.isinf(_val(p["r_f"])):        # a charge amplifier without its DC bleed
        b.note(f"{st.name}: no r_f, so no DC path through the feedback: ngspice needs one for its operating "
               "point; a 1e15 ohm noiseless stand-in is written (its corner lies far below any span)")
        b.r(f"{st.name}_f", out, node_in, 1e15, noiseless=True)
    else:
        b.r(f"{st.name}_f", out, node_in, p["r_f"])
    b.c(f"{st.name}_f", out, node_in, p["c_f"])
    b.r(f"{st.name}_cm", node_in, "0", p["r_in"], noiseless=True)
    b.c(f"{st.name}_in", node_in, "0", p["c_in"])
    plus = _input_noise(b, st, p, ref, node_in)
    return _drive(b, st, p, out, core, ref, plus, node_in, a0, _val(p["gbw"]) / a0)


def _input_noise(b: _Builder, st: Stage, p, plus, minus=None) -> str:
    """Data-sheet noise (white part): en in series with the (+) input, returned as the
    node the amplifier senses; in into the (+) input (unless it sits on a rail) and
    into the (−) node."""
    for key in ("en_corner", "in_corner"):
        if _val(p.get(key, 0.0)) > 0:
            b.note(f"{st.name}: the 1/f corner {key} = {_num(p[key])} Hz is not modelled (white part only)")
    if plus not in ("0", *b.volt_nodes.values()):
        b.noise_current(f"{st.name}_inp", plus, p.get("in", 0.0))
    if minus is not None and minus != plus:
        b.noise_current(f"{st.name}_inm", minus, p.get("in", 0.0))
    return b.noise_emf(f"{st.name}_en", plus, "0", p.get("en", 0.0))


def _channel_noise_notes(b: _Builder, st: Stage, p) -> None:
    gamma = p.get("noise_gamma")
    if gamma is not None and abs(_val(gamma) - 2.0 / 3.0) > 1e-9:
        b.note(f"{st.name}: level-1 channel noise is 8kT·gm/3 (gamma 2/3), not {_num(gamma)}")


def _flicker_card(b: _Builder, st: Stage, p) -> str:
    """`` kf=… af=…`` for the model card, or nothing without flicker noise.  ngspice's
    level 1 computes KF·Id^AF/(f·Cox²·W·L) (mos1noi.c) with Cox from TOX, and TOX
    also gives the device Meyer capacitances chainplan's level 1 does not have; so
    the card keeps TOX at its default (1e-7 m) and KF is scaled to give chainplan's
    coefficient c (noise_sources.mosfet_flicker_coefficient) on this instance:
    KF_card = c·Cox(1e-7 m)²·W·L/Id^AF.  A corner is written this way at the nominal
    operating point."""
    from ..stages.noise_sources import mosfet_flicker_coefficient, oxide_capacitance
    c = _val(mosfet_flicker_coefficient(p, b.ops[st.name].values, p["temp_k"]))
    if c == 0:
        return ""
    w, l = _geometry(p)
    af = _val(p.get("af", 1.0))
    i_d = abs(_val(b.ops[st.name].values["id_a"]))
    kf = c * _val(oxide_capacitance(SPICE_TOX_DEFAULT_M)) ** 2 * w * l / i_d ** af
    b.note(f"{st.name}: flicker noise as KF·Id^AF/(f·Cox²·W·L) with TOX at its default {SPICE_TOX_DEFAULT_M:g} m "
           "(no Meyer capacitances); KF scaled to match")
    return f" kf={_num(kf)} af={_num(af)}"


def _mos_model(b: _Builder, st: Stage, p) -> str:
    name = f"nm_{re.sub(r'[^a-z0-9_]', '_', st.name.lower())}"
    if isinstance(p.get("vth_tc"), str):          # 'spice': the simulator derives VTO(T) itself
        kp, vto, tnom = p["kp"], p["vth0"], p["t_nom_k"]
    else:                                         # a data-sheet dVth/dT: the card holds the values at T
        from ..devices.mosfet import at_temperature
        q = at_temperature(p)
        kp, vto, tnom = q["kp"], q["vth0"], p["temp_k"]
    b.models.append(f".model {name} nmos level=1 kp={_num(kp)} vto={_num(vto)} "
                    f"lambda={_num(p['lambda'])} gamma={_num(p['gamma'])} phi={_num(p['phi'])} "
                    f"tnom={tnom - 273.15:.6g}{_flicker_card(b, st, p)}")
    return name


def _mos_bulk(b: _Builder, st: Stage, p, source_node, low_node) -> str:
    bulk = p["bulk"]
    if isinstance(bulk, str):
        return source_node if bulk == "source" else low_node
    return b.volts(bulk, st)


def _geometry(p) -> tuple[float, float]:
    """(W, L) of the instance: the spec's, or W = (W/L)·L_M at L = L_M for an aspect ratio alone."""
    if p.get("w_over_l") is None:
        return _val(p["w"]), _val(p["l"])
    return _val(p["w_over_l"]) * L_M, L_M


def _mos_instance(b, st, p, d, g, s, bulk, model):
    """The NMOS instance with its W and L (:func:`_geometry`)."""
    w, l = _geometry(p)
    b.elem("M", st.name, d, g, s, bulk, model, f"W={_num(w)}", f"L={_num(l)}")


def _source_follower(b: _Builder, st: Stage, p, node_in):
    model = _mos_model(b, st, p)
    out = b.new_node(st.name)
    drain, low = b.volts(p["drain"], st), b.volts(p["v_low"], st)
    _mos_instance(b, st, p, drain, node_in, out, _mos_bulk(b, st, p, out, low), model)
    _channel_noise_notes(b, st, p)
    _follower_low_side(b, st, p, out, low, "s")
    b.c(f"{st.name}_gs", node_in, out, p["cgs"])
    b.c(f"{st.name}_gd", node_in, drain, p["cgd"])
    return out


def _common_source(b: _Builder, st: Stage, p, node_in):
    model = _mos_model(b, st, p)
    out = b.new_node(st.name)
    drain, low = b.volts(p["drain"], st), b.volts(p["v_low"], st)
    src = low if _val(p["r_s"]) == 0 else b.new_node(f"{st.name}_src")
    _mos_instance(b, st, p, out, node_in, src, _mos_bulk(b, st, p, src, low), model)
    _channel_noise_notes(b, st, p)
    if src != low:
        b.r(f"{st.name}_s", src, low, p["r_s"])
    if p.get("r_d") is not None:
        b.r(f"{st.name}_d", drain, out, p["r_d"])
    else:
        _sink(b, f"{st.name}_load", drain, out, p["i_load"], p["r_load"], p.get("i_load_noise", 0.0))
    return out


def _follower_low_side(b: _Builder, st: Stage, p, out, low, terminal: str):
    """What pulls a follower's output to its low rail: the current sink, or the
    source/emitter resistor (``terminal`` "s" or "e")."""
    if p.get("i_bias") is not None:
        _sink(b, f"{st.name}_bias", out, low, p["i_bias"], p["r_bias"], p.get("i_bias_noise", 0.0))
    else:
        b.r(f"{st.name}_{terminal}", out, low, p[f"r_{terminal}"])


def _sink(b: _Builder, wanted, a, c, amps, r_out, noise_a):
    """A bias current source from ``a`` to ``c`` with its output resistance (a model
    value: noiseless) and its own noise current, if given."""
    b.elem("I", wanted, a, c, "DC", _num(amps))
    b.r(wanted, a, c, r_out, noiseless=True)
    b.noise_current(f"{wanted}_noise", a, noise_a)


def _bjt_model(b: _Builder, st: Stage, p) -> str:
    name = f"qn_{re.sub(r'[^a-z0-9_]', '_', st.name.lower())}"
    va = "" if math.isinf(_val(p["va"])) else f" vaf={_num(p['va'])}"
    b.models.append(f".model {name} npn is={_num(p['i_s'])} bf={_num(p['beta'])}{va} xti={_num(p['xti'])} "
                    f"eg={_num(p['eg'])} xtb={_num(p['xtb'])} tnom={p['t_nom_k'] - 273.15:.6g}")
    return name


def _emitter_follower(b: _Builder, st: Stage, p, node_in):
    model = _bjt_model(b, st, p)
    out = b.new_node(st.name)
    coll, low = b.volts(p["collector"], st), b.volts(p["v_low"], st)
    b.elem("Q", st.name, coll, node_in, out, model)
    _follower_low_side(b, st, p, out, low, "e")
    return out


def _common_emitter(b: _Builder, st: Stage, p, node_in):
    model = _bjt_model(b, st, p)
    out = b.new_node(st.name)
    coll, low = b.volts(p["collector"], st), b.volts(p["v_low"], st)
    emitter = low if _val(p["r_e"]) == 0 else b.new_node(f"{st.name}_e")
    b.elem("Q", st.name, out, node_in, emitter, model)
    if emitter != low:
        b.r(f"{st.name}_e", emitter, low, p["r_e"])
    b.r(f"{st.name}_c", coll, out, p["r_c"])
    return out


EXPORTERS = {
    "sensor": _sensor,
    "bridge": _bridge,
    "difference_amplifier": _difference_amplifier,
    "current_sensor": _current_sensor,
    "opamp_transimpedance": _opamp_transimpedance,
    "charge_amplifier": _opamp_transimpedance,      # the same circuit; r_f absent: no DC bleed (see below)
    "adc": _load,
    "load": _load,
    "amplifier": _amplifier,
    "opamp_follower": _opamp,
    "opamp_noninverting": _opamp,
    "opamp_inverting": _opamp,
    "source_follower": _source_follower,
    "common_source": _common_source,
    "emitter_follower": _emitter_follower,
    "common_emitter": _common_emitter,
}


def _edge_measures(chain: Chain, out_node: str, ev) -> list:
    """Measures of the passband gain and of the −3 dB edges as the budget defines them
    (``Evaluation.passband``: the gain at a declared mid-band, else the largest over
    the signal band or the span), and only of the edges the budget finds in the span:
    a measure of an edge that does not exist is an ngspice error."""
    f_lo, f_hi = (float(np.ravel(x)[0]) for x in ev.band_edges())
    f_pb = float(np.ravel(ev.passband()[1])[0])
    a, v = chain.analysis, f"vdb({out_node})"
    if a.mid_band_hz is not None:
        lines = [f"meas ac pass_db find {v} at={_num(a.mid_band_hz)}"]
    elif a.band_hz is not None:
        lines = [f"meas ac pass_db max {v} from={_num(a.band_hz[0])} to={_num(a.band_hz[1])}"]
    else:
        lines = [f"meas ac pass_db max {v}"]
    lines.append("let edge_db = pass_db - 3.0103")
    for name, f, how in (("f_low_hz", f_lo, f"rise=last to={_num(f_pb)}"),
                         ("f_high_hz", f_hi, f"fall=1 from={_num(f_pb)}")):
        if math.isfinite(f):
            lines.append(f"meas ac {name} when {v}=edge_db {how}")
        else:
            lines.append(f"echo {name}: none, the response stays within 3 dB to that end of the span")
    return lines


def _cannot(chain: Chain, st: Stage, why: str) -> SpecError:
    return SpecError(f"cannot export stage '{st.name}' (kind {st.kind}) to SPICE: {why}",
                     chain.path, st.line, st.name)


def _exporter(chain: Chain, st: Stage):
    if isinstance(st.model, Passive):
        return _passive
    fn = EXPORTERS.get(st.kind)
    if fn is None:
        raise _cannot(chain, st, "no SPICE equivalent is defined for this stage kind yet")
    return fn


def export(chain: Chain, points_per_decade: int = 100) -> Netlist:
    """The SPICE netlist of a chain at its nominal values (raises SpecError, naming
    the stage, when a stage has no SPICE form)."""
    from ..engine.budget import evaluate, nominal_params
    from ..stages.base import at_temperature
    # fields with a temperature coefficient at the chain's temperature (the netlist is at that temperature)
    params = {name: at_temperature(chain.stage(name).raw.get("__tempco__"), p)
              for name, p in nominal_params(chain).items()}
    fns = {st.name: _exporter(chain, st) for st in chain.all_stages}   # refuse before building anything
    b = _Builder(chain)
    ev = evaluate(chain)
    b.ops = ev.dc.ops
    src = chain.source
    b.nodes[src.name] = fns[src.name](b, src, params[src.name], None)
    for st in chain.stages:
        b.lines.append(f"* --- {st.name}: {st.kind}, reads '{st.parent}'")
        unbounded = [f for f in ("v_pos", "v_neg") if f in params[st.name] and np.any(np.isinf(params[st.name][f]))]
        if unbounded:
            b.lines.append(f"* {st.name} is declared without a rail ({', '.join(unbounded)} infinite: a quick "
                           "estimate); no supply source is emitted for it")
        out = fns[st.name](b, st, params[st.name], b.nodes[st.parent])
        if out is not None:
            b.nodes[st.name] = out
    out_node = b.nodes[chain.output_node()]
    src_elem = b.source_elem
    t_c = chain.temp_k - 273.15
    amp = _num(params[src.name]["amplitude"])
    unit = src.model.signal_unit
    header = [f"{_ascii(chain.name)} - SPICE netlist exported by chainplan",
              f"* from {_ascii(chain.path or 'a chain spec')}",
              *(f"* {_ascii(ln)}".rstrip() for ln in chain.description.splitlines()),
              f"* The sensor source {src_elem} has AC 1: every AC result is the transfer V(node)/"
              + ("Is (ohms)" if unit == "A" else "Vs"),
              f"* that the budget reports.  The signal itself is {amp} {unit} peak (the SIN term).",
              "* Noise: resistors, transistors (MOSFET 1/f noise as KF/AF), data-sheet en/in,",
              "* bias-source and sensor shot noise (white parts);",
              "* an ADC's quantisation and own noise are not part of a SPICE noise analysis.",
              "* chainplan node -> SPICE node: " + ", ".join(f"{k} -> {v}" for k, v in b.nodes.items()),
              *(f"* {ln}" for ln in textwrap.wrap(_ascii(safety_notice(chain.hazards) or ""), 90))]
    rails = [ln for node, (v, rail) in b.rail_lines.items() for ln in
             ((f"* rail '{rail}'",) if rail else ()) + (f"V{node} {node} 0 DC {_num(v)}",)]
    circuit = ["* --- supplies and bias voltages", *rails, f"* --- {src.name}: sensor",
               *b.lines, *b.models,
               f".options temp={t_c:.6g} tnom={chain.t_nom_k - 273.15:.6g}"]
    a = chain.analysis
    sweep = f"dec {points_per_decade} {_num(a.f_start_hz)} {_num(a.f_stop_hz)}"
    analyses = ["* analyses (any SPICE-class simulator)", ".op", f".ac {sweep}",
                f".noise v({out_node}) {src_elem} {sweep}"]
    nodes_v = " ".join(f"v({n})" for n in dict.fromkeys(b.nodes.values()))
    control = [
        "* ngspice: run the analyses above and print the figures 'chainplan budget' reports",
        ".control",
        "run",
        "setplot op1",
        "echo DC level of every node in volts:",
        f"print {nodes_v}",
        "setplot ac1",
        f"echo Gain to {out_node} at {_num(a.f_ref_hz)} Hz in dB, the passband gain, then the -3 dB band "
        "edges in Hz:",
        f"meas ac gain_ref_db find vdb({out_node}) at={_num(a.f_ref_hz)}",
        *_edge_measures(chain, out_node, ev),
        "setplot noise2",
        f"echo Integrated noise over the span at the output in V rms and referred to the sensor in {unit} rms:",
        "print onoise_total inoise_total",
        "quit",
        ".endc",
    ]
    return Netlist(chain, header, circuit, dict(b.nodes), src_elem, out_node, analyses, control)
