"""Requirements a chain must meet: the spec's ``requirements:`` block, parsed
strictly, and evaluated per sample on an :class:`~chainplan.engine.budget.Evaluation`.

Spec form — a list; each item has exactly one limit key plus its options::

    requirements:
      - min_gain: 30 dB            # end-to-end gain at f_ref (or at: 2 kHz)
      - flatness: 1 dB             # peak-to-peak gain variation over a band
        band: [50 Hz, 5 kHz]
      - min_headroom: 200 mV       # every node, or nodes: [gain, antialias]
      - max_loading_loss: 1 dB     # every interface, or interfaces: [lead]
        name: no loading           # optional; names are what CI and diffs show

Every result is vectorised over samples: ``value``, ``margin`` (positive =
met, in the requirement's unit) and ``passed`` are ``(S,)`` arrays, so the
same code checks the nominal chain (one sample) and a Monte Carlo batch.  A
sample whose operating point is impossible (``Evaluation.valid``) fails every
requirement.
"""
from __future__ import annotations

import dataclasses
import functools
import importlib.util
import math
from dataclasses import dataclass

import numpy as np

from ..errors import SpecError, nearest
from ..spec.numbers import figure, ratio_unit
from ..spec.units import UnitError, fmt, parse_value
from ..spec.yamlsrc import LDict, LList


@dataclass(frozen=True)
class Kind:
    key: str            # the spec key, e.g. 'min_gain'
    kind: str           # the kind id with its unit, e.g. 'min_gain_db'
    unit: str           # unit id for chainplan.spec.units
    symbol: str         # unit shown in tables ('bits' for ENOB)
    sense: str          # 'min' (value ≥ limit) or 'max' (value ≤ limit)
    options: tuple      # extra keys the item may carry
    what: str           # one line for docs and messages


KINDS: dict[str, Kind] = {k.key: k for k in (
    Kind("min_gain", "min_gain_db", "dB", "dB", "min", ("at",), "end-to-end gain at f_ref (or at:)"),
    Kind("max_gain", "max_gain_db", "dB", "dB", "max", ("at",), "end-to-end gain at f_ref (or at:)"),
    Kind("flatness", "flatness_db", "dB", "dB", "max", ("band",), "peak-to-peak gain variation over band:"),
    Kind("min_f_high", "min_f_high_hz", "Hz", "Hz", "min", (), "upper −3 dB band edge"),
    Kind("max_f_low", "max_f_low_hz", "Hz", "Hz", "max", (), "lower −3 dB band edge"),
    Kind("min_headroom", "min_headroom_v", "V", "V", "min", ("nodes",), "headroom at every node (or nodes:)"),
    Kind("max_loading_loss", "max_loading_loss_db", "dB", "dB", "max", ("interfaces", "at"),
         "loading loss (dB lost) at every interface (or interfaces:), at f_ref (or at:)"),
    Kind("min_snr", "min_snr_db", "dB", "dB", "min", (), "SNR of the spec's signal at the converter"),
    Kind("min_enob", "min_enob_bits", "1", "bits", "min", (), "effective number of bits at the converter"),
    Kind("max_buffer_power", "max_buffer_power_w", "W", "W", "max", ("stages",),
         "total power of the follower stages (or stages:)"),
    Kind("min_phase_margin", "min_phase_margin_deg", "deg", "°", "min", ("stages",),
         "phase margin of every op-amp loop as connected (or stages:)"),
    Kind("max_peaking", "max_peaking_db", "dB", "dB", "max", ("stages",),
         "closed-loop peaking of every op-amp loop and follower (or stages:)"),
    Kind("min_slew_margin", "min_slew_margin_db", "dB", "dB", "min", ("stages",),
         "slew limit over the signal's steepest slope, at every op-amp with slew_rate and class-A follower"),
    Kind("min_settled_bits", "min_settled_bits_bits", "1", "bits", "min", (),
         "bits a sampling converter's kickback settles to in its acquisition time"),
    Kind("max_settling_time", "max_settling_time_s", "s", "s", "max", ("error",),
         "step response of the chain settled within error: (default 1 %)"),
    Kind("max_startup_time", "max_startup_time_s", "s", "s", "max", (),
         "start-up / overload recovery: 5 × the slowest bias or coupling time constant"),
    Kind("min_alias_rejection", "min_alias_rejection_db", "dB", "dB", "min", (),
         "gain drop from f_ref to the first frequency the ADC folds into the band"),
    Kind("max_rail_current", "max_rail_current_a", "A", "A", "max", ("rails",),
         "current drawn from each rail (or rails:), engine/power.py"),
    Kind("min_cmrr", "min_cmrr_db", "dB", "dB", "min", (),
         "common-mode rejection as connected at every differential interface, engine/commonmode.py"),
    Kind("max_common_mode_error", "max_common_mode_error_v", "V", "V", "max", (),
         "output error of the common mode at every differential interface, engine/commonmode.py"),
    # DC accuracy (engine/dcerror.py): limits in V, LSB, % (of full scale; of the gain for
    # max_gain_error) or the sensor unit of accuracy.sensitivity; 'rule: rss' for the RSS total
    Kind("max_offset_error", "max_offset_error", "error", "", "max", ("rule",),
         "initial offset error at 25 °C after the calibration (V, LSB, %FS or sensor units)"),
    Kind("max_gain_error", "max_gain_error", "error", "", "max", ("rule",),
         "initial gain error after the calibration (% of the gain, or V, LSB, sensor units at the signal's peak)"),
    Kind("max_drift", "max_drift", "error", "", "max", ("rule",),
         "DC error drift over the temperature range (V, LSB, %FS or sensor units)"),
    Kind("max_total_error", "max_total_error", "error", "", "max", ("rule",),
         "total DC error: initial after the calibration plus drift (V, LSB, %FS or sensor units)"),
)}
ERROR_KINDS = {"max_offset_error": "offset", "max_gain_error": "gain", "max_drift": "drift",
               "max_total_error": "total"}
