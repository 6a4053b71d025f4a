"""``woodlot compare``: matching cells of two results folders, score changes beyond the noise,
timing ratios, cells of one folder only, exit statuses."""

from __future__ import annotations

import json
import shutil
import sqlite3

import numpy as np
import pytest

from harness import load_results
from harness.cli import main
from harness.commands.agree import agree_folders
from tests.conftest import SMALL_SUITE


@pytest.fixture(scope="module")
def reference(run_once):
    return run_once(SMALL_SUITE, "compare").folder


@pytest.fixture
def copy(reference, tmp_path):
    """A copy of the reference folder to tamper with, and an open connection to its store."""
    target = tmp_path / "b"
    shutil.copytree(reference, target)
    db = sqlite3.connect(target / "cells.sqlite", isolation_level=None)
    yield target, db
    db.close()


def _pooled_sd(folder, dataset: str, metric: str) -> float:
    f = load_results(folder)
    part = f[(f.dataset == dataset) & (f.status == "ok")]
    return float(np.sqrt(part.groupby("strategy")[metric].var(ddof=1).mean()))


def _shift_score(db, dataset: str, strategy: str, metric: str, delta: float) -> tuple:
    key, scores, repeat, fold = db.execute(
        "SELECT key, scores, repeat, fold FROM cells WHERE dataset=? AND strategy=? "
        "ORDER BY repeat, fold LIMIT 1", (dataset, strategy)).fetchone()
    s = json.loads(scores)
    s[metric] += delta
    db.execute("UPDATE cells SET scores=? WHERE key=?", (json.dumps(s), key))
    return repeat, fold


def test_identical_folders_are_the_same(reference, copy, capsys):
    b, _ = copy
    c = agree_folders(reference, b)
    assert c.by_key == c.cells_a == c.cells_b == 36 and c.by_identity == 0
    assert c.differing_scores == 0 and not c.differs and c.exit_status == 0
    assert (c.timing["fit_ratio"] == 1).all()
    assert main(["agree", str(reference), str(b)]) == 0
    assert "SAME: every shared score is within 1 sd" in capsys.readouterr().out


def test_timing_noise_is_reported_but_does_not_fail(reference, copy, capsys):
    b, db = copy
    rng = np.random.default_rng(0)
    for (key,) in db.execute("SELECT key FROM cells").fetchall():
        f, p = rng.uniform(0.8, 1.2, 2)
        db.execute("UPDATE cells SET fit_seconds = fit_seconds * ?, predict_seconds = "
                   "predict_seconds * ? WHERE key=?", (f, p, key))
    c = agree_folders(reference, b)
    assert not c.differs and c.exit_status == 0
    assert (c.timing["fit_ratio"] != 1).any()
    assert c.timing["fit_ratio"].between(0.8, 1.2).all()
    assert main(["agree", str(reference), str(b)]) == 0
    assert "Timing (never fails the comparison)" in capsys.readouterr().out


def test_injected_score_change_is_flagged(reference, copy, capsys):
    b, db = copy
    sd = _pooled_sd(reference, "wine", "accuracy")
    repeat, fold = _shift_score(db, "wine", "forest", "accuracy", -3 * sd)
    c = agree_folders(reference, b)
    assert c.differing_scores == 1 and c.exit_status == 1
    hit = c.scores[c.scores["differs"]].iloc[0]
    assert (hit["dataset"], hit["strategy"], hit["repeat"], hit["fold"], hit["metric"]) == \
        ("wine", "forest", repeat, fold, "accuracy")
    assert hit["diff"] == pytest.approx(-3 * sd) and hit["sd"] == pytest.approx(sd)
    assert main(["agree", str(reference), str(b)]) == 1
    out = capsys.readouterr().out
    assert "DIFFERENT: 1 cell score(s) beyond 1 sd" in out and "| wine | forest | accuracy |" in out
    # the same change is within a tolerance of 4 sd
    assert main(["agree", str(reference), str(b), "--sd-limit", "4"]) == 0


