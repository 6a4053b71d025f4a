"""The results store: one SQLite file per results folder.

- One transaction per finished cell (WAL journal), so a crash, Ctrl-C or timeout loses at
  most the cells in flight and never leaves a half-written row.
- Cells are keyed by `harness.work_units.unit_key`; a run skips keys already stored.
- Each run records its plan (the keys it wanted), so tables and plots are regenerated from
  the store alone and show the latest plan, not cells of datasets that have since changed.
- Every cell keeps the run that computed it, and every run its own provenance.
- A change counter (``meta`` row ``changes``, kept by triggers) moves with every write the
  report reads, so outputs written from one state of the store are known to be up to date.
- The write-ahead log is checkpointed as cells arrive, so it stays small during a long run.
- Searches of tuned strategies (`harness.search`) have tables of their own: ``trials`` (one
  row per configuration scored on the inner splits) and ``refits`` (a configuration refit on
  the outer training rows), both keyed by (search, unit key) where the search is the key of
  its tuned cell; ``tuned`` holds, per tuned cell, the chosen configuration and the cost of
  the search and of the refit. A tuned cell's row in ``cells`` is composed from its last
  refit, with the search's fit time added, in the same transaction as its ``tuned`` row.
"""

from __future__ import annotations

import functools
import json
import sqlite3
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable

import numpy as np
import pandas as pd

from harness.collector import paused
from harness.errors import UserError
from harness.folder_lock import running_elsewhere

STORE_NAME = "cells.sqlite"
SCHEMA_VERSION = 3

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT);
CREATE TABLE IF NOT EXISTS runs (
    run INTEGER PRIMARY KEY AUTOINCREMENT, started REAL, finished REAL, suite TEXT,
    suite_text TEXT, command TEXT, provenance TEXT, state TEXT);
CREATE TABLE IF NOT EXISTS datasets (
    fingerprint TEXT PRIMARY KEY, name TEXT, summary TEXT);
CREATE TABLE IF NOT EXISTS plan (key TEXT PRIMARY KEY);
CREATE TABLE IF NOT EXISTS cells (
    key TEXT PRIMARY KEY, run INTEGER, dataset TEXT, strategy TEXT, method TEXT, family TEXT,
    task TEXT, repeat INTEGER, fold INTEGER, fingerprint TEXT, n_train INTEGER, n_test INTEGER,
    status TEXT, message TEXT, detail TEXT, scores TEXT, fit_seconds REAL,
    fit_cpu_seconds REAL, predict_seconds REAL, peak_memory_bytes INTEGER, model_bytes INTEGER,
    curve TEXT, threads INTEGER, timing TEXT, worker TEXT, seconds REAL, finished REAL,
    row_evidence BLOB);
CREATE TABLE IF NOT EXISTS speedup (
    id INTEGER PRIMARY KEY AUTOINCREMENT, run INTEGER, key TEXT, dataset TEXT, strategy TEXT,
    family TEXT, method TEXT, task TEXT, workers INTEGER, repeat INTEGER, status TEXT,
    message TEXT, n_train INTEGER, n_test INTEGER, fit_seconds REAL, fit_cpu_seconds REAL,
    predict_seconds REAL, predict_rows_per_second REAL, other_load REAL, limits TEXT,
    host TEXT, finished REAL);
CREATE TABLE IF NOT EXISTS speedup_plan (key TEXT PRIMARY KEY);
CREATE TABLE IF NOT EXISTS trials (
    search TEXT, key TEXT, run INTEGER, dataset TEXT, strategy TEXT, repeat INTEGER,
    fold INTEGER, trial INTEGER, round INTEGER, rows INTEGER, config TEXT, status TEXT,
    message TEXT, detail TEXT, inner_scores TEXT, inner_score REAL, fit_seconds REAL,
    fit_cpu_seconds REAL, worker TEXT, seconds REAL, finished REAL, PRIMARY KEY (search, key));
CREATE TABLE IF NOT EXISTS refits (
    search TEXT, key TEXT, run INTEGER, trial INTEGER, status TEXT, row TEXT, finished REAL,
    PRIMARY KEY (search, key));
CREATE TABLE IF NOT EXISTS tuned (
    key TEXT PRIMARY KEY, run INTEGER, search_kind TEXT, budget TEXT, trials INTEGER,
    chosen INTEGER, configuration TEXT, inner_score REAL, search_seconds REAL,
    search_cpu_seconds REAL, refit_seconds REAL, refit_cpu_seconds REAL, finished REAL);
