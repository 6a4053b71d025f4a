"""The outcome of ``woodlot agree`` as text: what was matched, which scores moved beyond the
noise, how the timings moved, and the one-line outcome."""

from __future__ import annotations

import numpy as np

from harness.analysis.agreement import Comparison
from harness.analysis.results import geometric_mean
from harness.report.render import markdown_table


def render(c: Comparison, limit: int = 20) -> str:
    """The comparison as text (Markdown tables), ending with the one-line outcome."""
    lines = [f"Reference A: {c.a}   compared B: {c.b}",
             f"A score differs when |B − A| > {c.tolerance:g} × the fold-to-fold standard "
             "deviation of its metric on its dataset in A (pooled over strategies).",
             "",
             f"Cells: {c.cells_a} in A, {c.cells_b} in B; {c.by_key} matched by cell key, "
             f"{c.by_identity} by dataset, strategy, repeat and fold with different keys; "
             f"{len(c.only_a)} only in A, {len(c.only_b)} only in B."]
    if not c.key_reasons.empty:
        lines += ["", "Why keys differ for the cells matched by identity:", "",
                  markdown_table(c.key_reasons)]
    n = len(c.scores)
    worst = c.groups.sort_values("max_in_sd", ascending=False) if not c.groups.empty else None
    lines += ["", f"Scores: {c.differing_scores} of {n} cell scores differ beyond the tolerance"
              + (f"; largest change {worst['max_in_sd'].iloc[0]:.3g} sd" if worst is not None
                 and np.isfinite(worst["max_in_sd"].iloc[0]) else "") + "."]
    if worst is not None:
        show = worst[worst["differs"] > 0]
        if show.empty:
            show = worst[worst["max_abs_diff"] > 0].head(5)
        if not show.empty:
            lines += ["", markdown_table(show.head(limit).rename(columns={
                "differs": "cells beyond", "max_in_sd": "max |Δ| / sd",
                "max_abs_diff": "max |Δ|", "mean_diff": "mean Δ (B − A)"}))]
            if len(show) > limit:
                lines.append(f"... and {len(show) - limit} more rows")
    if not c.status_changes.empty:
        lines += ["", f"Cells whose status changed ({c.differing_status} between a score and "
                  "an error count as differing; timeouts are a timing matter):", "",
                  markdown_table(c.status_changes.head(limit))]
    if not c.timing.empty:
        t = c.timing
        lines += ["", f"Timing (never fails the comparison): median ratio B / A of fit time, "
                  f"geometric mean over dataset × strategy {geometric_mean(t['fit_ratio']):.3g} "
                  f"(range {t['fit_ratio'].min():.3g}–{t['fit_ratio'].max():.3g}); prediction "
                  f"time {geometric_mean(t['predict_ratio']):.3g}."]
        far = t[(t["fit_ratio"] > 2) | (t["fit_ratio"] < 0.5)]
        if not far.empty:
            lines += ["", "Fit time more than doubled or halved (often a busy machine, not a "
                      "change in the method):", "", markdown_table(far.head(limit))]
            if len(far) > limit:
                lines.append(f"... and {len(far) - limit} more rows")
    for name, only in (("A", c.only_a), ("B", c.only_b)):
        if not only.empty:
            g = only.groupby(["dataset", "strategy"], sort=False).size().rename("cells")
            lines += ["", f"Only in {name}:", "", markdown_table(g.reset_index().head(limit))]
    lines += ["", ("DIFFERENT: " if c.differs else "SAME: ")
              + (f"{c.differing_scores} cell score(s) beyond {c.tolerance:g} sd"
                 + (f" and {c.differing_status} cell(s) with a score in one folder and an error "
                    "in the other" if c.differing_status else "")
                 if c.differs else f"every shared score is within {c.tolerance:g} sd")
              + f" ({c.by_key + c.by_identity} cells compared)."]
    return "\n".join(lines)
