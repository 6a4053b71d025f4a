"""The verdict in plain words: the sentences the terminal prints and the report opens with,
and the caveats about what the tests can tell."""

from __future__ import annotations

import numpy as np

from harness.analysis.verdict import Verdict
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
            out.append(f"The across-dataset tests need at least two datasets and two strategies "
                       f"scored on all of them; here there are {n} and {k}. Read the "
                       "per-dataset tables.")
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
        out.append(f"Only {n} datasets: the across-dataset tests have little power and their "
                   "verdicts mean little; read the per-dataset tables.")
    if v.friedman.f_p > v.alpha:
        out.append(f"The Friedman test does not reject that all {k} strategies rank alike "
                   f"(Iman–Davenport F = {v.friedman.f:.2f}, {fmt_p(v.friedman.f_p)}): the "
                   "differences in average rank may be chance, and the Nemenyi post-hoc "
                   "comparison should not be read as a finding.")
    return out


def left_out(v: Verdict) -> list[str]:
    return [s[0].upper() + s[1:] + "." for s in v.left_out]


def _count(n, word: str, plural: str = "s") -> str:
    return f"{int(n)} {word}{'' if int(n) == 1 else plural}"


def _seconds(s: float) -> str:
    return f"{s:.3g} s" if np.isfinite(s) else "? s"


def summary(v: Verdict) -> list[str]:
    """The verdict in plain words, one sentence per item, figures included."""
    out: list[str] = []
    if v.ranks is None or v.ranks.empty:
        return ["No strategy has a successful cell, so there is nothing to compare."]
    n, k = v.matrix.shape
    best = v.best
    if not v.tested:
        for ds, part in v.intervals.dropna(subset=["mean"]).groupby("dataset", sort=False):
            top = part[part["best"]].iloc[0]
            others = [s for s in part.loc[part["tied_with_best"] & ~part["best"], "strategy"]]
            out.append(f"On {ds} ({metric_label(top['metric'])}), {top['strategy']} has the "
                       f"best mean score ({number(as_read(top['metric'], top['mean']))})" + (f"; tied with it (corrected t-test, α = "
                                                 f"{v.alpha:g}): {names(others)}." if others
                                                 else "; no other strategy is tied with it."))
        return out + notes(v) + left_out(v)
    r = v.ranks
    out.append(f"{best} has the best average rank ({r[best]:.2f} over {n} datasets, each "
               f"ranked on its first metric; 1 = best of {k}).")
    f = v.friedman
    rejects, chi2_rejects = f.f_p <= v.alpha, f.chi2_p <= v.alpha
    out.append(f"The Friedman test {'rejects' if rejects else 'does not reject'} that "
               f"all {k} strategies rank alike (Iman–Davenport F = {f.f:.2f}, {fmt_p(f.f_p)}"
               + (f"; its chi-square form {'does' if chi2_rejects else 'does not'} "
                  f"(χ² = {f.chi2:.2f}, {fmt_p(f.chi2_p)})" if rejects != chi2_rejects else "")
               + ").")
    vs_best = v.across[v.across["a"] == best]
    tied = [(row["b"], row["p_holm"]) for _, row in vs_best.iterrows()
            if not row["wilcoxon_differs"]]
    beaten = [(row["b"], row["p_holm"]) for _, row in vs_best.iterrows()
              if row["wilcoxon_differs"]]
    parts = []
    if tied:
        first, rest = tied[0], tied[1:]
        parts.append(f"statistically tied with {first[0]} (Wilcoxon–Holm {fmt_p(first[1])})"
                     + "".join(f", {s} ({fmt_p(p)})" for s, p in rest))
    if beaten:
        parts.append("better than " + ", ".join(f"{s} ({fmt_p(p)})" for s, p in beaten))
    out.append("By the Wilcoxon signed-rank test with Holm's correction it is "
               + "; and ".join(parts) + ".")
    if len(vs_best):
        runner = vs_best.iloc[0]
        out.append(f"Against the runner-up {runner['b']}, dataset by dataset (corrected t-test, "
                   f"α = {v.alpha:g}): {_count(runner['wins'], 'win')}, "
                   f"{_count(runner['ties'], 'tie')}, {_count(runner['losses'], 'loss', 'es')}.")
    nem = [row["b"] for _, row in vs_best.iterrows() if row["nemenyi_differs"]]
    out.append(f"By the Nemenyi critical difference ({v.cd:.2f} ranks at α = {v.alpha:g}) it "
               + (f"differs from {names(nem)}." if nem else "differs from no other strategy."))
    cost = v.costs.set_index("strategy")["fit_seconds"]
    if v.powerless:  # "tied" would say nothing: use the per-dataset tests instead
        never_worse = [row["b"] for _, row in vs_best.iterrows() if row["wins"] == 0]
        cheapest = min([best] + never_worse, key=lambda s: (cost.get(s, np.inf), s))
        if not never_worse:
            out.append(f"Every other strategy is significantly worse than {best} on at least "
                       f"one dataset (corrected t-test); {best} takes {_seconds(cost[best])} "
                       "per fit (geometric mean over datasets).")
        elif cheapest == best:
            out.append(f"{names(never_worse)} {'is' if len(never_worse) == 1 else 'are'} never "
                       f"significantly worse than {best} on a dataset (corrected t-test), but "
                       f"not cheaper to fit; {best} takes {_seconds(cost[best])} per fit "
                       "(geometric mean over datasets).")
        else:
            out.append(f"The cheapest strategy never significantly worse than {best} on a "
                       f"dataset (corrected t-test) is {cheapest} at {_seconds(cost[cheapest])} "
                       f"per fit against {_seconds(cost[best])} (geometric means over "
                       "datasets).")
        group = []
    else:
        group = [best] + [s for s, _ in tied]
        cheapest = min(group, key=lambda s: (cost.get(s, np.inf), s))
    if not group:
        pass
    elif cheapest == best:
        out.append(f"No strategy tied with it is cheaper to fit: {best} takes "
                   f"{_seconds(cost[best])} per fit (geometric mean over datasets).")
    else:
        out.append(f"The cheapest strategy tied with the best is {cheapest} at "
                   f"{_seconds(cost[cheapest])} per fit against {_seconds(cost[best])} for "
                   f"{best} (geometric means over datasets).")
    if v.pareto is not None:
        allp = v.pareto[(v.pareto["scope"] == "all datasets") & (v.pareto["cost_kind"] == "fit")]
        if len(allp):
            on = allp.loc[allp["on_front"], "strategy"].tolist()
            dom = [f"{r['strategy']} (by {r['dominated_by']})" for _, r in
                   allp[~allp["on_front"]].iterrows()]
            out.append(f"On the average-rank against fit-time front: {names(on)}"
                       + (f"; dominated: {'; '.join(dom)}." if dom else "; none is dominated."))
    return out + notes(v) + left_out(v)
