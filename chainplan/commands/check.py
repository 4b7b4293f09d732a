"""``chainplan check FILE...``: every requirement of one or more specs, with
value, limit, margin and pass/fail.  Exit 0 when all are met, 1 when any
fails, 2 for bad input (and then nothing is written)."""
from __future__ import annotations

from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("files", nargs="+", metavar="FILE", help="chain specs (YAML) with a requirements: block")
    p.add_argument("--junit", metavar="PATH", help="also write JUnit XML (one test case per requirement) to PATH "
                   "('-': to standard output, instead of the tables)")
    add_analysis_options(p)


def run(args) -> int:
    from ..studies.requirements import check_chain
    from ..spec.loader import load_chain
    checked = []
    if args.junit:
        from ..render.files import check_target
        check_target(args.junit)                 # a bad target is refused before any work
    for path in args.files:                      # every spec is read and checked before anything is written
        chain = apply_analysis_options(load_chain(path), args)
        checked.append((chain, check_chain(chain)))
    if args.junit:
        from ..render.junit import junit_xml
        from ..render.files import write_atomic
        write_atomic({args.junit: junit_xml(checked)})
    if args.junit == "-":
        pass                                     # the XML is the standard output
    elif args.json:
        from ..render.check_tables import check_dict
        from ..render.json_out import dumps
        print(dumps(check_dict(checked)))
    else:
        from ..render.check_tables import check_tables
        from ..render.console import make_console
        check_tables(checked, make_console(wide=args.wide))
    return 0 if all(bool(r.passed[0]) for _, res in checked for r in res) else 1
