"""The report's charts, each returned as a `matplotlib.figure.Figure` (never through pyplot,
so drawing them changes no global state such as a notebook's backend): score against fit time
with the Pareto front, average rank against fit time, ensemble-size curves and tuning
curves."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib import rcParams
from matplotlib.ticker import LogLocator, NullFormatter, NullLocator

from harness.analysis.stats import dominance
from harness.report.render import as_read, lower_is_better, metric_heading
from harness.report.style import marker, plain, strategy_colors


MIN_WIDTH = 8.0  # inches: room for a title and a legend of seven methods under one panel


def grid(n: int, max_cols: int = 3, size=(4.6, 3.6), extra: float = 0.9) -> tuple[Figure, list]:
    """A figure with ``n`` panels in rows of at most ``max_cols`` (at least `MIN_WIDTH` wide;
    ``extra`` inches of height for the title and legend)."""
    cols = min(max_cols, n)
    rows = math.ceil(n / cols)
    height = size[1] * rows + extra + (1.0 if n == 1 else 0.0)  # one panel: room for the legend
    fig = Figure(figsize=(max(size[0] * cols, MIN_WIDTH), height))
    axes = fig.subplots(rows, cols, squeeze=False)
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, list(axes.flat)


def legend_columns(fig: Figure, labels) -> int:
    """As many legend columns as fit the figure's width for labels this long."""
    longest = max((len(str(x)) for x in labels), default=10)
    per = 0.45 + 0.075 * longest  # inches: marker, gap and text at font size 9
    return max(1, min(len(labels), int(fig.get_size_inches()[0] // per)))


def legend_below(fig: Figure, handles_labels: dict, ncol: int | None = None) -> float:
    """A legend under the panels; returns the share of the height it takes."""
    ncol = ncol or legend_columns(fig, handles_labels)
    rows = math.ceil(len(handles_labels) / ncol)
    fig.legend(list(handles_labels.values()), list(handles_labels.keys()), loc="lower center",
               ncol=ncol, frameon=False, fontsize=9, bbox_to_anchor=(0.5, 0.0))
    height = fig.get_size_inches()[1]
    return min(0.45, (0.3 + 0.25 * rows) / height)


def place_panels(fig: Figure, bottom: float, top: float) -> None:
    """Fixed margins, in inches, for the panels of a `grid` figure between the legend
    (``bottom``, a share of the height) and the title (``top``): room for a tick-labelled
    axis and a title around each panel. A fixed layout costs nothing; matplotlib's tight
    layout measures every label of every panel, most of the drawing time of a big figure."""
    width, height = fig.get_size_inches()
    axes = [ax for ax in fig.axes if ax.get_visible()]
    cols = max(ax.get_subplotspec().colspan.stop for ax in axes)
    rows = max(ax.get_subplotspec().rowspan.stop for ax in axes)
    left, right, below, above = 0.8, 0.3, 0.55, 0.35  # inches around each panel
    panel_w = (width - cols * (left + right)) / cols
    panel_h = (height * (top - bottom) - rows * (below + above)) / rows
    fig.subplots_adjust(left=left / width, right=1 - right / width,
                        bottom=bottom + below / height, top=top - above / height,
                        wspace=(left + right) / panel_w, hspace=(below + above) / panel_h)


def panel_title(ax, text: str) -> None:
    """A panel's title, placed just above it rather than measured against its tick labels
    (measuring them for every panel was a tenth of a big figure's drawing time); the y tick
    labels are plain numbers, with no offset or multiplier text at the top of the axis that
    the title could cover."""
    ax.ticklabel_format(axis="y", style="plain", useOffset=False)
    ax.set_title(text, fontsize=11, y=1.0)


def log_x(ax) -> None:
    """A log x axis with major ticks only (`log_grid` draws the minor grid lines)."""
    ax.set_xscale("log")
    ax.xaxis.set_minor_locator(NullLocator())


def log_grid(ax) -> None:
    """Grid lines of a `log_x` panel, at the decades and at 2–9 times each (call once its
    limits are final). The minor lines are one collection rather than minor ticks: a tick
    is five artists, and the minor ticks of twelve log panels took a third of a figure's
    drawing time."""
    ax.grid(True, which="major", alpha=0.3)
    lo, hi = ax.get_xlim()
    at = LogLocator(subs=np.arange(2, 10)).tick_values(lo, hi)
    at = at[(at > lo) & (at < hi)]
    ax.vlines(at, 0, 1, transform=ax.get_xaxis_transform(), colors=rcParams["grid.color"],
              linewidth=rcParams["grid.linewidth"], linestyles=rcParams["grid.linestyle"],
              alpha=0.3, zorder=1.5)
    ax.set_xlim(lo, hi)


def _front_line(ax, points: pd.DataFrame, higher_is_better: bool = True):
    """Draw the Pareto front of ``points`` (columns score, cost) as a staircase: from each
    front point the line runs right at its score to the next one's cost (everything below
    and to the right of it is dominated)."""
    pts = points[["score", "cost"]].dropna()
    if len(pts) < 2:
        return None
    score, cost = pts["score"].to_numpy(float), pts["cost"].to_numpy(float)
    dom = dominance(score if higher_is_better else -score, cost, np.zeros(len(pts)))
    on = ~dom.any(axis=0)
    order = np.lexsort((score[on], cost[on]))  # by cost, then score
    xs = list(cost[on][order]) + [ax.get_xlim()[1]]
    ys = list(score[on][order]) + [score[on][order][-1]]
    (line,) = ax.step(xs, ys, where="post", color="#555555", linewidth=1.2, linestyle="--",
                      zorder=1)
    ax.set_xlim(right=xs[-1])
    return line


def dataset_panels(frame: pd.DataFrame, colors_from: pd.DataFrame | None = None,
                   max_cols: int = 3, size=(4.6, 3.6),
                   extra: float = 0.9) -> tuple[Figure, list, dict]:
    """A figure with one panel per dataset of ``frame``: (figure, [(axes, dataset, its
    rows)], strategy colours over the strategies of ``colors_from``, default ``frame``)."""
    datasets = list(frame["dataset"].unique())
    fig, axes = grid(len(datasets), max_cols, size, extra)
    panels = [(ax, ds, frame[frame["dataset"] == ds]) for ax, ds in zip(axes, datasets)]
    c = frame if colors_from is None else colors_from
    return fig, panels, strategy_colors(dict(zip(c["strategy"], c["method"])))


def score_vs_fit_time(means: pd.DataFrame) -> Figure | None:
    """Per dataset: mean test score (± sd over folds) against mean fit time, log time axis,
    with the Pareto front of the means drawn. ``means``: `harness.analysis.results.
    strategy_means`."""
    if means.empty:
        return None
    fig, panels, colors = dataset_panels(means, extra=1.1)
    handles = {plain(name): Line2D([], [], marker=marker(family), color=colors[name],
                                   markersize=7, linestyle="none")
               for name, family in zip(means["strategy"], means["family"])}
    for ax, ds, g in panels:
        g = g.set_index("strategy")
        metric = g["metric"].iloc[0]
        scores = as_read(metric, g["score"])
        sd = g["sd"].fillna(0.0)
        shade = [colors[name] for name in g.index]
        # one call per panel for the bars and one per family for the points: a few artists
        # per panel, not several per strategy (drawing time grows with the artists)
        ax.vlines(g["fit_seconds"], scores - sd, scores + sd, colors=shade, linewidth=1.2)
        ax.scatter(np.repeat(g["fit_seconds"].to_numpy(), 2),
                   np.concatenate([(scores - sd).to_numpy(), (scores + sd).to_numpy()])
                   .reshape(2, -1).T.ravel(), marker="_", s=40, c=np.repeat(shade, 2, axis=0),
                   linewidths=1.2)
        for family, part in g.groupby("family", sort=False):
            ax.scatter(part["fit_seconds"], scores[part.index], marker=marker(family), s=49,
                       c=[colors[name] for name in part.index], zorder=3)
        log_x(ax)
        line = _front_line(ax, pd.DataFrame({"score": scores, "cost": g["fit_seconds"]}),
                           higher_is_better=not lower_is_better(metric))
        if line is not None:
            handles["Pareto front"] = line
        panel_title(ax, plain(ds))
        ax.set_xlabel("mean fit time per fold (s, log scale)")
        ax.set_ylabel(metric_heading(metric), fontsize=9)
        log_grid(ax)
    fig.suptitle("Test score against fit time\n(bars: ± 1 sd over folds; dashed: Pareto front)",
                 fontsize=11)
    place_panels(fig, legend_below(fig, handles), _top(fig, 2))
    return fig


def _top(fig: Figure, lines: int = 1) -> float:
    """The share of the height below a suptitle of ``lines`` lines."""
    return 1 - (0.15 + 0.22 * lines) / fig.get_size_inches()[1]


def rank_vs_fit_time(ranks: pd.Series, costs: pd.DataFrame, n_datasets: int) -> Figure | None:
    """All datasets at once: average rank against the geometric mean fit time, with the
    Pareto front (lower rank and lower time are better). ``costs``: ``strategy, family,
    method, fit_seconds``."""
    if ranks is None or len(ranks) < 2:
        return None
    c = costs.set_index("strategy").reindex(ranks.index)
    t = c["fit_seconds"]
    colors = strategy_colors(dict(zip(c.index, c["method"])))
    fig = Figure(figsize=(7.6, 4.8))
    ax = fig.subplots()
    placed: list[tuple[float, float]] = []  # (log10 time, rank) of labels already drawn
    for name in ranks.index:
        ax.plot(t[name], ranks[name], marker(c.loc[name, "family"]), color=colors[name],
                markersize=8, linestyle="none", label=plain(name))
        x, y = float(np.log10(t[name])) if t[name] > 0 else 0.0, float(ranks[name])
        near = sum(1 for px, py in placed if abs(px - x) < 0.4 and abs(py - y) < 0.2)
        placed.append((x, y))
        ax.annotate(plain(name), (t[name], ranks[name]), textcoords="offset points",
                    xytext=(6, 4 - 11 * near), fontsize=8)  # below a label it would cover
    log_x(ax)
    ax.invert_yaxis()
    pad = (float(np.nanmax(t)) / float(np.nanmin(t))) ** 0.08 if np.nanmin(t) > 0 else 1.5
    ax.set_xlim(float(np.nanmin(t)) / pad, float(np.nanmax(t)) * pad * 2)
    line = _front_line(ax, pd.DataFrame({"score": ranks, "cost": t}), higher_is_better=False)
    if line is not None:
        line.set_label("Pareto front")
    ax.set_xlabel("fit time per fold, geometric mean over datasets (s, log scale)")
    ax.set_ylabel("average rank (1 = best)")
    panel_title(ax, f"Average rank against fit time over {n_datasets} datasets")
    log_grid(ax)
    ax.legend(fontsize=8, frameon=False, loc="center left", bbox_to_anchor=(1.0, 0.5))
    fig.tight_layout()
    return fig


def size_curves(points: pd.DataFrame, primary: dict[str, str],
                cells: pd.DataFrame) -> Figure | None:
    """Per dataset: mean test score against the number of ensemble members (log axis).
    ``points``: one row per curve point of a successful cell (``key, dataset, strategy,
    members, score``; `harness.store.Store.curve_points`); ``cells``: the results frame of
    those datasets, for each strategy's family and colour. Only sizes every fold's curve has
    are shown (folds of a tuned strategy end at different sizes; a mean over some of them
    would jump), as `harness.analysis.curves.mean_curve` does."""
    if points.empty:
        return None
    group = ["dataset", "strategy", "members"]
    folds = points.groupby(["dataset", "strategy"])["key"].transform("nunique")
    have = points.groupby(group)["key"].transform("nunique")
    means = points[have == folds].groupby(group)["score"].mean().reset_index()
    family = cells.drop_duplicates("strategy").set_index("strategy")["family"]
    fig, panels, colors = dataset_panels(means, colors_from=cells)
    handles = {}
    for ax, ds, part in panels:
        metric = primary[ds]
        for name, mean in part.groupby("strategy"):
            (h,) = ax.plot(mean["members"], as_read(metric, mean["score"].to_numpy()),
                           marker=marker(family[name]), color=colors[name], markersize=4,
                           linewidth=1.5)
            handles[plain(name)] = h
        log_x(ax)
        panel_title(ax, plain(ds))
        ax.set_xlabel("ensemble members (trees or stages, log scale)")
        ax.set_ylabel(metric_heading(metric), fontsize=9)
        log_grid(ax)
    fig.suptitle("Test score as the ensemble grows (mean over folds)", fontsize=12)
    place_panels(fig, legend_below(fig, handles), _top(fig))
    return fig


def tuning_curves(curves: pd.DataFrame, primary: dict[str, str]) -> Figure | None:
    """Per dataset: the outer-test score of the best configuration so far against the number
    of trials (solid), with its mean inner score (dashed). ``curves``:
    `harness.analysis.tuning.mean_curves` with each strategy's ``method`` and ``family``."""
    if curves.empty:
        return None
    fig, panels, colors = dataset_panels(curves)
    families = dict(zip(curves["strategy"], curves["family"]))
    handles = {}
    for ax, ds, part in panels:
        metric = primary[ds]
        for name, c in part.groupby("strategy", sort=False):
            c = c.sort_values("budget")
            (h,) = ax.plot(c["budget"], as_read(metric, c["outer"].to_numpy()),
                           marker=marker(families.get(name, "")), color=colors[name],
                           markersize=5, linewidth=1.6)
            ax.plot(c["budget"], as_read(metric, c["inner"].to_numpy()), color=colors[name],
                    linewidth=1.0, linestyle="--", alpha=0.8)
            handles[plain(name)] = h
        ax.set_xscale("log", base=2)
        ax.xaxis.set_minor_formatter(NullFormatter())
        budgets = sorted(set(part["budget"]))
        ax.set_xticks(budgets)
        ax.set_xticklabels([str(b) for b in budgets])
        panel_title(ax, plain(ds))
        ax.set_xlabel("trials (configurations tried, log scale)")
        ax.set_ylabel(metric_heading(metric), fontsize=9)
        ax.grid(True, which="both", alpha=0.3)
    fig.suptitle("Best configuration so far: outer-test score (solid) and mean inner score "
                 "(dashed), mean over outer folds", fontsize=12)
    bottom = legend_below(fig, handles, ncol=min(4, len(handles)))
    fig.tight_layout(rect=(0, bottom, 1, 0.96))
    return fig
