"""Every table of the report, each built once as a `Table` (raw numbers for the CSV, a display
frame for Markdown and HTML) from the results frame, the verdict or the speedup summary."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.analysis.results import (metric_columns, ok_cells, predict_ms_per_1000_rows)
from harness.analysis.speedup import (BUSY_CORES, COVERAGE_BY_REPEATS, EXTRAPOLATE_TO,
                                      FULL_COVERAGE_REPEATS, LEVEL)
from harness.analysis.verdict import EQUIVALENT, Verdict
from harness.report.render import (Table, as_read, interval, lower_is_better,
                                   metric_heading, metric_label, number, p_text)
from harness.report.words import rank_places, region_text
from harness.work_units import OK

COST_LABELS = {"fit": "mean fit time (s)", "predict": "prediction time per 1,000 rows (ms)"}


def _read_interval(metric: str, mean, low, high, digits: int = 4) -> str:
    """A scorer interval as people read the metric (errors positive, ends swapped)."""
    if lower_is_better(metric):
        mean, low, high = -mean, (-high if pd.notna(high) else high), \
            (-low if pd.notna(low) else low)
    return interval(mean, low, high, digits)


def _level(v: Verdict) -> str:
    return f"{1 - v.alpha:.0%}"


# ------------------------------------------------------------------ from the results frame

def scores(frame: pd.DataFrame) -> Table:
    """Per dataset × strategy × metric: mean, sd and number of successful cells."""
    cols = ["dataset", "strategy", "family", "metric", "mean", "sd", "cells"]
    ok = ok_cells(frame)
    metrics = metric_columns(frame)
    data = pd.DataFrame(columns=cols)
    if not ok.empty and metrics:
        g = ok.groupby(["dataset", "strategy"], sort=False)
        values = g[metrics]
        n = len(g)
        keys = values.mean().index
        data = pd.DataFrame({
            "dataset": np.repeat(keys.get_level_values(0), len(metrics)),
            "strategy": np.repeat(keys.get_level_values(1), len(metrics)),
            "family": np.repeat(g["family"].first().to_numpy(), len(metrics)),
            "metric": np.tile(metrics, n),
            "mean": values.mean().to_numpy(float).ravel(),
            "sd": values.std(ddof=1).to_numpy(float).ravel(),
            "cells": values.count().to_numpy().ravel()})
        data = data[data["cells"] > 0].reset_index(drop=True)
    shown: dict[tuple, dict] = {}
    for r in data.itertuples(index=False):
        row = shown.setdefault((r.dataset, r.strategy),
                               {"dataset": r.dataset, "strategy": r.strategy})
        mean = as_read(r.metric, r.mean)
        row[metric_heading(r.metric)] = (f"{number(mean)} ± {number(r.sd)}"
                                         if pd.notna(r.sd) else number(mean))
    display = pd.DataFrame(list(shown.values())).fillna("") if shown else pd.DataFrame()
    return Table("scores", "Scores per dataset (mean ± sd over repeats × folds)", data, display,
                 group="dataset" if shown else None)


def costs(frame: pd.DataFrame) -> Table:
    """Per dataset × strategy: mean fit wall and CPU seconds, prediction time per 1,000 rows,
    memory added by the fit and pickled model size."""
    ok = ok_cells(frame).copy()
    cols = ["dataset", "strategy", "family", "fit_seconds", "fit_cpu_seconds", "refit_seconds",
            "predict_ms_per_1000_rows", "peak_memory_mib", "model_mib", "cells"]
    if ok.empty:
        return Table("costs", "Training and prediction cost", pd.DataFrame(columns=cols),
                     pd.DataFrame())
    ok["predict_ms_per_1000_rows"] = predict_ms_per_1000_rows(ok["predict_seconds"],
                                                              ok["n_test"])
    if "refit_seconds" not in ok:
        ok["refit_seconds"] = np.nan
    ok["peak_memory_mib"] = ok["peak_memory_bytes"].astype(float) / 2**20
    ok["model_mib"] = ok["model_bytes"].astype(float) / 2**20
    data = ok.groupby(["dataset", "strategy"], sort=False).agg(
        family=("family", "first"), fit_seconds=("fit_seconds", "mean"),
        fit_cpu_seconds=("fit_cpu_seconds", "mean"), refit_seconds=("refit_seconds", "mean"),
        predict_ms_per_1000_rows=("predict_ms_per_1000_rows", "mean"),
        peak_memory_mib=("peak_memory_mib", "mean"), model_mib=("model_mib", "mean"),
        cells=("key", "size")).reset_index()[cols]
    tuned = data["refit_seconds"].notna().any()
    display = (data if tuned else data.drop(columns=["refit_seconds"])).rename(columns={
        "fit_seconds": "fit s", "fit_cpu_seconds": "fit CPU s",
        "refit_seconds": "of which final refit s",
        "predict_ms_per_1000_rows": "predict ms / 1,000 rows",
        "peak_memory_mib": "memory added by fit MiB", "model_mib": "model MiB"})
    return Table("costs", "Training and prediction cost (means over folds)", data, display,
                 group="dataset",
                 intro="Times measured with cells running side by side, one thread each. "
                 "Memory added by fit: the peak resident memory of the worker during the fit "
                 "minus its resident memory before it (0 when the fit found enough memory the "
                 "worker already held; empty where the system cannot reset the peak). Model: "
                 "the pickled size of the fitted pipeline."
                 + (" A tuned strategy's fit time is its whole search (every trial on the "
                    "inner folds) plus the refit of the chosen configuration; the refit "
                    "alone, what production training costs, is shown beside it."
                    if tuned else ""))


def failures(frame: pd.DataFrame) -> Table:
    bad = frame[frame["status"] != OK]
    data = bad[["dataset", "strategy", "repeat", "fold", "status", "message"]] \
        .reset_index(drop=True)
    return Table("failures", "Cells that failed or timed out", data, data)


# ------------------------------------------------------------------ from the verdict

def _prob(p) -> str:
    return "" if p is None or pd.isna(p) else f"{p:.2f}"


def verdict_text(r) -> str:
    """``a better``, ``practically equivalent`` or ``undecided``."""
    return f"{r['better']} better" if r["better"] else r["verdict"]


def intervals(v: Verdict) -> Table:
    """Per dataset: each strategy's mean of the first metric with its corrected interval and
    its standing against the best."""
    level = _level(v)
    rows, classes = [], []
    for ds, part in v.intervals.groupby("dataset", sort=False):
        part = part.iloc[part["mean"].fillna(-np.inf).to_numpy().argsort(kind="stable")[::-1]]
        metric = part["metric"].iloc[0]
        for r in part.to_dict("records"):
            s = r["standing"]
            rows.append({"dataset": ds, "strategy": r["strategy"], "family": r["family"],
                         f"mean [{level} interval]": _read_interval(metric, r["mean"], r["low"],
                                                                    r["high"]),
                         "standing": s,
                         "P(within region of best)": _prob(r["p_near_best"]),
                         "cells": f"{int(r['cells'])}/{int(r['planned'])}",
                         "fit s": r["fit_seconds"],
                         "predict ms / 1,000 rows": r["predict_ms_per_1000_rows"]})
            classes.append({"best": "best", "equivalent to best": "tied",
                            "worse than best": "worse"}.get(s, "" if pd.notna(r["mean"])
                                                            else "missing"))
    titles = {ds: f"{ds}: {metric_heading(m)}" for ds, m in v.primary.items()}
    return Table("intervals", "Mean score per dataset with its corrected interval",
                 v.intervals, pd.DataFrame(rows), group="dataset" if rows else None,
                 group_titles=titles, row_classes=classes,
                 intro=(f"Mean of each dataset's first metric over repeats × folds with its "
                        f"{level} corrected interval (Nadeau & Bengio 2003; the n_test/n_train "
                        "correction is a heuristic), kept within the metric's range. "
                        "P(within region of best): the posterior probability that the strategy "
                        "is within the region of practical equivalence of the best or better, "
                        "with the best not fixed in advance (all strategies sampled jointly). "
                        f"Standing: equivalent to best when that reaches {v.certainty:.0%}, "
                        f"worse when it is at most {1 - v.certainty:.0%}, else undecided. "
                        f"Region: {region_text(v)}. Cells: successful of stored."))


def pairs(v: Verdict) -> Table:
    """Per dataset: every pair's verdict, its probabilities and the frequentist test."""
    rows, classes = [], []
    for r in v.pairs.to_dict("records"):  # plain dicts: thousands of pairs on a big store
        metric = r["metric"]
        sign = -1 if lower_is_better(metric) else 1
        lo, hi = sorted([sign * r["low"], sign * r["high"]]) if pd.notna(r["low"]) \
            else (np.nan, np.nan)
        rows.append({"dataset": r["dataset"], "a": r["a"], "b": r["b"],
                     "evidence": f"{int(r['pairs']):,} {r['evidence']}",
                     "a − b [interval]": interval(sign * r["mean_diff"], lo, hi),
                     "test": r["test"], "p": p_text(r["p"]),
                     "P(a better)": _prob(r["p_a"]), "P(equivalent)": _prob(r["p_eq"]),
                     "P(b better)": _prob(r["p_b"]), "verdict": verdict_text(r),
                     "what would decide it": r["advice"]})
        classes.append("best" if r["better"] else "tied" if r["verdict"] == EQUIVALENT else "")
    titles = {ds: f"{ds}: {metric_heading(m)}, region ±{number(w)}"
              for ds, m, w in zip(v.intervals["dataset"], v.intervals["metric"],
                                  v.intervals["margin"]) if pd.notna(w)}
    return Table.per_dataset("pairs", "Pairwise verdicts per dataset", v.pairs, rows, classes,
                             titles,
                             intro=("Verdict from the Bayesian correlated t-test over the (repeat, fold) "
                        "cells both strategies have (one split: the Bayesian t posterior over "
                        "the test rows): better when P(a better) or P(b better) reaches "
                        f"{v.certainty:.0%}, practically equivalent when P(equivalent) does, "
                        "otherwise undecided. Beside it the frequentist test (corrected "
                        "resampled t-test; with one split McNemar's exact test or a paired "
                        "t-test on per-row squared errors) and its "
                        f"{_level(v)} interval; difference = a − b in the metric as people read "
                        f"it. Region: {region_text(v)}."))


