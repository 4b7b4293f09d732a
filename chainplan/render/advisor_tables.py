"""Tables and JSON of the buffer advice and of an optimised placement.

They only read the result objects of chainplan.placement.advisor and chainplan.placement.optimiser.
Markers survive without colour: the verdict is a word, a clipping node is
written 'CLIPS', a candidate that cannot be biased says 'no bias'."""
from __future__ import annotations

import math

from ..placement.advisor import Advice, CandidateEffect, break_text
from ..placement.optimiser import Measured, Plan, Shortfall, target_text
from ..spec.numbers import figure, figures, loss
from .console import db, eng
from ..spec.safety import safety_notice
from .json_out import clean
from .layout import Col, print_table
from .tables import chain_heading

VERDICT_STYLE = {"needed": "bold green", "worth it": "green", "would clip": "bold red", "against spec": "bold red",
                 "ruled out": "bold red", "not worth it": None}


# -- advice ------------------------------------------------------------------------------

def advice_tables(a: Advice, console, only: str | None = None, details: bool = False) -> None:
    """The advice: one table (a row per interface, the figures of its best usable candidate), what was
    held back and why, a legend of the columns; with ``details`` (or ``only``) the long form: every
    candidate at every interface (or at ``only``), with the reason of each verdict."""
    c = a.chain
    chain_heading(c, console)
    n = len(a.interfaces[0].candidates) if a.interfaces else len(a.candidates)
    console.print(f"{n} candidate{'s' if n != 1 else ''}, ranked by {a.cost_basis}, each inserted in turn and the "
                  f"whole chain re-analysed; at {eng(a.f_ref_hz, 'Hz')}, end-to-end gain now {figure(a.gain_db, a.chain.gain_db_unit, decimals=2)} "
                  f"to '{a.output}'")
    if only is None:
        rules_block(a.chain, a.rules, console)
        _advice_table(a, console)
        _held_back(a, console)
        _left_alone(a, console)
        _legend(a, console)
    if not (details or only is not None):
        console.print("--details: every candidate at every interface, and the reason of each verdict")
        return
    _details(a, console, only)


def _advice_table(a: Advice, console) -> None:
    ifs = a.interfaces
    shown = [i.shown for i in ifs]
    get = lambda attr: [getattr(e, attr) if e is not None else None for e in shown]  # noqa: E731
    names = [("—" if e is None else e.candidate if i.best is not None else f"({e.candidate})")
             for i, e in zip(ifs, shown)]
    cols = [Col("interface", wrap=2, whole=True), Col("loss dB", right=True), Col("verdict"),
            Col("buffer", wrap=1),
            Col("back dB", right=True), Col("net dB", right=True),
            *([Col("SNR Δ dB", right=True, drop=1)] if a.noise else []),
            Col("DC shift", right=True, drop=2), Col("power", right=True),
            Col("Z source", right=True, wide=True), Col("Z load", right=True, wide=True)]
    rows = list(zip([f"{i.source} → {i.reader}" for i in ifs], [_bare(loss(i.loss_now_db, 2)) for i in ifs],
                    [i.verdict for i in ifs], names, [_bare(_num(x)) for x in get("recovered_db")],
                    [_bare(_num(x)) for x in get("net_gain_db")],
                    *([[_bare(_num(x)) for x in get("snr_change_db")]] if a.noise else []),
                    [_signed_v(x) for x in get("dc_shift_v")], figures(get("power_w"), "W"),
                    figures([i.z_source_ohm for i in ifs], "Ω"), figures([i.z_load_ohm for i in ifs], "Ω")))
    print_table(console, cols, [list(r) for r in rows],
                title="Buffer advice: the best usable candidate at each interface",
                styles=[VERDICT_STYLE[i.verdict] for i in ifs])


def _bare(text: str) -> str:
    """A dB figure without its unit, for a column whose header carries it ('+17.61 dB' -> '+17.61')."""
    return text[:-3] if text.endswith(" dB") else text


