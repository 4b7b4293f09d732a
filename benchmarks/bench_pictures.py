"""Timings of the hand-off outputs for every demo chain: SPICE export, ngspice
running the exported file, the figures (built, then rendered to PNG and SVG),
the HTML report, and the whole-process time of 'chainplan netlist' and
'chainplan schema' (commands that must not import matplotlib).  Prints medians;
asserts nothing.

    python benchmarks/bench_pictures.py [--runs N]
"""
from __future__ import annotations

import argparse
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from chainplan.api import budget_for  # noqa: E402
from chainplan.engine.noise import analyse_noise  # noqa: E402
from chainplan.render import plots  # noqa: E402
from chainplan.render.report import report_html  # noqa: E402
from chainplan.spec.loader import load_chain  # noqa: E402
from chainplan.render.spice import export  # noqa: E402


def median_s(fn, runs: int) -> float:
    times = []
    for _ in range(runs):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    runs = ap.parse_args().runs
    ngspice = shutil.which("ngspice")
    print(f"{'chain':24} {'export':>9} {'ngspice':>9} {'figures':>9} {'png+svg':>9} {'report':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        for path in sorted((REPO / "chains").glob("*.yaml")):
            chain = load_chain(str(path))
            b = budget_for(chain)
            nr = analyse_noise(b.ev)
            t_export = median_s(lambda: export(chain).text(), runs)
            cir = Path(tmp) / f"{path.stem}.cir"
            cir.write_text(export(chain).text(), encoding="utf-8")
            t_spice = median_s(lambda: subprocess.run([ngspice, "-b", str(cir)], capture_output=True, check=True),
                               runs) if ngspice else float("nan")
            t_figs = median_s(lambda: plots.figures(b, nr), max(1, runs // 2))
            figs = plots.figures(b, nr)
            t_render = median_s(lambda: [plots.figure_bytes(f, x) for f in figs.values() for x in ("png", "svg")],
                                max(1, runs // 2))
            t_report = median_s(lambda: report_html(b, nr), max(1, runs // 2))
            print(f"{path.stem:24} {t_export * 1e3:7.2f}ms {t_spice * 1e3:7.1f}ms {t_figs * 1e3:7.0f}ms "
                  f"{t_render * 1e3:7.0f}ms {t_report * 1e3:7.0f}ms")
    demo = str(REPO / "chains" / "hydrophone_buffered.yaml")
    for args in (["netlist", demo], ["schema"]):
        t = median_s(lambda: subprocess.run([sys.executable, "-m", "chainplan.cli", *args], capture_output=True,
                                            check=True), runs)
        print(f"whole process 'chainplan {args[0]}': {t * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
