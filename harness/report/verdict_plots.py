"""Pictures of the across-dataset verdicts, as `matplotlib.figure.Figure` (never pyplot): for
each pair, the posterior samples of the Bayesian signed-rank test in a triangle (a corner per
outcome: a better, b better, practically equivalent), and the three probabilities as one
stacked bar per pair. Past `harness.report.shown.MAX_PAIRS` pairs both show the pairs of the
best-ranked strategy only (`harness.report.shown.drawn_pairs`)."""

from __future__ import annotations

import math

import numpy as np
from matplotlib.collections import LineCollection
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
    outcome is the most probable). The triangles are laid out on one axes without ticks (a
    set of axes per pair took twice as long to draw, for the same picture)."""
    if v.across is None or not v.posterior:
        return None
    drawn = drawn_pairs(v)
    pairs = list(drawn[["a", "b"]].itertuples(index=False, name=None))
    cols = min(max_cols, len(pairs))
    rows = math.ceil(len(pairs) / cols)
    width, height = max(3.0 * cols, 6.0), 2.7 * rows + 0.5
    fig = Figure(figsize=(width, height))
    # in inches: a cell of width / cols by 2.7 per pair and 0.5 for the title; a triangle's
    # side at most 1.5, so that the labels centred at its corners fit between triangles
    # (about 0.058 inch a character at this size, with a little to spare)
    longest = max(len(plain(name)) for pair in pairs for name in pair)
    unit = max(0.8, min(1.5, width / cols - 0.058 * longest - 0.1))
    cell_w, cell_h = width / cols / unit, 2.7 / unit
    ax = fig.add_axes((0, 0, 1, 1 - 0.5 / height))
    ax.set_xlim(0, width / unit)
    ax.set_ylim(0, (height - 0.5) / unit)
    centre = np.array([0.5, _H / 3])
    outline, spokes, xs, ys = [], [], [], []
    for k, ((a, b), (_, r)) in enumerate(zip(pairs, drawn.iterrows())):
        # the triangle and its labels (0.3 below, 0.12 above) centred in the cell
        at = np.array([(k % cols + 0.5) * cell_w - 0.5,
                       (rows - 1 - k // cols + 0.5) * cell_h - (_H - 0.18) / 2])
        outline.append(np.array([[0, 0], [1, 0], [0.5, _H], [0, 0]]) + at)
        spokes += [np.array([centre, m]) + at for m in ((0.5, 0), (0.25, _H / 2), (0.75, _H / 2))]
        x, y = _project(v.posterior[(a, b)])
        xs.append(x + at[0])
        ys.append(y + at[1])
        ax.text(at[0], at[1] - 0.05, f"{plain(a)}\n{r['p_a']:.2f}", ha="center", va="top",
                fontsize=7.5, color=A_COLOUR)
        ax.text(at[0] + 1, at[1] - 0.05, f"{plain(b)}\n{r['p_b']:.2f}", ha="center", va="top",
                fontsize=7.5, color=B_COLOUR)
        ax.text(at[0] + 0.5, at[1] + _H + 0.03, f"equivalent {r['p_eq']:.2f}", ha="center",
                va="bottom", fontsize=7.5, color="#555555")
    ax.add_collection(LineCollection(spokes, colors="#bbbbbb", linewidths=0.8))
    ax.add_collection(LineCollection(outline, colors="#444444", linewidths=1))
    ax.scatter(np.concatenate(xs), np.concatenate(ys), s=4, alpha=0.2, color="#1f4e79",
               linewidths=0, rasterized=True)
    ax.set_aspect("equal")
    ax.axis("off")
    fig.suptitle(f"Posterior of the Bayesian signed-rank test per pair ({len(v.matrix)} "
                 "datasets); corner labels: the probability of each outcome", fontsize=10,
                 y=1 - 0.15 / height, va="top")
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
