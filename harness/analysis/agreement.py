"""Do two results folders agree? Did the scores reproduce, and how did the timings move?

Cells are matched first by cell key (same data, estimator, split, metrics, measurement
settings and library versions), then — for the cells left over — by their identity
(dataset, strategy, repeat, fold), which is how a cell is found again after something its key
hashes has changed, e.g. a library upgrade. For every identity match the likely reason the keys
differ is named.

A score *differs* when, for a matched cell that succeeded in both folders and a metric both
have, ``|score_B − score_A| > tolerance × s``, where ``s`` is the fold-to-fold standard
deviation of that metric on that dataset in folder A (the reference), pooled over strategies:
``s = sqrt(mean over strategies of var(scores over repeats × folds, ddof=1))``. The natural
spread of scores between folds is the yardstick: a change well inside it is not a finding,
one beyond it is. When ``s`` is 0 (every strategy scored the same on every fold) any change
beyond floating-point noise differs. A cell that has a score in one folder and an error in the
other also differs; a timeout is a timing matter and is only listed.

Timings (fit and prediction wall time) are reported as ratios B / A and never make a
comparison fail: they depend on the machine and its load.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness.analysis.results import metric_columns, ok_cells, pooled_sd
from harness.errors import UserError
from harness.work_units import ERROR, OK

__all__ = ["Comparison", "agreement", "DEFAULT_SD_LIMIT"]

DEFAULT_SD_LIMIT = 1.0
IDENTITY = ["dataset", "strategy", "repeat", "fold"]
_FLOAT_NOISE = 1e-12


@dataclass
class Comparison:
    """Outcome of :func:`compare_folders`.

    Attributes
    ----------
    a, b : Path
        The reference folder and the folder compared with it.
    tolerance : float
        Multiple of the fold-to-fold standard deviation a score may move.
    cells_a, cells_b : int
        Cells in each folder's latest plan.
    by_key, by_identity : int
        Cells matched by cell key, and by (dataset, strategy, repeat, fold) with different keys.
    key_reasons : DataFrame
        For identity matches: ``reason, cells``.
    scores : DataFrame
        One row per matched cell × metric scored in both: ``dataset, strategy, repeat, fold,
        metric, matched, a, b, diff, sd, limit, differs`` (``diff`` is b − a).
    groups : DataFrame
        Per dataset × strategy × metric: ``cells, mean_diff, max_abs_diff, sd, max_in_sd,
        differs`` (cells beyond the tolerance).
    timing : DataFrame
        Per dataset × strategy: ``cells, fit_ratio, predict_ratio`` (medians of B / A).
    status_changes : DataFrame
        Matched cells whose status differs: ``dataset, strategy, repeat, fold, status_a,
        status_b, message, differs``.
    only_a, only_b : DataFrame
        Cells of one folder only: ``dataset, strategy, repeat, fold, status``.
    """

    a: Path
    b: Path
    tolerance: float
    cells_a: int = 0
    cells_b: int = 0
    by_key: int = 0
    by_identity: int = 0
    key_reasons: pd.DataFrame = field(default_factory=pd.DataFrame)
    scores: pd.DataFrame = field(default_factory=pd.DataFrame)
    groups: pd.DataFrame = field(default_factory=pd.DataFrame)
    timing: pd.DataFrame = field(default_factory=pd.DataFrame)
    status_changes: pd.DataFrame = field(default_factory=pd.DataFrame)
    only_a: pd.DataFrame = field(default_factory=pd.DataFrame)
    only_b: pd.DataFrame = field(default_factory=pd.DataFrame)

    @property
    def differing_scores(self) -> int:
        return int(self.scores["differs"].sum()) if not self.scores.empty else 0

    @property
    def differing_status(self) -> int:
        return (int(self.status_changes["differs"].sum())
                if not self.status_changes.empty else 0)

    @property
    def differs(self) -> bool:
        return self.differing_scores > 0 or self.differing_status > 0

    @property
    def exit_status(self) -> int:
        return 1 if self.differs else 0


def _noise(frame: pd.DataFrame, metrics: list[str]) -> pd.DataFrame:
    """Pooled fold-to-fold sd per dataset × metric over the successful cells of ``frame``."""
    rows = []
    for ds, part in ok_cells(frame).groupby("dataset", sort=False):
        for m in metrics:
            if m not in part or part[m].notna().sum() < 2:
                continue
            rows.append({"dataset": ds, "metric": m, "sd": pooled_sd(part, m)})
    return pd.DataFrame(rows, columns=["dataset", "metric", "sd"])


def _reasons(pairs: pd.DataFrame, prov_a: dict, prov_b: dict) -> pd.DataFrame:
    """Why the keys of identity-matched cells differ, as far as the stored fields tell."""
    libs_a, libs_b = prov_a.get("libraries", {}), prov_b.get("libraries", {})
    changed = [f"{lib} {libs_a.get(lib, '?')} → {libs_b.get(lib, '?')}"
               for lib in ("scikit-learn", "numpy")
               if libs_a.get(lib) != libs_b.get(lib)]
    reasons = []
    for _, r in pairs.iterrows():
        why = []
        if r["fingerprint_a"] != r["fingerprint_b"]:
            why.append("data content differs")
        if r["method_a"] != r["method_b"]:
            why.append(f"method {r['method_a']} → {r['method_b']}")
        if (r["n_train_a"], r["n_test_a"]) != (r["n_train_b"], r["n_test_b"]):
            why.append("split sizes differ")
        if changed:
            why.append("library versions differ: " + ", ".join(changed))
        reasons.append("; ".join(why) if why else
                       "estimator parameters, split rows, metrics or measurement settings differ")
    if not reasons:
        return pd.DataFrame(columns=["reason", "cells"])
    return (pd.Series(reasons, name="reason").value_counts().rename("cells").reset_index())


def agreement(a: Path, fa: pd.DataFrame, prov_a: dict, b: Path, fb: pd.DataFrame,
              prov_b: dict, tolerance: float = DEFAULT_SD_LIMIT) -> Comparison:
    """Match the cells of two results frames (folders ``a`` and ``b``, with the provenance of
    their latest runs) and compare their scores and timings.

    Folder ``a`` is the reference: its fold-to-fold spread sets the yardstick. Raises
    `UserError` for a negative tolerance, or folders that share no cell at all.
    """
    if not np.isfinite(tolerance) or tolerance < 0:
        raise UserError(f"--sd-limit must be a number of at least 0, got {tolerance}")
    c = Comparison(a, b, tolerance, cells_a=len(fa), cells_b=len(fb))
    if fa.empty or fb.empty:
        raise UserError(f"{a if fa.empty else b} has no cells to compare; run a suite into it "
                        "first")
    by_key = fa.merge(fb, on="key", suffixes=("_a", "_b"))
    for col in IDENTITY:
        by_key[col] = by_key[f"{col}_a"]
    rest_a = fa[~fa["key"].isin(by_key["key"])]
    rest_b = fb[~fb["key"].isin(by_key["key"])]
    by_id = rest_a.merge(rest_b, on=IDENTITY, suffixes=("_a", "_b"))
    c.by_key, c.by_identity = len(by_key), len(by_id)
    if c.by_key + c.by_identity == 0:
        raise UserError(f"{a} and {b} share no cell (no common cell key and no common "
                        "dataset, strategy, repeat and fold); nothing to compare")
    c.key_reasons = _reasons(by_id, prov_a, prov_b)
    matched = pd.concat([by_key.assign(matched="key"), by_id.assign(matched="identity")],
                        ignore_index=True)
    ida = set(map(tuple, matched[IDENTITY].to_numpy()))
    c.only_a = _only(fa, ida)
    c.only_b = _only(fb, ida)

    metrics = [m for m in metric_columns(fa) if m in set(metric_columns(fb))]
    noise = _noise(fa, metrics).set_index(["dataset", "metric"])["sd"]
    both_ok = matched[(matched["status_a"] == OK) & (matched["status_b"] == OK)]
    rows = []
    for m in metrics:
        va, vb = both_ok[f"{m}_a"], both_ok[f"{m}_b"]
        have = va.notna() & vb.notna()
        part = both_ok[have]
        for (_, r), x, y in zip(part.iterrows(), va[have], vb[have]):
            sd = noise.get((r["dataset"], m), np.nan)
            limit = tolerance * sd if np.isfinite(sd) else 0.0
            diff = float(y) - float(x)
            rows.append({**{k: r[k] for k in IDENTITY}, "metric": m, "matched": r["matched"],
                         "a": float(x), "b": float(y), "diff": diff, "sd": sd, "limit": limit,
                         "differs": bool(abs(diff) > limit + _FLOAT_NOISE)})
    c.scores = pd.DataFrame(rows, columns=[*IDENTITY, "metric", "matched", "a", "b", "diff",
                                           "sd", "limit", "differs"])
    c.groups = _groups(c.scores)
    c.timing = _timing(both_ok)
    changed = matched[matched["status_a"] != matched["status_b"]]
    c.status_changes = pd.DataFrame({
        **{k: changed[k] for k in IDENTITY}, "status_a": changed["status_a"],
        "status_b": changed["status_b"],
        "message": [mb if sb != OK else ma for ma, mb, sb in
                    zip(changed["message_a"], changed["message_b"], changed["status_b"])],
        "differs": [{sa, sb} == {OK, ERROR} for sa, sb in
                    zip(changed["status_a"], changed["status_b"])]},
        columns=[*IDENTITY, "status_a", "status_b", "message", "differs"])
    return c


def _only(frame: pd.DataFrame, matched: set) -> pd.DataFrame:
    keep = [tuple(r) not in matched for r in frame[IDENTITY].to_numpy()]
    return frame.loc[keep, [*IDENTITY, "status"]].reset_index(drop=True)


def _groups(scores: pd.DataFrame) -> pd.DataFrame:
    cols = ["dataset", "strategy", "metric", "cells", "mean_diff", "max_abs_diff", "sd",
            "max_in_sd", "differs"]
    if scores.empty:
        return pd.DataFrame(columns=cols)
    g = scores.assign(abs_diff=scores["diff"].abs()).groupby(
        ["dataset", "strategy", "metric"], sort=False).agg(
        cells=("diff", "size"), mean_diff=("diff", "mean"), max_abs_diff=("abs_diff", "max"),
        sd=("sd", "first"), differs=("differs", "sum")).reset_index()
    with np.errstate(divide="ignore", invalid="ignore"):
        g["max_in_sd"] = np.where(g["max_abs_diff"] == 0, 0.0, g["max_abs_diff"] / g["sd"])
    return g[cols]


def _timing(both_ok: pd.DataFrame) -> pd.DataFrame:
    cols = ["dataset", "strategy", "cells", "fit_ratio", "predict_ratio"]
    if both_ok.empty:
        return pd.DataFrame(columns=cols)
    t = both_ok.assign(fit_ratio=both_ok["fit_seconds_b"] / both_ok["fit_seconds_a"],
                       predict_ratio=both_ok["predict_seconds_b"] / both_ok["predict_seconds_a"])
    g = t.groupby(["dataset", "strategy"], sort=False).agg(
        cells=("fit_ratio", "size"), fit_ratio=("fit_ratio", "median"),
        predict_ratio=("predict_ratio", "median")).reset_index()
    return g[cols]
