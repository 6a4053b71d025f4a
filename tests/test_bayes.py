"""The Bayesian tests against the reference implementation by the methods' authors (the
``baycomp`` package, a test-only dependency), the Hodges–Lehmann interval against SciPy's exact
Wilcoxon distribution, and the per-row evidence round trip."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from harness.analysis import bayes
from harness.row_evidence import decode, encode

baycomp = pytest.importorskip("baycomp")


def test_correlated_t_matches_baycomp():
    # reference: baycomp.CorrelatedTTest (Corani & Benavoli 2015), whose variance correction
    # for r repeats of k folds is 1/n + 1/(k − 1) = 1/n + n_test/n_train
    rng = np.random.default_rng(0)
    for runs, folds, shift, rope in ((1, 10, 0.0, 0.01), (2, 5, 0.01, 0.01), (3, 5, 0.03, 0.02),
                                     (5, 10, -0.002, 0.005)):
        n = runs * folds
        x = rng.normal(0.8, 0.02, n)
        y = x + rng.normal(shift, 0.015, n)
        ref = baycomp.CorrelatedTTest.probs(x, y, rope, runs=runs)  # (x better, rope, y better)
        d = y - x
        ours = bayes.correlated_t(d.mean(), d.var(ddof=1), n, 1 / (folds - 1), rope)
        assert ours.tolist() == pytest.approx(list(ref), abs=1e-12)


def test_correlated_t_zero_variance_is_a_point_mass():
    out = bayes.correlated_t([0.0, 0.05, -0.05], [0.0, 0.0, 0.0], 10, 0.25, 0.01)
    assert out.tolist() == [[0, 1, 0], [0, 0, 1], [1, 0, 0]]
    assert np.isnan(bayes.correlated_t(0.1, 0.01, 1, 0.25, 0.01)).all()


@pytest.mark.parametrize("n", [3, 6, 15, 40])
def test_signed_rank_matches_baycomp(n):
    # reference: baycomp.SignedRankTest (Benavoli et al. 2014), same prior (0.5), same Dirichlet
    # weights for the same seed; our suffix-sum evaluation must give the same samples
    rng = np.random.default_rng(n)
    x = rng.normal(0.8, 0.05, n)
    y = x + rng.normal(0.005, 0.02, n)
    y[0] = x[0]  # a zero difference
    ref = baycomp.SignedRankTest.probs(x, y, 0.01, nsamples=5000, random_state=7)
    ours, kept = bayes.signed_rank(y - x, 0.01, samples=5000, seed=7, keep=100)
    assert ours[0].tolist() == pytest.approx(list(ref), abs=1e-12)
    samples = baycomp.SignedRankTest.sample(x, y, 0.01, nsamples=5000, random_state=7)
    assert kept[0] == pytest.approx(samples[:100], abs=1e-10)


@pytest.mark.parametrize("copies", [2, 5])
def test_signed_rank_of_copies_is_the_test_on_the_repeated_data(copies):
    # reference: baycomp.SignedRankTest on the differences repeated ``copies`` times; ours
    # works on the differences once with Dirichlet weights of parameter ``copies`` (the
    # aggregation property), so the two agree up to Monte Carlo error (sd ≤ 0.004 at 20,000
    # samples each)
    rng = np.random.default_rng(copies)
    x = rng.normal(0.8, 0.05, 8)
    y = x + rng.normal(0.004, 0.01, 8)
    ref = baycomp.SignedRankTest.probs(np.tile(x, copies), np.tile(y, copies), 0.005,
                                       nsamples=20000, random_state=1)
    ours, _ = bayes.signed_rank(y - x, 0.005, samples=20000, seed=3, copies=copies)
    assert ours[0].tolist() == pytest.approx(list(ref), abs=0.02)
    assert max(ref) > 0.5  # a case the copies move: once, the same data decide less
    once, _ = bayes.signed_rank(y - x, 0.005, samples=20000, seed=3)
    assert abs(once[0] - ours[0]).max() > 0.05


def test_signed_rank_is_vectorised_over_pairs():
    rng = np.random.default_rng(2)
    d = rng.normal(0, 1, (4, 9))
    together, _ = bayes.signed_rank(d, [0.1, 0.2, 0.3, 0.4], samples=3000)
    for p in range(4):
        alone, _ = bayes.signed_rank(d[p], 0.1 * (p + 1), samples=3000)
        assert together[p].tolist() == alone[0].tolist()


def test_joint_posterior_marginals_are_the_correlated_t():
    # every pairwise difference of the joint samples follows the correlated t posterior,
    # checked against baycomp's probabilities (Monte Carlo tolerance for 200,000 samples)
    rng = np.random.default_rng(5)
    scores = rng.normal(0.8, 0.02, (10, 3)) + np.array([0.0, 0.01, -0.02])
    scores[:, 1] += 0.5 * (scores[:, 0] - 0.8)  # correlated strategies
    draws = bayes.joint_means(scores, 1 / 4, size=200_000, seed=1)
    for i, j in ((0, 1), (0, 2), (1, 2)):
        diff = draws[:, j] - draws[:, i]
        mc = [np.mean(diff < -0.01), np.mean(np.abs(diff) <= 0.01), np.mean(diff > 0.01)]
        ref = baycomp.CorrelatedTTest.probs(scores[:, i], scores[:, j], 0.01, runs=2)
        assert mc == pytest.approx(list(ref), abs=0.005)


def test_signed_rank_cdf_matches_scipy_exact_distribution():
    # reference: scipy.stats.wilcoxon(method="exact", alternative="less") gives P(T+ ≤ t) for a
    # sample without ties whose positive ranks sum to t
    for n in (5, 8, 12):
        cdf = bayes.signed_rank_cdf(n)
        for t in (0, 3, n, n * (n + 1) // 4):
            # ranks 1..n, positive exactly those summing to t (greedy from the top)
            signs, left = -np.ones(n), t
            for r in range(n, 0, -1):
                if r <= left:
                    signs[r - 1], left = 1, left - r
            ref = stats.wilcoxon(np.arange(1, n + 1) * signs, method="exact",
                                 alternative="less").pvalue
            assert cdf[t] == pytest.approx(ref, rel=1e-12), (n, t)


def test_hodges_lehmann_by_hand():
    # d = 1..10: Walsh averages are symmetric about 5.5, so the estimate is 5.5. For n = 10 at
    # 95 %, P(T+ ≤ 8) = 0.0244 ≤ 0.025 < P(T+ ≤ 9) (Wilcoxon's table, recalled from memory,
    # and checked above against SciPy), so C = 9: the 9th smallest and 9th largest of the 55
    # Walsh averages, 3.0 and 8.0.
    est, low, high = bayes.hodges_lehmann(np.arange(1, 11.0))
    assert (est, low, high) == (5.5, 3.0, 8.0)
    est, low, high = bayes.hodges_lehmann([0.1, 0.2, 0.3, 0.4, 0.5])  # n = 5: no 95 % interval
    assert est == pytest.approx(0.3) and np.isnan(low) and np.isnan(high)


def test_repeats_needed():
    # a clear difference needs no more than a few repeats; a difference of half the region with
    # a tiny variance can be shown equivalent; a difference at the region's edge never settles
    # under the correction
    assert 1 <= bayes.repeats_needed(0.05, 0.0004, 0.25, 0.01, 0.95, 5) <= 3
    assert bayes.repeats_needed(0.0, 1e-6, 0.25, 0.01, 0.95, 5) >= 1
    assert bayes.repeats_needed(0.01, 0.0004, 0.25, 0.01, 0.95, 5) == 0


def test_row_evidence_round_trip():
    y = np.array(["a", "b", "a", "c", "b", "a", "a", "c", "b"])
    pred = np.array(["a", "b", "b", "c", "b", "a", "c", "c", "a"])
    kind, values = decode(encode(y, pred, classification=True))
    assert values.tolist() == (y == pred).astype(float).tolist()
    yr, pr = np.array([1.0, 2.0, 3.5]), np.array([1.5, 2.0, 1.5])
    kind, values = decode(encode(yr, pr, classification=False))
    assert values.tolist() == pytest.approx([-0.25, 0.0, -4.0])
