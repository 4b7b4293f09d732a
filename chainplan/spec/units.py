"""Strict parsing of engineering values as analog engineers write them, and
formatting in engineering notation.

Grammar of a value (whitespace around the whole text is ignored)::

    value  := number [ws] [prefix] [unit]
    number := [+|-|−] digits [. digits] [e|E [+|-] digits]      e.g. 4.7, .5, -1e-12, 1.5E3

* Whitespace between the number and the prefix/unit is optional: ``"100pF"``,
  ``"100 pF"``.  No whitespace is allowed between prefix and unit, except before
  word symbols such as ``ohm``/``ohms``/``mho`` (``"10k ohm"``, ``"1 meg ohm"``).
* SI prefixes: ``f p n u µ μ m k M G T`` plus the SPICE spelling ``meg``/``MEG``/
  ``Meg`` for mega.  **'M' is mega (SI), not milli as in case-insensitive
  SPICE**; 'm' is milli.  Capital 'K' is *not* a prefix (it is the kelvin); the
  error message for ``"4.7K"`` points to lowercase ``k``.  The prefix ``c``
  (centi) is accepted for metres only (``"50 cm"``).
* A bare number (int/float or a string like ``"4.7k"`` with no unit symbol) is
  accepted for every unit.  A unit symbol, if present, must be one of the unit's
  aliases (symbols are case-sensitive); another quantity's symbol is rejected
  with a message such as "volts given where a resistance (Ω) is expected".
* Scientific notation cannot be combined with a prefix (``"1e3k"`` is rejected).
* RKM notation (``"4k7"``, ``"4R7"``) is not supported and is rejected with a
  suggestion (``"4.7k"``).
* Booleans (YAML ``true``/``false``), ``None``, empty strings and NaN are
  rejected.  Infinity is accepted only as exactly ``"inf"`` or ``"∞"``
  (optionally followed by the unprefixed unit symbol, e.g. ``"∞ Ω"``, which is
  what :func:`fmt` prints) or as a float ``+inf``, and only for the
  impedance-like units 'ohm', 'F', 'H', 'Hz', 'V', 'A'.  Range checks (e.g.
  negative resistances, temperatures below 0 K) are left to callers.

Unit-specific decisions:

* ``'%'`` and ``'ppm'`` return *fractions*: ``"1%"`` -> 0.01, ``"50 ppm"`` ->
  5e-5.  A bare number is taken as the fraction itself (``"0.01"`` -> 0.01,
  so ``"5"`` means 500 %); no SI prefixes.  ``'dB'`` and ``'deg'`` take no SI
  prefixes either.  ``'deg'`` returns degrees (not radians).
* Metres (``'m'``): a final ``m`` is always the metre symbol, so ``"2m"`` and
  ``"2 m"`` are both 2 metres (never 2 milli); prefixes go in front of it:
  ``"2 mm"``, ``"50 cm"``, ``"3 km"``.  Bare prefixed numbers other than milli
  still work (``"3k"`` = 3000 m).
* Kelvin (``'K'``): ``"300 K"``; ``"27 °C"``, ``"27 degC"`` and ``"27 ℃"`` are
  converted to kelvin (300.15).  In a tolerance width a Celsius amount is a
  temperature *difference* (``"27 °C ±5 °C"`` -> width 5 K).
* ``'dK'`` is a temperature difference (a doubling interval, a range width):
  ``"10 K"`` and ``"10 °C"`` are both 10 K; no prefixes.
* ``'V/K'`` is a drift, ``"5 µV/K"`` or ``"5 µV/°C"`` (the same per kelvin
  and per degree Celsius).
* ``'ppm/K'`` returns a fraction per kelvin like ``'ppm'`` (``"25 ppm/K"`` ->
  2.5e-5 per K; ``"25 ppm/°C"`` is the same).
* ``'sqrtV'`` and ``'1/V'``: an SI prefix may be used on a bare number
  (``"20m"``) but not together with the unit symbol, because ``"mV⁻¹"`` would
  conventionally mean (mV)⁻¹ = 1000 V⁻¹.  For the other compound units the
  prefix applies to the leading unit: ``"200 µA/V²"``, ``"4 nV/√Hz"``,
  ``"100 pF/m"``.
* ``'1'`` (dimensionless): bare numbers with optional SI prefix and optional
  ``x`` suffix (``"10k"``, ``"100x"``).

Tolerances (:func:`parse_toleranced`) are read as data sheets state them:
``"10k ±1%"``, ``"10k +-1 %"``, ``"10k +/-1%"``, ``"0.7 V ±50m"``,
``"0.7 V ±50 mV"`` give a *limit*: every unit lies within it.  What lies
inside the limit is the distribution word after it:

* ``uniform`` (the default): equally likely anywhere between the limits — the
  rectangular distribution the GUM prescribes when only bounds are known
  (JCGM 100:2008, §4.3.7, from memory);
* ``normal``: the limit is 3σ (common practice for a production spread) and
  draws are truncated at the limit;
* ``σ`` or ``sigma`` (``"10k ±1% σ"``, or ``"10k σ=1%"``): the width is a true
  standard deviation; the normal is not truncated.

A width in ``%`` or ``ppm`` is relative (even for '%'/'ppm' fields); anything
else is absolute in the field's unit.

A temperature coefficient may follow (:func:`parse_field_value`):
``"10k ±1% 50ppm/K"`` (relative: ``ppm/K``, ``%/K``, also ``/°C``) or
``"1.2 V ±5 mV -2mV/K"`` (absolute, in the field's unit per kelvin).  Written
with ``±`` (``"10k ±1% ±25ppm/K"``) it is a limit like a tolerance: each unit
has its own coefficient, uniform within it; without ``±`` every unit shares it.
``"10k ±0.1% ±25ppm/K tracks rnet"``: every part naming the group ``rnet``
draws the same coefficient in a unit (the resistors of one network, whose
ratio then holds over temperature).  The value then is ``x(T) = x0·(1 + tc·(T − Tnom))``
(relative) or ``x0 + tc·(T − Tnom)`` (absolute), Tnom the spec's ``t_nom``.

:func:`fmt` prints engineering notation with the prefixes f p n µ m k M G T,
``digits`` significant digits (default 3), U+2212 for negatives, ``"∞ Ω"`` for
infinity and ``"—"`` for NaN.  Values outside the prefix range are printed in
scientific notation (``"1.00e-18 F"``).  For the symbols ``'%'`` and ``'ppm'``
the value is a fraction (as returned by the parser) and is scaled by 100 or
1e6; ``'%'``, ``'ppm'``, ``'dB'``, ``'°'`` get no prefix.  Everything
:func:`fmt` prints parses back with :func:`parse_value`.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

__all__ = [
    "UnitError",
    "Unit",
    "UNITS",
    "PREFIXES",
    "Tolerance",
    "parse_value",
    "parse_toleranced",
    "parse_field_value",
    "Tempco",
    "fmt",
]


class UnitError(ValueError):
    """A value could not be parsed; the message says what was wrong and what
    would be valid, e.g. "'4.7q' is not a resistance: 'q' is not a known SI
    prefix or resistance unit; expected a number with an optional SI prefix
    and unit, like '4.7 kΩ', '4.7k', '1meg'"."""


