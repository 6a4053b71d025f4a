"""Run a suite: validate, plan, skip what the store has, execute, store, write outputs."""

from __future__ import annotations

import shutil
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from harness import provenance
from harness.cells import OK, Cell
from harness.errors import UserError
from harness.executors import Executor, LocalExecutor
from harness.plan import Plan, make_plan
from harness.progress import Progress
from harness.report.build import Outputs, build_outputs
from harness.store import STORE_NAME, Store
from harness.suite import Suite, load_suite

DEFAULT_RESULTS = Path("results")


@dataclass
class RunResult:
    folder: Path
    planned: int
    reused: int
    ran: int = 0
    failed: int = 0
    interrupted: bool = False
    stopped: bool = False  # the deadline came before every selected cell had run
    notes: list[str] = field(default_factory=list)
    outputs: Outputs | None = None


def results_folder(suite: Suite, out: str | Path | None) -> Path:
    return Path(out) if out is not None else DEFAULT_RESULTS / suite.name


def _clear(folder: Path) -> None:
    for name in (STORE_NAME, STORE_NAME + "-wal", STORE_NAME + "-shm", "provenance.json",
                 "report.html"):
        (folder / name).unlink(missing_ok=True)
    for sub in ("tables", "plots"):
        shutil.rmtree(folder / sub, ignore_errors=True)


def changed_datasets(plan: Plan, store: Store) -> list[str]:
    """Notes for datasets whose content differs from the cells stored under their name."""
    known = store.known_fingerprints()
    notes = []
    for name, ds in plan.datasets.items():
        old = known.get(name, set())
        if old and ds.fingerprint not in old:
            notes.append(f"dataset '{name}' changed since its cells were stored (content "
                         f"fingerprint {sorted(old)[0][:12]} -> {ds.fingerprint[:12]}); its "
                         "cells are recomputed")
    return notes


def run_suite(path: str | Path, *, out: str | Path | None = None, jobs: int | None = None,
              fresh: bool = False, retry_failed: bool = False, executor: Executor | None = None,
              progress: bool | None = None, echo: Callable[[str], None] | None = None,
              command: str | None = None, write_outputs: bool = True,
              select: Callable[[Cell], bool] | None = None,
              deadline: float | None = None) -> RunResult:
    """Run every cell of a suite not already in its results store, then write the outputs.

    Parameters
    ----------
    path : the suite file (TOML).
    out : results folder; default ``results/<suite name>``.
    jobs : worker processes for the local executor (default: all cores).
    fresh : forget stored cells and start over.
    retry_failed : run again the cells stored as errors or timeouts.
    executor : an executor object (default: `LocalExecutor` with ``jobs``).
    progress : show a progress bar (default: when stderr is a terminal).
    echo : where one-line notes go (default: stderr).
    command : the command line to record in the provenance (default: ``sys.argv``).
    write_outputs : write tables and plots at the end (``woodlot report`` can do it later).
    select : run only the cells for which this returns True (the plan keeps them all).
    deadline : a ``time.perf_counter()`` value; no cell starts after it and running cells are
        stopped at it (recorded as timeouts). `RunResult.stopped` says whether it was reached.

    Nothing is written before the suite and every dataset pass their checks.
    """
    echo = echo or (lambda s: print(s, file=sys.stderr))
    suite = load_suite(path)
    plan = make_plan(suite)
    folder = results_folder(suite, out)
    executor = executor or LocalExecutor(jobs)
    if hasattr(executor, "connect"):
        executor.connect()  # an unreachable cluster fails here, before anything is written
    if fresh:
        _clear(folder)
    with Store(folder) as store:
        result = RunResult(folder=folder, planned=len(plan.cells), reused=0)
        result.notes = changed_datasets(plan, store)
        for note in result.notes:
            echo(note)
        done = store.finished_keys(include_failed=not retry_failed)
        todo = [c for c in plan.cells if c.key not in done and (select is None or select(c))]
        result.reused = len(plan.cells) - len(todo)
        store.set_plan(c.key for c in plan.cells)
        store.record_datasets((d.fingerprint, d.name, d.summary()) for d in plan.datasets.values())
        prov = provenance.collect(command)
        prov.update(suite=str(suite.path), suite_name=suite.name, executor=executor.name,
                    jobs=getattr(executor, "jobs", None),
                    **(executor.describe() if hasattr(executor, "describe") else {}),
                    metrics={k: list(v) for k, v in suite.protocol.metrics.items()},
                    timing="cells side by side, one thread each")
        run = store.start_run(suite.name, suite.text, prov["command"], prov)
        bar = Progress(len(todo), enabled=progress)
        try:
            timeout = suite.protocol.cell_timeout
            if deadline is not None:
                left = max(0.5, deadline - time.perf_counter())
                timeout = left if timeout is None else min(timeout, left)
            for row in executor.run(todo, plan.by_fingerprint, timeout):
                store.put(row, run)
                result.ran += 1
                result.failed += row["status"] != OK
                bar.step(row["status"] == OK)
                if deadline is not None and time.perf_counter() > deadline \
                        and result.ran < len(todo):
                    result.stopped = True
                    break
        except (KeyboardInterrupt, UserError):  # Ctrl-C, or a cluster lost mid-run
            result.interrupted = True
            store.finish_run(run, "interrupted")
            raise
        finally:
            bar.close()
        prov["load_average_after"] = provenance.load_average()
        if suite.scaling is not None:  # the speedup sweep runs alone, after every cell
            from harness.scaling import run_sweep

            try:
                sweep = run_sweep(suite, plan.datasets, plan.splits, store, run,
                                  retry_failed=retry_failed, progress=progress, echo=echo)
            except KeyboardInterrupt:
                result.interrupted = True
                store.finish_run(run, "interrupted")
                raise
            prov["scaling"] = sweep.provenance
        store.finish_run(run, "finished", prov)
    if write_outputs:
        result.outputs = build_outputs(folder)
    return result
