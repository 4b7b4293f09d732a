"""Buffer advice: for every interface of a chain, what each candidate buffer
would do there — found by re-analysing the whole chain with the buffer
inserted, never by rules of thumb.

Every figure is a difference of two full analyses (``chainplan.engine.budget.evaluate``
of the chain as it is and of a copy with the buffer inserted by
``chainplan.spec.insert``), at the reference frequency unless said otherwise:

* ``loss_now_db``: the interface's loading loss in dB lost, −20·log10|1/(1 + Zth·Yin)|;
* ``recovered_db``: loss X→Y − (loss X→buffer + loss buffer→Y): the loading
  loss the buffer gives back (positive = recovered); for a candidate with its
  own input bias network the loss X→network and network→buffer are both in
  the first term;
* ``buffer_gain_db``: the buffer's open-circuit gain Vth(buffer)/V(X), its own
  cost in dB (a follower's gm·R/(1 + (gm + gmb)·R) < 1; Sedra & Smith,
  *Microelectronic Circuits*, follower analysis, from memory);
* ``net_gain_db``: end-to-end gain after − before.  It is about
  recovered + buffer gain; the rest is the reader's own response changing with
  the lower source impedance it now sees;
* ``dc_shift_v``: DC level of the buffer's output − DC level of X (a source
  follower's VGS, an emitter follower's VBE, ~0 for an op-amp follower);
* headroom after − before at every node (the buffer's own node has no
  "before"), band edges before and after, SNR before and after (when the
  noise analysis is installed), and the buffer's supply power at its operating
  point there.  A candidate that declares no noise at all (an op-amp with
  neither ``en`` nor ``in``: ``StageKind.has_noise_data``) gets no SNR after:
  its figure would be that of a noiseless part, the best of all by absent
  data; one with some noise fields left at zero lists them (``noise_gaps``).

The spec's requirements are evaluated on every re-analysis as on the chain
itself (``chainplan.studies.requirements``).  A candidate *breaks* a
requirement when the requirement holds without it and fails with it
(``max_buffer_power`` by a follower that draws too much, ``min_snr`` by one
that adds too much noise, ``min_headroom``, ``max_loading_loss`` at the
buffer's own interfaces...); a requirement that fails either way is not its
doing.  Each break is kept with the value, the limit and the excess.

Verdict per interface (thresholds in :data:`THRESHOLDS`, documented in
docs/buffers.md).  A candidate is *usable* when its device holds its bias,
it makes no node clip that did not clip before (its own output included) and
it breaks no requirement of the spec and no placement rule keeps it from the
interface; only a usable candidate is ever picked.
It *helps* when it gives back at least ``helps_db`` of loading loss or widens
the band by ``band_gain`` (10 %).

* needed — the interface loses ``needed_loss_db`` (3 dB: 30 % of the signal) or
  more, and a usable candidate wins back ``needed_net_db`` (1 dB) end to end;
* worth it — a usable candidate raises the end-to-end gain by ``worth_net_db``
  (0.5 dB, about 6 %) or widens the band by 10 %, without costing more than
  ``snr_loss_db`` (1 dB) of SNR (a candidate without noise data, whose SNR
  cost is unknown, is picked only when no candidate with data qualifies);
* would clip — some candidates would help, but every one of them clips a node
  or cannot be biased at this node's DC level;
* against spec — some candidates would help and hold their bias without
  clipping, but every such one breaks a requirement of the spec;
* ruled out — the spec's placement rules (``placement:``, chainplan.spec.rules)
  keep every candidate that would help from this interface;
* not worth it — otherwise: little to recover, and what a buffer gives back is
  eaten by its own gain below one.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..engine.budget import Evaluation, check_operating_points, evaluate
from ..spec.insert import insert_buffers
from ..spec.model import Chain
from ..spec.parts import Candidate, candidates_of, default_cost_basis, supply_power
from ..spec.rules import excluded

THRESHOLDS = {
    "needed_loss_db": 3.0,     # an interface losing this much or more needs a buffer...
    "needed_net_db": 1.0,      # ...if one wins back at least this much end to end
    "worth_net_db": 0.5,       # a net end-to-end gain of 0.5 dB (6 %) is worth a part
    "band_gain": 0.10,         # or a band edge moved outward by 10 %
    "helps_db": 0.5,           # a candidate that gives back this much loss "helps"
    "snr_loss_db": 1.0,        # worth it only if the SNR drops by less than this
}


@dataclass
class NodeChange:
    node: str
    before_v: float | None       # None: the node is the buffer's own
    after_v: float
    change_v: float | None


@dataclass
class Break:
    """A requirement of the spec that holds without the candidate and fails with it."""
    requirement: str             # its name (as in the spec's requirements: block)
    key: str                     # its spec key, e.g. 'max_buffer_power'
    value: float                 # the figure with the candidate (SI; dB, Hz, V, W, bits)
    limit: float
    unit: str                    # display symbol
    sense: str                   # 'min' or 'max'
    excess: float                # how far past the limit, positive (value − limit for a max, limit − value for a min)


@dataclass
class CandidateEffect:
    candidate: str
    kind: str
    buffer: str                  # the inserted stage's name
    bias_stage: str | None       # its input bias network's stage name, if the candidate brings one
    input_bias: dict | None      # that network: c_f, r_bias_ohm, bias_v and bias (as written)
    valid: bool                  # the device holds its bias at this node's DC level
    problem: str | None          # why not, in words
    loss_after_db: float | None
    recovered_db: float | None
    buffer_gain_db: float | None
    dc_shift_v: float | None
    net_gain_db: float | None
    f_low_before_hz: float | None
    f_low_after_hz: float | None
    f_high_before_hz: float | None
    f_high_after_hz: float | None
    snr_before_db: float | None
    snr_after_db: float | None
    power_w: float | None
    price: float | None
    count: int
    headroom: list[NodeChange] = field(default_factory=list)
    new_clips: list[str] = field(default_factory=list)
    breaks: list[Break] = field(default_factory=list)
    rule: str | None = None      # why a placement rule of the spec keeps it from this interface
    noise_data: bool = True      # False: the candidate declares no noise at all (its SNR would be a noiseless part's)
    noise_gaps: list[str] = field(default_factory=list)   # its noise-data fields left at zero (noise left out)

    @property
    def usable(self) -> bool:
        return self.valid and not self.new_clips and not self.breaks and self.rule is None

    @property
    def worst_headroom(self) -> NodeChange | None:
        """The buffer's own node if it clips, else the existing node whose headroom falls most."""
        own = [h for h in self.headroom if h.before_v is None and h.after_v < 0]
        if own:
            return own[0]
        rows = [h for h in self.headroom if h.change_v is not None and math.isfinite(h.change_v)]
        return min(rows, key=lambda h: h.change_v, default=None)

    @property
    def snr_change_db(self) -> float | None:
        if self.snr_before_db is None or self.snr_after_db is None:
            return None
        return self.snr_after_db - self.snr_before_db

    @property
    def band_gain(self) -> float:
        """Largest relative outward move of a band edge (0 when neither moves out)."""
        gains = [0.0]
        if self.f_high_before_hz and (self.f_high_after_hz is None or self.f_high_after_hz > self.f_high_before_hz):
            gains.append(math.inf if self.f_high_after_hz is None else self.f_high_after_hz / self.f_high_before_hz - 1)
        if self.f_low_before_hz and (self.f_low_after_hz is None or self.f_low_after_hz < self.f_low_before_hz):
            gains.append(math.inf if self.f_low_after_hz is None else self.f_low_before_hz / self.f_low_after_hz - 1)
        return max(gains)