@dataclass(frozen=True)
class Unit:
    id: str                     # key in UNITS, e.g. 'ohm'
    symbol: str                 # display symbol, e.g. 'Ω' ('' for dimensionless)
    quantity: str               # word used in messages, e.g. 'resistance'
    example: str                # one valid example, e.g. '4.7 kΩ'
    name: str                   # plural name used in messages, e.g. 'ohms'
    aliases: tuple[str, ...]    # accepted unit symbols (case-sensitive)
    prefixes: str = "all"       # 'all' | 'bare' (only without unit symbol) | 'none'
    allow_inf: bool = False     # accept "inf"/"∞"


# SI prefix symbol -> power of ten.  'M' is mega (SI), 'meg' is SPICE's mega.
PREFIXES: dict[str, int] = {
    "f": -15, "p": -12, "n": -9,
    "u": -6, "\u00b5": -6, "\u03bc": -6,   # u, micro sign µ, Greek mu μ
    "m": -3, "k": 3,
    "M": 6, "meg": 6, "MEG": 6, "Meg": 6,
    "G": 9, "T": 12,
}
_CENTI = ("c", -2)      # metres only

_OHM = ("\u03a9", "\u2126")   # Greek capital omega, ohm sign
_CELSIUS_SYMBOLS = ("°C", "degC", "\u2103")