def _held_back(a: Advice, console) -> None:
    """Candidates that would do more than the one shown but clip or break a requirement, and why
    nothing is shown where no candidate works."""
    from rich.text import Text
    lines = []
    for i in a.interfaces:
        held = i.held_back
        if held and all((e.rule or "").startswith("nothing active") for e in held):
            lines.append(f"{i.source} → {i.reader}: ruled out, {held[0].rule}; {held[0].candidate} would have "
                         f"given net {_num(held[0].net_gain_db)}")
            continue
        for e in held[:3]:
            lines.append(f"{i.source} → {i.reader}: {e.candidate} (net {_num(e.net_gain_db)}) {_not_usable(e)}")
        if i.shown is None and not i.held_back and i.verdict != "not worth it":
            lines.append(f"{i.source} → {i.reader}: {i.reason}")
    if lines:
        console.print(Text("Held back (never picked):", style="bold"))
        for ln in lines:
            console.print(Text("  " + ln, style="red"))


def _left_alone(a: Advice, console) -> None:
    """The interfaces at a virtual ground, which the advice leaves alone, and why."""
    from rich.text import Text
    for node, reader, mode, amp in a.virtual_ground:
        held = f"'{amp}' holds its input" if amp == reader else f"'{reader}' feeds '{amp}', which holds its input"
        console.print(Text(f"{node} → {reader}: left alone. "),
                      Text(f"{held} at a virtual ground ({mode}-mode input): it takes the {mode}, not the "
                           f"voltage, so the source and cable capacitance barely matter; its {mode} transfer is "
                           "not a loading loss, and no buffer is advised here."))


def rules_block(chain, summary: list, console) -> None:
    """The spec's placement rules: where nothing active may go, which candidates each place keeps out."""
    from ..spec.rules import summary_rows
    if summary:
        print_table(console, [Col("interfaces", wrap=2), Col("rule", wrap=2), Col("keeps out", wrap=1)],
                    summary_rows(chain, summary), title="Placement rules (the spec's placement:)")


def _not_usable(e: CandidateEffect) -> str:
    parts = ([f"ruled out: {e.rule}"] if e.rule else []) + [break_text(b) for b in e.breaks]
    if e.new_clips:
        parts.insert(0, "clips at " + ", ".join(e.new_clips))
    return "; ".join(parts)


def _legend(a: Advice, console) -> None:
    f_ref = eng(a.f_ref_hz, "Hz")
    rows = [
        ["loss dB", f"loading loss at the interface now, at {f_ref}: dB lost (0: none)"],
        ["verdict", "needed, worth it, not worth it, would clip, against spec, ruled out (docs/buffers.md)"],
        ["buffer", f"the pick: the cheapest usable candidate (by {a.cost_basis}) that earns the verdict; "
                   "(name): the usable one that raises the gain most, not worth a part"],
        ["back dB", "loading loss the buffer gives back, dB (positive: recovered)"],
        ["net dB", f"end-to-end gain change at {f_ref} with the buffer in, dB"],
        *([["SNR Δ dB", "change in the SNR at the converter, dB (positive: better)"]] if a.noise else []),
        ["DC shift", "the buffer's output DC level minus the node's, V (a follower's VGS or VBE)"],
        ["power", "the buffer's supply power at its operating point there, W"],
        ["usable", "holds its bias, clips no node that did not clip, breaks no requirement of the spec"
                   + (" and no placement rule keeps it out" if a.rules else "")],
    ]
    print_table(console, [Col("column", wrap=1), Col("meaning", wrap=2)], rows, title="Legend")


