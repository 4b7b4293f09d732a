"""Noise timings next to the plain budget's: the 10-stage chain of
bench_core.py over 1 000 frequency points, nominal and as a 1 000-sample batch,
and the noise command's whole-process time.  Prints medians; asserts nothing.

    python benchmarks/bench_noise.py [--runs N]
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))
sys.path.insert(0, str(HERE))

from bench_core import TEN_STAGES, median_time  # noqa: E402
from chainplan.engine.budget import analyse, evaluate, nominal_params  # noqa: E402
from chainplan.engine.noise import analyse_noise, output_psds  # noqa: E402
from chainplan.spec.loader import load_chain_text  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=20)
    runs = max(ap.parse_args().runs, 5)
    # the op-amps of the core benchmark's chain, given data-sheet noise
    text = TEN_STAGES.replace("kind: opamp_noninverting,", "kind: opamp_noninverting, en: 8 nV/√Hz, in: 1 pA/√Hz,")
    text = text.replace("kind: opamp_follower,", "kind: opamp_follower, en: 12 nV/√Hz, en_corner: 20 Hz,")
    chain = load_chain_text(text, "<bench>")
    n_f = 1 + chain.analysis.points
    ev = evaluate(chain)
    n_gen = len(output_psds(ev, 1.0))
    print(f"10-stage chain, {n_f} frequencies, {n_gen} noise generators reaching the output")
    t_eval = median_time(lambda: evaluate(chain), runs)
    t_budget = median_time(lambda: analyse(chain), runs)
    t_noise = median_time(lambda: analyse_noise(ev), runs)
    print(f"  evaluation (DC pass + cascade), nominal:           {t_eval * 1e3:8.2f} ms")
    print(f"  plain budget (analyse, no hooks), nominal:         {t_budget * 1e3:8.2f} ms")
    print(f"  noise analysis on one evaluation, nominal:         {t_noise * 1e3:8.2f} ms  "
          f"({t_noise / n_gen / n_f * 1e9:.0f} ns per generator·frequency)")

    samples = 1000
    p = nominal_params(chain)
    rng = np.random.default_rng(1)
    for st, fld in (("lp1", "r"), ("lp1", "c"), ("sf", "i_bias"), ("pre", "r_f"), ("src", "r")):
        p[st][fld] = p[st][fld] * (1 + 0.01 * rng.uniform(-1, 1, (samples, 1)))
    ev_batch = evaluate(chain, p)
    slow = max(3, runs // 5)
    t_eval_b = median_time(lambda: evaluate(chain, p), slow)
    t_noise_b = median_time(lambda: analyse_noise(ev_batch), slow)
    print(f"  {samples} samples: evaluation {t_eval_b * 1e3:8.1f} ms, noise analysis {t_noise_b * 1e3:8.1f} ms  "
          f"({t_noise_b / (n_gen * n_f * samples) * 1e9:.1f} ns per generator·frequency·sample)")

    spec = str(HERE.parent / "chains" / "hydrophone_buffered.yaml")
    env = {**os.environ, "NO_COLOR": "1"}
    for cmd in ("budget", "noise"):
        exe = [sys.executable, "-m", "chainplan.cli", cmd, spec]
        t = median_time(lambda: subprocess.run(exe, cwd=HERE.parent, env=env, stdout=subprocess.DEVNULL,
                                               check=True), max(5, runs // 4))
        print(f"  CLI 'chainplan {cmd} chains/hydrophone_buffered.yaml', whole process: {t * 1e3:6.0f} ms")


if __name__ == "__main__":
    main()
