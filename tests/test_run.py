"""End-to-end runs: store, resume, failures, parallel cells, outputs regenerated from the store."""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest

from tests.sqlite_files import opened

from harness import load_results, run_suite
from harness.cli import main
from tests.conftest import SMALL_SUITE

METRIC_COLUMNS = ["accuracy", "balanced_accuracy", "neg_log_loss",
                  "neg_root_mean_squared_error", "r2"]


def test_run_then_rerun_fits_nothing(write_suite, tmp_path):
    path = write_suite(SMALL_SUITE)
    out = tmp_path / "out"
    first = run_suite(path, out=out, jobs=2, progress=False)
    assert first.planned == 2 * 3 * 6 and first.ran == first.planned and first.failed == 0
    frame = load_results(out)
    for col in ["dataset", "strategy", "repeat", "fold", "fit_seconds", "predict_seconds",
                "status", *METRIC_COLUMNS]:
        assert col in frame.columns
    assert (frame.status == "ok").all() and len(frame) == first.planned
    assert (frame.fit_seconds > 0).all() and (frame.predict_seconds > 0).all()
    assert (frame.model_bytes > 0).all()
    second = run_suite(path, out=out, jobs=2, progress=False)
    assert second.ran == 0 and second.reused == first.planned
    # what a notebook shows for the result: one short line, no tables
    assert repr(second) == (f"RunResult(folder='{out}', planned=36, reused=36, ran=0, "
                            "failed=0)")
    fresh = run_suite(path, out=out, jobs=2, progress=False, fresh=True)
    assert fresh.ran == first.planned


def test_scores_identical_for_one_and_two_jobs(write_suite, tmp_path):
    path = write_suite(SMALL_SUITE)
    run_suite(path, out=tmp_path / "one", jobs=1, progress=False)
    run_suite(path, out=tmp_path / "two", jobs=2, progress=False)
    a = load_results(tmp_path / "one").sort_values("key").reset_index(drop=True)
    b = load_results(tmp_path / "two").sort_values("key").reset_index(drop=True)
    assert list(a.key) == list(b.key)
    for m in METRIC_COLUMNS:
        assert a[m].equals(b[m]), m
    assert a.curve.tolist() == b.curve.tolist()


FAILING = """
[[strategy]]
name = "broken"
method = "single-tree"
params = { monotonic_cst = [1, 1] }   # wrong length: scikit-learn refuses it at fit time

[[strategy]]
name = "slow"
method = "gradient-boosting"
params = { n_estimators = 20000, max_depth = 8 }
"""


def test_error_and_timeout_cells_do_not_stop_the_run(write_suite, tmp_path):
    wine_only = SMALL_SUITE.split('[[dataset]]\nname = "friedman"')[0] \
        + SMALL_SUITE.split("random_state = 0 }\n")[1]
    body = wine_only.replace("seed = 3", 'seed = 3\ncell_timeout = "2s"') + FAILING
    path = write_suite(body)
    out = tmp_path / "out"
    result = run_suite(path, out=out, jobs=2, progress=False)
    frame = load_results(out)
    assert result.planned == 5 * 6 and len(frame) == 30
    broken = frame[frame.strategy == "broken"]
    assert (broken.status == "error").all()
    assert broken.message.str.contains("monotonic_cst").all()
    slow = frame[frame.strategy == "slow"]
    assert (slow.status == "timeout").all()
    assert (frame[~frame.strategy.isin(["broken", "slow"])].status == "ok").all()
    assert (out / "tables" / "failures.md").exists()
    # failed cells count as finished: a rerun fits nothing unless asked to retry them
    again = run_suite(path, out=out, jobs=2, progress=False)
    assert again.ran == 0


def _stored(db) -> int:
    """Cells in the store so far, read without creating or writing the file."""
    if not db.exists():
        return 0
    try:
        with opened(db, read_only=True) as con:
            return con.execute("SELECT COUNT(*) FROM cells").fetchone()[0]
    except sqlite3.Error:
        return 0


@pytest.mark.parametrize("how", [signal.SIGINT, signal.SIGKILL])
def test_interrupted_run_resumes_keeping_finished_cells(write_suite, tmp_path, how):
    body = SMALL_SUITE.replace("n_estimators = 10", "n_estimators = 60").replace(
        "repeats = 2", "repeats = 4")
    path = write_suite(body)
    out = tmp_path / "out"
    proc = subprocess.Popen([sys.executable, "-m", "harness.cli", "run", str(path), "--out",
                             str(out), "--jobs", "1", "--quiet"], stderr=subprocess.PIPE,
                            text=True)
    db = out / "cells.sqlite"
    deadline = time.time() + 60
    while _stored(db) < 4 and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert proc.poll() is None, "run finished before it could be interrupted"
    proc.send_signal(how)
    _, err = proc.communicate(timeout=30)
    if how == signal.SIGINT:
        assert proc.returncode == 130 and "resume" in err, (proc.returncode, err[-2000:])
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
    kept = _stored(db)
    assert 4 <= kept < 2 * 3 * 12
    resumed = run_suite(path, out=out, jobs=2, progress=False)
    assert resumed.reused == kept and resumed.ran == resumed.planned - kept
    frame = load_results(out)
    assert len(frame) == resumed.planned and frame.key.is_unique and (frame.status == "ok").all()


