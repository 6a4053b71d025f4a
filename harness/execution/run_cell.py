"""Running one cell: build the estimator (with in-fold preprocessing), fit on the training
rows, predict and score the test rows with every metric the suite names, and take the
measurements of `harness.execution.measure`. Ensembles that can predict member by member also
get their test score at a handful of ensemble sizes (the ensemble-size curve)."""

from __future__ import annotations

import functools
import os
import pickle
import signal
import socket
import time
import traceback
from typing import Any

import numpy as np
from sklearn.metrics import check_scoring, get_scorer
from threadpoolctl import threadpool_limits

from harness.datasets import CLASSIFICATION, Dataset
from harness.execution.measure import measured
from harness.execution.memory import refusal
from harness.preprocess import (final_estimator, transform_for_members,
                                          with_preprocessing)
from harness.row_evidence import encode
from harness.work_units import ERROR, OK, Cell

# --------------------------------------------------------------------------- running

class _Timed:
    """Wraps a fitted model so the scorers' calls to predict/predict_proba are timed, not
    repeated: the test set is predicted once per response method."""

    _RESPONSES = ("predict", "predict_proba", "decision_function", "predict_log_proba")

    def __init__(self, model) -> None:
        self._model = model
        self.seconds: dict[str, float] = {}

    def __getattr__(self, name):
        attr = getattr(self._model, name)
        if name not in self._RESPONSES:
            return attr

        @functools.wraps(attr)
        def timed(*args, **kwargs):
            t0 = time.perf_counter()
            out = attr(*args, **kwargs)
            self.seconds[name] = self.seconds.get(name, 0.0) + time.perf_counter() - t0
            return out
        return timed


class _Frozen:
    """Stands in for a model at one ensemble size: answers with predictions made already."""

    def __init__(self, model, proba=None, values=None) -> None:
        self._model, self._proba, self._values = model, proba, values
        self.classes_ = getattr(model, "classes_", None)

    def __sklearn_tags__(self):
        return self._model.__sklearn_tags__()

    def predict(self, X):
        if self._proba is not None:
            return self.classes_[np.argmax(self._proba, axis=1)]
        return self._values

    def predict_proba(self, X):
        return self._proba


def curve_sizes(n_members: int, points: int) -> list[int]:
    """About ``points`` ensemble sizes from 1 to n, spaced evenly on a log scale."""
    if n_members <= 1:
        return [n_members]
    return sorted(set(np.unique(np.geomspace(1, n_members, points).round().astype(int)).tolist())
                  | {n_members})


def _member_predictions(ens, Xt, classification: bool):
    """Per-member predictions of a bagging-style ensemble (forest, extra trees, bagging)."""
    feats = getattr(ens, "estimators_features_", None)
    n_classes = len(ens.classes_) if classification else None
    Xa = np.asarray(Xt, dtype=np.float32)
    for i, member in enumerate(ens.estimators_):
        Xi = Xa if feats is None else Xa[:, feats[i]]
        if classification:
            p = member.predict_proba(Xi)
            if p.shape[1] != n_classes:  # a bootstrap sample that missed some classes
                full = np.zeros((len(Xi), n_classes))
                full[:, np.asarray(member.classes_, dtype=int)] = p
                p = full
            yield p
        else:
            yield member.predict(Xi)


def weighted_median_at(ens, Xt, sizes: list[int]) -> dict[int, np.ndarray]:
    """AdaBoost.R2's prediction (the weighted median of its members, Drucker 1997) after each
    of ``sizes`` stages, from one prediction per member. scikit-learn's ``staged_predict``
    predicts every member again at every stage (quadratic in the stages); the medians here
    are the same computation as its ``_get_median_predict``, checked against
    ``staged_predict`` in the tests. The members were fitted on the validated array, without
    column names, so a data frame is passed to them as its array."""
    Xa = Xt.to_numpy() if hasattr(Xt, "to_numpy") else Xt
    members = np.array([est.predict(Xa) for est in ens.estimators_[:max(sizes)]]).T
    rows = np.arange(members.shape[0])
    out = {}
    for n in sizes:
        predictions = members[:, :n]
        order = np.argsort(predictions, axis=1)
        cdf = np.cumsum(ens.estimator_weights_[:n][order], axis=1)
        at = (cdf >= 0.5 * cdf[:, -1][:, None]).argmax(axis=1)
        out[n] = predictions[rows, order[rows, at]]
    return out


def _staged_at(ens, Xt, sizes: list[int], classification: bool) -> dict[int, np.ndarray]:
    """The ensemble's predictions (probabilities for a classifier) after each of ``sizes``
    stages."""
    if not classification and hasattr(ens, "estimator_weights_") \
            and not hasattr(ens, "staged_predict_proba"):
        return weighted_median_at(ens, Xt, sizes)
    stages = ens.staged_predict_proba(Xt) if classification else ens.staged_predict(Xt)
    wanted, out = set(sizes), {}
    for i, p in enumerate(stages, start=1):
        if i in wanted:
            out[i] = p
        if i >= sizes[-1]:
            break
    return out


