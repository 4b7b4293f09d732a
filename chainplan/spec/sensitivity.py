"""Strict parsing of a sensor's sensitivity: how much source signal (volts of EMF,
amperes of current, or coulombs of charge) one unit of the measurand gives.

Forms (whitespace around the whole text and between the parts is free)::

    12 mV/Pa                    signal per measurand unit (V for a sensor, A for a current_sensor)
    0.5 A/W                     a photodiode's responsivity
    10 pC/g                     charge per unit: a piezo element; EMF = Q/C of the source's c
    10 mV/(m/s²)                a compound measurand unit goes in parentheses
    2 mV/V at 50 kg             ratiometric (a bridge): output per volt of excitation at the
                                rated load; needs the source's 'excitation'
    -190 dB re 1 V/µPa          the trade's level form: 20·log10(M / M_ref)
    59.16 mV/pH 3354ppm/K       a temperature coefficient (relative: ppm/K or %/K, also /°C)
    59.16 mV/pH 0.1984 mV/pH/K  or absolute, in the sensitivity's own units per kelvin

The measurand unit is kept as written (``Pa``, ``µPa``, ``pH``, ``kg``, ``µε``,
``m/s²``): figures in it are shown with that unit, the number scaled by the
sensitivity alone — no SI prefix is read out of it (``pH`` is not pico-H).

Level form: a sensitivity level L = 20·log10(M/M_ref) dB re M_ref (Urick,
*Principles of Underwater Sound*, ch. 3, from memory), hence M = M_ref·10^(L/20);
``-190 dB re 1 V/µPa`` is 3.16e-10 V/µPa = 316 µV/Pa.

Charge form: a piezoelectric element is a charge source Q = d·x across its own
capacitance C, so its open-circuit EMF is Q/C (Gautschi, *Piezoelectric
Sensorics*, ch. 2, from memory): ``10 pC/g`` on a 1 nF element is 10 mV/g.

Ratiometric form: a bridge's rated output (mV/V) is its output per volt of
excitation at the rated capacity (common practice of load-cell data sheets):
``2 mV/V at 50 kg`` on 10 V is 20 mV at 50 kg, 0.4 mV/kg.

A temperature coefficient moves the sensitivity as ``S(T) = S0·(1 + tc·(T − Tnom))``
(relative) or ``S0 + tc·(T − Tnom)`` (absolute), Tnom the spec's ``t_nom``; the
Nernst slope of a pH electrode, ln(10)·kT/q, grows as T: 1/298.15 K = 3354 ppm/K at 25 °C.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

from .units import UnitError, parse_value

__all__ = ["Sensitivity", "parse_sensitivity", "EXAMPLES"]

EXAMPLES = "'12 mV/Pa', '-190 dB re 1 V/µPa', '2 mV/V at 50 kg', '10 pC/g', '59.16 mV/pH 3354ppm/K'"
#: a measurand unit: a word of letters (µ, °, Ω, ε, % and powers allowed), digits after the first letter
_UNIT = r"[A-Za-zµμ°%Ωεη][A-Za-zµμ°%Ωεη0-9²³⁻¹_]*"
_UNIT_RE = re.compile(rf"^(?:{_UNIT}|\(\s*{_UNIT}(?:\s*[/·*]\s*{_UNIT})*\s*\))$")
_TC_RE = re.compile(r"\s+([+\-−]?\s*\d[\d.]*(?:[eE][+\-]?\d+)?)\s*(ppm|%)\s*/\s*(?:K|°C|degC|℃)\s*$")
_TC_ABS_RE = re.compile(r"\s+([+\-−]?\d[\d.]*(?:[eE][+\-]?\d+)?\s*[^\s\d]\S*?)\s*/\s*(?:K|°C|degC|℃)\s*$")
_LEVEL_RE = re.compile(r"^([+\-−]?\d[\d.]*(?:[eE][+\-]?\d+)?)\s*dB\s+re\s+(.+)$")
_RATIO_RE = re.compile(r"^(.+?)\s+at\s+(.+)$")
_SIGNAL = {"V": ("V", "volts"), "A": ("A", "amperes"), "C": ("C", "coulombs")}


@dataclass(frozen=True)
class Sensitivity:
    """A parsed sensitivity.  ``value``: signal per measurand unit in SI (V/unit, A/unit
    or, for ``form == 'charge'``, C/unit; for ``'ratiometric'`` the fraction of the
    excitation per unit, 2 mV/V at 50 kg -> 4e-5 per kg).  ``tc_rel`` per kelvin or
    ``tc_abs`` (same units as ``value`` per kelvin), at most one set."""

    value: float
    unit: str              # the measurand unit as written, parentheses removed
    form: str              # 'direct' | 'charge' | 'ratiometric'
    text: str
    tc_rel: float | None = None
    tc_abs: float | None = None

    def resolve(self, c_source_f: float | None = None, excitation_v: float | None = None) -> float:
        """The sensitivity in the source's signal units (V or A) per measurand unit at Tnom."""
        if self.form == "charge":
            return self.value / c_source_f
        if self.form == "ratiometric":
            return self.value * excitation_v
        return self.value

    def at(self, s0: float, temp_k: float, t_nom_k: float) -> float:
        """The resolved sensitivity ``s0`` moved to ``temp_k`` by the coefficient (module docstring)."""
        dt = temp_k - t_nom_k
        if self.tc_rel is not None:
            return s0 * (1.0 + self.tc_rel * dt)
        if self.tc_abs is not None:
            return s0 + s0 / self.value * self.tc_abs * dt     # tc_abs is in the written units
        return s0


