"""Input-referred figures in the measurand's own units: the source's declared
``sensitivity`` (spec/sensitivity.py) divides every figure referred to the source
signal (V of EMF or A of current) — noise density and total, one LSB (the
resolution of the converter at the input), the largest input the output carries
(full scale), the signal amplitude, the DC error and its drift — so that a
hydrophone's noise reads in µPa/√Hz, a photodiode's in W/√Hz (its NEP: the
input-referred current noise over the responsivity, the definition of the
noise-equivalent power; Graeme, *Photodiode Amplifiers*, ch. 1, from memory), a
pH electrode's error in pH.

The sensitivity is taken at the chain's temperature, ``S(T) = S0·(1 + tc·(T − Tnom))``.
A dynamic range is a ratio and reads the same in any unit.

An optional ``ambient:`` section declares a floor spectrum the sensor sees anyway
(the sea's noise at a hydrophone, the background of a photodiode) as a table of
density against frequency; between the table's points the density is interpolated
straight on log–log axes (a spectrum level that falls N dB per decade is a power
law).  Each interval of the table, clipped to the noise band, is a band: its
margin is 20·log10(ambient rms / the chain's input-referred noise rms) over the
band — positive when the chain's own noise stays below the floor.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np

from ..errors import SpecError
from ..spec.model import Chain
from ..spec.units import UnitError, parse_value
from ..spec.yamlsrc import LDict, LList


@dataclass(frozen=True)
class Measurand:
    unit: str                 # as written: 'µPa', 'pH', 'kg', 'W'
    sensitivity: float        # signal (V or A) per unit at the chain temperature
    sensitivity_nom: float    # at t_nom
    text: str                 # the sensitivity as written
    signal_unit: str          # 'V' or 'A'
    temp_k: float

    def of(self, x_signal):
        """A figure referred to the source signal, in measurand units (÷ |S|)."""
        return np.asarray(x_signal, dtype=float) / abs(self.sensitivity)


def measurand(chain: Chain) -> Measurand | None:
    """The source's declared sensitivity at the chain temperature, or None."""
    src = chain.source
    sens = src.raw.get("__sensitivity__")
    if sens is None or "sensitivity" not in src.params:
        return None
    s0 = float(src.params["sensitivity"])
    s = sens.at(s0, chain.temp_k, chain.t_nom_k)
    return Measurand(sens.unit, float(s), s0, sens.text, src.model.signal_unit, chain.temp_k)


def show(x, unit: str, per_root_hz: bool = False) -> str:
    """A figure in a measurand unit for a screen: three significant figures, the unit as
    declared (no prefix is added: 'pH' would read as pico-H), e.g. '23.4 µPa/√Hz', '0.0123 pH'."""
    if x is None or not np.isfinite(x):
        return "—"
    x = float(x)
    u = unit + ("/√Hz" if per_root_hz else "")
    if x == 0:
        return f"0 {u}"
    a = abs(x)
    if 1e-3 <= a < 1e5:
        from ..spec.numbers import _sig
        text = _sig(a, 3) if a < 100 else f"{float(f'{a:.3g}'):.0f}"
    else:
        m, e = f"{a:.2e}".split("e")
        text = f"{m}e{int(e):+03d}"
    return ("\u2212" if x < 0 else "") + f"{text} {u}"


# -- the figures of a budget ----------------------------------------------------------

def figures(ev, noise_result, dc_result=None) -> dict:
    """Every input-referred figure of the nominal chain in measurand units (first sample);
    None for a figure the chain has no data for."""
    from .noise import _largest_sine, converter, density_at
    m = measurand(ev.chain)
    if m is None:
        return {}
    f = lambda x: float(np.ravel(x)[0])  # noqa: E731
    a = ev.chain.analysis
    gain_ref = f(np.abs(ev.gain()[:, 0]))
    dens, gain_k, _ = density_at(ev, [a.f_ref_hz])
    in_density = f(dens) / f(gain_k) if f(gain_k) > 0 else math.nan
    conv, span = converter(ev)
    lsb = None
    if conv is not None:
        lsb = f(span) / 2.0 ** float(ev.chain.stage(conv).params["bits"]) / gain_ref
    amp = f(ev.params[ev.chain.source.name]["amplitude"])
    out = {"unit": m.unit, "sensitivity": m.sensitivity, "sensitivity_nominal": m.sensitivity_nom,
           "sensitivity_text": m.text, "signal_unit": m.signal_unit, "temperature_k": m.temp_k,
           "level_form": " dB re " in " ".join(m.text.split()), "f_ref_hz": a.f_ref_hz,
           "signal_amplitude": f(m.of(amp)),
           "noise_in_density_at_f_ref": f(m.of(in_density)),
           "noise_in_rms": f(m.of(noise_result.in_vrms)),
           "full_scale": f(m.of(f(_largest_sine(ev)) / gain_ref)) if gain_ref > 0 else None,
           "resolution_lsb": f(m.of(lsb)) if lsb is not None else None,
           "dynamic_range_db": f(noise_result.dynamic_range_db),
           "dc_error_total": None, "dc_error_offset": None, "dc_error_drift": None}
    if dc_result is not None and dc_result.gain_dc:
        to_in = lambda v: f(m.of(v / abs(dc_result.gain_dc)))  # noqa: E731
        out.update(dc_error_total=to_in(dc_result.total("total")), dc_error_offset=to_in(dc_result.total("offset")),
                   dc_error_drift=to_in(dc_result.total("drift")))
    amb = ev.chain.extra.get("ambient")
    if amb is not None and noise_result.out_density is not None:
        out["ambient"] = ambient_margins(ev, noise_result, m, amb)
    for k, v in list(out.items()):
        if isinstance(v, float) and not math.isfinite(v):
            out[k] = None
    return out


