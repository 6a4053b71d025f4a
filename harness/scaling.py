"""Parallel speedup sweep: how well each strategy uses more cores, measured alone.

What is measured
----------------
For each dataset × strategy of the ``[scaling]`` section and each worker count p, one *sweep
point*: the strategy is fitted on the training rows of the dataset's first split and predicts
its test rows, ``repeats`` times, with

- ``n_jobs = p`` wherever the estimator (or a nested one) has it (`harness.cells.set_threads`),
- the native thread pools (OpenMP, BLAS) limited to p with threadpoolctl,

and the limits actually in force are read from inside each fit (`observe_limits`, called by
the wrapping `_Probe` in the thread that runs the fit) and stored with the point. Wall time,
CPU time (all threads, and worker processes too; see `harness.measure`) and the prediction
throughput at the same p are stored per repeat, with how many cores other processes kept
busy during the fit (``other_load``), so a disturbed point can be told from a real result.

How it runs
-----------
Points run one at a time, each in a fresh process of its own, while the parent waits
without working. A fresh process per point means every worker count starts from the same
state: no thread pool (OpenMP, BLAS) or joblib process pool left over from the previous
worker count, no memory grown by earlier fits, and a point that exceeds its time limit can
be stopped. Before the timed repeats, one untimed fit on a small slice of the training rows
starts those pools, so their start-up is not charged to the first repeat. A lock file makes
two sweeps on the same machine wait for each other; other woodlot processes seen running are
reported. Sweep points are keyed like cells (data, estimator, split, worker count, repeats,
machine), so a resumed run measures only the points it lacks.

What is derived (`summarize`)
-----------------------------
Speedup S(p) = T(1) / T(p) from median fit wall times, efficiency S(p) / p, and the serial
fraction f of Amdahl's law, S(p) = 1 / (f + (1 − f) / p) (Amdahl 1967), fitted by least
squares on the measured speedups, f kept in [0, 1]. Intervals (95 %) come from a bootstrap
over repeats: each worker count's repeats are resampled, medians, speedups and f recomputed.
With two worker counts (1 and p) the fit is exactly determined; its interval then reflects
the repeats' spread only. Speedups at 8, 16 and 64 cores are extrapolations of the fitted
law, not measurements.
"""

from __future__ import annotations

import fcntl
import json
import os
import signal
import socket
import sys
import tempfile
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd
import psutil
from scipy.optimize import minimize_scalar
from threadpoolctl import ThreadpoolController, threadpool_limits

from harness import provenance
from harness.cells import ERROR, OK, TIMEOUT, cell_key, set_threads
from harness.datasets import Dataset
from harness.errors import UserError
from harness.measure import measured
from harness.preprocess import with_preprocessing
from harness.progress import Progress
from harness.strategies import Strategy
from harness.suite import Scaling, Suite

SWEEP_FORMAT = 1        # bump when the meaning of a stored sweep point changes
WARMUP_ROWS = 500       # rows of the untimed fit that starts the thread and process pools
BUSY_CORES = 0.25       # other processes keeping this many cores busy mark a point "busy"
EXTRAPOLATE_TO = (8, 16, 64)
BOOTSTRAP = 1000        # resamples of the repeats for the intervals
LEVEL = 0.95
_LOCK = Path(tempfile.gettempdir()) / "woodlot-speedup.lock"


# --------------------------------------------------------------------------- planning

@dataclass(frozen=True)
class Point:
    """One dataset × strategy × worker count of a sweep (the dataset travels separately)."""

    key: str
    dataset: str
    fingerprint: str
    task: str
    strategy: Strategy
    workers: int
    repeats: int
    train: np.ndarray
    test: np.ndarray
    seed: int

    def identity(self) -> dict[str, Any]:
        return {"key": self.key, "dataset": self.dataset, "strategy": self.strategy.name,
                "family": self.strategy.family, "method": self.strategy.method,
                "task": self.task, "workers": self.workers, "n_train": int(len(self.train)),
                "n_test": int(len(self.test)), "host": socket.gethostname()}


