"""Statistics for comparing strategies, within one dataset and across many.

Within a dataset the scores come from ``r`` repeats of ``k``-fold cross-validation.
Those ``r·k`` scores are not independent (training sets overlap), so the plain
paired t-test is far too eager to call a difference. The corrected resampled
t-test of Nadeau & Bengio (2003), in the repeated k-fold form of Bouckaert &
Frank (2004), widens the variance by ``n_test / n_train`` to account for it.

Across datasets each dataset counts once: strategies are ranked per dataset
and compared with the Friedman test (plus the Iman–Davenport F), the Nemenyi
critical difference for all-pairs comparisons, and pairwise Wilcoxon
signed-rank tests with Holm's step-down correction (Demšar 2006).

Conventions: a *score matrix* has one row per dataset and one column per
strategy; higher is better unless a function is told otherwise. Functions
accept a NumPy array or a DataFrame; given a DataFrame, results are labelled
with its column names.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import stats as _st

__all__ = [
    "TTestResult", "FriedmanResult", "DatasetSummary",
    "corrected_interval", "corrected_ttest", "per_dataset_summary",
    "average_ranks", "friedman", "nemenyi_critical_value", "nemenyi_cd", "nemenyi_groups",
    "holm", "wilcoxon_holm", "win_tie_loss", "pareto_front",
]


# ---------------------------------------------------------------------------
# Within one dataset: corrected resampled t-test
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class TTestResult:
    """Outcome of a corrected resampled t-test on paired scores ``a − b``.

    Attributes
    ----------
    mean_diff : float
        Mean of the per-fold differences ``a − b``.
    t : float
        Corrected t statistic (``±inf`` when every difference is the same non-zero value).
    df : int
        Degrees of freedom, ``r·k − 1``.
    p : float
        Two-sided p-value from Student's t with ``df`` degrees of freedom.
    interval : tuple of float
        Corrected confidence interval ``(low, high)`` for the mean difference.
    level : float
        Confidence level of ``interval``.
    n : int
        Number of paired scores used (``r·k``).
    """

    mean_diff: float
    t: float
    df: int
    p: float
    interval: tuple[float, float]
    level: float
    n: int


def _corrected_se(values: np.ndarray, n_train: float, n_test: float) -> float:
    """Corrected standard error ``sqrt((1/n + n_test/n_train) · var(values, ddof=1))``."""
    if n_train <= 0 or n_test <= 0:
        raise ValueError(f"n_train and n_test must be positive, got {n_train} and {n_test}")
    n = len(values)
    return float(np.sqrt((1.0 / n + n_test / n_train) * np.var(values, ddof=1)))


def _as_scores(values: Sequence[float] | np.ndarray, what: str) -> np.ndarray:
    arr = np.asarray(values, dtype=float).ravel()
    if len(arr) < 2:
        raise ValueError(f"{what} needs at least two values (repeats × folds), got {len(arr)}")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"{what} contains NaN or infinite values")
    return arr


def corrected_interval(scores: Sequence[float] | np.ndarray, n_train: float, n_test: float,
                       level: float = 0.95) -> tuple[float, float, float]:
    """Mean score over repeats × folds with its corrected confidence interval.

    Parameters
    ----------
    scores : array_like, shape (r·k,)
        One strategy's scores, one per (repeat, fold) cell.
    n_train, n_test : float
        Training and test set sizes of a fold (use the mean if folds differ by one row).
    level : float, default 0.95
        Confidence level.

    Returns
    -------
    mean, low, high : float
        ``mean ± t_{(1+level)/2, n−1} · sqrt((1/n + n_test/n_train) · var(scores, ddof=1))``.
        With zero variance the interval collapses to the mean.
    """
    x = _as_scores(scores, "scores")
    if not 0 < level < 1:
        raise ValueError(f"level must be in (0, 1), got {level}")
    mean = float(x.mean())
    half = _st.t.ppf(0.5 + level / 2, len(x) - 1) * _corrected_se(x, n_train, n_test)
    return mean, mean - half, mean + half


def corrected_ttest(a: Sequence[float] | np.ndarray, b: Sequence[float] | np.ndarray,
                    n_train: float, n_test: float, level: float = 0.95) -> TTestResult:
    """Corrected resampled t-test for paired repeated k-fold scores.

    Parameters
    ----------
    a, b : array_like, shape (r·k,)
        Scores of two strategies on the same (repeat, fold) cells, in the same order.
    n_train, n_test : float
        Training and test set sizes of a fold.
    level : float, default 0.95
        Confidence level of the reported interval for the mean difference.

    Returns
    -------
    TTestResult
        ``t = mean(d) / sqrt((1/(r·k) + n_test/n_train) · var(d, ddof=1))`` with
        ``d = a − b`` and ``df = r·k − 1``; two-sided p. If every difference is the
        same value the variance is zero: ``p = 1`` when that value is 0, ``p = 0`` otherwise.

    References
    ----------
    Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52.
    Bouckaert, R. R. & Frank, E. (2004). Evaluating the replicability of significance tests
    for comparing learning algorithms. PAKDD.
    """
    a_arr, b_arr = np.asarray(a, dtype=float).ravel(), np.asarray(b, dtype=float).ravel()
    if a_arr.shape != b_arr.shape:
        raise ValueError(f"a and b must have the same length, got {len(a_arr)} and {len(b_arr)}")
    d = _as_scores(a_arr - b_arr, "differences")
    n, df = len(d), len(d) - 1
    mean = float(d.mean())
    # Exactly-equal differences: treat as zero variance (floating noise in var would
    # otherwise give a huge finite t).
    if np.all(d == d[0]):
        t = 0.0 if mean == 0 else float(np.copysign(np.inf, mean))
        p = 1.0 if mean == 0 else 0.0
        return TTestResult(mean, t, df, p, (mean, mean), level, n)
    se = _corrected_se(d, n_train, n_test)
    t = mean / se
    p = float(2 * _st.t.sf(abs(t), df))
    half = float(_st.t.ppf(0.5 + level / 2, df) * se)
    return TTestResult(mean, float(t), df, p, (mean - half, mean + half), level, n)


@dataclass(frozen=True)
class DatasetSummary:
    """Tidy outputs of :func:`per_dataset_summary`.

    Attributes
    ----------
    strategies : DataFrame
        One row per (dataset, strategy): ``dataset, strategy, cells, mean, low, high, level``.
    pairs : DataFrame
        One row per (dataset, pair a < b in first-appearance order): ``dataset, a, b, pairs,
        mean_diff, t, df, p, low, high, tied``. ``mean_diff`` is ``a − b``; ``pairs`` is the
        number of (repeat, fold) cells both strategies have.
    """

    strategies: pd.DataFrame
    pairs: pd.DataFrame


_STRATEGY_COLUMNS = ["dataset", "strategy", "cells", "mean", "low", "high", "level"]
_PAIR_COLUMNS = ["dataset", "a", "b", "pairs", "mean_diff", "t", "df", "p", "low", "high", "tied"]


def per_dataset_summary(frame: pd.DataFrame, metric: str, alpha: float = 0.05) -> DatasetSummary:
    """Per dataset: each strategy's mean with a corrected interval, and pairwise tests.

    Parameters
    ----------
    frame : DataFrame
        One row per cell with columns ``dataset, strategy, repeat, fold, n_train, n_test``
        and the column named by ``metric``. Rows whose metric is NaN are ignored (pass only
        cells that ran successfully).
    metric : str
        Column holding the score.
    alpha : float, default 0.05
        Significance level; intervals are at confidence ``1 − alpha``.

    Returns
    -------
    DatasetSummary
        ``strategies`` and ``pairs`` tables (see :class:`DatasetSummary`). Pairs are matched on
        (repeat, fold); cells only one strategy has are skipped. ``tied`` is True when the
        corrected t-test does not reject equality at ``alpha``; with fewer than two matched
        cells no test is possible, so t, p and the interval are NaN and ``tied`` is True.
        ``n_train`` / ``n_test`` are averaged over the cells used.

    Raises
    ------
    ValueError
        If a column is missing or a (dataset, strategy, repeat, fold) cell appears twice.
    """
    need = ["dataset", "strategy", "repeat", "fold", "n_train", "n_test", metric]
    missing = [c for c in need if c not in frame.columns]
    if missing:
        raise ValueError(f"frame lacks columns {missing}")
    data = frame.loc[frame[metric].notna(), need]
    key = ["dataset", "strategy", "repeat", "fold"]
    dup = data.duplicated(key)
    if dup.any():
        first = data.loc[dup, key].iloc[0].tolist()
        raise ValueError(f"cell {first} appears more than once")
    level = 1 - alpha
    srows, prows = [], []
    for ds, part in data.groupby("dataset", sort=False):
        cells = {st: g.set_index(["repeat", "fold"])
                 for st, g in part.groupby("strategy", sort=False)}
        for st, g in cells.items():
            vals = g[metric].to_numpy(float)
            if len(vals) >= 2:
                mean, low, high = corrected_interval(vals, g["n_train"].mean(), g["n_test"].mean(),
                                                     level)
            else:
                mean, low, high = float(vals.mean()), np.nan, np.nan
            srows.append([ds, st, len(vals), mean, low, high, level])
        for sa, sb in combinations(cells, 2):
            ga, gb = cells[sa], cells[sb]
            common = ga.index.intersection(gb.index).sort_values()
            va = ga.loc[common, metric].to_numpy(float)
            vb = gb.loc[common, metric].to_numpy(float)
            if len(common) >= 2:
                res = corrected_ttest(va, vb, ga.loc[common, "n_train"].mean(),
                                      ga.loc[common, "n_test"].mean(), level)
                prows.append([ds, sa, sb, len(common), res.mean_diff, res.t, res.df, res.p,
                              *res.interval, bool(res.p > alpha)])
            else:
                diff = float(np.mean(va - vb)) if len(common) else np.nan
                prows.append([ds, sa, sb, len(common), diff, np.nan, max(len(common) - 1, 0),
                              np.nan, np.nan, np.nan, True])
    return DatasetSummary(pd.DataFrame(srows, columns=_STRATEGY_COLUMNS),
                          pd.DataFrame(prows, columns=_PAIR_COLUMNS))


# ---------------------------------------------------------------------------
# Across datasets: ranks, Friedman, Nemenyi, Wilcoxon–Holm
# ---------------------------------------------------------------------------

def _matrix(matrix: np.ndarray | pd.DataFrame, min_rows: int = 1) -> tuple[np.ndarray, list]:
    """Validate a score matrix; return it as floats and its column labels."""
    names = list(matrix.columns) if isinstance(matrix, pd.DataFrame) else None
    arr = np.asarray(matrix, dtype=float)
    if arr.ndim != 2:
        raise ValueError(f"score matrix must be 2-D (datasets × strategies), got {arr.shape}")
    if arr.shape[0] < min_rows or arr.shape[1] < 2:
        raise ValueError(f"need at least {min_rows} dataset(s) and 2 strategies, got {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise ValueError("score matrix contains NaN or infinite values; every strategy needs a "
                         "score on every dataset")
    return arr, names if names is not None else list(range(arr.shape[1]))


def _rank_rows(arr: np.ndarray, higher_is_better: bool) -> np.ndarray:
    """Rank each row, 1 = best, ties get the average rank."""
    return _st.rankdata(-arr if higher_is_better else arr, axis=1, method="average")


def average_ranks(matrix: np.ndarray | pd.DataFrame,
                  higher_is_better: bool = True) -> np.ndarray | pd.Series:
    """Average rank of each strategy over datasets.

    Parameters
    ----------
    matrix : array_like or DataFrame, shape (n_datasets, k)
        Scores, one row per dataset, one column per strategy.
    higher_is_better : bool, default True
        If False, the lowest score gets rank 1 (e.g. errors, times).

    Returns
    -------
    ndarray or Series, shape (k,)
        Mean over datasets of each strategy's rank (1 = best, ties share the average
        rank). A Series indexed by the column names when given a DataFrame.
    """
    arr, names = _matrix(matrix)
    ranks = _rank_rows(arr, higher_is_better).mean(axis=0)
    if isinstance(matrix, pd.DataFrame):
        return pd.Series(ranks, index=names, name="average_rank")
    return ranks


@dataclass(frozen=True)
class FriedmanResult:
    """Friedman test over a score matrix.

    Attributes
    ----------
    chi2, chi2_p : float
        Friedman statistic χ²_F (k − 1 degrees of freedom) and its p-value.
    f, f_df1, f_df2, f_p : float
        Iman–Davenport statistic ``F_F = (N − 1) χ²_F / (N (k − 1) − χ²_F)``, its degrees
        of freedom ``(k − 1, (k − 1)(N − 1))`` and p-value.
    n_datasets, k : int
        N and k.
    tie_corrected : bool
        Whether χ²_F was divided by the tie correction factor.
    """

    chi2: float
    chi2_p: float
    f: float
    f_df1: int
    f_df2: int
    f_p: float
    n_datasets: int
    k: int
    tie_corrected: bool


def friedman(matrix: np.ndarray | pd.DataFrame, tie_correction: bool = True) -> FriedmanResult:
    """Friedman test with the Iman–Davenport F.

    Parameters
    ----------
    matrix : array_like or DataFrame, shape (N, k)
        Scores, one row per dataset (N ≥ 2), one column per strategy (k ≥ 2).
    tie_correction : bool, default True
        Divide χ²_F by ``1 − Σ(t³ − t) / (N k (k² − 1))`` over tie groups ``t`` within rows,
        as :func:`scipy.stats.friedmanchisquare` does. ``False`` gives the textbook form
        ``12N / (k(k+1)) · [Σ R_j² − k(k+1)²/4]`` on average ranks ``R_j``.

    Returns
    -------
    FriedmanResult
        If every row is entirely tied, χ²_F = 0 and both p-values are 1. If all datasets rank
        the strategies identically, F_F is infinite and its p-value 0.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets. JMLR 7.
    Iman, R. L. & Davenport, J. M. (1980). Approximations of the critical region of the
    Friedman statistic. Communications in Statistics A 9.
    """
    arr, _ = _matrix(matrix, min_rows=2)
    n, k = arr.shape
    ranks = _rank_rows(arr, True)  # the statistic is the same for either direction
    r = ranks.mean(axis=0)
    chi2 = 12 * n / (k * (k + 1)) * (np.sum(r ** 2) - k * (k + 1) ** 2 / 4)
    if tie_correction:
        ties = sum(np.sum(c ** 3 - c) for c in
                   (np.unique(row, return_counts=True)[1].astype(float) for row in ranks))
        factor = 1 - ties / (n * k * (k * k - 1))
        chi2 = chi2 / factor if factor > 0 else 0.0
    chi2 = max(float(chi2), 0.0)
    df1, df2 = k - 1, (k - 1) * (n - 1)
    chi2_p = float(_st.chi2.sf(chi2, df1))
    denom = n * (k - 1) - chi2
    if denom <= 1e-12 * n * k:
        f, f_p = np.inf, 0.0
    else:
        f = (n - 1) * chi2 / denom
        f_p = float(_st.f.sf(f, df1, df2))
    return FriedmanResult(chi2, chi2_p, float(f), df1, df2, f_p, n, k, tie_correction)


def nemenyi_critical_value(k: int, alpha: float = 0.05) -> float:
    """Two-tailed Nemenyi critical value ``q_α = Q_{1−α}(k, ∞) / √2``.

    ``Q`` is the studentized range distribution (:data:`scipy.stats.studentized_range`)
    with infinite degrees of freedom.
    """
    if k < 2:
        raise ValueError(f"need k ≥ 2 strategies, got {k}")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1), got {alpha}")
    return float(_st.studentized_range.ppf(1 - alpha, k, np.inf) / np.sqrt(2))


def nemenyi_cd(k: int, n_datasets: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference of average ranks.

    Parameters
    ----------
    k : int
        Number of strategies.
    n_datasets : int
        Number of datasets N.
    alpha : float, default 0.05
        Family-wise significance level.

    Returns
    -------
    float
        ``CD = q_α · sqrt(k (k + 1) / (6 N))``: two strategies whose average ranks differ by
        at least CD are significantly different.
    """
    if n_datasets < 1:
        raise ValueError(f"need at least one dataset, got {n_datasets}")
    return nemenyi_critical_value(k, alpha) * float(np.sqrt(k * (k + 1) / (6 * n_datasets)))


