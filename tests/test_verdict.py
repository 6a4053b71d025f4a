"""The verdict glue (results frame → per-dataset and across-dataset verdicts, cost fronts) on
small real runs, and the tables and plots it writes: better, practically equivalent and
undecided where the data show each."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats as st

from harness import load_results
from harness.report import words
from scipy.stats import rankdata
from harness.analysis.verdict import complete_block, tied_runs, verdict
from tests.conftest import SMALL_SUITE

# Six classification datasets, a random forest against a constant prediction (the majority
# class): the forest should win everywhere, by every test.
DOMINANCE_SUITE = """
[suite]
name = "dominance"

[protocol]
folds = 3
repeats = 2
seed = 5
metrics = { classification = ["accuracy", "balanced_accuracy"] }

[[dataset]]
name = "iris"
from = "sklearn"
load = "load_iris"

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"

[[dataset]]
name = "cancer"
from = "sklearn"
load = "load_breast_cancer"

[[dataset]]
name = "blobs-a"
from = "generator"
make = "make_classification"
params = { n_samples = 240, n_features = 6, n_informative = 4, class_sep = 2.0, random_state = 1 }

[[dataset]]
name = "blobs-b"
from = "generator"
make = "make_classification"
params = { n_samples = 240, n_features = 6, n_informative = 4, class_sep = 2.0, random_state = 2 }

[[dataset]]
name = "blobs-c"
from = "generator"
make = "make_classification"
params = { n_samples = 240, n_features = 6, n_informative = 4, n_classes = 3, class_sep = 2.0, random_state = 3 }

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 20 }

[[strategy]]
name = "constant"
classifier = "sklearn.dummy:DummyClassifier"
params = { strategy = "most_frequent" }
family = "baseline"
"""

# SMALL_SUITE plus a classification-only strategy (no regressor: absent on 'friedman') and a
# strategy that fails on every cell.
MISSING = """
[[strategy]]
name = "constant"
classifier = "sklearn.dummy:DummyClassifier"
family = "baseline"