@dataclass
class InterfaceAdvice:
    source: str                  # node X
    reader: str                  # stage Y (names the interface)
    z_source_ohm: float
    z_load_ohm: float
    loss_now_db: float
    candidates: list[CandidateEffect]
    verdict: str                 # 'needed', 'worth it', 'not worth it', 'would clip', 'against spec'
    reason: str
    best: str | None             # the candidate the verdict recommends

    def effect_of(self, name: str | None) -> CandidateEffect | None:
        return next((e for e in self.candidates if e.candidate == name), None)

    @property
    def shown(self) -> CandidateEffect | None:
        """The candidate whose figures stand for this interface: the pick, else the usable one that
        raises the end-to-end gain most, to 0.01 dB, the cheaper first (not recommended: the verdict
        says why)."""
        if self.best is not None:
            return self.effect_of(self.best)
        return min((e for e in self.candidates if e.usable),
                   key=lambda e: (-round(e.net_gain_db or 0.0, 2), e.price or 0.0, e.power_w or 0.0), default=None)

    @property
    def held_back(self) -> list[CandidateEffect]:
        """Candidates that hold their bias and would do more than the shown one (end to end, by
        ``helps_db``, or where nothing is shown, any that helps) but are not usable: they clip a node
        or break a requirement."""
        ref = self.shown
        floor = (ref.net_gain_db or 0.0) if ref is not None else -math.inf
        out = [e for e in self.candidates if e.valid and not e.usable and _helps(e)
               and (e.net_gain_db or 0.0) > floor + THRESHOLDS["helps_db"] * 0.1]
        return sorted(out, key=lambda e: -(e.net_gain_db or 0.0))


