"""JSON Schema (draft-07) of the chain spec, generated from the definitions that
validate specs: the stage kinds' ``FIELDS`` and ``ONE_OF`` tables
(``chainplan.stages.REGISTRY``), the units of ``chainplan.spec.units``, and the
top-level keys, hazards and analysis keys of ``chainplan.spec.loader``.  YAML-aware
editors use it to complete and check chain files; chainplan's own loader stays
the authority (it also checks ranges, rails and connections).

    python -m chainplan.spec.schema docs/chain.schema.json    # regenerate the file

A feature module that parses a top-level section (``spec.SECTION_PARSERS``) may
describe it with a ``SCHEMAS = {key: schema}`` dict; without one the section
is accepted as written.
"""
from __future__ import annotations

import importlib
import json
import re

from . import loader as spec
from ..stages import REGISTRY
from ..stages.base import alternative_fields
from .units import PREFIXES, UNITS

SCHEMA_ID = "https://chainplan.invalid/chain.schema.json"
_NUM = r"[+\-−]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+\-]?\d+)?"
_CELSIUS = ("°C", "degC", "℃")


def _alt(items) -> str:
    return "(?:" + "|".join(re.escape(i) for i in sorted(set(items), key=lambda i: (-len(i), i))) + ")"


def unit_pattern(unit_id: str, allow_inf: bool, tolerable: bool, amplitude: bool = False,
                 neg_inf: bool = False) -> str:
    """A regular expression for a value text of this unit (prefixes and symbols as units.py reads them)."""
    u = UNITS[unit_id]
    prefixes = list(PREFIXES) + (["c"] if unit_id == "m" else [])
    aliases = list(u.aliases) + (list(_CELSIUS) if unit_id == "K" else [])
    P, A = _alt(prefixes), _alt(aliases)
    if u.prefixes == "all":
        suffix = rf"(?:{P}?\s?{A}|{P})?"
    elif u.prefixes == "bare":
        suffix = rf"(?:{A}|{P})?"
    else:
        suffix = rf"{A}?"
    value = rf"{_NUM}\s*{suffix}" + (r"(?:\s*(?:rms|pk|peak|pp|p-p))?" if amplitude else "")
    if tolerable:
        width = rf"{_NUM}\s*(?:%|ppm|{suffix})"
        value += (rf"(?:\s*(?:±|\+/-|\+-)\s*{width}(?:\s+(?:normal|uniform|σ|sigma))?"
                  rf"|\s+(?:σ|sigma)\s*=\s*{width})?")
        if not unit_id.endswith("/K"):      # a temperature coefficient (units.parse_field_value)
            value += (rf"(?:\s+(?:±|\+/-|\+-)?\s*{_NUM}\s*(?:%|ppm|{suffix})\s*/\s*(?:K|°C|degC|\u2103)"
                      r"(?:\s+tracks\s+[A-Za-z_][\w\-]*)?)?")
    if allow_inf and u.allow_inf:
        value = rf"(?:{value}|(?:inf|∞)(?:\s*{re.escape(u.symbol)})?)"
    if neg_inf:                                  # spec.loader.NEG_INF_RE: an op-amp's 'v_neg: -inf'
        value = rf"(?:{value}|[-\u2212]\s*(?:inf|∞)(?:\s*{re.escape(u.symbol)})?)"
    return rf"^\s*{value}\s*$"


def field_schema(f, amplitude: bool = False) -> dict:
    """Schema of one stage field; an ``amplitude`` may carry rms/pk/pp (spec.loader.amplitude_form)."""
    out: dict = {"description": f.doc}
    if isinstance(f.default, str):
        out["default"] = f.default
    if f.unit == "choice":
        out["enum"] = list(f.choices)
        return out
    if f.unit == "sensitivity":                      # spec/sensitivity.py reads it
        out.update(type="string", pattern=r"^\s*\S.*/.*\S\s*$")
        out["description"] += " [signal per measurand unit]"
        return out
    u = UNITS[f.unit]
    low, high, _ = f.bounds()
    kinds: list[dict] = [{"type": "number", "minimum": low, "maximum": high},
                         {"type": "string", "pattern": unit_pattern(f.unit, f.allow_inf, f.tolerable, amplitude,
                                                                         f.neg_inf)}]
    if f.choices:
        kinds.append({"enum": list(f.choices)})
    if f.rail_ok:
        kinds.append({"type": "string", "pattern": spec.NAME_RE.pattern, "description": "a declared rail"})
    out["anyOf"] = kinds
    out["description"] += f" [{u.quantity}" + (f", {u.symbol}]" if u.symbol else "]") + \
        (" or a rail name" if f.rail_ok else "") + f"; range {spec.range_text(f)}"
    return out


