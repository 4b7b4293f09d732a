"""Timing of the exact buffer-placement optimiser on long chains.

Chains of 25, 50, 100 and 200 interfaces are built from a repeated unit — a
cable driven from a 4.7 kΩ source, an AC coupling to mid-supply (10 kΩ bias,
which loads the cable), and an amplifier (gain 1.5, 100 kΩ input, 4.7 kΩ
output) — with five followers of chains/parts/followers.yaml plus one more as
candidates (6 per interface; an emitter follower among them, so the DC
solution of most regions is a Newton iteration).  The targets ask for 1.5 dB
(one buffer needed) or 4 dB (two) more end-to-end gain than the chain has and
100 mV of headroom everywhere.  Costs by price (known before analysis: the
cost bound prunes hard) and by power (the followers' power depends on their
operating point, so the bound cannot skip them before analysis).

Scenarios: "1 buffer, by price" is the easy one.  "2 buffers, by price" needs a
second cost bound (a second forward pass) and reaches a state at every
interface; "1 buffer, by power" reaches a state at every interface at once.
In these three every unit is alike, so each device's operating point is solved
once and remembered.  "varied units" makes every unit differ (cable length, bias
resistor and level, gain): no operating point repeats, so the devices are
solved again along the whole chain — the hardest case here.

"band edges" adds an upper band edge 5 % above the chain's own and a lower one no
higher than the chain's own; "power limit" caps the followers' total power
(3 mW) while costing by price; "mixed targets" puts band edges, the power cap
and a loading-loss cap on the varied chain, costed by power.

Prints, per chain length and scenario, the median wall time and the least CPU
time of three runs (on a shared machine the CPU time is the figure to compare;
the load average is printed), the engine calls and region analyses, the
buffers placed and the peak memory of one more, traced run (tracemalloc);
a run stopped by the time budget (--time-limit, default 60 s) is shown with its gap;
run:  python benchmarks/bench_optimiser.py [--sizes 25,200] [--only 4,7] [--runs 3]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
import tracemalloc

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

from chainplan.placement.optimiser import Targets, measure, optimise  # noqa: E402
from chainplan.spec.parts import candidates_of  # noqa: E402
from chainplan.spec.loader import load_chain_text  # noqa: E402

#: the six candidates: five of chains/parts/followers.yaml and nmos_200u below
SIX = ("nmos_50u", "nmos_500u", "npn_ef", "opamp_micro", "opamp_fast", "nmos_200u")

UNIT = """  - name: cable{i}
    kind: cable
    length: {length} m
    c_per_m: 100 pF/m
    r_per_m: 0.1 Ω/m
  - name: couple{i}
    kind: ac_coupling
    c: 1 µF
    r_bias: {r_bias}
    bias: {bias}
  - name: amp{i}
    kind: amplifier
    gain: {gain}
    r_in: 100k
    r_out: 4.7k
    in_ref: vmid
    out_ref: vmid
    out_low: 0.1 V
    out_high: 3.2 V
"""

EXTRA = """candidates:
  - name: nmos_200u
    kind: source_follower
    kp: 120 µA/V²
    w_over_l: 400
    vth0: 0.55 V
    lambda: 0.04 /V
    bulk: source
    i_bias: 200 µA
    r_bias: 500k
    cost: {price: 0.12, count: 2}
