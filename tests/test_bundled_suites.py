"""Every bundled suite file validates; the offline ones plan without a network."""

from __future__ import annotations

from pathlib import Path

import pytest

from harness.plan import make_plan
from harness.suite import load_suite

ROOT = Path(__file__).resolve().parent.parent
SUITES = sorted((ROOT / "suites").glob("*.toml")) + sorted((ROOT / "examples").glob("*.toml"))
CATALOGUE = {"single-tree", "bagged-trees", "random-forest", "extra-trees", "gradient-boosting",
             "hist-gradient-boosting", "adaboost"}


@pytest.mark.parametrize("path", SUITES, ids=lambda p: p.name)
def test_bundled_suite_validates(path):
    suite = load_suite(path, expand=False)
    assert suite.datasets and suite.strategies
    if all(d.source != "openml" for d in suite.datasets):
        plan = make_plan(suite)  # loads every dataset: must work offline
        assert plan.keys
    else:  # OpenML entries all carry an 'expect' guard (their ids were written from memory)
        for d in suite.datasets:
            assert {"name", "rows"} <= set(d.options.get("expect", {})), d.name


def test_starter_suite_covers_the_catalogue_and_both_tasks():
    suite = load_suite(ROOT / "suites" / "starter.toml")
    assert {s.method for s in suite.strategies} == CATALOGUE
    plan = make_plan(suite)
    assert {d.task for d in plan.datasets.values()} == {"classification", "regression"}
    assert all(d.source.startswith(("sklearn:", "generator:")) for d in plan.datasets.values())


def test_tuned_suite_tunes_the_catalogue_with_equal_budgets_offline():
    suite = load_suite(ROOT / "suites" / "tuned.toml")
    assert {s.method for s in suite.strategies} == CATALOGUE
    assert all(s.tuning is not None for s in suite.strategies)
    assert len({(s.tuning.trials, s.tuning.seconds, s.tuning.inner_folds)
                for s in suite.strategies}) == 1  # the same budget for every strategy
    plan = make_plan(suite)
    assert not plan.cells and len(plan.searches) == len(plan.keys)
    assert {d.task for d in plan.datasets.values()} == {"classification", "regression"}
    assert all(d.source.startswith(("sklearn:", "generator:")) for d in plan.datasets.values())
