"""Seeded random chains for the optimiser's brute-force comparison (test helper)."""
from __future__ import annotations

import random

RAILS = "rails:\n  vdd: 3.3 V\n  vmid: 1.65 V\n"

NMOS = """  - name: {name}
    kind: source_follower
    kp: 120 µA/V²
    w_over_l: 200
    vth0: 0.55 V
    lambda: 0.04 /V
    bulk: source
    i_bias: 50 µA
    r_bias: 2M
"""

#: candidate buffers, one of each follower family, in parts-file form
CANDIDATES = "candidates:\n" + NMOS.format(name="nmos_small") + """    cost: {price: 0.12}
  - name: npn
    kind: emitter_follower
    beta: 150
    va: 80 V
    i_s: 10f
    i_bias: 200 µA
    cost: {price: 0.08}
  - name: opamp
    kind: opamp_follower
    gbw: 350 kHz
    a0: 100 dB
    r_out: 300 Ω
    c_in: 4 pF
    swing_low: 15 mV
    swing_high: 15 mV
    cm_low: -0.1 V
    cm_high: -0.1 V
    i_supply: 25 µA
    cost: {price: 0.45}
"""


#: the same follower behind its own gate bias (an AC coupling to vdd), one choice for the optimiser
BIASED = NMOS.format(name="nmos_gate") + """    input_bias: {c: 100 nF, r_bias: 10M, bias: vdd}
    cost: {price: 0.15, count: 4}
"""


def _stage(rng: random.Random, i: int) -> str:
    kind = rng.choice(["rc_lowpass", "cable", "ac_coupling", "divider", "series_r", "opamp_noninverting",
                       "source_follower", "amplifier", "emitter_follower"])
    n = f"s{i}"
    if kind == "rc_lowpass":
        return f"  - name: {n}\n    kind: rc_lowpass\n    r: {rng.choice(['1k', '10k', '100k'])}\n" \
               f"    c: {rng.choice(['100 pF', '1 nF', '10 nF'])}\n"
    if kind == "cable":
        return f"  - name: {n}\n    kind: cable\n    length: {rng.choice(['2 m', '10 m'])}\n    c_per_m: 100 pF/m\n"
    if kind == "ac_coupling":
        return f"  - name: {n}\n    kind: ac_coupling\n    c: 1 µF\n    r_bias: {rng.choice(['10k', '100k', '1M'])}\n" \
               f"    bias: {rng.choice(['vmid', '2.2 V', '1.2 V'])}\n"
    if kind == "divider":
        return f"  - name: {n}\n    kind: divider\n    r_top: {rng.choice(['1k', '10k'])}\n" \
               f"    r_bottom: {rng.choice(['10k', '47k'])}\n    ref: vmid\n"
    if kind == "series_r":
        return f"  - name: {n}\n    kind: series_r\n    r: {rng.choice(['1k', '47k', '220k'])}\n"
    if kind == "opamp_noninverting":
        return f"  - name: {n}\n    kind: opamp_noninverting\n    gbw: {rng.choice(['1 MHz', '10 MHz'])}\n" \
               f"    r_out: 50 Ω\n    r_f: {rng.choice(['1k', '3k'])}\n    r_g: 1k\n    ref: vmid\n" \
               f"    r_in: {rng.choice(['inf', '1M'])}\n    swing_low: 50 mV\n    swing_high: 50 mV\n"
    if kind == "amplifier":
        return f"  - name: {n}\n    kind: amplifier\n    gain: {rng.choice(['0.8', '2'])}\n    r_in: 100k\n" \
               f"    r_out: {rng.choice(['100', '10k'])}\n    in_ref: vmid\n    out_ref: vmid\n" \
               f"    out_low: 0.1 V\n    out_high: 3.2 V\n"
    if kind == "emitter_follower":
        return f"  - name: {n}\n    kind: emitter_follower\n    beta: 120\n    i_bias: 100 µA\n"
    return f"  - name: {n}\n    kind: source_follower\n    kp: 120 µA/V²\n    w_over_l: 200\n    vth0: 0.5 V\n" \
           f"    bulk: source\n    i_bias: 100 µA\n"


def random_chain_text(seed: int, n_stages: int = 3, fanout: bool = False, biased: bool = False) -> str:
    """A seeded random chain; ``biased`` adds a candidate with its own input bias and lets the
    source sit at 0 V (where only that one can follow it)."""
    rng = random.Random(seed)
    text = f"name: random-{seed}\n" + RAILS
    levels = ['1.2 V', 'vmid', '2.0 V'] + (['0 V', '0 V'] if biased else [])
    text += (f"source:\n  name: src\n  kind: sensor\n  amplitude: {rng.choice(['20 mV', '100 mV', '300 mV'])}\n"
             f"  dc: {rng.choice(levels)}\n  r: {rng.choice(['1k', '47k', '1M'])}\n"
             f"  c: {rng.choice(['0 F', '100 pF'])}\n")
    text += "stages:\n"
    for i in range(n_stages):
        text += _stage(rng, i)
    text += f"  - name: adc\n    kind: adc\n    bits: 12\n    fs_low: 0 V\n    fs_high: vdd\n" \
            f"    r_in: {rng.choice(['inf', '20k'])}\n    c_in: 20 pF\n    ref: vmid\n"
    if fanout:            # a meter hangs on an inner node: a tree with a side branch
        tap = f"s{rng.randrange(n_stages - 1)}"
        text += f"  - name: meter\n    kind: load\n    from: {tap}\n    r_in: {rng.choice(['10k', '100k'])}\n" \
                f"    c_in: 1 nF\n    ref: vmid\n"
    text += "analysis:\n  f_ref: 1 kHz\n  f_start: 10 Hz\n  f_stop: 10 MHz\n  points: 61\n"
    return text + CANDIDATES + (BIASED if biased else "")