def _details(a: Advice, console, only: str | None) -> None:
    from rich.text import Text
    cands = ", ".join(f"{e.candidate} ({e.kind}{_bias_text(e)})"
                      for e in (a.interfaces[0].candidates if a.interfaces else []))
    if not a.interfaces and a.candidates:
        cands = ", ".join(f"{c.name} ({c.kind})" for c in a.candidates)
    console.print(f"candidates: {cands or 'none'}")
    console.print("Every candidate at each interface; columns as in the legend, and own: the buffer's "
                  "open-circuit gain Vth(buffer)/V(node), dB; room Δ: the largest fall in headroom, V, at node; "
                  "f high: the upper −3 dB band edge with the buffer in.")
    for i in a.interfaces:
        if only is not None and i.reader != only:
            continue
        console.print(Text(f"{i.source} → {i.reader}: {i.verdict}. ", style=VERDICT_STYLE[i.verdict] or ""),
                      Text(i.reason[0].upper() + i.reason[1:] + "."))
        cols = [Col("candidate", wrap=2), Col("back", right=True), Col("own", right=True, drop=3),
                Col("DC shift", right=True, drop=2), Col("room Δ", right=True), Col("node", wrap=True),
                Col("f high", right=True, drop=1), *([Col("SNR Δ", right=True)] if a.noise else []),
                Col("power", right=True), Col("net", right=True)]
        print_table(console, cols, [_effect_row(e, a.noise) for e in i.candidates],
                    title=f"{i.source} → {i.reader} (loading loss {loss(i.loss_now_db, 2)}): each candidate inserted",
                    styles=["bold red" if e.valid and (e.new_clips or e.breaks) or e.rule else None
                            for e in i.candidates])
        common = {e.rule for e in i.candidates}
        common = common.pop() if len(common) == 1 else None
        if common is not None:
            console.print(Text(f"  every candidate: ruled out: {common} (never picked)", style="red"))
        for e in i.candidates:
            if not e.valid:
                console.print(f"  {e.candidate}: no bias here: {e.problem}")
                continue
            why = ([f"ruled out: {e.rule}"] if e.rule is not None and common is None else []) + \
                [break_text(b) for b in e.breaks]
            if why:
                console.print(Text(f"  {e.candidate}: " + "; ".join(why) + " (never picked)", style="red"))
        if a.noise:
            _noise_gap_lines(i.candidates, console)


def _noise_gap_lines(effects: list[CandidateEffect], console) -> None:
    """Which usable candidates' SNR leaves noise out: no data at all, or some fields at zero."""
    for e in effects:
        if not e.valid:
            continue
        if not e.noise_data:
            console.print(f"  {e.candidate}: no noise data ({' and '.join(e.noise_gaps)} are 0): its SNR is "
                          "not known and not compared")
        elif e.noise_gaps:
            console.print(f"  {e.candidate}: SNR Δ leaves out the noise of {', '.join(e.noise_gaps)} (0: not given)")


def _bias_text(e: CandidateEffect) -> str:
    b = e.input_bias
    return "" if b is None else f" behind {eng(b['c_f'], 'F')} and {eng(b['r_bias_ohm'], 'Ω')} to {b['bias']}"


def _effect_row(e: CandidateEffect, noise: bool) -> list[str]:
    dash = "—"
    if not e.valid:
        return [e.candidate, "no bias", *([dash] * (8 if noise else 7))]
    w = e.worst_headroom
    room, node = dash, dash
    if w is not None:
        room = _signed_v(w.change_v) if w.before_v is not None else eng(w.after_v, "V")
        node = w.node + (" CLIPS" if w.after_v < 0 else "")
    edge = "above span" if e.f_high_after_hz is None else eng(e.f_high_after_hz, "Hz")
    snr = [_num(e.snr_change_db) if e.noise_data else "no noise data"] if noise else []
    return [e.candidate, _num(e.recovered_db), _num(e.buffer_gain_db), _signed_v(e.dc_shift_v), room, node, edge,
            *snr, eng(e.power_w, "W"), _num(e.net_gain_db)]


def _num(x, digits: int = 2) -> str:
    return figure(x, "dB", decimals=digits)


def _signed_v(v) -> str:
    return figure(v, "V", signed=True)


