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
