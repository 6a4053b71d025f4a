"""How does woodlot cope with a big results store?

Builds a synthetic store of 100,000 cells (40 datasets × 25 strategies × 10 repeats × 10 folds)
through woodlot's own code — the run lifecycle (`harness.commands.lifecycle.session`: suite,
datasets, plan with the real cell keys, provenance, run rows), `Store.set_plan` and one
`Store.put` per cell — with scores, times and ensemble-size curves drawn by a seeded generator
(invented numbers of a realistic shape; no estimator is fitted). A second store, a rerun with
the same keys, timings jittered and a few scores moved, is built the same way. Then each of
these runs in a fresh process and its wall time, peak resident memory ("peak") and the peak
memory of it and the processes it starts together ("+child": the report draws its figures in a
second process; proportional set sizes summed, so pages they share count once) are printed:

  woodlot report STORE_A              goal ≤ 10 s, ≤ 500 MB
  woodlot agree STORE_A STORE_B       goal ≤ 5 s, ≤ 300 MB
  harness.load_results(STORE_A)       goal ≤ 3 s (the call; the process time is shown too)
  woodlot run suites/starter.toml     a second time on a finished folder: goal ≤ 3 s

and the size of the write-ahead log while cells are stored (sampled during the synthetic build
and during a real run of the starter suite) against the final store size.

    python benchmarks/large_store.py [--out DIR] [--starter FOLDER | --no-starter]
        [--datasets 40 --strategies 25 --repeats 10 --folds 10]

``--starter FOLDER`` reuses a finished starter-suite folder instead of running the suite
(about two minutes on two cores); ``--out DIR`` keeps the stores for a later look.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import psutil

from harness.commands.lifecycle import session
from harness.store import STORE_NAME
from harness.work_units import ERROR, OK, TIMEOUT, Cell

ROOT = Path(__file__).resolve().parent.parent
STARTER = ROOT / "suites" / "starter.toml"

# method → (relative accuracy effect, fit seconds at 100 members on a mid-sized dataset)
METHODS = {"single-tree": (-0.05, 0.01), "bagged-trees": (-0.008, 0.30),
           "random-forest": (0.0, 0.40), "extra-trees": (0.002, 0.25),
           "gradient-boosting": (0.006, 1.00), "hist-gradient-boosting": (0.008, 0.45),
           "adaboost": (-0.02, 0.30)}
SIZES = (25, 50, 100, 200)


# ------------------------------------------------------------------ the synthetic suite

def suite_text(n_datasets: int, n_strategies: int, repeats: int, folds: int) -> str:
    """A suite of generated datasets (alternately classification and regression) and
    catalogue strategies at several ensemble sizes."""
    lines = ['[suite]', 'name = "large-store"', '', '[protocol]', 'splits = "k-fold"',
             f'folds = {folds}', f'repeats = {repeats}', 'seed = 11',
             'metrics = { classification = ["accuracy", "balanced_accuracy", "neg_log_loss"], '
             'regression = ["neg_root_mean_squared_error", "r2"] }', '']
    for d in range(n_datasets):
        make = "make_classification" if d % 2 == 0 else "make_regression"
        lines += ['[[dataset]]', f'name = "synthetic-{d:02d}"', 'from = "generator"',
                  f'make = "{make}"',
                  f'params = {{ n_samples = 200, n_features = 8, random_state = {d} }}', '']
    strategies = [("single-tree", "single-tree", None)]
    for size in SIZES:
        for method in METHODS:
            if method != "single-tree":
                strategies.append((f"{method}-{size}", method, size))
    for name, method, size in strategies[:n_strategies]:
        lines += ['[[strategy]]', f'name = "{name}"', f'method = "{method}"']
        if size is not None:
            key = "max_iter" if method == "hist-gradient-boosting" else "n_estimators"
            lines.append(f'params = {{ {key} = {size} }}')
        lines.append('')
    return "\n".join(lines)


class Scenario:
    """Seeded truth of the synthetic benchmark: per dataset a level, a fold-to-fold spread
    and a size; per strategy an effect and a cost."""

    def __init__(self, cells: list[Cell], seed: int) -> None:
        rng = np.random.default_rng(seed)
        names = list(dict.fromkeys(c.dataset for c in cells))
        self.level = dict(zip(names, rng.uniform(0.70, 0.93, len(names))))
        self.spread = dict(zip(names, rng.uniform(0.01, 0.04, len(names))))
        self.size = dict(zip(names, rng.lognormal(0.0, 0.8, len(names))))
        self.target_sd = dict(zip(names, rng.uniform(5.0, 80.0, len(names))))
        strategies = list(dict.fromkeys(c.strategy.name for c in cells))
        self.pair_effect = {(d, s): rng.normal(0, 0.006) for d in names for s in strategies}
        self.split_noise = {(d, r, f): rng.normal(0, 1)
                            for d in names for r in range(50) for f in range(50)}

    def members(self, cell: Cell) -> int:
        p = cell.strategy.params
        return int(p.get("n_estimators") or p.get("max_iter") or 1)

    def row(self, cell: Cell, rng: np.random.Generator, run_jitter: float = 0.0) -> dict:
        """The row `harness.execution.run_cell.run_cell` would return for ``cell``."""
        row = {"key": cell.key, **cell.identity(), "threads": cell.threads,
               "timing": cell.timing, "worker": f"bench:{1000 + cell.repeat}"}
        u = rng.random()
        if u < 0.001:
            return {**row, "status": ERROR, "message": "ValueError: Input contains NaN",
                    "detail": "Traceback (most recent call last):\n  ...\nValueError: Input "
                              "contains NaN", "seconds": 0.02}
        if u < 0.0015:
            return {**row, "status": TIMEOUT, "message": "stopped after the cell time limit "
                    "of 120 s", "seconds": 120.0}
        effect, cost = METHODS[cell.strategy.method]
        n = self.members(cell)
        grow = effect * (1 - 0.3 * np.exp(-n / 80)) if n > 1 else effect
        level = self.level[cell.dataset] + grow + self.pair_effect[(cell.dataset,
                                                                     cell.strategy.name)]
        sd = self.spread[cell.dataset]
        score = level + sd * (0.7 * self.split_noise[(cell.dataset, cell.repeat, cell.fold)]
                              + 0.7 * rng.normal())
        score = float(np.clip(score, 0.05, 0.999))
        if cell.task == "classification":
            scores = {"accuracy": score,
                      "balanced_accuracy": float(max(0.0, score - rng.uniform(0, 0.02))),
                      "neg_log_loss": -float(0.05 + 1.6 * (1 - score) + abs(rng.normal(0, 0.02)))}
            metric = "accuracy"
        else:
            r2 = score - 0.1
            scores = {"r2": r2, "neg_root_mean_squared_error":
                      -float(self.target_sd[cell.dataset] * np.sqrt(max(1e-6, 1 - r2)))}
            metric = "neg_root_mean_squared_error"  # the suite's first, which curves record
        scale = self.size[cell.dataset] * (n / 100 if n > 1 else 1.0)
        fit = float(cost * scale * rng.lognormal(run_jitter, 0.12))
        curve = None
        if n > 1:
            sizes = sorted({max(1, round(n * q)) for q in (0.02, 0.05, 0.1, 0.2, 0.35, 0.5,
                                                           0.75, 1.0)})
            final = scores[metric]
            drop = 0.15 if metric == "accuracy" else 0.25 * self.target_sd[cell.dataset]
            curve = [[m, float(final - drop * np.exp(-m / (0.08 * n)) + rng.normal(0, 0.002))]
                     for m in sizes]
            curve[-1][1] = final
        return {**row, "status": OK, "message": "", "scores": scores, "fit_seconds": fit,
                "fit_cpu_seconds": fit * rng.uniform(0.95, 1.0),
                "predict_seconds": fit / 25 * rng.lognormal(run_jitter, 0.1),
                "peak_memory_bytes": int(2e6 * scale * rng.uniform(0.8, 1.2)),
                "model_bytes": int(4e5 * scale * rng.uniform(0.8, 1.2)), "curve": curve,
                "seconds": fit * 1.05}


# ------------------------------------------------------------------ building a store

class WalWatch:
    """Samples the size of a store's write-ahead log in a background thread."""

    def __init__(self, folder: Path, every: float = 0.02) -> None:
        self.path = folder / (STORE_NAME + "-wal")
        self.every, self.largest, self._stop = every, 0, threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                self.largest = max(self.largest, self.path.stat().st_size)
            except OSError:
                pass
            time.sleep(self.every)

    def restart(self) -> int:
        """The largest size seen so far; from now on, sizes are counted afresh."""
        largest, self.largest = self.largest, 0
        return largest

    def __enter__(self) -> "WalWatch":
        self._thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self._stop.set()
        self._thread.join()