"""

# Tables whose every insert, update and delete moves the change counter; the runs table moves
# it only for runs that stored cells or speedup points (a rerun that fits nothing leaves the
# store's state, and so the outputs, as they were).
_COUNTED = ("cells", "plan", "speedup", "speedup_plan", "datasets", "trials", "refits", "tuned")
_BUMP = "UPDATE meta SET value = CAST(value AS INTEGER) + 1 WHERE key = 'changes';"
_STATE = "\n".join(
    [f"CREATE TRIGGER IF NOT EXISTS changes_{t}_{op.lower()} AFTER {op} ON {t} BEGIN {_BUMP} END;"
     for t in _COUNTED for op in ("INSERT", "UPDATE", "DELETE")]
    + ["CREATE TRIGGER IF NOT EXISTS changes_runs_update AFTER UPDATE ON runs WHEN EXISTS "
       "(SELECT 1 FROM cells WHERE run = NEW.run) OR EXISTS (SELECT 1 FROM speedup WHERE "
       f"run = NEW.run) BEGIN {_BUMP} END;",
       "INSERT OR IGNORE INTO meta VALUES ('changes', '0');",
       "INSERT OR IGNORE INTO meta VALUES ('store_id', lower(hex(randomblob(8))));",
       # which rows trained and tested each cell (`harness.splits.split_id`), by cell key
       "CREATE TABLE IF NOT EXISTS cell_splits (key TEXT PRIMARY KEY, split TEXT);"])

# The write-ahead log is checkpointed into the store once it holds this many pages (4 KiB
# each) and cut back to WAL_LIMIT bytes when it starts over.
WAL_PAGES = 128
WAL_LIMIT = WAL_PAGES * 4096
_CHUNK = 10_000  # rows read at a time into a frame
_CURVE_CHUNK = 2_000  # curves read at a time: their points as Python lists are large (the
# curves of 30,000 cells: 38 MB more memory at 10,000 a time, 24 MB at 2,000, as fast)

SEARCH_TABLES = ("trials", "refits", "tuned")
_TRIAL_COLUMNS = ("search", "key", "run", "dataset", "strategy", "repeat", "fold", "trial",
                  "round", "rows", "config", "status", "message", "detail", "inner_scores",
                  "inner_score", "fit_seconds", "fit_cpu_seconds", "worker", "seconds",
                  "finished")
_TUNED_COLUMNS = ("key", "run", "search_kind", "budget", "trials", "chosen", "configuration",
                  "inner_score", "search_seconds", "search_cpu_seconds", "refit_seconds",
                  "refit_cpu_seconds", "finished")
# the columns `cells_frame` adds to every cell from ``tuned`` (empty for untuned strategies)
TUNED_FRAME_COLUMNS = ("tuned", "search_seconds", "refit_seconds", "trials", "configuration")

# speedup points: one row per timed repeat
_SPEEDUP_COLUMNS = ("run", "key", "dataset", "strategy", "family", "method", "task", "workers",
                    "repeat", "status", "message", "n_train", "n_test", "fit_seconds",
                    "fit_cpu_seconds", "predict_seconds", "predict_rows_per_second",
                    "other_load", "limits", "host", "finished")

_IDENTITY = ("key", "dataset", "strategy", "repeat", "fold")  # what names a cell
_CELL_COLUMNS = ("key", "run", "dataset", "strategy", "method", "family", "task", "repeat",
                 "fold", "fingerprint", "n_train", "n_test", "status", "message", "detail",
                 "scores", "fit_seconds", "fit_cpu_seconds", "predict_seconds",
                 "peak_memory_bytes", "model_bytes", "curve", "threads", "timing", "worker",
                 "seconds", "finished", "row_evidence")


def _json_list(texts: Iterable[Any], missing: str) -> list:
    """The JSON texts of a column parsed in one call (``missing`` stands for a NULL), with
    the cyclic garbage collector `paused`: parsing creates hundreds of thousands of lists,
    none of them garbage."""
    text = "[" + ",".join(t if isinstance(t, str) else missing for t in texts) + "]"
    with paused():
        return json.loads(text)


def _read(cursor: sqlite3.Cursor, parse: dict[str, str] | None = None,
          convert: dict | None = None) -> tuple[pd.DataFrame, dict[str, list]]:
    """The rows of a query as a frame, read in chunks so that they never all exist at once
    as Python objects, each column made an array chunk by chunk (`_Column`). The JSON
    columns of ``parse`` (column → the JSON a NULL stands for) come back parsed beside the
    frame, as one list per chunk (passed through ``convert[column]`` first, when given)."""
    convert = convert or {}
    names = [d[0] for d in cursor.description]
    parse = parse or {}
    columns = {n: _Column() for n in names if n not in parse}
    parsed = {c: [] for c in parse}
    while rows := cursor.fetchmany(_CHUNK):
        for name, values in zip(names, zip(*rows)):
            if name in parse:
                found = _json_list(values, parse[name])
                parsed[name].append(convert[name](found) if name in convert else found)
            else:
                columns[name].add(values)
    # object arrays passed as they are: pandas 3 would make text columns Arrow-backed
    return pd.DataFrame({n: pd.Series(a, dtype=a.dtype, copy=False)
                         for n, a in ((n, c.array()) for n, c in columns.items())}), parsed


class _Column:
    """One column of a query, chunk by chunk, as NumPy arrays: integers as ``int64``,
    numbers with NULLs as ``float64`` (NULL → NaN), anything else (text) as ``object`` with
    one Python string per distinct value (NULL → NaN, as pandas has it for text; a column
    of nothing but NULLs holds None).

    Plain strings rather than pandas 3's Arrow-backed ``str``: the analysis selects rows
    and splits groups of a big frame thousands of times, and each such step costs more on
    Arrow strings (the report of 100,000 cells: 15.1 s with them, 12.3 s without; the
    outputs are the same). One object per distinct value: the 100,000 cells of a big store
    name a few dozen datasets."""

    def __init__(self) -> None:
        self.parts: list[np.ndarray | int] = []  # an int: that many NULLs

    def add(self, values: tuple) -> None:
        kinds = set(map(type, values))
        null = type(None) in kinds
        kinds.discard(type(None))
        if not kinds:
            self.parts.append(len(values))
            return
        if kinds <= {int, float}:
            try:
                self.parts.append(np.array(values, dtype=np.int64 if kinds == {int} and not null
                                           else float))
                return
            except OverflowError:  # an integer beyond 64 bits: kept as it is
                pass
        codes, distinct = pd.factorize(np.array(values, dtype=object), use_na_sentinel=False)
        self.parts.append(np.asarray(distinct, dtype=object).take(codes))

    def array(self) -> np.ndarray:
        arrays = [p for p in self.parts if not isinstance(p, int)]
        if not arrays:
            return np.full(sum(self.parts), None, dtype=object)
        kind = object if any(a.dtype == object for a in arrays) else float
        return np.concatenate([np.full(p, np.nan, dtype=kind) if isinstance(p, int) else p
                               for p in self.parts])


class _ScoreChunk:
    """One chunk of a parsed ``scores`` column, kept as a frame (so that its dicts go before
    the next chunk is read) and, per row, which of the chunk's distinct sets of metric
    names it has (to order the columns as one frame of all the dicts would)."""

    def __init__(self, dicts: list[dict]) -> None:
        self.data = pd.DataFrame(dicts)
        ids: dict[tuple, int] = {}
        self.codes = np.fromiter((ids.setdefault(tuple(d), len(ids)) for d in dicts),
                                 dtype=np.int64, count=len(dicts))
        self.names = list(ids)

    @staticmethod
    def frame(chunks: list["_ScoreChunk"], order: np.ndarray) -> pd.DataFrame:
        """The chunks' rows as one frame, taken in ``order``, its columns ordered by first
        appearance in that order (as ``pd.DataFrame`` of the dicts in that order has them)."""
        if not chunks:
            return pd.DataFrame(index=range(len(order)))
        index: dict[tuple, int] = {}
        codes = np.concatenate([np.array([index.setdefault(n, len(index)) for n in c.names],
                                         dtype=np.int64)[c.codes] if len(c.codes) else c.codes
                                for c in chunks])
        position = np.empty(len(order), dtype=np.int64)
        position[order] = np.arange(len(order))
        first = np.full(len(index), len(order), dtype=np.int64)
        np.minimum.at(first, codes, position)
        columns: dict[str, None] = {}
        for names in sorted(index, key=lambda n: first[index[n]]):
            columns.update(dict.fromkeys(names))
        data = pd.concat([c.data for c in chunks], ignore_index=True)
        return data.reindex(columns=list(columns)).take(order).reset_index(drop=True)


def _score_frame(chunks: list[pd.DataFrame], n: int) -> pd.DataFrame:
    """The per-chunk frames of a parsed ``scores`` column as one frame of ``n`` rows."""
    return (pd.concat(chunks, ignore_index=True) if chunks else pd.DataFrame()).reindex(range(n))


def _sorted(frame: pd.DataFrame, by: list[str]) -> pd.DataFrame:
    order = frame[by].sort_values(by, kind="stable").index
    return frame.loc[order].reset_index(drop=True)


@dataclass
class CellMatch:
    """The cells of two stores' latest plans matched by `Store.match_cells`.

    ``pairs``: one row per matched cell: ``matched`` ("key" or "identity"), ``dataset,
    strategy, repeat, fold`` (of A); for each side (suffix ``_a``, ``_b``) ``status, message,
    method, fit_seconds, predict_seconds`` and one column per metric of ``metrics``; and
    whether the two cells differ in ``data_differs`` (content fingerprint), ``sizes_differ``
    (training or test rows) and ``rows_differ`` (which rows: both splits recorded and
    different).
    ``only_a``, ``only_b``: unmatched cells, ``dataset, strategy, repeat, fold, status``.
    ``scores_a``: the successful cells of A, ``dataset, strategy`` and its metrics."""

    cells_a: int
    cells_b: int
    metrics: list[str]
    pairs: pd.DataFrame
    only_a: pd.DataFrame
    only_b: pd.DataFrame
    scores_a: pd.DataFrame


def remove_store(folder: Path) -> None:
    """Delete a folder's store (``--fresh``)."""
    for suffix in ("", "-wal", "-shm"):
        (folder / (STORE_NAME + suffix)).unlink(missing_ok=True)


