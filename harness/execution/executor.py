"""The interface every executor implements. An executor is used as a context manager: it is
opened before anything is written (an unreachable cluster fails there), describes where the
units run for the provenance, runs units yielding each row as it finishes, and is closed
whatever happens, so that a cluster woodlot started never outlives the command.

Units come from a `WorkSource`: a fixed list of cells, or work that grows as results come in
(the trials and refits of searches). An executor asks the source for a unit whenever a worker
is free, and again after each row it yields (the caller has seen that row by then); when the
source has nothing ready and nothing is running, the run is over."""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections import deque
from typing import Any, Iterable, Iterator

from harness.datasets import Dataset


class WorkSource(ABC):
    """Where an executor takes its units (cells, trials) from."""

    @abstractmethod
    def take(self):
        """The next unit ready to run, or None when none is ready now."""


class Fixed(WorkSource):
    """A list of units, in order."""

    def __init__(self, units: Iterable) -> None:
        self.pending = deque(units)

    def take(self):
        return self.pending.popleft() if self.pending else None


def as_source(units) -> WorkSource:
    return units if isinstance(units, WorkSource) else Fixed(units)


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
    def run(self, units, datasets: dict[str, Dataset],
            timeout: float | None, memory: int | None = None) -> Iterator[dict]:
        """Run ``units`` (a list or a `WorkSource`; ``datasets`` keyed by fingerprint); yield
        each row as it finishes. ``timeout`` (seconds) and ``memory`` (bytes,
        `harness.execution.memory`) limit each unit, where the executor can enforce them."""

    def close(self) -> None:
        """Release everything `open` and `run` started."""
