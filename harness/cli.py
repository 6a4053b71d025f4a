"""The ``woodlot`` command: parses options, calls `harness.commands`, prints the outcome.

Exit statuses: 0 done; 1 ``agree`` found a score that differs; 2 bad input (suite, data,
options, folder, a damaged store, a full disk, a results folder in use, two folders ``agree``
cannot compare); 3 a run finished but not one cell of its plan succeeded; 130 stopped by
Ctrl-C; 141 the reader of the output went away; 143 stopped by SIGTERM.
"""

from __future__ import annotations

import argparse
import os
import shlex
import signal
import sys
import threading

from harness import interrupts
from harness.errors import UserError
from harness.versions import WOODLOT_VERSION


ALL_FAILED = 3


class Terminated(KeyboardInterrupt):
    """SIGTERM, handled as Ctrl-C is: workers stopped, the run marked interrupted."""


def _on_sigterm(signum, frame) -> None:
    signal.signal(signal.SIGTERM, signal.SIG_IGN)  # once: let the clean-up finish
    interrupts.remember(Terminated)
    raise Terminated()


def _on_sigint(signum, frame) -> None:
    interrupts.remember(KeyboardInterrupt)
    raise KeyboardInterrupt()


def _command_line() -> str:
    return "woodlot " + " ".join(map(shlex.quote, sys.argv[1:]))


def _check(args) -> int:
    from harness.commands.check import check_suite

    print(check_suite(args.suite))
    return 0


def _outcome(outputs) -> None:
    """The one ranking, the speedup lines and the short answer, when there are any."""
    from harness.analysis.speedup import LEVEL
    from harness.report import words
    from harness.report.render import markdown_table

    if outputs is None:
        return
    if outputs.unchanged:
        from harness.report.outputs import SUMMARY_NAME

        summary = outputs.folder / SUMMARY_NAME
        print("\nThe store has not changed since its tables, plots and report were written; "
              "they are left as they are (woodlot report writes them again).")
        if summary.is_file():
            print(summary.read_text(encoding="utf-8").replace("# The short answer",
                                                              "In short (details in "
                                                              "report.html):"))
        return
    if "ranks" in outputs.tables:
        print("\n" + outputs.tables["ranks"].title + "\n"
              + markdown_table(outputs.tables["ranks"].display))
    if outputs.speedup is not None and not outputs.speedup.empty:
        print("\nParallel speedup of fitting at the most workers measured, serial fraction "
              f"(Amdahl's law) [{LEVEL:.0%} interval]; see tables/speedup.md\n"
              + markdown_table(outputs.speedup))
    if outputs.verdict is not None:
        print("\nIn short (details in summary.md and report.html):\n"
              + "\n".join(f"- {s}" for s in words.bottom_line(outputs.verdict)) + "\n")
    if outputs.tuning:
        print("What tuning buys (details in report.html):\n"
              + "\n".join(f"- {s}" for s in outputs.tuning) + "\n")


def _run(args) -> int:
    from harness.commands.run import make_executor, run_suite

    executor = make_executor(args.executor, jobs=args.jobs, scheduler=args.scheduler,
                             workers=args.workers)
    result = run_suite(args.suite, out=args.out, fresh=args.fresh, executor=executor,
                       retry_failed=args.retry_failed, progress=False if args.quiet else None,
                       command=_command_line(), wait=args.wait_for_folder)
    print(f"{result.planned} cells planned: {result.reused} already stored, {result.ran} run"
          + (f" ({result.trials} trials of tuned strategies' searches)" if result.trials else "")
          + (f", {result.failed} failed (see tables/failures.md)" if result.failed else "") + ".")
    _outcome(result.outputs)
    print(f"Results in {result.folder}/ (report.html, tables/, plots/, cells.sqlite)")
    if result.planned and not result.succeeded:
        print(f"woodlot: not one of the {result.planned} cells succeeded; the reasons are in "
              f"{result.folder}/tables/failures.md", file=sys.stderr)
        return ALL_FAILED
    return 0


