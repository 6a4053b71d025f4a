"""Which ensemble for this one table, within a time budget, with reasons.

The comparison is an ordinary suite written into the output folder (``choose.toml``), so the
store, ``woodlot report`` and ``woodlot compare`` work on it and ``woodlot run choose.toml``
reproduces it. The steps:

1. check the data as ``woodlot add`` does;
2. pilot: one fold of every catalogue strategy, timed;
3. plan: the most repeats × folds (and, if need be, the fewest strategies dropped, dearest
   first) whose estimated time fits what is left of the budget;
4. run the plan (cells already run are reused), stopping at the budget;
5. when time is left, a quick one-versus-all-cores fit of the leading strategies;
6. the recommendation: best strategy, those tied with it (corrected resampled t-test), the
   cheapest among those to train and to predict, what the ensemble-size curves suggest and
   how much each gains from more cores.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd
from sklearn.metrics import get_scorer_names

from harness import load_results
from harness.datacheck import DataCheck, check_dataset, check_file
from harness.datasets import CLASSIFICATION
from harness.errors import UserError, closest
from harness.report.build import build_outputs, write_text
from harness.report.page import CAUTION
from harness.runner import run_suite
from harness.stats import per_dataset_summary
from harness.strategies import BOOSTING, SINGLE_TREE
from harness.suite import DEFAULT_METRICS, load_suite, parse_duration

# The catalogue as `choose` runs it: sizes a practitioner would start from.
CANDIDATES: tuple[tuple[str, str, str], ...] = (
    ("single-tree", "single-tree", "{ min_samples_leaf = 2 }"),
    ("bagged-trees", "bagged-trees", "{ n_estimators = 100 }"),
    ("random-forest", "random-forest", "{ n_estimators = 200 }"),
    ("extra-trees", "extra-trees", "{ n_estimators = 200 }"),
    ("gradient-boosting", "gradient-boosting", "{ n_estimators = 200 }"),
    ("hist-gradient-boosting", "hist-gradient-boosting",
     "{ max_iter = 200, early_stopping = false }"),
    ("adaboost", "adaboost", "{ n_estimators = 200 }"),
)
FOLDS = 5
MAX_REPEATS = 3
MIN_BUDGET = 10.0  # seconds: below this not even the pilot of a small table fits
REPORT_RESERVE = 8.0  # seconds kept for tables, plots and the report
SMALL_ROWS = 300  # fewer rows than this: the tests rarely separate anything (common practice)


@dataclass
class Recommendation:
    """What `choose` found; ``to_json()`` is what ``recommendation.json`` holds."""

    dataset: str
    metric: str
    best: str
    tied: list[str]
    cheapest_to_train: dict[str, Any]
    cheapest_to_predict: dict[str, Any]
    strategies: list[dict[str, Any]]
    curves: list[str]
    cores: list[str]
    left_out: list[str]
    warnings: list[str]
    plan: dict[str, Any]
    budget_seconds: float
    used_seconds: float = 0.0
    folder: str = ""
    sentences: list[str] = field(default_factory=list)

    def to_json(self) -> str:
        return json.dumps(asdict(self), indent=2, default=float)


# ------------------------------------------------------------------ the data

def _data(data: str, target: str | None, task: str | None, suite: str | None):
    """(Dataset, DataCheck, dataset entry as TOML lines) for a file or a suite's dataset."""
    if suite is not None:
        s = load_suite(suite)
        spec = next((d for d in s.datasets if d.name == data), None)
        if spec is None:
            names = [d.name for d in s.datasets]
            raise UserError(f"no dataset '{data}' in this suite{closest(data, names)} (it has "
                            f"{', '.join(names)})", file=suite, field="name")
        from harness.datasets import load_dataset

        ds = load_dataset(spec)
        options = dict(spec.options)
        for key in ("path",):
            if key in options:
                options[key] = str(spec.path(key).resolve())
        entry = {"name": spec.name, "from": spec.source, **options}
        return ds, check_dataset(ds, target=options.get("target", "target")), entry
    if target is None:
        raise UserError("--target COLUMN is needed with a data file", file=data, field="target")
    ds, check = check_file(data, target, task=task, folds=FOLDS)
    entry = {"name": ds.name if _plain(ds.name) else "data", "from": "file",
             "path": str(Path(data).resolve()), "target": target}
    if task is not None:
        entry["task"] = task
    if check.delimiter not in (None, ","):
        entry["delimiter"] = check.delimiter
    if check.decimal not in (None, "."):
        entry["decimal"] = check.decimal
    return ds, check, entry


