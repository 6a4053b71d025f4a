"""Do two results folders agree? Did the scores reproduce, and how did the timings move?

Cells are matched (in SQL, `harness.store.Store.match_cells`) first by cell key (same data,
estimator, split, metrics, measurement settings and library versions), then — for the cells
left over — by their identity (dataset, strategy, repeat, fold), which is how a cell is found
again after something its key hashes has changed, e.g. a library upgrade. For every identity
match the likely reason the keys differ is named.

Two cells trained and tested on different rows (another seed, fold count or split scheme:
split sizes differ, or the recorded splits do) cannot be compared score by score: they are
counted apart and left out. When every matched cell is such a pair, or nothing matches at all,
the folders are *not comparable* (`harness.errors.UserError`).

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

from harness.errors import UserError
from harness.store import CellMatch
from harness.work_units import ERROR, OK

__all__ = ["Comparison", "agreement", "check_sd_limit", "DEFAULT_SD_LIMIT"]

DEFAULT_SD_LIMIT = 1.0
IDENTITY = ["dataset", "strategy", "repeat", "fold"]
_FLOAT_NOISE = 1e-12


@dataclass
class Comparison:
    """Outcome of :func:`agreement`.

    Attributes
    ----------
    a, b : Path
        The reference folder and the folder compared with it.
    tolerance : float
        Multiple of the fold-to-fold standard deviation a score may move.
    cells_a, cells_b : int
        Cells in each folder's latest plan.
    by_key, by_identity : int
        Cells matched by cell key, and by (dataset, strategy, repeat, fold) with different keys
        (those on other rows included).
    other_rows : DataFrame
        Cells matched by identity but trained and tested on other rows, not compared: per
        dataset ``dataset, cells``.
    key_reasons : DataFrame
        For identity matches: ``reason, cells``.
    scores : DataFrame
        One row per compared cell × metric scored in both: ``dataset, strategy, repeat, fold,
        metric, matched, a, b, diff, sd, limit, differs`` (``diff`` is b − a).
    groups : DataFrame
        Per dataset × strategy × metric: ``cells, mean_diff, max_abs_diff, sd, max_in_sd,
        differs`` (cells beyond the tolerance).
    timing : DataFrame
        Per dataset × strategy: ``cells, fit_ratio, predict_ratio`` (medians of B / A).
    status_changes : DataFrame
        Compared cells whose status differs: ``dataset, strategy, repeat, fold, status_a,
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
    other_rows: pd.DataFrame = field(default_factory=pd.DataFrame)
    key_reasons: pd.DataFrame = field(default_factory=pd.DataFrame)
    scores: pd.DataFrame = field(default_factory=pd.DataFrame)
    groups: pd.DataFrame = field(default_factory=pd.DataFrame)
    timing: pd.DataFrame = field(default_factory=pd.DataFrame)
    status_changes: pd.DataFrame = field(default_factory=pd.DataFrame)
    only_a: pd.DataFrame = field(default_factory=pd.DataFrame)
    only_b: pd.DataFrame = field(default_factory=pd.DataFrame)

    @property
    def compared(self) -> int:
        """Matched cells trained and tested on the same rows."""
        return self.by_key + self.by_identity - int(self.other_rows["cells"].sum()
                                                    if not self.other_rows.empty else 0)

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


def _noise(scores_a: pd.DataFrame, metrics: list[str]) -> pd.Series:
    """Pooled fold-to-fold sd per (dataset, metric) over the successful cells of A (NaN
    where fewer than two cells have the metric)."""
    if scores_a.empty or not metrics:
        return pd.Series(dtype=float, index=pd.MultiIndex.from_tuples([], names=["dataset",
                                                                                  "metric"]))
    var = scores_a.groupby(["dataset", "strategy"], sort=False)[metrics].var(ddof=1)
    pooled = np.sqrt(var.groupby(level="dataset", sort=False).mean())
    pooled = pooled.where(scores_a.groupby("dataset", sort=False)[metrics].count() >= 2)
    return pooled.rename_axis(columns="metric").stack(future_stack=True)


def _reasons(pairs: pd.DataFrame, prov_a: dict, prov_b: dict) -> pd.DataFrame:
    """Why the keys of identity-matched cells differ, as far as the stored fields tell."""
    libs_a, libs_b = prov_a.get("libraries", {}), prov_b.get("libraries", {})
    changed = [f"{lib} {libs_a.get(lib, '?')} → {libs_b.get(lib, '?')}"
               for lib in ("scikit-learn", "numpy")
               if libs_a.get(lib) != libs_b.get(lib)]
    libraries = "library versions differ: " + ", ".join(changed) if changed else ""
    reasons = []
    for data, ma, mb, sizes, rows in zip(pairs["data_differs"], pairs["method_a"],
                                         pairs["method_b"], pairs["sizes_differ"],
                                         pairs["rows_differ"]):
        why = [text for flag, text in (
            (data, "data content differs"), (ma != mb, f"method {ma} → {mb}"),
            (sizes, "split sizes differ"),
            (rows and not sizes, "other rows in the splits (another seed or split scheme)"),
            (libraries, libraries)) if flag]
        reasons.append("; ".join(why) if why else
                       "estimator parameters, metrics or measurement settings differ")
    if not reasons:
        return pd.DataFrame(columns=["reason", "cells"])
    return pd.Series(reasons, name="reason").value_counts().rename("cells").reset_index()


