"""The recommendation of ``woodlot choose`` for one table: the best strategy and those not
told apart from it come from the verdict (`harness.analysis.verdict`), the pick is the
cheapest of those to train; the ensemble-size curves and the budget plan are read here too.
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
    """What `choose` found; ``to_json()`` is what ``recommendation.json`` holds."""

    dataset: str
    metric: str
    alpha: float
    best: str
    tied: list[str]
    pick: str
    cheapest_to_train: str
    cheapest_to_predict: str
    strategies: list[dict[str, Any]]
    curves: list[CurveAdvice]
    small: bool
    all_tied: bool
    plan: dict[str, Any]
    budget_seconds: float
    cores: list[dict[str, Any]] = field(default_factory=list)
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
    best, tied = standing["best"], standing["tied"]
    iv = v.intervals[(v.intervals["dataset"] == dataset) & v.intervals["mean"].notna()]
    iv = iv.sort_values("mean", ascending=False, kind="stable")
    pairs = v.pairs[v.pairs["dataset"] == dataset]
    rows = []
    for _, r in iv.iterrows():
        name = r["strategy"]
        p = pairs[((pairs["a"] == best) & (pairs["b"] == name))
                  | ((pairs["b"] == best) & (pairs["a"] == name))]
        rows.append({"strategy": name, "family": r["family"], "mean": float(r["mean"]),
                     "low": float(r["low"]), "high": float(r["high"]), "cells": int(r["cells"]),
                     "p_vs_best": None if p.empty else float(p["p"].iloc[0]),
                     "tied_with_best": bool(r["best"] or r["tied_with_best"]),
                     "fit_seconds": float(r["fit_seconds"]),
                     "predict_ms_per_1000_rows": float(r["predict_ms_per_1000_rows"])})
    metric = v.primary[dataset]
    n_test = float(ok["n_test"].mean())
    train = standing["cheapest_to_fit"]
    return Recommendation(
        dataset=dataset, metric=metric, alpha=v.alpha, best=best, tied=tied,
        pick=train if tied else best, cheapest_to_train=train,
        cheapest_to_predict=standing["cheapest_to_predict"], strategies=rows,
        curves=curve_advice(ok[ok["dataset"] == dataset], metric),
        small=n_rows < SMALL_ROWS or n_test < SMALL_TEST,
        all_tied=len(tied) + 1 == len(rows) and len(rows) > 2, plan=plan,
        budget_seconds=budget_seconds)


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
