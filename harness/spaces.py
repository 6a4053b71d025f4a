"""Search spaces for tuning: how one parameter may vary, parsed from a suite's ``tune`` table,
and the default space of every catalogue method with the source of each range.

A parameter varies over a list of values or over a range: ``uniform``, ``log_uniform``,
``integers`` or ``log_integers`` (both ends included). Each range becomes a SciPy
distribution (`scipy.stats.uniform`, `loguniform`, `randint`) that scikit-learn's
`ParameterSampler` draws from; ``log_integers`` rounds a log-uniform draw to the nearest
whole number.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from typing import Any

from scipy import stats

from harness.errors import UserError, closest

LIST = "values"
KINDS = ("uniform", "log_uniform", "integers", "log_integers")


class LogIntegers:
    """Whole numbers spread evenly on a log scale between ``low`` and ``high`` (both
    included): a log-uniform draw, rounded. Has the ``rvs`` that `ParameterSampler` calls."""

    def __init__(self, low: int, high: int) -> None:
        self.low, self.high = int(low), int(high)
        self._dist = stats.loguniform(self.low - 0.5 if self.low > 1 else self.low,
                                      self.high + 0.5)

    def rvs(self, size=None, random_state=None):
        x = self._dist.rvs(size=size, random_state=random_state)
        if size is None:
            return int(min(self.high, max(self.low, round(float(x)))))
        return [int(min(self.high, max(self.low, round(float(v))))) for v in x]


@dataclass(frozen=True)
class Range:
    """How one parameter varies: ``kind`` is ``values`` (a list) or one of `KINDS`."""

    kind: str
    low: float | int | None = None
    high: float | int | None = None
    values: tuple = ()

    def distribution(self):
        """A list for `ParameterSampler`, or a frozen SciPy distribution (something with
        ``rvs``)."""
        if self.kind == LIST:
            return list(self.values)
        if self.kind == "uniform":
            return stats.uniform(loc=self.low, scale=self.high - self.low)
        if self.kind == "log_uniform":
            return stats.loguniform(self.low, self.high)
        if self.kind == "integers":
            return stats.randint(int(self.low), int(self.high) + 1)
        return LogIntegers(int(self.low), int(self.high))

    def ends(self) -> list:
        """The values at the edges of the range (what validation tries on the estimator)."""
        if self.kind == LIST:
            return list(self.values)
        if self.kind in ("integers", "log_integers"):
            return [int(self.low), int(self.high)]
        return [self.low, self.high]

    def text(self) -> str:
        """As the user wrote it, e.g. ``log_uniform [0.01, 1]`` or ``[2, 3, 5]``."""
        if self.kind == LIST:
            return json.dumps(list(self.values))
        return f"{self.kind} [{self.low:g}, {self.high:g}]"

    def canonical(self) -> Any:
        return [self.kind, list(self.values)] if self.kind == LIST else [self.kind, self.low,
                                                                          self.high]


Space = dict  # parameter name -> Range

RANDOM, HALVING = "random", "halving"
SEARCHES = (RANDOM, HALVING)


@dataclass(frozen=True)
class Tuning:
    """How a strategy is tuned: its space (common to both tasks, plus per-task additions),
    the budget per outer fold (``trials`` configurations, or ``seconds`` of search), the
    search (random sampling, or successive halving over the sampled configurations), the
    number of inner folds and, for halving, the share of configurations kept each round
    (1 / ``factor``). ``max_trials`` caps a budget given in seconds."""

    space: dict = field(default_factory=dict)
    task_space: dict = field(default_factory=dict)  # task -> {param: Range}
    trials: int | None = 20
    seconds: float | None = None
    search: str = RANDOM
    inner_folds: int = 3
    factor: int = 3
    max_trials: int = 100

    def space_for(self, task: str) -> Space:
        return {**self.space, **self.task_space.get(task, {})}

    @property
    def planned_trials(self) -> int:
        """Configurations sampled (the first is the configured one): the budget in trials,
        or ``max_trials`` when the budget is in seconds."""
        return self.trials if self.trials is not None else self.max_trials

    def budget_text(self) -> str:
        return (f"{self.trials} trials" if self.trials is not None
                else f"{self.seconds:g} s")

    def canonical(self, task: str) -> dict:
        """Everything that changes the search's result, for unit keys."""
        return {"space": canonical_space(self.space_for(task)), "trials": self.trials,
                "seconds": self.seconds, "search": self.search,
                "inner_folds": self.inner_folds,
                "factor": self.factor if self.search == HALVING else None,
                "max_trials": self.max_trials if self.trials is None else None}


def space_distributions(space: Space) -> dict[str, Any]:
    """``param_distributions`` for scikit-learn's `ParameterSampler`."""
    return {k: r.distribution() for k, r in space.items()}


def canonical_space(space: Space) -> list:
    return [[k, space[k].canonical()] for k in sorted(space)]


