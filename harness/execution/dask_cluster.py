"""Run cells on a Dask cluster: an existing one (scheduler address) or a local one we start.

The interface of `harness.execution.executor.Executor`: ``run`` yields each cell's row as it
finishes (``as_completed``); the run writes it to the store on the client, so progress,
resume and failure handling are the same as with local processes.

- Data: datasets are loaded on the client (by the plan) and sent to the cluster once each
  (``scatter``); the scheduler copies each to every worker (worker to worker), which keeps
  it for the run, so one lost worker loses no data. Workers never read suite files, data
  files or the OpenML cache. If every copy of a dataset is lost with its workers, the
  client sends it again and resubmits the cells that needed it.
- One thread per worker process: cells measure CPU time and peak memory per process, so
  workers with more than one thread are refused (and cells set their own thread limits).
- Same code on every worker: woodlot and the libraries that compute a result
  (`harness.versions`) must have the client's versions, since cell keys are made on the
  client. Mismatched workers are refused before anything runs, and each cell checks its
  worker again (workers may join later), giving an error row instead of a wrong result.
- A worker that dies while running a cell (out of memory, killed): Dask runs the cell on
  another worker until the scheduler's ``allowed-failures`` limit; then it is an error row.
  Each cell yields exactly one row.
- Cell time limit: a running Dask task cannot be stopped from outside. The task runs the
  cell in a thread and stops waiting at the limit (counted from the cell's start on the
  worker), returning a timeout row; the client then restarts that worker through its nanny,
  which is what stops the computation (a worker without a nanny is shut down instead). Until
  then no other cell starts its measurements in that process. Cells the restart interrupts
  are run again elsewhere.
"""

from __future__ import annotations

import functools
import logging
import os
import socket
import threading
import time
import uuid
from typing import Any, Iterator

from harness.datasets import Dataset
from harness.errors import UserError
from harness.execution.executor import Executor, as_source
from harness.execution.units import run_unit
from harness.versions import differences, result_versions, version
from harness.work_units import ERROR, TIMEOUT, failed_row

CONNECT_TIMEOUT = 10.0  # seconds to reach the scheduler and see a worker
ALLOWED_FAILURES = 2  # worker deaths a cell may cause before it is an error (local cluster)
RESUBMITS = 3  # times a cell is sent again when its dataset was lost with its workers
RESTART_WAIT = 60.0  # seconds a worker waits for the restart that stops an overrun cell


def _distributed():
    try:
        import distributed
    except ImportError:
        raise UserError("the Dask executor needs Dask: pip install 'woodlot[dask]'") from None
    return distributed


@functools.lru_cache(maxsize=1)
def library_versions() -> dict[str, str]:
    """woodlot's version and those of the result libraries, as this process sees them."""
    return {"woodlot": version("woodlot"), **result_versions()}


# --------------------------------------------------------------------------- on the workers

# Cells of this worker process past their time limit, still computing: (thread, since when).
_OVERRUN: list[tuple[threading.Thread, float]] = []


def _probe() -> dict[str, Any]:
    """Runs on each worker before the run: who it is and what it has installed."""
    return {"hostname": socket.gethostname(), "pid": os.getpid(),
            "versions": library_versions()}


def _run_task(cell, dataset: Dataset, timeout: float | None,
              expected: dict[str, str]) -> dict[str, Any]:
    """The Dask task of one unit (a cell or a trial)."""
    from distributed import Reschedule, get_worker

    worker = get_worker()
    where = f"Dask worker {worker.address} ({socket.gethostname()})"
    found = differences(library_versions(), expected)
    if found:
        return failed_row(cell, ERROR, f"{where} has {', '.join(found)}; cell not run "
                          "(install the client's versions on every worker)")
    threads = getattr(getattr(worker, "state", worker), "nthreads", 1)
    if threads != 1:
        return failed_row(cell, ERROR, f"{where} runs {threads} threads; cell not run (start "
                          "workers with --nthreads 1)")
    # A cell past its limit still computing here would distort this cell's measurements, and
    # the restart that stops it would end this task: leave this cell to another worker.
    _OVERRUN[:] = [(t, since) for t, since in _OVERRUN if t.is_alive()]
    if _OVERRUN:
        if time.monotonic() - _OVERRUN[0][1] > RESTART_WAIT:
            return failed_row(cell, ERROR, f"{where} still computes a cell that passed its time "
                              f"limit and was not restarted within {RESTART_WAIT:g} s; cell not "
                              "run")
        time.sleep(0.5)  # the restart is on its way; do not bounce the cell back at once
        raise Reschedule()
    if timeout is None:
        return run_unit(cell, dataset)
    box: dict[str, Any] = {}
    thread = threading.Thread(target=lambda: box.update(row=run_unit(cell, dataset)),
                              name=f"cell-{cell.key[:12]}", daemon=True)
    thread.start()
    thread.join(timeout)
    if thread.is_alive():
        _OVERRUN.append((thread, time.monotonic()))
        row = failed_row(cell, TIMEOUT, f"stopped after the cell time limit of {timeout:g} s")
        row["_restart"] = worker.address
        return row
    return box.get("row") or failed_row(cell, ERROR, "the cell stopped without a result")