UNITS: dict[str, Unit] = {u.id: u for u in (
    Unit("ohm", "\u03a9", "resistance", "4.7 kΩ", "ohms",
         _OHM + ("ohm", "ohms", "Ohm", "Ohms", "R"), allow_inf=True),
    Unit("F", "F", "capacitance", "100 pF", "farads", ("F",), allow_inf=True),
    Unit("H", "H", "inductance", "10 µH", "henries", ("H",), allow_inf=True),
    Unit("V", "V", "voltage", "1.2 V", "volts", ("V",), allow_inf=True),
    Unit("A", "A", "current", "10 mA", "amperes", ("A",), allow_inf=True),
    Unit("W", "W", "power", "10 mW", "watts", ("W",)),
    Unit("S", "S", "conductance", "10 mS", "siemens", ("S", "mho", "mhos")),
    Unit("Hz", "Hz", "frequency", "1 MHz", "hertz", ("Hz",), allow_inf=True),
    Unit("s", "s", "time", "10 ns", "seconds", ("s",)),
    Unit("V/s", "V/µs", "slew rate", "0.5 V/µs", "volts per second",
         ("V/s", "V/µs", "V/us", "V/μs", "V/ns", "V/ms"), allow_inf=True),
    Unit("V/rtHz", "V/√Hz", "voltage noise density", "4 nV/√Hz",
         "volts per root hertz", ("V/√Hz", "V/rtHz", "V/sqrt(Hz)")),
    Unit("A/rtHz", "A/√Hz", "current noise density", "1 pA/√Hz",
         "amperes per root hertz", ("A/√Hz", "A/rtHz", "A/sqrt(Hz)")),
    Unit("dB", "dB", "decibel value", "-3 dB", "decibels", ("dB",), "none"),
    Unit("%", "%", "percentage", "1 %", "percent", ("%",), "none"),
    Unit("ppm", "ppm", "parts-per-million value", "50 ppm", "ppm", ("ppm",), "none"),
    Unit("m", "m", "length", "50 cm", "metres", ("m",)),
    Unit("F/m", "F/m", "capacitance per length", "100 pF/m",
         "farads per metre", ("F/m",)),
    Unit("ohm/m", "Ω/m", "resistance per length", "50 mΩ/m", "ohms per metre",
         tuple(o + "/m" for o in _OHM) + ("ohm/m", "ohms/m")),
    Unit("K", "K", "temperature", "300 K", "kelvin", ("K",)),
    Unit("dK", "K", "temperature difference ('10 °C' is 10 K)", "10 K", "kelvin",
         ("K",) + _CELSIUS_SYMBOLS, "none", allow_inf=True),
    Unit("V/K", "V/K", "voltage temperature coefficient", "5 µV/K", "volts per kelvin",
         ("V/K", "V/°C", "V/degC", "V/\u2103")),
    Unit("ppm/K", "ppm/K", "relative temperature coefficient", "25 ppm/K", "ppm per kelvin",
         ("ppm/K", "ppm/°C", "ppm/degC", "ppm/\u2103"), "none"),
    Unit("eV", "eV", "energy in electronvolts", "1.11 eV", "electronvolts", ("eV",)),
    Unit("A/V2", "A/V²", "transconductance parameter", "200 µA/V²",
         "amperes per volt squared", ("A/V²", "A/V^2", "A/V2")),
    Unit("sqrtV", "√V", "body-effect coefficient", "0.4 √V", "root volts",
         ("√V", "V^0.5", "sqrt(V)", "V½"), "bare"),
    Unit("1/V", "1/V", "inverse voltage", "0.02 /V", "per volt",
         ("1/V", "/V", "V^-1", "V⁻¹"), "bare"),
    Unit("deg", "°", "angle", "45°", "degrees", ("°", "deg"), "none"),
    Unit("1", "", "dimensionless number", "100", "'x' (times)", ("x",)),
)}

