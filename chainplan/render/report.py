"""A review report of one chain: a single self-contained HTML file.

Why HTML with the figures embedded as SVG (and not Markdown with image files):
a review needs one artefact that can be attached to a ticket, mailed or
archived next to the spec and still opens complete years later — no folder of
images to keep beside it, no broken relative links when it is moved, nothing
fetched from a network.  Inline SVG stays sharp when zoomed or printed and its
text can be searched and copied; the tables are real HTML tables.  (Budget
changes between revisions are reviewed with the compare command's Markdown,
which is the form that belongs in a pull request.)

Sections: the safety caution of a hazardous chain (first, before anything
else), the summary, requirements, the figures, stages, active-stage operating
points, interfaces, nodes, noise contributors and, when asked for, the Monte
Carlo statistics, yields and sensitivity ranking.
"""
from __future__ import annotations

import html
import math

from ..version import __version__
from ..engine.budget import Budget
from ..spec.numbers import loss, ratio_unit, temperature
from .console import db, end_gain, eng, interface_cell, stage_gain
from ..spec.safety import safety_notice
from .tables import _converter, _lim, _set_by

CSS = """
body{font:14px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d1d1d;max-width:1180px;margin:24px auto;
padding:0 18px}
h1{font-size:22px;margin:0 0 4px}h2{font-size:17px;margin:28px 0 8px;border-bottom:1px solid #ddd;padding-bottom:3px}
.meta{color:#666;font-size:12.5px}.desc{white-space:pre-wrap;background:#f6f6f6;padding:8px 12px;border-radius:4px}
table{border-collapse:collapse;margin:6px 0 10px;font-variant-numeric:tabular-nums}
th,td{border:1px solid #d6d6d6;padding:3px 9px;text-align:right}th{background:#f0f0f0}
td.l,th.l{text-align:left}tr.worst td{background:#fff4dc}tr.clip td{background:#fde4e4;font-weight:600}
tr.fail td{background:#fde4e4}.caution{border:2px solid #c62828;background:#fdecec;color:#8e1b1b;padding:10px 14px;
font-weight:600;border-radius:4px;margin:12px 0}figure{margin:10px 0 18px}figure svg{max-width:100%;height:auto}
figcaption{color:#555;font-size:12.5px}
"""


def _e(x) -> str:
    return html.escape(str(x), quote=True)


def _table(head: list[str] | None, rows: list[tuple], left: int = 1, classes: list[str] | None = None) -> str:
    """An HTML table (no header row for ``head=None``); the first ``left`` columns are left-aligned text."""
    th = "".join(f'<th class="{"l" if i < left else ""}">{_e(h)}</th>' for i, h in enumerate(head or []))
    body = []
    for k, row in enumerate(rows):
        cls = f' class="{classes[k]}"' if classes and classes[k] else ""
        tds = "".join(f'<td class="{"l" if i < left else ""}">{_e(c)}</td>' for i, c in enumerate(row))
        body.append(f"<tr{cls}>{tds}</tr>")
    thead = f"<thead><tr>{th}</tr></thead>" if head else ""
    return f"<table>{thead}<tbody>{''.join(body)}</tbody></table>"


def _svg(fig) -> str:
    from .plots import figure_bytes
    text = figure_bytes(fig, "svg").decode("utf-8")
    return text[text.index("<svg"):]


