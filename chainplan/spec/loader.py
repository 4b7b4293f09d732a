"""Chain specs: YAML files in git, parsed strictly into a :class:`~chainplan.spec.model.Chain`.

Every problem becomes one :class:`~chainplan.errors.SpecError` naming file,
line and field, with what would be valid.  The format is documented in
docs/spec.md; the stage fields come from each kind's ``FIELDS`` table, which
also generates the JSON Schema.
"""
from __future__ import annotations

import os

import dataclasses
import importlib
import math
import re

from ..errors import SpecError, nearest
from .model import Analysis, Chain, Stage
from ..stages import REGISTRY
from ..stages.base import Field, alternative_fields, alternative_text
from .sensitivity import parse_sensitivity
from .units import UnitError, parse_field_value, parse_toleranced, parse_value
from .yamlsrc import LDict, LList, load_file, load_text

HAZARDS = ("mains", "high_voltage", "patient")
TOP_KEYS = ("name", "description", "hazards", "temperature", "t_nom", "rails", "source", "stages", "analysis",
            "requirements", "include", "candidates", "corners", "accuracy", "power", "ambient", "placement")
ANALYSIS_KEYS = {"f_ref": "Hz", "f_start": "Hz", "f_stop": "Hz", "points": "1", "output": None,
                 "noise_band": "Hz", "signal_band": "Hz", "mid_band": "Hz"}
NAME_RE = re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]*$")
#: bounds of the values outside stages (the generic unit ranges of stages.base.UNIT_RANGES)
RAIL = Field("V", "rail voltage")
TEMPERATURE = Field("K", "chain temperature", positive=True, tiny=1.0, maximum=1000.0)
FREQUENCY = Field("Hz", "analysis frequency", positive=True)
#: bounds on the work of one analysis (docs/spec.md, "Limits")
MAX_STAGES = 10_000
MAX_STAGE_POINTS = 2_000_000
#: widest relative tolerance (draws beyond a field's range are invalid samples, studies.tolerances)
MAX_REL_TOLERANCE = 10.0

#: Sections owned by feature modules: key -> "module:function(chain, node, path)".
SECTION_PARSERS: dict[str, str] = {
    "accuracy": "chainplan.engine.dcerror:parse_section",      # before requirements: they use its sensor unit
    "power": "chainplan.engine.power:parse_section",
    "ambient": "chainplan.engine.measurand:parse_section",
    "requirements": "chainplan.studies.requirements:parse_section",
    "corners": "chainplan.studies.tolerances:parse_corners",
    "include": "chainplan.spec.parts:parse_include",
    "candidates": "chainplan.spec.parts:parse_candidates",
    "placement": "chainplan.spec.rules:parse_section",          # after the candidates: it names stages only
}


class _Ctx:
    def __init__(self, path: str):
        self.path = path

    def err(self, msg, line=None, field=None):
        return SpecError(msg, self.path, line, field)


def load_chain(path: str) -> Chain:
    """Read and validate a chain spec file."""
    path = os.fspath(path)          # a pathlib.Path is a path too
    return build_chain(load_file(path), path)


def load_chain_text(text: str, path: str = "<text>") -> Chain:
    return build_chain(load_text(text, path), path)


