"""The DC error budget: every static error source carried to the output through
the chain's own DC solution, as an initial error at 25 °C (before and after a
calibration) and as a drift over the temperature range, with worst-case and
RSS totals in output volts, LSB, % of full scale, referred to the input and in
sensor units.

How a source is carried.  Each error source (stages/dc_sources.py: op-amp
offset, bias and offset current, CMRR; follower gate leakage; sensor offset and
sensitivity; node leakage; every declared part and rail tolerance; the
temperature dependence of every stage's own model) is switched on alone in one
row of a batch of DC solutions (engine/dcpass.py), and its error is that row's
output level minus the row without it — superposition over the exact DC
solution, so a bias current meets the real DC source resistance at its input
(a 250 MΩ electrode, RF ‖ RG, a divider) and each op-amp's noise gain without a
formula per topology; small errors make it the linearised transfer of the
noise analysis at f = 0 (engine/noise.py carries noise the same way).  Each
source is solved at the zero point (the sensor at its ``dc``) and one signal
amplitude away: the difference is its gain error.  Within the signal range
±amplitude the error of a source is at most ``|offset| + |gain part|``.

Converter errors act at the output node directly: offset, INL (in LSB), gain
error and reference error in proportion to the reading ``V − fs_low``.

Calibration (``accuracy.calibration``): ``one_point`` removes every initial
offset at the zero point, ``two_point`` the initial offset and gain error; no
calibration removes drift (the parts move after the trim) or INL.

Totals: worst case is the linear sum of the magnitudes (every source at its
limit with the same sign); RSS is the root sum of squares, right for
independent sources (GUM, JCGM 100:2008, law of propagation of uncertainty,
from memory).  A normal part tolerance counts at 3σ in both.

The seam for common-mode and differential errors (issue 18) is
``_OpAmp.dc_errors`` (where the common-mode error of one input enters) and
:func:`contributor_rows` (where a differential source adds its rows); sensor
units go through :func:`in_sensor_units` alone.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..errors import SpecError, nearest
from ..spec.model import Chain
from ..spec.units import UnitError, parse_value
from ..spec.yamlsrc import LDict
from ..stages.dc_sources import T_REF_K
from .budget import nominal_params
from .dcpass import solve_dc

CALIBRATIONS = ("none", "one_point", "two_point")
ACCURACY_KEYS = ("temperature", "calibration", "sensitivity", "leakage")
#: a normal tolerance counts at this many sigma in the worst case and RSS (common practice)
NORMAL_SIGMAS = 3.0
#: output changes below this are the rounding of the DC solution, not an error
ROUNDING_V = 1e-12


@dataclass(frozen=True)
class Accuracy:
    """The spec's ``accuracy:`` section."""

    temp_k: tuple | None = None          # (low, high) drift range; None: corners.temperature or none
    calibration: str = "none"
    sensitivity: float | None = None     # signal units (V or A) per sensor unit
    sensor_unit: str | None = None       # e.g. 'pH'
    leakage: dict = field(default_factory=dict)   # node -> A into the node (a limit, sign unknown)


@dataclass(frozen=True)
class Source:
    """One error source: what the DC solution switches on (``errs``: stage -> {field: value},
    ``params``: (stage, key) -> value) or, for a converter error, a function of the reading."""

    name: str
    stage: str
    group: str                     # 'offset', 'bias current', 'gain', 'tolerance', 'leakage', 'temperature', ...
    errs: dict = field(default_factory=dict)
    params: dict = field(default_factory=dict)
    drift_only: bool = False       # a temperature coefficient: no error at 25 °C
    calibratable: bool = True      # INL is not
    temperature: str = "all"       # 'all': every stage at T; or a stage name: only that stage at T
    adc: tuple | None = None       # ('offset'|'gain'|'inl'|'offset_drift'|'ref_drift', value)