def ranks(v: Verdict, frame: pd.DataFrame) -> Table:
    """The one ranking: average ranks over the complete block of datasets × strategies."""
    cols = ["strategy", "family", "place", "average_rank", "datasets", "fit_seconds",
            "predict_ms_per_1000_rows", "failed_cells", "on_fit_front", "against_leader"]
    if v.ranks is None:
        empty = pd.DataFrame(columns=cols)
        return Table("ranks", "Average rank across datasets", empty, empty)
    c = v.costs.set_index("strategy")
    front = {}
    if v.pareto is not None:
        allp = v.pareto[(v.pareto["scope"] == "all datasets") & (v.pareto["cost_kind"] == "fit")]
        front = dict(zip(allp["strategy"], allp["on_front"]))
    lead = v.leaders[0] if v.leaders else None
    against = {lead: "leader"}
    if v.across is not None:
        for _, r in v.across.iterrows():
            if lead in (r["a"], r["b"]):
                other = r["b"] if r["a"] == lead else r["a"]
                against[other] = ("worse" if r["better"] == lead else "better"
                                  if r["better"] else r["verdict"])
    places = rank_places(v.ranks)
    failed = frame[frame["status"] != OK].groupby("strategy").size()
    data = pd.DataFrame([{
        "strategy": s, "family": c.loc[s, "family"], "place": places[str(s)],
        "average_rank": float(r), "datasets": len(v.matrix),
        "fit_seconds": c.loc[s, "fit_seconds"],
        "predict_ms_per_1000_rows": c.loc[s, "predict_ms_per_1000_rows"],
        "failed_cells": int(failed.get(s, 0)), "on_fit_front": front.get(s),
        "against_leader": against.get(s)} for s, r in v.ranks.items()], columns=cols)
    display = data.assign(average_rank=[f"{x:.2f}" for x in data["average_rank"]]).rename(
        columns={"average_rank": "average rank", "fit_seconds": "fit s (geometric mean)",
                 "predict_ms_per_1000_rows": "predict ms / 1,000 rows (geometric mean)",
                 "failed_cells": "failed cells", "on_fit_front": "on the fit-time front",
                 "against_leader": f"against {lead} (signed-rank)"})
    if not v.tested:
        display = display.drop(columns=[f"against {lead} (signed-rank)", "on the fit-time front"])
    n, k = v.matrix.shape
    intro = (f"{k} strategies ranked on each of {n} datasets by the dataset's first metric "
             "(1 = best; equal scores share the mean rank, equal average ranks share a place, "
             "shown with =), then averaged. Classification and regression datasets pool by "
             "rank. Only datasets on which every strategy has a score count; what was left out "
             "is named below. Times are geometric means over datasets of the per-dataset means.")
    if "tuned" in frame and frame["tuned"].any():
        tuned = sorted(set(frame.loc[frame["tuned"], "strategy"]))
        untuned = sorted(set(frame["strategy"]) - set(tuned))
        intro += (f" Tuned inside each training part (nested): {', '.join(tuned)}; their fit "
                  "time is the whole search plus the refit."
                  + (f" Not tuned: {', '.join(untuned)}." if untuned else ""))
    footer = " ".join(s[0].upper() + s[1:] + "." for s in v.left_out)
    return Table("ranks", f"Average rank across datasets (1 = best; {n} datasets)", data,
                 display, intro=intro, footer=footer)


