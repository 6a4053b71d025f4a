"""Faults and misuse: estimators that misbehave, runs that are killed or stopped, two runs in
one folder, a full disk, a read-only results folder, a crafted store. The results store must
come out of each whole and the command must say what happened in one line."""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import psutil
import pytest

from tests.sqlite_files import opened

from harness import load_results, run_suite
from harness.cli import main
from harness.folder_lock import LOCK_NAME
from harness.locks import exclusive
from harness.store import Store

ROOT = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}

WINE = """
[suite]
name = "faults"

[protocol]
folds = 2
repeats = 1
{protocol}

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"
"""


def strategy(name: str, cls: str, params: str = "") -> str:
    return (f'\n[[strategy]]\nname = "{name}"\nclassifier = "tests.faulty_estimators:{cls}"\n'
            + (f"params = {{ {params} }}\n" if params else ""))


def write(tmp: Path, body: str, name: str = "s.toml") -> Path:
    path = tmp / name
    path.write_text(textwrap.dedent(body).lstrip(), encoding="utf-8")
    return path


def woodlot(*args: str, limit_file_size: int | None = None, **kw) -> subprocess.Popen:
    """``woodlot ARGS`` in a process of its own (optionally with a file size limit, which
    stands for a full disk: writes past it fail as they would on a full file system)."""
    code = "import sys; from harness.cli import main; sys.exit(main(sys.argv[1:]))"
    if limit_file_size is not None:
        code = (f"import resource; resource.setrlimit(resource.RLIMIT_FSIZE, "
                f"({limit_file_size}, {limit_file_size})); " + code)
    return subprocess.Popen([sys.executable, "-c", code, *args], cwd=ROOT, env=ENV,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw)


def stored(db: Path) -> int:
    try:
        with opened(db, read_only=True) as con:
            return con.execute("SELECT COUNT(*) FROM cells").fetchone()[0]
    except sqlite3.Error:
        return 0


def wait_for_cells(db: Path, n: int, proc: subprocess.Popen, seconds: float = 120) -> None:
    deadline = time.time() + seconds
    while stored(db) < n and time.time() < deadline and proc.poll() is None:
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before it could be disturbed"


def started(tmp: Path, body: str, cells: int, *extra: str) -> tuple[subprocess.Popen, Path]:
    """A run of ``body`` into ``tmp/out`` in a process of its own, once it has stored
    ``cells`` cells."""
    out = tmp / "out"
    proc = woodlot("run", str(write(tmp, body)), "--out", str(out), "--jobs", "2", "--quiet",
                   *extra)
    wait_for_cells(out / "cells.sqlite", cells, proc)
    return proc, out


def integrity(db: Path) -> str:
    with opened(db) as con:
        return con.execute("PRAGMA integrity_check").fetchone()[0]


def comparable(folder: Path):
    """The stored cells without what differs between two identical runs (times, workers)."""
    frame = load_results(folder)
    keep = ["key", "dataset", "strategy", "repeat", "fold", "status", "accuracy",
            "balanced_accuracy", "neg_log_loss", "curve"]
    return frame[keep].sort_values("key").reset_index(drop=True)


# --------------------------------------------------------------------------- estimators

@pytest.mark.slow
def test_misbehaving_estimators_become_rows_and_the_memory_limit_holds(tmp_path):
    """A KeyboardInterrupt inside fit, a segmentation fault, predictions of the wrong
    length and a fit over the cell memory limit each become an error row saying what
    happened; a fit within the limit succeeds."""
    body = (WINE.format(protocol='cell_memory = "200MiB"')
            + strategy("interrupts", "Interrupts") + strategy("crashes", "Crashes")
            + strategy("wrong", "WrongShape") + strategy("hog", "Hog", "mib = 600")
            + strategy("modest", "Hog", "mib = 40"))
    path = write(tmp_path, body)
    proc = woodlot("run", str(path), "--out", str(tmp_path / "out"), "--jobs", "2", "--quiet")
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    assert "Traceback" not in err, err
    frame = load_results(tmp_path / "out")
    by = {s: part for s, part in frame.groupby("strategy")}
    assert (by["modest"].status == "ok").all()
    for name in ("interrupts", "crashes", "wrong", "hog"):
        assert (by[name].status == "error").all(), name
    assert by["interrupts"].message.str.contains("KeyboardInterrupt raised by the estimator").all()
    crash = by["crashes"].message.iloc[0]
    assert "SIGSEGV" in crash and "memory" not in crash and "None" not in crash
    assert by["wrong"].message.str.contains("inconsistent numbers of samples").all()
    assert by["hog"].message.str.contains("over the cell memory limit of 200 MiB").all()


