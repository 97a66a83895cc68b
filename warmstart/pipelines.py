"""Preprocessing + estimator pipelines for the model families, for any tabular frame.

Every family gets the same front end, adapted to what the model needs:

* numeric columns: median imputation (with missing-value indicators), then
  standardisation when the family is scale-sensitive (``Family.needs_scaling``);
* categorical columns (strings, pandas categoricals, booleans stored as text):
  most-frequent imputation, then one-hot encoding that ignores unseen levels and
  groups levels rarer than 1 % of rows into one, capped at 30 levels per column;
* datetime columns and identifier-like columns are dropped.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import FunctionTransformer, OneHotEncoder, StandardScaler

from warmstart.families.base import Family


def split_columns(X: pd.DataFrame) -> tuple[list[str], list[str]]:
    """Numeric and categorical feature columns of ``X`` (others are dropped)."""
    numeric, categorical = [], []
    n = len(X)
    for name in X.columns:
        col = X[name]
        if pd.api.types.is_datetime64_any_dtype(col) or col.isna().all():
            continue
        if pd.api.types.is_bool_dtype(col) or pd.api.types.is_numeric_dtype(col):
            numeric.append(name)
        elif n > 20 and col.nunique(dropna=True) == n:
            continue  # identifier-like text column
        else:
            categorical.append(name)
    return numeric, categorical


def make_pipeline(family: Family, task: str, config: dict, X: pd.DataFrame,
                  seed: int | None = 0) -> Pipeline:
    """An unfitted pipeline: preprocessing for ``X``'s columns, then the estimator.

    Parameters
    ----------
    family : Family
    task : {"classification", "regression"}
    config : dict
        Hyperparameters of the estimator (validated against the family's space).
    X : DataFrame
        The features (only their column types are used).
    seed : int, optional
        ``random_state`` for seeded estimators.
    """
    numeric, categorical = split_columns(X)
    num_steps: list = [("impute", SimpleImputer(strategy="median", add_indicator=True))]
    if family.needs_scaling:
        num_steps.append(("scale", StandardScaler()))
    transformers = []
    if numeric:
        transformers.append(("numeric", Pipeline(num_steps), numeric))
    if categorical:
        cat = Pipeline([
            ("to_text", FunctionTransformer(to_text, feature_names_out="one-to-one")),
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("one_hot", OneHotEncoder(handle_unknown="infrequent_if_exist",
                                      min_frequency=0.01, max_categories=30,
                                      sparse_output=False)),
        ])
        transformers.append(("categorical", cat, categorical))
    pre = ColumnTransformer(transformers, remainder="drop", verbose_feature_names_out=False)
    return Pipeline([("prepare", pre), ("model", family.make_estimator(task, config, seed))])


def to_text(X) -> pd.DataFrame:
    """Cast categorical columns to strings, keeping missing values as NaN, so that
    mixed-type columns (numbers and text together) encode without errors."""
    df = pd.DataFrame(X)
    return df.astype(object).where(df.notna(), np.nan).map(
        lambda v: v if isinstance(v, float) and np.isnan(v) else str(v))