def _plain(name: str) -> bool:
    import re

    return bool(re.fullmatch(r"[A-Za-z0-9][A-Za-z0-9_.\-]*", name))


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def suite_text(entry: dict, metrics: list[str], task: str, repeats: int, seed: int,
               strategies, scaling: dict | None = None) -> str:
    """The suite file `choose` writes and runs."""
    lines = ["# Written by 'woodlot choose'; 'woodlot run' on this file reproduces the comparison.",
             "", "[suite]", f'name = "choose-{entry["name"]}"',
             'description = "Which ensemble for this table (woodlot choose)."', "",
             "[protocol]", 'resampling = "cv"', f"folds = {FOLDS}", f"repeats = {repeats}",
             f"seed = {seed}", f"metrics = {{ {task} = {_toml_value(metrics)} }}",
             'cell_timeout = "none"', "", "[[dataset]]"]
    lines += [f"{k} = {_toml_value(v)}" for k, v in entry.items()]
    for name, method, params in strategies:
        lines += ["", "[[strategy]]", f'name = "{name}"', f'method = "{method}"',
                  f"params = {params}"]
    if scaling:
        lines += ["", "[scaling]"] + [f"{k} = {_toml_value(v)}" for k, v in scaling.items()]
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------ planning

def plan_budget(costs: dict[str, float], seconds_left: float, jobs: int,
                families: dict[str, str] | None = None,
                done_cells: int = 1) -> tuple[int, list[str], float]:
    """(repeats, strategies kept, estimated seconds) that fit ``seconds_left``.

    ``costs`` are seconds per cell from the pilot. The estimate is the cells still to run
    (``done_cells`` per strategy ran in the pilot) times their cost, spread over ``jobs``
    workers. Prefers more repeats; when one repeat of everything does not fit, drops
    strategies dearest first, but keeps the cheapest of each family (``families``) until
    only those are left, so that boosting is still compared with a forest. Returns repeats
    0 when not even the cheapest strategy fits.
    """
    families = families or {}
    kept = sorted(costs, key=costs.get)
    while kept:
        for repeats in range(MAX_REPEATS, 0, -1):
            cells = repeats * FOLDS - done_cells
            estimate = sum(costs[s] for s in kept) * cells / max(1, jobs) * 1.15
            if estimate <= seconds_left:
                return repeats, kept, estimate
        cheapest_of_family = {}
        for s in kept:  # kept is sorted cheapest first
            cheapest_of_family.setdefault(families.get(s, s), s)
        spare = [s for s in kept if s not in cheapest_of_family.values()]
        kept.remove(spare[-1] if spare else kept[-1])
    return 0, [], 0.0


# ------------------------------------------------------------------ the run

