"""Critical difference diagram: average ranks on an axis, with bars over groups of
strategies that are not significantly different.

Layout (top to bottom): title, the critical difference scale bar (when given),
the average-rank axis with rank 1 on the left, thick bars over the groups, then the
strategy labels. The better half of the strategies is labelled on the left, the
worse half on the right; each label is joined to its rank by an elbow line, ordered
so that no two lines cross. The figure is sized from the measured label widths, so
long names never run into the axis.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from harness.report.style import plain

__all__ = ["cd_figure"]

_FONT = 10          # label font size, points
_ROW = 0.26         # vertical distance between label rows, inches
_BAR_ROW = 0.11     # vertical distance between group bars, inches
_PAD = 0.12         # gap between an elbow line's end and its label, inches
_LINE = "#333333"
_BAR = "#1f1f1f"


def _text_width(fig: Figure, text: str, size: float) -> float:
    """Rendered width of ``text`` in inches."""
    artist = fig.text(0, 0, text, fontsize=size)
    width = artist.get_window_extent(fig.canvas.get_renderer()).width / fig.dpi
    artist.remove()
    return width


def _pack(bars: list[tuple[float, float]], gap: float = 0.15) -> list[int]:
    """Row for each (sorted) bar: the first row whose last bar ends ``gap`` ranks before it."""
    ends: list[float] = []
    rows = []
    for lo, up in bars:
        row = next((i for i, e in enumerate(ends) if e + gap < lo), len(ends))
        if row == len(ends):
            ends.append(up)
        else:
            ends[row] = up
        rows.append(row)
    return rows


def _label(name: str, rank: float, left: bool) -> str:
    return f"{plain(name)}  {rank:.2f}" if left else f"{rank:.2f}  {plain(name)}"


def cd_figure(avg_ranks: Mapping[str, float], cd: float | None,
              groups: Iterable[Iterable[str]], title: str) -> Figure:
    """The critical difference diagram as a figure (no pyplot state; the caller saves it).

    ``avg_ranks``: strategy → average rank (1 = best). ``cd``: the critical difference,
    drawn as a scale bar above the axis, or None (groups from pairwise tests). ``groups``:
    sets of strategies not told apart; each with two or more members becomes a thick bar from
    its best to its worst average rank (unknown names raise ValueError). ``title``: the
    figure's title.
    """
    ranks = {str(k): float(v) for k, v in dict(avg_ranks).items()}
    if not ranks:
        raise ValueError("no strategies to draw")
    bars = []
    for g in groups:
        members = [str(m) for m in g]
        unknown = [m for m in members if m not in ranks]
        if unknown:
            raise ValueError(f"group members without a rank: {unknown}")
        if len(members) >= 2:
            bars.append((min(ranks[m] for m in members), max(ranks[m] for m in members)))
    bars.sort()
    bar_rows = _pack(bars)

    order = sorted(ranks, key=lambda n: (ranks[n], n))  # best first
    k = len(order)
    n_left = (k + 1) // 2
    left = order[:n_left]                   # best first: lines nearest the centre go lowest
    right = order[n_left:][::-1]            # worst first, for the same reason
    hi = max(k, 2, int(max(ranks.values()) + 0.999))  # axis end (ranks lie in 1 … k)

    fig = Figure()
    FigureCanvasAgg(fig)  # measuring label widths needs a renderer; no global state touched
    label_w = max([_text_width(fig, _label(n, ranks[n], True), _FONT) for n in order])
    axis_w = max(3.5, 0.55 * (hi - 1))
    margin = label_w + _PAD + 0.35
    title_w = _text_width(fig, title, _FONT + 2) + 0.4
    if axis_w + 2 * margin < title_w:  # a long title widens the axis, never gets cut off
        axis_w = title_w - 2 * margin
    width = axis_w + 2 * margin

    y_title = 0.30
    y_cd = 0.85
    y_axis = y_cd + 0.40 if cd is not None else 0.85
    y_bar0 = y_axis + 0.22
    y_lab0 = y_bar0 + max(bar_rows, default=0) * _BAR_ROW + 0.30
    height = y_lab0 + (max(len(left), len(right)) - 1) * _ROW + 0.35

    fig.set_size_inches(width, height)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, width)
    ax.set_ylim(height, 0)  # inches, y grows downwards
    ax.axis("off")

    def x_of(rank: float) -> float:
        return margin + (rank - 1) / (hi - 1) * axis_w

    ax.text(width / 2, y_title, title, ha="center", va="center", fontsize=_FONT + 2)

    # rank axis with ticks and numbers above it
    ax.plot([x_of(1), x_of(hi)], [y_axis, y_axis], color=_LINE, lw=1.2)
    for r in range(1, hi + 1):
        ax.plot([x_of(r)] * 2, [y_axis, y_axis - 0.08], color=_LINE, lw=1.2)
        ax.text(x_of(r), y_axis - 0.12, str(r), ha="center", va="bottom", fontsize=_FONT - 1)
        if r < hi:
            ax.plot([x_of(r + 0.5)] * 2, [y_axis, y_axis - 0.04], color=_LINE, lw=0.8)

    if cd is not None:
        # from rank 1 when it fits on the axis, else centred on it (few datasets)
        start = 1.0 if 1 + cd <= hi else (1 + hi - cd) / 2
        x0, x1 = x_of(start), x_of(start + cd)
        ax.plot([x0, x1], [y_cd, y_cd], color=_LINE, lw=1.2)
        for x in (x0, x1):
            ax.plot([x, x], [y_cd - 0.05, y_cd + 0.05], color=_LINE, lw=1.2)
        ax.text((x0 + x1) / 2, y_cd - 0.08, f"CD = {cd:.2f}", ha="center", va="bottom",
                fontsize=_FONT - 1)

    # elbow lines and labels
    for side, names in (("left", left), ("right", right)):
        for row, name in enumerate(names):
            y = y_lab0 + row * _ROW
            x = x_of(ranks[name])
            end = x_of(1) - 0.25 if side == "left" else x_of(hi) + 0.25
            ax.plot([x, x, end], [y_axis, y, y], color=_LINE, lw=0.9)
            ax.text(end - _PAD if side == "left" else end + _PAD, y,
                    _label(name, ranks[name], side == "left"),
                    ha="right" if side == "left" else "left", va="center", fontsize=_FONT)

    # group bars, slightly wider than the ranks they join
    for row, (lo, up) in zip(bar_rows, bars):
        y = y_bar0 + row * _BAR_ROW
        ax.plot([x_of(lo) - 0.06, x_of(up) + 0.06], [y, y], color=_BAR, lw=4,
                solid_capstyle="round")
    return fig
