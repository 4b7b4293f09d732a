"""Figures of a budget: the level diagram, gain over frequency, the loop gains and
the step response, noise, and Monte Carlo histograms.  Each function reads only result objects (``Budget``,
``NoiseResult``, ``McResult``) and returns a matplotlib ``Figure``;
:func:`save` writes PNG and SVG all-or-nothing.  matplotlib is imported inside
the functions (never at CLI start-up) and drawn with the Agg canvas.

Visual language of the level diagram (one column per stage, in chain order):

* pale green bar — the allowed range at the node (the limits of the stage that
  drives it and of every stage that reads it); a dark green rule marks each
  finite limit, an open end says "no limit";
* blue bar — the signal band, DC ± peak at the reference frequency; amber when
  it is the tightest node, red when it clips (the part beyond the limit hatched);
* black tick — the DC level;
* a double arrow from the band to the nearer limit, labelled with the headroom;
* the strip underneath — one arrow per interface, labelled with its loading loss
  (grey when negligible, amber from −0.1 dB, red from −1 dB).
"""
from __future__ import annotations

import io
import math
import textwrap

import numpy as np

from ..engine.budget import Budget
from ..spec.numbers import figure
from ..spec.numbers import loss as loss_text
from .console import interface_cell
from ..spec.units import fmt
from ..spec.safety import safety_notice

ROOM, ROOM_EDGE, LIMIT = "#dcefdc", "#8cc48c", "#2e7d32"
BAND, TIGHT, CLIP = "#2f6db5", "#e69500", "#c62828"
QUIET = "#7a7a7a"
#: loading losses at or below these (dB) are coloured amber and red
LOSS_AMBER_DB, LOSS_RED_DB = 0.1, 1.0      # dB lost


def _figure(w, h):
    from matplotlib.figure import Figure
    fig = Figure(figsize=(w, h), dpi=110)
    return fig


def _minus(text: str) -> str:
    return text.replace("-", "−")


def _db(x: float, digits: int = 2) -> str:
    return _minus(f"{x:+.{digits}f} dB")


def _finish(fig, chain, bottom: float = 0.0) -> None:
    """Footer: the chain's file, and the safety caution for a hazardous chain."""
    note = safety_notice(chain.hazards)
    y = 0.008
    if note:
        wrap = max(60, int(fig.get_figwidth() * 15))
        fig.text(0.012, y, "\n".join(textwrap.wrap(note, wrap)), fontsize=7.2, color=CLIP, va="bottom",
                 ha="left", weight="bold", gid="safety")
    fig.text(0.012, 0.995, f"chainplan · {chain.path or chain.name}", fontsize=7, color=QUIET, ha="left",
             va="top")


def _title(fig, text: str) -> None:
    fig.text(0.012, 0.962, text, fontsize=10.5, weight="bold", va="top", ha="left", gid="title")


def _caution_margin(fig, chain) -> float:
    """Fraction of the figure height the caution text needs at the bottom."""
    if not chain.hazards:
        return 0.0
    lines = len(textwrap.wrap(safety_notice(chain.hazards), max(60, int(fig.get_figwidth() * 15))))
    return (lines * 0.125 + 0.08) / fig.get_figheight()


# -- level diagram -------------------------------------------------------------