def check_sd_limit(tolerance: float) -> None:
    if not np.isfinite(tolerance) or tolerance < 0:
        raise UserError(f"--sd-limit must be a number of at least 0, got {tolerance}")


def _not_comparable(a: Path, b: Path, why: str) -> UserError:
    return UserError(f"{a} and {b} are not comparable ({why})")


def agreement(a: Path, b: Path, cells: CellMatch, prov_a: dict, prov_b: dict,
              tolerance: float = DEFAULT_SD_LIMIT) -> Comparison:
    """Compare the matched cells of folders ``a`` (the reference: its fold-to-fold spread
    sets the yardstick) and ``b``; ``prov_a`` and ``prov_b`` are the provenance of the runs
    that computed them.

    Raises `UserError` for a negative tolerance, a folder without cells, and folders that are
    not comparable: no cell in common, or every common cell trained and tested on other rows.
    """
    check_sd_limit(tolerance)
    c = Comparison(a, b, tolerance, cells_a=cells.cells_a, cells_b=cells.cells_b)
    if not cells.cells_a or not cells.cells_b:
        raise UserError(f"{a if not cells.cells_a else b} has no cells to compare; run a suite "
                        "into it first")
    pairs = cells.pairs
    identity = (pairs["matched"] == "identity").to_numpy()
    c.by_key, c.by_identity = int((~identity).sum()), int(identity.sum())
    if c.by_key + c.by_identity == 0:
        raise _not_comparable(a, b, "they share no cell: no common cell key and no common "
                                    "dataset, strategy, repeat and fold; nothing to compare")
    other = identity & (pairs["sizes_differ"].astype(bool) | pairs["rows_differ"].astype(bool)
                        ).to_numpy()
    if other.all():
        raise _not_comparable(a, b, f"different splits: the {len(pairs)} cells they share by "
                                    "dataset, strategy, repeat and fold were trained and tested "
                                    "on other rows (another seed, number of folds or split "
                                    "scheme), so no score can be compared cell by cell")
    c.other_rows = (pairs.loc[other, "dataset"].value_counts(sort=False).rename("cells")
                    .rename_axis("dataset").reset_index())
    c.key_reasons = _reasons(pairs[identity], prov_a, prov_b)
    c.only_a, c.only_b = cells.only_a, cells.only_b
    same = pairs[~other]
    both_ok = same[(same["status_a"] == OK) & (same["status_b"] == OK)]
    c.scores = _scores(both_ok, cells.metrics, _noise(cells.scores_a, cells.metrics), tolerance)
    c.groups = _groups(c.scores)
    c.timing = _timing(both_ok)
    changed = same[same["status_a"] != same["status_b"]]
    c.status_changes = pd.DataFrame({
        **{k: changed[k] for k in IDENTITY}, "status_a": changed["status_a"],
        "status_b": changed["status_b"],
        "message": [mb if sb != OK else ma for ma, mb, sb in
                    zip(changed["message_a"], changed["message_b"], changed["status_b"])],
        "differs": [{sa, sb} == {OK, ERROR} for sa, sb in
                    zip(changed["status_a"], changed["status_b"])]},
        columns=[*IDENTITY, "status_a", "status_b", "message", "differs"])
    return c


def _scores(both_ok: pd.DataFrame, metrics: list[str], noise: pd.Series,
            tolerance: float) -> pd.DataFrame:
    cols = [*IDENTITY, "metric", "matched", "a", "b", "diff", "sd", "limit", "differs"]
    rows, which, va, vb = [], [], [], []
    for i, m in enumerate(metrics):
        a, b = both_ok[f"{m}_a"].to_numpy(float), both_ok[f"{m}_b"].to_numpy(float)
        have = np.flatnonzero(~np.isnan(a) & ~np.isnan(b))
        rows.append(have)
        which.append(np.full(len(have), i))
        va.append(a[have])
        vb.append(b[have])
    if not rows or not sum(map(len, rows)):
        return pd.DataFrame(columns=cols)
    at = np.concatenate(rows)

    def column(name: str):  # one row per cell × metric: categories, not repeated strings
        codes, values = pd.factorize(both_ok[name])
        return pd.Categorical.from_codes(codes[at], values)

    which = np.concatenate(which)
    datasets = column("dataset")
    s = pd.DataFrame({"dataset": datasets, "strategy": column("strategy"),
                      "repeat": both_ok["repeat"].to_numpy()[at],
                      "fold": both_ok["fold"].to_numpy()[at],
                      "metric": pd.Categorical.from_codes(which, metrics),
                      "matched": column("matched"), "a": np.concatenate(va),
                      "b": np.concatenate(vb)})
    s["diff"] = s["b"] - s["a"]
    # the noise of each (dataset, metric) from a small grid indexed by the category codes
    grid = noise.reindex(pd.MultiIndex.from_product([datasets.categories, metrics]))
    s["sd"] = grid.to_numpy().reshape(len(datasets.categories), len(metrics))[
        datasets.codes, which]
    s["limit"] = np.where(np.isfinite(s["sd"]), tolerance * s["sd"], 0.0)
    s["differs"] = (s["diff"].abs() > s["limit"] + _FLOAT_NOISE).to_numpy(bool)
    return s[cols]


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
