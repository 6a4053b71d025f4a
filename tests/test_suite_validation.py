"""Bad suite files: one clear line naming file, entry and field; exit status 2; nothing written."""

from __future__ import annotations

import pytest

import textwrap

import numpy as np
import pandas as pd

from harness.cli import main

HEAD = """
[suite]
name = "bad"

[protocol]
folds = 3
repeats = 1
"""
TREE = """
[[strategy]]
name = "tree"
method = "single-tree"
"""
WINE = """
[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"
"""


def run_cli(args, capsys):
    code = main(args)
    captured = capsys.readouterr()
    return code, captured.err.strip()


def check_bad(write_suite, capsys, tmp_path, body, *expected):
    path = write_suite(body)
    out = tmp_path / "out"
    for command in (["check", str(path)], ["run", str(path), "--out", str(out), "--quiet"]):
        code, err = run_cli(command, capsys)
        assert code == 2, err
        assert len(err.splitlines()) == 1, err  # one line, no traceback
        assert str(path) in err
        for text in expected:
            assert text in err, err
    assert not out.exists()  # nothing written
    return err


def test_malformed_toml_names_line_and_column(write_suite, capsys, tmp_path):
    err = check_bad(write_suite, capsys, tmp_path, HEAD + "folds = = 3\n" + WINE + TREE,
                    "not valid TOML")
    assert "line" in err and "col" in err


def test_unknown_key_suggests_closest(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD.replace("folds", "fold") + WINE + TREE,
              "[protocol]", "field 'fold'", "did you mean 'folds'")
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE.replace("load =", "lod =") + TREE,
              "dataset 'wine'", "field 'lod'", "did you mean 'load'")


def test_wrong_type(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD.replace("folds = 3", 'folds = "three"') + WINE
              + TREE, "field 'folds'", "whole number")


def test_unknown_method_and_parameter(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + TREE.replace("single-tree", "singel-tree"),
              "strategy 'tree'", "field 'method'", "did you mean 'single-tree'")
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + TREE + 'params = { max_dept = 3 }\n',
              "strategy 'tree'", "field 'params.max_dept'", "did you mean 'max_depth'")
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + TREE + 'params = { max_depth = -3 }\n',
              "strategy 'tree'", "field 'params'", "max_depth")


def test_duplicate_names(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + WINE + TREE, "entry 2",
              "field 'name'", "earlier dataset")
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + TREE + TREE, "entry 2",
              "earlier strategy")


def test_unknown_loader_and_generator_parameter(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE.replace("load_wine", "load_wines") + TREE,
              "field 'load'", "did you mean 'load_wine'")
    gen = """
    [[dataset]]
    name = "g"
    from = "generator"
    make = "make_moons"
    params = { n_sample = 100 }
    """
    check_bad(write_suite, capsys, tmp_path, HEAD + textwrap.dedent(gen) + TREE,
              "dataset 'g'", "field 'params.n_sample'", "did you mean 'n_samples'")


def _file_entry(path, target="y", extra=""):
    return f'\n[[dataset]]\nname = "mine"\nfrom = "file"\npath = "{path}"\ntarget = "{target}"\n{extra}'


def test_missing_file(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("nowhere.csv") + TREE,
              "dataset 'mine'", "field 'path'", "file not found")


def test_missing_target_column(write_suite, capsys, tmp_path):
    pd.DataFrame({"a": range(30), "label": [0, 1] * 15}).to_csv(tmp_path / "d.csv", index=False)
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("d.csv", "lable") + TREE,
              "dataset 'mine'", "field 'target'", "did you mean 'label'")


def test_single_class_target(write_suite, capsys, tmp_path):
    pd.DataFrame({"a": range(30), "y": ["yes"] * 30}).to_csv(tmp_path / "d.csv", index=False)
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("d.csv") + TREE,
              "field 'target'", "single class")


def test_class_smaller_than_folds(write_suite, capsys, tmp_path):
    y = ["a"] * 20 + ["b"] * 20 + ["c"] * 2
    pd.DataFrame({"x": np.arange(42.0), "y": y}).to_csv(tmp_path / "d.csv", index=False)
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("d.csv") + TREE,
              "field 'target'", "class 'c' has 2 row(s)", "3 folds")


def test_empty_dataset(write_suite, capsys, tmp_path):
    (tmp_path / "d.csv").write_text("x,y\n")
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("d.csv") + TREE, "empty")


