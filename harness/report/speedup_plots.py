"""Charts of the speedup points (`harness.analysis.speedup.summarize`), as figures: measured
speedup against workers with the fitted Amdahl curves, and fit time against workers."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, FuncFormatter, NullFormatter, NullLocator

from harness.analysis.speedup import LEVEL, amdahl_speedup
from harness.report.plots import dataset_panels
from harness.report.style import marker, plain


def _log2_axis(axis, lo: float, hi: float, ticks) -> None:
    axis.set_major_locator(FixedLocator(list(ticks)))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_locator(NullLocator())
    axis.set_minor_formatter(NullFormatter())


def _one_two_five(lo: float, hi: float) -> list[float]:
    """Tick values 1, 2, 5 × powers of ten between ``lo`` and ``hi``."""
    out = []
    for e in range(math.floor(math.log10(lo)) - 1, math.ceil(math.log10(hi)) + 1):
        out += [m * 10.0 ** e for m in (1, 2, 5) if lo <= m * 10.0 ** e <= hi]
    return out


def _legend_right(fig, handles: dict, extra: list[tuple[Any, str]]) -> float:
    """Strategies, then the line styles, in one column right of the panels; returns the share
    of the figure's width left to the panels."""
    width, height = fig.get_size_inches()
    room = 2.9
    fig.set_size_inches(width + room, height)
    share = width / (width + room)
    labels = list(handles) + [""] + [label for _, label in extra]
    items = list(handles.values()) + [Line2D([], [], linestyle="none")] + [h for h, _ in extra]
    fig.legend(items, labels, loc="center left", bbox_to_anchor=(share, 0.5), frameon=False,
               fontsize=9)
    return share


def speedup_plot(points: pd.DataFrame, fits: pd.DataFrame) -> Figure | None:
    """Per dataset: measured speedup against workers (log–log), the ideal S = p, and each
    strategy's fitted Amdahl curve, continued (dashed, shaded) as an extrapolation."""
    ok = points[(points.get("status") == "ok") & points.get("speedup").notna()] \
        if "speedup" in points else pd.DataFrame()
    if ok.empty or ok["workers"].nunique() < 2:
        return None
    fig, panels, colors = dataset_panels(ok, points, max_cols=2, size=(6.0, 4.2))
    handles: dict[str, Any] = {}
    for ax, ds, part in panels:
        pmax = int(part["workers"].max())
        xmax = max(8, 4 * pmax)
        ax.axvspan(pmax, xmax, color="0.93", zorder=0)
        ax.text(math.sqrt(pmax * xmax), 0.97, "extrapolated\n(Amdahl's law)", ha="center",
                va="top", fontsize=8, color="0.35", transform=ax.get_xaxis_transform())
        grid = np.geomspace(1, xmax, 200)
        ax.plot(grid, grid, color="0.45", linestyle=":", linewidth=1.2, zorder=1)
        fsub = fits[fits["dataset"] == ds].set_index("strategy")
        ymin = 1.0
        n = part["strategy"].nunique()
        for k, (name, g) in enumerate(part.groupby("strategy", sort=False)):
            g = g.sort_values("workers")
            c = colors[name]
            # markers beyond 1 worker are offset sideways a little, so none hides another
            w = g["workers"].to_numpy(float)
            x = np.where(w > 1, w * 2 ** ((k - (n - 1) / 2) * 0.025), w)
            mark = marker(g["family"].iloc[0])
            if name in fsub.index and pd.notna(fsub.loc[name].get("serial_fraction")):
                f = float(fsub.loc[name, "serial_fraction"])
                inside = grid[grid <= pmax]
                outside = grid[grid >= pmax]
                ax.plot(inside, amdahl_speedup(inside, f), color=c, linewidth=1.6, zorder=2)
                ax.plot(outside, amdahl_speedup(outside, f), color=c, linewidth=1.2,
                        linestyle="--", zorder=2)
            s = g["speedup"].to_numpy(float)
            err = np.vstack([s - g["speedup_low"].to_numpy(float),
                             g["speedup_high"].to_numpy(float) - s])
            flagged = (g["noisy"] | g["busy"]).to_numpy(bool)
            for fl in (False, True):
                sel = flagged == fl
                if not sel.any():
                    continue
                ax.errorbar(x[sel], s[sel], yerr=err[:, sel],
                            fmt=mark, color=c, markersize=7, capsize=3, linestyle="none",
                            markerfacecolor="white" if fl else c, zorder=3)
            handles[plain(name)] = Line2D([], [], color=c, marker=mark, linewidth=1.6)
            ymin = min(ymin, float(np.nanmin(g["speedup_low"])))
        ticks = [2 ** k for k in range(int(math.log2(xmax)) + 1)]
        ax.set_xscale("log", base=2)
        ax.set_yscale("log", base=2)
        ax.set_xlim(0.9, xmax * 1.1)
        ylo = 2 ** math.floor(math.log2(max(ymin * 0.9, 1 / 64)))
        ax.set_ylim(min(0.5, ylo), xmax * 1.1)
        _log2_axis(ax.xaxis, 1, xmax, ticks)
        _log2_axis(ax.yaxis, ylo, xmax, [t for t in [2 ** k for k in range(-6, 7)]
                                         if min(0.5, ylo) <= t <= xmax])
        ax.set_title(plain(ds), fontsize=11)
        ax.set_xlabel("workers p (n_jobs and native threads; log scale)")
        ax.set_ylabel("speedup T(1) / T(p) (log scale)")
        ax.grid(True, alpha=0.3)
    extra = [(Line2D([], [], color="0.45", linestyle=":"), "ideal: S = p"),
             (Line2D([], [], color="0.2", linewidth=1.6), "fitted Amdahl curve"),
             (Line2D([], [], color="0.2", linestyle="--"), "its extrapolation"),
             (Line2D([], [], color="0.2", marker="o", markerfacecolor="white",
                     linestyle="none"), "hollow: noisy or busy point"),
             (Line2D([], [], linestyle="none"), "(markers offset sideways\n to stay visible)")]
    share = _legend_right(fig, handles, extra)
    fig.suptitle("Parallel speedup of fitting (markers: median over repeats; bars: "
                 f"{LEVEL:.0%} "
                 "interval)", fontsize=12)
    fig.tight_layout(rect=(0, 0, share, 0.97))
    return fig


