"""``woodlot run``: run every cell of a suite the store does not have yet, then its speedup
points when the suite has a ``[speedup]`` section, then write the report."""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from harness import interrupts
from harness.commands.lifecycle import Echo, session, stderr_echo, refresh_outputs
from harness.commands.progress import Progress
from harness.commands.speedup import SpeedupResult, measure_points
from harness.commands.work import RunWork
from harness.errors import UserError
from harness.execution.executor import Executor
from harness.execution.local import LocalExecutor
from harness.execution.memory import ENFORCED, cell_limit
from harness.plan import cell_splits
from harness.report.outputs import Outputs
from harness.work_units import Cell

TIMING = "cells side by side, one thread each"


@dataclass
class RunResult:
    folder: Path
    planned: int
    reused: int
    ran: int = 0
    failed: int = 0
    succeeded: int = 0  # cells of the plan stored as ok (run now or before)
    trials: int = 0  # trials of tuned strategies' searches run
    stopped: bool = False  # the deadline came before every selected cell had run
    notes: list[str] = field(default_factory=list)
    speedup: SpeedupResult | None = None
    outputs: Outputs | None = None

    def __repr__(self) -> str:
        return (f"RunResult(folder='{self.folder}', planned={self.planned}, "
                f"reused={self.reused}, ran={self.ran}, failed={self.failed}"
                + (f", trials={self.trials}" if self.trials else "")
                + (", stopped at the deadline" if self.stopped else "") + ")")


def make_executor(kind: str = "local", *, jobs: int | None = None, scheduler: str | None = None,
                  workers: int | None = None) -> Executor:
    """The executor the command line's options name: ``local`` (``jobs`` processes) or
    ``dask`` (``scheduler`` address of a running cluster, or ``workers`` for a local one)."""
    if kind == "local":
        if scheduler is not None or workers is not None:
            raise UserError("--scheduler and --workers are options of the Dask executor; add "
                            "--executor dask")
        return LocalExecutor(jobs)
    if kind == "dask":
        if jobs is not None:
            raise UserError("--jobs is for the local executor; with --executor dask the "
                            "cluster's workers run the cells (--workers N for a local cluster)")
        from harness.execution.dask_cluster import DaskExecutor  # needs the optional Dask

        return DaskExecutor(scheduler=scheduler, workers=workers)
    raise UserError(f"unknown executor '{kind}'; choose local or dask")


def run_suite(path: str | Path, *, out: str | Path | None = None, jobs: int | None = None,
              fresh: bool = False, retry_failed: bool = False, executor: Executor | None = None,
              progress: bool | None = None, echo: Echo | None = None,
              command: str | None = None, write_outputs: bool = True,
              select: Callable[[Cell], bool] | None = None,
              deadline: float | None = None, wait: bool = False) -> RunResult:
    """Run every cell of a suite not already in its results store, then write the outputs.

    Parameters
    ----------
    path : the suite file (TOML).
    out : results folder; default ``results/<suite name>``.
    jobs : worker processes for the local executor (default: all cores).
    fresh : forget stored cells and start over.
    retry_failed : run again the cells stored as errors or timeouts.
    executor : an executor (default: `LocalExecutor` with ``jobs``); opened and closed here.
    progress : show a progress bar (default: when stderr is a terminal).
    echo : where one-line notes go (default: stderr).
    command : the command line to record in the provenance (default: ``sys.argv``).
    write_outputs : write tables and plots at the end, unless the store has not changed since
        they were written (``woodlot report`` writes them in any case).
    select : run only the cells for which this returns True (the plan keeps them all).
    deadline : a ``time.perf_counter()`` value; no cell starts after it and running cells are
        stopped at it (recorded as timeouts). `RunResult.stopped` says whether it was reached.
    wait : when another run is using the results folder, wait for it (default: stop with a
        `UserError` naming it).

    Nothing is written before the suite and every dataset pass their checks.
    """
    echo = echo or stderr_echo
    executor = executor or LocalExecutor(jobs)
    with session(path, out=out, command=command, executor=executor, fresh=fresh,
                 timing=TIMING, wait=wait, echo=echo) as s:
        store, plan = s.store, s.plan
        keys = plan.keys
        result = RunResult(folder=s.folder, planned=len(keys), reused=0, notes=s.notes)
        done = store.finished_keys(include_failed=not retry_failed)
        todo = [c for c in plan.cells if c.key not in done and (select is None or select(c))]
        searches = [x for x in plan.searches
                    if x.key not in done and (select is None or select(x.cell))]
        result.reused = len(keys) - len(todo) - len(searches)
        store.set_plan(keys)
        store.record_splits(cell_splits(plan))
        memory, s.provenance["cell_memory"] = None, "set by the Dask workers (--memory-limit)"
        if isinstance(executor, LocalExecutor):
            memory, s.provenance["cell_memory"] = cell_limit(s.suite.protocol.cell_memory,
                                                             executor.jobs)
            if (todo or searches) and memory is not None and not ENFORCED:
                echo("note: the cell memory limit is enforced on Linux only; on this system a "
                     "cell may use all the memory there is")
        wanted = len(todo) + len(searches)
        bar = Progress(wanted, enabled=progress)
        try:
            timeout = s.suite.protocol.cell_timeout
            if deadline is not None:
                left = max(0.5, deadline - time.perf_counter())
                timeout = left if timeout is None else min(timeout, left)
            work = RunWork(todo, searches, store, s.run, retry_failed=retry_failed)
            counted = 0
            for row in executor.run(work, plan.by_fingerprint, timeout, memory):
                work.accept(row)
                interrupts.raise_pending()
                for fine in work.statuses[counted:]:
                    bar.step(fine)
                counted = work.finished_cells
                if deadline is not None and time.perf_counter() > deadline \
                        and work.finished_cells < wanted:
                    result.stopped = True
                    break
        finally:
            bar.close()
        result.ran, result.failed = work.finished_cells, work.failed_cells
        result.trials = work.trials_run
        executor.close()  # nothing of the accuracy cells runs while speedup points are timed
        ok = store.finished_keys(include_failed=False)
        result.succeeded = sum(k in ok for k in keys)
        if s.suite.speedup is not None:  # the speedup points run alone, after every cell
            result.speedup = measure_points(s, s.suite.speedup, retry_failed=retry_failed,
                                            progress=progress, echo=echo)
    if write_outputs:
        result.outputs = refresh_outputs(s.folder)
    return result
