"""The verdict in plain words: the bottom line the terminal prints and the report opens with
(better, practically equivalent, undecided — across how many datasets), the details after it,
and the caveats about what the tests can tell."""

from __future__ import annotations

import numpy as np

from harness.analysis.verdict import EQUIVALENT, UNDECIDED, Verdict
from harness.report.render import as_read, fmt_p, metric_label, number


FEW_DATASETS = 5  # fewer datasets than this: the across-dataset tests have little power


def names(items: list[str]) -> str:
    """``a``, ``a and b``, ``a, b and c``."""
    if len(items) <= 2:
        return " and ".join(items)
    return ", ".join(items[:-1]) + " and " + items[-1]


def notes(v: Verdict) -> list[str]:
    """Caveats about what the across-dataset tests can tell here."""
    out = []
    n, k = v.matrix.shape
    if not v.tested:
        if v.ranks is not None:
            out.append(f"The across-dataset comparison needs at least two datasets and two "
                       f"strategies scored on all of them; here there are {n} and {k}, so it "
                       "is left out and the verdicts above are per dataset.")
        return out
    if v.powerless:
        m = len(v.across)
        out.append(
            f"With {n} datasets the smallest two-sided Wilcoxon p-value possible is "
            f"{v.smallest_p:.3g} (one strategy better on every dataset); Holm's correction over "
            f"{m} pair{'s' if m > 1 else ''} needs p ≤ {v.needed_p:.3g} for a first rejection, "
            "so the Wilcoxon–Holm verdict cannot tell any pair apart here. More datasets are "
            "needed for a verdict across datasets.")
    if n < FEW_DATASETS:
        out.append(f"Only {n} datasets: the across-dataset tests have little power; "
                   "'undecided' across datasets is the expected outcome until there are more.")
    if v.friedman.f_p > v.alpha:
        out.append("The Friedman test does not reject equal ranks: the differences in average "
                   "rank may be chance, and the Nemenyi comparison should not be read as a "
                   "finding.")
    return out


def left_out(v: Verdict) -> list[str]:
    return [s[0].upper() + s[1:] + "." for s in v.left_out]


def _seconds(s: float) -> str:
    return f"{s:.3g} s" if np.isfinite(s) else "? s"


def _pct(p: float) -> str:
    return f"{p:.0%}" if p < 0.995 else "≥99%"


def region_text(v: Verdict) -> str:
    """The region per metric judged: ``accuracy ±0.01, RMSE ±1% of the best``."""
    return ", ".join(f"{metric_label(m)} ±{g.width * 100:g}% of the best" if g.relative
                     else f"{metric_label(m)} ±{g.width:g}"
                     for m, g in v.judged_margins().items())


def region(v: Verdict) -> str:
    """``region of practical equivalence of accuracy ±0.01 and certainty 95%``."""
    return (f"region of practical equivalence of {region_text(v)} and certainty "
            f"{v.certainty:.0%}")


def rank_places(ranks) -> dict[str, str]:
    """Strategy → its place, equal average ranks sharing one (``1``, ``=2``, ``=2``, ``4``)."""
    out, values = {}, list(ranks.items())
    for i, (name, r) in enumerate(values):
        first = next(k for k, (_, x) in enumerate(values) if np.isclose(x, r))
        shared = sum(np.isclose(x, r) for _, x in values) > 1
        out[str(name)] = f"{'=' if shared else ''}{first + 1}"
    return out


def datasets_hint(rows) -> str:
    """How many datasets in all would decide the undecided pairs (their ``datasets_needed``;
    0 = no estimate), as the tail of the short answer's sentence."""
    need = [int(r["datasets_needed"]) for _, r in rows.iterrows()]
    known = [x for x in need if 0 < x <= 200]
    beyond = any(x > 200 for x in need)
    if not known:
        return " — more than 200 datasets would be needed at these differences" if beyond else ""
    return (f" — more datasets would decide it: about {min(known)}"
            + (f" to {max(known)}" if max(known) != min(known) else "") + " in all"
            + (" (more than 200 for some pairs)" if beyond else "")
            + ", if new ones behave like these")


def bottom_line(v: Verdict) -> list[str]:
    """One or two plain sentences: what is better, what is practically equivalent, what is
    undecided, across how many datasets."""
    if v.ranks is None or v.ranks.empty:
        return ["No strategy has a successful cell, so there is nothing to compare."]
    if not v.tested:
        return [_dataset_line(v, ds) for ds in v.intervals["dataset"].unique()
                if v.intervals[v.intervals["dataset"] == ds]["mean"].notna().any()]
    n, k = v.matrix.shape
    leaders = v.leaders
    lead = leaders[0]
    if len(leaders) > 1:
        head = (f"Across {n} datasets, {names(leaders)} share the best average rank "
                f"({v.ranks[lead]:.2f} of {k} strategies).")
    else:
        head = f"Across {n} datasets, {lead} ranks first of {k} strategies ({v.ranks[lead]:.2f})."
    mine = v.across[(v.across["a"] == lead) | (v.across["b"] == lead)]
    other = lambda r: r["b"] if r["a"] == lead else r["a"]  # noqa: E731
    beats = [other(r) for _, r in mine.iterrows() if r["better"] == lead]
    beaten = [other(r) for _, r in mine.iterrows() if r["better"] not in ("", lead)]
    same = [other(r) for _, r in mine.iterrows() if r["verdict"] == EQUIVALENT]
    open_ = mine[mine["verdict"] == UNDECIDED]
    parts = []
    if beats:
        parts.append(f"better than {names(beats)}")
    if same:
        parts.append(f"practically equivalent to {names(same)}")
    if beaten:
        parts.append(f"worse than {names(beaten)}")
    if len(open_):
        parts.append(f"undecided against {names([other(r) for _, r in open_.iterrows()])}"
                     + datasets_hint(open_))
    body = f"{lead} is " + "; ".join(parts) + "."
    how = (f"Judged by the Bayesian signed-rank test on each dataset's first metric, with a "
           f"{region(v)}.")
    return [head, body, how]