def store_problem(path: Path, exc: Exception) -> UserError:
    """The one message for an SQLite error on the store at ``path``."""
    text = str(exc)
    low = text.lower()
    if "full" in low:
        why = ("the disk is full; every cell stored before this is kept: free some space and "
               "run the same command again to resume")
    elif "disk i/o" in low:
        why = (f"the system refused a read or write ({text}: disk full, file size limit or a "
               "failing disk?); every cell stored before this is kept")
    elif "readonly" in low or "read-only" in low:
        why = "the store cannot be written here (read-only); choose another --out"
    elif "malformed" in low or "not a database" in low or "no such" in low \
            or "corrupt" in low or isinstance(exc, json.JSONDecodeError):
        why = (f"the store is damaged ({text}); run the suite again with --fresh into this "
               "folder, or with another --out")
    else:
        why = f"cannot use the results store ({text})"
    return UserError(why, file=path)


def reported(method):
    """Turn an SQLite error inside a `Store` method into a `UserError` naming the store."""
    @functools.wraps(method)
    def wrapped(self, *args, **kwargs):
        try:
            return method(self, *args, **kwargs)
        except (sqlite3.Error, pd.errors.DatabaseError, json.JSONDecodeError) as exc:
            raise store_problem(self.path, exc) from None
    return wrapped


@functools.lru_cache(maxsize=1)
def expected_columns() -> dict[str, tuple[str, ...]]:
    """Table → columns, as `_SCHEMA` makes them."""
    db = sqlite3.connect(":memory:")
    db.executescript(_SCHEMA)
    tables = [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table' AND "
                                       "name NOT LIKE 'sqlite_%'")]
    out = {t: tuple(r[1] for r in db.execute(f"PRAGMA table_info({t})")) for t in tables}
    db.close()
    return out


