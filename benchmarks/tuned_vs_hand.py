"""How long does woodlot's nested resampling take against a hand-written scikit-learn loop?

The same work both ways: two datasets (breast cancer, classification; diabetes, regression),
gradient boosting and a random forest each tuned over the same space with the same budget
(``--trials`` configurations per outer fold, the first the configuration as given), 5 outer
folds, 3 inner folds, refit of the best on each outer training part.

- woodlot: ``run_suite`` from scratch with ``--jobs`` worker processes (trials, refits and
  other strategies' work interleave: no barrier per search). Tables and plots not written.
- by hand: for each dataset, strategy and outer fold, `RandomizedSearchCV(n_jobs=jobs,
  n_iter=trials - 1)` plus `cross_val_score(n_jobs=jobs)` of the configuration as given,
  then one refit of the winner (each search waits for its slowest fit; refits run alone).
- woodlot with ``search = "halving"`` (successive halving over the same configurations).

Prints each wall time, woodlot's ratio to the hand loop (goal: at most 1.0), and the mean
outer-test score of each way per dataset and strategy (random search and the hand loop must
agree exactly; halving trades some of it for time).

    python benchmarks/tuned_vs_hand.py [--jobs 2] [--trials 10]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy.stats import loguniform, randint, uniform
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.ensemble import (GradientBoostingClassifier, GradientBoostingRegressor,
                              RandomForestClassifier, RandomForestRegressor)
from sklearn.metrics import get_scorer
from sklearn.model_selection import (KFold, RandomizedSearchCV, RepeatedKFold,
                                     RepeatedStratifiedKFold, StratifiedKFold, cross_val_score)

import harness

SEED, FOLDS, INNER = 3, 5, 3
SUITE = """
dataset = [{{ name = "cancer", from = "sklearn", load = "load_breast_cancer" }},
           {{ name = "diabetes", from = "sklearn", load = "load_diabetes" }}]

[suite]
name = "tuned-vs-hand"
[protocol]
folds = {folds}
repeats = 1
seed = {seed}
metrics = {{ classification = ["accuracy"], regression = ["neg_root_mean_squared_error"] }}
[also_measure]
size_curve = false
memory = false
model_size = false
[tuning]
budget = {trials}
inner_folds = {inner}
search = "{search}"
[[strategy]]
name = "gb"
method = "gradient-boosting"
params = {{ n_estimators = 100 }}
tune = {{ learning_rate = {{ log_uniform = [0.01, 1.0] }}, max_depth = {{ integers = [1, 5] }}, n_estimators = {{ integers = [50, 300] }} }}
[[strategy]]
name = "forest"
method = "random-forest"
params = {{ n_estimators = 100 }}
tune = {{ max_features = {{ uniform = [0.1, 1.0] }}, min_samples_leaf = {{ integers = [1, 20] }} }}
"""
SPACES = {"gb": {"learning_rate": loguniform(0.01, 1.0), "max_depth": randint(1, 6),
                 "n_estimators": randint(50, 301)},
          "forest": {"max_features": uniform(0.1, 0.9), "min_samples_leaf": randint(1, 21)}}


def woodlot(folder: Path, trials: int, jobs: int, search: str) -> tuple[float, dict]:
    path = folder / f"{search}.toml"
    path.write_text(SUITE.format(folds=FOLDS, seed=SEED, trials=trials, inner=INNER,
                                 search=search))
    t0 = time.perf_counter()
    harness.run_suite(path, out=folder / search, jobs=jobs, progress=False, write_outputs=False)
    seconds = time.perf_counter() - t0
    frame = harness.load_results(folder / search)
    means = {}
    for (ds, st), part in frame.groupby(["dataset", "strategy"]):
        metric = "accuracy" if ds == "cancer" else "neg_root_mean_squared_error"
        means[(ds, st)] = float(part[metric].mean())
    return seconds, means


def by_hand(trials: int, jobs: int) -> tuple[float, dict]:
    bunch = load_breast_cancer(as_frame=True)
    cancer = (bunch.data, bunch.target.map(dict(enumerate(bunch.target_names))))
    diabetes = load_diabetes(return_X_y=True, as_frame=True)
    cases = {"cancer": (cancer, "accuracy", StratifiedKFold, RepeatedStratifiedKFold,
                        {"gb": GradientBoostingClassifier, "forest": RandomForestClassifier}),
             "diabetes": (diabetes, "neg_root_mean_squared_error", KFold, RepeatedKFold,
                          {"gb": GradientBoostingRegressor, "forest": RandomForestRegressor})}
    means = {}
    t0 = time.perf_counter()
    for ds, ((X, y), metric, inner_cls, outer_cls, models) in cases.items():
        outer = outer_cls(n_splits=FOLDS, n_repeats=1, random_state=SEED)
        inner = inner_cls(n_splits=INNER, shuffle=True, random_state=SEED)
        scorer = get_scorer(metric)
        for st, cls in models.items():
            base = cls(n_estimators=100, random_state=SEED)
            scores = []
            for train, test in outer.split(X, y):
                Xt, yt = X.iloc[train], y.iloc[train]
                search = RandomizedSearchCV(base, SPACES[st], n_iter=trials - 1, cv=inner,
                                            scoring=metric, random_state=SEED, n_jobs=jobs,
                                            refit=False)
                search.fit(Xt, yt)
                first = cross_val_score(base, Xt, yt, cv=inner, scoring=metric,
                                        n_jobs=jobs).mean()
                params = {} if first >= search.best_score_ else search.best_params_
                model = clone(base).set_params(**params).fit(Xt, yt)
                scores.append(scorer(model, X.iloc[test], y.iloc[test]))
            means[(ds, st)] = float(np.mean(scores))
    return time.perf_counter() - t0, means


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--trials", type=int, default=10)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        ours, ours_scores = woodlot(Path(tmp), args.trials, args.jobs, "random")
        hand, hand_scores = by_hand(args.trials, args.jobs)
        halving, halving_scores = woodlot(Path(tmp), args.trials, args.jobs, "halving")
    print(f"{args.trials} configurations per outer fold, {FOLDS} outer × {INNER} inner folds, "
          f"2 datasets × 2 strategies, n_jobs = {args.jobs}")
    print(f"woodlot, random search:   {ours:7.1f} s")
    print(f"hand-written loop:        {hand:7.1f} s   (woodlot / hand = {ours / hand:.2f}; "
          "goal at most 1.0)")
    print(f"woodlot, halving:         {halving:7.1f} s   (halving / hand = {halving / hand:.2f})")
    print("\nmean outer-test score (accuracy; RMSE for diabetes)")
    print(f"{'dataset':10} {'strategy':8} {'woodlot':>9} {'by hand':>9} {'halving':>9}")
    for key in sorted(ours_scores):
        sign = -1 if key[0] == "diabetes" else 1
        print(f"{key[0]:10} {key[1]:8} {sign * ours_scores[key]:9.4f} "
              f"{sign * hand_scores[key]:9.4f} {sign * halving_scores[key]:9.4f}")
    same = all(abs(ours_scores[k] - hand_scores[k]) < 1e-12 for k in ours_scores)
    print(f"\nwoodlot's random search equals the hand loop: {'yes' if same else 'NO'}")


if __name__ == "__main__":
    main()
