"""The catalogue of ensemble methods and any scikit-learn-compatible estimator by import path.

A strategy names a method (or an import path) and its parameters (common to both tasks, plus
per-task ones); it resolves to a classifier or a regressor by the dataset's task, and may
carry a `harness.spaces.Tuning`. Every strategy carries a family tag used to group results:
``single tree``, ``bagging``, ``forest``, ``boosting`` (or the user's own word).

Parameters are checked in two steps: when the suite is read, every name must exist in an
estimator the strategy has (`resolve`); once the datasets are loaded, names and values are
checked against the estimator of each task the suite has (`check_for_task`), so a
classifier-only parameter is fine in a suite of classification datasets.
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
from harness.spaces import Tuning

SINGLE_TREE, BAGGING, FOREST, BOOSTING = "single tree", "bagging", "forest", "boosting"
TASKS = ("classification", "regression")


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
    task_params: dict[str, dict[str, Any]] = field(default_factory=dict)  # task -> params
    tuning: Tuning | None = None
    where: str = field(default="", compare=False)  # the suite entry, for messages

    def params_for(self, task: str) -> dict[str, Any]:
        """The parameters set for ``task``: the common ones, then the task's own."""
        return {**self.params, **self.task_params.get(task, {})}

    def configured(self, config: dict[str, Any], task: str) -> "Strategy":
        """This strategy with ``config`` set on top of its parameters for ``task`` (one
        configuration of a search), untuned."""
        return Strategy(self.name, self.family, self.method, self.classifier, self.regressor,
                        {**self.params_for(task), **config}, {}, None, self.where)

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
        params = self.params_for(task)
        est.set_params(**params)
        if seed is not None and "random_state" in est.get_params() \
                and "random_state" not in params:
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


def split_by_task(table: dict[str, Any], where: str, field_name: str
                  ) -> tuple[dict[str, Any], dict[str, dict[str, Any]]]:
    """(common entries, task -> entries) of a ``params`` or ``tune`` table whose
    ``classification`` and ``regression`` sub-tables hold what applies to one task only."""
    common, per_task = {}, {}
    for key, value in table.items():
        if key in TASKS:
            if not isinstance(value, dict):
                raise UserError(f"'{key}' holds the parameters for {key} datasets only: "
                                "expected a table", file=where, field=f"{field_name}.{key}")
            per_task[key] = dict(value)
        else:
            common[key] = value
    return common, per_task


def _accepted(path: str, method: str, task: str) -> dict[str, Any]:
    """Every parameter name (nested ones included) of the estimator at ``path`` with the
    catalogue's defaults for ``task`` set."""
    est = import_path(path)()
    if method in CATALOGUE:
        m = CATALOGUE[method]
        est.set_params(**(m.classifier_defaults if task == "classification"
                          else m.regressor_defaults))
    return est.get_params(deep=True)


def _short(path: str) -> str:
    return path.split(":")[-1]


def resolve(entry: dict[str, Any], where: str, tuning: Tuning | None = None) -> list[Strategy]:
    """Turn one ``[[strategy]]`` table into strategies (several when it has a ``grid``).

    Checks the method (or import paths) and that every parameter name (nested
    ``estimator__max_depth`` style included; tuned ones too) exists in an estimator the
    strategy has for the task it is given for. Values are checked per task once the datasets
    are known (`check_for_task`).
    """
    name = entry["name"]
    params, task_params = split_by_task(dict(entry.get("params", {})), where, "params")
    method = entry.get("method")
    if method is not None:
        if method not in CATALOGUE:
            raise UserError(f"unknown method '{method}'{closest(method, CATALOGUE)}; the catalogue "
                            f"has {', '.join(CATALOGUE)}", file=where, field="method")
        m = CATALOGUE[method]
        base = Strategy(name, entry.get("family", m.family), method, class_path(m.classifier),
                        class_path(m.regressor), params, task_params, tuning, where)
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
                        paths.get("regressor"), params, task_params, tuning, where)
    _check_names(base, where)
    grid = entry.get("grid", {})
    variants = [base]
    if grid:
        keys = sorted(grid)
        variants = []
        for values in itertools.product(*(grid[k] for k in keys)):
            combo = dict(zip(keys, values))
            label = ",".join(f"{k}={v}" for k, v in combo.items())
            variants.append(Strategy(f"{name}[{label}]", base.family, base.method, base.classifier,
                                     base.regressor, {**params, **combo}, task_params, None,
                                     where))
        _check_names(variants[0], where)
    return variants