NOISE_KINDS = ("min_snr", "min_enob")
COMMON_MODE_KINDS = ("min_cmrr", "max_common_mode_error")     # need a differential interface
GAIN_KINDS = ("min_gain", "max_gain")     # in dBΩ on a transimpedance chain
DYNAMICS_KINDS = ("min_phase_margin", "max_peaking", "min_slew_margin", "min_settled_bits", "max_settling_time",
                  "max_startup_time")


@dataclass(frozen=True)
class Requirement:
    name: str
    key: str                           # spec key ('min_gain', ...)
    kind: str                          # kind id ('min_gain_db', ...)
    limit: float                       # SI (dB, Hz, V, bits, W)
    unit: str                          # display symbol
    sense: str                         # 'min' or 'max'
    text: str                          # the limit as written
    at_hz: float | None = None
    band_hz: tuple | None = None
    targets: tuple | None = None       # nodes / interfaces (reading stage) / stages; None = all
    line: int | None = None
    rule: str | None = None            # DC error totals: 'worst_case' (default) or 'rss'
    error: float | None = None         # max_settling_time: the relative settling error

    def describe(self, full: bool = True) -> str:
        """The requirement in words, e.g. '≥ 30.00 dB at 1.00 kHz' (``full=False``: '≥ 30.00 dB')."""
        op = "≥" if self.sense == "min" else "≤"
        s = f"{op} {show(self.limit, self.unit)}"
        if not full:
            return s
        if self.at_hz is not None:
            s += f" at {fmt(self.at_hz, 'Hz')}"
        if self.band_hz is not None:
            s += f" over {fmt(self.band_hz[0], 'Hz')} to {fmt(self.band_hz[1], 'Hz')}"
        return s


@dataclass
class ReqResult:
    name: str
    kind: str
    value: np.ndarray      # (S,)
    limit: float
    margin: np.ndarray     # (S,), positive = met
    passed: np.ndarray     # (S,) bool
    unit: str
    sense: str
    requirement: Requirement
    where: tuple | None = None     # aggregates: (target names, (S,) index of the one that sets the value)
    note: str | None = None        # what the requirement left out, and why (e.g. virtual-ground inputs)


