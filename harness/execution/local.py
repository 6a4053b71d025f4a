"""The local executor: a pool of worker processes owned by woodlot (not
`concurrent.futures`), because a cell that exceeds its time limit must be stopped, which only
ending its process (and every process it started) can do. Each worker receives each dataset
once, runs one cell at a time within the cell memory limit (`harness.execution.memory`), and
dies with woodlot if woodlot is killed outright."""

from __future__ import annotations

import os
import signal
import time
from multiprocessing.connection import wait
from typing import Iterator

from harness.datasets import Dataset
from harness.errors import UserError
from harness.execution.executor import Executor, as_source
from harness.execution.memory import limited
from harness.execution.processes import context, death, die_with_parent, stop_tree
from harness.execution.units import run_unit
from harness.work_units import ERROR, TIMEOUT, failed_row


def _worker_main(conn, memory: int | None) -> None:
    """Loop of one worker process: keep datasets sent to it, run the units it is given."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and stops us
    die_with_parent()
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    datasets: dict[str, Dataset] = {}
    while True:
        try:
            message = conn.recv()
        except (EOFError, KeyboardInterrupt):
            return
        kind = message[0]
        if kind == "dataset":
            datasets[message[1]] = message[2]
        elif kind == "unit":
            unit = message[1]
            with limited(memory):
                row = run_unit(unit, datasets[unit.fingerprint])
            conn.send(row)
        else:
            return


class _Worker:
    def __init__(self, ctx, memory: int | None) -> None:
        self.conn, child = ctx.Pipe()
        self.process = ctx.Process(target=_worker_main, args=(child, memory), daemon=True)
        self.process.start()
        child.close()
        self.has: set[str] = set()
        self.cell = None  # the unit running, if any
        self.started = 0.0

    def give(self, unit, dataset: Dataset) -> None:
        if unit.fingerprint not in self.has:
            self.conn.send(("dataset", unit.fingerprint, dataset))
            self.has.add(unit.fingerprint)
        self.conn.send(("unit", unit))
        self.cell, self.started = unit, time.perf_counter()

    def stop(self, force: bool = False) -> None:
        """Ask the worker to finish (``force``: end it and every process it started)."""
        if not force:
            try:
                self.conn.send(("stop",))
            except (OSError, BrokenPipeError):
                pass
            self.process.join(timeout=2)
        if self.process.is_alive():
            stop_tree(self.process.pid)
            self.process.join(timeout=5)
        self.conn.close()

    def died(self) -> str:
        """How the worker ended, once its pipe has closed."""
        self.process.join(timeout=5)
        return death(self.process.exitcode)


class LocalExecutor(Executor):
    """``jobs`` worker processes on this machine (started as work arrives), each unit
    single-threaded by default."""

    name = "local"

    def __init__(self, jobs: int | None = None) -> None:
        if jobs is not None and jobs < 1:
            raise UserError(f"--jobs must be at least 1, got {jobs}")
        self.jobs = jobs or os.cpu_count() or 1

    def run(self, units, datasets: dict[str, Dataset],
            timeout: float | None, memory: int | None = None) -> Iterator[dict]:
        source = as_source(units)
        ctx = None
        workers: list[_Worker] = []
        try:
            while True:
                while True:  # hand out every unit ready, to idle workers or new ones
                    idle = next((w for w in workers if w.cell is None), None)
                    if idle is None and len(workers) >= self.jobs:
                        break
                    unit = source.take()
                    if unit is None:
                        break
                    if idle is None:
                        ctx = ctx or context()
                        idle = _Worker(ctx, memory)
                        workers.append(idle)
                    idle.give(unit, datasets[unit.fingerprint])
                busy = [w for w in workers if w.cell is not None]
                if not busy:
                    return
                wait_for = None
                if timeout is not None:
                    now = time.perf_counter()
                    wait_for = max(0.0, min(w.started + timeout - now for w in busy))
                ready = wait([w.conn for w in busy], timeout=wait_for)
                for w in busy:
                    if w.conn in ready:
                        try:
                            row = w.conn.recv()
                        except (EOFError, OSError):
                            yield failed_row(w.cell, ERROR, "the worker process died while "
                                             f"running this cell ({w.died()})")
                            workers[workers.index(w)] = self._replace(w, ctx, memory)
                            continue
                        w.cell = None
                        yield row
                    elif timeout is not None and time.perf_counter() - w.started > timeout:
                        yield failed_row(w.cell, TIMEOUT, f"stopped after the cell time limit "
                                         f"of {timeout:g} s")
                        workers[workers.index(w)] = self._replace(w, ctx, memory)
        finally:
            for w in workers:
                w.stop(force=w.cell is not None)

    @staticmethod
    def _replace(worker: _Worker, ctx, memory: int | None) -> _Worker:
        worker.stop(force=True)
        return _Worker(ctx, memory)
