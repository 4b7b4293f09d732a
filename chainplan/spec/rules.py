"""Placement rules: where buffers may not go, and which candidates may go where.

Spec form — a top-level ``placement:`` list; each item names interfaces (by the
stage that reads them, as everywhere else) and says one or both of:

    placement:
      - interfaces: [lead]
        nothing_active: patient-connected side of the isolation barrier
      - interfaces: [bias, gain]
        where: sensor head                 # optional, a name for the place
        temperature: [0 °C, 100 °C]        # the environment there
        supply: [3.1 V, 3.5 V]             # the supply range there

* ``nothing_active: REASON`` — no candidate may be inserted at those interfaces
  (a part in a patient-connected circuit, a sensor head in a 100 °C
  enclosure, a connector that carries only passive parts); the reason is shown.
* ``temperature: [LOW, HIGH]`` and ``supply: [LOW, HIGH]`` (or one value) — the
  environment of the place: only a candidate whose ``rating:`` covers it may go
  there.  A candidate states its rating in its parts file::

      rating:
        temperature: [-40 °C, 85 °C]      # operating range
        supply: [1.8 V, 5.5 V]            # operating supply range

  A candidate that states no rating for a quantity the place declares is not
  allowed there: an unknown rating is not taken as a pass (common practice in
  a design review: a part goes where its datasheet says it works).

The rules apply to the advice (a candidate a rule excludes is marked in its row
and never picked) and to the placement search (a candidate is never placed
where a rule excludes it).  They are pure data: the checks below read the
parsed chain and its candidates only.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from ..errors import SpecError, nearest
from .units import UnitError, parse_value
from .yamlsrc import LDict, LList

RULE_KEYS = ("interfaces", "nothing_active", "where", "temperature", "supply")
RATING_KEYS = ("temperature", "supply")


@dataclass(frozen=True)
class Rule:
    interfaces: tuple            # reading stages
    nothing_active: str | None   # the reason, or None
    where: str | None            # a name for the place
    temp_k: tuple | None         # (low, high) kelvin
    supply_v: tuple | None       # (low, high) volts
    line: int | None = None

    def text(self) -> str:
        """The rule in words: 'nothing active (patient-connected)', 'rated for 0 °C to 100 °C, 3.10 V to 3.50 V'."""
        parts = []
        if self.nothing_active is not None:
            parts.append(f"nothing active ({self.nothing_active})")
        env = [r for r in (_range_text(self.temp_k, "temperature"), _range_text(self.supply_v, "supply")) if r]
        if env:
            parts.append("candidates rated for " + ", ".join(env))
        return "; ".join(parts)


def celsius(k: float) -> str:
    """A temperature in kelvin written in degrees Celsius ('−40.0 °C', '100 °C')."""
    from .numbers import figure
    return figure(k - 273.15, "°C")


def _range_text(rng, what: str) -> str | None:
    if rng is None:
        return None
    from .numbers import figure
    show = celsius if what == "temperature" else (lambda v: figure(v, "V"))
    lo, hi = rng
    return show(lo) if lo == hi else f"{show(lo)} to {show(hi)}"


# -- parsing --------------------------------------------------------------------------

def parse_section(chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``placement:``; stores ``chain.extra['placement_rules']``."""
    if not isinstance(node, LList):
        raise SpecError("'placement' is a list of rules, each with interfaces: [...] and nothing_active: REASON "
                        "or the place's temperature:/supply:", path, line, "placement")
    readers = {s.name for s in chain.stages}
    rules = []
    for i, item in enumerate(node):
        where = f"placement[{i}]"
        if not isinstance(item, LDict):
            raise SpecError("each placement rule is a mapping with interfaces: and nothing_active:, temperature: "
                            "or supply:", path, node.line_of(i), where)
        err = lambda msg, key, item=item, where=where: SpecError(  # noqa: E731
            msg, path, item.line_of(key) if key in item else item.line, f"{where}.{key}")
        for key in item:
            if key not in RULE_KEYS:
                raise err(f"unknown key '{key}'" + nearest(str(key), RULE_KEYS), key)
        if "interfaces" not in item:
            raise err("a rule names its interfaces, by the stage that reads each: interfaces: [lead]", "interfaces")
        raw = item["interfaces"]
        raw = [raw] if isinstance(raw, str) else raw
        if not isinstance(raw, (list, LList)) or not raw or not all(isinstance(x, str) for x in raw):
            raise err("'interfaces' is a list of stage names (each names the interface it reads)", "interfaces")
        for r in raw:
            if r not in readers:
                raise err(f"'{r}' is not a stage of chain '{chain.name}' (an interface is named by the stage "
                          "that reads it)" + nearest(r, sorted(readers)), "interfaces")
        reason = None
        if "nothing_active" in item:
            reason = item["nothing_active"]
            if reason is True:
                reason = "by rule"
            if not isinstance(reason, str) or not reason.strip():
                raise err("'nothing_active' gives the reason in words, e.g. nothing_active: patient-connected",
                          "nothing_active")
            reason = reason.strip()
        label = item.get("where")
        if label is not None and (not isinstance(label, str) or not label.strip()):
            raise err("'where' is a name for the place, e.g. where: sensor head", "where")
        temp = _range(item, "temperature", "K", err) if "temperature" in item else None
        supply = _range(item, "supply", "V", err) if "supply" in item else None
        if reason is None and temp is None and supply is None:
            raise err("a rule says nothing_active: REASON, or the place's temperature: [LOW, HIGH] and/or "
                      "supply: [LOW, HIGH]", "interfaces")
        rules.append(Rule(tuple(raw), reason, label.strip() if label else None, temp, supply, item.line))
    chain.extra["placement_rules"] = rules