def show(x, unit: str) -> str:
    """A requirement value in its unit: dB with two decimals, bits with two, others in engineering
    notation; LSB and sensor units (DC error limits) with three significant figures."""
    if unit not in ("V", "%", "dB", "dBΩ", "bits", "Hz", "W", "A") and unit and x is not None and math.isfinite(x):
        return f"{x:.3g} {unit}".replace("-", "−")
    return figure(x, unit, signed=False)


def show_margin(x, unit: str) -> str:
    """A margin, signed (positive = met): '+0.17 dB', '−94.7 mV' (of two dBΩ figures: dB)."""
    return figure(x, ratio_unit(unit), signed=True)


# -- parsing -------------------------------------------------------------------

def parse_section(chain, node, line, path) -> None:
    """SECTION_PARSERS entry for ``requirements:``; stores ``chain.extra['requirements']``."""
    if not isinstance(node, LList):
        raise SpecError("'requirements' is a list, e.g. '- min_gain: 20 dB'", path, line, "requirements")
    reqs, seen = [], {}
    for i, item in enumerate(node):
        where = f"requirements[{i}]"
        if not isinstance(item, LDict):
            raise SpecError("each requirement is a mapping with one limit, e.g. 'min_headroom: 100 mV' (valid: "
                            + ", ".join(KINDS) + ")", path, node.line_of(i), where)
        r = _parse_item(chain, item, path, where)
        if r.name in seen:
            raise SpecError(f"two requirements are called '{r.name}' (the other on line {seen[r.name]}); "
                            "give one a different 'name:'", path, item.line, where)
        seen[r.name] = item.line
        reqs.append(r)
    chain.extra["requirements"] = reqs


def _parse_item(chain, item: LDict, path, where) -> Requirement:
    keys = [k for k in item if k in KINDS]
    if len(keys) != 1:
        raise SpecError("a requirement has exactly one limit key" + (f" (got {', '.join(keys)})" if keys else
                        " (valid: " + ", ".join(KINDS) + ")"), path, item.line, where)
    k = KINDS[keys[0]]
    allowed = {k.key, "name", *k.options}
    for key in item:
        if key not in allowed:
            hint = nearest(key, allowed)
            if key in ("at", "band", "nodes", "interfaces", "stages", "error", "rails", "rule"):
                hint = f" ('{key}' does not apply to {k.key}; it takes: {', '.join(sorted(allowed - {k.key}))})"
            raise SpecError(f"unknown key '{key}'" + hint, path, item.line_of(key), f"{where}.{key}")
    err = lambda msg, key: SpecError(msg, path, item.line_of(key), f"{where}.{key}")  # noqa: E731
    raw = item[k.key]
    symbol = k.symbol
    try:
        if k.unit == "error":
            limit, symbol = _error_limit(raw, chain)
        elif k.key in GAIN_KINDS:
            limit, symbol = _gain_limit(raw, chain)
        else:
            limit = parse_value(raw, k.unit)
    except UnitError as exc:
        raise err(str(exc), k.key) from None
    if not math.isfinite(limit):
        raise err("a limit must be finite", k.key)
    if k.key == "max_loading_loss":
        limit = abs(limit)                      # '1 dB' and '−1 dB' both mean: lose at most 1 dB
    if k.key in ("flatness", "min_f_high", "max_f_low", "max_buffer_power", "min_enob") and limit < 0:
        raise err(f"{k.key} cannot be negative", k.key)
    if k.key in ("min_f_high", "max_f_low") and limit == 0:
        raise err("a band edge limit must be above 0 Hz", k.key)
    if k.key in NOISE_KINDS and importlib.util.find_spec("chainplan.engine.noise") is None:
        raise err(f"{k.key} needs the noise analysis, which this version of chainplan does not have", k.key)
    if k.key == "min_alias_rejection":
        from ..engine.aliasing import sampling_adc
        if sampling_adc(chain) is None:
            raise err("min_alias_rejection needs an ADC with 'f_sample' reading the output node", k.key)
    if k.key in ("min_cmrr", "max_common_mode_error"):
        if not any(getattr(st.model, "reads_differential", False) for st in chain.stages):
            raise err(f"{k.key} needs a differential interface (a bridge read by a difference_amplifier)", k.key)
        if k.key == "max_common_mode_error" and limit < 0:
            raise err(f"{k.key} cannot be negative", k.key)
    at = _freq(item, "at", err) if "at" in item else None
    band = None
    if k.key == "flatness":
        if "band" not in item:
            raise err("flatness needs 'band: [LOW, HIGH]', e.g. band: [50 Hz, 5 kHz]", k.key)
        band = _band(item, err)
    targets = None
    for key, names, what in (("nodes", chain.nodes, "node"),
                             ("interfaces", [s.name for s in chain.stages], "interface (name the stage that reads it)"),
                             ("stages", [s.name for s in chain.stages], "stage"),
                             ("rails", list(chain.rails), "rail")):
        if key in item:
            targets = _names(item, key, names, what, err)
    if k.key == "max_loading_loss":
        from ..engine.budget import virtual_grounds
        vg = virtual_grounds(chain)
        for t in targets or ():
            if t in vg:
                mode, amp = vg[t]
                where = "holds its input at" if amp == t else f"feeds '{amp}', which holds its input at"
                raise err(f"'{t}' {where} a virtual ground ({mode}-mode input): that interface has a {mode} "
                          "transfer, not a loading loss (valid: "
                          + ", ".join(s.name for s in chain.stages if s.name not in vg) + ")", "interfaces")
    error = None
    if "error" in item:
        try:
            error = parse_value(item["error"], "%")
        except UnitError as exc:
            raise err(str(exc), "error") from None
        if not 0 < error < 1:
            raise err("error is a fraction of the final value between 0 and 100 %, e.g. 1 %", "error")
    _check_dynamics(chain, k.key, targets, err)
    if k.key == "max_buffer_power" and targets is not None:
        for t in targets:
            if chain.stage(t).role != "two_port":
                raise err(f"'{t}' draws no supply power (kind {chain.stage(t).kind})", "stages")
    rule = None
    if "rule" in item:
        rule = item["rule"]
        if rule not in ("worst_case", "rss"):
            raise err(f"'{rule}' is not a rule" + nearest(str(rule), ("worst_case", "rss")) +
                      " (worst_case: the linear sum; rss: the root sum of squares)", "rule")
    if k.unit == "error" and limit < 0:
        raise err(f"{k.key} cannot be negative", k.key)
    name = item.get("name")
    if name is not None and (not isinstance(name, str) or not name.strip()):
        raise err("'name' must be text", "name")
    name = name.strip() if name else _default_name(k.key, at, band, targets)
    return Requirement(name, k.key, k.kind, limit, symbol, k.sense, str(raw).strip(), at, band, targets,
                       item.line, rule, error)