def choose(data: str, *, target: str | None = None, budget: str | float = "10m",
           metric: str | None = None, jobs: int | None = None, out: str | Path | None = None,
           task: str | None = None, suite: str | None = None, seed: int = 0,
           echo: Callable[[str], None] = print, progress: bool | None = None) -> Recommendation:
    """Compare the catalogue on one table within ``budget`` and recommend a strategy."""
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
    ds, check, entry = _data(data, target, task, suite)
    metrics = list(DEFAULT_METRICS[ds.task])
    if metric is not None:
        if metric not in get_scorer_names():
            raise UserError(f"'{metric}' is not a scikit-learn scorer name"
                            f"{closest(metric, get_scorer_names())}", file="--metric")
        metrics = [metric] + [m for m in metrics if m != metric]
    metric = metrics[0]
    for line in check.lines():
        echo(line)
    folder = Path(out) if out is not None else Path("results") / f"choose-{entry['name']}"
    folder.mkdir(parents=True, exist_ok=True)
    suite_path = folder / "choose.toml"

    def write_suite(repeats, strategies, scaling=None):
        write_text(suite_path, suite_text(entry, metrics, ds.task, repeats, seed, strategies,
                                          scaling))

    quiet = lambda s: None  # noqa: E731
    # 2. pilot: fold 0 of repeat 0 for every candidate; the slowest may not even finish it
    write_suite(MAX_REPEATS, CANDIDATES)
    echo(f"\npilot: one fold of each of {len(CANDIDATES)} strategies "
         f"(budget {_clock(budget_s)})")
    pilot_deadline = t0 + 0.6 * (budget_s - REPORT_RESERVE)
    run_suite(suite_path, out=folder, jobs=jobs, progress=progress, echo=quiet,
              write_outputs=False, select=lambda c: c.repeat == 0 and c.fold == 0,
              deadline=pilot_deadline, command="woodlot choose (pilot)")
    pilot = load_results(folder)
    pilot = pilot[(pilot.repeat == 0) & (pilot.fold == 0)]
    ok = pilot[pilot.status == "ok"]
    left_out = [f"{r.strategy}: one fold did not finish within the pilot's share of the budget"
                for r in pilot[pilot.status != "ok"].itertuples()]
    if ok.empty:
        raise UserError(f"a budget of {_clock(budget_s)} is too small for this table: not one "
                        "strategy finished a single fold; give a larger --budget",
                        file="--budget")
    costs = dict(zip(ok.strategy, ok.seconds.astype(float)))
    # 3. plan what fits
    seconds_left = deadline - time.perf_counter() - REPORT_RESERVE
    families = dict(zip(ok.strategy, ok.family))
    repeats, kept, estimate = plan_budget(costs, seconds_left * 0.8, jobs, families)
    if repeats == 0:  # only the pilot fits: keep what we have
        repeats, kept = 1, sorted(costs, key=costs.get)[:1]
        left_out.append("the rest of the folds: the budget is spent after the pilot")
    dropped = [s for s in costs if s not in kept]
    for s in dropped:
        left_out.append(f"{s}: its {repeats * FOLDS} folds (about {costs[s]:.1f} s each) "
                        "would not fit the budget")
    strategies = [c for c in CANDIDATES if c[0] in kept]
    write_suite(repeats, strategies)
    echo(f"plan: {repeats} × {FOLDS}-fold cross-validation of {len(kept)} strategies, about "
         f"{_clock(estimate)} on {jobs} worker(s)")
    result = run_suite(suite_path, out=folder, jobs=jobs, progress=progress, echo=quiet,
                       write_outputs=False, deadline=deadline - REPORT_RESERVE,
                       command="woodlot choose")
    if result.stopped:
        left_out.append("some folds: the run reached the end of the budget before finishing")
    frame = load_results(folder)
    # 4. recommendation
    rec = _recommend(frame, ds, check, metric, repeats, kept, left_out, budget_s, jobs)
    # 5. cores: a quick one-versus-all-cores check of the best and the cheapest
    if jobs > 1 or (os.cpu_count() or 1) > 1:
        _cores_check(rec, frame, suite_path, folder, entry, metrics, ds, repeats, strategies,
                     seed, costs, deadline, progress, write_suite)
    build_outputs(folder)
    rec.used_seconds = time.perf_counter() - t0
    rec.folder = str(folder)
    rec.sentences = sentences(rec)
    write_text(folder / "recommendation.json", rec.to_json())
    write_text(folder / "recommendation.md", markdown(rec))
    return rec


def _cores_check(rec, frame, suite_path, folder, entry, metrics, ds, repeats, strategies, seed,
                 costs, deadline, progress, write_suite):
    from harness.scaling import scale_suite

    cores = os.cpu_count() or 1
    names = list(dict.fromkeys([rec.best, rec.cheapest_to_train["strategy"]]))
    # one fit at 1 worker and one at all cores each, about (1 + 1/cores) × a fold's fit
    need = sum(costs.get(n, 0.0) * (1 + 1 / cores) * 1.3 for n in names) + 3.0
    left = deadline - time.perf_counter() - REPORT_RESERVE
    if need > left:
        rec.cores.append(f"not measured: a one-versus-{cores}-cores fit would need about "
                         f"{need:.0f} s, {max(left, 0):.0f} s of the budget were left")
        return
    write_suite(repeats, strategies, {"workers": [1, cores], "repeats": 1,
                                      "strategies": names})
    sweep, _, _ = scale_suite(suite_path, out=folder, progress=progress,
                              command="woodlot choose (cores)")
    from harness.store import Store

    with Store(folder, create=False) as store:
        points = store.scaling_frame()
    points = points[points.status == "ok"] if "status" in points else points
    for name in names:
        p = points[points.strategy == name]
        t1 = p[p.workers == 1].fit_seconds.median()
        tp = p[p.workers == cores].fit_seconds.median()
        if np.isfinite(t1) and np.isfinite(tp) and tp > 0:
            rec.cores.append(f"{name}: fit {t1:.2f} s on 1 core, {tp:.2f} s on {cores} cores "
                             f"(speedup {t1 / tp:.2f} of an ideal {cores})")


