"""What woodlot knows about a scikit-learn scorer beyond its value: the task it scores, whether
its differences mean the same on every dataset (a bounded, unit-free score), the range its
values can take, and the width of its region of practical equivalence (the smallest
difference that matters; `Equivalence` is a suite's ``[equivalence]`` section). scikit-learn
is imported only by the functions that ask it, so reading results never loads it.

Scorer values are stored as scikit-learn returns them: higher is better, errors negated
(``neg_root_mean_squared_error``)."""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

from harness.errors import UserError, closest

# Scorers whose values have no unit and the same range on every dataset (proportions,
# correlations, r2): differences of these can be compared across datasets as they are.
_UNIT_FREE = ("accuracy", "balanced_accuracy", "top_k_accuracy", "r2", "explained_variance",
              "roc_auc", "average_precision", "f1", "precision", "recall", "jaccard",
              "matthews_corrcoef", "adjusted_rand_score")
# Scores bounded by [0, 1] (the rest of the unit-free ones reach below 0: r2, explained
# variance, d2 scores have no lower bound; Matthews correlation and adjusted Rand reach −1).
_PROPORTIONS = ("accuracy", "balanced_accuracy", "top_k_accuracy", "roc_auc",
                "average_precision", "f1", "precision", "recall", "jaccard")

DEFAULT_ABSOLUTE = 0.01   # bounded scores: one percentage point of accuracy (common practice)
DEFAULT_RELATIVE = 0.01   # errors and other unbounded scores: 1 % of the best strategy's value


def scorer_names() -> set[str]:
    """The names scikit-learn's ``get_scorer`` accepts."""
    from sklearn.metrics import get_scorer_names  # here: reading results needs no scikit-learn

    return set(get_scorer_names())


def metric_task(metric: str) -> str:
    """The task a scikit-learn scorer is for: ``regression`` for the regression metrics,
    ``classification`` for every other (classification, ranking and label-agreement) one.
    Read from the module of the scorer's metric function (``sklearn.metrics._regression``)."""
    from sklearn.metrics import get_scorer  # here: reading results needs no scikit-learn

    func = getattr(get_scorer(metric), "_score_func", None)
    return "regression" if getattr(func, "__module__", "").endswith("._regression") \
        else "classification"


def _is(metric: str, names: tuple[str, ...]) -> bool:
    return any(metric == u or metric.startswith(u + "_") for u in names)


def unit_free(metric: str) -> bool:
    """Whether a scorer's differences mean the same on every dataset (``f1_macro`` counts as
    ``f1``; ``d2_*`` scores are unit-free like r2)."""
    return metric.startswith("d2_") or _is(metric, _UNIT_FREE)


def bounds(metric: str) -> tuple[float, float]:
    """The range of the stored scorer value: ``[0, 1]`` for proportions, ``[−1, 1]`` for
    Matthews correlation, ``(−∞, 1]`` for r2-like scores, ``(−∞, 0]`` for negated errors."""
    inf = float("inf")
    if _is(metric, _PROPORTIONS):
        return 0.0, 1.0
    if _is(metric, ("matthews_corrcoef", "adjusted_rand_score")):
        return -1.0, 1.0
    if metric.startswith("d2_") or _is(metric, ("r2", "explained_variance")):
        return -inf, 1.0
    if metric.startswith("neg_"):
        return -inf, 0.0
    return -inf, inf


@dataclass(frozen=True)
class Margin:
    """The half-width of a metric's region of practical equivalence: differences smaller than
    this (in absolute value) do not matter. ``relative``: a share of the best strategy's mean
    value on the dataset (its magnitude), else in the metric's own units."""

    width: float
    relative: bool = False

    def on(self, best_value: float) -> float:
        """The half-width in the metric's units on a dataset whose best mean is ``best_value``."""
        return self.width * abs(best_value) if self.relative else self.width

    def text(self) -> str:
        return f"{self.width:.3g} × the best value" if self.relative else f"{self.width:g}"

    def setting(self) -> float | str:
        """As written in a suite file: a number, or a percentage string."""
        return f"{self.width * 100:g}%" if self.relative else self.width


def default_margin(metric: str) -> Margin:
    """Bounded scores: ±0.01 absolute; everything else (errors such as RMSE): ±1 % of the best
    strategy's value on the dataset."""
    if unit_free(metric):
        return Margin(DEFAULT_ABSOLUTE)
    return Margin(DEFAULT_RELATIVE, relative=True)


DEFAULT_CERTAINTY = 0.95  # the probability a verdict needs, unless the suite says otherwise


@dataclass(frozen=True)
class Equivalence:
    """The ``[equivalence]`` section: per metric, the smallest difference that matters (the
    half-width of its region of practical equivalence), and the probability a verdict needs
    (``certainty``). Metrics not named get `harness.scorers.default_margin`."""

    margins: dict[str, Margin] = field(default_factory=dict)
    certainty: float = DEFAULT_CERTAINTY

    def margin(self, metric: str) -> Margin:
        return self.margins.get(metric) or default_margin(metric)

    def settings(self) -> dict[str, Any]:
        """As stored in a run's provenance (and read back by `from_settings`)."""
        return {"certainty": self.certainty,
                **{m: margin.setting() for m, margin in self.margins.items()}}

    @classmethod
    def from_settings(cls, settings: dict[str, Any] | None, where: str = "provenance") \
            -> "Equivalence":
        return parse_equivalence(settings or {}, where, check_names=False)


def parse_equivalence(table: Any, where: str, *, check_names: bool = True) -> Equivalence:
    """The ``[equivalence]`` section of a suite (or a run's provenance), ``where`` naming it in
    messages: ``certainty = 0.95`` and ``SCORER = width``: a number is a width in the metric's
    units as people read it (0.01 of accuracy), a text such as ``"2%"`` a share of the best
    strategy's value on each dataset. ``check_names=False`` skips asking scikit-learn whether
    each scorer exists (the names in a provenance were checked when its suite was read)."""
    if not isinstance(table, dict):
        raise UserError("[equivalence] must be a table", file=where)
    margins, certainty = {}, DEFAULT_CERTAINTY
    for key, value in table.items():
        if key == "certainty":
            if isinstance(value, bool) or not isinstance(value, (int, float)) \
                    or not 0.5 <= value < 1:
                raise UserError(f"expected a probability of at least 0.5 and below 1, such as "
                                f"0.95, got {value!r}", file=where, field=key)
            certainty = float(value)
            continue
        known = scorer_names() if check_names else {key}
        if key not in known:
            raise UserError(f"'{key}' is neither 'certainty' nor a scikit-learn scorer name"
                            f"{closest(key, known | {'certainty'})}", file=where, field=key)
        margins[key] = _margin(value, where, key)
    return Equivalence(margins, certainty)


def _margin(value: Any, where: str, key: str) -> Margin:
    wrong = ("expected the smallest difference that matters: a positive number in the "
             "metric's units (such as 0.01) or a share of the best value (such as \"2%\"), "
             f"got {value!r}")
    if isinstance(value, str):
        m = re.fullmatch(r"\s*(\d+(?:\.\d+)?)\s*%\s*", value)
        if not m or not 0 < float(m.group(1)) < 100:
            raise UserError(wrong, file=where, field=key)
        return Margin(float(m.group(1)) / 100, relative=True)
    if isinstance(value, bool) or not isinstance(value, (int, float)) or value <= 0:
        raise UserError(wrong, file=where, field=key)
    return Margin(float(value))