def _err(text, why) -> UnitError:
    return UnitError(f"{text!r} is not a sensitivity: {why}; write signal per measurand unit, e.g. {EXAMPLES}")


def parse_sensitivity(text, signal_unit: str) -> Sensitivity:
    """Parse a sensitivity text for a source whose signal is ``signal_unit`` ('V' or 'A');
    see the module docstring.  Raises :class:`~chainplan.spec.units.UnitError`."""
    if not isinstance(text, str) or not text.strip():
        raise _err(text, "it is text with units, not a bare number (the measurand's unit must be named)")
    s = " ".join(text.split())
    tc_rel = tc_abs = None
    m = _TC_RE.search(s)
    if m:
        tc_rel = float(m.group(1).replace("−", "-").replace(" ", "")) * (1e-6 if m.group(2) == "ppm" else 1e-2)
        s = s[:m.start()].strip()
    tc_text = None
    if tc_rel is None:
        m = _TC_ABS_RE.search(s)
        if m and m.start() > 0 and "/" in m.group(1):
            tc_text, s = m.group(1), s[:m.start()].strip()
    m = _LEVEL_RE.match(s)
    if m:
        level = float(m.group(1).replace("−", "-"))
        ref = _ratio(text, m.group(2).strip(), signal_unit)
        if not abs(level) <= 400:
            raise _err(text, f"a level of {level:g} dB is not a sensor's")
        out = Sensitivity(ref.value * 10.0 ** (level / 20.0), ref.unit, ref.form, text)
    elif "dB" in s.split():
        raise _err(text, "a level is written '<L> dB re <reference>', e.g. '-190 dB re 1 V/µPa'")
    else:
        m = _RATIO_RE.match(s)
        if m:
            out = _ratiometric(text, m.group(1).strip(), m.group(2).strip())
        else:
            out = _ratio(text, s, signal_unit)
    if tc_text is not None:
        num, _, unit = tc_text.partition("/")
        unit = unit.strip()
        if unit != out.unit and unit != f"({out.unit})":
            raise _err(text, f"the coefficient '{tc_text}/K' is per {unit!r}, the sensitivity per {out.unit!r}")
        ref = _ratio(text, f"{num}/{out.unit}" if "/" not in out.unit else f"{num}/({out.unit})", signal_unit)
        if out.form != "direct" or ref.form != "direct":
            raise _err(text, "an absolute coefficient goes with a plain sensitivity; use ppm/K otherwise")
        tc_abs = ref.value
    if not (math.isfinite(out.value) and out.value != 0):
        raise _err(text, "it must be finite and not zero")
    if tc_rel is not None and not abs(tc_rel) <= 1.0:
        raise _err(text, "a temperature coefficient beyond 100 %/K is not a sensor's")
    return Sensitivity(out.value, out.unit, out.form, text, tc_rel, tc_abs)


