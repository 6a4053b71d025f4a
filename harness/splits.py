"""Train/test splits: seeded, computed once per dataset, shared by every strategy (paired)."""

from __future__ import annotations

import hashlib

import numpy as np
from sklearn.model_selection import (RepeatedKFold, RepeatedStratifiedKFold, ShuffleSplit,
                                     StratifiedShuffleSplit)

from harness.datasets import CLASSIFICATION, Dataset, Split
from harness.errors import UserError
from harness.suite import KFOLD, PUBLISHED, Protocol


def split_id(train: np.ndarray, test: np.ndarray) -> str:
    """A short hash of which rows train and which rows test: equal ids, the same split."""
    h = hashlib.sha256(np.asarray(train, dtype=np.int64).tobytes())
    h.update(b"|")
    h.update(np.asarray(test, dtype=np.int64).tobytes())
    return h.hexdigest()[:16]


def splitter(protocol: Protocol, task: str, n_rows: int):
    """The scikit-learn splitter the protocol stands for (also used by the reference tests)."""
    if protocol.splits == KFOLD:
        cls = RepeatedStratifiedKFold if task == CLASSIFICATION else RepeatedKFold
        return cls(n_splits=protocol.folds, n_repeats=protocol.repeats,
                   random_state=protocol.seed)
    cls = StratifiedShuffleSplit if task == CLASSIFICATION else ShuffleSplit
    if protocol.train_rows is not None:
        return cls(n_splits=protocol.repeats, train_size=protocol.train_rows,
                   test_size=n_rows - protocol.train_rows, random_state=protocol.seed)
    return cls(n_splits=protocol.repeats, test_size=protocol.test_fraction,
               random_state=protocol.seed)


def make_splits(dataset: Dataset, protocol: Protocol, where: str) -> list[Split]:
    """All splits of one dataset under the suite's protocol, checked for feasibility."""
    if protocol.splits == PUBLISHED:
        if not dataset.splits:
            raise UserError("splits = \"published\" needs datasets with published splits "
                            "(an OpenML entry with 'task = ID')", file=where, field="from")
        return list(dataset.splits)
    n = dataset.n_rows
    if dataset.task == CLASSIFICATION:
        counts = dataset.y.value_counts()
        smallest, label = int(counts.min()), counts.idxmin()
        need = protocol.folds if protocol.splits == KFOLD else 2
        if smallest < need:
            what = (f"{protocol.folds} folds" if protocol.splits == KFOLD
                    else "a stratified holdout")
            raise UserError(f"class {label!r} has {smallest} row(s), fewer than {what} need; "
                            "merge rare classes or use fewer folds", file=where, field="target")
    if protocol.splits == KFOLD and n < protocol.folds:
        raise UserError(f"{n} rows cannot fill {protocol.folds} folds", file=where)
    if protocol.train_rows is not None and protocol.train_rows >= n:
        raise UserError(f"train_rows = {protocol.train_rows} leaves no test rows in {n} rows",
                        file=where, field="train_rows")
    split = splitter(protocol, dataset.task, n)
    y = dataset.y.to_numpy()
    X_dummy = np.zeros((n, 1))
    out = []
    per_repeat = protocol.folds if protocol.splits == KFOLD else 1
    for i, (train, test) in enumerate(split.split(X_dummy, y)):
        out.append(Split(i // per_repeat, i % per_repeat, train, test))
    return out