def build(suite_path: Path, folder: Path, *, seed: int, rerun_of: int | None = None) -> dict:
    """Store every cell of the suite's plan into ``folder`` with synthetic results.
    ``rerun_of``: the seed of a store to imitate, with timings jittered and a few scores
    moved (another machine, a library upgrade)."""
    t0 = time.perf_counter()
    with WalWatch(folder) as wal, session(suite_path, out=folder, command="benchmark build",
                                          timing="synthetic", echo=lambda s: None) as s:
        cells = s.plan.cells
        truth = Scenario(cells, 0)
        rng = np.random.default_rng(seed if rerun_of is None else rerun_of)
        jitter = np.random.default_rng(seed)
        s.store.set_plan(c.key for c in cells)
        plan_wal = 0
        for i, cell in enumerate(cells):
            if i == min(1000, len(cells) // 2):  # the plan's transaction is checkpointed by now
                plan_wal = wal.restart()
            row = truth.row(cell, rng)
            if rerun_of is not None and row["status"] == OK:
                f = jitter.lognormal(0.05, 0.1)
                row["fit_seconds"] *= f
                row["fit_cpu_seconds"] *= f
                row["predict_seconds"] *= jitter.lognormal(0.0, 0.1)
                if jitter.random() < 0.002:
                    row["scores"] = {k: v + 0.001 for k, v in row["scores"].items()}
            s.store.put(row, s.run)
    seconds = time.perf_counter() - t0
    return {"cells": len(cells), "seconds": seconds, "plan_wal": plan_wal,
            "largest_wal": wal.largest, "store": (folder / STORE_NAME).stat().st_size}


# ------------------------------------------------------------------ measuring

# Runs ``code`` as __main__ with ``sys.argv[1:]`` and, at exit, writes the process's peak
# resident memory (VmHWM on Linux: the high-water mark of this program's own memory since
# exec; ``ru_maxrss`` would include the benchmark's memory copied at fork) to a file.
LAUNCH = r"""
import atexit, os, sys
def _peak():
    kb = None
    try:
        with open("/proc/self/status") as f:
            kb = next(int(l.split()[1]) for l in f if l.startswith("VmHWM:"))
    except (OSError, StopIteration):
        import resource
        kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
        kb = kb / 1024 if sys.platform == "darwin" else kb
    with open(os.environ["WOODLOT_BENCH_PEAK"], "w") as f:
        f.write(str(kb))
atexit.register(_peak)
code, sys.argv = sys.argv[1], sys.argv[1:]
exec(compile(code, "<benchmark>", "exec"), {"__name__": "__main__"})
"""
CLI = "import sys; from harness.cli import main; sys.exit(main(sys.argv[1:]))"
LOAD_RESULTS = ("import sys, time, harness; t = time.perf_counter(); "
                "f = harness.load_results(sys.argv[1]); "
                "print(f'{time.perf_counter() - t:.3f} s for {len(f)} rows')")


class TreeMemory:
    """Samples, every ``every`` seconds (often enough for a run of seconds, seldom enough
    not to slow it), the memory of a process and all its descendants (the report's drawing
    process among them) as the sum of their proportional set sizes: each page shared between
    them (a fork's) counted once in all. Linux; elsewhere NaN."""

    def __init__(self, pid: int, every: float = 0.2) -> None:
        self.pid, self.every, self.peak = pid, every, 0
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self._thread.start()

    def _loop(self) -> None:
        try:
            root = psutil.Process(self.pid)
        except psutil.Error:
            return
        while not self._stop.is_set():
            total = 0
            try:
                for p in [root, *root.children(recursive=True)]:
                    try:
                        total += p.memory_full_info().pss
                    except (psutil.Error, AttributeError):  # gone, or no PSS here
                        pass
            except psutil.Error:
                return
            self.peak = max(self.peak, total)
            self._stop.wait(self.every)

    def stop(self) -> float:
        """Peak bytes seen (NaN when none could be read)."""
        self._stop.set()
        self._thread.join()
        return self.peak or float("nan")


def run_measured(code: str, args: list[str], label: str) -> dict:
    """Run ``code`` with ``args`` in a fresh Python process: wall time (start-up and imports
    included), peak resident memory of that process, peak memory of the process and the
    processes it starts together (`TreeMemory`), exit status and output."""
    with tempfile.TemporaryDirectory() as tmp:
        peak = Path(tmp) / "peak"
        env = {**os.environ, "WOODLOT_BENCH_PEAK": str(peak),
               "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
        t0 = time.perf_counter()
        proc = subprocess.Popen([sys.executable, "-c", LAUNCH, code, *args], env=env, cwd=ROOT,
                                stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        tree = TreeMemory(proc.pid)
        out, err = proc.communicate()
        seconds = time.perf_counter() - t0
        tree_bytes = tree.stop()
        kb = float(peak.read_text()) if peak.exists() else float("nan")
    return {"label": label, "seconds": seconds, "exit": proc.returncode, "peak_mb": kb / 1024,
            "tree_mb": tree_bytes / 2 ** 20, "out": out, "err": err}


def woodlot(*args: str) -> tuple[str, list[str]]:
    return CLI, list(args)


def starter_run(folder: Path) -> dict:
    """Run the starter suite into ``folder`` from scratch, watching its write-ahead log."""
    with WalWatch(folder) as wal:
        r = run_measured(*woodlot("run", str(STARTER), "--out", str(folder), "--quiet"),
                         "first run of the starter suite")
    r["largest_wal"] = wal.largest
    r["store"] = (folder / STORE_NAME).stat().st_size
    return r


def line(r: dict, goal: str) -> str:
    return (f"{r['label']:<40} {r['seconds']:7.2f} s  {r['peak_mb']:5.0f} MB  "
            f"{r['tree_mb']:5.0f} MB  exit {r['exit']}   (goal {goal})")


def kib(n: int) -> str:
    return f"{n / 1024:,.0f} KiB"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", help="keep the stores in this folder (default: a temporary one)")
    ap.add_argument("--datasets", type=int, default=40)
    ap.add_argument("--strategies", type=int, default=25)
    ap.add_argument("--repeats", type=int, default=10)
    ap.add_argument("--folds", type=int, default=10)
    ap.add_argument("--reports", type=int, default=3,
                    help="times to write the report (its time varies with the machine's load)")
    group = ap.add_mutually_exclusive_group()
    group.add_argument("--starter", help="a finished results folder of suites/starter.toml "
                       "to resume (default: run the suite first)")
    group.add_argument("--no-starter", action="store_true", help="skip the starter suite")
    args = ap.parse_args()
    if args.strategies > 1 + len(SIZES) * (len(METHODS) - 1):
        ap.error(f"at most {1 + len(SIZES) * (len(METHODS) - 1)} strategies")
    tmp = None if args.out else tempfile.mkdtemp(prefix="woodlot-large-")
    base = Path(args.out or tmp)
    base.mkdir(parents=True, exist_ok=True)
    try:
        load_before = os.getloadavg()
        suite = base / "large-store.toml"
        suite.write_text(suite_text(args.datasets, args.strategies, args.repeats, args.folds))
        a, b = base / "a", base / "b"
        for folder in (a, b):
            shutil.rmtree(folder, ignore_errors=True)
        built_a = build(suite, a, seed=1)
        built_b = build(suite, b, seed=2, rerun_of=1)
        cells_text = f"{built_a['cells']:,} cells"
        print(f"built {built_a['cells']:,} cells through Store.put in "
              f"{built_a['seconds']:.1f} s (store A) and {built_b['seconds']:.1f} s (store B)")
        results = [
            (run_measured(*woodlot("report", str(a)), f"woodlot report ({cells_text}) #{i + 1}"),
             "≤ 10 s, ≤ 500 MB") for i in range(args.reports)]
        results += [
            (run_measured(*woodlot("agree", str(a), str(b)), "woodlot agree A B"),
             "≤ 5 s, ≤ 300 MB"),
            (run_measured(LOAD_RESULTS, [str(a)],
                          "harness.load_results (whole process)"), "the call ≤ 3 s")]
        starter = None
        if not args.no_starter:
            if args.starter:
                folder = Path(args.starter)
            else:
                folder = base / "starter"
                shutil.rmtree(folder, ignore_errors=True)
                starter = starter_run(folder)
            results.append((run_measured(*woodlot("run", str(STARTER), "--out", str(folder),
                                                 "--quiet"),
                                         "resume a finished starter run"), "≤ 3 s"))
        load_after = os.getloadavg()
        cells = built_a["cells"]
        print(f"\n{cells:,} cells: {args.datasets} datasets × {args.strategies} strategies × "
              f"{args.repeats} repeats × {args.folds} folds; {os.cpu_count()} cores; load "
              f"average (1, 5, 15 min) before {tuple(round(x, 2) for x in load_before)}, after "
              f"{tuple(round(x, 2) for x in load_after)}\n")
        print(f"{'':<40} {'wall':>9}  {'peak':>8}  {'+child':>8}")
        for r, goal in results:
            print(line(r, goal))
            if r["label"].startswith("harness.load_results"):
                print(f"{'  the call itself':<46} {r['out'].strip().splitlines()[-1]}")
            if r["exit"] not in (0, 1):
                print("  stderr: " + r["err"].strip()[-400:])
        print(f"\nwrite-ahead log while storing {cells:,} cells one transaction each: largest "
              f"{kib(built_a['largest_wal'])} (after the first 1,000 cells; storing the plan of "
              f"{cells:,} keys, one transaction, took it to {kib(built_a['plan_wal'])}); final "
              f"store {kib(built_a['store'])}")
        if starter is not None:
            print(f"write-ahead log during a run of the starter suite: largest "
                  f"{kib(starter['largest_wal'])}; final store {kib(starter['store'])} "
                  f"(the run took {starter['seconds']:.0f} s)")
        sys.stdout.flush()
    finally:
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
