"""OpenML datasets, tasks and benchmark suites, read through the ``openml`` client and its cache.

Three kinds of ``from = "openml"`` entry, exactly one of:

* ``dataset = ID``: the dataset's table; the target is its default target attribute unless
  ``target = "column"`` names another; ``task = "classification"|"regression"`` may override
  the learning type (otherwise: nominal target → classification, numeric → regression).
* ``task = ID``: a supervised classification or regression task: its dataset, its target and
  its official train/test splits (kept as `Split` objects, repeat by fold).
* ``suite = ID`` or ``suite = "alias"``: a benchmark suite, expanded by
  :func:`expand_benchmark_suite` into one ``task = ID`` entry per kept task, optionally
  filtered with ``max_rows``, ``max_columns`` and ``max_classes``.

Columns OpenML marks as ignored or as the row id are dropped; categorical columns are the
ones the ARFF header declares nominal (or the Parquet file stores as categories). An
optional ``expect = { name = ..., rows = ..., columns = ... }`` guards against a dataset that
is not the one the suite's author meant.

Everything is stored in openml-python's own cache, so its settings apply: the cache root is
``OPENML_CACHE_DIR`` when set, else ``cachedir`` in openml's config file
(``$XDG_CONFIG_HOME/openml/config``, by default ``~/.config/openml/config``), else
``$XDG_CACHE_HOME/openml`` or ``~/.cache/openml`` (``~/.openml`` off Linux); the client reads
these once, when it is first imported. Within the root there is one folder per server
(``org/openml/www`` for www.openml.org). Nothing already in the cache is downloaded again, so a suite whose files
were fetched once (:func:`fetch`, behind ``woodlot fetch SUITE``) runs without a network.
The client library keeps no copy of benchmark suites, so the task list of each suite is
written next to its files, to ``<cache>/suites/<id or alias>.json``.

Network failures are retried ``WOODLOT_OPENML_ATTEMPTS`` times in all (default 3), waiting
``WOODLOT_OPENML_BACKOFF`` seconds (default 2) before the second attempt and twice as long
before each further one; the client's own retry loop is turned off meanwhile so the two
do not multiply.
"""

from __future__ import annotations

import json
import os
import re
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterator

import numpy as np
import pandas as pd

from harness.datasets.base import (CLASSIFICATION, REGRESSION, TASKS, Dataset, Split,
                                   finish)
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError, closest

ENTRY_KINDS = ("dataset", "task", "suite")
EXPECT_KEYS = ("name", "rows", "columns")
SUITE_FILTERS = ("max_rows", "max_columns", "max_classes")
ATTEMPTS_ENV = "WOODLOT_OPENML_ATTEMPTS"
BACKOFF_ENV = "WOODLOT_OPENML_BACKOFF"
DEFAULT_ATTEMPTS = 3
DEFAULT_BACKOFF = 2.0
SUITE_CACHE_DIR = "suites"
_ALIAS = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]*$")
_UNSAFE = re.compile(r"[^A-Za-z0-9_.\-]+")

Progress = Callable[[str], None]


# ----------------------------------------------------------------------------------- entry text

def _is_id(value: Any) -> bool:
    return isinstance(value, int) and not isinstance(value, bool)


def entry_kind(spec: DatasetSpec) -> str:
    """``"dataset"``, ``"task"`` or ``"suite"`` (the entry was checked by `check_openml_entry`)."""
    opts = spec.options
    if "suite" in opts:
        return "suite"
    if _is_id(opts.get("task")):
        return "task"
    return "dataset"