@dataclass
class Advice:
    chain: Chain
    f_ref_hz: float
    output: str
    gain_db: float
    cost_basis: str              # 'price' or 'power': how the advice ranks candidates
    interfaces: list[InterfaceAdvice]
    thresholds: dict
    noise: bool                  # SNR columns available
    #: interfaces left alone: (node, reader, input mode, amplifier) at the virtual-ground inputs
    #: (a transimpedance or charge amplifier takes the current or charge; a buffer there is wrong advice)
    virtual_ground: list = field(default_factory=list)
    candidates: list = field(default_factory=list)   # (name, kind, bias text) of the candidates tried
    rules: list = field(default_factory=list)   # chainplan.spec.rules.rules_summary: the spec's placement rules


# -- analysis ----------------------------------------------------------------------

@dataclass
class _Figures:
    """What the advice needs from one full analysis."""
    ev: Evaluation
    gain_db: float
    f_low: float | None
    f_high: float | None
    headroom: dict
    snr_db: float | None
    requirements: list           # ReqResult per requirement of the spec (empty without a requirements: block)


def _figures(ev: Evaluation, with_noise: bool) -> _Figures:
    from ..studies.requirements import evaluate_requirements
    f_lo, f_hi = ev.band_edges()
    room = {n: float(ev.headroom(n)[0]) for n in ev.chain.nodes}
    snr = None
    if with_noise and bool(ev.valid[0]):
        snr = _snr_db(ev)
    return _Figures(ev, float(20 * np.log10(np.abs(ev.gain()[0, 0]))), _edge(f_lo), _edge(f_hi), room, snr,
                    evaluate_requirements(ev) if bool(ev.valid[0]) else [])


def breaks_of(before: list, after: list) -> list[Break]:
    """The requirements that hold ``before`` (results without the candidate) and fail ``after``."""
    held = {r.name for r in before if bool(r.passed[0])}
    out = []
    for r in after:
        if r.name in held and not bool(r.passed[0]):
            v = float(r.value[0])
            out.append(Break(r.name, r.requirement.key, v, r.limit, r.unit, r.sense, -float(r.margin[0])))
    return out


def _snr_db(ev: Evaluation) -> float | None:
    """SNR at the converter when the noise analysis is installed, else None: the powers-only
    analysis, cached on the evaluation and shared with the SNR/ENOB requirements (it agrees with
    the density path to 1e-12, tests/test_engine_reference.py)."""
    try:
        from ..engine.noise import noise_powers
    except ImportError:
        return None
    return float(np.ravel(noise_powers(ev).snr_db)[0])


def _edge(x) -> float | None:
    v = float(np.ravel(x)[0])
    return v if math.isfinite(v) else None


def _loss_db(ev: Evaluation, reader: str) -> float:
    return float(ev.interface_loss_db(reader)[0, 0])


