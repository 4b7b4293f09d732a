"""Tolerances and corners: per-sample parameter values for tolerance runs.

Sources of spread:

* part tolerances written on a field, ``10k ±1%``, ``0.55 V ±20 mV normal``
  (``chain.extra["tolerances"]``, {(stage, field): Tolerance});
* rail tolerances, ``vdd: 3.3 V ±3%`` (``chain.extra["rail_tolerances"]``):
  every field that names the rail moves with it (``stage.raw["__rails__"]``);
* the spec's ``corners:`` block: a temperature range, and a supply deviation
  that scales every rail (or the listed ones) together::

      corners:
        temperature: [0 °C, 50 °C]     # or '25 °C ±25 °C'
        supply: ±5 %
        rails: [vdd]                   # optional: rails the supply moves (default: all)

Drawing (GUM Supplement 1, JCGM 101:2008, propagation of distributions by a
Monte Carlo method, from memory): a ``uniform`` tolerance of half-width w is
``x0 + w·U(−1, 1)``, a ``normal`` one ``x0 + w·N(0, 1)`` (w is one sigma); a
relative width is ``w = |x0|·rel``.  Corners are drawn uniformly over their
range.  Each source draws from its own stream, seeded by the run's seed and the
source's name, so a result does not depend on the chunk size, and adding a
tolerance elsewhere does not reshuffle the others.  Temperature reaches what
the models make temperature-dependent (the BJT's thermal voltage, noise); the
level-1 MOSFET parameters carry no temperature coefficient.

A drawn value outside its field's limits (a resistance ≤ 0 from a wide normal
tolerance) is replaced by the nominal and the sample is marked invalid: it
counts as a failure, like an impossible operating point.
"""
from __future__ import annotations

import itertools
import math
import re
import zlib
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import nominal_params
from ..errors import SpecError, nearest
from ..spec.model import Chain
from ..spec.units import UnitError, parse_toleranced, parse_value
from ..spec.yamlsrc import LDict, LList

CORNER_KEYS = ("temperature", "supply", "rails")


@dataclass(frozen=True)
class Corners:
    temp_k: tuple | None = None        # (low, high) kelvin
    supply: float | None = None        # fractional deviation, e.g. 0.05
    rails: tuple | None = None         # rails the supply moves; None = every rail


