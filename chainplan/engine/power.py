"""Power budget per rail: the quiescent current every stage draws from each named
rail, per rail and in total, and battery life for a declared capacity.

A stage's currents come from its operating point (the same DC solution as the
budget): an op-amp's ``i_supply`` flows from ``v_pos`` to ``v_neg`` and its DC
output current (into its load and its feedback network) from ``v_pos`` when it
sources, into ``v_neg`` when it sinks; a follower's or gain stage's drain or
collector current from its supply rail to ``v_low``; a resistor returning to a
rail (a divider's bottom, a bias network's ``r_bias``) carries
``(V_rail − V_node)/R``; a converter's ``i_supply`` and a sensor's
``i_excitation`` come from the rails they name.  Kirchhoff's current law over
the rails: a current flowing out of a rail into the circuit is drawn from it;
a rail at 0 V is the return.  The power is ``Σ V_rail·I_rail`` over the rails,
which for each stage's quiescent current is exactly the ``power_w`` of its
operating point — the figure the buffer advisor prices (tests check both).

Battery life: the capacity divided by the current the battery delivers, the
sum of what its rails draw (linear regulation: a regulator passes its load
current; a switching converter would divide the power by its efficiency and
the battery voltage instead — give the rails' current as the regulator input
then).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import SpecError, nearest
from ..spec.model import Chain
from ..spec.units import UnitError, parse_value
from ..spec.yamlsrc import LDict, LList

POWER_KEYS = ("battery", "battery_rails", "ripple")
HOURS_S = 3600.0


@dataclass(frozen=True)
class PowerSpec:
    battery_c: float | None = None         # capacity in coulomb (A·s)
    battery_rails: tuple | None = None     # rails the battery feeds; None: every rail above 0 V
    ripple: dict = field(default_factory=dict)   # rail -> (density V/√Hz, 1/f corner Hz): engine/ripple.py


@dataclass
class Draw:
    stage: str
    rail: str            # the rail's name, or 'stage.field' for a voltage given as a number
    what: str
    current_a: np.ndarray   # (S,) out of the rail into the circuit (negative: into the rail)
    rail_v: np.ndarray      # (S,)
    quiescent: bool = True


@dataclass
class PowerResult:
    draws: list
    rails: dict                     # rail -> (volts (S,), current drawn (S,) A: out of a positive rail, into a negative one)
    power_w: np.ndarray             # (S,)
    battery_c: float | None = None
    battery_rails: tuple = ()
    notes: list = field(default_factory=list)

    @property
    def battery_current_a(self) -> float:
        return float(sum(self.rails[r][1][0] for r in self.battery_rails if r in self.rails))

    @property
    def battery_life_s(self) -> float | None:
        if self.battery_c is None:
            return None
        i = self.battery_current_a
        return math.inf if i <= 0 else self.battery_c / i

    def stage_power_w(self, stage: str, quiescent_only: bool = True) -> np.ndarray:
        """Σ V_rail·I over a stage's currents (its quiescent ones: the operating point's power_w)."""
        return sum((d.current_a * d.rail_v for d in self.draws
                    if d.stage == stage and (d.quiescent or not quiescent_only) and np.all(np.isfinite(d.rail_v))),
                   np.zeros(1))


def parse_section(chain: Chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``power:`` (battery capacity and the rails it feeds)."""
    if not isinstance(node, LDict):
        raise SpecError("'power' is a mapping: battery: 1200 mAh, battery_rails: [vdd]", path, line, "power")
    err = lambda msg, key: SpecError(msg, path, node.line_of(key), f"power.{key}")  # noqa: E731
    for key in node:
        if key not in POWER_KEYS:
            raise err(f"unknown key '{key}'" + nearest(key, POWER_KEYS), key)
    cap = rails = None
    if "battery" in node:
        raw = str(node["battery"]).strip()
        if not raw.endswith("Ah"):
            raise err("battery is a capacity in ampere-hours, e.g. '1200 mAh' or '2.5 Ah'", "battery")
        try:
            cap = parse_value(raw[:-1], "A") * HOURS_S
        except UnitError:
            raise err(f"'{raw}' is not a capacity: write e.g. '1200 mAh' or '2.5 Ah'", "battery") from None
        if not (cap > 0 and math.isfinite(cap)):
            raise err("the battery capacity must be positive and finite", "battery")
    if "battery_rails" in node:
        raw = node["battery_rails"]
        raw = [raw] if isinstance(raw, str) else raw
        if not isinstance(raw, (list, LList)) or not raw:
            raise err("battery_rails is a list of rail names, e.g. [vdd]", "battery_rails")
        for r in raw:
            if r not in chain.rails:
                raise err(f"'{r}' is not a declared rail" + nearest(str(r), chain.rails), "battery_rails")
        rails = tuple(raw)
    ripple = {}
    if "ripple" in node:
        from .ripple import parse_ripple
        ripple = parse_ripple(chain, node["ripple"], path,
                              node.line_of("ripple") if hasattr(node, "line_of") else None)
    chain.extra["power"] = PowerSpec(cap, rails, ripple)