def _z(x) -> float:
    x = complex(np.ravel(x)[0])
    return abs(x)


def buffer_power(ev: Evaluation, buffer: str, cand: Candidate) -> float:
    """Supply power of an inserted buffer at its operating point (or the parts file's figure)."""
    return float(np.ravel(supply_power(cand, ev.dc.ops[buffer]))[0])


def effect(chain: Chain, base: _Figures, reader: str, cand: Candidate, with_noise: bool) -> CandidateEffect:
    """Full re-analysis of ``chain`` with ``cand`` inserted in front of ``reader``."""
    new = insert_buffers(chain, {reader: cand})
    buf = new.stage(reader).parent
    bias = new.stage(buf).parent if cand.biased else None
    x = chain.stage(reader).parent
    with np.errstate(all="ignore"):
        ev = evaluate(new)
        out = CandidateEffect(rule=excluded(chain, reader, cand),
            candidate=cand.name, kind=cand.kind, buffer=buf, bias_stage=bias, input_bias=input_bias_of(cand),
            valid=bool(ev.valid[0]), problem=None,
            loss_after_db=None, recovered_db=None, buffer_gain_db=None, dc_shift_v=None, net_gain_db=None,
            f_low_before_hz=base.f_low, f_low_after_hz=None, f_high_before_hz=base.f_high, f_high_after_hz=None,
            snr_before_db=base.snr_db, snr_after_db=None, power_w=None, price=cand.price, count=cand.count,
            noise_data=cand.stage.model.has_noise_data(cand.stage.params),
            noise_gaps=cand.stage.model.noise_gaps(cand.stage.params))
        if not out.valid:               # no figures for a bias the device cannot hold
            out.problem = _problem_text(ev, buf)
            return out
        fig = _figures(ev, with_noise)
        out.loss_after_db = sum(_loss_db(ev, n) for n in (bias, buf, reader) if n is not None)
        out.recovered_db = _loss_db(base.ev, reader) - out.loss_after_db
        open_gain = abs((1.0 / ev.ac.full_row(buf)[0][0, 0]) / ev.ac.node_h[x][0, 0])
    out.buffer_gain_db = 20 * math.log10(open_gain) if open_gain > 0 else None
    out.dc_shift_v = float(np.ravel(ev.dc.node_v[buf])[0] - np.ravel(ev.dc.node_v[x])[0])
    out.net_gain_db = fig.gain_db - base.gain_db
    out.f_low_after_hz, out.f_high_after_hz = fig.f_low, fig.f_high
    # A candidate without noise data would show the SNR of a noiseless part: no figure, not a winning one.
    out.snr_after_db = fig.snr_db if out.noise_data else None
    out.power_w = buffer_power(ev, buf, cand)
    for n in new.nodes:
        after, before = fig.headroom[n], base.headroom.get(n)
        change = after - before if before is not None and math.isfinite(after) and math.isfinite(before) else None
        out.headroom.append(NodeChange(n, before, after, change))
    out.new_clips = [h.node for h in out.headroom if h.after_v < 0 and (h.before_v is None or h.before_v >= 0)]
    out.breaks = breaks_of(base.requirements, fig.requirements)
    return out


def input_bias_of(cand: Candidate) -> dict | None:
    """A candidate's input bias network in figures, or None."""
    st = cand.input_bias
    if st is None:
        return None
    written = st.raw.get("__rails__", {}).get("bias", st.raw.get("bias"))
    return {"c_f": st.params["c"], "r_bias_ohm": st.params["r_bias"], "bias_v": st.params["bias"],
            "bias": str(written)}


def _problem_text(ev: Evaluation, buf: str) -> str:
    for name, op in ev.dc.ops.items():
        if op.problems:
            text = op.problems[0][1].split(";")[0]
            return text if name == buf else f"'{name}': {text}"
    floating = [n for n, v in ev.dc.node_v.items() if not np.all(np.isfinite(v))]
    return f"node '{floating[0]}' has no DC level" if floating else "the bias cannot be solved"


