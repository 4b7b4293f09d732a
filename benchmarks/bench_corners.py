"""Production yield over operating corners (issue 13's figure): the 100 000-unit
Monte Carlo of the 10-stage benchmark chain (benchmarks/bench_montecarlo.py)
with a 3 × 3 supply × temperature corner grid against the same run without
corners; the issue asks for at most 3×.

    python benchmarks/bench_corners.py [--samples 100000] [--repeat 1]

Each run is a fresh process (imports warm, a 500-unit warm-up first), one
worker thread; wall and CPU seconds and the load average are printed.  The
corners are folded into the sample axis: a chunk's units at the 8 other
corners go through one engine call on the frequencies the requirements read
(with mid_band: f_ref and the grid from 1 kHz to the 5 kHz band-edge limit), so
the corner axis costs the DC solves and a few AC columns, not 8 more full runs.
Without mid_band (--span-passband) the passband is the largest gain over the
span and the corner call takes every column; the chunk's corner work is then
split into calls that fit one chunk's memory while the nominal chunk (noise,
step, start-up: a cost per call) stays whole.  Before that split the chunk
itself shrank 8× (20 000 units: 3.87× CPU, load 1.2 to 5.9); after it 2.23×
CPU (load 11.5 to 11.8); 100 000-unit figures in /work/team/LOG.md and the commit.
Figures are printed; nothing is asserted.
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
sys.path.insert(0, os.path.dirname(__file__))

GRID = "corners: {supply: ±5 %, temperature: [0 °C, 50 °C]}"


SPAN_PASSBAND = "--span-passband" in sys.argv


def chain_text(corners: bool) -> str:
    from bench_montecarlo import CHAIN
    text = CHAIN.replace("corners: {supply: ±5 %}", GRID if corners else "")
    # the passband read at 1 kHz (mid_band), as the band edges were before signal bands: the
    # corner call then needs f_ref and the grid from 1 kHz to the 5 kHz limit; without it the
    # passband is the largest gain over the whole span and the corner call takes every column
    if not SPAN_PASSBAND:
        text = text.replace("analysis: {f_ref: 1 kHz,", "analysis: {mid_band: 1 kHz, f_ref: 1 kHz,")
    assert ("corners:" in text) == corners
    return text


def child(samples: int, corners: bool) -> None:
    from chainplan.spec.loader import load_chain_text
    from chainplan.studies import montecarlo as mc
    chain = load_chain_text(chain_text(corners), "bench-corners")
    mc.run(chain, 500, seed=0, workers=1)
    t0, c0 = time.perf_counter(), time.process_time()
    res = mc.run(chain, samples, seed=1, workers=1)
    print(json.dumps({"seconds": time.perf_counter() - t0, "cpu_seconds": time.process_time() - c0,
                      "corners": len(res.corners), "yield": res.yield_all,
                      "interval": list(res.interval(res.yield_all)),
                      "f_corner": len(mc.requirement_frequencies(chain, mc.frequency_grid(chain))),
                      "f_full": len(mc.frequency_grid(chain))}))


def run(samples: int, corners: bool) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", str(samples)] + (["--corners"] if corners else [])
                         + (["--span-passband"] if SPAN_PASSBAND else []),
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=100_000)
    ap.add_argument("--repeat", type=int, default=1)
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--corners", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--span-passband", action="store_true", help="no mid_band: the whole grid at the corners")
    a = ap.parse_args()
    if a.child:
        child(a.child, a.corners)
        return
    for _ in range(a.repeat):
        load0 = os.getloadavg()
        plain = run(a.samples, False)
        grid = run(a.samples, True)
        load1 = os.getloadavg()
        print(f"{a.samples} units, no corners:        {plain['seconds']:7.2f} s wall, {plain['cpu_seconds']:7.2f} s CPU")
        print(f"{a.samples} units, {grid['corners']} corners (3 × 3): {grid['seconds']:7.2f} s wall, "
              f"{grid['cpu_seconds']:7.2f} s CPU; corner call on {grid['f_corner']} of {grid['f_full']} frequencies")
        print(f"ratio: {grid['seconds'] / plain['seconds']:.2f}× wall, {grid['cpu_seconds'] / plain['cpu_seconds']:.2f}× CPU "
              f"(issue 13: at most 3×); production yield {100 * grid['yield']:.2f} % "
              f"[{100 * grid['interval'][0]:.3f} to {100 * grid['interval'][1]:.3f} %]")
        print(f"load average before {load0[0]:.2f} {load0[1]:.2f} {load0[2]:.2f}, after {load1[0]:.2f} {load1[1]:.2f} "
              f"{load1[2]:.2f} (2 cores, shared)")


if __name__ == "__main__":
    main()
