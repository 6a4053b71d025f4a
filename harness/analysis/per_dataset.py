"""Judging strategies on one dataset: each strategy's mean with its corrected interval (clipped
to the metric's range), every pair's verdict — better, practically equivalent or undecided —
and each strategy's probability of being within the region of practical equivalence of the
best (or better), with the best not fixed in advance.

The evidence is in the (repeat, fold) cells when a dataset has several splits: the Bayesian
correlated t-test (`harness.analysis.bayes`) for the verdict, and the corrected resampled t-test
(`harness.analysis.stats`) beside it. With one split there is no fold-to-fold variance and the
evidence is in the test rows (`harness.row_evidence`): McNemar's exact test on the paired
per-row correctness (classification; Dietterich 1998) or a paired t-test on the per-row
squared errors (regression), with the Bayesian t posterior on the per-row differences (rows
independent given the fitted models; it says nothing about how another training sample would
have done).
"""

from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd

from harness.analysis import bayes, stats
from harness.row_evidence import SUPPORTED, decode
from harness.scorers import Margin, bounds

BETTER, EQUIVALENT, UNDECIDED = "better", "practically equivalent", "undecided"
FOLDS, ROWS = "folds", "test rows"
JOINT_SAMPLES = 10000

STRATEGY_COLUMNS = ["dataset", "metric", "strategy", "cells", "mean", "low", "high", "best",
                    "p_near_best", "standing", "margin", "evidence"]
PAIR_COLUMNS = ["dataset", "metric", "a", "b", "pairs", "mean_diff", "sd", "low", "high", "t",
                "df", "p", "test", "margin", "p_b", "p_eq", "p_a", "verdict", "better",
                "advice", "repeats_needed", "evidence"]


def word(probs: np.ndarray, certainty: float) -> np.ndarray:
    """Per row of (left, equivalent, right) probabilities: ``"a"``, ``"b"``, ``"equivalent"``
    or ``""`` (undecided, also for NaN)."""
    p = np.nan_to_num(np.asarray(probs, dtype=float), nan=0.0)
    return np.select([p[:, 2] >= certainty, p[:, 0] >= certainty, p[:, 1] >= certainty],
                     ["a", "b", "equivalent"], "")


