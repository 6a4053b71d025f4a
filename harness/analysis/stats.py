"""Statistics for comparing strategies, within one dataset and across many.

Within a dataset the scores come from ``r`` repeats of ``k``-fold cross-validation.
Those ``r·k`` scores are not independent (training sets overlap), so the plain
paired t-test is far too eager to call a difference. The corrected resampled
t-test of Nadeau & Bengio (2003), in the repeated k-fold form of Bouckaert &
Frank (2004), widens the variance by ``n_test / n_train`` to account for it — a
heuristic (the true correlation depends on the learner). With one split the evidence is in
the test rows: McNemar's exact test on paired per-row correctness.

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
    "FriedmanResult", "corrected_t", "mcnemar_exact",
    "average_ranks", "friedman", "nemenyi_critical_value", "nemenyi_cd", "nemenyi_groups",
    "holm", "wilcoxon_holm", "wilcoxon_pairs", "tally", "dominance",
]


# ---------------------------------------------------------------------------
# Within one dataset: corrected resampled t-test
# ---------------------------------------------------------------------------

def corrected_t(mean, var, n, ratio, alpha: float = 0.05):
    """Corrected resampled t-test and interval, vectorised over pairs (or strategies).

    Parameters
    ----------
    mean, var : array_like
        Mean and variance (``ddof=1``) of ``n`` paired differences ``a − b`` (or of one
        strategy's ``n`` scores, for its interval).
    n : array_like
        Number of (repeat, fold) cells; below 2 everything is NaN.
    ratio : array_like
        ``n_test / n_train`` of the folds.
    alpha : float
        Two-sided level; the interval is at ``1 − alpha``.

    Returns
    -------
    t, p, low, high : ndarray
        ``t = mean / sqrt((1/n + n_test/n_train) · var)`` with ``n − 1`` degrees of freedom;
        two-sided ``p``; ``mean ± t_{1−α/2} · scale``. With zero variance ``t`` is 0 (mean 0)
        or ±∞ and ``p`` 1 or 0, and the interval collapses to the mean.

    References
    ----------
    Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error. Machine Learning 52.
    Bouckaert, R. R. & Frank, E. (2004). Evaluating the replicability of significance tests
    for comparing learning algorithms. PAKDD.
    """
    mean, var, n, ratio = np.broadcast_arrays(*(np.asarray(x, dtype=float)
                                                for x in (mean, var, n, ratio)))
    ok = n >= 2
    scale = np.where(ok, np.sqrt((1 / np.where(ok, n, 1) + ratio) * var), np.nan)
    df = np.where(ok, n - 1, 1)
    with np.errstate(invalid="ignore", divide="ignore"):
        t = np.where(scale > 0, mean / scale,
                     np.where(mean == 0, 0.0, np.copysign(np.inf, mean)))
    p = np.where(scale > 0, 2 * _st.t.sf(np.abs(t), df), (mean == 0) * 1.0)
    half = _st.t.ppf(1 - alpha / 2, df) * scale
    nan = np.full(mean.shape, np.nan)
    return (np.where(ok, t, nan), np.where(ok, p, nan), np.where(ok, mean - half, nan),
            np.where(ok, mean + half, nan))


def mcnemar_exact(a_only, b_only) -> np.ndarray:
    """McNemar's exact test on paired per-row correctness: two-sided binomial p-value of the
    discordant rows (``a_only``: rows only a got right; ``b_only``: only b), under equal odds:
    ``min(1, 2 · P(Bin(a_only + b_only, ½) ≤ min(a_only, b_only)))``; 1 without discordant
    rows. Vectorised over pairs."""
    a, b = np.asarray(a_only), np.asarray(b_only)
    n = a + b
    p = np.minimum(1.0, 2 * _st.binom.cdf(np.minimum(a, b), np.maximum(n, 1), 0.5))
    return np.where(n > 0, p, 1.0)


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


def wilcoxon_pairs(diffs: np.ndarray, a: Sequence[str], b: Sequence[str], alpha: float = 0.05,
                   zero_method: str = "zsplit") -> pd.DataFrame:
    """Wilcoxon signed-rank test of each row of ``diffs`` (pairs × datasets, ``a − b``, each
    pair already on its own scale), with Holm's correction over the rows.

    The p-value is from the exact null distribution (``method="exact"``, which SciPy ≥ 1.15
    honours with ties and zeros too), so the smallest two-sided p with ``N`` datasets is
    ``2 · 2^−N``. Differences are rounded to 12 decimal places before ranking, so that equal
    differences are tied despite floating-point noise (``0.3 − 0.1`` and ``0.5 − 0.3`` differ
    in the last bit). When every difference is zero the test is skipped: statistic NaN,
    ``p = 1``.

    Returns one row per pair: ``a, b, n_datasets, a_wins, b_wins, median_diff, statistic, p,
    p_holm, reject``; ``statistic`` is SciPy's (the smaller signed-rank sum).
    """
    d = np.round(np.atleast_2d(np.asarray(diffs, dtype=float)), _DIFF_DECIMALS)
    stat, p = np.full(len(d), np.nan), np.ones(len(d))
    tested = np.any(d != 0, axis=1)
    if tested.any():  # every row at once (as SciPy tests each row on its own: the same values)
        res = _st.wilcoxon(d[tested], zero_method=zero_method, method="exact", axis=1)
        stat[tested], p[tested] = res.statistic, res.pvalue
    out = pd.DataFrame({"a": list(a), "b": list(b), "n_datasets": d.shape[1],
                        "a_wins": np.sum(d > 0, axis=1), "b_wins": np.sum(d < 0, axis=1),
                        "median_diff": np.median(d, axis=1), "statistic": stat, "p": p})
    out["p_holm"], out["reject"] = holm(out["p"].to_numpy(), alpha)
    return out


def wilcoxon_holm(matrix: np.ndarray | pd.DataFrame, names: Sequence[str] | None = None,
                  alpha: float = 0.05, zero_method: str = "zsplit") -> pd.DataFrame:
    """`wilcoxon_pairs` for every pair ``a < b`` (column order) of a score matrix (datasets ×
    strategies), on the raw differences of the scores."""
    arr, default = _matrix(matrix)
    names = list(names) if names is not None else default
    if len(names) != arr.shape[1]:
        raise ValueError(f"{len(names)} names for {arr.shape[1]} strategies")
    i, j = zip(*combinations(range(arr.shape[1]), 2))
    return wilcoxon_pairs((arr[:, list(i)] - arr[:, list(j)]).T, [names[x] for x in i],
                          [names[x] for x in j], alpha, zero_method)


def tally(pairs: pd.DataFrame) -> pd.DataFrame:
    """Per pair of strategies, how many datasets each per-dataset verdict had, from ``a``'s
    side: ``wins`` (a better), ``equivalent``, ``undecided``, ``losses`` (b better). A
    descriptive tally: each dataset's verdict is uncorrected for the many pairs and datasets.

    ``pairs`` needs ``a, b, better, verdict`` (as `harness.analysis.per_dataset.judge` gives).
    """
    missing = [c for c in ("a", "b", "better", "verdict") if c not in pairs.columns]
    if missing:
        raise ValueError(f"pairs lacks columns {missing}")
    better = pairs["better"].to_numpy(object)
    outcome = pd.DataFrame({"a": pairs["a"].to_numpy(), "b": pairs["b"].to_numpy(),
                            "wins": better == pairs["a"].to_numpy(),
                            "equivalent": pairs["verdict"].to_numpy() == "practically equivalent",
                            "undecided": pairs["verdict"].to_numpy() == "undecided",
                            "losses": better == pairs["b"].to_numpy()})
    return (outcome.groupby(["a", "b"], sort=False)[["wins", "equivalent", "undecided",
                                                      "losses"]]
            .sum().astype(int).reset_index())


def dominance(score: np.ndarray, cost: np.ndarray, noise: np.ndarray) -> np.ndarray:
    """Pareto dominance of score (maximised) against cost (minimised): ``dom[j, i]`` when
    point *j* dominates point *i*, that is ``score_j ≥ score_i`` and ``cost_j ≤ cost_i`` with
    at least one strict (the front: the points no other dominates). Identical points do not
    dominate each other. ``noise``: each cost's standard error (timing noise; 0 where
    unknown); costs count as equal unless they differ by more than twice the standard error
    of their difference, ``2 · sqrt(se_i² + se_j²)``, so a verdict does not flip on timing
    noise."""
    s, c = np.asarray(score, dtype=float), np.asarray(cost, dtype=float)
    if not (np.all(np.isfinite(s)) and np.all(np.isfinite(c))):
        raise ValueError("scores and costs must be finite")
    noise = np.asarray(noise, dtype=float)
    margin = 2 * np.sqrt(noise[:, None] ** 2 + noise[None, :] ** 2)
    cheaper = c[None, :] - c[:, None] > margin            # [j, i]: j cheaper than i beyond noise
    not_dearer = c[:, None] - c[None, :] <= margin
    return ((s[:, None] >= s[None, :]) & not_dearer
            & ((s[:, None] > s[None, :]) | cheaper))
