"""Start-up time of ``chainplan budget`` against the libraries it stands on (issue 17 item 5).

    python benchmarks/bench_startup.py [--repeat 15] [--chain chains/hydrophone_buffered.yaml]

Paired, interleaved runs in fresh processes of

* ``python -c "import numpy, yaml, rich.console"`` (the floor: the libraries alone), and
* ``python -m chainplan budget CHAIN`` (the whole command: imports, analysis, tables),

each with cached bytecode (as installed) and without (``PYTHONPYCACHEPREFIX``
pointing at a fresh empty directory, so every module — numpy's too — is
compiled from source).  Reported: the median wall time of each, the median of
the per-pair ratios, and the load average.  Nothing is asserted.
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")


def _run(cmd, cache: bool) -> float:
    env = dict(os.environ, PYTHONPATH=ROOT)
    with tempfile.TemporaryDirectory() as tmp:
        if not cache:
            env["PYTHONPYCACHEPREFIX"] = tmp
        t0 = time.perf_counter()
        subprocess.run(cmd, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
        return time.perf_counter() - t0


def measure(chain: str, repeat: int, cache: bool) -> dict:
    floor_cmd = [sys.executable, "-c", "import numpy, yaml, rich.console"]
    cmd = [sys.executable, "-m", "chainplan", "budget", chain]
    _run(cmd, True)                                         # warm the file cache (and the bytecode)
    floors, runs, loads = [], [], []
    for _ in range(repeat):
        floors.append(_run(floor_cmd, cache))
        runs.append(_run(cmd, cache))
        loads.append(os.getloadavg()[0])
    ratios = [r / f for r, f in zip(runs, floors)]
    return {"floor": statistics.median(floors), "run": statistics.median(runs),
            "ratio": statistics.median(ratios), "load": statistics.median(loads)}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--chain", default="chains/hydrophone_buffered.yaml")
    a = ap.parse_args()
    print(f"{os.cpu_count()} cores; {a.repeat} interleaved pairs each; medians")
    for cache in (True, False):
        r = measure(a.chain, a.repeat, cache)
        print(f"{'with' if cache else 'without'} cached bytecode: import numpy, yaml, rich.console "
              f"{1e3 * r['floor']:.0f} ms; chainplan budget {a.chain} {1e3 * r['run']:.0f} ms; "
              f"ratio {r['ratio']:.2f} (load average {r['load']:.2f})")


if __name__ == "__main__":
    main()
