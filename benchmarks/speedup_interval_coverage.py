"""How often the speedup interval covers the true speedup, by simulation.

Fit times of repeated fits are drawn from a log-normal distribution around a true median
(T(1) = 1 s, T(p) = 0.5 s, so the true speedup is 2), with a relative spread typical of a quiet
machine (sd of log time 0.05) and of a busy one (0.15). For each number of repeats, the
interval `harness.analysis.speedup.speedup_interval` computes (a percentile bootstrap of the
ratio of medians over repeats) is checked against the true value. Prints the coverage of the
nominal 95 % interval per number of repeats; the scenario is our own, generated here.

    python benchmarks/speedup_interval_coverage.py [simulations]
"""

from __future__ import annotations

import sys

import numpy as np

from harness.analysis.speedup import LEVEL, speedup_interval


def coverage(repeats: int, spread: float, simulations: int, seed: int = 0) -> float:
    rng = np.random.default_rng(seed)
    hits = 0
    for _ in range(simulations):
        t1 = np.exp(rng.normal(0.0, spread, repeats))
        tp = 0.5 * np.exp(rng.normal(0.0, spread, repeats))
        lo, hi = speedup_interval(t1, tp, rng)
        hits += lo <= 2.0 <= hi
    return hits / simulations


def main() -> None:
    simulations = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    print(f"coverage of the nominal {LEVEL:.0%} interval of T(1)/T(p), {simulations} "
          "simulations each")
    print("repeats  spread 0.05  spread 0.15")
    for repeats in (2, 3, 5, 7, 9, 11):
        cells = [coverage(repeats, s, simulations) for s in (0.05, 0.15)]
        print(f"{repeats:>7}  {cells[0]:>11.3f}  {cells[1]:>11.3f}")


if __name__ == "__main__":
    main()
