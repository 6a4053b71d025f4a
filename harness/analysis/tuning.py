"""What tuning buys, from the store's cells, trials and refits (`harness.search` says how a
search runs).

- Tuning curves: for each random search, the outer-test score of the best configuration
  among the first b trials (b = 1, 2, 4, … up to the trials run) with its mean inner score,
  averaged over the outer folds.
- Gains: per dataset and tuned strategy, tuned minus untuned on the dataset's first metric,
  paired by outer fold (the untuned score is the refit of the first trial, the configuration
  as given), judged like every other pair (`harness.analysis.per_dataset`): the Bayesian
  correlated t-test gives the probabilities that tuning helped, made no practical difference
  (the metric's region of practical equivalence) or hurt, and the outcome is the one whose
  probability reaches the certainty, else undecided; the corrected resampled t-test's
  interval and p-value stand beside it.
- Ranking: average ranks across datasets with every tuned strategy untuned and tuned.
- Stability: the value each outer fold chose for each tuned parameter.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.analysis import bayes, stats
from harness.analysis.results import ok_cells
from harness.analysis.verdict import ALPHA, complete_block
from harness.search import best_of, budget_steps
from harness.work_units import OK

BETTER, WORSE = "better after tuning", "worse after tuning"
EQUIVALENT, UNDECIDED = "practically equivalent", "undecided"
UNCHANGED = "unchanged (the same outer score on every fold)"


def _random_searches(trials: pd.DataFrame) -> pd.DataFrame:
    """Trials of random searches (one round on all rows)."""
    if trials.empty:
        return trials
    halving = trials.groupby("search")["round"].transform("max") > 0
    return trials[~halving]


def tuning_curves(trials: pd.DataFrame, refits: pd.DataFrame,
                  primary: dict[str, str]) -> pd.DataFrame:
    """Per search and budget b: ``dataset, strategy, repeat, fold, budget, trial, inner,
    outer`` (the best configuration among the first b trials, its mean inner score and its
    outer-test score on the dataset's first metric)."""
    cols = ["dataset", "strategy", "repeat", "fold", "budget", "trial", "inner", "outer"]
    trials = _random_searches(trials)
    if trials.empty or refits.empty:
        return pd.DataFrame(columns=cols)
    outer = {(r["search"], int(r["trial"])): r for _, r in refits.iterrows()}
    rows = []
    for search, part in trials.groupby("search", sort=False):
        part = part.sort_values("trial")
        first = part.iloc[0]
        metric = primary.get(first["dataset"])
        scores = [s if st == OK else np.nan for s, st in zip(part["inner_score"],
                                                             part["status"])]
        for b in budget_steps(len(scores)):
            best = best_of(scores[:b])
            refit = outer.get((search, best))
            if best is None or refit is None or refit.get("status") != OK:
                continue
            rows.append({"dataset": first["dataset"], "strategy": first["strategy"],
                         "repeat": int(first["repeat"]), "fold": int(first["fold"]),
                         "budget": b, "trial": best, "inner": scores[best],
                         "outer": float(refit.get(metric, np.nan))})
    return pd.DataFrame(rows, columns=cols)


def mean_curves(curves: pd.DataFrame) -> pd.DataFrame:
    """`tuning_curves` averaged over outer folds: ``dataset, strategy, budget, inner, outer,
    folds``."""
    if curves.empty:
        return pd.DataFrame(columns=["dataset", "strategy", "budget", "inner", "outer", "folds"])
    return (curves.groupby(["dataset", "strategy", "budget"], sort=False)
            .agg(inner=("inner", "mean"), outer=("outer", "mean"), folds=("fold", "size"))
            .reset_index())


def untuned_scores(cells: pd.DataFrame, refits: pd.DataFrame) -> pd.DataFrame:
    """The tuned cells' untuned twins: ``key`` (of the tuned cell), ``dataset, strategy,
    repeat, fold`` and every metric, from the refit of each search's first trial."""
    if refits.empty:
        return pd.DataFrame()
    first = refits[(refits["trial"] == 0) & (refits["status"] == OK)]
    tuned = cells[cells["tuned"]][["key", "dataset", "strategy", "repeat", "fold"]]
    return tuned.merge(first.drop(columns=[c for c in ("dataset", "strategy", "repeat", "fold",
                                                       "key") if c in first]),
                       left_on="key", right_on="search")


def gains(cells: pd.DataFrame, refits: pd.DataFrame, primary: dict[str, str],
          margins: dict, certainty: float, alpha: float = ALPHA) -> pd.DataFrame:
    """Per dataset × tuned strategy: ``dataset, strategy, family, metric, folds, untuned,
    tuned, gain, low, high, p, p_worse, p_equivalent, p_better, margin, outcome, sd,
    search_seconds, refit_seconds`` — gain = tuned − untuned (mean over the outer folds both
    have), its corrected interval and p-value, the posterior probabilities of the correlated
    t-test with the metric's region (``margins``: metric → `harness.scorers.Margin`, taken on
    the better of the two means) and the outcome at ``certainty``; ``sd`` is the fold-to-fold
    sd of the untuned score (the dataset's noise)."""
    cols = ["dataset", "strategy", "family", "metric", "folds", "untuned", "tuned", "gain", "low",
            "high", "p", "p_worse", "p_equivalent", "p_better", "margin", "outcome", "sd",
            "search_seconds", "refit_seconds"]
    ok = ok_cells(cells)
    ok = ok[ok["tuned"]]
    base = untuned_scores(cells, refits)
    if ok.empty or base.empty:
        return pd.DataFrame(columns=cols)
    rows = []
    for (ds, st), part in ok.groupby(["dataset", "strategy"], sort=False):
        metric = primary[ds]
        b = base[(base["dataset"] == ds) & (base["strategy"] == st)]
        pair = part.merge(b[["repeat", "fold", metric]], on=["repeat", "fold"],
                          suffixes=("", "_untuned")).dropna(subset=[metric, metric + "_untuned"])
        if pair.empty:
            continue
        t, u = pair[metric].to_numpy(float), pair[metric + "_untuned"].to_numpy(float)
        row = {"dataset": ds, "strategy": st, "family": part["family"].iloc[0], "metric": metric,
               "folds": len(pair), "untuned": u.mean(), "tuned": t.mean(), "gain": (t - u).mean(),
               "low": np.nan, "high": np.nan, "p": np.nan, "p_worse": np.nan,
               "p_equivalent": np.nan, "p_better": np.nan,
               "margin": margins[metric].on(max(t.mean(), u.mean())), "outcome": UNDECIDED,
               "sd": float(np.std(u, ddof=1)) if len(u) > 1 else np.nan,
               "search_seconds": float(part["search_seconds"].mean()),
               "refit_seconds": float(part["refit_seconds"].mean())}
        if len(pair) >= 2:
            if np.allclose(t, u, rtol=0, atol=1e-15):
                row.update(low=0.0, high=0.0, p=1.0, outcome=UNCHANGED)
            else:
                d = t - u
                ratio = float(pair["n_test"].mean()) / float(pair["n_train"].mean())
                _, p, low, high = stats.corrected_t(d.mean(), d.var(ddof=1), len(d), ratio,
                                                    alpha)
                worse, same, better = bayes.correlated_t(d.mean(), d.var(ddof=1), len(d),
                                                         ratio, row["margin"])
                row.update(low=float(low), high=float(high), p=float(p), p_worse=float(worse),
                           p_equivalent=float(same), p_better=float(better))
                for prob, word in ((better, BETTER), (same, EQUIVALENT), (worse, WORSE)):
                    if prob >= certainty:
                        row["outcome"] = word
        rows.append(row)
    return pd.DataFrame(rows, columns=cols)


def gain_summary(g: pd.DataFrame) -> pd.DataFrame:
    """Per tuned strategy across datasets: ``strategy, family, datasets, better, equivalent,
    undecided, worse, median_gain_sd`` (the median gain in units of each dataset's
    fold-to-fold sd; ``equivalent`` counts unchanged results too)."""
    cols = ["strategy", "family", "datasets", "better", "equivalent", "undecided", "worse",
            "median_gain_sd"]
    rows = []
    for st, part in g.groupby("strategy", sort=False):
        scaled = part["gain"] / part["sd"].where(part["sd"] > 0)
        rows.append({"strategy": st, "family": part["family"].iloc[0], "datasets": len(part),
                     "better": int((part["outcome"] == BETTER).sum()),
                     "equivalent": int(part["outcome"].isin([EQUIVALENT, UNCHANGED]).sum()),
                     "undecided": int((part["outcome"] == UNDECIDED).sum()),
                     "worse": int((part["outcome"] == WORSE).sum()),
                     "median_gain_sd": float(scaled.median()) if scaled.notna().any()
                     else np.nan})
    out = pd.DataFrame(rows, columns=cols)
    return out.sort_values("median_gain_sd", ascending=False, kind="stable",
                           na_position="last").reset_index(drop=True)


def ranking_change(cells: pd.DataFrame, refits: pd.DataFrame,
                   primary: dict[str, str]) -> pd.DataFrame:
    """Average ranks across datasets with tuned strategies untuned and tuned (untuned
    strategies are the same in both): ``strategy, tuned_strategy, rank_untuned, rank_tuned,
    datasets``, best tuned rank first. Empty with fewer than two strategies."""
    cols = ["strategy", "tuned_strategy", "rank_untuned", "rank_tuned", "datasets"]
    ok = ok_cells(cells)
    base = untuned_scores(cells, refits)
    if ok.empty or base.empty:
        return pd.DataFrame(columns=cols)

    def matrix(frame):  # datasets × strategies, mean first-metric score
        rows = [(ds, st, part[primary[ds]].mean())
                for (ds, st), part in frame.groupby(["dataset", "strategy"])]
        return pd.DataFrame(rows, columns=["d", "s", "v"]).pivot(index="d", columns="s",
                                                                 values="v")

    tuned = matrix(ok)
    untuned = matrix(pd.concat([ok[~ok["tuned"]], base], ignore_index=True))
    both = tuned.where(untuned.notna())
    block, _ = complete_block(both)
    if block.shape[1] < 2 or block.shape[0] < 1:
        return pd.DataFrame(columns=cols)
    after = stats.average_ranks(block)
    before = stats.average_ranks(untuned.loc[block.index, block.columns])
    is_tuned = ok.groupby("strategy")["tuned"].any()
    out = pd.DataFrame({"strategy": block.columns,
                        "tuned_strategy": [bool(is_tuned.get(s, False)) for s in block.columns],
                        "rank_untuned": before.reindex(block.columns).to_numpy(),
                        "rank_tuned": after.reindex(block.columns).to_numpy(),
                        "datasets": len(block)})
    return out.sort_values("rank_tuned", kind="stable").reset_index(drop=True)


def stability(cells: pd.DataFrame) -> pd.DataFrame:
    """Per dataset × tuned strategy × parameter: ``dataset, strategy, parameter, folds,
    distinct, values, summary`` — the value each outer fold chose (in fold order) and, for
    numbers, median and range; for other values the most common one and its share."""
    cols = ["dataset", "strategy", "parameter", "folds", "distinct", "values", "summary"]
    ok = ok_cells(cells)
    ok = ok[ok["tuned"] & ok["configuration"].notna()]
    rows = []
    for (ds, st), part in ok.groupby(["dataset", "strategy"], sort=False):
        part = part.sort_values(["repeat", "fold"])
        for param in sorted(set().union(*(c.keys() for c in part["configuration"]))):
            values = [c.get(param) for c in part["configuration"]]
            numeric = all(isinstance(v, (int, float)) and not isinstance(v, bool)
                          for v in values)
            distinct = len({repr(v) for v in values})
            if distinct == 1:
                v = values[0]
                summary = f"{v:.4g} in every fold" if numeric else f"{v} in every fold"
            elif numeric:
                a = np.asarray(values, dtype=float)
                summary = (f"median {np.median(a):.4g}, range {a.min():.4g} to {a.max():.4g}")
            else:
                counts = pd.Series([f"{v:.4g}" if isinstance(v, float) else str(v)
                                    for v in values]).value_counts()
                summary = f"{counts.index[0]} in {counts.iloc[0]} of {len(values)} folds"
            rows.append({"dataset": ds, "strategy": st, "parameter": param,
                         "folds": len(values), "distinct": distinct,
                         "values": values, "summary": summary})
    return pd.DataFrame(rows, columns=cols)