def level_diagram(b: Budget):
    """DC level, signal band, limits and headroom at every node; loading loss at every interface."""
    chain = b.chain
    cols = chain.all_stages
    x_of = {st.name: i for i, st in enumerate(cols)}
    nodes = {n.name: n for n in b.nodes}
    tight = b.tightest_node
    fig = _figure(max(7.5, 1.3 * len(cols) + 1.8), 6.4)
    margin = _caution_margin(fig, chain)
    gs = fig.add_gridspec(2, 1, height_ratios=[4.2, 1.0], hspace=0.05, left=0.09, right=0.98,
                          top=0.88, bottom=0.11 + margin)
    ax, strip = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])

    # y range from every finite figure
    vals = [v for n in b.nodes for v in (n.dc_v - n.peak_v, n.dc_v + n.peak_v, n.low_v, n.high_v)
            if math.isfinite(v)]
    lo_y, hi_y = min(vals), max(vals)
    pad = 0.10 * (hi_y - lo_y) if hi_y > lo_y else 0.5
    y0, y1 = lo_y - pad, hi_y + 1.6 * pad
    ax.set_ylim(y0, y1)
    ax.set_xlim(-0.6, len(cols) - 0.4)

    dc_x, dc_y = [], []
    for st in cols:
        x = x_of[st.name]
        if st.role == "load":
            _load_column(ax, b, st, x, nodes[st.parent], y0, y1)
            continue
        n = nodes[st.name]
        lo = n.low_v if math.isfinite(n.low_v) else y0
        hi = n.high_v if math.isfinite(n.high_v) else y1
        unlimited = not (math.isfinite(n.low_v) or math.isfinite(n.high_v))
        ax.bar(x, hi - lo, bottom=lo, width=0.62, color="white" if unlimited else ROOM,
               edgecolor=QUIET if unlimited else ROOM_EDGE, ls="--" if unlimited else "-", lw=0.8, zorder=1,
               gid=f"room:{n.name}")
        for lim, end in ((n.low_v, y0), (n.high_v, y1)):
            if math.isfinite(lim):
                ax.plot([x - 0.31, x + 0.31], [lim, lim], color=LIMIT, lw=2.2, zorder=3, gid=f"limit:{n.name}")
            else:
                ax.text(x, end + (0.01 if end == y0 else -0.01) * (y1 - y0), "no limit", fontsize=7,
                        color=QUIET, style="italic", ha="center", va="bottom" if end == y0 else "top")
        colour = CLIP if n.clips else (TIGHT if n is tight else BAND)
        ax.bar(x, 2 * n.peak_v, bottom=n.dc_v - n.peak_v, width=0.2, color=colour, zorder=4,
               gid=f"band:{n.name}")
        if n.clips:
            for a, c in ((n.high_v, n.dc_v + n.peak_v), (n.dc_v - n.peak_v, n.low_v)):
                if math.isfinite(a) and c > a:
                    ax.bar(x, c - a, bottom=a, width=0.34, color="none", edgecolor=CLIP, hatch="////",
                           lw=1.0, zorder=5)
        ax.text(x - 0.13, n.dc_v + n.peak_v, f"±{fmt(n.peak_v, 'V')}", fontsize=7, color=colour, ha="right",
                va="bottom", zorder=8, gid=f"peak:{n.name}")
        if st.role == "source":
            emf, unit = float(np.ravel(b.ev.params[st.name]["amplitude"])[0]), b.ev.signal_unit
            ax.text(x + 0.13, n.dc_v - n.peak_v, f"{'EMF' if unit == 'V' else 'current'} ±{fmt(emf, unit)}",
                    fontsize=7, color=QUIET,
                    ha="left", va="top", zorder=8)
        dc_x.append(x)
        dc_y.append(n.dc_v)
        _headroom_arrow(ax, n, x, colour, n is tight)
    ax.plot(dc_x, dc_y, ls="none", marker="_", ms=26, mew=2.2, color="black", zorder=6, label="DC level",
            gid="dc")

    ax.set_xticks(range(len(cols)))
    ax.set_xticklabels([])
    ax.set_ylabel("volts")
    ax.grid(axis="y", color="#e6e6e6", lw=0.6, zorder=0)
    _title(fig, f"{chain.name}: levels at {fmt(chain.analysis.f_ref_hz, 'Hz')} — where the signal is squeezed")
    _level_legend(ax)
    _interface_strip(strip, b, x_of, len(cols))
    _finish(fig, chain)
    return fig


def _load_column(ax, b, st, x, node, y0, y1):
    """A load reads its node: show its own input range (an ADC's full scale) and the band it receives."""
    lo, hi = b.ev.dc.ops[st.name].in_range
    lo, hi = float(np.ravel(lo)[0]), float(np.ravel(hi)[0])
    if math.isfinite(lo) or math.isfinite(hi):
        a, c = (lo if math.isfinite(lo) else y0), (hi if math.isfinite(hi) else y1)
        ax.bar(x, c - a, bottom=a, width=0.62, color="#eeeeee", edgecolor="#b0b0b0", lw=0.8, zorder=1,
               gid=f"range:{st.name}")
        ax.text(x, c, "full scale" if st.kind == "adc" else "range", fontsize=7, color=QUIET,
                ha="center", va="bottom")
    ax.bar(x, 2 * node.peak_v, bottom=node.dc_v - node.peak_v, width=0.2, color=BAND, alpha=0.45, zorder=4)