def ambient_margins(ev, noise_result, m: Measurand, amb) -> list:
    """Per band of the ambient table inside the noise band: the ambient's rms, the chain's
    input-referred rms and the margin in dB (module docstring)."""
    from .noise import band_weights
    f = ev.span
    h = np.abs(ev.gain()[0, 1:])
    with np.errstate(divide="ignore", invalid="ignore"):
        in_psd = np.where(h > 0, (noise_result.out_density[0] / h) ** 2, np.inf) / m.sensitivity ** 2
    amb_psd = np.nan_to_num(ambient_density(amb, f) ** 2)      # outside the table: weight 0 anyway
    lo_b, hi_b = noise_result.band_hz
    rows = []
    for (f0, _), (f1, _) in zip(amb.points, amb.points[1:]):
        lo, hi = max(f0, lo_b), min(f1, hi_b)
        if not lo < hi:
            continue
        w = band_weights(f, lo, hi)
        p_in, p_amb = float(in_psd @ w), float(amb_psd @ w)
        margin = 10.0 * math.log10(p_amb / p_in) if p_in > 0 and p_amb > 0 else math.nan
        rows.append({"band_hz": [lo, hi], "ambient_rms": math.sqrt(p_amb), "noise_in_rms": math.sqrt(p_in),
                     "margin_db": margin if math.isfinite(margin) else None})
    return rows


def ambient_density(amb, f_hz) -> np.ndarray:
    """The declared floor at ``f_hz`` (unit/√Hz), straight between the points on log–log axes;
    outside the table: nan (no claim)."""
    fp = np.log([p[0] for p in amb.points])
    dp = np.log([p[1] for p in amb.points])
    lf = np.log(np.asarray(f_hz, dtype=float))
    out = np.exp(np.interp(lf, fp, dp))
    return np.where((lf >= fp[0]) & (lf <= fp[-1]), out, np.nan)


# -- the ambient: section ----------------------------------------------------------------

@dataclass(frozen=True)
class Ambient:
    points: tuple             # ((f_hz, density in unit/√Hz), ...) ascending in frequency
    what: str = ""


_LEVEL_RE = re.compile(r"^([+\-−]?\d[\d.]*(?:[eE][+\-]?\d+)?)\s*dB\s+re\s+1\s+(.+?)\s*(?:²|\^2)\s*/\s*Hz$")


