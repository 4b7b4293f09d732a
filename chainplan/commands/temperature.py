"""``chainplan temperature FILE``: the nominal chain at a list of temperatures —
gain, band edges, DC levels, headroom and noise from cold to hot, with the
drift per kelvin."""
from __future__ import annotations

import math

from ..errors import UsageError
from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("--temps", metavar="LIST", help="temperatures, comma-separated, e.g. '-40 °C, 25 °C, 85 °C' "
                   "(default: the corners' temperature range and the spec's temperature, else 0 °C to 50 °C)")
    add_analysis_options(p)


def parse_temps(text: str) -> list:
    from ..spec.units import UnitError, parse_value
    out = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        try:
            t = parse_value(part, "K")
        except UnitError as exc:
            raise UsageError(f"--temps: {exc}") from None
        if part.replace(".", "").lstrip("+-−").isdigit():
            raise UsageError(f"--temps: '{part}' has no unit (kelvin or °C?); write e.g. '25 °C'")
        if not (1.0 <= t <= 1000.0 and math.isfinite(t)):
            raise UsageError(f"--temps: {part} is outside 1 K to 1000 K")
        out.append(t)
    if len(set(out)) < 2:
        raise UsageError("--temps: give at least two different temperatures, e.g. '0 °C, 50 °C'")
    if len(out) > 200:
        raise UsageError("--temps: at most 200 temperatures")
    return sorted(set(out))


def run(args) -> int:
    from ..spec.loader import load_chain
    from ..studies.tempsweep import default_temperatures, sweep
    chain = apply_analysis_options(load_chain(args.file), args)
    from ..engine.budget import check_operating_points, evaluate
    check_operating_points(chain, evaluate(chain).dc)
    temps = parse_temps(args.temps) if args.temps else default_temperatures(chain)
    res = sweep(chain, temps)
    if args.json:
        from ..render.json_out import dumps
        from ..render.sweep_tables import sweep_dict
        print(dumps(sweep_dict(res)))
    else:
        from ..render.console import make_console
        from ..render.sweep_tables import sweep_tables
        sweep_tables(res, make_console(wide=args.wide))
    return 0