def build_chain(doc, path: str) -> Chain:
    ctx = _Ctx(path)
    if not isinstance(doc, LDict):
        raise ctx.err("a chain spec is a mapping with 'name:', 'source:' and 'stages:'", getattr(doc, "line", 1))
    for key in doc:
        if key not in TOP_KEYS:
            raise ctx.err(f"unknown key '{key}'" + nearest(key, TOP_KEYS), doc.line_of(key), key)
    for key in ("name", "source", "stages"):
        if key not in doc:
            raise ctx.err(f"missing '{key}:'", doc.line, key)
    name = _text(ctx, doc, "name")
    description = _text(ctx, doc, "description") if "description" in doc else ""
    hazards = _hazards(ctx, doc)
    for key in ("temperature", "t_nom"):
        raw_t = doc.get(key)
        if isinstance(raw_t, (int, float)) and not isinstance(raw_t, bool) or (
                isinstance(raw_t, str) and re.fullmatch(r"\s*[+\-−]?[\d.]+([eE][+\-]?\d+)?\s*", raw_t)):
            raise ctx.err(f"'{raw_t}' has no unit: a bare temperature is ambiguous; write e.g. '298 K' or '25 °C'",
                          doc.line_of(key), key)
    temp_k = _number(ctx, doc, "temperature", "K", "300 K")
    if temp_k <= 0:
        raise ctx.err("temperature must be above 0 K (absolute zero)", doc.line_of("temperature"), "temperature")
    check_range(ctx, TEMPERATURE, temp_k, None, doc.line_of("temperature"), "temperature")
    t_nom_k = _number(ctx, doc, "t_nom", "K", "300 K")
    if t_nom_k <= 0:
        raise ctx.err("t_nom must be above 0 K (absolute zero)", doc.line_of("t_nom"), "t_nom")
    check_range(ctx, TEMPERATURE, t_nom_k, None, doc.line_of("t_nom"), "t_nom")
    rails = _rails(ctx, doc)
    tolerances: dict[tuple[str, str], object] = {}
    rail_tol = rails.pop("__tol__")
    src_node = doc["source"]
    if not isinstance(src_node, LDict):
        raise ctx.err("'source' is a mapping with kind: sensor and its fields", doc.line_of("source"), "source")
    source = _stage(ctx, src_node, rails, tolerances, default_name="sensor", is_source=True)
    stages = _stages(ctx, doc, rails, tolerances, source)
    chain = Chain(name=name, description=description, source=source, stages=stages,
                  rails={k: v for k, v in rails.items()}, temp_k=temp_k, t_nom_k=t_nom_k, hazards=hazards,
                  path=path, temp_text=_written(doc.get("temperature")), t_nom_text=_written(doc.get("t_nom")))
    chain.analysis = _analysis(ctx, doc, chain)
    _check_work(ctx, doc, chain)
    chain.extra["tolerances"] = tolerances
    chain.extra["rail_tolerances"] = rail_tol
    chain.extra["line"] = doc.line
    for key, target in SECTION_PARSERS.items():
        if key in doc:
            mod, fn = target.split(":")
            getattr(importlib.import_module(mod), fn)(chain, doc[key], doc.line_of(key), path)
    return chain


# -- small readers ---------------------------------------------------------

def _text(ctx, node, key):
    v = node[key]
    if not isinstance(v, str) or not v.strip():
        raise ctx.err(f"'{key}' must be text", node.line_of(key), key)
    return v.strip()


def _written(raw) -> str | None:
    """A value as its author wrote it (for the screens), or None when absent."""
    return None if raw is None else str(raw).strip()


def _number(ctx, node, key, unit, default):
    raw = node.get(key, default)
    try:
        return parse_value(raw, unit)
    except UnitError as exc:
        raise ctx.err(str(exc), node.line_of(key), key) from None


def _hazards(ctx, doc):
    raw = doc.get("hazards", [])
    if isinstance(raw, str):
        raw = [raw]
    if not isinstance(raw, list):
        raise ctx.err("'hazards' is a list of: " + ", ".join(HAZARDS), doc.line_of("hazards"), "hazards")
    for h in raw:
        if h not in HAZARDS:
            raise ctx.err(f"unknown hazard '{h}'" + nearest(str(h), HAZARDS), doc.line_of("hazards"), "hazards")
    return list(raw)


def _rails(ctx, doc):
    rails, tol = {}, {}
    node = doc.get("rails", LDict())
    if not isinstance(node, LDict):
        raise ctx.err("'rails' maps rail names to voltages, e.g. 'vdd: 3.3 V'", doc.line_of("rails"), "rails")
    for key, raw in node.items():
        if not NAME_RE.match(key):
            raise ctx.err("a rail name is a word (letters, digits, _ and -)", node.line_of(key), f"rails.{key}")
        try:
            rails[key], t = parse_toleranced(raw, "V")
        except UnitError as exc:
            raise ctx.err(str(exc), node.line_of(key), f"rails.{key}") from None
        check_range(ctx, RAIL, rails[key], t, node.line_of(key), f"rails.{key}")
        if t is not None:
            tol[key] = t
    rails["__tol__"] = tol
    return rails