def test_a_run_in_which_every_cell_fails_finishes_with_status_3(write_suite, tmp_path, capsys):
    path = write_suite(WINE.format(protocol="") + strategy("f", "Fails")
                       + strategy("g", "WrongShape"))
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), "--jobs", "1", "--quiet"]) == 3
    err = capsys.readouterr().err
    assert "not one of the 4 cells succeeded" in err and "Traceback" not in err
    frame = load_results(out)
    assert len(frame) == 4 and (frame.status == "error").all()
    failures = (out / "tables" / "failures.md").read_text()
    assert "never fits" in failures and "inconsistent numbers of samples" in failures
    assert (out / "report.html").exists()
    assert main(["report", str(out)]) == 0


# --------------------------------------------------------------------------- keys

def test_the_key_follows_the_preprocessing(write_suite, tmp_path, monkeypatch):
    """Median to mean imputation must change the keys of cells on data with gaps (and only
    those), so stored cells are not reused for a different pipeline."""
    import pandas as pd
    from sklearn.impute import SimpleImputer

    from harness import plan as plan_module
    from harness import preprocess
    from harness.suite import load_suite

    data = pd.DataFrame({"a": [1.0, None, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0] * 4,
                         "b": list(range(32)), "y": [0, 1] * 16})
    data.to_csv(tmp_path / "gaps.csv", index=False)
    path = write_suite("""
    [protocol]
    folds = 2
    repeats = 1
    [[dataset]]
    name = "gaps"
    from = "file"
    path = "gaps.csv"
    target = "y"
    [[dataset]]
    name = "wine"
    from = "sklearn"
    load = "load_wine"
    [[strategy]]
    name = "tree"
    method = "single-tree"
    """)
    suite = load_suite(path)
    before = {(c.dataset, c.fold): c.key for c in plan_module.make_plan(suite).cells}
    real = SimpleImputer

    def mean_imputer(strategy="median", **kw):
        return real(strategy="mean" if strategy == "median" else strategy, **kw)

    monkeypatch.setattr(preprocess, "SimpleImputer", mean_imputer)
    after = {(c.dataset, c.fold): c.key for c in plan_module.make_plan(suite).cells}
    for k in before:
        assert (before[k] != after[k]) == (k[0] == "gaps"), k


def test_the_code_version_follows_the_code_not_its_comments(tmp_path, monkeypatch):
    import shutil

    from harness import versions

    copy = tmp_path / "harness"
    shutil.copytree(ROOT / "harness", copy)
    monkeypatch.setattr(versions, "_PACKAGE", copy)

    def version() -> str:
        versions.code_version.cache_clear()
        return versions.code_version(versions.CELL_CODE)

    original = version()
    target = copy / "preprocess.py"
    text = target.read_text()
    target.write_text(text.replace('"""The pipeline a unit', '"""Edited: the pipeline a unit')
                      .replace("from __future__", "# a new comment\nfrom __future__"))
    assert version() == original  # docstrings, comments and layout do not count
    target.write_text(text.replace('SimpleImputer(strategy="median")',
                                   'SimpleImputer(strategy="mean")'))
    assert version() != original
    versions.code_version.cache_clear()


# --------------------------------------------------------------------------- the folder

def test_killed_run_is_marked_and_the_report_says_so(write_suite, tmp_path, capsys):
    path = write_suite(WINE.format(protocol="") + strategy("t", "Slow", "seconds = 0"))
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=1, progress=False, echo=lambda line: None)
    with Store(out) as store:  # a run whose process was killed: still marked running
        prov = {**store.last_run()["provenance"], "process": 999999, "host": "gone"}
        store.start_run("faults", "", "woodlot run", prov)
    assert main(["report", str(out)]) == 0
    err = capsys.readouterr().err
    assert "ended without finishing" in err and "partial" in err
    assert "ended without finishing" in (out / "report.html").read_text()
    notes = []
    run_suite(path, out=out, jobs=1, progress=False, echo=notes.append)
    assert any("process 999999 on gone" in n and "marked as killed" in n for n in notes)
    with Store(out, read_only=True) as store:
        states = [r[0] for r in store.db.execute("SELECT state FROM runs ORDER BY run")]
    assert states == ["finished", "killed", "finished"]


