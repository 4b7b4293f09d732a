"""Anti-alias rejection at a sampling converter.

An ADC with a sample rate ``f_sample`` folds every input frequency ``f`` onto
``|f − k·f_sample|``; the lowest frequency that lands inside a band whose top
is ``f_high`` is ``f_sample − f_high`` (Nyquist–Shannon sampling, e.g. Oppenheim
& Schafer, *Discrete-Time Signal Processing*, ch. 4, from memory).  The
rejection there is how far the chain's gain has fallen below its gain at
f_ref::

    rejection(f) = 20·log10(|H(f_ref)| / |H(f)|)   dB, positive = attenuated

With ``analysis.noise_band`` declared the band of interest is that band, so
the figure that matters is the rejection at ``f_sample − f_high``; without it
the band is everything up to ``f_sample/2``, and the first alias frequency is
``f_sample/2`` itself.  Gains at these frequencies come from one extra AC pass
that reuses the operating points, exact whether or not they lie on the grid;
vectorised over samples.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from .cascade import run_ac
from ..spec.numbers import figure
from ..spec.units import fmt


@dataclass
class AliasCheck:
    adc: str                     # the converter reading the output node
    f_sample_hz: float
    f_hz: tuple                  # frequencies checked: f_sample/2 (and f_sample − band top)
    rejection_db: np.ndarray     # (S, len(f_hz)) dB below the gain at f_ref
    binding: int                 # index into f_hz of the first frequency folding into the band
    warnings: list = field(default_factory=list)

    @property
    def value_db(self) -> np.ndarray:
        """(S,) rejection at the first frequency that folds into the band of interest."""
        return self.rejection_db[:, self.binding]


def sampling_adc(chain, node: str | None = None):
    """The ADC with an ``f_sample`` that reads ``node`` (default: the output node), or None."""
    node = chain.output_node() if node is None else node
    return next((st for st in chain.readers(node) if st.kind == "adc" and "f_sample" in st.params), None)


def alias_check(ev) -> AliasCheck | None:
    """The rejection at the alias frequencies of the output's ADC (None without a sample rate)."""
    adc = sampling_adc(ev.chain, ev.output)
    if adc is None:
        return None
    fs = float(adc.params["f_sample"])
    a = ev.chain.analysis
    freqs, binding = [fs / 2.0], 0
    if a.noise_band_hz is not None and a.noise_band_hz[1] < fs / 2.0:
        freqs.append(fs - a.noise_band_hz[1])
        binding = 1
    grid = np.concatenate(([ev.f_hz[0]], freqs))
    ev_k = replace(ev, f_hz=grid, ac=run_ac(ev.chain, ev.params, ev.dc.ops, grid))
    g = np.abs(ev_k.gain())
    with np.errstate(divide="ignore"):
        rej = 20.0 * np.log10(g[:, :1] / g[:, 1:])
    warnings = []
    if a.f_stop_hz < fs / 2.0:
        warnings.append(f"f_stop ({fmt(a.f_stop_hz, 'Hz')}) is below f_sample/2 ({fmt(fs / 2, 'Hz')}): the "
                        "response between them, where signals fold back, is not checked (widen f_stop)")
    if a.noise_band_hz is not None and a.noise_band_hz[1] >= fs / 2.0:
        warnings.append(f"the noise band reaches f_sample/2 ({fmt(fs / 2, 'Hz')}): the converter aliases part of it")
    return AliasCheck(adc.name, fs, tuple(freqs), rej, binding, warnings)


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: anti-alias rejection rows in the summary, ``alias`` in --json."""
    chk = alias_check(b.ev)
    if chk is None:
        return
    names = ("f_sample/2", "f_sample − band top")
    for i, f in enumerate(chk.f_hz):
        rej = float(chk.rejection_db[0, i])
        b.extra_summary.append((f"anti-alias rejection at {names[i]} ({fmt(f, 'Hz')})",
                                figure(rej, "dB", signed=False, decimals=1)
                                + (" (louder there than at f_ref: no rejection)" if rej < -0.05 else "")))
    b.extra_summary.extend(("alias warning", w) for w in chk.warnings)
    b.extra_json["alias"] = {
        "adc": chk.adc, "f_sample_hz": chk.f_sample_hz, "rejection_db": float(chk.value_db[0]),
        "f_alias_hz": chk.f_hz[chk.binding],
        "checks": [{"f_hz": f, "rejection_db": float(chk.rejection_db[0, i])} for i, f in enumerate(chk.f_hz)],
        "warnings": chk.warnings}