def check_openml_entry(spec: DatasetSpec) -> None:
    """Check an OpenML entry's keys and values without contacting the server.

    Exactly one of ``dataset``, ``task`` (an id) or ``suite``; ``target`` and a learning type
    only with ``dataset``; ``expect`` with dataset or task; the ``max_*`` filters only with
    ``suite``. Raises `UserError` naming the suite file, the entry and the field.
    """
    opts, where = spec.options, spec.where
    task_value = opts.get("task")
    if "task" in opts and not _is_id(task_value) and task_value not in TASKS:
        raise UserError(f"expected an OpenML task id (a whole number), or with 'dataset' the "
                        f"learning type 'classification' or 'regression', not {task_value!r}",
                        file=where, field="task")
    given = [k for k in ENTRY_KINDS if k in opts and (k != "task" or _is_id(task_value))]
    if not given:
        raise UserError("an OpenML entry needs exactly one of 'dataset = ID', 'task = ID' or "
                        "'suite = ID'", file=where, field="dataset")
    if len(given) > 1:
        raise UserError(f"give exactly one of 'dataset', 'task' or 'suite', not both "
                        f"'{given[0]}' and '{given[1]}'", file=where, field=given[1])
    kind = given[0]
    value = opts[kind]
    if kind in ("dataset", "task"):
        if not _is_id(value) or value < 1:
            raise UserError(f"expected an OpenML {kind} id (a positive whole number), not "
                            f"{value!r}", file=where, field=kind)
    else:
        if _is_id(value):
            if value < 1:
                raise UserError(f"expected an OpenML suite id (a positive whole number) or "
                                f"alias, not {value!r}", file=where, field="suite")
        elif not (isinstance(value, str) and _ALIAS.match(value)):
            raise UserError(f"expected an OpenML suite id or alias (letters, digits, - _ .), "
                            f"not {value!r}", file=where, field="suite")
    if "target" in opts:
        if kind == "task":
            raise UserError("an OpenML task fixes its own target; remove 'target' (or use "
                            "'dataset = ID' to choose the target)", file=where, field="target")
        if kind == "suite":
            raise UserError("each task of a suite fixes its own target; remove 'target'",
                            file=where, field="target")
        if not isinstance(opts["target"], str) or not opts["target"]:
            raise UserError("expected the name of the target column", file=where,
                            field="target")
    if kind == "suite":
        for key in ("task", "expect", "categorical", "drop"):
            if key in opts:
                raise UserError(f"'{key}' applies to a single table and cannot be given for a "
                                "whole suite; list the task separately to set it",
                                file=where, field=key)
    for key in SUITE_FILTERS:
        if key in opts:
            if kind != "suite":
                raise UserError(f"'{key}' filters the tasks of a suite; it needs 'suite = ID'",
                                file=where, field=key)
            if not _is_id(opts[key]) or opts[key] < 1:
                raise UserError(f"expected a positive whole number, not {opts[key]!r}",
                                file=where, field=key)
    if "expect" in opts:
        expect = opts["expect"]
        if not isinstance(expect, dict):
            raise UserError("expected a table such as { name = \"credit-g\", rows = 1000, "
                            "columns = 20 }", file=where, field="expect")
        for key, val in expect.items():
            if key not in EXPECT_KEYS:
                raise UserError(f"unknown key '{key}'{closest(key, EXPECT_KEYS)}; 'expect' "
                                f"accepts {', '.join(EXPECT_KEYS)}", file=where,
                                field=f"expect.{key}")
            if key == "name" and not isinstance(val, str):
                raise UserError(f"expected the dataset's name as text, not {val!r}",
                                file=where, field="expect.name")
            if key in ("rows", "columns") and (not _is_id(val) or val < 1):
                raise UserError(f"expected a positive whole number, not {val!r}", file=where,
                                field=f"expect.{key}")


# ------------------------------------------------------------------------ client and its cache

def _client():
    """The ``openml`` package, imported on first use (it takes seconds to import)."""
    import openml
    return openml


def cache_directory() -> Path:
    """The folder openml-python caches files of the configured server in."""
    return Path(_client().config.get_cache_directory())


def _server() -> str:
    return _client().config.get_server_base_url()


def _dataset_dir(did: int) -> Path:
    return cache_directory() / "datasets" / str(did)


def _task_dir(tid: int) -> Path:
    return cache_directory() / "tasks" / str(tid)


def _suite_file(key: int | str) -> Path:
    return cache_directory() / SUITE_CACHE_DIR / f"{key}.json"


def _read_xml(path: Path, root: str) -> dict | None:
    import xmltodict
    try:
        return xmltodict.parse(path.read_text(encoding="utf8"))[root]
    except Exception:  # missing, unreadable or damaged: treat as not cached
        return None


