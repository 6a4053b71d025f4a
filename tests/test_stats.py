"""Tests for harness.stats: corrected t-test, ranks, Friedman, Nemenyi, Wilcoxon–Holm, Pareto."""

from __future__ import annotations

import math
from itertools import combinations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from harness.analysis.stats import (average_ranks, corrected_t, dominance, friedman, holm,
                                   mcnemar_exact, nemenyi_cd, nemenyi_critical_value,
                                   nemenyi_groups, tally, wilcoxon_holm, wilcoxon_pairs)

# Demšar (2006), "Statistical comparisons of classifiers over multiple data sets", JMLR 7,
# Table 6: AUC of C4.5, C4.5+m, C4.5+cf, C4.5+m+cf on fourteen data sets.
# RECALLED FROM MEMORY, not copied from the paper. Independent checks that the recollection
# is faithful: it reproduces the published average ranks (3.143, 2.000, 2.893, 1.964, also
# recalled from memory) and the published Wilcoxon sums for C4.5+m vs C4.5 (R+ = 93,
# R− = 12, recalled from memory); see the tests below.
DEMSAR_NAMES = ["C4.5", "C4.5+m", "C4.5+cf", "C4.5+m+cf"]
DEMSAR_AUC = pd.DataFrame([
    [0.763, 0.768, 0.771, 0.798],  # adult (sample)
    [0.599, 0.591, 0.590, 0.569],  # breast cancer
    [0.954, 0.971, 0.968, 0.967],  # breast cancer wisconsin
    [0.628, 0.661, 0.654, 0.654],  # cmc
    [0.882, 0.888, 0.886, 0.898],  # ionosphere
    [0.936, 0.931, 0.916, 0.931],  # iris
    [0.661, 0.668, 0.609, 0.685],  # liver disorders
    [0.583, 0.583, 0.563, 0.625],  # lung cancer
    [0.775, 0.838, 0.866, 0.875],  # lymphography
    [1.000, 1.000, 1.000, 1.000],  # mushroom
    [0.940, 0.962, 0.965, 0.962],  # primary tumor
    [0.619, 0.666, 0.614, 0.669],  # rheum
    [0.972, 0.981, 0.975, 0.975],  # voting
    [0.957, 0.978, 0.946, 0.970],  # wine
], columns=DEMSAR_NAMES)


def random_matrix(seed: int, n: int = 12, k: int = 5) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return rng.normal(size=(n, k)) + np.linspace(0, 1, k)


# ---------------------------------------------------------------------------
# corrected resampled t-test
# ---------------------------------------------------------------------------

# r = 2 repeats × k = 3 folds. a − b = d = [.01, .02, .03, .01, .02, .03].
# mean(d) = 0.02; deviations ±0.01 (four of them) and 0 (two) → Σ dev² = 4e-4,
# var(d, ddof=1) = 4e-4 / 5 = 8e-5. Folds of 3-fold CV on 300 rows: n_train = 200,
# n_test = 100, so the factor is 1/6 + 100/200 = 2/3 and the corrected variance of the
# mean is 8e-5 · 2/3 = 5.333e-5. t = 0.02 / sqrt(5.333e-5) = sqrt(4e-4 / 5.333e-5)
# = sqrt(7.5) ≈ 2.7386 with df = 5. (The uncorrected paired t would be sqrt(30) ≈ 5.48.)
HAND_A = [0.81, 0.82, 0.83, 0.81, 0.82, 0.83]
HAND_B = [0.80] * 6


def _moments(a, b):
    d = np.asarray(a) - np.asarray(b)
    return d.mean(), d.var(ddof=1), len(d)


def test_corrected_t_by_hand():
    mean, var, n = _moments(HAND_A, HAND_B)
    t, p, low, high = corrected_t(mean, var, n, ratio=100 / 200)
    assert mean == pytest.approx(0.02)
    assert t == pytest.approx(math.sqrt(7.5), rel=1e-9)
    # Student t table, df = 5 (recalled from memory): t_.975 = 2.571, t_.99 = 3.365,
    # so 2.571 < 2.739 < 3.365 puts the two-sided p between 0.02 and 0.05.
    assert 0.02 < p < 0.05
    # the interval is mean ± t_.975,5 · sqrt(5.333e-5); t_.975,5 = 2.5706 (table, from memory)
    assert low == pytest.approx(0.02 - 2.5706 * math.sqrt(8e-5 * 2 / 3), abs=1e-5)
    assert high == pytest.approx(0.02 + 2.5706 * math.sqrt(8e-5 * 2 / 3), abs=1e-5)
    assert low > 0  # consistent with p < 0.05


