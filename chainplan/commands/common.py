"""Options and helpers shared by the commands."""
from __future__ import annotations

import math

from ..errors import UsageError
from ..spec.units import UnitError, parse_value


def add_analysis_options(p, json: bool = True):
    p.add_argument("--at", metavar="FREQ", help="reference frequency, e.g. '1 kHz' (default: the spec's f_ref)")
    p.add_argument("--span", metavar="LOW:HIGH", help="frequency span, e.g. '1 Hz:10 MHz' (default: the spec's)")
    if json:
        p.add_argument("--json", action="store_true", help="print JSON instead of tables")
        add_wide_option(p)


def add_wide_option(p):
    p.add_argument("--wide", action="store_true", help="show the secondary columns of every table, however wide "
                   "(by default tables fit the terminal, or COLUMNS when piped)")


def apply_analysis_options(chain, args):
    """Override the spec's reference frequency and span from the command line."""
    a = chain.analysis
    if getattr(args, "at", None):
        a.f_ref_hz = _freq(args.at, "--at")
    if getattr(args, "span", None):
        if ":" not in args.span:
            raise UsageError("--span takes LOW:HIGH, e.g. '10 Hz:1 MHz'")
        lo, hi = args.span.split(":", 1)
        a.f_start_hz, a.f_stop_hz = _freq(lo, "--span"), _freq(hi, "--span")
        if not a.f_start_hz < a.f_stop_hz:
            raise UsageError("--span: the low end must be below the high end")
    if not a.f_start_hz <= a.f_ref_hz <= a.f_stop_hz:
        raise UsageError(f"the reference frequency {a.f_ref_hz:g} Hz is not inside the span "
                         f"{a.f_start_hz:g} to {a.f_stop_hz:g} Hz: change --at or --span")
    band = a.noise_band_hz
    if band is not None and not (band[0] < a.f_stop_hz and a.f_start_hz < band[1]):
        raise UsageError(f"--span: the spec's noise_band {band[0]:g} to {band[1]:g} Hz lies outside the span "
                         f"{a.f_start_hz:g} to {a.f_stop_hz:g} Hz: widen --span")
    return chain


def _freq(text, opt):
    try:
        v = parse_value(text.strip(), "Hz")
    except UnitError as exc:
        raise UsageError(f"{opt}: {exc}") from None
    if not (v > 0 and math.isfinite(v)):
        raise UsageError(f"{opt}: a frequency must be positive and finite")
    return v
