"""The results store: one SQLite file per results folder.

- One transaction per finished cell (WAL journal), so a crash, Ctrl-C or timeout loses at
  most the cells in flight and never leaves a half-written row.
- Cells are keyed by `harness.work_units.unit_key`; a run skips keys already stored.
- Each run records its plan (the keys it wanted), so tables and plots are regenerated from
  the store alone and show the latest plan, not cells of datasets that have since changed.
"""

from __future__ import annotations

import json
import sqlite3
import time
from pathlib import Path
from typing import Any, Iterable

import pandas as pd

from harness.errors import UserError

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


class Store:
    """Open (or create) the store of a results folder."""

    def __init__(self, folder: str | Path, *, create: bool = True) -> None:
        self.folder = Path(folder)
        self.path = self.folder / STORE_NAME
        if not self.path.exists() and not create:
            raise UserError(f"no results store in {self.folder} (expected {STORE_NAME}); run a "
                            "suite first with 'woodlot run SUITE'")
        if create:
            self.folder.mkdir(parents=True, exist_ok=True)
        try:
            self.db = sqlite3.connect(self.path, timeout=30, isolation_level=None)
            self.db.execute("PRAGMA journal_mode=WAL")
            self.db.execute("PRAGMA synchronous=NORMAL")
            found = self._schema()
            if found is not None and found != SCHEMA_VERSION:
                raise UserError(f"{self.path} was written by another woodlot version (store "
                                f"schema {found}; this one reads {SCHEMA_VERSION}); its cells "
                                "cannot be reused: run with --fresh, or choose another --out")
            self.db.executescript(_SCHEMA)
            if found is None:
                self.db.execute("INSERT INTO meta VALUES ('schema', ?)", (str(SCHEMA_VERSION),))
        except sqlite3.DatabaseError as exc:
            raise UserError(f"{self.path} is not a woodlot results store ({exc})") from None

    def _schema(self) -> int | None:
        """The schema version the store was written with (None for a new, empty file)."""
        has_meta = self.db.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND "
                                   "name='meta'").fetchone()
        if not has_meta:
            return None
        found = self.db.execute("SELECT value FROM meta WHERE key='schema'").fetchone()
        return int(found[0]) if found else None

    def close(self) -> None:
        self.db.close()

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ runs and plan
    def start_run(self, suite_name: str, suite_text: str, command: str,
                  provenance: dict[str, Any]) -> int:
        cur = self.db.execute(
            "INSERT INTO runs (started, suite, suite_text, command, provenance, state) "
            "VALUES (?, ?, ?, ?, ?, 'running')",
            (time.time(), suite_name, suite_text, command, json.dumps(provenance)))
        return int(cur.lastrowid)

    def finish_run(self, run: int, state: str, provenance: dict[str, Any] | None = None) -> None:
        if provenance is not None:
            self.db.execute("UPDATE runs SET finished=?, state=?, provenance=? WHERE run=?",
                            (time.time(), state, json.dumps(provenance), run))
        else:
            self.db.execute("UPDATE runs SET finished=?, state=? WHERE run=?",
                            (time.time(), state, run))

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

    def set_plan(self, keys: Iterable[str]) -> None:
        with self.db:
            self.db.execute("BEGIN")
            self.db.execute("DELETE FROM plan")
            self.db.executemany("INSERT OR IGNORE INTO plan VALUES (?)", ((k,) for k in keys))

    def record_datasets(self, summaries: Iterable[tuple[str, str, dict]]) -> None:
        with self.db:
            self.db.execute("BEGIN")
            self.db.executemany("INSERT OR REPLACE INTO datasets VALUES (?, ?, ?)",
                                ((fp, name, json.dumps(s)) for fp, name, s in summaries))

    def known_fingerprints(self) -> dict[str, set[str]]:
        """Dataset name → fingerprints that have stored cells."""
        out: dict[str, set[str]] = {}
        for name, fp in self.db.execute("SELECT DISTINCT dataset, fingerprint FROM cells"):
            out.setdefault(name, set()).add(fp)
        return out

    # ------------------------------------------------------------------ cells
    def finished_keys(self, *, include_failed: bool = True) -> set[str]:
        sql = "SELECT key FROM cells" + ("" if include_failed else " WHERE status='ok'")
        return {r[0] for r in self.db.execute(sql)}

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

    def set_speedup_plan(self, keys: Iterable[str]) -> None:
        """The speedup points the latest speedup run wanted (tables show these, and only these)."""
        with self.db:
            self.db.execute("BEGIN")
            self.db.execute("DELETE FROM speedup_plan")
            self.db.executemany("INSERT OR IGNORE INTO speedup_plan VALUES (?)",
                                ((k,) for k in keys))

    def speedup_keys(self, *, include_failed: bool = True) -> set[str]:
        sql = "SELECT DISTINCT key FROM speedup WHERE key IS NOT NULL"
        if not include_failed:
            sql += " AND status='ok'"
        return {r[0] for r in self.db.execute(sql)}

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

    def speedup_frame(self) -> pd.DataFrame:
        """Rows of the speedup points of the latest speedup plan, each point's latest measurement
        (a point measured again replaces the earlier one)."""
        if not self.db.execute("SELECT COUNT(*) FROM speedup_plan").fetchone()[0]:
            return pd.DataFrame()
        return pd.read_sql_query(
            "SELECT s.* FROM speedup s JOIN (SELECT key, MAX(run) AS run FROM speedup "
            "WHERE key IN (SELECT key FROM speedup_plan) GROUP BY key) latest "
            "ON s.key = latest.key AND s.run = latest.run ORDER BY s.id", self.db)

    def run_provenance(self, runs: Iterable[int]) -> dict[int, dict[str, Any]]:
        """Run number → its provenance, for the given runs."""
        out = {}
        for run in sorted(set(int(r) for r in runs)):
            row = self.db.execute("SELECT provenance FROM runs WHERE run=?", (run,)).fetchone()
            if row is not None:
                out[run] = json.loads(row[0] or "{}")
        return out

    def dataset_summaries(self) -> pd.DataFrame:
        rows = [json.loads(s) for (s,) in self.db.execute("SELECT summary FROM datasets")]
        return pd.DataFrame(rows)
