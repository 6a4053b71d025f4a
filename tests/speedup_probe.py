"""An estimator for the speedup-sweep tests that writes down, from inside its own fit, the
thread limits it finds (threadpoolctl) and the ``n_jobs`` it was given.

Imported by path from suite files (``classifier = "tests.speedup_probe:ThreadsSeen"``) in the
fresh process the sweep starts for each point.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from threadpoolctl import threadpool_info


class ThreadsSeen(ClassifierMixin, BaseEstimator):
    """Predicts the majority class; its fit appends what it saw to the JSON-lines ``record``."""

    _parameter_constraints = {"n_jobs": [None, int], "record": [str]}

    def __init__(self, n_jobs=None, record: str = "threads-seen.jsonl") -> None:
        self.n_jobs = n_jobs
        self.record = record

    def fit(self, X, y):
        pools: dict[str, list[int]] = {}
        for lib in threadpool_info():
            pools.setdefault(lib["user_api"], []).append(lib["num_threads"])
        seen = {"n_jobs": self.n_jobs, "pools": pools}
        with Path(self.record).open("a", encoding="utf-8") as f:
            f.write(json.dumps(seen) + "\n")
        values, counts = np.unique(np.asarray(y), return_counts=True)
        self.classes_ = values
        self.majority_ = values[int(np.argmax(counts))]
        return self

    def predict(self, X):
        return np.full(len(X), self.majority_)
