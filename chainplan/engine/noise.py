"""Noise analysis and the converter budget: every stage's noise generators
carried to the chain output through the rows the cascade already computed,
integrated over the analysis span, and the SNR, dynamic range and ENOB at the
converter.

Transfer to the output (derivation in docs/noise.md).  The forward pass keeps
for every node a row ``(A_n, B_n)`` with ``Vs = A_n·V + B_n·I`` (cascade.py),
and ``H = V_out/Vs``.  A stage's generator ``n`` is described by where it acts
(stages/noise_sources.py: ``in_v, in_i, out_v, out_i``, the chain noise
representation of a two-port, Hillbrand & Russer, IEEE Trans. CAS 23, 1976,
from memory).  With ``(a, b)`` the row at the stage input (fan-out siblings
folded in) and ``(A_k, B_k)`` the row at its output node::

    Vs = a·V1 + b·I1 = (A_k, B_k)·(V2 − out_v·n, I2 − out_i·n) + (a·in_v + b·in_i)·n

so the generator acts as an extra source EMF ``ΔVs = (A_k·out_v + B_k·out_i −
a·in_v − b·in_i)·n`` and reaches the output as ``H·ΔVs``.  A stage off the
signal path that reads a node ``m`` on it (a load, a bias network, the first
stage of a side branch) draws ``I1 = Yin·(V − in_v·n) + in_i·n``, which is
``ΔVs = B_m·(Yin·in_v − in_i)·n``; its output-side generators and anything
deeper in a side branch are neglected (listed in ``NoiseResult.neglected``).

Independent generators add in power; the output PSD is integrated over the
analysis span, or the spec's ``analysis.noise_band``, or a brick-wall band the
caller asks for, with the trapezoid rule.  Converter noise (quantisation q²/12,
the converter's own rms noise) is a power, spread flat over the integration
band; with the converter's ``f_sample`` it is spread flat over 0…f_sample/2 and
only the part inside the band counts (the oversampling gain).  Everything is vectorised over
``(samples, frequencies)``; the only Python loop runs over the generators.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .budget import Budget, Evaluation
from . import workspace as wsa
from .cascade import run_ac

#: Full-scale sine SNR of an ideal N-bit converter is 6.02·N + 1.76 dB, hence
#: ENOB = (SNR − 1.76)/6.02 (Kester, Analog Devices MT-001, from memory).
ENOB_OFFSET_DB, DB_PER_BIT = 1.76, 6.02
SQRT2 = np.sqrt(2.0)


@dataclass
class NoiseResult:
    f_hz: np.ndarray              # (F,) the analysis span
    out_density: np.ndarray       # (S, F) V/√Hz at the output node
    contributors: list            # [(name, out_psd (S, F) V²/Hz)], in chain order
    shares: dict                  # name -> (S,) fraction of the total output noise power
    out_vrms: np.ndarray          # (S,) integrated output noise, converter noise included
    in_vrms: np.ndarray           # (S,) √(∫ S_out/|H|² df): each frequency referred by its own gain
    snr_fs_db: np.ndarray         # (S,) full-scale sine vs noise (nan without a converter)
    snr_db: np.ndarray            # (S,) the spec's signal vs noise
    dynamic_range_db: np.ndarray  # (S,) largest sine the output node carries vs noise
    enob_bits: np.ndarray         # (S,) (snr_fs_db − 1.76)/6.02
    output: str = ""              # the output node
    converter: str | None = None  # the ADC reading the output node
    band_hz: tuple = (np.nan, np.nan)   # integration band
    gain_ref: np.ndarray | None = None  # (S,) |V_out/Vs| at f_ref
    vrms: dict = field(default_factory=dict)   # name -> (S,) each contributor's rms at the output
    stage_of: dict = field(default_factory=dict)   # name -> stage name
    neglected: list = field(default_factory=list)  # stages whose noise is not carried to the output
    notes: list = field(default_factory=list)      # e.g. stages given no noise data
    out_over_gain_ref_vrms: np.ndarray | None = None   # (S,) the output noise ÷ |H(f_ref)| (the old figure)
    folded_vrms: np.ndarray | None = None   # (S,) analog noise folded into the band from above f_sample/2
    enob_capped: np.ndarray | None = None   # (S,) ENOB held at the converter's bits (quantisation not white)

    @property
    def ranked(self) -> list:
        """Contributor names, largest share (of the first sample) first."""
        return sorted(self.shares, key=lambda n: -np.nan_to_num(self.shares[n][0]))


def analyse_noise(ev: Evaluation, bandwidth_hz=None, powers_only: bool = False) -> NoiseResult:
    """Noise at the output node of an evaluation.  ``bandwidth_hz``: None integrates
    over the spec's ``analysis.noise_band`` or, without one, the whole span; a
    number ``B`` integrates from the span's start to ``B``; a pair ``(low, high)``
    integrates between them (brick-wall edges).  ``powers_only`` (tolerance runs):
    each generator's integrated power straight from |transfer|² (:func:`output_powers`),
    no densities kept (``out_density`` None, ``contributors`` empty) and no notes.

    Input-referred noise is ``√(∫ S_out(f)/|H(f)|² df)`` over the band, each
    frequency referred by its own gain (Motchenbacher & Connelly, *Low-Noise
    Electronic System Design*, ch. 1, from memory); noise spread flat over the band
    (converter noise, folded noise) is referred by the band average of 1/|H|².
    The old figure, the output noise over the gain at f_ref, is kept as
    ``out_over_gain_ref_vrms``.

    At a sampling converter (``f_sample``): analog noise from the images of the band
    above f_sample/2 folds into it and is added ('aliased noise', ``folded_vrms``);
    the quantisation error counts as white q²/12 spread over 0…f_sample/2, so that
    only the band's share of it counts, only when the noise at the converter (analog,
    every frequency of the span, plus a declared dither) is at least ½ LSB rms
    (Widrow & Kollár, *Quantization Noise*, ch. 4–5, from memory); below that the
    error is a deterministic function of the signal: no oversampling gain, and ENOB
    no better than the converter's bits (``enob_capped``)."""
    whole_span = bandwidth_hz is None and ev.chain.analysis.noise_band_hz is None
    bandwidth_hz = ev.chain.analysis.noise_band_hz if bandwidth_hz is None else bandwidth_hz
    band = integration_band(ev.span, bandwidth_hz)
    w = band_weights(ev.span, *band)
    bw = float(np.sum(w))
    n = ev.samples                              # the gain may not vary with every varied input (temperature)
    conv, fs = converter(ev)
    f_sample = sample_rate(ev.chain, conv)
    in_band = 1.0 if f_sample is None else min(1.0, bw / (f_sample / 2.0))
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        h = np.abs(np.broadcast_to(ev.gain()[:, 1:], (n, len(ev.span))))
        inv_h2 = np.minimum(1.0 / (h * h), 1e300)   # finite: a zero gain outside the band has weight 0
    w_ref, ref_note = _referral_weights(ev, w, whole_span)
    mean_inv_h2 = np.sum(inv_h2 * w_ref, axis=1) / np.sum(w_ref, axis=1)   # band average of 1/|H|²
    is_power = lambda stage, name: stage == conv and name.endswith(CONVERTER_POWERS)  # noqa: E731
    w_all = band_weights(ev.span, ev.span[0], ev.span[-1])
    w_fold = alias_weights(ev.span, band, f_sample) if f_sample is not None and band[1] <= f_sample / 2 else None
    need_white = conv is not None
    contributors, powers, in_powers, stage_of, total = [], {}, {}, {}, None
    if powers_only:
        weights = [w, w_ref * inv_h2] + ([w_all] if need_white else []) + ([w_fold] if w_fold is not None else [])
        walk = output_powers(ev, weights, bw)            # one walk over the generators, every weighting
        gens = [(st, nm, p[0]) for st, nm, p in walk]
        referred = dict((nm, p[1]) for _, nm, p in walk)
        analog_all = sum((p[2] for st, nm, p in walk if not is_power(st, nm)), np.zeros(n)) \
            if need_white else np.zeros(n)
        folded = sum((p[-1] for st, nm, p in walk if not is_power(st, nm)), np.zeros(n)) \
            if w_fold is not None else np.zeros(n)
        for stage, name, power in gens:
            powers[name], stage_of[name] = np.broadcast_to(power, (n,)), stage
            if not is_power(stage, name):
                in_powers[name] = np.broadcast_to(referred[name], (n,))
    else:
        total = np.zeros((n, len(ev.f_hz)))
        analog = np.zeros((n, len(ev.f_hz)))
        gens = output_psds(ev, bw)
        for stage, name, psd, power in gens:
            if power is None:
                powers[name] = np.broadcast_to(psd[:, 1:] @ w, (n,))
                in_powers[name] = np.sum(psd[:, 1:] * inv_h2 * w_ref, axis=1)
                analog = analog + psd
            else:
                powers[name] = np.broadcast_to(power, (n,))
            contributors.append((name, psd[:, 1:]))
            stage_of[name] = stage
            total = total + psd
        analog_all = analog[:, 1:] @ w_all
        folded = analog[:, 1:] @ w_fold if w_fold is not None else np.zeros(n)
    white, sigma_conv, lsb = _quantisation_white(ev, conv, analog_all)
    for name in list(powers):
        if is_power(stage_of[name], name):
            if name.endswith(": quantisation") and in_band < 1.0 and not np.all(white):
                powers[name] = np.where(white, powers[name], powers[name] / in_band)  # no oversampling gain
                if total is not None:
                    k = next(i for i, (nm, _) in enumerate(contributors) if nm == name)
                    old = contributors[k][1]
                    new = np.broadcast_to(powers[name][:, None] / bw, old.shape)
                    total[:, 1:] += new - old
                    contributors[k] = (name, new)
            in_powers[name] = powers[name] * mean_inv_h2      # a power spread flat: referred by the band average
    if np.any(folded > 0):
        name = f"{conv}: aliased noise"     # folded from above f_sample/2 (the note says so)
        powers[name], stage_of[name], in_powers[name] = folded, conv, folded * mean_inv_h2
        if total is not None:
            flat = np.broadcast_to(folded[:, None] / bw, (n, len(ev.span)))
            contributors.append((name, flat))
            total[:, 1:] += flat
    p_tot = sum(powers.values(), np.zeros(n))
    with np.errstate(divide="ignore", invalid="ignore"):
        shares = {k: p / p_tot for k, p in powers.items()}
        out_vrms = np.sqrt(p_tot)
        gain_ref = np.abs(ev.gain()[:, 0])
        in_vrms = np.sqrt(sum(in_powers.values(), np.zeros(n)))
        amp = np.ravel(np.asarray(ev.params[ev.chain.source.name]["amplitude"], dtype=float))
        snr_fs = _db(fs / (2 * SQRT2), out_vrms) if conv else np.full(n, np.nan)
        snr = _db(amp * gain_ref / SQRT2, out_vrms)
        dr = _db(_largest_sine(ev) / SQRT2, out_vrms)
    enob = (snr_fs - ENOB_OFFSET_DB) / DB_PER_BIT
    capped = np.zeros(n, dtype=bool)
    notes = []
    if conv:
        bits = float(ev.chain.stage(conv).params["bits"])
        capped = ~white & (enob > bits)
        enob = np.where(capped, bits, enob)
        if np.any(~white) and in_band < 1.0:
            notes.append(f"the noise at the converter ({_fmt_v(np.min(sigma_conv))} rms, analog over the span plus "
                         f"dither) is below ½ LSB ({_fmt_v(np.min(lsb) / 2)}): the quantisation error is not white "
                         "noise, so no oversampling gain is credited and ENOB is at most the converter's "
                         f"{bits:g} bits (declare the adc's dither to credit it)")
        if np.any(folded > 0):
            share = float(np.max(folded / p_tot))
            notes.append(f"analog noise from above f_sample/2 folds into the band: {_fmt_v(np.sqrt(folded[0]))} rms, "
                         f"{100 * share:.1f} % of the noise power" + (" (negligible)" if share < 0.01 else ""))
    if not powers_only:
        notes = noise_notes(ev) + notes + ref_note + (span_notes(ev) if whole_span else []) + _clip_note(
            ev.chain.analysis.noise_band_hz if bandwidth_hz is ev.chain.analysis.noise_band_hz else None, band)
    else:
        notes = []
    return NoiseResult(
        f_hz=ev.span, out_density=None if total is None else np.sqrt(total[:, 1:]), contributors=contributors,
        shares=shares, out_vrms=out_vrms, in_vrms=in_vrms, snr_fs_db=snr_fs, snr_db=snr, dynamic_range_db=dr,
        enob_bits=enob, output=ev.output, converter=conv, band_hz=band,
        gain_ref=gain_ref, vrms={k: np.sqrt(p) for k, p in powers.items()}, stage_of=stage_of,
        neglected=neglected_stages(ev), notes=notes,
        out_over_gain_ref_vrms=out_vrms / gain_ref, folded_vrms=np.sqrt(folded), enob_capped=capped)