def _stages(ctx, doc, rails, tolerances, source):
    node = doc["stages"]
    if not isinstance(node, LList) or not node:
        raise ctx.err("'stages' is a list of stages, each with name: and kind:", doc.line_of("stages"), "stages")
    stages, seen = [], {source.name: source}
    explicit = False
    prev = source
    for i, item in enumerate(node):
        if not isinstance(item, LDict):
            raise ctx.err("each stage is a mapping with name: and kind:", node.line_of(i), f"stages[{i}]")
        st = _stage(ctx, item, rails, tolerances, default_name=None)
        if st.name in seen:
            raise ctx.err(f"stage name '{st.name}' is used twice; names must be unique", item.line_of("name"), "name")
        seen[st.name] = st
        if "from" in item:
            explicit = True
            st.parent = item["from"]
            if not isinstance(st.parent, str):
                raise ctx.err("'from' names the stage whose output this stage reads", item.line_of("from"), "from")
        elif prev.role == "load":
            raise ctx.err(f"stage '{st.name}' follows the load '{prev.name}'; say which node it reads with "
                          "'from: <stage name>'", item.line, "from")
        else:
            st.parent = prev.name
        stages.append(st)
        prev = st
    for st in stages:
        line = st.field_lines.get("from", st.line)
        if st.parent not in seen:
            raise ctx.err(f"'{st.parent}' is not a stage of this chain" + nearest(st.parent, seen), line, "from")
        if seen[st.parent].role == "load":
            raise ctx.err(f"'{st.parent}' is a load (kind {seen[st.parent].kind}); it has no output to read",
                          line, "from")
    if explicit:
        stages = _topological(ctx, source, stages)
    _check_pairs(ctx, source, stages, seen)
    for st in stages:
        tol = [k for k in ("r1", "r2", "r3", "r4") if (st.name, k) in tolerances]
        if getattr(st.model, "reads_differential", False) and st.params.get("match", 0.0) > 0 and tol:
            raise ctx.err(f"'match' is the worst case of resistors without their own tolerance, but {', '.join(tol)} "
                          "carry one (a tolerance run draws them): give one or the other",
                          st.field_lines.get("match", st.line), f"{st.name}.match")
    return stages


def _check_pairs(ctx, source, stages, seen) -> None:
    """A differential source (a bridge) is read only by stages that take a pair (a
    difference amplifier), and those read only a differential source: the single-ended
    stages carry one conductor (docs/models.md, "Differential pairs")."""
    for st in stages:
        parent = seen[st.parent]
        pair_in = getattr(st.model, "reads_differential", False)
        pair_out = getattr(parent.model, "differential", False)
        line = st.field_lines.get("from", st.line)
        if pair_out and not pair_in:
            raise ctx.err(f"'{parent.name}' ({parent.kind}) drives a differential pair; '{st.name}' ({st.kind}) reads "
                          "one conductor: read the pair with a difference_amplifier", line, st.name)
        if pair_in and not pair_out:
            raise ctx.err(f"'{st.name}' ({st.kind}) reads a differential pair; '{parent.name}' ({parent.kind}) drives "
                          "one conductor: place it right after a bridge source", line, st.name)


def _topological(ctx, source, stages):
    """Order stages parents-first; reject cycles (networkx DAG check)."""
    import networkx as nx
    g = nx.DiGraph()
    g.add_node(source.name)
    index = {st.name: i for i, st in enumerate(stages)}
    for st in stages:
        g.add_edge(st.parent, st.name)
    try:
        cycle = nx.find_cycle(g)
    except nx.NetworkXNoCycle:
        cycle = None
    if cycle:
        names = [a for a, _ in cycle]
        first = min(names, key=lambda n: index.get(n, -1))
        names = names[names.index(first):] + names[:names.index(first)]   # start where the message points
        st = stages[index[first]]
        raise ctx.err("the connections form a loop: " + " → ".join(names + [names[0]]) +
                      "; a chain is a tree fed by its source", st.field_lines.get("from", st.line), "from")
    order = list(nx.lexicographical_topological_sort(g, key=lambda n: index.get(n, -1)))
    by_name = {st.name: st for st in stages}
    return [by_name[n] for n in order if n in by_name]


def build_stage(path: str, node: LDict, rails: dict, tolerances: dict) -> Stage:
    """One two-port or load stage from its spec mapping, validated exactly like a
    chain's stages (used for candidate buffers in parts files); errors name ``path``."""
    return _stage(_Ctx(path), node, rails, tolerances, default_name=None)


