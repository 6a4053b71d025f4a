"""The report's figures, drawn in a process of their own while the report's own process
computes the verdict and the tables.

The process reads the ensemble-size curves of the datasets shown from the store and loads
the plotting library at once; it is handed the per-dataset means as soon as the report has
read the cells, then the verdict. It draws the figures with one panel per dataset (score
against fit time; score as the ensemble grows) and the verdict's figures. Drawing is about
half of a big store's report (see the README's figures on a store of 100,000 cells), and the
report's own process need not load matplotlib at all (unless it draws the tuning or speedup
figures).

On Linux the process is forked (it starts at once, with the other libraries already
imported) when no other thread runs; elsewhere the same figures are drawn in the report's
own process, when they are asked for. Either way the bytes are the same.
"""

from __future__ import annotations

import dataclasses
import gc
import multiprocessing as mp
import pickle
import queue
import signal
import sys
import threading
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Iterator

import pandas as pd

from harness.analysis.verdict import Verdict
from harness.execution.processes import die_with_parent
from harness.report.shown import drawn_posterior
from harness.store import Store

if TYPE_CHECKING:
    from matplotlib.figure import Figure

# the critical difference diagrams are small and full of text: drawn finer
_FINE = {"critical_difference": 150, "wilcoxon_holm_groups": 150}

Maker = Callable[[], "Figure | None"]


def _plotting():
    """The plotting modules (matplotlib), loaded when first drawn with."""
    from harness.report import cd_diagram, images, plots, verdict_plots
    return cd_diagram, images, plots, verdict_plots


@dataclasses.dataclass
class Panels:
    """What the per-dataset figures show besides the curves: each dataset's metric
    (``primary``), the per-dataset means of its strategies (`strategy_means` of the cells
    of the datasets shown) and those cells' strategies with their method and family, in
    the order of the cells (for colours and markers)."""

    primary: dict[str, str]
    means: pd.DataFrame
    strategies: pd.DataFrame


def read_curves(folder: Path, datasets: list[str]) -> pd.DataFrame:
    """The ensemble-size curves of the latest plan's cells of ``datasets``."""
    if not datasets:
        return pd.DataFrame()
    with Store(folder, read_only=True) as store:
        return store.curve_points(datasets)


def dataset_images(curves: pd.DataFrame, panels: Panels | None) -> dict[str, bytes]:
    """Figure name → PNG bytes of the per-dataset figures (a figure with nothing to show is
    left out)."""
    if panels is None or panels.means.empty:
        return {}
    _, _, plots, _ = _plotting()
    return _images([("score_vs_fit_time", lambda: plots.score_vs_fit_time(panels.means)),
                    ("ensemble_size", lambda: plots.size_curves(curves, panels.primary,
                                                                panels.strategies))])


def _verdict_figures(v: Verdict) -> Iterator[tuple[str, Maker]]:
    if not v.tested:
        return
    cd_diagram, _, plots, verdict_plots = _plotting()
    n = len(v.matrix)
    yield "critical_difference", lambda: cd_diagram.cd_figure(
        v.ranks, v.cd, v.nemenyi_groups,
        f"Nemenyi critical difference, α = {v.alpha:g}, {n} datasets")
    yield "wilcoxon_holm_groups", lambda: cd_diagram.cd_figure(
        v.ranks, None, v.wilcoxon_groups,
        f"Not told apart by Wilcoxon–Holm, α = {v.alpha:g}, {n} datasets")
    yield "rank_vs_fit_time", lambda: plots.rank_vs_fit_time(v.ranks, v.costs, n)
    yield "probability_bars", lambda: verdict_plots.probability_bars(v)
    yield "posterior_triangles", lambda: verdict_plots.triangles(v)


def verdict_images(v: Verdict | None) -> dict[str, bytes]:
    """Figure name → PNG bytes of the across-dataset verdict's figures (none unless it was
    tested)."""
    return _images(list(_verdict_figures(v))) if v is not None else {}


def _images(makers: list[tuple[str, Maker]]) -> dict[str, bytes]:
    """Each figure made and turned into PNG bytes before the next is made (a big figure
    takes much memory)."""
    _, images, _, _ = _plotting()
    out = {}
    for name, make in makers:
        fig = make()
        if fig is not None:
            out[name] = images.png(fig, dpi=_FINE.get(name, images.DPI))
        del fig
    return out


def _drawn(v: Verdict | None) -> Verdict | None:
    """``v`` with only what its figures read: not the per-dataset tables, nor the posterior
    samples of pairs not drawn (on 100,000 cells, 27 MB pickled against 2 MB)."""
    if v is None or not v.tested:
        return v
    return dataclasses.replace(v, intervals=v.intervals.iloc[:0], pairs=v.pairs.iloc[:0],
                               pareto=None, posterior=drawn_posterior(v))


