"""Reruns: outputs left as they are when the store has not changed, every run's provenance
kept and shown, the change counter, the write-ahead log kept small, and the frames the report
reads checked against plain pandas readings of the same store."""

from __future__ import annotations

import json
import time

import numpy as np
import pandas as pd
import pytest

from tests.sqlite_files import opened

from harness import load_results, run_suite
from harness.cli import main
from harness.report.outputs import STATE_NAME, up_to_date
from harness.store import TUNED_FRAME_COLUMNS, WAL_LIMIT, Store
from tests.conftest import SMALL_SUITE
from tests.test_report_html import Page


def _mtimes(folder) -> dict:
    """Modification times of the outputs (not the store, nor the run's lock file)."""
    return {p.relative_to(folder): p.stat().st_mtime_ns
            for p in folder.rglob("*") if p.is_file() and "sqlite" not in p.name
            and p.name != "run.lock"}


@pytest.fixture
def finished(write_suite, tmp_path):
    """SMALL_SUITE run once (its cells computed by run 1)."""
    path = write_suite(SMALL_SUITE)
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=2, progress=False, command="first run")
    return path, out


def test_a_rerun_that_fits_nothing_leaves_the_outputs_as_they_are(finished, capsys):
    path, out = finished
    before = _mtimes(out)
    state = json.loads((out / STATE_NAME).read_text())
    assert set(state["files"]) == {str(p) for p in before if str(p) != STATE_NAME}
    time.sleep(0.05)  # a rewrite would move the modification times
    again = run_suite(path, out=out, jobs=2, progress=False, command="second run")
    assert again.ran == 0 and again.outputs.unchanged
    assert _mtimes(out) == before
    assert main(["run", str(path), "--out", str(out), "--quiet"]) == 0
    printed = capsys.readouterr().out
    assert "The store has not changed since its tables, plots and report were written" in printed
    assert "In short (details in report.html):" in printed and "- " in printed
    # `woodlot report` writes them in any case
    assert main(["report", str(out)]) == 0
    assert all(_mtimes(out)[p] > before[p] for p in before)


@pytest.mark.parametrize("change", [
    "UPDATE cells SET fit_seconds = fit_seconds * 2 WHERE rowid = 1",   # a cell changed
    "DELETE FROM plan WHERE rowid = 1",                                 # the plan changed
    "UPDATE runs SET state = 'killed' WHERE run = 1",                   # a computing run
])
def test_any_change_to_what_the_report_reads_rewrites_the_outputs(finished, change):
    path, out = finished
    with opened(out / "cells.sqlite") as db:  # even a write from outside woodlot
        db.execute(change)
    assert up_to_date(out) is None
    again = run_suite(path, out=out, jobs=2, progress=False)
    assert not again.outputs.unchanged
    assert up_to_date(out) is not None


def test_a_missing_output_file_is_written_again(finished):
    path, out = finished
    (out / "plots" / "ensemble_size.png").unlink()
    assert up_to_date(out) is None
    again = run_suite(path, out=out, jobs=2, progress=False)
    assert not again.outputs.unchanged and (out / "plots" / "ensemble_size.png").exists()


def test_the_change_counter_moves_with_results_and_not_with_reruns(finished):
    path, out = finished
    with Store(out) as store:
        first = store.state()
        run = store.start_run("small", "", "nothing", {})
        store.set_plan(k for (k,) in store.db.execute("SELECT key FROM plan"))
        store.finish_run(run, "finished", {})
        assert store.state() == first          # a run that stored nothing
        row = store.db.execute("SELECT * FROM cells LIMIT 1").fetchone()
        names = [d[1] for d in store.db.execute("PRAGMA table_info(cells)")]
        cell = dict(zip(names, row))
        cell.update({k: json.loads(cell[k]) if cell[k] else None for k in ("scores", "curve")})
        store.put(cell, run)
        second = store.state()
        assert second != first
        store.finish_run(run, "finished", {})  # now a run that stored a cell
        assert store.state() != second


# ------------------------------------------------------------------ provenance of every run