def _headroom_arrow(ax, n, x, colour, tight):
    """Double arrow from the band's extreme to the nearer limit, labelled with the headroom."""
    up = n.high_v - (n.dc_v + n.peak_v)
    down = (n.dc_v - n.peak_v) - n.low_v
    if not (math.isfinite(up) or math.isfinite(down)):
        return
    if up <= down:
        a, c, va = n.dc_v + n.peak_v, n.high_v, "bottom"
    else:
        a, c, va = n.dc_v - n.peak_v, n.low_v, "top"
    if not n.clips:
        ax.annotate("", xy=(x + 0.2, c), xytext=(x + 0.2, a),
                    arrowprops=dict(arrowstyle="<->", color=colour, lw=1.1, shrinkA=0, shrinkB=0), zorder=7)
    label = fmt(n.headroom_v, "V")
    if n.clips:
        label = f"CLIPS\n{label}"
    elif tight:
        label = f"tightest\n{label}"
    ax.text(x + 0.24, (a + c) / 2, label, fontsize=7.5, color=colour, va="center", ha="left",
            weight="bold" if (tight or n.clips) else "normal", zorder=8, gid=f"headroom:{n.name}")


def _level_legend(ax):
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    handles = [Patch(facecolor=ROOM, edgecolor=ROOM_EDGE, label="allowed range"),
               Line2D([], [], color=LIMIT, lw=2.2, label="limit"),
               Patch(facecolor=BAND, label="signal: DC ± peak"),
               Line2D([], [], ls="none", marker="_", ms=14, mew=2.2, color="black", label="DC level"),
               Patch(facecolor=TIGHT, label="tightest node"),
               Patch(facecolor=CLIP, label="clips")]
    ax.legend(handles=handles, loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=6, fontsize=7.5,
              frameon=False, borderaxespad=0.2, handlelength=1.4, columnspacing=1.0)


def _interface_strip(ax, b, x_of, ncols):
    """One arrow per interface with its loading loss; fan-out branches on lanes of their own."""
    worst = b.worst_interface
    lanes: dict[str, int] = {}
    for r in b.interfaces:
        lane = lanes.get(r.source, 0)
        lanes[r.source] = lane + 1
        x0, x1 = x_of[r.source], x_of[r.to]
        y = -lane
        loss = r.loss_db if r.loading else 0.0       # a virtual-ground input: a transfer, not a loss
        colour = CLIP if loss >= LOSS_RED_DB else TIGHT if loss >= LOSS_AMBER_DB else QUIET
        ax.annotate("", xy=(x1 - 0.22, y), xytext=(x0 + 0.22, y),
                    arrowprops=dict(arrowstyle="-|>", color=colour, lw=1.3, shrinkA=0, shrinkB=0))
        text = loss_text(loss, 2) if r.loading else interface_cell(r).replace(" transfer", "")
        if r is worst and loss >= LOSS_AMBER_DB:
            text += "  worst"
        ax.text((x0 + x1) / 2, y + 0.12, text, fontsize=8, color=colour, ha="center", va="bottom",
                weight="bold" if r is worst and loss >= LOSS_AMBER_DB else "normal", gid=f"loss:{r.source}>{r.to}")
    depth = max(lanes.values(), default=1)
    ax.set_ylim(-depth + 0.4, 0.75)
    ax.set_xlim(-0.6, ncols - 0.4)
    ax.set_yticks([])
    ax.set_xticks(range(ncols))
    ax.set_xticklabels([f"{st.name}\n{st.kind}" for st in b.chain.all_stages], fontsize=8.5)
    for lbl in ax.get_xticklabels():
        lbl.set_linespacing(1.5)
    for side in ("top", "right", "left"):
        ax.spines[side].set_visible(False)
    ax.text(-0.58, 0.7, "loading loss at each interface", fontsize=7.5, color=QUIET, va="top")


# -- gain over frequency -----------------------------------------------------------