def _check_names(strategy: Strategy, where: str) -> None:
    """Every parameter name (set or tuned) exists in an estimator of a task it applies to."""
    tasks = [t for t in TASKS if strategy.supports(t)]
    accepted = {t: _accepted(strategy.estimator_path(t), strategy.method, t) for t in tasks}
    tuning = strategy.tuning
    checks = [("params", k, None) for k in strategy.params]
    checks += [("params", k, t) for t, ps in strategy.task_params.items() for k in ps]
    if tuning is not None:
        checks += [("tune", k, None) for k in tuning.space]
        checks += [("tune", k, t) for t, sp in tuning.task_space.items() for k in sp]
    for table, key, task in checks:
        field_name = f"{table}.{task}.{key}" if task else f"{table}.{key}"
        if task is not None and task not in accepted:
            raise UserError(f"this strategy has no estimator for {task}", file=where,
                            field=field_name)
        among = [task] if task else tasks
        if not any(key in accepted[t] for t in among):
            names = " nor ".join(_short(strategy.estimator_path(t)) for t in among)
            known = set().union(*(accepted[t] for t in among))
            raise UserError(f"{'neither ' if len(among) > 1 else ''}{names} has "
                            f"{'a ' if len(among) > 1 else 'no '}parameter '{key}'"
                            f"{closest(key, known)}", file=where, field=field_name)


def check_for_task(strategy: Strategy, task: str, dataset: str) -> None:
    """Check the strategy's parameters (and the ends of each tuned range) against the
    estimator of ``task``, as met on ``dataset``; `UserError` names the estimator that
    refused and the task."""
    path = strategy.estimator_path(task)
    where = strategy.where
    who = f"{_short(path)} (the {task} estimator, for dataset '{dataset}')"
    accepted = _accepted(path, strategy.method, task)
    for key in strategy.params_for(task):
        if key not in accepted:
            raise UserError(f"{who} has no parameter '{key}'{closest(key, accepted)}; give "
                            f"it under params.{_other(task)} if it is meant for "
                            f"{_other(task)} only", file=where, field=f"params.{key}")
    _validate(strategy, task, who, where, "params")
    if strategy.tuning is None:
        return
    for key, rng in strategy.tuning.space_for(task).items():
        if key not in accepted:
            raise UserError(f"{who} has no parameter '{key}'{closest(key, accepted)}",
                            file=where, field=f"tune.{key}")
        for end in rng.ends():
            _validate(strategy.configured({key: end}, task), task, who, where, f"tune.{key}")


def _other(task: str) -> str:
    return TASKS[1 - TASKS.index(task)]


def _validate(strategy: Strategy, task: str, who: str, where: str, field_name: str) -> None:
    try:
        est = strategy.build(task, 0)
        if hasattr(est, "_validate_params") and hasattr(est, "_parameter_constraints"):
            est._validate_params()
    except (TypeError, ValueError) as exc:
        what = "these parameters" if field_name == "params" else "a value of this range"
        hint = (f" (a value meant for {_other(task)} only goes under params.{_other(task)})"
                if field_name == "params" and strategy.supports(_other(task)) else "")
        raise UserError(f"{who} refuses {what}{hint}: {str(exc).splitlines()[0]}", file=where,
                        field=field_name) from None