@dataclass
class Contributor:
    name: str
    stage: str
    group: str
    offset_v: float                # initial offset at the zero point, 25 °C
    gain_v: float                  # initial gain error at one amplitude from the zero point
    drift_offset_v: float          # largest change of the offset over the temperature range
    drift_gain_v: float
    calibratable: bool = True

    def initial_v(self, calibration: str) -> float:
        """Initial error left after the calibration, at the worse end of the signal range."""
        if not self.calibratable or calibration == "none":
            return abs(self.offset_v) + abs(self.gain_v)
        return 0.0 if calibration == "two_point" else abs(self.gain_v)

    @property
    def drift_v(self) -> float:
        return abs(self.drift_offset_v) + abs(self.drift_gain_v)

    def total_v(self, calibration: str) -> float:
        return self.initial_v(calibration) + self.drift_v


@dataclass
class DcErrorResult:
    chain: Chain
    output: str
    converter: str | None
    contributors: list
    calibration: str
    temp_range_k: tuple | None
    gain_dc: float                 # output V per signal unit (0 for an AC-coupled chain)
    amplitude: float               # the signal amplitude the gain error refers to
    full_scale_v: float            # ADC span (or the signal's span at the output without an ADC)
    lsb_v: float | None
    sensitivity: float | None
    sensor_unit: str | None
    signal_unit: str
    notes: list = field(default_factory=list)

    # -- totals ------------------------------------------------------------
    def parts(self, what: str) -> np.ndarray:
        """Per contributor: 'offset', 'gain', 'drift' or 'total' (after the calibration)."""
        cal = self.calibration
        if what == "offset":
            return np.array([0.0 if (c.calibratable and cal != "none") else abs(c.offset_v)
                             for c in self.contributors])
        if what == "gain":
            return np.array([0.0 if (c.calibratable and cal == "two_point") else abs(c.gain_v)
                             for c in self.contributors])
        if what == "drift":
            return np.array([c.drift_v for c in self.contributors])
        return np.array([c.total_v(cal) for c in self.contributors])

    def total(self, what: str, rule: str = "worst_case") -> float:
        """Worst case: linear sum of magnitudes; RSS: root sum of squares (module docstring)."""
        x = self.parts(what)
        return float(np.sum(x)) if rule == "worst_case" else float(np.sqrt(np.sum(x * x)))

    # -- units ---------------------------------------------------------------
    def in_unit(self, v_out: float, unit: str, what: str = "") -> float:
        """An output error in 'V', 'LSB', '%' (of full scale; a gain error in % of the gain),
        'input' (signal units) or the sensor unit."""
        if unit == "V":
            return v_out
        if unit == "LSB":
            return v_out / self.lsb_v if self.lsb_v else math.nan
        if unit == "%":
            if what == "gain":
                span = abs(self.gain_dc) * self.amplitude
                return v_out / span if span > 0 else math.nan
            return v_out / self.full_scale_v if self.full_scale_v > 0 else math.nan
        x = v_out / abs(self.gain_dc) if self.gain_dc else math.nan
        return x if unit == "input" else in_sensor_units(x, self.sensitivity)


def in_sensor_units(x_input, sensitivity):
    """An input-referred error (V or A) in sensor units: ÷ the declared sensitivity (V per pH,
    V per kPa, ...); the differential-chains issue refers its bridge errors through here too."""
    return x_input / abs(sensitivity) if sensitivity else math.nan


# -- the section ------------------------------------------------------------------