def test_an_interrupt_swallowed_by_a_finalizer_still_stops_the_run(write_suite, tmp_path,
                                                                   monkeypatch, capsys):
    """A signal's exception raised while a finalizer (``__del__``) runs is printed and
    dropped by Python; the handler also remembers the signal, and the run loop stops at the
    next cell. Simulated: the third stored cell remembers a Ctrl-C whose exception was lost."""
    from harness import interrupts
    from harness.store import Store

    path = write_suite(SMALL_SUITE)
    out = tmp_path / "out"
    put, calls = Store.put, []

    def put_and_lose_an_interrupt(self, row, run):
        put(self, row, run)
        calls.append(row["key"])
        if len(calls) == 3:
            interrupts.remember(KeyboardInterrupt)

    monkeypatch.setattr(Store, "put", put_and_lose_an_interrupt)
    assert main(["run", str(path), "--out", str(out), "--jobs", "1", "--quiet"]) == 130
    assert "interrupted" in capsys.readouterr().err
    with Store(out, read_only=True) as store:
        assert len(store.finished_keys()) == 3
        assert store.last_run()["state"] == "interrupted"


def test_report_regenerates_outputs_from_the_store_alone(write_suite, tmp_path, capsys):
    path = write_suite(SMALL_SUITE)
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=2, progress=False)
    before = {p.name: p.read_text() for p in (out / "tables").glob("*.csv")}
    assert {"scores.csv", "ranks.csv", "costs.csv"} <= set(before)
    for p in list((out / "tables").iterdir()) + list((out / "plots").iterdir()):
        p.unlink()
    path.unlink()  # the suite file is not needed either
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    printed = capsys.readouterr().out
    assert f"files in {out}/" in printed and "tables/scores.csv" not in printed
    after = {p.name: p.read_text() for p in (out / "tables").glob("*.csv")}
    assert after == before
    assert (out / "plots" / "score_vs_fit_time.png").stat().st_size > 10_000
    assert (out / "plots" / "ensemble_size.png").stat().st_size > 10_000
    scores = pd.read_csv(out / "tables" / "scores.csv")
    frame = load_results(out)
    wine_forest = frame[(frame.dataset == "wine") & (frame.strategy == "forest")].accuracy
    row = scores[(scores.dataset == "wine") & (scores.strategy == "forest")
                 & (scores.metric == "accuracy")].iloc[0]
    assert row["mean"] == pytest.approx(wine_forest.mean())
    assert row["sd"] == pytest.approx(wine_forest.std(ddof=1))


def test_report_on_a_folder_without_store(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    assert "no results store" in capsys.readouterr().err


def test_changed_file_is_recomputed_and_the_run_says_so(write_suite, tmp_path):
    rng = np.random.default_rng(0)
    data = pd.DataFrame({"a": rng.normal(size=60), "b": rng.normal(size=60)})
    data["y"] = (data.a + data.b > 0).astype(int)
    data.to_csv(tmp_path / "mine.csv", index=False)
    body = """
    [protocol]
    folds = 3
    repeats = 1
    [[dataset]]
    name = "mine"
    from = "file"
    path = "mine.csv"
    target = "y"
    [[strategy]]
    name = "tree"
    method = "single-tree"
    """
    path = write_suite(body)
    out = tmp_path / "out"
    notes = []
    assert run_suite(path, out=out, progress=False, echo=notes.append).ran == 3
    assert run_suite(path, out=out, progress=False, echo=notes.append).ran == 0
    data.loc[0, "a"] += 1.0
    data.to_csv(tmp_path / "mine.csv", index=False)
    again = run_suite(path, out=out, progress=False, echo=notes.append)
    assert again.ran == 3 and again.reused == 0
    assert any("'mine' changed" in n for n in notes)
    assert len(load_results(out)) == 3  # the latest plan only
    assert len(load_results(out, plan_only=False)) == 6


def test_reporting_and_reading_a_folder_never_load_scikit_learn(write_suite, tmp_path):
    """`report`, `agree` and `load_results` read results only: a second or more of importing
    scikit-learn would be spent for nothing (README, Scale)."""
    path = write_suite(SMALL_SUITE + "\n[equivalence]\naccuracy = 0.02\ncertainty = 0.9\n")
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=2, progress=False)
    code = f"""
import sys
import harness
from harness.report.writer import write_report
from harness.commands.agree import agree_folders
write_report(r"{out}", out=r"{tmp_path / 'again'}")
agree_folders(r"{out}", r"{out}")
harness.load_results(r"{out}")
loaded = sorted(m for m in sys.modules if m == "sklearn" or m.startswith("sklearn."))
print(len(loaded), loaded[:5])
"""
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    assert done.stdout.startswith("0 "), done.stdout
    assert (tmp_path / "again" / "report.html").exists()