def _speedup(args) -> int:
    from harness.commands.speedup import speedup_suite

    result, outputs = speedup_suite(args.suite, out=args.out, fresh=args.fresh,
                                    retry_failed=args.retry_failed,
                                    progress=False if args.quiet else None,
                                    command=_command_line(), wait=args.wait_for_folder)
    print(f"{result.planned} speedup points planned (workers "
          f"{', '.join(map(str, result.workers))}): {result.reused} already stored, "
          f"{result.ran} measured" + (f", {result.failed} failed" if result.failed else "") + ".")
    _outcome(outputs)
    print(f"Results in {outputs.folder}/ (tables/speedup.md, plots/speedup.png, cells.sqlite)")
    return 0


def _report(args) -> int:
    from harness.report.writer import write_report

    outputs = write_report(args.folder, out=args.out)
    _outcome(outputs)
    print(f"Wrote {len(outputs.files)} files in {outputs.folder}/ (report.html, tables/, "
          "plots/)")
    if outputs.status:
        print(f"woodlot: {outputs.status}", file=sys.stderr)
    return 0


def _agree(args) -> int:
    from harness.commands.agree import agree_folders
    from harness.report.agreement import render

    result = agree_folders(args.folder_a, args.folder_b, args.sd_limit)
    print(render(result))
    return result.exit_status


def _download(args) -> int:
    from harness.commands.download import download_suite

    download_suite(args.suite)
    print("done: a run of this suite now needs no network")
    return 0


def _add(args) -> int:
    from harness.commands.add import add_file

    added = add_file(args.suite, args.file, args.target, name=args.name, task=args.task,
                     delimiter=args.delimiter, decimal=args.decimal, drop=args.drop or (),
                     echo=print)
    print(f"\nadded dataset '{added.name}' to {added.suite} (dataset entry {added.position}):\n"
          + added.block.strip())
    return 0


def _choose(args) -> int:
    from harness.commands.choose import choose
    from harness.report.page import CAUTION
    from harness.report.recommendation import sections

    rec = choose(args.data, target=args.target, budget=args.budget, metric=args.metric,
                 jobs=args.jobs, out=args.out, task=args.task, suite=args.suite,
                 seed=args.seed, drop=tuple(args.drop or ()), keep=tuple(args.keep or ()),
                 progress=False if args.quiet else None)
    print("\n" + "\n".join(rec.sentences))
    for title, items in sections(rec):
        print(f"\n{title}:\n" + "\n".join(f"  - {x}" for x in items))
    print(f"\nBudget {rec.budget_seconds:.0f} s, used {rec.used_seconds:.0f} s. Written to "
          f"{rec.folder}/ (recommendation.md, recommendation.json, report.html, choose.toml).")
    print("\n" + CAUTION.replace("**", ""))
    return 0