# --------------------------------------------------------------------------- on the client

def _cancel_reason(future) -> str:
    try:
        future.result()
    except (KeyboardInterrupt, SystemExit):
        raise
    except BaseException as exc:  # some CancelledError; newer Dask versions say why
        return str(getattr(exc, "reason", None) or type(exc).__name__)
    return "unknown"


def _dashboard(client) -> str | None:
    """The address of the scheduler's status page, when it serves one."""
    try:
        return client.dashboard_link or None
    except Exception:  # no dashboard (bokeh missing) or an older client: nothing to show
        return None


def _check_reachable(address: str, timeout: float) -> None:
    """Fail at once when nothing listens at a tcp:// address (Dask would retry until its
    timeout); other protocols are left to Dask's own connection."""
    scheme, _, rest = address.rpartition("://")
    if scheme not in ("", "tcp"):
        return
    host, _, port = rest.rpartition(":")
    if not host or not port.isdigit():
        raise UserError(f"--scheduler '{address}' is not an address such as tcp://HOST:8786")
    try:
        socket.create_connection((host.strip("[]"), int(port)), timeout=timeout).close()
    except OSError as exc:
        raise UserError(f"cannot reach the Dask scheduler at {address} ({exc.strerror or exc}); "
                        "start one with 'dask scheduler' or check the address") from None