"""


def unit(i: int, varied: bool) -> str:
    """One unit; ``varied`` makes every unit differ (cable length, bias resistor and level, gain), so no
    two regions of the chain are alike and no device operating point repeats from unit to unit."""
    if not varied:
        return UNIT.format(i=i, length=5, r_bias="10k", bias="vmid", gain=1.5)
    return UNIT.format(i=i, length=3 + (i % 5), r_bias=f"{8 + (i % 7) * 0.5:g}k",
                       bias=f"{1.5 + 0.01 * (i % 31):.2f} V", gain=f"{1.4 + 0.01 * (i % 23):.2f}")


def chain_text(interfaces: int, varied: bool = False) -> str:
    units = (interfaces - 1) // 3
    text = ("name: bench-{n}\nrails:\n  vdd: 3.3 V\n  vmid: 1.65 V\n"
            "include: [../chains/parts/followers.yaml]\n"
            "source:\n  name: sensor\n  kind: sensor\n  amplitude: 20 mV\n  dc: vmid\n  r: 4.7k\n"
            "stages:\n").format(n=interfaces)
    text += "".join(unit(i, varied) for i in range(units))
    for j in range(interfaces - 1 - 3 * units):          # pad to the exact interface count
        text += f"  - name: pad{j}\n    kind: rc_lowpass\n    r: 100\n    c: 100 pF\n"
    text += ("  - name: adc\n    kind: adc\n    bits: 16\n    fs_low: 0 V\n    fs_high: vdd\n    c_in: 20 pF\n"
             "analysis:\n  f_ref: 1 kHz\n  f_start: 10 Hz\n  f_stop: 1 MHz\n  points: 201\n")
    return text + EXTRA


#: (label, extra gain asked over the chain's own, cost basis, varied units, other targets); the
#: other targets: "band" asks the upper band edge 5 % above the chain's own and the lower one no
#: higher than it is, "power" caps the followers' total power at 3 mW, "loss" caps every
#: interface's loading loss at the chain's own worst (so no buffer may make one worse)
SCENARIOS = [("1 buffer, by price", 1.5, "price", False, ()),
             ("2 buffers, by price", 4.0, "price", False, ()),
             ("1 buffer, by power", 1.5, "power", False, ()),
             ("varied units, 1 buffer, by price", 1.5, "price", True, ()),
             ("band edges, by price", 1.5, "price", False, ("band",)),
             ("power limit, 2 buffers, by price", 4.0, "price", False, ("power",)),
             ("mixed targets, varied, by power", 1.5, "power", True, ("band", "power", "loss"))]


def targets_for(chain, extra: float, others) -> Targets:
    """The scenario's targets on this chain (see SCENARIOS)."""
    m = measure(chain, Targets())
    f_ref = chain.analysis.f_ref_hz
    t = Targets(min_gain_db={f_ref: m.gain_db[f_ref] + extra}, min_headroom_v=0.1)
    if "band" in others:
        t.min_f_high_hz, t.max_f_low_hz = 1.05 * m.f_high_hz, m.f_low_hz
    if "power" in others:
        t.max_power_w = 3e-3
    if "loss" in others:
        t.max_loss_db = m.loss_db
    return t


def peak_mib(chain, targets, cands, basis, limit) -> float:
    """Peak of the memory Python and numpy allocate during one run (tracemalloc; numpy reports
    its array buffers to it), in MiB; a separate run, as tracing slows the allocations."""
    tracemalloc.start()
    optimise(chain, targets, candidates=cands, basis=basis, time_limit=limit)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return peak / 2 ** 20


def main() -> None:
    ap = argparse.ArgumentParser(description="timing of the exact buffer placement")
    ap.add_argument("--sizes", default="25,50,100,200", help="interface counts, e.g. 25,200")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--only", default="", help="scenario numbers (1-based), e.g. 4,7")
    ap.add_argument("--time-limit", type=float, default=60.0,
                    help="time budget of each run in seconds (0: none); a run that reaches it is shown as "
                         "'stopped' with its gap")
    args = ap.parse_args()
    only = {int(x) for x in args.only.split(",") if x}
    path = os.path.join(HERE, "bench_chain.yaml")      # only a name for include resolution; never written
    print(f"exact buffer placement, 6 candidates per interface; {args.runs} runs each; load average "
          f"{' '.join(f'{x:.2f}' for x in os.getloadavg())}")
    print(f"{'interfaces':>10}  {'scenario':<34}{'wall (median)':>14}{'CPU (least)':>13}{'calls':>7}"
          f"{'analyses':>10}{'buffers':>8}{'peak MiB':>10}  answer")
    limit = args.time_limit or None
    for n in (int(x) for x in args.sizes.split(",")):
        for number, (label, extra, basis, varied, others) in enumerate(SCENARIOS, 1):
            if only and number not in only:
                continue
            chain = load_chain_text(chain_text(n, varied), path)
            cands = [c for c in candidates_of(chain) if c.name in SIX]
            assert len(chain.stages) == n and len(cands) == 6
            targets = targets_for(chain, extra, others)
            walls, cpus = [], []
            for _ in range(args.runs):
                t0, c0 = time.perf_counter(), time.process_time()
                plan = optimise(chain, targets, candidates=cands, basis=basis, time_limit=limit)
                walls.append(time.perf_counter() - t0)
                cpus.append(time.process_time() - c0)
            answer = "proven optimum" if plan.feasible and plan.proven else \
                f"stopped ({plan.stats['stopped']}), gap {plan.gap:.3g}" if plan.feasible else \
                f"none found ({plan.stats['stopped'] or 'infeasible'})"
            peak = peak_mib(chain, targets, cands, basis, limit) if plan.proven else float("nan")
            print(f"{n:>10}  {label:<34}{statistics.median(walls):>12.2f} s{min(cpus):>11.2f} s"
                  f"{plan.stats['engine_calls']:>7}{plan.stats['analyses']:>10}{plan.n_buffers:>8}{peak:>10.1f}  {answer}",
                  flush=True)
    print(f"load average at the end {' '.join(f'{x:.2f}' for x in os.getloadavg())}")


if __name__ == "__main__":
    main()