def gain_plot(b: Budget):
    """|V(node)/Vs| in dB over the span at every node (the output bold), and the output's phase."""
    chain, ev = b.chain, b.ev
    f = ev.span
    fig = _figure(8.0, 6.0)
    margin = _caution_margin(fig, chain)
    gs = fig.add_gridspec(2, 1, height_ratios=[3, 1.2], hspace=0.08, left=0.12, right=0.78, top=0.89,
                          bottom=0.09 + margin)
    ax, axp = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
    tops = []
    for node in chain.nodes:
        h = np.asarray(ev.gain(node))[0, 1:]
        g_db = 20 * np.log10(np.maximum(np.abs(h), 1e-300))
        is_out = node == b.output
        ax.semilogx(f, g_db, lw=2.4 if is_out else 1.0, color="black" if is_out else None,
                    label=f"{node} (output)" if is_out else node, zorder=3 if is_out else 2, gid=f"gain:{node}")
        tops.append(np.max(g_db))
    top = max(tops)
    at_ref = min(20 * np.log10(max(abs(complex(np.ravel(ev.gain(n))[0])), 1e-300)) for n in chain.nodes)
    ax.set_ylim(max(min(at_ref, b.gain_db, top) - 40, top - 140), top + 8)
    ax.axvline(chain.analysis.f_ref_hz, color=QUIET, ls=":", lw=1)
    ax.text(chain.analysis.f_ref_hz * 1.08, top + 6, f"f_ref {fmt(chain.analysis.f_ref_hz, 'Hz')}", fontsize=7.5,
            color=QUIET, va="top")
    ax.axhline(b.gain_db - 3.0103, color=CLIP, ls=":", lw=0.8)
    ax.text(f[-1] / 1.08, b.gain_db - 3.0103, "−3 dB", fontsize=7.5, color=CLIP, ha="right", va="bottom")
    for edge, name in ((b.f_low_hz, "f_low"), (b.f_high_hz, "f_high")):
        if edge:
            ax.axvline(edge, color=CLIP, ls="--", lw=1, gid=f"edge:{name}")
            ax.text(edge * 1.12, ax.get_ylim()[0], f"{name} {fmt(edge, 'Hz')}", fontsize=7.5, color=CLIP,
                    va="bottom", ha="left", rotation=90)
    ax.set_ylabel("gain V(node)/Vs, dB" if b.gain_unit == "dB" else "transimpedance V(node)/Is, dBΩ")
    ax.grid(which="both", color="#e6e6e6", lw=0.6)
    ax.tick_params(labelbottom=False)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8, frameon=False)
    _title(fig, f"{chain.name}: gain to every node; end-to-end {_db(b.gain_db)}{b.gain_unit[2:]} at "
                f"{fmt(chain.analysis.f_ref_hz, 'Hz')}")
    h_out = np.asarray(ev.gain(b.output))[0, 1:]
    axp.semilogx(f, np.degrees(np.unwrap(np.angle(h_out))), color="black", lw=1.4, gid="phase")
    axp.set_ylabel("phase at\noutput, °")
    axp.set_xlabel("frequency, Hz")
    axp.grid(which="both", color="#e6e6e6", lw=0.6)
    axp.set_xlim(f[0], f[-1])
    ax.set_xlim(f[0], f[-1])
    _finish(fig, chain)
    return fig


# -- dynamics: loop gain and step response ----------------------------------------

