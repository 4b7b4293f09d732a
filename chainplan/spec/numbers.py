"""The one number formatter of every screen: terminal tables, summaries, Markdown,
HTML and plot labels all call :func:`figure` (one value) or :func:`figures` (a
column of values, so the column reads in one prefix).

Rules (docs/json.md, "Signs and numbers", names the sign convention):

* Engineering prefixes (f p n µ m k M G T) through :func:`chainplan.spec.units.fmt`;
  three significant figures unless the quantity asks otherwise.
* A column reads in one prefix where its values allow it (the largest value's
  prefix, when the smallest is no more than 100× smaller); otherwise each value
  takes its own prefix, but milli is never shown beside mega in one column
  (``160 mΩ`` beside ``5.31 MΩ`` is a misreading waiting to happen): the small
  values are then written without prefix (``0.160 Ω``).
* No negative zero: a value that rounds to zero is written ``0`` (``0.00 dB``).
* Below meaning: a value smaller than the floor of its unit (``FLOOR``: 1 nV,
  1 pA, 1 pW, ...) is written ``< 1 nV``; an exact zero is ``0 V``.
* Gains (unit ``"V/V"``) to the figure that differs from 1: ``0.99994``,
  ``0.939``, ``46.99``; a gain within 10⁻⁵ of 1 is ``1.00000``.
* dB with a fixed number of decimals (2 by default) and a true minus sign;
  ``signed=True`` writes ``+`` for positive values (gains, changes), the default
  for dB; losses and rejections (positive by convention) pass ``signed=False``.
* ``bits`` with two decimals; ``%`` of a fraction with ``decimals`` (1).
"""
from __future__ import annotations

import math

from .units import fmt

MINUS = "\u2212"
DASH = "\u2014"

#: unit symbol -> (floor below which a value has no meaning on a screen, its text)
FLOOR = {
    "V": (1e-9, "1 nV"), "A": (1e-12, "1 pA"), "W": (1e-12, "1 pW"),
    "V/√Hz": (1e-12, "1 pV/√Hz"), "A/√Hz": (1e-17, "0.01 fA/√Hz"),
}

_PREFIX_EXP = {"f": -15, "p": -12, "n": -9, "µ": -6, "m": -3, "": 0, "k": 3, "M": 6, "G": 9, "T": 12}
_EXP_PREFIX = {v: k for k, v in _PREFIX_EXP.items()}
_NO_PREFIX = ("dB", "dBΩ", "dBFS", "bits", "%", "ppm", "°", "deg", "", "V/V")


def _missing(x) -> bool:
    """None or NaN (of any float type: Python, numpy)."""
    if x is None:
        return True
    try:
        return math.isnan(float(x))
    except (TypeError, ValueError):
        return False


def _minus(s: str) -> str:
    return s.replace("-", MINUS)


def _fixed(x: float, decimals: int, signed: bool) -> str:
    """``x`` with ``decimals`` decimals; a value that rounds to zero has no sign."""
    s = f"{x:.{decimals}f}"
    if float(s) == 0.0:
        return f"{0.0:.{decimals}f}"
    if signed and x > 0:
        s = "+" + s
    return _minus(s)


def _gain(x: float) -> str:
    """A V/V gain to the figure that differs from 1 (two figures of the deviation,
    at most five decimals); three significant figures away from 1."""
    dev = abs(x - 1.0)
    if dev < 0.1:
        decimals = 5 if dev < 1e-5 else min(5, -math.floor(math.log10(dev)) + 1)
        return _minus(f"{x:.{decimals}f}")
    if abs(x) >= 1000:
        return _minus(fmt(x, "", 4))
    return ("" if x >= 0 else MINUS) + _sig(abs(x), 4 if abs(x) >= 1 else 3)


def figure(x, unit: str, *, signed: bool | None = None, decimals: int | None = None, digits: int = 3,
           prefix: str | None = None) -> str:
    """One value for a screen: ``figure(0.0149, 'V') == '14.9 mV'``,
    ``figure(-0.0004, 'dB') == '0.00 dB'``, ``figure(2.9e-13, 'V') == '< 1 nV'``,
    ``figure(0.99994, 'V/V') == '0.99994'``.  ``prefix`` forces an SI prefix (used by
    :func:`figures` so a column reads in one prefix); ``signed`` writes a '+' on
    positive values (default: on for dB, off otherwise)."""
    if _missing(x):
        return DASH
    x = float(x)
    if unit in ("dB", "dBΩ", "dBFS"):
        if math.isinf(x):
            return ("−∞" if x < 0 else "+∞") + f" {unit}"
        return _fixed(x, 2 if decimals is None else decimals, True if signed is None else signed) + f" {unit}"
    if unit == "bits":
        return _fixed(x, 2 if decimals is None else decimals, bool(signed)) + " bits"
    if unit == "%":
        return _fixed(100 * x, 1 if decimals is None else decimals, bool(signed)) + " %"
    if unit == "V/V":
        return _gain(x)
    if math.isinf(x):
        return (MINUS if x < 0 else "+" if signed else "") + f"∞ {unit}".rstrip()
    if x == 0:
        return f"0 {unit}".rstrip()
    floor = FLOOR.get(unit)
    if floor is not None and abs(x) < floor[0]:
        return ("> −" if x < 0 else "< ") + floor[1]
    sign = "+" if signed and x > 0 else ""
    if prefix is None or unit in _NO_PREFIX:
        return sign + fmt(x, unit, digits)
    scaled = abs(x) / 10.0 ** _PREFIX_EXP[prefix]
    mag = f"{scaled:.{digits}g}" if scaled >= 10 ** (digits - 1) else _sig(scaled, digits)
    return sign + (MINUS if x < 0 else "") + f"{mag} {prefix}{unit}"