def _stage(ctx, node: LDict, rails, tolerances, default_name, is_source=False) -> Stage:
    if "kind" not in node:
        raise ctx.err("missing 'kind:'" + ("" if is_source else " (e.g. kind: source_follower)"), node.line, "kind")
    kind = node["kind"]
    if not isinstance(kind, str) or kind not in REGISTRY:
        kinds = [k for k, m in REGISTRY.items() if (m.role == "source") == is_source]
        what = "source kind" if is_source else "stage kind"
        hint = nearest(str(kind), kinds)
        if is_source and "valid:" not in hint:
            hint += f" (source kinds: {', '.join(sorted(kinds))})"
        raise ctx.err(f"unknown {what} '{kind}'" + hint, node.line_of("kind"), "kind")
    model = REGISTRY[kind]
    if is_source and model.role != "source":
        raise ctx.err(f"the source must be a sensor (kind sensor, current_sensor or bridge), not '{kind}'",
                      node.line_of("kind"), "kind")
    if not is_source and model.role == "source":
        raise ctx.err("a sensor is the chain's source: describe it under 'source:'", node.line_of("kind"), "kind")
    name = node.get("name", default_name)
    if name is None:
        raise ctx.err("missing 'name:' (every stage has a unique name)", node.line, "name")
    if not isinstance(name, str) or not NAME_RE.match(name):
        raise ctx.err(f"'{name}' is not a valid stage name: use letters, digits, _ and -", node.line_of("name"), "name")
    fields = model.FIELDS
    st = Stage(name=name, kind=kind, params={}, parent=None, line=node.line,
               field_lines=dict(node.key_lines))
    allowed = set(fields) | {"name", "kind"} | (set() if is_source else {"from"})
    for key in node:
        if key not in allowed:
            raise ctx.err(f"'{kind}' has no field '{key}'" + nearest(key, allowed), node.line_of(key), f"{name}.{key}")
    for group in model.ONE_OF:
        _one_of(ctx, node, name, group)
    for key, f in fields.items():
        line = node.line_of(key)
        where = f"{name}.{key}"
        if key not in node:
            if f.required:
                raise ctx.err(f"missing required field '{key}' ({f.doc})", node.line, where)
            if f.default is None:
                continue
            if not isinstance(f.default, str):        # a numeric default such as ±inf limits
                st.params[key] = f.default
                continue
            raw, from_default = f.default, True
        else:
            raw, from_default = node[key], False
        st.params[key], tol, tc = _field_value(ctx, f, raw, rails, line, where, st, key)
        if not from_default:
            st.raw[key] = raw
        if tc is not None:
            if not f.tolerable or f.unit in ("choice", "K"):
                raise ctx.err(f"'{key}' cannot carry a temperature coefficient", line, where)
            st.raw.setdefault("__tempco__", {})[key] = tc
        if tol is not None:
            if not f.tolerable:
                raise ctx.err(f"'{key}' cannot carry a tolerance", line, where)
            tolerances[(name, key)] = tol
    if "sensitivity" in st.params:
        _resolve_sensitivity(ctx, st, node)
    for fld, msg in model.spec_problems(st.params):
        raise ctx.err(msg, node.line_of(fld) if fld in node else node.line, f"{name}.{fld}")
    return st


def _resolve_sensitivity(ctx, st, node) -> None:
    """The parsed sensitivity (spec/sensitivity.py) in the source's signal units per measurand
    unit at t_nom: a charge sensitivity over the source's c, a ratiometric one times its
    excitation.  The float goes in ``params['sensitivity']``, the parse in ``raw['__sensitivity__']``."""
    sens = st.params["sensitivity"]
    line, where = node.line_of("sensitivity"), f"{st.name}.sensitivity"
    c = st.params.get("c", 0.0)
    exc = st.params.get("excitation")
    if sens.form == "charge" and not c > 0:
        raise ctx.err(f"a charge sensitivity ({sens.text}) becomes an EMF Q/C over the element's "
                      "capacitance: give the source's 'c'", line, where)
    if sens.form == "ratiometric" and not (exc is not None and exc != 0 and math.isfinite(exc)):
        raise ctx.err(f"a ratiometric sensitivity ({sens.text}) is per volt of excitation: give the source's "
                      "'excitation' (a rail or a voltage)", line, where)
    st.params["sensitivity"] = float(sens.resolve(c, abs(exc) if exc is not None else None))
    st.raw["__sensitivity__"] = sens