_MORE_EXAMPLES = {
    "ohm": ("4.7k", "1meg"),
    "K": ("27 °C",),
    "1": ("10k", "100x"),
    "m": ("2 mm",),
    "1/V": ("20m",),
}

_CELSIUS = _CELSIUS_SYMBOLS
_ZERO_CELSIUS_CENTI = 27315    # 0 °C = 273.15 K exactly, in hundredths of a kelvin
_SCALE = {"%": -2, "ppm": -6, "ppm/K": -6}   # power of ten applied when the symbol is given
#: power of ten of a symbol with a prefixed denominator ('V/µs' is 1e6 V/s)
_ALIAS_SCALE = {"V/µs": 6, "V/us": 6, "V/μs": 6, "V/ns": 9, "V/ms": 3}

# every accepted symbol -> plural name, to recognise "a unit of another quantity"
_FOREIGN: dict[str, str] = {a: u.name for u in UNITS.values() for a in u.aliases}
_FOREIGN.update({c: "degrees Celsius" for c in _CELSIUS})
_FOREIGN.update({"°F": "degrees Fahrenheit", "degF": "degrees Fahrenheit",
                 "\u2109": "degrees Fahrenheit"})

_ALL_PREFIXES = sorted(list(PREFIXES.items()) + [_CENTI], key=lambda kv: -len(kv[0]))

_NUM_RE = re.compile(r"[+\-\u2212]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+\-]?\d+)?")
_INF_RE = re.compile(r"(inf|∞)(.*)", re.DOTALL)
_NONFINITE_RE = re.compile(r"[+\-\u2212]?\s*(?:nan|inf|∞)", re.IGNORECASE)
_RKM_RE = re.compile(r"(meg|MEG|Meg|[fpnuµμmkKMGTR])(\d+)(.*)", re.DOTALL)
_TOL_RE = re.compile(r"±|\+/-|\+-")
_REL_RE = re.compile(r"(\d+(?:\.\d*)?|\.\d+)((?:[eE][+\-]?\d+)?)\s*(%|ppm)")
_DISTS = ("uniform", "normal", "sigma")
_DIST_WORDS = {"uniform": "uniform", "normal": "normal", "σ": "sigma", "sigma": "sigma"}
_SIGMA_RE = re.compile(r"^(.*?)\s*(?:σ|sigma)\s*=\s*(.+)$", re.DOTALL | re.IGNORECASE)
_TRACK_RE = re.compile(r"\s+tracks\s+([A-Za-z_][\w\-]*)\s*$")
_TC_RE = re.compile(r"(?:^|\s)(±|\+/-|\+-)?\s*([+\-\u2212]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+\-]?\d+)?)\s*"
                    r"([^\s/±]*)\s*/\s*(K|°C|degC|\u2103)\s*$")


# ----------------------------------------------------------------- helpers

def _article(word: str) -> str:
    return ("an " if word[:1].lower() in "aeiou" else "a ") + word


def _get_unit(unit_id: str) -> Unit:
    try:
        return UNITS[unit_id]
    except KeyError:
        raise KeyError(f"unknown unit id {unit_id!r}; known: {', '.join(UNITS)}") from None


def _expected(unit: Unit) -> str:
    q = _article(unit.quantity)
    return f"{q} ({unit.symbol})" if unit.symbol else q


def _how(unit: Unit) -> str:
    examples = ", ".join(repr(e) for e in (unit.example,) + _MORE_EXAMPLES.get(unit.id, ()))
    if unit.id == "1":
        how = "a plain number with an optional SI prefix or 'x' suffix"
    elif unit.prefixes == "all":
        how = "a number with an optional SI prefix and unit"
    elif unit.prefixes == "bare":
        how = (f"a number with an optional unit ({unit.symbol}), or with an SI prefix "
               f"but then no unit")
    else:
        how = f"a number with an optional unit ({unit.symbol}) and no SI prefix"
    return f"expected {how}, like {examples}"


def _err(text, unit: Unit, reason: str, how: bool = True) -> UnitError:
    shown = repr(text) if isinstance(text, str) else str(text)
    msg = f"{shown} is not {_article(unit.quantity)}: {reason}"
    if how:
        msg += f"; {_how(unit)}"
    return UnitError(msg)


