"""Filling openml-python's cache with everything an entry needs to load offline.

Owns `download` (one entry: a dataset, a task with its splits, or a suite's task list, task
metadata and kept tasks) and `is_cached`, the same question asked of the cache alone.
"""

from __future__ import annotations

from typing import Callable

from harness.datasets.openml.benchmark_suites import suite_members
from harness.datasets.openml.cache import dataset_cached, suite_cached, task_cached
from harness.datasets.openml.client import NotCached
from harness.datasets.openml.entries import check_openml_entry, entry_kind
from harness.datasets.openml.objects import get_dataset, get_splits, get_task
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError

Progress = Callable[[str], None]


def is_cached(spec: DatasetSpec) -> bool:
    """Whether every file the entry needs is in the cache (no server contact)."""
    check_openml_entry(spec)
    kind = entry_kind(spec)
    if kind == "dataset":
        return dataset_cached(int(spec.options["dataset"]))
    if kind == "task":
        return task_cached(int(spec.options["task"]))
    try:
        kept = suite_members(spec, purpose="check")
    except (NotCached, UserError):  # not cached, or the cached task list is damaged
        return False
    return all(task_cached(s.task_id) for s in kept)


def _say(progress: Progress | None, message: str) -> None:
    if progress is not None:
        progress(message)


def _download_dataset(spec: DatasetSpec, field: str, did: int,
                      progress: Progress | None) -> bool:
    if dataset_cached(did):
        _say(progress, f"{spec.name}: OpenML dataset {did} is already cached")
        return False
    _say(progress, f"{spec.name}: downloading OpenML dataset {did}")
    get_dataset(spec, field, did, data=True, qualities=True, purpose="download")
    return True


def _download_task(spec: DatasetSpec, tid: int, progress: Progress | None) -> bool:
    if task_cached(tid):
        _say(progress, f"{spec.name}: OpenML task {tid} is already cached")
        return False
    _say(progress, f"{spec.name}: downloading OpenML task {tid}")
    task = get_task(spec, tid, purpose="download", qualities=True)
    _download_dataset(spec, "task", task.dataset_id, progress)
    get_splits(spec, task, purpose="download")
    return True


def download(spec: DatasetSpec, progress: Progress | None = None) -> list[str]:
    """Download into openml's cache everything the entry needs to load offline.

    For a suite: its task list, the metadata of every task (for the filters) and the data
    and splits of every kept task. Files already cached are not downloaded again.
    ``progress`` receives one line per step. Returns what was downloaded
    (``["task/59", ...]``; empty when everything was cached).
    """
    check_openml_entry(spec)
    kind = entry_kind(spec)
    done: list[str] = []
    if kind == "dataset":
        did = int(spec.options["dataset"])
        if _download_dataset(spec, "dataset", did, progress):
            done.append(f"dataset/{did}")
    elif kind == "task":
        tid = int(spec.options["task"])
        if _download_task(spec, tid, progress):
            done.append(f"task/{tid}")
    else:
        key = spec.options["suite"]
        if not suite_cached(key):
            _say(progress, f"{spec.name}: downloading the task list of OpenML suite {key}")
            done.append(f"suite/{key}")
        for s in suite_members(spec, purpose="download"):
            if _download_task(spec, s.task_id, progress):
                done.append(f"task/{s.task_id}")
    return done
