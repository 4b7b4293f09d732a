"""``chainplan plot FILE``: the level diagram, gain, loop gain and step response, noise and (with --mc) Monte Carlo
figures of a chain, as PNG and SVG files."""
from __future__ import annotations

import os

from .common import add_analysis_options, apply_analysis_options

WHICH = ("levels", "gain", "dynamics", "noise", "montecarlo", "compare")


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("-o", "--out", metavar="FOLDER", default=".",
                   help="folder for the files, created if needed (default: the current folder)")
    p.add_argument("--only", metavar="NAMES", help="comma-separated subset of: " + ", ".join(WHICH))
    add_montecarlo_options(p)
    add_against_option(p)
    add_analysis_options(p, json=False)


def add_against_option(p):
    p.add_argument("--against", metavar="OLD", help="also draw the gain and noise of FILE against OLD overlaid "
                   "(a spec file, or FILE@REV for a git revision, e.g. 'chains/x.yaml@HEAD')")


def comparison_figure(args, b, noise):
    """The before/after picture of ``--against`` (None without it)."""
    if not getattr(args, "against", None):
        return None
    import os

    from ..api import budget_for
    from ..engine.noise import analyse_noise
    from ..studies.diffing import load_side
    path, rev = args.against, None
    if not os.path.exists(path) and "@" in path:
        path, rev = path.rsplit("@", 1)
    old = load_side(path, rev, lambda chain: apply_analysis_options(chain, args))
    b_old = budget_for(old.chain)
    from ..render.plots import comparison_plot
    return comparison_plot(b_old, b, analyse_noise(b_old.ev) if noise is not None else None, noise,
                           labels=(old.label, b.chain.path or b.chain.name))


def add_montecarlo_options(p):
    p.add_argument("--mc", type=int, metavar="N", default=0,
                   help="also run a tolerance Monte Carlo of N samples and show its histograms")
    p.add_argument("--seed", type=int, default=1, help="Monte Carlo seed (default 1)")


def analyse_for_pictures(args):
    """Budget, noise result (if the noise analysis exists) and Monte Carlo result (if asked for)."""
    import importlib.util

    from ..api import budget_for
    from ..errors import UsageError
    from ..spec.loader import load_chain
    if importlib.util.find_spec("matplotlib") is None:
        raise UsageError("figures need matplotlib, which is not installed: pip install matplotlib")
    if args.mc < 0 or args.mc > 1_000_000:
        raise UsageError("--mc takes a number of samples from 1 to 1000000 (0: no Monte Carlo)")
    chain = apply_analysis_options(load_chain(args.file), args)
    b = budget_for(chain)
    noise = mc = None
    try:
        from ..engine.noise import analyse_noise
    except ImportError:
        analyse_noise = None
    if analyse_noise is not None:
        noise = analyse_noise(b.ev)
    if args.mc:
        from ..studies.montecarlo import run as run_mc
        mc = run_mc(chain, args.mc, seed=args.seed)
    return b, noise, mc


def run(args) -> int:
    from ..errors import UsageError
    from ..render.files import check_folder
    wanted = WHICH if not args.only else tuple(w.strip() for w in args.only.split(",") if w.strip())
    bad = [w for w in wanted if w not in WHICH]
    if bad:
        raise UsageError(f"--only: unknown figure '{bad[0]}' (choose from {', '.join(WHICH)})")
    if "montecarlo" in wanted and args.only and not args.mc:
        raise UsageError("--only montecarlo needs --mc N (the number of samples)")
    if "compare" in wanted and args.only and not args.against:
        raise UsageError("--only compare needs --against OLD (the spec to compare with)")
    check_folder(args.out)                       # refuse a bad folder before any work
    b, noise, mc = analyse_for_pictures(args)
    from ..render import plots
    figs = {k: v for k, v in plots.figures(b, noise, mc).items() if k in wanted}
    cmp = comparison_figure(args, b, noise) if "compare" in wanted else None
    if cmp is not None:
        figs["compare"] = cmp
    stem = os.path.splitext(os.path.basename(args.file))[0]
    for path in plots.save(figs, args.out, stem):
        print(path)
    return 0
