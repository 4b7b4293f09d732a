"""Core timings: the cascade of a 10-stage chain over 1 000 frequency points
(nominal and a 1 000-sample batch), and the CLI's whole-process time with the
worst import-time offenders.  Prints medians; asserts nothing.

    python benchmarks/bench_core.py [--runs N]
"""
from __future__ import annotations

import argparse
import os
import re
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from chainplan.engine.budget import evaluate, nominal_params  # noqa: E402
from chainplan.spec.loader import load_chain_text  # noqa: E402

TEN_STAGES = """
name: bench-10
rails: {vdd: 5 V, vss: -5 V, vmid: 2.5 V}
source: {name: src, kind: sensor, amplitude: 10 mV, r: 100M, c: 1 nF}
stages:
  - {name: cpl, kind: ac_coupling, c: 100 nF, r_bias: 100M, bias: vdd}
  - {name: sf, kind: source_follower, kp: 120 µA/V², w_over_l: 200, vth0: 0.55 V, lambda: 0.04 /V,
     gamma: 0.45 √V, phi: 0.7 V, i_bias: 100 µA, r_bias: 2M, cgs: 2 pF, cgd: 0.5 pF}
  - {name: lead, kind: cable, length: 5 m, c_per_m: 90 pF/m, r_per_m: 0.2 Ω/m}
  - {name: hp, kind: ac_coupling, c: 1 µF, r_bias: 10k, bias: vmid}
  - {name: pre, kind: opamp_noninverting, gbw: 10 MHz, r_out: 40, r_f: 9k, r_g: 1k, ref: vmid, v_neg: vss}
  - {name: lp1, kind: rc_lowpass, r: 1k, c: 10 nF}
  - {name: buf, kind: opamp_follower, gbw: 5 MHz, r_out: 60, v_neg: vss}
  - {name: div, kind: divider, r_top: 1k, r_bottom: 4k, ref: vmid}
  - {name: lp2, kind: rc_lowpass, r: 470, c: 3.3 nF}
  - {name: adc, kind: adc, bits: 16, fs_low: 0 V, fs_high: vdd, c_in: 30 pF}
analysis: {f_ref: 1 kHz, f_start: 1 Hz, f_stop: 10 MHz, points: 999}
"""


def median_time(fn, runs: int) -> float:
    fn()                                   # warm-up (imports, caches)
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def bench_cascade(runs: int) -> None:
    chain = load_chain_text(TEN_STAGES, "<bench>")
    n_f = 1 + chain.analysis.points        # the reference frequency plus the span
    t = median_time(lambda: evaluate(chain), runs)
    print(f"cascade, 10 stages × {n_f} frequencies, nominal:      {t * 1e3:8.2f} ms  (median of {runs})")
    samples = 1000
    p = nominal_params(chain)
    rng = np.random.default_rng(1)
    for st, fld in (("lp1", "r"), ("lp1", "c"), ("sf", "i_bias"), ("pre", "r_f")):
        p[st][fld] = p[st][fld] * (1 + 0.01 * rng.uniform(-1, 1, (samples, 1)))
    t = median_time(lambda: evaluate(chain, p), max(3, runs // 5))
    per = t / (samples * n_f * 10) * 1e9
    print(f"cascade, 10 stages × {n_f} frequencies × {samples} samples: {t * 1e3:8.1f} ms  "
          f"({per:.1f} ns per stage·frequency·sample)")


def bench_cli(runs: int) -> None:
    spec = str(REPO / "chains" / "hydrophone_buffered.yaml")
    exe = [sys.executable, "-m", "chainplan.cli", "budget", spec]
    env = {**os.environ, "NO_COLOR": "1"}
    with tempfile.TemporaryDirectory(prefix="chainplan-pyc-") as pyc:
        # as installed: bytecode cached (kept out of the repo with a cache prefix)
        cached = {k: v for k, v in env.items() if k != "PYTHONDONTWRITEBYTECODE"} | {"PYTHONPYCACHEPREFIX": pyc}
        for label, e in (("bytecode cached", cached), ("this environment", env)):
            cpu = []

            def once(e=e):
                before = resource.getrusage(resource.RUSAGE_CHILDREN)
                subprocess.run(exe, cwd=REPO, env=e, stdout=subprocess.DEVNULL, check=True)
                after = resource.getrusage(resource.RUSAGE_CHILDREN)
                cpu.append(after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime)
            t = median_time(once, runs)
            print(f"CLI 'chainplan budget chains/hydrophone_buffered.yaml', {label}: wall {t * 1e3:4.0f} ms, "
                  f"CPU {statistics.median(cpu) * 1e3:4.0f} ms (medians of {runs}; aim < 400 ms)")
    print(f"  machine load (1-minute average) {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs: "
          "wall time exceeds CPU time when other jobs share them")
    if env.get("PYTHONDONTWRITEBYTECODE"):
        print("  (PYTHONDONTWRITEBYTECODE is set here: every start compiles chainplan's modules again)")
    base = median_time(lambda: subprocess.run([sys.executable, "-c", "pass"], check=True), runs)
    print(f"  of which a bare Python start-up:                          {base * 1e3:6.0f} ms")
    proc = subprocess.run([sys.executable, "-X", "importtime", *exe[1:]], cwd=REPO, env=env,
                          stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, check=True)
    rows = []
    for line in proc.stderr.splitlines():
        m = re.match(r"import time:\s+(\d+) \|\s+(\d+) \|(\s*)(\S+)", line)
        if m:
            rows.append((int(m.group(2)), int(m.group(1)), len(m.group(3)) // 2, m.group(4)))
    top = [r for r in rows if r[2] <= 2]            # top-level imports and two levels below
    print("  import time, top offenders (cumulative; up to two levels deep):")
    for cum, self_us, _, name in sorted(top, reverse=True)[:12]:
        print(f"    {cum / 1e3:7.1f} ms  (self {self_us / 1e3:5.1f} ms)  {name}")
    libs = {name: cum for cum, _, _, name in rows if name in ("numpy", "rich.console", "yaml", "chainplan.stages")}
    print("  of which: " + ", ".join(f"{k} {v / 1e3:.0f} ms" for k, v in libs.items()))
    heavy = sorted({r[3].split(".")[0] for r in rows} & {"matplotlib", "lcapy", "scipy", "networkx", "sympy"})
    print(f"  heavy libraries imported by this command: {', '.join(heavy) or 'none'}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=10)
    a = ap.parse_args()
    bench_cascade(max(a.runs, 5))
    bench_cli(a.runs)


if __name__ == "__main__":
    main()
