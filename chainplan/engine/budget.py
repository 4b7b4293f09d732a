"""The budget: DC levels, swing and headroom at every node, loading loss at every
interface, gain over frequency and band edges — the figures chainplan exists
to compute.  :func:`evaluate` works on per-sample parameter arrays (shape
``(samples, 1)``) so tolerance runs share it; :func:`analyse` is the nominal
budget that the CLI prints."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .cascade import AcResult, run_ac
from .dcpass import DcResult, solve_dc
from .swing import class_a_limits
from .workspace import Workspace
from ..errors import SpecError
from ..spec.model import Chain
from ..stages.base import at_temperature

SQRT_HALF = 1.0 / np.sqrt(2.0)


def nominal_params(chain: Chain) -> dict:
    """Per-stage parameter dicts with the chain temperature and the parts' nominal temperature added."""
    return {st.name: {**st.params, "temp_k": chain.temp_k, "t_nom_k": chain.t_nom_k} for st in chain.all_stages}


def frequency_grid(chain: Chain) -> np.ndarray:
    """The reference frequency first, then the log-spaced analysis span."""
    a = chain.analysis
    return np.concatenate(([a.f_ref_hz], np.geomspace(a.f_start_hz, a.f_stop_hz, a.points)))


@dataclass
class Evaluation:
    """Raw arrays of one analysis (nominal: one sample).  Column 0 of every
    frequency array is the reference frequency; columns 1: are the span."""

    chain: Chain
    params: dict
    f_hz: np.ndarray
    dc: DcResult
    ac: AcResult
    output: str
    #: recycled work arrays of a Monte Carlo chunk (None: plain numpy allocation)
    ws: Workspace | None = None
    #: figures derived once per evaluation (e.g. the Monte Carlo's noise powers); not copied by replace()
    cache: dict = field(default_factory=dict, init=False, repr=False, compare=False)

    @property
    def span(self) -> np.ndarray:
        return self.f_hz[1:]

    @property
    def samples(self) -> int:
        """Number of samples: the longest per-sample parameter array (1 for a nominal analysis);
        found once per evaluation (a search over every parameter, read per stage in long chains)."""
        n = self.cache.get("samples")
        if n is None:
            n = self.cache["samples"] = max((np.shape(v)[0] for p in self.params.values() for v in p.values()
                                             if np.ndim(v) >= 1), default=1)
        return n

    @property
    def valid(self) -> np.ndarray:
        """Per sample: every device holds its bias (``Op.bad``) and every node has a DC level, (S,)."""
        bad = np.zeros(self.samples, dtype=bool)
        for op in self.dc.ops.values():
            bad = bad | np.ravel(op.bad)
        for v in self.dc.node_v.values():
            bad = bad | ~np.isfinite(np.ravel(v))
        return ~bad

    @property
    def signal_unit(self) -> str:
        """Unit of the source signal X the transfers refer to: 'V' (a voltage sensor,
        V_node/Vs in V/V) or 'A' (a current sensor, V_node/Is in Ω)."""
        return self.chain.source.model.signal_unit

    def gain(self, node: str | None = None):
        """V_node/X over the grid, (S, F+1); X is the source EMF or current (signal_unit)."""
        return self.ac.node_h[node or self.output]

    @property
    def band_cols(self) -> np.ndarray:
        """Grid columns of the signal band (``analysis.band_hz``: the declared signal
        band, else the noise band); the reference frequency alone without one."""
        return band_columns(self.chain, self.f_hz)

    def peak(self, node: str):
        """Signal peak at a node, the largest over the signal band, (S,).  Assumes
        the sensor's amplitude is flat over the band (a sine of the declared
        amplitude at any frequency in it): peak = amplitude · max |H(f)|."""
        return self.peak_at(node)[0]

    def peak_at(self, node: str):
        """(peak (S,), frequency of the peak (S,) Hz) over the signal band."""
        amp = np.ravel(self.params[self.chain.source.name]["amplitude"])
        cols = self.band_cols
        mag = np.abs(self.ac.node_h.at(node, cols))
        k = np.argmax(mag, axis=1)
        return mag[np.arange(mag.shape[0]), k] * amp, self.f_hz[cols][k]

    def headroom(self, node: str):
        """Distance from the signal's extremes to the nearer limit (V), (S,)."""
        dc = np.ravel(self.dc.node_v[node]) + 0.0 * self.peak(node)
        lo, hi = self.dc.limits[node]
        pk = self.peak(node)
        return np.minimum(np.ravel(hi) - (dc + pk), (dc - pk) - np.ravel(lo))

    def interface_loss_db(self, stage: str, col=slice(None)):
        """Loading loss where ``stage`` reads its node, in dB lost (positive = lost, the
        convention of docs/json.md): −20·log10|1/(1 + Zth·Yin)| (S, F+1), the voltage
        divider of the Thevenin source and the load; where a stage reads a current
        sensor it is the current divider −20·log10|Yin/(Ys + Yin)| — the share of the
        sensor's current that enters the stage (Norton's theorem).  ``col`` picks
        frequency columns (``col=0``: the reference frequency, (S,))."""
        a, b = (np.asarray(x)[:, col] for x in self.ac.branch_row[stage])
        y = np.asarray(self.ac.y_in[stage])[:, col]
        num = b * y if self.signal_unit == "A" and self.chain.stage(stage).parent == self.chain.source.name else a
        return -20 * np.log10(np.abs(num / (a + b * y)))

    @property
    def virtual_grounds(self) -> dict:
        """stage -> (mode, amplifier) of the interfaces at a virtual ground (:func:`virtual_grounds`)."""
        vg = self.cache.get("virtual_grounds")
        if vg is None:
            vg = self.cache["virtual_grounds"] = virtual_grounds(self.chain)
        return vg

    def virtual_ground(self, stage: str) -> str | None:
        """'current' or 'charge' where the interface into ``stage`` is at a virtual ground, else
        None (a voltage input: a loading interface)."""
        return self.virtual_grounds.get(stage, (None,))[0]

    def loading_interfaces(self) -> list[str]:
        """The readers whose interface has a loading loss: every stage but the virtual-ground inputs."""
        vg = self.virtual_grounds
        return [st.name for st in self.chain.stages if st.name not in vg]

    def input_transfer(self, stage: str, col=slice(None)):
        """At a virtual-ground input (or a shunt-path passive stage in front of one: the share
        at the amplifier at its end): the share of the source's short-circuit current (or,
        alike, of its charge, Q = I/s) that reaches the stage's feedback network, complex (S, F+1).
        From the engine's own figures: I_fb = V_in·(Yin − Ysh) with V_in the node's
        response to the source signal X and Ysh the op-amp's input shunt
        (``StageKind.input_shunt``); the reference is the short-circuit current X/B of the
        row (A, B) at the node that drives the current path (:func:`driving_node`: the sensor,
        or the stage before a cable; a Thevenin row X = A·V + B·I: V = 0 gives I = X/B).  For a piezo (Cs)
        through a cable (Cc) into a charge amplifier of open-loop gain A this is the textbook
        charge transfer (1 + A)·Cf/(Cs + Cc + Cin + (1 + A)·Cf) (Gautschi, *Piezoelectric
        Sensorics*, charge amplifier chapter, from memory).  NaN where the source has no
        short-circuit current to refer to (an ideal voltage source, B = 0)."""
        chain, ac = self.chain, self.ac
        st = chain.stage(self.virtual_grounds[stage][1])     # the amplifier at the end of a passive front
        ref = driving_node(chain, st.parent, self.virtual_grounds)
        b_ref = np.asarray(ac.full_row(ref)[1] + 0.0 * self.f_hz)[:, col]
        h = ac.node_h.at(st.parent, col)
        y = np.asarray(ac.y_in[st.name])[:, col]
        s = (2j * np.pi * self.f_hz)[None, col]
        y_sh = st.model.input_shunt(self.params[st.name], s)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = h * (y - y_sh) * b_ref
        return np.where(b_ref == 0, np.nan, t)

    def passband(self, node: str | None = None):
        """(passband gain |H| (S,), its frequency (S,) Hz): the gain at a declared
        ``analysis.mid_band`` (log-log interpolation between grid points), else the
        largest gain over the signal band, else the largest over the span."""
        mag = np.abs(self.gain(node))[:, 1:]
        f = self.span
        mid = self.chain.analysis.mid_band_hz
        if mid is not None:
            g = 10 ** _interp_rows(np.log10(mid), np.log10(f), np.log10(np.maximum(mag, 1e-300)))
            return g, np.full(mag.shape[0], mid)
        band = self.chain.analysis.band_hz
        cols = np.arange(f.size) if band is None else np.nonzero((f >= band[0]) & (f <= band[1]))[0]
        cols = cols if cols.size else np.arange(f.size)
        k = cols[np.argmax(mag[:, cols], axis=1)]
        return mag[np.arange(mag.shape[0]), k], f[k]

    def band_edges(self, node: str | None = None):
        """−3 dB edges around the passband (``passband``: the gain at a declared mid-band,
        else the largest over the signal band or the span), per sample (nan where the
        response stays within 3 dB over the span).  Linear interpolation of the
        magnitude in dB against log f between the bracketing grid points."""
        mag = np.abs(self.gain(node))
        g_pb, f_pb = Evaluation.passband(self, node)
        ref = g_pb[:, None] * SQRT_HALF
        span = mag[:, 1:]
        logf = np.log10(self.span)
        below = span < ref
        above_ref = self.span[None, :] > f_pb[:, None]
        hi_mask = below & above_ref
        lo_mask = below & ~above_ref
        return (_edge(span, ref, logf, lo_mask, last=True), _edge(span, ref, logf, hi_mask, last=False))


