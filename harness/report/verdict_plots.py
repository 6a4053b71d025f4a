"""Pictures of the across-dataset verdicts, as `matplotlib.figure.Figure` (never pyplot): for
each pair, the posterior samples of the Bayesian signed-rank test in a triangle (a corner per
outcome: a better, b better, practically equivalent), and the three probabilities as one
stacked bar per pair. Past `harness.report.shown.MAX_PAIRS` pairs both show the pairs of the
best-ranked strategy only (`harness.report.shown.drawn_pairs`)."""

from __future__ import annotations

import math

import numpy as np
from matplotlib.figure import Figure

from harness.analysis.verdict import Verdict
from harness.report.shown import drawn_pairs
from harness.report.style import plain

A_COLOUR, EQ_COLOUR, B_COLOUR = "#2e7d32", "#9e9e9e", "#c62828"
_H = math.sqrt(3) / 2


def _project(samples: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(b better, equivalent, a better) → the triangle with a better at the bottom left,
    b better at the bottom right and equivalent at the top."""
    b, eq = samples[:, 0], samples[:, 1]
    return b + eq / 2, eq * _H


def triangles(v: Verdict, max_cols: int = 4) -> Figure | None:
    """One triangle per pair: each dot a posterior sample of the three probabilities; the
    lines from the centre split the triangle into the three outcomes' regions (where that
    outcome is the most probable)."""
    if v.across is None or not v.posterior:
        return None
    drawn = drawn_pairs(v)
    pairs = list(drawn[["a", "b"]].itertuples(index=False, name=None))
    cols = min(max_cols, len(pairs))
    rows = math.ceil(len(pairs) / cols)
    fig = Figure(figsize=(max(3.0 * cols, 6.0), 2.7 * rows + 0.5))
    axes = list(fig.subplots(rows, cols, squeeze=False).flat)
    centre = (0.5, _H / 3)
    for ax, (a, b), (_, r) in zip(axes, pairs, drawn.iterrows()):
        x, y = _project(v.posterior[(a, b)])
        ax.plot([0, 1, 0.5, 0], [0, 0, _H, 0], color="#444444", linewidth=1)
        for mx, my in ((0.5, 0), (0.25, _H / 2), (0.75, _H / 2)):
            ax.plot([centre[0], mx], [centre[1], my], color="#bbbbbb", linewidth=0.8)
        ax.scatter(x, y, s=4, alpha=0.2, color="#1f4e79", linewidths=0, rasterized=True)
        ax.text(0, -0.05, f"{plain(a)}\n{r['p_a']:.2f}", ha="center", va="top", fontsize=7.5,
                color=A_COLOUR)
        ax.text(1, -0.05, f"{plain(b)}\n{r['p_b']:.2f}", ha="center", va="top", fontsize=7.5,
                color=B_COLOUR)
        ax.text(0.5, _H + 0.03, f"equivalent {r['p_eq']:.2f}", ha="center", va="bottom",
                fontsize=7.5, color="#555555")
        ax.set_xlim(-0.3, 1.3)
        ax.set_ylim(-0.3, _H + 0.12)
        ax.set_aspect("equal")
        ax.axis("off")
    for ax in axes[len(pairs):]:
        ax.set_visible(False)
    fig.suptitle(f"Posterior of the Bayesian signed-rank test per pair ({len(v.matrix)} "
                 "datasets); corner labels: the probability of each outcome", fontsize=10)
    fig.tight_layout()  # it leaves room for the suptitle itself
    return fig


def probability_bars(v: Verdict) -> Figure | None:
    """One horizontal bar per pair: P(a better), P(practically equivalent), P(b better)."""
    if v.across is None or v.across.empty:
        return None
    a = drawn_pairs(v).iloc[::-1]
    labels = [f"{plain(x)}  vs  {plain(y)}" for x, y in zip(a["a"], a["b"])]
    fig = Figure(figsize=(9.0, 2.0 + 0.34 * len(a)))
    ax = fig.subplots()
    pos = np.arange(len(a))
    left = np.zeros(len(a))
    for col, colour, name in (("p_a", A_COLOUR, "first better"),
                              ("p_eq", EQ_COLOUR, "practically equivalent"),
                              ("p_b", B_COLOUR, "second better")):
        width = a[col].to_numpy(float)
        ax.barh(pos, width, left=left, color=colour, height=0.7, label=name)
        for y, (l0, w) in enumerate(zip(left, width)):
            if w >= 0.12:
                ax.text(l0 + w / 2, y, f"{w:.2f}", ha="center", va="center", fontsize=7.5,
                        color="white")
        left += width
    ax.axvline(v.certainty, color="#222222", linewidth=0.8, linestyle=":")
    ax.axvline(1 - v.certainty, color="#222222", linewidth=0.8, linestyle=":")
    ax.set_yticks(pos, labels, fontsize=8)
    ax.set_xlim(0, 1)
    ax.set_xlabel(f"probability — a verdict needs one colour to span both dotted lines "
                  f"(certainty {v.certainty:.0%})")
    # a figure title, centred on the whole figure: an axes title over long pair labels
    # would run off the right edge
    fig.suptitle(f"Which is better across {len(v.matrix)} datasets\n(Bayesian signed-rank "
                 "test; pairs as first vs second)", fontsize=10)
    fig.legend(*ax.get_legend_handles_labels(), loc="lower center", ncol=3, frameon=False,
               fontsize=8)
    height = fig.get_size_inches()[1]
    fig.tight_layout(rect=(0, 0.35 / height, 1, 1))  # it leaves room for the suptitle itself
    return fig
