"""Sources that need no network: loaders shipped inside scikit-learn and its ``make_*`` generators."""

from __future__ import annotations

import inspect

import pandas as pd
import sklearn.datasets as skd

from harness.datasets.base import Dataset, finish
from harness.datasets.spec import DatasetSpec
from harness.errors import UserError, closest

# Loaders whose data ship inside the scikit-learn wheel (no download).
OFFLINE_LOADERS = ("load_breast_cancer", "load_diabetes", "load_digits", "load_iris",
                   "load_linnerud", "load_wine")
LABELLED = ("load_breast_cancer", "load_digits", "load_iris", "load_wine")  # targets are class ids
GENERATORS = tuple(sorted(n for n in dir(skd) if n.startswith("make_")
                          and n not in ("make_biclusters", "make_checkerboard",
                                        "make_low_rank_matrix", "make_sparse_coded_signal",
                                        "make_sparse_spd_matrix", "make_spd_matrix")))


def load_sklearn(spec: DatasetSpec) -> Dataset:
    loader = str(spec.options["load"])
    if loader not in OFFLINE_LOADERS:
        raise UserError(f"'{loader}' is not one of scikit-learn's bundled loaders "
                        f"({', '.join(OFFLINE_LOADERS)}){closest(loader, OFFLINE_LOADERS)}",
                        file=spec.where, field="load")
    bunch = getattr(skd, loader)(as_frame=True)
    y = bunch.target
    if isinstance(y, pd.DataFrame):  # multi-output (linnerud): keep the first target
        y = y.iloc[:, 0]
    if loader in LABELLED and spec.options.get("task", "classification") == "classification":
        names = list(map(str, bunch.target_names))
        y = pd.Series([names[int(v)] for v in y], name="target")
    return finish(spec.name, bunch.data, y, source=f"sklearn:{loader}", where=spec.where,
                  task=spec.options.get("task"), categorical=spec.options.get("categorical"),
                  drop=spec.options.get("drop", ()))


def load_generator(spec: DatasetSpec) -> Dataset:
    maker = str(spec.options["make"])
    if maker not in GENERATORS:
        raise UserError(f"'{maker}' is not a scikit-learn generator{closest(maker, GENERATORS)}",
                        file=spec.where, field="make")
    fn = getattr(skd, maker)
    params = dict(spec.options.get("params", {}))
    accepted = inspect.signature(fn).parameters
    for key in params:
        if key not in accepted:
            raise UserError(f"{maker} has no parameter '{key}'{closest(key, accepted)}",
                            file=spec.where, field=f"params.{key}")
    params.setdefault("random_state", 0) if "random_state" in accepted else None
    try:
        out = fn(**params)
    except (TypeError, ValueError) as exc:
        raise UserError(f"{maker} refused its parameters: {exc}", file=spec.where,
                        field="params") from None
    X, y = out[0], out[1]
    X = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    return finish(spec.name, X, pd.Series(y, name="target"), source=f"generator:{maker}",
                  where=spec.where, task=spec.options.get("task"),
                  categorical=spec.options.get("categorical"), drop=spec.options.get("drop", ()))