def _skip_parquet() -> bool:
    from openml.config import OPENML_SKIP_PARQUET_ENV_VAR
    return os.environ.get(OPENML_SKIP_PARQUET_ENV_VAR, "false").casefold() == "true"


@dataclass(frozen=True)
class _DataFiles:
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


def _data_files(did: int) -> _DataFiles:
    d = _dataset_dir(did)
    desc = _read_xml(d / "description.xml", "oml:data_set_description")
    wants_parquet = bool(desc and desc.get("oml:parquet_url")) and not _skip_parquet()
    parquet = wants_parquet and ((d / f"dataset_{did}.pq").is_file()
                                 or (d / "dataset.pq").is_file())
    return _DataFiles(description=desc is not None, features=(d / "features.xml").is_file(),
                      qualities=(d / "qualities.xml").is_file(), parquet=parquet,
                      arff=(d / "dataset.arff").is_file(), wants_parquet=wants_parquet)


def _cached_task_dataset(tid: int) -> int | None:
    """The dataset id a cached task description names, or None when it is not cached."""
    task = _read_xml(_task_dir(tid) / "task.xml", "oml:task")
    if task is None:
        return None
    inputs = task.get("oml:input")
    for item in inputs if isinstance(inputs, list) else [inputs]:
        if isinstance(item, dict) and item.get("@name") == "source_data":
            try:
                return int(item["oml:data_set"]["oml:data_set_id"])
            except (KeyError, TypeError, ValueError):
                return None
    return None


def _dataset_cached(did: int) -> bool:
    files = _data_files(did)
    return files.metadata and files.data


def _task_cached(tid: int) -> bool:
    did = _cached_task_dataset(tid)
    return (did is not None and (_task_dir(tid) / "datasplits.arff").is_file()
            and _dataset_cached(did))


@contextmanager
def _prefer_cached_arff(did: int) -> Iterator[None]:
    """Let the client read a cached ARFF copy instead of first trying to download Parquet."""
    from openml.config import OPENML_SKIP_PARQUET_ENV_VAR
    if not _data_files(did).arff_only:
        yield
        return
    before = os.environ.get(OPENML_SKIP_PARQUET_ENV_VAR)
    os.environ[OPENML_SKIP_PARQUET_ENV_VAR] = "true"
    try:
        yield
    finally:
        if before is None:
            os.environ.pop(OPENML_SKIP_PARQUET_ENV_VAR, None)
        else:
            os.environ[OPENML_SKIP_PARQUET_ENV_VAR] = before


# ------------------------------------------------------------------------- network and retries

class _NotCached(Exception):
    """Raised in cache-only mode (`is_cached`) where a download would be needed."""


def _policy() -> tuple[int, float]:
    """(attempts, first delay in seconds), from the environment or the defaults."""
    out = []
    for name, default, kind in ((ATTEMPTS_ENV, DEFAULT_ATTEMPTS, int),
                                (BACKOFF_ENV, DEFAULT_BACKOFF, float)):
        raw = os.environ.get(name)
        if raw is None or not raw.strip():
            out.append(default)
            continue
        try:
            value = kind(raw)
        except ValueError:
            value = -1
        if value < (1 if kind is int else 0):
            raise UserError(f"environment variable {name}={raw!r} must be "
                            + ("a whole number of at least 1" if kind is int
                               else "a number of seconds, 0 or more"))
        out.append(value)
    return int(out[0]), float(out[1])


@contextmanager
def _one_try_per_call() -> Iterator[None]:
    """Switch off the client's own retry loop (its waits are long); we retry around it."""
    config = _client().config
    before = config.connection_n_retries
    config.connection_n_retries = 1
    try:
        yield
    finally:
        config.connection_n_retries = before