def _one_of(ctx, node, name, group) -> None:
    """Exactly one alternative of ``group`` given, and a multi-field alternative
    (``w`` and ``l``) given whole."""
    alts = [alternative_fields(a) for a in group]
    words = ", or ".join(alternative_text(a) for a in group) if any(len(a) > 1 for a in alts) \
        else ", ".join(group)
    given = [a for a in alts if any(k in node for k in a)]
    for a in given:
        missing = [k for k in a if k not in node]
        if missing:
            have = [k for k in a if k in node]
            raise ctx.err(f"'{have[0]}' needs {' and '.join(repr(m) for m in missing)} beside it "
                          f"(give exactly one of: {words})", node.line_of(have[0]), f"{name}.{have[0]}")
    if len(given) != 1:
        got = [k for a in given for k in a]
        second = given[1][0] if len(given) > 1 else None
        raise ctx.err(f"give exactly one of: {words}" + (f" (got {', '.join(got)})" if got else ""),
                      node.line_of(second) if second else node.line, f"{name}.{second or alts[0][0]}")


def _field_value(ctx, f, raw, rails, line, where, st, key):
    if f.unit == "sensitivity":          # resolved once the other fields are read (_resolve_sensitivity)
        try:
            return parse_sensitivity(raw, st.model.signal_unit), None, None
        except UnitError as exc:
            raise ctx.err(str(exc), line, where) from None
    if f.unit == "choice":
        if raw not in f.choices:
            raise ctx.err(f"'{raw}' is not valid" + nearest(str(raw), f.choices), line, where)
        return raw, None, None
    if isinstance(raw, str) and raw in f.choices:
        return raw, None, None
    if f.rail_ok and isinstance(raw, str) and NAME_RE.match(raw) and not _looks_numeric(raw):
        if raw not in rails:
            valid = sorted(set(rails) - {"__tol__"})
            raise ctx.err(f"'{raw}' is not a declared rail" + (nearest(raw, valid) if valid else
                          "; declare it under 'rails:' (e.g. vdd: 3.3 V)"), line, where)
        st.raw.setdefault("__rails__", {})[key] = raw
        return rails[raw], None, None
    if f.neg_inf and isinstance(raw, str) and NEG_INF_RE.fullmatch(raw):
        return -math.inf, None, None                 # no rail on that side (checked by the kind)
    factor = 1.0
    if key == "amplitude":
        raw, factor = amplitude_form(raw)
    try:
        value, tol, tc = parse_field_value(raw, f.unit)
    except UnitError as exc:
        raise ctx.err(str(exc), line, where) from None
    if factor != 1.0:
        value = value * factor
        if tol is not None and tol.abs is not None:
            tol = dataclasses.replace(tol, abs=tol.abs * factor)
    if f.unit == "dB" and _bare(raw) and abs(value) > DB_BARE_MAX:
        ratio = abs(value)
        raise ctx.err(f"a bare {raw} in a field of decibels is not plausible ({f.doc}); write the unit: "
                      f"'{_plain(value)} dB' if you mean decibels"
                      + (f", or '{20 * math.log10(ratio):.0f} dB' for a ratio of {_plain(ratio)}" if ratio > 1 else ""),
                      line, where)
    check_range(ctx, f, value, tol, line, where)
    if key == "bits" and (value != int(value) or value > 32):
        raise ctx.err("bits is a whole number from 1 to 32", line, where)
    if key == "gain" and value == 0:
        raise ctx.err("a gain of zero passes no signal; give a non-zero gain", line, where)
    return value, tol, tc


#: '-inf', '−inf', '-∞', '-inf V': the one negative infinity a field with ``neg_inf`` accepts
NEG_INF_RE = re.compile(r"\s*[-\u2212]\s*(?:inf|∞)(?:\s*V)?\s*")

#: the largest bare number (no 'dB' written) a field in decibels accepts: beyond it the
#: number is more likely a ratio ('a0: 1e6') than decibels (no op-amp has 160 dB of gain)
DB_BARE_MAX = 160.0

