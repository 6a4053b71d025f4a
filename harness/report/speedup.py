"""Tables and plots of the parallel speedup sweep, from the store alone.

``tables/speedup.csv`` (one row per dataset × strategy × worker count), ``tables/
serial_fraction.csv`` (one row per dataset × strategy: Amdahl's-law fit and extrapolation),
``tables/speedup.md`` (both, with the notes a reader needs), ``plots/speedup.png`` and
``plots/fit_time_vs_workers.png``. The numbers come from `harness.scaling.summarize`.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.ticker import FixedLocator, NullFormatter, NullLocator

from harness.report.plots import FAMILY_MARKERS, _grid, _save, plt, strategy_colors
from harness.report.tables import _fmt, markdown
from harness.scaling import (BUSY_CORES, EXTRAPOLATE_TO, amdahl_speedup, summarize)


def write(out, frame: pd.DataFrame, runs: dict[int, dict[str, Any]]) -> None:
    """Write the sweep's tables and plots into ``out.folder``; add them to ``out.files`` and
    a short summary to ``out.speedup``. Nothing is written when the store has no sweep."""
    from harness.report.build import write_text

    if frame.empty:
        return
    sweeps = [p.get("scaling", {}) for _, p in sorted(runs.items()) if p.get("scaling")]
    margin = float(sweeps[-1].get("noise_margin", 0.15)) if sweeps else 0.15
    points, fits = summarize(frame, noise_margin=margin)
    folder = Path(out.folder)
    out.files.append(write_text(folder / "tables" / "speedup.csv",
                                points.to_csv(index=False)))
    out.files.append(write_text(folder / "tables" / "serial_fraction.csv",
                                fits.to_csv(index=False)))
    out.files.append(write_text(folder / "tables" / "speedup.md",
                                speedup_markdown(points, fits, sweeps, margin)))
    for fn, name in ((speedup_plot, "speedup"), (fit_time_plot, "fit_time_vs_workers")):
        path = fn(points, fits, folder / "plots" / f"{name}.png")
        if path is not None:
            out.files.append(path)
    out.speedup = summary(points, fits)


def summary(points: pd.DataFrame, fits: pd.DataFrame) -> pd.DataFrame:
    """One line per dataset × strategy: speedup at the most workers, the serial fraction, and
    which of its points were noisy or disturbed by other processes."""
    if fits.empty or "serial_fraction" not in fits:
        return pd.DataFrame()
    rows = []
    for _, f in fits.iterrows():
        fitted = pd.notna(f.get("serial_fraction"))
        mine = points[(points["dataset"] == f["dataset"]) & (points["strategy"] == f["strategy"])
                      & (points["status"] == "ok")]
        flags = [f"{word} at {', '.join(str(int(w)) for w in mine.loc[mine[col], 'workers'])}"
                 for word, col in (("noisy", "noisy"), ("busy", "busy")) if mine[col].any()]
        rows.append({"dataset": f["dataset"], "strategy": f["strategy"],
                     "workers": int(f["max_workers"]) if pd.notna(f["max_workers"]) else None,
                     "speedup": f.get("measured_speedup"),
                     "serial_fraction": _interval(f.get("serial_fraction"),
                                                  f.get("serial_fraction_low"),
                                                  f.get("serial_fraction_high"), 2)
                     if fitted else f["fit"],
                     "flags": "; ".join(flags)})
    return pd.DataFrame(rows)


# ------------------------------------------------------------------ Markdown

def _interval(v, lo, hi, digits: int = 3) -> str:
    if v is None or pd.isna(v):
        return ""
    if lo is None or pd.isna(lo) or (abs(hi - lo) < 10 ** -(digits + 1)):
        return f"{v:.{digits}f}"
    return f"{v:.{digits}f} [{lo:.{digits}f}, {hi:.{digits}f}]"


def _flags(r, margin: float) -> str:
    if r.get("status") != "ok":
        return f"{r.get('status')}: {r.get('message')}"
    flags = []
    if r.get("noisy"):
        flags.append(f"noisy (spread {r['spread']:.0%} > {margin:.0%})")
    if r.get("busy"):
        flags.append(f"busy (other processes used {r['other_load']:.2f} cores)")
    if not r.get("limits_ok"):
        flags.append(f"limits not in force ({r['limits']})")
    return "; ".join(flags)


def speedup_markdown(points: pd.DataFrame, fits: pd.DataFrame, sweeps: list[dict],
                     margin: float) -> str:
    last = sweeps[-1] if sweeps else {}
    lines = ["# Parallel speedup", ""]
    if last:
        lines.append(f"Measured on {last.get('cpu_model', '?')}, {last.get('cores', '?')} cores "
                     f"({last.get('usable_cores', '?')} usable by woodlot); worker counts "
                     f"{', '.join(map(str, last.get('workers', [])))}; "
                     f"{last.get('repeats', '?')} timed repeats per point after one untimed "
                     "warm-up fit. Each point ran alone in a fresh process with `n_jobs` set to "
                     "the worker count where the estimator has it and the OpenMP and BLAS "
                     "thread pools limited to it; the limits were read back inside every fit.")
        lines.append("")
        before, after = last.get("load_average_before"), last.get("load_average_after")
        if before or after:
            lines.append(f"Load average (1, 5, 15 min) before the sweep: {before}; after: "
                         f"{after}.")
            lines.append("")
    notes = list(dict.fromkeys(n for s in sweeps for n in s.get("notes", [])))
    for note in notes:
        lines.append(f"- Note: {note}.")
    if notes:
        lines.append("")
    lines += ["Speedup S(p) = T(1) / T(p) from median fit wall times; efficiency = S(p) / p. "
              "Brackets: 95% bootstrap interval over repeats. CPU s counts every thread and "
              "worker process; cores busy = CPU / wall. *Noisy*: the repeats' fit times "
              f"differ by more than {margin:.0%} of their median ((max − min) / median). "
              f"*Busy*: other processes kept more than {BUSY_CORES:g} cores busy during the fits. "
              "Prediction throughput is measured on the test rows at the same worker count.",
              ""]
    show = ["strategy", "family", "workers", "fit s", "min–max s", "CPU s", "cores busy",
            "speedup", "efficiency", "predict rows/s", "flags"]
    for ds, part in points.groupby("dataset", sort=False):
        rows = []
        for _, r in part.iterrows():
            ok = r.get("status") == "ok"
            rows.append({
                "strategy": r["strategy"], "family": r["family"], "workers": int(r["workers"]),
                "fit s": _fmt(r.get("fit_seconds")) if ok else "",
                "min–max s": f"{r['fit_seconds_min']:.3g}–{r['fit_seconds_max']:.3g}"
                if ok else "",
                "CPU s": _fmt(r.get("fit_cpu_seconds")) if ok else "",
                "cores busy": f"{r['cores_busy']:.2f}" if ok else "",
                "speedup": _interval(r.get("speedup"), r.get("speedup_low"),
                                     r.get("speedup_high"), 2) if ok else "",
                "efficiency": f"{r['efficiency']:.2f}" if ok and pd.notna(r.get("efficiency"))
                else "",
                "predict rows/s": f"{r['predict_rows_per_second']:,.0f}" if ok else "",
                "flags": _flags(r, margin)})
        lines += [f"## {ds}: speedup per worker count", "",
                  markdown(pd.DataFrame(rows, columns=show)), ""]
    lines += ["## Serial fraction (Amdahl's law) and extrapolation", "",
              "f in S(p) = 1 / (f + (1 − f) / p), fitted by least squares to the measured "
              "speedups (f kept in [0, 1]); 95% interval from a bootstrap over repeats. "
              "**S at 8, 16 and 64 cores are extrapolations of the fitted law, not "
              "measurements**; they ignore memory bandwidth, start-up and other overheads "
              "that grow with the core count.", ""]
    rows = []
    for _, f in fits.iterrows():
        fitted = pd.notna(f.get("serial_fraction"))
        row = {"dataset": f["dataset"], "strategy": f["strategy"], "family": f["family"],
               "measured S": f"{f['measured_speedup']:.2f} at {int(f['max_workers'])}"
               if fitted else "",
               "serial fraction f": _interval(f.get("serial_fraction"),
                                              f.get("serial_fraction_low"),
                                              f.get("serial_fraction_high"))}
        for q in EXTRAPOLATE_TO:
            row[f"S({q}), extrapolated"] = _interval(
                f.get(f"extrapolated_speedup_{q}"), f.get(f"extrapolated_speedup_{q}_low"),
                f.get(f"extrapolated_speedup_{q}_high"), 2) if fitted else ""
        row["fit"] = f["fit"]
        rows.append(row)
    lines += [markdown(pd.DataFrame(rows)), ""]
    ok = points[points["status"] == "ok"] if "status" in points else points
    if not ok.empty and ok["limits_ok"].all():
        lines.append("Thread limits seen inside every fit: each pool at the worker count, "
                     "and `n_jobs` equal to it where the estimator has one.")
    elif not ok.empty:
        bad = ok[~ok["limits_ok"].astype(bool)]
        lines.append(f"Thread limits NOT in force at {len(bad)} point(s); see the flags above.")
    lines.append("")
    return "\n".join(lines)


# ------------------------------------------------------------------ plots

def _log2_axis(axis, lo: float, hi: float, ticks) -> None:
    axis.set_major_locator(FixedLocator(list(ticks)))
    axis.set_major_formatter(plt.FuncFormatter(lambda v, _: f"{v:g}"))
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


def _figure(ok: pd.DataFrame, points: pd.DataFrame):
    """A figure with one panel per dataset of ``ok``: (figure, [(axes, dataset, its rows)],
    one colour per strategy, the same in every plot)."""
    datasets = list(dict.fromkeys(ok["dataset"]))
    fig, axes = _grid(len(datasets), max_cols=2, size=(6.0, 4.2))
    panels = [(ax, ds, ok[ok["dataset"] == ds]) for ax, ds in zip(axes, datasets)]
    return fig, panels, strategy_colors(points["strategy"])


def speedup_plot(points: pd.DataFrame, fits: pd.DataFrame, path: Path) -> Path | None:
    """Per dataset: measured speedup against workers (log–log), the ideal S = p, and each
    strategy's fitted Amdahl curve, continued (dashed, shaded) as an extrapolation."""
    ok = points[(points.get("status") == "ok") & points.get("speedup").notna()] \
        if "speedup" in points else pd.DataFrame()
    if ok.empty or ok["workers"].nunique() < 2:
        return None
    fig, panels, colors = _figure(ok, points)
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
            marker = FAMILY_MARKERS.get(g["family"].iloc[0], "P")
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
                            fmt=marker, color=c, markersize=7, capsize=3, linestyle="none",
                            markerfacecolor="white" if fl else c, zorder=3)
            handles[name] = Line2D([], [], color=c, marker=marker, linewidth=1.6)
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
        ax.set_title(ds, fontsize=11)
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
    fig.suptitle("Parallel speedup of fitting (markers: median over repeats; bars: 95% "
                 "interval)", fontsize=12)
    fig.tight_layout(rect=(0, 0, share, 0.97))
    return _save(fig, path)