def _gain_limit(raw, chain):
    """A gain limit in dB, or in dBΩ (also 'dBohm') on a chain whose gain is a transimpedance
    (a current sensor's output over its current, V/A re 1 Ω) -> (value, the unit shown)."""
    unit = chain.gain_db_unit
    text = str(raw).strip()
    for sym in ("dBΩ", "dBohm", "dBOhm"):
        if text.endswith(sym):
            if unit != "dBΩ":
                raise UnitError(f"'{text}' is in dBΩ, a transimpedance, but this chain's gain is a voltage ratio "
                                "(its source is a voltage): write the limit in dB")
            return parse_value(text[:-len(sym)].strip() + " dB", "dB"), unit
    return parse_value(raw, "dB"), unit


def _error_limit(raw, chain):
    """A DC error limit: '2 mV', '4 LSB', '0.1 %' or '0.05 pH' (the sensor unit of
    accuracy.sensitivity) -> (value in that unit, the unit's symbol); % is a fraction."""
    text = str(raw).strip()
    from ..engine.dcerror import accuracy_of
    unit = accuracy_of(chain).sensor_unit
    for sym in ("LSB", unit):
        if sym and text.endswith(sym) and text[:-len(sym)].strip():
            number = text[:-len(sym)].strip()
            if sym == "LSB" and not any(st.kind == "adc" for st in chain.stages):
                raise UnitError(f"'{text}': LSB needs an ADC reading the output")
            return parse_value(number, "1"), sym
    if text.endswith("%"):
        return parse_value(text, "%"), "%"
    try:
        return parse_value(text, "V"), "V"
    except UnitError:
        words = "V, LSB, % or " + (f"'{unit}' (the sensitivity's unit)" if unit else
                                  "a sensor unit once the source's sensitivity declares one")
        raise UnitError(f"'{text}' is not a DC error limit: give it in {words}, e.g. '2 mV', '4 LSB', "
                        "'0.1 %'") from None


