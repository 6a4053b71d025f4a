"""The outcome of ``woodlot agree`` as text: what was matched, which scores moved beyond the
noise, how the timings moved, and the one-line outcome. Every listing cut short says how many
rows it leaves out."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.analysis.agreement import Comparison
from harness.analysis.results import geometric_mean
from harness.report.render import markdown_table


def listing(frame: pd.DataFrame, limit: int) -> list[str]:
    """The first ``limit`` rows as a Markdown table, and a line saying how many were left
    out when there are more."""
    lines = [markdown_table(frame.head(limit))]
    if len(frame) > limit:
        lines.append(f"({len(frame) - limit} more rows not shown: {limit} of {len(frame)} "
                     "listed)")
    return lines


def render(c: Comparison, limit: int = 20) -> str:
    """The comparison as text (Markdown tables), ending with the one-line outcome."""
    other = int(c.other_rows["cells"].sum()) if not c.other_rows.empty else 0
    lines = [f"Reference A: {c.a}   compared B: {c.b}",
             f"A score differs when |B − A| > {c.tolerance:g} × the fold-to-fold standard "
             "deviation of its metric on its dataset in A (pooled over strategies).",
             "",
             f"Cells: {c.cells_a} in A, {c.cells_b} in B; {c.by_key} matched by cell key, "
             f"{c.by_identity} by dataset, strategy, repeat and fold with different keys; "
             f"{len(c.only_a)} only in A, {len(c.only_b)} only in B."]
    if not c.key_reasons.empty:
        lines += ["", "Why keys differ for the cells matched by identity:", "",
                  *listing(c.key_reasons, limit)]
    if other:
        lines += ["", f"Not compared: {other} matched cell(s) were trained and tested on other "
                  "rows in B (different splits: another seed, number of folds or split "
                  "scheme), so their scores cannot be compared cell by cell:", "",
                  *listing(c.other_rows, limit)]
    n = len(c.scores)
    worst = c.groups.sort_values("max_in_sd", ascending=False) if not c.groups.empty else None
    lines += ["", f"Scores: {c.differing_scores} of {n} cell scores differ beyond the tolerance"
              + (f"; largest change {worst['max_in_sd'].iloc[0]:.3g} sd" if worst is not None
                 and np.isfinite(worst["max_in_sd"].iloc[0]) else "") + "."]
    if worst is not None:
        names = {"differs": "cells beyond", "max_in_sd": "max |Δ| / sd",
                 "max_abs_diff": "max |Δ|", "mean_diff": "mean Δ (B − A)"}
        beyond = worst[worst["differs"] > 0]
        moved = worst[worst["max_abs_diff"] > 0]
        if not beyond.empty:
            lines += ["", *listing(beyond.rename(columns=names), limit)]
        elif not moved.empty:
            lines += ["", f"The largest changes, all within the tolerance (dataset × strategy × "
                      f"metric groups with any change: {len(moved)}):", "",
                      *listing(moved.rename(columns=names), 5)]
    if not c.status_changes.empty:
        lines += ["", f"Cells whose status changed ({c.differing_status} between a score and "
                  "an error count as differing; timeouts are a timing matter):", "",
                  *listing(c.status_changes, limit)]
    if not c.timing.empty:
        t = c.timing
        lines += ["", f"Timing (never fails the comparison): median ratio B / A of fit time, "
                  f"geometric mean over dataset × strategy {geometric_mean(t['fit_ratio']):.3g} "
                  f"(range {t['fit_ratio'].min():.3g}–{t['fit_ratio'].max():.3g}); prediction "
                  f"time {geometric_mean(t['predict_ratio']):.3g}."]
        far = t[(t["fit_ratio"] > 2) | (t["fit_ratio"] < 0.5)]
        if not far.empty:
            lines += ["", "Fit time more than doubled or halved (often a busy machine, not a "
                      "change in the method):", "", *listing(far, limit)]
    for name, only in (("A", c.only_a), ("B", c.only_b)):
        if not only.empty:
            g = only.groupby(["dataset", "strategy"], sort=False).size().rename("cells")
            lines += ["", f"Only in {name} ({len(only)} cells):", "",
                      *listing(g.reset_index(), limit)]
    lines += ["", ("DIFFERENT: " if c.differs else "SAME: ")
              + (f"{c.differing_scores} cell score(s) beyond {c.tolerance:g} sd"
                 + (f" and {c.differing_status} cell(s) with a score in one folder and an error "
                    "in the other" if c.differing_status else "")
                 if c.differs else f"every shared score is within {c.tolerance:g} sd")
              + f" ({c.compared} cells compared"
              + (f"; {other} on other rows not compared" if other else "") + ")."]
    return "\n".join(lines)