def _recommend(frame: pd.DataFrame, ds, check: DataCheck, metric: str, repeats: int, kept,
               left_out, budget_s: float, jobs: int) -> Recommendation:
    ok = frame[frame.status == "ok"]
    summary = per_dataset_summary(ok, metric)
    means = summary.strategies.set_index("strategy")
    best = str(means["mean"].idxmax())
    pairs = summary.pairs
    tied = []
    for r in pairs.itertuples():
        if best in (r.a, r.b) and r.tied:
            tied.append(r.b if r.a == best else r.a)
    costs = ok.groupby("strategy").agg(fit=("fit_seconds", "mean"),
                                       predict=("predict_seconds", "mean"),
                                       n_test=("n_test", "mean"),
                                       family=("family", "first"))
    costs["predict_ms_per_1000"] = costs.predict / costs.n_test * 1e6
    group = [best] + tied
    train = costs.loc[group, "fit"].idxmin()
    pred = costs.loc[group, "predict_ms_per_1000"].idxmin()
    rows = []
    for name, r in means.iterrows():
        p = pairs[((pairs.a == best) & (pairs.b == name)) | ((pairs.b == best) & (pairs.a == name))]
        rows.append({"strategy": name, "family": costs.loc[name, "family"],
                     "mean": float(r["mean"]), "low": float(r["low"]), "high": float(r["high"]),
                     "cells": int(r["cells"]), "p_vs_best": None if p.empty else float(p.p.iloc[0]),
                     "tied_with_best": name == best or name in tied,
                     "fit_seconds": float(costs.loc[name, "fit"]),
                     "predict_ms_per_1000_rows": float(costs.loc[name, "predict_ms_per_1000"])})
    rows.sort(key=lambda d: -d["mean"])
    warnings = [f.message for f in check.warnings]
    n_test = float(ok.n_test.mean())
    if ds.n_rows < SMALL_ROWS or n_test < 60:
        warnings.append(f"the table is small ({ds.n_rows} rows, about {n_test:.0f} test rows "
                        "per fold): the tests can rarely separate strategies on so little data, "
                        "so 'tied' here often means 'not enough data to tell'")
    if len(tied) + 1 == len(means) and len(means) > 2:
        warnings.append("every strategy is statistically tied with the best: on this table the "
                        "choice can be made on cost")
    return Recommendation(
        dataset=ds.name, metric=metric, best=best, tied=sorted(tied, key=lambda s: -means.loc[s, "mean"]),
        cheapest_to_train={"strategy": train, "fit_seconds": float(costs.loc[train, "fit"])},
        cheapest_to_predict={"strategy": pred,
                             "predict_ms_per_1000_rows": float(costs.loc[pred, "predict_ms_per_1000"])},
        strategies=rows, curves=curve_notes(ok, metric), cores=[], left_out=list(left_out),
        warnings=warnings, plan={"folds": FOLDS, "repeats": repeats, "strategies": list(kept),
                                 "jobs": jobs, "rows": ds.n_rows, "task": ds.task},
        budget_seconds=budget_s)


def curve_notes(ok: pd.DataFrame, metric: str) -> list[str]:
    """What the ensemble-size curves say, one sentence per ensemble strategy."""
    notes = []
    for name, cells in ok[ok.curve.notna()].groupby("strategy"):
        pts = pd.DataFrame([p for c in cells.curve for p in c], columns=["n", "score"])
        mean = pts.groupby("n")["score"].mean()
        if len(mean) < 3:
            continue
        final = cells[metric].to_numpy(float)
        noise = float(np.std(final, ddof=1) / np.sqrt(len(final))) if len(final) > 1 else 0.0
        family = cells.family.iloc[0]
        sizes = mean.index.to_numpy()
        last_gain = float(mean.iloc[-1] - mean.iloc[-2])
        if family == BOOSTING:
            if last_gain > max(noise, 1e-9):
                notes.append(f"{name} was still improving at its last stage ({metric} "
                             f"{mean.iloc[-2]:.4g} at {sizes[-2]} stages, {mean.iloc[-1]:.4g} at "
                             f"{sizes[-1]}): more stages, or a larger learning rate, may help")
            else:
                peak = int(sizes[int(np.argmax(mean.to_numpy()))])
                notes.append(f"{name} had levelled off by {peak} stages (best {metric} "
                             f"{mean.max():.4g}); more stages would not help")
        elif family != SINGLE_TREE:
            enough = int(sizes[np.argmax(mean.to_numpy() >= mean.iloc[-1] - max(noise, 1e-9))])
            if enough < sizes[-1]:
                notes.append(f"{name} was flat after {enough} members (within the fold-to-fold "
                             f"noise of its {sizes[-1]}-member score): about {enough} would do, "
                             f"cutting fit and prediction time roughly "
                             f"{sizes[-1] / max(enough, 1):.0f}-fold")
            else:
                notes.append(f"{name} was still gaining at {sizes[-1]} members: more may help")
    return notes