def _sig(v: float, digits: int) -> str:
    """``v`` (< 10**(digits-1)) with ``digits`` significant figures, trailing zeros kept."""
    if v == 0:
        return "0"
    lead = math.floor(math.log10(v))
    dec = max(0, digits - 1 - lead)
    s = f"{v:.{dec}f}"
    if float(s) >= 10 ** (lead + 1) and dec > 0:     # rounding carried into a new digit
        s = f"{v:.{dec - 1}f}"
    return s


def _exp3(x: float, digits: int) -> int:
    m = float(f"{abs(x):.{digits - 1}e}")
    return 3 * math.floor(math.log10(m) / 3)


def figures(values, unit: str, *, signed: bool | None = None, decimals: int | None = None,
            digits: int = 3) -> list[str]:
    """A column of values in one prefix where the values allow it (see the module
    docstring); same keywords as :func:`figure`."""
    vals = [None if _missing(v) else float(v) for v in values]
    kw = dict(signed=signed, decimals=decimals, digits=digits)
    if unit in _NO_PREFIX:
        return [figure(v, unit, **kw) for v in vals]
    floor = FLOOR.get(unit, (0.0, ""))[0]
    shown = [abs(v) for v in vals if v is not None and math.isfinite(v) and v != 0 and abs(v) >= floor]
    if not shown:
        return [figure(v, unit, **kw) for v in vals]
    hi, lo = max(shown), min(shown)
    e_hi = _exp3(hi, digits)
    if hi / lo <= 100 and e_hi in _EXP_PREFIX:
        p = _EXP_PREFIX[e_hi]
        return [figure(v, unit, prefix=p, **kw) if v is not None and math.isfinite(v) and v != 0
                and abs(v) >= floor else figure(v, unit, **kw) for v in vals]
    exps = [_exp3(v, digits) for v in shown]
    if max(exps) >= 6 and min(exps) <= -3:           # never milli beside mega
        return [figure(v, unit, prefix="", **kw) if v is not None and math.isfinite(v) and v != 0
                and abs(v) < 1 and abs(v) >= floor else figure(v, unit, **kw) for v in vals]
    return [figure(v, unit, **kw) for v in vals]


def loss(x, decimals: int = 3) -> str:
    """A loss (positive = dB lost, by the convention of docs/json.md): ``'18.121 dB'``;
    a loss that rounds to nothing is ``'< 0.001 dB'``, none at all ``'0 dB'``."""
    if _missing(x):
        return DASH
    x = float(x)
    if abs(x) < 0.5 * 10 ** -decimals:
        return f"< {10 ** -decimals:.{decimals}f} dB" if x > 0 else "0 dB"
    return figure(x, "dB", signed=False, decimals=decimals)


def _plain(x: float) -> str:
    """A temperature's number with the digits it has (6 significant, trailing zeros dropped)."""
    return f"{round(x, 6):.6g}".replace("-", MINUS)


def celsius(t_k) -> str:
    """A temperature in kelvin written in degrees Celsius with all its digits: 300 K is
    '26.85 °C', 308.15 K '35 °C' (0 °C = 273.15 K exactly, SI brochure)."""
    return f"{_plain(float(t_k) - 273.15)} °C"


def temperature(t_k, written: str | None = None) -> str:
    """A spec's temperature as its author wrote it: in degrees Celsius, '27 °C (300.15 K)'
    (the kelvin the physics uses beside it); in kelvin, or not written, '300 K'."""
    from .units import _CELSIUS_SYMBOLS
    t_k = float(t_k)
    if isinstance(written, str) and any(written.strip().endswith(c) for c in _CELSIUS_SYMBOLS):
        return f"{celsius(t_k)} ({_plain(t_k)} K)"
    return f"{_plain(t_k)} K"


def ratio_unit(unit: str) -> str:
    """The unit of a difference (a margin, a change, a spread) of figures in ``unit``: two
    transimpedances in dBΩ differ by a ratio, in dB; every other unit is its own."""
    return "dB" if unit == "dBΩ" else unit