[[strategy]]
name = "broken"
method = "single-tree"
params = { monotonic_cst = [1, 1] }   # wrong length: scikit-learn refuses it at fit time
"""


@pytest.fixture(scope="module")
def dominance(run_once):
    result = run_once(DOMINANCE_SUITE, "dominance")
    return result, load_results(result.folder)


@pytest.fixture(scope="module")
def small(run_once):
    result = run_once(SMALL_SUITE + MISSING, "small")
    return result, load_results(result.folder)


METRICS = {"classification": ["accuracy", "balanced_accuracy"]}


def test_one_strategy_dominating_is_found_by_every_test(dominance):
    result, frame = dominance
    assert (frame.status == "ok").all()
    v = verdict(frame, METRICS)
    assert set(v.primary.values()) == {"accuracy"}
    assert v.best == "forest" and v.ranks.tolist() == [1.0, 2.0]
    # per dataset: forest best, the constant clearly worse, every pair told apart
    best = v.intervals[v.intervals["best"]]
    assert sorted(best["dataset"]) == sorted(frame["dataset"].unique())
    assert (best["strategy"] == "forest").all()
    const = v.intervals[v.intervals.strategy == "constant"]
    assert (const["standing"] == "worse than best").all()
    assert (v.pairs["better"] == "forest").all() and (v.pairs["verdict"] == "better").all()
    assert (v.pairs["test"] == "corrected t-test").all()
    # across datasets: k = 2, N = 6, forest ahead on all six.
    # Friedman with k = 2: χ² = 12N/(k(k+1)) Σ(R_j − (k+1)/2)² = 12·6/6 · (0.25 + 0.25) = 6.
    assert v.friedman.chi2 == pytest.approx(6.0)
    # Iman–Davenport: (N − 1)χ² / (N(k − 1) − χ²) = 5·6 / 0 → infinite F, p = 0
    assert math.isinf(v.friedman.f) and v.friedman.f_p == 0.0
    # all six differences positive: the exact two-sided Wilcoxon p is 2 / 2^6 = 0.03125
    # (Wilcoxon's null: each of the 2^6 sign patterns equally likely; only "all +" and
    # "all −" are as extreme); one pair, so Holm leaves it as it is.
    row = v.across.iloc[0]
    assert (row["a"], row["b"]) == ("forest", "constant")
    assert row["p"] == pytest.approx(2 / 2 ** 6) and row["p_holm"] == pytest.approx(2 / 2 ** 6)
    assert row["wilcoxon_differs"] and row["a_wins"] == 6
    # the Bayesian signed-rank test: far beyond the region on every dataset
    assert row["verdict"] == "better" and row["better"] == "forest" and row["p_a"] > 0.95
    # Nemenyi, k = 2: q_0.05 = 1.960 (studentized range / √2, table value recalled from
    # memory); CD = 1.960 · sqrt(2·3 / (6·6)) = 0.800 < rank difference 1
    assert v.cd == pytest.approx(1.960 * math.sqrt(6 / 36), abs=2e-3)
    assert row["nemenyi_differs"]
    assert (row["wins"], row["equivalent"], row["undecided"], row["losses"]) == (6, 0, 0, 0)
    assert v.scale == "raw" and not v.powerless
    assert v.nemenyi_groups == [] and v.wilcoxon_groups == []
    line = " ".join(words.bottom_line(v))
    assert "Across 6 datasets, forest ranks first of 2 strategies" in line
    assert "forest is better than constant" in line


def test_intervals_are_the_corrected_interval_of_the_first_metric(dominance):
    _, frame = dominance
    v = verdict(frame, METRICS)
    part = frame[(frame.dataset == "wine") & (frame.strategy == "forest")]
    x = part["accuracy"].to_numpy()
    n = len(x)
    # Nadeau & Bengio (2003) corrected variance: (1/n + n_test/n_train) · s²
    half = st.t.ppf(0.975, n - 1) * math.sqrt((1 / n + part.n_test.mean() / part.n_train.mean())
                                              * x.var(ddof=1))
    row = v.intervals[(v.intervals.dataset == "wine") & (v.intervals.strategy == "forest")].iloc[0]
    assert row["metric"] == "accuracy" and row["cells"] == n == 6
    assert row["mean"] == pytest.approx(x.mean())
    assert (row["low"], row["high"]) == pytest.approx((x.mean() - half,
                                                       min(1.0, x.mean() + half)))
    assert row["high"] <= 1.0  # an accuracy interval stays within [0, 1]
    # the same glue with the other metric first judges on that metric
    v2 = verdict(frame, {"classification": ["balanced_accuracy", "accuracy"]})
    row2 = v2.intervals[(v2.intervals.dataset == "wine") & (v2.intervals.strategy == "forest")]
    assert row2["mean"].iloc[0] == pytest.approx(part["balanced_accuracy"].mean())


def test_missing_strategies_are_left_out_and_named(small):
    result, frame = small
    assert (frame[frame.strategy == "broken"].status == "error").all()
    assert "constant" not in set(frame[frame.dataset == "friedman"].strategy)
    v = verdict(frame)
    # 'broken' has no score anywhere; 'constant' lacks friedman (dropping it loses one score,
    # dropping friedman would lose three): both strategies go, both datasets stay
    assert list(v.matrix.columns) and set(v.matrix.columns) == {"tree", "forest", "gb"}
    assert set(v.matrix.index) == {"wine", "friedman"}
    notes = " ".join(v.left_out)
    assert "strategy 'constant'" in notes and "no successful cell on friedman" in notes
    assert "strategy 'broken'" in notes
    # the failed strategy still shows per dataset, without a score
    b = v.intervals[v.intervals.strategy == "broken"]
    assert len(b) == 2 and b["mean"].isna().all() and (b["cells"] == 0).all()
    assert (b["planned"] == 6).all()
    # classification accuracy and regression RMSE are pooled by rank; Wilcoxon differences
    # are put on each dataset's noise scale
    assert v.primary == {"wine": "accuracy", "friedman": "neg_root_mean_squared_error"}
    assert v.scale == "pair noise"
    # two datasets, three pairs: Wilcoxon–Holm cannot reject, and the verdict says so
    assert v.powerless and "With 2 datasets" in " ".join(words.notes(v))
    assert not v.across["wilcoxon_differs"].any()
    assert any("left out" in s for s in words.summary(v))
    # Wilcoxon on each pair's own noise: dropping 'gb' changes no other pair's p-value
    without = verdict(frame[frame.strategy != "gb"])
    a = v.across.set_index(["a", "b"])
    b = without.across.set_index(["a", "b"])
    for key in b.index:
        assert b.loc[key, "p"] == a.loc[key, "p"]
    # the average ranks equal SciPy's rankdata of the per-dataset means (higher is better)
    kept = frame[frame.strategy.isin(["tree", "forest", "gb"]) & (frame.status == "ok")]
    ref = []
    for ds, metric in v.primary.items():
        means = kept[kept.dataset == ds].groupby("strategy")[metric].mean()
        ref.append(pd.Series(rankdata(-means.to_numpy()), index=means.index))
    assert v.ranks.to_dict() == pytest.approx(pd.concat(ref, axis=1).mean(axis=1).to_dict())


def test_complete_block_drops_what_loses_fewest_scores():
    nan = np.nan
    m = pd.DataFrame({"a": [1, 2, 3, 4], "b": [1, 2, 3, nan], "c": [1, 2, 3, 4]},
                     index=["d1", "d2", "d3", "d4"], dtype=float)
    block, dropped = complete_block(m)
    # dropping b loses 3 scores, dropping d4 loses 2: d4 goes
    assert list(block.index) == ["d1", "d2", "d3"] and list(block.columns) == ["a", "b", "c"]
    assert dropped == [("dataset", "d4", ["b"])]
    wide = pd.DataFrame({"a": [1, 2, 3, 4], "b": [nan, 2, 3, 4]}, index=m.index, dtype=float)
    block, dropped = complete_block(wide)
    # dropping b loses 3, dropping d1 loses 1
    assert dropped == [("dataset", "d1", ["b"])]
    tie = pd.DataFrame({"a": [1, 2], "b": [nan, 2]}, index=["d1", "d2"], dtype=float)
    block, dropped = complete_block(tie)
    # equal loss (one score either way): the strategy goes, the datasets stay
    assert dropped == [("strategy", "b", ["d1"])] and list(block.index) == ["d1", "d2"]
    assert complete_block(m.dropna())[1] == []


def test_tied_runs_by_hand():
    order = ["a", "b", "c", "d"]
    differs = {frozenset(p): False for p in [("a", "b"), ("b", "c"), ("c", "d"), ("b", "d")]}
    differs.update({frozenset(("a", "c")): True, frozenset(("a", "d")): True})
    # a–b tied; b, c, d all tied with each other; a differs from c and d
    assert tied_runs(order, differs) == [["a", "b"], ["b", "c", "d"]]
    everything = {frozenset(p): False for p in
                  [("a", "b"), ("a", "c"), ("a", "d"), ("b", "c"), ("b", "d"), ("c", "d")]}
    assert tied_runs(order, everything) == [order]
    assert tied_runs(order, {k: True for k in everything}) == []


def _frame(points: dict[str, tuple[float, float, float]], datasets=("d1", "d2"),
           jitter: float = 0.0) -> pd.DataFrame:
    """A results frame with 4 cells per dataset × strategy: (accuracy, fit s, predict s);
    ``jitter``: relative spread of the fit times over the cells."""
    rows = []
    for ds in datasets:
        for name, (acc, fit, pred) in points.items():
            for i in range(4):
                fit_i = fit * (1 + jitter * (i - 1.5))
                rows.append({"key": f"{ds}{name}{i}", "dataset": ds, "strategy": name,
                             "family": "forest", "method": "random-forest",
                             "task": "classification", "repeat": i // 2,
                             "fold": i % 2, "n_train": 100, "n_test": 100, "status": "ok",
                             "fit_seconds": fit_i, "predict_seconds": pred,
                             "accuracy": acc + 0.01 * (i % 2), "curve": None})
    return pd.DataFrame(rows)


def test_pareto_names_the_dominated_and_who_dominates_them():
    frame = _frame({"fast": (0.80, 0.1, 0.05), "good": (0.90, 1.0, 0.01),
                    "slow-good": (0.90, 3.0, 0.02), "bad": (0.70, 2.0, 0.10)})
    v = verdict(frame)
    p = v.pareto.set_index(["scope", "cost_kind", "strategy"])
    assert p.loc[("d1", "fit", "fast"), "on_front"] and p.loc[("d1", "fit", "good"), "on_front"]
    # slow-good: same score as good, higher cost; bad: worse and dearer than fast and good
    assert p.loc[("d1", "fit", "slow-good"), "dominated_by"] == "good"
    assert p.loc[("d1", "fit", "bad"), "dominated_by"] == "fast, good"
    # prediction time: good is cheapest and best, so it dominates everyone else; slow-good
    # (0.90 at 0.02 s) is also better and cheaper than fast (0.80 at 0.05 s)
    assert p.loc[("d1", "predict", "fast"), "dominated_by"] == "good, slow-good"
    assert p.loc[("d1", "predict", "slow-good"), "dominated_by"] == "good"
    # over all datasets: average rank (good and slow-good tie at 1.5) against geometric-mean time
    allp = v.pareto[(v.pareto.scope == "all datasets") & (v.pareto.cost_kind == "fit")] \
        .set_index("strategy")
    assert allp.loc["good", "score"] == pytest.approx(1.5)
    assert allp.loc["slow-good", "dominated_by"] == "good"
    assert allp.loc["fast", "on_front"] and not allp.loc["bad", "on_front"]
    assert v.costs.set_index("strategy").loc["good", "fit_seconds"] == pytest.approx(1.0)
    text = " ".join(words.summary(v))
    assert "slow-good (by good)" in text
    # costs within their timing noise count as equal: nothing dominates on a 3 % difference
    noisy = _frame({"x": (0.90, 1.00, 0.01), "y": (0.90, 1.03, 0.01)}, jitter=0.1)
    nv = verdict(noisy)
    fit = nv.pareto[(nv.pareto.scope == "d1") & (nv.pareto.cost_kind == "fit")]
    assert fit["on_front"].all()


def test_outputs_written_by_the_run(dominance):
    result, _ = dominance
    folder = result.folder
    for name in ("intervals", "pairs", "pareto", "ranks", "tests", "pairs_across"):
        for ext in ("csv", "md"):
            assert (folder / "tables" / f"{name}.{ext}").stat().st_size > 0, name
    pairs = pd.read_csv(folder / "tables" / "pairs_across.csv")
    assert pairs.loc[0, "p"] == pytest.approx(0.03125)
    md = (folder / "tables" / "intervals.md").read_text()
    assert "## iris: accuracy (higher is better)" in md and "worse than best" in md
    tests_md = (folder / "tables" / "tests.md").read_text()
    assert "Iman–Davenport F" in tests_md
    assert "forest ranks first" in (folder / "summary.md").read_text()
    for name in ("critical_difference", "wilcoxon_holm_groups", "rank_vs_fit_time",
                 "score_vs_fit_time", "probability_bars", "posterior_triangles"):
        data = (folder / "plots" / f"{name}.png").read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 5000, name
    assert result.outputs.verdict.best == "forest"


# ------------------------------------------------------------------ the three verdicts

HOLDOUT_SUITE = """
[suite]
name = "one-split"

