"""The recommendation of ``woodlot choose`` in words: the sentences it prints, the advice of
the ensemble-size curves, the warnings, the one-fit "more cores" indication, and
``recommendation.md`` (report.html shows the same sentences and sections)."""

from __future__ import annotations

from harness.analysis.curves import FALLING, RISING, CurveAdvice
from harness.analysis.recommendation import Recommendation
from harness.analysis.verdict import ALPHA
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
        out.append(f"the table is small ({rec.plan['rows']} rows): on so little data the "
                   "comparison often stays undecided, and a recommendation rests on few test "
                   "rows")
    if rec.all_near:
        out.append("every strategy is practically equivalent to the best: on this table the "
                   "choice can be made on cost")
    return out


def cores_sentences(rec: Recommendation) -> list[str]:
    out = []
    for c in rec.cores:
        if "skipped" in c:
            out.append(c["skipped"])
            continue
        line = (f"{c['strategy']}: one fit took {c['t1']:.2f} s on 1 core and {c['tp']:.2f} s "
                f"on {c['cores']} cores (ratio {c['t1'] / c['tp']:.2f}; {c['cores']} would be "
                "ideal)")
        if c.get("busy"):
            line += (f" — not a finding: other processes kept {c['other_load']:.1f} cores busy "
                     "during these fits")
        out.append(line)
    if any("skipped" not in c for c in rec.cores):
        out.append("These are single fits, an indication only; to measure speedup, run "
                   "'woodlot speedup choose.toml' on a quiet machine (the [speedup] section "
                   "sets the worker counts and repeats).")
    return out


def _pct(p: float) -> str:
    return f"{p:.0%}" if p < 0.995 else "over 99%"


def sentences(rec: Recommendation) -> list[str]:
    by = {r["strategy"]: r for r in rec.strategies}
    b = by[rec.best]
    region = (f"within ±{number(abs(rec.margin), 3)} {metric_label(rec.metric)} of the best or "
              "better")
    out = [f"Highest mean {metric_label(rec.metric)}: {rec.best} ({_score(rec, b['mean'])}, "
           f"{1 - ALPHA:.0%} interval {_interval(rec, b)}, over {b['cells']} folds)."]
    if rec.pick:
        others = [s for s in rec.near if s != rec.pick]
        out.append(f"Recommendation: {rec.pick} — the cheapest to train of the strategies "
                   f"whose probability of being {region} reaches {rec.certainty:.0%} "
                   f"({rec.pick}: {_pct(by[rec.pick]['p_near_best'])}"
                   + ("; also qualifying: " + ", ".join(
                       f"{s} {_pct(by[s]['p_near_best'])}" for s in others) if others else "")
                   + ").")
        if rec.pick != rec.best:
            out.append(f"It trains in {number(by[rec.pick]['fit_seconds'], 3)} s per fit against "
                       f"{number(b['fit_seconds'], 3)} s for {rec.best}.")
    else:
        out.append(f"Recommendation: undecided — {rec.undecided}.")
        if rec.more_repeats:
            out.append(f"About {rec.more_repeats} repeats of {rec.plan['folds']}-fold "
                       f"cross-validation would likely decide it: roughly "
                       f"{clock(rec.more_seconds)} of fitting on {rec.plan['jobs']} worker(s) "
                       "(--budget).")
        else:
            out.append("More repeats would not decide it (the fold-to-fold correction keeps "
                       "the posterior wide); more rows would, or accept a wider region of "
                       "practical equivalence.")
    out.append("The best is not fixed in advance: every strategy's score is sampled jointly "
               "from the posterior and compared with each sample's best, which corrects for "
               "picking the best by its sample mean.")
    if rec.pick and by[rec.cheapest_to_predict]["predict_ms_per_1000_rows"] \
            < by[rec.pick]["predict_ms_per_1000_rows"]:
        out.append(f"Cheapest to predict among those qualifying: {rec.cheapest_to_predict} "
                   f"({number(by[rec.cheapest_to_predict]['predict_ms_per_1000_rows'], 3)} ms "
                   "per 1,000 rows).")
    return out


def sections(rec: Recommendation) -> list[tuple[str, list[str]]]:
    """(title, items) of the parts after the sentences, those with something to say."""
    return [(title, items) for title, items in (
        ("Warnings", warnings(rec)),
        ("Ensemble size", [curve_sentence(c) for c in rec.curves]),
        ("Tuning", rec.tuning),
        ("More cores", cores_sentences(rec)), ("Left out", rec.left_out)) if items]


def markdown(rec: Recommendation) -> str:
    lines = [f"# Which ensemble for '{rec.dataset}'", ""]
    lines += [f"- {s}" for s in rec.sentences] + [""]
    lines += ["## Strategies", "", f"| strategy | family | {metric_heading(rec.metric)} | "
              f"{1 - ALPHA:.0%} interval | P(within region of best) | standing | fit s | "
              "predict ms / "
              "1,000 rows |", "|---|---|---:|---|---:|---|---:|---:|"]
    for r in rec.strategies:
        lines.append(f"| {r['strategy']} | {r['family']} | {_score(rec, r['mean'])} | "
                     f"{_interval(rec, r)} | {r['p_near_best']:.2f} | {r['standing']} | "
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
