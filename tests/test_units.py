"""Tests for chainplan.spec.units: parsing of engineering values and formatting."""

import math
from fractions import Fraction

import pytest
from hypothesis import given, settings, strategies as st

from chainplan.spec.units import _ALIAS_SCALE  # noqa: E402
from chainplan.spec.units import (
    PREFIXES, UNITS, Tolerance, Unit, UnitError, fmt, parse_toleranced, parse_value,
)

# No example database: keeps test runs from writing a .hypothesis/ folder.
FAST = settings(max_examples=150, deadline=None, database=None)

# --------------------------------------------------------------------------
# Independent references, written out here and not taken from the module.

# SI prefixes: BIPM, "The International System of Units (SI)", 9th edition (2019),
# Table 7 "SI prefixes": name -> (symbol, power of ten).
SI_BROCHURE_TABLE_7 = {
    "deca": ("da", 1), "hecto": ("h", 2), "kilo": ("k", 3), "mega": ("M", 6),
    "giga": ("G", 9), "tera": ("T", 12), "peta": ("P", 15), "exa": ("E", 18),
    "zetta": ("Z", 21), "yotta": ("Y", 24),
    "deci": ("d", -1), "centi": ("c", -2), "milli": ("m", -3), "micro": ("µ", -6),
    "nano": ("n", -9), "pico": ("p", -12), "femto": ("f", -15), "atto": ("a", -18),
    "zepto": ("z", -21), "yocto": ("y", -24),
}
# The subset the parser supports (the brief: f p n µ m k M G T; c for metres only).
SUPPORTED_SI = {"femto", "pico", "nano", "micro", "milli", "kilo", "mega", "giga", "tera"}
BROCHURE_EXP = {sym: e for name, (sym, e) in SI_BROCHURE_TABLE_7.items() if name in SUPPORTED_SI}
# Alternative spellings of micro -- source: Unicode Standard, U+00B5 MICRO SIGN is a
# compatibility character for U+03BC GREEK SMALL LETTER MU; 'u' is the ASCII fallback
# used by SPICE (ngspice User's Manual, table of scale factors).
ALT_MICRO = ("u", "\u00b5", "\u03bc")
# SPICE's mega: ngspice User's Manual, table of scale factors: MEG = 1e6 (SPICE is
# case-insensitive, so meg/Meg/MEG all mean mega there).
SPICE_MEGA = ("meg", "Meg", "MEG")