[protocol]
splits = "holdout"
test_fraction = 0.5
repeats = 1
seed = 3

[[dataset]]
name = "hastie"
from = "generator"
make = "make_hastie_10_2"
params = { n_samples = 3000, random_state = 1 }

[[strategy]]
name = "stump"
method = "single-tree"
params = { max_depth = 1 }

[[strategy]]
name = "boost"
method = "hist-gradient-boosting"
params = { max_iter = 60 }
"""


def test_one_split_far_worse_is_said_from_the_test_rows(run_once):
    # one holdout split, 1,500 test rows: no fold-to-fold variance, so the evidence is the
    # paired per-row correctness; a stump is far worse than boosting on Hastie's problem
    result = run_once(HOLDOUT_SUITE, "holdout")
    frame = load_results(result.folder)
    assert frame["row_evidence"].notna().all()
    v = verdict(frame)
    pair = v.pairs.iloc[0]
    assert pair["test"] == "McNemar exact" and pair["evidence"] == "test rows"
    assert pair["pairs"] == 1500 and pair["verdict"] == "better" and pair["better"] == "boost"
    assert pair["p"] < 1e-6
    stump = v.intervals.set_index("strategy").loc["stump"]
    assert stump["standing"] == "worse than best"
    line = " ".join(words.bottom_line(v))
    assert "judged on its test rows (one split)" in line and "worse: stump" in line
    md = (result.folder / "tables" / "pairs.md").read_text()
    assert "McNemar exact" in md and "boost better" in md and "tied" not in md


EQUIVALENT_SUITE = """
[suite]
name = "twins"