def tests(v: Verdict) -> Table:
    cols = ["test", "statistic", "df", "p", "datasets", "strategies", "alpha", "decision"]
    if not v.tested:
        empty = pd.DataFrame(columns=cols)
        return Table("tests", "Tests across datasets", empty, empty)
    f = v.friedman
    n, k = v.matrix.shape
    decide = {True: "rejects equal ranks", False: "does not reject"}
    data = pd.DataFrame([
        {"test": "Friedman chi-square", "statistic": f.chi2, "df": f"{f.f_df1}",
         "p": f.chi2_p, "decision": decide[f.chi2_p <= v.alpha]},
        {"test": "Iman–Davenport F", "statistic": f.f, "df": f"{f.f_df1}, {f.f_df2}",
         "p": f.f_p, "decision": decide[f.f_p <= v.alpha]},
        {"test": "Nemenyi critical difference (ranks)", "statistic": v.cd, "df": "",
         "p": np.nan, "decision": f"{int(v.across['nemenyi_differs'].sum())} of "
                                  f"{len(v.across)} pairs differ"},
        {"test": "Wilcoxon signed-rank, Holm", "statistic": np.nan, "df": "", "p": np.nan,
         "decision": f"{int(v.across['wilcoxon_differs'].sum())} of {len(v.across)} pairs "
                     "differ"}]).assign(datasets=n, strategies=k, alpha=v.alpha)[cols]
    display = data.drop(columns=["alpha"]).assign(p=[p_text(p) for p in data["p"]])
    return Table("tests", f"Tests across datasets (α = {v.alpha:g})", data, display)