def _check_dynamics(chain, key, targets, err) -> None:
    """A dynamics requirement needs something to judge: op-amp loops, followers, a slew
    limit, a sampling converter."""
    from ..engine.loop import FOLLOWER_KINDS, is_loop_stage
    if key == "min_phase_margin":
        ok = [s.name for s in chain.stages if is_loop_stage(s)]
        what = "an op-amp stage"
    elif key == "max_peaking":
        ok = [s.name for s in chain.stages if is_loop_stage(s) or s.kind in FOLLOWER_KINDS]
        what = "an op-amp stage or a follower"
    elif key == "min_slew_margin":
        ok = [s.name for s in chain.stages if s.kind in FOLLOWER_KINDS or
              math.isfinite(float(np.max(s.params.get("slew_rate", math.inf))))]
        what = "an op-amp with slew_rate or a follower"
    elif key == "min_settled_bits":
        from ..engine.sampling import sampling_adc
        if sampling_adc(chain) is None:
            raise err("min_settled_bits needs an ADC with c_sample (and t_acq, or t_conv and f_sample) "
                      "reading the output node", key)
        return
    else:
        return
    if not ok:
        raise err(f"{key} needs {what} in the chain", key)
    for t in targets or ():
        if t not in ok:
            raise err(f"'{t}' is not {what} (valid: {', '.join(ok)})", "stages")


def _default_name(key, at, band, targets) -> str:
    """Stable names without the limit, so a changed limit still matches across diffs."""
    name = key
    if targets:
        name += " " + ",".join(targets)
    if at is not None:
        name += f" at {fmt(at, 'Hz')}"
    if band is not None:
        name += f" {fmt(band[0], 'Hz')} to {fmt(band[1], 'Hz')}"
    return name


def _freq(item, key, err, raw=None):
    try:
        v = parse_value(item[key] if raw is None else raw, "Hz")
    except UnitError as exc:
        raise err(str(exc), key) from None
    if not (v > 0 and math.isfinite(v)):
        raise err("a frequency must be positive and finite", key)
    return v


def _band(item, err):
    raw = item["band"]
    if not isinstance(raw, list) or len(raw) != 2:
        raise err("band is a list of two frequencies, e.g. [50 Hz, 5 kHz]", "band")
    lo, hi = (_freq(item, "band", err, r) for r in raw)
    if not lo < hi:
        raise err("the band's low end must be below its high end", "band")
    return lo, hi


def _names(item, key, valid, what, err):
    raw = item[key]
    raw = [raw] if isinstance(raw, str) else raw
    if not isinstance(raw, list) or not raw:
        raise err(f"'{key}' is a list of names, e.g. [{valid[-1]}]", key)
    for n in raw:
        if n not in valid:
            raise err(f"'{n}' is not a {what} of this chain" + nearest(str(n), valid), key)
    return tuple(raw)


# -- evaluation ----------------------------------------------------------------

def per_sample(x, n: int) -> np.ndarray:
    """A figure as one value per sample, (n,): a scalar or a (1,) array is broadcast."""
    return np.broadcast_to(np.ravel(np.asarray(x, dtype=float)), (n,))


