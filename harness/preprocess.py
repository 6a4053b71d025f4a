"""The pipeline a unit of work fits: the strategy's estimator behind the preprocessing that is
fitted inside each fold, on the training part only (no leakage). The plan hashes this whole
pipeline into the unit's key (`pipeline_text`); the worker fits the same one.

- Numeric columns: median imputation, except for histogram boosting, which handles missing
  values natively.
- Categorical columns: most-frequent imputation and ordinal codes (unseen categories get -1)
  for the tree methods; histogram boosting gets the codes with its native categorical support
  (``categorical_features``), missing categories left missing.
A table with only complete numeric columns gets no preprocessing at all.
"""

from __future__ import annotations

import numpy as np
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.preprocessing import OrdinalEncoder

from harness.datasets import Dataset
from harness.strategies import Strategy, canonical

NATIVE = ("HistGradientBoostingClassifier", "HistGradientBoostingRegressor")


def needs_preprocessing(dataset: Dataset) -> bool:
    return bool(dataset.categorical) or bool(dataset.X.isna().to_numpy().any())


def with_preprocessing(estimator, dataset: Dataset):
    """``estimator`` alone, or a pipeline of in-fold preprocessing then ``estimator``."""
    if not needs_preprocessing(dataset):
        return estimator
    cats = list(dataset.categorical)
    nums = [c for c in dataset.X.columns if c not in set(cats)]
    native = type(estimator).__name__ in NATIVE
    if native:
        encode = OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=np.nan,
                                encoded_missing_value=np.nan)
        pre = ColumnTransformer([("categorical", encode, cats), ("numeric", "passthrough", nums)],
                                verbose_feature_names_out=False)
        estimator = estimator.set_params(categorical_features=list(range(len(cats))) or None)
    else:
        encode = make_pipeline(SimpleImputer(strategy="most_frequent"),
                               OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=-1))
        pre = ColumnTransformer([("categorical", encode, cats),
                                 ("numeric", SimpleImputer(strategy="median"), nums)],
                                verbose_feature_names_out=False)
    return Pipeline([("preprocess", pre), ("model", estimator)])


def pipeline_text(strategy: Strategy, dataset: Dataset, seed: int | None) -> str:
    """Canonical text of the whole pipeline ``strategy`` fits on ``dataset`` (threads as the
    strategy leaves them; the key holds the thread count apart): every step's class and
    parameters."""
    return canonical(with_preprocessing(strategy.build(dataset.task, seed), dataset))


def final_estimator(model):
    """The fitted ensemble inside a pipeline (or the model itself)."""
    return model[-1] if isinstance(model, Pipeline) else model


def transform_for_members(model, X):
    """X as the final estimator sees it (after the fitted preprocessing)."""
    return model[:-1].transform(X) if isinstance(model, Pipeline) else X