def _scaled(number: str, exp10: int) -> float:
    """float(number) * 10**exp10, correctly rounded (one decimal->binary step)."""
    mant, _, nexp = number.replace("\u2212", "-").lower().partition("e")
    return float(f"{mant}e{int(nexp or 0) + exp10}")


def _plus_centi(number: str, centi: int) -> float:
    """float(number) + centi/100, computed exactly in decimal and rounded once, so
    that '-273.15 °C' is exactly 0 K and '-40 °C' is 233.15."""
    mant, _, nexp = number.replace("\u2212", "-").lower().partition("e")
    ipart, _, frac = mant.partition(".")
    exp = int(nexp or 0) - len(frac)
    if not -400 < exp < 400:            # beyond float range anyway: don't build huge ints
        return float(number.replace("\u2212", "-")) + centi / 100
    n = int(ipart.lstrip("+") + frac if ipart.lstrip("+-") else ipart + "0" + frac)
    c = min(exp, -2)
    return float(f"{n * 10 ** (exp - c) + centi * 10 ** (-2 - c)}e{c}")


def _prefix_items(unit: Unit):
    for p, e in _ALL_PREFIXES:
        if p == "c" and unit.id != "m":
            continue
        yield p, e


def _is_word(sym: str) -> bool:
    return len(sym) >= 3 and sym.isalpha()


def _interpret(rest: str, unit: Unit, delta: bool):
    """Return (power of ten, additive offset in hundredths, prefix used) or None."""
    if rest == "":
        return 0, 0, False
    if rest in unit.aliases:
        return _SCALE.get(unit.id, 0) + _ALIAS_SCALE.get(rest, 0), 0, False
    if unit.id == "K" and rest in _CELSIUS:
        return 0, (0 if delta else _ZERO_CELSIUS_CENTI), False
    if unit.prefixes == "none":
        return None
    for p, e in _prefix_items(unit):
        if not rest.startswith(p):
            continue
        tail = rest[len(p):]
        if tail == "":
            if p != "c":
                return e, 0, True
            continue
        if unit.prefixes != "all":
            continue
        if tail[0].isspace():
            tail = tail.lstrip()
            if not _is_word(tail):
                continue
        if tail in unit.aliases:
            return e + _ALIAS_SCALE.get(tail, 0), 0, True
    return None


def _split_prefix(rest: str):
    """Yield (prefix, tail) for every prefix (incl. '') that rest starts with."""
    yield "", rest
    for p, _ in _ALL_PREFIXES:
        if rest.startswith(p):
            tail = rest[len(p):]
            yield p, (tail.lstrip() if _is_word(tail.lstrip()) else tail)


def _diagnose(text, s: str, num: str, rest: str, unit: Unit) -> UnitError:
    if _TOL_RE.search(s):
        return _err(text, unit, "a tolerance ('±…') is not accepted for this field; "
                                "give a single value")
    m = _RKM_RE.fullmatch(rest)
    if m and re.fullmatch(r"[+\-\u2212]?\d+", num):
        p, frac, tail = m.groups()
        p = {"R": "", "K": "k"}.get(p, p)
        return _err(text, unit, f"RKM notation like '4k7' is not supported; "
                                f"write {num + '.' + frac + p + tail!r}")
    if unit.id != "K" and rest.startswith("K"):
        tail = rest[1:].lstrip()
        if tail == "" or tail in unit.aliases:
            suggestion = s[:len(s) - len(rest)] + "k" + rest[1:]
            return _err(text, unit, "capital 'K' is not an SI prefix (it is the kelvin); "
                                    f"kilo is lowercase 'k': write {suggestion!r}")
    if unit.id == "K" and rest in ("C", "c", "deg"):
        return _err(text, unit, "for Celsius write '°C' or 'degC', e.g. '27 °C'")
    # a prefix where this unit takes none
    for p, tail in _split_prefix(rest):
        if not p:
            continue
        if p == "c" and unit.id != "m" and tail in unit.aliases:
            return _err(text, unit, "the prefix 'c' (centi) is only accepted for lengths "
                                    "('50 cm')")
        if p in PREFIXES and (tail in unit.aliases or tail == "") and unit.prefixes != "all":
            if unit.prefixes == "none":
                why = f"SI prefixes are not used with {unit.name}"
            else:
                why = (f"an SI prefix cannot be combined with the unit symbol {unit.symbol} "
                       f"(ambiguous: the prefix could apply to the volt inside the power, "
                       f"e.g. 'mV⁻¹' means (mV)⁻¹ = 1000 V⁻¹); write a bare prefixed "
                       f"number like '20m' or use scientific notation")
            return _err(text, unit, why)
    # a unit of another quantity
    for p, tail in _split_prefix(rest):
        name = _FOREIGN.get(tail)
        if name is not None and tail not in unit.aliases:
            return _err(text, unit, f"{name} given where {_expected(unit)} is expected")
    # wrong case
    for p, tail in _split_prefix(rest):
        if p and (p not in PREFIXES or unit.prefixes == "none"):
            continue
        for a in unit.aliases:
            if tail.lower() == a.lower() and tail != a:
                hint = f"unit symbols are case-sensitive: did you mean {p + a!r}?"
                if p in ("m", "M"):
                    hint += " ('m' is milli, 'M' is mega)"
                return _err(text, unit, hint)
    if unit.prefixes == "none":
        what = f"{rest!r} is not a {unit.quantity} unit"
    else:
        what = f"{rest!r} is not a known SI prefix or {unit.quantity} unit"
    return _err(text, unit, what)


