"""``chainplan report FILE``: one self-contained HTML review report (tables and figures)."""
from __future__ import annotations

import os

from .common import add_analysis_options
from .plot import add_against_option, add_montecarlo_options, analyse_for_pictures, comparison_figure


def add_arguments(p):
    p.add_argument("file", help="chain spec (YAML)")
    p.add_argument("-o", "--output", metavar="PATH",
                   help="the HTML file to write (default: <spec name>-report.html in the current folder)")
    add_montecarlo_options(p)
    add_against_option(p)
    add_analysis_options(p, json=False)


def run(args) -> int:
    from ..errors import UsageError
    from ..render.files import check_target, write_atomic
    path = args.output or os.path.splitext(os.path.basename(args.file))[0] + "-report.html"
    check_target(path)                           # refuse a bad target before any work
    b, noise, mc = analyse_for_pictures(args)
    check_target(path)                           # ...and one of the files the analysis read
    from ..render.plots import figures
    from ..render.report import report_html
    figs = figures(b, noise, mc)
    cmp = comparison_figure(args, b, noise)
    if cmp is not None:
        figs["compare"] = cmp
    write_atomic({path: report_html(b, noise, mc, figures=figs)})
    print(path)
    return 0