# A value for every unit: (unit id, text, expected SI value).
UNIT_CASES = [
    ("ohm", "4.7 kΩ", 4.7e3), ("ohm", "4.7k", 4.7e3), ("ohm", "1meg", 1e6),
    ("ohm", "1 MΩ", 1e6), ("ohm", "100R", 100.0), ("ohm", "10k ohm", 1e4),
    ("ohm", "10 ohms", 10.0), ("ohm", "1 meg ohm", 1e6), ("ohm", "2 \u2126", 2.0),
    ("F", "100 pF", 1e-10), ("F", "100pF", 1e-10), ("F", "2.2µ", 2.2e-6),
    ("F", "1e-12", 1e-12),
    ("H", "10 µH", 1e-5), ("H", "3.3nH", 3.3e-9),
    ("V", "1.2 V", 1.2), ("V", "-5V", -5.0), ("V", "+3.3 V", 3.3), ("V", "−1.20 V", -1.2),
    ("A", "10 mA", 0.01), ("A", "1.5E3 A", 1500.0),
    ("W", "10 mW", 0.01), ("W", "2.5W", 2.5),
    ("S", "10 mS", 0.01), ("S", "2 mho", 2.0), ("S", "1 mmho", 1e-3),
    ("Hz", "1 MHz", 1e6), ("Hz", "1.5E3", 1500.0), ("Hz", "50Hz", 50.0),
    ("s", "10 ns", 1e-8), ("s", "1 s", 1.0),
    ("V/s", "0.5 V/µs", 5e5), ("V/s", "20 V/us", 2e7), ("V/s", "500 mV/µs", 5e5), ("V/s", "3 V/ns", 3e9),
    ("V/s", "1.2 MV/s", 1.2e6), ("V/s", "1e6", 1e6),
    ("V/rtHz", "4 nV/√Hz", 4e-9), ("V/rtHz", "4nV/rtHz", 4e-9), ("V/rtHz", "4 nV/sqrt(Hz)", 4e-9),
    ("A/rtHz", "1 pA/√Hz", 1e-12), ("A/rtHz", "1pA/rtHz", 1e-12), ("A/rtHz", "1 pA/sqrt(Hz)", 1e-12),
    ("dB", "-3 dB", -3.0), ("dB", "20dB", 20.0), ("dB", "6", 6.0),
    ("%", "1%", 0.01), ("%", "1 %", 0.01), ("%", "0.05", 0.05),
    ("ppm", "50 ppm", 50e-6), ("ppm", "100ppm", 1e-4),
    ("m", "2 m", 2.0), ("m", "2m", 2.0), ("m", "2 mm", 2e-3), ("m", "50 cm", 0.5),
    ("m", "3 km", 3e3), ("m", "1.5", 1.5),
    ("F/m", "100 pF/m", 1e-10), ("F/m", "1 F/m", 1.0),
    ("ohm/m", "50 mΩ/m", 0.05), ("ohm/m", "2 ohm/m", 2.0),
    ("K", "300 K", 300.0), ("K", "300K", 300.0), ("K", "27 °C", 300.15),
    ("V/K", "-2 mV/K", -2e-3), ("V/K", "-2.1 mV/°C", -2.1e-3), ("eV", "1.11 eV", 1.11),
    ("K", "27 degC", 300.15), ("K", "-40 °C", 233.15), ("K", "-273.15 °C", 0.0),
    ("dK", "10 K", 10.0), ("dK", "10 °C", 10.0), ("dK", "inf", float("inf")),
    ("V/K", "5 µV/K", 5e-6), ("V/K", "5 µV/°C", 5e-6), ("V/K", "2 mV/K", 2e-3),
    ("ppm/K", "25 ppm/K", 25e-6), ("ppm/K", "25 ppm/°C", 25e-6),
    ("A/V2", "200 µA/V²", 2e-4), ("A/V2", "200uA/V^2", 2e-4), ("A/V2", "200 µA/V2", 2e-4),
    ("sqrtV", "0.4 √V", 0.4), ("sqrtV", "0.4 V^0.5", 0.4), ("sqrtV", "0.4 sqrt(V)", 0.4),
    ("sqrtV", "0.4 V½", 0.4), ("sqrtV", "400m", 0.4),
    ("1/V", "0.02 1/V", 0.02), ("1/V", "0.02 /V", 0.02), ("1/V", "0.02/V", 0.02),
    ("1/V", "0.02 V^-1", 0.02), ("1/V", "0.02 V⁻¹", 0.02), ("1/V", "20m", 0.02),
    ("deg", "45°", 45.0), ("deg", "45 deg", 45.0), ("deg", "-90", -90.0),
    ("1", "100", 100.0), ("1", "10k", 1e4), ("1", "100x", 100.0), ("1", "2.5 x", 2.5),
]


def close(a, b, rel=1e-12):
    return a == pytest.approx(b, rel=rel, abs=1e-300)


# --------------------------------------------------------------------------
# Plain cases


def test_every_unit_has_a_case_and_its_example_parses():
    assert {u for u, _, _ in UNIT_CASES} == set(UNITS)
    for uid, unit in UNITS.items():
        assert isinstance(unit, Unit) and unit.id == uid
        assert unit.quantity and unit.example
        parse_value(unit.example, uid)          # the advertised example is valid


@pytest.mark.parametrize("uid,text,expected", UNIT_CASES)
def test_units(uid, text, expected):
    assert close(parse_value(text, uid), expected)


@pytest.mark.parametrize("text,expected", [
    ("1f", 1e-15), ("1p", 1e-12), ("1n", 1e-9), ("1u", 1e-6), ("1µ", 1e-6), ("1μ", 1e-6),
    ("1m", 1e-3), ("1k", 1e3), ("1M", 1e6), ("1meg", 1e6), ("1MEG", 1e6), ("1Meg", 1e6),
    ("1G", 1e9), ("1T", 1e12),
])
def test_each_prefix(text, expected):
    assert parse_value(text, "ohm") == expected
    assert parse_value(text + "F", "F") == expected
    assert parse_value(text.replace("1", "1 ", 1) + "V", "V") == expected


def test_micro_sign_and_greek_mu_are_both_micro():
    assert "\u00b5" != "\u03bc"
    assert parse_value("2.2\u00b5", "F") == parse_value("2.2\u03bcF", "F") == 2.2e-6


def test_capital_M_is_mega_not_spice_milli():
    assert parse_value("1M", "ohm") == 1e6
    assert parse_value("1m", "ohm") == 1e-3


