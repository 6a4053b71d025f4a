"""``woodlot add``: the suite file keeps every byte but the new entry, which loads and runs;
CSV dialects are detected or overridden; every refusal leaves the suite file untouched."""

from __future__ import annotations

import difflib
import tomllib

import numpy as np
import pandas as pd
import pytest

from harness import load_results, run_suite
from harness.commands.add import add_file, default_name
from harness.cli import main
from harness.datasets import load_dataset
from harness.suite import load_suite

SUITE = """\
# A small suite with comments in the places people put them.
[suite]
name = "mine"     # inline comment
description = "tiny"

[protocol]
folds = 3
repeats = 1
seed = 5

[[dataset]]
name = "friedman"
from = "generator"
make = "make_friedman1"
params = { n_samples = 90, random_state = 0 }   # small on purpose

# ---- strategies --------------------------------------------------------------
# (this comment introduces the strategies; it must stay right above them)
[[strategy]]
name = "tree"
method = "single-tree"

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 5 }
"""


def table(n=120, seed=0):
    rng = np.random.default_rng(seed)
    soil = rng.choice(["clay", "loam", "sand"], size=n)
    moisture = rng.normal(30, 8, n).round(2)
    wet = np.where((soil == "clay") ^ (moisture > 30), "wet", "dry")
    return pd.DataFrame({"soil": soil, "moisture": moisture, "depth_cm": rng.integers(5, 60, n),
                         "state": wet})


