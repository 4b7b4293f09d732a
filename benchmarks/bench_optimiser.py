"""Timing of the exact buffer-placement optimiser on long chains.

Chains of 25, 50, 100 and 200 interfaces are built from a repeated unit — a
cable driven from a 4.7 kΩ source, an AC coupling to mid-supply (10 kΩ bias,
which loads the cable), and an amplifier (gain 1.5, 100 kΩ input, 4.7 kΩ
output) — with the five followers of chains/parts/followers.yaml plus one more
as candidates (6 per interface).  The targets ask for 1.5 dB (one buffer
needed) or 4 dB (two) more end-to-end gain than the chain has and 100 mV of
headroom everywhere; every unit is alike, so many placements tie.  Costs by
price (known before analysis: the cost bound prunes hard) and by power (a
follower's power depends on its operating point, so fewer regions can be
skipped).  Prints the median of three runs per length, the number of region
analyses and buffers; run:  python benchmarks/bench_optimiser.py
"""
from __future__ import annotations

import os
import statistics
import sys
import time

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, os.path.dirname(HERE))

from chainplan.optimiser import Targets, measure, optimise  # noqa: E402
from chainplan.parts import candidates_of  # noqa: E402
from chainplan.spec import load_chain_text  # noqa: E402

#: the six candidates: five of chains/parts/followers.yaml and nmos_200u below
SIX = ("nmos_50u", "nmos_500u", "npn_ef", "opamp_micro", "opamp_fast", "nmos_200u")

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


#: (label, extra gain asked over the chain's own, cost basis, longest chain timed)
SCENARIOS = [("1 buffer, by price", 1.5, "price", 200), ("2 buffers, by price", 4.0, "price", 200),
             ("1 buffer, by power", 1.5, "power", 100)]


def main() -> None:
    path = os.path.join(HERE, "bench_chain.yaml")      # only a name for include resolution; never written
    print("exact buffer placement, 6 candidates per interface; median of 3 runs (s), region analyses")
    print(f"{'interfaces':>10}" + "".join(f"{label:>28}" for label, *_ in SCENARIOS))
    for n in (25, 50, 100, 200):
        chain = load_chain_text(chain_text(n), path)
        cands = [c for c in candidates_of(chain) if c.name in SIX]
        assert len(chain.stages) == n and len(cands) == 6
        gain0 = measure(chain, Targets()).gain_db[chain.analysis.f_ref_hz]
        cells = []
        for _, extra, basis, longest in SCENARIOS:
            if n > longest:
                cells.append(f"{'—':>28}")
                continue
            targets = Targets(min_gain_db={chain.analysis.f_ref_hz: gain0 + extra}, min_headroom_v=0.1)
            times = []
            for _ in range(3):
                t0 = time.perf_counter()
                plan = optimise(chain, targets, candidates=cands, basis=basis)
                times.append(time.perf_counter() - t0)
            assert plan.feasible
            cells.append(f"{statistics.median(times):>10.2f} s {plan.stats['analyses']:>6} an. "
                         f"{plan.n_buffers:>2} buf")
        print(f"{n:>10}" + "".join(f"{c:>28}" for c in cells), flush=True)


if __name__ == "__main__":
    main()
