"""The Dask executor on a real cluster of two worker processes on the loopback interface:
same scores as local processes, resume after an interrupted client, lost workers, time
limits, refused workers and an unreachable scheduler."""

from __future__ import annotations

import json
import logging
import os
import signal
import sqlite3
import time

import dask
import psutil
import pytest
from distributed import Client, LocalCluster

import harness.execution.dask_cluster as dask_executor
from harness.cli import main
from harness.execution.executor import Executor
from harness.execution.dask_cluster import DaskExecutor
from harness.errors import UserError
from harness.execution.local import LocalExecutor
from harness.commands.run import run_suite
from harness.store import Store
from tests.conftest import SMALL_SUITE

ALLOWED_FAILURES = 1  # the test cluster's limit: a cell may kill one worker and be retried


@pytest.fixture(scope="module")
def dask_cluster():
    with dask.config.set({"distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
                          "distributed.deploy.lost-worker-timeout": "1h"}):
        cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                               host="127.0.0.1", dashboard_address=None,
                               scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
                               silence_logs=logging.CRITICAL)
        client = Client(cluster, set_as_default=False)
        yield cluster, client
        client.close()
        cluster.close()


@pytest.fixture
def cluster(dask_cluster):
    """The module's cluster with both workers up (a test before may have killed some)."""
    cluster, client = dask_cluster
    client.wait_for_workers(2, timeout=60)
    return cluster, client


class Recorder(Executor):
    """Wraps an executor: keeps the key of every row it yields, calls ``after(n)`` once the
    runner has stored row n (which may raise, as Ctrl-C would)."""

    def __init__(self, inner, after=None) -> None:
        self.inner, self.after, self.keys = inner, after, []
        self.name = inner.name

    def open(self) -> None:
        self.inner.open()

    def describe(self) -> dict:
        return self.inner.describe()

    def close(self) -> None:
        self.inner.close()

    def run(self, cells, datasets, timeout, memory=None):
        rows = self.inner.run(cells, datasets, timeout, memory)
        try:
            for row in rows:
                self.keys.append(row["key"])
                yield row
                if self.after is not None:
                    self.after(len(self.keys))
        finally:
            rows.close()


def stored(folder) -> dict[str, dict]:
    db = sqlite3.connect(folder / "cells.sqlite")
    db.row_factory = sqlite3.Row
    rows = {r["key"]: dict(r) for r in db.execute("SELECT * FROM cells")}
    db.close()
    return rows


