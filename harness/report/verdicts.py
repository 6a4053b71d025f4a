"""Verdict tables and plots of a results folder, from the store's results frame.

Writes ``tables/intervals``, ``tables/pairs`` (per dataset), ``tables/verdict_ranks``,
``tables/verdict_pairs``, ``tables/verdict_tests`` (across datasets), ``tables/pareto`` (cost
fronts), each as CSV and Markdown, and ``plots/critical_difference.png`` (Nemenyi),
``plots/wilcoxon_holm_groups.png`` and ``plots/rank_vs_fit_time.png``. The numbers come from
`harness.verdict.verdict`.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from harness.report import plots
from harness.report.cd_diagram import draw_cd_diagram
from harness.report.tables import _fmt, markdown
from harness.verdict import DEFAULT_ALPHA, Verdict, p_text, verdict

COST_LABELS = {"fit": "mean fit time (s)", "predict": "prediction time per 1,000 rows (ms)"}


def interval_text(mean, low, high, digits: int = 4) -> str:
    if mean is None or pd.isna(mean):
        return "no successful cell"
    if pd.isna(low):
        return f"{mean:.{digits}g}"
    return f"{mean:.{digits}g} [{low:.{digits}g}, {high:.{digits}g}]"


def standing(r) -> str:
    """'best', 'tied with best', 'worse than best' or 'no successful cell' for an interval row."""
    if pd.isna(r["mean"]):
        return "no successful cell"
    return "best" if r["best"] else "tied with best" if r["tied_with_best"] else "worse than best"


def pair_outcome(r) -> str:
    if pd.isna(r["p"]):
        return "not testable (fewer than 2 shared cells)" if r["pairs"] < 2 else "tied"
    return "tied" if r["tied"] else f"{r['better']} better"


# ------------------------------------------------------------------ Markdown bodies

def intervals_markdown(v: Verdict) -> str:
    level = f"{1 - v.alpha:.0%}"
    parts = [f"Mean of each dataset's first metric over repeats × folds with its {level} "
             "corrected interval (Nadeau & Bengio; Bouckaert & Frank). *Tied with best*: the "
             f"corrected resampled t-test against the best strategy does not reject equality at "
             f"α = {v.alpha:g}.", ""]
    for ds, part in v.intervals.groupby("dataset", sort=False):
        rows = pd.DataFrame({
            "strategy": part["strategy"],
            f"mean [{level} interval]": [interval_text(*x) for x in
                                         zip(part["mean"], part["low"], part["high"])],
            "standing": [standing(r) for _, r in part.iterrows()],
            "cells": [f"{int(c)}/{int(p)}" for c, p in zip(part["cells"], part["planned"])],
            "fit s": [_fmt(x) for x in part["fit_seconds"]],
            "predict ms / 1,000 rows": [_fmt(x) for x in part["predict_ms_per_1000_rows"]]})
        order = part["mean"].fillna(-np.inf).to_numpy().argsort(kind="stable")[::-1]
        parts += [f"## {ds} ({part['metric'].iloc[0]}, higher is better)", "",
                  markdown(rows.iloc[order]), ""]
    return "\n".join(parts)


def pairs_markdown(v: Verdict) -> str:
    parts = [f"Corrected resampled t-test per pair on the (repeat, fold) cells both have; "
             f"difference = a − b; *tied* when p > α = {v.alpha:g}.", ""]
    for ds, part in v.pairs.groupby("dataset", sort=False):
        rows = pd.DataFrame({
            "a": part["a"], "b": part["b"], "cells": part["pairs"],
            "a − b [interval]": [interval_text(*x) for x in
                                 zip(part["mean_diff"], part["low"], part["high"])],
            "t": [_fmt(x, 3) for x in part["t"]], "p": [p_text(x) for x in part["p"]],
            "outcome": [pair_outcome(r) for _, r in part.iterrows()]})
        parts += [f"## {ds} ({part['metric'].iloc[0]})", "", markdown(rows), ""]
    return "\n".join(parts)


def ranks_frame(v: Verdict) -> pd.DataFrame:
    """One row per strategy of the across-dataset comparison."""
    cols = ["strategy", "family", "average_rank", "datasets", "fit_seconds",
            "predict_ms_per_1000_rows", "on_fit_front", "wilcoxon_tied_with_best",
            "nemenyi_tied_with_best"]
    if v.ranks is None:
        return pd.DataFrame(columns=cols)
    costs = v.costs.set_index("strategy")
    front = {}
    if v.pareto is not None:
        allp = v.pareto[(v.pareto["scope"] == "all datasets") & (v.pareto["cost_kind"] == "fit")]
        front = dict(zip(allp["strategy"], allp["on_front"]))
    best = v.best
    w_tied, n_tied = {best: True}, {best: True}
    if v.across is not None:
        for _, r in v.across[v.across["a"] == best].iterrows():
            w_tied[r["b"]] = not r["wilcoxon_differs"]
            n_tied[r["b"]] = not r["nemenyi_differs"]
    rows = [{"strategy": s, "family": costs.loc[s, "family"], "average_rank": float(r),
             "datasets": len(v.matrix), "fit_seconds": costs.loc[s, "fit_seconds"],
             "predict_ms_per_1000_rows": costs.loc[s, "predict_ms_per_1000_rows"],
             "on_fit_front": front.get(s), "wilcoxon_tied_with_best": w_tied.get(s),
             "nemenyi_tied_with_best": n_tied.get(s)} for s, r in v.ranks.items()]
    return pd.DataFrame(rows, columns=cols)


def tests_frame(v: Verdict) -> pd.DataFrame:
    cols = ["test", "statistic", "df", "p", "n_datasets", "strategies", "alpha", "decision"]
    if not v.tested:
        return pd.DataFrame(columns=cols)
    f = v.friedman
    n, k = v.matrix.shape
    rows = [
        {"test": "Friedman chi-square", "statistic": f.chi2, "df": f"{f.f_df1}", "p": f.chi2_p,
         "n_datasets": n, "strategies": k, "alpha": v.alpha,
         "decision": "rejects equal ranks" if f.chi2_p <= v.alpha else "does not reject"},
        {"test": "Iman–Davenport F", "statistic": f.f, "df": f"{f.f_df1}, {f.f_df2}",
         "p": f.f_p, "n_datasets": n, "strategies": k, "alpha": v.alpha,
         "decision": "rejects equal ranks" if f.f_p <= v.alpha else "does not reject"},
        {"test": "Nemenyi critical difference (ranks)", "statistic": v.cd, "df": "",
         "p": np.nan, "n_datasets": n, "strategies": k, "alpha": v.alpha,
         "decision": f"{int(v.across['nemenyi_differs'].sum())} of {len(v.across)} pairs differ"},
        {"test": "Wilcoxon signed-rank, Holm", "statistic": np.nan, "df": "", "p": np.nan,
         "n_datasets": n, "strategies": k, "alpha": v.alpha,
         "decision": f"{int(v.across['wilcoxon_differs'].sum())} of {len(v.across)} pairs "
                     "differ"},
    ]
    return pd.DataFrame(rows, columns=cols)


def scale_text(v: Verdict) -> str:
    if v.scale == "raw":
        metric = v.primary[v.matrix.index[0]]
        return (f"Wilcoxon differences are raw {metric} differences (every dataset is judged on "
                "this unit-free metric).")
    return ("Wilcoxon differences are divided by each dataset's fold-to-fold standard deviation "
            "(pooled over strategies), because the datasets are judged on metrics whose "
            "differences do not share a unit.")


def across_markdown(v: Verdict) -> str:
    a = v.across
    rows = pd.DataFrame({
        "a": a["a"], "b": a["b"], "ranks": [f"{x:.2f} vs {y:.2f}" for x, y in
                                            zip(a["rank_a"], a["rank_b"])],
        "datasets a better": [f"{x} of {n}" for x, n in zip(a["a_wins"], a["n_datasets"])],
        "Wilcoxon p": [p_text(x) for x in a["p"]],
        "Holm p": [p_text(x) for x in a["p_holm"]],
        "Wilcoxon–Holm": ["differ" if x else "tied" for x in a["wilcoxon_differs"]],
        "Nemenyi": ["differ" if x else "tied" for x in a["nemenyi_differs"]],
        "win / tie / loss": [f"{w} / {t} / {l}" for w, t, l in
                             zip(a["wins"], a["ties"], a["losses"])]})
    return (f"Pairs with a ranked ahead of b. *Wilcoxon–Holm* (the verdict): Wilcoxon "
            f"signed-rank test over datasets, Holm's correction over all {len(a)} pairs, "
            f"α = {v.alpha:g}. *Nemenyi*: average ranks {v.cd:.2f} or more apart. *Win / tie / "
            "loss*: datasets where a is significantly better / tied / significantly worse by "
            f"the per-dataset corrected t-test. {scale_text(v)}\n\n" + markdown(rows))


def pareto_markdown(v: Verdict) -> str:
    parts = ["A strategy is *dominated* when another has a score at least as good and a cost at "
             "least as low, one of them strictly. Scores and costs are means; timings are taken "
             "with cells running side by side, one thread each. Over all datasets the score is "
             "the average rank (lower is better) and the cost the geometric mean over datasets.",
             ""]
    order = v.pareto.assign(_first=v.pareto["scope"] != "all datasets") \
        .sort_values("_first", kind="stable").drop(columns="_first")
    for (scope, kind), part in order.groupby(["scope", "cost_kind"], sort=False):
        what = "average rank" if scope == "all datasets" else v.primary.get(scope, "score")
        rows = pd.DataFrame({
            "strategy": part["strategy"], what: [_fmt(x) for x in part["score"]],
            COST_LABELS[kind]: [_fmt(x) for x in part["cost"]],
            "on the front": ["yes" if x else "no" for x in part["on_front"]],
            "dominated by": part["dominated_by"]})
        parts += [f"## {scope}: {what} against {COST_LABELS[kind]}", "", markdown(rows), ""]
    return "\n".join(parts)


def verdict_markdown(v: Verdict) -> str:
    lines = [f"- {s}" for s in v.summary()]
    if v.tested:
        lines += ["", markdown(tests_frame(v).drop(columns=["alpha"]))]
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------ writing

def _diagram(ranks, cd, groups, title: str, path: Path) -> Path:
    """A critical difference diagram, written under a temporary name and renamed."""
    tmp = path.with_name(f".{path.stem}.{os.getpid()}.tmp.png")
    draw_cd_diagram(ranks, cd, groups, title, tmp)
    tmp.replace(path)
    return path


def write(out, frame: pd.DataFrame, metrics: dict[str, list[str]] | None,
          alpha: float = DEFAULT_ALPHA) -> Verdict:
    """Write the verdict tables and plots into ``out.folder`` and list them in ``out.files``."""
    from harness.report.build import _table

    v = verdict(frame, metrics, alpha)
    if v.intervals.empty:
        return v
    _table(out, "intervals", v.intervals, intervals_markdown(v),
           "Mean score per dataset with its corrected interval")
    _table(out, "pairs", v.pairs, pairs_markdown(v), "Pairwise tests per dataset")
    _table(out, "pareto", v.pareto, pareto_markdown(v), "Accuracy against cost: Pareto fronts")
    if v.ranks is not None:
        _table(out, "verdict_ranks", ranks_frame(v), title="Average rank across datasets "
               f"(1 = best; {len(v.matrix)} datasets, each on its first metric)")
    _table(out, "verdict_tests", tests_frame(v), verdict_markdown(v), "Verdict across datasets")
    if not v.tested:
        return v
    _table(out, "verdict_pairs", v.across, across_markdown(v), "Pairs across datasets")
    folder = out.folder / "plots"
    folder.mkdir(parents=True, exist_ok=True)
    n = len(v.matrix)
    out.files.append(_diagram(v.ranks, v.cd, v.nemenyi_groups,
                              f"Nemenyi critical difference, α = {alpha:g}, {n} datasets",
                              folder / "critical_difference.png"))
    out.files.append(_diagram(v.ranks, None, v.wilcoxon_groups,
                              f"Not told apart by Wilcoxon–Holm, α = {alpha:g}, {n} datasets",
                              folder / "wilcoxon_holm_groups.png"))
    families = dict(zip(v.costs["strategy"], v.costs["family"]))
    p = plots.rank_vs_fit_time(v.ranks, v.costs, families, n, folder / "rank_vs_fit_time.png")
    if p is not None:
        out.files.append(p)
    return v
