"""``woodlot check``: validate a suite and describe its plan without fitting anything."""

from __future__ import annotations

import pandas as pd

from harness.execution.memory import size_text
from harness.plan import make_plan
from harness.report.render import markdown_table
from harness.suite import AUTO, HOLDOUT, KFOLD, load_suite


def check_suite(path) -> str:
    """The plan of the suite at ``path`` as text (raises `UserError` on bad input)."""
    suite = load_suite(path)
    plan = make_plan(suite)
    p = suite.protocol
    if p.splits == KFOLD:
        how = f"{p.repeats} × {p.folds}-fold cross-validation"
    elif p.splits == HOLDOUT:
        how = f"{p.repeats} holdout split(s), " + (f"{p.train_rows} training rows"
                                                   if p.train_rows else
                                                   f"test fraction {p.test_fraction}")
    else:
        how = "the datasets' published splits"
    limit = "none" if p.cell_timeout is None else f"{p.cell_timeout:g} s"
    memory = {None: "none", AUTO: "auto (share of the free memory per worker)"}.get(
        p.cell_memory) or size_text(p.cell_memory)
    lines = [f"suite '{suite.name}': {suite.description}".rstrip(": "),
             f"protocol: {how}, seed {p.seed}; cell time limit {limit}, memory limit {memory}",
             ""]
    ds = pd.DataFrame([d.summary() for d in plan.datasets.values()])
    ds["metrics"] = [", ".join(p.metrics[t]) for t in ds["task"]]
    ds["splits"] = [len(plan.splits[n]) for n in ds["dataset"]]
    lines.append("Datasets\n" + markdown_table(ds.drop(columns=["fingerprint"])))
    st = pd.DataFrame([{"strategy": s.name, "family": s.family, "method": s.method,
                        "params": ", ".join(f"{k}={v}" for k, v in s.params.items())
                        + "".join(f"; {t}: " + ", ".join(f"{k}={v}" for k, v in ps.items())
                                  for t, ps in s.task_params.items()),
                        "tuned": _tuning_text(s)}
                       for s in suite.strategies])
    if not any(s.tuning for s in suite.strategies):
        st = st.drop(columns=["tuned"])
    lines.append("Strategies\n" + markdown_table(st))
    for strategy, dataset in plan.skipped:
        lines.append(f"note: strategy '{strategy}' has no estimator for dataset '{dataset}'s "
                     "task; skipped")
    tuned = ""
    if plan.searches:
        trials = sum(x.tuning.planned_trials for x in plan.searches)
        tuned = (f", {len(plan.searches)} of them tuned (up to {trials} trials on inner folds, "
                 "plus refits)")
    lines.append(f"{len(plan.keys)} cells ({len(plan.datasets)} datasets × "
                 f"{len(suite.strategies)} strategies × splits){tuned}; nothing was fitted.")
    return "\n".join(lines)


def _tuning_text(strategy) -> str:
    t = strategy.tuning
    if t is None:
        return ""
    space = "; ".join(f"{k} {r.text()}" for k, r in sorted(t.space.items()))
    for task, sp in t.task_space.items():
        space += "".join(f"; {k} {r.text()} ({task})" for k, r in sorted(sp.items()))
    return (f"{t.budget_text()} per outer fold, {t.search} search, {t.inner_folds} inner "
            f"folds: {space}")
