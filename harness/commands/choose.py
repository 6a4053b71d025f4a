"""``woodlot choose``: which ensemble for this one table, within a time budget, with reasons.

The comparison is an ordinary suite written into the output folder (``choose.toml``), so the
store, ``woodlot report`` and ``woodlot agree`` work on it and ``woodlot run choose.toml``
reproduces it. The steps:

1. check the data as ``woodlot add`` does;
2. pilot: one fold of every catalogue strategy, timed;
3. plan: the most repeats × folds (and, if need be, the fewest strategies dropped, dearest
   first) whose estimated time fits what is left of the budget;
4. run the plan (cells already run are reused), stopping at the budget;
5. when the pilot's timings say the rest of the budget allows it, the leading strategies
   (the best and those near it, at most `TUNE_LEADERS`) are tuned too, as strategies
   ``<name>-tuned`` with their method's default space, `TUNE_TRIALS` trials per outer fold
   and nested resampling (`harness.search`); the recommendation is made again over all
   strategies, counting each tuned strategy's whole search in its fit time, and says
   whether tuning changed it;
6. when time is left, a quick one-versus-all-cores fit of the leading strategies;
7. the recommendation, from the verdict (`harness.analysis.recommendation`).
"""

from __future__ import annotations

import os
import time
from dataclasses import replace
from pathlib import Path
from typing import Any, Callable

import tomlkit
from sklearn.metrics import get_scorer_names

from harness.analysis.recommendation import Recommendation, plan_budget, recommend
from harness.analysis.speedup import BUSY_CORES
from harness.analysis.verdict import verdict
from harness.commands.run import run_suite
from harness.commands.speedup import speedup_suite
from harness.datacheck import ALONE, LEAK, DataCheck, check_dataset, check_file
from harness.datasets import Dataset, load_dataset
from harness.errors import UserError, closest
from harness.files import writable_folder, write_text
from harness.folder_lock import holding
from harness.names import is_name
from harness.report import recommendation as words
from harness.report.writer import write_report
from harness.store import Store
from harness.scorers import metric_task
from harness.suite import DEFAULT_METRICS, KFOLD, check_seed, load_suite, parse_duration
from harness.work_units import ERROR, OK

# The catalogue as `choose` runs it: sizes a practitioner would start from.
CANDIDATES: tuple[tuple[str, str, dict[str, Any]], ...] = (
    ("single-tree", "single-tree", {"min_samples_leaf": 2}),
    ("bagged-trees", "bagged-trees", {"n_estimators": 100}),
    ("random-forest", "random-forest", {"n_estimators": 200}),
    ("extra-trees", "extra-trees", {"n_estimators": 200}),
    ("gradient-boosting", "gradient-boosting", {"n_estimators": 200}),
    ("hist-gradient-boosting", "hist-gradient-boosting",
     {"max_iter": 200, "early_stopping": False}),
    ("adaboost", "adaboost", {"n_estimators": 200}),
)
FOLDS = 5
MAX_REPEATS = 3
TUNE_LEADERS = 3   # strategies tuned at most: the best and those near it
TUNE_TRIALS = 8    # configurations per outer fold (the first is the strategy as run)
INNER_FOLDS = 3
MIN_BUDGET = 10.0  # seconds: below this not even the pilot of a small table fits
REPORT_RESERVE = 8.0  # seconds kept for tables, plots and the report
SUITE_NAME = "choose.toml"


# ------------------------------------------------------------------ the data

