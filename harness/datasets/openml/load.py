"""``dataset = ID`` and ``task = ID`` entries → `Dataset`.

Owns the table as woodlot sees it (target, categorical columns, dropped columns), the
``expect`` guards, the provenance kept in ``meta``, and a task's published splits as
`Split` objects.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from harness.datasets.base import (CLASSIFICATION, REGRESSION, TASKS, Dataset, Split,
                                   finish)
from harness.datasets.openml.client import server
from harness.datasets.openml.entries import check_openml_entry, entry_kind
from harness.datasets.openml.objects import (as_list, dropped_by_openml, get_dataset,
                                             get_splits, get_task, learning_type, read_data)
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError, closest


def _table(spec: DatasetSpec, field: str, ds, target: str):
    """Features, target and the categorical columns, as the client reads them from the cache."""
    names = {f.name: f for f in ds.features.values()}
    if target not in names:
        raise UserError(f"OpenML dataset {ds.dataset_id} ('{ds.name}') has no column "
                        f"'{target}'{closest(target, names)}", file=spec.where, field="target")
    if target in dropped_by_openml(ds):
        raise UserError(f"OpenML dataset {ds.dataset_id} marks '{target}' as an ignored or "
                        "row-id column; choose another target", file=spec.where,
                        field="target")
    X, y, indicator, columns = read_data(spec, field, ds, target)
    X = pd.DataFrame(X)
    sparse = [c for c in X.columns if isinstance(X[c].dtype, pd.SparseDtype)]
    if sparse:
        X[sparse] = X[sparse].sparse.to_dense()
    y = pd.Series(y.squeeze() if isinstance(y, pd.DataFrame) else y, name=target)
    if isinstance(y.dtype, pd.SparseDtype):
        y = y.sparse.to_dense()
    for c in X.columns:  # ARFF nominal values come as ordered categories; they are not ordered
        if isinstance(X[c].dtype, pd.CategoricalDtype) and X[c].cat.ordered:
            X[c] = X[c].cat.as_unordered()
    if isinstance(y.dtype, pd.CategoricalDtype) and y.cat.ordered:
        y = y.cat.as_unordered()
    categorical = [str(c) for c, flag in zip(columns, indicator) if flag]
    for c in X.columns:  # nominal/string in the feature metadata, whatever the file stored
        f = names.get(str(c))
        if f is not None and f.data_type in ("nominal", "string") and str(c) not in categorical:
            if f.data_type == "nominal" or not pd.api.types.is_numeric_dtype(X[c]):
                categorical.append(str(c))
    return X, y, categorical, names[target]


def _learning_type(spec: DatasetSpec, target_feature) -> str:
    given = spec.options.get("task")
    if given in TASKS:
        return given
    return REGRESSION if target_feature.data_type == "numeric" else CLASSIFICATION


def _check_expect_name(spec: DatasetSpec, name: str, what: str) -> None:
    """``expect.name``, checked before the data are read."""
    expect = spec.options.get("expect") or {}
    if "name" in expect and expect["name"] != name:
        raise UserError(f"expected {expect['name']!r}, found {name!r} in {what}; check the id "
                        "or update 'expect'", file=spec.where, field="expect.name")


def _check_expect_size(spec: DatasetSpec, dataset: Dataset, what: str) -> None:
    """``expect.rows`` and ``expect.columns``, checked on the finished dataset."""
    expect = spec.options.get("expect") or {}
    found = {"rows": dataset.n_rows, "columns": dataset.n_columns}
    for key, value in found.items():
        if key in expect and expect[key] != value:
            note = (" (feature columns, not counting the target and the ignored, row-id and "
                    "'drop' columns)") if key == "columns" else ""
            raise UserError(f"expected {expect[key]} {key}, found {value} {key} in {what}{note}; "
                            "check the id or update 'expect'", file=spec.where,
                            field=f"expect.{key}")


def _meta(ds, task=None, target=None, dropped=()) -> dict[str, Any]:
    meta = {"openml_dataset_id": int(ds.dataset_id), "openml_version": ds.version,
            "openml_name": ds.name, "openml_task_id": None, "target": target,
            "openml_dropped": list(dropped), "openml_server": server()}
    if task is not None:
        meta["openml_task_id"] = int(task.task_id)
        meta["openml_task_type"] = task.task_type
        meta["openml_estimation"] = task.estimation_procedure.get("type")
    return meta


def _load_dataset_entry(spec: DatasetSpec) -> Dataset:
    did = int(spec.options["dataset"])
    ds = get_dataset(spec, "dataset", did, data=True, qualities=False, purpose="load")
    target = spec.options.get("target")
    if target is None:
        default = as_list(ds.default_target_attribute)
        if len(default) != 1 or "," in default[0]:
            how_many = "more than one default target" if default else "no default target"
            raise UserError(f"OpenML dataset {did} ('{ds.name}') has {how_many}"
                            f"{' (' + ', '.join(default) + ')' if default else ''}; name the "
                            "target column with target = \"...\"", file=spec.where,
                            field="target")
        target = default[0]
    what = f"OpenML dataset {did} ('{ds.name}')"
    _check_expect_name(spec, ds.name, what)
    X, y, categorical, target_feature = _table(spec, "dataset", ds, target)
    dataset = finish(spec.name, X, y, source=f"openml:dataset/{did}", where=spec.where,
                     task=_learning_type(spec, target_feature),
                     categorical=spec.options.get("categorical", categorical),
                     drop=spec.options.get("drop", ()),
                     meta=_meta(ds, target=target, dropped=dropped_by_openml(ds)))
    _check_expect_size(spec, dataset, what)
    return dataset


def _task_splits(spec: DatasetSpec, task, n_rows: int) -> tuple[Split, ...]:
    """The task's published splits, checked against the table's rows."""
    what = f"the splits of OpenML task {int(task.task_id)}"
    out = []
    for (repeat, fold), (train, test) in get_splits(spec, task, purpose="load").items():
        train = np.asarray(train, dtype=np.int64)
        test = np.asarray(test, dtype=np.int64)
        for part, idx in (("training", train), ("test", test)):
            if idx.size == 0 or idx.min() < 0 or idx.max() >= n_rows:
                raise UserError(f"{what}: repeat {repeat} fold {fold} has {part} rows "
                                f"outside the table's {n_rows} rows", file=spec.where,
                                field="task")
        if np.intersect1d(train, test).size:
            raise UserError(f"{what}: repeat {repeat} fold {fold} uses some rows for both "
                            "training and testing", file=spec.where, field="task")
        out.append(Split(repeat=repeat, fold=fold, train=train, test=test))
    return tuple(out)


def _load_task_entry(spec: DatasetSpec) -> Dataset:
    tid = int(spec.options["task"])
    task = get_task(spec, tid, purpose="load")
    ds = get_dataset(spec, "task", task.dataset_id, data=True, qualities=False, purpose="load")
    what = f"OpenML task {tid} (dataset {ds.dataset_id} '{ds.name}')"
    _check_expect_name(spec, ds.name, what)
    X, y, categorical, _ = _table(spec, "task", ds, task.target_name)
    splits = _task_splits(spec, task, len(X))
    dataset = finish(spec.name, X, y, source=f"openml:task/{tid}", where=spec.where,
                     task=learning_type(task),
                     categorical=spec.options.get("categorical", categorical),
                     drop=spec.options.get("drop", ()), splits=splits,
                     meta=_meta(ds, task=task, target=task.target_name,
                                dropped=dropped_by_openml(ds)))
    _check_expect_size(spec, dataset, what)
    return dataset


def load_openml(spec: DatasetSpec) -> Dataset:
    """Load one ``dataset = ID`` or ``task = ID`` entry (downloading only what is not cached)."""
    check_openml_entry(spec)
    kind = entry_kind(spec)
    if kind == "suite":
        raise UserError("a suite entry stands for several tasks and is expanded into them "
                        "(expand_benchmark_suite) before loading", file=spec.where,
                        field="suite")
    return _load_dataset_entry(spec) if kind == "dataset" else _load_task_entry(spec)
