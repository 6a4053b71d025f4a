"""Bad input of every kind, one table: each case must end with exit status 2 and one line on
stderr that names the file (and the entry and field where there is one), with no traceback and
nothing written anywhere.

A case is a function of the test's folder that writes what it needs and returns the command
line and the fragments the message must contain. Cases that need a results store start from a
copy of one small finished run (`stored_run`)."""

from __future__ import annotations

import shutil
import textwrap
from pathlib import Path

import numpy as np
import pytest

from tests.sqlite_files import opened

from harness import run_suite
from harness.cli import main
from harness.folder_lock import LOCK_NAME
from harness.locks import exclusive

SUITE = """
[suite]
name = "bad"

[protocol]
folds = 2
repeats = 1
{protocol}

{also}

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"
{datasets}

[[strategy]]
name = "tree"
method = "single-tree"
{strategies}
{speedup}
"""


def suite(tmp: Path, protocol: str = "", datasets: str = "", strategies: str = "",
          also: str = "", speedup: str = "", name: str = "s.toml") -> Path:
    path = tmp / name
    path.write_text(textwrap.dedent(SUITE).format(protocol=protocol, datasets=datasets,
                                                  strategies=strategies, also=also,
                                                  speedup=speedup), encoding="utf-8")
    return path


def run(path: Path, tmp: Path, *extra: str) -> list[str]:
    return ["run", str(path), "--out", str(tmp / "out"), "--quiet", *extra]


def data_file(tmp: Path, text: str, name: str = "d.csv") -> Path:
    path = tmp / name
    path.write_text(textwrap.dedent(text).lstrip(), encoding="utf-8")
    return path


def csv_entry(path: str, target: str = "y", extra: str = "") -> str:
    return f'[[dataset]]\nname = "mine"\nfrom = "file"\npath = "{path}"\ntarget = "{target}"\n' \
        + extra


ROWS = "".join(f"{i % 7},{(i * 3) % 5},{i % 2}\n" for i in range(40))
GOOD_CSV = "a,b,y\n" + ROWS


def with_data(tmp: Path, text: str, target: str = "y", extra: str = ""):
    data_file(tmp, text)
    path = suite(tmp, datasets=csv_entry("d.csv", target, extra))
    return run(path, tmp), [str(path), "dataset 'mine'"]


# --------------------------------------------------------------------------- the stored run

@pytest.fixture(scope="module")
def stored_run(tmp_path_factory) -> Path:
    """The results folder of one small finished run (store closed, write-ahead log merged)."""
    tmp = tmp_path_factory.mktemp("stored")
    path = suite(tmp)
    run_suite(path, out=tmp / "out", jobs=1, progress=False, echo=lambda line: None)
    return tmp / "out"


def copy_store(src: Path, tmp: Path) -> Path:
    folder = tmp / "theirs"
    folder.mkdir()
    shutil.copy(src / "cells.sqlite", folder / "cells.sqlite")
    return folder


def damaged_pages(src: Path, tmp: Path):
    folder = copy_store(src, tmp)
    store = folder / "cells.sqlite"
    data = bytearray(store.read_bytes())
    page = 4096
    for start in range(page, len(data), page):  # every page but the first (the schema)
        data[start:start + page] = bytes(np.random.default_rng(start).integers(
            0, 256, page, dtype=np.uint8))
    store.write_bytes(bytes(data))
    return ["report", str(folder)], [str(store), "damaged"]


def missing_column(src: Path, tmp: Path):
    folder = copy_store(src, tmp)
    with opened(folder / "cells.sqlite") as db:
        db.execute("ALTER TABLE cells DROP COLUMN fit_seconds")
    return ["report", str(folder)], [str(folder / "cells.sqlite"), "fit_seconds"]


def truncated(src: Path, tmp: Path):
    folder = copy_store(src, tmp)
    store = folder / "cells.sqlite"
    store.write_bytes(store.read_bytes()[:1500])
    return ["agree", str(folder), str(src)], [str(store)]


def foreign(src: Path, tmp: Path):
    folder = tmp / "theirs"
    folder.mkdir()
    with opened(folder / "cells.sqlite") as db:
        db.execute("CREATE TABLE invoices (id INTEGER, total REAL)")
    return ["report", str(folder)], [str(folder / "cells.sqlite"), "not a woodlot results store"]


