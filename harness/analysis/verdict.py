"""From the results frame to verdicts: which differences are real, which are too small to
matter, which the data cannot tell — and at what cost.

The statistics are the pure functions of `harness.analysis.stats` (frequentist),
`harness.analysis.bayes` (posteriors) and `harness.analysis.per_dataset` (one dataset); this
module is the glue between the results frame (one row per cell) and those functions. The words
a reader sees are made from the `Verdict` in `harness.report.words`.

Three verdicts, everywhere
    For a pair on a dataset, or across datasets: *better* when the probability that one is
    better by more than the region of practical equivalence (the suite's ``[equivalence]``, per
    metric; `harness.scorers.default_margin`) reaches the certainty (default 0.95); *practically
    equivalent* when the probability of a difference within the region does; *undecided*
    otherwise, with what more data would help.

Per dataset
    Each dataset is judged on its first metric (the first the suite lists for its task); see
    `harness.analysis.per_dataset` (Bayesian correlated t-test over folds, or the per-row
    evidence of a single split).

Across datasets
    Each dataset counts once. Classification and regression datasets are pooled by rank (a rank
    has no unit). The tests need every strategy scored on every dataset, so they run on a
    *complete block*: while some strategy lacks a score on some dataset (every cell failed or
    timed out, or the strategy has no estimator for the dataset's task), the strategy or dataset
    whose removal loses fewer scores is left out — the strategy on a tie, since datasets are the
    sample the tests count. Missing scores are never imputed or given the worst rank: that would
    fold a failure rate into an accuracy ranking (failures have their own table). Everything left
    out is named in `Verdict.left_out`.

    The verdict of a pair is the Bayesian signed-rank test on the per-dataset differences, each
    divided by that dataset's region half-width (so the region is ±1 on every dataset, whatever
    the metric), with the Hodges–Lehmann median difference as the effect size. Beside it: average
    ranks, the Friedman test with the Iman–Davenport F, the Nemenyi critical difference, and
    pairwise Wilcoxon signed-rank tests with Holm's correction (Demšar 2006; Benavoli, Corani &
    Mangili 2016 on why pairwise tests rather than mean ranks). The Wilcoxon test ranks the sizes
    of the differences, so they must share a scale: raw differences when every dataset has the
    same unit-free metric; otherwise each pair's difference on a dataset is divided by the
    standard deviation of that pair's own fold-to-fold differences there (the region half-width
    for a single split), so adding or dropping a third strategy never changes a pair's p-value.

Cost
    Pareto fronts of score against mean fit time and against prediction time per 1,000 rows,
    per dataset (mean score) and over all datasets (average rank against the geometric mean over
    datasets of the per-dataset mean times; the geometric mean because times of different
    datasets differ by orders of magnitude, and a ratio between strategies should not depend on
    which dataset is slowest — common practice for summarising times). Costs count as equal
    unless they differ by more than twice the standard error of their difference (timing noise).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from harness.analysis import bayes, stats
from harness.analysis.per_dataset import (BETTER, EQUIVALENT, PAIR_COLUMNS, UNDECIDED, judge,
                                         word)
from harness.analysis.results import geometric_mean, ok_cells, primary_metrics, strategy_means
from harness.scorers import Margin, unit_free
from harness.scorers import Equivalence

__all__ = ["Verdict", "verdict", "tied_runs", "complete_block", "ALPHA", "BETTER",
           "EQUIVALENT", "UNDECIDED", "TRIANGLE_POINTS"]

ALPHA = 0.05  # the significance level of every frequentist test (1 − level intervals)
TRIANGLE_POINTS = 3000  # posterior samples of each pair kept for the triangle plot


@dataclass
class Verdict:
    """Everything the verdict tables, plots and the report show.

    Attributes
    ----------
    alpha : float
        Significance level of the frequentist tests (intervals are at ``1 − alpha``).
    certainty : float
        The probability a verdict of *better* or *practically equivalent* needs.
    margins : dict
        Metric → `Margin`: the region of practical equivalence of each metric judged.
    primary : dict
        Dataset → the metric it is judged on.
    intervals : DataFrame
        Per dataset × strategy: ``dataset, metric, strategy, family, cells, planned, mean, low,
        high, best, p_near_best, standing, margin, evidence, fit_seconds,
        predict_ms_per_1000_rows``. ``planned`` counts every stored cell (failed ones too);
        ``best`` marks the highest mean; ``p_near_best`` is the probability of being within the
        region of the best or better (the best not fixed in advance).
    pairs : DataFrame
        Per dataset × pair (`harness.analysis.per_dataset.PAIR_COLUMNS`): the frequentist test
        (``t, p, low, high``: corrected t-test, or McNemar / paired t-test on test rows) and
        the posterior (``p_a, p_eq, p_b``), the ``verdict`` word, ``better`` (the winner or
        empty) and ``advice`` for an undecided pair.
    matrix : DataFrame
        The complete block: datasets × strategies, mean first-metric score.
    left_out : list of str
        What was left out of the across-dataset tests and why.
    ranks : Series
        Average rank per strategy over the block (1 = best), best first.
    friedman : FriedmanResult or None
        None when the block has fewer than two datasets or two strategies.
    cd : float or None
        Nemenyi critical difference (average ranks).
    nemenyi_groups, wilcoxon_groups : list of list of str
        Runs of strategies (in rank order) not told apart by each test: the bars of the
        diagrams.
    across : DataFrame
        Per pair (``a`` ranked ahead of ``b``): ``a, b, rank_a, rank_b, rank_diff,
        nemenyi_differs, n_datasets, p_a, p_eq, p_b, verdict, better, advice, effect,
        effect_low, effect_high, a_wins, b_wins, median_diff, statistic, p, p_holm,
        wilcoxon_differs, wins, equivalent, undecided, losses`` (the last four: a descriptive
        tally of the per-dataset verdicts from ``a``'s side). ``effect``: Hodges–Lehmann median
        difference ``a − b`` in `effect_unit`.
    posterior : dict
        ``(a, b)`` → samples (``TRIANGLE_POINTS × 3``) of the signed-rank posterior (b better,
        equivalent, a better): the points of the triangle plot.
    scale : str
        How the Wilcoxon differences were scaled: ``"raw"`` or ``"pair noise"``.
    effect_unit : str
        The unit of ``across.effect``: a metric name (raw) or ``"region"`` (half-widths).
    costs : DataFrame
        Per strategy over the block: ``strategy, family, method, fit_seconds,
        predict_ms_per_1000_rows`` (geometric means over datasets) and their standard errors.
    pareto : DataFrame
        ``scope, cost_kind, strategy, score, cost, on_front, dominated_by``; scope is a dataset
        name or ``"all datasets"`` (whose score is the average rank, lower is better).
    smallest_p, needed_p : float or None
        The smallest two-sided Wilcoxon p-value the block's number of datasets allows, and
        the p Holm's first step needs; when ``smallest_p > needed_p`` no Wilcoxon–Holm
        difference is possible (`powerless`).
    """

    alpha: float
    certainty: float
    margins: dict[str, Margin]
    primary: dict[str, str]
    intervals: pd.DataFrame
    pairs: pd.DataFrame
    matrix: pd.DataFrame
    left_out: list[str] = field(default_factory=list)
    ranks: pd.Series | None = None
    friedman: stats.FriedmanResult | None = None
    cd: float | None = None
    nemenyi_groups: list[list[str]] = field(default_factory=list)
    wilcoxon_groups: list[list[str]] = field(default_factory=list)
    across: pd.DataFrame | None = None
    posterior: dict[tuple[str, str], np.ndarray] = field(default_factory=dict)
    scale: str = "raw"
    effect_unit: str = "region"
    costs: pd.DataFrame | None = None
    pareto: pd.DataFrame | None = None
    smallest_p: float | None = None
    needed_p: float | None = None

    @property
    def powerless(self) -> bool:
        """Whether the block is too small for any Wilcoxon–Holm difference."""
        return self.smallest_p is not None and self.smallest_p > self.needed_p

    @property
    def tested(self) -> bool:
        """Whether the across-dataset tests ran (at least two datasets and two strategies)."""
        return self.friedman is not None

    @property
    def best(self) -> str | None:
        return None if self.ranks is None or self.ranks.empty else str(self.ranks.index[0])

    @property
    def leaders(self) -> list[str]:
        """The strategies sharing the best average rank (equal ranks are equal)."""
        if self.ranks is None or self.ranks.empty:
            return []
        top = self.ranks.iloc[0]
        return [str(s) for s, r in self.ranks.items() if np.isclose(r, top)]

    def standing(self, dataset: str) -> dict:
        """On one dataset: ``best`` (highest mean), ``near`` (probability of being within the
        region of the best or better at least the certainty, best mean first, the best
        included when it qualifies), and the cheapest of ``near`` (or the best alone) to fit
        and to predict."""
        part = self.intervals[(self.intervals["dataset"] == dataset)
                              & self.intervals["mean"].notna()]
        if part.empty:
            return {}
        part = part.sort_values("mean", ascending=False, kind="stable")
        best = str(part.loc[part["best"], "strategy"].iloc[0])
        near = part[part["p_near_best"].fillna(0) >= self.certainty]
        group = near if len(near) else part[part["strategy"] == best]
        return {"best": best, "near": [str(s) for s in near["strategy"]],
                "cheapest_to_fit": str(group.loc[group["fit_seconds"].idxmin(), "strategy"]),
                "cheapest_to_predict": str(group.loc[group["predict_ms_per_1000_rows"].idxmin(),
                                                     "strategy"])}

    def judged_margins(self) -> dict[str, Margin]:
        """Metric → region, for the metrics datasets are judged on, in order."""
        return {m: self.margins[m] for m in dict.fromkeys(self.primary.values())}


# ------------------------------------------------------------------ building blocks


def complete_block(scores: pd.DataFrame) -> tuple[pd.DataFrame, list[tuple[str, str, list[str]]]]:
    """The largest complete part of a datasets × strategies matrix, found greedily.

    While an entry is missing, drop the strategy (column) or dataset (row) with a missing entry
    whose removal loses the fewest present scores; on equal loss drop the strategy, then the
    one that comes first. Rows or columns left with nothing are dropped first.

    Returns
    -------
    block : DataFrame
        No missing entries (possibly empty).
    dropped : list of (kind, name, missing)
        ``kind`` is ``"strategy"`` or ``"dataset"``; ``missing`` lists the datasets (for a
        strategy) or strategies (for a dataset) it lacked when it was dropped.
    """
    m = scores.copy()
    dropped: list[tuple[str, str, list[str]]] = []
    while m.size and m.isna().to_numpy().any():
        present = m.notna()
        options = []
        for col in m.columns:
            if present[col].all():
                continue
            options.append((int(present[col].sum()), 0, str(col), "strategy", col))
        for row in m.index:
            if present.loc[row].all():
                continue
            options.append((int(present.loc[row].sum()), 1, str(row), "dataset", row))
        _, _, _, kind, name = min(options)
        if kind == "strategy":
            dropped.append((kind, str(name), [str(i) for i in m.index[m[name].isna()]]))
            m = m.drop(columns=[name])
        else:
            dropped.append((kind, str(name), [str(c) for c in m.columns[m.loc[name].isna()]]))
            m = m.drop(index=[name])
    return m, dropped


def tied_runs(order: list[str], differs: dict[frozenset, bool]) -> list[list[str]]:
    """Maximal runs of consecutive strategies (in ``order``, best first) in which no pair is
    told apart; only runs of two or more, none inside another. ``differs`` maps a pair (as a
    frozenset) to whether the test told it apart."""
    groups: list[list[str]] = []
    end = -1
    for i in range(len(order)):
        j = max(i, end)
        while j + 1 < len(order) and not any(differs[frozenset((order[x], order[j + 1]))]
                                             for x in range(i, j + 1)):
            j += 1
        if j > i and j > end:
            groups.append(order[i:j + 1])
            end = j
    return groups


# ------------------------------------------------------------------ the verdict

def verdict(frame: pd.DataFrame, metrics: dict[str, list[str]] | None = None,
            equivalence: Equivalence | None = None, alpha: float = ALPHA) -> Verdict:
    """Per-dataset and across-dataset verdicts and cost fronts for a results frame.

    Parameters
    ----------
    frame : DataFrame
        The store's results frame (`harness.store.Store.cells_frame`), one row per cell.
    metrics : dict, optional
        Task → metric names as the suite lists them (the first is each dataset's metric);
        default: the first metric column with values.
    equivalence : Equivalence, optional
        The region of practical equivalence per metric and the certainty (the suite's
        ``[equivalence]``); default: the documented defaults.
    alpha : float, default 0.05
        Significance level of the frequentist tests.
    """
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1), got {alpha}")
    equivalence = equivalence or Equivalence()
    primary = primary_metrics(frame, metrics)
    ok = ok_cells(frame)
    means = strategy_means(frame, primary)
    margins = {m: equivalence.margin(m) for m in dict.fromkeys(primary.values())}
    intervals, pairs = _per_dataset(frame, ok, primary, means, margins, equivalence.certainty,
                                    alpha)
    v = Verdict(alpha=alpha, certainty=equivalence.certainty, margins=margins, primary=primary,
                intervals=intervals, pairs=pairs, matrix=pd.DataFrame())
    if means.empty:
        return v
    scores = means.pivot(index="dataset", columns="strategy", values="score")
    scores = scores.reindex(index=list(means["dataset"].unique()),
                            columns=list(means["strategy"].unique()))
    block, dropped = complete_block(scores)
    v.matrix = block
    for kind in ("strategy", "dataset"):
        judged = set(means[kind])
        for name in frame[kind].unique():
            if name not in judged:
                v.left_out.append(f"{kind} '{name}' has no successful cell"
                                  + (" on any dataset" if kind == "strategy" else ""))
    for kind, name, missing in dropped:
        if kind == "strategy":
            v.left_out.append(f"strategy '{name}' is left out of the across-dataset comparison: "
                              f"it has no successful cell on {', '.join(missing)}")
        else:
            v.left_out.append(f"dataset '{name}' is left out of the across-dataset comparison: "
                              f"{', '.join(missing)} have no successful cell on it")
    n, k = block.shape
    if k >= 1 and n >= 1:
        v.ranks = stats.average_ranks(block).sort_values(kind="stable") if k >= 2 else \
            pd.Series(1.0, index=block.columns, name="average_rank")
    v.costs = _costs(means, block)
    v.pareto = _pareto(means, v)
    if n >= 2 and k >= 2:
        _across(v, block, pairs)
    return v


def _per_dataset(frame, ok, primary, means, margins, certainty, alpha):
    parts_i, parts_p = [], []
    for metric in dict.fromkeys(primary.values()):
        names = [d for d, m in primary.items() if m == metric]
        sub = ok[ok["dataset"].isin(names)]
        if sub.empty:
            continue
        strategies, pairs = judge(sub, metric, margins[metric], certainty, alpha)
        parts_i.append(strategies)
        parts_p.append(pairs)
    icols = ["dataset", "metric", "strategy", "family", "cells", "planned", "mean", "low", "high",
             "best", "p_near_best", "standing", "margin", "evidence", "fit_seconds",
             "predict_ms_per_1000_rows"]
    if not parts_i:
        return pd.DataFrame(columns=icols), pd.DataFrame(columns=PAIR_COLUMNS)
    iv = pd.concat(parts_i, ignore_index=True)
    pr = pd.concat(parts_p, ignore_index=True)
    planned = frame.groupby(["dataset", "strategy"]).size()
    iv["planned"] = [int(planned.get((d, s), 0)) for d, s in zip(iv["dataset"], iv["strategy"])]
    fam = frame.groupby("strategy")["family"].first()
    iv["family"] = iv["strategy"].map(fam)
    cost = means.set_index(["dataset", "strategy"])
    idx = pd.MultiIndex.from_arrays([iv["dataset"], iv["strategy"]])
    iv["fit_seconds"] = cost["fit_seconds"].reindex(idx).to_numpy()
    iv["predict_ms_per_1000_rows"] = cost["predict_ms_per_1000_rows"].reindex(idx).to_numpy()
    # strategies with cells on a dataset but none successful: shown, with no score
    have = set(zip(iv["dataset"], iv["strategy"]))
    extra = [{"dataset": d, "metric": primary[d], "strategy": s, "family": fam.get(s),
              "cells": 0, "planned": int(c), "best": False, "standing": "no successful cell"}
             for (d, s), c in planned.items() if (d, s) not in have and d in primary]
    if extra:
        iv = pd.concat([iv, pd.DataFrame(extra)], ignore_index=True)
        order = {d: i for i, d in enumerate(iv["dataset"].unique())}
        iv = iv.sort_values("dataset", key=lambda s: s.map(order), kind="stable")
    return iv[icols].reset_index(drop=True), pr


def _costs(means: pd.DataFrame, block: pd.DataFrame) -> pd.DataFrame:
    sub = means[means["dataset"].isin(block.index) & means["strategy"].isin(block.columns)]
    rows = []
    for st in block.columns:
        part = sub[sub["strategy"] == st]
        row = {"strategy": st, "family": part["family"].iloc[0] if len(part) else None,
               "method": part["method"].iloc[0] if len(part) else None}
        for col in _COST_KINDS.values():
            gm = geometric_mean(part[col])
            # standard error of the geometric mean from the per-dataset relative errors
            rel = (part[col + "_se"] / part[col]).to_numpy(float)
            rel = rel[np.isfinite(rel)]
            row[col] = gm
            row[col + "_se"] = gm * float(np.sqrt(np.sum(rel ** 2))) / max(len(rel), 1)
        rows.append(row)
    return pd.DataFrame(rows, columns=["strategy", "family", "method", "fit_seconds",
                                       "predict_ms_per_1000_rows", "fit_seconds_se",
                                       "predict_ms_per_1000_rows_se"])


_COST_KINDS = {"fit": "fit_seconds", "predict": "predict_ms_per_1000_rows"}


def _front_rows(scope: str, kind: str, names: list[str], score: np.ndarray, cost: np.ndarray,
                noise: np.ndarray, rank_scale: bool) -> list[dict]:
    """The Pareto front of one scope and cost kind, a row per strategy with a score and a
    cost (``noise``: the cost's standard error; ``rank_scale``: lower scores are better)."""
    have = ~(np.isnan(score) | np.isnan(cost))
    names = [n for n, h in zip(names, have) if h]
    score, cost = score[have], cost[have]
    noise = np.nan_to_num(noise[have], nan=0.0)
    dom = stats.dominance(-score if rank_scale else score, cost, noise)
    return [{"scope": scope, "cost_kind": kind, "strategy": name, "score": float(score[i]),
             "cost": float(cost[i]), "on_front": not dom[:, i].any(),
             "dominated_by": ", ".join(names[j] for j in np.flatnonzero(dom[:, i]))}
            for i, name in enumerate(names)]


def _pareto(means: pd.DataFrame, v: Verdict) -> pd.DataFrame:
    rows = []
    for ds, part in means.groupby("dataset", sort=False):
        names, score = part["strategy"].tolist(), part["score"].to_numpy(float)
        for kind, col in _COST_KINDS.items():
            rows += _front_rows(ds, kind, names, score, part[col].to_numpy(float),
                                part[col + "_se"].to_numpy(float), rank_scale=False)
    if v.ranks is not None and v.costs is not None and len(v.ranks) >= 2 \
            and len(v.matrix) >= 2:
        c = v.costs.set_index("strategy")
        names = [str(s) for s in v.ranks.index]
        for kind, col in _COST_KINDS.items():
            rows += _front_rows("all datasets", kind, names, v.ranks.to_numpy(float),
                                c[col].reindex(v.ranks.index).to_numpy(float),
                                c[col + "_se"].reindex(v.ranks.index).to_numpy(float),
                                rank_scale=True)
    return pd.DataFrame(rows, columns=["scope", "cost_kind", "strategy", "score", "cost",
                                       "on_front", "dominated_by"])


def _across(v: Verdict, block: pd.DataFrame, pairs: pd.DataFrame) -> None:
    n, k = block.shape
    order = [str(s) for s in v.ranks.index]
    block = block[order]
    v.friedman = stats.friedman(block)
    v.cd = stats.nemenyi_cd(k, n, v.alpha)
    v.nemenyi_groups = stats.nemenyi_groups(v.ranks, v.cd)
    ia, ib = (list(x) for x in zip(*[(i, j) for i in range(k) for j in range(i + 1, k)]))
    names_a, names_b = [order[i] for i in ia], [order[j] for j in ib]
    x = block.to_numpy(float)
    raw = (x[:, ia] - x[:, ib]).T                                   # pairs × datasets
    width = v.intervals.drop_duplicates("dataset").set_index("dataset")["margin"] \
        .reindex(block.index).to_numpy(float)
    in_region = raw / width                                         # region half-widths
    # per-dataset pairs, oriented (a ranked ahead, b)
    here = pairs[pairs["dataset"].isin(block.index) & pairs["a"].isin(order)
                 & pairs["b"].isin(order)]
    pos = {s: i for i, s in enumerate(order)}
    flip = np.array([pos[a] > pos[b] for a, b in zip(here["a"], here["b"])], dtype=bool)
    oriented = here.assign(a=np.where(flip, here["b"], here["a"]),
                           b=np.where(flip, here["a"], here["b"]))
    metrics = {v.primary[d] for d in block.index}
    single = len(metrics) == 1 and unit_free(next(iter(metrics)))
    if single:
        w_diffs, v.scale = raw, "raw"
    else:  # each pair on each dataset in units of its own fold-to-fold differences
        sd = oriented.set_index(["a", "b", "dataset"])["sd"]
        wanted = pd.MultiIndex.from_arrays([np.repeat(names_a, n), np.repeat(names_b, n),
                                            np.tile(block.index.to_numpy(), len(names_a))])
        pair_sd = sd.reindex(wanted).to_numpy(float).reshape(len(names_a), n)
        pair_sd = np.where(np.isfinite(pair_sd) & (pair_sd > 0), pair_sd, width[None, :])
        w_diffs, v.scale = raw / pair_sd, "pair noise"
    w = stats.wilcoxon_pairs(w_diffs, names_a, names_b, v.alpha)
    probs, kept = bayes.signed_rank(in_region, 1.0, keep=TRIANGLE_POINTS)
    verdicts = word(probs, v.certainty)
    same_margin = single and not next(iter(v.margins.values())).relative
    v.effect_unit = next(iter(metrics)) if same_margin else "region"
    effects = [bayes.hodges_lehmann(row, 1 - v.alpha) for row in (raw if same_margin
                                                                   else in_region)]
    tallies = stats.tally(oriented).set_index(["a", "b"])
    rows = []
    for p, (a, b) in enumerate(zip(names_a, names_b)):
        counts = tallies.loc[(a, b)] if (a, b) in tallies.index else pd.Series(
            {"wins": 0, "equivalent": 0, "undecided": 0, "losses": 0})
        diff = float(v.ranks[b] - v.ranks[a])
        code = verdicts[p]
        need = (bayes.datasets_needed(in_region[p], 1.0, v.certainty) if code == "" else 0)
        r = w.iloc[p]
        rows.append({"a": a, "b": b, "rank_a": float(v.ranks[a]), "rank_b": float(v.ranks[b]),
                     "rank_diff": diff, "nemenyi_differs": bool(diff >= v.cd),
                     "n_datasets": n, "p_a": probs[p, 2], "p_eq": probs[p, 1],
                     "p_b": probs[p, 0],
                     "verdict": BETTER if code in ("a", "b") else
                     EQUIVALENT if code == "equivalent" else UNDECIDED,
                     "better": a if code == "a" else b if code == "b" else "",
                     "datasets_needed": need,
                     "effect": effects[p][0], "effect_low": effects[p][1],
                     "effect_high": effects[p][2],
                     "a_wins": int(r["a_wins"]), "b_wins": int(r["b_wins"]),
                     "median_diff": float(r["median_diff"]), "statistic": r["statistic"],
                     "p": float(r["p"]), "p_holm": float(r["p_holm"]),
                     "wilcoxon_differs": bool(r["reject"]),
                     **{c: int(counts[c]) for c in ("wins", "equivalent", "undecided",
                                                     "losses")}})
        v.posterior[(a, b)] = kept[p]
    v.across = pd.DataFrame(rows)
    differs = {frozenset((r["a"], r["b"])): r["wilcoxon_differs"] for r in rows}
    v.wilcoxon_groups = tied_runs(order, differs)
    m = len(rows)
    # Exact two-sided Wilcoxon signed-rank p-values are multiples of 2^-N; the smallest, when
    # one strategy wins on every dataset, is 2 · 2^-N (Wilcoxon's null distribution:
    # every sign pattern equally likely). Holm's first step compares it with alpha / m.
    v.smallest_p, v.needed_p = 2.0 ** (1 - n), v.alpha / m