def scale_text(v: Verdict) -> str:
    if v.scale == "raw":
        metric = v.primary[v.matrix.index[0]]
        return (f"Wilcoxon differences are raw {metric_label(metric)} differences (every "
                "dataset is judged on this unit-free metric).")
    return ("Wilcoxon differences are divided, per pair and dataset, by the standard deviation "
            "of that pair's own fold-to-fold differences (the region half-width for a single "
            "split), because the datasets are judged on metrics whose differences do not share "
            "a unit; no other strategy affects a pair's p-value.")


def effect_text(v: Verdict, r) -> str:
    if pd.isna(r["effect"]):
        return ""
    if v.effect_unit == "region":
        text = interval(r["effect"], r["effect_low"], r["effect_high"], 3)
        return f"{text} × region"
    sign = -1 if lower_is_better(v.effect_unit) else 1
    lo, hi = sorted([sign * r["effect_low"], sign * r["effect_high"]]) \
        if pd.notna(r["effect_low"]) else (np.nan, np.nan)
    return interval(sign * r["effect"], lo, hi, 3)


def pairs_across(v: Verdict) -> Table:
    a = v.across
    level = _level(v)
    display = pd.DataFrame({
        "a (ranked ahead)": a["a"], "b": a["b"],
        "average ranks": [f"{x:.2f} vs {y:.2f}" for x, y in zip(a["rank_a"], a["rank_b"])],
        "P(a better)": [_prob(x) for x in a["p_a"]],
        "P(equivalent)": [_prob(x) for x in a["p_eq"]],
        "P(b better)": [_prob(x) for x in a["p_b"]],
        "verdict": [verdict_text(r) for _, r in a.iterrows()],
        "datasets that would decide it": [f"about {x}" if 0 < x <= 200 else
                                          "more than 200" if x > 200 else ""
                                          for x in a["datasets_needed"]],
        f"median difference a − b [{level}]": [effect_text(v, r) for _, r in a.iterrows()],
        "Wilcoxon–Holm p": [p_text(x) for x in a["p_holm"]],
        "Nemenyi": ["differ" if x else "not told apart" for x in a["nemenyi_differs"]],
        "per dataset: better / equivalent / undecided / worse": [
            f"{w} / {e} / {u} / {l}" for w, e, u, l in
            zip(a["wins"], a["equivalent"], a["undecided"], a["losses"])]})
    unit = ("in units of each dataset's region half-width (the region is ±1)"
            if v.effect_unit == "region" else f"in {metric_label(v.effect_unit)}")
    intro = (f"The verdict across datasets is the Bayesian signed-rank test on the per-dataset "
             "differences, each divided by its dataset's region half-width: better when "
             f"P(a better) or P(b better) reaches {v.certainty:.0%}, practically equivalent when "
             "P(equivalent) does, otherwise undecided, with a rough count of datasets that "
             "would decide it if new datasets behaved like these. The median difference is the "
             f"Hodges–Lehmann estimate {unit}, with its exact {level} interval (none with fewer "
             "than six datasets). Beside it: the Wilcoxon signed-rank test with Holm's "
             f"correction over all {len(a)} pairs (α = {v.alpha:g}) and the Nemenyi critical "
             f"difference ({v.cd:.2f} ranks). The per-dataset counts are a descriptive tally of "
             f"the per-dataset verdicts, uncorrected for the many comparisons. {scale_text(v)}")
    return Table("pairs_across", "Pairs across datasets", a.drop(columns=[], errors="ignore"),
                 display, intro=intro,
                 row_classes=["best" if b else "tied" if x == EQUIVALENT else ""
                              for b, x in zip(a["better"], a["verdict"])])