def garbage(src: Path, tmp: Path):
    folder = tmp / "theirs"
    folder.mkdir()
    (folder / "cells.sqlite").write_bytes(b"this is no database\n" * 200)
    return ["report", str(folder)], [str(folder / "cells.sqlite"), "not a woodlot results store"]


def other_schema(src: Path, tmp: Path):
    folder = copy_store(src, tmp)
    with opened(folder / "cells.sqlite") as db:
        db.execute("UPDATE meta SET value='1' WHERE key='schema'")
    path = suite(tmp)
    return ["run", str(path), "--out", str(folder), "--quiet"], [str(folder / "cells.sqlite"),
                                                                 "store schema 1"]


def folder_in_use(src: Path, tmp: Path):
    """Another process holds the results folder: flock locks of two open files conflict even
    within one process, so holding the lock here stands for a second woodlot."""
    path = suite(tmp)
    out = tmp / "out"
    out.mkdir()
    lock = exclusive(out / LOCK_NAME, wait=False, note="host elsewhere, process 4242, since noon")
    lock.__enter__()
    return run(path, tmp), [str(out), "another run is using", "process 4242", "since noon"], lock


# --------------------------------------------------------------------------- the cases

CASES = {
    # ---- the suite file
    "suite missing": lambda t: (["check", str(t / "none.toml")], ["none.toml", "not found"]),
    "suite is a folder": lambda t: (["run", str(t), "--quiet"], [str(t), "folder"]),
    "suite not UTF-8": lambda t: ((t / "s.toml").write_bytes(b"[suite]\nname = \"caf\xe9\"\n")
                                  and ["check", str(t / "s.toml")],
                                  [str(t / "s.toml"), "not UTF-8", "0xe9"]),
    "TOML syntax": lambda t: (run(suite(t, protocol="folds = = 3"), t),
                              ["s.toml", "not valid TOML"]),
    "unknown section": lambda t: (run(suite(t, also="[measure]\nmemory = true"), t),
                                  ["s.toml", "unknown section 'measure'"]),
    # ---- the data
    "data path is a folder": lambda t: ((t / "d.csv").mkdir()
                                        or (run(suite(t, datasets=csv_entry("d.csv")), t),
                                            ["dataset 'mine'", "field 'path'", "folder"])),
    "data file missing": lambda t: (run(suite(t, datasets=csv_entry("nothing.csv")), t),
                                    ["dataset 'mine'", "field 'path'", "not found"]),
    "columns a,a": lambda t: (with_data(t, "a,a,y\n" + ROWS)[0],
                              ["dataset 'mine'", "field 'path'", "'a' (2 times)"]),
    "target named twice": lambda t: (with_data(t, "y,a,y\n" + ROWS)[0],
                                     ["dataset 'mine'", "field 'path'", "'y' (2 times)"]),
    "+inf in a feature": lambda t: (with_data(t, GOOD_CSV.replace("\n3,", "\ninf,", 1))[0],
                                    ["dataset 'mine'", "infinite values", "'a'"]),
    "-inf in a feature": lambda t: (with_data(t, GOOD_CSV.replace(",4,", ",-inf,", 1))[0],
                                    ["dataset 'mine'", "infinite values", "'b'"]),
    "inf in a regression target": lambda t: (
        with_data(t, "a,b,y\n" + "".join(f"{i},{i % 3},{i * 0.5}\n" for i in range(30))
                  + "1,2,inf\n")[0], ["dataset 'mine'", "field 'target'", "infinite"]),
    "no such target": lambda t: (with_data(t, GOOD_CSV, target="z")[0],
                                 ["dataset 'mine'", "field 'target'"]),
    "single-class target": lambda t: (with_data(t, "a,y\n" + "".join(f"{i},1\n"
                                                                     for i in range(20)))[0],
                                      ["dataset 'mine'", "field 'target'", "single class"]),
    "ragged rows": lambda t: (with_data(t, GOOD_CSV + "1,2,3,4\n")[0],
                              ["dataset 'mine'", "field 'path'", "different lengths"]),
    "empty file": lambda t: (with_data(t, "")[0], ["dataset 'mine'", "field 'path'"]),
    "text regression target": lambda t: (with_data(t, "a,y\n" + "".join(
        f"{i % 3},x{i}\n" for i in range(20)), extra='task = "regression"\n')[0],
        ["dataset 'mine'", "field 'target'", "numeric"]),
    # ---- the command line
    "--out is a file": lambda t: ((t / "out").write_text("not a folder")
                                  and (run(suite(t), t), [str(t / "out"), "a file"])),
    "--out inside a file": lambda t: ((t / "f").write_text("x") and (
        ["run", str(suite(t)), "--out", str(t / "f" / "out"), "--quiet"],
        [str(t / "f" / "out"), "is a file"])),
    "--jobs 0": lambda t: (run(suite(t), t, "--jobs", "0"), ["--jobs", "at least 1"]),
    "report without a store": lambda t: (["report", str(t)], [str(t), "no results store"]),
    "report --out is a file": lambda t: ((t / "r").write_text("x")
                                         and (["report", str(t / "missing"), "--out",
                                               str(t / "r")], ["no results store"])),
    "add: columns named twice": lambda t: (data_file(t, "a,a,y\n" + ROWS) and [
        "add", str(suite(t)), "--file", str(t / "d.csv"), "--target", "y"],
        [str(t / "d.csv"), "field 'path'", "'a' (2 times)"]),
    "add: infinity": lambda t: (data_file(t, GOOD_CSV.replace("\n3,", "\ninf,", 1)) and [
        "add", str(suite(t)), "--file", str(t / "d.csv"), "--target", "y"],
        [str(t / "d.csv"), "infinite values"]),
    "add: name taken": lambda t: (data_file(t, GOOD_CSV, name="wine.csv") and [
        "add", str(suite(t)), "--file", str(t / "wine.csv"), "--target", "y"],
        ["s.toml", "field 'name'", "already has"]),
    "add: data is a folder": lambda t: ((t / "d.csv").mkdir() or [
        "add", str(suite(t)), "--file", str(t / "d.csv"), "--target", "y"],
        [str(t / "d.csv"), "folder"]),
    "choose: target named twice": lambda t: (data_file(t, "y,a,y\n" + ROWS) and [
        "choose", str(t / "d.csv"), "--target", "y", "--out", str(t / "out"), "--quiet"],
        [str(t / "d.csv"), "'y' (2 times)"]),
    "choose: seed -1": lambda t: (data_file(t, GOOD_CSV) and [
        "choose", str(t / "d.csv"), "--target", "y", "--seed", "-1", "--out", str(t / "out")],
        ["--seed", "4294967295"]),
    "choose: r2 on classes": lambda t: (data_file(t, GOOD_CSV) and [
        "choose", str(t / "d.csv"), "--target", "y", "--metric", "r2", "--out", str(t / "out")],
        ["--metric", "regression metric"]),
    "choose: --out is a file": lambda t: (data_file(t, GOOD_CSV) and (t / "out").write_text("x")
                                          and ["choose", str(t / "d.csv"), "--target", "y",
                                               "--out", str(t / "out")],
                                          [str(t / "out"), "a file"]),
}