def fit_time_plot(points: pd.DataFrame, fits: pd.DataFrame) -> Figure | None:
    """Per dataset: median fit wall time against workers (bars: min–max over repeats), with
    each strategy's ideal T(1) / p dotted."""
    ok = points[points.get("status") == "ok"] if "status" in points else pd.DataFrame()
    if ok.empty:
        return None
    fig, panels, colors = dataset_panels(ok, points, max_cols=2, size=(6.0, 4.2))
    handles: dict[str, Any] = {}
    for ax, ds, part in panels:
        counts = sorted(part["workers"].unique())
        for name, g in part.groupby("strategy", sort=False):
            g = g.sort_values("workers")
            c = colors[name]
            mark = marker(g["family"].iloc[0])
            t = g["fit_seconds"].to_numpy(float)
            w = g["workers"].to_numpy(float)
            err = np.vstack([t - g["fit_seconds_min"].to_numpy(float),
                             g["fit_seconds_max"].to_numpy(float) - t])
            ax.errorbar(w, t, yerr=err, fmt=mark + "-", color=c, markersize=6, capsize=3,
                        linewidth=1.5)
            if 1 in set(g["workers"]):
                t1 = float(g.loc[g["workers"] == 1, "fit_seconds"].iloc[0])
                ax.plot(counts, [t1 / p for p in counts], color=c, linestyle=":", linewidth=1)
            handles[plain(name)] = Line2D([], [], color=c, marker=mark, linewidth=1.5)
        ax.set_xscale("log", base=2)
        ax.set_yscale("log")
        _log2_axis(ax.xaxis, counts[0], counts[-1], counts)
        lo = float(np.nanmin(part["fit_seconds_min"])) / 2.5  # room for the ideal lines
        hi = float(np.nanmax(part["fit_seconds_max"])) * 1.3
        ax.set_ylim(lo, hi)
        ax.yaxis.set_major_locator(FixedLocator(_one_two_five(lo, hi)))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.set_xlim(counts[0] / 1.25, counts[-1] * 1.25)
        ax.set_title(plain(ds), fontsize=11)
        ax.set_xlabel("workers p (log scale)")
        ax.set_ylabel("fit wall time, s (median; log scale)")
        ax.grid(True, which="both", alpha=0.3)
    extra = [(Line2D([], [], color="0.3", linestyle=":"), "ideal: T(1) / p")]
    share = _legend_right(fig, handles, extra)
    fig.suptitle("Fit time against workers (markers: median over repeats; bars: min–max)",
                 fontsize=12)
    fig.tight_layout(rect=(0, 0, share, 0.97))
    return fig
