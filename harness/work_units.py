"""Units of work and their keys: a *cell* (dataset × strategy × repeat × fold, scored) and a
*speedup point* (dataset × strategy × worker count, timed alone).

A unit carries everything a worker needs except the dataset, which travels separately, once
per worker. Its key hashes everything that changes its result, so a stored result is reused
only when it would come out the same.
"""

from __future__ import annotations

import hashlib
import json
import socket
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # reading results needs no estimator library (scikit-learn is slow to load)
    from harness.strategies import Strategy

CELL_FORMAT = 3  # bump when the meaning of a stored cell changes
OK, ERROR, TIMEOUT = "ok", "error", "timeout"


def unit_key(*, fingerprint: str, estimator: str, train: np.ndarray, test: np.ndarray,
             versions: dict[str, str], settings: dict[str, Any]) -> str:
    """Hash of the data content, the resolved estimator, the exact split, the versions of
    the libraries that compute the result, and the unit's other settings (metrics,
    measurements, worker count, ...)."""
    h = hashlib.sha256()
    h.update(json.dumps({"format": CELL_FORMAT, "fingerprint": fingerprint,
                         "estimator": estimator, "versions": versions, "settings": settings},
                        sort_keys=True).encode())
    h.update(np.asarray(train, dtype=np.int64).tobytes())
    h.update(b"|")
    h.update(np.asarray(test, dtype=np.int64).tobytes())
    return h.hexdigest()[:32]


@dataclass(frozen=True)
class Cell:
    """One dataset × strategy × repeat × fold: fit, predict, score and measure."""

    key: str
    dataset: str
    fingerprint: str
    task: str
    strategy: Strategy
    repeat: int
    fold: int
    train: np.ndarray
    test: np.ndarray
    metrics: tuple[str, ...]
    seed: int
    memory: bool = True
    model_size: bool = True
    size_curve: bool = True
    curve_points: int = 8
    threads: int = 1
    timing: str = "side by side"
    row_evidence: bool = False  # keep per-row test evidence (datasets judged on one split)

    def identity(self) -> dict[str, Any]:
        return {"dataset": self.dataset, "strategy": self.strategy.name,
                "method": self.strategy.method, "family": self.strategy.family,
                "task": self.task, "repeat": self.repeat, "fold": self.fold,
                "fingerprint": self.fingerprint, "n_train": int(len(self.train)),
                "n_test": int(len(self.test))}


def failed_row(cell: Cell, status: str, message: str) -> dict[str, Any]:
    """The row for a cell that did not finish (timeout, worker lost)."""
    return {"key": cell.key, **cell.identity(), "threads": cell.threads, "timing": cell.timing,
            "status": status, "message": message}


@dataclass(frozen=True)
class SpeedupPoint:
    """One dataset × strategy × worker count of a speedup run, timed ``repeats`` times."""

    key: str
    dataset: str
    fingerprint: str
    task: str
    strategy: Strategy
    workers: int
    repeats: int
    train: np.ndarray
    test: np.ndarray
    seed: int

    def identity(self) -> dict[str, Any]:
        return {"key": self.key, "dataset": self.dataset, "strategy": self.strategy.name,
                "family": self.strategy.family, "method": self.strategy.method,
                "task": self.task, "workers": self.workers, "n_train": int(len(self.train)),
                "n_test": int(len(self.test)), "host": socket.gethostname()}


def failed_point(point: SpeedupPoint, status: str, message: str) -> list[dict[str, Any]]:
    """The rows of a speedup point that did not finish: one, with the reason."""
    return [{**point.identity(), "repeat": 0, "status": status, "message": message}]