def _range(item, key, unit, err) -> tuple:
    """[LOW, HIGH] (or one value) of a temperature or a voltage, SI."""
    raw = item[key]
    vals = list(raw) if isinstance(raw, (list, LList)) else [raw]
    example = "[0 °C, 100 °C]" if unit == "K" else "[3.1 V, 3.5 V]"
    if len(vals) not in (1, 2):
        raise err(f"'{key}' is [LOW, HIGH] or one value, e.g. {key}: {example}", key)
    try:
        out = [parse_value(str(v), unit) for v in vals]
    except UnitError as exc:
        raise err(f"{exc} (e.g. {key}: {example})", key) from None
    lo, hi = (out[0], out[-1])
    if not (math.isfinite(lo) and math.isfinite(hi)) or lo > hi or (unit == "K" and lo <= 0):
        raise err(f"'{key}' runs from a low to a higher value" + (" above 0 K" if unit == "K" else "")
                  + f", e.g. {key}: {example}", key)
    return lo, hi


def parse_rating(node, line, path, where: str) -> dict:
    """A candidate's ``rating:`` mapping: {'temperature': (lo, hi) K, 'supply': (lo, hi) V}."""
    if not isinstance(node, LDict):
        raise SpecError("'rating' is a mapping: temperature: [LOW, HIGH] and/or supply: [LOW, HIGH], e.g. "
                        "{temperature: [-40 °C, 85 °C], supply: [1.8 V, 5.5 V]}", path, line, where)
    err = lambda msg, key: SpecError(msg, path, node.line_of(key) if key in node else line,  # noqa: E731
                                     f"{where}.{key}")
    out = {}
    for key in node:
        if key not in RATING_KEYS:
            raise err(f"a rating has no field '{key}'" + nearest(str(key), RATING_KEYS), key)
        out[key] = _range(node, key, "K" if key == "temperature" else "V", err)
    return out


# -- checks -------------------------------------------------------------------------------

def rules_of(chain) -> list[Rule]:
    return chain.extra.get("placement_rules", [])


