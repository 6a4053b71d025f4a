"""How often equal strategies are called different, by simulation: the selection effect of
comparing everything with the strategy that has the best sample mean.

Seven strategies of exactly equal true accuracy (0.85) are scored on 2 × 5 folds with a fold
effect they share (sd 0.02) and noise of their own (sd 0.01) — a scenario of our own,
generated here. Per simulated table it counts whether the per-dataset verdict calls any
strategy "worse than best", and whether a frequentist test of each strategy against the best
sample mean (the corrected t-test at α = 0.05, the old rule) rejects for any of them.

    python benchmarks/selection_effect.py [simulations]
"""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd

from harness.analysis.per_dataset import judge
from harness.scorers import Margin


def table(rng, k=7, repeats=2, folds=5):
    shared = rng.normal(0, 0.02, repeats * folds)
    rows = []
    for s in range(k):
        own = rng.normal(0, 0.01, repeats * folds)
        for i in range(repeats * folds):
            rows.append({"dataset": "d", "strategy": f"s{s}", "repeat": i // folds,
                         "fold": i % folds, "n_train": 800, "n_test": 200,
                         "accuracy": 0.85 + shared[i] + own[i]})
    return pd.DataFrame(rows)


def main() -> None:
    simulations = int(sys.argv[1]) if len(sys.argv) > 1 else 300
    rng = np.random.default_rng(0)
    worse = old = 0
    for _ in range(simulations):
        strategies, pairs = judge(table(rng), "accuracy", Margin(0.01), 0.95, 0.05)
        worse += (strategies["standing"] == "worse than best").any()
        best = strategies.loc[strategies["best"], "strategy"].iloc[0]
        mine = pairs[(pairs["a"] == best) | (pairs["b"] == best)]
        old += (mine["p"] <= 0.05).any()
    print(f"{simulations} tables of 7 equal strategies, 2 × 5 folds")
    print(f"any strategy called worse than the best (joint posterior, region ±0.01): "
          f"{worse / simulations:.3f}")
    print(f"any strategy told apart from the best sample mean (corrected t-test, α = 0.05): "
          f"{old / simulations:.3f}")


if __name__ == "__main__":
    main()