def _data(data: str, target: str | None, task: str | None, suite: str | None,
          drop: tuple[str, ...],
          folder_of: Callable[[str], Path]) -> tuple[Dataset, DataCheck, dict, Path]:
    """(dataset, its check, the dataset entry for ``choose.toml``, the output folder) for a
    file or a suite's dataset, without the ``drop`` columns. Paths in the entry are relative
    to the output folder, so the folder can be moved together with the data."""
    if suite is not None:
        s = load_suite(suite)
        spec = next((d for d in s.datasets if d.name == data), None)
        if spec is None:
            names = [d.name for d in s.datasets]
            raise UserError(f"no dataset '{data}' in this suite{closest(data, names)} (it has "
                            f"{', '.join(names)})", file=suite, field="name")
        options = dict(spec.options)
        if drop:
            options["drop"] = list(dict.fromkeys([*options.get("drop", []), *drop]))
            spec = replace(spec, options=options)
        ds = load_dataset(spec)
        folder = folder_of(spec.name)
        if "path" in options:
            options["path"] = _relative(spec.path("path"), folder)
        entry = {"name": spec.name, "from": spec.source, **options}
        return ds, check_dataset(ds, target=options.get("target", "target")), entry, folder
    if target is None:
        raise UserError("--target COLUMN is needed with a data file", file=data, field="target")
    ds, check = check_file(data, target, task=task, drop=drop, folds=FOLDS)
    name = ds.name if is_name(ds.name) else "data"
    folder = folder_of(name)
    entry = {"name": name, "from": "file", "path": _relative(Path(data), folder),
             "target": target}
    if task is not None:
        entry["task"] = task
    if drop:
        entry["drop"] = list(drop)
    if check.delimiter not in (None, ","):
        entry["delimiter"] = check.delimiter
    if check.decimal not in (None, "."):
        entry["decimal"] = check.decimal
    return ds, check, entry, folder


def _relative(path: Path, folder: Path) -> str:
    try:
        return Path(os.path.relpath(path.resolve(), folder.resolve())).as_posix()
    except ValueError:  # another drive (Windows): keep it absolute
        return path.resolve().as_posix()


def suite_text(entry: dict, metrics: list[str], task: str, repeats: int, seed: int,
               strategies, speedup: dict | None = None) -> str:
    """The suite file `choose` writes and runs; ``strategies`` are (name, method, params) or
    (name, method, params, extra keys such as ``tune``)."""
    doc = tomlkit.document()
    doc.add(tomlkit.comment("Written by 'woodlot choose'; 'woodlot run' on this file "
                            "reproduces the comparison."))
    doc.add("suite", {"name": f"choose-{entry['name']}",
                      "description": "Which ensemble for this table (woodlot choose)."})
    metrics_table = tomlkit.inline_table()
    metrics_table[task] = list(metrics)
    doc.add("protocol", {"splits": KFOLD, "folds": FOLDS, "repeats": repeats, "seed": seed,
                         "metrics": metrics_table, "cell_timeout": "none"})
    datasets = tomlkit.aot()
    datasets.append(tomlkit.item(entry))
    doc.add("dataset", datasets)
    aot = tomlkit.aot()
    for name, method, params, *extra in strategies:
        inline = tomlkit.inline_table()
        inline.update(params)
        aot.append(tomlkit.item({"name": name, "method": method, "params": inline,
                                 **(extra[0] if extra else {})}))
    doc.add("strategy", aot)
    if speedup:
        doc.add("speedup", speedup)
    return tomlkit.dumps(doc)


# ------------------------------------------------------------------ the run

def _refuse_leaks(check: DataCheck, keep: tuple[str, ...], data: str) -> None:
    """Stop before anything runs when a column looks like leakage and the user has not said
    to keep it: a recommendation trained on it would not hold for new rows."""
    leaks = [f for f in check.warnings if f.kind in (LEAK, ALONE) and f.subject not in keep]
    if leaks:
        names = [f.subject for f in leaks]
        raise UserError(f"{', '.join(repr(n) for n in names)} predict"
                        f"{'s' if len(names) == 1 else ''} the target almost on "
                        f"{'its' if len(names) == 1 else 'their'} own (see the warnings above); "
                        "a recommendation trained on leaked information would not hold for new "
                        "rows: leave it out with " + " ".join(f"--drop {n}" for n in names)
                        + ", or, if it is truly known when predictions are made, say so with "
                        + " ".join(f"--keep {n}" for n in names), file=data, field=names[0])


