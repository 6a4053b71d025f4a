"""Progress of a run: counts, failures and time left, on a terminal or in a notebook.

Drawn by tqdm's ``auto`` front end, which uses a notebook widget under Jupyter and a text bar
elsewhere. By default it shows when stderr is a terminal or the code runs in a notebook
kernel, and stays silent otherwise (CI logs, pipes).
"""

from __future__ import annotations

import sys

from tqdm.auto import tqdm


def in_notebook() -> bool:
    """Whether the code runs in a Jupyter (IPython) kernel."""
    shell = sys.modules.get("IPython")
    get = getattr(shell, "get_ipython", None) if shell is not None else None
    kernel = get() if get is not None else None
    return kernel is not None and "IPKernelApp" in getattr(kernel, "config", {})


class _Bar(tqdm):
    """tqdm's bar without its monitor thread, which every bar starts (a disabled one too) and
    leaves running: a process with a second thread cannot safely fork, and the report forks
    to draw its figures (`harness.report.drawing`)."""

    monitor_interval = 0


class Progress:
    """A progress bar over ``total`` units of work (``label`` names them)."""

    def __init__(self, total: int, label: str = "cells", enabled: bool | None = None) -> None:
        if enabled is None:
            enabled = sys.stderr.isatty() or in_notebook()
        self.total, self.done, self.failed = total, 0, 0
        self.bar = _Bar(total=total, unit=f" {label}", disable=not enabled or total == 0,
                         dynamic_ncols=True, leave=True, file=sys.stderr,
                         bar_format="{l_bar}{bar}| {n_fmt}/{total_fmt}{unit} "
                                    "[{elapsed} elapsed, ~{remaining} left{postfix}]")

    def step(self, ok: bool = True) -> None:
        self.done += 1
        if not ok:
            self.failed += 1
            self.bar.set_postfix_str(f"{self.failed} failed", refresh=False)
        self.bar.update(1)

    def close(self) -> None:
        self.bar.close()