class DaskExecutor(Executor):
    """Cells as Dask tasks: on the scheduler at ``scheduler``, or on a local cluster of
    ``workers`` single-threaded worker processes on the loopback interface.

    `open` (called before anything is written) reaches the cluster, or starts the local
    one, and checks its workers; `run` submits the cells; `close` closes the connection and
    any cluster it started. ``allowed_failures`` is the local cluster's limit of worker
    deaths per cell (an existing scheduler keeps its own ``allowed-failures`` setting).
    """

    name = "dask"

    def __init__(self, scheduler: str | None = None, workers: int | None = None, *,
                 connect_timeout: float = CONNECT_TIMEOUT,
                 allowed_failures: int = ALLOWED_FAILURES) -> None:
        if (scheduler is None) == (workers is None):
            raise UserError("the Dask executor needs either --scheduler ADDRESS (a running "
                            "cluster) or --workers N (a local cluster), not " +
                            ("both" if scheduler is not None else "neither"))
        if workers is not None and workers < 1:
            raise UserError(f"--workers must be at least 1, not {workers}")
        self.scheduler, self.workers = scheduler, workers
        self.connect_timeout, self.allowed_failures = connect_timeout, allowed_failures
        self.client = self.cluster = self._config = None
        self.details: dict[str, Any] = {}
        self._restarting: dict[str, threading.Thread] = {}
        self._log_levels: list = []

    # ------------------------------------------------------------------ connection
    def open(self) -> None:
        """Reach the cluster and check its workers; `UserError` if that is not possible."""
        if self.client is not None:
            return
        distributed = _distributed()
        self._quiet_logs()
        try:
            if self.scheduler is not None:
                _check_reachable(self.scheduler, self.connect_timeout)
                try:
                    self.client = distributed.Client(self.scheduler, timeout=self.connect_timeout,
                                                     set_as_default=False)
                except (OSError, TimeoutError) as exc:
                    raise UserError(f"cannot connect to the Dask scheduler at {self.scheduler} "
                                    f"within {self.connect_timeout:g} s ({exc})") from None
            else:
                import dask

                # While the cluster lives: its scheduler's limit of worker deaths per cell, and
                # no closing of a worker that is away being restarted (the cluster would
                # otherwise close one that is still restarting 15 s after an earlier restart).
                self._config = dask.config.set({
                    "distributed.scheduler.allowed-failures": self.allowed_failures,
                    "distributed.deploy.lost-worker-timeout": "1 day"})
                self.cluster = distributed.LocalCluster(
                    n_workers=self.workers, threads_per_worker=1, processes=True,
                    host="127.0.0.1", dashboard_address=None,  # no dashboard; the scheduler's
                    scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},  # status page: any port
                    silence_logs=logging.CRITICAL)  # the workers' logs too
                self.client = distributed.Client(self.cluster, set_as_default=False)
            self._check_workers()
        except BaseException:
            self.close()
            raise

    def _quiet_logs(self) -> None:
        """Dask's own log lines off while we are connected: what goes wrong is told once, in
        the cells' rows or as one error line."""
        for handler in logging.getLogger("distributed").handlers:
            if isinstance(handler, logging.StreamHandler):
                self._log_levels.append((handler, handler.level))
                handler.setLevel(logging.CRITICAL + 1)

    def _check_workers(self) -> None:
        client = self.client
        address = client.scheduler.address
        try:
            client.wait_for_workers(1, timeout=self.connect_timeout)
        except TimeoutError:
            raise UserError(f"the Dask scheduler at {address} has no workers (waited "
                            f"{self.connect_timeout:g} s); start some with 'dask worker "
                            f"{address} --nthreads 1'") from None
        for addr, w in sorted(client.scheduler_info()["workers"].items()):
            if w.get("nthreads") != 1:
                raise UserError(f"Dask worker {addr} runs {w.get('nthreads')} threads; woodlot "
                                "measures CPU time and memory per process and needs one thread "
                                "per worker (start workers with --nthreads 1 --nworkers N)")
        try:
            probes = client.run(_probe)
        except Exception as exc:
            raise UserError(f"the Dask workers of {address} cannot run woodlot's code "
                            f"({type(exc).__name__}: {exc}); install woodlot on every "
                            "worker") from None
        ours = library_versions()
        for addr, probe in sorted(probes.items()):
            found = differences(probe["versions"], ours)
            if found:
                raise UserError(f"Dask worker {addr} ({probe['hostname']}) has "
                                f"{', '.join(found)}; install the same versions on every "
                                "worker (results and cell keys depend on them)")
        try:
            limit = client.run_on_scheduler(lambda dask_scheduler: dask_scheduler.allowed_failures)
        except Exception:  # a scheduler that refuses to run code: leave it unrecorded
            limit = None
        hosts: dict[str, int] = {}
        for probe in probes.values():
            hosts[probe["hostname"]] = hosts.get(probe["hostname"], 0) + 1
        self.details = {"scheduler": address,
                        "cluster": ("local cluster started by woodlot" if self.cluster
                                    else "existing cluster"),
                        "worker_hosts": dict(sorted(hosts.items())),
                        "workers": sorted(probes), "allowed_failures": limit,
                        "dashboard": _dashboard(client)}

    def describe(self) -> dict[str, Any]:
        return {"executor": self.name, "jobs": None, "dask": dict(self.details)}

    def notes(self) -> list[str]:
        d = self.details
        where = f"; dashboard at {d['dashboard']}" if d.get("dashboard") else ""
        if self.cluster is not None:
            return [f"started a local Dask cluster of {self.workers} one-thread worker "
                    f"process{'es' if self.workers != 1 else ''} at {d.get('scheduler')}{where}"]
        return [f"connected to the Dask scheduler at {d.get('scheduler')} "
                f"({len(d.get('workers', []))} workers){where}"]

    def close(self) -> None:
        for thread in self._restarting.values():
            thread.join(timeout=RESTART_WAIT)
        self._restarting.clear()
        for part in (self.client, self.cluster):
            if part is not None:
                try:
                    part.close()
                except Exception:  # closing a lost connection: nothing left to release
                    pass
        self.client = self.cluster = None
        if self._config is not None:
            self._config.__exit__(None, None, None)  # restores the settings it changed
            self._config = None
        for handler, level in self._log_levels:
            handler.setLevel(level)
        self._log_levels.clear()

    # ------------------------------------------------------------------ running
    def run(self, units, datasets: dict[str, Dataset],
            timeout: float | None, memory: int | None = None) -> Iterator[dict]:
        """``memory`` is not enforced here: the cluster's workers have their own memory
        limits (``dask worker --memory-limit``), which restart a worker that passes them."""
        source = as_source(units)
        first = []
        while (unit := source.take()) is not None:
            first.append(unit)
        if not first:
            return
        self.open()
        yield from self._stream(first, source, datasets, timeout)

    def _stream(self, first: list, source, datasets: dict[str, Dataset],
                timeout: float | None) -> Iterator[dict]:
        from distributed import as_completed
        from distributed.scheduler import KilledWorker

        client = self.client
        run_id = uuid.uuid4().hex[:8]  # task keys never collide with another run's
        expected = library_versions()
        data: dict[str, Any] = {}
        cell_of: dict[str, Any] = {}
        sent: dict[str, int] = {}
        futures: list = []

        def submit(cell):
            # Each dataset is sent once, then copied from worker to worker, so that losing a
            # worker does not lose it.
            if cell.fingerprint not in data or data[cell.fingerprint].status != "finished":
                data[cell.fingerprint] = self._scatter(datasets[cell.fingerprint])
            sent[cell.key] = sent.get(cell.key, 0) + 1
            key = f"woodlot-cell-{cell.key}-{run_id}-{sent[cell.key]}"
            cell_of[key] = cell
            future = client.submit(_run_task, cell, data[cell.fingerprint], timeout, expected,
                                   key=key, pure=False, retries=0)
            futures.append(future)
            return future

        try:
            stream = as_completed([submit(unit) for unit in first], loop=client.loop)
            for future in stream:
                cell = cell_of[future.key]
                if future.status == "finished":
                    row = future.result()
                    overrun = row.pop("_restart", None)
                    if overrun is not None:
                        row["message"] += self._stop_computation(overrun)
                elif future.status == "error":
                    exc = future.exception()
                    if not isinstance(exc, KilledWorker):
                        row = failed_row(cell, ERROR, f"{type(exc).__name__}: {exc}"
                                         .splitlines()[0][:500])
                    elif exc.last_worker.address in self._restarting:
                        # Our restart of a worker ended it, not the cell. No limit needed: each
                        # restart stops a different cell that passed its time limit.
                        stream.add(submit(cell))
                        continue
                    else:
                        row = failed_row(cell, ERROR, "Dask workers died while running this "
                                         f"cell ({exc.allowed_failures + 1} attempts); out of "
                                         "memory?")
                else:  # cancelled: every copy of its dataset was lost, or the scheduler was
                    reason = _cancel_reason(future)
                    if client.status != "running":
                        raise UserError(f"lost the Dask scheduler at "
                                        f"{self.details.get('scheduler')} ({reason}); finished "
                                        "cells are stored, run the same command again to "
                                        "resume")
                    # Each restart of ours may lose a dataset's only copy: those do not count.
                    if sent[cell.key] <= RESUBMITS + len(self._restarting):
                        stream.add(submit(cell))
                        continue
                    row = failed_row(cell, ERROR, f"Dask cancelled this cell {sent[cell.key]} "
                                     f"times ({reason}); were the workers holding its dataset "
                                     "lost?")
                future.release()
                yield row
                while (unit := source.take()) is not None:  # work the row made ready
                    stream.add(submit(unit))
        finally:
            pending = [f for f in futures if not f.done()]
            if pending:
                client.cancel(pending)

    def _scatter(self, dataset: Dataset):
        """Send a dataset to every worker, waiting for one to be there (workers restart)."""
        for attempt in range(3):
            try:
                self.client.wait_for_workers(1, timeout=RESTART_WAIT)
                return self.client.scatter(dataset, hash=False, broadcast=True)
            except TimeoutError:
                continue
        raise UserError(f"no Dask worker took dataset '{dataset.name}' within "
                        f"{3 * RESTART_WAIT:g} s; finished cells are stored, run the same "
                        "command again to resume")

    def _stop_computation(self, worker: str) -> str:
        """Restart, in the background, the worker of a cell that ran past its limit; the note
        for the cell's message."""
        def restart() -> None:
            try:
                self.client.restart_workers([worker], timeout=RESTART_WAIT)
            except Exception:  # the worker went away meanwhile, or the client is closing
                pass

        thread = threading.Thread(target=restart, name=f"restart {worker}", daemon=True)
        thread.start()
        self._restarting[worker] = thread
        return f" (its Dask worker {worker} is restarted to stop the computation)"