def dynamics_plot(b: Budget, loops=None, step=None):
    """Left: the loop gain |T| and ∠T of every op-amp stage as connected, the crossover
    and the phase margin marked; right: the chain's step response at the output with
    its settling band and time.  None when there is neither a loop nor a step response."""
    from ..engine.loop import analyse_loops
    from ..engine.step import analyse_step
    chain = b.chain
    loops = [r for r in (analyse_loops(b.ev) if loops is None else loops) if r.is_loop]
    step = analyse_step(b.ev) if step is None else step
    if not loops and step is None:
        return None
    fig = _figure(11.0, 5.6)
    margin = _caution_margin(fig, chain)
    gs = fig.add_gridspec(2, 2, height_ratios=[2, 1.2], width_ratios=[1.25, 1], hspace=0.1, wspace=0.28,
                          left=0.075, right=0.98, top=0.86, bottom=0.1 + margin)
    ax, axp = fig.add_subplot(gs[0, 0]), fig.add_subplot(gs[1, 0])
    if loops:
        for r in loops:
            t = r.t[0]
            mag = 20 * np.log10(np.maximum(np.abs(t), 1e-300))
            ph = np.degrees(np.unwrap(np.angle(t)))
            ph = ph - 360.0 * np.round(ph[0] / 360.0)
            line, = ax.semilogx(r.f_hz, mag, lw=1.4, label=r.stage, gid=f"loop:{r.stage}")
            axp.semilogx(r.f_hz, ph, lw=1.2, color=line.get_color(), gid=f"loop-phase:{r.stage}")
            fc, pm = float(r.f_cross_hz[0]), float(r.pm_deg[0])
            if math.isfinite(fc) and math.isfinite(pm):
                ax.axvline(fc, color=line.get_color(), ls=":", lw=0.9)
                axp.vlines(fc, -180.0, pm - 180.0, color=CLIP if pm < 45 else line.get_color(), lw=2.2,
                           gid=f"margin:{r.stage}")
                axp.text(fc * 1.1, pm - 180.0 - 4, f"PM {pm:.0f}°", fontsize=7.5, va="top",
                         color=CLIP if pm < 45 else line.get_color())
        ax.axhline(0.0, color=QUIET, lw=0.8)
        axp.axhline(-180.0, color=CLIP, ls="--", lw=0.8)
        f_lo = min(r.f_hz[0] for r in loops)
        f_hi = max(r.f_hz[-1] for r in loops)
        ax.set_xlim(f_lo, f_hi)
        axp.set_xlim(f_lo, f_hi)
        top = max(float(np.max(20 * np.log10(np.abs(r.t[0])))) for r in loops)
        ax.set_ylim(-40, max(top, 20) + 5)
        ax.legend(loc="upper right", fontsize=8, frameon=False)
        ax.set_ylabel("loop gain |T|, dB")
        axp.set_ylabel("∠T, °")
        axp.set_xlabel("frequency, Hz")
        ax.tick_params(labelbottom=False)
        for a in (ax, axp):
            a.grid(which="both", color="#e6e6e6", lw=0.6)
    else:
        ax.text(0.5, 0.5, "no op-amp loop in this chain", ha="center", va="center", transform=ax.transAxes,
                color=QUIET)
        ax.set_axis_off()
        axp.set_axis_off()
    axs = fig.add_subplot(gs[:, 1])
    if step is not None:
        t, y = np.concatenate([[0.0], step.t_s]), np.concatenate([[0.0], step.response[0]])
        fin = float(step.final[0])
        unit = "s"
        axs.plot(t * 1e6, y / fin if fin else y, color="black", lw=1.5, gid="step")
        axs.axhspan(1 - step.error, 1 + step.error, color=ROOM, lw=0)
        ts = float(step.settling_s[0])
        if math.isfinite(ts):
            axs.axvline(ts * 1e6, color=LIMIT, ls="--", lw=1, gid="settling")
            axs.text(ts * 1e6, 0.5, f" within {step.error * 100:g} %\n after {fmt(ts, unit)}", fontsize=7.5,
                     color=LIMIT, va="center", ha="left")
        axs.set_xlabel("time after a step of the source, µs")
        axs.set_ylabel("output / final value" + ("" if step.dc_coupled else " (mid-band gain)"))
        axs.grid(color="#e6e6e6", lw=0.6)
        axs.set_xlim(0, t[-1] * 1e6)
    else:
        axs.text(0.5, 0.5, "no upper band edge in the span: no step time scale", ha="center", va="center",
                 transform=axs.transAxes, color=QUIET)
        axs.set_axis_off()
    _title(fig, f"{chain.name}: loop gain of every op-amp stage as connected, and the step response at "
                f"'{b.output}'")
    _finish(fig, chain)
    return fig


# -- noise ---------------------------------------------------------------------

def noise_plot(nr, chain, top: int = 6):
    """Output noise density (total and the largest contributors) and each
    contributor's share of the output noise power, from a ``chainplan.engine.noise.NoiseResult``."""
    fig = _figure(10.0, 5.0)
    margin = _caution_margin(fig, chain)
    gs = fig.add_gridspec(1, 2, width_ratios=[1.6, 1.0], wspace=0.55, left=0.08, right=0.97, top=0.86,
                          bottom=0.12 + margin)
    ax, axs = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
    f = np.asarray(nr.f_hz)
    total = np.asarray(nr.out_density)[0]
    ax.loglog(f, total, color="black", lw=2.2, label="total", gid="noise:total")
    shares = sorted(((name, float(np.ravel(s)[0])) for name, s in nr.shares.items()), key=lambda t: -t[1])
    psd = dict(nr.contributors)
    for name, _ in shares[:top]:
        ax.loglog(f, np.sqrt(np.maximum(np.asarray(psd[name])[0], 0.0)), lw=1.0, label=name,
                  gid=f"noise:{name}")
    ax.set_xlabel("frequency, Hz")
    ax.set_ylabel("output noise density, V/√Hz")
    ax.grid(which="both", color="#e6e6e6", lw=0.6)
    ax.legend(fontsize=7.5, frameon=False)
    ax.set_ylim(max(total.max() * 1e-4, ax.get_ylim()[0]), None)
    names = [n for n, _ in shares][::-1]
    vals = [100 * v for _, v in shares][::-1]
    axs.barh(names, vals, color=BAND, gid="shares")
    for i, v in enumerate(vals):
        axs.text(v + 1.5, i, f"{v:.1f} %", va="center", fontsize=7.5)
    axs.set_xlabel("share of output noise power, %")
    axs.set_xlim(0, 115)
    axs.tick_params(axis="y", labelsize=8)
    first = lambda x: float(np.ravel(x)[0])  # noqa: E731
    _title(fig, f"{chain.name}: noise — {fmt(first(nr.out_vrms), 'V')} rms at the output, "
                f"{fmt(first(nr.in_vrms), 'V')} rms at the input, SNR {first(nr.snr_db):.1f} dB, "
                f"ENOB {first(nr.enob_bits):.2f} bits")
    _finish(fig, chain)
    return fig


