"""``chainplan netlist FILE``: the chain as a SPICE netlist (ngspice, or any SPICE-class simulator)."""
from __future__ import annotations


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("-o", "--output", metavar="PATH", help="write the netlist to PATH (default: print it)")
    p.add_argument("--per-decade", type=int, default=100, metavar="N",
                   help="AC and noise sweep points per decade (default 100)")


def run(args) -> int:
    from ..errors import UsageError
    from ..spec.loader import load_chain
    from ..render.spice import export
    if not 1 <= args.per_decade <= 10000:
        raise UsageError("--per-decade takes a whole number from 1 to 10000")
    chain = load_chain(args.file)
    if args.output:
        from ..render.files import check_target
        check_target(args.output)                # refuse a bad target (or the spec itself) before any work
    text = export(chain, points_per_decade=args.per_decade).text()
    if args.output:
        from ..render.files import write_atomic
        write_atomic({args.output: text})
    else:
        print(text, end="")
    return 0
