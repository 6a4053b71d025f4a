"""Reading the results frame (one row per cell, `harness.store.Store.cells_frame`): which
columns are metrics, which metric judges each dataset, and the per-dataset means every
table, front and test starts from."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.store import TUNED_FRAME_COLUMNS
from harness.work_units import OK

ID_COLUMNS = ("key", "run", "dataset", "strategy", "method", "family", "task", "repeat", "fold",
              "fingerprint", "n_train", "n_test", "status", "message", "detail", "fit_seconds",
              "fit_cpu_seconds", "predict_seconds", "peak_memory_bytes", "model_bytes", "curve",
              "threads", "timing", "worker", "seconds", "finished", "row_evidence",
              *TUNED_FRAME_COLUMNS)


def metric_columns(frame: pd.DataFrame) -> list[str]:
    """The columns of ``frame`` that hold scores (named after their scikit-learn scorer)."""
    return [c for c in frame.columns if c not in ID_COLUMNS]


def ok_cells(frame: pd.DataFrame) -> pd.DataFrame:
    return frame[frame["status"] == OK]


def primary_metrics(frame: pd.DataFrame, metrics: dict[str, list[str]] | None) -> dict[str, str]:
    """Dataset → the metric it is judged on (the first the suite lists for its task)."""
    out = {}
    for (ds, task), part in frame.groupby(["dataset", "task"], sort=False):
        names = (metrics or {}).get(task) or [c for c in metric_columns(part)
                                             if part[c].notna().any()]
        out[ds] = names[0]
    return out


def predict_ms_per_1000_rows(predict_seconds, n_test):
    """Prediction time per 1,000 test rows, in milliseconds."""
    return predict_seconds / n_test * 1e6


def geometric_mean(values) -> float:
    """Geometric mean of the finite, positive values (NaN when there are none): the summary
    of times of different datasets, whose ratios should not depend on which dataset is
    slowest (common practice for summarising times)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    return float(np.exp(np.mean(np.log(v)))) if len(v) else np.nan


def standard_error(values) -> float:
    """Standard error of the mean of the finite values (0 with fewer than two)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    return float(np.std(v, ddof=1) / np.sqrt(len(v))) if len(v) > 1 else 0.0


def pooled_sd(part: pd.DataFrame, metric: str) -> float:
    """Fold-to-fold standard deviation of ``metric`` pooled over the strategies of ``part``
    (one dataset): the square root of the mean of the strategies' variances."""
    var = part.groupby("strategy")[metric].var(ddof=1).dropna()
    return float(np.sqrt(var.mean())) if len(var) else np.nan


def strategy_means(frame: pd.DataFrame, primary: dict[str, str]) -> pd.DataFrame:
    """Per dataset × strategy over successful cells: ``dataset, strategy, family, method,
    metric, score, sd, cells, fit_seconds, predict_ms_per_1000_rows`` (means; ``sd`` of the
    score over cells) and the standard errors of the two mean times (timing noise)."""
    cols = ["dataset", "strategy", "family", "method", "metric", "score", "sd", "cells",
            "fit_seconds", "predict_ms_per_1000_rows", "fit_seconds_se",
            "predict_ms_per_1000_rows_se"]
    ok = ok_cells(frame)
    if ok.empty:
        return pd.DataFrame(columns=cols)
    metric = ok["dataset"].map(primary)
    score = pd.Series(np.nan, index=ok.index)
    for m in metric.dropna().unique():
        at = (metric == m).to_numpy()
        score[at] = ok.loc[at, m].astype(float)
    times = {"fit_seconds": ok["fit_seconds"].astype(float),
             "predict_ms_per_1000_rows": predict_ms_per_1000_rows(
                 ok["predict_seconds"].astype(float), ok["n_test"])}
    work = pd.DataFrame({"dataset": ok["dataset"], "strategy": ok["strategy"],
                         "family": ok["family"], "method": ok["method"], "metric": metric,
                         "score": score, **times,
                         **{f"{k}_finite": v.where(np.isfinite(v)) for k, v in times.items()}})
    g = work.groupby(["dataset", "strategy"], sort=False)
    out = g.agg(family=("family", "first"), method=("method", "first"),
                metric=("metric", "first"), score=("score", "mean"), sd=("score", "std"),
                cells=("score", "count"), fit_seconds=("fit_seconds", "mean"),
                predict_ms_per_1000_rows=("predict_ms_per_1000_rows", "mean"))
    for k in times:  # `standard_error` per group: 0 with fewer than two finite values
        n = g[f"{k}_finite"].count()
        out[f"{k}_se"] = (g[f"{k}_finite"].std(ddof=1) / np.sqrt(n)).where(n > 1, 0.0)
    out = out.reset_index()
    return out[out["cells"] > 0].reset_index(drop=True)[cols]