#: Labels of the converter's noise powers (not densities): spread flat, referred by the band average.
CONVERTER_POWERS = (": quantisation", ": converter noise", ": dither")


def noise_powers(ev: Evaluation) -> NoiseResult:
    """The powers-only noise analysis of an evaluation over the spec's band, computed
    once per evaluation (the Monte Carlo's metrics and its SNR/ENOB requirements share it)."""
    res = ev.cache.get("noise_powers")
    if res is None:
        res = ev.cache["noise_powers"] = analyse_noise(ev, powers_only=True)
    return res


def _referral_weights(ev: Evaluation, w, whole_span: bool):
    """Weights (S, F) of the input referral: the integration band's, or, when the
    noise is integrated over the whole span (no band declared), each sample's −3 dB
    band (span ends where an edge is missing) — over a span reaching where |H| → 0
    the referred noise has no meaning — and a note saying so."""
    if not whole_span:
        return np.broadcast_to(w, (ev.samples, w.size)), []
    lo, hi = (np.ravel(x) for x in ev.band_edges())
    lo = np.where(np.isfinite(lo), lo, ev.span[0])[:, None]
    hi = np.where(np.isfinite(hi), hi, ev.span[-1])[:, None]
    wr = band_weights(ev.span, lo, hi)
    from ..spec.units import fmt
    return wr, [f"no noise band declared: the input-referred noise is taken over the −3 dB band "
                f"{fmt(float(lo[0, 0]), 'Hz')} to {fmt(float(hi[0, 0]), 'Hz')}"]