def alive(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def our_tasks(client) -> list:
    return client.run_on_scheduler(lambda dask_scheduler: [
        k for k in dask_scheduler.tasks if str(k).startswith("woodlot-cell")])


def quiet(**kw):
    return dict(progress=False, write_outputs=False, **kw)


SLOW_SUITE = """
[suite]
name = "slow"

[protocol]
folds = 2
repeats = {repeats}
seed = 3
cell_timeout = "{timeout}"

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"

[[strategy]]
name = "slow"
classifier = "tests.faulty_estimators:Slow"
params = {{ seconds = {seconds} }}
"""


# --------------------------------------------------------------------------- results

def test_same_scores_as_local_processes(write_suite, tmp_path, capsys):
    """`--executor dask --workers 2` (a local cluster woodlot starts) against `--jobs 2`."""
    suite = write_suite(SMALL_SUITE)
    run_suite(suite, out=tmp_path / "local", executor=LocalExecutor(2), **quiet())
    assert main(["run", str(suite), "--executor", "dask", "--workers", "2",
                 "--out", str(tmp_path / "dask"), "--quiet"]) == 0
    captured = capsys.readouterr()
    assert "36 cells planned: 0 already stored, 36 run." in captured.out
    assert "started a local Dask cluster of 2 one-thread worker processes" in captured.err
    assert "dashboard at http://127.0.0.1:" in captured.err
    local, remote = stored(tmp_path / "local"), stored(tmp_path / "dask")
    assert len(local) == 36 and set(remote) == set(local)
    for key, row in local.items():
        assert row["status"] == remote[key]["status"] == "ok"
        # Same splits, seeds and code: identical to the last bit, curves included.
        assert remote[key]["scores"] == row["scores"]
        assert remote[key]["curve"] == row["curve"]
    with Store(tmp_path / "dask", read_only=True) as store:
        prov = store.last_run()["provenance"]
    assert prov["executor"] == "dask"
    assert prov["dask"]["cluster"] == "local cluster started by woodlot"
    assert prov["dask"]["scheduler"].startswith("tcp://127.0.0.1:")
    assert sum(prov["dask"]["worker_hosts"].values()) == 2
    assert len({r["worker"] for r in remote.values()}) == 2  # both workers took cells
    assert (tmp_path / "dask" / "report.html").exists()


def test_resume_after_interrupted_client(cluster, write_suite, tmp_path):
    cluster, client = cluster
    suite, out = write_suite(SMALL_SUITE), tmp_path / "r"

    def ctrl_c(n):
        if n == 5:
            raise KeyboardInterrupt

    first = Recorder(DaskExecutor(scheduler=cluster.scheduler_address), after=ctrl_c)
    with pytest.raises(KeyboardInterrupt):
        run_suite(suite, out=out, executor=first, **quiet())
    before = stored(out)
    assert sorted(before) == sorted(first.keys) and len(before) == 5
    deadline = time.monotonic() + 10  # the client cancelled what it had submitted
    while our_tasks(client) and time.monotonic() < deadline:
        time.sleep(0.1)
    assert our_tasks(client) == []

    second = Recorder(DaskExecutor(scheduler=cluster.scheduler_address))
    result = run_suite(suite, out=out, executor=second, **quiet())
    assert (result.reused, result.ran, result.failed) == (5, 31, 0)
    assert len(second.keys) == len(set(second.keys)) == 31
    assert not set(second.keys) & set(first.keys)  # stored cells were not run again
    after = stored(out)
    assert len(after) == 36
    for key, row in before.items():
        assert after[key] == row  # same run, same finish time: untouched
    with Store(out, read_only=True) as store:
        runs = store.db.execute("SELECT state, provenance FROM runs ORDER BY run").fetchall()
    assert [state for state, _ in runs] == ["interrupted", "finished"]
    assert json.loads(runs[1][1])["dask"]["scheduler"] == cluster.scheduler_address


# --------------------------------------------------------------------------- lost workers

@pytest.mark.slow
def test_worker_killed_mid_run_loses_and_repeats_nothing(cluster, write_suite, tmp_path):
    cluster, client = cluster
    suite = write_suite(SLOW_SUITE.format(repeats=2, timeout="none", seconds=1.0))
    killed = {}

    def kill_a_busy_worker(n):
        if n != 1:
            return
        busy = {w: keys for w, keys in client.processing().items() if keys}
        worker = sorted(busy)[0]
        killed["pid"] = client.run(os.getpid, workers=[worker])[worker]
        killed["cells"] = {k.split("-")[2] for k in busy[worker]}
        os.kill(killed["pid"], signal.SIGKILL)

    rec = Recorder(DaskExecutor(scheduler=cluster.scheduler_address), after=kill_a_busy_worker)
    result = run_suite(suite, out=tmp_path / "k", executor=rec, **quiet())
    rows = stored(tmp_path / "k")
    assert killed["cells"] and not alive(killed["pid"])
    assert (result.ran, result.failed) == (4, 0)
    assert len(rec.keys) == len(set(rec.keys)) == len(rows) == 4
    for key in killed["cells"]:  # the cells in flight on the killed worker ran elsewhere
        assert rows[key]["status"] == "ok"
        assert not rows[key]["worker"].endswith(f":{killed['pid']}")


@pytest.mark.slow
def test_cell_that_kills_every_worker_becomes_an_error_row(cluster, write_suite, tmp_path):
    cluster, client = cluster
    log = tmp_path / "attempts.txt"
    suite = write_suite(f"""
        [suite]
        name = "deadly"

        [protocol]
        splits = "holdout"
        repeats = 1
        test_fraction = 0.3
        seed = 3

        [[dataset]]
        name = "wine"
        from = "sklearn"
        load = "load_wine"

        [[strategy]]
        name = "deadly"
        classifier = "tests.faulty_estimators:ProcessKiller"
        params = {{ log = "{log}" }}
        """)
    rec = Recorder(DaskExecutor(scheduler=cluster.scheduler_address))
    result = run_suite(suite, out=tmp_path / "d", executor=rec, **quiet())
    (row,) = stored(tmp_path / "d").values()
    pids = log.read_text().split()
    # Tried once, retried once on another worker process (the limit), then recorded.
    assert len(pids) == len(set(pids)) == ALLOWED_FAILURES + 1
    assert (result.ran, result.failed, len(rec.keys)) == (1, 1, 1)
    assert row["status"] == "error"
    assert row["message"] == ("Dask workers died while running this cell (2 attempts); out of "
                              "memory?")


@pytest.mark.slow
def test_time_limit_stops_waiting_and_restarts_the_worker(cluster, write_suite, tmp_path):
    cluster, client = cluster
    suite = write_suite(SLOW_SUITE.format(repeats=1, timeout="1s", seconds=30) + """
[[strategy]]
name = "quick"
method = "single-tree"
""")
    pids = client.run(os.getpid)
    started = time.monotonic()
    result = run_suite(suite, out=tmp_path / "t", executor=DaskExecutor(
        scheduler=cluster.scheduler_address), **quiet())
    assert time.monotonic() - started < 28  # nobody waited for the 30 s fits
    rows = stored(tmp_path / "t")
    assert (result.ran, result.failed) == (4, 2)
    timeouts = [r for r in rows.values() if r["status"] == "timeout"]
    assert {r["strategy"] for r in timeouts} == {"slow"} and len(timeouts) == 2
    for r in timeouts:
        assert r["message"].startswith("stopped after the cell time limit of 1 s (its Dask "
                                       "worker tcp://127.0.0.1:")
        worker = r["message"].split("worker ")[1].split(" ")[0]
        assert not alive(pids[worker])  # the restart ended the computation
    assert all(r["status"] == "ok" for r in rows.values() if r["strategy"] == "quick")


# --------------------------------------------------------------------------- refusals

def test_workers_with_other_library_versions_are_refused(cluster, write_suite, tmp_path,
                                                         monkeypatch):
    cluster, client = cluster
    real = dask_executor.library_versions()
    monkeypatch.setattr(dask_executor, "library_versions",
                        lambda: {**real, "scikit-learn": "0.0.1"})
    suite, out = write_suite(SMALL_SUITE), tmp_path / "v"
    with pytest.raises(UserError, match=r"Dask worker tcp://127\.0\.0\.1:\d+ \(.+\) has "
                       rf"scikit-learn {real['scikit-learn']} \(here 0\.0\.1\); install the "
                       "same versions on every worker"):
        run_suite(suite, out=out, executor=DaskExecutor(scheduler=cluster.scheduler_address),
                  **quiet())
    assert not out.exists()
    # A worker that joins after the check is caught by the cell itself: no wrong result.
    monkeypatch.setattr(DaskExecutor, "_check_workers", lambda self: None)
    result = run_suite(suite, out=out, executor=DaskExecutor(
        scheduler=cluster.scheduler_address), **quiet())
    assert (result.ran, result.failed) == (36, 36)
    messages = {r["message"].split(") has ")[1] for r in stored(out).values()}
    assert messages == {f"scikit-learn {real['scikit-learn']} (here 0.0.1); cell not run "
                        "(install the client's versions on every worker)"}


def test_unreachable_scheduler_is_one_line_and_writes_nothing(write_suite, tmp_path, capsys):
    suite, out = write_suite(SMALL_SUITE), tmp_path / "u"
    assert main(["run", str(suite), "--executor", "dask", "--scheduler", "tcp://127.0.0.1:9",
                 "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err == ("woodlot: cannot reach the Dask scheduler at tcp://127.0.0.1:9 (Connection "
                   "refused); start one with 'dask scheduler' or check the address\n")
    assert not out.exists()
    # --fresh does not clear an existing results folder before the cluster is reached.
    out.mkdir()
    (out / "cells.sqlite").write_bytes(b"kept")
    assert main(["run", str(suite), "--executor", "dask", "--scheduler", "tcp://127.0.0.1:9",
                 "--out", str(out), "--fresh"]) == 2
    assert (out / "cells.sqlite").read_bytes() == b"kept"


@pytest.mark.parametrize("options, message", [
    (["--executor", "dask"], "needs either --scheduler ADDRESS (a running cluster) or "
     "--workers N (a local cluster), not neither"),
    (["--executor", "dask", "--workers", "2", "--scheduler", "tcp://127.0.0.1:8786"],
     "not both"),
    (["--executor", "dask", "--workers", "2", "--jobs", "2"], "--jobs is for the local "
     "executor"),
    (["--scheduler", "tcp://127.0.0.1:8786"], "--scheduler and --workers are options of the "
     "Dask executor; add --executor dask"),
    (["--executor", "dask", "--workers", "0"], "--workers must be at least 1, not 0"),
])
def test_executor_options_are_checked(write_suite, tmp_path, capsys, options, message):
    out = tmp_path / "o"
    assert main(["run", str(write_suite(SMALL_SUITE)), "--out", str(out), *options]) == 2
    err = capsys.readouterr().err
    assert message in err and err.count("\n") == 1
    assert not out.exists()
