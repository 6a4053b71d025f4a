"""From a validated suite to loaded datasets and the units of work: the cells of the accuracy
comparison (a tuned strategy's cells are searches, `harness.search`) and the speedup
points, each with its key. Strategies are checked here against the estimator of each task
the loaded datasets have."""

from __future__ import annotations

import socket
from dataclasses import dataclass, field

from harness import provenance
from harness.datasets import Dataset, Split, load_dataset
from harness.preprocess import pipeline_text
from harness.search import Search, configurations
from harness.splits import make_splits, split_id
from harness.strategies import Strategy, check_for_task
from harness.suite import SpeedupSettings, Suite
from harness.versions import (CELL_CODE, SPEEDUP_CODE, estimator_distribution,
                              result_versions)
from harness.work_units import Cell, SpeedupPoint, unit_key

SPEEDUP_FORMAT = 1  # bump when the meaning of a stored speedup point changes
WARMUP_ROWS = 500  # rows of the untimed fit that starts thread and process pools (see harness.execution.speedup_point)


@dataclass(frozen=True)
class Plan:
    suite: Suite
    datasets: dict[str, Dataset]  # by name
    splits: dict[str, list[Split]]
    cells: list[Cell]               # of untuned strategies
    skipped: list[tuple[str, str]]  # (strategy, dataset) pairs with no estimator for the task
    searches: list[Search] = field(default_factory=list)  # one per tuned cell

    @property
    def keys(self) -> list[str]:
        """The keys of every cell of the comparison, tuned cells included."""
        return [c.key for c in self.cells] + [s.key for s in self.searches]

    @property
    def by_fingerprint(self) -> dict[str, Dataset]:
        return {d.fingerprint: d for d in self.datasets.values()}


def load_datasets(suite: Suite) -> dict[str, Dataset]:
    """Load and check every dataset of the suite (raises `UserError` on the first bad one)."""
    return {spec.name: load_dataset(spec) for spec in suite.datasets}


def versions_for(strategy: Strategy, task: str,
                 code: tuple[str, ...] = CELL_CODE) -> dict[str, str]:
    """The versions a result of ``strategy`` on ``task`` depends on (`harness.versions`):
    libraries, the estimator's own package and woodlot's code that computes it."""
    dist = estimator_distribution(strategy.estimator_path(task) or "")
    return result_versions((dist,) if dist else (), code)


def make_plan(suite: Suite, datasets: dict[str, Dataset] | None = None) -> Plan:
    """Every cell of the suite: each dataset × strategy × split, keyed for the store."""
    datasets = datasets if datasets is not None else load_datasets(suite)
    p = suite.protocol
    extras = suite.also_measure.settings()
    cells, skipped, all_splits, searches = [], [], {}, []
    checked: set[tuple[str, str]] = set()
    for spec in suite.datasets:
        ds = datasets[spec.name]
        splits = make_splits(ds, p, spec.where)
        all_splits[spec.name] = splits
        metrics = p.metrics[ds.task]
        # one split: the evidence for a difference is in the test rows (harness.row_evidence);
        # in the key only when kept, so k-fold cells keep their keys
        one_split = {"row_evidence": True} if len(splits) == 1 else {}
        for strategy in suite.strategies:
            if not strategy.supports(ds.task):
                skipped.append((strategy.name, ds.name))
                continue
            if (strategy.name, ds.task) not in checked:
                check_for_task(strategy, ds.task, ds.name)
                checked.add((strategy.name, ds.task))
            estimator = pipeline_text(strategy, ds, p.seed)
            versions = versions_for(strategy, ds.task)
            settings = {"metrics": list(metrics), "also_measure": extras, "threads": 1,
                        "strategy": strategy.name, **one_split}
            tuning = strategy.tuning
            if tuning is not None:
                configs = configurations(tuning, ds.task, p.seed)
                settings_t = {**settings, "tuning": tuning.canonical(ds.task)}
            for s in splits:
                key = unit_key(fingerprint=ds.fingerprint, estimator=estimator, train=s.train,
                               test=s.test, versions=versions,
                               settings=settings if tuning is None else settings_t)
                cell = Cell(key=key, dataset=ds.name, fingerprint=ds.fingerprint,
                            task=ds.task, strategy=strategy, repeat=s.repeat, fold=s.fold,
                            train=s.train, test=s.test, metrics=metrics, seed=p.seed,
                            row_evidence=bool(one_split), **extras)
                if tuning is None:
                    cells.append(cell)
                else:
                    searches.append(Search(cell, tuning, configs,
                                           {"versions": versions, "settings": settings}))
    return Plan(suite, datasets, all_splits, cells, skipped, searches)


