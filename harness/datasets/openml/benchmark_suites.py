"""``suite = ID|alias`` entries → one ``task = ID`` entry per kept task.

Owns a suite's task list (cached by woodlot, since the client keeps none), the summary of each
task the filters look at (``max_rows``, ``max_columns``, ``max_classes``), the tasks skipped for
their type, and the names of the expanded entries.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from harness.datasets.base import CLASSIFICATION
from harness.datasets.openml.cache import (data_files, read_suite_record, suite_file,
                                           write_suite_record)
from harness.datasets.openml.client import (DOWNLOAD_COMMAND, NotCached, Purpose, reason,
                                            remote)
from harness.datasets.openml.entries import SUITE_FILTERS, check_openml_entry, entry_kind
from harness.datasets.openml.library import openml_package
from harness.datasets.openml.objects import (UnsupportedTaskType, dropped_by_openml,
                                             get_dataset, get_task, learning_type)
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError
from harness.names import make_name



def _suite_record(spec: DatasetSpec, *, purpose: Purpose) -> dict[str, Any]:
    """The suite's id, alias, name and task ids: from the cache, else from the server."""
    key = spec.options["suite"]
    try:
        record = read_suite_record(key)
    except (ValueError, KeyError, TypeError) as exc:
        raise UserError(f"the cached task list of OpenML suite {key} ({suite_file(key)}) cannot "
                        f"be read ({reason(exc)}); delete it and run '{DOWNLOAD_COMMAND} "
                        f"{spec.suite_file}' again", file=spec.where, field="suite") from None
    if record is not None:
        return record
    if purpose == "check":
        raise NotCached
    openml = openml_package()
    try:
        suite = remote(spec, "suite", f"OpenML suite {key}",
                       lambda: openml.study.get_suite(key), purpose=purpose)
    except ValueError as exc:  # the id belongs to a study of runs
        raise UserError(f"OpenML id {key} is not a benchmark suite of tasks ({exc})",
                        file=spec.where, field="suite") from None
    record = {"id": suite.id, "alias": suite.alias, "name": suite.name,
              "tasks": [int(t) for t in (suite.tasks or [])], "unsupported": {}}
    write_suite_record(key, record)
    return record


@dataclass(frozen=True)
class TaskSummary:
    """What a suite filter looks at, from cached task and dataset metadata."""

    task_id: int
    dataset_id: int
    dataset_name: str
    rows: int | None
    columns: int
    classes: int | None


def _task_summary(spec: DatasetSpec, tid: int, *, purpose: Purpose,
                  need_rows: bool) -> TaskSummary:
    qualities = need_rows or purpose == "download"  # a download keeps them for later filters
    task = get_task(spec, tid, purpose=purpose, qualities=qualities)
    ds = get_dataset(spec, "suite", task.dataset_id, data=False, qualities=qualities,
                     purpose=purpose)
    # (read only when the file is there: for a dataset without qualities the client would
    # ask the server again on every access)
    qualities = (ds.qualities or {}) if data_files(ds.dataset_id).qualities else {}
    dropped = set(dropped_by_openml(ds)) | {task.target_name}
    columns = sum(1 for f in ds.features.values() if f.name not in dropped)
    classes = None
    if learning_type(task) == CLASSIFICATION:
        value = qualities.get("NumberOfClasses")
        if value is not None and np.isfinite(value) and value > 0:
            classes = int(value)
        else:
            target = next((f for f in ds.features.values() if f.name == task.target_name), None)
            classes = len(target.nominal_values or []) if target is not None else None
    rows = qualities.get("NumberOfInstances")
    rows = int(rows) if rows is not None and np.isfinite(rows) else None
    return TaskSummary(task_id=tid, dataset_id=int(ds.dataset_id), dataset_name=str(ds.name),
                       rows=rows, columns=columns, classes=classes)


def _passes(spec: DatasetSpec, s: TaskSummary) -> bool:
    """Whether a task passes the entry's filters (a size OpenML does not report passes)."""
    opts = spec.options
    if "max_rows" in opts and s.rows is not None and s.rows > opts["max_rows"]:
        return False
    if "max_columns" in opts and s.columns > opts["max_columns"]:
        return False
    if ("max_classes" in opts and s.classes is not None
            and s.classes > opts["max_classes"]):
        return False
    return True


def suite_members(spec: DatasetSpec, *, purpose: Purpose) -> list[TaskSummary]:
    """The supported tasks of the suite that pass its filters, in the suite's order."""
    check_openml_entry(spec)
    if entry_kind(spec) != "suite":
        raise UserError("expected an entry with 'suite = ID'", file=spec.where, field="suite")
    record = _suite_record(spec, purpose=purpose)
    kept: list[TaskSummary] = []
    need_rows = "max_rows" in spec.options
    for tid in record["tasks"]:
        if str(tid) in record["unsupported"]:
            continue
        try:
            summary = _task_summary(spec, tid, purpose=purpose, need_rows=need_rows)
        except UnsupportedTaskType as exc:
            if purpose != "check":  # remember it, so offline expansion need not ask again
                record["unsupported"][str(tid)] = exc.type_name
                write_suite_record(spec.options["suite"], record)
            continue
        if _passes(spec, summary):
            kept.append(summary)
    if not kept:
        filters = ", ".join(f"{k} = {spec.options[k]}" for k in SUITE_FILTERS
                            if k in spec.options) or "(none)"
        raise UserError(f"no supported task of OpenML suite {spec.options['suite']} "
                        f"({len(record['tasks'])} tasks) passes the filters {filters}",
                        file=spec.where, field="suite")
    return kept


def expand_benchmark_suite(spec: DatasetSpec) -> list[DatasetSpec]:
    """One ``task = ID`` entry per supported, kept task of a ``suite = ID`` entry.

    Names are ``<entry name>/<dataset name>`` (a dataset used by two kept tasks gets
    ``-<task id>`` appended); the new entries keep the suite entry's file and position so
    messages point at it. Reads the suite's task list and each task's metadata from the
    cache, downloading what is missing (a network failure ends in a `UserError` that points
    to the download command). Tasks of other types than supervised classification and
    regression are left out.
    """
    kept = suite_members(spec, purpose="load")
    counts: dict[str, int] = {}
    for s in kept:
        counts[s.dataset_name] = counts.get(s.dataset_name, 0) + 1
    out = []
    for s in kept:
        base = make_name(s.dataset_name, fallback=f"dataset{s.dataset_id}")
        name = f"{spec.name}/{base}" + (f"-{s.task_id}" if counts[s.dataset_name] > 1 else "")
        out.append(DatasetSpec(name=name, source=spec.source, options={"task": s.task_id},
                               suite_file=spec.suite_file, position=spec.position))
    return out
