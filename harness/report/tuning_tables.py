"""The report's section on tuning, as tables and sentences: what tuning buys per dataset and
per strategy, whether it changes the ranking, and how stable the chosen configurations are
(numbers from `harness.analysis.tuning`)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.analysis.tuning import BETTER, WORSE
from harness.report.render import Table, as_read, interval, lower_is_better, metric_heading, \
    number, p_text
from harness.report.words import names


def _read_gain(metric: str, gain, low, high) -> str:
    """tuned − untuned as people read the metric (an error that fell is negative)."""
    if lower_is_better(metric):
        gain, low, high = -gain, -high, -low
    return interval(gain, low, high)


def gains(g: pd.DataFrame, alpha: float, certainty: float) -> Table:
    rows, classes = [], []
    for _, r in g.iterrows():
        rows.append({"dataset": r["dataset"], "strategy": r["strategy"],
                     "untuned": number(as_read(r["metric"], r["untuned"])),
                     "tuned": number(as_read(r["metric"], r["tuned"])),
                     "tuned − untuned [interval]": _read_gain(r["metric"], r["gain"], r["low"],
                                                              r["high"]),
                     "p": p_text(r["p"]),
                     "P(better / equivalent / worse)": "" if pd.isna(r["p_better"]) else
                     f"{r['p_better']:.2f} / {r['p_equivalent']:.2f} / {r['p_worse']:.2f}",
                     "region ±": number(r["margin"], 3),
                     "outcome": r["outcome"], "outer folds": r["folds"],
                     "search s": number(r["search_seconds"], 3),
                     "refit s": number(r["refit_seconds"], 3)})
        classes.append({BETTER: "best", WORSE: "worse"}.get(r["outcome"], ""))
    titles = {ds: f"{ds}: {metric_heading(m)}" for ds, m in zip(g["dataset"], g["metric"])}
    return Table.per_dataset("tuning_gains", "What tuning buys, per dataset", g, rows,
                             classes, titles,
                             intro=("Untuned: the configuration as given (or the library's defaults), "
                        "refit on each outer training part. Tuned: the search's choice, refit "
                        "the same way. Difference tuned − untuned over the outer folds with its "
                        f"{1 - alpha:.0%} corrected interval and the corrected resampled "
                        "t-test's p. Outcome, as for every pair: the Bayesian correlated "
                        "t-test's probabilities that tuning helped, made no difference beyond "
                        "the metric's region of practical equivalence (region ±, in the "
                        "metric's units), or hurt; the outcome is the one that reaches "
                        f"{certainty:.0%}, else undecided. Search s: the whole search per "
                        "outer fold; refit s: the final fit alone (what production training "
                        "costs)."))


def summary(s: pd.DataFrame) -> Table:
    display = s.assign(median_gain_sd=[number(x, 3) for x in s["median_gain_sd"]]).rename(
        columns={"median_gain_sd": "median gain (fold-to-fold sd)"})
    return Table("tuning_summary", "What tuning buys, per strategy", s, display,
                 intro=("Datasets on which tuning made each strategy better, left it undecided "
                        "or made it worse (per-dataset corrected t-test), and the median gain "
                        "in units of each dataset's fold-to-fold standard deviation."))


def ranking(r: pd.DataFrame) -> Table:
    display = pd.DataFrame({
        "strategy": r["strategy"], "tuned": ["yes" if t else "no" for t in r["tuned_strategy"]],
        "average rank untuned": [f"{x:.2f}" for x in r["rank_untuned"]],
        "average rank tuned": [f"{x:.2f}" for x in r["rank_tuned"]],
        "change": [f"{b - a:+.2f}" for a, b in zip(r["rank_tuned"], r["rank_untuned"])]})
    n = int(r["datasets"].iloc[0]) if len(r) else 0
    return Table("tuning_ranks", "Does tuning change the ranking?", r, display,
                 intro=(f"Average ranks over {n} datasets (1 = best) with every tuned strategy "
                        "untuned, then tuned; strategies that are not tuned are the same in "
                        "both. Change: places gained by tuning (positive = moved up)."))


def stability(st: pd.DataFrame) -> Table:
    display = st.assign(values=[", ".join(number(v) if isinstance(v, (int, float))
                                          and not isinstance(v, bool) else str(v)
                                          for v in vs) for vs in st["values"]])
    display = display.rename(columns={"distinct": "distinct values",
                                      "values": "chosen per outer fold"})
    return Table("chosen_configurations", "Chosen configurations across outer folds",
                 st.assign(values=[repr(v) for v in st["values"]]), display,
                 group="dataset" if len(st) else None,
                 intro=("The value of each tuned parameter in the configuration each outer "
                        "fold chose. One value everywhere: the choice is stable; values that "
                        "wander across folds mean the score is flat in that direction, or the "
                        "budget too small to find its peak."))


def sentences(g: pd.DataFrame, s: pd.DataFrame, r: pd.DataFrame,
              certainty: float) -> list[str]:
    """The short verdict per tuned strategy, and one on the ranking."""
    out = []
    for _, x in s.iterrows():
        parts = [f"{label} on {int(x[col])}" for label, col in
                 (("better after tuning", "better"),
                  ("practically equivalent", "equivalent"), ("undecided", "undecided"),
                  ("worse", "worse")) if x[col]]
        gain = ("" if not np.isfinite(x["median_gain_sd"]) else
                f"; median gain {x['median_gain_sd']:.2f} fold-to-fold sd")
        out.append(f"{x['strategy']}: {', '.join(parts)} of {int(x['datasets'])} dataset"
                   f"{'s' if x['datasets'] != 1 else ''} (Bayesian correlated t-test, "
                   f"certainty {certainty:.0%}){gain}.")
    if len(r) >= 2:
        n = int(r["datasets"].iloc[0])
        change = r["rank_untuned"] - r["rank_tuned"]
        if np.allclose(change, 0):
            out.append(f"Tuning leaves the average ranks over {n} datasets as they were "
                       f"(best: {r['strategy'].iloc[0]}).")
        else:
            def best(col):
                top = r.loc[np.isclose(r[col], r[col].min()), "strategy"].tolist()
                return f"{names(top)} ({r[col].min():.2f})"
            up = r.loc[change > 1e-9, "strategy"].tolist()
            down = r.loc[change < -1e-9, "strategy"].tolist()
            out.append(f"Tuning changes the average ranks over {n} datasets: best untuned "
                       f"{best('rank_untuned')}, best tuned {best('rank_tuned')}"
                       + (f"; up: {names(up)}" if up else "")
                       + (f"; down: {names(down)}" if down else "") + ".")
    return out