def _transient(exc: BaseException) -> bool:
    """A failure worth retrying: no connection, a broken transfer, a garbled answer."""
    import requests
    import urllib3
    from openml.exceptions import (OpenMLHashException, OpenMLNotAuthorizedError,
                                   OpenMLServerError, OpenMLServerException)
    if isinstance(exc, OpenMLServerException):
        return exc.code == 107  # the server's database is busy
    if isinstance(exc, OpenMLNotAuthorizedError):
        return False
    return isinstance(exc, (requests.exceptions.RequestException, urllib3.exceptions.HTTPError,
                            OpenMLHashException, OpenMLServerError, ConnectionError,
                            TimeoutError))


def _reason(exc: BaseException) -> str:
    text = " ".join(str(exc).split())
    # requests' messages nest the useful part deep inside; keep the innermost explanation
    match = re.search(r"\[Errno -?\d+\] ([^'\")\]]+)", text)
    if match:
        text = match.group(1)
    elif len(text) > 160:
        text = text[:157] + "..."
    return f"{type(exc).__name__}: {text}" if text else type(exc).__name__


def _remote(spec: DatasetSpec, field: str, what: str, call: Callable[[], Any], *,
            purpose: str) -> Any:
    """Run a client call that may download, retrying network failures with backoff.

    ``purpose`` is ``"load"`` (data wanted now; the message on failure points to
    ``woodlot fetch``) or ``"fetch"`` (a download was asked for). Every failure becomes one
    `UserError` naming the entry and ``field``.
    """
    from openml.exceptions import (OpenMLCacheException, OpenMLNotAuthorizedError,
                                   OpenMLPrivateDatasetError, OpenMLServerException)
    attempts, backoff = _policy()
    last: BaseException | None = None
    for attempt in range(attempts):
        try:
            with _one_try_per_call():
                return call()
        except OpenMLPrivateDatasetError:
            raise UserError(f"{what} is private on {_server()}; set an API key with access in "
                            "openml's config file", file=spec.where, field=field) from None
        except OpenMLNotAuthorizedError:
            raise UserError(f"{what} needs an OpenML API key with access; set 'apikey' in "
                            "openml's config file", file=spec.where, field=field) from None
        except OpenMLCacheException as exc:
            raise UserError(f"cannot use the OpenML cache at {cache_directory()} ({exc}); "
                            "check that the folder is writable", file=spec.where,
                            field=field) from None
        except PermissionError as exc:
            raise UserError(f"cannot write to the OpenML cache at {cache_directory()} "
                            f"({exc.strerror}: {exc.filename}); set OPENML_CACHE_DIR to a "
                            "writable folder", file=spec.where, field=field) from None
        except Exception as exc:
            if isinstance(exc, OpenMLServerException) and not _transient(exc):
                raise UserError(f"{what} does not exist on {_server()} (the server answered "
                                f"{exc.code}: {exc.message}); check the id, it may have been "
                                "removed", file=spec.where, field=field) from None
            if not _transient(exc):
                raise
            last = exc
            if attempt + 1 < attempts:
                time.sleep(backoff * 2 ** attempt)
    assert last is not None
    tries = f"{attempts} attempt{'s' if attempts != 1 else ''}"
    if purpose == "fetch":
        raise UserError(f"could not download {what}: the OpenML server at {_server()} did not "
                        f"answer after {tries} ({_reason(last)}); check the network "
                        "connection and try again", file=spec.where, field=field)
    raise UserError(f"{what} is not in the local OpenML cache ({cache_directory()}) and the "
                    f"OpenML server at {_server()} cannot be reached after {tries} "
                    f"({_reason(last)}); run 'woodlot fetch {spec.suite_file}' where a network "
                    "connection is available, then run again offline", file=spec.where,
                    field=field)


def _damaged(spec: DatasetSpec, field: str, what: str, folder: Path, exc: BaseException):
    return UserError(f"the cached files of {what} cannot be read ({_reason(exc)}); delete "
                     f"{folder} and run 'woodlot fetch {spec.suite_file}' again",
                     file=spec.where, field=field)


_READ_ERRORS = (ValueError, KeyError, IndexError, TypeError, EOFError, AttributeError)