def parse_corners(chain: Chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``corners:``; stores ``chain.extra['corners']``."""
    if not isinstance(node, LDict):
        raise SpecError("'corners' is a mapping: temperature: [LOW, HIGH], supply: ±X %", path, line, "corners")
    err = lambda msg, key: SpecError(msg, path, node.line_of(key), f"corners.{key}")  # noqa: E731
    for key in node:
        if key not in CORNER_KEYS:
            raise err(f"unknown key '{key}'" + nearest(key, CORNER_KEYS), key)
    temp = supply = rails = None
    if "temperature" in node:
        temp = _temp_range(node["temperature"], lambda m: err(m, "temperature"))
    if "supply" in node:
        raw = node["supply"]
        text = re.sub(r"^\s*(±|\+/-|\+-)", "", raw) if isinstance(raw, str) else raw
        try:
            supply = parse_value(text, "%")
        except UnitError as exc:
            raise err(str(exc) + " (write the supply deviation as '±5 %')", "supply") from None
        if not 0 < supply < 1:
            raise err("the supply deviation is a fraction between 0 and 100 %, e.g. '±5 %'", "supply")
    if "rails" in node:
        raw = node["rails"]
        raw = [raw] if isinstance(raw, str) else raw
        if not isinstance(raw, LList) and not isinstance(raw, list) or not raw:
            raise err("'rails' is a list of rail names, e.g. [vdd]", "rails")
        for r in raw:
            if not isinstance(r, str):
                raise err("'rails' is a list of rail names, e.g. [vdd]", "rails")
            if r not in chain.rails:
                raise err(f"'{r}' is not a declared rail" + nearest(str(r), chain.rails), "rails")
        if supply is None:
            raise err("'rails' says which rails 'supply' moves; give 'supply: ±X %' too", "rails")
        rails = tuple(raw)
    chain.extra["corners"] = Corners(temp, supply, rails)


def _temp_range(raw, err):
    if isinstance(raw, list):
        if len(raw) != 2:
            raise err("temperature is [LOW, HIGH], e.g. [0 °C, 50 °C]")
        try:
            lo, hi = (parse_value(x, "K") for x in raw)
        except UnitError as exc:
            raise err(str(exc)) from None
    else:
        try:
            mid, tol = parse_toleranced(raw, "K")
        except UnitError as exc:
            raise err(str(exc)) from None
        if tol is None or tol.abs is None or tol.dist != "uniform":
            raise err("temperature is [LOW, HIGH] or 'MID ±HALF-WIDTH', e.g. '25 °C ±25 °C'")
        lo, hi = mid - tol.abs, mid + tol.abs
    if not 0 < lo < hi or not math.isfinite(hi):
        raise err("the temperature range must run from a low to a higher temperature above 0 K")
    return lo, hi


# -- drawing ---------------------------------------------------------------------

@dataclass
class Draws:
    """Per-sample parameter values of a run.

    ``inputs`` are the independent draws by source name (``stage.field``,
    ``rails.NAME``, ``corners.temperature``, ``corners.supply``), used to rank
    what drives the spread; ``assign`` maps (stage, field) to the values the
    engine sees; ``valid`` is False where a drawn value broke a field's limits."""

    chain: Chain
    n: int
    inputs: dict = field(default_factory=dict)
    assign: dict = field(default_factory=dict)
    valid: np.ndarray | None = None
    labels: list | None = None         # corner runs: a label per sample

    def params(self, sl: slice = slice(None)) -> dict:
        """Per-stage parameter dicts for samples ``sl``; varied values are ``(n, 1)`` arrays."""
        p = nominal_params(self.chain)
        for (st, fld), v in self.assign.items():
            p[st][fld] = v[sl, None]
        return p


def _stream(seed: int, name: str) -> np.random.Generator:
    return np.random.default_rng([int(seed) & 0xFFFFFFFF, zlib.crc32(name.encode())])


def spread(nominal: float, tol, unit_draw: np.ndarray) -> np.ndarray:
    """``x0 + w·u`` with ``w = |x0|·rel`` or the absolute width (JCGM 101:2008, from memory)."""
    w = abs(nominal) * tol.rel if tol.rel is not None else tol.abs
    return nominal + w * unit_draw


def _unit_draw(tol, rng, n):
    return rng.standard_normal(n) if tol.dist == "normal" else rng.uniform(-1.0, 1.0, n)


def draw(chain: Chain, samples: int, seed: int) -> Draws:
    """Independent draws of every tolerance and corner for ``samples`` samples."""
    d = Draws(chain, samples)
    for (st, fld), tol in chain.extra.get("tolerances", {}).items():
        name = f"{st}.{fld}"
        d.inputs[name] = spread(chain.stage(st).params[fld], tol, _unit_draw(tol, _stream(seed, name), samples))
        d.assign[(st, fld)] = d.inputs[name]
    rails = {}
    for rail, tol in chain.extra.get("rail_tolerances", {}).items():
        name = f"rails.{rail}"
        rails[rail] = d.inputs[name] = spread(chain.rails[rail], tol, _unit_draw(tol, _stream(seed, name), samples))
    c = chain.extra.get("corners") or Corners()
    if c.supply is not None:
        f = d.inputs["corners.supply"] = 1.0 + c.supply * _stream(seed, "corners.supply").uniform(-1, 1, samples)
        for rail in c.rails or chain.rails:
            rails[rail] = rails.get(rail, chain.rails[rail]) * f
    if c.temp_k is not None:
        d.inputs["corners.temperature"] = _stream(seed, "corners.temperature").uniform(*c.temp_k, samples)
    _apply_shared(d, rails, d.inputs.get("corners.temperature"))
    return d


def corner_draws(chain: Chain) -> Draws:
    """Every combination of the corner extremes (parts at nominal): one sample each,
    labelled like '0 °C, supply −5 %'."""
    c = chain.extra.get("corners") or Corners()
    axes = []
    if c.temp_k is not None:
        axes.append([("temperature", t, f"{t - 273.15:.0f} °C".replace("-", "−")) for t in c.temp_k])
    if c.supply is not None:
        axes.append([("supply", 1 + s, f"supply {s * 100:+.3g} %".replace("-", "−"))
                     for s in (-c.supply, c.supply)])
    combos = list(itertools.product(*axes)) if axes else []
    d = Draws(chain, len(combos), labels=[", ".join(x[2] for x in combo) for combo in combos])
    if not combos:
        return d
    vals = {k: np.array([dict((a, v) for a, v, _ in combo)[k] for combo in combos])
            for k, _, _ in combos[0]}
    d.inputs = {f"corners.{k}": v for k, v in vals.items()}
    rails = {r: chain.rails[r] * vals["supply"] for r in (c.rails or chain.rails)} if "supply" in vals else {}
    _apply_shared(d, rails, vals.get("temperature"))
    return d


def _apply_shared(d: Draws, rails: dict, temp) -> None:
    """Rail values to every field that names the rail, temperature to every stage; then field limits."""
    for st in d.chain.all_stages:
        for fld, rail in st.raw.get("__rails__", {}).items():
            if rail in rails:
                d.assign[(st.name, fld)] = rails[rail]
        if temp is not None:
            d.assign[(st.name, "temp_k")] = temp
    d.valid = np.ones(d.n, dtype=bool)
    for (st, fld), v in list(d.assign.items()):
        f = d.chain.stage(st).model.FIELDS.get(fld)
        if f is None:
            continue
        bad = f.out_of_range(v)
        if bad.any():
            d.valid &= ~bad
            d.assign[(st, fld)] = np.where(bad, d.chain.stage(st).params[fld], v)


def __getattr__(name):
    """``SCHEMAS``: the JSON Schema of the ``corners:`` section for chainplan.schema (built when asked for)."""
    if name != "SCHEMAS":
        raise AttributeError(name)
    from ..spec.schema import field_schema
    from ..stages.base import Field
    temp = field_schema(Field("K", "temperature"))
    return {"corners": {"type": "object", "additionalProperties": False, "properties": {
        "temperature": {"anyOf": [{"type": "array", "items": temp, "minItems": 2, "maxItems": 2},
                                  {"type": "string", "pattern": temp["anyOf"][1]["pattern"]}],
                        "description": "[LOW, HIGH] or 'MID ±HALF-WIDTH'"},
        "supply": {"type": "string", "pattern": r"^\s*(±|\+/-|\+-)?\s*\d+(\.\d*)?\s*%\s*$",
                   "description": "deviation that scales every rail (or the listed ones) together, e.g. '±5 %'"},
        "rails": {"anyOf": [{"type": "string"}, {"type": "array", "items": {"type": "string"}, "minItems": 1}],
                  "description": "rails the supply corner moves (default: all)"}},
        "description": "global corners for tolerance runs (docs/requirements.md)"}}