def test_numbers_pass_through():
    assert parse_value(4700, "ohm") == 4700.0
    assert parse_value(1e-12, "F") == 1e-12
    assert parse_value(0.01, "%") == 0.01        # bare numbers are fractions already
    assert parse_value(-3, "dB") == -3.0
    assert parse_value(" 4.7k ", "ohm") == 4700.0


def test_infinity_only_for_impedance_like_units():
    for uid in ("ohm", "F", "H", "Hz", "V", "A"):
        assert parse_value("inf", uid) == math.inf
        assert parse_value("∞", uid) == math.inf
        assert parse_value(math.inf, uid) == math.inf
    assert parse_value("∞ Ω", "ohm") == math.inf       # what fmt prints
    for uid in ("dB", "s", "%", "K", "1"):
        with pytest.raises(UnitError, match=UNITS[uid].quantity):
            parse_value("inf", uid)
    for text in ("-inf", "+inf", "Inf", "infinity", "nan", "NaN", "-∞"):
        with pytest.raises(UnitError, match="resistance"):
            parse_value(text, "ohm")
    for value in (math.nan, -math.inf):
        with pytest.raises(UnitError, match="resistance"):
            parse_value(value, "ohm")


@pytest.mark.parametrize("text,uid,fragment", [
    ("4.7q", "ohm", "'q' is not a known SI prefix"),
    ("", "ohm", "empty"),
    ("   ", "V", "empty"),
    (None, "V", "no value"),
    (True, "ohm", "boolean"),
    (False, "F", "boolean"),
    ([1], "V", "list"),
    ("3 V", "ohm", "volts given where a resistance (Ω) is expected"),
    ("10 ms", "S", "seconds given where a conductance (S) is expected"),
    ("1 Hz", "H", "hertz given where an inductance (H) is expected"),
    ("3 mm", "ohm", "metres given"),
    ("100 pF/m", "F", "farads per metre given"),
    ("45 degC", "deg", "degrees Celsius given"),
    ("5 s", "1", "seconds given where a dimensionless number is expected"),
    ("4k7", "ohm", "write '4.7k'"),
    ("4K7", "ohm", "RKM"),
    ("4R7", "ohm", "RKM"),
    ("2u2", "F", "write '2.2u'"),
    ("4.7K", "ohm", "lowercase 'k'"),
    ("4.7 KΩ", "ohm", "write '4.7 kΩ'"),
    ("1 KHz", "Hz", "lowercase 'k'"),
    ("1e3k", "ohm", "scientific notation"),
    ("1e3 kΩ", "ohm", "scientific notation"),
    ("nan", "V", "finite"),
    ("1e400", "V", "too large"),
    ("10k", "dB", "prefix"),
    ("3 kdB", "dB", "prefix"),
    ("10 m%", "%", "prefix"),
    ("1 kppm", "ppm", "prefix"),
    ("20 m/V", "1/V", "prefix"),
    ("20 mV⁻¹", "1/V", "prefix"),
    ("0.4 m√V", "sqrtV", "prefix"),
    ("2 cF", "F", "'c' (centi) is only accepted for lengths"),
    ("2c", "m", "'c'"),
    ("27 C", "K", "°C"),
    ("100 pf", "F", "case-sensitive: did you mean 'pF'"),
    ("1 mhz", "Hz", "'M' is mega"),
    ("10k ±1%", "ohm", "tolerance"),
    ("10,000", "ohm", "not a known"),
    ("abc", "V", "does not start with a number"),
    ("1 m V", "V", "not a known"),
    ("1 kK", "ohm", "kelvin"),
    ("1E", "ohm", "'E' is not a known"),          # exa is not supported
])
def test_rejections_name_the_expected_quantity(text, uid, fragment):
    unit = UNITS[uid]
    with pytest.raises(UnitError) as info:
        parse_value(text, uid)
    msg = str(info.value)
    assert unit.quantity in msg
    assert fragment in msg
    assert isinstance(info.value, ValueError)


def test_error_message_gives_an_example():
    for uid, unit in UNITS.items():
        with pytest.raises(UnitError) as info:
            parse_value("4.7q", uid)
        assert unit.quantity in str(info.value)
        assert repr(unit.example) in str(info.value)


def test_unknown_unit_id_is_a_programming_error():
    with pytest.raises(KeyError):
        parse_value("1", "furlong")


# --------------------------------------------------------------------------
# Tolerances