def virtual_grounds(chain: Chain) -> dict:
    """stage -> (mode, amplifier) for every interface at a virtual ground: the stages whose kind
    holds its input there (``StageKind.input_mode`` 'current' or 'charge'; the amplifier is the
    stage itself), and the passive stages (a cable, a filter) whose node only such an input
    reads, through passive stages alone (a piezo → cable → charge amplifier: the cable's input
    is in the charge path too; the amplifier is the one at its end).  Only shunt-path passive
    kinds count (``Passive.shunt_path``: a cable, a shunt R or C — they divert part of the
    current, which the transfer shows); a series resistor or capacitor turns a voltage into the
    current and keeps its voltage loading loss.  One pass from the last stage up (the chain is
    in order), so it is linear in the chain's length."""
    out: dict = {}
    for st in reversed(chain.stages):
        mode = getattr(st.model, "input_mode", "voltage")
        if mode != "voltage":
            out[st.name] = (mode, st.name)
        elif getattr(st.model, "shunt_path", False):
            readers = chain.readers(st.name)
            if len(readers) == 1 and readers[0].name in out:
                out[st.name] = out[readers[0].name]
    return out


def virtual_ground(chain: Chain, stage: str) -> str | None:
    """'current' or 'charge' where the interface into ``stage`` is at a virtual ground
    (:func:`virtual_grounds`), else None (a loading interface)."""
    return virtual_grounds(chain).get(stage, (None,))[0]


