"""Estimators for the executor tests: one that takes its time, one that kills its process.

They are imported by path from suite files (``classifier = "tests.dask_estimators:..."``), on
the client and on the Dask workers, which the test cluster starts with the test's import path.
"""

from __future__ import annotations

import os
import time
from numbers import Real
from pathlib import Path

from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.tree import DecisionTreeClassifier


class SlowTree(ClassifierMixin, BaseEstimator):
    """A decision tree whose fit first sleeps ``seconds``: holds a worker for a known time."""

    _parameter_constraints = {"seconds": [Real], "random_state": ["random_state"]}

    def __init__(self, seconds: float = 1.0, random_state=None) -> None:
        self.seconds = seconds
        self.random_state = random_state

    def fit(self, X, y):
        time.sleep(self.seconds)
        self.tree_ = DecisionTreeClassifier(random_state=self.random_state).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


class ProcessKiller(ClassifierMixin, BaseEstimator):
    """Appends its process id to ``log``, then ends the process at once (as the kernel's
    out-of-memory killer would): every worker that tries this cell dies."""

    _parameter_constraints = {"log": [str], "random_state": ["random_state"]}

    def __init__(self, log: str = "", random_state=None) -> None:
        self.log = log
        self.random_state = random_state

    def fit(self, X, y):
        with Path(self.log).open("a") as f:
            f.write(f"{os.getpid()}\n")
        os._exit(9)