def _fmt_v(x) -> str:
    from ..spec.units import fmt
    return fmt(float(x), "V")


def _quantisation_white(ev: Evaluation, conv, analog_power):
    """(white (S,) bool, noise at the converter (S,) V rms, LSB (S,) V): is the noise at
    the converter — the analog output noise over the whole span (every frequency
    lands somewhere in 0…f_sample/2) plus a declared dither — at least ½ LSB rms, so
    that q²/12 spread white holds (Widrow & Kollár, from memory)?"""
    if conv is None:
        one = np.ones(ev.samples)
        return one.astype(bool), np.nan * one, np.nan * one
    p = ev.params[conv]
    lsb = np.ravel(np.abs(np.asarray(p["fs_high"] - p["fs_low"], dtype=float)) / 2.0 ** p["bits"])
    sigma = np.sqrt(analog_power + np.ravel(np.asarray(p.get("dither", 0.0), dtype=float)) ** 2)
    return sigma >= 0.5 * lsb, sigma, lsb * np.ones_like(sigma)


def alias_weights(f_hz, band, f_sample) -> np.ndarray:
    """Weights w with Σ w·S = the power of S that a converter sampling at f_sample folds
    into ``band``: S integrated over the images k·f_sample ± [low, high], k ≥ 1, above
    f_sample/2 and inside the span (Oppenheim & Schafer, *Discrete-Time Signal
    Processing*, ch. 4, from memory).  Vectorised over the images."""
    f = np.asarray(f_hz, dtype=float)
    lo, hi = band
    k = np.arange(1, int(np.ceil((f[-1] + hi) / f_sample)) + 1)[:, None]
    edges = np.concatenate([k * f_sample - hi, k * f_sample + lo])
    tops = np.concatenate([k * f_sample - lo, k * f_sample + hi])
    edges = np.maximum(edges, f_sample / 2.0)
    return np.sum(band_weights(f, edges, np.maximum(tops, edges)), axis=0)
