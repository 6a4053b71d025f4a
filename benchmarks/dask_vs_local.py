"""What does running on Dask cost against woodlot's own worker processes, on one machine?

Runs a suite from scratch twice with the same number of workers: with the local executor
(``jobs`` processes) and with a local Dask cluster woodlot starts (``workers`` one-thread
processes on the loopback interface). Prints each wall time (the whole ``run_suite`` call,
cluster start and shutdown included, tables and plots not written), their ratio, and whether
every cell's scores agree exactly. Goal: ratio at most 1.15 on the starter suite.

    python benchmarks/dask_vs_local.py [--suite suites/starter.toml] [--workers 2]
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import tempfile
import time
from pathlib import Path

from harness.execution.dask_cluster import DaskExecutor
from harness.execution.local import LocalExecutor
from harness.commands.run import run_suite


def timed_run(suite: str, out: Path, executor) -> float:
    t0 = time.perf_counter()
    run_suite(suite, out=out, fresh=True, executor=executor, progress=False,
              write_outputs=False)
    return time.perf_counter() - t0


def scores(folder: Path) -> dict:
    db = sqlite3.connect(folder / "cells.sqlite")
    out = {k: (s, c) for k, s, c in db.execute("SELECT key, scores, curve FROM cells")}
    db.close()
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--suite", default="suites/starter.toml")
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        local_out, dask_out = Path(tmp) / "local", Path(tmp) / "dask"
        local = timed_run(args.suite, local_out, LocalExecutor(args.workers))
        remote = timed_run(args.suite, dask_out, DaskExecutor(workers=args.workers))
        same = scores(local_out) == scores(dask_out)
    print(f"{args.suite}, {args.workers} workers: local {local:.1f} s, Dask {remote:.1f} s, "
          f"ratio {remote / local:.2f}; scores identical: {'yes' if same else 'NO'}")


if __name__ == "__main__":
    main()