def _get_dataset(spec: DatasetSpec, field: str, did: int, *, data: bool, qualities: bool,
                 purpose: str):
    """The client's dataset object: metadata and features always; data/qualities on request."""
    openml = _client()
    files = _data_files(did)
    if purpose == "check":
        if not files.metadata or (data and not files.data) or (qualities and not files.qualities):
            raise _NotCached
        purpose = "load"
    what = f"OpenML dataset {did}"

    def call():
        with _prefer_cached_arff(did):
            return openml.datasets.get_dataset(did, download_data=data,
                                               download_qualities=qualities,
                                               download_features_meta_data=True)
    try:
        return _remote(spec, field, what, call, purpose=purpose)
    except _READ_ERRORS as exc:
        raise _damaged(spec, field, what, _dataset_dir(did), exc) from None


# ----------------------------------------------------------------------------------- loading

def _as_list(value: Any) -> list[str]:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return [str(v) for v in value]


def _dropped_by_openml(ds) -> list[str]:
    return _as_list(ds.row_id_attribute) + _as_list(ds.ignore_attribute)


def _table(spec: DatasetSpec, field: str, ds, target: str):
    """Features, target and the categorical columns, as the client reads them from the cache."""
    names = {f.name: f for f in ds.features.values()}
    if target not in names:
        raise UserError(f"OpenML dataset {ds.dataset_id} ('{ds.name}') has no column "
                        f"'{target}'{closest(target, names)}", file=spec.where, field="target")
    if target in _dropped_by_openml(ds):
        raise UserError(f"OpenML dataset {ds.dataset_id} marks '{target}' as an ignored or "
                        "row-id column; choose another target", file=spec.where,
                        field="target")
    try:
        with _prefer_cached_arff(ds.dataset_id):
            X, y, indicator, columns = _remote(
                spec, field, f"OpenML dataset {ds.dataset_id}",
                lambda: ds.get_data(target=target, include_row_id=False,
                                    include_ignore_attribute=False, dataset_format="dataframe"),
                purpose="load")
    except _READ_ERRORS as exc:
        raise _damaged(spec, field, f"OpenML dataset {ds.dataset_id}",
                       _dataset_dir(ds.dataset_id), exc) from None
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


def _check_expect(spec: DatasetSpec, dataset: Dataset, openml_name: str, what: str) -> None:
    expect = spec.options.get("expect") or {}
    found = {"name": openml_name, "rows": dataset.n_rows, "columns": dataset.n_columns}
    for key in EXPECT_KEYS:
        if key in expect and expect[key] != found[key]:
            if key == "name":
                wanted, got = repr(expect[key]), repr(found[key])
            else:
                wanted, got = f"{expect[key]} {key}", f"{found[key]} {key}"
            note = (" (feature columns, not counting the target and the ignored, row-id and "
                    "'drop' columns)") if key == "columns" else ""
            raise UserError(f"expected {wanted}, found {got} in {what}{note}; check the id or "
                            "update 'expect'", file=spec.where, field=f"expect.{key}")


def _meta(ds, task=None, target=None, dropped=()) -> dict[str, Any]:
    meta = {"openml_dataset_id": int(ds.dataset_id), "openml_version": ds.version,
            "openml_name": ds.name, "openml_task_id": None, "target": target,
            "openml_dropped": list(dropped), "openml_server": _server()}
    if task is not None:
        meta["openml_task_id"] = int(task.task_id)
        meta["openml_task_type"] = task.task_type
        meta["openml_estimation"] = task.estimation_procedure.get("type")
    return meta


def _load_dataset_entry(spec: DatasetSpec) -> Dataset:
    did = int(spec.options["dataset"])
    ds = _get_dataset(spec, "dataset", did, data=True, qualities=False, purpose="load")
    target = spec.options.get("target")
    if target is None:
        default = _as_list(ds.default_target_attribute)
        if len(default) != 1 or "," in default[0]:
            how_many = "more than one default target" if default else "no default target"
            raise UserError(f"OpenML dataset {did} ('{ds.name}') has {how_many}"
                            f"{' (' + ', '.join(default) + ')' if default else ''}; name the "
                            "target column with target = \"...\"", file=spec.where,
                            field="target")
        target = default[0]
    what = f"OpenML dataset {did} ('{ds.name}')"
    _check_expect_name_early(spec, ds.name, what)
    X, y, categorical, target_feature = _table(spec, "dataset", ds, target)
    dataset = finish(spec.name, X, y, source=f"openml:dataset/{did}", where=spec.where,
                     task=_learning_type(spec, target_feature),
                     categorical=spec.options.get("categorical", categorical),
                     drop=spec.options.get("drop", ()),
                     meta=_meta(ds, target=target, dropped=_dropped_by_openml(ds)))
    _check_expect(spec, dataset, ds.name, what)
    return dataset