def test_corrected_t_reduces_to_scipys_paired_t_without_correction():
    # with n_test / n_train = 0 the statistic is the ordinary paired t (scipy.stats.ttest_rel,
    # an independent implementation)
    rng = np.random.default_rng(1)
    a, b = rng.normal(0.8, 0.02, 10), rng.normal(0.79, 0.02, 10)
    t, p, _, _ = corrected_t(*_moments(a, b), ratio=0.0)
    ref = stats.ttest_rel(a, b)
    assert t == pytest.approx(ref.statistic, rel=1e-9)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)
    # the correction only ever widens: smaller |t|, larger p
    t2, p2, _, _ = corrected_t(*_moments(a, b), ratio=10 / 90)
    assert abs(t2) < abs(t) and p2 > p


def test_corrected_t_zero_variance_and_too_few_cells():
    t, p, low, high = corrected_t([0.0, 2.0, -2.0], [0.0, 0.0, 0.0], [6, 3, 3], 0.25)
    assert t.tolist() == [0.0, math.inf, -math.inf] and p.tolist() == [1.0, 0.0, 0.0]
    assert low.tolist() == high.tolist() == [0.0, 2.0, -2.0]
    t, p, low, _ = corrected_t(0.1, 0.01, 1, 0.25)
    assert np.isnan(t) and np.isnan(p) and np.isnan(low)


def test_mcnemar_matches_statsmodels():
    # reference: statsmodels.stats.contingency_tables.mcnemar(table, exact=True), the binomial
    # test on the discordant cells (an independent implementation)
    from statsmodels.stats.contingency_tables import mcnemar

    for a_only, b_only in ((10, 2), (3, 3), (0, 7), (40, 25), (0, 0), (1, 0), (120, 95)):
        ref = mcnemar(np.array([[50, a_only], [b_only, 30]]), exact=True).pvalue
        assert mcnemar_exact(a_only, b_only) == pytest.approx(ref, rel=1e-12), (a_only, b_only)
    assert mcnemar_exact(np.array([10, 0]), np.array([2, 0])).shape == (2,)


# ---------------------------------------------------------------------------
# ranks and Friedman
# ---------------------------------------------------------------------------

def test_demsar_average_ranks():
    ranks = average_ranks(DEMSAR_AUC)
    # published average ranks (Demšar 2006, Table 6; recalled from memory)
    assert ranks.tolist() == pytest.approx([3.143, 2.000, 2.893, 1.964], abs=5e-4)
    assert list(ranks.index) == DEMSAR_NAMES


def test_average_ranks_direction_and_ties():
    m = np.array([[0.9, 0.8, 0.8], [0.5, 0.6, 0.7]])
    # row 1: 0.9 → 1, the two 0.8 share (2 + 3) / 2 = 2.5; row 2: 0.7 → 1, 0.6 → 2, 0.5 → 3
    assert average_ranks(m).tolist() == pytest.approx([2.0, 2.25, 1.75])
    # lower is better: row 1 → 3, 1.5, 1.5; row 2 → 1, 2, 3
    assert average_ranks(m, higher_is_better=False).tolist() == pytest.approx([2.0, 1.75, 2.25])
    with pytest.raises(ValueError):
        average_ranks(np.array([[0.1, np.nan]]))


def test_demsar_friedman():
    # Demšar's formula has no tie correction: χ²_F ≈ 9.28, F_F ≈ 3.69 with (3, 39) df
    # (published figures, recalled from memory)
    res = friedman(DEMSAR_AUC, tie_correction=False)
    assert res.chi2 == pytest.approx(9.28, abs=0.01)
    assert res.f == pytest.approx(3.69, abs=0.01)
    assert (res.f_df1, res.f_df2) == (3, 39)
    # the paper's conclusion: F(3, 39) critical value at α = 0.05 is 2.85 (recalled from
    # memory), so the null hypothesis is rejected
    assert stats.f.ppf(0.95, 3, 39) == pytest.approx(2.85, abs=0.01)
    assert res.f_p < 0.05