def test_report_during_a_run_says_the_results_are_partial(write_suite, tmp_path, capsys):
    path = write_suite(WINE.format(protocol="") + strategy("t", "WrongShape"))
    out = tmp_path / "out"
    run_suite(path, out=out, jobs=1, progress=False, echo=lambda line: None)
    with exclusive(out / LOCK_NAME, wait=False, note="host there, process 77, since noon"):
        assert main(["report", str(out)]) == 0
        err = capsys.readouterr().err
    assert "still writing" in err and "process 77" in err and "partial" in err
    assert "still writing" in (out / "report.html").read_text()


def test_crafted_store_runs_no_code_and_is_not_changed(tmp_path, write_suite, capsys):
    """A store someone else made, with a trigger and a view: reading it (report, agree,
    load_results) changes nothing in it, and SQLite's trusted_schema is off."""
    path = write_suite(WINE.format(protocol="") + strategy("t", "WrongShape"))
    out = tmp_path / "theirs"
    run_suite(path, out=out, jobs=1, progress=False, echo=lambda line: None)
    with opened(out / "cells.sqlite") as db:
        db.execute("CREATE TABLE seen (what TEXT)")
        db.execute("CREATE TRIGGER t AFTER INSERT ON runs BEGIN INSERT INTO seen VALUES "
                   "('trigger'); END")
        db.execute("CREATE VIEW v AS SELECT load_extension('x') AS boom")
    db.close()
    before = (out / "cells.sqlite").read_bytes()
    listing = sorted(p.name for p in out.iterdir())
    with Store(out, read_only=True) as store:
        assert store.db.execute("PRAGMA trusted_schema").fetchone()[0] == 0
        with pytest.raises(sqlite3.OperationalError):
            store.db.execute("INSERT INTO runs (state) VALUES ('x')")
    assert main(["report", str(out), "--out", str(tmp_path / "mine")]) == 0
    assert main(["agree", str(out), str(out)]) == 0
    assert len(load_results(out)) == 2
    assert (out / "cells.sqlite").read_bytes() == before
    assert sorted(p.name for p in out.iterdir()) == listing  # no journal or lock file made


def test_the_package_has_no_unpickling_eval_or_shell():
    import re

    found = []
    pattern = re.compile(r"pickle\.loads?\(|\beval\(|\bexec\(|shell\s*=\s*True|os\.system\(|"
                         r"os\.popen\(|marshal\.loads?\(|yaml\.load\(")
    for path in (ROOT / "harness").rglob("*.py"):
        for n, line in enumerate(path.read_text().splitlines(), 1):
            if pattern.search(line):
                found.append(f"{path.relative_to(ROOT)}:{n}: {line.strip()}")
    assert not found, found


def test_names_with_html_and_dollars_render_as_text(write_suite, tmp_path):
    """Grid values become strategy names: HTML in them is escaped in every Markdown file and
    in report.html, and math-text markers ($) never reach matplotlib's parser."""
    path = write_suite(WINE.format(protocol="") + """
    [[strategy]]
    name = "t"
    classifier = "tests.faulty_estimators:Labelled"
    grid = { label = ["<b>bold</b>", "$\\\\alpha^$", "plain"] }
    """.replace("\n    ", "\n"))
    out = tmp_path / "out"
    result = run_suite(path, out=out, jobs=2, progress=False, echo=lambda line: None)
    assert result.failed == 0
    for md in list((out / "tables").glob("*.md")) + [out / "summary.md"]:
        text = md.read_text()
        assert "<b>" not in text, md
    assert "&lt;b&gt;bold&lt;/b&gt;" in (out / "tables" / "scores.md").read_text()
    html = (out / "report.html").read_text()
    assert "<b>bold" not in html and "&lt;b&gt;bold&lt;/b&gt;" in html
    assert (out / "plots" / "score_vs_fit_time.png").stat().st_size > 10_000


# --------------------------------------------------------------------------- processes

def descendants(pid: int) -> list[psutil.Process]:
    try:
        return psutil.Process(pid).children(recursive=True)
    except psutil.Error:
        return []


def all_gone(procs: list[psutil.Process], seconds: float = 10) -> list[int]:
    _, alive = psutil.wait_procs(procs, timeout=seconds)
    return [p.pid for p in alive]