def _check_expect_name_early(spec: DatasetSpec, name: str, what: str) -> None:
    """A wrong name is known before the data are read; say so before reading them."""
    expect = spec.options.get("expect") or {}
    if "name" in expect and expect["name"] != name:
        raise UserError(f"expected {expect['name']!r}, found {name!r} in {what}; check the id "
                        "or update 'expect'", file=spec.where, field="expect.name")


_SUPPORTED_TASK_TYPES = ("SUPERVISED_CLASSIFICATION", "SUPERVISED_REGRESSION")


class UnsupportedTaskType(UserError):
    """An OpenML task of another type than supervised classification or regression."""

    def __init__(self, spec: DatasetSpec, tid: int, type_name: str) -> None:
        super().__init__(f"OpenML task {tid} is a '{type_name}' task; woodlot runs only "
                         "supervised classification and regression tasks", file=spec.where,
                         field="task")
        self.task_id, self.type_name = tid, type_name


def _unsupported(spec: DatasetSpec, tid: int, type_name: str) -> UnsupportedTaskType:
    return UnsupportedTaskType(spec, tid, type_name)


def _get_task(spec: DatasetSpec, tid: int, *, purpose: str, qualities: bool = False):
    """The client's task object (description and its dataset's metadata, no data or splits)."""
    openml = _client()
    cached = _read_xml(_task_dir(tid) / "task.xml", "oml:task")
    if cached is not None and str(cached.get("oml:task_type_id")) not in ("1", "2"):
        # refuse from the cached description: the client would delete it for some types
        raise _unsupported(spec, tid, str(cached.get("oml:task_type")
                                          or f"type {cached.get('oml:task_type_id')}"))
    if purpose == "check":
        did = _cached_task_dataset(tid)
        files = _data_files(did) if did is not None else None
        if files is None or not files.metadata or (qualities and not files.qualities):
            raise _NotCached
        purpose = "load"
    what = f"OpenML task {tid}"
    try:
        task = _remote(spec, "task", what,
                       lambda: openml.tasks.get_task(tid, download_splits=False,
                                                     download_data=False,
                                                     download_qualities=qualities,
                                                     download_features_meta_data=True),
                       purpose=purpose)
    except NotImplementedError as exc:  # the client knows no class for this task type
        match = re.search(r"Task type (.+?) not supported", str(exc))
        raise _unsupported(spec, tid, match.group(1) if match else str(exc)) from None
    except _READ_ERRORS as exc:
        raise _damaged(spec, "task", what, _task_dir(tid), exc) from None
    if task.task_type_id.name not in _SUPPORTED_TASK_TYPES:
        raise _unsupported(spec, tid, task.task_type)
    return task


def _task_splits(spec: DatasetSpec, task, n_rows: int, *, purpose: str):
    tid = int(task.task_id)
    what = f"the splits of OpenML task {tid}"
    if purpose == "check":
        if not (_task_dir(tid) / "datasplits.arff").is_file():
            raise _NotCached
        purpose = "load"
    try:
        split = _remote(spec, "task", what, task.download_split, purpose=purpose)
    except _READ_ERRORS as exc:
        raise _damaged(spec, "task", what, _task_dir(tid), exc) from None
    out = []
    for repeat in sorted(split.split):
        for fold in sorted(split.split[repeat]):
            samples = split.split[repeat][fold]
            train, test = samples[max(samples)]  # learning-curve samples: the full training set
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
            out.append(Split(repeat=int(repeat), fold=int(fold), train=train,
                                       test=test))
    return tuple(out)