def test_sd_limit_is_a_multiple_of_the_fold_to_fold_sd(reference, copy):
    b, db = copy
    sd = _pooled_sd(reference, "friedman", "r2")
    _shift_score(db, "friedman", "gb", "r2", 0.5 * sd)
    assert agree_folders(reference, b, sd_limit=1.0).exit_status == 0
    assert agree_folders(reference, b, sd_limit=0.6).exit_status == 0
    assert agree_folders(reference, b, sd_limit=0.4).exit_status == 1
    assert agree_folders(reference, b, sd_limit=0.0).differing_scores == 1


def test_cells_matched_by_identity_when_keys_differ(reference, copy, capsys):
    b, db = copy
    # as after a library upgrade: every key changes, the provenance names the new version
    db.execute("UPDATE cells SET key = key || 'x'")
    db.execute("UPDATE plan SET key = key || 'x'")
    run, prov = db.execute("SELECT run, provenance FROM runs ORDER BY run DESC LIMIT 1").fetchone()
    prov = json.loads(prov)
    old = prov["libraries"]["scikit-learn"]
    prov["libraries"]["scikit-learn"] = "99.0"
    db.execute("UPDATE runs SET provenance=? WHERE run=?", (json.dumps(prov), run))
    c = agree_folders(reference, b)
    assert c.by_key == 0 and c.by_identity == 36 and not c.differs
    assert c.key_reasons["reason"].tolist() == [f"library versions differ: scikit-learn {old} → "
                                                "99.0"]
    assert main(["agree", str(reference), str(b)]) == 0
    out = capsys.readouterr().out
    assert "0 matched by cell key, 36 by dataset, strategy, repeat and fold" in out


def test_cells_of_one_folder_only_and_status_changes(reference, copy):
    b, db = copy
    db.execute("DELETE FROM cells WHERE dataset='wine' AND strategy='tree' AND repeat=1")
    db.execute("UPDATE cells SET status='timeout', scores=NULL WHERE dataset='friedman' AND "
               "strategy='gb' AND repeat=0 AND fold=0")
    c = agree_folders(reference, b)
    assert len(c.only_a) == 3 and c.only_b.empty
    assert set(c.only_a["strategy"]) == {"tree"}
    # a timeout is listed, not a score difference
    assert len(c.status_changes) == 1 and not c.differs
    db.execute("UPDATE cells SET status='error', message='ValueError: boom' WHERE "
               "dataset='friedman' AND strategy='gb' AND repeat=0 AND fold=0")
    c = agree_folders(reference, b)
    assert c.differing_status == 1 and c.exit_status == 1
    assert c.status_changes["message"].iloc[0] == "ValueError: boom"


