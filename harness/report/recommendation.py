"""The recommendation of ``woodlot choose`` in words: the sentences it prints, the advice of
the ensemble-size curves, the warnings, and ``recommendation.md``."""

from __future__ import annotations

from harness.analysis.curves import FALLING, RISING, CurveAdvice
from harness.analysis.recommendation import Recommendation
from harness.report.page import CAUTION
from harness.report.render import as_read, metric_heading, metric_label, number


def clock(seconds: float) -> str:
    """``45s``, ``2m05s``."""
    seconds = int(round(seconds))
    return f"{seconds // 60}m{seconds % 60:02d}s" if seconds >= 60 else f"{seconds}s"


def _score(rec: Recommendation, value: float) -> str:
    return number(as_read(rec.metric, value))


def _interval(rec: Recommendation, row: dict) -> str:
    lo, hi = sorted((as_read(rec.metric, row["low"]), as_read(rec.metric, row["high"])))
    return f"{number(lo)} to {number(hi)}"


def curve_sentence(c: CurveAdvice) -> str:
    unit = "stages" if c.stages else "members"
    m = metric_label(c.metric)
    if c.shape == RISING:
        more = "more stages, or a larger learning rate," if c.stages else "more members"
        return (f"{c.strategy} was still improving at its last size ({m} "
                f"{number(as_read(c.metric, c.before_last_score))} at {c.before_last_size} "
                f"{unit}, {number(as_read(c.metric, c.last_score))} at {c.last_size}): {more} "
                "may help")
    if c.shape == FALLING:
        fewer = ("fewer stages (or a smaller learning rate, or early stopping)" if c.stages
                 else "fewer members")
        return (f"{c.strategy} scored best at about {c.peak_size} {unit} ({m} "
                f"{number(as_read(c.metric, c.peak_score))}) and worse at {c.last_size} "
                f"({number(as_read(c.metric, c.last_score))}): {fewer} would score better and "
                "cost less")
    return (f"{c.strategy} was flat after {c.enough_size} {unit} (within the fold-to-fold noise "
            f"of its {c.last_size}-{unit[:-1]} score): about {c.enough_size} would do, cutting "
            f"fit and prediction time roughly {c.last_size / max(c.enough_size, 1):.0f}-fold")


def warnings(rec: Recommendation) -> list[str]:
    out = list(rec.warnings)
    if rec.small:
        out.append(f"the table is small ({rec.plan['rows']} rows): the tests can rarely "
                   "separate strategies on so little data, so 'tied' here often means 'not "
                   "enough data to tell'")
    if rec.all_tied:
        out.append("every strategy is statistically tied with the best: on this table the "
                   "choice can be made on cost")
    return out


def cores_sentences(rec: Recommendation) -> list[str]:
    out = []
    for c in rec.cores:
        if "skipped" in c:
            out.append(c["skipped"])
        else:
            out.append(f"{c['strategy']}: fit {c['t1']:.2f} s on 1 core, {c['tp']:.2f} s on "
                       f"{c['cores']} cores (speedup {c['t1'] / c['tp']:.2f} of an ideal "
                       f"{c['cores']})")
    return out


def sentences(rec: Recommendation) -> list[str]:
    by = {r["strategy"]: r for r in rec.strategies}
    b = by[rec.best]
    test = f"corrected resampled t-test, α = {rec.alpha:g}"
    out = [f"Best on {metric_label(rec.metric)}: {rec.best} ({_score(rec, b['mean'])}, "
           f"{1 - rec.alpha:.0%} interval {_interval(rec, b)}, over {b['cells']} folds)."]
    if rec.tied:
        out.append(f"Statistically tied with it ({test}): "
                   + ", ".join(f"{s} ({_score(rec, by[s]['mean'])}, p = "
                               f"{by[s]['p_vs_best']:.2f})" for s in rec.tied) + ".")
    else:
        out.append(f"No other strategy is statistically tied with it ({test}).")
    for verb, name, column, unit in (
            ("train", rec.cheapest_to_train, "fit_seconds", "s per fit"),
            ("predict", rec.cheapest_to_predict, "predict_ms_per_1000_rows",
             "ms per 1,000 rows")):
        cost = number(by[name][column], 3)
        if name == rec.best:
            out.append(f"{rec.best} is also the cheapest of these to {verb} ({cost} {unit}).")
        else:
            out.append(f"Cheapest to {verb} among these: {name} ({cost} {unit}, against "
                       f"{number(b[column], 3)} {unit.split(' per')[0]} for {rec.best}).")
    if rec.pick != rec.best:
        out.append(f"Recommendation: {rec.pick} — as accurate as the best within what the "
                   "tests can tell, and cheaper to train.")
    else:
        out.append(f"Recommendation: {rec.best}.")
    return out


def sections(rec: Recommendation) -> list[tuple[str, list[str]]]:
    """(title, items) of the parts after the sentences, those with something to say."""
    return [(title, items) for title, items in (
        ("Ensemble size", [curve_sentence(c) for c in rec.curves]),
        ("More cores", cores_sentences(rec)), ("Left out", rec.left_out),
        ("Warnings", warnings(rec))) if items]


def markdown(rec: Recommendation) -> str:
    lines = [f"# Which ensemble for '{rec.dataset}'", ""]
    lines += [f"- {s}" for s in rec.sentences] + [""]
    lines += ["## Strategies", "", f"| strategy | family | {metric_heading(rec.metric)} | "
              f"{1 - rec.alpha:.0%} interval | p vs best | tied with best | fit s | predict ms / "
              "1,000 rows |", "|---|---|---:|---|---:|---|---:|---:|"]
    for r in rec.strategies:
        pv = "" if r["p_vs_best"] is None else f"{r['p_vs_best']:.3f}"
        lines.append(f"| {r['strategy']} | {r['family']} | {_score(rec, r['mean'])} | "
                     f"{_interval(rec, r)} | {pv} | {'yes' if r['tied_with_best'] else 'no'} | "
                     f"{number(r['fit_seconds'], 3)} | "
                     f"{number(r['predict_ms_per_1000_rows'], 3)} |")
    for title, items in sections(rec):
        lines += ["", f"## {title}", ""] + [f"- {x}" for x in items]
    plan = rec.plan
    lines += ["", "## How this was measured", "",
              f"{plan['repeats']} × {plan['folds']}-fold cross-validation of "
              f"{len(plan['strategies'])} strategies on {plan['rows']} rows ({plan['task']}), "
              f"{plan['jobs']} worker(s); budget {clock(rec.budget_seconds)}, used "
              f"{clock(rec.used_seconds)}. Full report: report.html; suite: choose.toml.", "",
              CAUTION, ""]
    return "\n".join(lines)