def _from_number(text, v: float, unit: Unit) -> float:
    if math.isnan(v):
        raise _err(text, unit, "NaN is not a value")
    if math.isinf(v):
        if v > 0 and unit.allow_inf:
            return math.inf
        raise _err(text, unit, "an infinite value is not accepted here")
    return v


def _parse(text, unit: Unit, delta: bool = False) -> float:
    if text is None:
        raise _err(text, unit, "no value given")
    if isinstance(text, bool) or type(text).__name__ == "bool_":
        raise _err(text, unit, "a boolean (YAML true/false/yes/no) is not a number")
    if isinstance(text, (int, float)) or (
            not isinstance(text, (str, bytes)) and hasattr(text, "__float__")):
        try:
            v = float(text)
        except (OverflowError, ValueError, TypeError) as exc:
            raise _err(text, unit, f"cannot be converted to a float ({exc})") from None
        return _from_number(text, v, unit)
    if not isinstance(text, str):
        raise _err(text, unit, f"expected a number or a string, got {type(text).__name__}")

    s = text.strip()
    if not s:
        raise _err(text, unit, "the value is empty")
    m = _INF_RE.fullmatch(s)
    if m and (m.group(2) == "" or m.group(2).strip() in unit.aliases
              and (m.group(1) == "∞" or m.group(2)[0].isspace())):
        if not unit.allow_inf:
            raise _err(text, unit, "an infinite value is not accepted for "
                                   f"{_article(unit.quantity)}")
        return math.inf
    if _NONFINITE_RE.match(s):
        raise _err(text, unit, "not a finite number (only exactly 'inf' or '∞' is "
                               "accepted, and only for impedance-like quantities)")
    m = _NUM_RE.match(s)
    if not m:
        raise _err(text, unit, "it does not start with a number")
    num = m.group(0)
    rest = s[m.end():].strip()
    r = _interpret(rest, unit, delta)
    if r is None:
        raise _diagnose(text, s, num, rest, unit)
    exp10, offset, used_prefix = r
    if used_prefix and re.search("[eE]", num):
        raise _err(text, unit, "scientific notation cannot be combined with an SI prefix "
                               "(write '1e3' or '1k', not '1e3k')")
    value = _scaled(num, exp10) if not offset else _plus_centi(num, offset)
    if not math.isfinite(value):
        raise _err(text, unit, "the number is too large")
    return value


# ----------------------------------------------------------------- public API

@dataclass(frozen=True)
class Tempco:
    """A temperature coefficient: ``rel`` per kelvin (50 ppm/K -> 5e-5) or ``abs`` in the
    field's SI unit per kelvin; ``spread``: written with ±, each unit draws its own
    coefficient uniformly within ±|tc| (a data-sheet TCR limit)."""
    rel: float | None
    abs: float | None
    spread: bool = False
    group: str | None = None      # 'tracks NAME': every part of the group draws the same coefficient

    @property
    def value(self) -> float:
        return self.rel if self.rel is not None else self.abs


