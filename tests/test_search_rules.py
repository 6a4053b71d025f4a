"""The rules of a search checked against scikit-learn: the configurations are
`ParameterSampler`'s, and successive halving follows the schedule of scikit-learn's
`HalvingRandomSearchCV` with ``min_resources="exhaust"`` (the reference library here)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import loguniform, randint, uniform
from sklearn.dummy import DummyRegressor
from sklearn.experimental import enable_halving_search_cv  # noqa: F401
from sklearn.model_selection import HalvingRandomSearchCV, KFold, ParameterSampler

from harness.search import budget_steps, configurations, halving_rounds
from harness.spaces import Range, Tuning


@pytest.mark.parametrize("n,factor", [(20, 3), (9, 3), (27, 3), (16, 2), (10, 4)])
def test_halving_rounds_follow_scikit_learns_exhaust_schedule(n, factor):
    rows = 12_000  # large enough that the smallest round is not cut by woodlot's floor
    X, y = np.zeros((rows, 1)), np.arange(rows, dtype=float)
    search = HalvingRandomSearchCV(DummyRegressor(), {"quantile": uniform(0, 1)},  # unused
                                   n_candidates=n, factor=factor, min_resources="exhaust",
                                   cv=KFold(2), random_state=0, refit=False).fit(X, y)
    ours = halving_rounds(n, rows, factor)
    assert [k for k, _ in ours] == list(search.n_candidates_)
    assert [r for _, r in ours[:-1]] == list(search.n_resources_[:-1])
    assert ours[-1][1] is None  # the last round: every row (scikit-learn: n_resources_[-1])


def test_configurations_are_parameter_samplers_after_the_configured_one():
    space = {"learning_rate": Range("log_uniform", 0.01, 1.0), "max_depth": Range("integers", 1, 6)}
    tuning = Tuning(space=space, trials=7)
    ours = configurations(tuning, "classification", seed=42)
    ref = list(ParameterSampler({"learning_rate": loguniform(0.01, 1.0),
                                 "max_depth": randint(1, 7)}, n_iter=6, random_state=42))
    assert ours[0] == {} and ours[1:] == ref


def test_budget_steps():
    assert budget_steps(1) == [1]
    assert budget_steps(8) == [1, 2, 4, 8]
    assert budget_steps(10) == [1, 2, 4, 8, 10]