def size_curve(model, X_test, y_test, metric: str, points: int) -> list[list[float]] | None:
    """[[members, score], ...] at a handful of ensemble sizes, or None if not applicable."""
    ens = final_estimator(model)
    classification = hasattr(ens, "classes_")
    scorer = get_scorer(metric)
    Xt = transform_for_members(model, X_test)
    out = []
    if hasattr(ens, "staged_predict"):  # boosting: the prediction after each stage
        # Sizes follow the configured number of stages, so every fold is scored at the same
        # sizes; an ensemble that stopped early (AdaBoost, early stopping) keeps its last stage.
        fitted = len(getattr(ens, "estimators_", ())) or int(getattr(ens, "n_iter_", 0))
        planned = max(fitted, int(ens.get_params().get("n_estimators")
                                  or ens.get_params().get("max_iter") or 0))
        sizes = curve_sizes(planned, points)
        preds = _staged_at(ens, Xt, sorted({min(n, fitted) for n in sizes}), classification)
        for n in sizes:
            p = preds[min(n, fitted)]
            frozen = _Frozen(ens, proba=p) if classification else _Frozen(ens, values=p)
            out.append([n, float(scorer(frozen, X_test, y_test))])
        return out
    if hasattr(ens, "estimators_") and isinstance(ens.estimators_, list) and ens.estimators_:
        sizes = set(curve_sizes(len(ens.estimators_), points))
        total = None
        for i, p in enumerate(_member_predictions(ens, Xt, classification), start=1):
            total = p.astype(float) if total is None else total + p
            if i in sizes:
                mean = total / i
                frozen = _Frozen(ens, proba=mean) if classification else _Frozen(ens, values=mean)
                out.append([i, float(scorer(frozen, X_test, y_test))])
        return out
    return None


def set_threads(estimator, threads: int) -> None:
    """Set ``n_jobs`` wherever the estimator (or a nested one) has it."""
    params = estimator.get_params(deep=True)
    estimator.set_params(**{k: threads for k in params if k == "n_jobs" or k.endswith("__n_jobs")})


def interrupts_ignored() -> bool:
    """Whether this process ignores Ctrl-C (woodlot's worker processes do): then a
    KeyboardInterrupt can only come from the estimator's own code."""
    return signal.getsignal(signal.SIGINT) is signal.SIG_IGN


def run_cell(cell: Cell, dataset: Dataset) -> dict[str, Any]:
    """Fit, predict, score and measure one cell. Never raises for the estimator's errors
    (a KeyboardInterrupt included, where Ctrl-C is ignored): they become a row with status
    ``error`` and the message."""
    row: dict[str, Any] = {"key": cell.key, **cell.identity(), "threads": cell.threads,
                           "timing": cell.timing, "worker": f"{socket.gethostname()}:{os.getpid()}"}
    started = time.time()
    try:
        X, y = dataset.X, dataset.y
        X_train, X_test = X.iloc[cell.train], X.iloc[cell.test]
        y_train, y_test = y.iloc[cell.train], y.iloc[cell.test]
        estimator = cell.strategy.build(cell.task, cell.seed)
        set_threads(estimator, cell.threads)
        model = with_preprocessing(estimator, dataset)
        with threadpool_limits(limits=cell.threads):
            with measured(memory=cell.memory) as fit:
                model.fit(X_train, y_train)
            timed = _Timed(model)
            scorer = check_scoring(model, scoring=list(cell.metrics))
            scores = scorer(timed, X_test, y_test)
            if "predict" not in timed.seconds:
                timed.predict(X_test)
            evidence = None
            if cell.row_evidence:  # untimed: the timed predictions stay the scorers'
                evidence = encode(y_test, model.predict(X_test),
                                  classification=cell.task == CLASSIFICATION)
            curve = None
            if cell.size_curve:
                curve = size_curve(model, X_test, y_test, cell.metrics[0], cell.curve_points)
        row.update(status=OK, message="", scores={k: float(v) for k, v in scores.items()},
                   fit_seconds=fit.wall, fit_cpu_seconds=fit.cpu,
                   predict_seconds=timed.seconds["predict"],
                   peak_memory_bytes=fit.peak_bytes,
                   model_bytes=len(pickle.dumps(model, protocol=5)) if cell.model_size else None,
                   curve=curve, row_evidence=evidence)
    except MemoryError as exc:  # the cell memory limit, or the machine's memory
        row.update(status=ERROR, message=refusal(exc), detail=traceback.format_exc()[-4000:])
    except Exception as exc:  # the estimator's failure is a result, not a crash
        row.update(status=ERROR, message=f"{type(exc).__name__}: {exc}".splitlines()[0][:500],
                   detail=traceback.format_exc()[-4000:])
    except KeyboardInterrupt:
        if not interrupts_ignored():  # a real Ctrl-C: let the run stop
            raise
        row.update(status=ERROR, message="KeyboardInterrupt raised by the estimator (not a "
                   "Ctrl-C: this process ignores those)", detail=traceback.format_exc()[-4000:])
    row["seconds"] = time.time() - started
    return row