class _Views:
    """The evaluation plus, on demand, exact gains at frequencies off the grid
    (one extra AC pass reusing the operating points) and the noise analysis."""

    def __init__(self, ev, reqs):
        from ..engine.cascade import run_ac
        self.ev, self.n = ev, ev.samples
        extra = sorted({f for r in reqs for f in (r.at_hz, *(r.band_hz or ())) if f is not None}
                       - {ev.f_hz[0]})
        self.col = {float(ev.f_hz[0]): (ev, 0)}
        if extra:
            f = np.asarray(extra)
            ev_x = dataclasses.replace(ev, f_hz=f, ac=run_ac(ev.chain, ev.params, ev.dc.ops, f))
            self.col.update({float(x): (ev_x, i) for i, x in enumerate(extra)})

    def at(self, f_hz):
        return self.col[float(self.ev.f_hz[0] if f_hz is None else f_hz)]

    @functools.cached_property
    def edges(self):
        return self.ev.band_edges()

    @functools.cached_property
    def dc_errors(self):
        from ..engine.dcerror import analyse_dc_errors
        return analyse_dc_errors(self.ev.chain)

    @functools.cached_property
    def unit_errors(self):
        """Each unit's DC error (engine/dcerror.py unit_errors) in a tolerance run, else None."""
        from ..engine.dcerror import unit_errors_of
        return unit_errors_of(self.ev)

    @functools.cached_property
    def loops(self):
        from ..engine.loop import analyse_loops
        return {r.stage: r for r in analyse_loops(self.ev)}

    @functools.cached_property
    def noise(self):
        from ..engine.noise import noise_powers
        return noise_powers(self.ev)       # SNR and ENOB need the integrated powers only


def _gain_db(v: _Views, r):
    ev, j = v.at(r.at_hz)
    return 20 * np.log10(np.abs(ev.gain()[:, j])), None


def _flatness(v: _Views, r):
    ev = v.ev
    lo, hi = r.band_hz
    inside = (ev.span >= lo) & (ev.span <= hi)
    mags = [np.abs(ev.gain()[:, 1:][:, inside])]
    for f in (lo, hi):
        e, j = v.at(f)
        mags.append(np.abs(e.gain()[:, j:j + 1]))
    n = max(m.shape[0] for m in mags)
    db = 20 * np.log10(np.concatenate([np.broadcast_to(m, (n, m.shape[1])) for m in mags], axis=1))
    return db.max(axis=1) - db.min(axis=1), None


def _f_high(v: _Views, r):
    """No edge in the span: all that is shown is that the edge lies above f_stop, so
    f_stop stands in for it (a limit beyond the span fails until the span is widened)."""
    f = v.edges[1]
    return np.where(np.isnan(f), v.ev.span[-1], f), None


def _f_low(v: _Views, r):
    """No edge in the span: the edge lies below f_start, which stands in for it."""
    f = v.edges[0]
    return np.where(np.isnan(f), v.ev.span[0], f), None


def _headroom(v: _Views, r):
    names = list(r.targets or v.ev.chain.nodes)
    rows = np.stack([per_sample(v.ev.headroom(n), v.n) for n in names])
    return _worst(rows, names, np.argmin)


def _loading(v: _Views, r):
    """The worst loading loss over the interfaces; virtual-ground inputs (a transimpedance or
    charge amplifier's, ``StageKind.input_mode``) have none and are left out (``_loading_note``)."""
    ev, j = v.at(r.at_hz)
    names = list(r.targets or ev.loading_interfaces())
    if not names:
        return np.zeros(v.n), None
    rows = np.stack([per_sample(ev.interface_loss_db(n, j), v.n) for n in names])
    return _worst(rows, [f"{ev.chain.stage(n).parent} → {n}" for n in names], np.argmax)


def _loading_note(v: _Views, r) -> str | None:
    """Which interfaces ``max_loading_loss`` left out: the virtual-ground inputs."""
    if r.targets:
        return None
    vg = v.ev.virtual_grounds
    skipped = [f"{st.parent} → {st.name} ({vg[st.name][0]}-mode input)" for st in v.ev.chain.stages if st.name in vg]
    if not skipped:
        return None
    return ("left out: " + ", ".join(skipped) + ", a virtual ground: a current or charge transfer, "
            "not a loading loss")


def _worst(rows, names, pick):
    """The extreme over the targets (rows) per sample, and which target sets it;
    a NaN row (a sample whose DC level failed) is skipped unless all are NaN."""
    filled = np.where(np.isnan(rows), np.inf if pick is np.argmin else -np.inf, rows)
    idx = pick(filled, axis=0)
    return rows[idx, np.arange(rows.shape[1])], (names, idx)


def _snr(v: _Views, r):
    return v.noise.snr_db, None


def _enob(v: _Views, r):
    return v.noise.enob_bits, None


