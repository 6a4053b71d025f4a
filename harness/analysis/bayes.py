"""Bayesian comparisons with a region of practical equivalence: for a difference ``a − b`` and a
half-width ``r`` (the smallest difference that matters), the probabilities that ``b`` is better
(difference below ``−r``), that the two are practically equivalent (within ``±r``) and that
``a`` is better (above ``r``) — always in that order, *left, equivalent, right*.

- Within one dataset, the Bayesian correlated t-test for repeated cross-validation (Corani &
  Benavoli 2015; Benavoli, Corani, Demšar & Zaffalon 2017, JMLR 18): the posterior of the mean
  difference is Student's t with ``n − 1`` degrees of freedom, centred on the mean of the
  ``n`` (repeat, fold) differences, with scale² = (1/n + n_test/n_train) · var — the
  Nadeau–Bengio correction for overlapping training sets, a heuristic. `joint_means` samples
  the same posterior for all strategies at once (a multivariate t whose every pairwise
  difference has exactly that marginal), so "within ``r`` of the best" can be asked without
  fixing the best in advance.
- Across datasets, the Bayesian signed-rank test (Benavoli, Mangili, Corani, Zaffalon &
  Ruggeri 2014; Benavoli et al. 2017): a Dirichlet process posterior (prior strength 0.5 on a
  pseudo-observation at 0) over the per-dataset differences, giving samples of the three
  probabilities; a region wins a sample when its probability is the largest.
- The Hodges–Lehmann median difference with its exact interval from Wilcoxon's signed-rank
  distribution, as the effect size across datasets.

Everything is vectorised over pairs; `signed_rank` draws one set of Dirichlet weights and uses
it for every pair of a block.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import special as _sp

__all__ = ["correlated_t", "joint_means", "signed_rank", "hodges_lehmann",
           "signed_rank_cdf", "repeats_needed", "datasets_needed", "SAMPLES", "PRIOR"]

SAMPLES = 10000   # posterior samples of the signed-rank test (Monte Carlo sd ≤ 0.005)
PRIOR = 0.5       # Dirichlet prior strength of the pseudo-observation at 0 (the published default)


def correlated_t(mean, var, n, ratio, margin) -> np.ndarray:
    """Probabilities (left, equivalent, right) of the correlated t posterior, per pair.

    Parameters
    ----------
    mean, var : array_like
        Mean and variance (``ddof=1``) of each pair's ``n`` paired differences ``a − b``.
    n : array_like
        Number of differences (``n < 2``: no posterior, NaN).
    ratio : array_like
        ``n_test / n_train`` of the folds (0 for independent observations such as the rows
        of one test set).
    margin : array_like
        Half-width of the region of practical equivalence (> 0).

    Returns
    -------
    ndarray, shape (..., 3)
        With zero variance the posterior is a point mass at the mean.
    """
    mean, var, n, ratio, margin = np.broadcast_arrays(*(np.asarray(x, dtype=float) for x in
                                                        (mean, var, n, ratio, margin)))
    out = np.full(mean.shape + (3,), np.nan)
    ok = n >= 2
    scale = np.sqrt(np.where(ok, (1.0 / np.where(ok, n, 1.0) + ratio) * var, np.nan))
    point = ok & (scale == 0)
    spread = ok & (scale > 0)
    df = np.where(spread, n - 1, 1.0)
    sc = np.where(spread, scale, 1.0)
    left = _sp.stdtr(df, (-margin - mean) / sc)          # Student's t cdf
    right = _sp.stdtr(df, (mean - margin) / sc)          # its survival function, by symmetry
    out[..., 0] = np.where(spread, left, np.where(point, (mean < -margin) * 1.0, np.nan))
    out[..., 2] = np.where(spread, right, np.where(point, (mean > margin) * 1.0, np.nan))
    out[..., 1] = 1.0 - out[..., 0] - out[..., 2]
    return out


def joint_means(scores: np.ndarray, ratio: float, size: int = 20000,
                seed: int = 0) -> np.ndarray:
    """Samples of all strategies' mean scores from the correlated t posterior.

    ``scores`` is ``n × k`` (one row per (repeat, fold) cell or test row, every strategy
    scored on each). The posterior is a multivariate t with ``n − 1`` degrees of freedom,
    centre the column means, scale matrix ``(1/n + ratio) · cov(scores)``: the posterior of
    any difference ``a − b`` is then exactly `correlated_t`'s. Returns ``size × k``.
    """
    x = np.asarray(scores, dtype=float)
    n, k = x.shape
    if n < 2:
        raise ValueError(f"need at least two rows of scores, got {n}")
    cov = np.atleast_2d(np.cov(x, rowvar=False)) * (1.0 / n + ratio)
    lam, vec = np.linalg.eigh(cov)
    root = vec * np.sqrt(np.clip(lam, 0.0, None))
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((size, k)) @ root.T
    w = np.sqrt(rng.chisquare(n - 1, size) / (n - 1))
    return x.mean(axis=0) + z / w[:, None]


@lru_cache(maxsize=16)
def _dirichlet(n: int, samples: int, seed: int, prior: float, copies: int = 1) -> np.ndarray:
    """The posterior weights, one row per component and one column per sample (read-only:
    kept for the next call with the same arguments, as `datasets_needed` makes many);
    ``copies``: each observation stands for that many equal ones."""
    # the legacy generator, so that a seed gives the same weights as the reference package
    weights = np.full(n + 1, float(copies))
    weights[0] = prior
    w = np.ascontiguousarray(np.random.RandomState(seed).dirichlet(weights, samples).T)
    w.flags.writeable = False
    return w


def signed_rank(diffs, margin, samples: int = SAMPLES, seed: int = 0, prior: float = PRIOR,
                keep: int = 0, copies: int = 1) -> tuple[np.ndarray, np.ndarray | None]:
    """Bayesian signed-rank test of each row of ``diffs`` (pairs × datasets, ``a − b``);
    ``copies``: as if each difference had been observed that many times.

    For a weight vector ``w`` of the Dirichlet posterior over ``z = (0, d_1, …, d_N)``, the
    probability that ``a`` is better is ``Σ_i Σ_j w_i w_j H(z_i + z_j − 2r)`` (H the step
    function, ½ at 0), and likewise below ``−2r``; equivalent takes the rest. Computed for
    all samples at once with sorted suffix sums, so a pair costs ``O(samples · N log N)``.

    Returns
    -------
    probs : ndarray, shape (pairs, 3)
        Share of samples in which each region has the largest probability.
    kept : ndarray, shape (pairs, keep, 3) or None
        The first ``keep`` posterior samples of the three probabilities (for the triangle
        plot).
    """
    d = np.atleast_2d(np.asarray(diffs, dtype=float))
    pairs, n = d.shape
    margin = np.broadcast_to(np.asarray(margin, dtype=float), (pairs,))
    # N·c observations in c equal copies: the weights of each copy summed are Dirichlet with
    # parameter c (the Dirichlet's aggregation property), and the probabilities depend only
    # on those sums, so N components do the work of N·c
    w = _dirichlet(n, samples, seed, prior, copies)           # (N + 1) × samples
    probs = np.zeros((pairs, 3))
    kept = np.zeros((pairs, keep, 3)) if keep else None
    # buffers reused by every pair: a fresh array of this size per step and pair costs the
    # process a page fault per page each time (measured: three times slower)
    suffix = np.zeros((n + 2, samples))
    ws, part, half = (np.empty((n + 1, samples)) for _ in range(3))
    sample = np.empty((samples, 3))
    for p in range(pairs):  # numpy work per pair; the weights are shared
        z = np.concatenate(([0.0], d[p]))
        order = np.argsort(z, kind="stable")
        zs = z[order]
        np.take(w, order, axis=0, out=ws)
        suffix[n] = ws[n]
        for i in range(n - 1, -1, -1):  # Σ_{j ≥ i}, row by row (np.cumsum along the first
            np.add(suffix[i + 1], ws[i], out=suffix[i])  # axis is several times slower)

        def beyond(threshold: np.ndarray, above: bool, out: np.ndarray) -> np.ndarray:
            gt = np.searchsorted(zs, threshold, side="right")
            ge = np.searchsorted(zs, threshold, side="left")
            if above:
                np.take(suffix, gt, axis=0, out=part)
            else:
                np.take(suffix, ge, axis=0, out=part)
                np.subtract(1.0, part, out=part)
            if np.any(ge != gt):  # sums exactly at the threshold count one half
                np.take(suffix, ge, axis=0, out=half)
                np.subtract(half, suffix[gt], out=half)
                np.multiply(half, 0.5, out=half)
                np.add(part, half, out=part)
            return np.einsum("ij,ij->j", ws, part, out=out)

        right = beyond(2 * margin[p] - zs, True, sample[:, 2])
        left = beyond(-2 * margin[p] - zs, False, sample[:, 0])
        np.subtract(1.0, left, out=sample[:, 1])
        sample[:, 1] -= right
        probs[p] = np.bincount(np.argmax(sample, axis=1), minlength=3) / samples
        if keep:
            kept[p] = sample[:keep]
    return probs, kept


def signed_rank_cdf(n: int) -> np.ndarray:
    """``P(T⁺ ≤ w)`` for ``w = 0 … n(n+1)/2`` under Wilcoxon's null with no ties (every sign
    pattern of ranks ``1 … n`` equally likely), by counting subsets of ``{1, …, n}`` by sum."""
    top = n * (n + 1) // 2
    counts = np.zeros(top + 1)
    counts[0] = 1.0
    for r in range(1, n + 1):
        counts[r:] = counts[r:] + counts[:-r].copy()
    return np.cumsum(counts) / 2.0 ** n


def hodges_lehmann(d, level: float = 0.95) -> tuple[float, float, float]:
    """The Hodges–Lehmann median difference (the median of the Walsh averages
    ``(d_i + d_j) / 2``, ``i ≤ j``) with its distribution-free interval: order statistics
    ``C`` and ``M + 1 − C`` of the ``M`` Walsh averages, ``C − 1`` the largest ``w`` with
    ``P(T⁺ ≤ w) ≤ (1 − level) / 2``. The interval is NaN when no ``C`` exists (fewer than
    six datasets at 95 %)."""
    d = np.asarray(d, dtype=float)
    n = len(d)
    i, j = np.triu_indices(n)
    walsh = np.sort((d[i] + d[j]) / 2)
    estimate = float(np.median(walsh))
    cdf = signed_rank_cdf(n)
    below = np.flatnonzero(cdf <= (1 - level) / 2)
    if not len(below):
        return estimate, float("nan"), float("nan")
    c = int(below[-1]) + 1
    return estimate, float(walsh[c - 1]), float(walsh[len(walsh) - c])


# ------------------------------------------------------------------ what more data would do

def repeats_needed(mean, var, ratio, margin, certainty: float, folds: int,
                   cap: int = 100) -> np.ndarray:
    """Rough number of repeats of ``folds``-fold cross-validation after which a pair with this
    mean difference and fold-to-fold variance would reach ``certainty`` (normal approximation
    of the posterior; the observed mean and variance assumed to stay). 0 when no number of
    repeats can: the Nadeau–Bengio term ``ratio · var`` alone keeps the posterior too wide
    (then more rows per fold, not more repeats, would help); ``cap + 1`` when above ``cap``."""
    mean, var, ratio, margin = np.broadcast_arrays(*(np.abs(np.asarray(x, dtype=float))
                                                     for x in (mean, var, ratio, margin)))
    lo, hi = np.zeros_like(mean), np.sqrt(var) + np.abs(mean) + margin + 1e-12
    for _ in range(60):  # the widest posterior scale that still decides, by bisection
        mid = (lo + hi) / 2
        p = _normal_probs(mean, mid, margin)
        ok = p.max(axis=-1) >= certainty
        lo, hi = np.where(ok, mid, lo), np.where(ok, hi, mid)
    scale2 = lo ** 2
    per_n = scale2 / np.where(var > 0, var, np.nan) - ratio       # = 1 / n
    n = np.where(per_n > 0, np.ceil(1.0 / np.where(per_n > 0, per_n, 1.0)), np.inf)
    reps = np.ceil(n / folds)
    return np.where(np.isinf(reps), 0, np.minimum(reps, cap + 1)).astype(int)


def _normal_probs(mean, scale, margin) -> np.ndarray:
    s = np.where(scale > 0, scale, 1e-300)
    left = _sp.ndtr((-margin - mean) / s)
    right = _sp.ndtr((mean - margin) / s)
    return np.stack([left, 1 - left - right, right], axis=-1)


def datasets_needed(d, margin: float, certainty: float, cap: int = 200,
                    samples: int = 2000) -> int:
    """Rough number of datasets after which the signed-rank test would decide, if new
    datasets gave differences like these (the observed ones repeated); ``cap + 1`` when not
    within ``cap``. Found by doubling the copies, then halving the interval (the probability
    grows with the copies, up to Monte Carlo noise)."""
    d = np.asarray(d, dtype=float)
    n = max(len(d), 1)

    def decides(copies: int) -> bool:
        probs, _ = signed_rank(d, margin, samples=samples, copies=copies)
        return bool(probs.max() >= certainty)

    most = cap // n
    low, high = 1, 2
    while high <= most and not decides(high):
        low, high = high, high * 2
    if high > most:
        if most <= low or not decides(most):
            return cap + 1
        high = most
    while high - low > 1:
        mid = (low + high) // 2
        low, high = (low, mid) if decides(mid) else (mid, high)
    return n * high