def report_html(b: Budget, noise=None, mc=None, figures: dict | None = None) -> str:
    """The report as one HTML document.  ``noise``: a NoiseResult; ``mc``: an McResult;
    ``figures``: name -> Figure (default: every figure there is data for)."""
    from .plots import figures as make_figures
    c = b.chain
    f_ref = eng(c.analysis.f_ref_hz, "Hz")
    figs = figures if figures is not None else make_figures(b, noise, mc)
    out = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
           f"<title>{_e(c.name)} — chainplan budget review</title><style>{CSS}</style></head><body>"]
    note = safety_notice(c.hazards)
    if note:
        out.append(f'<div class="caution" id="safety">{_e(note)}</div>')
    out.append(f"<h1>{_e(c.name)}</h1>")
    out.append(f'<p class="meta">chainplan {_e(__version__)} · spec {_e(c.path or "—")} · '
               f"temperature {_e(temperature(c.temp_k, c.temp_text))} · reference frequency {_e(f_ref)}</p>")
    if c.description:
        out.append(f'<div class="desc">{_e(c.description.strip())}</div>')

    out.append("<h2>Summary</h2>")
    out.append(_table(None, _summary_rows(b), left=1))

    reqs = _requirement_rows(b)
    if reqs:
        rows, classes = reqs
        out.append("<h2>Requirements</h2>")
        out.append(_table(["requirement", "value", "limit", "margin", "result", "set by"], rows, 1, classes))

    captions = {"levels": "Level diagram: DC level, signal band, limits and headroom at every node; loading loss "
                          "at every interface.",
                "gain": "Gain V(node)/Vs over frequency at every node; the output in black with its −3 dB edges.",
                "dynamics": "Loop gain |T| and phase of every op-amp stage as connected, the phase margin marked "
                            "at the crossover; beside it the chain's step response at the output with its settling "
                            "band.",
                "noise": "Output noise density and each contributor's share of the output noise power.",
                "montecarlo": "Monte Carlo: every requirement's spread, its limit (failing side shaded) and yield.",
                "compare": "Before (dashed) and after (solid): the gain to the output and the output noise density."}
    out.append("<h2>Figures</h2>")
    for name, fig in figs.items():
        out.append(f'<figure id="fig-{_e(name)}">{_svg(fig)}<figcaption>{_e(captions.get(name, name))}'
                   "</figcaption></figure>")

    out.append(f"<h2>Stages as connected (at {_e(f_ref)})</h2>")
    out.append(_table(["stage", "kind", "Zin", "Zout", "gain", "gain dB"],
                      [(s.name, s.kind, eng(s.zin_ohm, "Ω"), eng(s.zout_ohm, "Ω"),
                        *stage_gain(s)) for s in b.stages], left=2))
    active = _active_rows(b)
    if active:
        out.append("<h2>Active stages (operating point)</h2>")
        out.append(_table(["stage", "bias current", "DC shift", "gm", "power"], active))

    worst = b.worst_interface
    out.append("<h2>Interfaces (loading)</h2>")
    out.append(_table(["from", "to", "Z source", "Z load", "loading loss", ""],
                      [(r.source, r.to, eng(r.z_source_ohm, "Ω"), eng(r.z_load_ohm, "Ω"), interface_cell(r),
                        "worst" if r is worst and r.loss_db > 0.005 else "") for r in b.interfaces], left=2,
                      classes=["worst" if r is worst and r.loss_db > 0.005 else "" for r in b.interfaces]))

    tight = b.tightest_node
    out.append(f"<h2>Nodes (DC, signal peak at {_e(f_ref)}, limits, headroom)</h2>")
    out.append(_table(["node", "DC", "peak", "low limit", "high limit", "headroom", "headroom dB", "set by", ""],
                      [(n.name, eng(n.dc_v, "V"), eng(n.peak_v, "V"), _lim(n.low_v), _lim(n.high_v),
                        eng(n.headroom_v, "V") if math.isfinite(n.headroom_v) else "—",
                        db(n.headroom_db, 1) if math.isfinite(n.headroom_db) else "—", _set_by(n),
                        "CLIPS" if n.clips else ("tightest" if n is tight else "")) for n in b.nodes],
                      classes=["clip" if n.clips else ("worst" if n is tight else "") for n in b.nodes]))

    if noise is not None:
        out.append("<h2>Noise contributors</h2>")
        out.append(_table(["contributor", "share of output noise power", "rms at the output"],
                          [(name, f"{100 * float(noise.shares[name][0]):.1f} %",
                            eng(float(noise.vrms[name][0]), "V") if name in noise.vrms else "—")
                           for name in noise.ranked]))
        for line in list(noise.notes) + [f"noise of '{s}' is not carried to the output" for s in noise.neglected]:
            out.append(f'<p class="meta">{_e(line)}</p>')

    if mc is not None:
        out.extend(_montecarlo_html(mc))
    if note:
        out.append(f'<div class="caution">{_e(note)}</div>')
    out.append(f'<p class="meta">Generated by chainplan {_e(__version__)} from {_e(c.path or c.name)}.</p>')
    out.append("</body></html>")
    return "\n".join(out) + "\n"