def test_bad_input_is_one_line_and_exit_2(reference, copy, tmp_path, capsys):
    assert main(["agree", str(reference), str(tmp_path / "missing")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no results store in" in err and "missing" in err
    assert main(["agree", str(reference), str(reference), "--sd-limit", "-1"]) == 2
    assert "--sd-limit must be" in capsys.readouterr().err
    b, db = copy  # nothing in common: other datasets, other keys
    db.execute("UPDATE cells SET key = key || 'y', dataset = dataset || '-other'")
    db.execute("UPDATE plan SET key = key || 'y'")
    assert main(["agree", str(reference), str(b)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "share no cell" in err


# ------------------------------------------------------------------ matching, in SQL

def _pandas_match(fa, fb):
    """The same matching done by pandas merges (the reference for the SQL in the store):
    by key, then the cells left over by dataset, strategy, repeat and fold."""
    ident = ["dataset", "strategy", "repeat", "fold"]
    by_key = fa.merge(fb, on="key")
    rest_a = fa[~fa["key"].isin(by_key["key"])]
    rest_b = fb[~fb["key"].isin(by_key["key"])]
    by_id = rest_a.merge(rest_b, on=ident, suffixes=("_a", "_b"))
    return ({tuple(r) for r in by_key[[f"{c}_x" for c in ident]].to_numpy()},
            {tuple(r) for r in by_id[ident].to_numpy()})


def test_sql_matching_agrees_with_pandas_merges(reference, copy):
    b, db = copy
    # a mixture: renamed keys on one dataset (identity matches), a deleted cell (only in A),
    # a cell of B's own (only in B) and a changed score
    db.execute("UPDATE plan SET key = key || 'x' WHERE key IN (SELECT key FROM cells WHERE "
               "dataset = 'friedman' AND strategy = 'gb')")
    db.execute("UPDATE cells SET key = key || 'x' WHERE dataset = 'friedman' AND strategy = "
               "'gb'")
    db.execute("DELETE FROM cells WHERE dataset = 'wine' AND strategy = 'tree' AND repeat = 0 "
               "AND fold = 0")
    columns = [r[1] for r in db.execute("PRAGMA table_info(cells)")]
    copied = ", ".join({"key": "key || 'new'", "strategy": "'extra'"}.get(c, c) for c in columns)
    db.execute(f"INSERT INTO cells SELECT {copied} FROM cells WHERE dataset = 'wine' AND "
               "strategy = 'forest' AND repeat = 1 AND fold = 2")
    db.execute("INSERT INTO plan SELECT key FROM cells WHERE strategy = 'extra'")
    by_key, by_id = _pandas_match(load_results(reference), load_results(b))
    c = agree_folders(reference, b)
    assert (c.by_key, c.by_identity) == (len(by_key), len(by_id)) == (29, 6)
    matched = {tuple(r) for r in c.scores[["dataset", "strategy", "repeat", "fold"]]
               .astype(object).to_numpy()}
    assert matched == by_key | by_id
    assert c.only_a[["dataset", "strategy", "repeat", "fold"]].values.tolist() == \
        [["wine", "tree", 0, 0]]
    assert c.only_b[["dataset", "strategy"]].values.tolist() == [["wine", "extra"]]


# ------------------------------------------------------------------ not comparable

@pytest.mark.parametrize("change, words", [
    ("seed = 3", "seed = 4"),          # other rows, same sizes: told by the recorded splits
    ("folds = 3", "folds = 2"),        # other split sizes
])
def test_folders_with_other_splits_are_not_comparable(reference, run_once, change, words,
                                                      capsys):
    other = run_once(SMALL_SUITE.replace(change, words), "other").folder
    assert main(["agree", str(reference), str(other)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("woodlot: ")
    assert "are not comparable (different splits" in err
    assert "trained and tested on other rows" in err


def test_cells_on_other_rows_are_counted_apart(reference, copy, capsys):
    """One dataset split anew (as if its rows had been reshuffled): its cells are left out
    and named; the other dataset is compared as usual."""
    b, db = copy
    db.execute("UPDATE cell_splits SET split = 'other-' || split, key = key || 'x' WHERE key "
               "IN (SELECT key FROM cells WHERE dataset = 'wine')")
    db.execute("UPDATE plan SET key = key || 'x' WHERE key IN (SELECT key FROM cells WHERE "
               "dataset = 'wine')")
    db.execute("UPDATE cells SET key = key || 'x' WHERE dataset = 'wine'")
    c = agree_folders(reference, b)
    assert c.by_identity == 18 and c.other_rows.values.tolist() == [["wine", 18]]
    assert c.compared == 18 and set(c.scores["dataset"]) == {"friedman"}
    assert "other rows in the splits" in c.key_reasons["reason"].iloc[0]
    assert main(["agree", str(reference), str(b)]) == 0
    out = capsys.readouterr().out
    assert "Not compared: 18 matched cell(s) were trained and tested on other rows" in out
    assert "(18 cells compared; 18 on other rows not compared)." in out


def test_every_cut_listing_says_how_many_rows_it_leaves_out(reference, copy):
    from harness.report.agreement import render

    b, db = copy
    db.execute("UPDATE cells SET status = 'error', message = 'ValueError: x', scores = NULL "
               "WHERE strategy = 'gb'")            # 12 status changes
    db.execute("DELETE FROM cells WHERE strategy = 'tree' AND repeat = 1")  # 6 only in A
    db.execute("UPDATE cells SET fit_seconds = fit_seconds * 5")  # every fit time ×5
    text = render(agree_folders(reference, b), limit=1)
    assert "(11 more rows not shown: 1 of 12 listed)" in text     # status changes
    assert "Only in A (6 cells):" in text
    assert "(1 more rows not shown: 1 of 2 listed)" in text       # only in A, 2 groups
    assert "(3 more rows not shown: 1 of 4 listed)" in text       # fit time ×5: 4 groups
    full = render(agree_folders(reference, b))
    assert "more rows not shown" not in full