# A suite with one part added (a keyword of `suite`: its text) and what the message must name.
SUITE_CASES = {
    "unknown protocol key": ("protocol", "seeds = 3",
                             ["[protocol]", "field 'seeds'", "did you mean 'seed'"]),
    "seed of the wrong type": ("protocol", 'seed = "3"',
                               ["[protocol]", "field 'seed'", "whole number"]),
    "seed -1": ("protocol", "seed = -1", ["[protocol]", "field 'seed'", "4294967295"]),
    "seed 2**40": ("protocol", f"seed = {2**40}", ["[protocol]", "field 'seed'", "4294967295"]),
    "r2 for classification": ("protocol", 'metrics = { classification = ["accuracy", "r2"] }',
                              ["field 'metrics.classification'", "'r2'", "regression metric"]),
    "accuracy for regression": ("protocol", 'metrics = { regression = ["accuracy"] }',
                                ["field 'metrics.regression'", "classification"]),
    "unknown scorer": ("protocol", 'metrics = { classification = ["acuracy"] }',
                       ["field 'metrics.classification'", "did you mean 'accuracy'"]),
    "cell_timeout \"0\"": ("protocol", 'cell_timeout = "0"', ["field 'cell_timeout'", '"none"']),
    "cell_timeout 0": ("protocol", "cell_timeout = 0", ["field 'cell_timeout'", '"none"']),
    "cell_timeout text": ("protocol", 'cell_timeout = "soon"',
                          ["field 'cell_timeout'", "not a duration"]),
    "cell_memory text": ("protocol", 'cell_memory = "lots"', ["field 'cell_memory'",
                                                              "not a size"]),
    "cell_memory tiny": ("protocol", 'cell_memory = "1MB"', ["field 'cell_memory'", "too small"]),
    "curve_points 0": ("also", "[also_measure]\ncurve_points = 0",
                       ["[also_measure]", "field 'curve_points'", "between 2 and 1000"]),
    "curve_points -3": ("also", "[also_measure]\ncurve_points = -3",
                        ["[also_measure]", "field 'curve_points'"]),
    "unknown method": ("strategies", '[[strategy]]\nname = "f"\nmethod = "random-forrest"',
                       ["strategy 'f'", "field 'method'", "random-forest"]),
    "unknown parameter": ("strategies", '[[strategy]]\nname = "f"\nmethod = "random-forest"\n'
                          "params = { n_trees = 3 }", ["strategy 'f'", "field 'params.n_trees'"]),
    "refused parameter value": ("strategies", '[[strategy]]\nname = "f"\nmethod = '
                                '"random-forest"\nparams = { max_depth = -3 }',
                                ["strategy 'f'", "field 'params'", "max_depth"]),
    "estimator not importable": ("strategies", '[[strategy]]\nname = "m"\nclassifier = '
                                 '"nowhere.models:Thing"',
                                 ["strategy 'm'", "field 'classifier'", "nowhere"]),
    "repeated dataset name": ("datasets", '[[dataset]]\nname = "wine"\nfrom = "sklearn"\n'
                              'load = "load_iris"', ["dataset 'wine' (entry 2)", "field 'name'"]),
    "unknown source": ("datasets", '[[dataset]]\nname = "x"\nfrom = "web"',
                       ["dataset 'x'", "field 'from'"]),
    "source missing": ("datasets", '[[dataset]]\nname = "x"\nsource = "file"\npath = "a.csv"',
                       ["dataset 'x'", "field 'from'", "missing"]),
    "unknown generator": ("datasets", '[[dataset]]\nname = "x"\nfrom = "generator"\nmake = '
                          '"make_cirles"', ["dataset 'x'", "field 'make'"]),
    "speedup worker count 0": ("speedup", "[speedup]\nworkers = [0, 2]",
                               ["[speedup]", "field 'workers'"]),
    "speedup unknown dataset": ("speedup", '[speedup]\ndatasets = ["wnie"]',
                                ["[speedup]", "field 'datasets'", "did you mean"]),
}


