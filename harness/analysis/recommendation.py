"""The recommendation of ``woodlot choose`` for one table: the cheapest strategy to train whose
probability of being practically equivalent to the best, or better, reaches the certainty.

"The best" is not fixed in advance: all strategies' mean scores are sampled jointly from the
correlated t posterior (`harness.analysis.per_dataset`), and a strategy's probability is the
share of samples in which it is within the region of practical equivalence of that sample's
best. This corrects the selection effect of testing everything against the strategy with the
best sample mean. When no strategy reaches the certainty the comparison is undecided, and the
recommendation says why and roughly what budget would decide it. The ensemble-size curves and
the budget plan are read here too.
"""

from __future__ import annotations

import json
from dataclasses import asdict, dataclass, field
from typing import Any

import pandas as pd

from harness.analysis.curves import CurveAdvice, curve_advice
from harness.analysis.results import ok_cells
from harness.analysis.verdict import Verdict

SMALL_ROWS = 300   # fewer rows than this: the tests rarely separate anything (common practice)
SMALL_TEST = 60    # fewer test rows per fold than this: likewise


@dataclass
class Recommendation:
    """What `choose` found; ``to_json()`` is what ``recommendation.json`` holds. ``pick`` is
    empty when the comparison is undecided (then ``undecided`` says why and ``more_repeats``
    and ``more_seconds`` what would settle it, 0 when more repeats would not)."""

    dataset: str
    metric: str
    certainty: float
    margin: float
    best: str
    near: list[str]
    pick: str
    cheapest_to_train: str
    cheapest_to_predict: str
    strategies: list[dict[str, Any]]
    curves: list[CurveAdvice]
    small: bool
    all_near: bool
    plan: dict[str, Any]
    budget_seconds: float
    undecided: str = ""
    more_repeats: int = 0
    more_seconds: float = 0.0
    cores: list[dict[str, Any]] = field(default_factory=list)
    tuning: list[str] = field(default_factory=list)  # what tuning the leaders did, in words
    left_out: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    used_seconds: float = 0.0
    folder: str = ""
    sentences: list[str] = field(default_factory=list)

    def to_json(self) -> str:
        return json.dumps(asdict(self), indent=2, default=float)


def recommend(frame: pd.DataFrame, v: Verdict, dataset: str, n_rows: int,
              plan: dict[str, Any], budget_seconds: float) -> Recommendation:
    """The recommendation for ``dataset`` from its results frame and verdict."""
    ok = ok_cells(frame)
    standing = v.standing(dataset)
    best, near = standing["best"], standing["near"]
    iv = v.intervals[(v.intervals["dataset"] == dataset) & v.intervals["mean"].notna()]
    iv = iv.sort_values("mean", ascending=False, kind="stable")
    pairs = v.pairs[v.pairs["dataset"] == dataset]
    rows = []
    for _, r in iv.iterrows():
        rows.append({"strategy": r["strategy"], "family": r["family"], "mean": float(r["mean"]),
                     "low": float(r["low"]), "high": float(r["high"]), "cells": int(r["cells"]),
                     "p_near_best": float(r["p_near_best"]), "standing": r["standing"],
                     "fit_seconds": float(r["fit_seconds"]),
                     "predict_ms_per_1000_rows": float(r["predict_ms_per_1000_rows"])})
    metric = v.primary[dataset]
    n_test = float(ok["n_test"].mean())
    rec = Recommendation(
        dataset=dataset, metric=metric, certainty=v.certainty,
        margin=float(iv["margin"].iloc[0]), best=best, near=near,
        pick=standing["cheapest_to_fit"] if near else "",
        cheapest_to_train=standing["cheapest_to_fit"],
        cheapest_to_predict=standing["cheapest_to_predict"], strategies=rows,
        curves=curve_advice(ok[ok["dataset"] == dataset], metric),
        small=n_rows < SMALL_ROWS or n_test < SMALL_TEST,
        all_near=len(near) == len(rows) and len(rows) > 2, plan=plan,
        budget_seconds=budget_seconds)
    if not near:
        _undecided(rec, pairs, ok[ok["dataset"] == dataset])
    return rec


def _undecided(rec: Recommendation, pairs: pd.DataFrame, ok: pd.DataFrame) -> None:
    """Why no strategy reached the certainty, and roughly what budget would settle it: the
    repeats the best's undecided pairs need (their largest), times the time of one repeat."""
    top = max(rec.strategies, key=lambda r: r["p_near_best"])
    rec.undecided = (f"no strategy is practically equivalent to the best (or better) with "
                     f"{rec.certainty:.0%} probability; the highest is {top['strategy']} at "
                     f"{top['p_near_best']:.0%}")
    mine = pairs[((pairs["a"] == rec.best) | (pairs["b"] == rec.best))
                 & (pairs["verdict"] == "undecided")]
    reps = mine["repeats_needed"].dropna().astype(int).tolist()
    if reps and min(reps) > 0:  # 0: more repeats cannot decide that pair
        rec.more_repeats = max(reps)
        per_repeat = float(ok.groupby("repeat")["seconds"].sum().mean()) if len(ok) else 0.0
        jobs = max(1, int(rec.plan.get("jobs", 1)))
        rec.more_seconds = rec.more_repeats * per_repeat / jobs * 1.15


def plan_budget(costs: dict[str, float], seconds_left: float, jobs: int, folds: int,
                max_repeats: int, families: dict[str, str] | None = None,
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
        for repeats in range(max_repeats, 0, -1):
            cells = repeats * folds - done_cells
            estimate = sum(costs[s] for s in kept) * cells / max(1, jobs) * 1.15
            if estimate <= seconds_left:
                return repeats, kept, estimate
        cheapest_of_family = {}
        for s in kept:  # kept is sorted cheapest first
            cheapest_of_family.setdefault(families.get(s, s), s)
        spare = [s for s in kept if s not in cheapest_of_family.values()]
        kept.remove(spare[-1] if spare else kept[-1])
    return 0, [], 0.0