def _clip_note(declared, band) -> list:
    """A declared noise band the span (narrowed with --span) cuts short."""
    if declared is None or tuple(declared) == tuple(band):
        return []
    return [f"the noise band is cut to the span: {band[0]:g} to {band[1]:g} Hz of {declared[0]:g} to {declared[1]:g} Hz"]


def density_at(ev: Evaluation, f_hz, bandwidth_hz=None):
    """Exact output noise densities at chosen frequencies (one extra AC pass with
    the same operating points): (total V/√Hz (S, K), |gain| (S, K), contributors
    [(name, V²/Hz (S, K))]).  Converter noise is spread as in analyse_noise."""
    f_hz = np.asarray(f_hz, dtype=float)
    band = integration_band(ev.span, ev.chain.analysis.noise_band_hz if bandwidth_hz is None else bandwidth_hz)
    bw = float(np.sum(band_weights(ev.span, *band)))
    grid = np.concatenate(([ev.f_hz[0]], f_hz))
    ev_k = replace(ev, f_hz=grid, ac=run_ac(ev.chain, ev.params, ev.dc.ops, grid))
    gens = [(name, psd[:, 1:]) for _, name, psd, _ in output_psds(ev_k, bw)]
    total = sum((psd for _, psd in gens), np.zeros((ev_k.samples, f_hz.size)))
    return np.sqrt(total), np.abs(ev_k.gain()[:, 1:]), gens


