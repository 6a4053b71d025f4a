"""The `Dataset` every source produces, its content fingerprint and the checks all sources share."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from harness.errors import UserError

CLASSIFICATION = "classification"
REGRESSION = "regression"
TASKS = (CLASSIFICATION, REGRESSION)


@dataclass(frozen=True)
class Split:
    """One train/test split: row positions, with the repeat and fold it belongs to. Made by
    the suite's protocol (`harness.splits`) or fixed by the data's publisher (an OpenML task)."""

    repeat: int
    fold: int
    train: np.ndarray
    test: np.ndarray


@dataclass(frozen=True, eq=False)
class Dataset:
    """One table ready for the comparison.

    Attributes
    ----------
    name : the suite entry's name.
    X : features; categorical columns have pandas ``category`` dtype.
    y : target; for classification the class labels, for regression floats.
    task : ``"classification"`` or ``"regression"``.
    categorical : names of the categorical feature columns.
    fingerprint : hex digest of the content (features, target, task, categorical columns);
        part of every cell key, so a changed file is recomputed, never silently reused.
    source : one line saying where the data came from (``sklearn:load_wine``, a path, ...).
    splits : train/test splits defined by the publisher, or None to use the suite's protocol.
    meta : anything else worth keeping in the provenance (OpenML ids, file path, ...).
    """

    name: str
    X: pd.DataFrame
    y: pd.Series
    task: str
    categorical: tuple[str, ...]
    fingerprint: str
    source: str
    splits: tuple[Split, ...] | None = None
    meta: dict[str, Any] = field(default_factory=dict)

    @property
    def n_rows(self) -> int:
        return int(self.X.shape[0])

    @property
    def n_columns(self) -> int:
        return int(self.X.shape[1])

    @property
    def n_classes(self) -> int | None:
        return int(self.y.nunique()) if self.task == CLASSIFICATION else None

    def summary(self) -> dict[str, Any]:
        """Shape, task and missing share, as shown by ``woodlot check`` and kept in the store."""
        return {
            "dataset": self.name,
            "rows": self.n_rows,
            "columns": self.n_columns,
            "task": self.task,
            "classes": self.n_classes,
            "categorical": len(self.categorical),
            "missing_share": float(self.X.isna().to_numpy().mean()) if self.X.size else 0.0,
            "fingerprint": self.fingerprint[:12],
            "source": self.source,
        }


def fingerprint(X: pd.DataFrame, y: pd.Series, task: str, categorical: tuple[str, ...],
                splits: tuple[Split, ...] | None = None) -> str:
    """SHA-256 of the content: column names, dtypes, every value, the target, task and splits."""
    h = hashlib.sha256()
    h.update(repr((list(map(str, X.columns)), [str(t) for t in X.dtypes], task,
                   sorted(categorical))).encode())
    h.update(pd.util.hash_pandas_object(X, index=False).to_numpy().tobytes())
    h.update(pd.util.hash_pandas_object(y.astype(str) if task == CLASSIFICATION else y,
                                        index=False).to_numpy().tobytes())
    for s in splits or ():
        h.update(f"{s.repeat}/{s.fold}".encode())
        h.update(np.asarray(s.train, dtype=np.int64).tobytes())
        h.update(np.asarray(s.test, dtype=np.int64).tobytes())
    return h.hexdigest()


def infer_task(y: pd.Series) -> str:
    """Classification for text, boolean, categorical or few-valued integer targets; else regression.

    An integer target with at most 20 distinct values, each appearing at least twice on
    average, is taken as class labels (common practice; override with ``task = ...``).
    """
    if y.dtype == object or isinstance(y.dtype, pd.CategoricalDtype) or pd.api.types.is_bool_dtype(y) \
            or pd.api.types.is_string_dtype(y):
        return CLASSIFICATION
    values = y.dropna()
    if pd.api.types.is_integer_dtype(values) or (
            pd.api.types.is_float_dtype(values) and len(values) and np.all(np.mod(values, 1) == 0)):
        n = values.nunique()
        if n <= 20 and n * 2 <= len(values):
            return CLASSIFICATION
    return REGRESSION


def finish(name: str, X: pd.DataFrame, y: pd.Series, *, source: str, where: str,
           task: str | None = None, categorical: list[str] | tuple[str, ...] | None = None,
           drop: list[str] | tuple[str, ...] = (), splits=None, meta=None) -> Dataset:
    """Check a loaded table and turn it into a `Dataset`.

    ``where`` is the prefix for error messages (suite file and entry). Checks: every column
    has its own name, not empty, target has no missing values, classification target has at
    least two classes, regression target is numeric and finite; categorical columns exist;
    numeric features are finite (missing values are allowed, infinities are not). Object and
    boolean feature columns are taken as categorical unless ``categorical`` lists the columns
    explicitly.
    """
    X = X.copy()
    X.columns = [str(c) for c in X.columns]
    repeated = sorted({c for c in X.columns if list(X.columns).count(c) > 1})
    if repeated:
        raise UserError(f"more than one column is named {', '.join(map(repr, repeated))}; give "
                        "every column its own name", file=where)
    for col in drop:
        if col not in X.columns:
            raise UserError(f"column '{col}' to drop is not in the data (columns: "
                            f"{_few(X.columns)})", file=where, field="drop")
    X = X.drop(columns=list(drop))
    y = pd.Series(y).reset_index(drop=True)
    X = X.reset_index(drop=True)
    if X.shape[0] == 0 or X.shape[1] == 0:
        raise UserError(f"the data are empty ({X.shape[0]} rows, {X.shape[1]} feature columns)",
                        file=where)
    if len(y) != len(X):
        raise UserError(f"target has {len(y)} values for {len(X)} rows", file=where, field="target")
    if y.isna().any():
        raise UserError(f"the target has {int(y.isna().sum())} missing values; drop those rows "
                        "or fill them before benchmarking", file=where, field="target")
    if task is None:
        task = infer_task(y)
    elif task not in TASKS:
        raise UserError(f"'{task}' is not a task; use 'classification' or 'regression'",
                        file=where, field="task")
    if task == CLASSIFICATION:
        if y.nunique() < 2:
            raise UserError(f"the target has a single class ({y.iloc[0]!r}); a classifier needs "
                            "at least two", file=where, field="target")
        if not isinstance(y.dtype, pd.CategoricalDtype):
            y = y.astype(str) if (y.dtype == object or pd.api.types.is_string_dtype(y)) else y
    else:
        if not pd.api.types.is_numeric_dtype(y) or pd.api.types.is_bool_dtype(y):
            raise UserError(f"regression needs a numeric target, but it holds values such as "
                            f"{y.iloc[0]!r}", file=where, field="target")
        y = y.astype(float)
        infinite = np.isinf(y.to_numpy())
        if infinite.any():
            raise UserError(f"the target holds {int(infinite.sum())} infinite value(s) (first in "
                            f"row {int(np.argmax(infinite)) + 1}); drop those rows",
                            file=where, field="target")
        if y.nunique() < 2:
            raise UserError("the target is constant; there is nothing to predict",
                            file=where, field="target")
    if categorical is None:
        categorical = [c for c in X.columns
                       if X[c].dtype == object or isinstance(X[c].dtype, pd.CategoricalDtype)
                       or pd.api.types.is_bool_dtype(X[c]) or pd.api.types.is_string_dtype(X[c])]
    else:
        missing = [c for c in categorical if c not in X.columns]
        if missing:
            raise UserError(f"categorical column(s) {missing} not in the data (columns: "
                            f"{_few(X.columns)})", file=where, field="categorical")
    for c in X.columns:
        if c in categorical:
            X[c] = as_category(X[c])
        elif not pd.api.types.is_numeric_dtype(X[c]) or pd.api.types.is_bool_dtype(X[c]):
            converted = pd.to_numeric(X[c], errors="coerce")
            if converted.notna().sum() < X[c].notna().sum():
                raise UserError(f"column '{c}' is neither numeric nor listed as categorical",
                                file=where, field="categorical")
            X[c] = converted.astype(float)
        elif isinstance(X[c].dtype, pd.api.extensions.ExtensionDtype):
            # nullable Int64/Float64 (Parquet): pd.NA would reach the estimators; NaN does not
            X[c] = X[c].to_numpy(dtype=float, na_value=np.nan)
    categorical = tuple(c for c in X.columns if c in set(categorical))
    refuse_infinities(X, categorical, where)
    fp = fingerprint(X, y, task, categorical, splits)
    return Dataset(name=name, X=X, y=y, task=task, categorical=categorical, fingerprint=fp,
                   source=source, splits=splits, meta=dict(meta or {}))


def refuse_infinities(X: pd.DataFrame, categorical: tuple[str, ...], where: str) -> None:
    """`UserError` naming the numeric feature columns that hold +inf or -inf: the estimators
    refuse them in every cell, so the whole comparison would fail."""
    found = []
    for c in X.columns:
        if c in categorical:
            continue
        infinite = np.isinf(X[c].to_numpy(dtype=float, na_value=np.nan))
        if infinite.any():
            found.append(f"'{c}' ({int(infinite.sum())}, first in row "
                         f"{int(np.argmax(infinite)) + 1})")
    if found:
        raise UserError(f"infinite values in column{'s' if len(found) > 1 else ''} "
                        f"{', '.join(found)}; replace them (by a missing value, for instance) or "
                        "drop the column", file=where)


def as_category(column: pd.Series) -> pd.Series:
    """Categories as plain text, missing values as NaN (what scikit-learn's imputers and
    encoders expect; pandas' own NA marker breaks their missing-value checks)."""
    missing = column.isna().to_numpy()
    text = np.array([str(v) for v in column.to_numpy(dtype=object)], dtype=object)
    text[missing] = np.nan
    categories = sorted({v for v in text[~missing]})
    return pd.Series(pd.Categorical(text, categories=categories), index=column.index,
                     name=column.name)


def _few(columns, n: int = 8) -> str:
    cols = list(map(str, columns))
    return ", ".join(cols[:n]) + (f", ... ({len(cols)} in all)" if len(cols) > n else "")