@dataclass(frozen=True)
class Tolerance:
    dist: str             # 'uniform' (between ±limit), 'normal' (limit = 3σ, truncated) or 'sigma' (width = 1σ)
    rel: float | None     # relative width, e.g. 0.01 for ±1 %
    abs: float | None     # absolute width in SI units, e.g. 0.05 for ±50 mV
    # exactly one of rel/abs is set

    def __post_init__(self):
        if self.dist not in _DISTS:
            raise ValueError(f"Tolerance.dist must be one of {_DISTS}, got {self.dist!r}")
        if (self.rel is None) == (self.abs is None):
            raise ValueError("exactly one of Tolerance.rel and Tolerance.abs must be set")


def parse_value(text, unit_id: str) -> float:
    """Parse ``text`` (str, int or float) as a value of unit ``unit_id`` (a key of
    :data:`UNITS`) and return it in SI units (fractions for '%' and 'ppm',
    degrees for 'deg', kelvin for 'K').  Raises :class:`UnitError`."""
    return _parse(text, _get_unit(unit_id))


def parse_field_value(text, unit_id: str) -> tuple[float, Tolerance | None, Tempco | None]:
    """Parse ``"nominal [± width [uniform|normal|σ]] [[±]tc/K]"`` (or ``"nominal σ=width"``);
    see the module docstring.  Returns ``(nominal, Tolerance or None, Tempco or None)``."""
    unit = _get_unit(unit_id)
    if not isinstance(text, str):
        return _parse(text, unit), None, None
    tc = None
    group = None
    g = _TRACK_RE.search(text)
    if g:
        group, text = g.group(1), text[:g.start()]
    m = _TC_RE.search(text)
    if m and m.start() > 0 and text[:m.start()].strip() and not unit.id.endswith("/K"):
        tc = _parse_tempco(text, m, unit)
        text = text[:m.start()]
    if group is not None:
        if tc is None or not tc.spread:
            raise UnitError(f"in {text!r}: 'tracks {group}' names a group whose parts share one drawn "
                            "coefficient; it follows a coefficient limit such as '±25ppm/K'")
        tc = Tempco(tc.rel, tc.abs, True, group)
    return (*parse_toleranced(text, unit_id), tc)


def _parse_tempco(text, m, unit: Unit) -> Tempco:
    spread, num, sym = bool(m.group(1)), m.group(2), m.group(3)
    if sym in ("%", "ppm"):
        return Tempco(_scaled(num, _SCALE[sym]), None, spread)
    try:
        v = _parse(num + sym, unit, delta=True)
    except UnitError as exc:
        raise UnitError(f"in the temperature coefficient of {text!r}: {exc} (a coefficient is "
                        f"'50ppm/K', '0.1 %/K' or a {unit.quantity} per kelvin)") from None
    return Tempco(None, v, spread)


def parse_toleranced(text, unit_id: str) -> tuple[float, Tolerance | None]:
    """Parse ``"nominal [± width [uniform|normal|σ]]"`` or ``"nominal σ=width"``; see the
    module docstring.  Returns ``(nominal, Tolerance or None)``.  Raises :class:`UnitError`."""
    unit = _get_unit(unit_id)
    if not isinstance(text, str):
        return _parse(text, unit), None
    m = _SIGMA_RE.match(text)
    if m and not _TOL_RE.search(text):
        text = f"{m.group(1)} ±{m.group(2)} sigma"
    parts = _TOL_RE.split(text)
    if len(parts) == 1:
        return _parse(text, unit), None
    if len(parts) > 2:
        raise _err(text, unit, "more than one tolerance ('±') given")
    nominal_text, tol_text = parts[0].strip(), parts[1].strip()
    if not nominal_text:
        raise _err(text, unit, "the nominal value before '±' is missing")
    try:
        nominal = _parse(nominal_text, unit)
    except UnitError as exc:
        raise UnitError(f"in {text!r}: {exc}") from None
    return nominal, _parse_tolerance(text, tol_text, unit)


