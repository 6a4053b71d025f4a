"""The data check: summary figures and the warnings for identifiers, leakage, constants, tiny classes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.datacheck import (ALONE, CONSTANT, IDENTIFIER, LEAK, TINY_CLASS, check_file,
                               check_frame)
from harness.errors import UserError


def frame(n=200, seed=0):
    rng = np.random.default_rng(seed)
    soil = rng.choice(["clay", "loam", "sand"], size=n)
    x = rng.normal(size=n)
    label = np.where((soil == "clay") ^ (x > 0), "wet", "dry")
    return pd.DataFrame({"soil": soil, "x": x, "label": label}), rng


def check(df, target="label", **kw):
    return check_frame(df, target, name="t", where="t.csv", source="t.csv", **kw)[1]


def test_summary_counts_classes_missing_values_and_categorical_columns():
    df, rng = frame()
    df.loc[:19, "x"] = np.nan           # 10% of x
    df.loc[:4, "soil"] = None           # 2.5% of soil
    c = check(df)
    assert (c.rows, c.columns, c.task, c.task_given) == (200, 2, "classification", False)
    counts = df.label.value_counts()
    assert c.classes == tuple((k, int(v)) for k, v in counts.items())
    assert c.smallest_class_share == pytest.approx(counts.min() / 200)
    assert c.missing_by_column == (("x", 0.1), ("soil", 0.025))
    assert c.missing_share == pytest.approx((20 + 5) / 400)
    assert c.categorical == ("soil",)
    assert c.warnings == ()
    text = c.text()
    assert "200 rows, 2 feature columns" in text and "classification (inferred)" in text
    assert "x 10.0%, soil 2.5%" in text and "warnings: none" in text


def test_forced_task_and_regression_summary():
    df, rng = frame()
    df["amount"] = rng.integers(0, 4, len(df))  # few whole values: inferred as classes
    assert check(df, target="amount").task == "classification"
    c = check(df.drop(columns="label"), target="amount", task="regression")
    assert c.task == "regression" and c.task_given and c.classes == ()
    assert c.target_range == (0.0, float(np.median(df.amount)), 3.0)
    assert "regression (given)" in c.text()


def test_identifier_columns_whole_numbers_and_text_but_not_measurements():
    df, rng = frame()
    n = len(df)
    df["row_id"] = rng.permutation(n) + 1000
    df["code"] = [f"T-{i:04d}" for i in range(n)]
    df["id_as_float"] = np.arange(n, dtype=float)   # ids read back as floats
    # x: continuous, every value distinct -- a measurement, not an identifier
    df["with_gap"] = np.arange(n)
    df.loc[3, "with_gap"] = np.nan                  # not complete, so not flagged
    df["repeats"] = np.arange(n) % (n // 2)         # integers, but not unique
    c = check(df)
    assert c.flagged(IDENTIFIER) == ["row_id", "code", "id_as_float"]
    assert "'row_id' has a different value in every row" in c.text()


def test_leaking_features_identical_and_one_to_one():
    df, rng = frame()
    df["copy"] = df.label
    df["coded"] = df.label.map({"wet": 1, "dry": 0})       # one-to-one, other values
    almost = df.label.copy()
    almost.iloc[0] = "dry" if almost.iloc[0] == "wet" else "wet"
    df["almost"] = almost                                 # one row off: not flagged
    df["finer"] = df.label + "-" + df.soil                # determines the target, not 1:1
    c = check(df)
    assert c.flagged(LEAK) == ["copy", "coded"]
    messages = {f.subject: f.message for f in c.warnings}
    assert "identical to the target 'label'" in messages["copy"]
    assert "maps one-to-one onto the target" in messages["coded"]


def test_integer_labels_and_float_copy_compare_equal():
    df, rng = frame()
    df["label"] = (df.label == "wet").astype(int)
    df["flag"] = df.label.astype(float)
    c = check(df)
    assert c.flagged(LEAK) == ["flag"]
    assert "identical" in c.warnings[0].message


def test_regression_leaks_copy_and_monotone_transform_but_not_noisy_copy():
    df, rng = frame()
    df = df.drop(columns="label")
    df["price"] = np.exp(df.x) * 10 + rng.normal(0, 1, len(df))
    df["price_copy"] = df.price
    df["log_price"] = -np.log(df.price - df.price.min() + 1)  # strictly falls with price
    df["noisy"] = df.price + rng.normal(0, 5, len(df))
    c = check(df, target="price")
    assert c.task == "regression"
    assert c.flagged(LEAK) == ["price_copy", "log_price"]
    assert "falls exactly as the target 'price' rises" in c.text()


def test_a_feature_that_predicts_the_target_almost_alone_is_flagged():
    """A constructed leak: the target plus a little noise (regression), the class plus a
    little noise (classification). Honest features of the same tables are not flagged."""
    from sklearn.datasets import make_friedman1

    X, y = make_friedman1(n_samples=600, noise=1.0, random_state=3)
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])]).assign(target=y)
    rng = np.random.default_rng(3)
    df["metered"] = y + rng.normal(0, 0.05 * y.std(), len(y))
    c = check(df, target="target")
    assert c.flagged(ALONE) == ["metered"], c.text()
    assert "R² 0.9" in c.text()
    df, rng = frame(400, seed=4)
    df["probe"] = (df.label == "wet") + rng.normal(0, 0.2, len(df))
    c = check(df)
    assert c.flagged(ALONE) == ["probe"], c.text()
    assert "ROC AUC" in c.text() and "for class" in c.text()


def test_strong_feature_shared_with_other_columns_is_not_flagged():
    """Breast cancer (scikit-learn's copy of the Wisconsin diagnostic data): 'worst concave
    points' alone reaches a ROC AUC of about 0.95 against about 0.99 for all features, but
    the other size and shape measurements make up for it, so it is no leak."""
    from sklearn.datasets import load_breast_cancer

    b = load_breast_cancer(as_frame=True)
    c = check(b.data.assign(diagnosis=b.target), target="diagnosis")
    assert c.flagged(ALONE) == [], c.text()


def test_greenhouse_energy_is_flagged_for_the_alarm_target():
    """The demo's end-of-day energy use is partly computed from the cold alarm
    (examples/make_greenhouse.py): it gives that class away."""
    from pathlib import Path

    path = Path(__file__).resolve().parents[1] / "examples" / "greenhouse.csv"
    _, c = check_file(path, "alarm")
    assert c.flagged(ALONE) == ["energy_kwh_m2"]
    assert c.flagged(IDENTIFIER) == ["record"]
    assert "for class 'cold'" in c.text()
    _, c = check_file(path, "alarm", drop=["energy_kwh_m2", "record"])
    assert c.warnings == ()


def test_advice_to_drop_fits_the_command():
    df, rng = frame()
    df["row_id"] = np.arange(len(df))
    c = check(df)
    assert 'drop = ["row_id"] in the suite' in c.text()
    assert "(--drop row_id)" in c.text(lambda col: f"--drop {col}")


def test_constant_columns():
    df, rng = frame()
    df["site"] = "north"
    df["empty"] = np.nan
    df["mostly_missing"] = np.where(np.arange(len(df)) < 10, 2.0, np.nan)
    c = check(df)
    assert c.flagged(CONSTANT) == ["site", "empty", "mostly_missing"]
    text = c.text()
    assert "single value 'north' in every row" in text
    assert "'empty' is missing in every row" in text
    assert "single value 2 in every row (missing elsewhere)" in text


def test_tiny_classes_depend_on_the_folds():
    df, rng = frame()
    df.loc[:2, "label"] = "frozen"       # 3 rows
    assert check(df, folds=5).flagged(TINY_CLASS) == ["frozen"]
    assert check(df, folds=3).flagged(TINY_CLASS) == []
    assert "class 'frozen' has 3 row(s), fewer than 5-fold" in check(df).text()


def test_hard_failures_name_file_and_field(tmp_path):
    df, rng = frame()
    with pytest.raises(UserError, match=r"t\.csv: field 'target': target column 'lable' is not "
                       r"in the data \(did you mean 'label'\?\)"):
        check(df, target="lable")
    one = df.assign(label="dry")
    with pytest.raises(UserError, match=r"t\.csv: field 'target': the target has a single class"):
        check(one)
    path = tmp_path / "d.csv"
    df.to_csv(path, index=False)
    with pytest.raises(UserError, match=r"field 'drop'"):
        check_file(path, "label", drop=["nope"])


def test_check_file_reports_the_dialect_it_read(tmp_path):
    df, rng = frame(60)
    path = tmp_path / "eu.csv"
    df.to_csv(path, index=False, sep=";", decimal=",")
    ds, c = check_file(path, "label")
    assert (c.delimiter, c.decimal) == (";", ",")
    assert ds.X.x.dtype == float and np.allclose(ds.X.x, df.x)
    assert "(CSV, delimiter ';', decimal mark ',')" in c.text()
