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
    g = p.add_argument_group("placement (the optimiser)")
    g.add_argument("--place", action="store_true", help="find the cheapest placement meeting the targets "
                   "(implied by the target options and --write)")
    g.add_argument("--min-gain", metavar="GAIN", help="end-to-end gain at the reference frequency, e.g. '30 dB'")
    g.add_argument("--min-headroom", metavar="VOLTS", help="headroom at every node, e.g. '100 mV'")
    g.add_argument("--headroom-nodes", metavar="N1,N2", help="apply --min-headroom to these nodes only")
    g.add_argument("--min-bandwidth", metavar="FREQ", help="upper −3 dB band edge at least this, e.g. '20 kHz'")
    g.add_argument("--max-power", metavar="WATTS", help="total power of all followers, e.g. '2 mW'")
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
    place = args.place or args.write or args.in_place or any(
        x is not None for x in (args.min_gain, args.min_headroom, args.min_bandwidth, args.max_power))
    if args.headroom_nodes and args.min_headroom is None:
        raise UsageError("--headroom-nodes needs --min-headroom")
    return _place(chain, args) if place else _advise(chain, args)


def _advise(chain, args) -> int:
    from ..placement.advisor import advise
    a = advise(chain)
    if args.json:
        from ..render.advisor_tables import advice_dict
        from ..render.json_out import dumps
        print(dumps(advice_dict(a)))
    else:
        from ..render.advisor_tables import advice_tables
        from ..render.console import make_console
        advice_tables(a, make_console(wide=args.wide), only=args.interface)
    return 0


def targets_from_args(chain, args):
    """The optimiser's targets: the command-line options plus the spec's requirements."""
    from ..placement.optimiser import Targets, check_nodes, targets_from_requirements
    t = Targets()
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
    t = targets_from_requirements(chain, t)
    if not t.kinds():
        raise UsageError("nothing to place buffers for: give a target (--min-gain, --min-headroom, "
                         "--min-bandwidth, --max-power) or a requirements: block in the spec")
    return t


def _value(text, unit, opt, positive=False):
    try:
        v = parse_value(text.strip(), unit)
    except UnitError as exc:
        raise UsageError(f"{opt}: {exc}") from None
    if not math.isfinite(v) or (positive and v <= 0):
        raise UsageError(f"{opt}: must be {'positive and ' if positive else ''}finite")
    return v


def _place(chain, args) -> int:
    from ..placement.optimiser import optimise
    plan = optimise(chain, targets_from_args(chain, args), basis=args.cost)
    reqs = None
    if plan.feasible and chain.extra.get("requirements"):
        from ..engine.budget import evaluate
        from ..studies.requirements import evaluate_requirements
        reqs = evaluate_requirements(evaluate(plan.buffered))
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
        plan_tables(plan, console, reqs)
        if written:
            console.print(f"wrote {written}")
    return 0 if plan.feasible else 1


def _cand(chain, name):
    from ..spec.parts import candidates_of
    return next(c for c in candidates_of(chain) if c.name == name)
