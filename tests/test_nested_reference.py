"""woodlot's nested resampling equals a hand-written scikit-learn nested loop.

Reference: scikit-learn's `RandomizedSearchCV` (same `ParameterSampler` seed, the same
inner splitter, refit on the outer training rows) inside the same outer splits, plus
`cross_val_score` for woodlot's first trial, the configuration as given, which a
randomized search does not try. Best = highest mean inner score, the first in trial order on
a tie, as `RandomizedSearchCV` ranks (scikit-learn is the reference library here).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import loguniform, randint, uniform
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.ensemble import GradientBoostingClassifier, RandomForestRegressor
from sklearn.metrics import get_scorer
from sklearn.model_selection import (KFold, RandomizedSearchCV, RepeatedKFold,
                                     RepeatedStratifiedKFold, StratifiedKFold,
                                     cross_val_score)

import harness

SEED, FOLDS, INNER, BUDGET = 5, 3, 3, 6

SUITE = f"""
dataset = [{{ name = "cancer", from = "sklearn", load = "load_breast_cancer" }},
           {{ name = "diabetes", from = "sklearn", load = "load_diabetes" }}]

[suite]
name = "nested"

[protocol]
folds = {FOLDS}
repeats = 1
seed = {SEED}
metrics = {{ classification = ["accuracy"], regression = ["neg_root_mean_squared_error"] }}

[tuning]
budget = {BUDGET}
inner_folds = {INNER}


[[strategy]]
name = "gb"
method = "gradient-boosting"
params = {{ n_estimators = 15 }}
tune = {{ learning_rate = {{ log_uniform = [0.01, 1.0] }}, max_depth = {{ integers = [1, 4] }} }}

[[strategy]]
name = "forest"
method = "random-forest"
params = {{ n_estimators = 10 }}
tune = {{ max_features = {{ uniform = [0.2, 1.0] }}, min_samples_leaf = {{ integers = [1, 10] }} }}
"""


def hand_loop(X, y, base, space, outer, inner, scoring):
    """Outer scores, chosen parameters and inner means (in trial order) per outer split."""
    scorer = get_scorer(scoring)
    out = []
    for train, test in outer.split(X, y):
        search = RandomizedSearchCV(base, space, n_iter=BUDGET - 1, cv=inner, scoring=scoring,
                                    random_state=SEED, refit=True)
        search.fit(X.iloc[train], y.iloc[train])
        first = cross_val_score(base, X.iloc[train], y.iloc[train], cv=inner,
                                scoring=scoring).mean()
        inner_means = [first, *search.cv_results_["mean_test_score"]]
        if first >= search.best_score_:
            model, chosen = clone(base).fit(X.iloc[train], y.iloc[train]), {}
        else:
            model, chosen = search.best_estimator_, search.best_params_
        out.append((scorer(model, X.iloc[test], y.iloc[test]), chosen, inner_means))
    return out


@pytest.fixture(scope="module")
def woodlot(tmp_path_factory):
    folder = tmp_path_factory.mktemp("nested")
    (folder / "nested.toml").write_text(SUITE)
    harness.run_suite(folder / "nested.toml", out=folder / "out", jobs=2, progress=False,
                      write_outputs=False)
    return harness.load_results(folder / "out"), harness.load_trials(folder / "out")


@pytest.mark.parametrize("case", ["classifier", "regressor"])
def test_nested_scores_equal_hand_written_loop(woodlot, case):
    cells, trials = woodlot
    if case == "classifier":
        bunch = load_breast_cancer(as_frame=True)
        X, y = bunch.data, bunch.target.map(dict(enumerate(bunch.target_names)))
        base = GradientBoostingClassifier(n_estimators=15, random_state=SEED)
        space = {"learning_rate": loguniform(0.01, 1.0), "max_depth": randint(1, 5)}
        outer = RepeatedStratifiedKFold(n_splits=FOLDS, n_repeats=1, random_state=SEED)
        inner = StratifiedKFold(n_splits=INNER, shuffle=True, random_state=SEED)
        dataset, strategy, metric = "cancer", "gb", "accuracy"
    else:
        X, y = load_diabetes(return_X_y=True, as_frame=True)
        base = RandomForestRegressor(n_estimators=10, random_state=SEED)
        space = {"max_features": uniform(0.2, 0.8), "min_samples_leaf": randint(1, 11)}
        outer = RepeatedKFold(n_splits=FOLDS, n_repeats=1, random_state=SEED)
        inner = KFold(n_splits=INNER, shuffle=True, random_state=SEED)
        dataset, strategy, metric = "diabetes", "forest", "neg_root_mean_squared_error"
    expected = hand_loop(X, y, base, space, outer, inner, metric)
    assert any(chosen for _, chosen, _ in expected)  # the search's choice is checked too
    ours = cells[(cells.dataset == dataset) & (cells.strategy == strategy)].sort_values("fold")
    assert (ours.status == "ok").all() and len(ours) == FOLDS
    for (score, chosen, inner_means), (_, row) in zip(expected, ours.iterrows()):
        assert row[metric] == pytest.approx(score, abs=1e-12, rel=1e-12)
        for k, v in chosen.items():
            assert row.configuration[k] == pytest.approx(v, abs=1e-12)
        mine = trials[(trials.dataset == dataset) & (trials.strategy == strategy)
                      & (trials.fold == row.fold)].sort_values("trial")
        np.testing.assert_allclose(mine.inner_score.to_numpy(), inner_means, rtol=1e-12,
                                   atol=1e-12)
