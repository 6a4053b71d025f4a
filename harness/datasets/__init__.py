"""Dataset sources: each turns a suite's ``[[dataset]]`` entry into a checked `Dataset`.

A source declares the entry keys it requires and accepts (the suite validator uses them to
reject unknown keys before anything is loaded) and a ``load`` function. Keys every entry may
carry: ``name``, ``from``, ``task``, ``categorical``, ``drop``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

from harness.datasets.base import (CLASSIFICATION, REGRESSION, TASKS, Dataset, Split,
                                   fingerprint, finish, infer_task)
from harness.datasets.bundled import load_generator, load_sklearn
from harness.datasets.files import load_file
from harness.datasets.openml import check_openml_entry, load_openml
from harness.datasets.spec import DatasetSpec

COMMON_KEYS = ("name", "from", "task", "categorical", "drop")


@dataclass(frozen=True)
class Source:
    """How one kind of ``from = ...`` entry is read."""

    required: tuple[str, ...]
    optional: tuple[str, ...]
    load: Callable[[DatasetSpec], Dataset]
    check: Callable[[DatasetSpec], None] | None = None  # extra checks on the entry's text

    @property
    def keys(self) -> tuple[str, ...]:
        return COMMON_KEYS + self.required + self.optional


SOURCES: dict[str, Source] = {
    "sklearn": Source(required=("load",), optional=(), load=load_sklearn),
    "generator": Source(required=("make",), optional=("params",), load=load_generator),
    "file": Source(required=("path", "target"), optional=("delimiter", "decimal"), load=load_file),
    "openml": Source(required=(), optional=("dataset", "task", "suite", "target", "expect", "max_rows", "max_columns", "max_classes"), load=load_openml, check=check_openml_entry),
}


def load_dataset(spec: DatasetSpec) -> Dataset:
    """Load and check one entry (the entry's keys were validated with the suite)."""
    return SOURCES[spec.source].load(spec)


__all__ = ["CLASSIFICATION", "REGRESSION", "TASKS", "COMMON_KEYS", "Dataset", "DatasetSpec",
           "Split", "SOURCES", "Source", "fingerprint", "finish", "infer_task",
           "load_dataset"]
