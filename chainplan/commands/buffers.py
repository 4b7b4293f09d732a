"""``chainplan buffers FILE``: where a buffer pays off and what it costs, per
interface; with ``--place`` (or any target option) the cheapest placement that
meets the targets, optionally written as a new spec with ``--write``."""
from __future__ import annotations

import math
import os

from ..errors import UsageError
from ..spec.units import UnitError, parse_value
from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("--parts", metavar="FILE", action="append", default=[],
                   help="a parts file of candidate buffers, in addition to the spec's include:/candidates:")
    p.add_argument("--interface", metavar="STAGE", help="show the candidate table of this interface only "
                   "(named by the stage that reads it)")
    p.add_argument("--plot", metavar="FOLDER", help="advice: also draw it as a picture, FOLDER/<spec>-advice.png "
                   "and .svg (the chain as a strip, each interface's loading loss and what the advised buffer "
                   "gives back; needs matplotlib)")
    p.add_argument("--details", action="store_true", help="advice: also every candidate at every interface "
                   "(its figures, why it cannot be biased or what it breaks) and the reason of each verdict")
    g = p.add_argument_group("placement (the optimiser)")
    g.add_argument("--place", action="store_true", help="find the cheapest placement meeting the targets "
                   "(implied by the target options, --targets and --write)")
    g.add_argument("--min-gain", metavar="GAIN", help="end-to-end gain at the reference frequency, e.g. '30 dB'")
    g.add_argument("--min-headroom", metavar="VOLTS", help="headroom at every node, e.g. '100 mV'")
    g.add_argument("--headroom-nodes", metavar="N1,N2", help="apply --min-headroom to these nodes only")
    g.add_argument("--min-bandwidth", metavar="FREQ", help="upper −3 dB band edge at least this, e.g. '20 kHz'")
    g.add_argument("--max-power", metavar="WATTS", help="total power of all followers, e.g. '2 mW'")
    g.add_argument("--targets", metavar="REQ1,REQ2",
                   help="which of the spec's requirements to target (names or kinds, e.g. 'min_gain,"
                        "max_loading_loss'; 'none' for the options alone); the others are only checked "
                        "and reported (default: all it can target)")
    g.add_argument("--time-limit", metavar="SECONDS", default=None,
                   help="stop searching after this long and give the best placement found, marked as not "
                        "proven optimal, with its gap to the proved lower bound (default 10; 0: no limit)")
    g.add_argument("--cost", choices=("power", "price", "parts"),
                   help="what to minimise (default: price if every candidate has one, else power)")
    g.add_argument("--write", metavar="NEW.yaml", help="write the chain with the chosen buffers as a new spec")
    g.add_argument("--in-place", action="store_true", help="rewrite FILE itself with the chosen buffers")
    add_analysis_options(p)


def run(args) -> int:
    from ..spec.parts import candidates_of, load_parts
    from ..spec.loader import load_chain
    chain = apply_analysis_options(load_chain(args.file), args)
    for path in args.parts:
        load_parts(chain, path)
    cands = candidates_of(chain)
    if not cands:
        raise UsageError(f"{args.file} has no candidate buffers: add 'include: [parts/followers.yaml]' (a parts "
                         "file) or 'candidates:' to the spec, or pass --parts FILE")
    if args.interface is not None:
        from ..spec.insert import check_interface
        check_interface(chain, args.interface)
    if args.in_place and args.write:
        raise UsageError("give either --write NEW.yaml or --in-place, not both")
    if args.write and os.path.exists(args.write) and os.path.samefile(args.write, args.file):
        raise UsageError(f"--write {args.write} names the input spec itself; to rewrite it, use --in-place")
    if args.write or args.in_place:
        from ..render.files import check_target
        check_target(args.write or args.file, replaces=args.file if args.in_place else None)
    if args.plot is not None and (args.place or args.write or args.in_place or any(
            x is not None for x in (args.min_gain, args.min_headroom, args.min_bandwidth, args.max_power,
                                    args.targets))):
        raise UsageError("--plot draws the advice (without targets); the placement has no picture yet")
    place = args.place or args.write or args.in_place or any(
        x is not None for x in (args.min_gain, args.min_headroom, args.min_bandwidth, args.max_power, args.targets))
    if args.headroom_nodes and args.min_headroom is None:
        raise UsageError("--headroom-nodes needs --min-headroom")
    if place and any(getattr(st.model, "reads_differential", False) for st in chain.stages):
        raise UsageError("buffer placement does not search chains with a differential pair yet (a bridge read by a "
                         "difference amplifier); 'chainplan buffers' without targets advises the single-ended "
                         "interfaces")
    return _place(chain, args) if place else _advise(chain, args)


def _advise(chain, args) -> int:
    from ..placement.advisor import advise
    if args.plot is not None:
        import importlib.util
        if importlib.util.find_spec("matplotlib") is None:
            raise UsageError("--plot needs matplotlib, which is not installed: pip install matplotlib")
        from ..render.files import check_folder
        check_folder(args.plot)                  # refuse a bad folder before any work
    a = advise(chain)
    written = []
    if args.plot is not None:
        from ..render import plots
        stem = os.path.splitext(os.path.basename(args.file))[0]
        written = plots.save({"advice": plots.advice_strip(a)}, args.plot, stem)
    if args.json:
        from ..render.advisor_tables import advice_dict
        from ..render.json_out import dumps
        print(dumps(advice_dict(a)))
    else:
        from ..render.advisor_tables import advice_tables
        from ..render.console import make_console
        advice_tables(a, make_console(wide=args.wide), only=args.interface, details=args.details)
        for path in written:
            print(f"wrote {path}")
    return 0