SLOW = WINE.format(protocol="") + strategy("slow", "Slow", "seconds = 1.5") \
    + strategy("slow2", "Slow", "seconds = 1.0")
SLOW = SLOW.replace("repeats = 1", "repeats = 6")


@pytest.mark.slow
def test_sigterm_stops_the_run_like_ctrl_c_and_leaves_no_process(tmp_path):
    proc, out = started(tmp_path, SLOW, 2)
    children = descendants(proc.pid)
    assert len(children) >= 3  # the forkserver and two workers at least
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 143, err
    assert err.strip().splitlines() == [err.strip()] and "SIGTERM" in err
    assert all_gone(children) == []
    with Store(out, read_only=True) as store:
        assert store.last_run()["state"] == "interrupted"
    assert integrity(out / "cells.sqlite") == "ok"


@pytest.mark.slow
def test_a_timed_out_cell_takes_its_child_processes_with_it(tmp_path):
    log = tmp_path / "children.txt"
    body = WINE.format(protocol='cell_timeout = "2s"') + strategy("spawns", "Spawns",
                                                                  f'log = "{log}"')
    path = write(tmp_path, body)
    proc = woodlot("run", str(path), "--out", str(tmp_path / "out"), "--jobs", "2", "--quiet")
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 3, err  # both cells timed out
    pids = [int(x) for x in log.read_text().split()]
    assert len(pids) == 2
    assert not [p for p in pids if psutil.pid_exists(p)
                and psutil.Process(p).status() != psutil.STATUS_ZOMBIE]
    frame = load_results(tmp_path / "out")
    assert (frame.status == "timeout").all()


@pytest.mark.slow
def test_sigkill_soak_loses_duplicates_and_changes_nothing(tmp_path):
    """A run killed outright at random moments, then resumed, ends with exactly the store an
    uninterrupted run makes; no worker outlives a killed run."""
    body = (WINE.format(protocol="").replace("repeats = 1", "repeats = 4")
            + '\n[[strategy]]\nname = "forest"\nmethod = "random-forest"\n'
              'params = { n_estimators = 150 }\n'
            + '\n[[strategy]]\nname = "gb"\nmethod = "gradient-boosting"\n'
              'params = { n_estimators = 100 }\n')
    path = write(tmp_path, body)
    whole = tmp_path / "whole"
    run_suite(path, out=whole, jobs=2, progress=False, echo=lambda line: None)
    killed = tmp_path / "killed"
    rng = random.Random(7)
    for _ in range(3):
        proc = woodlot("run", str(path), "--out", str(killed), "--jobs", "2", "--quiet")
        wait_for_cells(killed / "cells.sqlite", stored(killed / "cells.sqlite") + 1, proc)
        time.sleep(rng.uniform(0.0, 0.4))  # short: each kill lands before the run ends
        children = descendants(proc.pid)
        proc.kill()
        proc.communicate(timeout=30)
        assert all_gone(children) == []
        assert integrity(killed / "cells.sqlite") == "ok"
    assert stored(killed / "cells.sqlite") < 16
    resumed = run_suite(path, out=killed, jobs=2, progress=False, echo=lambda line: None)
    assert resumed.reused + resumed.ran == 16
    a, b = comparable(whole), comparable(killed)
    assert a.equals(b)
    with Store(killed, read_only=True) as store:
        states = [r[0] for r in store.db.execute("SELECT state FROM runs ORDER BY run")]
    assert states[-1] == "finished" and set(states[:-1]) == {"killed"}


@pytest.mark.slow
def test_a_second_run_in_the_same_folder_is_refused_or_waits(tmp_path):
    first, out = started(tmp_path, SLOW, 1)
    path = tmp_path / "s.toml"
    second = woodlot("run", str(path), "--out", str(out), "--jobs", "2", "--quiet")
    third = woodlot("run", str(path), "--out", str(out), "--jobs", "2", "--quiet",
                    "--wait-for-folder")
    _, err = second.communicate(timeout=60)
    assert first.poll() is None, "the first run ended too soon for this test"
    assert second.returncode == 2, err
    assert len(err.strip().splitlines()) == 1
    assert "another run is using" in err and f"process {first.pid}" in err
    _, err1 = first.communicate(timeout=180)
    assert first.returncode == 0, err1
    out3, err3 = third.communicate(timeout=180)
    assert third.returncode == 0, err3
    assert "waiting for the run" in err3 and f"process {first.pid}" in err3
    assert "24 cells planned: 24 already stored, 0 run" in out3


