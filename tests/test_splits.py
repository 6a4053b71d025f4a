"""Splits are seeded, paired across strategies, and equal scikit-learn's own splitters."""

from __future__ import annotations

import numpy as np
from sklearn.model_selection import RepeatedStratifiedKFold, StratifiedShuffleSplit

from harness.plan import make_plan
from harness.suite import load_suite
from tests.conftest import SMALL_SUITE


def test_every_strategy_sees_the_same_splits(write_suite):
    plan = make_plan(load_suite(write_suite(SMALL_SUITE)))
    by_split = {}
    for c in plan.cells:
        ident = (c.dataset, c.repeat, c.fold)
        by_split.setdefault(ident, []).append((c.train, c.test))
    assert len(by_split) == 2 * 3 * 2  # datasets × repeats × folds
    for pairs in by_split.values():
        assert len(pairs) == 3  # every strategy
        for train, test in pairs[1:]:
            assert np.array_equal(train, pairs[0][0]) and np.array_equal(test, pairs[0][1])


def test_splits_are_seeded(write_suite):
    a = make_plan(load_suite(write_suite(SMALL_SUITE, "a")))
    b = make_plan(load_suite(write_suite(SMALL_SUITE, "b")))
    c = make_plan(load_suite(write_suite(SMALL_SUITE.replace("seed = 3", "seed = 4"), "c")))
    assert [x.key for x in a.cells] == [x.key for x in b.cells]
    assert all(np.array_equal(x.test, y.test) for x, y in zip(a.cells, b.cells))
    assert not all(np.array_equal(x.test, y.test) for x, y in zip(a.cells, c.cells))


def test_cv_splits_match_scikit_learn(write_suite):
    # Reference: scikit-learn's RepeatedStratifiedKFold with the same seed.
    plan = make_plan(load_suite(write_suite(SMALL_SUITE)))
    ds = plan.datasets["wine"]
    ref = list(RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=3)
               .split(np.zeros((ds.n_rows, 1)), ds.y))
    ours = plan.splits["wine"]
    assert len(ours) == len(ref) == 6
    for s, (train, test) in zip(ours, ref):
        assert np.array_equal(s.train, train) and np.array_equal(s.test, test)
    # every row is tested exactly once per repeat
    for r in range(2):
        tested = np.concatenate([s.test for s in ours if s.repeat == r])
        assert sorted(tested) == list(range(ds.n_rows))


def test_holdout_with_absolute_training_rows(write_suite):
    body = SMALL_SUITE.replace("folds = 3\nrepeats = 2",
                               'splits = "holdout"\ntrain_rows = 100\nrepeats = 4')
    plan = make_plan(load_suite(write_suite(body)))
    wine = plan.splits["wine"]
    assert len(wine) == 4
    assert all(len(s.train) == 100 and len(s.test) == 78 for s in wine)
    assert all(len(np.intersect1d(s.train, s.test)) == 0 for s in wine)
    ref = list(StratifiedShuffleSplit(n_splits=4, train_size=100, test_size=78, random_state=3)
               .split(np.zeros((178, 1)), plan.datasets["wine"].y))
    assert all(np.array_equal(s.test, t) for s, (_, t) in zip(wine, ref))
