"""Long chains (issue 17 item 4): ``chainplan budget`` on 1 000- and 10 000-stage chains.
(The 10 000 case is 9 999 stages after the source: the loader counts the source against its 10 000-stage limit.)

    python benchmarks/bench_longchain.py [--repeat 5]

An invented ladder — RC section, ×2 non-inverting op-amp, divider, follower,
repeated — with an ADC at the end; span 1 Hz … 10 MHz, 100 points.  At 10 MHz
the plain row product overflows after a few hundred stages (before issue 17 the
noise and ENOB printed as nan); the engine renormalises rows as it carries them.
Reported per chain: median wall time of the whole command in a fresh process,
and of its phases in-process (load, budget, tables), finiteness of noise and
ENOB, the load average.  Nothing is asserted.
"""
from __future__ import annotations

import argparse
import io
import os
import statistics
import subprocess
import sys
import tempfile
import time

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
sys.path.insert(0, ROOT)

KINDS = ["- {{name: s{i}, kind: rc_lowpass, r: 1k, c: 1.6n}}",
         "- {{name: s{i}, kind: opamp_noninverting, gbw: 100M, r_f: 1k, r_g: 1k, ref: vmid, r_out: 50}}",
         "- {{name: s{i}, kind: divider, r_top: 1k, r_bottom: 1k, ref: vmid}}",
         "- {{name: s{i}, kind: opamp_follower, gbw: 100M}}"]     # short lines: 10 000 stages stay under 1 MiB


def chain_text(n: int) -> str:
    lines = [f"name: ladder-{n}", "description: an invented long ladder (benchmark only)",
             "rails: {vdd: 5 V, vmid: 2.5 V}",
             "source: {name: sensor, kind: sensor, amplitude: 10 mV, dc: 2.5 V, r: 1k}", "stages:"]
    lines += [KINDS[i % 4].format(i=i) for i in range(n - 1)]
    lines += ["- {name: adc, kind: adc, bits: 16, fs_low: 0 V, fs_high: vdd}",
              "analysis: {f_ref: 10 Hz, f_start: 1 Hz, f_stop: 10 MHz, points: 100}"]
    return "\n".join(lines) + "\n"


def phases(path: str) -> dict:
    from rich.console import Console
    from chainplan.api import budget_for
    from chainplan.render.tables import budget_tables
    from chainplan.spec.loader import load_chain
    t0 = time.perf_counter()
    ch = load_chain(path)
    t1 = time.perf_counter()
    b = budget_for(ch)
    t2 = time.perf_counter()
    budget_tables(b, Console(file=io.StringIO(), width=100))
    t3 = time.perf_counter()
    finite = all(x == x and abs(x) != float("inf") for x in (b.extra_json.get("noise_out_vrms", 0),
                                                              b.extra_json.get("enob_bits", 0)))
    return {"load": t1 - t0, "budget": t2 - t1, "tables": t3 - t2, "finite": finite}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        for n in (1000, 9999):
            path = os.path.join(tmp, f"ladder{n}.yaml")
            with open(path, "w") as fh:
                fh.write(chain_text(n))
            reps = a.repeat if n <= 1000 else 1
            walls = []
            for _ in range(reps):
                t0 = time.perf_counter()
                r = subprocess.run([sys.executable, "-m", "chainplan", "budget", path], cwd=ROOT, text=True,
                                   env=dict(os.environ, PYTHONPATH=ROOT), stdout=subprocess.DEVNULL,
                                   stderr=subprocess.PIPE)
                walls.append(time.perf_counter() - t0)
            if r.returncode:
                print(f"{n} stages: refused ({r.stderr.strip()})")
                continue
            ph = phases(path)
            print(f"{n} stages: chainplan budget {statistics.median(walls):.2f} s (median of {reps}, fresh process); "
                  f"in-process load {ph['load']:.2f} s, budget {ph['budget']:.2f} s, tables {ph['tables']:.2f} s; "
                  f"noise and ENOB finite: {ph['finite']}; load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