def _rail(st, fld: str, p: dict):
    """(name, volts) of the supply a field names: the rail, or 'stage.field' for a plain number."""
    name = st.raw.get("__rails__", {}).get(fld)
    v = np.ravel(np.asarray(p[fld], dtype=float))
    return (name if name else ("ground" if np.all(v == 0) else f"{st.name}.{fld}")), v


def _f(x) -> np.ndarray:
    """A figure per sample, flat."""
    return np.ravel(np.asarray(x, dtype=float))


def stage_draws(chain: Chain, ev) -> list:
    """Every current drawn from a rail, per stage (first sample of the evaluation)."""
    from ..stages.passive import Passive
    out = []
    dc = ev.dc
    n = ev.samples
    nan = np.full(n, math.nan)
    for st in chain.all_stages:
        p = ev.params[st.name]
        op = dc.ops[st.name]
        v = op.values

        def add(fld, i, what, quiescent=True, st=st, p=p):
            name, volts = _rail(st, fld, p)
            shape = np.broadcast_shapes(np.shape(i), np.shape(volts), (n,))
            out.append(Draw(st.name, name, what, np.broadcast_to(i, shape), np.broadcast_to(volts, shape), quiescent))
        kind = st.kind
        if kind.startswith("opamp_"):
            i_q = _f(p["i_supply"])
            if np.any(i_q):
                add("v_pos", i_q, "supply current")
                add("v_neg", -i_q, "supply current")
            i_out = _output_current(chain, ev, st)
            if np.any(np.abs(i_out) > 1e-15):
                add("v_pos", np.maximum(i_out, 0.0), "output current sourced (load and feedback)", False)
                if np.any(i_out < 0):
                    add("v_neg", np.minimum(i_out, 0.0), "output current sunk (load and feedback)", False)
        elif kind in ("source_follower", "common_source"):
            add("drain", _f(v["id_a"]), "drain current")
            add("v_low", -_f(v["id_a"]), "drain current")
        elif kind in ("emitter_follower", "common_emitter"):
            add("collector", _f(v["ic_a"]), "collector current")
            add("v_low", -_f(v["ic_a"]) - _f(v["ib_a"]), "emitter current")
        elif kind == "adc":
            if np.any(_f(p["i_supply"])):
                if "supply" in p:
                    add("supply", _f(p["i_supply"]), "converter and reference")
                else:
                    out.append(Draw(st.name, "(no supply named)", "converter and reference",
                                    np.broadcast_to(_f(p["i_supply"]), (n,)), nan))
        elif st.role == "source" and np.any(_f(p.get("i_excitation", 0.0))):
            if "excitation" in p:
                add("excitation", _f(p["i_excitation"]), "excitation")
            else:
                out.append(Draw(st.name, "(no rail named)", "excitation", np.broadcast_to(_f(p["i_excitation"]), (n,)),
                                nan))
        if isinstance(st.model, Passive):
            for sec, fld in _rail_sections(st, p):
                v_node = _f(dc.node_v[st.name])     # every shunt resistor to a rail sits at the stage's output
                add(fld, (_f(sec.v_ref) - v_node) / _f(sec.value), f"{sec.name or 'resistor'} to the rail")
    return out


def _rail_sections(st, p):
    """Shunt resistors of a passive stage that return to a named rail (and the field that names it)."""
    rails = st.raw.get("__rails__", {})
    fld = next((f for f in ("ref", "bias") if f in rails), None)
    if fld is None:
        return []
    return [(sec, fld) for sec in st.model.sections(p) if sec.what == "shunt_r"]