def pareto(v: Verdict) -> Table:
    """Per scope (all datasets first, then each dataset): score, both costs and what
    dominates each strategy."""
    rows = []
    scopes = sorted(v.pareto["scope"].unique(), key=lambda s: s != "all datasets")
    points: dict[tuple, dict[str, dict]] = {}  # (scope, cost kind) → strategy → its row
    for r in v.pareto.to_dict("records"):  # plain dicts: thousands of rows on a big store
        points.setdefault((r["scope"], r["cost_kind"]), {})[r["strategy"]] = r
    for scope in scopes:
        fit, pred = (points.get((scope, k), {}) for k in COST_LABELS)
        overall = scope == "all datasets"
        metric = None if overall else v.primary.get(scope)
        order = pd.Series({s: r["score"] for s, r in fit.items()}, dtype=float) \
            .sort_values(ascending=overall).index
        for s in order:
            score = fit[s]["score"]
            rows.append({"scope": scope,
                         "strategy": s,
                         "score": f"{score:.2f}" if overall else number(as_read(metric, score)),
                         COST_LABELS["fit"]: fit[s]["cost"],
                         "fit: dominated by": fit[s]["dominated_by"] or "on the front",
                         COST_LABELS["predict"]: pred[s]["cost"] if s in pred else np.nan,
                         "prediction: dominated by": (pred[s]["dominated_by"] if s in pred
                                                      else None) or "on the front"})
    titles = {s: ("All datasets: average rank; times are geometric means over datasets"
                  if s == "all datasets" else f"{s}: {metric_heading(v.primary[s])}")
              for s in scopes}
    return Table("pareto", "Accuracy against cost: Pareto fronts", v.pareto, pd.DataFrame(rows),
                 group="scope" if rows else None, group_titles=titles,
                 intro=("A strategy is dominated when another has a score at least as good and "
                        "a cost at least as low, one of them strictly; costs that differ by "
                        "less than twice the standard error of their difference (the timing "
                        "noise over folds) count as equal. Scores and costs are "
                        "means; timings are taken with cells running side by side, one thread "
                        "each. Over all datasets the score is the average rank (lower is "
                        "better) and the cost the geometric mean over datasets."))


