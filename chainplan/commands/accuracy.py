"""``chainplan accuracy FILE``: the DC error budget — offset, bias current, gain
error, drift and converter errors carried to the output, before and after a
calibration, in V, LSB, % of full scale, at the input and in sensor units."""
from __future__ import annotations


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("--calibration", choices=("none", "one_point", "two_point"),
                   help="override accuracy.calibration: none, one_point (offset), two_point (offset and gain)")
    p.add_argument("--json", action="store_true", help="print JSON instead of tables")


def run(args) -> int:
    import dataclasses

    from ..engine.budget import check_operating_points, evaluate
    from ..engine.dcerror import Accuracy, accuracy_of, analyse_dc_errors
    from ..spec.loader import load_chain
    from ..studies.requirements import ERROR_KINDS, evaluate_requirements
    chain = load_chain(args.file)
    if args.calibration:
        chain.extra["accuracy"] = dataclasses.replace(accuracy_of(chain) or Accuracy(), calibration=args.calibration)
    ev = evaluate(chain)
    check_operating_points(chain, ev.dc)
    res = analyse_dc_errors(chain)
    reqs = [r for r in chain.extra.get("requirements", []) if r.key in ERROR_KINDS]
    results = evaluate_requirements(ev, reqs) if reqs else []
    if args.json:
        from ..engine.dcerror import dc_error_json
        from ..render.json_out import clean, dumps
        from ..spec.safety import safety_notice
        from ..studies.requirements import result_dict
        print(dumps(clean({"chain": chain.name, "file": chain.path, "hazards": chain.hazards,
                           "caution": safety_notice(chain.hazards), **dc_error_json(res),
                           "requirements": [result_dict(q) for q in results]})))
    else:
        from ..render.accuracy_tables import accuracy_tables
        from ..render.console import make_console
        accuracy_tables(res, make_console(), results)
    return 1 if any(not bool(q.passed[0]) for q in results) else 0
