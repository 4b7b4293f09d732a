"""Step response of the whole chain from its frequency response: settling time
to a stated error and overshoot.

Method: the step response of a causal, real, stable network is the Fourier sine
integral of its frequency response (Papoulis, *The Fourier Integral and its
Applications*, ch. 10, from memory):

    s(t) = (2/π)·∫₀^∞ Re H(jω)·sin(ωt)/ω dω          (t > 0)

evaluated by Filon-type quadrature: the smooth factor is interpolated piecewise
linearly between the points of a logarithmic grid and integrated exactly against
the oscillating sin(ωt) (Filon, Proc. Roy. Soc. Edinburgh 49, 1928, from memory),
so the wide, strongly oscillating segments at high ω cost nothing in accuracy.
To keep the smooth factor finite at ω → 0, the response of a single pole with the
chain's DC gain H0, L(jω) = H0/(1 + jω/ω1) (step response H0·(1 − e^(−ω1·t)), exact),
is subtracted first:

    G(ω) = (Re H(jω) − H0·Re L(jω))/ω,  G(0) = 0,
    s(t) = H0·(1 − e^(−ω1·t)) + (2/π)·[−G_M·cos(ω_M·t)/t + Σ_j sin(ω_j·t)·(g_{j−1} − g_j)/t²]

with g_j the slope of G on segment j (g = 0 beyond the last point).  The result
is exact for the linear model up to the interpolation of G (second order in the
grid step) and the truncation above the grid's top, where |H| has fallen.  It is
one matrix product per chain, vectorised over samples.

Settling: the last time the response is further than ``error`` (relative) from its
final value — H0 for a DC-coupled chain; for an AC-coupled chain, whose step
response droops back to zero with the low corner, the mid-band gain at f_ref, with
the window ending where the droop alone (t/τ_low) would reach the error.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .cascade import run_ac

POINTS_PER_DECADE = 30        # the step's own grid
SPAN_PER_DECADE = 20          # the least density of the budget's grid the step reuses
TIME_POINTS = 200
DEFAULT_ERROR = 0.01


@dataclass
class StepResult:
    node: str
    t_s: np.ndarray            # (T,)
    response: np.ndarray       # (S, T) output per unit step of the source (V/V or V/A)
    final: np.ndarray          # (S,) the value it settles to
    dc_coupled: bool
    error: float
    settling_s: np.ndarray     # (S,) nan: not settled inside the window
    overshoot_pct: np.ndarray  # (S,)
    window_s: float
    notes: list


def step_range(f_high_hz, f_low_hz):
    """The band the sine integral needs: from a tenth of the low corner (AC-coupled: what
    lies below adds under (1/10)³·error within the window) or 10⁻³ of the upper edge
    (DC-coupled: the subtracted pole leaves G = O(ω) there) to 300× the upper edge."""
    lo = f_low_hz / 10.0 if np.isfinite(f_low_hz) else f_high_hz * 1e-3
    return lo, f_high_hz * 300.0


def _span_will_do(span, f_hi, f_lo) -> bool:
    """The budget's grid serves when it reaches the low corner (AC-coupled; what lies
    below adds about (f/f_low)·ω·t to the smooth part, under 10⁻³ within the window)
    or 10⁻² of the upper edge (DC-coupled), 100× beyond the upper edge, with at least
    SPAN_PER_DECADE points a decade (interpolation error of G well under 10⁻³)."""
    lo = f_lo if np.isfinite(f_lo) else f_hi * 1e-2
    dens = span.size / math.log10(span[-1] / span[0])
    return bool(span[0] <= lo and span[-1] >= 100 * f_hi and dens >= SPAN_PER_DECADE)


def step_grid(lo, hi):
    n = int(math.ceil(math.log10(hi / lo) * POINTS_PER_DECADE)) + 1
    return np.geomspace(lo, hi, n)


def sine_integral_step(f_hz, h, h0, w1, t):
    """The Filon sum above: step response at times t (T,) from H on the grid (S, F)."""
    w = 2 * np.pi * f_hz
    re_l = 1.0 / (1.0 + (w / w1) ** 2)
    g = (np.real(h) - h0[:, None] * re_l[None, :]) / w[None, :]
    wg = np.concatenate([[0.0], w])
    gg = np.concatenate([np.zeros((g.shape[0], 1)), g], axis=1)
    slope = np.diff(gg, axis=1) / np.diff(wg)[None, :]                 # (S, F) on segments 0..F-1
    d = slope - np.concatenate([slope[:, 1:], np.zeros((g.shape[0], 1))], axis=1)   # g_{j-1} − g_j at node j
    tt = t[:, None]
    with np.errstate(divide="ignore", invalid="ignore"):
        kern = np.sin(w[None, :] * tt) / tt ** 2                          # (T, F)
        tail = -g[:, -1:] * np.cos(w[-1] * t)[None, :] / t[None, :]
    s = h0[:, None] * (1.0 - np.exp(-w1 * t))[None, :] + (2 / np.pi) * (d @ kern.T + tail)
    return np.where(t[None, :] > 0, s, 0.0)


def _time_scale(ev, node: str) -> tuple[float, float]:
    """(f_low, f_high) that set the time window and the frequency grid: the band edges of
    the chain as specified (nominal parts, its own temperature), so that every sample of a
    tolerance run is integrated on the same grid whatever the other samples of its chunk
    (a sample's settling time must not depend on the chunk size or the workers)."""
    if any(np.ndim(v) for p in ev.params.values() for v in p.values()):   # drawn or swept values
        from .budget import evaluate
        ev = evaluate(ev.chain, f_hz=ev.f_hz)
    lo_e, hi_e = (np.ravel(x) for x in ev.band_edges(node))
    f_hi = float(hi_e[0]) if np.isfinite(hi_e[0]) else np.nan
    f_lo = float(lo_e[0]) if np.isfinite(lo_e[0]) else np.nan
    return f_lo, f_hi


def analyse_step(ev, node: str | None = None, error: float = DEFAULT_ERROR) -> StepResult | None:
    chain = ev.chain
    node = node or ev.output
    f_lo, f_hi = _time_scale(ev, node)
    if not np.isfinite(f_hi):
        return None                     # no upper edge in the span: nothing sets the time scale
    lo, hi = step_range(f_hi, f_lo)
    span = ev.f_hz[1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        if _span_will_do(span, f_hi, f_lo):
            keep = np.nonzero((span >= lo) & (span <= hi))[0]      # the budget's own grid is fine enough
            f = span[keep]
            h = np.asarray(ev.gain(node))[:, 1:][:, keep]
            h0 = run_ac(chain, ev.params, ev.dc.ops, np.array([lo * 1e-3])).node_h[node][:, 0]
        else:
            f = step_grid(lo, hi)
            h_all = run_ac(chain, ev.params, ev.dc.ops, np.concatenate(([lo * 1e-3], f))).node_h[node]
            h0, h = h_all[:, 0], h_all[:, 1:]
    h0 = np.nan_to_num(np.real(h0))            # H0: far below the grid (0 for an AC-coupled chain)
    h = np.broadcast_to(h, (ev.samples, f.size))
    h0 = np.broadcast_to(h0, (ev.samples,))
    href = ev.gain(node)[:, 0]
    dc = bool(np.all(np.abs(h0) >= 0.5 * np.abs(href)))
    notes = []
    if dc:
        final = h0
        window = 40.0 / (2 * np.pi * f_hi)
    else:
        final = np.abs(href) * np.sign(np.real(href))
        tau_low = 1.0 / (2 * np.pi * f_lo) if np.isfinite(f_lo) else np.inf
        window = min(40.0 / (2 * np.pi * f_hi), error * tau_low)
        from ..spec.units import fmt
        notes.append(f"AC-coupled: settling is to the mid-band gain; the low corner's droop reaches "
                     f"{error * 100:g} % after {fmt(error * tau_low, 's')}, which ends the window")
    t = np.linspace(0.0, window, TIME_POINTS + 1)[1:]
    w1 = 2 * np.pi * f_hi
    resp = sine_integral_step(f, h, h0, w1, t)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = (resp - final[:, None]) / np.abs(final[:, None])
    out = np.abs(rel) > error
    last = resp.shape[1] - 1 - np.argmax(out[:, ::-1], axis=1)
    settled = ~out[:, -1]
    t_set = np.where(settled, np.where(out.any(axis=1), t[np.minimum(last + 1, len(t) - 1)], t[0]), np.nan)
    sgn = np.sign(final)[:, None]
    over = np.maximum(np.max(resp * sgn, axis=1) / np.abs(final) - 1.0, 0.0) * 100.0
    if not settled.all():
        notes.append(f"not settled to {error:.1%} within {window:.3g} s in {int((~settled).sum())} sample(s)")
    return StepResult(node, t, resp, final, dc, error, t_set, over, window, notes)


def summary_rows(r: StepResult) -> list:
    from ..spec.units import fmt
    ts = float(r.settling_s[0])
    err = f"{r.error * 100:g} %"
    head = (f"within {err} after {fmt(ts, 's')}" if np.isfinite(ts)
            else f"not within {err} inside {fmt(r.window_s, 's')}")
    return [("step response", f"{head}, overshoot {float(r.overshoot_pct[0]):.1f} %")] + \
        [("  note step", n) for n in r.notes if not n.startswith("not settled")]


def attach_to_budget(b) -> None:
    """BUDGET_HOOKS entry: settling and overshoot in the summary, ``step`` in JSON."""
    r = analyse_step(b.ev)
    if r is None:
        return
    b.extra_summary.extend(summary_rows(r))
    ts = float(r.settling_s[0])
    b.extra_json["step"] = {"node": r.node, "error": r.error, "settling_s": ts if np.isfinite(ts) else None,
                            "overshoot_pct": float(r.overshoot_pct[0]), "final": float(r.final[0]),
                            "dc_coupled": r.dc_coupled, "window_s": r.window_s, "notes": r.notes}