#: how an amplitude may be written: (suffix words, factor to the peak the engine uses)
AMPLITUDE_FORMS = {"rms": math.sqrt(2.0), "pk": 1.0, "peak": 1.0, "pp": 0.5, "p-p": 0.5}
_AMP_RE = re.compile(r"^(?P<value>.*?[0-9A-Za-zΩµ%])\s*(?P<form>rms|pk|peak|pp|p-p)(?P<tol>\s*(?:±|\+/-|\+-).*)?$")


def amplitude_form(raw):
    """``('14 mV rms')`` -> ``('14 mV', √2)``: an amplitude written as rms, peak or
    peak-to-peak (``14 mV rms``, ``20 mVpk``, ``40 mVpp``, ``40 mV p-p ±5%``), and the
    factor to its peak value (a sine: peak = √2·rms = pp/2).  Other text passes unchanged."""
    if not isinstance(raw, str):
        return raw, 1.0
    m = _AMP_RE.match(raw.strip())
    if not m:
        return raw, 1.0
    return m.group("value") + (m.group("tol") or ""), AMPLITUDE_FORMS[m.group("form")]


def _bare(raw) -> bool:
    """A number written without its unit (YAML number, or text without 'dB')."""
    return not isinstance(raw, str) or "dB" not in raw


def _plain(v: float) -> str:
    return f"{v:g}"


def check_range(ctx, f, value, tol, line, where) -> None:
    """The value (and the extremes its tolerance reaches) inside the field's physically
    meaningful range (``Field.bounds``, documented in the field table)."""
    if math.isinf(value) and not (f.allow_inf if value > 0 else f.neg_inf):
        raise ctx.err("must be finite here" + (" (only −inf is accepted: no negative rail)" if f.neg_inf else ""),
                      line, where)
    if f.positive and not value > 0:
        raise ctx.err(f"must be greater than zero ({f.doc})", line, where)
    if f.minimum is not None and value < f.minimum:
        raise ctx.err(f"must be at least {_show(f, f.minimum)} ({f.doc})", line, where)
    if f.out_of_range(value):
        raise ctx.err(f"{_show(f, value)} is outside the range this field accepts: "
                      f"{range_text(f)}", line, where)
    if tol is not None:
        low, high, _ = f.bounds()
        if math.isinf(value):
            raise ctx.err("an infinite value cannot carry a tolerance", line, where)
        if tol.rel is not None and not abs(tol.rel) <= MAX_REL_TOLERANCE:
            raise ctx.err(f"a tolerance of ±{tol.rel * 100:.3g} % is not a part tolerance; "
                          f"give at most ±{MAX_REL_TOLERANCE * 100:.0f} %", line, where)
        if tol.abs is not None and not abs(tol.abs) <= high - low:
            raise ctx.err(f"a tolerance of ±{_show(f, tol.abs)} is wider than the whole range this field "
                          f"accepts ({range_text(f)})", line, where)


def _show(f, v) -> str:
    """A bound or value for a message: engineering notation, no padding zeros ('1 µΩ', '1e+15 Ω')."""
    from .units import UNITS, fmt
    text = fmt(v, UNITS[f.unit].symbol) if f.unit in UNITS else f"{v:g}"
    return re.sub(r"(\d)\.0+(?=\D|$)", r"\1", text)


def range_text(f) -> str:
    """The accepted range of a field as the field table and messages write it."""
    return f.describe_range(lambda v: _show(f, v)) + (", or inf" if f.allow_inf else "") + \
        (", or −inf" if f.neg_inf else "")


def _looks_numeric(text: str) -> bool:
    return text in ("inf",) or bool(re.match(r"^[+\-−]?(\d|\.\d)", text))


def _check_work(ctx, doc, chain) -> None:
    """Bound the arrays one analysis holds: stages × frequency points (about 100 bytes
    each, so the largest accepted spec stays near 250 MB; Monte Carlo runs chunk their
    samples to a fixed memory budget on top, studies.montecarlo.CHUNK_BYTES)."""
    n = len(chain.all_stages)
    if n > MAX_STAGES:
        raise ctx.err(f"the chain has {n} stages; the limit is {MAX_STAGES}", doc.line_of("stages"), "stages")
    points = chain.analysis.points + 1
    if n * points > MAX_STAGE_POINTS:
        node = doc.get("analysis")
        line = node.line_of("points") if isinstance(node, LDict) else doc.line_of("stages")
        raise ctx.err(f"{n} stages × {points} frequency points = {n * points} exceeds the limit of "
                      f"{MAX_STAGE_POINTS} (about {MAX_STAGE_POINTS * 100 >> 20} MB of arrays); "
                      f"use at most {MAX_STAGE_POINTS // n - 1} points", line, "analysis.points")