# --------------------------------------------------------------------------- the disk

def tmp_files(folder: Path) -> list[Path]:
    return [p for p in folder.rglob("*") if ".tmp" in p.name]


@pytest.mark.slow
def test_a_full_disk_is_one_line_and_leaves_the_store_whole(tmp_path):
    path = write(tmp_path, WINE.format(protocol="").replace("repeats = 1", "repeats = 6")
                 + '\n[[strategy]]\nname = "tree"\nmethod = "single-tree"\n'
                 + '\n[[strategy]]\nname = "forest"\nmethod = "random-forest"\n'
                   'params = { n_estimators = 10 }\n')
    out = tmp_path / "out"
    # the run starts, stores some cells, then its store cannot grow
    proc = woodlot("run", str(path), "--out", str(out), "--jobs", "2", "--quiet",
                   limit_file_size=200_000)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 2, err
    assert len(err.strip().splitlines()) == 1 and "cells.sqlite" in err, err
    assert integrity(out / "cells.sqlite") == "ok"
    kept = stored(out / "cells.sqlite")
    assert 0 < kept < 24
    assert not tmp_files(out)
    # the run cannot even start: its first write to the store fails
    proc = woodlot("run", str(path), "--out", str(out), "--quiet", limit_file_size=200)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 2 and len(err.strip().splitlines()) == 1, err
    assert "cells.sqlite" in err and "Traceback" not in err
    assert integrity(out / "cells.sqlite") == "ok" and stored(out / "cells.sqlite") == kept
    # with space again the run resumes
    resumed = run_suite(path, out=out, jobs=2, progress=False, echo=lambda line: None)
    assert resumed.reused == kept and resumed.ran == 24 - kept
    # plots and the report cannot be written: one line, no temporary file, nothing half-written
    for limit, what in ((10_000, "plots"), (60_000, "report.html")):
        proc = woodlot("report", str(out), limit_file_size=limit)
        _, err = proc.communicate(timeout=300)
        assert proc.returncode == 2, err
        assert len(err.strip().splitlines()) == 1 and what in err and "ulimit" in err, err
        assert not tmp_files(out)


@pytest.mark.slow
def test_a_read_only_results_folder_is_reported_and_agreed(tmp_path, write_suite, capsys):
    path = write_suite(WINE.format(protocol="") + strategy("t", "WrongShape")
                       + '\n[[strategy]]\nname = "tree"\nmethod = "single-tree"\n')
    theirs = tmp_path / "theirs"
    run_suite(path, out=theirs, jobs=2, progress=False, echo=lambda line: None)
    files = [theirs, *theirs.rglob("*")]
    made_read_only = _read_only(files)
    try:
        probe = theirs / "probe"
        try:
            probe.write_text("x")
            probe.unlink()
            pytest.skip("cannot make a folder read-only here")
        except OSError:
            pass
        before = {p: p.stat().st_mtime_ns for p in files}
        assert main(["report", str(theirs), "--out", str(tmp_path / "mine")]) == 0
        assert (tmp_path / "mine" / "report.html").exists()
        assert main(["agree", str(theirs), str(theirs)]) == 0
        assert len(load_results(theirs)) == 4
        capsys.readouterr()
        assert main(["report", str(theirs)]) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and "--out" in err and "read-only" in err
        assert main(["run", str(path), "--out", str(theirs / "again"), "--quiet"]) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1 and "cannot write into" in err
        assert {p: p.stat().st_mtime_ns for p in files} == before
        assert sorted(theirs.iterdir()) == sorted(p for p in files if p.parent == theirs)
    finally:
        made_read_only(undo=True)


def _read_only(paths: list[Path]):
    """Make ``paths`` read-only: immutable (chattr, for root, who ignores permissions) or
    without write permission; returns the function that undoes it."""
    immutable = os.geteuid() == 0 and subprocess.run(
        ["chattr", "+i", *map(str, paths)], capture_output=True).returncode == 0
    modes = {p: p.stat().st_mode for p in paths}
    if not immutable:
        for p in paths:
            p.chmod(modes[p] & ~0o222)

    def undo(undo: bool = True) -> None:
        if immutable:
            subprocess.run(["chattr", "-i", *map(str, paths)], capture_output=True)
        else:
            for p in paths:
                p.chmod(modes[p])
    return undo