[protocol]
folds = 5
repeats = 2
seed = 2

[[dataset]]
name = "cancer"
from = "sklearn"
load = "load_breast_cancer"

[[dataset]]
name = "tiny"
from = "generator"
make = "make_classification"
params = { n_samples = 40, n_features = 5, n_informative = 3, flip_y = 0.3, random_state = 4 }

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 30 }

[[strategy]]
name = "forest-again"
method = "random-forest"
params = { n_estimators = 30 }

[[strategy]]
name = "stump"
method = "single-tree"
params = { max_depth = 1 }
"""


def test_identical_is_equivalent_real_difference_better_tiny_undecided(run_once):
    result = run_once(EQUIVALENT_SUITE, "twins")
    v = verdict(load_results(result.folder))
    pairs = v.pairs.set_index(["dataset", "a", "b"])
    # the same configuration under two names: the same scores, practically equivalent
    twin = pairs.loc[("cancer", "forest", "forest-again")]
    assert twin["verdict"] == "practically equivalent" and twin["p_eq"] == 1.0
    # a forest against a stump on 569 rows: a real difference
    real = pairs.loc[("cancer", "forest", "stump")]
    assert real["verdict"] == "better" and real["better"] == "forest"
    # 40 noisy rows: neither better nor equivalent can be shown, and the advice says what
    # more data would do
    tiny = pairs.loc[("tiny", "forest", "stump")]
    assert tiny["verdict"] == "undecided" and tiny["advice"]
    assert "repeats" in tiny["advice"] or "rows" in tiny["advice"]
    text = " ".join(words.bottom_line(v))
    assert "practically equivalent to forest-again" in text or "forest-again" in text
    md = (result.folder / "tables" / "pairs.md").read_text()
    assert "P(equivalent)" in md and "region ±0.01" in md
    assert "undecided" in md and "practically equivalent" in md


def test_the_datasets_hint_names_every_estimate_it_has():
    # the rough estimates of the undecided pairs: a range of the ones up to 200, a word for
    # those beyond, nothing for pairs without an estimate (0)
    need = lambda *xs: pd.DataFrame({"datasets_needed": list(xs)})  # noqa: E731
    assert words.datasets_hint(need(12, 60, 12)) == (
        " — more datasets would decide it: about 12 to 60 in all, if new ones behave like these")
    assert "about 12 to 60 in all (more than 200 for some pairs)" in words.datasets_hint(
        need(12, 60, 250))
    assert words.datasets_hint(need(250)).startswith(" — more than 200 datasets")
    assert words.datasets_hint(need(0)) == "" and words.datasets_hint(need()) == ""