def fit_time_plot(points: pd.DataFrame, fits: pd.DataFrame, path: Path) -> Path | None:
    """Per dataset: median fit wall time against workers (bars: min–max over repeats), with
    each strategy's ideal T(1) / p dotted."""
    ok = points[points.get("status") == "ok"] if "status" in points else pd.DataFrame()
    if ok.empty:
        return None
    fig, panels, colors = _figure(ok, points)
    handles: dict[str, Any] = {}
    for ax, ds, part in panels:
        counts = sorted(part["workers"].unique())
        for name, g in part.groupby("strategy", sort=False):
            g = g.sort_values("workers")
            c = colors[name]
            marker = FAMILY_MARKERS.get(g["family"].iloc[0], "P")
            t = g["fit_seconds"].to_numpy(float)
            w = g["workers"].to_numpy(float)
            err = np.vstack([t - g["fit_seconds_min"].to_numpy(float),
                             g["fit_seconds_max"].to_numpy(float) - t])
            ax.errorbar(w, t, yerr=err, fmt=marker + "-", color=c, markersize=6, capsize=3,
                        linewidth=1.5)
            if 1 in set(g["workers"]):
                t1 = float(g.loc[g["workers"] == 1, "fit_seconds"].iloc[0])
                ax.plot(counts, [t1 / p for p in counts], color=c, linestyle=":", linewidth=1)
            handles[name] = Line2D([], [], color=c, marker=marker, linewidth=1.5)
        ax.set_xscale("log", base=2)
        ax.set_yscale("log")
        _log2_axis(ax.xaxis, counts[0], counts[-1], counts)
        lo = float(np.nanmin(part["fit_seconds_min"])) / 2.5  # room for the ideal lines
        hi = float(np.nanmax(part["fit_seconds_max"])) * 1.3
        ax.set_ylim(lo, hi)
        ax.yaxis.set_major_locator(FixedLocator(_one_two_five(lo, hi)))
        ax.yaxis.set_major_formatter(plt.FuncFormatter(lambda v, _: f"{v:g}"))
        ax.yaxis.set_minor_formatter(NullFormatter())
        ax.set_xlim(counts[0] / 1.25, counts[-1] * 1.25)
        ax.set_title(ds, fontsize=11)
        ax.set_xlabel("workers p (log scale)")
        ax.set_ylabel("fit wall time, s (median; log scale)")
        ax.grid(True, which="both", alpha=0.3)
    extra = [(Line2D([], [], color="0.3", linestyle=":"), "ideal: T(1) / p")]
    share = _legend_right(fig, handles, extra)
    fig.suptitle("Fit time against workers (markers: median over repeats; bars: min–max)",
                 fontsize=12)
    fig.tight_layout(rect=(0, 0, share, 0.97))
    return _save(fig, path)
