"""``chainplan budget FILE``: the budget tables (or JSON) of one chain."""
from __future__ import annotations

from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    add_analysis_options(p)


def run(args) -> int:
    from ..api import budget_for
    from ..spec.loader import load_chain
    chain = apply_analysis_options(load_chain(args.file), args)
    b = budget_for(chain)
    if args.json:
        from ..render.json_out import budget_dict, dumps
        print(dumps(budget_dict(b)))
    else:
        from ..render.console import make_console
        from ..render.tables import budget_tables
        budget_tables(b, make_console(wide=args.wide))
    return 0