def cell_splits(plan: Plan) -> list[tuple[str, str]]:
    """(cell key, split id) for every cell of the plan: which rows trained and tested it."""
    ids = {(name, s.repeat, s.fold): split_id(s.train, s.test)
           for name, splits in plan.splits.items() for s in splits}
    return [(c.key, ids[(c.dataset, c.repeat, c.fold)])
            for c in [*plan.cells, *(x.cell for x in plan.searches)]]


def usable_cores() -> int:
    """Cores this process may use (CPU affinity and container quotas; joblib's count)."""
    from joblib import cpu_count

    return max(1, int(cpu_count()))


def worker_counts(requested: tuple[int, ...], cores: int) -> tuple[list[int], list[str]]:
    """The worker counts to measure and notes on what was changed.

    Default: 1, 2, 4, … up to ``cores`` (and ``cores`` itself). Counts above ``cores`` are
    clipped to it; 1 is always measured, as the baseline of every speedup.
    """
    notes = []
    if not requested:
        counts = [1]
        while counts[-1] * 2 <= cores:
            counts.append(counts[-1] * 2)
        if counts[-1] != cores:
            counts.append(cores)
        return counts, notes
    above = [w for w in requested if w > cores]
    counts = sorted({min(w, cores) for w in requested})
    if above:
        notes.append(f"worker count{'s' if len(above) > 1 else ''} "
                     f"{', '.join(map(str, above))} exceed{'s' if len(above) == 1 else ''} the "
                     f"{cores} core{'s' if cores > 1 else ''} present; clipped to {cores}")
    if 1 not in counts:
        counts.insert(0, 1)
        notes.append("1 worker added: it is the baseline of every speedup")
    return counts, notes


def plan_speedup(plan: Plan, settings: SpeedupSettings,
                 cores: int) -> tuple[list[SpeedupPoint], list[int], list[str]]:
    """Every speedup point, in the order they run, plus worker counts and notes.

    A point fits on the training rows of the dataset's first split. Its key adds the worker
    count, the repeats and the machine (host, CPU model, cores) to what a cell's key holds.
    """
    suite = plan.suite
    counts, notes = worker_counts(settings.workers, cores)
    names = settings.datasets or tuple(d.name for d in suite.datasets)
    strategies = ([suite.strategy(n) for n in settings.strategies] if settings.strategies
                  else list(suite.strategies))
    machine = {"speedup_format": SPEEDUP_FORMAT, "repeats": settings.repeats, "warmup_rows": WARMUP_ROWS,
               "host": socket.gethostname(), "cpu": provenance.cpu_model(), "cores": cores}
    points = []
    for name in names:
        ds = plan.datasets[name]
        split = plan.splits[name][0]
        for strategy in strategies:
            if not strategy.supports(ds.task):
                notes.append(f"strategy '{strategy.name}' has no estimator for dataset "
                             f"'{name}'s task; left out of the speedup points")
                continue
            estimator = pipeline_text(strategy, ds, suite.protocol.seed)
            versions = versions_for(strategy, ds.task, SPEEDUP_CODE)
            for p in counts:
                key = unit_key(fingerprint=ds.fingerprint, estimator=estimator,
                               train=split.train, test=split.test, versions=versions,
                               settings={**machine, "threads": p})
                points.append(SpeedupPoint(key=key, dataset=name, fingerprint=ds.fingerprint,
                                           task=ds.task, strategy=strategy, workers=p,
                                           repeats=settings.repeats, train=split.train,
                                           test=split.test, seed=suite.protocol.seed))
    return points, counts, notes
