"""openml-python's dataset and task objects for an entry: from the cache, else the server.

Owns which task types woodlot runs (supervised classification and regression), and the
cache-only mode that tells whether an object could be built without a download.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np

from harness.datasets.base import CLASSIFICATION, REGRESSION
from harness.datasets.openml.cache import (cached_task, data_files, dataset_folder,
                                           prefer_cached_arff, task_folder)
from harness.datasets.openml.client import (READ_ERRORS, NotCached, Purpose, damaged,
                                            remote)
from harness.datasets.openml.library import openml_package
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError

SUPPORTED_TASK_TYPES = ("SUPERVISED_CLASSIFICATION", "SUPERVISED_REGRESSION")


class UnsupportedTaskType(UserError):
    """An OpenML task of another type than supervised classification or regression."""

    def __init__(self, spec: DatasetSpec, tid: int, type_name: str) -> None:
        super().__init__(f"OpenML task {tid} is a '{type_name}' task; woodlot runs only "
                         "supervised classification and regression tasks", file=spec.where,
                         field="task")
        self.task_id, self.type_name = tid, type_name


def as_list(value: Any) -> list[str]:
    """An attribute the client gives as None, one name or several, as a list of names."""
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return [str(v) for v in value]


def dropped_by_openml(ds) -> list[str]:
    """The columns OpenML marks as the row id or as ignored."""
    return as_list(ds.row_id_attribute) + as_list(ds.ignore_attribute)


def learning_type(task) -> str:
    """``classification`` or ``regression`` for a supported task."""
    return (CLASSIFICATION if task.task_type_id.name == "SUPERVISED_CLASSIFICATION"
            else REGRESSION)


def get_dataset(spec: DatasetSpec, field: str, did: int, *, data: bool, qualities: bool,
                purpose: Purpose):
    """The client's dataset object: metadata and features always; data/qualities on request."""
    openml = openml_package()
    files = data_files(did)
    if purpose == "check":
        if not files.metadata or (data and not files.data) or (qualities and not files.qualities):
            raise NotCached
        purpose = "load"
    what = f"OpenML dataset {did}"

    def call():
        with prefer_cached_arff(did):
            return openml.datasets.get_dataset(did, download_data=data,
                                               download_qualities=qualities,
                                               download_features_meta_data=True)
    try:
        return remote(spec, field, what, call, purpose=purpose)
    except READ_ERRORS as exc:
        raise damaged(spec, field, what, dataset_folder(did), exc) from None


def get_task(spec: DatasetSpec, tid: int, *, purpose: Purpose, qualities: bool = False):
    """The client's task object (description and its dataset's metadata, no data or splits)."""
    openml = openml_package()
    cached = cached_task(tid)
    supported = {str(openml.tasks.TaskType[name].value) for name in SUPPORTED_TASK_TYPES}
    if cached is not None and cached.type_id not in supported:
        # refuse from the cached description: the client would delete it for some types
        raise UnsupportedTaskType(spec, tid, cached.type_name)
    if purpose == "check":
        files = (data_files(cached.dataset_id)
                 if cached is not None and cached.dataset_id is not None else None)
        if files is None or not files.metadata or (qualities and not files.qualities):
            raise NotCached
        purpose = "load"
    what = f"OpenML task {tid}"
    try:
        task = remote(spec, "task", what,
                      lambda: openml.tasks.get_task(tid, download_splits=False,
                                                    download_data=False,
                                                    download_qualities=qualities,
                                                    download_features_meta_data=True),
                      purpose=purpose)
    except NotImplementedError as exc:  # the client knows no class for this task type
        match = re.search(r"Task type (.+?) not supported", str(exc))
        raise UnsupportedTaskType(spec, tid, match.group(1) if match else str(exc)) from None
    except READ_ERRORS as exc:
        raise damaged(spec, "task", what, task_folder(tid), exc) from None
    if task.task_type_id.name not in SUPPORTED_TASK_TYPES:
        raise UnsupportedTaskType(spec, tid, task.task_type)
    return task


def get_splits(spec: DatasetSpec, task, *,
               purpose: Purpose) -> dict[tuple[int, int], tuple[np.ndarray, np.ndarray]]:
    """The task's published splits, (repeat, fold) → (training rows, test rows), downloaded
    when missing. Of learning-curve samples, the last (the full training set) is kept."""
    tid = int(task.task_id)
    what = f"the splits of OpenML task {tid}"
    try:
        repeats, folds, samples = remote(spec, "task", what, task.get_split_dimensions,
                                         purpose=purpose)
        return {(r, f): task.get_train_test_split_indices(fold=f, repeat=r, sample=samples - 1)
                for r in range(repeats) for f in range(folds)}
    except READ_ERRORS as exc:
        raise damaged(spec, "task", what, task_folder(tid), exc) from None


def read_data(spec: DatasetSpec, field: str, ds, target: str):
    """``(X, y, categorical indicator, column names)`` as the client reads the cached data,
    without the row-id and ignored columns."""
    what = f"OpenML dataset {ds.dataset_id}"
    try:
        with prefer_cached_arff(ds.dataset_id):
            return remote(spec, field, what,
                          lambda: ds.get_data(target=target, include_row_id=False,
                                              include_ignore_attribute=False),
                          purpose="load")
    except READ_ERRORS as exc:
        raise damaged(spec, field, what, dataset_folder(ds.dataset_id), exc) from None
