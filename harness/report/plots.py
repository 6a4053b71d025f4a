"""Plots (matplotlib, Agg): score against fit time with the Pareto front, average rank against
fit time, and ensemble-size curves."""

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


def _front_line(ax, points: pd.DataFrame, higher_is_better: bool = True):
    """Draw the Pareto front of ``points`` (columns score, cost) as a staircase: from each
    front point the line runs right at its score to the next one's cost (everything below
    and to the right of it is dominated)."""
    from harness.stats import pareto_front

    pts = points[["score", "cost"]].dropna()
    if len(pts) < 2:
        return None
    front = pareto_front(pts.assign(score=pts["score"] if higher_is_better else -pts["score"]))
    on = pts[front["on_front"].to_numpy()].sort_values(["cost", "score"])
    xs = list(on["cost"]) + [ax.get_xlim()[1]]
    ys = list(on["score"]) + [on["score"].iloc[-1]]
    (line,) = ax.step(xs, ys, where="post", color="#555555", linewidth=1.2, linestyle="--",
                      zorder=1)
    ax.set_xlim(right=xs[-1])
    return line


def score_vs_fit_time(frame: pd.DataFrame, primary: dict[str, str], path: Path) -> Path | None:
    """Per dataset: mean test score (± sd over folds) against mean fit time, log time axis,
    with the Pareto front of the means (`harness.verdict.strategy_means`) drawn."""
    from harness.verdict import strategy_means

    ok = ok_cells(frame)
    if ok.empty:
        return None
    means = strategy_means(frame, primary)
    datasets = list(dict.fromkeys(means["dataset"]))
    if not datasets:
        return None
    colors = strategy_colors(ok["strategy"])
    fig, axes = _grid(len(datasets))
    handles = {}
    for ax, ds in zip(axes, datasets):
        metric = primary[ds]
        g = (means[means["dataset"] == ds].set_index("strategy")
             .rename(columns={"fit_seconds": "t"}))
        for name, r in g.iterrows():
            h = ax.errorbar(r["t"], r["score"], yerr=0 if np.isnan(r["sd"]) else r["sd"],
                            fmt=FAMILY_MARKERS.get(r["family"], "P"), color=colors[name],
                            markersize=7, capsize=3, linestyle="none")
            handles[name] = h
        _log_x(ax)
        line = _front_line(ax, g.rename(columns={"t": "cost"}))
        if line is not None:
            handles["Pareto front"] = line
        ax.set_title(ds, fontsize=11)
        ax.set_xlabel("mean fit time per fold (s, log scale)")
        ax.set_ylabel(f"{metric} (higher is better)", fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("Test score against fit time (bars: ± 1 sd over folds; up and left is better; "
                 "dashed: Pareto front)", fontsize=12)
    _legend(fig, handles, ncol=min(5, len(handles)))
    fig.tight_layout(rect=(0, 0.07 + 0.02 * math.ceil(len(handles) / 5), 1, 0.96))
    return _save(fig, path)


def rank_vs_fit_time(ranks: pd.Series, costs: pd.DataFrame, families: dict[str, str],
                     n_datasets: int, path: Path) -> Path | None:
    """All datasets at once: average rank against the geometric mean fit time, with the
    Pareto front (lower rank and lower time are better)."""
    if ranks is None or len(ranks) < 2:
        return None
    t = costs.set_index("strategy")["fit_seconds"].reindex(ranks.index)
    colors = strategy_colors(ranks.index)
    fig, ax = plt.subplots(figsize=(7.2, 4.8))
    placed: list[tuple[float, float]] = []  # (log10 time, rank) of labels already drawn
    for name in ranks.index:
        ax.plot(t[name], ranks[name], FAMILY_MARKERS.get(families.get(name), "P"),
                color=colors[name], markersize=8, linestyle="none", label=name)
        x, y = float(np.log10(t[name])) if t[name] > 0 else 0.0, float(ranks[name])
        near = sum(1 for px, py in placed if abs(px - x) < 0.4 and abs(py - y) < 0.2)
        placed.append((x, y))
        ax.annotate(name, (t[name], ranks[name]), textcoords="offset points",
                    xytext=(6, 4 - 11 * near), fontsize=8)  # below a label it would cover
    _log_x(ax)
    ax.invert_yaxis()
    pad = (float(np.nanmax(t)) / float(np.nanmin(t))) ** 0.08 if np.nanmin(t) > 0 else 1.5
    ax.set_xlim(float(np.nanmin(t)) / pad, float(np.nanmax(t)) * pad * 2)
    line = _front_line(ax, pd.DataFrame({"score": ranks, "cost": t}), higher_is_better=False)
    if line is not None:
        line.set_label("Pareto front")
    ax.set_xlabel("fit time per fold, geometric mean over datasets (s, log scale)")
    ax.set_ylabel("average rank (1 = best)")
    ax.set_title(f"Average rank against fit time over {n_datasets} datasets "
                 "(up and left is better)", fontsize=11)
    ax.grid(True, which="both", alpha=0.3)
    ax.legend(fontsize=8, frameon=False, loc="center left", bbox_to_anchor=(1.0, 0.5))
    fig.tight_layout()
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