def test_friedman_from_average_ranks_alone():
    # χ²_F = 12N/(k(k+1)) [Σ R² − k(k+1)²/4] depends only on the average ranks: recompute it
    # from the published ranks (3.143, 2.000, 2.893, 1.964; from memory), N = 14, k = 4.
    r = np.array([3.143, 2.000, 2.893, 1.964])
    chi2 = 12 * 14 / (4 * 5) * (np.sum(r ** 2) - 4 * 25 / 4)
    ff = 13 * chi2 / (14 * 3 - chi2)
    res = friedman(DEMSAR_AUC, tie_correction=False)
    assert res.chi2 == pytest.approx(chi2, abs=0.01)
    assert res.f == pytest.approx(ff, abs=0.01)


def test_friedman_matches_scipy():
    # SciPy corrects for ties; so do we by default
    ref = stats.friedmanchisquare(*DEMSAR_AUC.to_numpy().T)
    res = friedman(DEMSAR_AUC)
    assert res.chi2 == pytest.approx(ref.statistic, rel=1e-10)
    assert res.chi2_p == pytest.approx(ref.pvalue, rel=1e-10)
    assert res.chi2 > friedman(DEMSAR_AUC, tie_correction=False).chi2  # ties present
    for seed in range(5):
        m = random_matrix(seed)
        ref = stats.friedmanchisquare(*m.T)
        for tc in (True, False):  # no ties in continuous data: both forms agree with SciPy
            res = friedman(m, tie_correction=tc)
            assert res.chi2 == pytest.approx(ref.statistic, rel=1e-10)
            assert res.chi2_p == pytest.approx(ref.pvalue, rel=1e-10)


def test_friedman_degenerate():
    same = friedman(np.ones((5, 3)))
    assert (same.chi2, same.chi2_p, same.f, same.f_p) == (0.0, 1.0, 0.0, 1.0)
    perfect = friedman(np.tile([3.0, 2.0, 1.0], (6, 1)))  # every dataset agrees
    assert perfect.chi2 == pytest.approx(12.0)  # = N (k − 1)
    assert perfect.f == math.inf and perfect.f_p == 0.0
    with pytest.raises(ValueError):
        friedman(np.ones((1, 3)))


# ---------------------------------------------------------------------------
# Nemenyi
# ---------------------------------------------------------------------------

# Two-tailed Nemenyi critical values q_α for k = 2 … 10 (Demšar 2006, Table 5; recalled
# from memory).
NEMENYI_005 = [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]
NEMENYI_010 = [1.645, 2.052, 2.291, 2.459, 2.589, 2.693, 2.780, 2.855, 2.920]


@pytest.mark.parametrize("k", range(2, 11))
def test_nemenyi_critical_values_match_table(k):
    assert nemenyi_critical_value(k, 0.05) == pytest.approx(NEMENYI_005[k - 2], abs=0.002)
    assert nemenyi_critical_value(k, 0.10) == pytest.approx(NEMENYI_010[k - 2], abs=0.002)


def test_nemenyi_cd_demsar():
    # CD for k = 4, N = 14: 1.25 at α = 0.05 and 1.12 at α = 0.10 (Demšar 2006; from memory)
    assert nemenyi_cd(4, 14, 0.05) == pytest.approx(1.25, abs=0.006)
    assert nemenyi_cd(4, 14, 0.10) == pytest.approx(1.12, abs=0.006)
    # and the formula: q_α · sqrt(k(k+1)/(6N))
    assert nemenyi_cd(7, 30) == pytest.approx(nemenyi_critical_value(7) * math.sqrt(56 / 180))
    # the paper's post-hoc reading: C4.5+m+cf vs C4.5 differ by 3.143 − 1.964 = 1.179,
    # not significant at 0.05 but significant at 0.10
    gap = average_ranks(DEMSAR_AUC)
    gap = gap["C4.5"] - gap["C4.5+m+cf"]
    assert nemenyi_cd(4, 14, 0.10) < gap < nemenyi_cd(4, 14, 0.05)


def test_nemenyi_groups_by_hand():
    r = {"a": 1.0, "b": 1.5, "c": 2.2, "d": 3.0, "e": 3.9}
    # cd 1.0: a–b .5, b–c .7, c–d .8, d–e .9 fit; a–c 1.2, b–d 1.5, c–e 1.7 do not
    assert nemenyi_groups(r, 1.0) == [["a", "b"], ["b", "c"], ["c", "d"], ["d", "e"]]
    # cd 1.3: a–c 1.2 fits, so [b, c] lies inside [a, b, c] and is dropped; b–d 1.5 does not
    assert nemenyi_groups(r, 1.3) == [["a", "b", "c"], ["c", "d"], ["d", "e"]]
    assert nemenyi_groups(r, 5.0) == [["a", "b", "c", "d", "e"]]
    assert nemenyi_groups(r, 0.4) == []
    # a difference equal to the CD is significant (Demšar: "differ by at least the CD")
    assert nemenyi_groups({"x": 1.0, "y": 2.0}, 1.0) == []
    # input order is irrelevant
    assert nemenyi_groups(dict(reversed(list(r.items()))), 1.3) == nemenyi_groups(r, 1.3)