def _load_task_entry(spec: DatasetSpec) -> Dataset:
    tid = int(spec.options["task"])
    task = _get_task(spec, tid, purpose="load")
    ds = _get_dataset(spec, "task", task.dataset_id, data=True, qualities=False, purpose="load")
    what = f"OpenML task {tid} (dataset {ds.dataset_id} '{ds.name}')"
    _check_expect_name_early(spec, ds.name, what)
    X, y, categorical, _ = _table(spec, "task", ds, task.target_name)
    learning = (CLASSIFICATION if task.task_type_id.name == "SUPERVISED_CLASSIFICATION"
                else REGRESSION)
    splits = _task_splits(spec, task, len(X), purpose="load")
    dataset = finish(spec.name, X, y, source=f"openml:task/{tid}", where=spec.where,
                     task=learning, categorical=spec.options.get("categorical", categorical),
                     drop=spec.options.get("drop", ()), splits=splits,
                     meta=_meta(ds, task=task, target=task.target_name,
                                dropped=_dropped_by_openml(ds)))
    _check_expect(spec, dataset, ds.name, what)
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


# ------------------------------------------------------------------------- benchmark suites

def _suite_record(spec: DatasetSpec, *, purpose: str) -> dict[str, Any]:
    """The suite's id, alias, name and task ids: from the cache, else from the server."""
    key = spec.options["suite"]
    path = _suite_file(key)
    if path.is_file():
        try:
            record = json.loads(path.read_text(encoding="utf8"))
            record["tasks"] = [int(t) for t in record["tasks"]]
            record.setdefault("unsupported", {})
            return record
        except (ValueError, KeyError, TypeError) as exc:
            raise UserError(f"the cached task list of OpenML suite {key} ({path}) cannot be "
                            f"read ({_reason(exc)}); delete it and run 'woodlot fetch "
                            f"{spec.suite_file}' again", file=spec.where, field="suite") from None
    if purpose == "check":
        raise _NotCached
    openml = _client()
    try:
        suite = _remote(spec, "suite", f"OpenML suite {key}",
                        lambda: openml.study.get_suite(key), purpose=purpose)
    except ValueError as exc:  # the id belongs to a study of runs
        raise UserError(f"OpenML id {key} is not a benchmark suite of tasks ({exc})",
                        file=spec.where, field="suite") from None
    record = {"id": suite.id, "alias": suite.alias, "name": suite.name,
              "tasks": [int(t) for t in (suite.tasks or [])], "unsupported": {}}
    _write_suite_record(key, record)
    return record


def _write_suite_record(key: int | str, record: dict[str, Any]) -> None:
    keys = {str(key)} | ({str(record["id"])} if record.get("id") is not None else set())
    for k in keys:
        path = _suite_file(k)
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_suffix(".json.tmp")
        tmp.write_text(json.dumps(record, indent=1, sort_keys=True), encoding="utf8")
        tmp.replace(path)


@dataclass(frozen=True)
class TaskSummary:
    """What a suite filter looks at, from cached task and dataset metadata."""

    task_id: int
    dataset_id: int
    dataset_name: str
    learning: str
    rows: int | None
    columns: int
    classes: int | None


def _task_summary(spec: DatasetSpec, tid: int, *, purpose: str,
                  need_rows: bool) -> TaskSummary:
    qualities = need_rows or purpose == "fetch"  # a fetch keeps them for later filters
    task = _get_task(spec, tid, purpose=purpose, qualities=qualities)
    ds = _get_dataset(spec, "suite", task.dataset_id, data=False, qualities=qualities,
                      purpose=purpose)
    # (read only when the file is there: for a dataset without qualities the client would
    # ask the server again on every access)
    qualities = (ds.qualities or {}) if _data_files(ds.dataset_id).qualities else {}
    dropped = set(_dropped_by_openml(ds)) | {task.target_name}
    columns = sum(1 for f in ds.features.values() if f.name not in dropped)
    learning = (CLASSIFICATION if task.task_type_id.name == "SUPERVISED_CLASSIFICATION"
                else REGRESSION)
    classes = None
    if learning == CLASSIFICATION:
        value = qualities.get("NumberOfClasses")
        if value is not None and np.isfinite(value) and value > 0:
            classes = int(value)
        else:
            target = next((f for f in ds.features.values() if f.name == task.target_name), None)
            classes = len(target.nominal_values or []) if target is not None else None
    rows = qualities.get("NumberOfInstances")
    rows = int(rows) if rows is not None and np.isfinite(rows) else None
    return TaskSummary(task_id=tid, dataset_id=int(ds.dataset_id), dataset_name=str(ds.name),
                       learning=learning, rows=rows, columns=columns, classes=classes)


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


