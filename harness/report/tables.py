"""Comparison tables from the results frame (one row per cell), as CSV and Markdown.

All scores are scikit-learn scorer values, so higher is better for every metric
(``neg_*`` scorers are negated errors).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.cells import OK

ID_COLUMNS = ("key", "run", "dataset", "strategy", "method", "family", "task", "repeat", "fold",
              "fingerprint", "n_train", "n_test", "status", "message", "detail", "fit_seconds",
              "fit_cpu_seconds", "predict_seconds", "peak_memory_bytes", "model_bytes", "curve",
              "threads", "timing", "worker", "seconds", "finished")


def metric_columns(frame: pd.DataFrame) -> list[str]:
    return [c for c in frame.columns if c not in ID_COLUMNS]


def primary_metrics(frame: pd.DataFrame, metrics: dict[str, list[str]] | None) -> dict[str, str]:
    """Dataset → the metric its strategies are ranked by (the first the suite lists)."""
    out = {}
    for (ds, task), part in frame.groupby(["dataset", "task"]):
        names = (metrics or {}).get(task) or [c for c in metric_columns(part)
                                             if part[c].notna().any()]
        out[ds] = names[0]
    return out


def ok_cells(frame: pd.DataFrame) -> pd.DataFrame:
    return frame[frame["status"] == OK]


def score_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Per dataset × strategy × metric: mean, sd, number of cells."""
    ok = ok_cells(frame)
    rows = []
    for (ds, st), part in ok.groupby(["dataset", "strategy"], sort=False):
        for m in metric_columns(part):
            v = part[m].dropna()
            if len(v):
                rows.append({"dataset": ds, "strategy": st, "family": part["family"].iloc[0],
                             "metric": m, "mean": v.mean(), "sd": v.std(ddof=1) if len(v) > 1
                             else np.nan, "cells": len(v)})
    return pd.DataFrame(rows)


def rank_table(frame: pd.DataFrame, metrics: dict[str, list[str]] | None = None) -> pd.DataFrame:
    """Each strategy's mean rank across datasets (1 = best) on each dataset's first metric,
    with its mean fit time and how many datasets and failed cells it has."""
    primary = primary_metrics(frame, metrics)
    ok = ok_cells(frame)
    ranks = []
    for ds, part in ok.groupby("dataset"):
        means = part.groupby("strategy")[primary[ds]].mean()
        ranks.append(means.rank(ascending=False, method="average").rename(ds))
    if not ranks:
        return pd.DataFrame(columns=["strategy", "family", "mean_rank", "datasets",
                                     "mean_fit_seconds", "failed_cells"])
    r = pd.concat(ranks, axis=1)
    failed = frame[frame["status"] != OK].groupby("strategy").size()
    fam = frame.groupby("strategy")["family"].first()
    out = pd.DataFrame({
        "strategy": r.index,
        "family": fam.reindex(r.index).to_numpy(),
        "mean_rank": r.mean(axis=1).to_numpy(),
        "datasets": r.notna().sum(axis=1).to_numpy(),
        "mean_fit_seconds": ok.groupby("strategy")["fit_seconds"].mean().reindex(r.index)
        .to_numpy(),
        "failed_cells": failed.reindex(r.index).fillna(0).astype(int).to_numpy(),
    })
    return out.sort_values(["mean_rank", "mean_fit_seconds"]).reset_index(drop=True)


def cost_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Per dataset × strategy: mean fit wall and CPU seconds, prediction time per 1,000 rows,
    peak fit memory and pickled model size."""
    ok = ok_cells(frame).copy()
    if ok.empty:
        return pd.DataFrame()
    ok["predict_ms_per_1000_rows"] = ok["predict_seconds"] / ok["n_test"] * 1e6
    ok["peak_memory_mib"] = ok["peak_memory_bytes"].astype(float) / 2**20
    ok["model_mib"] = ok["model_bytes"].astype(float) / 2**20
    agg = ok.groupby(["dataset", "strategy"], sort=False).agg(
        family=("family", "first"), fit_seconds=("fit_seconds", "mean"),
        fit_cpu_seconds=("fit_cpu_seconds", "mean"),
        predict_ms_per_1000_rows=("predict_ms_per_1000_rows", "mean"),
        peak_memory_mib=("peak_memory_mib", "mean"), model_mib=("model_mib", "mean"),
        cells=("key", "size"))
    return agg.reset_index()


def failures_table(frame: pd.DataFrame) -> pd.DataFrame:
    bad = frame[frame["status"] != OK]
    return bad[["dataset", "strategy", "repeat", "fold", "status", "message"]].reset_index(drop=True)


# ------------------------------------------------------------------ Markdown rendering

def _fmt(v, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    if isinstance(v, (float, np.floating)):
        return f"{v:.{digits}g}" if abs(v) >= 1e-3 or v == 0 else f"{v:.2e}"
    return str(v)


def markdown(frame: pd.DataFrame, digits: int = 4) -> str:
    """A GitHub-style Markdown table."""
    if frame.empty:
        return "_(nothing to show)_\n"
    cols = list(map(str, frame.columns))
    lines = ["| " + " | ".join(cols) + " |",
             "|" + "|".join("---:" if pd.api.types.is_numeric_dtype(frame[c]) else "---"
                            for c in frame.columns) + "|"]
    for row in frame.itertuples(index=False):
        lines.append("| " + " | ".join(_fmt(v, digits).replace("|", "\\|") for v in row) + " |")
    return "\n".join(lines) + "\n"


def scores_markdown(scores: pd.DataFrame) -> str:
    """One section per dataset: strategies × metrics, each cell 'mean ± sd'."""
    parts = []
    for ds, part in scores.groupby("dataset", sort=False):
        cell = part.apply(lambda r: f"{r['mean']:.4f} ± {r['sd']:.4f}" if pd.notna(r["sd"])
                          else f"{r['mean']:.4f}", axis=1)
        wide = part.assign(value=cell).pivot(index="strategy", columns="metric", values="value")
        wide = wide[list(dict.fromkeys(part["metric"]))].reset_index()
        parts.append(f"## {ds}\n\n" + markdown(wide))
    return "\n".join(parts)
