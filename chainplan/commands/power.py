"""``chainplan power FILE``: quiescent current per rail and stage, the power, and
battery life for the spec's ``power: battery:`` capacity."""
from __future__ import annotations


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("--json", action="store_true", help="print JSON instead of tables")


def run(args) -> int:
    from ..engine.budget import check_operating_points, evaluate
    from ..engine.power import analyse_power, power_json
    from ..spec.loader import load_chain
    chain = load_chain(args.file)
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    res = analyse_power(chain, ev)
    if args.json:
        from ..render.json_out import clean, dumps
        from ..spec.safety import safety_notice
        print(dumps(clean({"chain": chain.name, "file": chain.path, "hazards": chain.hazards,
                           "caution": safety_notice(chain.hazards), **power_json(res)})))
    else:
        from ..render.console import make_console
        from ..render.power_tables import power_tables
        power_tables(res, chain, make_console())
    return 0
