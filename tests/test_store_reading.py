"""Reading a store into frames (`Store.cells_frame`, `Store.curve_points`) gives what pandas
itself reads from the same SQLite file: the same rows, columns, order and values, with text
as plain Python strings."""

from __future__ import annotations

import json
import sqlite3

import numpy as np
import pandas as pd
import pytest

from harness.analysis.results import metric_columns
from harness.store import STORE_NAME, Store, _Column, _ScoreChunk
from tests.conftest import SMALL_SUITE

IDENTITY = ["dataset", "strategy", "repeat", "fold"]


@pytest.fixture(scope="module")
def folder(run_once):
    return run_once(SMALL_SUITE, "reading").folder


def reference(folder) -> tuple[pd.DataFrame, list[str]]:
    """The latest plan's cells as pandas reads them (``read_sql_query``), sorted by identity,
    with the scores as one frame of all the JSON dicts, and the metric names."""
    db = sqlite3.connect(folder / STORE_NAME)
    cells = pd.read_sql_query("SELECT * FROM cells WHERE key IN (SELECT key FROM plan)", db)
    db.close()
    cells = cells.sort_values(IDENTITY, kind="stable").reset_index(drop=True)
    scores = pd.DataFrame([json.loads(s) for s in cells.pop("scores")])
    return pd.concat([cells, scores], axis=1), list(scores.columns)


def test_cells_frame_is_what_pandas_reads(folder):
    ref, metrics = reference(folder)
    with Store(folder, read_only=True) as store:
        ours = store.cells_frame()
    assert list(ours.columns[-len(metrics):]) == metrics
    assert len(ours) == len(ref) > 0
    for c in ref.columns:
        if c == "curve":
            assert ours[c].tolist() == [json.loads(x) if isinstance(x, str) else None
                                        for x in ref[c]]
            continue
        theirs, mine = ref[c], ours[c]
        if pd.api.types.is_numeric_dtype(theirs):
            np.testing.assert_array_equal(mine.to_numpy(float), theirs.to_numpy(float),
                                          err_msg=c)
        else:
            assert mine.dtype == object, c  # plain strings, not Arrow-backed ones
            assert [None if pd.isna(x) else x for x in mine] == \
                [None if pd.isna(x) else x for x in theirs], c


def test_chosen_columns_and_curves(folder):
    with Store(folder, read_only=True) as store:
        whole = store.cells_frame(curves=False)
        some = store.cells_frame(curves=False, columns=["status"])
        points = store.curve_points(["wine"])
    some = some[some["dataset"] == "wine"].reset_index(drop=True)
    wine = whole[whole["dataset"] == "wine"].reset_index(drop=True)
    assert list(some.columns[:6]) == ["key", "dataset", "strategy", "repeat", "fold", "status"]
    assert some["key"].tolist() == wine["key"].tolist()
    metrics = [c for c in metric_columns(some) if some[c].notna().any()]  # wine's own
    assert "accuracy" in metrics and "r2" not in metrics
    pd.testing.assert_frame_equal(some[metrics], wine[metrics])
    # the curves: one row per point of every successful cell's curve, as stored
    ok = wine[wine["status"] == "ok"]
    with Store(folder, read_only=True) as store:
        curves = store.cells_frame()
    curves = curves[curves["dataset"] == "wine"]
    expected = sum(len(c) for c in curves.loc[curves["status"] == "ok", "curve"]
                   if isinstance(c, list))
    assert len(points) == expected > 0
    assert set(points["key"]) <= set(ok["key"])
    assert points["key"].dtype == object


def test_scores_read_chunk_by_chunk_are_one_frame_of_the_dicts_in_order():
    # stored order: a regression cell, then classification ones, then one with no scores;
    # read in order (3, 1, 0, 2): the columns as pandas orders those dicts, by first
    # appearance in the order read
    stored = [{"r2": 0.5, "neg_root_mean_squared_error": -2.0},
              {"accuracy": 0.9, "neg_log_loss": -0.3}, {}, {"accuracy": 0.8, "f1": 0.7}]
    order = np.array([3, 1, 0, 2])
    chunks = [_ScoreChunk(stored[:2]), _ScoreChunk(stored[2:])]
    expected = pd.DataFrame([stored[i] for i in order])
    pd.testing.assert_frame_equal(_ScoreChunk.frame(chunks, order), expected)
    assert list(expected.columns) == ["accuracy", "f1", "neg_log_loss", "r2",
                                      "neg_root_mean_squared_error"]


def test_columns_become_arrays_as_pandas_would_type_them():
    def column(*chunks):
        c = _Column()
        for values in chunks:
            c.add(values)
        return c.array()

    assert column((1, 2), (3,)).dtype == np.int64
    ints_and_null = column((1, None), (3,))
    assert ints_and_null.dtype == float and np.isnan(ints_and_null[1])
    assert column((None, None), (1.5,)).tolist()[2] == 1.5
    assert column((None, None)).tolist() == [None, None]
    text = column(("a", None), ("a", "b"))
    assert text.dtype == object and text[0] is text[2]  # one object per distinct value
    assert text[0] == "a" and pd.isna(text[1])
    big = column((2 ** 70, 1))
    assert big.dtype == object and big[0] == 2 ** 70