def parse_section(chain: Chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``ambient:``: ``density:`` a list of ``[frequency, density]``
    (``180 µPa/√Hz`` or the spectrum level ``45 dB re 1 µPa²/Hz``) in the measurand unit of the
    source's sensitivity; ``what:`` a label."""
    m = measurand(chain)
    if not isinstance(node, LDict):
        raise SpecError("'ambient' is a mapping: density (a list of [frequency, density]) and what", path, line,
                        "ambient")
    for key in node:
        if key not in ("density", "what"):
            raise SpecError(f"unknown key '{key}' (ambient takes density and what)", path, node.line_of(key),
                            f"ambient.{key}")
    if m is None:
        raise SpecError("an ambient floor is in the measurand's unit: declare the source's 'sensitivity' "
                        "(e.g. '-190 dB re 1 V/µPa')", path, line, "ambient")
    raw = node.get("density")
    if not isinstance(raw, LList) or len(raw) < 2:
        raise SpecError(f"ambient.density is a list of at least two [frequency, density] pairs, e.g. "
                        f"[1 kHz, 180 {m.unit}/√Hz]", path, node.line_of("density") if "density" in node else line,
                        "ambient.density")
    pts = []
    for i, item in enumerate(raw):
        where, ln = f"ambient.density[{i}]", raw.line_of(i)
        if not isinstance(item, list) or len(item) != 2:
            raise SpecError(f"each point is [frequency, density], e.g. [1 kHz, 180 {m.unit}/√Hz]", path, ln, where)
        try:
            fz = parse_value(item[0], "Hz")
        except UnitError as exc:
            raise SpecError(str(exc), path, ln, where) from None
        d = _density(item[1], m.unit, lambda msg: SpecError(msg, path, ln, where))
        if not (fz > 0 and math.isfinite(fz)):
            raise SpecError("the frequency must be positive and finite", path, ln, where)
        if pts and not fz > pts[-1][0]:
            raise SpecError("the frequencies must rise from point to point", path, ln, where)
        pts.append((fz, d))
    what = node.get("what", "")
    chain.extra["ambient"] = Ambient(tuple(pts), str(what).strip())


def _density(raw, unit: str, err) -> float:
    """'180 µPa/√Hz' (the measurand unit as declared) or '45 dB re 1 µPa²/Hz' -> unit/√Hz."""
    text = " ".join(str(raw).split())
    lv = _LEVEL_RE.match(text)
    if lv:
        if lv.group(2) != unit:
            raise err(f"'{text}' is re 1 {lv.group(2)}²/Hz; the sensitivity's unit is '{unit}' (write re 1 {unit}²/Hz)")
        return 10.0 ** (float(lv.group(1).replace("−", "-")) / 20.0)
    for tail in ("/√Hz", "/rtHz", "/sqrt(Hz)"):
        if text.endswith(unit + tail):
            num = text[:-len(unit + tail)].strip()
            try:
                v = float(num.replace("−", "-"))
            except ValueError:
                break
            if not (v > 0 and math.isfinite(v)):
                raise err("a density must be positive and finite")
            return v
    raise err(f"'{text}' is not a density in the measurand's unit: write e.g. '180 {unit}/√Hz' or "
              f"'45 dB re 1 {unit}²/Hz' (the unit as the sensitivity declares it, no other prefix)")


SCHEMAS = {"ambient": {"type": "object", "additionalProperties": False, "properties": {
    "density": {"type": "array", "minItems": 2, "items": {"type": "array", "minItems": 2, "maxItems": 2},
                "description": "[frequency, density] points in the measurand unit, e.g. [1 kHz, 180 µPa/√Hz] "
                               "or [1 kHz, 45 dB re 1 µPa²/Hz]"},
    "what": {"type": "string", "description": "what the floor is (shown with the margins)"}},
    "description": "a floor spectrum the sensor sees anyway, to compare the input-referred noise against "
                   "(docs/models.md, 'Sensitivity and sensor units')"}}


# -- budget hook ------------------------------------------------------------------------

def level(x, unit: str, density: bool = False) -> str:
    """'(72.9 dB re 1 µPa)' or, for a density, '(29.5 dB re 1 µPa²/Hz)': the trade's level of a
    figure in a unit whose sensitivity was given as a level (20·log10 of the ratio)."""
    if x is None or not x > 0:
        return ""
    return f" ({20 * math.log10(x):.1f} dB re 1 {unit}" + ("²/Hz)" if density else ")")


def summary_rows(fig: dict) -> list:
    """Summary rows of :func:`figures` (the DC error in sensor units is dcerror's own row)."""
    from ..spec.numbers import figure
    from ..spec.units import fmt
    u = fig["unit"]
    lv = fig.get("level_form", False)
    tag = lambda x, d=False: level(x, u, d) if lv else ""  # noqa: E731
    rows = [("sensitivity", f"{fig['sensitivity_text']}: {fmt(abs(fig['sensitivity']), fig['signal_unit'] + '/' + u)}"
                            f" at {figure(fig['temperature_k'], 'K')}"),
            ("signal amplitude at the sensor", show(fig["signal_amplitude"], u) + tag(fig["signal_amplitude"])),
            ("noise referred to the sensor (rms)", show(fig["noise_in_rms"], u) + tag(fig["noise_in_rms"])),
            (f"noise density at the sensor at {figure(fig['f_ref_hz'], 'Hz')}",
             show(fig["noise_in_density_at_f_ref"], u, True) + tag(fig["noise_in_density_at_f_ref"], True)),
            ("full scale at the sensor (peak)", show(fig["full_scale"], u) + tag(fig["full_scale"]))]
    if fig["resolution_lsb"] is not None:
        rows.append(("one LSB at the sensor", show(fig["resolution_lsb"], u)))
    for b in fig.get("ambient", []):
        lo, hi = b["band_hz"]
        rows.append((f"noise below the ambient, {figure(lo, 'Hz')} to {figure(hi, 'Hz')}",
                     "—" if b["margin_db"] is None else
                     f"{figure(b['margin_db'], 'dB', signed=True, decimals=1)} (ambient {show(b['ambient_rms'], u)}, "
                     f"chain {show(b['noise_in_rms'], u)} rms)"))
    return rows


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: the figures in sensor units in the summary and ``measurand`` in JSON."""
    if measurand(b.chain) is None:
        return
    from . import dcerror
    from .noise import analyse_noise
    r = analyse_noise(b.ev)
    dc = dcerror.analyse_dc_errors(b.chain) if dcerror.declared(b.chain) else None
    fig = figures(b.ev, r, dc)
    b.extra_summary.extend(summary_rows(fig))
    b.extra_json["measurand"] = fig