def _dataset_line(v: Verdict, ds: str) -> str:
    part = v.intervals[(v.intervals["dataset"] == ds) & v.intervals["mean"].notna()]
    part = part.sort_values("mean", ascending=False, kind="stable")
    metric = part["metric"].iloc[0]
    best = part[part["best"]]
    top = best.iloc[0]
    evidence = ("its test rows (one split)" if top["evidence"] == "test rows"
                else "repeats × folds")
    groups = {key: [str(s) for s in part.loc[part["standing"] == key, "strategy"]]
              for key in ("equivalent to best", "worse than best", "undecided")}
    lead = names([str(s) for s in best["strategy"]])
    text = (f"On {ds} ({metric_label(metric)}, judged on {evidence}), {lead} "
            f"{'have' if len(best) > 1 else 'has'} the best mean "
            f"({number(as_read(metric, top['mean']))})")
    bits = []
    if groups["equivalent to best"]:
        bits.append(f"practically equivalent to it: {names(groups['equivalent to best'])}")
    if groups["worse than best"]:
        bits.append(f"worse: {names(groups['worse than best'])}")
    if groups["undecided"]:
        pairs = v.pairs[(v.pairs["dataset"] == ds) & ((v.pairs["a"] == top["strategy"])
                                                     | (v.pairs["b"] == top["strategy"]))]
        advice = [a for a in pairs.loc[pairs["verdict"] == UNDECIDED, "advice"] if a]
        bits.append(f"undecided: {names(groups['undecided'])}"
                    + (f" — {advice[0]}" if advice else ""))
    return text + ("; " + "; ".join(bits) if bits else "") + f" ({region(v)})."


def details(v: Verdict) -> list[str]:
    """The supporting figures after the bottom line: the frequentist tests, cost, caveats."""
    if v.ranks is None or v.ranks.empty:
        return []
    out: list[str] = []
    if v.tested:
        n, k = v.matrix.shape
        best = v.leaders[0]
        f = v.friedman
        rejects = f.f_p <= v.alpha
        out.append(f"Friedman test: {'rejects' if rejects else 'does not reject'} that all {k} "
                   f"strategies rank alike (Iman–Davenport F = {f.f:.2f}, {fmt_p(f.f_p)}).")
        vs_best = v.across[(v.across["a"] == best)]
        told = [r["b"] for _, r in vs_best.iterrows() if r["wilcoxon_differs"]]
        out.append(f"Wilcoxon signed-rank with Holm's correction (α = {v.alpha:g}) tells {best} "
                   + (f"apart from {names(told)}" if told else "apart from no other strategy")
                   + f"; the Nemenyi critical difference is {v.cd:.2f} ranks.")
        c = v.costs.set_index("strategy")
        cost, noise = c["fit_seconds"], c["fit_seconds_se"].fillna(0.0)
        near = [r["b"] for _, r in vs_best.iterrows() if r["verdict"] == EQUIVALENT]
        cheaper = [s for s in near if cost[best] - cost[s] > 2 * np.hypot(noise[best], noise[s])]
        if cheaper:
            cheapest = min(cheaper, key=lambda s: (cost[s], s))
            out.append(f"Practically equivalent to {best} and cheaper to fit beyond the timing "
                       f"noise: {names(cheaper)}; the cheapest, {cheapest}, takes "
                       f"{_seconds(cost[cheapest])} per fit against {_seconds(cost[best])} "
                       "(geometric means over datasets).")
        elif near:
            out.append(f"None of what is practically equivalent to {best} is cheaper to fit "
                       "beyond the timing noise.")
    if v.pareto is not None:
        allp = v.pareto[(v.pareto["scope"] == "all datasets") & (v.pareto["cost_kind"] == "fit")]
        if len(allp):
            on = allp.loc[allp["on_front"], "strategy"].tolist()
            dom = [f"{r['strategy']} (by {r['dominated_by']})" for _, r in
                   allp[~allp["on_front"]].iterrows()]
            out.append(f"Average rank against fit time (geometric mean over datasets; costs "
                       f"within twice their timing noise count as equal): on the front "
                       f"{names(on)}" + (f"; dominated: {'; '.join(dom)}." if dom
                                         else "; none is dominated."))
    return out + notes(v) + left_out(v)


def summary(v: Verdict) -> list[str]:
    """The bottom line, then the details: every sentence of the short answer."""
    return bottom_line(v) + details(v)