def _analysis(ctx, doc, chain) -> Analysis:
    node = doc.get("analysis", LDict())
    if not isinstance(node, LDict):
        raise ctx.err("'analysis' is a mapping (f_ref, f_start, f_stop, points, output)",
                      doc.line_of("analysis"), "analysis")
    a = Analysis()
    for key in node:
        if key not in ANALYSIS_KEYS:
            raise ctx.err(f"unknown key '{key}'" + nearest(key, ANALYSIS_KEYS), node.line_of(key), f"analysis.{key}")
    for key, attr in (("f_ref", "f_ref_hz"), ("f_start", "f_start_hz"), ("f_stop", "f_stop_hz")):
        if key in node:
            v = _number(ctx, node, key, "Hz", None)
            if not (v > 0 and math.isfinite(v)):
                raise ctx.err("must be a positive, finite frequency", node.line_of(key), f"analysis.{key}")
            check_range(ctx, FREQUENCY, v, None, node.line_of(key), f"analysis.{key}")
            setattr(a, attr, v)
    if "points" in node:
        p = node["points"]
        if not isinstance(p, int) or isinstance(p, bool) or not 10 <= p <= 100000:
            raise ctx.err("points is a whole number from 10 to 100000", node.line_of("points"), "analysis.points")
        a.points = p
    if not a.f_start_hz < a.f_stop_hz:
        raise ctx.err("f_start must be below f_stop", node.line_of("f_start"), "analysis.f_start")
    if not a.f_start_hz <= a.f_ref_hz <= a.f_stop_hz:
        raise ctx.err(f"f_ref ({a.f_ref_hz:g} Hz) must lie inside the span f_start to f_stop "
                      f"({a.f_start_hz:g} to {a.f_stop_hz:g} Hz)", node.line_of("f_ref"), "analysis.f_ref")
    if "output" in node:
        out = node["output"]
        names = [st.name for st in chain.all_stages]
        if out not in names:
            raise ctx.err(f"'{out}' is not a stage of this chain" + nearest(str(out), names),
                          node.line_of("output"), "analysis.output")
        a.output = out
    if "noise_band" in node:
        a.noise_band_hz = _noise_band(ctx, node, a)
    if "signal_band" in node:
        a.signal_band_hz = _noise_band(ctx, node, a, "signal_band")
    if "mid_band" in node:
        v = _number(ctx, node, "mid_band", "Hz", None)
        if not a.f_start_hz <= v <= a.f_stop_hz:
            raise ctx.err(f"mid_band ({v:g} Hz) must lie inside the span f_start to f_stop "
                          f"({a.f_start_hz:g} to {a.f_stop_hz:g} Hz)", node.line_of("mid_band"), "analysis.mid_band")
        a.mid_band_hz = v
    return a


def _noise_band(ctx, node, a, key="noise_band") -> tuple:
    """``noise_band`` or ``signal_band: [LOW, HIGH]``: two frequencies, in order, inside the span."""
    line, where = node.line_of(key), f"analysis.{key}"
    raw = node[key]
    what = key.replace("_", " ")
    if not isinstance(raw, list) or len(raw) != 2:
        raise ctx.err(f"{key} is a list of two frequencies, e.g. [50 Hz, 5 kHz]", line, where)
    band = []
    for r in raw:
        try:
            band.append(parse_value(r, "Hz"))
        except UnitError as exc:
            raise ctx.err(str(exc), line, where) from None
    lo, hi = band
    if not (lo > 0 and math.isfinite(hi)):
        raise ctx.err(f"the {what}'s ends must be positive, finite frequencies", line, where)
    for v in band:
        check_range(ctx, FREQUENCY, v, None, line, where)
    if not lo < hi:
        raise ctx.err(f"the {what}'s low end must be below its high end", line, where)
    if lo < a.f_start_hz or hi > a.f_stop_hz:
        raise ctx.err(f"the {what} {lo:g} to {hi:g} Hz must lie inside the analysis span "
                      f"{a.f_start_hz:g} to {a.f_stop_hz:g} Hz (f_start to f_stop)", line, where)
    return lo, hi
