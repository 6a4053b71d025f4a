"""Measuring one speedup point: fit and predict ``repeats`` times at a worker count, alone,
in a fresh process of its own.

- ``n_jobs = p`` wherever the estimator (or a nested one) has it, and the native thread pools
  (OpenMP, BLAS) limited to p with threadpoolctl; the limits actually in force are read from
  inside each fit (`observe_limits`, called by `_Probe` in the thread that runs the fit) and
  stored with the point.
- A fresh process per point: every worker count starts from the same state (no thread or
  process pool left over, no memory grown by earlier fits), and a point past its time limit
  can be stopped. One untimed fit on a small slice of the training rows first starts those
  pools, so their start-up is not charged to the first repeat.
- Wall time, CPU time (all threads and worker processes; `harness.execution.measure`), the
  prediction time at the same p and how many cores other processes kept busy during the fit
  (``other_load``) are stored per repeat, so a disturbed point can be told from a result.
"""

from __future__ import annotations

import signal
import time
from typing import Any

import psutil
from threadpoolctl import ThreadpoolController, threadpool_limits

from harness.datasets import Dataset
from harness.execution.measure import measured
from harness.execution.memory import limited, refusal
from harness.execution.processes import context, death, die_with_parent, end, stop_tree
from harness.execution.run_cell import interrupts_ignored, set_threads
from harness.preprocess import with_preprocessing
from harness.plan import WARMUP_ROWS
from harness.work_units import ERROR, OK, TIMEOUT, SpeedupPoint, failed_point


def observe_limits(model, controller: ThreadpoolController) -> dict[str, Any]:
    """The thread limits in force for the calling thread, and every ``n_jobs`` of ``model``.

    OpenMP limits are per thread; this is called from the thread that runs the fit, which is
    the one whose OpenMP loops (histogram boosting's) obey them.
    """
    pools = [{"api": i["user_api"], "library": i["internal_api"], "prefix": i["prefix"],
              "threads": int(i["num_threads"])} for i in controller.info()]
    n_jobs = {k: v for k, v in model.get_params(deep=True).items()
              if k == "n_jobs" or k.endswith("__n_jobs")}
    return {"pools": pools, "n_jobs": n_jobs}


class _Probe:
    """Wraps a model so that its fit first records the thread limits in force, from inside."""

    def __init__(self, model, controller: ThreadpoolController | None) -> None:
        self.model, self.controller, self.seen = model, controller, None

    def fit(self, X, y):
        if self.controller is not None:
            self.seen = observe_limits(self.model, self.controller)
        self.model.fit(X, y)
        return self

    def predict(self, X):
        return self.model.predict(X)


def _busy_cpu_seconds() -> float:
    """CPU seconds all cores of the machine have spent busy so far (not idle, not waiting)."""
    t = psutil.cpu_times()
    return sum(getattr(t, f, 0.0) for f in ("user", "nice", "system", "irq", "softirq", "steal"))


def measure_point(point: SpeedupPoint, dataset: Dataset) -> list[dict[str, Any]]:
    """Fit and predict ``repeats`` times at ``point.workers``; one row per repeat.

    Runs in the calling process (`run_point` calls it in a fresh process of its own). The
    estimator's failure becomes a single row with status ``error``.
    """
    base = point.identity()
    p = point.workers
    X, y = dataset.X, dataset.y
    X_train, y_train = X.iloc[point.train], y.iloc[point.train]
    X_test = X.iloc[point.test]

    def build(controller: ThreadpoolController | None = None) -> _Probe:
        estimator = point.strategy.build(point.task, point.seed)
        set_threads(estimator, p)
        return _Probe(with_preprocessing(estimator, dataset), controller)

    rows = []
    try:
        with threadpool_limits(limits=p):
            try:  # untimed: starts thread and process pools; a failure shows in the real fit
                build().fit(X_train.iloc[:WARMUP_ROWS], y_train.iloc[:WARMUP_ROWS])
            except Exception:  # noqa: BLE001
                pass
        # Made after the warm-up, when every native library the fit uses is loaded: the
        # limits are set, and read back inside each fit, through this one controller.
        controller = ThreadpoolController()
        with controller.limit(limits=p):
            for repeat in range(point.repeats):
                model = build(controller)
                busy0 = _busy_cpu_seconds()
                with measured() as fit:
                    model.fit(X_train, y_train)
                busy = _busy_cpu_seconds() - busy0
                t0 = time.perf_counter()
                model.predict(X_test)
                predict = time.perf_counter() - t0
                rows.append({**base, "repeat": repeat, "status": OK, "message": "",
                             "fit_seconds": fit.wall, "fit_cpu_seconds": fit.cpu,
                             "predict_seconds": predict,
                             "predict_rows_per_second": len(point.test) / predict
                             if predict > 0 else None,
                             "other_load": max(0.0, busy - fit.cpu) / fit.wall
                             if fit.wall > 0 else None,
                             "limits": model.seen})
    except MemoryError as exc:
        return failed_point(point, ERROR, refusal(exc))
    except Exception as exc:  # the estimator's failure is a result, not a crash
        return failed_point(point, ERROR, f"{type(exc).__name__}: {exc}".splitlines()[0][:500])
    except KeyboardInterrupt:
        if not interrupts_ignored():
            raise
        return failed_point(point, ERROR, "KeyboardInterrupt raised by the estimator")
    return rows


def _point_main(conn, point: SpeedupPoint, dataset: Dataset, memory: int | None) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and stops us
    die_with_parent()
    with limited(memory):
        rows = measure_point(point, dataset)
    # Worker processes started by the fits (joblib's pool behind n_jobs) end with the point,
    # so that nothing of this point runs while the next one is measured.
    end(psutil.Process().children(recursive=True), kill=False)
    conn.send(rows)
    conn.close()


def run_point(point: SpeedupPoint, dataset: Dataset, timeout: float | None,
              memory: int | None = None) -> list[dict[str, Any]]:
    """`measure_point` in a fresh process of its own; stopped after ``timeout`` seconds,
    allowed ``memory`` bytes (`harness.execution.memory`)."""
    ctx = context()
    receive, send = ctx.Pipe(duplex=False)
    # Not a daemon: daemonic processes may not start the worker processes of n_jobs.
    process = ctx.Process(target=_point_main, args=(send, point, dataset, memory),
                          daemon=False)
    process.start()
    send.close()
    try:
        if receive.poll(timeout):
            try:
                return receive.recv()
            except (EOFError, OSError):
                process.join(timeout=5)
                return failed_point(point, ERROR, "the process measuring this point died "
                                    f"({death(process.exitcode)})")
        return failed_point(point, TIMEOUT, f"stopped after the point's time limit of "
                            f"{timeout:g} s")
    finally:
        receive.close()
        if process.is_alive():
            stop_tree(process.pid)
        process.join(timeout=5)