def advise(chain: Chain, candidates: list[Candidate] | None = None) -> Advice:
    """Per-interface advice for ``chain`` over its candidates (``include:``/``candidates:``)."""
    cands = candidates_of(chain) if candidates is None else candidates
    ev0 = evaluate(chain)
    check_operating_points(chain, ev0.dc)
    base = _figures(ev0, True)
    with_noise = base.snr_db is not None
    basis = default_cost_basis(cands)
    rows, skipped = [], []
    for st in chain.stages:
        if st.name in ev0.virtual_grounds:
            skipped.append((st.parent, st.name, *ev0.virtual_grounds[st.name]))
            continue
        a, b = ev0.ac.branch_row[st.name]
        y = ev0.ac.y_in[st.name][0, 0]
        if getattr(st.model, "reads_differential", False):      # a pair: no single-ended buffer goes here
            effects, verdict, best = [], "not worth it", None
            reason = ("a differential pair: a single-ended buffer cannot go between the bridge and its "
                      "difference amplifier")
        else:
            effects = [effect(chain, base, st.name, c, with_noise) for c in cands]
            verdict, reason, best = judge(_loss_db(ev0, st.name), effects, basis,
                                          float(np.ravel(ev0.dc.node_v[st.parent])[0]))
        rows.append(InterfaceAdvice(st.parent, st.name, _z(b[:, 0] / a[:, 0]), 1 / abs(y) if y != 0 else math.inf,
                                    _loss_db(ev0, st.name), effects, verdict, reason, best))
    from ..spec.rules import rules_summary
    return Advice(chain, chain.analysis.f_ref_hz, ev0.output, base.gain_db, basis, rows, dict(THRESHOLDS),
                  base.snr_db is not None, skipped, list(cands), rules_summary(chain, cands))


# -- verdicts ------------------------------------------------------------------------

def _cost_key(e: CandidateEffect, basis: str):
    return ((e.price if basis == "price" else e.power_w) or 0.0, -(e.net_gain_db or 0.0))


def _helps(e: CandidateEffect) -> bool:
    return (e.recovered_db or 0.0) >= THRESHOLDS["helps_db"] or e.band_gain >= THRESHOLDS["band_gain"]


def _describe(e: CandidateEffect, basis: str) -> str:
    cost = f"price {e.price:g}" if basis == "price" else _watts(e.power_w)
    return (f"{e.candidate} gives back {e.recovered_db:.2f} dB of loading loss for {cost} "
            f"(net {_signed(e.net_gain_db)} end to end)")


def _signed(x) -> str:
    from ..spec.numbers import figure
    return figure(x, "dB")


def _volts(v) -> str:
    from ..spec.units import fmt
    return fmt(v, "V")


def _watts(w) -> str:
    from ..spec.units import fmt
    return fmt(w or 0.0, "W")