@pytest.mark.parametrize("text,uid,nominal,tol", [
    ("10k ±1%", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("10k +-1%", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("10k +/- 1%", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("10k ±1 %", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("10k±1%", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("10k ±100 ppm", "ohm", 1e4, Tolerance("uniform", 1e-4, None)),
    ("0.7 V ±50m", "V", 0.7, Tolerance("uniform", None, 0.05)),
    ("0.7 V ±50 mV", "V", 0.7, Tolerance("uniform", None, 0.05)),
    ("0.7 ±0.05", "V", 0.7, Tolerance("uniform", None, 0.05)),
    ("10k ±1% normal", "ohm", 1e4, Tolerance("normal", 0.01, None)),
    ("10k ±1% Normal", "ohm", 1e4, Tolerance("normal", 0.01, None)),
    ("10k ±1% uniform", "ohm", 1e4, Tolerance("uniform", 0.01, None)),
    ("100 pF ±5 pF normal", "F", 1e-10, Tolerance("normal", None, 5e-12)),
    ("27 °C ±5 °C", "K", 300.15, Tolerance("uniform", None, 5.0)),   # a difference: no offset
    ("27 °C ±5", "K", 300.15, Tolerance("uniform", None, 5.0)),
    ("5 % ±0.5%", "%", 0.05, Tolerance("uniform", 0.005, None)),       # % is always relative
    ("10k ±0%", "ohm", 1e4, Tolerance("uniform", 0.0, None)),
])
def test_tolerances(text, uid, nominal, tol):
    got_nominal, got_tol = parse_toleranced(text, uid)
    assert close(got_nominal, nominal)
    assert got_tol.dist == tol.dist
    for field in ("rel", "abs"):
        want = getattr(tol, field)
        if want is None:
            assert getattr(got_tol, field) is None
        else:
            assert close(getattr(got_tol, field), want)


def test_no_tolerance():
    assert parse_toleranced("10k", "ohm") == (1e4, None)
    assert parse_toleranced(4700, "ohm") == (4700.0, None)
    assert parse_toleranced(0.7, "V") == (0.7, None)


@pytest.mark.parametrize("text,uid,fragment", [
    ("10k ±-1%", "ohm", "negative"),
    ("0.7 V ±-50 mV", "V", "negative"),
    ("10k ±", "ohm", "missing"),
    ("10k ± normal", "ohm", "missing"),
    ("±1%", "ohm", "nominal"),
    ("10k ±1% gaussian", "ohm", "unknown distribution 'gaussian'"),
    ("10k ±1% ±2%", "ohm", "more than one"),
    ("10q ±1%", "ohm", "'q' is not"),
    ("0.7 V ±50 mA", "V", "amperes given where a voltage"),
    ("1 V ±inf", "V", "finite"),
    (None, "V", "no value"),
])
def test_tolerance_rejections(text, uid, fragment):
    with pytest.raises(UnitError) as info:
        parse_toleranced(text, uid)
    assert UNITS[uid].quantity in str(info.value)
    assert fragment in str(info.value)


def test_tolerance_invariants():
    with pytest.raises(ValueError):
        Tolerance("uniform", 0.01, 0.5)
    with pytest.raises(ValueError):
        Tolerance("uniform", None, None)
    with pytest.raises(ValueError):
        Tolerance("triangular", 0.01, None)


# --------------------------------------------------------------------------
# Formatting


@pytest.mark.parametrize("value,symbol,expected", [
    (4700, "Ω", "4.70 kΩ"),
    (1e-10, "F", "100 pF"),
    (0.0012, "V", "1.20 mV"),
    (float("inf"), "Ω", "∞ Ω"),
    (float("-inf"), "Ω", "−∞ Ω"),
    (-1.2, "V", "−1.20 V"),
    (0, "V", "0 V"),
    (-0.0, "V", "0 V"),
    (float("nan"), "V", "—"),
    (1, "V", "1.00 V"),
    (12, "V", "12.0 V"),
    (123456, "Hz", "123 kHz"),
    (999.4, "Ω", "999 Ω"),
    (999.6, "Ω", "1.00 kΩ"),          # rounding moves to the next prefix
    (2.2e-6, "F", "2.20 µF"),
    (1e-15, "F", "1.00 fF"),
    (1e12, "Ω", "1.00 TΩ"),
    (1e-18, "F", "1.00e-18 F"),       # outside f..T: scientific notation
    (1e15, "Ω", "1.00e+15 Ω"),
    (2e-4, "A/V²", "200 µA/V²"),
    (4e-9, "V/√Hz", "4.00 nV/√Hz"),
    (1e4, "", "10.0 k"),
    (0.01, "%", "1.00 %"),            # % and ppm take fractions, like parse_value returns
    (5e-5, "ppm", "50.0 ppm"),
    (-3.0103, "dB", "−3.01 dB"),
    (45, "°", "45.0°"),
])
def test_fmt(value, symbol, expected):
    assert fmt(value, symbol) == expected


def test_fmt_digits():
    assert fmt(4700, "Ω", 1) == "5 kΩ"
    assert fmt(47000, "Ω", 1) == "50 kΩ"
    assert fmt(4700, "Ω", 5) == "4.7000 kΩ"
    with pytest.raises(ValueError):
        fmt(1, "V", 0)


# --------------------------------------------------------------------------
# Property tests

mantissas = st.builds(
    lambda sign, ipart, frac: f"{sign}{ipart}{'.' + frac if frac else ''}",
    st.sampled_from(["", "-", "+"]),
    st.integers(min_value=0, max_value=99999).map(str),
    st.text(alphabet="0123456789", max_size=6),
)
PREFIXED_UNITS = sorted(uid for uid, u in UNITS.items() if u.prefixes == "all")


@st.composite
def prefixed_values(draw):
    uid = draw(st.sampled_from(PREFIXED_UNITS))
    unit = UNITS[uid]
    symbol = draw(st.sampled_from(unit.aliases))
    prefixes = sorted(PREFIXES) + (["c"] if uid == "m" else [])
    prefix = draw(st.sampled_from(prefixes))
    space = draw(st.sampled_from(["", " "]))
    return uid, draw(mantissas), space, prefix, symbol


@FAST
@given(prefixed_values())
def test_round_trip_prefix_and_symbol(case):
    uid, m, space, prefix, symbol = case
    exp = PREFIXES.get(prefix, -2) + _ALIAS_SCALE.get(symbol, 0)   # 'V/µs' carries its own 10⁶
    got = parse_value(f"{m}{space}{prefix}{symbol}", uid)
    assert close(got, float(m) * 10.0 ** exp)


@FAST
@given(mantissas, st.sampled_from(sorted(BROCHURE_EXP) + list(ALT_MICRO) + list(SPICE_MEGA)),
       st.sampled_from(["ohm", "F", "V", "Hz", "1"]))
def test_cross_check_against_brochure_and_exact_arithmetic(m, prefix, uid):
    # Reference: exponent from the SI Brochure table above (or the alternative micro /
    # SPICE mega spellings), value by exact rational arithmetic, rounded once.
    if prefix in ALT_MICRO:
        exp = BROCHURE_EXP["µ"]
    elif prefix in SPICE_MEGA:
        exp = BROCHURE_EXP["M"]
    else:
        exp = BROCHURE_EXP[prefix]
    reference = float(Fraction(m) * Fraction(10) ** exp)
    assert parse_value(f"{m}{prefix}", uid) == reference
    # the numeric part alone agrees with Python's float() of the mantissa string
    assert parse_value(m, uid) == float(m)


def test_brochure_prefixes_not_supported_are_rejected():
    for name, (symbol, _) in SI_BROCHURE_TABLE_7.items():
        if name in SUPPORTED_SI or name == "centi":
            continue
        with pytest.raises(UnitError, match="resistance"):
            parse_value(f"1{symbol}", "ohm")
    # every prefix the parser accepts is in the Brochure or a documented alternative
    for p, e in PREFIXES.items():
        if p in ALT_MICRO:
            assert e == BROCHURE_EXP["µ"]
        elif p in SPICE_MEGA:
            assert e == BROCHURE_EXP["M"]
        else:
            assert BROCHURE_EXP[p] == e
    assert parse_value("1 cm", "m") == float(Fraction(1) * Fraction(10) ** -2)


@FAST
@given(st.floats(min_value=1e-15, max_value=9.99e14, allow_nan=False),
       st.sampled_from(["ohm", "F", "V", "Hz", "s", "A/V2", "V/rtHz"]),
       st.booleans(), st.integers(min_value=1, max_value=8))
def test_fmt_output_parses_back(x, uid, negative, digits):
    x = -x if negative else x
    text = fmt(x, UNITS[uid].symbol, digits)
    assert close(parse_value(text, uid), x, rel=0.51 * 10.0 ** (1 - digits))


@FAST
@given(st.text(max_size=12), st.sampled_from(sorted(UNITS)))
def test_arbitrary_text_gives_float_or_unit_error(text, uid):
    try:
        value = parse_value(text, uid)
    except UnitError as exc:
        assert UNITS[uid].quantity in str(exc)
    else:
        assert isinstance(value, float) and not math.isnan(value)