class Store:
    """Open (or create) the store of a results folder.

    ``read_only`` opens an existing store without any means to change it (SQLite's
    ``mode=ro``, ``query_only``), for commands that only read (``report``, ``agree``,
    `harness.load_results`): a colleague's folder on a read-only share can be read. Every
    connection has ``trusted_schema`` off, so a crafted store cannot make a read call
    functions through its views or triggers.
    """

    def __init__(self, folder: str | Path, *, read_only: bool = False) -> None:
        self.folder = Path(folder)
        self.path = self.folder / STORE_NAME
        self.read_only = read_only
        if not self.path.exists() and read_only:
            raise UserError(f"no results store in {self.folder} (expected {STORE_NAME}); run a "
                            "suite first with 'woodlot run SUITE'")
        if self.path.exists() and not self.path.is_file():
            raise UserError(f"{self.path} is a folder, not a results store")
        if not read_only:
            try:
                self.folder.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise UserError(f"cannot create the results folder ({exc.strerror or exc})",
                                file=self.folder) from None
        self.db = None
        self.uri = ""  # how the file was opened (`_connect`)
        try:
            self.db = self._connect()
            found = self._schema()
            if found is not None and found != SCHEMA_VERSION:
                raise UserError(f"{self.path} was written by another woodlot version (store "
                                f"schema {found}; this one reads {SCHEMA_VERSION}); its cells "
                                "cannot be reused: run with --fresh, or choose another --out")
            if not read_only:
                self._create()
            self._check_columns()
        except sqlite3.DatabaseError as exc:
            self.close()
            if "not a database" in str(exc):
                raise UserError(f"{self.path} is not a woodlot results store ({exc})") from None
            raise store_problem(self.path, exc) from None
        except BaseException:
            self.close()
            raise

    def _connect(self) -> sqlite3.Connection:
        if not self.read_only:
            db = sqlite3.connect(self.path, timeout=30, isolation_level=None)
            db.execute("PRAGMA trusted_schema=OFF")
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=NORMAL")
            db.execute(f"PRAGMA wal_autocheckpoint={WAL_PAGES}")
            db.execute(f"PRAGMA journal_size_limit={WAL_LIMIT}")
            self.uri = str(self.path)
            return db
        uri = self.path.resolve().as_uri()
        options = ["mode=ro&immutable=1"]
        if Path(f"{self.path}-wal").exists() or running_elsewhere(self.folder) is not None:
            # A run is writing, or one that was killed left committed cells in the write-ahead
            # log: read through SQLite's locks and the log (it makes its shared-memory file if
            # need be). Otherwise the file holds everything and nobody writes it (runs hold
            # the folder's lock), so it is read as it is and nothing is created beside it.
            options.insert(0, "mode=ro")
        error: sqlite3.OperationalError | None = None
        for option in options:
            db = sqlite3.connect(f"{uri}?{option}", uri=True, timeout=30, isolation_level=None)
            try:
                db.execute("PRAGMA trusted_schema=OFF")
                db.execute("PRAGMA query_only=ON")
                db.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()
                self.uri = f"{uri}?{option}"  # how `match_cells` attaches it, read-only too
                return db
            except sqlite3.OperationalError as exc:  # a read-only folder: no shared memory
                db.close()
                if "unable to open" not in str(exc) and "readonly" not in str(exc):
                    raise
                error = exc
        raise error

    def _create(self) -> None:
        """The tables, all or none (one transaction: a disk that fills up half-way leaves
        the file as it was)."""
        try:
            self.db.executescript(f"BEGIN IMMEDIATE;\n{_SCHEMA}\n{_STATE}\nINSERT OR IGNORE "
                                  f"INTO meta VALUES ('schema', '{SCHEMA_VERSION}');\nCOMMIT;")
        except sqlite3.Error:
            if self.db.in_transaction:
                self.db.execute("ROLLBACK")
            raise

    def _schema(self) -> int | None:
        """The schema version the store was written with (None for a new, empty file)."""
        tables = {r[0] for r in self.db.execute("SELECT name FROM sqlite_master WHERE "
                                                 "type='table'")}
        if "meta" not in tables:
            if tables or self.read_only:
                raise UserError(f"{self.path} is not a woodlot results store (it has no table "
                                "'meta')")
            return None
        found = self.db.execute("SELECT value FROM meta WHERE key='schema'").fetchone()
        try:
            return int(found[0]) if found else None
        except (TypeError, ValueError):
            raise UserError(f"{self.path} is not a woodlot results store (schema "
                            f"{found[0]!r})") from None

    def _check_columns(self) -> None:
        for table, columns in expected_columns().items():
            found = {r[1] for r in self.db.execute(f"PRAGMA table_info({table})")}
            if not found and table in SEARCH_TABLES:
                continue  # a store written before tuning existed, opened read-only
            missing = [c for c in columns if c not in found]
            if missing:
                what = f"has no table '{table}'" if not found else \
                    f"table '{table}' lacks column{'s' if len(missing) > 1 else ''} " \
                    f"{', '.join(missing)}"
                raise UserError(f"the store is damaged or was changed by another program: it "
                                f"{what}; run the suite again with --fresh or another --out",
                                file=self.path)

    def close(self) -> None:
        if self.db is not None:
            self.db.close()
            self.db = None

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ runs and plan
    @reported
    def start_run(self, suite_name: str, suite_text: str, command: str,
                  provenance: dict[str, Any]) -> int:
        cur = self.db.execute(
            "INSERT INTO runs (started, suite, suite_text, command, provenance, state) "
            "VALUES (?, ?, ?, ?, ?, 'running')",
            (time.time(), suite_name, suite_text, command, json.dumps(provenance)))
        return int(cur.lastrowid)

    @reported
    def finish_run(self, run: int, state: str, provenance: dict[str, Any] | None = None) -> None:
        if provenance is not None:
            self.db.execute("UPDATE runs SET finished=?, state=?, provenance=? WHERE run=?",
                            (time.time(), state, json.dumps(provenance), run))
        else:
            self.db.execute("UPDATE runs SET finished=?, state=? WHERE run=?",
                            (time.time(), state, run))

    @reported
    def mark_killed(self) -> list[dict[str, Any]]:
        """Mark as killed every run still marked running; call it only while holding the
        folder's lock (then no process of those runs is alive). Returns those runs."""
        rows = self.db.execute("SELECT run, started, provenance FROM runs WHERE "
                               "state='running'").fetchall()
        if rows:
            self.db.execute("UPDATE runs SET state='killed' WHERE state='running'")
        return [{"run": r, "started": t, "provenance": json.loads(p or "{}")}
                for r, t, p in rows]

    _RUN_FIELDS = ("run", "started", "finished", "suite", "suite_text", "command",
                   "provenance", "state")

    def _run_rows(self, where: str = "", params: Iterable[Any] = ()) -> list[dict[str, Any]]:
        rows = self.db.execute(f"SELECT {', '.join(self._RUN_FIELDS)} FROM runs {where}",
                               tuple(params)).fetchall()
        out = [dict(zip(self._RUN_FIELDS, row)) for row in rows]
        for r in out:
            r["provenance"] = json.loads(r["provenance"] or "{}")
        return out

    @reported
    def last_run(self) -> dict[str, Any] | None:
        found = self._run_rows("ORDER BY run DESC LIMIT 1")
        return found[0] if found else None

    @reported
    def latest_cell_run(self) -> dict[str, Any] | None:
        """The latest run that stored a cell (a rerun that fitted nothing is not one)."""
        found = self._run_rows("WHERE run = (SELECT MAX(run) FROM cells)")
        return found[0] if found else None

    @reported
    def runs(self, numbers: Iterable[int]) -> list[dict[str, Any]]:
        """The given runs (oldest first), each with its own provenance."""
        numbers = sorted({int(n) for n in numbers})
        return self._run_rows(f"WHERE run IN ({', '.join('?' * len(numbers))}) ORDER BY run",
                              numbers)

    @reported
    def state(self) -> str | None:
        """The store's identity and change counter, ``"<store id>:<changes>"``: equal values
        mean nothing the report reads has changed in between (None for a store written before
        the counter existed)."""
        found = dict(self.db.execute("SELECT key, value FROM meta WHERE key IN "
                                     "('store_id', 'changes')").fetchall())
        if len(found) < 2:
            return None
        return f"{found['store_id']}:{found['changes']}"

    @reported
    def set_plan(self, keys: Iterable[str]) -> None:
        """The cells the latest run wants (left as it is when it holds the same keys)."""
        keys = set(keys)
        if keys == {k for (k,) in self.db.execute("SELECT key FROM plan")}:
            return
        with self.db:
            self.db.execute("BEGIN")
            self.db.execute("DELETE FROM plan")
            self.db.executemany("INSERT OR IGNORE INTO plan VALUES (?)", ((k,) for k in keys))

    @reported
    def record_splits(self, splits: Iterable[tuple[str, str]]) -> None:
        """(cell key, split id) pairs: which rows trained and tested each cell. A key fixes
        its split, so a pair once stored never changes."""
        with self.db:
            self.db.execute("BEGIN")
            self.db.executemany("INSERT OR IGNORE INTO cell_splits VALUES (?, ?)", splits)

    @reported
    def record_datasets(self, summaries: Iterable[tuple[str, str, dict]]) -> None:
        with self.db:
            self.db.execute("BEGIN")
            self.db.executemany(
                "INSERT INTO datasets VALUES (?, ?, ?) ON CONFLICT (fingerprint) DO UPDATE SET "
                "name = excluded.name, summary = excluded.summary WHERE datasets.name IS NOT "
                "excluded.name OR datasets.summary IS NOT excluded.summary",
                ((fp, name, json.dumps(s)) for fp, name, s in summaries))

    @reported
    def known_fingerprints(self) -> dict[str, set[str]]:
        """Dataset name → fingerprints that have stored cells."""
        out: dict[str, set[str]] = {}
        for name, fp in self.db.execute("SELECT DISTINCT dataset, fingerprint FROM cells"):
            out.setdefault(name, set()).add(fp)
        return out

    # ------------------------------------------------------------------ cells
    @reported
    def finished_keys(self, *, include_failed: bool = True) -> set[str]:
        sql = "SELECT key FROM cells" + ("" if include_failed else " WHERE status='ok'")
        return {r[0] for r in self.db.execute(sql)}

    @reported
    def put(self, row: dict[str, Any], run: int) -> None:
        """Write one finished cell in its own transaction."""
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            self._insert_cell(row, run)

    def _insert_cell(self, row: dict[str, Any], run: int) -> None:
        values = dict(row)
        values["run"] = run
        values["finished"] = time.time()
        for k in ("scores", "curve"):
            if values.get(k) is not None:
                values[k] = json.dumps(values[k])
        params = [values.get(c) for c in _CELL_COLUMNS]
        self.db.execute(f"INSERT OR REPLACE INTO cells ({', '.join(_CELL_COLUMNS)}) "
                        f"VALUES ({', '.join('?' * len(_CELL_COLUMNS))})", params)

    # ------------------------------------------------------------------ searches
    def put_trial(self, row: dict[str, Any], run: int) -> None:
        """Write one finished trial (keyed by its search and its key) in its own
        transaction."""
        v = {**row, "run": run, "finished": time.time()}
        for k in ("config", "inner_scores"):
            if v.get(k) is not None:
                v[k] = json.dumps(v[k])
        cols = _TRIAL_COLUMNS
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            self.db.execute(f"INSERT OR REPLACE INTO trials ({', '.join(cols)}) VALUES "
                            f"({', '.join('?' * len(cols))})", [v.get(c) for c in cols])

    def put_refit(self, search: str, trial: int, row: dict[str, Any], run: int) -> None:
        """Write one refit (a cell's row) of a search in its own transaction."""
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            self.db.execute("INSERT OR REPLACE INTO refits VALUES (?, ?, ?, ?, ?, ?, ?)",
                            (search, row["key"], run, trial, row["status"],
                             json.dumps(row, default=str), time.time()))

    def put_tuned(self, cell_row: dict[str, Any], tuned: dict[str, Any], run: int) -> None:
        """Write a tuned cell and what its search chose, in one transaction."""
        v = {**tuned, "key": cell_row["key"], "run": run, "finished": time.time()}
        if v.get("configuration") is not None:
            v["configuration"] = json.dumps(v["configuration"])
        cols = _TUNED_COLUMNS
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            self._insert_cell(cell_row, run)
            self.db.execute(f"INSERT OR REPLACE INTO tuned ({', '.join(cols)}) VALUES "
                            f"({', '.join('?' * len(cols))})", [v.get(c) for c in cols])

    def stored_trials(self, keys: Iterable[str], *, include_failed: bool = True
                      ) -> dict[str, dict[str, Any]]:
        """Unit key → a stored trial with that key (of any search: the same key is the same
        computation)."""
        out = {}
        for r in self._by_keys("trials", keys, include_failed):
            r["config"] = json.loads(r["config"]) if r["config"] else {}
            r["inner_scores"] = json.loads(r["inner_scores"]) if r["inner_scores"] else None
            out[r["key"]] = r
        return out

    def stored_refits(self, keys: Iterable[str], *, include_failed: bool = True
                      ) -> dict[str, dict[str, Any]]:
        """Unit key → ``{"row": the refit's row, "searches": the searches that have it}``."""
        out: dict[str, dict[str, Any]] = {}
        for r in self._by_keys("refits", keys, include_failed):
            found = out.setdefault(r["key"], {"row": json.loads(r["row"]), "searches": set()})
            found["searches"].add(r["search"])
        return out

    def _by_keys(self, table: str, keys: Iterable[str], include_failed: bool
                 ) -> list[dict[str, Any]]:
        keys = list(keys)
        rows = []
        for i in range(0, len(keys), 500):
            part = keys[i:i + 500]
            sql = (f"SELECT * FROM {table} WHERE key IN ({', '.join('?' * len(part))})"
                   + ("" if include_failed else " AND status='ok'"))
            rows += self._rows(sql, part)
        return rows

    def _has(self, table: str) -> bool:
        return self.db.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name=?",
                               (table,)).fetchone() is not None

    def _rows(self, sql: str, params=()) -> list[dict[str, Any]]:
        cur = self.db.execute(sql, params)
        names = [d[0] for d in cur.description]
        return [dict(zip(names, r)) for r in cur.fetchall()]

    def _in_plan(self, column: str) -> str:
        condition = self._plan_condition(column)
        return f" WHERE {condition}" if condition else ""

    def trials_frame(self) -> pd.DataFrame:
        """One row per trial of the searches of the latest plan."""
        frame = pd.read_sql_query("SELECT * FROM trials" + self._in_plan("search")
                                  + " ORDER BY search, round, trial", self.db)
        for k in ("config", "inner_scores"):
            frame[k] = [json.loads(v) if isinstance(v, str) else None for v in frame[k]]
        return frame

    def refits_frame(self) -> pd.DataFrame:
        """One row per refit of the searches of the latest plan: ``search, trial`` and the
        refit's cell columns (one per metric named after its scorer)."""
        got = self.db.execute("SELECT search, trial, row FROM refits" + self._in_plan("search")
                              ).fetchall()
        rows = []
        for search, trial, row in got:
            r = json.loads(row)
            scores = r.pop("scores", None) or {}
            rows.append({**r, **scores, "search": search, "trial": trial})
        return pd.DataFrame(rows)

    @reported
    def set_speedup_plan(self, keys: Iterable[str]) -> None:
        """The speedup points the latest speedup run wanted (tables show these, and only these)."""
        with self.db:
            self.db.execute("BEGIN")
            self.db.execute("DELETE FROM speedup_plan")
            self.db.executemany("INSERT OR IGNORE INTO speedup_plan VALUES (?)",
                                ((k,) for k in keys))

    @reported
    def speedup_keys(self, *, include_failed: bool = True) -> set[str]:
        sql = "SELECT DISTINCT key FROM speedup WHERE key IS NOT NULL"
        if not include_failed:
            sql += " AND status='ok'"
        return {r[0] for r in self.db.execute(sql)}

    @reported
    def put_speedup(self, rows: Iterable[dict[str, Any]], run: int) -> None:
        """Write the rows of one speedup point (one per repeat) in one transaction."""
        cols = _SPEEDUP_COLUMNS
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            for r in rows:
                v = {**r, "run": run, "finished": time.time()}
                if not isinstance(v.get("limits"), (str, type(None))):
                    v["limits"] = json.dumps(v["limits"])
                self.db.execute(f"INSERT INTO speedup ({', '.join(cols)}) VALUES "
                                f"({', '.join('?' * len(cols))})", [v.get(c) for c in cols])

    @reported
    def cells_frame(self, *, plan_only: bool = True, curves: bool = True,
                    columns: Iterable[str] | None = None) -> pd.DataFrame:
        """One row per cell; one column per metric named after its scorer. ``curves=False``
        leaves out the ensemble-size curves, most of a big frame's memory (`curve_points`
        reads them for chosen datasets); ``columns``: only these of the stored ones, besides
        the cell's key and identity (dataset, strategy, repeat, fold)."""
        wanted = None if columns is None else {*columns, *_IDENTITY}
        table = [c for (c,) in self.db.execute("SELECT name FROM pragma_table_info('cells')")
                 if c != "scores" and (curves or c != "curve")
                 and (wanted is None or c in wanted)]
        columns = ["key", *(c for c in table if c != "key"), "scores"]
        json_columns = {"scores": "{}", **({"curve": "null"} if curves else {})}
        in_plan = self._plan_condition() if plan_only else None
        frame, parsed = _read(self.db.execute(
            f"SELECT {', '.join(columns)} FROM cells"
            + (f" WHERE {in_plan}" if in_plan else "")), json_columns, {"scores": _ScoreChunk})
        by = ["dataset", "strategy", "repeat", "fold"]
        order = frame[by].sort_values(by, kind="stable").index.to_numpy()
        frame = frame.iloc[order].reset_index(drop=True)
        if curves:
            every = [x for chunk in parsed["curve"] for x in chunk]
            frame["curve"] = [every[i] for i in order]
        metrics = _ScoreChunk.frame(parsed["scores"], order)
        tuned = self._tuned_columns()
        frame = frame[table].astype({"key": object}).merge(tuned.astype({"key": object}),
                                                           on="key", how="left")
        frame["tuned"] = frame["tuned"].eq(True)
        return pd.concat([frame, metrics], axis=1)

    def _tuned_columns(self) -> pd.DataFrame:
        """Per tuned cell: `TUNED_FRAME_COLUMNS` (and its key)."""
        cols = ["key", "search_seconds", "refit_seconds", "trials", "configuration"]
        if not self._has("tuned"):
            return pd.DataFrame(columns=[*cols, "tuned"])
        tuned = pd.read_sql_query(f"SELECT {', '.join(cols)} FROM tuned", self.db)
        tuned["configuration"] = [json.loads(c) if isinstance(c, str) else None
                                  for c in tuned["configuration"]]
        tuned["tuned"] = True
        return tuned

    def _plan_condition(self, column: str = "+key") -> str | None:
        """SQL for: the row's ``column`` is a key of the latest plan (None when the store has
        no plan: every row counts). ``+key``: the cells are scanned once, each looked up in
        the plan, rather than searched by key once per planned key (0.15 s against 0.25 s
        for 100,000), and no set of 100,000 keys is made in Python."""
        if self.db.execute("SELECT 1 FROM plan LIMIT 1").fetchone():
            return f"{column} IN (SELECT key FROM plan)"
        return None

    @reported
    def plan_counts(self) -> list[tuple[str, int, int]]:
        """``(dataset, run, cells)`` for the latest plan's stored cells, ordered by dataset
        name (the order of `cells_frame`) and run: which datasets they are on and which runs
        computed them, without reading them."""
        return self.db.execute("SELECT dataset, run, COUNT(*) FROM cells" + self._in_plan("+key")
                               + " GROUP BY dataset, run ORDER BY dataset, run").fetchall()

    @reported
    def curve_points(self, datasets: Iterable[str]) -> pd.DataFrame:
        """The ensemble-size curves of the successful cells of the latest plan on
        ``datasets``, one row per point: ``key, dataset, strategy, members, score``."""
        names = list(datasets)
        in_plan = self._plan_condition()
        cursor = self.db.execute(
            "SELECT key, dataset, strategy, curve FROM cells WHERE status = 'ok' AND curve IS "
            f"NOT NULL AND dataset IN ({', '.join('?' * len(names))})"
            + (f" AND {in_plan}" if in_plan else ""), names)
        parts = []
        while rows := cursor.fetchmany(_CURVE_CHUNK):
            curves = _json_list((r[3] for r in rows), "[]")
            lengths = [len(c) for c in curves]
            points = np.array([p for c in curves for p in c], dtype=float).reshape(-1, 2)
            # text as references to the row's strings (a NumPy string array would hold a
            # fixed-width copy per point), kept plain as `_Column` keeps it
            text = {name: pd.Series(np.repeat(np.array([r[i] for r in rows], dtype=object),
                                              lengths), dtype=object)
                    for i, name in enumerate(("key", "dataset", "strategy"))}
            parts.append(pd.DataFrame({**text, "members": points[:, 0].astype(int),
                                       "score": points[:, 1]}))
        return (pd.concat(parts, ignore_index=True) if parts else
                pd.DataFrame(columns=["key", "dataset", "strategy", "members", "score"]))

    @reported
    def match_cells(self, other: "Store") -> CellMatch:
        """Match the cells of this store's latest plan (A) with those of ``other``'s (B), in
        SQL: first by cell key, then the rest by dataset, strategy, repeat and fold.

        ``other`` is attached to this connection as it was opened (read-only stays
        read-only). The work tables are temporary: on a read-only connection ``query_only``
        is lifted for them while this runs; neither store can be written (``mode=ro``)."""
        db = self.db
        if self.read_only:
            db.execute("PRAGMA query_only=OFF")
        db.execute("ATTACH DATABASE ? AS other",
                   (other.uri if self.read_only else str(other.path),))
        schemas = {"a": "main", "b": "other"}
        try:
            for x, schema in schemas.items():  # the plan's cells, identity and key only
                in_plan = db.execute(f"SELECT 1 FROM {schema}.plan LIMIT 1").fetchone()
                db.execute(f"DROP TABLE IF EXISTS temp.cells_{x}")
                db.execute(f"CREATE TEMP TABLE cells_{x} AS SELECT rowid AS src, key, dataset, "
                           f"strategy, repeat, fold FROM {schema}.cells"
                           + (f" WHERE key IN (SELECT key FROM {schema}.plan)" if in_plan else ""))
                db.execute(f"CREATE INDEX temp.cells_{x}_key ON cells_{x} (key)")
            db.execute("DROP TABLE IF EXISTS temp.pairs")
            db.execute("CREATE TEMP TABLE pairs AS SELECT 'key' AS matched, a.rowid AS ra, "
                       "b.rowid AS rb FROM cells_a a JOIN cells_b b ON a.key = b.key")
            left = db.execute("SELECT EXISTS (SELECT 1 FROM cells_a WHERE key NOT IN (SELECT "
                              "key FROM cells_b)) AND EXISTS (SELECT 1 FROM cells_b WHERE key "
                              "NOT IN (SELECT key FROM cells_a))").fetchone()[0]
            if left:  # cells whose keys differ: match them by what they are
                db.execute("CREATE INDEX temp.cells_b_id ON cells_b (dataset, strategy, repeat, "
                           "fold)")
                db.execute("INSERT INTO pairs SELECT 'identity', a.rowid, b.rowid FROM cells_a "
                           "a JOIN cells_b b ON a.dataset = b.dataset AND a.strategy = "
                           "b.strategy AND a.repeat = b.repeat AND a.fold = b.fold WHERE a.key "
                           "NOT IN (SELECT key FROM cells_b) AND b.key NOT IN (SELECT key FROM "
                           "cells_a)")

            splits = all(db.execute(f"SELECT 1 FROM {schema}.sqlite_master WHERE name = "
                                    "'cell_splits'").fetchone() for schema in schemas.values())
            sides = "".join(f", c{x}.{c} AS {c}_{x}" for x in "ab"
                            for c in ("status", "message", "method", "fit_seconds",
                                      "predict_seconds", "scores"))
            pairs, parsed = _read(db.execute(
                f"SELECT p.matched, a.dataset, a.strategy, a.repeat, a.fold{sides}, "
                "ca.fingerprint IS NOT cb.fingerprint AS data_differs, ca.n_train IS NOT "
                "cb.n_train OR ca.n_test IS NOT cb.n_test AS sizes_differ, "
                + ("sa.split IS NOT sb.split AND sa.split IS NOT NULL AND sb.split IS NOT NULL"
                   if splits else "0") + " AS rows_differ FROM pairs p "
                "JOIN cells_a a ON a.rowid = p.ra JOIN cells_b b ON b.rowid = p.rb "
                "JOIN main.cells ca ON ca.rowid = a.src JOIN other.cells cb ON cb.rowid = b.src"
                + (" LEFT JOIN main.cell_splits sa ON sa.key = ca.key LEFT JOIN "
                   "other.cell_splits sb ON sb.key = cb.key" if splits else "")),
                {"scores_a": "{}", "scores_b": "{}"},
                convert={"scores_a": pd.DataFrame, "scores_b": pd.DataFrame})
            only, only_scores = {}, {}
            for x in "ab":
                only[x], found = _read(db.execute(
                    f"SELECT {x}.dataset, {x}.strategy, {x}.repeat, {x}.fold, c.status, "
                    f"c.scores FROM cells_{x} {x} JOIN {schemas[x]}.cells c ON c.rowid = "
                    f"{x}.src WHERE {x}.rowid NOT IN (SELECT r{x} FROM pairs)"), {"scores": "{}"},
                    convert={"scores": pd.DataFrame})
                only_scores[x] = found["scores"]
            counts = [db.execute(f"SELECT COUNT(*) FROM cells_{x}").fetchone()[0] for x in "ab"]
        finally:
            for table in ("cells_a", "cells_b", "pairs"):
                db.execute(f"DROP TABLE IF EXISTS temp.{table}")
            db.execute("DETACH DATABASE other")
            if self.read_only:
                db.execute("PRAGMA query_only=ON")
        scores = {x: _score_frame(parsed.pop(f"scores_{x}"), len(pairs)) for x in "ab"}
        metrics = [m for m in scores["a"].columns if m in set(scores["b"].columns)]
        pairs = pd.concat([pairs, *(scores[x][metrics].astype(float).add_suffix(f"_{x}")
                                    for x in "ab")], axis=1)
        del scores
        identity = ["dataset", "strategy", "repeat", "fold"]
        keys = pairs[identity].assign(by_identity=pairs["matched"] == "identity")
        pairs = pairs.take(keys.sort_values(["by_identity", *identity], kind="stable").index)
        pairs = pairs.reset_index(drop=True)
        # the successful cells of A, matched or not: the fold-to-fold noise is measured on them
        rest = pd.concat([only["a"][["dataset", "strategy", "status"]],
                          _score_frame(only_scores["a"], len(only["a"]))
                          .reindex(columns=metrics)], axis=1)
        scores_a = pd.concat(
            [pairs.loc[pairs["status_a"] == "ok", ["dataset", "strategy",
                                                   *(f"{m}_a" for m in metrics)]]
             .set_axis(["dataset", "strategy", *metrics], axis=1),
             rest[rest["status"] == "ok"].drop(columns="status")], ignore_index=True)
        return CellMatch(counts[0], counts[1], metrics, pairs, _sorted(only["a"], identity),
                         _sorted(only["b"], identity), scores_a)

    @reported
    def speedup_frame(self) -> pd.DataFrame:
        """Rows of the speedup points of the latest speedup plan, each point's latest measurement
        (a point measured again replaces the earlier one)."""
        if not self.db.execute("SELECT COUNT(*) FROM speedup_plan").fetchone()[0]:
            return pd.DataFrame()
        return pd.read_sql_query(
            "SELECT s.* FROM speedup s JOIN (SELECT key, MAX(run) AS run FROM speedup "
            "WHERE key IN (SELECT key FROM speedup_plan) GROUP BY key) latest "
            "ON s.key = latest.key AND s.run = latest.run ORDER BY s.id", self.db)

    @reported
    def dataset_summaries(self) -> pd.DataFrame:
        rows = [json.loads(s) for (s,) in self.db.execute("SELECT summary FROM datasets")]
        return pd.DataFrame(rows)