def advice_dict(a: Advice) -> dict:
    return clean({
        "chain": a.chain.name, "file": a.chain.path, "hazards": a.chain.hazards,
        "caution": safety_notice(a.chain.hazards), "f_ref_hz": a.f_ref_hz, "output": a.output,
        "gain_db": a.gain_db, "cost_basis": a.cost_basis, "thresholds": a.thresholds,
        "rules": a.rules,
        "interfaces": [{
            "from": i.source, "to": i.reader, "z_source_ohm": i.z_source_ohm, "z_load_ohm": i.z_load_ohm,
            "loading_loss_db": i.loss_now_db, "verdict": i.verdict, "reason": i.reason, "pick": i.best,
            "candidates": [_effect_dict(e) for e in i.candidates],
        } for i in a.interfaces],
        "virtual_ground": [{"from": node, "to": reader, "input_mode": mode, "amplifier": amp}
                           for node, reader, mode, amp in a.virtual_ground],
    })


def _effect_dict(e: CandidateEffect) -> dict:
    w = e.worst_headroom
    return {
        "candidate": e.candidate, "kind": e.kind, "buffer": e.buffer, "bias_stage": e.bias_stage,
        "input_bias": e.input_bias, "valid": e.valid, "problem": e.problem,
        "loading_loss_after_db": e.loss_after_db, "recovered_db": e.recovered_db,
        "buffer_gain_db": e.buffer_gain_db, "dc_shift_v": e.dc_shift_v, "net_gain_db": e.net_gain_db,
        "f_low_before_hz": e.f_low_before_hz, "f_low_after_hz": e.f_low_after_hz,
        "f_high_before_hz": e.f_high_before_hz, "f_high_after_hz": e.f_high_after_hz,
        "snr_before_db": e.snr_before_db, "snr_after_db": e.snr_after_db, "snr_change_db": e.snr_change_db,
        "noise_data": e.noise_data, "noise_gaps": e.noise_gaps,
        "power_w": e.power_w, "price": e.price, "count": e.count, "new_clips": e.new_clips,
        "breaks": [{"requirement": b.requirement, "key": b.key, "value": b.value, "limit": b.limit,
                    "unit": b.unit, "sense": b.sense, "excess": b.excess} for b in e.breaks],
        "usable": e.usable, "rule": e.rule,
        "worst_headroom": None if w is None else {"node": w.node, "change_v": w.change_v, "after_v": w.after_v},
        "headroom": [{"node": h.node, "before_v": h.before_v, "after_v": h.after_v, "change_v": h.change_v}
                     for h in e.headroom],
    }


# -- placement ------------------------------------------------------------------------------

