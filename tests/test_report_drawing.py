"""The report's figures drawn in a process of its own (`harness.report.drawing`): the same
bytes as drawn in the report's own process, errors raised in the report, a child that dies
replaced, and no process left behind however the report ends.

The forked path runs in a fresh interpreter (`report_apart`): the test process may have
threads left by other tests, and then the report rightly draws in process."""

from __future__ import annotations

import subprocess
import sys
import textwrap

import pytest

from harness.report import drawing
from harness.report.writer import write_report
from tests.conftest import SMALL_SUITE

FIGURES = {"critical_difference", "wilcoxon_holm_groups", "rank_vs_fit_time",
           "probability_bars", "posterior_triangles", "score_vs_fit_time", "ensemble_size"}


@pytest.fixture(scope="module")
def folder(run_once):
    return run_once(SMALL_SUITE, "drawing").folder


def plots_of(out) -> dict[str, bytes]:
    return {p.stem: p.read_bytes() for p in sorted((out / "plots").glob("*.png"))}


def report_apart(folder, out, setup: str = "") -> subprocess.CompletedProcess:
    """``write_report`` in a fresh interpreter after ``setup`` (Python run first, e.g. to
    break something the drawing process inherits). It prints whether it forked, then the
    process's children and its plotting modules when the report has ended, or the error."""
    code = textwrap.dedent(f"""
        import os, signal, sys, psutil
        from harness.report import drawing, tables
        from harness.report.writer import write_report
        forked = []
        real = drawing.Drawing.__init__
        def counted(self, *args, **kwargs):
            real(self, *args, **kwargs)
            forked.append(self.proc is not None)
        drawing.Drawing.__init__ = counted
        {textwrap.indent(textwrap.dedent(setup), "        ").strip()}
        try:
            write_report({str(folder)!r}, out={str(out)!r})
        except BaseException as exc:
            print("raised", type(exc).__name__, exc)
        print("forked", forked)
        print("children", psutil.Process().children(recursive=True))
        print("plotting", sorted(m for m in sys.modules if m.split('.')[0] == 'matplotlib'))
    """)
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True, timeout=300)


def test_figures_drawn_apart_are_the_bytes_drawn_in_process(folder, tmp_path, monkeypatch):
    done = report_apart(folder, tmp_path / "apart")
    assert "forked [True]" in done.stdout
    assert "children []" in done.stdout
    # the figures are drawn in the forked process: the report's own loads no matplotlib
    assert "plotting []" in done.stdout
    monkeypatch.setattr(drawing, "can_fork", lambda: False)
    write_report(folder, out=tmp_path / "here")
    apart, here = plots_of(tmp_path / "apart"), plots_of(tmp_path / "here")
    assert set(apart) == FIGURES
    assert apart == here


def test_an_error_while_drawing_is_raised_by_the_report(folder, tmp_path, monkeypatch):
    setup = """
        from harness.report import plots
        def broken(*args, **kwargs):
            raise ValueError("no room for the panels")
        plots.size_curves = broken
    """
    done = report_apart(folder, tmp_path / "apart", setup)
    assert "forked [True]" in done.stdout
    assert "raised ValueError no room for the panels" in done.stdout
    assert "children []" in done.stdout
    assert not (tmp_path / "apart" / "report.html").exists()

    def broken(*args, **kwargs):
        raise ValueError("no room for the panels")

    from harness.report import plots
    monkeypatch.setattr(plots, "size_curves", broken)
    monkeypatch.setattr(drawing, "can_fork", lambda: False)
    with pytest.raises(ValueError, match="no room for the panels"):
        write_report(folder, out=tmp_path / "here")


@pytest.mark.parametrize("when", ["at once", "with what it was handed unread"])
def test_a_drawing_process_that_dies_is_replaced_by_drawing_here(folder, tmp_path, when):
    # a process that dies with data unread in its end of the pipe resets the connection
    # (ECONNRESET) rather than closing it: the report must draw in process either way
    write_report(folder, out=tmp_path / "reference")
    unread = when != "at once"
    handed = tmp_path / "handed"  # made once the report has handed over the panels
    setup = f"""
        import pathlib, time
        parent, handed = os.getpid(), pathlib.Path({str(handed)!r})
        real_curves, real_panels, real_result = (drawing.read_curves, drawing.Drawing.panels,
                                                 drawing.Drawing.result)
        def dies_in_the_child(*args):
            if os.getpid() != parent:
                while {unread} and not handed.exists():
                    time.sleep(0.05)
                os.kill(os.getpid(), signal.SIGKILL)
            return real_curves(*args)
        def panels(self, shown):
            real_panels(self, shown)
            time.sleep(0.5)  # the sending thread sends them
            handed.touch()
        def late(self):
            time.sleep(1.0 if {unread} else 0)  # the child is gone by now
            return real_result(self)
        drawing.read_curves = dies_in_the_child
        drawing.Drawing.panels, drawing.Drawing.result = panels, late
    """
    done = report_apart(folder, tmp_path / "out", setup)
    assert "forked [True]" in done.stdout and "raised" not in done.stdout
    assert "children []" in done.stdout
    assert plots_of(tmp_path / "out") == plots_of(tmp_path / "reference")


def test_an_interrupted_report_leaves_no_drawing_process(folder, tmp_path):
    setup = """
        def interrupted(*args, **kwargs):
            raise KeyboardInterrupt
        tables.pairs = interrupted  # while the child is drawing
    """
    done = report_apart(folder, tmp_path / "out", setup)
    assert "forked [True]" in done.stdout
    assert "raised KeyboardInterrupt" in done.stdout
    assert "children []" in done.stdout
    assert not (tmp_path / "out" / "report.html").exists()