def nemenyi_groups(avg_ranks: Mapping[str, float] | pd.Series, cd: float) -> list[list[str]]:
    """Maximal groups of strategies whose average ranks are within the critical difference.

    Parameters
    ----------
    avg_ranks : mapping or Series
        Strategy name → average rank.
    cd : float
        Critical difference.

    Returns
    -------
    list of list of str
        Runs of consecutive strategies in rank order (best first) whose rank span
        ``max − min`` is strictly below ``cd``, keeping only runs of two or more that are
        not contained in another run. Ordered by their best member. These are the bars
        of a critical difference diagram.
    """
    items = sorted(dict(avg_ranks).items(), key=lambda kv: (kv[1], str(kv[0])))
    names = [n for n, _ in items]
    ranks = [r for _, r in items]
    groups: list[list[str]] = []
    end = -1  # last member of the previous run; the end never moves left as i grows,
    for i in range(len(items)):  # so a run ending at or before it lies inside that run
        j = max(i, end)
        while j + 1 < len(items) and ranks[j + 1] - ranks[i] < cd:
            j += 1
        if j > i and j > end:
            groups.append(names[i:j + 1])
            end = j
    return groups


def holm(pvalues: Sequence[float] | np.ndarray,
         alpha: float = 0.05) -> tuple[np.ndarray, np.ndarray]:
    """Holm's step-down adjustment.

    Parameters
    ----------
    pvalues : array_like, shape (m,)
        Raw p-values.
    alpha : float, default 0.05
        Family-wise error rate.

    Returns
    -------
    adjusted : ndarray
        ``p̃_(i) = max_{j ≤ i} min(1, (m − j + 1) p_(j))`` in the original order.
    reject : ndarray of bool
        ``adjusted ≤ alpha`` (equivalent to the step-down procedure).
    """
    p = np.asarray(pvalues, dtype=float).ravel()
    m = len(p)
    if m == 0:
        return p.copy(), np.zeros(0, dtype=bool)
    if np.any(np.isnan(p)):
        raise ValueError("p-values contain NaN")
    order = np.argsort(p, kind="stable")
    scaled = np.minimum(1.0, (m - np.arange(m)) * p[order])
    adjusted = np.empty(m)
    adjusted[order] = np.maximum.accumulate(scaled)
    return adjusted, adjusted <= alpha


