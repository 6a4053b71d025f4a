"""In-fold preprocessing of categorical columns and missing values (no leakage)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness import load_results, run_suite
from harness.datasets import finish
from harness.preprocess import with_preprocessing
from harness.strategies import CATALOGUE, Strategy, class_path


def mixed_table(n=240, seed=0):
    rng = np.random.default_rng(seed)
    soil = rng.choice(["clay", "loam", "sand"], size=n)
    x = rng.normal(size=n)
    y = ((soil == "clay") ^ (x > 0)).astype(int)
    x[rng.random(n) < 0.1] = np.nan
    soil = soil.astype(object)
    soil[rng.random(n) < 0.1] = None
    return pd.DataFrame({"soil": soil, "x": x, "y": y})


def test_imputer_and_encoder_are_fitted_on_training_rows_only():
    t = mixed_table()
    ds = finish("m", t.drop(columns="y"), t.y, source="test", where="test")
    assert ds.categorical == ("soil",)
    est = Strategy("rf", "forest", "random-forest",
                   class_path(CATALOGUE["random-forest"].classifier), None).build(
        "classification", 0)
    model = with_preprocessing(est, ds)
    train = np.arange(120)
    model.fit(ds.X.iloc[train], ds.y.iloc[train])
    imputer = model.named_steps["preprocess"].named_transformers_["numeric"]
    # The median the imputer learned is the training rows' median, not the whole table's.
    assert imputer.statistics_[0] == np.nanmedian(ds.X.x.to_numpy()[train])
    assert imputer.statistics_[0] != np.nanmedian(ds.X.x.to_numpy())


def test_unseen_category_in_test_rows_is_handled(tmp_path):
    t = mixed_table()
    t.loc[t.index[-5:], "soil"] = "peat"  # appears only in the last rows
    t.to_csv(tmp_path / "mixed.csv", index=False)
    (tmp_path / "s.toml").write_text("""
[protocol]
splits = "holdout"
train_rows = 200
repeats = 1
[[dataset]]
name = "mixed"
from = "file"
path = "mixed.csv"
target = "y"
[[strategy]]
name = "hgb"
method = "hist-gradient-boosting"
params = { max_iter = 20 }
[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 20 }
""")
    run_suite(tmp_path / "s.toml", out=tmp_path / "out", progress=False)
    frame = load_results(tmp_path / "out")
    assert (frame.status == "ok").all(), frame.message.tolist()
    assert (frame.accuracy > 0.8).all()  # the signal is learnable through the encoded column
