"""Running one trial of a search: fit the configuration on each inner training part of the
outer training rows (in-fold preprocessing inside every inner fit), score the inner
validation part with the dataset's first metric; the trial's time is the wall and CPU time of
all of it (fits and inner predictions: what the search costs). In an early round of
successive halving each inner training part is first cut to ``rows`` rows (a seeded,
stratified sample for classification)."""

from __future__ import annotations

import os
import socket
import time
import traceback
import warnings
from typing import Any

import numpy as np
from sklearn.metrics import check_scoring
from sklearn.utils import resample
from threadpoolctl import threadpool_limits

from harness.datasets import Dataset
from harness.execution.measure import measured
from harness.preprocess import with_preprocessing
from harness.execution.run_cell import set_threads
from harness.search import Trial, inner_splitter
from harness.work_units import ERROR, OK


def _cut(rows: np.ndarray, n: int, y, classification: bool, seed: int) -> np.ndarray:
    if n >= len(rows):
        return rows
    strata = y[rows] if classification else None
    try:
        return np.sort(resample(rows, n_samples=n, replace=False, stratify=strata,
                                random_state=seed))
    except ValueError:  # a class too small to stratify at this size
        return np.sort(resample(rows, n_samples=n, replace=False, random_state=seed))


def run_trial(trial: Trial, dataset: Dataset) -> dict[str, Any]:
    """Score one configuration on the inner splits. Never raises for the estimator's
    errors: they become a row with status ``error``."""
    row: dict[str, Any] = {"key": trial.key, **trial.identity(),
                           "worker": f"{socket.gethostname()}:{os.getpid()}"}
    started = time.time()
    try:
        X = dataset.X.iloc[trial.train]
        y = dataset.y.iloc[trial.train]
        classification = trial.task == "classification"
        scores = []
        splitter = inner_splitter(trial.task, trial.inner_folds, trial.seed)
        # Many configurations make many warnings (a small bootstrap share, ...); a trial's
        # outcome is its score, so they are not shown.
        with threadpool_limits(limits=trial.threads), warnings.catch_warnings(), \
                measured() as spent:
            warnings.simplefilter("ignore")
            for inner_train, inner_valid in splitter.split(X, y):
                if trial.rows is not None:
                    inner_train = _cut(inner_train, trial.rows, y.to_numpy(), classification,
                                       trial.seed)
                estimator = trial.strategy.build(trial.task, trial.seed)
                set_threads(estimator, trial.threads)
                model = with_preprocessing(estimator, dataset)
                model.fit(X.iloc[inner_train], y.iloc[inner_train])
                scorer = check_scoring(model, scoring=trial.metric)
                scores.append(float(scorer(model, X.iloc[inner_valid], y.iloc[inner_valid])))
        row.update(status=OK, message="", inner_scores=scores,
                   inner_score=float(np.mean(scores)), fit_seconds=spent.wall,
                   fit_cpu_seconds=spent.cpu)
    except Exception as exc:  # the estimator's failure is a result, not a crash
        row.update(status=ERROR, message=f"{type(exc).__name__}: {exc}".splitlines()[0][:500],
                   detail=traceback.format_exc()[-4000:])
    row["seconds"] = time.time() - started
    return row
