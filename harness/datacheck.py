"""Look at a table before it enters a suite: shape, task, classes, missing values, warnings.

The hard checks (empty table, missing target values, a single class, a non-numeric regression
target, unknown columns) are `harness.datasets.base.finish`'s and raise `UserError`; this
module adds what a person should see before trusting a comparison on the table, as warnings:

- identifier columns: whole-number or text columns with a different value in every row;
- leakage: a feature identical to the target, one that maps one-to-one onto it, or (for
  regression) one that rises or falls exactly with it;
- a feature that predicts the target almost on its own (`ALONE`): each feature alone, with a
  shallow tree (depth `ALONE_DEPTH`) under `ALONE_FOLDS`-fold cross-validation on at most
  `ALONE_ROWS` rows, against all features together (histogram gradient boosting, same folds).
  Classification is scored per class, one class against the rest, by ROC AUC (a feature that
  gives away one class is flagged even when the others stay hard); regression by R². A
  feature is flagged when its score is at least `NEAR_PERFECT`; or when it is at least
  `CLOSE_FLOOR`, within `CLOSE_GAP` of what all features reach, and all features but it
  reach at least `OWN_SHARE` less, i.e. it
  carries what the other columns cannot make up for (a strong feature whose information
  other columns share, such as one of several tumour-size measurements, is not flagged).
  Such a feature is often computed from the target or only known after it; if it is truly
  known when predictions are made, keep it;
- constant columns (a single value, or missing everywhere);
- classes too small for stratified k-fold cross-validation (fewer rows than folds).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier, HistGradientBoostingRegressor
from sklearn.metrics import r2_score, roc_auc_score
from sklearn.model_selection import KFold, StratifiedKFold, cross_val_predict
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor
from threadpoolctl import threadpool_limits

from harness.datasets.base import CLASSIFICATION, REGRESSION, Dataset, finish
from harness.datasets.files import PARQUET_SUFFIXES, read_table, sniff_csv
from harness.errors import UserError, closest

IDENTIFIER, LEAK, ALONE, CONSTANT, TINY_CLASS = ("identifier", "leak", "predicts alone",
                                                 "constant", "tiny class")
ALONE_DEPTH = 3
ALONE_FOLDS = 3
ALONE_ROWS = 5_000
ALONE_MAX_FEATURES = 200
NEAR_PERFECT = {CLASSIFICATION: 0.98, REGRESSION: 0.95}
CLOSE_FLOOR = {CLASSIFICATION: 0.90, REGRESSION: 0.80}
CLOSE_GAP = 0.05
OWN_SHARE = 0.01
TOP_MISSING = 5   # columns listed by name in the missing-values line
TOP_CLASSES = 8   # classes listed by name in the class-balance line


@dataclass(frozen=True)
class Finding:
    """One warning: its kind (`IDENTIFIER`, `LEAK`, `ALONE`, `CONSTANT`, `TINY_CLASS`), the
    column or class it is about, and a sentence for the terminal (without the advice to drop
    a column, which depends on the command: `DataCheck.lines`)."""

    kind: str
    subject: str
    message: str

    @property
    def column(self) -> bool:
        """Whether the finding is about a column one could drop."""
        return self.kind in (IDENTIFIER, LEAK, ALONE, CONSTANT)


def suite_drop(column: str) -> str:
    """How a suite file drops a column (the advice ``woodlot add`` gives)."""
    return f'drop = ["{column}"] in the suite'


@dataclass(frozen=True)
class DataCheck:
    """What `check_dataset` found. ``lines()`` renders it for the terminal.

    ``classes`` holds (label, rows) pairs, largest first (empty for regression);
    ``missing_by_column`` the columns with missing values and their share, largest first;
    ``delimiter`` and ``decimal`` how a CSV file was read (None for other sources).
    """

    name: str
    source: str
    rows: int
    columns: int
    target: str
    task: str
    task_given: bool
    classes: tuple[tuple[str, int], ...]
    target_range: tuple[float, float, float] | None  # regression: min, median, max
    missing_share: float
    missing_by_column: tuple[tuple[str, float], ...]
    categorical: tuple[str, ...]
    warnings: tuple[Finding, ...]
    folds: int = 5
    delimiter: str | None = None
    decimal: str | None = None

    @property
    def smallest_class_share(self) -> float | None:
        if not self.classes:
            return None
        return min(n for _, n in self.classes) / self.rows

    def flagged(self, kind: str) -> list[str]:
        """The columns (or classes) warned about for ``kind``."""
        return [f.subject for f in self.warnings if f.kind == kind]

    def lines(self, drop=suite_drop) -> list[str]:
        """The check for the terminal; ``drop(column)`` says how the command at hand leaves a
        column out (``--drop COLUMN`` for ``choose``, a suite's ``drop`` for ``add``)."""
        how = ""
        if self.delimiter is not None:
            how = f" (CSV, delimiter {_show(self.delimiter)}, decimal mark {_show(self.decimal)})"
        elif Path(self.source).suffix.lower() in PARQUET_SUFFIXES:
            how = " (Parquet)"
        out = [f"{self.name}: {self.source}{how}",
               f"  {self.rows:,} rows, {self.columns} feature columns; target '{self.target}': "
               f"{self.task} ({'given' if self.task_given else 'inferred'})"]
        if self.classes:
            shown = ", ".join(f"{label} {n:,} ({n / self.rows:.1%})"
                              for label, n in self.classes[:TOP_CLASSES])
            more = len(self.classes) - TOP_CLASSES
            out.append(f"  {len(self.classes)} classes: {shown}"
                       + (f", and {more} more" if more > 0 else "")
                       + f"; smallest class {self.smallest_class_share:.1%} of rows")
        elif self.target_range is not None:
            lo, mid, hi = self.target_range
            out.append(f"  target values from {lo:.4g} to {hi:.4g}, median {mid:.4g}")
        if self.missing_by_column:
            shown = ", ".join(f"{c} {s:.1%}" for c, s in self.missing_by_column[:TOP_MISSING])
            more = len(self.missing_by_column) - TOP_MISSING
            out.append(f"  missing values: {self.missing_share:.1%} of all feature cells; "
                       f"most in {shown}" + (f", and {more} more columns" if more > 0 else ""))
        else:
            out.append("  missing values: none")
        if self.categorical:
            out.append(f"  categorical columns ({len(self.categorical)}): "
                       + ", ".join(self.categorical))
        else:
            out.append("  categorical columns: none")
        if self.warnings:
            out.append(f"  warnings ({len(self.warnings)}):")
            out.extend(f"    ! {f.message}" + (f" ({drop(f.subject)})" if f.column else "")
                       for f in self.warnings)
        else:
            out.append("  warnings: none")
        return out

    def text(self, drop=suite_drop) -> str:
        return "\n".join(self.lines(drop))


def check_dataset(dataset: Dataset, *, target: str = "target", task_given: bool = False,
                  folds: int = 5, delimiter: str | None = None,
                  decimal: str | None = None) -> DataCheck:
    """Summarise a loaded `Dataset` and list what deserves a warning.

    ``folds`` is the number of cross-validation folds the table must fill: a class with fewer
    rows cannot appear in every test fold of stratified k-fold. The single-feature check fits
    small models (a few seconds on tables of thousands of rows).
    """
    X, y = dataset.X, dataset.y
    summary = dataset.summary()
    n = dataset.n_rows
    classes: tuple[tuple[str, int], ...] = ()
    target_range = None
    if dataset.task == CLASSIFICATION:
        counts = y.value_counts(sort=True)
        classes = tuple((str(label), int(c)) for label, c in counts.items())
    else:
        target_range = (float(y.min()), float(y.median()), float(y.max()))
    missing = X.isna().mean()
    missing = missing[missing > 0].sort_values(ascending=False, kind="stable")
    leaks = _leaks(X, y, dataset.task, target)
    warnings = (_identifiers(X) + leaks
                + _alone(X, y, dataset.task, target, skip={f.subject for f in leaks})
                + _constants(X) + _tiny_classes(classes, folds))
    return DataCheck(name=dataset.name, source=dataset.source.removeprefix("file:"), rows=n,
                     columns=summary["columns"], target=target, task=summary["task"],
                     task_given=task_given, classes=classes, target_range=target_range,
                     missing_share=summary["missing_share"],
                     missing_by_column=tuple((str(c), float(s)) for c, s in missing.items()),
                     categorical=dataset.categorical, warnings=tuple(warnings), folds=folds,
                     delimiter=delimiter, decimal=decimal)


def check_frame(frame: pd.DataFrame, target: str, *, name: str, where: str,
                source: str, task: str | None = None, drop=(), folds: int = 5,
                delimiter: str | None = None, decimal: str | None = None,
                ) -> tuple[Dataset, DataCheck]:
    """Split ``frame`` into features and ``target``, run `finish`'s checks, then `check_dataset`.

    Raises `UserError` (prefixed with ``where``) when the target column is absent or the
    table fails a hard check.
    """
    if target not in frame.columns:
        raise UserError(f"target column '{target}' is not in the data{closest(target, frame.columns)}"
                        f" (columns: {', '.join(map(str, frame.columns[:12]))}"
                        f"{', ...' if len(frame.columns) > 12 else ''})", file=where,
                        field="target")
    dataset = finish(name, frame.drop(columns=[target]), frame[target], source=source,
                     where=where, task=task, drop=drop)
    return dataset, check_dataset(dataset, target=target, task_given=task is not None,
                                  folds=folds, delimiter=delimiter, decimal=decimal)


def check_file(path: str | Path, target: str, *, name: str | None = None,
               task: str | None = None, drop=(), delimiter: str | None = None,
               decimal: str | None = None, folds: int = 5) -> tuple[Dataset, DataCheck]:
    """Read a CSV or Parquet file with `read_table` and check it (errors name the file)."""
    path = Path(path)
    where = str(path)
    frame = read_table(path, where=where, delimiter=delimiter, decimal=decimal)
    if path.suffix.lower() in PARQUET_SUFFIXES:
        if delimiter is not None or decimal is not None:
            key = "delimiter" if delimiter is not None else "decimal"
            raise UserError(f"'{key}' applies to CSV files only", file=where, field=key)
    else:
        sniffed = sniff_csv(path)
        delimiter, decimal = delimiter or sniffed[0], decimal or sniffed[1]
    return check_frame(frame, target, name=name or path.stem, where=where, source=str(path),
                       task=task, drop=drop, folds=folds, delimiter=delimiter, decimal=decimal)


# -- the warnings ---------------------------------------------------------------------------

def _whole_numbers(col: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(col):
        return False
    if pd.api.types.is_integer_dtype(col):
        return True
    if pd.api.types.is_float_dtype(col):
        v = col.dropna().to_numpy(dtype=float)
        return bool(len(v)) and bool(np.all(np.mod(v, 1) == 0))
    return False


def _identifiers(X: pd.DataFrame) -> list[Finding]:
    out = []
    n = len(X)
    for c in X.columns:
        col = X[c]
        text = isinstance(col.dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(col)
        if n > 1 and col.notna().all() and (text or _whole_numbers(col)) and col.nunique() == n:
            out.append(Finding(IDENTIFIER, c, f"column '{c}' has a different value in every row "
                               "(an identifier?); it cannot carry over to new rows: drop it"))
    return out


def _as_labels(s: pd.Series) -> pd.Series:
    """Values as text, whole floats without '.0', so 1, 1.0 and '1' compare equal."""
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s) and _whole_numbers(s):
        return s.astype("Int64").astype("string")
    return s.astype("string")


def _leaks(X: pd.DataFrame, y: pd.Series, task: str, target: str) -> list[Finding]:
    out = []
    y_codes = pd.factorize(y)[0].astype(np.int64)
    n_y = int(y_codes.max()) + 1
    y_unique = n_y == len(y)  # every row its own target value: a one-to-one map says nothing
    for c in X.columns:
        col = X[c]
        x_codes = pd.factorize(col, use_na_sentinel=False)[0].astype(np.int64)
        n_x = int(x_codes.max()) + 1
        if n_x == n_y and col.notna().all() and (_as_labels(col) == _as_labels(y)).all():
            out.append(Finding(LEAK, c, f"column '{c}' is identical to the target '{target}' "
                               "(leakage): drop it"))
            continue
        if not y_unique and n_x == n_y and np.unique(x_codes * n_y + y_codes).size == n_y:
            out.append(Finding(LEAK, c, f"column '{c}' maps one-to-one onto the target "
                               f"'{target}' (each of its values goes with exactly one target "
                               "value and back): leakage? drop it unless it is truly known "
                               "before the target"))
            continue
        if task != CLASSIFICATION and pd.api.types.is_numeric_dtype(col) \
                and not pd.api.types.is_bool_dtype(col):
            both = pd.DataFrame({"x": col.to_numpy(dtype=float, na_value=np.nan),
                                 "y": y.to_numpy(dtype=float)})
            both = both.dropna()
            if len(both) >= 3 and both.x.nunique() > 1:
                # Spearman's rank correlation = Pearson's on the ranks (average ranks for ties).
                rho = float(np.corrcoef(both.x.rank(), both.y.rank())[0, 1])
                if abs(rho) > 1 - 1e-9:
                    way = "rises" if rho > 0 else "falls"
                    out.append(Finding(LEAK, c, f"column '{c}' {way} exactly as the target "
                                       f"'{target}' rises (rank correlation {rho:+.3f}): a "
                                       "transformed copy of it? drop it"))
    return out


def _encoded(X: pd.DataFrame) -> pd.DataFrame:
    """Features as numbers for a tree: categories as codes (missing as -1), numbers as they
    are (trees in scikit-learn ≥ 1.3 route missing values themselves)."""
    return pd.DataFrame({c: (pd.Categorical(X[c]).codes.astype(float)
                             if isinstance(X[c].dtype, pd.CategoricalDtype)
                             or not pd.api.types.is_numeric_dtype(X[c])
                             else X[c].to_numpy(dtype=float, na_value=np.nan))
                         for c in X.columns}, index=X.index)


def _scores(pred: np.ndarray, y: np.ndarray, task: str, classes) -> dict[str, float]:
    """Class → one-vs-rest ROC AUC (classification; one entry for two classes), or
    ``{"": R²}`` (regression)."""
    if task != CLASSIFICATION:
        return {"": float(r2_score(y, pred))}
    shown = classes[1:] if len(classes) == 2 else classes
    return {str(c): float(roc_auc_score(y == c, pred[:, list(classes).index(c)]))
            for c in shown}


def _alone(X: pd.DataFrame, y: pd.Series, task: str, target: str,
           skip: set[str]) -> list[Finding]:
    """Features that predict the target almost on their own (see the module docstring)."""
    columns = [c for c in X.columns if c not in skip]
    if not columns or len(columns) > ALONE_MAX_FEATURES or len(X) < 4 * ALONE_FOLDS:
        return []
    rows = np.random.default_rng(0).permutation(len(X))[:ALONE_ROWS]
    Xs, ys = _encoded(X.iloc[rows]), y.iloc[rows].to_numpy()
    Xs = Xs[[c for c in Xs.columns if Xs[c].nunique(dropna=False) > 1
             and Xs[c].notna().any()]]  # constant columns: their own warning, no signal
    columns = [c for c in columns if c in Xs.columns]
    if not columns:
        return []
    if task == CLASSIFICATION:
        classes = np.unique(ys)
        counts = pd.Series(ys).value_counts()
        if counts.min() < ALONE_FOLDS:
            return []
        cv = StratifiedKFold(ALONE_FOLDS, shuffle=True, random_state=0)
        tree, whole, how = (DecisionTreeClassifier(max_depth=ALONE_DEPTH, random_state=0),
                            HistGradientBoostingClassifier(random_state=0), "predict_proba")
    else:
        classes = None
        cv = KFold(ALONE_FOLDS, shuffle=True, random_state=0)
        tree, whole, how = (DecisionTreeRegressor(max_depth=ALONE_DEPTH, random_state=0),
                            HistGradientBoostingRegressor(random_state=0), "predict")
    def predicted(model, columns) -> dict[str, float]:
        return _scores(cross_val_predict(model, Xs[columns], ys, cv=cv, method=how), ys,
                       task, classes)

    with threadpool_limits(1):  # small fits: threads only contend (measured 15× slower)
        return _flag_alone(columns, Xs, predicted, tree, whole, task, target)


def _flag_alone(columns, Xs, predicted, tree, whole, task, target) -> list[Finding]:
    reach = predicted(whole, list(Xs.columns))
    out = []
    for c in columns:
        alone = predicted(tree, [c])
        without = None
        for label, score in alone.items():
            near = score >= NEAR_PERFECT[task]
            close = score >= CLOSE_FLOOR[task] and score >= reach[label] - CLOSE_GAP
            if close and not near:
                without = without or predicted(whole, [x for x in Xs.columns if x != c])
                close = reach[label] - without[label] >= OWN_SHARE
            if near or close:
                what = (f"ROC AUC {score:.3f} for class '{label}' against the rest"
                        if task == CLASSIFICATION else f"R² {score:.3f}")
                with_all = (f"{reach[label]:.3f}")
                out.append(Finding(ALONE, c, f"column '{c}' alone predicts the target "
                                   f"'{target}' almost as well as every feature together "
                                   f"({what}; all features {with_all}): computed from the "
                                   "target, or known only after it? drop it unless it is "
                                   "truly known when predictions are made"))
                break
    return out


def _constants(X: pd.DataFrame) -> list[Finding]:
    out = []
    for c in X.columns:
        values = X[c].dropna()
        if values.empty:
            out.append(Finding(CONSTANT, c, f"column '{c}' is missing in every row: drop it"))
        elif values.nunique() == 1:
            rest = " (missing elsewhere)" if len(values) < len(X) else ""
            out.append(Finding(CONSTANT, c, f"column '{c}' holds the single value "
                               f"{_show(values.iloc[0])} in every row{rest}; it cannot help: "
                               "drop it"))
    return out


def _tiny_classes(classes, folds: int) -> list[Finding]:
    return [Finding(TINY_CLASS, label, f"class '{label}' has {n} row(s), fewer than "
                    f"{folds}-fold stratified cross-validation needs ({folds}); merge rare "
                    "classes or use fewer folds")
            for label, n in classes if n < folds]


def _show(value) -> str:
    if isinstance(value, (np.floating, float)) and float(value).is_integer():
        value = int(value)
    return repr(value.item() if hasattr(value, "item") else value)