def choose(data: str, *, target: str | None = None, budget: str | float = "10m",
           metric: str | None = None, jobs: int | None = None, out: str | Path | None = None,
           task: str | None = None, suite: str | None = None, seed: int = 0,
           drop: tuple[str, ...] = (), keep: tuple[str, ...] = (),
           echo: Callable[[str], None] = print, progress: bool | None = None) -> Recommendation:
    """Compare the catalogue on one table within ``budget`` and recommend a strategy.

    ``drop``: columns to leave out. ``keep``: columns the data check flags as predicting the
    target almost on their own that are nevertheless known at prediction time (without it,
    such a column stops `choose` with exit status 2 before anything runs)."""
    t0 = time.perf_counter()
    budget_s = parse_duration(budget, "--budget", "budget") if not isinstance(
        budget, (int, float)) else float(budget)
    if budget_s is None:
        raise UserError("--budget needs a time limit such as 10m")
    if budget_s < MIN_BUDGET:
        raise UserError(f"a budget of {budget_s:g} s is too small: even one fold of each "
                        f"strategy needs more; give at least {MIN_BUDGET:g}s (a few minutes "
                        "for tables of thousands of rows)", file="--budget")
    deadline = t0 + budget_s
    jobs = jobs or os.cpu_count() or 1
    check_seed(seed, "--seed", None)
    ds, check, entry, folder = _data(
        data, target, task, suite, tuple(drop),
        lambda name: Path(out) if out is not None else Path("results") / f"choose-{name}")
    metrics = list(DEFAULT_METRICS[ds.task])
    if metric is not None:
        if metric not in get_scorer_names():
            raise UserError(f"'{metric}' is not a scikit-learn scorer name"
                            f"{closest(metric, get_scorer_names())}", file="--metric")
        if metric_task(metric) != ds.task:
            raise UserError(f"'{metric}' is a {metric_task(metric)} metric; this table's task is "
                            f"{ds.task}", file="--metric")
        metrics = [metric] + [m for m in metrics if m != metric]
    writable_folder(folder)
    for line in check.lines(lambda c: f"--drop {c}"):
        echo(line)
    unknown = [k for k in keep if k not in ds.X.columns]
    if unknown:
        raise UserError(f"--keep names a column the table does not have: {unknown[0]}",
                        file=data, field=unknown[0])
    _refuse_leaks(check, tuple(keep), data)
    with holding(folder, echo=echo):
        return _choose(ds, check, entry, folder, metrics, jobs, seed, budget_s, t0, deadline,
                       progress, echo)