def plan_tables(p: Plan, console, requirements=None, report_only=()) -> None:
    from rich.text import Text
    chain_heading(p.chain, console)
    console.print("targets: " + "; ".join(target_text(p.targets, k) + _origin(p, k) for k in p.targets.kinds()))
    rules_block(p.chain, _rules(p), console)
    if p.conflicts:
        console.print(Text("The targets contradict each other; nothing was searched:", style="bold red"))
        for line in p.conflicts:
            console.print(f"  {line}")
        return
    if p.feasible:
        rows = [[f"{pl.source} → {pl.reader}", pl.buffer, pl.candidate, eng(pl.power_w, "W"),
                 "—" if pl.price is None else f"{pl.price:g}", str(pl.count)] for pl in p.placements]
        if not p.placements:
            rows.append(["(none: the chain meets the targets as it is)", "", "", "", "", ""])
        head = "Cheapest placement" if p.proven else "Best placement found (not proven optimal)"
        print_table(console, [Col("interface", wrap=2), Col("buffer", wrap=True), Col("candidate", wrap=True),
                              Col("power", right=True), Col("price", right=True), Col("parts", right=True)], rows,
                    title=f"{head} by {p.cost_basis}: {_cost_text(p)}, "
                          f"{p.n_buffers} buffer{'s' if p.n_buffers != 1 else ''}")
        if not p.proven:
            console.print(f"the {_stop_text(p)} ran out before the search proved this optimal: no placement "
                          f"costs less than {_cost_value(p, p.lower_bound)} (gap {_cost_value(p, p.gap)}); "
                          "a longer --time-limit may find a cheaper one or prove this one")
        if p.ties:
            console.print(f"{p.ties} other placement{'s' if p.ties != 1 else ''} of the same cost and buffer count "
                          "met the targets; this one keeps the most margin on its tightest target")
        print_table(console, [Col("figure", wrap=2), Col("before", right=True), Col("after", right=True),
                              Col("target", wrap=True)], _figure_rows(p), title="Before and after (full analyses)")
    elif not p.proven:
        console.print(Text(f"No placement found before the {_stop_text(p)} ran out; not proven impossible "
                           "(a longer --time-limit may find one).", style="bold red"))
        if p.lower_bound:
            console.print(f"any placement meeting the targets costs more than {_cost_value(p, p.lower_bound)}")
    else:
        console.print(Text("No placement of the candidates meets the targets.", style="bold red"))
        print_table(console, [Col("target", wrap=2), Col("best reachable", wrap=True), Col("while", wrap=True),
                              Col("limited by", wrap=True)],
                    [[s.target, s.best if s.proven or s.best_value is None
                      else f"at least {s.best} (not proven the best)",
                      "the other targets are met" if s.with_others else "on its own", s.limiter]
                     for s in p.shortfalls], title="What cannot be met")
    if requirements:
        from ..studies.requirements import show
        print_table(console, [Col("requirement", wrap=2), Col("value", right=True), Col("limit", right=True),
                              Col("status")],
                    [[r.name, show(float(r.value[0]), r.unit), show(r.limit, r.unit),
                      ("met" if r.passed[0] else "FAILS") + (" (report only)" if r.name in report_only else "")]
                     for r in requirements], title="Spec requirements on the result",
                    styles=[None if r.passed[0] else "bold red" for r in requirements])
    if p.targets.skipped:
        console.print("not targeted by the optimiser" + (" (checked on the result above)" if requirements else "")
                      + ": " + ", ".join(p.targets.skipped))
    if p.targets.report_only:
        console.print("left out of the targets by --targets (only reported): " + ", ".join(p.targets.report_only))
    st = p.stats
    console.print(f"search: {st.get('states', 0)} states, {st.get('analyses', 0)} region analyses in "
                  f"{st.get('engine_calls', 0)} engine calls, {st.get('seconds', 0.0):.2f} s")


def _rules(p: Plan) -> list:
    from ..spec.parts import candidates_of
    from ..spec.rules import rules_summary
    return rules_summary(p.chain, candidates_of(p.chain))


def _stop_text(p: Plan) -> str:
    return "memory bound" if p.stats.get("stopped") == "memory" else "time limit"


def _cost_value(p: Plan, x) -> str:
    if x is None:
        return "—"
    if p.cost_basis == "power":
        return eng(x, "W")
    return f"price {x:g}" if p.cost_basis == "price" else f"{x:g} parts"


def _origin(p: Plan, kind: str) -> str:
    o = p.targets.origin.get(kind)
    return f" ({', '.join(o)})" if o else ""


def _cost_text(p: Plan) -> str:
    if p.cost_basis == "power":
        return eng(p.cost, "W")
    if p.cost_basis == "price":
        return f"price {p.cost:g}"
    return f"{int(p.cost)} parts"