# ------------------------------------------------------------------ words

def sentences(rec: Recommendation) -> list[str]:
    by = {r["strategy"]: r for r in rec.strategies}
    b = by[rec.best]
    out = [f"Best on {rec.metric}: {rec.best} ({b['mean']:.4g}, 95% interval {b['low']:.4g} to "
           f"{b['high']:.4g}, over {b['cells']} folds)."]
    if rec.tied:
        out.append("Statistically tied with it (corrected resampled t-test, α = 0.05): "
                   + ", ".join(f"{s} ({by[s]['mean']:.4g}, p = {by[s]['p_vs_best']:.2f})"
                               for s in rec.tied) + ".")
    else:
        out.append("No other strategy is statistically tied with it (corrected resampled t-test, "
                   "α = 0.05).")
    t, p = rec.cheapest_to_train, rec.cheapest_to_predict
    if t["strategy"] == rec.best:
        out.append(f"{rec.best} is also the cheapest of these to train ({t['fit_seconds']:.3g} s "
                   "per fit).")
    else:
        out.append(f"Cheapest to train among these: {t['strategy']} ({t['fit_seconds']:.3g} s "
                   f"per fit, against {b['fit_seconds']:.3g} s for {rec.best}).")
    if p["strategy"] == rec.best:
        out.append(f"{rec.best} is also the cheapest of these to predict "
                   f"({p['predict_ms_per_1000_rows']:.3g} ms per 1,000 rows).")
    else:
        out.append(f"Cheapest to predict among these: {p['strategy']} "
                   f"({p['predict_ms_per_1000_rows']:.3g} ms per 1,000 rows, against "
                   f"{b['predict_ms_per_1000_rows']:.3g} ms for {rec.best}).")
    if t["strategy"] != rec.best and rec.tied:
        out.append(f"Recommendation: {t['strategy']} — as accurate as the best within what the "
                   "tests can tell, and cheaper to train.")
    else:
        out.append(f"Recommendation: {rec.best}.")
    return out


def markdown(rec: Recommendation) -> str:
    lines = [f"# Which ensemble for '{rec.dataset}'", ""]
    lines += [f"- {s}" for s in rec.sentences] + [""]
    lines += ["## Strategies", "", "| strategy | family | mean | 95% interval | p vs best | tied "
              "with best | fit s | predict ms / 1,000 rows |", "|---|---|---:|---|---:|---|---:|---:|"]
    for r in rec.strategies:
        pv = "" if r["p_vs_best"] is None else f"{r['p_vs_best']:.3f}"
        lines.append(f"| {r['strategy']} | {r['family']} | {r['mean']:.4g} | {r['low']:.4g} to "
                     f"{r['high']:.4g} | {pv} | {'yes' if r['tied_with_best'] else 'no'} | "
                     f"{r['fit_seconds']:.3g} | {r['predict_ms_per_1000_rows']:.3g} |")
    for title, items in (("Ensemble size", rec.curves), ("More cores", rec.cores),
                         ("Left out", rec.left_out), ("Warnings", rec.warnings)):
        if items:
            lines += ["", f"## {title}", ""] + [f"- {x}" for x in items]
    plan = rec.plan
    lines += ["", "## How this was measured", "",
              f"{plan['repeats']} × {plan['folds']}-fold cross-validation of "
              f"{len(plan['strategies'])} strategies on {plan['rows']} rows ({plan['task']}), "
              f"{plan['jobs']} worker(s); budget {_clock(rec.budget_seconds)}, used "
              f"{_clock(rec.used_seconds)}. Full report: report.html; suite: choose.toml.", "",
              CAUTION, ""]
    return "\n".join(lines)


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    return f"{seconds // 60}m{seconds % 60:02d}s" if seconds >= 60 else f"{seconds}s"