def _choose(ds: Dataset, check: DataCheck, entry: dict, folder: Path, metrics: list[str],
            jobs: int, seed: int, budget_s: float, t0: float, deadline: float,
            progress: bool | None, echo: Callable[[str], None]) -> Recommendation:
    suite_path = folder / SUITE_NAME

    def write_suite(repeats, strategies, speedup=None):
        write_text(suite_path, suite_text(entry, metrics, ds.task, repeats, seed, strategies,
                                          speedup))

    quiet = lambda s: None  # noqa: E731
    # 2. pilot: fold 0 of repeat 0 for every candidate; the slowest may not even finish it
    write_suite(MAX_REPEATS, CANDIDATES)
    echo(f"\npilot: one fold of each of {len(CANDIDATES)} strategies "
         f"(budget {words.clock(budget_s)})")
    pilot_deadline = t0 + 0.6 * (budget_s - REPORT_RESERVE)
    run_suite(suite_path, out=folder, jobs=jobs, progress=progress, echo=quiet,
              write_outputs=False, select=lambda c: c.repeat == 0 and c.fold == 0,
              deadline=pilot_deadline, command="woodlot choose (pilot)")
    pilot = _frame(folder)
    pilot = pilot[(pilot.repeat == 0) & (pilot.fold == 0)]
    ok = pilot[pilot.status == OK]
    left_out = [f"{r.strategy}: one fold did not finish within the pilot's share of the budget"
                for r in pilot[pilot.status != OK].itertuples()]
    if ok.empty:
        errors = pilot[pilot.status == ERROR]
        if len(errors) == len(pilot):
            raise UserError(f"not one strategy could fit this table (first error: "
                            f"{errors.message.iloc[0]})", file=ds.source)
        raise UserError(f"a budget of {words.clock(budget_s)} is too small for this table: not "
                        "one strategy finished a single fold; give a larger --budget",
                        file="--budget")
    costs = dict(zip(ok.strategy, ok.seconds.astype(float)))
    # 3. plan what fits
    seconds_left = deadline - time.perf_counter() - REPORT_RESERVE
    families = dict(zip(ok.strategy, ok.family))
    # Room for tuning the leaders (guessed from the pilot's scores) is kept when the whole
    # comparison still fits with it; otherwise the comparison takes the budget untuned.
    guess = ok.sort_values(metrics[0], ascending=False)["strategy"].tolist()[:TUNE_LEADERS]
    repeats = 0
    for r in range(MAX_REPEATS, 0, -1):
        room = seconds_left * 0.8 - tuning_seconds(costs, guess, r, jobs)
        repeats, kept, estimate = plan_budget(costs, room, jobs, FOLDS, r, families)
        if repeats == r and len(kept) == len(costs):
            break
        repeats = 0
    if repeats == 0:
        repeats, kept, estimate = plan_budget(costs, seconds_left * 0.8, jobs, FOLDS,
                                              MAX_REPEATS, families)
    if repeats == 0:  # only the pilot fits: keep what we have
        repeats, kept = 1, sorted(costs, key=costs.get)[:1]
        left_out.append("the rest of the folds: the budget is spent after the pilot")
    for s in costs:
        if s not in kept:
            left_out.append(f"{s}: its {repeats * FOLDS} folds (about {costs[s]:.1f} s each) "
                            "would not fit the budget")
    strategies = [c for c in CANDIDATES if c[0] in kept]
    write_suite(repeats, strategies)
    echo(f"plan: {repeats} × {FOLDS}-fold cross-validation of {len(kept)} strategies, about "
         f"{words.clock(estimate)} on {jobs} worker(s)")
    result = run_suite(suite_path, out=folder, jobs=jobs, progress=progress, echo=quiet,
                       write_outputs=False, deadline=deadline - REPORT_RESERVE,
                       command="woodlot choose")
    if result.stopped:
        left_out.append("some folds: the run reached the end of the budget before finishing")
    frame = _frame(folder)
    # 4. the recommendation, from the verdict
    plan = {"folds": FOLDS, "repeats": repeats, "strategies": list(kept), "jobs": jobs,
            "rows": ds.n_rows, "task": ds.task}
    v = verdict(frame, {ds.task: metrics}, load_suite(suite_path).equivalence)
    rec = recommend(frame, v, ds.name, ds.n_rows, plan=plan, budget_seconds=budget_s)
    # 5. tune the leaders when the budget allows
    tuning = _tune_leaders(rec, costs, repeats, jobs, deadline, strategies,
                           lambda st: write_suite(repeats, st), suite_path, folder, progress)
    if tuning["ran"]:
        frame = _frame(folder)
        v = verdict(frame, {ds.task: metrics}, load_suite(suite_path).equivalence)
        untuned = rec
        rec = recommend(frame, v, ds.name, ds.n_rows, plan=plan, budget_seconds=budget_s)
        rec.plan["strategies"] = list(kept) + tuning["names"]
        before, after = untuned.pick or "none", rec.pick or "none"
        tuning["sentences"].append(
            f"Tuning changed the recommendation: {before} untuned, {after} with the tuned "
            "strategies compared too (their fit time counts the whole search)."
            if after != before else
            f"Tuning did not change the recommendation ({after}); tuned strategies' fit "
            "time counts the whole search.")
    rec.tuning = tuning["sentences"]
    strategies = tuning["strategies"]
    rec.left_out, rec.warnings = left_out, [f.message for f in check.warnings]
    # 6. cores: a quick one-versus-all-cores check of the best and the pick
    if (os.cpu_count() or 1) > 1:
        rec.cores = _cores(rec, costs, deadline, suite_path, folder, progress,
                           lambda speedup: write_suite(repeats, strategies, speedup))
    rec.folder = str(folder)
    rec.sentences = words.sentences(rec)
    write_report(folder, rec.sentences, words.sections(rec))
    rec.used_seconds = time.perf_counter() - t0
    write_text(folder / "recommendation.json", rec.to_json())
    write_text(folder / "recommendation.md", words.markdown(rec))
    return rec


def tuning_seconds(costs: dict[str, float], leaders: list[str], repeats: int,
                   jobs: int) -> float:
    """Estimated seconds to tune ``leaders`` over ``repeats`` × `FOLDS` outer folds (see
    `_tune_leaders`)."""
    refits = TUNE_TRIALS.bit_length() + 1
    per_fold = sum(costs[s] * (TUNE_TRIALS * INNER_FOLDS * 2 / 3 + refits) for s in leaders)
    return per_fold * repeats * FOLDS / max(1, jobs) * 1.2


