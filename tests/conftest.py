"""Shared test helpers: small suite files written into a temporary folder, a seeded OpenML
cache."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from tests import openml_cache


@pytest.fixture
def write_suite(tmp_path):
    """write_suite(body, name="t") -> path of a suite file holding ``body`` (dedented)."""

    def write(body: str, name: str = "t") -> Path:
        path = tmp_path / f"{name}.toml"
        path.write_text(textwrap.dedent(body).lstrip(), encoding="utf-8")
        return path

    return write


@pytest.fixture(scope="module")
def run_once(tmp_path_factory):
    """run_once(body, name="t") -> the RunResult of running suite ``body`` (dedented) into a
    fresh folder, two jobs, no progress bar; module-scoped, for tests that share one run."""
    from harness import run_suite

    def run(body: str, name: str = "t"):
        tmp = tmp_path_factory.mktemp(name)
        path = tmp / f"{name}.toml"
        path.write_text(textwrap.dedent(body).lstrip(), encoding="utf-8")
        return run_suite(path, out=tmp / "out", jobs=2, progress=False)

    return run


@pytest.fixture
def seeded(tmp_path):
    """openml-python pointed at a fresh cache holding `tests.openml_cache.Seeded`."""
    with openml_cache.openml_configured(tmp_path) as cache:
        yield openml_cache.Seeded(tmp_path, cache)


SMALL_SUITE = """
[suite]
name = "small"

[protocol]
folds = 3
repeats = 2
seed = 3

[[dataset]]
name = "wine"
from = "sklearn"
load = "load_wine"

[[dataset]]
name = "friedman"
from = "generator"
make = "make_friedman1"
params = { n_samples = 150, random_state = 0 }

[[strategy]]
name = "tree"
method = "single-tree"

[[strategy]]
name = "forest"
method = "random-forest"
params = { n_estimators = 10 }

[[strategy]]
name = "gb"
method = "gradient-boosting"
params = { n_estimators = 10 }
"""