def usable_cores() -> int:
    """Cores this process may use (CPU affinity and container quotas; joblib's count)."""
    from joblib import cpu_count

    return max(1, int(cpu_count()))


def worker_counts(requested: tuple[int, ...], cores: int) -> tuple[list[int], list[str]]:
    """The worker counts to measure and notes on what was changed.

    Default: 1, 2, 4, … up to ``cores`` (and ``cores`` itself). Counts above ``cores`` are
    clipped to it; 1 is always measured, as the baseline of every speedup.
    """
    notes = []
    if not requested:
        counts = [1]
        while counts[-1] * 2 <= cores:
            counts.append(counts[-1] * 2)
        if counts[-1] != cores:
            counts.append(cores)
        return counts, notes
    above = [w for w in requested if w > cores]
    counts = sorted({min(w, cores) for w in requested})
    if above:
        notes.append(f"worker count{'s' if len(above) > 1 else ''} "
                     f"{', '.join(map(str, above))} exceed{'s' if len(above) == 1 else ''} the "
                     f"{cores} core{'s' if cores > 1 else ''} present; clipped to {cores}")
    if 1 not in counts:
        counts.insert(0, 1)
        notes.append("1 worker added: it is the baseline of every speedup")
    return counts, notes


def plan_sweep(suite: Suite, datasets: dict[str, Dataset], splits: dict[str, list],
               scaling: Scaling, cores: int) -> tuple[list[Point], list[int], list[str]]:
    """Every point of the sweep, in the order they run, plus worker counts and notes."""
    counts, notes = worker_counts(scaling.workers, cores)
    names = scaling.datasets or tuple(d.name for d in suite.datasets)
    strategies = [suite.strategy(n) for n in scaling.strategies] if scaling.strategies \
        else list(suite.strategies)
    machine = {"sweep": SWEEP_FORMAT, "repeats": scaling.repeats, "warmup_rows": WARMUP_ROWS,
               "host": socket.gethostname(), "cpu": provenance.cpu_model(), "cores": cores}
    points = []
    for name in names:
        ds = datasets[name]
        split = splits[name][0]
        for strategy in strategies:
            if not strategy.supports(ds.task):
                notes.append(f"strategy '{strategy.name}' has no estimator for dataset "
                             f"'{name}'s task; left out of the sweep")
                continue
            estimator = strategy.describe(ds.task, suite.protocol.seed)
            for p in counts:
                key = cell_key(fingerprint=ds.fingerprint, estimator=estimator,
                               train=split.train, test=split.test, metrics=(),
                               measure=machine, threads=p)
                points.append(Point(key=key, dataset=name, fingerprint=ds.fingerprint,
                                    task=ds.task, strategy=strategy, workers=p,
                                    repeats=scaling.repeats, train=split.train,
                                    test=split.test, seed=suite.protocol.seed))
    return points, counts, notes


# --------------------------------------------------------------------------- one point

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