def stage_schema(kind: str, is_source: bool = False) -> dict:
    model = REGISTRY[kind]
    props = {"name": {"type": "string", "pattern": spec.NAME_RE.pattern,
                      "description": "unique, stable stage name (also the name of its output node)"},
             "kind": {"const": kind, "description": model.title}}
    if not is_source:
        props["from"] = {"type": "string", "pattern": spec.NAME_RE.pattern,
                         "description": "the stage whose output this stage reads (default: the one above)"}
    props.update({k: field_schema(f, amplitude=k == "amplitude") for k, f in model.FIELDS.items()})
    out = {"type": "object", "properties": props, "additionalProperties": False,
           "required": ["kind"] + ([] if is_source else ["name"]) + [k for k, f in model.FIELDS.items() if f.required]}
    if model.ONE_OF:
        out["allOf"] = [{"oneOf": [{"required": list(alternative_fields(g))} for g in group]}
                        for group in model.ONE_OF]
        # a field of a multi-field alternative needs the others beside it (w needs l)
        deps = {k: [m for m in alt if m != k] for group in model.ONE_OF
                for alt in map(alternative_fields, group) if len(alt) > 1 for k in alt}
        if deps:
            out["dependencies"] = deps
    return out


def _section_schema(key: str) -> dict:
    target = spec.SECTION_PARSERS.get(key)
    if target:
        mod = importlib.import_module(target.split(":")[0])
        found = getattr(mod, "SCHEMAS", {}).get(key)
        if found is not None:
            return found
    return {"description": f"'{key}:' section, checked by chainplan when it reads the spec"}


def chain_schema() -> dict:
    """The JSON Schema of a chain spec file."""
    kinds = [k for k, m in REGISTRY.items() if m.role != "source"]
    sources = [k for k, m in REGISTRY.items() if m.role == "source"]
    hz = {"anyOf": [{"type": "number"}, {"type": "string", "pattern": unit_pattern("Hz", False, False)}]}
    stage_item = {
        "type": "object",
        "required": ["name", "kind"],
        "properties": {"kind": {"enum": kinds, "description": "stage kind"}},
        "allOf": [{"if": {"properties": {"kind": {"const": k}}, "required": ["kind"]}, "then": stage_schema(k)}
                  for k in kinds],
    }
    source = {"allOf": [{"if": {"properties": {"kind": {"const": k}}, "required": ["kind"]},
                         "then": stage_schema(k, is_source=True)} for k in sources],
              "type": "object", "required": ["kind"], "properties": {"kind": {"enum": sources}}}
    props = {
        "name": {"type": "string", "minLength": 1, "description": "a short identifier of the chain"},
        "description": {"type": "string", "description": "what the chain is for (shown in reports)"},
        "hazards": {"description": "mains, high-voltage or patient connection: reports carry safety cautions",
                    "anyOf": [{"type": "array", "items": {"enum": list(spec.HAZARDS)}, "uniqueItems": True},
                              {"enum": list(spec.HAZARDS)}]},
        "temperature": {"description": "chain temperature (default 300 K; '27 °C' also accepted)",
                        "anyOf": [{"type": "number"},
                                  {"type": "string", "pattern": unit_pattern("K", False, False)}]},
        "rails": {"type": "object", "description": "supplies and shared bias voltages, declared once",
                  "propertyNames": {"pattern": spec.NAME_RE.pattern},
                  "additionalProperties": {"anyOf": [{"type": "number"}, {"type": "string", "pattern":
                                                                           unit_pattern("V", False, True)}]}},
        "source": source,
        "stages": {"type": "array", "minItems": 1, "items": stage_item,
                   "description": "stages in signal order; 'from:' makes fan-out"},
        "analysis": {"type": "object", "additionalProperties": False, "properties": {
            "f_ref": {**hz, "description": "reference frequency for gains, peaks and impedances"},
            "f_start": {**hz, "description": "start of the log-spaced analysis span"},
            "f_stop": {**hz, "description": "end of the analysis span"},
            "points": {"type": "integer", "minimum": 10, "maximum": 100000, "description": "frequency points"},
            "output": {"type": "string", "description": "the load or node end-to-end figures refer to"},
            "noise_band": {"type": "array", "items": hz, "minItems": 2, "maxItems": 2,
                           "description": "band the noise is integrated over, [LOW, HIGH] inside the span"},
            "signal_band": {"type": "array", "items": hz, "minItems": 2, "maxItems": 2,
                            "description": "band the signal occupies (peaks and headroom are judged over it; "
                                           "default: the noise band)"},
            "mid_band": {**hz, "description": "where the passband gain is read for the band edges "
                                              "(default: the largest gain in the signal band)"}}},
    }
    unknown = [k for k in spec.TOP_KEYS if k not in props]
    props.update({k: _section_schema(k) for k in unknown})
    return {
        "$schema": "http://json-schema.org/draft-07/schema#",
        "$id": SCHEMA_ID,
        "title": "chainplan chain spec",
        "description": "A sensor readout chain: a source, stages and a load, values as text with units.",
        "type": "object",
        "required": ["name", "source", "stages"],
        "additionalProperties": False,
        "properties": props,
    }


def dumps() -> str:
    return json.dumps(chain_schema(), indent=2, ensure_ascii=False) + "\n"

