"""The catalogue of ensemble methods and any scikit-learn-compatible estimator by import path.

A strategy names a method (or an import path) and its parameters; it resolves to a classifier
or a regressor by the dataset's task. Every strategy carries a family tag used to group
results: ``single tree``, ``bagging``, ``forest``, ``boosting`` (or the user's own word).
"""

from __future__ import annotations

import importlib
import itertools
import json
from dataclasses import dataclass, field
from typing import Any

from sklearn.base import clone
from sklearn.ensemble import (AdaBoostClassifier, AdaBoostRegressor, BaggingClassifier,
                              BaggingRegressor, ExtraTreesClassifier, ExtraTreesRegressor,
                              GradientBoostingClassifier, GradientBoostingRegressor,
                              HistGradientBoostingClassifier, HistGradientBoostingRegressor,
                              RandomForestClassifier, RandomForestRegressor)
from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

from harness.errors import UserError, closest

SINGLE_TREE, BAGGING, FOREST, BOOSTING = "single tree", "bagging", "forest", "boosting"


@dataclass(frozen=True)
class Method:
    """One catalogue entry: the two scikit-learn classes, family, and defaults we set."""

    family: str
    classifier: type
    regressor: type
    classifier_defaults: dict[str, Any] = field(default_factory=dict)
    regressor_defaults: dict[str, Any] = field(default_factory=dict)


CATALOGUE: dict[str, Method] = {
    "single-tree": Method(SINGLE_TREE, DecisionTreeClassifier, DecisionTreeRegressor),
    "bagged-trees": Method(BAGGING, BaggingClassifier, BaggingRegressor),
    "random-forest": Method(FOREST, RandomForestClassifier, RandomForestRegressor),
    "extra-trees": Method(FOREST, ExtraTreesClassifier, ExtraTreesRegressor),
    "gradient-boosting": Method(BOOSTING, GradientBoostingClassifier, GradientBoostingRegressor),
    "hist-gradient-boosting": Method(BOOSTING, HistGradientBoostingClassifier,
                                     HistGradientBoostingRegressor),
    # scikit-learn's own defaults: stumps for the classifier (SAMME), depth-3 trees for the
    # regressor (AdaBoost.R2); stated here so they are visible in the cell key.
    "adaboost": Method(BOOSTING, AdaBoostClassifier, AdaBoostRegressor,
                       {"estimator": DecisionTreeClassifier(max_depth=1)},
                       {"estimator": DecisionTreeRegressor(max_depth=3)}),
}


@dataclass(frozen=True)
class Strategy:
    """A named, fully resolved ensemble configuration from a suite's ``[[strategy]]`` entry."""

    name: str
    family: str
    method: str  # catalogue key, or "custom"
    classifier: str | None  # import path "module:Class"
    regressor: str | None
    params: dict[str, Any] = field(default_factory=dict)

    def supports(self, task: str) -> bool:
        return self.estimator_path(task) is not None

    def estimator_path(self, task: str) -> str | None:
        """``module:Class`` of the estimator for ``task`` (None when there is none)."""
        return self.classifier if task == "classification" else self.regressor

    def build(self, task: str, seed: int | None = None):
        """A fresh, unfitted estimator for ``task``; ``random_state`` is set from ``seed``
        where the estimator has one and the suite did not set it."""
        path = self.estimator_path(task)
        if path is None:
            raise ValueError(f"strategy {self.name} has no estimator for {task}")
        cls = import_path(path)
        est = cls()
        defaults = {}
        if self.method in CATALOGUE:
            m = CATALOGUE[self.method]
            defaults = m.classifier_defaults if task == "classification" else m.regressor_defaults
        est.set_params(**{k: clone(v) if hasattr(v, "get_params") else v
                          for k, v in defaults.items()})
        est.set_params(**self.params)
        if seed is not None and "random_state" in est.get_params() \
                and "random_state" not in self.params:
            est.set_params(random_state=seed)
        return est


def canonical(est) -> str:
    """Class path plus every parameter, nested estimators expanded, as stable JSON: part of
    the key of every unit of work, so any change of class, parameter or default recomputes."""
    def enc(v):
        if hasattr(v, "get_params"):
            return {"class": f"{type(v).__module__}.{type(v).__qualname__}",
                    "params": {k: enc(x) for k, x in sorted(v.get_params(deep=False).items())}}
        if isinstance(v, (list, tuple)):
            return [enc(x) for x in v]
        if isinstance(v, dict):
            return {str(k): enc(x) for k, x in sorted(v.items())}
        if isinstance(v, (str, int, float, bool)) or v is None:
            return v
        return repr(v)
    return json.dumps(enc(est), sort_keys=True)