def _parse_tolerance(text: str, t: str, unit: Unit) -> Tolerance:
    dist = "uniform"
    words = t.rsplit(None, 1)
    if len(words) == 2 and words[1].lower() in _DIST_WORDS:
        dist, t = _DIST_WORDS[words[1].lower()], words[0]
    if not t or t.lower() in _DIST_WORDS:
        raise _err(text, unit, "the tolerance width after '±' is missing "
                               "(e.g. '10k ±1%', '0.7 V ±50 mV')", how=False)
    try:
        return _parse_width(text, t, unit, dist)
    except UnitError:
        last = words[-1]
        if (len(words) == 2 and last.isalpha()
                and not any(tail in _FOREIGN for _, tail in _split_prefix(last))):
            try:
                _parse_width(text, words[0], unit, dist)
            except UnitError:
                pass
            else:
                raise _err(text, unit, f"unknown distribution {last!r}; use 'uniform' (default: "
                                       "anywhere within the limit), 'normal' (limit = 3σ) or 'σ' "
                                       "(the width is one standard deviation)", how=False) from None
        raise


def _parse_width(text: str, t: str, unit: Unit, dist: str) -> Tolerance:
    if t[0] in "-\u2212":
        raise _err(text, unit, "a tolerance width must not be negative "
                               "(e.g. '10k ±1%')", how=False)
    m = _REL_RE.fullmatch(t)
    if m:
        rel = _scaled(m.group(1) + m.group(2), _SCALE[m.group(3)])
        if not math.isfinite(rel):
            raise _err(text, unit, "the tolerance width is too large", how=False)
        return Tolerance(dist, rel, None)
    try:
        width = _parse(t, unit, delta=True)
    except UnitError as exc:
        raise UnitError(f"in the tolerance of {text!r}: {exc}") from None
    if not math.isfinite(width):
        raise _err(text, unit, "the tolerance width must be finite", how=False)
    if width < 0:
        raise _err(text, unit, "a tolerance width must not be negative", how=False)
    return Tolerance(dist, None, width)


_FMT_PREFIX = {-15: "f", -12: "p", -9: "n", -6: "\u00b5", -3: "m", 0: "",
               3: "k", 6: "M", 9: "G", 12: "T"}
_FMT_NO_PREFIX = {"%": 2, "ppm": 6, "ppm/K": 6, "dB": 0, "°": 0, "deg": 0, "V/µs": -6}   # symbol -> scale 10**n
_FMT_NO_SPACE = ("°",)


def fmt(value: float, unit_symbol: str, digits: int = 3) -> str:
    """Format ``value`` (SI units) in engineering notation with ``digits``
    significant digits, e.g. ``fmt(4700, 'Ω') == '4.70 kΩ'``."""
    if not isinstance(digits, int) or digits < 1:
        raise ValueError(f"digits must be a positive integer, got {digits!r}")
    v = float(value)
    sep = "" if unit_symbol in _FMT_NO_SPACE else " "
    if math.isnan(v):
        return "\u2014"
    sign = "\u2212" if v < 0 else ""
    if math.isinf(v):
        return f"{sign}∞{sep}{unit_symbol}".rstrip()
    scale = _FMT_NO_PREFIX.get(unit_symbol)
    if scale:
        v = _scaled(repr(v), scale)
        if math.isinf(v):                  # a fraction near the float limit, scaled to % or ppm
            return f"{sign}{abs(float(value)):.{digits - 1}e}×10^{scale}{sep}{unit_symbol}"
    if v == 0:
        return f"0{sep}{unit_symbol}".rstrip()
    mant, _, e = f"{abs(v):.{digits - 1}e}".partition("e")
    e = int(e)
    d = mant.replace(".", "")
    if scale is None:
        eng = 3 * (e // 3)
        if eng not in _FMT_PREFIX:
            return f"{sign}{mant}e{e:+03d}{sep}{unit_symbol}".rstrip()
        prefix = _FMT_PREFIX[eng]
    else:
        eng, prefix = 0, ""
    ipart = e - eng + 1                 # digits before the decimal point
    if ipart >= len(d):
        num = d + "0" * (ipart - len(d))
    elif ipart > 0:
        num = d[:ipart] + "." + d[ipart:]
    else:
        num = "0." + "0" * (-ipart) + d
    return f"{sign}{num}{sep}{prefix}{unit_symbol}".rstrip()
