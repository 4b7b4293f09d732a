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
Monte Carlo method, from memory) — a tolerance is a limit w (``w = |x0|·rel``
for a relative one), read as a data sheet states it (see chainplan.spec.units):
``uniform`` (the default) is ``x0 + w·U(−1, 1)``; ``normal`` is
``x0 + (w/3)·N(0, 1)`` truncated at ±w (the limit taken as 3σ, common
practice; draws beyond it are drawn again); ``σ`` is ``x0 + w·N(0, 1)``,
untruncated.  A coefficient written ``±25ppm/K`` is drawn per unit,
uniformly within its limit, and so is every DC error source (an op-amp's
``vos``, ``ib``, a converter's ``gain_error``, a node's leakage: a data-sheet
limit of unknown sign, engine/dcerror.py ``unit_sources``).  Each source draws from its own stream, seeded
by the run's seed and the source's name, so a result does not depend on the
chunk size, and adding a tolerance elsewhere does not reshuffle the others.

Tolerances make *units*; corners are *operating conditions*.  A tolerance run
draws units only and evaluates every unit at every corner of the
``corners:`` grid (:func:`corner_points`); a unit passes when it passes at
all of them (production yield).

A drawn value outside its field's physical range (a resistance ≤ 0 from a
σ tolerance wider than the part) is drawn again from the same distribution,
up to ``REDRAWS`` times; a unit still outside is *rejected*: reported on its
own and left out of the yield, never counted as a design failure.
"""
from __future__ import annotations

import itertools
import math
import re
import zlib
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import nominal_params
from ..engine.dcerror import CAL_KEY, UNIT_KEY, UNITS_MARK, unit_sources
from ..errors import SpecError, nearest
from ..spec.model import Chain
from ..spec.numbers import celsius
from ..spec.units import UnitError, parse_toleranced, parse_value
from ..spec.yamlsrc import LDict, LList

CORNER_KEYS = ("temperature", "supply", "rails", "grid")
#: times a non-physical draw is drawn again before the unit is rejected
REDRAWS = 20
#: the limit of a 'normal' tolerance in standard deviations (common practice)
NORMAL_LIMIT_SIGMA = 3.0


@dataclass(frozen=True)
class Corners:
    temp_k: tuple | None = None        # (low, high) kelvin
    supply: float | None = None        # fractional deviation, e.g. 0.05
    rails: tuple | None = None         # rails the supply moves; None = every rail
    grid: str = "full"                 # 'full': low/nominal/high on every axis; 'extremes': the corners + nominal


def parse_corners(chain: Chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``corners:``; stores ``chain.extra['corners']``."""
    if not isinstance(node, LDict):
        raise SpecError("'corners' is a mapping: temperature: [LOW, HIGH], supply: ±X %", path, line, "corners")
    err = lambda msg, key: SpecError(msg, path, node.line_of(key), f"corners.{key}")  # noqa: E731
    for key in node:
        if key not in CORNER_KEYS:
            raise err(f"unknown key '{key}'" + nearest(key, CORNER_KEYS), key)
    temp = supply = rails = None
    grid = node.get("grid", "full")
    if grid not in ("full", "extremes"):
        raise err("grid is 'full' (low, nominal and high of every axis, all combinations) or 'extremes' "
                  "(every combination of the extremes, plus nominal)", "grid")
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
    chain.extra["corners"] = Corners(temp, supply, rails, grid)


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
    ``rails.NAME``, ``stage.field.tc``), used to rank what drives the spread;
    ``assign`` maps (stage, field) to the values the engine sees; ``valid`` is
    False for a rejected unit (a draw outside a field's physical range even
    after redrawing); ``temp_k``/``supply`` are per-sample operating conditions
    (None: the chain's own)."""

    chain: Chain
    n: int
    inputs: dict = field(default_factory=dict)
    assign: dict = field(default_factory=dict)
    valid: np.ndarray | None = None
    labels: list | None = None         # corner runs: a label per sample

    def take(self, sl: slice) -> "Draws":
        """The units ``sl`` alone (what a cluster worker needs of them; no ``inputs``)."""
        return Draws(self.chain, sl.stop - sl.start, assign={k: v[sl] for k, v in self.assign.items()},
                     valid=self.valid[sl])

    def params(self, sl: slice = slice(None)) -> dict:
        """Per-stage parameter dicts for samples ``sl``; varied values are ``(n, 1)`` arrays."""
        p = nominal_params(self.chain)
        for (st, fld), v in self.assign.items():
            p[st][fld] = v[sl, None]
        p[self.chain.source.name][UNITS_MARK] = True      # the DC error requirements: per unit
        return p


@dataclass(frozen=True)
class Corner:
    """One operating condition: temperature, supply factor (1 = nominal) and a label."""
    label: str
    temp_k: float
    supply: float
    nominal: bool = False


def corner_points(chain: Chain) -> list[Corner]:
    """The operating corners of ``corners:``: on each axis its low end, nominal and high end
    (temperature: the chain's temperature when it lies inside the range, else the middle;
    supply: −x, 0, +x), every combination (``grid: full``, 3 × 3 for both axes), or every
    combination of the ends plus the all-nominal point (``grid: extremes``, 4 + 1).
    No ``corners:``: the one nominal condition.  The all-nominal corner is first."""
    c = chain.extra.get("corners") or Corners()
    t0 = chain.temp_k
    axes = []
    if c.temp_k is not None:
        lo, hi = c.temp_k
        mid = t0 if lo < t0 < hi else 0.5 * (lo + hi)
        axes.append([("t", lo), ("t", mid), ("t", hi)])
    if c.supply is not None:
        axes.append([("s", 1 - c.supply), ("s", 1.0), ("s", 1 + c.supply)])
    combos = list(itertools.product(*axes)) if axes else [()]
    if c.grid == "extremes":
        combos = [k for k in combos if all(v is not a[1][1] for v, a in zip((x[1] for x in k), axes))]
        combos = [tuple(a[1] for a in axes)] + combos
    else:
        mid = tuple(a[1] for a in axes)
        combos = [mid] + [k for k in combos if k != mid]
    out = []
    for k in combos:
        d = dict(k)
        t, sf = d.get("t", t0 if c.temp_k is None else None), d.get("s", 1.0)
        if t is None:
            t = t0
        parts = []
        if c.temp_k is not None:
            parts.append(celsius(t))
        if c.supply is not None:
            parts.append("supply nominal" if sf == 1.0 else f"supply {(sf - 1) * 100:+.3g} %".replace("-", "−"))
        is_nom = (t == t0 and sf == 1.0)
        out.append(Corner(", ".join(parts) or "nominal", float(t), float(sf), is_nom))
    return out


def _stream(seed: int, name: str) -> np.random.Generator:
    return np.random.default_rng([int(seed) & 0xFFFFFFFF, zlib.crc32(name.encode())])


def spread(nominal: float, tol, unit_draw: np.ndarray) -> np.ndarray:
    """``x0 + w·u`` with ``w = |x0|·rel`` or the absolute width (JCGM 101:2008, from memory)."""
    w = abs(nominal) * tol.rel if tol.rel is not None else tol.abs
    return nominal + w * unit_draw


def unit_draw(dist: str, rng, n):
    """Draws in units of the tolerance's width: uniform on [−1, 1]; 'normal' a normal of
    σ = 1/3 truncated at ±1 (limit = 3σ; beyond it drawn again); 'sigma' a standard normal."""
    if dist == "uniform":
        return rng.uniform(-1.0, 1.0, n)
    z = rng.standard_normal(n)
    if dist == "sigma":
        return z
    out = np.abs(z) > NORMAL_LIMIT_SIGMA
    while out.any():                       # rejection: the exact truncated normal
        z[out] = rng.standard_normal(int(out.sum()))
        out = np.abs(z) > NORMAL_LIMIT_SIGMA
    return z / NORMAL_LIMIT_SIGMA


def _physical(f):
    """The field's physical range as a test on values (None: any value)."""
    if f is None:
        return None
    return lambda v: ~np.asarray(f.out_of_range(v), dtype=bool)


def _draw_source(x0, tol, rng, n, ok):
    """Draws of one tolerance; values outside the physical range ``ok`` drawn again (REDRAWS
    times); returns (values, still-bad mask)."""
    v = spread(x0, tol, unit_draw(tol.dist, rng, n))
    if ok is None:
        return v, np.zeros(n, dtype=bool)
    bad = ~ok(v)
    for _ in range(REDRAWS):
        if not bad.any():
            break
        v[bad] = spread(x0, tol, unit_draw(tol.dist, rng, int(bad.sum())))
        bad = ~ok(v)
    return v, bad


def draw(chain: Chain, samples: int, seed: int) -> Draws:
    """Independent draws of every tolerance (the units) for ``samples`` units, at nominal conditions."""
    d = Draws(chain, samples)
    rejected = np.zeros(samples, dtype=bool)
    for (st, fld), tol in chain.extra.get("tolerances", {}).items():
        name = f"{st}.{fld}"
        stage = chain.stage(st)
        v, bad = _draw_source(stage.params[fld], tol, _stream(seed, name), samples,
                              _physical(stage.model.FIELDS.get(fld)))
        rejected |= bad
        d.inputs[name] = d.assign[(st, fld)] = v
    _assemble(d, lambda name, dist: unit_draw(dist, _stream(seed, name), samples))
    d.valid &= ~rejected
    return d


def sources(chain: Chain) -> list[tuple[str, str]]:
    """(name, distribution) of every independent draw that makes a unit, in drawing order:
    the part tolerances, the tempco spreads (one per tracking group), the rail tolerances."""
    out = [(f"{st}.{fld}", tol.dist) for (st, fld), tol in chain.extra.get("tolerances", {}).items()]
    for stage in chain.all_stages:
        for fld, tc in (stage.raw.get("__tempco__") or {}).items():
            name = f"tracks.{tc.group}" if tc.group else f"{stage.name}.{fld}.tc"
            if tc.spread and (name, "uniform") not in out:
                out.append((name, "uniform"))
    out += [(f"{st}.leakage" if key == "_leak_a" else f"{st}.{key}", "uniform") for st, key, _ in unit_sources(chain)]
    return out + [(f"rails.{rail}", tol.dist) for rail, tol in chain.extra.get("rail_tolerances", {}).items()]


def draw_from_units(chain: Chain, units: dict, n: int | None = None) -> Draws:
    """The units whose draws are given, each source's values in units of its tolerance's width
    (as :func:`unit_draw` makes them; ``sources(chain)`` names them).  Nothing is drawn
    again: a value outside its field's physical range rejects its unit.  ``n``: the number
    of units (needed when nothing is varied)."""
    n = n if n is not None else len(next(iter(units.values())))
    d = Draws(chain, n)
    for (st, fld), tol in chain.extra.get("tolerances", {}).items():
        name = f"{st}.{fld}"
        d.inputs[name] = d.assign[(st, fld)] = spread(chain.stage(st).params[fld], tol, units[name])
    _assemble(d, lambda name, dist: units[name])
    return d


def _assemble(d: Draws, unit_of) -> None:
    """The tempco spreads and rail tolerances of ``d`` from ``unit_of(name, dist)`` (values in
    units of the limit), the rails to every field naming them, then the physical limits."""
    chain = d.chain
    drawn = {}
    for stage in chain.all_stages:
        for fld, tc in (stage.raw.get("__tempco__") or {}).items():
            if tc.spread:
                name = f"tracks.{tc.group}" if tc.group else f"{stage.name}.{fld}.tc"
                if name not in drawn:                # one draw per tracking group: shared
                    drawn[name] = unit_of(name, "uniform")
                u = drawn[name]
                d.inputs[name] = u if tc.group else abs(tc.value) * u
                d.assign[(stage.name, f"{fld}@tc")] = abs(tc.value) * u
    for st, key, lim in unit_sources(chain):        # DC error sources: a limit, sign unknown: uniform within it
        name = f"{st}.leakage" if key == "_leak_a" else f"{st}.{key}"
        d.inputs[name] = d.assign[(st, UNIT_KEY + key)] = lim * unit_of(name, "uniform")
    rails = {}
    for rail, tol in chain.extra.get("rail_tolerances", {}).items():
        name = f"rails.{rail}"
        rails[rail] = d.inputs[name] = spread(chain.rails[rail], tol, unit_of(name, tol.dist))
    _apply_shared(d, rails, None)


def at_corners(d: Draws, sl: slice, corners: list[Corner]) -> dict:
    """Parameters of units ``sl`` at each of ``corners``, folded into the sample axis
    (unit-major: sample ``u·C + c``), as ``(n·C, 1)`` arrays: the corner's temperature on
    every stage, its supply factor on every field that names a moved rail."""
    chain = d.chain
    n, k = sl.stop - sl.start, len(corners)
    cfg = chain.extra.get("corners") or Corners()
    moved = set(cfg.rails or chain.rails)
    temps = np.array([c.temp_k for c in corners])
    factor = np.array([c.supply for c in corners])
    p = nominal_params(chain)
    fold = lambda v: np.repeat(np.broadcast_to(np.ravel(v), (n,)), k)  # noqa: E731
    for (st, fld), v in d.assign.items():
        p[st][fld] = fold(v[sl])[:, None]
    t_col = np.tile(temps, n)[:, None]
    f_col = np.tile(factor, n)[:, None]
    for st in chain.all_stages:
        p[st.name]["temp_k"] = t_col
        for fld, rail in st.raw.get("__rails__", {}).items():
            if rail in moved and np.any(factor != 1.0):
                base = p[st.name][fld]
                p[st.name][CAL_KEY + fld] = base          # at nominal supply: a unit's calibration state
                p[st.name][fld] = (base if np.ndim(base) else np.full((n * k, 1), float(base))) * f_col
    p[chain.source.name][UNITS_MARK] = True
    return p


def _apply_shared(d: Draws, rails: dict, temp) -> None:
    """Rail values to every field that names the rail, temperature to every stage; then field
    limits: a value still outside its field's physical range rejects the unit."""
    for st in d.chain.all_stages:
        for fld, rail in st.raw.get("__rails__", {}).items():
            if rail in rails:
                d.assign[(st.name, fld)] = rails[rail]
        if temp is not None:
            d.assign[(st.name, "temp_k")] = temp
    d.valid = np.ones(d.n, dtype=bool)
    for (st, fld), v in list(d.assign.items()):
        ok = _physical(d.chain.stage(st).model.FIELDS.get(fld))
        if ok is None:
            continue
        bad = ~ok(v)
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
                  "description": "rails the supply corner moves (default: all)"},
        "grid": {"enum": ["full", "extremes"],
                 "description": "full: low/nominal/high of every axis, all combinations; extremes: the ends' "
                                "combinations plus nominal"}},
        "description": "global corners for tolerance runs (docs/requirements.md)"}}