def _output_current(chain, ev, st) -> np.ndarray:
    """DC current out of an op-amp's output: into everything its node drives plus its feedback network."""
    from .dcpass import _backward
    v_out = _f(ev.dc.node_v[st.name])
    i = np.zeros_like(v_out)
    _, node_load = _backward(chain, ev.params, ev.dc.ops)
    ld = node_load.get(st.name)
    if ld is not None:
        i += _f(ld.G * v_out - ld.I0)
    p = ev.params[st.name]
    if "r_f" in p and "r_g" in p:
        if st.kind == "opamp_noninverting":
            i += (v_out - _f(p["ref"])) / (_f(p["r_f"]) + _f(p["r_g"]))
        else:                                              # inverting: the − input sits at ref
            i += (v_out - _f(p["ref"])) / _f(p["r_f"])
    elif "r_f" in p:                                       # transimpedance
        i += (v_out - _f(p["ref"])) / _f(p["r_f"])
    return i


def analyse_power(chain: Chain, ev) -> PowerResult:
    draws = stage_draws(chain, ev)
    rails: dict = {}
    for d in draws:
        if d.rail == "ground" or not np.all(np.isfinite(d.rail_v)):
            continue
        v, i = rails.get(d.rail, (d.rail_v, 0.0))
        rails[d.rail] = (v, i + d.current_a)
    # drawn: out of a positive rail, into a negative one
    rails = {r: (v, np.where(v < 0, -i, i)) for r, (v, i) in rails.items()}
    power = sum((d.current_a * d.rail_v for d in draws if np.all(np.isfinite(d.rail_v))), np.zeros(ev.samples))
    spec = chain.extra.get("power") or PowerSpec()
    b_rails = spec.battery_rails or tuple(r for r, (v, _) in rails.items() if v[0] > 0 and r in chain.rails)
    notes = []
    if any(np.any(np.isnan(d.rail_v)) for d in draws):
        notes.append("a converter or sensor current names no rail ('supply:' / 'excitation:'): it is listed "
                     "but not in any rail's total")
    unbounded = [d for d in draws if np.any(np.isinf(d.rail_v)) and np.any(d.current_a != 0)]
    if unbounded:
        # an op-amp declared without a rail ('v_pos: inf'): its current flows, its power is not known
        power = np.full(ev.samples, np.nan)
        notes.append(f"{', '.join(sorted({d.stage for d in unbounded}))} declared without a rail ('v_pos: inf' "
                     "or 'v_neg: -inf', a quick estimate): its current is listed, but no rail total holds it "
                     "and the total power is not known")
    return PowerResult(draws, rails, power, spec.battery_c, tuple(b_rails), notes)


def power_json(r: PowerResult) -> dict:
    """JSON keys of a power budget (docs/json.md)."""
    f = lambda x: float(np.ravel(x)[0])  # noqa: E731
    return {"power_w": f(r.power_w),
            "rails": [{"rail": k, "voltage_v": f(v), "current_a": f(i), "power_w": abs(f(v) * f(i))}
                      for k, (v, i) in r.rails.items()],
            "draws": [{"stage": d.stage, "rail": d.rail, "what": d.what, "current_a": f(d.current_a),
                       "quiescent": d.quiescent} for d in r.draws if d.rail != "ground"],
            "battery_c": r.battery_c, "battery_rails": list(r.battery_rails),
            "battery_life_h": None if r.battery_life_s is None else r.battery_life_s / 3600.0, "notes": r.notes}


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry, when the spec has a ``power:`` section: supply current, power, battery life."""
    if "power" not in b.chain.extra:
        return
    from ..spec.numbers import figure
    r = analyse_power(b.chain, b.ev)
    for rail, (v, i) in r.rails.items():
        b.extra_summary.append((f"current drawn from {rail} ({figure(v[0], 'V')})", figure(i[0], "A")))
    if r.battery_life_s is not None:
        h = r.battery_life_s / 3600.0
        b.extra_summary.append(("battery life", "∞" if math.isinf(h) else f"{h:.0f} h ({h / 24:.3g} days)"
                                if h >= 48 else f"{h:.3g} h"))
    b.extra_json["power"] = power_json(r)