def measure_point(point: Point, dataset: Dataset) -> list[dict[str, Any]]:
    """Fit and predict ``repeats`` times at ``point.workers``; one row per repeat.

    Runs in the calling process (the sweep calls it in a fresh process per point). The
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
    except Exception as exc:  # the estimator's failure is a result, not a crash
        return [{**base, "repeat": 0, "status": ERROR,
                 "message": f"{type(exc).__name__}: {exc}".splitlines()[0][:500]}]
    return rows


def _point_main(conn, point: Point, dataset: Dataset) -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the parent handles Ctrl-C and stops us
    rows = measure_point(point, dataset)
    # Worker processes started by the fits (joblib's pool behind n_jobs) end with the point,
    # so that nothing of this point runs while the next one is measured.
    _end(psutil.Process().children(recursive=True), kill=False)
    conn.send(rows)
    conn.close()


def run_point(point: Point, dataset: Dataset, timeout: float | None) -> list[dict[str, Any]]:
    """`measure_point` in a fresh process of its own; stopped after ``timeout`` seconds."""
    from harness.executors import _context  # the same process start method as the cells

    ctx = _context()
    receive, send = ctx.Pipe(duplex=False)
    # Not a daemon: daemonic processes may not start the worker processes of n_jobs.
    process = ctx.Process(target=_point_main, args=(send, point, dataset), daemon=False)
    process.start()
    send.close()
    try:
        if receive.poll(timeout):
            try:
                return receive.recv()
            except (EOFError, OSError):
                process.join(timeout=5)
                return [{**point.identity(), "repeat": 0, "status": ERROR,
                         "message": "the process measuring this point died (exit code "
                                    f"{process.exitcode}); out of memory?"}]
        return [{**point.identity(), "repeat": 0, "status": TIMEOUT,
                 "message": f"stopped after the point's time limit of {timeout:g} s"}]
    finally:
        receive.close()
        if process.is_alive():
            _stop_tree(process.pid)
        process.join(timeout=5)


def _stop_tree(pid: int) -> None:
    """Kill process ``pid`` (one this sweep started) and its descendants."""
    try:
        root = psutil.Process(pid)
        _end(root.children(recursive=True) + [root], kill=True)
    except psutil.Error:
        return


def _end(procs: list, *, kill: bool) -> None:
    """Terminate (or kill) processes this sweep started, then wait for them to go."""
    for proc in procs:
        try:
            proc.kill() if kill else proc.terminate()
        except psutil.Error:
            pass
    psutil.wait_procs(procs, timeout=5)


# --------------------------------------------------------------------------- the sweep

@contextmanager
def _exclusive(echo: Callable[[str], None]):
    """Hold the machine-wide sweep lock (waits while another sweep holds it)."""
    try:
        handle = open(_LOCK, "a+")
    except OSError as exc:  # e.g. a lock file of another user: go on, and say so
        echo(f"speedup sweep: cannot open the lock file {_LOCK} ({exc}); other sweeps on "
             "this machine are not kept out")
        yield
        return
    with handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            echo("speedup sweep: waiting for another speedup sweep on this machine to finish")
            fcntl.flock(handle, fcntl.LOCK_EX)
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def other_woodlot_processes() -> list[int]:
    """Pids of woodlot processes that are not this one, its ancestors or its descendants."""
    me = psutil.Process()
    own = {me.pid} | {p.pid for p in me.parents()} | {p.pid for p in me.children(recursive=True)}
    found = []
    for proc in psutil.process_iter(["pid", "cmdline"]):
        if proc.info["pid"] in own:
            continue
        cmd = " ".join(proc.info["cmdline"] or ())
        if "woodlot" in cmd or "harness.cells" in cmd or "-m harness" in cmd:
            found.append(proc.info["pid"])
    return found


@dataclass
class SweepResult:
    planned: int = 0
    reused: int = 0
    ran: int = 0
    failed: int = 0
    workers: list[int] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    provenance: dict[str, Any] = field(default_factory=dict)


def run_sweep(suite: Suite, datasets: dict[str, Dataset], splits: dict[str, list], store,
              run: int, *, fresh: bool = False, retry_failed: bool = False,
              progress: bool | None = None,
              echo: Callable[[str], None] | None = None) -> SweepResult:
    """Measure every point of the suite's sweep not yet in ``store``; store each point in
    one transaction. ``result.provenance`` belongs under ``"scaling"`` in the run's
    provenance (machine, worker counts, load average before and after, notes)."""
    echo = echo or (lambda s: print(s, file=sys.stderr))
    scaling = suite.scaling or Scaling()
    cores = usable_cores()
    points, counts, notes = plan_sweep(suite, datasets, splits, scaling, cores)
    result = SweepResult(planned=len(points), workers=counts, notes=notes)
    store.set_scaling_plan(p.key for p in points)
    done = set() if fresh else store.scaling_keys(include_failed=not retry_failed)
    todo = [p for p in points if p.key not in done]
    result.reused = len(points) - len(todo)
    timeout = suite.protocol.cell_timeout
    timeout = None if timeout is None else timeout * (scaling.repeats + 1)
    started = time.time()
    prov: dict[str, Any] = {
        "cpu_model": provenance.cpu_model(), "cores": os.cpu_count(), "usable_cores": cores,
        "workers_requested": list(scaling.workers) or "default", "workers": counts,
        "repeats": scaling.repeats, "noise_margin": scaling.noise_margin,
        "method": "each point alone in a fresh process; n_jobs = p where the estimator has "
                  "it and OpenMP/BLAS limited to p (threadpoolctl), read back inside each fit; "
                  "one untimed warm-up fit, then the timed repeats",
    }
    for note in notes:
        echo(f"speedup sweep: {note}")
    if todo:
        echo(f"speedup sweep: {len(todo)} point(s) to measure ({len(points) - len(todo)} "
             f"stored), workers {', '.join(map(str, counts))}, {scaling.repeats} repeat(s) "
             "each, one point at a time in a fresh process")
        with _exclusive(echo):
            others = other_woodlot_processes()
            if others:
                notes.append(f"{len(others)} other woodlot process(es) were running when the "
                             "sweep started; their work can slow the points measured")
                echo(f"speedup sweep: {notes[-1]}")
            prov["load_average_before"] = provenance.load_average()
            load = (prov["load_average_before"] or [0.0])[0]
            if load > 0.5:
                notes.append(f"the machine was busy before the sweep (load average {load:g} "
                             f"over the last minute, {cores} cores)")
                echo(f"speedup sweep: {notes[-1]}")
            bar = Progress(len(todo), label="sweep points", enabled=progress)
            try:
                for point in todo:
                    rows = run_point(point, datasets[point.dataset], timeout)
                    store.put_scaling(rows, run)
                    result.ran += 1
                    failed = rows[0]["status"] != OK
                    result.failed += failed
                    bar.step(not failed)
            finally:
                bar.close()
                prov["load_average_after"] = provenance.load_average()
    prov["seconds"] = round(time.time() - started, 1)
    prov["notes"] = notes
    result.provenance = prov
    return result


def scale_suite(path, *, out=None, fresh: bool = False, retry_failed: bool = False,
                progress: bool | None = None, echo: Callable[[str], None] | None = None,
                command: str | None = None):
    """``woodlot scale``: the speedup sweep of a suite alone, then the outputs rewritten.

    A suite without a ``[scaling]`` section is swept with the defaults (every dataset and
    strategy, workers 1, 2, 4, … up to the cores present, 3 repeats).
    Returns ``(sweep result, folder, outputs)``.
    """
    from harness.plan import make_plan
    from harness.report.build import build_outputs
    from harness.runner import results_folder
    from harness.store import Store
    from harness.suite import load_suite

    echo = echo or (lambda s: print(s, file=sys.stderr))
    suite = load_suite(path)
    plan = make_plan(suite)
    folder = results_folder(suite, out)
    if suite.scaling is None:
        echo("speedup sweep: the suite has no [scaling] section; sweeping every dataset and "
             "strategy with the default worker counts")
    with Store(folder) as store:
        store.record_datasets((d.fingerprint, d.name, d.summary()) for d in plan.datasets.values())
        prov = provenance.collect(command)
        prov.update(suite=str(suite.path), suite_name=suite.name, executor="none (sweep only)",
                    metrics={k: list(v) for k, v in suite.protocol.metrics.items()},
                    timing="speedup sweep only")
        run = store.start_run(suite.name, suite.text, prov["command"], prov)
        try:
            sweep = run_sweep(suite, plan.datasets, plan.splits, store, run, fresh=fresh,
                              retry_failed=retry_failed, progress=progress, echo=echo)
        except KeyboardInterrupt:
            store.finish_run(run, "interrupted")
            raise
        prov["scaling"] = sweep.provenance
        store.finish_run(run, "finished", prov)
    return sweep, folder, build_outputs(folder)


# --------------------------------------------------------------------------- analysis

def amdahl_speedup(workers, serial_fraction):
    """Amdahl's law: S(p) = 1 / (f + (1 − f) / p)."""
    p = np.asarray(workers, dtype=float)
    return 1.0 / (serial_fraction + (1.0 - serial_fraction) / p)