def test_non_numeric_regression_target(write_suite, capsys, tmp_path):
    pd.DataFrame({"x": range(30), "y": ["low", "high", "mid"] * 10}).to_csv(tmp_path / "d.csv",
                                                                           index=False)
    check_bad(write_suite, capsys, tmp_path,
              HEAD + _file_entry("d.csv", extra='task = "regression"\n') + TREE,
              "field 'target'", "numeric target")


def test_rows_of_different_lengths(write_suite, capsys, tmp_path):
    (tmp_path / "d.csv").write_text("x,z,y\n1,2,0\n3,4,1\n5,6,7,8\n" + "1,2,0\n" * 10)
    check_bad(write_suite, capsys, tmp_path, HEAD + _file_entry("d.csv") + TREE,
              "field 'path'", "does not parse")


def test_holdout_needs_one_size(write_suite, capsys, tmp_path):
    body = '[protocol]\nsplits = "holdout"\nrepeats = 2\n' + WINE + TREE
    check_bad(write_suite, capsys, tmp_path, body, "[protocol]", "exactly one of")


def test_unknown_metric(write_suite, capsys, tmp_path):
    body = HEAD + 'metrics = { classification = ["acuracy"] }\n' + WINE + TREE
    check_bad(write_suite, capsys, tmp_path, body, "field 'metrics.classification'",
              "did you mean 'accuracy'")


def test_valid_suite_check_prints_plan_without_fitting(write_suite, capsys, tmp_path):
    path = write_suite(HEAD + WINE + TREE)
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "wine" in out and "178" in out and "classification" in out
    assert "3 cells" in out and "nothing was fitted" in out
    assert not (tmp_path / "results").exists()


def test_version(capsys):
    from harness.versions import WOODLOT_VERSION

    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0 and capsys.readouterr().out.strip() == f"woodlot {WOODLOT_VERSION}"


def test_a_data_table_given_as_a_suite_gets_a_pointer(tmp_path, capsys):
    path = tmp_path / "notes.csv"
    path.write_text("a,b\n1,2\n")
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "a suite file (TOML) is expected" in err and "looks like a data table" in err
    assert "[[dataset]]" in err and "woodlot choose" in err

def test_bad_equivalence_entries(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path,
              HEAD + "\n[equivalence]\naccuracy = -0.1\n" + WINE + TREE,
              "[equivalence]", "field 'accuracy'", "smallest difference that matters")
    check_bad(write_suite, capsys, tmp_path,
              HEAD + "\n[equivalence]\nneg_root_mean_squared_error = \"2 percent\"\n" + WINE
              + TREE, "field 'neg_root_mean_squared_error'")
    check_bad(write_suite, capsys, tmp_path,
              HEAD + "\n[equivalence]\naccurasy = 0.02\n" + WINE + TREE,
              "did you mean 'accuracy'")
    check_bad(write_suite, capsys, tmp_path,
              HEAD + "\n[equivalence]\ncertainty = 1.5\n" + WINE + TREE,
              "field 'certainty'", "probability")


def test_equivalence_is_read(write_suite):
    from harness.suite import load_suite

    path = write_suite(HEAD + "\n[equivalence]\naccuracy = 0.02\nneg_root_mean_squared_error = "
                       "\"2.5%\"\ncertainty = 0.9\n" + WINE + TREE)
    eq = load_suite(path).equivalence
    assert eq.certainty == 0.9
    assert (eq.margin("accuracy").width, eq.margin("accuracy").relative) == (0.02, False)
    rmse = eq.margin("neg_root_mean_squared_error")
    assert rmse.relative and rmse.width == 0.025 and rmse.on(-40.0) == 1.0
    # defaults: bounded scores ±0.01, errors ±1 % of the best
    assert eq.margin("balanced_accuracy").width == 0.01
    assert eq.margin("neg_mean_absolute_error").relative



# ------------------------------------------------------------------ tuning (bad input)

GB = TREE.replace('"tree"', '"gb"').replace("single-tree", "gradient-boosting")
DIABETES = """
[[dataset]]
name = "diabetes"
from = "sklearn"
load = "load_diabetes"
"""