# -- Monte Carlo -----------------------------------------------------------------

def _ci(mc, y) -> str:
    """The 95 % Wilson interval of a yield, e.g. '98.7 to 100.0 %' ('—' without units)."""
    lo, hi = mc.interval(y) if hasattr(mc, "interval") else (math.nan, math.nan)
    return "—" if not math.isfinite(lo) else f"{100 * lo:.1f} to {100 * hi:.1f} %"


def montecarlo_plot(mc, nominal: dict | None = None, max_panels: int = 9):
    """Histograms of every requirement's value with its limit (the failing side shaded)
    and yield — or, without requirements, of the main metrics — from a
    ``chainplan.studies.montecarlo.McResult``; ``nominal`` (name -> value) adds the nominal design."""
    from ..studies.requirements import show
    nominal = nominal or {}
    panels = [(r.name, r.name, np.asarray(r.value), r.limit, r.unit, r.sense, mc.yield_of(r))
              for r in mc.requirements]
    if not panels:
        from ..studies.montecarlo import metric_info
        for key in ("gain_db", "f_low_hz", "f_high_hz", "power_w", "snr_db", "enob_bits"):
            if key in mc.metrics:
                label, unit, _ = metric_info(mc.chain, key)
                panels.append((key, label, np.asarray(mc.metrics[key]), None, unit, None, None))
    panels = [p for p in panels if np.isfinite(p[2][mc.valid]).any()][:max_panels]
    ncol = min(3, max(1, len(panels)))
    nrow = max(1, math.ceil(len(panels) / ncol))
    fig = _figure(4.0 * ncol, 2.5 * nrow + 1.1)
    margin = _caution_margin(fig, mc.chain)
    gs = fig.add_gridspec(nrow, ncol, hspace=0.6, wspace=0.3, left=0.07, right=0.97,
                          top=1 - 0.8 / fig.get_figheight(), bottom=0.5 / fig.get_figheight() + margin)
    for i, (name, label, v, limit, unit, sense, yld) in enumerate(panels):
        ax = fig.add_subplot(gs[i // ncol, i % ncol])
        data = v[mc.valid & np.isfinite(v)]
        ax.hist(data, bins=40, color=BAND, alpha=0.85, gid=f"hist:{name}")
        if limit is not None and math.isfinite(limit):
            ax.axvline(limit, color=CLIP, ls="--", lw=1.4, gid=f"limit:{name}")
            lo, hi = ax.get_xlim()
            ax.axvspan(lo if sense == "min" else limit, limit if sense == "min" else hi, color=CLIP, alpha=0.08)
            ax.set_xlim(lo, hi)
        if name in nominal and math.isfinite(nominal[name]):
            ax.axvline(nominal[name], color="black", lw=1.2, gid=f"nominal:{name}")
        head = label if yld is None else f"{label}: yield {100 * yld:.1f} % ({_ci(mc, yld)})"
        ax.set_title(head, fontsize=8.5, loc="left", color=CLIP if (yld is not None and yld < 1) else "black")
        axis = unit + (f" · limit {show(limit, unit)}" if limit is not None else "")
        ax.set_xlabel(axis + (" · black line: nominal" if name in nominal else ""), fontsize=7.5)
        ax.tick_params(labelsize=7)
    if not panels:
        fig.text(0.5, 0.5, "no finite values to show", ha="center")
    _title(fig, f"{mc.chain.name}: Monte Carlo, {mc.samples} units (seed {mc.seed}), production yield "
                f"{100 * mc.yield_all:.1f} % (95 % interval {_ci(mc, mc.yield_all)})")
    _finish(fig, mc.chain)
    return fig


# -- writing ---------------------------------------------------------------------

# -- a comparison of two revisions -------------------------------------------------

def comparison_plot(old: Budget, new: Budget, noise_old=None, noise_new=None, labels=("before", "after")):
    """Before and after overlaid: the end-to-end gain over frequency and, when the noise
    analysis exists, the output noise density (``chainplan compare`` in a picture)."""
    panels = 2 if noise_old is not None and noise_new is not None else 1
    hazardous = old.chain if old.chain.hazards and not new.chain.hazards else new.chain
    fig = _figure(8.0, 3.4 * panels + 1.0)
    margin = _caution_margin(fig, hazardous)
    gs = fig.add_gridspec(panels, 1, hspace=0.3, left=0.12, right=0.97, top=0.88, bottom=0.1 + margin)
    ax = fig.add_subplot(gs[0])
    for b, lab, style in ((old, labels[0], dict(color=QUIET, ls="--", lw=1.6)),
                          (new, labels[1], dict(color="black", lw=1.8))):
        h = np.asarray(b.ev.gain(b.output))[0, 1:]
        ax.semilogx(b.ev.span, 20 * np.log10(np.maximum(np.abs(h), 1e-300)), label=f"{lab}: {_db(b.gain_db)}"
                    f"{b.gain_unit[2:]} at f_ref", gid=f"compare:gain:{'old' if b is old else 'new'}", **style)
    ax.set_ylabel("gain to the output, dB" if new.gain_unit == "dB" else "transimpedance, dBΩ")
    ax.grid(which="both", color="#e6e6e6", lw=0.6)
    ax.legend(loc="lower center", fontsize=8, frameon=False)
    if panels == 2:
        axn = fig.add_subplot(gs[1], sharex=ax)
        for nr, lab, style in ((noise_old, labels[0], dict(color=QUIET, ls="--", lw=1.6)),
                               (noise_new, labels[1], dict(color="black", lw=1.8))):
            axn.loglog(np.asarray(nr.f_hz), np.asarray(nr.out_density)[0],
                       label=f"{lab}: {fmt(float(np.ravel(nr.out_vrms)[0]), 'V')} rms",
                       gid=f"compare:noise:{'old' if nr is noise_old else 'new'}", **style)
        axn.set_ylabel("output noise density, V/√Hz")
        axn.grid(which="both", color="#e6e6e6", lw=0.6)
        axn.legend(loc="upper right", fontsize=8, frameon=False)
        axn.set_xlabel("frequency, Hz")
    else:
        ax.set_xlabel("frequency, Hz")
    _title(fig, f"{new.chain.name}: before (dashed) and after (solid)")
    _finish(fig, hazardous)
    return fig


# -- buffer advice -------------------------------------------------------------------

GIVEN_BACK = "#2e7d32"          # what the pick gives back
NOT_PICKED = "#a5d6a7"          # what the best usable candidate would give back, not worth a part


def advice_strip(a):
    """The buffer advice as a picture: the chain as a strip of stages, and at each interface its
    loading loss now (red bar, dB lost) beside what the advised buffer gives back (green bar, dB:
    solid for the pick, pale for the best usable candidate where none is worth a part), labelled
    with the candidate and the verdict.  Reads a ``chainplan.placement.advisor.Advice`` only."""
    chain = a.chain
    cols = chain.all_stages
    x_of = {st.name: i for i, st in enumerate(cols)}
    fig = _figure(max(7.5, 1.6 * len(cols) + 1.8), 5.4)
    margin = _caution_margin(fig, chain)
    gs = fig.add_gridspec(2, 1, height_ratios=[3.4, 1.0], hspace=0.22, left=0.08, right=0.98,
                          top=0.86, bottom=0.05 + margin)
    ax, strip = fig.add_subplot(gs[0]), fig.add_subplot(gs[1])
    top = max([i.loss_now_db for i in a.interfaces] +
              [(i.shown.recovered_db or 0.0) for i in a.interfaces if i.shown is not None] + [0.1])
    ax.set_ylim(0, 1.35 * top)
    ax.set_xlim(-0.6, len(cols) - 0.4)
    for i in a.interfaces:
        x = x_of[i.reader] - 0.5             # just before its reader: fan-out branches keep apart
        lost = max(0.0, i.loss_now_db)
        colour = CLIP if lost >= LOSS_RED_DB else TIGHT if lost >= LOSS_AMBER_DB else QUIET
        ax.bar(x - 0.13, lost, width=0.24, color=colour, zorder=3, gid=f"lost:{i.source}>{i.reader}")
        inside = lost > 0.15 * top           # a tall bar carries its figure inside, clear of its neighbour
        ax.text(x - 0.13, lost - 0.02 * top if inside else lost + 0.02 * top, loss_text(lost, 2), fontsize=7,
                color="white" if inside else colour, ha="center", va="top" if inside else "bottom", zorder=4,
                rotation=90 if inside else 0, gid=f"lost-text:{i.source}>{i.reader}")
        e = i.shown
        picked = i.best is not None
        if e is not None and e.recovered_db is not None and abs(e.recovered_db) >= 0.005:
            back = e.recovered_db
            ax.bar(x + 0.13, max(back, 0.0), width=0.24, color=GIVEN_BACK if picked else NOT_PICKED, zorder=3,
                   gid=f"back:{i.source}>{i.reader}")
            ax.text(x + 0.13, max(back, 0.0) + 0.02 * top, figure(back, "dB"), fontsize=7,
                    color=GIVEN_BACK if picked else QUIET, ha="center", va="bottom",
                    gid=f"back-text:{i.source}>{i.reader}")
        name = "" if e is None else e.candidate if picked else f"({e.candidate})"
        if i.candidates and all(c.rule is not None for c in i.candidates):
            name = "(placement rule)"
        ax.text(x, -0.04 * top, f"{i.verdict}\n{name}".rstrip(), fontsize=7.2, ha="center", va="top",
                color=CLIP if i.verdict in ("would clip", "against spec", "ruled out") else
                GIVEN_BACK if i.verdict in ("needed", "worth it") else QUIET,
                weight="bold" if i.verdict in ("needed", "worth it") else "normal", gid=f"verdict:{i.reader}")
    ax.set_xticks([])
    ax.set_ylabel("dB")
    ax.grid(axis="y", color="#e6e6e6", lw=0.6, zorder=0)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    from matplotlib.patches import Patch
    ax.legend(handles=[Patch(facecolor=CLIP, label="loading loss now (dB lost)"),
                       Patch(facecolor=GIVEN_BACK, label="given back by the advised buffer (dB)"),
                       Patch(facecolor=NOT_PICKED, label="best usable, not worth a part")],
              loc="lower left", bbox_to_anchor=(0.0, 1.01), ncol=3, fontsize=7.5, frameon=False,
              borderaxespad=0.2, handlelength=1.4, columnspacing=1.0)
    # the chain as a strip: one box per stage, an arrow per interface (fan-out on lanes of their own)
    lanes: dict[str, int] = {}
    for i in a.interfaces:
        lane = lanes.get(i.source, 0)
        lanes[i.source] = lane + 1
        x0, x1 = x_of[i.source], x_of[i.reader]
        strip.annotate("", xy=(x1 - 0.4, -lane), xytext=(x0 + 0.4, -lane),
                       arrowprops=dict(arrowstyle="-|>", color=QUIET, lw=1.1, shrinkA=0, shrinkB=0))
    for st in cols:
        strip.text(x_of[st.name], 0, f"{st.name}\n{st.kind}", fontsize=7, ha="center", va="center",
                   bbox=dict(boxstyle="round,pad=0.3", fc="white", ec=QUIET, lw=0.8), gid=f"stage:{st.name}")
    depth = max(lanes.values(), default=1)
    strip.set_ylim(-depth + 0.4, 0.6)
    strip.set_xlim(-0.6, len(cols) - 0.4)
    strip.axis("off")
    _title(fig, f"{chain.name}: loading loss at each interface and what a buffer gives back "
                f"(at {fmt(a.f_ref_hz, 'Hz')}, by {a.cost_basis})")
    _finish(fig, chain)
    return fig


def figure_bytes(fig, fmt_: str) -> bytes:
    """PNG or SVG of a figure; SVG keeps text as text and is reproducible (no date, fixed ids)."""
    import matplotlib
    buf = io.BytesIO()
    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "chainplan"}):
        meta = {"Date": None} if fmt_ == "svg" else {"Software": "chainplan"}
        fig.savefig(buf, format=fmt_, metadata=meta)
    return buf.getvalue()


