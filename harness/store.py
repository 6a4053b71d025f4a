"""The results store: one SQLite file per results folder.

- One transaction per finished cell (WAL journal), so a crash, Ctrl-C or timeout loses at
  most the cells in flight and never leaves a half-written row.
- Cells are keyed by `harness.work_units.unit_key`; a run skips keys already stored.
- Each run records its plan (the keys it wanted), so tables and plots are regenerated from
  the store alone and show the latest plan, not cells of datasets that have since changed.
"""

from __future__ import annotations

import functools
import json
import sqlite3
import time
from pathlib import Path
from typing import Any, Iterable

import pandas as pd

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
"""

# speedup points: one row per timed repeat
_SPEEDUP_COLUMNS = ("run", "key", "dataset", "strategy", "family", "method", "task", "workers",
                    "repeat", "status", "message", "n_train", "n_test", "fit_seconds",
                    "fit_cpu_seconds", "predict_seconds", "predict_rows_per_second",
                    "other_load", "limits", "host", "finished")

_CELL_COLUMNS = ("key", "run", "dataset", "strategy", "method", "family", "task", "repeat",
                 "fold", "fingerprint", "n_train", "n_test", "status", "message", "detail",
                 "scores", "fit_seconds", "fit_cpu_seconds", "predict_seconds",
                 "peak_memory_bytes", "model_bytes", "curve", "threads", "timing", "worker",
                 "seconds", "finished", "row_evidence")


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
            self.db.executescript(f"BEGIN IMMEDIATE;\n{_SCHEMA}\nINSERT OR IGNORE INTO meta "
                                  f"VALUES ('schema', '{SCHEMA_VERSION}');\nCOMMIT;")
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

    @reported
    def last_run(self) -> dict[str, Any] | None:
        row = self.db.execute("SELECT run, started, finished, suite, suite_text, command, "
                              "provenance, state FROM runs ORDER BY run DESC LIMIT 1").fetchone()
        if row is None:
            return None
        keys = ("run", "started", "finished", "suite", "suite_text", "command", "provenance",
                "state")
        out = dict(zip(keys, row))
        out["provenance"] = json.loads(out["provenance"] or "{}")
        return out

    @reported
    def set_plan(self, keys: Iterable[str]) -> None:
        with self.db:
            self.db.execute("BEGIN")
            self.db.execute("DELETE FROM plan")
            self.db.executemany("INSERT OR IGNORE INTO plan VALUES (?)", ((k,) for k in keys))

    @reported
    def record_datasets(self, summaries: Iterable[tuple[str, str, dict]]) -> None:
        with self.db:
            self.db.execute("BEGIN")
            self.db.executemany("INSERT OR REPLACE INTO datasets VALUES (?, ?, ?)",
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
        values = dict(row)
        values["run"] = run
        values["finished"] = time.time()
        for k in ("scores", "curve"):
            if values.get(k) is not None:
                values[k] = json.dumps(values[k])
        params = [values.get(c) for c in _CELL_COLUMNS]
        with self.db:
            self.db.execute("BEGIN IMMEDIATE")
            self.db.execute(f"INSERT OR REPLACE INTO cells ({', '.join(_CELL_COLUMNS)}) "
                            f"VALUES ({', '.join('?' * len(_CELL_COLUMNS))})", params)

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
    def cells_frame(self, *, plan_only: bool = True) -> pd.DataFrame:
        """One row per cell; one column per metric named after its scorer."""
        sql = "SELECT * FROM cells"
        if plan_only and self.db.execute("SELECT COUNT(*) FROM plan").fetchone()[0]:
            sql += " WHERE key IN (SELECT key FROM plan)"
        frame = pd.read_sql_query(sql + " ORDER BY dataset, strategy, repeat, fold", self.db)
        scores = [json.loads(s) if isinstance(s, str) else {} for s in frame["scores"]]
        metrics = pd.DataFrame(scores, index=frame.index)
        frame["curve"] = [json.loads(c) if isinstance(c, str) else None for c in frame["curve"]]
        frame = frame.drop(columns=["scores"])
        return pd.concat([frame, metrics], axis=1)

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
    def run_provenance(self, runs: Iterable[int]) -> dict[int, dict[str, Any]]:
        """Run number → its provenance, for the given runs."""
        out = {}
        for run in sorted(set(int(r) for r in runs)):
            row = self.db.execute("SELECT provenance FROM runs WHERE run=?", (run,)).fetchone()
            if row is not None:
                out[run] = json.loads(row[0] or "{}")
        return out

    @reported
    def dataset_summaries(self) -> pd.DataFrame:
        rows = [json.loads(s) for (s,) in self.db.execute("SELECT summary FROM datasets")]
        return pd.DataFrame(rows)