def test_nemenyi_groups_cover_exactly_the_close_pairs():
    rng = np.random.default_rng(7)
    for _ in range(20):
        r = dict(zip("abcdefgh", rng.uniform(1, 8, 8)))
        cd = rng.uniform(0.3, 3)
        groups = nemenyi_groups(r, cd)
        for g in groups:
            span = max(r[n] for n in g) - min(r[n] for n in g)
            assert span < cd and len(g) >= 2
        for x, y in combinations(r, 2):
            close = abs(r[x] - r[y]) < cd
            assert close == any(x in g and y in g for g in groups)
        for g, h in combinations(groups, 2):
            assert not set(g) <= set(h) and not set(h) <= set(g)  # maximal


# ---------------------------------------------------------------------------
# Holm and Wilcoxon
# ---------------------------------------------------------------------------

def test_holm_by_hand_and_against_statsmodels():
    # m = 4; sorted p: .005·4 = .02, .01·3 = .03, .03·2 = .06, .04·1 = .04 → running max
    # .02, .03, .06, .06. Step-down at α = .05: .005 ≤ .0125 yes, .01 ≤ .0167 yes,
    # .03 ≤ .025 no → stop: reject the first two only.
    adjusted, reject = holm([0.01, 0.04, 0.03, 0.005], alpha=0.05)
    assert adjusted.tolist() == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert reject.tolist() == [True, False, False, True]
    adjusted, _ = holm([0.5, 0.6])
    assert adjusted.tolist() == pytest.approx([1.0, 1.0])  # capped at 1
    # reference: statsmodels.stats.multitest.multipletests(method="holm"), an independent
    # implementation of Holm's step-down procedure
    from statsmodels.stats.multitest import multipletests

    rng = np.random.default_rng(4)
    for m in (1, 3, 10, 21):
        p = rng.uniform(0, 0.1, m) ** 2
        ref_reject, ref_adjusted, _, _ = multipletests(p, alpha=0.05, method="holm")
        adjusted, reject = holm(p, 0.05)
        assert adjusted.tolist() == pytest.approx(ref_adjusted.tolist(), rel=1e-12)
        assert reject.tolist() == ref_reject.tolist()


def test_wilcoxon_demsar_c45_vs_m():
    # Demšar 2006 §3.1.3 (recalled from memory): C4.5+m vs C4.5 gives R+ = 93, R− = 12
    # (zero differences split evenly), T = min = 12; the critical T for N = 14 at α = 0.05
    # is 21 (recalled from memory), so the difference is significant.
    out = wilcoxon_holm(DEMSAR_AUC)
    row = out[(out.a == "C4.5") & (out.b == "C4.5+m")].iloc[0]
    assert row.statistic == pytest.approx(12.0)
    assert row.p < 0.05
    assert (row.a_wins, row.b_wins) == (2, 10)  # two of fourteen are ties


def _exact_signed_rank_p(d):
    """Two-sided exact p of the Wilcoxon signed-rank test by enumerating every sign pattern
    (Wilcoxon's null: each equally likely), average ranks for ties, zeros split: the
    definition, computed by brute force independently of SciPy."""
    from itertools import product

    d = np.asarray(d, dtype=float)
    ranks = stats.rankdata(np.abs(d))
    zeros = d == 0
    observed = ranks[d > 0].sum() + ranks[zeros].sum() / 2
    centre = ranks.sum() / 2
    sums = [sum(r for r, s in zip(ranks, signs) if s) for signs in
            product([False, True], repeat=len(d))]
    return float(np.mean([abs(x - centre) >= abs(observed - centre) - 1e-12 for x in sums]))


