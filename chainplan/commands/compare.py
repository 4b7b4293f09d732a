"""``chainplan compare OLD [NEW]``: what a change did to the budget — two spec
files, or one file at two git revisions (``--old REV``/``--new REV``; with one
file and no revision: HEAD against the working tree).  Revisions are read with
``git show``; the working tree is never touched."""
from __future__ import annotations

from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("old", metavar="OLD", help="spec file (the 'before' side, or both sides with revisions)")
    p.add_argument("new", metavar="NEW", nargs="?", help="spec file of the 'after' side (default: OLD)")
    p.add_argument("--old", dest="old_rev", metavar="REV", help="read OLD at this git revision "
                   "(default with a single file: HEAD)")
    p.add_argument("--new", dest="new_rev", metavar="REV", help="read NEW at this git revision "
                   "(default: the file as it is now)")
    p.add_argument("--markdown", action="store_true", help="print Markdown for a pull-request comment")
    p.add_argument("--strict", action="store_true", help="exit 1 when anything regressed")
    add_analysis_options(p)


def run(args) -> int:
    from ..studies.diffing import compare, load_side
    from ..errors import UsageError
    if args.json and args.markdown:
        raise UsageError("--json and --markdown exclude each other")
    new_path = args.new or args.old
    old_rev = args.old_rev or ("HEAD" if args.new is None and args.new_rev is None else None)
    prepare = lambda chain: apply_analysis_options(chain, args)  # noqa: E731
    d = compare(load_side(args.old, old_rev, prepare), load_side(new_path, args.new_rev, prepare))
    if args.json:
        from ..render.compare_tables import compare_dict
        from ..render.json_out import dumps
        print(dumps(compare_dict(d)))
    elif args.markdown:
        from ..render.compare_tables import compare_markdown
        print(compare_markdown(d))
    else:
        from ..render.compare_tables import compare_tables
        from ..render.console import make_console
        compare_tables(d, make_console(wide=args.wide))
    return 1 if args.strict and d.regressions else 0