# ------------------------------------------------------------------ speedup

def _flags(r, margin: float) -> str:
    if r.get("status") != "ok":
        return f"{r.get('status')}: {r.get('message')}"
    flags = []
    if r.get("noisy"):
        flags.append(f"noisy (spread {r['spread']:.0%} > {margin:.0%})")
    if r.get("busy"):
        flags.append(f"busy (other processes used {r['other_load']:.2f} cores)")
    if not r.get("limits_ok"):
        flags.append(f"limits not in force ({r['limits']})")
    return "; ".join(flags)


def _interval2(v, lo, hi, digits: int = 3) -> str:
    if v is None or pd.isna(v):
        return ""
    if lo is None or pd.isna(lo) or abs(hi - lo) < 10 ** -(digits + 1):
        return f"{v:.{digits}f}"
    return f"{v:.{digits}f} [{lo:.{digits}f}, {hi:.{digits}f}]"


def speedup_intro(runs: list[dict], margin: float) -> str:
    last = runs[-1] if runs else {}
    parts = []
    if last:
        parts.append(
            f"Measured on {last.get('cpu_model', '?')}, {last.get('cores', '?')} cores "
            f"({last.get('usable_cores', '?')} usable by woodlot); worker counts "
            f"{', '.join(map(str, last.get('workers', [])))}; {last.get('repeats', '?')} timed "
            "repeats per point after one untimed warm-up fit. Each point ran alone in a fresh "
            "process with n_jobs set to the worker count where the estimator has it and the "
            "OpenMP and BLAS thread pools limited to it; the limits were read back inside "
            "every fit.")
        before, after = last.get("load_average_before"), last.get("load_average_after")
        if before or after:
            parts.append(f"Load average (1, 5, 15 min) before: {before}; after: {after}.")
    notes = list(dict.fromkeys(n for s in runs for n in s.get("notes", [])))
    parts += [f"Note: {n}." for n in notes]
    repeats = int(last.get("repeats") or FULL_COVERAGE_REPEATS) if last else \
        FULL_COVERAGE_REPEATS
    if repeats < FULL_COVERAGE_REPEATS:
        covers = COVERAGE_BY_REPEATS.get(repeats)
        bracket = (f"Brackets: approximate {LEVEL:.0%} bootstrap interval over repeats — with "
                   f"{repeats} repeat{'s' if repeats != 1 else ''} it covers the true speedup "
                   + (f"only about {covers:.0%} of the time" if covers else "far less often")
                   + f" (by simulation; {FULL_COVERAGE_REPEATS} or more repeats reach the "
                   "stated level).")
    else:
        bracket = (f"Brackets: {LEVEL:.0%} bootstrap interval over repeats (coverage checked by "
                   f"simulation at {FULL_COVERAGE_REPEATS} or more repeats).")
    parts.append(
        f"Speedup S(p) = T(1) / T(p) from median fit wall times; efficiency = S(p) / p. "
        f"{bracket} CPU s counts every thread and worker process; cores busy = CPU / wall. "
        f"Noisy: the repeats' fit times differ by more than {margin:.0%} of their median. "
        f"Busy: other processes kept more than {BUSY_CORES:g} cores busy during the fits.")
    return " ".join(parts)


