"""What woodlot knows about a scikit-learn scorer beyond its value: the task it scores, whether
its differences mean the same on every dataset (a bounded, unit-free score), the range its values can take, and the
default width of its region of practical equivalence (the smallest difference that matters).

Scorer values are stored as scikit-learn returns them: higher is better, errors negated
(``neg_root_mean_squared_error``)."""

from __future__ import annotations

from dataclasses import dataclass

from sklearn.metrics import get_scorer

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


def metric_task(metric: str) -> str:
    """The task a scikit-learn scorer is for: ``regression`` for the regression metrics,
    ``classification`` for every other (classification, ranking and label-agreement) one.
    Read from the module of the scorer's metric function (``sklearn.metrics._regression``)."""
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