def driving_node(chain: Chain, node: str, vg: dict | None = None) -> str:
    """The node whose Thevenin row a virtual-ground input's transfer refers to: up from
    ``node`` through the shunt-path passive stages in front of the amplifier (a cable: the
    ones :func:`virtual_grounds` counts into the charge path) to the node that drives them —
    the sensor, or whatever stage comes before (a series resistor, an active stage)."""
    vg = virtual_grounds(chain) if vg is None else vg
    while node != chain.source.name and node in vg:
        node = chain.stage(node).parent
    return node


def _interp_rows(x, xp, fp):
    """np.interp of one point x on every row of fp (S, F) over the common xp (F,)."""
    j = np.clip(np.searchsorted(xp, x) - 1, 0, xp.size - 2)
    t = (x - xp[j]) / (xp[j + 1] - xp[j])
    return fp[:, j] + t * (fp[:, j + 1] - fp[:, j])


def band_columns(chain: Chain, f_hz) -> np.ndarray:
    """Columns of ``f_hz`` inside the chain's signal band (``analysis.band_hz``); [0]
    (the reference frequency) when no band is declared or none falls inside."""
    band = chain.analysis.band_hz
    if band is None:
        return np.array([0])
    f = np.asarray(f_hz)
    cols = np.nonzero((f >= band[0] * (1 - 1e-12)) & (f <= band[1] * (1 + 1e-12)))[0]
    return cols if cols.size else np.array([0])


