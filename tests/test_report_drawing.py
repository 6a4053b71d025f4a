"""The report's figures drawn in a process of its own (`harness.report.drawing`): the same
bytes as drawn in the report's own process, errors raised in the report, a child that dies
replaced, and no process left behind however the report ends."""

from __future__ import annotations

import os
import signal
import subprocess
import sys

import psutil
import pytest

from harness.report import drawing, plots, tables
from harness.report.writer import write_report
from tests.conftest import SMALL_SUITE

FIGURES = {"critical_difference", "wilcoxon_holm_groups", "rank_vs_fit_time",
           "probability_bars", "posterior_triangles", "score_vs_fit_time", "ensemble_size"}


@pytest.fixture(scope="module")
def folder(run_once):
    return run_once(SMALL_SUITE, "drawing").folder


def plots_of(out) -> dict[str, bytes]:
    return {p.stem: p.read_bytes() for p in sorted((out / "plots").glob("*.png"))}


def children() -> set[int]:
    """This process's children (the forkserver of the module's run among them)."""
    return {p.pid for p in psutil.Process().children(recursive=True)}


def test_figures_drawn_apart_are_the_bytes_drawn_in_process(folder, tmp_path, monkeypatch):
    before = children()
    assert drawing.can_fork()  # Linux, one thread: the tests run the forked path
    forks = []
    real = drawing.Drawing.__init__

    def counted(self, *args, **kwargs):
        real(self, *args, **kwargs)
        forks.append(self.proc is not None)

    monkeypatch.setattr(drawing.Drawing, "__init__", counted)
    write_report(folder, out=tmp_path / "apart")
    monkeypatch.setattr(drawing, "can_fork", lambda: False)
    write_report(folder, out=tmp_path / "here")
    assert forks == [True, False]
    apart, here = plots_of(tmp_path / "apart"), plots_of(tmp_path / "here")
    assert FIGURES <= set(apart)
    assert apart == here
    assert children() == before


@pytest.mark.parametrize("apart", [True, False])
def test_an_error_while_drawing_is_raised_by_the_report(folder, tmp_path, monkeypatch, apart):
    before = children()

    def broken(*args, **kwargs):
        raise ValueError("no room for the panels")

    monkeypatch.setattr(plots, "size_curves", broken)
    monkeypatch.setattr(drawing, "can_fork", lambda: apart)
    with pytest.raises(ValueError, match="no room for the panels"):
        write_report(folder, out=tmp_path / "out")
    assert children() == before


def test_a_drawing_process_that_dies_is_replaced_by_drawing_here(folder, tmp_path,
                                                                  monkeypatch):
    write_report(folder, out=tmp_path / "reference")
    before = children()
    parent = os.getpid()
    real = drawing.dataset_images

    def dies_in_the_child(*args):
        if os.getpid() != parent:
            os.kill(os.getpid(), signal.SIGKILL)
        return real(*args)

    monkeypatch.setattr(drawing, "dataset_images", dies_in_the_child)
    write_report(folder, out=tmp_path / "out")
    assert plots_of(tmp_path / "out") == plots_of(tmp_path / "reference")
    assert children() == before


def test_an_interrupted_report_leaves_no_drawing_process(folder, tmp_path, monkeypatch):
    before = children()

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(tables, "pairs", interrupted)  # while the child is drawing
    with pytest.raises(KeyboardInterrupt):
        write_report(folder, out=tmp_path / "out")
    assert children() == before
    assert not (tmp_path / "out" / "report.html").exists()


def test_the_report_process_itself_loads_no_plotting_library(folder, tmp_path):
    # the figures are drawn in the forked process, so the report's own needs no matplotlib
    # (a store without tuning or speedup runs)
    code = ("import sys; from harness.report.writer import write_report; "
            f"write_report({str(folder)!r}, out={str(tmp_path / 'out')!r}); "
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stdout.strip() == "[]"
    assert len(list((tmp_path / "out" / "plots").glob("*.png"))) == len(FIGURES)