def test_the_report_names_the_runs_that_computed_the_cells(write_suite, tmp_path):
    path = write_suite(SMALL_SUITE)
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=2, progress=False, command="woodlot run wine first",
              select=lambda c: c.dataset == "wine")
    run_suite(path, out=out, jobs=2, progress=False, command="woodlot run the rest")
    run_suite(path, out=out, jobs=2, progress=False, command="a notebook rerun")
    frame = load_results(out)
    assert frame.groupby("dataset")["run"].unique().map(list).to_dict() == \
        {"wine": [1], "friedman": [2]}
    with Store(out, read_only=True) as store:
        runs = store.db.execute("SELECT run, command, state FROM runs ORDER BY run").fetchall()
    assert runs == [(1, "woodlot run wine first", "finished"),
                    (2, "woodlot run the rest", "finished"),
                    (3, "a notebook rerun", "finished")]
    html = (out / "report.html").read_text(encoding="utf-8")
    text = Page(html).sections["provenance"]["text"]
    assert "Which runs computed these results" in text
    row = '<tr><td class="num">{}</td><td class="num">18</td><td class="num">0</td>'
    for run, command in ((1, "woodlot run wine first"), (2, "woodlot run the rest")):
        assert row.format(run) in html and command in text  # run, cells, speedup points
    assert "a notebook rerun" not in text
    prov = json.loads((out / "provenance.json").read_text())
    assert prov["command"] == "woodlot run the rest"
    assert [(r["run"], r["cells"], r["command"]) for r in prov["runs"]] == \
        [(1, 18, "woodlot run wine first"), (2, 18, "woodlot run the rest")]


# ------------------------------------------------------------------ the store

def test_the_write_ahead_log_stays_small_while_cells_arrive(finished, tmp_path):
    """Thousands of puts (the rows of a real run, stored again under new keys): the log never
    grows much past the checkpoint size."""
    _, out = finished
    rows = load_results(out).drop(columns=["accuracy", "balanced_accuracy", "neg_log_loss",
                                           "neg_root_mean_squared_error", "r2"])
    with Store(out, read_only=True) as store:
        scores = [json.loads(s) for (s,) in store.db.execute(
            "SELECT scores FROM cells ORDER BY dataset, strategy, repeat, fold")]
    wal = tmp_path / "big" / "cells.sqlite-wal"
    largest = 0
    with Store(tmp_path / "big") as store:
        run = store.start_run("big", "", "test", {})
        for i in range(60):
            for r, s in zip(rows.to_dict("records"), scores):
                store.put({**r, "key": f"{r['key']}-{i}", "scores": s}, run)
            largest = max(largest, wal.stat().st_size)
        assert store.db.execute("SELECT COUNT(*) FROM cells").fetchone()[0] == 60 * 36
    # one transaction may run past the checkpoint threshold before the log starts over
    assert largest <= WAL_LIMIT + 32 * 4096


def test_cells_frame_matches_a_plain_pandas_reading(finished):
    """The chunked reading with one JSON parse per chunk, against pandas' own SQL reader and
    one json.loads per row."""
    _, out = finished
    with opened(out / "cells.sqlite") as db:
        raw = pd.read_sql_query("SELECT * FROM cells WHERE key IN (SELECT key FROM plan) "
                                "ORDER BY dataset, strategy, repeat, fold", db)
    metrics = pd.DataFrame([json.loads(s) for s in raw.pop("scores")])
    raw["curve"] = [json.loads(c) if isinstance(c, str) else None for c in raw["curve"]]
    expected = pd.concat([raw, metrics], axis=1)
    tuning = list(TUNED_FRAME_COLUMNS)  # joined from the store's tuned table: none here
    got = load_results(out)
    assert not got["tuned"].any()
    pd.testing.assert_frame_equal(got.drop(columns=tuning), expected, check_dtype=False)
    with Store(out, read_only=True) as store:
        lean = store.cells_frame(curves=False).drop(columns=tuning)
        points = store.curve_points(["wine"])
    pd.testing.assert_frame_equal(lean, expected.drop(columns="curve"), check_dtype=False)
    wine = expected[expected["dataset"] == "wine"]
    flat = [(s, n, v) for s, curve in zip(wine["strategy"], wine["curve"]) if curve
            for n, v in curve]
    assert sorted(map(tuple, points[["strategy", "members", "score"]].to_numpy().tolist())) == \
        sorted(flat)
    assert np.isfinite(points["score"]).all()