def _power(v: _Views, r):
    ev = v.ev
    names = r.targets or [s.name for s in ev.chain.stages if s.model.follower_type]
    total = 0.0
    for n in names:
        total = total + per_sample(ev.dc.ops[n].values.get("power_w", 0.0), v.n)
    return total + np.zeros(v.n), None


def _stage_rows(v: _Views, r, names, get, pick):
    rows = np.stack([per_sample(get(n), v.n) for n in names])
    return _worst(rows, names, pick)


def _phase_margin(v: _Views, r):
    names = list(r.targets or [n for n, x in v.loops.items() if x.is_loop])
    return _stage_rows(v, r, names, lambda n: v.loops[n].pm_deg, np.argmin)


def _peaking(v: _Views, r):
    names = list(r.targets or v.loops)
    return _stage_rows(v, r, names, lambda n: v.loops[n].peaking_db, np.argmax)


def _slew(v: _Views, r):
    from ..engine.slew import analyse_slew
    rows = {x.stage: x for x in analyse_slew(v.ev) if np.all(np.isfinite(x.limit_v_per_s))}
    names = [n for n in (r.targets or rows) if n in rows]
    if not names:
        return np.full(v.n, np.inf), None
    return _stage_rows(v, r, names, lambda n: rows[n].margin_db, np.argmin)


def _settled_bits(v: _Views, r):
    from ..engine.sampling import analyse_sampling
    res = analyse_sampling(v.ev)
    return (np.full(v.n, np.nan) if res is None else res.settled_bits), None


def _settling_time(v: _Views, r):
    from ..engine.step import DEFAULT_ERROR, analyse_step
    res = analyse_step(v.ev, error=r.error or DEFAULT_ERROR)
    return (np.full(v.n, np.nan) if res is None else res.settling_s), None


def _startup(v: _Views, r):
    from ..engine.startup import analyse_startup
    res = analyse_startup(v.ev)
    return (np.zeros(v.n) if res is None else res.startup_s), None


def _alias(v: _Views, r):
    from ..engine.aliasing import alias_check
    return alias_check(v.ev).value_db, None


def _rail_current(v: _Views, r):
    """The largest current drawn over the rails (or the listed ones), per sample."""
    from ..engine.power import analyse_power
    res = analyse_power(v.ev.chain, v.ev)
    names = [n for n in (r.targets or res.rails) if n in res.rails]
    if not names:
        return np.zeros(v.n), None
    rows = np.stack([per_sample(res.rails[n][1], v.n) for n in names])
    return _worst(rows, names, np.argmax)


def _common_mode(v: _Views, r):
    """The worst differential interface's CMRR (lowest) or common-mode error (largest), per sample."""
    from ..engine.commonmode import analyse_common_mode
    res = analyse_common_mode(v.ev.chain, v.ev.params, v.n)
    if not res:
        return np.full(v.n, np.inf if r.key == "min_cmrr" else 0.0), None
    names = [x.amplifier for x in res]
    if r.key == "min_cmrr":
        return _worst(np.stack([x.cmrr_db for x in res]), names, np.argmin)
    return _worst(np.stack([x.error_out_v for x in res]), names, np.argmax)


def _dc_error(v: _Views, r):
    """The budget's figure (engine/dcerror.py) in the requirement's unit: the nominal chain's
    worst case (or RSS); in a tolerance run each unit's own error at its condition."""
    res = v.dc_errors
    what = ERROR_KINDS[r.key]
    unit = r.unit
    units = v.unit_errors
    if units is not None:                 # a tolerance run: each unit's own error (the rule has no part)
        return res.in_unit(units[what], unit, what), None
    x = res.in_unit(res.total(what, r.rule or "worst_case"), unit, what)
    return np.full(v.n, x), None


_VALUE = {"min_gain": _gain_db, "max_gain": _gain_db, "flatness": _flatness, "min_f_high": _f_high,
          "max_f_low": _f_low, "min_headroom": _headroom, "max_loading_loss": _loading, "min_snr": _snr,
          "min_enob": _enob, "max_buffer_power": _power, "min_alias_rejection": _alias,
          "max_rail_current": _rail_current, "min_cmrr": _common_mode, "max_common_mode_error": _common_mode,
          **{k: _dc_error for k in ERROR_KINDS},
          "min_phase_margin": _phase_margin, "max_peaking": _peaking, "min_slew_margin": _slew,
          "min_settled_bits": _settled_bits, "max_settling_time": _settling_time, "max_startup_time": _startup}