def _edge(span, ref, logf, mask, last):
    n = span.shape[1]
    has = mask.any(axis=1)
    if last:
        idx = n - 1 - np.argmax(mask[:, ::-1], axis=1)
        nb = np.minimum(idx + 1, n - 1)
    else:
        idx = np.argmax(mask, axis=1)
        nb = np.maximum(idx - 1, 0)
    rows = np.arange(span.shape[0])
    db = lambda x: 20 * np.log10(np.maximum(x, 1e-300))  # noqa: E731
    y0, y1 = db(span[rows, idx]), db(span[rows, nb])
    target = db(ref[:, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(y1 != y0, (target - y0) / (y1 - y0), 0.0)
    f = 10 ** (logf[idx] + np.clip(t, 0, 1) * (logf[nb] - logf[idx]))
    return np.where(has & (idx != nb), f, np.nan)


def evaluate(chain: Chain, params: dict | None = None, f_hz: np.ndarray | None = None,
             ws: Workspace | None = None, bad_settles_after: int | None = None) -> Evaluation:
    """DC and AC analysis; with a :class:`Workspace` (a Monte Carlo chunk) the AC arrays
    live in its recycled memory, valid until it is recycled.  ``bad_settles_after``: see
    ``solve_dc`` (batches of independent samples, where an impossible one must not hold
    up the rest)."""
    nominal = params is None and ws is None
    params = params if params is not None else nominal_params(chain)
    params_in = params
    params = {st.name: at_temperature(st.raw.get("__tempco__"), params[st.name]) for st in chain.all_stages}
    if not nominal:
        params = with_nominal_references(chain, params)
    f_hz = frequency_grid(chain) if f_hz is None else f_hz
    # A floating node or an impossible bias gives non-finite numbers in some samples;
    # they are reported per sample (check_operating_points, valid), not as numpy warnings.
    with np.errstate(divide="ignore", invalid="ignore"):
        dc = solve_dc(chain, params, bad_settles_after=bad_settles_after)
        ac = run_ac(chain, params, dc.ops, f_hz, ws)
        class_a_limits(chain, params, dc, ac, band_columns(chain, f_hz))
    ev = Evaluation(chain, params, f_hz, dc, ac, chain.output_node(), ws)
    ev.cache["params_in"] = params_in          # before the part tempcos (a DC error analysis redoes them)
    if nominal:
        check_finite(ev)
    return ev


def with_nominal_references(chain: Chain, params: dict) -> dict:
    """``params`` with what stages stated at the nominal operating point need from it
    (``StageKind.wants_reference``: a MOSFET's flicker corner holds at the nominal
    bias, and a Monte Carlo sample or another temperature scales it from there).
    Costs one nominal DC pass, only for chains that have such a stage.  (The placement
    search's per-sample switch stages are no stage kinds: their candidates are their
    own reference.)"""
    wanted = [st for st in chain.all_stages if st.name in params
              and getattr(st.model, "wants_reference", None) and st.model.wants_reference(st.params)]
    if not wanted:
        return params
    nom = nominal_params(chain)
    nom = {st.name: at_temperature(st.raw.get("__tempco__"), nom[st.name]) for st in chain.all_stages}
    with np.errstate(divide="ignore", invalid="ignore"):
        dc = solve_dc(chain, nom)
    out = dict(params)
    for st in wanted:
        out[st.name] = {**params[st.name], **st.model.nominal_reference(nom[st.name], dc.ops[st.name])}
    return out


def check_finite(ev: Evaluation) -> None:
    """A nominal analysis whose small-signal figures are not finite (values the models
    cannot carry through float64) is a spec error naming the first stage where it shows,
    never a 'nan dB' in a table.  Floating nodes and impossible bias points are left to
    :func:`check_operating_points`, which names them better."""
    chain = ev.chain
    if not all(np.all(np.isfinite(v)) for v in ev.dc.node_v.values()) or \
            any(np.any(op.bad) for op in ev.dc.ops.values()):
        return
    with np.errstate(all="ignore"):
        for st in chain.stages:
            arrays = [ev.ac.y_in[st.name], ev.ac.node_h[st.name] if st.role == "two_port" else 0.0]
            bad = [i for i, a in enumerate(arrays) if not np.all(np.isfinite(a))]
            if bad:
                what = "its input admittance" if bad[0] == 0 else "the gain to its output"
                raise SpecError(f"{what} is not a finite number over the analysis span: the values of this "
                                "stage (or the stages it drives) are beyond what the models carry; "
                                "bring them nearer to real parts", chain.path, st.line, st.name)


# -- the nominal budget --------------------------------------------------------

@dataclass
class StageRow:
    name: str
    kind: str
    zin_ohm: float
    zout_ohm: float | None
    gain: float | None
    gain_db: float | None
    op: dict = field(default_factory=dict)
    gain_unit: str = "V/V"     # 'Ω' for a stage whose gain is Vout/Iin (a transimpedance stage)


@dataclass
class InterfaceRow:
    source: str
    to: str
    z_source_ohm: float
    z_load_ohm: float
    loss_db: float          # dB lost (positive = lost); NaN at a virtual-ground input
    mode: str = "voltage"   # 'voltage', or 'current'/'charge' at a virtual-ground input
    transfer: float | None = None      # there: |I_fb/I_sc|, the share of the current (charge) that arrives
    transfer_db: float | None = None   # 20·log10 of it (negative: less than all arrives)

    @property
    def loading(self) -> bool:
        """A loading interface (a voltage input), with a loading loss."""
        return self.mode == "voltage"


@dataclass
class NodeRow:
    name: str
    dc_v: float
    peak_v: float
    low_v: float
    high_v: float
    headroom_v: float
    headroom_db: float
    limited_by: tuple
    clips: bool
    f_peak_hz: float | None = None     # frequency of the peak within the signal band
    limit_cause: tuple = (None, None)  # why a limit is where it is, beyond the stage's plain range ('class A')


@dataclass
class Budget:
    chain: Chain
    ev: Evaluation
    stages: list[StageRow]
    interfaces: list[InterfaceRow]
    nodes: list[NodeRow]
    gain_db: float
    f_low_hz: float | None
    f_high_hz: float | None
    output: str
    signal_dbfs: float | None = None
    peak_gain_db: float | None = None   # largest gain over the span
    f_peak_hz: float | None = None
    #: filled by feature modules (noise, requirements): summary rows and JSON keys
    extra_summary: list = field(default_factory=list)
    extra_json: dict = field(default_factory=dict)
    #: unit of gain_db: 'dB' (V/V) for a voltage sensor, 'dBΩ' (V/A re 1 Ω) for a current sensor
    gain_unit: str = "dB"

    @property
    def worst_interface(self) -> InterfaceRow | None:
        return max((r for r in self.interfaces if r.loading), key=lambda r: r.loss_db, default=None)

    @property
    def tightest_node(self) -> NodeRow | None:
        rows = [n for n in self.nodes if np.isfinite(n.headroom_v)]
        return min(rows, key=lambda r: r.headroom_v, default=None)


def _f(x) -> float:
    return float(np.ravel(x)[0])


def check_operating_points(chain: Chain, dc: DcResult):
    """A nominal bias the devices cannot hold is a spec error (exit 2), located at the field."""
    for st in chain.all_stages:
        for fld, msg in dc.ops[st.name].problems:
            raise SpecError(msg, chain.path, st.field_lines.get(fld, st.line), f"{st.name}.{fld}")
    for node, v in dc.node_v.items():
        if not np.all(np.isfinite(v)):
            st = chain.stage(node)
            unbled = [s.name for s in chain.stages if s.kind == "charge_amplifier" and np.all(np.isinf(s.params["r_f"]))]
            hint = f", or give the charge amplifier '{unbled[0]}' its DC bleed r_f" if unbled else ""
            raise SpecError(f"node '{node}' has no DC path (it floats); add a bias resistor, e.g. an "
                            f"ac_coupling stage with r_bias and bias{hint}", chain.path, st.line, node)


def analyse(chain: Chain) -> Budget:
    """The nominal budget of a chain."""
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    ac, dc = ev.ac, ev.dc
    stages = []
    for st in chain.stages:
        zin = _f(np.abs(1.0 / ac.y_in[st.name][:, 0])) if np.any(ac.y_in[st.name][:, 0] != 0) else np.inf
        if st.role == "two_port":
            a, b = ac.row[st.name]
            zout = _f(np.abs(b[:, 0] / a[:, 0]))
            g = ac.node_h[st.name][:, 0] / ac.node_h[st.parent][:, 0]
            unit = getattr(st.model, "gain_unit", "V/V")
            if unit == "Ω":                                 # Vout/Iin, Iin = V_in·Yin
                g = g / ac.y_in[st.name][:, 0]
            elif unit == "V/C":                             # Vout/Qin, Qin = Iin/s
                g = g * 2j * np.pi * ev.f_hz[0] / ac.y_in[st.name][:, 0]
            gain = _f(np.abs(g))
            gain_db = 20 * np.log10(gain) if unit != "V/C" else None
        else:
            zout = gain = gain_db = None
            unit = "V/V"
        stages.append(StageRow(st.name, st.kind, zin, zout, gain, gain_db,
                               {k: _f(v) for k, v in dc.ops[st.name].values.items()}, unit))
    interfaces = []
    for st in chain.stages:
        a, b = ac.branch_row[st.name]
        zs = _f(np.abs(b[:, 0] / a[:, 0]))
        y = ac.y_in[st.name][:, 0]
        zl = _f(np.abs(1.0 / y)) if np.any(y != 0) else np.inf
        mode = ev.virtual_ground(st.name)
        if mode is None:
            interfaces.append(InterfaceRow(st.parent, st.name, zs, zl, _f(ev.interface_loss_db(st.name)[:, 0])))
            continue
        t = abs(complex(np.ravel(ev.input_transfer(st.name, [0]))[0]))
        ok = np.isfinite(t) and t > 0
        interfaces.append(InterfaceRow(st.parent, st.name, zs, zl, float("nan"), mode, t if ok else None,
                                       float(20 * np.log10(t)) if ok else None))
    nodes = []
    for n in chain.nodes:
        pk_s, f_pk = ev.peak_at(n)
        dcv, pk = _f(dc.node_v[n]), _f(pk_s)
        lo, hi = (_f(x) for x in dc.limits[n])
        room = _f(ev.headroom(n))
        avail = min(hi - dcv, dcv - lo)
        room_db = 20 * np.log10(avail / pk) if pk > 0 and avail > 0 else (np.inf if pk == 0 else -np.inf)
        nodes.append(NodeRow(n, dcv, pk, lo, hi, room, float(room_db), dc.limit_by[n], room < 0, _f(f_pk),
                             dc.limit_cause.get(n, (None, None))))
    f_lo, f_hi = ev.band_edges()
    out = ev.output
    gain_db = _f(20 * np.log10(np.abs(ev.gain()[:, 0])))
    dbfs = None
    adc = next((s for s in chain.readers(out) if s.kind == "adc"), None)
    if adc is not None:
        half = 0.5 * (adc.params["fs_high"] - adc.params["fs_low"])
        pk = _f(ev.peak(out))
        dbfs = 20 * np.log10(pk / half) if pk > 0 else -np.inf
    nan2none = lambda x: None if not np.isfinite(x) else float(x)  # noqa: E731
    with np.errstate(divide="ignore"):                # a gain that underflows (a long chain) is −inf dB
        span_db = 20 * np.log10(np.abs(ev.gain()[0, 1:]))
    k = int(np.argmax(span_db))
    b = Budget(chain, ev, stages, interfaces, nodes, gain_db, nan2none(_f(f_lo)), nan2none(_f(f_hi)), out, dbfs,
               peak_gain_db=float(span_db[k]), f_peak_hz=float(ev.span[k]),
               gain_unit="dBΩ" if ev.signal_unit == "A" else "dB")
    notes = [f"{st.name}: {text}" for st in chain.stages for text in st.model.notes(st.params)]
    b.extra_summary.extend(("note", n) for n in notes)    # what a stage's model assumes, in words
    if notes:
        b.extra_json["model_notes"] = notes
    return b
