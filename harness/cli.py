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
    from harness.executors import make_executor
    from harness.runner import run_suite

    executor = make_executor(args.executor, jobs=args.jobs, scheduler=args.scheduler,
                             workers=args.workers)
    result = run_suite(args.suite, out=args.out, jobs=args.jobs, fresh=args.fresh,
                       executor=executor,
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
    _speedup_summary(result.outputs)
    _verdict_summary(result.outputs)
    print(f"Results in {result.folder}/ (report.html, tables/, plots/, cells.sqlite)")


def _speedup_summary(outputs) -> None:
    from harness.report.tables import markdown

    if outputs is not None and outputs.speedup is not None and not outputs.speedup.empty:
        print("\nParallel speedup of fitting at the most workers measured, serial fraction "
              "(Amdahl's law) [95% interval]; see tables/speedup.md\n"
              + markdown(outputs.speedup))


def _verdict_summary(outputs) -> None:
    if outputs is not None and outputs.verdict is not None:
        print("\nIn short (details in report.html and tables/verdict_tests.md):\n"
              + "\n".join(f"- {s}" for s in outputs.verdict.summary()) + "\n")


def _scale(args) -> int:
    from harness.scaling import scale_suite

    sweep, folder, outputs = scale_suite(
        args.suite, out=args.out, fresh=args.fresh, retry_failed=args.retry_failed,
        progress=False if args.quiet else None,
        command="woodlot " + " ".join(map(shlex.quote, sys.argv[1:])))
    print(f"{sweep.planned} sweep points planned (workers {', '.join(map(str, sweep.workers))}):"
          f" {sweep.reused} already stored, {sweep.ran} measured"
          + (f", {sweep.failed} failed" if sweep.failed else "") + ".")
    _speedup_summary(outputs)
    print(f"Results in {folder}/ (tables/speedup.md, plots/speedup.png, cells.sqlite)")
    return 0


def _report(args) -> int:
    from harness.report.build import build_outputs
    from harness.report.tables import markdown

    outputs = build_outputs(args.folder)
    for f in outputs.files:
        print(f)
    if outputs.ranks is not None:
        print("\nMean rank across datasets (1 = best)\n" + markdown(outputs.ranks))
    _speedup_summary(outputs)
    _verdict_summary(outputs)
    return 0


def _compare(args) -> int:
    from harness.compare import compare_folders, render

    result = compare_folders(args.folder_a, args.folder_b, args.tolerance)
    print(render(result))
    return result.exit_status


def _fetch(args) -> int:
    from harness.fetch import fetch_suite

    fetch_suite(args.suite)
    print("done: a run of this suite now needs no network")
    return 0


def _add(args) -> int:
    from harness.add import add_file

    added = add_file(args.suite, args.file, args.target, name=args.name, task=args.task,
                     delimiter=args.delimiter, decimal=args.decimal, drop=args.drop or (),
                     echo=print)
    print(f"\nadded dataset '{added.name}' to {added.suite} (dataset entry {added.position}):\n"
          + added.block.strip())
    return 0


def _choose(args) -> int:
    from harness.choose import choose

    rec = choose(args.data, target=args.target, budget=args.budget, metric=args.metric,
                 jobs=args.jobs, out=args.out, task=args.task, suite=args.suite,
                 seed=args.seed, progress=False if args.quiet else None)
    print("\n" + "\n".join(rec.sentences))
    for title, items in (("Ensemble size", rec.curves), ("More cores", rec.cores),
                         ("Left out", rec.left_out), ("Warnings", rec.warnings)):
        if items:
            print(f"\n{title}:\n" + "\n".join(f"  - {x}" for x in items))
    print(f"\nBudget {rec.budget_seconds:.0f} s, used {rec.used_seconds:.0f} s. Written to "
          f"{rec.folder}/ (recommendation.md, recommendation.json, report.html, choose.toml).")
    from harness.report.page import CAUTION

    print("\n" + CAUTION.replace("**", ""))
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
    r.add_argument("--jobs", type=int, help="worker processes of the local executor (default: "
                   "all cores)")
    r.add_argument("--executor", choices=("local", "dask"), default="local",
                   help="where cells run: processes on this machine (default) or a Dask cluster")
    r.add_argument("--scheduler", metavar="ADDRESS",
                   help="with --executor dask: a running scheduler, e.g. tcp://HOST:8786")
    r.add_argument("--workers", type=int, metavar="N",
                   help="with --executor dask: start a local cluster of N one-thread workers")
    r.add_argument("--fresh", action="store_true", help="forget stored cells and start over")
    r.add_argument("--retry-failed", action="store_true",
                   help="run again cells stored as errors or timeouts")
    r.add_argument("--quiet", action="store_true", help="no progress bar")
    r.set_defaults(fn=_run)
    f = sub.add_parser("fetch", help="download a suite's OpenML datasets and tasks into the "
                       "cache so that runs work offline")
    f.add_argument("suite")
    f.set_defaults(fn=_fetch)
    a = sub.add_parser("add", help="check a CSV or Parquet file and add it to a suite")
    a.add_argument("suite")
    a.add_argument("--file", required=True, help="the data file (CSV or Parquet)")
    a.add_argument("--target", required=True, metavar="COLUMN", help="the column to predict")
    a.add_argument("--name", help="the dataset's name in the suite (default: the file's stem)")
    a.add_argument("--task", choices=("classification", "regression"),
                   help="default: inferred from the target column")
    a.add_argument("--delimiter", metavar="X", help="CSV field delimiter (default: detected; "
                   "'tab' for tabs)")
    a.add_argument("--decimal", metavar="X", help="CSV decimal mark, '.' or ',' (default: "
                   "detected)")
    a.add_argument("--drop", action="append", metavar="COLUMN",
                   help="a column to leave out (repeat for several)")
    a.set_defaults(fn=_add)
    sc = sub.add_parser("scale", help="run only the speedup sweep of a suite ([scaling]): each "
                        "method alone at each worker count")
    sc.add_argument("suite")
    sc.add_argument("--out", help="results folder (default: results/<suite name>)")
    sc.add_argument("--fresh", action="store_true",
                    help="measure every sweep point again, even those already stored")
    sc.add_argument("--retry-failed", action="store_true",
                    help="measure again sweep points stored as errors or timeouts")
    sc.add_argument("--quiet", action="store_true", help="no progress bar")
    sc.set_defaults(fn=_scale)
    ch = sub.add_parser("choose", help="which ensemble for one table: compare the catalogue "
                        "within a time budget and recommend one, with reasons")
    ch.add_argument("data", help="a CSV or Parquet file, or with --suite a dataset's name")
    ch.add_argument("--target", metavar="COLUMN", help="the column to predict (data files)")
    ch.add_argument("--suite", help="take DATA from this suite file's datasets")
    ch.add_argument("--budget", default="10m", help="time for the whole comparison, e.g. 90s, "
                    "10m (default 10m)")
    ch.add_argument("--metric", help="scikit-learn scorer name to decide on (default: accuracy "
                    "or neg_root_mean_squared_error)")
    ch.add_argument("--task", choices=("classification", "regression"))
    ch.add_argument("--jobs", type=int, help="worker processes (default: all cores)")
    ch.add_argument("--seed", type=int, default=0, help="seed of the splits and estimators")
    ch.add_argument("--out", help="output folder (default: results/choose-<name>)")
    ch.add_argument("--quiet", action="store_true", help="no progress bar")
    ch.set_defaults(fn=_choose)
    rp = sub.add_parser("report", help="rewrite tables, plots and report.html of a results "
                        "folder from its store")
    rp.add_argument("folder")
    rp.set_defaults(fn=_report)
    cp = sub.add_parser("compare", help="match the cells of two results folders and report "
                        "scores that moved beyond the fold-to-fold noise (exit 1 if any)")
    cp.add_argument("folder_a", metavar="FOLDER_A", help="the reference results folder")
    cp.add_argument("folder_b", metavar="FOLDER_B", help="the results folder compared with it")
    cp.add_argument("--tolerance", type=float, default=1.0, metavar="X",
                    help="a score differs when it moves by more than X fold-to-fold standard "
                    "deviations of its metric on its dataset (default: 1)")
    cp.set_defaults(fn=_compare)
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