# -- carrying the generators to the output ---------------------------------------

def generators(chain, st, p, s, op) -> list:
    """A stage's noise generators plus the rail ripple that enters there (engine/ripple.py)."""
    gens = st.model.noise(p, s, op, p["temp_k"])
    if "power" not in chain.extra:
        return gens
    from .ripple import ripple_generators
    return gens + ripple_generators(chain, st, p, s, gens, op)


def _carried(ev: Evaluation, bandwidth: float):
    """What both output-noise walks share: the stages on the path to the output, the
    converter, and the in-band share of a converter's power (q²/12 spreads evenly over
    0…f_sample/2; Kester, Analog Devices MT-001, from memory)."""
    on_path = {ev.chain.source.name, *(st.name for st in ev.chain.path_to(ev.output))}
    conv, _ = converter(ev)
    f_sample = sample_rate(ev.chain, conv)
    return on_path, conv, (1.0 if f_sample is None else min(1.0, bandwidth / (f_sample / 2.0)))


def _carried_generators(ev: Evaluation, on_path, s):
    """(stage, "stage: label", generator) of every noise generator carried to the output:
    the stages on the path and the first stage of each side branch."""
    for st in ev.chain.all_stages:
        if st.name not in on_path and st.parent not in on_path:
            continue
        for g in generators(ev.chain, st, ev.params[st.name], s, ev.dc.ops[st.name]):
            yield st, f"{st.name}: {g.label}", g


def output_psds(ev: Evaluation, bandwidth: float) -> list:
    """Every generator's PSD at the output over ev.f_hz: [(stage, name, (S, F+1)
    V²/Hz, power (S,) or None)].  Converter powers come with a flat PSD power/bandwidth;
    with a sample rate only the share bandwidth/(f_sample/2) of them (at most all) is
    in band: q²/12 spreads evenly over 0…f_sample/2, so the in-band part of a band B
    is q²/12·B/(f_sample/2), an oversampling gain of 10·log10(f_sample/(2B)) (Kester,
    Analog Devices MT-001, from memory)."""
    chain, ac = ev.chain, ev.ac
    out = ev.output
    s = (2j * np.pi * ev.f_hz)[None, :]
    h = ac.node_h.scaled(out)                 # with rows in the output's scale (long chains)
    shape = (ev.samples, h.shape[1])
    on_path, conv, in_band = _carried(ev, bandwidth)
    res = []
    for st, name, g in _carried_generators(ev, on_path, s):
        if g.power_v2 is not None:
            if st.name == conv and np.any(np.asarray(g.power_v2) > 0):
                power = np.broadcast_to(np.ravel(np.asarray(g.power_v2, dtype=float)) * in_band, (shape[0],))
                res.append((st.name, name, np.broadcast_to(power[:, None] / bandwidth, shape), power))
            continue
        if not np.any(np.asarray(g.psd) != 0):
            continue
        if st.name in on_path:
            a_k, b_k, a, b = _rows_at(ac, st, out)
            dvs = _combine((a_k, b_k, a, b), (g.out_v, g.out_i, -g.in_v, -g.in_i))
        else:
            dvs = (ac.row[st.parent][1] * ac.scale_between(st.parent, out)
                   * _combine((ac.y_in[st.name], -1.0), (g.in_v, g.in_i)))
        t = h * dvs
        res.append((st.name, name, np.broadcast_to(g.psd * (t.real ** 2 + t.imag ** 2), shape), None))
    return res


