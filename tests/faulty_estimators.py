"""Estimators that misbehave, for the fault and executor tests: imported by path from suite
files (``classifier = "tests.faulty_estimators:..."``) on the client and in worker processes
(local ones, and the Dask workers, which the test cluster starts with the test's import path).

Each wraps a decision tree so that, when it does not misbehave, it is an ordinary classifier.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.tree import DecisionTreeClassifier


class _Tree(ClassifierMixin, BaseEstimator):
    def __init__(self, random_state=None) -> None:
        self.random_state = random_state

    def _fit_tree(self, X, y):
        self.tree_ = DecisionTreeClassifier(random_state=self.random_state).fit(X, y)
        self.classes_ = self.tree_.classes_
        return self

    def predict(self, X):
        return self.tree_.predict(X)

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)


class Interrupts(_Tree):
    """Its fit raises KeyboardInterrupt, as code that catches Ctrl-C badly might."""

    def fit(self, X, y):
        raise KeyboardInterrupt


class Crashes(_Tree):
    """Its fit ends its process with a segmentation fault, as broken native code does."""

    def fit(self, X, y):
        os.kill(os.getpid(), signal.SIGSEGV)
        time.sleep(10)


class Fails(_Tree):
    """Its fit always raises ValueError."""

    def fit(self, X, y):
        raise ValueError("this estimator never fits")


class WrongShape(_Tree):
    """Fits, then predicts one value too few."""

    def fit(self, X, y):
        return self._fit_tree(X, y)

    def predict(self, X):
        return self.tree_.predict(X)[:-1]

    def predict_proba(self, X):
        return self.tree_.predict_proba(X)[:-1]


class Hog(_Tree):
    """Its fit allocates and touches ``mib`` MiB before fitting a tree."""

    def __init__(self, mib: int = 64, random_state=None) -> None:
        self.mib = mib
        self.random_state = random_state

    def fit(self, X, y):
        block = np.ones(self.mib * 2**20 // 8)
        self.checksum_ = float(block[::4096].sum())
        del block
        return self._fit_tree(X, y)


class Spawns(_Tree):
    """Its fit starts a child process that sleeps, writes the child's pid to ``log`` and then
    waits for it: a cell past its time limit leaves a process of its own behind unless its
    whole process tree is ended."""

    def __init__(self, log: str = "", random_state=None) -> None:
        self.log = log
        self.random_state = random_state

    def fit(self, X, y):
        child = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)"])
        with Path(self.log).open("a") as f:
            f.write(f"{child.pid}\n")
        child.wait()
        return self._fit_tree(X, y)


class Slow(_Tree):
    """Sleeps ``seconds`` before fitting: holds a worker for a known time."""

    def __init__(self, seconds: float = 1.0, random_state=None) -> None:
        self.seconds = seconds
        self.random_state = random_state

    def fit(self, X, y):
        time.sleep(self.seconds)
        return self._fit_tree(X, y)


class Labelled(_Tree):
    """An ordinary tree with a free-text parameter: grids over it give strategies any name."""

    def __init__(self, label: str = "", random_state=None) -> None:
        self.label = label
        self.random_state = random_state

    def fit(self, X, y):
        return self._fit_tree(X, y)


class ProcessKiller(_Tree):
    """Appends its process id to ``log``, then ends the process at once (as the kernel's
    out-of-memory killer would): every worker that tries this cell dies."""

    def __init__(self, log: str = "", random_state=None) -> None:
        self.log = log
        self.random_state = random_state

    def fit(self, X, y):
        with Path(self.log).open("a") as f:
            f.write(f"{os.getpid()}\n")
        os._exit(9)