def _figure_rows(p: Plan) -> list[list[str]]:
    b, a, t = p.before, p.measured, p.targets
    g = lambda x: figure(x, p.chain.gain_db_unit, decimals=2)      # noqa: E731  (dBΩ: a transimpedance)
    rows = []
    for f in sorted(set(b.gain_db) | set(t.min_gain_db) | set(t.max_gain_db)):
        goal = ", ".join(([f"≥ {g(t.min_gain_db[f])}"] if f in t.min_gain_db else []) +
                         ([f"≤ {g(t.max_gain_db[f])}"] if f in t.max_gain_db else [])) or "—"
        rows.append([f"gain at {eng(f, 'Hz')}", g(b.gain_db.get(f)), g(a.gain_db.get(f)), goal])
    rows.append(["tightest headroom", _room(b), _room(a),
                 "—" if t.min_headroom_v is None else f"≥ {eng(t.min_headroom_v, 'V')}"])
    rows.append(["lower band edge", _edge(b.f_low_hz, "below"), _edge(a.f_low_hz, "below"),
                 "—" if t.max_f_low_hz is None else f"≤ {eng(t.max_f_low_hz, 'Hz')}"])
    rows.append(["upper band edge", _edge(b.f_high_hz, "above"), _edge(a.f_high_hz, "above"),
                 "—" if t.min_f_high_hz is None else f"≥ {eng(t.min_f_high_hz, 'Hz')}"])
    rows.append(["follower power", eng(b.power_w, "W"), eng(a.power_w, "W"),
                 "—" if t.max_power_w is None else f"≤ {eng(t.max_power_w, 'W')}"])
    rows.append(["worst loading loss", f"{b.loss_db:.2f} dB", f"{a.loss_db:.2f} dB",
                 "—" if t.max_loss_db is None else f"≤ {t.max_loss_db:.2f} dB"])
    return rows


def _room(m: Measured) -> str:
    if m.min_headroom_v is None:
        return "—"
    return f"{eng(m.min_headroom_v, 'V')} ({m.min_headroom_node})"


def _edge(f, side) -> str:
    return f"{side} span" if f is None else eng(f, "Hz")


def plan_dict(p: Plan, requirements=None) -> dict:
    from ..studies.requirements import result_dict
    t = p.targets
    return clean({
        "chain": p.chain.name, "file": p.chain.path, "hazards": p.chain.hazards,
        "caution": safety_notice(p.chain.hazards), "feasible": p.feasible, "cost_basis": p.cost_basis,
        "cost": p.cost, "n_buffers": p.n_buffers, "proven": p.proven, "lower_bound": p.lower_bound,
        "gap": p.gap, "ties": p.ties, "conflicts": p.conflicts, "rules": _rules(p),
        "targets": {"min_gain_db": [{"f_hz": f, "db": v} for f, v in t.min_gain_db.items()],
                    "max_gain_db": [{"f_hz": f, "db": v} for f, v in t.max_gain_db.items()],
                    "min_headroom_v": t.min_headroom_v, "node_headroom_v": t.node_headroom_v,
                    "min_f_high_hz": t.min_f_high_hz, "max_f_low_hz": t.max_f_low_hz,
                    "max_power_w": t.max_power_w, "max_loading_loss_db": t.max_loss_db, "from": t.origin,
                    "not_targeted": t.skipped, "report_only": t.report_only},
        "placements": [{"from": pl.source, "to": pl.reader, "buffer": pl.buffer, "candidate": pl.candidate,
                        "power_w": pl.power_w, "price": pl.price, "count": pl.count} for pl in p.placements],
        "before": _measured_dict(p.before),
        "after": None if p.measured is None else _measured_dict(p.measured),
        "shortfalls": [_shortfall_dict(s) for s in p.shortfalls],
        "requirements": [result_dict(r) for r in (requirements or [])],
        "search": p.stats,
    })


def _measured_dict(m: Measured) -> dict:
    return {"valid": m.valid, "gain_db": [{"f_hz": f, "db": v} for f, v in m.gain_db.items()],
            "f_low_hz": m.f_low_hz, "f_high_hz": m.f_high_hz, "min_headroom_v": m.min_headroom_v,
            "min_headroom_node": m.min_headroom_node, "follower_power_w": m.power_w,
            "worst_loading_loss_db": m.loss_db, "margins": m.margins}


def _shortfall_dict(s: Shortfall) -> dict:
    return {"kind": s.kind, "target": s.target, "best_reachable": s.best, "with_other_targets_met": s.with_others,
            "proven": s.proven, "limited_by": s.limiter}