def suite_case(part: str, text: str, fragments: list[str]):
    return lambda t: (run(suite(t, **{part: text}), t), ["s.toml", *fragments])


assert not set(SUITE_CASES) & set(CASES)
CASES.update({name: suite_case(*case) for name, case in SUITE_CASES.items()})

STORE_CASES = {
    "store with damaged pages": damaged_pages,
    "store without a column": missing_column,
    "truncated store (agree)": truncated,
    "foreign SQLite file": foreign,
    "garbage store": garbage,
    "store of another schema": other_schema,
    "results folder in use": folder_in_use,
}


def snapshot(root: Path) -> dict[str, tuple]:
    """Every file and folder under ``root`` with its size and modification time."""
    return {str(p.relative_to(root)): (p.is_dir(), p.stat().st_size if p.is_file() else 0,
                                       p.stat().st_mtime_ns)
            for p in sorted(root.rglob("*"))}


def assert_refused(args, expected, tmp: Path, capsys) -> None:
    before = snapshot(tmp)
    code = main(args)
    err = capsys.readouterr().err.strip()
    assert code == 2, (args, err)
    assert len(err.splitlines()) == 1, err  # one line ...
    assert "Traceback" not in err and err.startswith("woodlot: "), err  # ... no traceback
    for text in expected:
        assert text in err, (text, err)
    after = snapshot(tmp)
    assert after == before, ("something was written", set(after.items()) ^ set(before.items()))


def test_there_are_at_least_forty_cases():
    assert not set(CASES) & set(STORE_CASES)
    assert len(CASES) + len(STORE_CASES) >= 40


@pytest.mark.parametrize("case", sorted(CASES))
def test_bad_input_is_one_line_and_exit_2(case, tmp_path, capsys):
    args, expected = CASES[case](tmp_path)
    assert_refused(args, expected, tmp_path, capsys)


@pytest.mark.parametrize("case", sorted(STORE_CASES))
def test_bad_store_or_folder_is_one_line_and_exit_2(case, stored_run, tmp_path, capsys):
    made = STORE_CASES[case](stored_run, tmp_path)
    try:
        assert_refused(made[0], made[1], tmp_path, capsys)
    finally:
        if len(made) > 2:
            made[2].__exit__(None, None, None)