def fit_serial_fraction(workers, speedups) -> float:
    """Least-squares serial fraction f in [0, 1] of Amdahl's law for measured speedups.

    Minimises Σ (S(p) − 1 / (f + (1 − f)/p))² over f in [0, 1]: a grid of 201 values finds
    the basin, SciPy's bounded scalar minimiser polishes it.
    """
    p = np.asarray(workers, dtype=float)
    s = np.asarray(speedups, dtype=float)
    keep = np.isfinite(s) & (p > 1)
    if not keep.any():
        return float("nan")
    p, s = p[keep], s[keep]

    def loss(f):
        return float(np.sum((s - amdahl_speedup(p, f)) ** 2))

    grid = np.linspace(0.0, 1.0, 201)
    best = grid[int(np.argmin(((s - amdahl_speedup(p, grid[:, None])) ** 2).sum(axis=1)))]
    lo, hi = max(0.0, best - 0.005), min(1.0, best + 0.005)
    res = minimize_scalar(loss, bounds=(lo, hi), method="bounded", options={"xatol": 1e-10})
    candidates = [(loss(f), f) for f in (res.x, lo, hi, best)]
    return float(min(candidates)[1])


def _limits_text(limits: dict | None) -> str:
    if not limits:
        return ""
    pools = {}
    for pool in limits.get("pools", []):
        pools.setdefault(pool["api"], set()).add(pool["threads"])
    parts = [f"{api}={','.join(map(str, sorted(v)))}" for api, v in sorted(pools.items())]
    jobs = sorted({str(v) for v in limits.get("n_jobs", {}).values()})
    parts.append(f"n_jobs={','.join(jobs)}" if jobs else "no n_jobs")
    return " ".join(parts)


