"""From a validated suite to loaded datasets and the list of cells to run."""

from __future__ import annotations

from dataclasses import dataclass

from harness.cells import Cell, cell_key
from harness.datasets import Dataset, load_dataset
from harness.protocol import Split, make_splits
from harness.suite import Suite


@dataclass(frozen=True)
class Plan:
    suite: Suite
    datasets: dict[str, Dataset]  # by name
    splits: dict[str, list[Split]]
    cells: list[Cell]
    skipped: list[tuple[str, str]]  # (strategy, dataset) pairs with no estimator for the task

    @property
    def by_fingerprint(self) -> dict[str, Dataset]:
        return {d.fingerprint: d for d in self.datasets.values()}


def load_datasets(suite: Suite) -> dict[str, Dataset]:
    """Load and check every dataset of the suite (raises `UserError` on the first bad one)."""
    return {spec.name: load_dataset(spec) for spec in suite.datasets}


def make_plan(suite: Suite, datasets: dict[str, Dataset] | None = None) -> Plan:
    """Every cell of the suite: each dataset × strategy × split, keyed for the store."""
    datasets = datasets if datasets is not None else load_datasets(suite)
    p, m = suite.protocol, suite.measure
    measure = {"memory": m.memory, "model_size": m.model_size, "size_curve": m.size_curve,
               "curve_points": m.curve_points}
    cells, skipped, all_splits = [], [], {}
    for spec in suite.datasets:
        ds = datasets[spec.name]
        splits = make_splits(ds, p, spec.where)
        all_splits[spec.name] = splits
        metrics = p.metrics[ds.task]
        for strategy in suite.strategies:
            if not strategy.supports(ds.task):
                skipped.append((strategy.name, ds.name))
                continue
            estimator = strategy.describe(ds.task, p.seed)
            for s in splits:
                key = cell_key(fingerprint=ds.fingerprint, estimator=estimator, train=s.train,
                               test=s.test, metrics=metrics, measure=measure)
                cells.append(Cell(key=key, dataset=ds.name, fingerprint=ds.fingerprint,
                                  task=ds.task, strategy=strategy, repeat=s.repeat, fold=s.fold,
                                  train=s.train, test=s.test, metrics=metrics, seed=p.seed,
                                  **measure))
    return Plan(suite, datasets, all_splits, cells, skipped)
