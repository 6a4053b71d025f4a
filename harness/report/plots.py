"""Plots (matplotlib, Agg): score against fit time, and ensemble-size curves."""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
from matplotlib.ticker import NullFormatter  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

from harness.report.tables import ok_cells  # noqa: E402

FAMILY_MARKERS = {"single tree": "s", "bagging": "D", "forest": "o", "boosting": "^"}


def strategy_colors(strategies) -> dict[str, tuple]:
    """One stable colour per strategy (the same in every plot of a report)."""
    names = sorted(set(strategies))
    cmap = plt.get_cmap("tab10" if len(names) <= 10 else "tab20")
    return {n: cmap(i % cmap.N) for i, n in enumerate(names)}


def _grid(n: int, max_cols: int = 3, size=(4.6, 3.6)):
    cols = min(max_cols, n)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(size[0] * cols, size[1] * rows + 0.9),
                             squeeze=False)
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, axes.flat


def _legend(fig, handles_labels: dict, ncol: int) -> None:
    fig.legend(list(handles_labels.values()), list(handles_labels.keys()), loc="lower center",
               ncol=ncol, frameon=False, fontsize=9, bbox_to_anchor=(0.5, 0.0))


def score_vs_fit_time(frame: pd.DataFrame, primary: dict[str, str], path: Path) -> Path | None:
    """Per dataset: mean test score (± sd over folds) against mean fit time, log time axis."""
    ok = ok_cells(frame)
    if ok.empty:
        return None
    datasets = list(dict.fromkeys(ok["dataset"]))
    colors = strategy_colors(ok["strategy"])
    fig, axes = _grid(len(datasets))
    handles = {}
    for ax, ds in zip(axes, datasets):
        part = ok[ok["dataset"] == ds]
        metric = primary[ds]
        g = part.groupby("strategy").agg(score=(metric, "mean"), sd=(metric, "std"),
                                         t=("fit_seconds", "mean"), family=("family", "first"))
        for name, r in g.iterrows():
            h = ax.errorbar(r["t"], r["score"], yerr=0 if np.isnan(r["sd"]) else r["sd"],
                            fmt=FAMILY_MARKERS.get(r["family"], "P"), color=colors[name],
                            markersize=7, capsize=3, linestyle="none")
            handles[name] = h
        _log_x(ax)
        ax.set_title(ds, fontsize=11)
        ax.set_xlabel("mean fit time per fold (s, log scale)")
        ax.set_ylabel(f"{metric} (higher is better)", fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("Test score against fit time (bars: ± 1 sd over folds; up and left is better)",
                 fontsize=12)
    _legend(fig, handles, ncol=min(5, len(handles)))
    fig.tight_layout(rect=(0, 0.07 + 0.02 * math.ceil(len(handles) / 5), 1, 0.96))
    return _save(fig, path)


def size_curves(frame: pd.DataFrame, primary: dict[str, str], path: Path) -> Path | None:
    """Per dataset: mean test score against the number of ensemble members (log axis)."""
    ok = ok_cells(frame)
    ok = ok[ok["curve"].notna()]
    if ok.empty:
        return None
    datasets = list(dict.fromkeys(ok["dataset"]))
    colors = strategy_colors(ok_cells(frame)["strategy"])
    fig, axes = _grid(len(datasets))
    handles = {}
    for ax, ds in zip(axes, datasets):
        part = ok[ok["dataset"] == ds]
        for name, cells in part.groupby("strategy"):
            points = pd.DataFrame([p for c in cells["curve"] for p in c], columns=["n", "score"])
            mean = points.groupby("n")["score"].mean()
            (h,) = ax.plot(mean.index, mean.to_numpy(), marker=FAMILY_MARKERS.get(
                cells["family"].iloc[0], "P"), color=colors[name], markersize=4, linewidth=1.5)
            handles[name] = h
        _log_x(ax)
        ax.set_title(ds, fontsize=11)
        ax.set_xlabel("ensemble members (trees or stages, log scale)")
        ax.set_ylabel(f"{primary[ds]} (higher is better)", fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("Test score as the ensemble grows (mean over folds)", fontsize=12)
    _legend(fig, handles, ncol=min(5, len(handles)))
    fig.tight_layout(rect=(0, 0.07 + 0.02 * math.ceil(len(handles) / 5), 1, 0.96))
    return _save(fig, path)


def _log_x(ax) -> None:
    ax.set_xscale("log")
    ax.xaxis.set_minor_formatter(NullFormatter())


def _save(fig, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_suffix(".tmp.png")
    fig.savefig(tmp, dpi=110)
    plt.close(fig)
    tmp.replace(path)
    return path
