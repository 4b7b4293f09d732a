"""Timing of the exact buffer-placement optimiser on long chains.

Chains of 25, 50, 100 and 200 interfaces are built from a repeated unit — a
cable driven from a 4.7 kΩ source, an AC coupling to mid-supply (10 kΩ bias,
which loads the cable), and an amplifier (gain 1.5, 100 kΩ input, 4.7 kΩ
output) — with the five followers of chains/parts/followers.yaml plus one more
as candidates (6 per interface).  The targets ask for 1.5 dB more end-to-end
gain than the chain has and 100 mV of headroom everywhere, so a few buffers
are needed and many placements are near-ties.  Prints the median of a few runs
per length and the search size; run:  python benchmarks/bench_optimiser.py
"""
from __future__ import annotations

import os
import statistics
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

from chainplan.optimiser import Targets, measure, optimise  # noqa: E402
from chainplan.spec import load_chain_text  # noqa: E402

UNIT = """  - name: cable{i}
    kind: cable
    length: 5 m
    c_per_m: 100 pF/m
    r_per_m: 0.1 Ω/m
  - name: couple{i}
    kind: ac_coupling
    c: 1 µF
    r_bias: 10k
    bias: vmid
  - name: amp{i}
    kind: amplifier
    gain: 1.5
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


def chain_text(interfaces: int) -> str:
    units = (interfaces - 1) // 3
    text = ("name: bench-{n}\nrails:\n  vdd: 3.3 V\n  vmid: 1.65 V\n"
            "include: [../chains/parts/followers.yaml]\n"
            "source:\n  name: sensor\n  kind: sensor\n  amplitude: 20 mV\n  dc: vmid\n  r: 4.7k\n"
            "stages:\n").format(n=interfaces)
    text += "".join(UNIT.format(i=i) for i in range(units))
    for j in range(interfaces - 1 - 3 * units):          # pad to the exact interface count
        text += f"  - name: pad{j}\n    kind: rc_lowpass\n    r: 100\n    c: 100 pF\n"
    text += ("  - name: adc\n    kind: adc\n    bits: 16\n    fs_low: 0 V\n    fs_high: vdd\n    c_in: 20 pF\n"
             "analysis:\n  f_ref: 1 kHz\n  f_start: 10 Hz\n  f_stop: 1 MHz\n  points: 201\n")
    return text + EXTRA


def main() -> None:
    path = os.path.join(HERE, "bench_chain.yaml")      # only a name for include resolution; never written
    print(f"{'interfaces':>10} {'candidates':>10} {'median s':>9} {'states':>7} {'analyses':>9} {'buffers':>8}")
    for n in (25, 50, 100, 200):
        chain = load_chain_text(chain_text(n), path)
        gain0 = measure(chain, Targets()).gain_db[chain.analysis.f_ref_hz]
        targets = Targets(min_gain_db={chain.analysis.f_ref_hz: gain0 + 1.5}, min_headroom_v=0.1)
        times, plan = [], None
        for _ in range(3):
            t0 = time.perf_counter()
            plan = optimise(chain, targets)
            times.append(time.perf_counter() - t0)
        assert len(chain.stages) == n
        print(f"{n:>10} {len(chain.extra['candidates']):>10} {statistics.median(times):>9.3f} "
              f"{plan.stats['states']:>7} {plan.stats['analyses']:>9} "
              f"{plan.n_buffers if plan.feasible else 'none':>8}")


if __name__ == "__main__":
    main()