def output_powers(ev: Evaluation, w, bandwidth: float) -> list:
    """Every generator's power at the output integrated with the weights ``w`` over the
    span: [(stage, name, power (S,) V²)], the same generators and transfers as
    :func:`output_psds` (converter powers alike) but summed at once:
    ``Σ_f w·psd·|H|²·|ΔVs|²``, with ``w·|H|²`` formed once and each ``|ΔVs|²`` summed
    against it as a real dot product over (Re, Im) pairs — no complex transfer or
    density array is kept per generator.  ``w`` a list of weightings: one walk over
    the generators, [(stage, name, [power per weighting])]."""
    many = isinstance(w, list)
    chain, ac, ws = ev.chain, ev.ac, ev.ws
    out = ev.output
    s = (2j * np.pi * ev.f_hz)[None, :]
    h = ac.node_h.scaled(out)[:, 1:]          # with rows in the output's scale (long chains)
    h2 = h.real ** 2 + h.imag ** 2
    hw2s = [np.repeat(h2 * wk, 2, axis=1) for wk in (w if many else [w])]     # w·|H|² beside Re and Im
    n = max(h.shape[0], ev.samples)     # the transfer may be one row while a power varies per sample
    on_path, conv, in_band = _carried(ev, bandwidth)
    span = lambda x: x[:, 1:] if np.ndim(x) == 2 and np.shape(x)[1] > 1 else x  # noqa: E731
    res = []
    for st, name, g in _carried_generators(ev, on_path, s):
        if g.power_v2 is not None:
            if st.name == conv and np.any(np.asarray(g.power_v2) > 0):
                p = np.broadcast_to(np.ravel(np.asarray(g.power_v2, dtype=float)) * in_band, (n,))
                res.append((st.name, name, [p] * len(hw2s)))
            continue
        if not np.any(np.asarray(g.psd) != 0):
            continue
        if st.name in on_path:
            a_k, b_k, a, b = _rows_at(ac, st, out)
            dvs = _terms(((a_k, g.out_v), (b_k, g.out_i)), span, ws)
            dvs = _sub(dvs, _terms(((a, g.in_v), (b, g.in_i)), span, ws), ws)
        else:
            dvs = _sub(_terms(((ac.y_in[st.name], g.in_v),), span, ws), _terms(((1.0, g.in_i),), span, ws), ws)
            dvs = wsa.mul(wsa.mul(span(ac.row[st.parent][1]), ac.scale_between(st.parent, out)), dvs, ws)
        res.append((st.name, name, _weighted_powers(dvs, span(np.asarray(g.psd, dtype=float)), hw2s, n, ws)))
    return res if many else [(st, nm, p[0]) for st, nm, p in res]


def _rows_at(ac, st, out):
    """(A_k, B_k) at a stage's output and (a, b) at its input, carried rows expressed in the
    scale of the output node's row (the plain rows in short chains)."""
    k = ac.scale_between(st.name, out)
    a_k, b_k = (wsa.mul(x, k) for x in ac.row[st.name]) if st.name in ac.row else (0.0, 0.0)
    if st.name not in ac.branch_row:
        return a_k, b_k, 0.0, 0.0
    k = ac.scale_between(st.parent, out)
    a, b = (wsa.mul(x, k) for x in ac.branch_row[st.name])
    return a_k, b_k, a, b


def _terms(pairs, pick, ws):
    """Σ row·coef over the coefficients that are not all zero, on the columns ``pick`` keeps."""
    out = 0.0
    for r, c in pairs:
        if np.any(np.asarray(c) != 0):
            t = wsa.mul(pick(r), pick(c), ws)
            out = t if wsa.plain(out, 0.0) else wsa.add(out, t, ws)
    return out


def _sub(x, y, ws):
    """x − y, skipping a plain 0."""
    if wsa.plain(y, 0.0):
        return x
    return np.subtract(x, y, out=wsa.lend(ws, x, y))