def test_bad_tuning_ranges(write_suite, capsys, tmp_path):
    for tune, field, text in [
            ("{ learning_rat = { log_uniform = [0.01, 1.0] } }", "tune.learning_rat",
             "did you mean 'learning_rate'"),
            ("{ learning_rate = { uniform = [0.5, 0.1] } }", "tune.learning_rate",
             "low must be below high"),
            ("{ learning_rate = { uniform = [0.5, 0.5] } }", "tune.learning_rate",
             "low must be below high"),
            ("{ learning_rate = { log_uniform = [0.0, 1.0] } }", "tune.learning_rate",
             "above zero"),
            ("{ learning_rate = { log_uniform = [-1.0, 1.0] } }", "tune.learning_rate",
             "above zero"),
            ("{ max_depth = [] }", "tune.max_depth", "empty list"),
            ("{ max_depth = { integers = [1.5, 4] } }", "tune.max_depth", "whole numbers"),
            ("{ max_depth = { between = [1, 4] } }", "tune.max_depth", "unknown range"),
            ("{ subsample = { uniform = [0.5, 1.5] } }", "tune.subsample",
             "refuses a value of this range"),
            ("{}", "tune", "tunes nothing")]:
        check_bad(write_suite, capsys, tmp_path, HEAD + WINE + GB + f"tune = {tune}\n",
                  "strategy 'gb'", f"field '{field}'", text)


def test_bad_tuning_budgets(write_suite, capsys, tmp_path):
    for budget, text in [("0", "at least 1"), ('"0s"', "must be positive"), ('"none"', "allows no search"),
                         ('"ten minutes"', "not a duration"), ('"-5m"', "not a duration")]:
        check_bad(write_suite, capsys, tmp_path,
                  HEAD + f"\n[tuning]\nbudget = {budget}\n" + WINE + GB, "[tuning]",
                  "field 'budget'", text)
        check_bad(write_suite, capsys, tmp_path,
                  HEAD + WINE + GB + f"tune = true\ntune_budget = {budget}\n", "strategy 'gb'",
                  "field 'tune_budget'", text)
    check_bad(write_suite, capsys, tmp_path,
              HEAD + '\n[tuning]\nbudget = "2m"\nsearch = "halving"\n' + WINE + GB,
              "field 'budget'", "halving needs a budget in trials")
    check_bad(write_suite, capsys, tmp_path, HEAD + "\n[tuning]\ninner_folds = 1\n" + WINE + GB,
              "field 'inner_folds'", "at least 2")


def test_tuned_custom_estimator_needs_a_space(write_suite, capsys, tmp_path):
    custom = ('\n[[strategy]]\nname = "mine"\n'
              'classifier = "sklearn.linear_model:LogisticRegression"\n')
    check_bad(write_suite, capsys, tmp_path, HEAD + "\n[tuning]\n" + WINE + custom,
              "strategy 'mine'", "field 'tune'", "no default search space")


def test_grid_and_tune_together_are_refused(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path,
              HEAD + WINE + GB + "grid = { max_depth = [2, 3] }\ntune = true\n",
              "field 'grid'", "not both")


# ------------------------------------------------------------------ parameters per task

def test_classifier_only_parameter_is_checked_against_the_suites_tasks(write_suite, capsys,
                                                                        tmp_path):
    exponential = GB + 'params = { loss = "exponential" }\n'
    cancer = WINE.replace('"wine"', '"cancer"').replace("load_wine", "load_breast_cancer")
    path = write_suite(HEAD + cancer + exponential)
    assert main(["check", str(path)]) == 0, capsys.readouterr().err
    capsys.readouterr()
    err = check_bad(write_suite, capsys, tmp_path, HEAD + cancer + DIABETES + exponential,
                    "strategy 'gb'", "GradientBoostingRegressor", "regression",
                    "dataset 'diabetes'")
    assert "params.classification" in err  # says where a classifier-only value belongs
    per_task = GB + 'params = { n_estimators = 20, classification = { loss = "exponential" } }\n'
    path = write_suite(HEAD + cancer + DIABETES + per_task)
    assert main(["check", str(path)]) == 0, capsys.readouterr().err


def test_parameter_of_neither_estimator_names_both(write_suite, capsys, tmp_path):
    check_bad(write_suite, capsys, tmp_path, HEAD + WINE + GB + "params = { los = 'log_loss' }\n",
              "field 'params.los'", "neither GradientBoostingClassifier nor "
              "GradientBoostingRegressor")
    check_bad(write_suite, capsys, tmp_path,
              HEAD + WINE + GB + "params = { regression = { criterio = 'friedman_mse' } }\n",
              "field 'params.regression.criterio'", "GradientBoostingRegressor has no "
              "parameter")


def test_check_lists_each_tuned_strategys_space_and_budget(write_suite, capsys):
    body = HEAD + "\n[tuning]\nbudget = 7\n" + WINE + GB + TREE + "tune = false\n"
    assert main(["check", str(write_suite(body))]) == 0
    out = capsys.readouterr().out
    assert "7 trials per outer fold, random search, 3 inner folds" in out
    assert "learning_rate log_uniform [0.005, 1]" in out  # gradient boosting's default space
    assert "6 cells" in out and "3 of them tuned (up to 21 trials" in out