def excluded(chain, reader: str, cand) -> str | None:
    """Why a rule keeps ``cand`` from the interface read by ``reader`` (None: it may go there)."""
    for r in rules_of(chain):
        if reader not in r.interfaces:
            continue
        if r.nothing_active is not None:
            return f"nothing active here ({r.nothing_active})"
        rating = getattr(cand, "rating", None) or {}
        at = f" at {r.where}" if r.where else " here"
        for key, rng in (("temperature", r.temp_k), ("supply", r.supply_v)):
            if rng is None:
                continue
            have = rating.get(key)
            need = _range_text(rng, key)
            if have is None:
                return f"not rated for {need} ({key}{at}): it states no {key} rating"
            if have[0] > rng[0] or have[1] < rng[1]:
                return f"not rated for {need} ({key}{at}): rated {_range_text(have, key)}"
    return None


def banned(chain, cands) -> set:
    """(reader, candidate index) pairs the rules exclude."""
    if not rules_of(chain):
        return set()
    return {(st.name, o) for st in chain.stages for o, c in enumerate(cands) if excluded(chain, st.name, c)}


def rules_summary(chain, cands) -> list[dict]:
    """One entry per rule: its interfaces (reading stages), the rule itself, its words, the
    candidates it keeps out of at least one of its interfaces (every one for nothing_active) and
    the others (allowed at all of them)."""
    out = []
    for r in rules_of(chain):
        keeps = sorted({c.name for c in cands for q in r.interfaces if excluded(chain, q, c) is not None})
        allowed = [c.name for c in cands if c.name not in keeps]
        out.append({"allowed": allowed, "interfaces": list(r.interfaces), "nothing_active": r.nothing_active, "where": r.where,
                    "temperature_k": list(r.temp_k) if r.temp_k else None,
                    "supply_v": list(r.supply_v) if r.supply_v else None, "text": r.text(),
                    "keeps_out": keeps})
    return out


def summary_rows(chain, summary: list[dict]) -> list[list[str]]:
    """Rows for a terminal table: interfaces as 'X → Y', the rule in words, what it keeps out."""
    rows = []
    for r in summary:
        ifs = ", ".join(f"{chain.stage(q).parent} → {q}" for q in r["interfaces"])
        out, ok = r["keeps_out"], r["allowed"]
        keeps = ("every candidate" if r["nothing_active"] is not None or not ok else "none" if not out
                 else ", ".join(out) if len(out) <= len(ok) else "all but " + ", ".join(ok))
        rows.append([ifs, (f"{r['where']}: " if r["where"] else "") + r["text"], keeps])
    return rows


def __getattr__(name):
    """``SCHEMAS``: the JSON Schema of the ``placement:`` section (built when asked for)."""
    if name != "SCHEMAS":
        raise AttributeError(name)
    rng = {"anyOf": [{"type": "string"}, {"type": "number"},
                     {"type": "array", "items": {"anyOf": [{"type": "string"}, {"type": "number"}]},
                      "minItems": 1, "maxItems": 2}]}
    names = {"anyOf": [{"type": "string"}, {"type": "array", "items": {"type": "string"}, "minItems": 1}]}
    return {"placement": {"type": "array", "description": "placement rules for chainplan buffers "
                          "(docs/buffers.md, 'Placement rules')", "items": {
                              "type": "object", "additionalProperties": False, "required": ["interfaces"],
                              "properties": {
                                  "interfaces": {**names, "description": "interfaces, named by the stage "
                                                 "that reads each"},
                                  "nothing_active": {"type": "string", "description": "no candidate may go "
                                                     "here; the reason"},
                                  "where": {"type": "string", "description": "a name for the place"},
                                  "temperature": {**rng, "description": "the place's temperature range "
                                                  "[LOW, HIGH]"},
                                  "supply": {**rng, "description": "the place's supply range [LOW, HIGH]"}}}}}
