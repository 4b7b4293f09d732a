"""``chainplan rare FILE``: the production failure rate at the parts-per-million level
and below, by mixture importance sampling (chainplan.studies.rare), with its 95 %
interval, the brute-force sample count it stands for, and the most likely failure
point — the combination of tolerances nearest the nominal that fails."""
from __future__ import annotations

import math
import re

from ..errors import UsageError
from .common import add_analysis_options, apply_analysis_options

_RATE_RE = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*(ppm|ppb|%)?\s*$")
_RATE_UNITS = {None: 1.0, "%": 1e-2, "ppm": 1e-6, "ppb": 1e-9}


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML) with tolerances and requirements")
    p.add_argument("-n", "--samples", type=int, default=20000,
                   help="weighted units drawn around the failure regions (default 20000)")
    p.add_argument("--explore", type=int, default=2000, metavar="N",
                   help="units per exploration round that find the failure regions (default 2000)")
    p.add_argument("--seed", type=int, default=1, help="random seed; the same seed gives the same numbers (default 1)")
    p.add_argument("--max-failure", metavar="RATE", help="exit 1 unless the failure rate is at most this with 95 %% "
                   "confidence (the interval's upper end decides), e.g. '10 ppm', '0.1 %%', '1e-5'")
    add_analysis_options(p)


def parse_rate(text: str) -> float:
    """A failure rate: '10 ppm', '3 ppb', '0.1 %' or a plain fraction '1e-5'."""
    m = _RATE_RE.match(text or "")
    if not m:
        raise UsageError(f"--max-failure: '{text}' is not a failure rate; write e.g. '10 ppm', '0.1 %' or '1e-5'")
    v = float(m.group(1)) * _RATE_UNITS[m.group(2)]
    if not 0 <= v <= 1:
        raise UsageError("--max-failure: a failure rate lies between 0 and 1 (100 %)")
    return v


def run(args) -> int:
    from ..spec.loader import load_chain
    from ..studies.rare import estimate
    if not 100 <= args.samples <= 10_000_000:
        raise UsageError("--samples is a whole number from 100 to 10000000")
    if not 100 <= args.explore <= 1_000_000:
        raise UsageError("--explore is a whole number from 100 to 1000000")
    limit = parse_rate(args.max_failure) if args.max_failure is not None else None
    chain = apply_analysis_options(load_chain(args.file), args)
    from ..engine.budget import check_operating_points, evaluate
    check_operating_points(chain, evaluate(chain).dc)
    if not chain.extra.get("requirements"):
        raise UsageError(f"{args.file}: the spec has no requirements, so no unit can fail; add a "
                         "'requirements:' section (docs/requirements.md)")
    res = estimate(chain, args.samples, args.explore, args.seed)
    gate = None
    if limit is not None:
        hi = res.interval[1]
        if res.regions:
            passed = bool(math.isfinite(hi) and hi <= limit)
        else:                            # nothing failed anywhere up to 6σ: no estimate to gate on
            passed = True
        gate = {"max_failure": limit, "decided_on": "upper_95", "upper_bound": hi if res.regions else None,
                "passed": passed}
    if args.json:
        from ..render.json_out import dumps
        from ..render.rare_tables import rare_dict
        print(dumps(rare_dict(res, gate)))
    else:
        from ..render.console import make_console
        from ..render.rare_tables import rare_tables
        rare_tables(res, make_console(wide=args.wide), gate)
    return 1 if gate is not None and not gate["passed"] else 0