def figures(b: Budget, noise=None, mc=None) -> dict:
    """Every figure there is data for: name -> Figure."""
    out = {"levels": level_diagram(b), "gain": gain_plot(b)}
    dyn = dynamics_plot(b)
    if dyn is not None:
        out["dynamics"] = dyn
    if noise is not None:
        out["noise"] = noise_plot(noise, b.chain)
    if mc is not None:
        nominal = {r.name: float(r.value[0]) for r in _requirements(b)}
        nominal.update({k: float(v[0]) for k, v in _nominal_metrics(b).items()})
        out["montecarlo"] = montecarlo_plot(mc, nominal)
    return out


def _requirements(b: Budget) -> list:
    from ..studies.requirements import evaluate_requirements
    return evaluate_requirements(b.ev)


def _nominal_metrics(b: Budget) -> dict:
    from ..studies.montecarlo import metrics
    return metrics(b.ev)


def save(figs: dict, folder: str, stem: str) -> list[str]:
    """Write ``<folder>/<stem>-<name>.png`` and ``.svg`` for every figure, all or none."""
    import os
    from .files import write_atomic
    files = {}
    for name, fig in figs.items():
        for ext in ("png", "svg"):
            files[os.path.join(folder, f"{stem}-{name}.{ext}")] = figure_bytes(fig, ext)
    return write_atomic(files)
