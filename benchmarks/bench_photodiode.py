"""Photodiode + transimpedance timings on chains/photodiode_tia.yaml: the nominal
budget with noise, and a 1 000-sample tolerance batch of the cascade (a Norton
source row and the TIA two-port over the spec's 601 frequency points).  Prints
medians; asserts nothing.

    python benchmarks/bench_photodiode.py [--runs N]
"""
from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from chainplan.api import budget_for  # noqa: E402
from chainplan.engine.budget import evaluate, nominal_params  # noqa: E402
from chainplan.spec.loader import load_chain  # noqa: E402


def _median_s(fn, runs: int) -> float:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=7)
    runs = ap.parse_args().runs
    path = str(REPO / "chains" / "photodiode_tia.yaml")
    chain = load_chain(path)
    rng = np.random.default_rng(1)
    params = nominal_params(chain)
    batch = {k: dict(v) for k, v in params.items()}
    batch["diode"]["c"] = 50e-12 * (1 + 0.1 * rng.uniform(-1, 1, (1000, 1)))
    batch["tia"]["c_f"] = 2e-12 * (1 + 0.1 * rng.uniform(-1, 1, (1000, 1)))
    print(f"nominal budget with noise (api.budget_for): {1e3 * _median_s(lambda: budget_for(chain), runs):.1f} ms")
    print(f"1000-sample cascade + DC, {chain.analysis.points + 1} frequencies: "
          f"{1e3 * _median_s(lambda: evaluate(chain, batch), runs):.1f} ms")


if __name__ == "__main__":
    main()
