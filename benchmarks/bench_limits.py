"""Peak memory and time of the largest specs the limits accept (docs/spec.md, "Limits").

    python benchmarks/bench_limits.py

The work bound is stages × frequency points ≤ 2 000 000 (spec/loader.py
MAX_STAGE_POINTS); this runs specs at that bound in three shapes (many stages,
many points, between) through `budget`, `noise` and `check`, each in a fresh
process, and prints the peak resident memory (ru_maxrss of the child) and the wall
time, with the load average beside them (the machine is shared).  It also runs
the refused neighbour (one point more) to show the refusal costs nothing, and
the YAML bombs of tests/fixtures/hardening.

Measured 2026-12-02, load average 2.65 (2 shared cores):
  budget 1000 stages × 2000 points   7.72 s  peak 243.5 MiB
  noise  1000 stages × 2000 points   1.39 s  peak 243.4 MiB
  check  1000 stages × 2000 points   1.10 s  peak 218.1 MiB
  budget 100 stages × 20000 points   1.05 s  peak 231.7 MiB
  budget 20 stages × 100000 points   0.49 s  peak 234.7 MiB
  refused (one point more), alias bomb, 999-deep nesting, /dev/zero:
                                     ~0.2 s  peak ~32 MiB (start-up alone 35 MiB)
"""
from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
LIMIT = 2_000_000


def spec(stages: int, points: int) -> str:
    body = "\n".join(f"  - {{name: s{i}, kind: rc_lowpass, r: 10, c: 1 pF}}" for i in range(stages - 2))
    return (f"name: largest\nsource: {{kind: sensor, amplitude: 1 mV, r: 1k}}\nstages:\n{body}\n"
            f"  - {{name: m, kind: load, r_in: 1meg}}\nanalysis: {{points: {points}}}\n")


def run(args) -> tuple[int, float, float]:
    """(exit code, seconds, peak MiB) of one command in a fresh process."""
    env = {**os.environ, "PYTHONPATH": ROOT}
    code = ("import resource, sys; from chainplan.cli import main; rc = main(sys.argv[1:]); "
            "sys.stderr.write(f'\\nPEAK {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}\\n'); sys.exit(rc)")
    t = time.perf_counter()
    p = subprocess.run([sys.executable, "-c", code, *args], capture_output=True, text=True, env=env)
    dt = time.perf_counter() - t
    peak = [line for line in p.stderr.splitlines() if line.startswith("PEAK ")]
    kib = int(peak[-1].split()[1]) if peak else resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    return p.returncode, dt, kib / 1024


def main():
    print(f"load average {os.getloadavg()[0]:.2f} {os.getloadavg()[1]:.2f} {os.getloadavg()[2]:.2f} "
          f"(2 cores shared)")
    base = run(["schema"])
    print(f"{'start-up (schema)':40s} rc {base[0]}  {base[1]:6.2f} s  peak {base[2]:7.1f} MiB")
    with tempfile.TemporaryDirectory() as d:
        for stages in (1000, 100, 20):
            points = LIMIT // stages - 1
            path = os.path.join(d, f"s{stages}.yaml")
            with open(path, "w") as fh:
                fh.write(spec(stages, points))
            for command in ("budget", "noise", "check"):
                rc, dt, mib = run([command, path])
                label = f"{command} {stages} stages × {points + 1} points"
                print(f"{label:40s} rc {rc}  {dt:6.2f} s  peak {mib:7.1f} MiB")
            with open(path, "w") as fh:
                fh.write(spec(stages, points + 1))
            rc, dt, mib = run(["budget", path])
            print(f"{'  refused: one point more':40s} rc {rc}  {dt:6.2f} s  peak {mib:7.1f} MiB")
    fixtures = os.path.join(ROOT, "tests", "fixtures", "hardening")
    for name in ("alias_bomb.yaml", "deep_nesting.yaml"):
        rc, dt, mib = run(["budget", os.path.join(fixtures, name)])
        print(f"{name:40s} rc {rc}  {dt:6.2f} s  peak {mib:7.1f} MiB")
    rc, dt, mib = run(["budget", "/dev/zero"])
    print(f"{'/dev/zero':40s} rc {rc}  {dt:6.2f} s  peak {mib:7.1f} MiB")
    print(f"load average after {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