def _limits_ok(limits: dict | None, workers: int) -> bool:
    if not limits:
        return False
    return (all(pool["threads"] == workers for pool in limits.get("pools", []))
            and all(v == workers for v in limits.get("n_jobs", {}).values()))


def summarize(frame: pd.DataFrame, noise_margin: float = 0.15,
              seed: int = 0) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Stored sweep rows → (one row per point, one row per dataset × strategy fit).

    Points: median fit wall time with min, max and quartiles over repeats, relative spread
    (max − min) / median and whether it exceeds ``noise_margin``, median CPU seconds and
    cores busy (CPU / wall), prediction rows per second (test rows / median predict time),
    cores kept busy by other processes, the limits seen inside the fits, speedup with its
    bootstrap interval and efficiency. Fits: serial fraction with its interval and the
    extrapolated speedups. Deterministic for a given store (seeded bootstrap).
    """
    if frame.empty:
        return pd.DataFrame(), pd.DataFrame()
    frame = frame.copy()
    frame["limits"] = [json.loads(v) if isinstance(v, str) and v else None
                       for v in frame["limits"]]
    ok = frame[frame["status"] == OK]
    points, fits = [], []
    rng = np.random.default_rng(seed)
    for (ds, st), part in frame.groupby(["dataset", "strategy"], sort=False):
        good = ok[(ok["dataset"] == ds) & (ok["strategy"] == st)]
        family = part["family"].iloc[0]
        times = {int(w): g["fit_seconds"].to_numpy(float)
                 for w, g in good.groupby("workers")}
        counts = sorted(times)
        base = times.get(1)
        # bootstrap over repeats: resample each worker count's repeats, recompute medians
        boot = {w: np.median(rng.choice(t, size=(BOOTSTRAP, len(t)), replace=True), axis=1)
                for w, t in times.items()}
        boot_s = {w: boot[1] / boot[w] for w in counts} if base is not None else {}
        for w, g in part.groupby("workers"):
            w = int(w)
            row = {"dataset": ds, "strategy": st, "family": family, "workers": w}
            gg = g[g["status"] == OK]
            if gg.empty:
                bad = g.iloc[0]
                row.update(status=bad["status"], message=bad["message"], repeats=0)
                points.append(row)
                continue
            t = gg["fit_seconds"].to_numpy(float)
            med = float(np.median(t))
            spread = float((t.max() - t.min()) / med) if len(t) > 1 and med > 0 else np.nan
            limits = [lim for lim in gg["limits"]]
            texts = sorted({_limits_text(lim) for lim in limits})
            cpu = float(np.median(gg["fit_cpu_seconds"].to_numpy(float)))
            pred = float(np.median(gg["predict_seconds"].to_numpy(float)))
            row.update(status=OK, message="", repeats=len(t), fit_seconds=med,
                       fit_seconds_min=float(t.min()), fit_seconds_max=float(t.max()),
                       fit_seconds_q1=float(np.quantile(t, 0.25)),
                       fit_seconds_q3=float(np.quantile(t, 0.75)), spread=spread,
                       noisy=bool(spread > noise_margin) if np.isfinite(spread) else False,
                       fit_cpu_seconds=cpu, cores_busy=cpu / med if med > 0 else np.nan,
                       predict_rows_per_second=float(gg["n_test"].iloc[0]) / pred
                       if pred > 0 else np.nan,
                       other_load=float(np.median(gg["other_load"].to_numpy(float))),
                       limits=" | ".join(texts),
                       limits_ok=all(_limits_ok(lim, w) for lim in limits))
            row["busy"] = bool(row["other_load"] > BUSY_CORES)
            if base is not None:
                s = float(np.median(base)) / med
                lo, hi = np.quantile(boot_s[w], [(1 - LEVEL) / 2, (1 + LEVEL) / 2])
                row.update(speedup=s, speedup_low=float(lo), speedup_high=float(hi),
                           efficiency=s / w)
            points.append(row)
        fit = {"dataset": ds, "strategy": st, "family": family,
               "worker_counts": len(counts), "max_workers": max(counts) if counts else np.nan}
        if base is None or len(counts) < 2:
            fit["fit"] = ("no fit: needs 1 worker and at least one more worker count"
                          if counts else "no fit: no point measured")
            fits.append(fit)
            continue
        med_s = [float(np.median(base)) / float(np.median(times[w])) for w in counts]
        f = fit_serial_fraction(counts, med_s)
        fb = np.array([fit_serial_fraction(counts, [boot_s[w][b] for w in counts])
                       for b in range(BOOTSTRAP)])
        f_lo, f_hi = np.quantile(fb, [(1 - LEVEL) / 2, (1 + LEVEL) / 2])
        single = min(len(times[w]) for w in counts) < 2
        how = (f"exactly determined by {len(counts)} worker counts (1 and {counts[-1]})"
               if len(counts) == 2 else f"least squares over {len(counts)} worker counts")
        how += ("; no interval (one repeat)" if single else
                "; 95% interval: bootstrap over repeats")
        if any(s < 1.0 for s in med_s[1:]):
            how += "; slower with more workers, which Amdahl's law cannot describe"
        fit.update(serial_fraction=f, serial_fraction_low=float(f_lo),
                   serial_fraction_high=float(f_hi), fit=how,
                   measured_speedup=med_s[-1])
        for q in EXTRAPOLATE_TO:
            fit[f"extrapolated_speedup_{q}"] = float(amdahl_speedup(q, f))
            fit[f"extrapolated_speedup_{q}_low"] = float(amdahl_speedup(q, f_hi))
            fit[f"extrapolated_speedup_{q}_high"] = float(amdahl_speedup(q, f_lo))
        fits.append(fit)
    return pd.DataFrame(points), pd.DataFrame(fits)