def parse_range(value: Any, where: str, field: str) -> Range:
    """A list of values, or a one-key table ``{ kind = [low, high] }``."""
    if isinstance(value, list):
        if not value:
            raise UserError("an empty list: give at least one value to try", file=where,
                            field=field)
        return Range(LIST, values=tuple(value))
    if not (isinstance(value, dict) and len(value) == 1):
        raise UserError("expected a list of values or one range such as "
                        "{ log_uniform = [0.01, 1.0] } (uniform, log_uniform, integers, "
                        f"log_integers), got {value!r}", file=where, field=field)
    (kind, ends), = value.items()
    if kind not in KINDS:
        raise UserError(f"unknown range '{kind}'{closest(kind, KINDS)}; use one of "
                        f"{', '.join(KINDS)}", file=where, field=field)
    whole = kind in ("integers", "log_integers")
    if not (isinstance(ends, list) and len(ends) == 2
            and all(isinstance(e, (int, float)) and not isinstance(e, bool) for e in ends)):
        raise UserError(f"a {kind} range is [low, high], two numbers", file=where, field=field)
    low, high = ends
    if whole and not all(isinstance(e, int) or float(e).is_integer() for e in ends):
        raise UserError(f"an {kind} range needs whole numbers, got {ends}", file=where,
                        field=field)
    if not (math.isfinite(low) and math.isfinite(high)):
        raise UserError("range ends must be finite numbers", file=where, field=field)
    if low >= high:
        raise UserError(f"low must be below high, got [{low}, {high}]", file=where, field=field)
    if kind.startswith("log") and low <= 0:
        raise UserError(f"a log range must stay above zero, got [{low}, {high}]; use a "
                        "uniform range to include zero", file=where, field=field)
    if whole:
        return Range(kind, int(low), int(high))
    return Range(kind, float(low), float(high))


# ------------------------------------------------------------------ default spaces
#
# Sources:
#   [P] Probst, Boulesteix & Bischl (2019), "Tunability: Importance of hyperparameters of
#       machine learning algorithms", JMLR 20(53), table of search ranges (for rpart, ranger
#       and xgboost). The ranges below are recalled from memory and translated to
#       scikit-learn's parameters; where we narrowed a range to keep searches affordable, the
#       note says so.
#   [C] common practice (no single published source).
# The ensemble size of forests and bagging is not tuned: more trees do not hurt accuracy
# (common practice; [P] also fix it), they only cost time, which the suite controls.

R = Range
_ETA = (R("log_uniform", 0.005, 1.0), "[P] xgboost eta 2^-10–1 (narrowed below)")
_ROUNDS = (R("log_integers", 20, 500), "[P] xgboost nrounds 1–5000 (narrowed)")
_MTRY = (R("uniform", 0.05, 1.0), "[P] ranger mtry as a share of columns 0–1 (0.05: at "
                                  "least a few columns)")
_SAMPLE = (R("uniform", 0.1, 1.0), "[P] ranger sample.fraction 0.1–1")
_NODE = (R("log_integers", 1, 50), "[P] ranger min.node.size, searched on a log scale "
                                   "(narrowed)")
DEFAULT_SPACES: dict[str, dict[str, tuple[Range, str]]] = {
    "single-tree": {
        "max_depth": (R("integers", 1, 30), "[P] rpart maxdepth 1–30"),
        "min_samples_leaf": (R("integers", 1, 60), "[P] rpart minbucket 1–60"),
        "min_samples_split": (R("integers", 2, 60), "[P] rpart minsplit 1–60 (2 is "
                                                     "scikit-learn's least)"),
    },
    "bagged-trees": {
        "max_samples": _SAMPLE,
        "max_features": (R("uniform", 0.1, 1.0), "[C] share of columns per member, as "
                                                 "[P]'s ranger mtry share"),
    },
    "random-forest": {"max_features": _MTRY, "max_samples": _SAMPLE, "min_samples_leaf": _NODE},
    "extra-trees": {"max_features": _MTRY, "min_samples_leaf": _NODE},
    "gradient-boosting": {
        "learning_rate": _ETA, "n_estimators": _ROUNDS,
        "max_depth": (R("integers", 1, 8), "[P] xgboost max_depth 1–15 (narrowed)"),
        "subsample": (R("uniform", 0.1, 1.0), "[P] xgboost subsample 0.1–1"),
    },
    "hist-gradient-boosting": {
        "learning_rate": _ETA, "max_iter": _ROUNDS,
        "max_leaf_nodes": (R("log_integers", 4, 128), "[C] leaves per tree; [P] tune depth "
                                                      "1–15 instead"),
        "min_samples_leaf": (R("log_integers", 1, 128), "[P] xgboost min_child_weight "
                                                        "2^0–2^7"),
        "l2_regularization": (R("log_uniform", 2.0 ** -10, 2.0 ** 10), "[P] xgboost lambda "
                                                                       "2^-10–2^10"),
    },
    "adaboost": {
        "learning_rate": (R("log_uniform", 0.01, 2.0), "[C] shrinkage around scikit-learn's "
                                                       "1.0 (from memory)"),
        "n_estimators": (_ROUNDS[0], "[C] as the boosting stages above"),
        "estimator__max_depth": (R("integers", 1, 5), "[C] stumps to small trees (from "
                                                      "memory)"),
    },
}
del R


def default_space(method: str) -> Space | None:
    """The catalogue method's default space (None for a method without one)."""
    spec = DEFAULT_SPACES.get(method)
    return None if spec is None else {k: r for k, (r, _) in spec.items()}
