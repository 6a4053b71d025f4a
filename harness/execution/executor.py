"""The interface every executor implements. An executor is used as a context manager: it is
opened before anything is written (an unreachable cluster fails there), describes where the
cells run for the provenance, runs cells yielding each row as it finishes, and is closed
whatever happens, so that a cluster woodlot started never outlives the command."""

from __future__ import annotations

from abc import ABC, abstractmethod
from typing import Any, Iterator

from harness.datasets import Dataset
from harness.work_units import Cell


class Executor(ABC):
    name: str = ""
    jobs: int | None = None  # worker processes, when the executor knows them

    def __enter__(self) -> "Executor":
        self.open()
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def open(self) -> None:
        """Get ready to run (reach a cluster, check its workers); `UserError` if impossible."""

    def describe(self) -> dict[str, Any]:
        """What the run's provenance records about where the cells ran."""
        return {"executor": self.name, "jobs": self.jobs}

    def notes(self) -> list[str]:
        """Lines a person should see once the executor is open (a cluster started, ...)."""
        return []

    @abstractmethod
    def run(self, cells: list[Cell], datasets: dict[str, Dataset],
            timeout: float | None, memory: int | None = None) -> Iterator[dict]:
        """Run ``cells`` (``datasets`` keyed by fingerprint); yield each row as it finishes.
        ``timeout`` (seconds) and ``memory`` (bytes, `harness.execution.memory`) limit each
        cell, where the executor can enforce them."""

    def close(self) -> None:
        """Release everything `open` and `run` started."""