_DIFF_DECIMALS = 12


def wilcoxon_holm(matrix: np.ndarray | pd.DataFrame, names: Sequence[str] | None = None,
                  alpha: float = 0.05, zero_method: str = "zsplit") -> pd.DataFrame:
    """Pairwise Wilcoxon signed-rank tests across datasets with Holm's correction.

    Parameters
    ----------
    matrix : array_like or DataFrame, shape (N, k)
        Scores, one row per dataset, one column per strategy.
    names : sequence of str, optional
        Strategy names (defaults to the DataFrame's columns, else ``0 … k−1``).
    alpha : float, default 0.05
        Family-wise significance level for ``reject``.
    zero_method : {"zsplit", "wilcox", "pratt"}, default "zsplit"
        Handling of zero differences, passed to :func:`scipy.stats.wilcoxon`. ``"zsplit"``
        splits their ranks between the two sums.

    Returns
    -------
    DataFrame
        One row per pair ``a < b`` (column order): ``a, b, n_datasets, a_wins, b_wins,
        median_diff, statistic, p, p_holm, reject``. ``median_diff`` is of ``a − b``.
        When every difference is zero the test is skipped with statistic NaN and ``p = 1``.
        ``statistic`` is SciPy's (the smaller of the two signed-rank sums, two-sided).

    Notes
    -----
    Differences are rounded to 12 decimal places before ranking, so that equal differences
    are tied despite floating-point noise (``0.3 − 0.1`` and ``0.5 − 0.3`` differ in the last bit).
    """
    arr, default = _matrix(matrix)
    names = list(names) if names is not None else default
    if len(names) != arr.shape[1]:
        raise ValueError(f"{len(names)} names for {arr.shape[1]} strategies")
    rows = []
    for i, j in combinations(range(arr.shape[1]), 2):
        d = np.round(arr[:, i] - arr[:, j], _DIFF_DECIMALS)
        if np.all(d == 0):
            stat, p = np.nan, 1.0
        else:
            res = _st.wilcoxon(d, zero_method=zero_method)
            stat, p = float(res.statistic), float(res.pvalue)
        rows.append({"a": names[i], "b": names[j], "n_datasets": len(d),
                     "a_wins": int(np.sum(d > 0)), "b_wins": int(np.sum(d < 0)),
                     "median_diff": float(np.median(d)), "statistic": stat, "p": p})
    out = pd.DataFrame(rows, columns=["a", "b", "n_datasets", "a_wins", "b_wins",
                                      "median_diff", "statistic", "p"])
    out["p_holm"], out["reject"] = holm(out["p"].to_numpy(), alpha)
    return out