@pytest.fixture
def suite(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text(SUITE, encoding="utf-8")
    return path


def cli(args, capsys):
    code = main(args)
    out = capsys.readouterr()
    return code, out.out, out.err.strip()


def only_insertion(old: str, new: str) -> str:
    """The text inserted into ``old`` to make ``new``; fails if anything else changed."""
    ops = [op for op in difflib.SequenceMatcher(None, old, new, autojunk=False).get_opcodes()
           if op[0] != "equal"]
    assert len(ops) == 1 and ops[0][0] == "insert", ops
    _, i1, _, j1, j2 = ops[0]
    assert new[:j1] + new[j2:] == old
    return new[j1:j2]


def test_round_trip_keeps_comments_and_layout_and_the_suite_runs(suite, tmp_path, capsys):
    table().to_csv(tmp_path / "field plots.csv", index=False)
    before = suite.read_text()
    code, out, err = cli(["add", str(suite), "--file", str(tmp_path / "field plots.csv"),
                          "--target", "state"], capsys)
    assert code == 0, err
    after = suite.read_text()
    inserted = only_insertion(before, after)
    block = ('[[dataset]]\nname = "field-plots"\nfrom = "file"\npath = "field plots.csv"\n'
             'target = "state"\n')
    assert inserted.strip("\n") == block.strip("\n")
    # after the last dataset's lines, a blank line, then the comment introducing the strategies
    assert '# small on purpose\n\n' + block + '\n# ---- strategies' in after
    assert "120 rows, 3 feature columns" in out and "added dataset 'field-plots'" in out
    s = load_suite(suite)
    spec = s.datasets[-1]
    assert (spec.name, spec.source, spec.options) == (
        "field-plots", "file", {"path": "field plots.csv", "target": "state"})
    assert load_dataset(spec).categorical == ("soil",)
    result = run_suite(suite, out=tmp_path / "out", jobs=1, progress=False)
    assert result.ran == 2 * 2 * 3 and result.failed == 0
    frame = load_results(tmp_path / "out")
    assert set(frame.dataset) == {"friedman", "field-plots"} and (frame.status == "ok").all()
    assert [p.name for p in tmp_path.iterdir() if "adding" in p.name] == []  # no temp file left


@pytest.mark.parametrize("sep, decimal, written", [
    (";", ",", {"delimiter": ";", "decimal": ","}),
    ("\t", ".", {"delimiter": "\t"}),
    ("|", ".", {"delimiter": "|"}),
    (",", ".", {}),
])
def test_csv_dialects_are_detected_and_written(suite, tmp_path, sep, decimal, written):
    t = table()
    path = tmp_path / "plots.csv"
    t.to_csv(path, index=False, sep=sep, decimal=decimal)
    added = add_file(suite, path, "state")
    assert {k: v for k, v in added.entry.items() if k in ("delimiter", "decimal")} == written
    assert {k: v for k, v in tomllib.loads(suite.read_text())["dataset"][-1].items()
            if k in ("delimiter", "decimal")} == written
    ds = load_dataset(load_suite(suite).datasets[-1])
    assert ds.X.moisture.dtype == float and np.allclose(ds.X.moisture, t.moisture)
    assert list(ds.X.columns) == ["soil", "moisture", "depth_cm"]


def test_overrides_win_over_detection(suite, tmp_path, capsys):
    t = table(80)
    lines = [";".join(t.columns)]
    for i, row in enumerate(t.itertuples(index=False)):
        # the first 60 rows (all detection reads) hold whole numbers, the rest decimal commas
        moisture = f"{int(row.moisture)}" if i < 60 else f"{row.moisture:.2f}".replace(".", ",")
        lines.append(f"{row.soil};{moisture};{row.depth_cm};{row.state}")
    path = tmp_path / "late-commas.csv"
    path.write_text("\n".join(lines) + "\n")
    detected = add_file(suite, path, "state", name="detected")
    assert "decimal" not in detected.entry
    assert "moisture" in detected.check.categorical  # '31,25' read as text: the wrong reading
    code, out, err = cli(["add", str(suite), "--file", str(path), "--target", "state",
                          "--name", "given", "--decimal", ",", "--delimiter", ";"], capsys)
    assert code == 0, err
    entry = tomllib.loads(suite.read_text())["dataset"][-1]
    assert (entry["name"], entry["delimiter"], entry["decimal"]) == ("given", ";", ",")
    ds = load_dataset(load_suite(suite).datasets[-1])
    assert ds.categorical == ("soil",) and ds.X.moisture.dtype == float
    assert ds.X.moisture.iloc[-1] == pytest.approx(round(t.moisture.iloc[-1], 2))
    # 'tab' as a word, and the task and dropped columns written when given
    t.to_csv(tmp_path / "tabbed.csv", sep="\t", index=False)
    code, out, err = cli(["add", str(suite), "--file", str(tmp_path / "tabbed.csv"), "--target",
                          "depth_cm", "--delimiter", "tab", "--task", "regression",
                          "--drop", "soil"], capsys)
    assert code == 0, err
    entry = tomllib.loads(suite.read_text())["dataset"][-1]
    assert (entry["delimiter"], entry["task"], entry["drop"]) == ("\t", "regression", ["soil"])
    assert load_dataset(load_suite(suite).datasets[-1]).task == "regression"


def test_report_warns_about_an_identifier_and_a_leaking_feature(suite, tmp_path, capsys):
    t = table()
    t.insert(0, "plot_id", np.arange(len(t)) + 1)
    t["state_code"] = t.state.map({"wet": "W", "dry": "D"})
    t.to_csv(tmp_path / "leaky.csv", index=False)
    code, out, err = cli(["add", str(suite), "--file", str(tmp_path / "leaky.csv"),
                          "--target", "state"], capsys)
    assert code == 0, err  # warnings, not refusals
    assert "warnings (2):" in out
    assert "column 'plot_id' has a different value in every row (an identifier?)" in out
    assert "column 'state_code' maps one-to-one onto the target 'state'" in out


def write_bad(tmp_path, kind):
    """A data file that fails one check; returns (path, target, extra CLI options)."""
    t = table(60)
    path = tmp_path / "data.csv"
    if kind == "missing file":
        return tmp_path / "nowhere.csv", "state", []
    if kind == "unparsable parquet":
        path = tmp_path / "data.parquet"
        path.write_bytes(b"PAR1 this is not a parquet file")
    elif kind == "empty csv":
        path.write_text("")
    elif kind in ("short row", "long row"):
        lines = t.to_csv(index=False).splitlines()
        lines[17] = ",".join(lines[17].split(",")[:-1]) if kind == "short row" else lines[17] + ",9"
        path.write_text("\n".join(lines) + "\n")
    elif kind == "single-valued target":
        t.assign(state="dry").to_csv(path, index=False)
    elif kind == "tiny class":
        t.loc[:1, "state"] = "flooded"  # 2 rows; the suite uses 3 folds
        t.to_csv(path, index=False)
    else:
        t.to_csv(path, index=False)
    extra = {"bad delimiter": ["--delimiter", ";;"], "bad decimal": ["--decimal", "x"],
             "bad name": ["--name", "my data"], "taken name": ["--name", "friedman"]}
    target = "State" if kind == "missing target" else "state"
    return path, target, extra.get(kind, [])


BAD = [  # kind, file the message names, field it names, words it contains
    ("missing file", "nowhere.csv", "path", "file not found"),
    ("unparsable parquet", "data.parquet", "path", "not a readable Parquet file"),
    ("empty csv", "data.csv", "path", "not a readable CSV file"),
    ("short row", "data.csv", "path", "line 18 has 3 fields where the header has 4"),
    ("long row", "data.csv", "path", "rows of different lengths"),
    ("missing target", "data.csv", "target", "did you mean 'state'?"),
    ("single-valued target", "data.csv", "target", "single class"),
    ("tiny class", "data.csv", "target", "class 'flooded' has 2 row(s), fewer than 3 folds"),
    ("bad delimiter", "data.csv", "delimiter", "one character"),
    ("bad decimal", "data.csv", "decimal", "'.' or ','"),
    ("bad name", "mine.toml", "name", "not a usable name"),
    ("taken name", "mine.toml", "name", "already has a dataset named 'friedman'"),
]


@pytest.mark.parametrize("kind, names_file, field, words", BAD, ids=[b[0] for b in BAD])
def test_refusals_leave_the_suite_byte_identical(suite, tmp_path, capsys, kind, names_file,
                                                 field, words):
    path, target, extra = write_bad(tmp_path, kind)
    before = suite.read_bytes()
    code, out, err = cli(["add", str(suite), "--file", str(path), "--target", target, *extra],
                         capsys)
    assert code == 2
    assert suite.read_bytes() == before
    assert err.startswith("woodlot: ") and "\n" not in err and "Traceback" not in err
    assert names_file in err and f"field '{field}'" in err and words in err, err
    assert sorted(p.name for p in tmp_path.iterdir() if p.suffix == ".toml") == ["mine.toml"]


def test_refuses_a_suite_that_does_not_parse(tmp_path, capsys):
    table().to_csv(tmp_path / "d.csv", index=False)
    broken = tmp_path / "broken.toml"
    broken.write_text(SUITE.replace('seed = 5', 'seed = = 5'))
    invalid = tmp_path / "invalid.toml"
    invalid.write_text(SUITE.replace('method = "single-tree"', 'method = "single-trees"'))
    for path, words, field in ((broken, "not valid TOML", None),
                               (invalid, "did you mean 'single-tree'", "method")):
        before = path.read_bytes()
        code, out, err = cli(["add", str(path), "--file", str(tmp_path / "d.csv"), "--target",
                              "state"], capsys)
        assert code == 2 and path.name in err and words in err, err
        assert field is None or f"field '{field}'" in err
        assert path.read_bytes() == before and out == ""


def test_parquet_input_with_nullable_columns_runs(suite, tmp_path):
    t = table()
    t["depth_cm"] = t.depth_cm.astype("Int64")
    t.loc[[3, 40], "depth_cm"] = pd.NA
    t["soil"] = t.soil.astype("string")
    t.loc[7, "soil"] = pd.NA
    t.to_parquet(tmp_path / "plots.parquet")
    added = add_file(suite, tmp_path / "plots.parquet", "state", name="pq")
    assert added.entry == {"name": "pq", "from": "file", "path": "plots.parquet",
                           "target": "state"}
    assert added.check.missing_by_column == (("depth_cm", 2 / 120), ("soil", 1 / 120))
    with pytest.raises(Exception, match="field 'delimiter'.*CSV files only"):
        add_file(suite, tmp_path / "plots.parquet", "state", name="pq2", delimiter=";")
    text = suite.read_text().replace('method = "random-forest"', 'method = "hist-gradient-boosting"')
    suite.write_text(text.replace("params = { n_estimators = 5 }", "params = { max_iter = 10 }"))
    run_suite(suite, out=tmp_path / "out", jobs=1, progress=False)
    frame = load_results(tmp_path / "out")
    pq = frame[frame.dataset == "pq"]
    assert len(pq) == 2 * 3 and (pq.status == "ok").all(), pq.message.tolist()


LAYOUTS = {
    "dataset last": "[[strategy]]\nname = \"tree\"\nmethod = \"single-tree\"\n\n"
                    "[[dataset]]\nname = \"wine\"\nfrom = \"sklearn\"\nload = \"load_wine\"",
    "interleaved": "[[dataset]]\nname = \"wine\"\nfrom = \"sklearn\"\nload = \"load_wine\"\n"
                   "[[strategy]]\nname = \"tree\"\nmethod = \"single-tree\"\n"
                   "[[dataset]]\nname = \"iris\"\nfrom = \"sklearn\"\nload = \"load_iris\"\n"
                   "# trailing comment\n[speedup]\nworkers = [1, 2]\n",
    "crlf": SUITE.replace("\n", "\r\n"),
}


@pytest.mark.parametrize("layout", LAYOUTS)
def test_other_layouts_get_only_an_insertion(tmp_path, layout):
    path = tmp_path / "s.toml"
    path.write_bytes(LAYOUTS[layout].encode())
    table().to_csv(tmp_path / "plots.csv", index=False)
    before = path.read_bytes().decode()
    add_file(path, tmp_path / "plots.csv", "state")
    after = path.read_bytes().decode()
    inserted = only_insertion(before, after)
    assert "[[dataset]]" in inserted
    names = [d.name for d in load_suite(path).datasets]
    assert names[-1] == "plots" and len(names) == before.count("[[dataset]]") + 1
    if layout == "crlf":
        assert "\n" not in after.replace("\r\n", "")


def test_path_is_relative_to_the_suite_folder(tmp_path, monkeypatch):
    (tmp_path / "suites").mkdir()
    (tmp_path / "data").mkdir()
    suite = tmp_path / "suites" / "mine.toml"
    suite.write_text(SUITE)
    table().to_csv(tmp_path / "data" / "plots.csv", index=False)
    monkeypatch.chdir(tmp_path / "data")
    added = add_file(suite, "plots.csv", "state")
    assert added.entry["path"] == "../data/plots.csv"
    monkeypatch.chdir(tmp_path)
    assert load_dataset(load_suite(suite).datasets[-1]).n_rows == 120


@pytest.mark.parametrize("stem, name", [("field plots (2024)", "field-plots-2024"),
                                        ("données été", "donnees-ete"), ("__x_1", "x_1"),
                                        ("###", "data"), ("run.v2", "run.v2")])
def test_default_name_follows_the_suite_name_rules(stem, name):
    assert default_name(f"/some/where/{stem}.csv") == name
