"""From the results frame to verdicts: which differences are real, and at what cost.

The statistics themselves are the pure functions of `harness.analysis.stats`; this module is
the glue between the results frame (one row per cell) and those functions. The words a reader
sees are made from the `Verdict` in `harness.report.words`.

Per dataset
    Each dataset is judged on its first metric (the first the suite lists for its task). Every
    strategy gets its mean over repeats × folds with the corrected interval, and every pair the
    corrected resampled t-test on the (repeat, fold) cells both have; a pair is *tied* when the
    test does not reject equality at ``alpha``.

Across datasets
    Each dataset counts once. Classification and regression datasets are pooled by rank (a rank
    has no unit). The tests need every strategy scored on every dataset, so they run on a
    *complete block*: while some strategy lacks a score on some dataset (every cell failed or
    timed out, or the strategy has no estimator for the dataset's task), the strategy or dataset
    whose removal loses fewer scores is left out — the strategy on a tie, since datasets are the
    sample the tests count. Missing scores are never imputed or given the worst rank: that would
    fold a failure rate into an accuracy ranking (failures have their own table). Everything left
    out is named in `Verdict.left_out`.

    On the block: average ranks, the Friedman test with the Iman–Davenport F, the Nemenyi
    critical difference, and pairwise Wilcoxon signed-rank tests with Holm's correction — the
    default verdict, following Benavoli, Corani & Mangili (2016), "Should we really use post-hoc
    tests based on mean-ranks?", JMLR 17: a mean-rank test's outcome for two strategies depends
    on which other strategies are in the comparison; the Wilcoxon test of a pair does not.
    Win/tie/loss counts per pair use the per-dataset corrected t-test.

    The Wilcoxon test ranks the sizes of the per-dataset differences, so those must share a
    scale. Raw differences are used when every dataset of the block has the same first metric
    and it is unit-free (accuracy, r2, AUC, …); otherwise each dataset's differences are divided
    by that dataset's fold-to-fold standard deviation (pooled over strategies), i.e. measured in
    units of the dataset's own noise.

    The one ranking of the report is the block's average ranks: a strategy missing on some
    dataset is named in ``left_out``, never ranked over fewer datasets.

Cost
    Pareto fronts of score against mean fit time and against prediction time per 1,000 rows,
    per dataset (mean score) and over all datasets (average rank against the geometric mean over
    datasets of the per-dataset mean times; the geometric mean because times of different
    datasets differ by orders of magnitude, and a ratio between strategies should not depend on
    which dataset is slowest — common practice for summarising times).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from harness.analysis import stats
from harness.analysis.results import (geometric_mean, ok_cells, pooled_sd, primary_metrics,
                                      strategy_means)

__all__ = ["Verdict", "verdict", "tied_runs", "complete_block", "ALPHA", "unit_free"]

ALPHA = 0.05  # the significance level of every test and recommendation (1 − level intervals)

# Scorers whose values have no unit and the same range on every dataset (proportions,
# correlations, r2): differences of these can be compared across datasets as they are.
_UNIT_FREE = ("accuracy", "balanced_accuracy", "top_k_accuracy", "r2", "explained_variance",
              "roc_auc", "average_precision", "f1", "precision", "recall", "jaccard",
              "matthews_corrcoef", "adjusted_rand_score")


def unit_free(metric: str) -> bool:
    """Whether a scorer's differences mean the same on every dataset (``f1_macro`` counts as
    ``f1``; ``d2_*`` scores are unit-free like r2)."""
    return metric.startswith("d2_") or any(metric == u or metric.startswith(u + "_")
                                           for u in _UNIT_FREE)


@dataclass
class Verdict:
    """Everything the verdict tables, plots and the report show.

    Attributes
    ----------
    alpha : float
        Significance level of every test (intervals are at ``1 − alpha``).
    primary : dict
        Dataset → the metric it is judged on.
    intervals : DataFrame
        Per dataset × strategy: ``dataset, metric, strategy, family, cells, planned, mean, low,
        high, best, tied_with_best, fit_seconds, predict_ms_per_1000_rows``. ``planned`` counts
        every stored cell (failed ones too); ``best`` marks the highest mean.
    pairs : DataFrame
        Per dataset × pair: ``dataset, metric, a, b, pairs, mean_diff, low, high, t, df, p,
        tied, better`` (``mean_diff`` is ``a − b``; ``better`` names the winner or is empty).
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
        Per pair (``a`` ranked better than ``b``): ``a, b, rank_a, rank_b, rank_diff,
        nemenyi_differs, n_datasets, a_wins, b_wins, median_diff, statistic, p, p_holm,
        wilcoxon_differs, wins, ties, losses`` (the last three: per-dataset corrected t-test
        outcomes from ``a``'s side).
    scale : str
        How the Wilcoxon differences were scaled: ``"raw"`` or ``"noise"``.
    costs : DataFrame
        Per strategy over the block: ``strategy, family, method, fit_seconds,
        predict_ms_per_1000_rows``
        (geometric means over datasets).
    pareto : DataFrame
        ``scope, cost_kind, strategy, score, cost, on_front, dominated_by``; scope is a dataset
        name or ``"all datasets"`` (whose score is the average rank, lower is better).
    smallest_p, needed_p : float or None
        The smallest two-sided Wilcoxon p-value the block's number of datasets allows, and
        the p Holm's first step needs; when ``smallest_p > needed_p`` no Wilcoxon–Holm
        difference is possible (`powerless`).
    """

    alpha: float
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
    scale: str = "raw"
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

    def standing(self, dataset: str) -> dict:
        """On one dataset: ``best`` (highest mean), ``tied`` (not told apart from it, best
        mean first), and the cheapest of those to fit and to predict."""
        part = self.intervals[(self.intervals["dataset"] == dataset)
                              & self.intervals["mean"].notna()]
        if part.empty:
            return {}
        part = part.sort_values("mean", ascending=False, kind="stable")
        best = str(part.loc[part["best"], "strategy"].iloc[0])
        group = part[part["tied_with_best"] | part["best"]]
        return {"best": best,
                "tied": [str(s) for s in group["strategy"] if s != best],
                "cheapest_to_fit": str(group.loc[group["fit_seconds"].idxmin(), "strategy"]),
                "cheapest_to_predict": str(group.loc[group["predict_ms_per_1000_rows"].idxmin(),
                                                     "strategy"])}


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


def _noise_scale(ok: pd.DataFrame, dataset: str, metric: str, strategies) -> float:
    """Pooled fold-to-fold sd of ``metric`` on ``dataset`` over ``strategies``."""
    part = ok[(ok["dataset"] == dataset) & ok["strategy"].isin(list(strategies))]
    sd = pooled_sd(part, metric)
    if not np.isfinite(sd) or sd <= 0:  # every strategy constant: fall back to the spread
        sd = float(part.groupby("strategy")[metric].mean().std(ddof=1))
    return sd if np.isfinite(sd) and sd > 0 else 1.0


# ------------------------------------------------------------------ the verdict

def verdict(frame: pd.DataFrame, metrics: dict[str, list[str]] | None = None,
            alpha: float = ALPHA) -> Verdict:
    """Per-dataset and across-dataset verdicts and cost fronts for a results frame.

    Parameters
    ----------
    frame : DataFrame
        The store's results frame (`harness.store.Store.cells_frame`), one row per cell.
    metrics : dict, optional
        Task → metric names as the suite lists them (the first is each dataset's metric);
        default: the first metric column with values.
    alpha : float, default 0.05
        Significance level of every test.
    """
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1), got {alpha}")
    primary = primary_metrics(frame, metrics)
    ok = ok_cells(frame)
    means = strategy_means(frame, primary)
    intervals, pairs = _per_dataset(frame, ok, primary, means, alpha)
    v = Verdict(alpha=alpha, primary=primary, intervals=intervals, pairs=pairs,
                matrix=pd.DataFrame())
    if means.empty:
        return v
    scores = means.pivot(index="dataset", columns="strategy", values="score")
    scores = scores.reindex(index=list(dict.fromkeys(means["dataset"])),
                            columns=list(dict.fromkeys(means["strategy"])))
    block, dropped = complete_block(scores)
    v.matrix = block
    for kind in ("strategy", "dataset"):
        for name in dict.fromkeys(frame[kind]):
            if name not in set(means[kind]):
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
        _across(v, ok, block, pairs, alpha)
    return v


def _per_dataset(frame, ok, primary, means, alpha):
    parts_i, parts_p = [], []
    for metric in dict.fromkeys(primary.values()):
        names = [d for d, m in primary.items() if m == metric]
        sub = ok[ok["dataset"].isin(names)]
        if sub.empty:
            continue
        summary = stats.per_dataset_summary(sub, metric, alpha)
        parts_i.append(summary.strategies.assign(metric=metric))
        parts_p.append(summary.pairs.assign(metric=metric))
    icols = ["dataset", "metric", "strategy", "family", "cells", "planned", "mean", "low", "high",
             "best", "tied_with_best", "fit_seconds", "predict_ms_per_1000_rows"]
    pcols = ["dataset", "metric", "a", "b", "pairs", "mean_diff", "low", "high", "t", "df", "p",
             "tied", "better"]
    if not parts_i:
        return pd.DataFrame(columns=icols), pd.DataFrame(columns=pcols)
    iv = pd.concat(parts_i, ignore_index=True)
    pr = pd.concat(parts_p, ignore_index=True)
    pr["tied"] = pr["tied"].astype(bool)
    pr["better"] = [("" if t or not np.isfinite(d) or d == 0 else a if d > 0 else b)
                    for a, b, d, t in zip(pr["a"], pr["b"], pr["mean_diff"], pr["tied"])]
    planned = frame.groupby(["dataset", "strategy"]).size()
    iv["planned"] = [int(planned.get((d, s), 0)) for d, s in zip(iv["dataset"], iv["strategy"])]
    fam = frame.groupby("strategy")["family"].first()
    iv["family"] = iv["strategy"].map(fam)
    cost = means.set_index(["dataset", "strategy"])
    iv["fit_seconds"] = [cost.loc[(d, s), "fit_seconds"] for d, s in zip(iv["dataset"],
                                                                           iv["strategy"])]
    iv["predict_ms_per_1000_rows"] = [cost.loc[(d, s), "predict_ms_per_1000_rows"]
                                      for d, s in zip(iv["dataset"], iv["strategy"])]
    iv["best"] = False
    iv["tied_with_best"] = False
    for ds, part in iv.groupby("dataset", sort=False):
        best = part.loc[part["mean"].idxmax(), "strategy"]
        iv.loc[part.index, "best"] = part["strategy"] == best
        tied = {best}
        for _, r in pr[(pr["dataset"] == ds) & ((pr["a"] == best) | (pr["b"] == best))].iterrows():
            if r["tied"]:
                tied.add(r["b"] if r["a"] == best else r["a"])
        iv.loc[part.index, "tied_with_best"] = part["strategy"].isin(tied)
    # strategies with cells on a dataset but none successful: shown, with no score
    have = set(zip(iv["dataset"], iv["strategy"]))
    extra = [{"dataset": d, "metric": primary[d], "strategy": s, "family": fam.get(s),
              "cells": 0, "planned": int(c), "best": False, "tied_with_best": False}
             for (d, s), c in planned.items() if (d, s) not in have and d in primary]
    if extra:
        iv = pd.concat([iv, pd.DataFrame(extra)], ignore_index=True)
        order = {d: i for i, d in enumerate(dict.fromkeys(iv["dataset"]))}
        iv = iv.sort_values("dataset", key=lambda s: s.map(order), kind="stable")
    return iv[icols].reset_index(drop=True), pr[pcols]


def _costs(means: pd.DataFrame, block: pd.DataFrame) -> pd.DataFrame:
    sub = means[means["dataset"].isin(block.index) & means["strategy"].isin(block.columns)]
    rows = []
    for st in block.columns:
        part = sub[sub["strategy"] == st]
        rows.append({"strategy": st, "family": part["family"].iloc[0] if len(part) else None,
                     "method": part["method"].iloc[0] if len(part) else None,
                     "fit_seconds": geometric_mean(part["fit_seconds"]),
                     "predict_ms_per_1000_rows": geometric_mean(part["predict_ms_per_1000_rows"])})
    return pd.DataFrame(rows, columns=["strategy", "family", "method", "fit_seconds",
                                       "predict_ms_per_1000_rows"])


_COST_KINDS = {"fit": "fit_seconds", "predict": "predict_ms_per_1000_rows"}


def _front_rows(scope: str, kind: str, points: pd.DataFrame, rank_scale: bool) -> list[dict]:
    pts = points.dropna(subset=["score", "cost"])
    if pts.empty:
        return []
    front = stats.pareto_front(pts.assign(score=-pts["score"] if rank_scale else pts["score"]))
    return [{"scope": scope, "cost_kind": kind, "strategy": name,
             "score": float(points.loc[name, "score"]), "cost": float(r["cost"]),
             "on_front": bool(r["on_front"]), "dominated_by": ", ".join(r["dominated_by"])}
            for name, r in front.iterrows()]


def _pareto(means: pd.DataFrame, v: Verdict) -> pd.DataFrame:
    rows = []
    for ds, part in means.groupby("dataset", sort=False):
        for kind, col in _COST_KINDS.items():
            pts = part.set_index("strategy")[["score", col]].rename(columns={col: "cost"})
            rows += _front_rows(ds, kind, pts, rank_scale=False)
    if v.ranks is not None and v.costs is not None and len(v.ranks) >= 2:
        c = v.costs.set_index("strategy")
        for kind, col in _COST_KINDS.items():
            pts = pd.DataFrame({"score": v.ranks, "cost": c[col].reindex(v.ranks.index)})
            rows += _front_rows("all datasets", kind, pts, rank_scale=True)
    return pd.DataFrame(rows, columns=["scope", "cost_kind", "strategy", "score", "cost",
                                       "on_front", "dominated_by"])


def _across(v: Verdict, ok: pd.DataFrame, block: pd.DataFrame, pairs: pd.DataFrame,
            alpha: float) -> None:
    n, k = block.shape
    order = [str(s) for s in v.ranks.index]
    block = block[order]
    v.friedman = stats.friedman(block)
    v.cd = stats.nemenyi_cd(k, n, alpha)
    v.nemenyi_groups = stats.nemenyi_groups(v.ranks, v.cd)
    metrics = {v.primary[d] for d in block.index}
    if len(metrics) == 1 and unit_free(next(iter(metrics))):
        diffs = block
        v.scale = "raw"
    else:
        scale = pd.Series({d: _noise_scale(ok, d, v.primary[d], order) for d in block.index})
        diffs = block.div(scale, axis=0)
        v.scale = "noise"
    w = stats.wilcoxon_holm(diffs, alpha=alpha)
    in_block = pairs[pairs["dataset"].isin(block.index) & pairs["a"].isin(order)
                     & pairs["b"].isin(order)]
    # orient every per-dataset pair as (better-ranked, worse-ranked)
    pos = {s: i for i, s in enumerate(order)}
    flip = [pos[a] > pos[b] for a, b in zip(in_block["a"], in_block["b"])]
    oriented = in_block.assign(
        a=np.where(flip, in_block["b"], in_block["a"]),
        b=np.where(flip, in_block["a"], in_block["b"]),
        mean_diff=np.where(flip, -in_block["mean_diff"], in_block["mean_diff"]))
    wtl = stats.win_tie_loss(oriented).set_index(["a", "b"])
    rows = []
    for _, r in w.iterrows():
        a, b = r["a"], r["b"]
        counts = wtl.loc[(a, b)] if (a, b) in wtl.index else pd.Series(
            {"wins": 0, "ties": 0, "losses": 0})
        diff = float(v.ranks[b] - v.ranks[a])
        rows.append({"a": a, "b": b, "rank_a": float(v.ranks[a]), "rank_b": float(v.ranks[b]),
                     "rank_diff": diff, "nemenyi_differs": bool(diff >= v.cd),
                     "n_datasets": int(r["n_datasets"]), "a_wins": int(r["a_wins"]),
                     "b_wins": int(r["b_wins"]), "median_diff": float(r["median_diff"]),
                     "statistic": r["statistic"], "p": float(r["p"]),
                     "p_holm": float(r["p_holm"]), "wilcoxon_differs": bool(r["reject"]),
                     "wins": int(counts["wins"]), "ties": int(counts["ties"]),
                     "losses": int(counts["losses"])})
    v.across = pd.DataFrame(rows)
    differs = {frozenset((r["a"], r["b"])): r["wilcoxon_differs"] for r in rows}
    v.wilcoxon_groups = tied_runs(order, differs)
    m = len(rows)
    # Exact two-sided Wilcoxon signed-rank p-values are multiples of 2^-N; the smallest, when
    # one strategy wins on every dataset, is 2 · 2^-N (Wilcoxon's null distribution:
    # every sign pattern equally likely). Holm's first step compares it with alpha / m.
    v.smallest_p, v.needed_p = 2.0 ** (1 - n), alpha / m