def parse_section(chain: Chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``accuracy:``; stores ``chain.extra['accuracy']``."""
    if not isinstance(node, LDict):
        raise SpecError("'accuracy' is a mapping: temperature, calibration, sensitivity, leakage", path, line,
                        "accuracy")
    err = lambda msg, key: SpecError(msg, path, node.line_of(key), f"accuracy.{key}")  # noqa: E731
    for key in node:
        if key not in ACCURACY_KEYS:
            raise err(f"unknown key '{key}'" + nearest(key, ACCURACY_KEYS), key)
    temp = None
    if "temperature" in node:
        temp = _temp_range(node["temperature"], lambda m: err(m, "temperature"))
    cal = node.get("calibration", "none")
    if cal not in CALIBRATIONS:
        raise err(f"'{cal}' is not a calibration" + nearest(str(cal), CALIBRATIONS) +
                  " (none; one_point removes the offset; two_point the offset and the gain error)", "calibration")
    sens = unit = None
    if "sensitivity" in node:
        if "__sensitivity__" in chain.source.raw:
            raise err("the sensitivity is declared on the source already; declare it once (on the source, "
                      "where it also refers the noise and the full scale to the measurand)", "sensitivity")
        sens, unit = _sensitivity(node["sensitivity"], chain.source.model.signal_unit,
                                  lambda m: err(m, "sensitivity"))
    leak = {}
    if "leakage" in node:
        raw = node["leakage"]
        if not isinstance(raw, LDict):
            raise err("'leakage' maps node names to leakage currents, e.g. 'electrode: 5 pA'", "leakage")
        for n, v in raw.items():
            if n not in chain.nodes:
                raise SpecError(f"'{n}' is not a node of this chain" + nearest(str(n), chain.nodes), path,
                                raw.line_of(n), f"accuracy.leakage.{n}")
            try:
                leak[n] = parse_value(v, "A")
            except UnitError as exc:
                raise SpecError(str(exc), path, raw.line_of(n), f"accuracy.leakage.{n}") from None
            if not (leak[n] >= 0 and math.isfinite(leak[n])):
                raise SpecError("a leakage current is a finite limit ≥ 0 (its sign is unknown)", path,
                                raw.line_of(n), f"accuracy.leakage.{n}")
    chain.extra["accuracy"] = Accuracy(temp, cal, sens, unit, leak)


def _temp_range(raw, err):
    """[LOW, HIGH] of the drift range, in kelvin."""
    if not isinstance(raw, list) or len(raw) != 2:
        raise err("temperature is the drift range [LOW, HIGH], e.g. [0 °C, 50 °C]")
    try:
        lo, hi = (parse_value(x, "K") for x in raw)
    except UnitError as exc:
        raise err(str(exc)) from None
    if not 0 < lo < hi or not math.isfinite(hi):
        raise err("the temperature range must run from a low to a higher temperature above 0 K")
    return lo, hi


def _sensitivity(raw, signal_unit, err):
    """'59.16 mV/pH' -> (0.05916, 'pH'): signal units (V, or A for a current sensor) per sensor unit."""
    if not isinstance(raw, str) or "/" not in raw:
        raise err(f"sensitivity is signal per sensor unit, e.g. '59.16 mV/pH' or '2 m{signal_unit}/kPa'")
    value, unit = raw.rsplit("/", 1)
    unit = unit.strip()
    if not unit or not unit.replace("%", "").replace("°", "").replace("_", "").isalnum():
        raise err(f"'{unit}' is not a sensor unit: write a word after the '/', e.g. 'pH', 'kPa', 'degC'")
    try:
        v = parse_value(value, signal_unit)
    except UnitError as exc:
        raise err(f"{exc} (sensitivity is signal per sensor unit, e.g. '59.16 mV/pH')") from None
    if not (v != 0 and math.isfinite(v)):
        raise err("the sensitivity must be finite and not zero")
    return v, unit


def accuracy_of(chain: Chain) -> Accuracy:
    """The ``accuracy:`` section; its sensor unit is the source's declared sensitivity (at the
    chain temperature, engine/measurand.py) unless the section declares its own."""
    acc = chain.extra.get("accuracy") or Accuracy()
    if acc.sensitivity is None:
        from .measurand import measurand
        m = measurand(chain)
        if m is not None:
            acc = Accuracy(acc.temp_k, acc.calibration, m.sensitivity, m.unit, acc.leakage)
    return acc


def temperature_range(chain: Chain):
    """The drift range: accuracy.temperature, else corners.temperature, else None."""
    acc = accuracy_of(chain)
    if acc.temp_k is not None:
        return acc.temp_k
    c = chain.extra.get("corners")
    return getattr(c, "temp_k", None)


# -- the sources -------------------------------------------------------------------

#: stage field -> (words, group, drift_only); the error fields of stages/dc_sources.py
FIELD_SOURCES = {
    "vos": ("input offset voltage", "offset", False),
    "vos_drift": ("offset voltage drift", "offset", True),
    "ib": ("input bias current", "bias current", False),
    "ios": ("input offset current", "bias current", False),
    "cmrr": ("common-mode error (CMRR)", "offset", False),
    "i_gate": ("gate leakage", "bias current", False),
    "offset": ("offset", "offset", False),
    "offset_drift": ("offset drift", "offset", True),
    "sensitivity_error": ("sensitivity tolerance", "gain", False),
}
ADC_SOURCES = {
    "offset": ("offset", False, True), "offset_drift": ("offset drift", True, True),
    "gain_error": ("gain error", False, True), "ref_tolerance": ("reference tolerance", False, True),
    "ref_drift": ("reference drift", True, True), "inl": ("INL", False, False),
}


def error_sources(chain: Chain) -> list:
    """Every error source of the chain, in chain order."""
    out = []
    for st in chain.all_stages:
        p = st.params
        if st.kind == "adc":
            for fld, (words, drift, cal) in ADC_SOURCES.items():
                if p.get(fld):
                    out.append(Source(f"{st.name}: {words}", st.name, "converter", drift_only=drift,
                                      calibratable=cal, adc=(fld, float(p[fld]))))
            continue
        for fld, (words, group, drift) in FIELD_SOURCES.items():
            if fld not in st.model.FIELDS or not p.get(fld):
                continue
            value = 10.0 ** (-p[fld] / 20.0) if fld == "cmrr" else float(p[fld])
            out.append(Source(f"{st.name}: {words}", st.name, group, errs={st.name: {fld: value}}, drift_only=drift))
    for node, i in accuracy_of(chain).leakage.items():
        if i:
            out.append(Source(f"{node}: leakage into the node", node, "leakage", params={(node, "_leak_a"): i}))
    for (stg, fld), tol in chain.extra.get("tolerances", {}).items():
        x0 = chain.stage(stg).params[fld]
        w = (abs(x0) * tol.rel if tol.rel is not None else tol.abs) * (NORMAL_SIGMAS if tol.dist == "normal" else 1)
        out.append(Source(f"{stg}: {fld} tolerance", stg, "tolerance", params={(stg, fld): x0 + w}))
    for rail, tol in chain.extra.get("rail_tolerances", {}).items():
        v0 = chain.rails[rail]
        w = (abs(v0) * tol.rel if tol.rel is not None else tol.abs) * (NORMAL_SIGMAS if tol.dist == "normal" else 1)
        moved = {(st.name, f): v0 + w for st in chain.all_stages for f, r in st.raw.get("__rails__", {}).items()
                 if r == rail}
        if moved:
            out.append(Source(f"rail {rail} tolerance", rail, "tolerance", params=moved))
    if temperature_range(chain) is not None:
        for st in chain.all_stages:
            if st.kind != "adc":
                out.append(Source(f"{st.name}: temperature dependence of its model", st.name, "temperature",
                                  drift_only=True, temperature=st.name))
    return out


# -- carrying them to the output -----------------------------------------------------

def analyse_dc_errors(chain: Chain, params: dict | None = None) -> DcErrorResult:
    """The DC error budget of the nominal chain (every source alone, module docstring)."""
    params = nominal_params(chain) if params is None else params
    out = chain.output_node()
    sources = error_sources(chain)
    chain_src = [s for s in sources if s.adc is None]
    t_range = temperature_range(chain)
    temps = [T_REF_K] + (list(t_range) if t_range is not None else [])
    amp = float(np.ravel(params[chain.source.name]["amplitude"])[0])
    # rows: for each temperature: the base and every chain source; each at dx = 0 and dx = amplitude
    n_src = len(chain_src) + 1
    rows = [(ti, si, dx) for ti in range(len(temps)) for si in range(n_src) for dx in (0.0, amp)]
    n = len(rows)
    t_row = np.array([temps[ti] for ti, _, _ in rows])
    p = {k: dict(v) for k, v in params.items()}
    p[chain.source.name]["_dx"] = np.array([dx for _, _, dx in rows])[:, None]
    for st in chain.all_stages:
        p[st.name]["temp_k"] = np.full((n, 1), T_REF_K)
    for k, src in enumerate(chain_src, start=1):
        on = np.array([si == k for _, si, _ in rows])[:, None]
        for stg, errs in src.errs.items():
            e = p[stg].setdefault("_err", {})
            for fld, v in errs.items():
                e[fld] = e.get(fld, 0.0) + np.where(on, v, 0.0)
        for (stg, key), v in src.params.items():
            p[stg][key] = np.where(on, v, p[stg].get(key, 0.0))
        if src.temperature != "all":               # a stage's own temperature dependence: that stage at T
            p[src.temperature]["temp_k"] = np.where(on, t_row[:, None], p[src.temperature]["temp_k"])
    everyone = np.array([si == 0 or chain_src[si - 1].temperature == "all" for _, si, _ in rows])[:, None]
    for st in chain.all_stages:                     # the base and every other source: the whole chain at T
        p[st.name]["temp_k"] = np.where(everyone, t_row[:, None], p[st.name]["temp_k"])
    with np.errstate(divide="ignore", invalid="ignore"):
        dc = solve_dc(chain, p)
    v = np.broadcast_to(np.ravel(dc.node_v[out]), (n,)).reshape(len(temps), n_src, 2)
    base = v[:, 0, :]                     # (T, 2)
    gain_dc = (base[0, 1] - base[0, 0]) / amp if amp > 0 else 0.0
    notes = []
    if not abs(gain_dc) > 1e-9 * max(1.0, abs(base[0, 0])):
        gain_dc = 0.0
        notes.append("no DC path from the sensor to the output (AC-coupled): the errors are the output's "
                     "DC offset only; nothing is referred to the input")
    conv = next((s for s in chain.readers(out) if s.kind == "adc"), None)
    if conv is not None:
        for k, src in enumerate(chain_src, start=1):
            v = _reference_moved(v, k, src, conv, params[conv.name])
    contributors = []
    for k, src in enumerate(chain_src, start=1):
        # the source's error at each temperature (for a model's own temperature dependence the
        # row differs from the base only in that stage's temperature, so this is its drift)
        delta = v[:, k, :] - base
        contributors.append(_contributor(src, delta[0], delta[1:] - delta[0]))
    fs = lsb = None
    if conv is not None:
        pa = params[conv.name]
        fs = float(abs(np.ravel(pa["fs_high"] - pa["fs_low"])[0]))
        lsb = fs / 2.0 ** float(pa["bits"])
        reading = base[0] - float(np.ravel(pa["fs_low"])[0])
        dt = max((abs(t - T_REF_K) for t in temps[1:]), default=0.0)
        for src in (s for s in sources if s.adc is not None):
            fld, x = src.adc
            if fld == "offset":
                c = (x, 0.0, 0.0, 0.0)
            elif fld == "offset_drift":
                c = (0.0, 0.0, x * dt, 0.0)
            elif fld == "inl":
                c = (x * lsb, 0.0, 0.0, 0.0)
            elif fld == "ref_drift":
                c = (0.0, 0.0, x * dt * reading[0], x * dt * (reading[1] - reading[0]))
            else:                                       # gain error, reference tolerance: ∝ the reading
                c = (x * reading[0], x * (reading[1] - reading[0]), 0.0, 0.0)
            contributors.append(Contributor(src.name, src.stage, src.group, *c, calibratable=src.calibratable))
    if fs is None:
        fs = 2.0 * abs(gain_dc) * amp
        notes.append("no converter reads the output: % of full scale refers to the signal's span at the output")
    contributors = [c for c in contributors
                    if max(abs(c.offset_v), abs(c.gain_v), abs(c.drift_offset_v), abs(c.drift_gain_v)) > 0]
    acc = accuracy_of(chain)
    if t_range is None:
        notes.append("no temperature range (accuracy.temperature or corners.temperature): no drift is counted")
    return DcErrorResult(chain, out, conv.name if conv else None, contributors, acc.calibration, t_range,
                         float(gain_dc), amp, float(fs), lsb, acc.sensitivity, acc.sensor_unit,
                         chain.source.model.signal_unit, notes)


def _reference_moved(v, k, src: Source, conv, pa):
    """A source that moves the converter's reference (a rail tolerance on fs_high or fs_low):
    the code of V is then read with the nominal span, so row ``k`` reads
    ``fs_low + (V − fs_low')·span/span'`` — a gain error in proportion to the reading,
    −δ·(V − fs_low) for a reference δ high (the ratiometric conversion,
    code = (V − fs_low)/(fs_high − fs_low)·2^N).  A rail that feeds both the chain and the
    reference moves both in the same row, so what they share cancels."""
    moved = {f: x for (stg, f), x in src.params.items() if stg == conv.name and f in ("fs_low", "fs_high")}
    if not moved:
        return v
    lo0, hi0 = float(np.ravel(pa["fs_low"])[0]), float(np.ravel(pa["fs_high"])[0])
    lo, hi = moved.get("fs_low", lo0), moved.get("fs_high", hi0)
    v = np.array(v)
    v[:, k, :] = lo0 + (v[:, k, :] - lo) * (hi0 - lo0) / (hi - lo)
    return v


def _contributor(src: Source, init, drift) -> Contributor:
    """Offset and gain parts of a source's error; drift: the larger change over the range ends."""
    d_off = drift[:, 0] if len(drift) else np.zeros(1)
    d_gain = (drift[:, 1] - drift[:, 0]) if len(drift) else np.zeros(1)
    k = int(np.argmax(np.abs(d_off) + np.abs(d_gain)))
    vals = [float(init[0]), float(init[1] - init[0]), float(d_off[k]), float(d_gain[k])]
    scale = max(abs(x) for x in vals)
    # rounding of the DC solution (about 1e-16 of the levels) is no error: cleared below 1e-12 V
    vals = [0.0 if abs(x) < max(ROUNDING_V, 1e-9 * scale) else x for x in vals]
    return Contributor(src.name, src.stage, src.group, *vals, src.calibratable)


def contributor_rows(r: DcErrorResult) -> list:
    """Contributors ranked by their total error after calibration, largest first."""
    return sorted(r.contributors, key=lambda c: -c.total_v(r.calibration))


def dc_error_json(r: DcErrorResult) -> dict:
    """JSON keys of a DC error budget (volts at the output; docs/json.md)."""
    tot = {f"{what}_v": {"worst_case": r.total(what), "rss": r.total(what, "rss")}
           for what in ("offset", "gain", "drift", "total")}
    return {"output": r.output, "converter": r.converter, "calibration": r.calibration,
            "temperature_range_k": list(r.temp_range_k) if r.temp_range_k else None,
            "gain_dc": r.gain_dc, "full_scale_v": r.full_scale_v, "lsb_v": r.lsb_v,
            "sensitivity": r.sensitivity, "sensor_unit": r.sensor_unit, "input_unit": r.signal_unit,
            "totals": tot,
            "contributors": [{"name": c.name, "stage": c.stage, "group": c.group, "offset_v": c.offset_v,
                              "gain_v": c.gain_v, "drift_offset_v": c.drift_offset_v, "drift_gain_v": c.drift_gain_v,
                              "calibratable": c.calibratable, "counted_v": c.total_v(r.calibration)}
                             for c in contributor_rows(r)],
            "notes": r.notes}


def declared(chain: Chain) -> bool:
    """True when the spec asks for a DC error budget: an ``accuracy:`` section, or an error
    limit on a stage (so chains without DC-error data keep their budget as it was)."""
    if "accuracy" in chain.extra:
        return True
    return any(s.group not in ("tolerance", "temperature") for s in error_sources(chain))


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: the DC error totals in the summary and ``dc_error`` in --json."""
    from ..spec.numbers import figure
    if not declared(b.chain):
        return
    r = analyse_dc_errors(b.chain)
    tot = r.total("total")
    text = figure(tot, "V")
    if r.sensor_unit and r.gain_dc:
        text += f" ({r.in_unit(tot, r.sensor_unit):.3g} {r.sensor_unit})"
    words = {"none": "no calibration", "one_point": "after one-point calibration",
             "two_point": "after two-point calibration"}[r.calibration]
    b.extra_summary.append((f"DC error at the output, worst case ({words})", text))
    top = contributor_rows(r)
    if top and top[0].total_v(r.calibration) > 0:
        b.extra_summary.append(("largest DC error contributor", top[0].name))
    b.extra_json["dc_error"] = dc_error_json(r)


def __getattr__(name):
    """``SCHEMAS``: the JSON Schema of the ``accuracy:`` section (built when asked for)."""
    if name != "SCHEMAS":
        raise AttributeError(name)
    from ..spec.schema import field_schema
    from ..stages.base import Field
    temp = field_schema(Field("K", "temperature"))
    amps = field_schema(Field("A", "leakage current into the node (a limit)", tolerable=False))
    return {"accuracy": {"type": "object", "additionalProperties": False, "properties": {
        "temperature": {"type": "array", "items": temp, "minItems": 2, "maxItems": 2,
                        "description": "drift range [LOW, HIGH] (default: corners.temperature)"},
        "calibration": {"enum": list(CALIBRATIONS), "description": "which initial errors a calibration removes"},
        "sensitivity": {"type": "string", "description": "signal per sensor unit, e.g. '59.16 mV/pH'"},
        "leakage": {"type": "object", "additionalProperties": amps,
                    "description": "board or capacitor leakage into nodes, e.g. 'electrode: 5 pA'"}},
        "description": "DC error budget options (docs/accuracy.md)"}}


# -- per unit (tolerance runs) ----------------------------------------------------------

#: params key prefix of an error source's per-unit draw (the signed value, studies/tolerances.py)
UNIT_KEY = "err:"
#: params key prefix of a rail field's value at nominal supply (set by a corner evaluation)
CAL_KEY = "cal:"
#: params key of the source stage marking a tolerance run (per-unit DC errors in the requirements)
UNITS_MARK = "_units"


def unit_sources(chain: Chain) -> list:
    """The error sources a tolerance run draws per unit: (stage or node, key, limit), the
    key being the stage's error field (``_err``), an ADC field, or ``_leak_a`` for a
    node's leakage; the limit is the data-sheet magnitude (a CMRR as the ratio 10^(−dB/20))."""
    out = []
    for st in chain.all_stages:
        p = st.params
        if st.kind == "adc":
            out += [(st.name, fld, float(p[fld])) for fld in ADC_SOURCES if p.get(fld)]
            continue
        for fld in FIELD_SOURCES:
            if fld in st.model.FIELDS and p.get(fld):
                out.append((st.name, fld, 10.0 ** (-p[fld] / 20.0) if fld == "cmrr" else float(p[fld])))
    out += [(node, "_leak_a", i) for node, i in accuracy_of(chain).leakage.items() if i]
    return out


def unit_errors(chain: Chain, params: dict, n: int) -> dict:
    """Each unit's own DC error, (n,) arrays in output volts: 'offset' (initial, at 25 °C and
    nominal supply, after the calibration), 'gain', 'drift' and 'total' (docs/accuracy.md,
    "Tolerance runs").  ``params``: the run's per-sample parameters before the part tempcos
    (a unit's drawn parts, its error sources' signed draws under UNIT_KEY, its operating
    condition: temperature and supply).

    A unit is solved (engine/dcpass.py, the whole chain at once) at the zero point and one
    amplitude away, at its calibration state (25 °C, nominal supply), at its own condition
    and at the ends of the temperature range at its own supply; its error at a state is its
    reading minus the ideal chain's (nominal parts, no error source, 25 °C).  A converter's
    errors act on the reading as in the budget, and a reference that moves (a rail's
    tolerance or the supply corner on fs_high/fs_low) rescales it: the code of V is read
    with the nominal span, ``fs_low + (V − fs_low')·span/span'``.  The calibration removes
    the unit's own offset (one point) and gain error (two points) at its calibration state;
    drift is the largest change from there to the other states (|offset part| + |gain part|),
    total the largest remaining error within ±amplitude, INL added to both totals uncorrected."""
    from ..stages.base import at_temperature
    acc = accuracy_of(chain)
    out = chain.output_node()
    src = chain.source.name
    amp = np.broadcast_to(np.ravel(params[src]["amplitude"]), (n,))
    t_range = temperature_range(chain)
    own_t = np.broadcast_to(np.ravel(params[src].get("temp_k", chain.temp_k)), (n,))
    temps = [np.full(n, T_REF_K), own_t] + [np.full(n, t) for t in (t_range or ())]
    k = len(temps)
    rows = 2 * k * n                                   # order: state, x (0 / amplitude), unit
    tile = lambda v: np.tile(np.broadcast_to(np.ravel(v), (n,)), 2 * k)[:, None]  # noqa: E731
    state = np.repeat(np.arange(k), 2 * n)
    t_rows = np.concatenate([np.tile(t, 2) for t in temps])[:, None]
    dx = np.tile(np.repeat([0.0, 1.0], n), k) * np.tile(amp, 2 * k)
    adc_draw, p = {}, {}
    for st in chain.all_stages:
        q = {key: (tile(v) if np.ndim(v) >= 1 else v) for key, v in params[st.name].items()
             if not key.startswith((UNIT_KEY, CAL_KEY))}
        errs = {}
        for key, v in params[st.name].items():
            if key.startswith(UNIT_KEY):
                fld = key[len(UNIT_KEY):]
                if st.kind == "adc":
                    adc_draw[fld] = np.broadcast_to(np.ravel(v), (n,))
                elif fld == "_leak_a":
                    q["_leak_a"] = tile(v)
                else:
                    errs[fld] = tile(v)
            elif key.startswith(CAL_KEY):           # the rail field at nominal supply, in the calibration state
                fld = key[len(CAL_KEY):]
                q[fld] = np.where((state == 0)[:, None], tile(v), q[fld] if np.ndim(q[fld]) else tile(q[fld]))
        if errs:
            q["_err"] = errs
        q["temp_k"] = t_rows
        p[st.name] = at_temperature(st.raw.get("__tempco__"), q)
    p[src]["_dx"] = dx[:, None]
    ideal = {st.name: at_temperature(st.raw.get("__tempco__"), {**st.params, "temp_k": T_REF_K,
                                                                 "t_nom_k": chain.t_nom_k})
             for st in chain.all_stages}
    amp0 = float(chain.source.params["amplitude"])
    ideal[src]["_dx"] = np.array([[0.0], [amp0]])
    with np.errstate(divide="ignore", invalid="ignore"):
        v = np.broadcast_to(np.ravel(solve_dc(chain, p).node_v[out]), (rows,)).reshape(k, 2, n)
        v_ideal = np.broadcast_to(np.ravel(solve_dc(chain, ideal).node_v[out]), (2,))
    inl = np.zeros(n)
    conv = next((s for s in chain.readers(out) if s.kind == "adc"), None)
    if conv is not None:
        pa = p[conv.name]
        per = lambda x: np.broadcast_to(np.ravel(x), (rows,)).reshape(k, 2, n)  # noqa: E731
        lo, span = per(pa["fs_low"]), per(pa["fs_high"] - pa["fs_low"])
        lo0 = float(conv.params["fs_low"])
        span0 = float(conv.params["fs_high"] - conv.params["fs_low"])
        dt = (t_rows[:, 0] - T_REF_K).reshape(k, 2, n)
        g = lambda fld: adc_draw.get(fld, np.zeros(n))  # noqa: E731
        scale = (1.0 + g("gain_error") + g("ref_tolerance") + g("ref_drift") * dt) * span0 / span
        v = lo0 + (v + g("offset") + g("offset_drift") * dt - lo) * scale
        inl = np.abs(g("inl")) * span0 / 2.0 ** float(conv.params["bits"])
    e = v - v_ideal[None, :, None]
    e0, eg = e[:, 0, :], e[:, 1, :] - e[:, 0, :]
    k0 = e0[0] if acc.calibration != "none" else 0.0
    kg = eg[0] if acc.calibration == "two_point" else 0.0
    drift = np.max(np.abs(e0[1:] - e0[0]) + np.abs(eg[1:] - eg[0]), axis=0)
    total = np.max(np.abs(e0[1:] - k0) + np.abs(eg[1:] - kg), axis=0) + inl
    return {"offset": np.abs(e0[0] - k0) + inl, "gain": np.abs(eg[0] - kg), "drift": drift, "total": total}


def unit_errors_of(ev, any_run: bool = False):
    """:func:`unit_errors` of an evaluation's samples, computed once per evaluation; None
    unless it is a tolerance run (``any_run``: the nominal design's own too, as one unit)."""
    p = ev.cache.get("params_in") or ev.params
    if not (p[ev.chain.source.name].get(UNITS_MARK) or any_run):
        return None
    if "unit_errors" not in ev.cache:
        ev.cache["unit_errors"] = unit_errors(ev.chain, p, ev.samples)
    return ev.cache["unit_errors"]
