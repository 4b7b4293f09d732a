"""``chainplan spread FILE``: tolerance Monte Carlo — every tolerance drawn per
unit, every unit evaluated at every operating corner; the distribution of every
budget figure, the production yield of each requirement and of all together
with its 95 % interval, the yield at each corner, what drives the spread."""
from __future__ import annotations

import sys

from ..errors import UsageError
from .common import add_analysis_options, apply_analysis_options


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML) with tolerances (e.g. '10k ±1%%') and/or corners:")
    p.add_argument("-n", "--samples", type=int, default=10000, help="number of samples (default 10000)")
    p.add_argument("--seed", type=int, default=1, help="random seed; the same seed gives the same numbers (default 1)")
    p.add_argument("--rank", metavar="METRIC", help="rank the inputs by their share of this metric's or "
                   "requirement's variance (default: the requirement with the lowest yield, else gain_db)")
    p.add_argument("--min-yield", metavar="PERCENT", help="exit 1 unless the production yield is at least this "
                   "with 95 %% confidence (the Wilson interval's lower bound decides), e.g. '99 %%'")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run the chunks on dask.distributed: 'local' starts a "
                   "local cluster for the run, else the address of a running scheduler, e.g. tcp://10.0.0.5:8786 "
                   "(needs pip install -e '.[cluster]'); the same seed gives the same numbers either way")
    p.add_argument("--workers", type=int, metavar="N", help="worker processes of --scheduler local "
                   "(default: one per core)")
    add_analysis_options(p)


def run(args) -> int:
    from ..studies.montecarlo import run as run_mc
    from ..spec.loader import load_chain
    from ..spec.units import UnitError, parse_value
    if not 1 <= args.samples <= 10_000_000:
        raise UsageError("--samples is a whole number from 1 to 10000000")
    min_yield = None
    if args.min_yield is not None:
        try:
            min_yield = parse_value(args.min_yield, "%")
        except UnitError as exc:
            raise UsageError(f"--min-yield: {exc}") from None
        if not 0 <= min_yield <= 1:
            raise UsageError("--min-yield is a percentage from 0 to 100 %")
    chain = apply_analysis_options(load_chain(args.file), args)
    from ..engine.budget import check_operating_points, evaluate
    nominal = evaluate(chain)
    check_operating_points(chain, nominal.dc)
    _check_rank(chain, args.rank)
    if args.workers is not None and not (1 <= args.workers <= 1024 and args.scheduler == "local"):
        raise UsageError("--workers goes with --scheduler local and is a whole number from 1 to 1024")
    if args.scheduler is not None:
        from ..studies.cluster import connect
        with connect(args.scheduler, args.workers) as client, _Progress(args.samples) as tick:
            res = run_mc(chain, args.samples, args.seed, progress=tick, key=args.rank, client=client)
    else:
        with _Progress(args.samples) as tick:
            res = run_mc(chain, args.samples, args.seed, progress=tick, key=args.rank)
    from ..studies.montecarlo import nominal_unit_at_corners
    corners = nominal_unit_at_corners(chain, res.corners)
    gate = None
    if min_yield is not None:
        lower = res.interval(res.yield_all)[0]
        gate = {"min_yield": min_yield, "decided_on": "wilson_lower_95", "lower_bound": lower,
                "passed": bool(lower >= min_yield)}
    if args.json:
        from ..render.json_out import dumps
        from ..render.spread_tables import spread_dict
        print(dumps(spread_dict(res, nominal, corners, gate)))
    else:
        from ..render.console import make_console
        from ..render.spread_tables import spread_tables
        spread_tables(res, nominal, corners, make_console(wide=args.wide), gate)
    return 1 if gate is not None and not gate["passed"] else 0


def _check_rank(chain, key):
    """A --rank name must be a metric or a requirement of this chain."""
    if key is None:
        return
    from ..errors import nearest
    from ..studies.montecarlo import metric_names
    names = metric_names(chain) + [r.name for r in chain.extra.get("requirements", [])]
    if key not in names:
        raise UsageError(f"--rank: '{key}' is not a metric or requirement of this chain" + nearest(key, names))


class _Progress:
    """A rich progress bar on stderr for long runs, only when stderr is a terminal."""

    def __init__(self, total):
        self.total, self.bar = total, None

    def __enter__(self):
        if sys.stderr.isatty() and self.total >= 20000:
            from rich.console import Console
            from rich.progress import Progress
            self.bar = Progress(console=Console(file=sys.stderr), transient=True)
            self.bar.start()
            self.task = self.bar.add_task("samples", total=self.total)
        return self.tick

    def tick(self, done, total):
        if self.bar is not None:
            self.bar.update(self.task, completed=done)

    def __exit__(self, *exc):
        if self.bar is not None:
            self.bar.stop()