def judge(loss_now_db: float, effects: list[CandidateEffect], basis: str,
          node_dc_v: float | None = None) -> tuple[str, str, str | None]:
    """The verdict for one interface, its reason in words, and the recommended candidate."""
    t = THRESHOLDS
    lost = max(0.0, loss_now_db)
    usable = sorted((e for e in effects if e.usable), key=lambda e: _cost_key(e, basis))
    if not effects:
        return "not worth it", "no candidate buffers to try", None
    if lost >= t["needed_loss_db"]:
        ok = [e for e in usable if (e.net_gain_db or 0.0) >= t["needed_net_db"]]
        if ok:
            return "needed", f"loses {lost:.2f} dB now; " + _describe(ok[0], basis), ok[0].candidate
    snr_ok = lambda e: e.snr_change_db is None or e.snr_change_db > -t["snr_loss_db"]  # noqa: E731
    ok = [e for e in usable if snr_ok(e) and ((e.net_gain_db or 0.0) >= t["worth_net_db"]
                                              or e.band_gain >= t["band_gain"])]
    if ok:
        # The SNR condition is only known for a candidate with noise data: one without
        # wins only when no candidate with data qualifies, and the reason says so.
        known = [e for e in ok if e.noise_data or e.snr_before_db is None]
        e = known[0] if known else ok[0]
        why = _describe(e, basis)
        if e.band_gain >= t["band_gain"] and (e.net_gain_db or 0.0) < t["worth_net_db"]:
            why = f"{e.candidate} widens the band ({_band_text(e)}) for {_watts(e.power_w)}"
        if not known:
            why += " (its SNR cost is not known: it has no noise data)"
        return "worth it", f"loses {lost:.2f} dB now; " + why, e.candidate
    helpful = [e for e in effects if e.valid and _helps(e)]
    if helpful and not any(e.usable for e in helpful) or (lost >= t["needed_loss_db"] and not usable):
        ruled = [e for e in (helpful or effects) if e.rule is not None]
        if ruled and all(e.rule is not None for e in (helpful or effects)):
            return "ruled out", (f"loses {lost:.2f} dB now; the spec's placement rules keep every candidate that "
                                 f"would help from here: {ruled[0].rule}"), None
        held = [e for e in (helpful or effects) if e.valid and not e.new_clips and e.breaks and e.rule is None]
        if held:
            return "against spec", (f"loses {lost:.2f} dB now; every candidate that would help breaks a "
                                    "requirement of the spec: " + "; ".join(
                                        f"{e.candidate} {break_text(e.breaks[0])}" for e in held[:3])), None
        return "would clip", (f"loses {lost:.2f} dB now, but no candidate works here"
                               + (f" (the node sits at {_volts(node_dc_v)} DC)" if node_dc_v is not None else "")
                               + ": " + _why_not(effects)), None
    best = max(usable, key=lambda e: e.net_gain_db, default=None)
    if best is None:
        return "not worth it", f"loses {lost:.2f} dB now; no candidate works here: " + _why_not(effects), None
    return "not worth it", (f"loses only {lost:.2f} dB now; the best candidate ({best.candidate}) changes the "
                            f"end-to-end gain by {_signed(best.net_gain_db)}"
                            + (f" (its own gain is {_signed(best.buffer_gain_db)})"
                               if best.buffer_gain_db is not None else "")
                            + (f" but the SNR by {_signed(best.snr_change_db)}"
                               if (best.net_gain_db or 0.0) >= t["worth_net_db"] and not snr_ok(best) else "")), None


def break_text(b: Break) -> str:
    """'breaks max_buffer_power: 1.69 mW > 500 µW (1.19 mW over)'."""
    from ..studies.requirements import show
    op = "<" if b.sense == "min" else ">"
    side = "under" if b.sense == "min" else "over"
    return f"breaks {b.requirement}: {show(b.value, b.unit)} {op} {show(b.limit, b.unit)} ({show(b.excess, b.unit)} {side})"


def _why_not(effects: list[CandidateEffect]) -> str:
    """The first bias failure and the first clipping among the candidates, in words."""
    parts = []
    bad = next((e for e in effects if not e.valid), None)
    if bad is not None:
        parts.append(f"{bad.candidate} cannot be biased ({bad.problem})")
    clip = next((e for e in effects if e.valid and e.new_clips), None)
    if clip is not None:
        nodes = ", ".join(clip.new_clips)
        parts.append(f"{clip.candidate} would clip at {nodes}")
    return "; ".join(parts) or "none of them helps"


def _band_text(e: CandidateEffect) -> str:
    """The band edge that moves outward most, before → after."""
    from ..spec.units import fmt
    f = lambda x, side: f"{side} span" if x is None else fmt(x, "Hz")  # noqa: E731
    hi = (e.f_high_after_hz or math.inf) / e.f_high_before_hz if e.f_high_before_hz else 1.0
    lo = e.f_low_before_hz / (e.f_low_after_hz or 0.0) if e.f_low_before_hz and e.f_low_after_hz else \
        (math.inf if e.f_low_before_hz else 1.0)
    if hi >= lo:
        return f"upper edge {f(e.f_high_before_hz, 'above')} → {f(e.f_high_after_hz, 'above')}"
    return f"lower edge {f(e.f_low_before_hz, 'below')} → {f(e.f_low_after_hz, 'below')}"
