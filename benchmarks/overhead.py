"""How much time does woodlot add to a plain scikit-learn cross-validation loop?

Runs the same cells (same estimators, splits and metrics) three ways at one worker:
  1. a plain loop of `sklearn.model_selection.cross_validate`, one call per dataset × strategy;
  2. woodlot with its extra measurements off (peak memory, model size, ensemble-size curves);
  3. woodlot with them on.
and prints the wall times and the ratios 2/1 and 3/1. woodlot's times cover everything its
run does except writing tables and plots: loading data, planning, the worker process, the
store. Goals: at most 1.10 with extras off, at most 1.30 with them on.

    python benchmarks/overhead.py [--suite suites/starter.toml] [--repeats 1]
"""

from __future__ import annotations

import argparse
import re
import sys
import tempfile
import time
from pathlib import Path

from sklearn.model_selection import cross_validate
from threadpoolctl import threadpool_limits

from harness.execution.run_cell import set_threads
from harness.plan import load_datasets
from harness.splits import splitter
from harness.commands.run import run_suite
from harness.suite import load_suite


def plain_loop(suite) -> float:
    datasets = load_datasets(suite)
    p = suite.protocol
    t0 = time.perf_counter()
    with threadpool_limits(limits=1):
        for spec in suite.datasets:
            ds = datasets[spec.name]
            cv = splitter(p, ds.task, ds.n_rows)
            for strategy in suite.strategies:
                est = strategy.build(ds.task, p.seed)
                set_threads(est, 1)
                cross_validate(est, ds.X, ds.y, cv=cv, scoring=list(p.metrics[ds.task]),
                               n_jobs=1)
    return time.perf_counter() - t0


def with_measure(text: str, on: bool) -> str:
    text = re.sub(r"(?ms)^\[also_measure\].*?(?=^\[)", "", text)
    flag = "true" if on else "false"
    return text + f"\n[also_measure]\nmemory = {flag}\nmodel_size = {flag}\nsize_curve = {flag}\n"


def woodlot(suite_path: Path, text: str, on: bool, folder: Path) -> float:
    path = folder / f"overhead-{'on' if on else 'off'}.toml"
    path.write_text(text if on is None else with_measure(text, on))
    t0 = time.perf_counter()
    run_suite(path, out=folder / path.stem, jobs=1, fresh=True, progress=False,
              write_outputs=False, echo=lambda s: None)
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--suite", default="suites/starter.toml")
    ap.add_argument("--repeats", type=int, default=None,
                    help="override the suite's repeats (fewer = quicker)")
    args = ap.parse_args()
    src = Path(args.suite)
    text = src.read_text()
    if args.repeats is not None:
        text = re.sub(r"(?m)^repeats\s*=\s*\d+", f"repeats = {args.repeats}", text, count=1)
    text = re.sub(r"(?m)^cell_timeout.*$", "", text)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        (folder / "s.toml").write_text(text)
        suite = load_suite(folder / "s.toml")
        plain = plain_loop(suite)
        off = woodlot(src, text, False, folder)
        on = woodlot(src, text, True, folder)
    print(f"suite: {src} ({len(suite.datasets)} datasets × {len(suite.strategies)} strategies, "
          f"{suite.protocol.repeats} × {suite.protocol.folds}-fold), one worker")
    print(f"plain cross_validate loop      {plain:8.2f} s")
    print(f"woodlot, extras off            {off:8.2f} s   ratio {off / plain:.3f}  (goal ≤ 1.10)")
    print(f"woodlot, extras on             {on:8.2f} s   ratio {on / plain:.3f}  (goal ≤ 1.30)")
    sys.stdout.flush()


if __name__ == "__main__":
    main()