def win_tie_loss(pairs: pd.DataFrame, higher_is_better: bool = True) -> pd.DataFrame:
    """Count, per pair of strategies, datasets won, tied and lost.

    Parameters
    ----------
    pairs : DataFrame
        Per-dataset test outcomes with columns ``a, b, mean_diff, tied`` (``mean_diff`` is
        ``a − b``), e.g. ``per_dataset_summary(...).pairs``.
    higher_is_better : bool, default True
        Whether a positive ``mean_diff`` is a win for ``a``.

    Returns
    -------
    DataFrame
        One row per pair: ``a, b, wins, ties, losses`` from ``a``'s side. A dataset is a tie
        when ``tied`` is True or the mean difference is exactly zero.
    """
    missing = [c for c in ("a", "b", "mean_diff", "tied") if c not in pairs.columns]
    if missing:
        raise ValueError(f"pairs lacks columns {missing}")
    sign = np.sign(pairs["mean_diff"].to_numpy(float)) * (1 if higher_is_better else -1)
    tied = pairs["tied"].to_numpy(bool) | (sign == 0) | np.isnan(sign)
    outcome = pd.DataFrame({"a": pairs["a"].to_numpy(), "b": pairs["b"].to_numpy(),
                            "wins": ~tied & (sign > 0), "ties": tied,
                            "losses": ~tied & (sign < 0)})
    return (outcome.groupby(["a", "b"], sort=False)[["wins", "ties", "losses"]]
            .sum().astype(int).reset_index())