def import_path(path: str):
    """Import ``"package.module:Name"`` (or ``package.module.Name``)."""
    mod_name, _, attr = path.partition(":") if ":" in path else path.rpartition(".")
    module = importlib.import_module(mod_name)
    obj = module
    for part in attr.split("."):
        obj = getattr(obj, part)
    return obj


def class_path(cls: type) -> str:
    """Public import path: ``sklearn.ensemble:RandomForestClassifier``, not the private module."""
    module = cls.__module__
    parts = module.split(".")
    public = ".".join(parts[:next((i for i, p in enumerate(parts) if p.startswith("_")),
                                  len(parts))])
    if getattr(importlib.import_module(public), cls.__qualname__, None) is cls:
        module = public
    return f"{module}:{cls.__qualname__}"


def resolve(entry: dict[str, Any], where: str) -> list[Strategy]:
    """Turn one ``[[strategy]]`` table into strategies (several when it has a ``grid``).

    Checks the method (or import paths), that every parameter is one the estimator accepts
    (nested ``estimator__max_depth`` style included) and that scikit-learn accepts its value.
    """
    name = entry["name"]
    params = dict(entry.get("params", {}))
    method = entry.get("method")
    if method is not None:
        if method not in CATALOGUE:
            raise UserError(f"unknown method '{method}'{closest(method, CATALOGUE)}; the catalogue "
                            f"has {', '.join(CATALOGUE)}", file=where, field="method")
        m = CATALOGUE[method]
        base = Strategy(name, entry.get("family", m.family), method, class_path(m.classifier),
                        class_path(m.regressor), params)
    else:
        paths = {}
        for key in ("classifier", "regressor"):
            if key in entry:
                try:
                    cls = import_path(str(entry[key]))
                except (ImportError, AttributeError, ValueError) as exc:
                    raise UserError(f"cannot import '{entry[key]}' ({exc})", file=where,
                                    field=key) from None
                if not (isinstance(cls, type) and hasattr(cls, "fit") and hasattr(cls, "get_params")):
                    raise UserError(f"'{entry[key]}' is not a scikit-learn-compatible estimator "
                                    "class (it needs fit and get_params)", file=where, field=key)
                paths[key] = str(entry[key])
        if not paths:
            raise UserError("give either 'method' (a catalogue name) or 'classifier' and/or "
                            "'regressor' (import paths)", file=where, field="method")
        base = Strategy(name, entry.get("family", "other"), "custom", paths.get("classifier"),
                        paths.get("regressor"), params)
    grid = entry.get("grid", {})
    variants = [base]
    if grid:
        keys = sorted(grid)
        variants = []
        for values in itertools.product(*(grid[k] for k in keys)):
            combo = dict(zip(keys, values))
            label = ",".join(f"{k}={v}" for k, v in combo.items())
            variants.append(Strategy(f"{name}[{label}]", base.family, base.method, base.classifier,
                                     base.regressor, {**params, **combo}))
    for v in variants:
        for task in ("classification", "regression"):
            if v.supports(task):
                _check_params(v, task, where)
    return variants


def _check_params(strategy: Strategy, task: str, where: str) -> None:
    path = strategy.classifier if task == "classification" else strategy.regressor
    est = import_path(path)()
    accepted = est.get_params(deep=True)
    if strategy.method in CATALOGUE:
        m = CATALOGUE[strategy.method]
        est.set_params(**(m.classifier_defaults if task == "classification"
                          else m.regressor_defaults))
        accepted = est.get_params(deep=True)
    for key in strategy.params:
        if key not in accepted:
            raise UserError(f"{path.split(':')[-1]} has no parameter '{key}'"
                            f"{closest(key, accepted)}", file=where, field=f"params.{key}")
    try:
        est = strategy.build(task, 0)
        if hasattr(est, "_validate_params") and hasattr(est, "_parameter_constraints"):
            est._validate_params()
    except (TypeError, ValueError) as exc:
        raise UserError(f"{path.split(':')[-1]} refuses these parameters: "
                        f"{str(exc).splitlines()[0]}", file=where, field="params") from None
