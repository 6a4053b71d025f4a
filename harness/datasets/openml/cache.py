"""openml-python's cache: where it is, and which of its files mean an entry is cached.

The only module that knows the cache layout. The cache root and the per-server folder come from
openml-python's public ``openml.config.get_cache_directory()``; the folder and file names below
it are the client's private layout (as written by the versions pyproject.toml allows), read here
so that "is it cached?" needs no server. woodlot's own task lists of benchmark suites, which the
client does not keep, live beside them in ``suites/<id or alias>.json``.
"""

from __future__ import annotations

import json
import os
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator

import xmltodict  # openml-python's own XML reader (one of its dependencies)

from harness.datasets.openml.library import openml_package

SUITES_FOLDER = "suites"


def cache_directory() -> Path:
    """The folder openml-python caches files of the configured server in."""
    return Path(openml_package().config.get_cache_directory())


def dataset_folder(did: int) -> Path:
    """The client's folder for one dataset (description, features, qualities, data)."""
    return cache_directory() / "datasets" / str(did)


def task_folder(tid: int) -> Path:
    """The client's folder for one task (description and splits)."""
    return cache_directory() / "tasks" / str(tid)


def suite_file(key: int | str) -> Path:
    """woodlot's record of a suite's task list, by the suite's id or alias."""
    return cache_directory() / SUITES_FOLDER / f"{key}.json"


def _read_xml(path: Path, root: str) -> dict | None:
    try:
        return xmltodict.parse(path.read_text(encoding="utf8"))[root]
    except Exception:  # missing, unreadable or damaged: treat as not cached
        return None


def _skip_parquet() -> bool:
    var = openml_package().config.OPENML_SKIP_PARQUET_ENV_VAR
    return os.environ.get(var, "false").casefold() == "true"


@dataclass(frozen=True)
class DataFiles:
    """What the cache holds of one dataset."""

    description: bool
    features: bool
    qualities: bool
    parquet: bool  # the Parquet file the client would read is there
    arff: bool
    wants_parquet: bool  # the description offers Parquet and the client is allowed to use it

    @property
    def metadata(self) -> bool:
        return self.description and self.features

    @property
    def data(self) -> bool:
        return self.parquet or self.arff

    @property
    def arff_only(self) -> bool:
        """Only the ARFF copy is cached although the client would first try to get Parquet."""
        return self.wants_parquet and not self.parquet and self.arff


def data_files(did: int) -> DataFiles:
    """Which of one dataset's files are in the cache."""
    d = dataset_folder(did)
    desc = _read_xml(d / "description.xml", "oml:data_set_description")
    wants_parquet = bool(desc and desc.get("oml:parquet_url")) and not _skip_parquet()
    # the client reads dataset_<id>.pq; older clients wrote dataset.pq, renamed on first read
    parquet = wants_parquet and ((d / f"dataset_{did}.pq").is_file()
                                 or (d / "dataset.pq").is_file())
    return DataFiles(description=desc is not None, features=(d / "features.xml").is_file(),
                     qualities=(d / "qualities.xml").is_file(), parquet=parquet,
                     arff=(d / "dataset.arff").is_file(), wants_parquet=wants_parquet)


@dataclass(frozen=True)
class CachedTask:
    """What a cached task description says, read without the client."""

    type_id: str
    type_name: str
    dataset_id: int | None  # None when the description names no readable dataset id


def cached_task(tid: int) -> CachedTask | None:
    """The cached description of a task, or None when it is not cached."""
    task = _read_xml(task_folder(tid) / "task.xml", "oml:task")
    if task is None:
        return None
    type_id = str(task.get("oml:task_type_id"))
    dataset_id = None
    inputs = task.get("oml:input")
    for item in inputs if isinstance(inputs, list) else [inputs]:
        if isinstance(item, dict) and item.get("@name") == "source_data":
            try:
                dataset_id = int(item["oml:data_set"]["oml:data_set_id"])
            except (KeyError, TypeError, ValueError):
                pass
            break
    return CachedTask(type_id=type_id, type_name=str(task.get("oml:task_type") or
                                                     f"type {type_id}"), dataset_id=dataset_id)


def dataset_cached(did: int) -> bool:
    """The dataset's metadata and data are cached."""
    files = data_files(did)
    return files.metadata and files.data


def splits_cached(tid: int) -> bool:
    """The task's published splits are cached."""
    return (task_folder(tid) / "datasplits.arff").is_file()


def task_cached(tid: int) -> bool:
    """The task's description and splits and its dataset are cached."""
    task = cached_task(tid)
    return (task is not None and task.dataset_id is not None and splits_cached(tid)
            and dataset_cached(task.dataset_id))


@contextmanager
def prefer_cached_arff(did: int) -> Iterator[None]:
    """Let the client read a cached ARFF copy instead of first trying to download Parquet."""
    if not data_files(did).arff_only:
        yield
        return
    var = openml_package().config.OPENML_SKIP_PARQUET_ENV_VAR
    before = os.environ.get(var)
    os.environ[var] = "true"
    try:
        yield
    finally:
        if before is None:
            os.environ.pop(var, None)
        else:
            os.environ[var] = before


def suite_cached(key: int | str) -> bool:
    """woodlot's task list of the suite is cached."""
    return suite_file(key).is_file()


def read_suite_record(key: int | str) -> dict[str, Any] | None:
    """The cached task list of a suite, or None when there is none.

    Raises ``ValueError``, ``KeyError`` or ``TypeError`` when the file is damaged.
    """
    if not suite_cached(key):
        return None
    record = json.loads(suite_file(key).read_text(encoding="utf8"))
    record["tasks"] = [int(t) for t in record["tasks"]]
    record.setdefault("unsupported", {})
    return record


def write_suite_record(key: int | str, record: dict[str, Any]) -> None:
    """Keep a suite's task list under the key it was asked by and under its id."""
    keys = {str(key)} | ({str(record["id"])} if record.get("id") is not None else set())
    for k in keys:
        path = suite_file(k)
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(".json.tmp")
        tmp.write_text(json.dumps(record, indent=1, sort_keys=True), encoding="utf8")
        tmp.replace(path)