def pareto_front(points: Mapping[str, tuple[float, float]] | pd.DataFrame) -> pd.DataFrame:
    """Pareto front of score (maximised) against cost (minimised).

    Parameters
    ----------
    points : mapping or DataFrame
        Name → ``(score, cost)``, or a DataFrame indexed by name with columns
        ``score`` and ``cost``.

    Returns
    -------
    DataFrame
        Indexed by name, in input order: ``score, cost, on_front, dominated_by``.
        Entry *j* dominates *i* when ``score_j ≥ score_i`` and ``cost_j ≤ cost_i`` with at
        least one strict; ``dominated_by`` lists the dominating names (empty on the front).
        Identical points do not dominate each other.
    """
    if isinstance(points, pd.DataFrame):
        frame = points[["score", "cost"]].astype(float)
    else:
        frame = pd.DataFrame.from_dict(dict(points), orient="index", columns=["score", "cost"],
                                       dtype=float)
    if not np.all(np.isfinite(frame.to_numpy())):
        raise ValueError("scores and costs must be finite")
    s, c = frame["score"].to_numpy(), frame["cost"].to_numpy()
    names = list(frame.index)
    dom = ((s[:, None] >= s[None, :]) & (c[:, None] <= c[None, :])
           & ((s[:, None] > s[None, :]) | (c[:, None] < c[None, :])))  # dom[j, i]: j dominates i
    out = frame.copy()
    out["dominated_by"] = [[names[j] for j in np.flatnonzero(dom[:, i])]
                           for i in range(len(names))]
    out["on_front"] = [not dom[:, i].any() for i in range(len(names))]
    return out[["score", "cost", "on_front", "dominated_by"]]