def speedup_points(points: pd.DataFrame, runs: list[dict], margin: float) -> Table:
    rows = []
    for _, r in points.iterrows():
        ok = r.get("status") == "ok"
        rows.append({
            "dataset": r["dataset"], "strategy": r["strategy"], "family": r["family"],
            "workers": int(r["workers"]),
            "fit s": number(r.get("fit_seconds")) if ok else "",
            "min–max s": f"{number(r['fit_seconds_min'], 3)}–{number(r['fit_seconds_max'], 3)}"
            if ok else "",
            "CPU s": number(r.get("fit_cpu_seconds")) if ok else "",
            "cores busy": f"{r['cores_busy']:.2f}" if ok else "",
            "speedup": _interval2(r.get("speedup"), r.get("speedup_low"),
                                  r.get("speedup_high"), 2) if ok else "",
            "efficiency": f"{r['efficiency']:.2f}" if ok and pd.notna(r.get("efficiency"))
            else "",
            "predict rows/s": f"{r['predict_rows_per_second']:,.0f}" if ok else "",
            "flags": _flags(r, margin)})
    ok = points[points["status"] == "ok"] if "status" in points else points
    footer = ""
    if not ok.empty and ok["limits_ok"].all():
        footer = ("Thread limits seen inside every fit: each pool at the worker count, and "
                  "n_jobs equal to it where the estimator has one.")
    elif not ok.empty:
        footer = (f"Thread limits NOT in force at {int((~ok['limits_ok'].astype(bool)).sum())} "
                  "point(s); see the flags.")
    return Table("speedup", "Parallel speedup of fitting", points, pd.DataFrame(rows),
                 group="dataset" if rows else None, intro=speedup_intro(runs, margin),
                 footer=footer)


def serial_fraction(fits: pd.DataFrame) -> Table:
    rows = []
    for _, f in fits.iterrows():
        fitted = pd.notna(f.get("serial_fraction"))
        row = {"dataset": f["dataset"], "strategy": f["strategy"], "family": f["family"],
               "measured S": f"{f['measured_speedup']:.2f} at {int(f['max_workers'])}"
               if fitted else "",
               "serial fraction f": _interval2(f.get("serial_fraction"),
                                               f.get("serial_fraction_low"),
                                               f.get("serial_fraction_high"))}
        for q in EXTRAPOLATE_TO:
            row[f"S({q}), extrapolated"] = _interval2(
                f.get(f"extrapolated_speedup_{q}"), f.get(f"extrapolated_speedup_{q}_low"),
                f.get(f"extrapolated_speedup_{q}_high"), 2) if fitted else ""
        row["fit"] = f["fit"]
        rows.append(row)
    return Table("serial_fraction", "Serial fraction (Amdahl's law) and extrapolation", fits,
                 pd.DataFrame(rows),
                 intro=("f in S(p) = 1 / (f + (1 − f) / p), fitted by least squares to the "
                        f"measured speedups (f kept in [0, 1]); {LEVEL:.0%} interval from a "
                        "bootstrap over repeats. S at "
                        f"{', '.join(map(str, EXTRAPOLATE_TO))} cores are extrapolations of the "
                        "fitted law, not measurements; they ignore memory bandwidth, start-up "
                        "and other overheads that grow with the core count."))


def speedup_summary(points: pd.DataFrame, fits: pd.DataFrame) -> pd.DataFrame:
    """One line per dataset × strategy: speedup at the most workers, the serial fraction, and
    which of its points were noisy or disturbed by other processes (for the terminal)."""
    if fits.empty or "serial_fraction" not in fits:
        return pd.DataFrame()
    rows = []
    for _, f in fits.iterrows():
        fitted = pd.notna(f.get("serial_fraction"))
        mine = points[(points["dataset"] == f["dataset"]) & (points["strategy"] == f["strategy"])
                      & (points["status"] == "ok")]
        flags = [f"{word} at {', '.join(str(int(w)) for w in mine.loc[mine[col], 'workers'])}"
                 for word, col in (("noisy", "noisy"), ("busy", "busy")) if mine[col].any()]
        rows.append({"dataset": f["dataset"], "strategy": f["strategy"],
                     "workers": int(f["max_workers"]) if pd.notna(f["max_workers"]) else None,
                     "speedup": number(f.get("measured_speedup"), 3),
                     "serial_fraction": _interval2(f.get("serial_fraction"),
                                                   f.get("serial_fraction_low"),
                                                   f.get("serial_fraction_high"), 2)
                     if fitted else f["fit"],
                     "flags": "; ".join(flags)})
    return pd.DataFrame(rows)


__all__ = ["COST_LABELS", "scores", "costs", "failures", "intervals", "pairs", "ranks", "tests",
           "pairs_across", "pareto", "speedup_points", "serial_fraction", "speedup_summary",
           "scale_text", "verdict_text", "effect_text"]
