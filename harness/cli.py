"""The ``woodlot`` command: a thin layer over the Python API."""

from __future__ import annotations

import argparse
import shlex
import sys

from harness.errors import UserError


def _check(args) -> int:
    from harness.plan import make_plan
    from harness.suite import load_suite
    from harness.report.tables import markdown
    import pandas as pd

    suite = load_suite(args.suite)
    plan = make_plan(suite)
    print(f"suite '{suite.name}': {suite.description}".rstrip(": "))
    p = suite.protocol
    how = (f"{p.repeats} × {p.folds}-fold cross-validation" if p.resampling == "cv" else
           f"{p.repeats} holdout split(s), " + (f"{p.train_rows} training rows" if p.train_rows
                                                else f"test fraction {p.test_fraction}")
           if p.resampling == "holdout" else "the datasets' published splits")
    print(f"protocol: {how}, seed {p.seed}; cell time limit "
          f"{'none' if p.cell_timeout is None else f'{p.cell_timeout:g} s'}\n")
    ds = pd.DataFrame([d.summary() for d in plan.datasets.values()])
    ds["metrics"] = [", ".join(p.metrics[t]) for t in ds["task"]]
    ds["splits"] = [len(plan.splits[n]) for n in ds["dataset"]]
    print("Datasets\n" + markdown(ds.drop(columns=["fingerprint"])))
    st = pd.DataFrame([{"strategy": s.name, "family": s.family, "method": s.method,
                        "params": ", ".join(f"{k}={v}" for k, v in s.params.items())}
                       for s in suite.strategies])
    print("Strategies\n" + markdown(st))
    for strategy, dataset in plan.skipped:
        print(f"note: strategy '{strategy}' has no estimator for dataset '{dataset}'s task; skipped")
    print(f"{len(plan.cells)} cells ({len(plan.datasets)} datasets × {len(suite.strategies)} "
          "strategies × splits); nothing was fitted.")
    return 0


def _run(args) -> int:
    from harness.runner import run_suite

    result = run_suite(args.suite, out=args.out, jobs=args.jobs, fresh=args.fresh,
                       retry_failed=args.retry_failed, progress=False if args.quiet else None,
                       command="woodlot " + " ".join(map(shlex.quote, sys.argv[1:])))
    _summary(result)
    return 0


def _summary(result) -> None:
    from harness.report.tables import markdown

    print(f"{result.planned} cells planned: {result.reused} already stored, {result.ran} run"
          + (f", {result.failed} failed (see tables/failures.md)" if result.failed else "") + ".")
    if result.outputs is not None and result.outputs.ranks is not None:
        print("\nMean rank across datasets (1 = best)\n" + markdown(result.outputs.ranks))
    print(f"Results in {result.folder}/ (tables/, plots/, cells.sqlite)")


def _report(args) -> int:
    from harness.report.build import build_outputs
    from harness.report.tables import markdown

    outputs = build_outputs(args.folder)
    for f in outputs.files:
        print(f)
    if outputs.ranks is not None:
        print("\nMean rank across datasets (1 = best)\n" + markdown(outputs.ranks))
    return 0


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="woodlot", description="Compare ensemble methods for "
                                "tabular data: accuracy, certainty, cost and parallel speedup.")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")
    c = sub.add_parser("check", help="validate a suite and print its plan without fitting")
    c.add_argument("suite")
    c.set_defaults(fn=_check)
    r = sub.add_parser("run", help="run a suite (resumes; skips stored cells)")
    r.add_argument("suite")
    r.add_argument("--out", help="results folder (default: results/<suite name>)")
    r.add_argument("--jobs", type=int, help="worker processes (default: all cores)")
    r.add_argument("--fresh", action="store_true", help="forget stored cells and start over")
    r.add_argument("--retry-failed", action="store_true",
                   help="run again cells stored as errors or timeouts")
    r.add_argument("--quiet", action="store_true", help="no progress bar")
    r.set_defaults(fn=_run)
    rp = sub.add_parser("report", help="rewrite tables and plots of a results folder from its store")
    rp.add_argument("folder")
    rp.set_defaults(fn=_report)
    return p


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    try:
        return args.fn(args)
    except UserError as exc:
        print(f"woodlot: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("woodlot: interrupted; every finished cell is kept in the store, run the same "
              "command again to resume", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