def evaluate_requirements(ev, reqs=None) -> list[ReqResult]:
    """Every requirement of the chain (or ``reqs``) on an evaluation, vectorised over its samples."""
    reqs = ev.chain.extra.get("requirements", []) if reqs is None else reqs
    if not reqs:
        return []
    views = _Views(ev, reqs)
    valid = np.broadcast_to(ev.valid, (views.n,))
    out = []
    for r in reqs:
        value, where = _VALUE[r.key](views, r)
        value = per_sample(value, views.n)
        margin = value - r.limit if r.sense == "min" else r.limit - value
        with np.errstate(invalid="ignore"):
            passed = (margin >= 0) & valid
        note = _loading_note(views, r) if r.key == "max_loading_loss" else None
        out.append(ReqResult(r.name, r.kind, value, r.limit, margin, passed, r.unit, r.sense, r, where, note))
    return out


def where_of(res: ReqResult, i: int = 0) -> str | None:
    """The node or interface that sets an aggregate requirement's value in sample ``i``."""
    if res.where is None:
        return None
    names, idx = res.where
    return names[int(idx[i])]


# -- budget hook -----------------------------------------------------------------

def result_dict(res: ReqResult, i: int = 0) -> dict:
    """One requirement's outcome for sample ``i`` as plain values (JSON, diffs)."""
    return {"name": res.name, "kind": res.kind, "limit": res.limit, "unit": res.unit, "sense": res.sense,
            "value": float(res.value[i]), "margin": float(res.margin[i]), "passed": bool(res.passed[i]),
            "where": where_of(res, i), "note": res.note}


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: requirement pass/fail in the budget summary and ``requirements[]`` in JSON."""
    results = evaluate_requirements(b.ev)
    if not results:
        return
    failing = [r.name for r in results if not r.passed[0]]
    met = len(results) - len(failing)
    shown = ", ".join(failing[:2]) + (f" and {len(failing) - 2} more" if len(failing) > 2 else "")
    b.extra_summary.append(("requirements", f"{met} of {len(results)} met" +
                            (f"; failing: {shown}" if failing else "")))
    b.extra_json["requirements"] = [result_dict(r) for r in results]


def check_chain(chain) -> list[ReqResult]:
    """The nominal chain's requirement results (an impossible nominal bias is a SpecError)."""
    from ..engine.budget import check_operating_points, evaluate
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    return evaluate_requirements(ev)


def __getattr__(name):
    """``SCHEMAS``: the JSON Schema of the ``requirements:`` section for chainplan.spec.schema,
    built from KINDS when asked for (keeps the schema module out of every start-up)."""
    if name != "SCHEMAS":
        raise AttributeError(name)
    from ..spec.schema import field_schema
    from ..stages.base import Field
    value = lambda unit, doc: field_schema(Field(unit, doc, tolerable=False))  # noqa: E731
    names = {"anyOf": [{"type": "string"}, {"type": "array", "items": {"type": "string"}, "minItems": 1}]}
    props = {k.key: value(k.unit, k.what) if k.unit != "error" else
             {"type": ["string", "number"], "description": k.what} for k in KINDS.values()}
    props.update(name={"type": "string", "description": "what tables, JUnit and diffs call it"},
                 at=value("Hz", "frequency (default: f_ref)"),
                 band={"type": "array", "items": value("Hz", "band end"), "minItems": 2, "maxItems": 2},
                 rule={"enum": ["worst_case", "rss"], "description": "DC error total: linear sum or RSS"},
                 nodes=names, interfaces=names, stages=names, rails=names,
                 error=value("%", "settling error (default 1 %)"))
    item = {"type": "object", "properties": props, "additionalProperties": False,
            "oneOf": [{"required": [k]} for k in KINDS]}
    return {"requirements": {"type": "array", "items": item,
                             "description": "requirements the chain must meet (docs/requirements.md)"}}
