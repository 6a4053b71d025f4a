"""Preprocessing fitted inside each fold, on the training part only (no leakage).

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


def final_estimator(model):
    """The fitted ensemble inside a pipeline (or the model itself)."""
    return model[-1] if isinstance(model, Pipeline) else model


def transform_for_members(model, X):
    """X as the final estimator sees it (after the fitted preprocessing)."""
    return model[:-1].transform(X) if isinstance(model, Pipeline) else X