def _weighted_powers(dvs, psd, hw2s, n, ws):
    """Σ_f psd·hw·|dvs|² per sample for each hw2 of ``hw2s`` (w·|H|² repeated beside Re
    and Im): |dvs|² formed once."""
    width = hw2s[0].shape[1]
    dvs = np.broadcast_to(np.asarray(dvs, dtype=complex), (n, width // 2))
    if dvs.strides[1] != dvs.itemsize:                               # (Re, Im) pairs must be adjacent
        dvs = np.ascontiguousarray(dvs)
    q = dvs.view(float)
    lend = (lambda shape: None) if ws is None else (lambda shape: ws.empty(shape, float))  # noqa: E731
    q2 = np.square(q, out=lend(q.shape))
    if np.ndim(psd) == 2 and np.shape(psd)[1] > 1:                   # a density with a 1/f corner
        psd2 = np.repeat(psd, 2, axis=1)
        return [_rowdot(q2, np.multiply(hw2, psd2, out=lend(np.broadcast_shapes(hw2.shape, psd2.shape))))
                for hw2 in hw2s]
    if np.ndim(psd):
        return [np.ravel(psd) * _rowdot(q2, hw2) for hw2 in hw2s]
    return [psd * _rowdot(q2, hw2) for hw2 in hw2s]


#: Σ_j x_ij·y_ij per row (numpy ≥ 2 has it built in)
_rowdot = getattr(np, "vecdot", lambda x, y: np.einsum("ij,ij->i", x, y))


def _combine(rows, coefs):
    """Σ row·coef over the coefficients that are not all zero."""
    return sum((r * c for r, c in zip(rows, coefs) if np.any(np.asarray(c) != 0)), 0.0)


def neglected_stages(ev: Evaluation) -> list:
    """Stages whose noise is not carried to the output: side branches beyond the
    stage that reads the signal path (a first side stage's input-side noise counts)."""
    chain = ev.chain
    on_path = {chain.source.name, *(st.name for st in chain.path_to(ev.output))}
    return [st.name for st in chain.stages if st.name not in on_path and st.parent not in on_path]


def noise_notes(ev: Evaluation) -> list:
    """Remarks a reader should see: stages with data-sheet noise fields left at zero."""
    notes = []
    on_path = {st.name for st in ev.chain.path_to(ev.output)}
    for st in ev.chain.stages:
        p = ev.params[st.name]
        if st.name in on_path and "en" in p and not np.any(p["en"]) and not np.any(p["in"]):
            notes.append(f"'{st.name}' has no en/in given: its {st.kind} counts as noiseless "
                         "(only its resistors add noise)")
    if "power" in ev.chain.extra:
        from .ripple import ripple_notes
        notes += ripple_notes(ev.chain)
    return notes


def span_notes(ev: Evaluation, margin_db: float = 20.0) -> list:
    """Without a declared band: a note when the response at f_stop is less than
    ``margin_db`` below the gain at f_ref (noise above the span would count)."""
    g = np.abs(ev.gain())
    with np.errstate(divide="ignore"):
        drop = 20.0 * np.log10(g[:, 0] / g[:, -1])
    if np.all(drop >= margin_db):
        return []
    return [f"the response at f_stop is only {float(np.min(drop)):.1f} dB below the gain at f_ref: noise "
            "beyond the span is not counted (widen f_stop or declare analysis.noise_band)"]


def sample_rate(chain, adc_name: str | None):
    """The ``f_sample`` of the named ADC stage (Hz), or None when it has none."""
    if adc_name is None:
        return None
    f = chain.stage(adc_name).params.get("f_sample")
    return None if f is None else float(f)


def converter(ev: Evaluation):
    """(name of the ADC reading the output node or None, full-scale span (S,) V)."""
    adc = next((st for st in ev.chain.readers(ev.output) if st.kind == "adc"), None)
    if adc is None:
        return None, None
    p = ev.params[adc.name]
    return adc.name, np.ravel(np.abs(np.asarray(p["fs_high"] - p["fs_low"], dtype=float)))


def _largest_sine(ev: Evaluation):
    """Peak of the largest sine the output node carries: the distance from its DC
    level to the nearer limit (converter full scale, swing limits), (S,)."""
    node = ev.output
    lo, hi = ev.dc.limits[node]
    dc = np.ravel(ev.dc.node_v[node])
    room = np.minimum(np.ravel(hi) - dc, dc - np.ravel(lo))
    return np.where(np.isfinite(room), np.maximum(room, 0.0), np.nan)


def _db(signal_rms, noise_rms):
    return 20.0 * np.log10(np.asarray(signal_rms, dtype=float) / noise_rms)


# -- integration ---------------------------------------------------------------

def integration_band(span, bandwidth_hz=None) -> tuple:
    """(low, high) of the integration band, clipped to the span; ValueError when
    the requested band misses the span."""
    lo, hi = float(span[0]), float(span[-1])
    if bandwidth_hz is None:
        return lo, hi
    if np.ndim(bandwidth_hz) == 0:
        b_lo, b_hi = lo, float(bandwidth_hz)
    else:
        b_lo, b_hi = (float(x) for x in bandwidth_hz)
    b_lo, b_hi = max(b_lo, lo), min(b_hi, hi)
    if not b_lo < b_hi:
        raise ValueError(f"the band {bandwidth_hz} lies outside the analysis span {lo:g} to {hi:g} Hz")
    return b_lo, b_hi


def band_weights(f_hz, lo, hi) -> np.ndarray:
    """Weights w with Σ w·y = ∫ y df over [lo, hi] for y linear between the grid
    points: the trapezoid rule (Press et al., *Numerical Recipes*, ch. 4, from
    memory), with band edges inside a segment cut exactly.  ``lo``/``hi`` may be
    column arrays (N, 1): one row of weights per band, (N, F)."""
    f = np.asarray(f_hz, dtype=float)
    f0, f1 = f[:-1], f[1:]
    a, b = np.clip(lo, f0, f1), np.clip(hi, f0, f1)
    h = f1 - f0
    int_t = 0.5 * (((b - f0) / h) ** 2 - ((a - f0) / h) ** 2) * h    # ∫ (f − f0)/h df over [a, b]
    w = np.zeros((*np.shape(a)[:-1], f.size))
    w[..., :-1] += (b - a) - int_t
    w[..., 1:] += int_t
    return w


# -- budget hook -----------------------------------------------------------------

def attach_to_budget(b: Budget) -> None:
    """Budget hook: noise rows in the summary, noise keys in --json."""
    from ..spec.numbers import figure
    r = analyse_noise(b.ev)
    f = lambda x: float(np.ravel(x)[0])  # noqa: E731
    rows = [("noise at the output (rms)", figure(f(r.out_vrms), "V")),
            ("noise referred to the input (rms)", figure(f(r.in_vrms), b.ev.signal_unit)),
            (f"output noise ÷ gain at {figure(b.chain.analysis.f_ref_hz, 'Hz')}",
             figure(f(r.out_over_gain_ref_vrms), b.ev.signal_unit)),
            ("SNR of the signal", _db_text(f(r.snr_db)))]
    if r.converter:
        rows += [("SNR of a full-scale sine", _db_text(f(r.snr_fs_db))),
                 ("ENOB", figure(f(r.enob_bits), "bits") + (" (capped at the converter's bits)"
                                                          if f(r.enob_capped) else ""))]
        rows += [("converter note", n) for n in r.notes if "½ LSB" in n or "folds into the band" in n]
    top = r.ranked[0] if r.ranked else None
    if top is not None and np.isfinite(f(r.shares[top])):
        rows.append(("largest noise contributor", f"{top} ({100 * f(r.shares[top]):.0f} %)"))
    if b.ev.chain.analysis.noise_band_hz is not None:
        rows.append(("noise band", f"{figure(r.band_hz[0], 'Hz')} to {figure(r.band_hz[1], 'Hz')}"))
    else:
        rows += [("noise note", n) for n in span_notes(b.ev)]
    b.extra_summary.extend(rows)
    b.extra_json.update(noise_json(r, brief=True))
    b.extra_json["noise_band_hz"] = [float(r.band_hz[0]), float(r.band_hz[1])]


def noise_json(r: NoiseResult, brief: bool = False) -> dict:
    """JSON keys of a noise result (first sample); ``brief``: the budget's subset."""
    f = lambda x: float(np.ravel(x)[0])  # noqa: E731
    d = {"noise_out_vrms": f(r.out_vrms), "noise_in_vrms": f(r.in_vrms),
         "noise_out_over_gain_ref_vrms": f(r.out_over_gain_ref_vrms), "noise_folded_vrms": f(r.folded_vrms),
         "enob_capped": bool(np.ravel(r.enob_capped)[0]), "snr_db": f(r.snr_db),
         "snr_fs_db": f(r.snr_fs_db), "dynamic_range_db": f(r.dynamic_range_db), "enob_bits": f(r.enob_bits),
         "contributors": [{"name": n, "stage": r.stage_of[n], "share": f(r.shares[n]), "vrms": f(r.vrms[n])}
                          for n in r.ranked]}
    if not brief:
        d.update({"output": r.output, "converter": r.converter,
                  "band_hz": [float(r.band_hz[0]), float(r.band_hz[1])],
                  "neglected": r.neglected, "notes": r.notes})
    return d


def _db_text(x: float) -> str:
    from ..spec.numbers import figure
    return "—" if not np.isfinite(x) else figure(float(x), "dB", signed=False, decimals=1)