def _resume_options(p: argparse.ArgumentParser, what: str) -> None:
    p.add_argument("--fresh", action="store_true",
                   help=f"forget the stored {what} and start over")
    p.add_argument("--wait-for-folder", action="store_true",
                   help="when another run is using the results folder, wait for it to finish "
                   "(default: stop, naming it)")
    p.add_argument("--retry-failed", action="store_true",
                   help=f"run again {what} stored as errors or timeouts")
    p.add_argument("--quiet", action="store_true", help="no progress bar")


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="woodlot", description="Compare ensemble methods for "
                                "tabular data: accuracy, certainty, cost and parallel speedup.")
    p.add_argument("--version", action="version", version=f"woodlot {WOODLOT_VERSION}")
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
    _resume_options(r, "cells")
    r.set_defaults(fn=_run)
    sp = sub.add_parser("speedup", help="measure only a suite's speedup points ([speedup]): "
                        "each strategy alone at each worker count")
    sp.add_argument("suite")
    sp.add_argument("--out", help="results folder (default: results/<suite name>)")
    _resume_options(sp, "speedup points")
    sp.set_defaults(fn=_speedup)
    rp = sub.add_parser("report", help="rewrite tables, plots and report.html of a results "
                        "folder from its store")
    rp.add_argument("folder")
    rp.add_argument("--out", metavar="DIR", help="write the report here instead of into the "
                    "results folder (which is then only read)")
    rp.set_defaults(fn=_report)
    ag = sub.add_parser("agree", help="check whether two results folders agree: scores that "
                        "moved beyond the fold-to-fold noise (exit 1 if any), timing ratios")
    ag.add_argument("folder_a", metavar="FOLDER_A", help="the reference results folder")
    ag.add_argument("folder_b", metavar="FOLDER_B", help="the results folder checked against it")
    ag.add_argument("--sd-limit", type=float, default=1.0, metavar="X",
                    help="a score differs when it moves by more than X fold-to-fold standard "
                    "deviations of its metric on its dataset (default: 1)")
    ag.set_defaults(fn=_agree)
    d = sub.add_parser("download", help="download a suite's OpenML datasets and tasks into the "
                       "cache so that runs work offline")
    d.add_argument("suite")
    d.set_defaults(fn=_download)
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
    ch = sub.add_parser("choose", help="which ensemble for one table: compare the catalogue "
                        "within a time budget and recommend one, with reasons")
    ch.add_argument("data", help="a CSV or Parquet file, or with --suite a dataset's name")
    ch.add_argument("--target", metavar="COLUMN", help="the column to predict (data files)")
    ch.add_argument("--suite", help="take DATA from this suite file's datasets")
    ch.add_argument("--budget", default="10m", help="time for the whole comparison, e.g. 90s, "
                    "10m (default 10m)")
    ch.add_argument("--metric", help="scikit-learn scorer name to decide on (default: accuracy "
                    "or neg_root_mean_squared_error)")
    ch.add_argument("--task", choices=("classification", "regression"),
                    help="default: inferred from the target column")
    ch.add_argument("--drop", action="append", metavar="COLUMN",
                    help="a column to leave out (repeat for several)")
    ch.add_argument("--keep", action="append", metavar="COLUMN",
                    help="a column the data check flags as predicting the target almost on its "
                    "own, known when predictions are made all the same (repeat for several)")
    ch.add_argument("--jobs", type=int, help="worker processes (default: all cores)")
    ch.add_argument("--seed", type=int, default=0, help="seed of the splits and estimators")
    ch.add_argument("--out", help="output folder (default: results/choose-<name>)")
    ch.add_argument("--quiet", action="store_true", help="no progress bar")
    ch.set_defaults(fn=_choose)
    return p


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    main_thread = threading.current_thread() is threading.main_thread()
    interrupts.forget()
    previous = signal.signal(signal.SIGTERM, _on_sigterm) if main_thread else None
    previous_int = signal.signal(signal.SIGINT, _on_sigint) if main_thread else None
    try:
        status = args.fn(args)
        interrupts.raise_pending()  # a signal whose exception a finalizer swallowed
        return status
    except UserError as exc:
        print(f"woodlot: {exc}", file=sys.stderr)
        return 2
    except Terminated:
        print("woodlot: stopped by SIGTERM; every finished cell is kept in the store, run the "
              "same command again to resume", file=sys.stderr)
        return 128 + signal.SIGTERM
    except KeyboardInterrupt:
        print("woodlot: interrupted; every finished cell is kept in the store, run the same "
              "command again to resume", file=sys.stderr)
        return 130
    except BrokenPipeError:  # the reader of our output went away (| head): nothing to say
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 141  # 128 + SIGPIPE, as a shell reports it
    finally:
        interrupts.forget()
        if main_thread:
            signal.signal(signal.SIGTERM, signal.SIG_DFL if previous is None else previous)
            signal.signal(signal.SIGINT, signal.default_int_handler if previous_int is None
                          else previous_int)


if __name__ == "__main__":
    sys.exit(main())
