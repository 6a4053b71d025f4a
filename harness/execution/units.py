"""Running any unit of work an executor is given: a cell (or a refit, which is a cell) or a
trial of a search."""

from __future__ import annotations

from typing import Any

from harness.datasets import Dataset
from harness.execution.run_cell import run_cell
from harness.execution.run_trial import run_trial
from harness.search import Trial


def run_unit(unit, dataset: Dataset) -> dict[str, Any]:
    return run_trial(unit, dataset) if isinstance(unit, Trial) else run_cell(unit, dataset)
