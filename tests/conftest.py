"""Shared test helpers: small suite files written into a temporary folder."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest


@pytest.fixture
def write_suite(tmp_path):
    """write_suite(body, name="t") -> path of a suite file holding ``body`` (dedented)."""

    def write(body: str, name: str = "t") -> Path:
        path = tmp_path / f"{name}.toml"
        path.write_text(textwrap.dedent(body).lstrip(), encoding="utf-8")
        return path

    return write


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
