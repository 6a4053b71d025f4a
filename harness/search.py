"""Nested resampling of a tuned strategy: the units of one search and the rules that choose.

A *search* is one tuned strategy on one outer split (dataset × repeat × fold). It sees only
the outer training rows:

- configurations: the first is the strategy as configured (its ``params``, else the library's
  defaults), the rest are drawn by scikit-learn's `ParameterSampler` from the tuning space
  with the protocol's seed, so every outer fold and every rerun tries the same ones;
- inner splits: (stratified) k-fold on the outer training rows, shuffled with the protocol's
  seed, the same for every strategy on that outer fold;
- a *trial* (`Trial`) fits one configuration on each inner training part and scores the
  inner validation part with the dataset's first metric; its score is the mean over the
  inner folds;
- random search: the best configuration among the first b trials (highest inner mean, the
  earliest on a tie) is refit on the outer training rows and scored on the outer test rows,
  at b = 1, 2, 4, … up to the budget (the tuning curve; a refit only when the best changes).
  The last is the tuned result; b = 1 is the untuned one;
- successive halving: every configuration is tried on a share of the inner training rows,
  the best 1/factor go on to the next round with factor times the rows, and the last round
  uses all of them (the schedule of scikit-learn's halving searches with
  ``min_resources="exhaust"``); the best of the last round is refit.

Trials and refits are units of work like cells, each with its key (`unit_key`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from harness.spaces import HALVING, Tuning, space_distributions
from harness.work_units import Cell, unit_key

if TYPE_CHECKING:  # the strategies bring scikit-learn; reading results needs neither
    from harness.strategies import Strategy

SEARCH_FORMAT = 1  # bump when the meaning of a stored trial or refit changes
MIN_HALVING_ROWS = 20  # the fewest training rows a first halving round fits on


def inner_splitter(task: str, folds: int, seed: int):
    """The inner splitter of every search on a dataset (shuffled, seeded)."""
    from sklearn.model_selection import KFold, StratifiedKFold

    cls = StratifiedKFold if task == "classification" else KFold
    return cls(n_splits=folds, shuffle=True, random_state=seed)


def _plain(v: Any) -> Any:
    """NumPy scalars as Python numbers (stored as JSON; the value is unchanged)."""
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.floating):
        return float(v)
    return v


def configurations(tuning: Tuning, task: str, seed: int) -> list[dict[str, Any]]:
    """The configurations a search tries, in order: ``{}`` (as configured), then
    ``planned_trials - 1`` draws of `ParameterSampler` with ``random_state=seed``."""
    space = tuning.space_for(task)
    n = tuning.planned_trials - 1
    if n <= 0 or not space:
        return [{}]
    from sklearn.model_selection import ParameterSampler

    drawn = ParameterSampler(space_distributions(space), n_iter=n, random_state=seed)
    return [{}] + [{k: _plain(v) for k, v in c.items()} for c in drawn]


def budget_steps(n: int) -> list[int]:
    """1, 2, 4, … below ``n``, then ``n``."""
    steps, b = [], 1
    while b < n:
        steps.append(b)
        b *= 2
    return steps + [n] if n >= 1 else []


def best_of(scores: list[float], among: list[int] | None = None) -> int | None:
    """Index of the highest finite score (the earliest on a tie), among ``among``
    (default: all); None when none is finite."""
    best, best_score = None, -np.inf
    for i in (range(len(scores)) if among is None else among):
        s = scores[i]
        if s is not None and np.isfinite(s) and (best is None or s > best_score):
            best, best_score = i, s
    return best


def halving_rounds(n: int, rows: int, factor: int) -> list[tuple[int, int | None]]:
    """(configurations, training rows per inner fit; None = all) of each round of
    successive halving of ``n`` configurations over inner training parts of ``rows`` rows.

    As scikit-learn's halving searches with ``min_resources="exhaust"``: as many rounds as
    halving the configurations needs (1 + ⌊log_factor n⌋), but no more than the rows allow
    with at least `MIN_HALVING_ROWS` in the first; round i keeps ⌈n / factor^i⌉
    configurations on ⌊rows / factor^(rounds − 1)⌋ · factor^i rows, the last on all of them."""
    needed = 1 + int(math.floor(math.log(n, factor) + 1e-9)) if n > 1 else 1
    possible = 1 + int(math.floor(math.log(max(rows / MIN_HALVING_ROWS, 1), factor) + 1e-9))
    rounds = max(1, min(needed, possible))
    first = rows // factor ** (rounds - 1)
    return [(math.ceil(n / factor ** i), None if i == rounds - 1 else first * factor ** i)
            for i in range(rounds)]


@dataclass(frozen=True)
class Trial:
    """One configuration of a search scored on the inner splits of one outer training part
    (on ``rows`` rows of each inner training part in an early halving round)."""

    key: str
    search: str           # key of the tuned cell this trial belongs to
    dataset: str
    fingerprint: str
    task: str
    strategy: Strategy    # the tuned strategy with this configuration set
    repeat: int
    fold: int
    number: int           # position in the search's configurations; 0 = as configured
    config: dict[str, Any]
    train: np.ndarray     # the outer training rows
    metric: str
    seed: int
    inner_folds: int
    round: int = 0
    rows: int | None = None
    threads: int = 1
    timing: str = "side by side"

    def identity(self) -> dict[str, Any]:
        return {"search": self.search, "dataset": self.dataset, "strategy": self.strategy.name,
                "method": self.strategy.method, "family": self.strategy.family,
                "task": self.task, "repeat": self.repeat, "fold": self.fold,
                "trial": self.number, "round": self.round, "rows": self.rows,
                "config": self.config, "n_train": int(len(self.train))}


@dataclass
class Search:
    """One tuned strategy on one outer split: its tuned cell (whose key names the search),
    its configurations, and the keys of its trials and refits (made on demand)."""

    cell: Cell
    tuning: Tuning
    configs: list[dict[str, Any]]
    estimator_key: dict[str, Any]  # fingerprint, versions: what every unit key shares
    _described: dict[int, str] = field(default_factory=dict, repr=False)

    @property
    def key(self) -> str:
        return self.cell.key

    @property
    def halving(self) -> bool:
        return self.tuning.search == HALVING

    def configured(self, number: int) -> Strategy:
        return self.cell.strategy.configured(self.configs[number], self.cell.task)

    def _estimator(self, number: int) -> str:
        if number not in self._described:
            from harness.strategies import canonical

            self._described[number] = canonical(self.configured(number).build(
                self.cell.task, self.cell.seed))
        return self._described[number]

    def values(self, number: int) -> dict[str, Any]:
        """The value of every tuned parameter in configuration ``number`` (the configured or
        library default value where the configuration does not set it)."""
        params = self.configured(number).build(self.cell.task, self.cell.seed).get_params()
        space = self.tuning.space_for(self.cell.task)
        return {k: _plain(params[k]) if isinstance(params[k], (int, float, str, bool,
                                                                 np.generic, type(None)))
                else repr(params[k]) for k in sorted(space)}

    def trial(self, number: int, round_: int = 0, rows: int | None = None) -> Trial:
        c = self.cell
        key = unit_key(fingerprint=c.fingerprint, estimator=self._estimator(number),
                       train=c.train, test=c.test, versions=self.estimator_key["versions"],
                       settings={"search_format": SEARCH_FORMAT, "kind": "trial",
                                 "metric": c.metrics[0], "inner_folds": self.tuning.inner_folds,
                                 "seed": c.seed, "rows": rows})
        return Trial(key=key, search=c.key, dataset=c.dataset, fingerprint=c.fingerprint,
                     task=c.task, strategy=self.configured(number), repeat=c.repeat,
                     fold=c.fold, number=number, config=self.configs[number], train=c.train,
                     metric=c.metrics[0], seed=c.seed, inner_folds=self.tuning.inner_folds,
                     round=round_, rows=rows)

    def refit(self, number: int) -> Cell:
        """Configuration ``number`` fitted on the outer training rows, scored on the outer
        test rows, measured like any cell."""
        c = self.cell
        key = unit_key(fingerprint=c.fingerprint, estimator=self._estimator(number),
                       train=c.train, test=c.test, versions=self.estimator_key["versions"],
                       settings={"search_format": SEARCH_FORMAT, "kind": "refit",
                                 **self.estimator_key["settings"]})
        return Cell(key=key, dataset=c.dataset, fingerprint=c.fingerprint, task=c.task,
                    strategy=self.configured(number), repeat=c.repeat, fold=c.fold,
                    train=c.train, test=c.test, metrics=c.metrics, seed=c.seed,
                    memory=c.memory, model_size=c.model_size, size_curve=c.size_curve,
                    curve_points=c.curve_points, row_evidence=c.row_evidence)
