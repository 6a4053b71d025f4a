"""woodlot's per-fold scores equal scikit-learn's own `cross_validate`.

Reference: scikit-learn `sklearn.model_selection.cross_validate` with the same estimator,
the same splitter and the same scorer names (scikit-learn is the reference library here).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold, cross_validate

from harness import load_results, run_suite

SUITE = """
[suite]
name = "reference"

[protocol]
folds = 4
repeats = 2
seed = 11
metrics = { classification = ["accuracy", "neg_log_loss", "roc_auc"], regression = ["neg_root_mean_squared_error", "r2"] }

[[dataset]]
name = "cancer"
from = "sklearn"
load = "load_breast_cancer"

[[dataset]]
name = "diabetes"
from = "sklearn"
load = "load_diabetes"

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 20 }

[[strategy]]
name = "gb"
method = "gradient-boosting"
params = { n_estimators = 20 }
"""


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    folder = tmp_path_factory.mktemp("ref")
    path = folder / "reference.toml"
    path.write_text(SUITE)
    run_suite(path, out=folder / "out", jobs=2, progress=False)
    return load_results(folder / "out")


@pytest.mark.parametrize("dataset,strategy", [("cancer", "forest"), ("cancer", "gb"),
                                              ("diabetes", "forest"), ("diabetes", "gb")])
def test_fold_scores_equal_cross_validate(results, dataset, strategy):
    from sklearn.datasets import load_breast_cancer, load_diabetes
    from sklearn.ensemble import (GradientBoostingClassifier, GradientBoostingRegressor,
                                  RandomForestClassifier, RandomForestRegressor)

    if dataset == "cancer":
        bunch = load_breast_cancer()
        X, y = bunch.data, bunch.target_names[bunch.target]  # labels by name, as woodlot keeps them
        cv = RepeatedStratifiedKFold(n_splits=4, n_repeats=2, random_state=11)
        est = (RandomForestClassifier(n_estimators=20, random_state=11) if strategy == "forest"
               else GradientBoostingClassifier(n_estimators=20, random_state=11))
        metrics = ["accuracy", "neg_log_loss", "roc_auc"]
    else:
        X, y = load_diabetes(return_X_y=True)
        cv = RepeatedKFold(n_splits=4, n_repeats=2, random_state=11)
        est = (RandomForestRegressor(n_estimators=20, random_state=11) if strategy == "forest"
               else GradientBoostingRegressor(n_estimators=20, random_state=11))
        metrics = ["neg_root_mean_squared_error", "r2"]
    ref = cross_validate(est, X, y, cv=cv, scoring=metrics)
    ours = results[(results.dataset == dataset) & (results.strategy == strategy)] \
        .sort_values(["repeat", "fold"])
    assert (ours.status == "ok").all()
    assert len(ours) == 8
    for m in metrics:
        np.testing.assert_allclose(ours[m].to_numpy(), ref[f"test_{m}"], rtol=1e-12, atol=1e-12)


def test_final_point_of_size_curve_is_the_fold_score(results):
    # The ensemble-size curve is computed member by member (staged predictions for boosting,
    # prefix averages of the trees for forests); at full size it must reproduce the model's
    # own prediction, i.e. the fold's score on the first metric.
    for _, row in results.iterrows():
        first = "accuracy" if row.task == "classification" else "neg_root_mean_squared_error"
        n, score = row.curve[-1]
        assert n == 20
        assert score == pytest.approx(row[first], rel=1e-9, abs=1e-9)
        sizes = [p[0] for p in row.curve]
        assert sizes == sorted(sizes) and sizes[0] == 1


def test_adaboost_regressor_curve_equals_scikit_learns_staged_predict():
    """The ensemble-size curve of AdaBoost.R2 takes its weighted medians from one prediction
    per member; scikit-learn's staged_predict (the reference) predicts every member again at
    every stage. Both must give the same predictions, to the bit, on a data frame (what the
    in-fold preprocessing hands over) without a warning about feature names."""
    import warnings

    import numpy as np
    import pandas as pd
    from sklearn.datasets import make_friedman1
    from sklearn.ensemble import AdaBoostRegressor

    from harness.execution.run_cell import weighted_median_at

    X, y = make_friedman1(n_samples=300, noise=1.0, random_state=2)
    X = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    model = AdaBoostRegressor(n_estimators=40, random_state=0).fit(X[:200], y[:200])
    staged = list(model.staged_predict(X[200:]))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = weighted_median_at(model, X[200:], [1, 2, 9, 23, 40])
    for n, values in got.items():
        assert np.array_equal(values, staged[n - 1]), n