def _suite_members(spec: DatasetSpec, *, purpose: str) -> list[TaskSummary]:
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
                _write_suite_record(spec.options["suite"], record)
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
    to ``woodlot fetch``). Tasks of other types than supervised classification and
    regression are left out.
    """
    kept = _suite_members(spec, purpose="load")
    counts: dict[str, int] = {}
    for s in kept:
        counts[s.dataset_name] = counts.get(s.dataset_name, 0) + 1
    out = []
    for s in kept:
        base = _UNSAFE.sub("_", s.dataset_name).strip("_") or f"dataset{s.dataset_id}"
        name = f"{spec.name}/{base}" + (f"-{s.task_id}" if counts[s.dataset_name] > 1 else "")
        out.append(DatasetSpec(name=name, source=spec.source, options={"task": s.task_id},
                               suite_file=spec.suite_file, position=spec.position))
    return out


# ----------------------------------------------------------------------------- fetch / cached

def is_cached(spec: DatasetSpec) -> bool:
    """Whether every file the entry needs is in the cache (no server contact)."""
    check_openml_entry(spec)
    kind = entry_kind(spec)
    if kind == "dataset":
        return _dataset_cached(int(spec.options["dataset"]))
    if kind == "task":
        return _task_cached(int(spec.options["task"]))
    try:
        kept = _suite_members(spec, purpose="check")
    except _NotCached:
        return False
    except UserError:
        return False
    return all(_task_cached(s.task_id) for s in kept)


def _say(progress: Progress | None, message: str) -> None:
    if progress is not None:
        progress(message)


def _fetch_dataset(spec: DatasetSpec, field: str, did: int, progress: Progress | None) -> bool:
    files = _data_files(did)
    if files.metadata and files.data:
        _say(progress, f"{spec.name}: OpenML dataset {did} is already cached")
        return False
    _say(progress, f"{spec.name}: downloading OpenML dataset {did}")
    _get_dataset(spec, field, did, data=True, qualities=True, purpose="fetch")
    return True


def _fetch_task(spec: DatasetSpec, tid: int, progress: Progress | None) -> bool:
    if _task_cached(tid):
        _say(progress, f"{spec.name}: OpenML task {tid} is already cached")
        return False
    _say(progress, f"{spec.name}: downloading OpenML task {tid}")
    task = _get_task(spec, tid, purpose="fetch", qualities=True)
    _fetch_dataset(spec, "task", task.dataset_id, progress)
    _remote(spec, "task", f"the splits of OpenML task {tid}", task.download_split,
            purpose="fetch")
    return True


def fetch(spec: DatasetSpec, progress: Progress | None = None) -> list[str]:
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
        if _fetch_dataset(spec, "dataset", did, progress):
            done.append(f"dataset/{did}")
    elif kind == "task":
        tid = int(spec.options["task"])
        if _fetch_task(spec, tid, progress):
            done.append(f"task/{tid}")
    else:
        key = spec.options["suite"]
        if not _suite_file(key).is_file():
            _say(progress, f"{spec.name}: downloading the task list of OpenML suite {key}")
            done.append(f"suite/{key}")
        kept = _suite_members(spec, purpose="fetch")
        for s in kept:
            if _fetch_task(spec, s.task_id, progress):
                done.append(f"task/{s.task_id}")
    return done


__all__ = ["TaskSummary", "UnsupportedTaskType", "cache_directory", "check_openml_entry",
           "entry_kind", "expand_benchmark_suite", "fetch", "is_cached", "load_openml"]