def _split(text, s):
    """'12 mV/Pa' -> ('12 mV', 'Pa'), at the first '/' (the measurand may be '(m/s²)')."""
    if "/" not in s:
        raise _err(text, "no '/': a sensitivity is a signal per unit of the measurand")
    num, _, unit = s.partition("/")
    unit = unit.strip()
    if not unit:
        raise _err(text, "the measurand's unit after '/' is missing")
    if not _UNIT_RE.match(unit):
        raise _err(text, f"{unit!r} is not a measurand unit (a word such as 'Pa', 'µPa', 'pH', 'kg', 'µε', "
                         "'W', 'g', or a compound in parentheses such as '(m/s²)')")
    return num.strip(), unit[1:-1].strip() if unit.startswith("(") else unit


def _signal_value(text, num, signal_unit):
    """'12 mV' -> (0.012, 'V'); the symbol must be the source's signal or, for a sensor, coulombs."""
    m = re.match(r"^(.*?)([VAC])$", num)
    if not m or not m.group(1).strip():
        want = "'mV', 'V'" if signal_unit == "V" else "'mA', 'A'"
        raise _err(text, f"{num!r} names no signal: the part before '/' is a value in {want}"
                         + (" or a charge ('pC')" if signal_unit == "V" else ""))
    sym = m.group(2)
    if sym == "C" and signal_unit != "V":
        raise _err(text, "a charge sensitivity (C per unit) is for a voltage source (kind sensor), whose "
                         "capacitance c turns it into an EMF")
    if sym in ("V", "A") and sym != signal_unit:
        kind = "sensor" if signal_unit == "V" else "current_sensor"
        raise _err(text, f"{_SIGNAL[sym][1]} per unit given for a {kind}, whose signal is in {_SIGNAL[signal_unit][1]}")
    try:
        return parse_value(m.group(1).strip() + ("V" if sym == "C" else sym), "V" if sym == "C" else sym), sym
    except UnitError as exc:
        raise UnitError(f"in the sensitivity {text!r}: {exc}") from None


def _ratio(text, s, signal_unit) -> Sensitivity:
    num, unit = _split(text, s)
    v, sym = _signal_value(text, num, signal_unit)
    return Sensitivity(v, unit, "charge" if sym == "C" else "direct", text)


def _ratiometric(text, rated, at) -> Sensitivity:
    """'2 mV/V' at '50 kg' -> 2e-3/50 per kg of excitation."""
    m = re.match(r"^(.+?)\s*/\s*V$", rated)
    if not m:
        raise _err(text, f"{rated!r} before 'at' is not a rated output per volt of excitation such as '2 mV/V'")
    try:
        ratio = parse_value(m.group(1), "V")
    except UnitError as exc:
        raise UnitError(f"in the sensitivity {text!r}: {exc}") from None
    mm = re.match(rf"^([+\-−]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+\-]?\d+)?)\s*({_UNIT}|\(.+\))$", at)
    if not mm or not _UNIT_RE.match(mm.group(2)):
        raise _err(text, f"{at!r} after 'at' is not the rated capacity with its unit, such as '50 kg'")
    cap = float(mm.group(1).replace("−", "-"))
    if not (cap > 0 and math.isfinite(cap)):
        raise _err(text, "the rated capacity must be positive")
    unit = mm.group(2)
    return Sensitivity(ratio / cap, unit[1:-1].strip() if unit.startswith("(") else unit, "ratiometric", text)
