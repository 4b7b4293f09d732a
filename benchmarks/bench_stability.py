"""Phase margin and step settling over a Monte Carlo batch (issue 14's speed figure).

    python benchmarks/bench_stability.py [--samples 10000] [--repeat 3]

The 10-stage chain of bench_montecarlo.py (source follower, cable, filters, two
op-amps, divider, ADC; 25 toleranced parts, rails, a supply corner).  Timed, per
batch of ``--samples`` samples drawn at once: the engine's evaluation (DC bias
solve, AC cascade on the chain's grid), the loop analysis of both op-amps (one
AC pass on the loop grid, crossover, phase margin, peaking) and the step
response with its settling time (one AC pass on the step grid, the Filon sum as
one matrix product).  Median of ``--repeat`` runs, with the load average beside
it (the machine is shared).  Figures are printed; nothing is asserted.
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
sys.path.insert(0, os.path.dirname(__file__))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--samples", type=int, default=10000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--chunk", type=int, default=2000)
    args = ap.parse_args()
    from bench_montecarlo import CHAIN
    from chainplan.engine.budget import evaluate
    from chainplan.engine.loop import analyse_loops
    from chainplan.engine.step import analyse_step
    from chainplan.spec.loader import load_chain_text
    from chainplan.studies.tolerances import draw
    chain = load_chain_text(CHAIN, "bench")
    d = draw(chain, args.samples, 1)
    from concurrent.futures import ThreadPoolExecutor
    slices = [slice(i, min(i + args.chunk, args.samples)) for i in range(0, args.samples, args.chunk)]

    def one(sl):
        with np.errstate(all="ignore"):
            t0 = time.perf_counter()
            ev = evaluate(chain, d.params(sl))
            t1 = time.perf_counter()
            loops = analyse_loops(ev)
            t2 = time.perf_counter()
            st = analyse_step(ev)
            t3 = time.perf_counter()
        return (t1 - t0, t2 - t1, t3 - t2), loops, st

    times = {"evaluate": [], "loops": [], "step": [], "total": []}
    for _ in range(args.repeat):
        t_start = time.perf_counter()
        with ThreadPoolExecutor(max_workers=min(os.cpu_count() or 1, 4)) as pool:
            parts = list(pool.map(one, slices))
        wall = time.perf_counter() - t_start
        cpu = np.sum([p[0] for p in parts], axis=0)          # summed over the chunks (threads overlap)
        for k, v in zip(times, (*cpu, wall)):
            times[k].append(v)
    loops = [dataclasses_join([p[1][i] for p in parts]) for i in range(len(parts[0][1]))]
    st = parts[0][2]
    st.settling_s = np.concatenate([p[2].settling_s for p in parts])
    load = os.getloadavg()
    print(f"{args.samples} samples in chunks of {args.chunk}, 10-stage chain, {len(loops[0].f_hz)} coarse loop "
          f"frequencies; load average {load[0]:.2f} {load[1]:.2f} {load[2]:.2f}")
    for k, v in times.items():
        what = "wall time" if k == "total" else "thread time summed over chunks"
        print(f"  {k:9s} median {np.median(v):.3f} s {what}  (runs: {', '.join(f'{x:.3f}' for x in v)})")
    for r in loops:
        if r.is_loop:
            pm = r.pm_deg[np.isfinite(r.pm_deg)]
            print(f"  phase margin {r.stage}: median {np.median(pm):.1f}°, 0.1 % {np.percentile(pm, 0.1):.1f}°, "
                  f"99.9 % {np.percentile(pm, 99.9):.1f}°")
    s = st.settling_s[np.isfinite(st.settling_s)]
    print(f"  step settling to {st.error:.0%}: median {np.median(s) * 1e6:.2f} µs over {s.size} settled samples")


def dataclasses_join(parts):
    """One LoopResult with the chunks' per-sample figures concatenated."""
    r = parts[0]
    for key in ("pm_deg", "f_cross_hz", "peaking_db"):
        setattr(r, key, np.concatenate([getattr(p, key) for p in parts]))
    return r


if __name__ == "__main__":
    main()