def judge(ok: pd.DataFrame, metric: str, margin: Margin, certainty: float,
          alpha: float) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(strategies, pairs) for the successful cells ``ok`` of datasets judged on ``metric``;
    columns `STRATEGY_COLUMNS` and `PAIR_COLUMNS` (``mean_diff`` is ``a − b``, ``sd`` the standard deviation of the
    per-cell differences (NaN for a single split); ``p_a``,
    ``p_eq``, ``p_b``: probabilities that a is better, that they are practically equivalent,
    that b is better; ``margin``: the half-width on this dataset in the metric's units;
    ``repeats_needed``: for an undecided pair over folds, the rough number of repeats that would
    decide it, 0 when more repeats cannot)."""
    need = ["dataset", "strategy", "repeat", "fold", "n_train", "n_test", metric]
    data = ok.loc[ok[metric].notna()]
    dup = data.duplicated(["dataset", "strategy", "repeat", "fold"])
    if dup.any():
        first = data.loc[dup, ["dataset", "strategy", "repeat", "fold"]].iloc[0].tolist()
        raise ValueError(f"cell {first} appears more than once")
    srows, prows = [], []
    for ds, part in data.groupby("dataset", sort=False):
        s, p = _dataset(ds, part, need, metric, margin, certainty, alpha)
        srows.append(s)
        prows.append(p)
    if not srows:
        return pd.DataFrame(columns=STRATEGY_COLUMNS), pd.DataFrame(columns=PAIR_COLUMNS)
    return (pd.concat(srows, ignore_index=True)[STRATEGY_COLUMNS],
            pd.concat(prows, ignore_index=True).reindex(columns=PAIR_COLUMNS))


def _dataset(ds, part, need, metric, margin, certainty, alpha):
    m = part.pivot(index=["repeat", "fold"], columns="strategy", values=metric)
    names = list(part["strategy"].unique())
    m = m[names]
    x = m.to_numpy(float)
    ratio = float(part["n_test"].mean() / part["n_train"].mean())
    n = np.sum(~np.isnan(x), axis=0)
    mean = np.nanmean(x, axis=0)
    var = _nanvar(x)
    _, _, low, high = stats.corrected_t(mean, var, n, ratio, alpha)
    lo_b, hi_b = bounds(metric)
    best_mean = float(np.max(mean))
    width = margin.on(best_mean)
    strategies = pd.DataFrame({"dataset": ds, "metric": metric, "strategy": names, "cells": n,
                               "mean": mean, "low": np.clip(low, lo_b, hi_b),
                               "high": np.clip(high, lo_b, hi_b),
                               "best": mean == best_mean, "margin": width})
    i, j = (np.array(v, dtype=int) for v in zip(*combinations(range(len(names)), 2))) \
        if len(names) >= 2 else (np.zeros(0, int), np.zeros(0, int))
    pairs = pd.DataFrame({"dataset": ds, "metric": metric, "a": [names[k] for k in i],
                          "b": [names[k] for k in j], "margin": width})
    rows = _rows(part, names, metric) if len(m) == 1 else None
    if len(m) == 1:
        _single_split(strategies, pairs, rows, i, j, metric, width, certainty, alpha)
    else:
        _folds(strategies, pairs, x, i, j, ratio, width, certainty, alpha,
               folds=part["fold"].nunique())
    pairs["better"] = np.where(pairs["verdict_code"] == "a", pairs["a"],
                               np.where(pairs["verdict_code"] == "b", pairs["b"], ""))
    pairs["verdict"] = np.where(pairs["better"] != "", BETTER,
                                np.where(pairs["verdict_code"] == "equivalent", EQUIVALENT,
                                         UNDECIDED))
    strategies["standing"] = _standing(strategies, certainty)
    return strategies, pairs.drop(columns=["verdict_code"])


def _nanvar(x: np.ndarray) -> np.ndarray:
    n = np.sum(~np.isnan(x), axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nanmean(x, axis=0)
        return np.where(n >= 2, np.nansum((x - mean) ** 2, axis=0) / np.maximum(n - 1, 1),
                        np.nan)


def _posterior_into(pairs, probs, certainty):
    pairs["p_b"], pairs["p_eq"], pairs["p_a"] = probs[:, 0], probs[:, 1], probs[:, 2]
    pairs["verdict_code"] = word(probs, certainty)


def _folds(strategies, pairs, x, i, j, ratio, width, certainty, alpha, folds):
    d = x[:, i] - x[:, j]                       # cells × pairs, NaN where either is missing
    n = np.sum(~np.isnan(d), axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, np.nansum(np.nan_to_num(d), axis=0) / np.maximum(n, 1), np.nan)
    var = _nanvar(d)
    t, p, low, high = stats.corrected_t(mean, var, n, ratio, alpha)
    pairs["pairs"], pairs["mean_diff"], pairs["df"] = n, mean, n - 1
    pairs["sd"] = np.sqrt(var)
    pairs["t"], pairs["p"], pairs["low"], pairs["high"] = t, p, low, high
    pairs["test"] = "corrected t-test"
    pairs["evidence"] = FOLDS
    probs = bayes.correlated_t(mean, var, n, ratio, width)
    _posterior_into(pairs, probs, certainty)
    undecided = (pairs["verdict_code"] == "").to_numpy()
    reps = bayes.repeats_needed(mean, var, ratio, width, certainty, folds)
    pairs["repeats_needed"] = np.where(undecided & (n >= 2), reps, np.nan)
    pairs["advice"] = [(_repeats_text(r) if u and k >= 2 else
                        "fewer than two shared cells" if k < 2 else "")
                       for u, r, k in zip(undecided, reps, n)]
    strategies["evidence"] = FOLDS
    complete = x[~np.isnan(x).any(axis=1)]
    strategies["p_near_best"] = _near_best(complete, ratio, width)


def _repeats_text(repeats: int) -> str:
    if repeats == 0:
        return ("more repeats cannot settle it, since the fold-to-fold correction keeps the "
                "posterior too wide; more rows would")
    if repeats > 100:
        return "more than 100 repeats would be needed"
    return f"about {repeats} repeats would settle it"


def _near_best(x: np.ndarray, ratio: float, width: float) -> np.ndarray:
    """P(μ_s ≥ max_t μ_t − width) per strategy from the joint posterior (NaN without at least
    two complete rows)."""
    if x.shape[0] < 2 or x.shape[1] < 1:
        return np.full(x.shape[1], np.nan)
    draws = bayes.joint_means(x, ratio, JOINT_SAMPLES)
    return np.mean(draws >= draws.max(axis=1, keepdims=True) - width, axis=0)


def _rows(part: pd.DataFrame, names: list[str], metric: str) -> np.ndarray | None:
    """rows × strategies per-row values (higher is better) of a one-split dataset, or None when
    the metric has no per-row form or a strategy kept no evidence."""
    if metric not in SUPPORTED or "row_evidence" not in part:
        return None
    by = dict(zip(part["strategy"], part["row_evidence"]))
    cols = []
    for s in names:
        blob = by.get(s)
        if not isinstance(blob, (bytes, bytearray, memoryview)):
            return None
        kind, values = decode(bytes(blob))
        if kind != SUPPORTED[metric]:
            return None
        cols.append(values)
    if len({len(c) for c in cols}) != 1:
        return None
    return np.column_stack(cols)


def _single_split(strategies, pairs, rows, i, j, metric, width, certainty, alpha):
    strategies["evidence"] = ROWS
    means = strategies["mean"].to_numpy(float)
    pairs["mean_diff"] = means[i] - means[j]
    if rows is None:
        reason = (f"one split and no per-row evidence for {metric}: nothing to tell a "
                  "difference from noise; use k-fold splits or repeats")
        pairs["pairs"], pairs["test"], pairs["evidence"] = 1, "", ROWS
        pairs["verdict_code"], pairs["advice"] = "", reason
        strategies["p_near_best"] = np.nan
        return
    n = rows.shape[0]
    # per-row margin: accuracy and MSE are per-row means; RMSE = sqrt(MSE), so a difference of
    # w in RMSE is about 2 · RMSE · w in MSE (first order)
    row_width = width * 2 * abs(float(means.max())) if metric == "neg_root_mean_squared_error" \
        else width
    d = rows[:, i] - rows[:, j]
    mean, var = d.mean(axis=0), d.var(axis=0, ddof=1)
    pairs["pairs"], pairs["evidence"], pairs["df"] = n, ROWS, n - 1
    # rows are independent given the fitted models: the t-test with no correction (ratio 0)
    t, p, low, high = stats.corrected_t(mean, var, n, 0.0, alpha)
    if SUPPORTED[metric] == b"c":  # McNemar's exact test on the discordant rows
        a_only = np.sum(rows[:, i] > rows[:, j], axis=0)
        b_only = np.sum(rows[:, i] < rows[:, j], axis=0)
        pairs["t"], pairs["p"] = np.nan, stats.mcnemar_exact(a_only, b_only)
        pairs["test"] = "McNemar exact"
    else:
        pairs["t"], pairs["p"] = t, p
        pairs["test"] = "paired t-test on per-row squared error"
    same_units = metric != "neg_root_mean_squared_error"
    pairs["low"] = low if same_units else np.nan
    pairs["high"] = high if same_units else np.nan
    probs = bayes.correlated_t(mean, var, n, 0.0, row_width)
    _posterior_into(pairs, probs, certainty)
    undecided = (pairs["verdict_code"] == "").to_numpy()
    need = bayes.repeats_needed(mean, var, 0.0, row_width, certainty, 1, cap=10 ** 9)
    pairs["advice"] = [(f"about {int(r):,} test rows would settle it" if 0 < r <= 10 ** 9
                        else "far more test rows would be needed") if u else ""
                       for u, r in zip(undecided, need)]
    strategies["p_near_best"] = _near_best(rows, 0.0, row_width)


def _standing(strategies: pd.DataFrame, certainty: float) -> list[str]:
    out = []
    for best, p in zip(strategies["best"], strategies["p_near_best"]):
        if best:
            out.append("best")
        elif np.isnan(p):
            out.append(UNDECIDED)
        elif p >= certainty:
            out.append("equivalent to best")
        elif p <= 1 - certainty:
            out.append("worse than best")
        else:
            out.append(UNDECIDED)
    return out