def test_wilcoxon_p_is_the_exact_null_distribution():
    # the brute-force enumeration above is the reference; no ties and no zeros, where the
    # exact null distribution of SciPy's method="exact" is that of the definition
    rng = np.random.default_rng(3)
    for n in (4, 5, 6, 8, 10):
        d = rng.normal(0.3, 1.0, n)
        out = wilcoxon_pairs(d[None, :], ["a"], ["b"])
        assert out["p"].iloc[0] == pytest.approx(_exact_signed_rank_p(d), rel=1e-9), n
    # with five datasets all in one direction, p = 2 / 2^5 = 0.0625: never 0.042 (the normal
    # approximation older SciPy switched to on ties)
    tied = np.array([0.1, 0.1, 0.2, 0.2, 0.3])
    assert wilcoxon_pairs(tied[None, :], ["a"], ["b"])["p"].iloc[0] == pytest.approx(0.0625)


def test_wilcoxon_of_a_pair_does_not_depend_on_other_strategies():
    m = random_matrix(7, n=8, k=3)
    alone = wilcoxon_holm(m[:, :2], ["a", "b"])
    with_c = wilcoxon_holm(m, ["a", "b", "c"])
    assert alone["p"].iloc[0] == with_c.set_index(["a", "b"]).loc[("a", "b"), "p"]


def test_wilcoxon_all_zero_and_float_noise():
    m = np.array([[0.5, 0.5, 0.4], [0.7, 0.7, 0.9], [0.2, 0.2, 0.1]])
    out = wilcoxon_holm(m, ["a", "b", "c"])
    first = out.iloc[0]
    assert (first.a, first.b, first.p, first.p_holm) == ("a", "b", 1.0, 1.0)
    assert math.isnan(first.statistic) and not first.reject
    # 0.3 − 0.1 = 0.19999999999999998 while 0.3 − 0.5 = −0.2 exactly (and 0.9 − 0.7 is
    # 0.20000000000000007): all three must share one rank. Clean differences
    # [.2, −.2, .05, .2, −.05] rank |d| as .05, .05 → 1.5 each and the three .2 → 4 each,
    # so R− = 4 + 1.5 = 5.5 and R+ = 9.5: T = 5.5 (unrounded ranks would give T = 6).
    noisy = np.array([[0.3, 0.1], [0.3, 0.5], [0.15, 0.1], [0.9, 0.7], [0.6, 0.65]])
    out = wilcoxon_holm(noisy)
    assert out.statistic[0] == pytest.approx(5.5)


# ---------------------------------------------------------------------------
# win / tie / loss and Pareto front
# ---------------------------------------------------------------------------

def test_tally_by_hand():
    pairs = pd.DataFrame({
        "a": ["rf", "rf", "rf", "rf", "rf", "gb", "gb"], "b": ["tree"] * 7,
        "better": ["rf", "", "tree", "", "rf", "tree", "tree"],
        "verdict": ["better", "practically equivalent", "better", "undecided", "better",
                    "better", "better"]})
    out = tally(pairs).set_index(["a", "b"])
    assert out.loc[("rf", "tree")].tolist() == [2, 1, 1, 1]  # wins, equivalent, undecided, losses
    assert out.loc[("gb", "tree")].tolist() == [0, 0, 0, 2]
    with pytest.raises(ValueError):
        tally(pairs.drop(columns="verdict"))


def test_dominance_by_hand():
    names = ["A", "B", "C", "D", "E", "F"]
    score = np.array([0.90, 0.85, 0.80, 0.90, 0.95, 0.85])
    cost = np.array([10.0, 2.0, 5.0, 12.0, 50.0, 2.0])
    dom = dominance(score, cost, np.zeros(6))
    by = {n: [names[j] for j in np.flatnonzero(dom[:, i])] for i, n in enumerate(names)}
    # C (0.80, 5) is beaten on both by B and F (0.85, 2) and also by A? A costs 10 > 5: no.
    # D (0.90, 12) ties A on score and costs more: dominated by A only.
    # B and F are identical: neither dominates the other, both on the front.
    assert {n: not d for n, d in by.items()} == {"A": True, "B": True, "C": False, "D": False,
                                                "E": True, "F": True}
    assert by["C"] == ["B", "F"]
    assert by["D"] == ["A"]
    assert by["E"] == []
    # with timing noise: D costs 12 ± 2 against A's 10 ± 2, within twice the standard error
    # of their difference (2·sqrt(8) ≈ 5.7), so D's cost counts as equal and A (same score)
    # no longer dominates it
    noisy = dominance(score, cost, np.array([2.0, 0, 0, 2.0, 0, 0]))
    assert not noisy[0, 3]
    with pytest.raises(ValueError):
        dominance(np.array([np.nan]), np.array([1.0]), np.zeros(1))