def _tune_leaders(rec: Recommendation, costs: dict[str, float], repeats: int, jobs: int,
                  deadline: float, strategies: list, write_suite, suite_path: Path,
                  folder: Path, progress: bool | None) -> dict[str, Any]:
    """Tune the best strategy and those practically equivalent to it when the rest of the
    budget allows.

    Estimated cost per strategy and outer fold: `TUNE_TRIALS` trials of `INNER_FOLDS` fits
    on two thirds of the training rows (about `INNER_FOLDS` × 2/3 of a cell each, by the
    pilot's timing, which includes prediction), plus up to log2(`TUNE_TRIALS`) + 1 refits;
    times repeats × folds, over ``jobs`` workers, with a 20% margin: a tuned configuration
    may be dearer than the default (more stages, deeper trees); no unit starts after the
    budget in any case."""
    leaders = [rec.best] + [s for s in rec.near if s != rec.best]
    leaders = [s for s in leaders if s in costs][:TUNE_LEADERS]
    need = tuning_seconds(costs, leaders, repeats, jobs)
    left = deadline - time.perf_counter() - REPORT_RESERVE
    out = {"ran": False, "names": [], "sentences": [], "strategies": strategies}
    if not leaders:
        return out
    if need > left:
        out["sentences"].append(
            f"Not tuned: tuning {', '.join(leaders)} ({TUNE_TRIALS} configurations per fold, "
            f"nested) would need about {words.clock(need)}; {words.clock(max(left, 0))} of the "
            "budget were left. A larger --budget compares them tuned too.")
        return out
    by_name = {c[0]: c for c in strategies}
    tuned = [(f"{s}-tuned", by_name[s][1], by_name[s][2],
              {"tune": True, "tune_budget": TUNE_TRIALS}) for s in leaders]
    out["strategies"] = strategies + tuned
    write_suite(out["strategies"])
    run_suite(suite_path, out=folder, jobs=max(1, jobs), progress=progress, echo=lambda s: None,
              write_outputs=False, deadline=deadline - REPORT_RESERVE,
              command="woodlot choose (tuning)")
    out["ran"], out["names"] = True, [t[0] for t in tuned]
    out["sentences"].append(
        f"Tuned {', '.join(leaders)} with {TUNE_TRIALS} configurations per fold from each "
        f"method's default space (nested: {INNER_FOLDS} inner folds of each training part); "
        "see report.html, section What tuning buys.")
    return out


def _frame(folder: Path):
    with Store(folder, read_only=True) as store:
        return store.cells_frame()


def _cores(rec: Recommendation, costs: dict[str, float], deadline: float, suite_path: Path,
           folder: Path, progress: bool | None,
           write_suite: Callable[[dict], None]) -> list[dict[str, Any]]:
    """One fit at 1 worker and one at all cores of the best and the pick, when the budget
    has room for them (about (1 + 1/cores) × a fold's fit each)."""
    cores = os.cpu_count() or 1
    # a tuned strategy is timed as configured (its search's choice differs from fold to fold)
    names = list(dict.fromkeys(n.removesuffix("-tuned") for n in (rec.best, rec.pick) if n))
    need = sum(costs.get(n, 0.0) * (1 + 1 / cores) * 1.3 for n in names) + 3.0
    left = deadline - time.perf_counter() - REPORT_RESERVE
    if need > left:
        return [{"skipped": f"not measured: a one-versus-{cores}-cores fit would need about "
                            f"{need:.0f} s, {max(left, 0):.0f} s of the budget were left"}]
    write_suite({"workers": [1, cores], "repeats": 1, "strategies": names})
    speedup_suite(suite_path, out=folder, progress=progress, echo=lambda s: None,
                  command="woodlot choose (cores)", write_outputs=False)
    with Store(folder, read_only=True) as store:
        points = store.speedup_frame()
    points = points[points.status == OK] if "status" in points else points
    out = []
    for name in names:
        p = points[points.strategy == name]
        t1 = p[p.workers == 1].fit_seconds.median()
        tp = p[p.workers == cores].fit_seconds.median()
        other = float(p.other_load.max()) if len(p) else 0.0
        if t1 > 0 and tp > 0:
            out.append({"strategy": name, "t1": float(t1), "tp": float(tp), "cores": cores,
                        "other_load": other, "busy": bool(other > BUSY_CORES)})
    return out