def targets_from_args(chain, args):
    """The optimiser's targets: the command-line options plus the spec's requirements."""
    from ..placement.optimiser import Targets, check_nodes, targets_from_requirements
    t = Targets(gain_unit=chain.gain_db_unit)
    if args.min_gain is not None:
        t.min_gain_db[chain.analysis.f_ref_hz] = _value(args.min_gain, "dB", "--min-gain")
        t.add_origin("gain", "--min-gain")
    if args.min_headroom is not None:
        h = _value(args.min_headroom, "V", "--min-headroom")
        if args.headroom_nodes:
            nodes = [n.strip() for n in args.headroom_nodes.split(",") if n.strip()]
            check_nodes(chain, nodes)
            t.node_headroom_v = {n: h for n in nodes}
        else:
            t.min_headroom_v = h
        t.add_origin("headroom", "--min-headroom")
    if args.min_bandwidth is not None:
        t.min_f_high_hz = _value(args.min_bandwidth, "Hz", "--min-bandwidth", positive=True)
        t.add_origin("f_high", "--min-bandwidth")
    if args.max_power is not None:
        t.max_power_w = _value(args.max_power, "W", "--max-power")
        t.add_origin("power", "--max-power")
    chosen = _chosen_requirements(chain, getattr(args, "targets", None))
    t = targets_from_requirements(chain, t, chosen)
    if not t.kinds():
        raise UsageError("nothing to place buffers for: give a target (--min-gain, --min-headroom, "
                         "--min-bandwidth, --max-power) or a requirements: block in the spec")
    return t


def _chosen_requirements(chain, text):
    """The spec requirements ``--targets`` names (None: all of them)."""
    if text is None:
        return None
    reqs = chain.extra.get("requirements", [])
    words = [w.strip() for w in text.split(",") if w.strip()]
    if words == ["none"]:
        return []
    if words == ["all"]:
        return None
    names = {r.name for r in reqs} | {r.key for r in reqs}
    for w in words:
        if w not in names:
            from ..errors import nearest
            raise UsageError(f"--targets: '{w}' is not a requirement of '{chain.name}'"
                             + (nearest(w, sorted(names)) if names else " (it has no requirements: block)")
                             + (f"; its requirements: {', '.join(r.name for r in reqs)}" if reqs else ""))
    return [r for r in reqs if r.name in words or r.key in words]


def _value(text, unit, opt, positive=False):
    try:
        v = parse_value(text.strip(), unit)
    except UnitError as exc:
        raise UsageError(f"{opt}: {exc}") from None
    if not math.isfinite(v) or (positive and v <= 0):
        raise UsageError(f"{opt}: must be {'positive and ' if positive else ''}finite")
    return v


def _time_limit(text):
    if text is None:
        from ..placement.optimiser import TIME_LIMIT_S
        return TIME_LIMIT_S
    try:
        v = float(text)
    except ValueError:
        v = math.nan
    if not math.isfinite(v) or v < 0:
        raise UsageError(f"--time-limit: '{text}' is not a number of seconds ≥ 0 (0: no limit)")
    return None if v == 0 else v


def _place(chain, args) -> int:
    from ..placement.optimiser import optimise
    limit = _time_limit(args.time_limit)
    targets = targets_from_args(chain, args)
    progress = _progress_line() if not args.json else None
    try:
        plan = optimise(chain, targets, basis=args.cost, time_limit=limit, progress=progress)
    finally:
        if progress is not None:
            progress.done()
    reqs = None
    if plan.feasible and chain.extra.get("requirements"):
        from ..engine.budget import evaluate
        from ..studies.requirements import evaluate_requirements
        reqs = evaluate_requirements(evaluate(plan.buffered))
    report_only = set(targets.report_only)
    unmet = [r.name for r in reqs or [] if not bool(r.passed[0]) and r.name not in report_only]
    written = None
    if args.write or args.in_place:
        if not plan.feasible:
            raise UsageError("nothing written: no placement meets the targets (see the table without --write)")
        from ..render.files import write_atomic
        from ..spec.writer import buffered_file
        written = args.file if args.in_place else args.write
        data = buffered_file(chain, {p.reader: _cand(chain, p.candidate) for p in plan.placements}, written)
        write_atomic({written: data}, replaces=args.file if args.in_place else None)
    if args.json:
        from ..render.advisor_tables import plan_dict
        from ..render.json_out import dumps
        d = plan_dict(plan, reqs)
        d["written"] = written
        print(dumps(d))
    else:
        from ..render.advisor_tables import plan_tables
        from ..render.console import make_console
        console = make_console(wide=args.wide)
        plan_tables(plan, console, reqs, report_only)
        if unmet:
            from rich.text import Text
            console.print(Text("the placement does not meet the spec's " + ", ".join(unmet) + " (not something "
                               "the optimiser can target, or left out with --targets); exit status 1",
                               style="bold red"))
        if written:
            console.print(f"wrote {written}")
    return 0 if plan.feasible and not unmet else 1


class _progress_line:
    """One line on stderr, rewritten after each cost bound, when stderr is a terminal."""

    def __init__(self):
        import sys
        self.err = sys.stderr
        self.tty = self.err.isatty()
        self.shown = False

    def __call__(self, info: dict) -> None:
        if not self.tty:
            return
        best = "none yet" if info.get("best") is None else f"{info['best']:.4g}"
        self.err.write(f"\rsearching: {info['states']} states, best cost {best}, bound > {info['bound']:.4g}, "
                       f"{info['seconds']:.1f} s   ")
        self.err.flush()
        self.shown = True

    def done(self) -> None:
        if self.shown:
            self.err.write("\r\033[K")
            self.err.flush()


def _cand(chain, name):
    from ..spec.parts import candidates_of
    return next(c for c in candidates_of(chain) if c.name == name)