def can_fork() -> bool:
    """Whether the figures can be drawn in a forked child: Linux (forking is safe there, and
    cheap), with no other thread in this process (a fork copies only the calling thread, and
    a lock another one held would never be released in the child)."""
    return (sys.platform.startswith("linux") and "fork" in mp.get_all_start_methods()
            and threading.active_count() == 1)


def _child(conn, folder: Path, datasets: list[str]) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's to handle
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    die_with_parent()
    try:
        _plotting()  # loaded while the report reads the cells
        gc.freeze()  # matplotlib's objects set aside too (`harness.collector.set_aside`)
        curves = read_curves(folder, datasets)
        images = dataset_images(curves, conn.recv())
        del curves
        found = ("images", {**verdict_images(conn.recv()), **images})
    except EOFError:  # the parent went away: nobody to draw for
        return
    except BaseException as exc:  # noqa: BLE001 - handed to the parent, which raises it
        found = ("error", exc)
    try:
        try:
            conn.send(found)
        except (pickle.PicklingError, TypeError, AttributeError):  # said in words instead
            conn.send(("error", RuntimeError(f"{type(found[1]).__name__}: {found[1]}")))
    except OSError:  # the parent went away
        pass


_END = object()


class Drawing:
    """The report's figures under way: a forked child where `can_fork` reads the curves of
    ``datasets`` at once; `panels` hands over what the per-dataset figures show, `verdict`
    the verdict, and `result` returns every figure. Use as a context manager, so that the
    child is ended however the report ends."""

    def __init__(self, folder: Path, datasets: list[str]) -> None:
        self.folder, self.datasets = Path(folder), list(datasets)
        self.shown: Panels | None = None
        self.v: Verdict | None = None
        self.handed: list[str] = []  # what has been handed over: "panels", "verdict"
        self.proc = self.conn = self.sender = None
        if can_fork():
            ctx = mp.get_context("fork")
            self.conn, theirs = ctx.Pipe()
            self.proc = ctx.Process(target=_child, args=(theirs, self.folder, self.datasets),
                                    daemon=True, name="woodlot-figures")
            self.proc.start()
            theirs.close()
            # what is handed over is sent from a thread, so that the report goes on while
            # the child is still drawing and not yet reading
            self.outbox: queue.Queue = queue.Queue()
            self.sender = threading.Thread(target=self._send, daemon=True)
            self.sender.start()

    def _send(self) -> None:
        while (item := self.outbox.get()) is not _END:
            try:
                self.conn.send(item)
            except OSError:  # the child is gone: `result` tells how
                return

    def panels(self, shown: Panels | None) -> None:
        """What the per-dataset figures show (None: no figures); call once, before
        `verdict`."""
        self.shown = shown
        self.handed.append("panels")
        if self.proc is not None:
            self.outbox.put(shown)

    def verdict(self, v: Verdict | None) -> None:
        """The verdict whose figures to draw (None: none); call once, after `panels`."""
        if "panels" not in self.handed:
            self.panels(None)
        self.v = v
        self.handed.append("verdict")
        if self.proc is not None:
            self.outbox.put(_drawn(v))

    def result(self) -> dict[str, bytes]:
        """Every figure: the verdict's, then the per-dataset ones. What the child raised is
        raised here; when it ended without a word (killed), the figures are drawn here."""
        if "verdict" not in self.handed:
            self.verdict(None)
        if self.proc is None:
            return self._here()
        try:
            kind, found = self.conn.recv()
        except (EOFError, OSError):  # gone; a reset when it died with data unread
            kind, found = "images", None
        finally:
            self.close(wait=5.0)
        if kind == "error":
            raise found
        return found if found is not None else self._here()

    def _here(self) -> dict[str, bytes]:
        images = ({} if self.shown is None else
                  dataset_images(read_curves(self.folder, self.datasets), self.shown))
        return {**verdict_images(self.v), **images}

    def close(self, wait: float = 0.0) -> None:
        """End the child (when it is still drawing after ``wait`` seconds) and wait for it."""
        if self.proc is not None:
            self.outbox.put(_END)
            self.proc.join(wait)
            if self.proc.is_alive():
                self.proc.terminate()
            self.proc.join()
            self.sender.join()
            self.conn.close()
            self.proc = None

    def __enter__(self) -> "Drawing":
        return self

    def __exit__(self, *exc) -> None:
        self.close()