def _summary_rows(b: Budget) -> list[tuple]:
    c = b.chain
    f_ref = eng(c.analysis.f_ref_hz, "Hz")
    rows = [end_gain(b, f_ref),
            ("−3 dB band", f"{eng(b.f_low_hz, 'Hz') if b.f_low_hz else 'below span'} to "
                           f"{eng(b.f_high_hz, 'Hz') if b.f_high_hz else 'above span'}")]
    worst, tight = b.worst_interface, b.tightest_node
    if worst is not None:
        rows.append(("worst interface", f"{worst.source} → {worst.to}: {loss(worst.loss_db)} lost"))
    if tight is not None:
        rows.append(("tightest node", f"{tight.name}: {eng(tight.headroom_v, 'V')} headroom"))
    if b.signal_dbfs is not None:
        rows.append((f"signal at the converter{_converter(b)}", db(b.signal_dbfs, 1) + "FS"))
    rows.extend(tuple(r) for r in b.extra_summary)
    clips = [n.name for n in b.nodes if n.clips]
    if clips:
        rows.append(("clipping", ", ".join(clips)))
    return rows


def _requirement_rows(b: Budget):
    if not b.chain.extra.get("requirements"):
        return None
    from ..studies.requirements import evaluate_requirements, show, where_of
    res = evaluate_requirements(b.ev)
    rows = [(r.name, show(float(r.value[0]), r.unit), r.requirement.describe(),
             show(float(r.margin[0]), ratio_unit(r.unit)), "pass" if r.passed[0] else "FAIL", where_of(r) or "")
            for r in res]
    return rows, ["" if r.passed[0] else "fail" for r in res]


def _active_rows(b: Budget) -> list[tuple]:
    dc = {n.name: n.dc_v for n in b.nodes}
    parents = {st.name: st.parent for st in b.chain.stages}
    rows = []
    for s in b.stages:
        if s.op.get("power_w") is None:
            continue
        i = s.op.get("id_a", s.op.get("ic_a"))
        shift = dc[s.name] - dc[parents[s.name]] if s.name in dc else None
        rows.append((s.name, eng(i, "A"), eng(shift, "V"), eng(s.op.get("gm_s"), "S"), eng(s.op["power_w"], "W")))
    return rows


def _montecarlo_html(mc) -> list[str]:
    from ..studies.requirements import show
    ci = lambda y: "{:.2f} to {:.2f} %".format(*(100 * x for x in mc.interval(y)))  # noqa: E731
    corners = len(mc.corners) if mc.corners else 1
    out = [f"<h2>Monte Carlo: {mc.samples} units, seed {mc.seed}, {corners} operating corner"
           f"{'s' * (corners != 1)}</h2>",
           f"<p>Production yield (every requirement at every corner): <b>{100 * mc.yield_all:.2f} %</b> "
           f"(95 % Wilson interval {ci(mc.yield_all)}).</p>"]
    if mc.requirements:
        out.append(_table(["requirement", "limit", "yield", "95 % interval"],
                          [(r.name, r.requirement.describe(), f"{100 * mc.yield_of(r):.2f} %", ci(mc.yield_of(r)))
                           for r in mc.requirements],
                          classes=["fail" if mc.yield_of(r) < 1 else "" for r in mc.requirements]))
    from ..studies.montecarlo import metric_info
    rows = []
    for name in mc.metrics:
        st = mc.stats(name)
        if st.count == 0:
            continue
        label, unit, _ = metric_info(mc.chain, name)
        sigma = st.std if st.std > 1e-9 * abs(st.mean) else 0.0        # rounding noise of a fixed value
        rows.append((label, show(st.mean, unit), show(sigma, ratio_unit(unit)),
                     *(show(x, unit) for x in (st.p_low, st.median, st.p_high))))
    out.append(_table(["metric", "mean", "σ", "0.1 %", "median", "99.9 %"], rows))
    if mc.sensitivity:
        out.append(f"<p>What drives the spread of <b>{_e(mc.key_metric)}</b> (first-order share of variance):</p>")
        out.append(_table(["input", "share"], [(k, f"{100 * v:.2f} %") for k, v in mc.sensitivity]))
    return out
