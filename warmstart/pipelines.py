"""Preprocessing + estimator pipelines for the model families, for any tabular frame.

Every family gets the same column typing and a front end adapted to what its model needs:

* dropped: datetime columns, all-missing and constant columns, and identifier-like
  columns (integers or text with a distinct value on every row of a table of more than
  20 rows), as the fingerprint's profile does;
* numeric columns (numbers and booleans, nullable pandas dtypes included; infinite
  values count as missing): median imputation with missing-value indicators, then
  standardisation when the family is scale-sensitive (``Family.needs_scaling``).
  Histogram gradient boosting takes missing values natively and is not imputed;
* categorical columns (text, pandas categoricals, mixed types): missing values become a
  level of their own, levels rarer than 1 % of rows are grouped into one, and the
  number of levels kept per column is capped, then encoded as the family asks
  (``Family.categorical_encoding``): one-hot, ordinal codes, or ordinal codes declared
  categorical to the estimator. For one-hot the cap shrinks as the number of
  categorical columns grows, so that wide text data cannot blow up the width that
  linear, kernel and distance models see (at most ``MAX_ONE_HOT_WIDTH`` columns);
* the target is standardised for regression models whose hyperparameters are in
  target units (``Family.scale_target``, support vector regression).

Columns are selected by position, so any column labels (numbers, duplicates of
another frame's names) work.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.compose import ColumnTransformer, TransformedTargetRegressor
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import (
    FunctionTransformer,
    OneHotEncoder,
    OrdinalEncoder,
    StandardScaler,
)

from warmstart.errors import BadInputError
from warmstart.families.base import Family

MAX_LEVELS = 30  # levels kept per categorical column (the rest grouped as "infrequent")
MIN_LEVEL_FREQUENCY = 0.01  # levels rarer than this fraction of rows are grouped
MAX_ONE_HOT_WIDTH = 256  # one-hot columns in total, across all categorical columns
MISSING_LEVEL = "(missing)"


def split_columns(X: pd.DataFrame) -> tuple[list[int], list[int]]:
    """Positions of the numeric and categorical feature columns of ``X``.

    Columns that carry no usable signal (see the module docstring) are in neither list.
    """
    numeric, categorical = [], []
    n = len(X)
    for i in range(X.shape[1]):
        col = X.iloc[:, i]
        if pd.api.types.is_datetime64_any_dtype(col) or pd.api.types.is_timedelta64_dtype(col):
            continue
        values = col.dropna()
        is_num = pd.api.types.is_bool_dtype(col) or pd.api.types.is_numeric_dtype(col)
        if is_num and not pd.api.types.is_bool_dtype(col):
            finite = values[np.isfinite(values.to_numpy(dtype=float))]
            values = finite
        n_unique = values.nunique()
        if n_unique <= 1:
            continue  # all-missing or constant: nothing to learn from
        if is_num:
            integer = pd.api.types.is_integer_dtype(col) or (
                not pd.api.types.is_bool_dtype(col)
                and bool(np.all(values.to_numpy(dtype=float) % 1 == 0)))
            if integer and n > 20 and n_unique == len(values) == n:
                continue  # a row number or key
            numeric.append(i)
        elif n > 20 and n_unique == len(values) == n:
            continue  # identifier-like text column
        else:
            categorical.append(i)
    return numeric, categorical


def to_float(X) -> np.ndarray:
    """Numeric columns as float64, with missing (NaN, None, pd.NA) and infinite as NaN."""
    df = pd.DataFrame(X)
    out = np.array(df.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=float,
                                                                  na_value=np.nan))
    out[~np.isfinite(out)] = np.nan
    return out


def to_text(X) -> pd.DataFrame:
    """Cast categorical columns to strings, keeping missing values as NaN, so that
    mixed-type columns (numbers and text, booleans and None) encode without errors."""
    df = pd.DataFrame(X)
    return df.astype(object).where(df.notna(), np.nan).map(
        lambda v: v if isinstance(v, float) and np.isnan(v) else str(v))


def levels_per_column(n_categorical: int) -> int:
    """How many one-hot levels each categorical column may keep (at least 3).

    ``MAX_ONE_HOT_WIDTH`` shared among the columns, capped at ``MAX_LEVELS``.
    """
    return int(max(3, min(MAX_LEVELS, MAX_ONE_HOT_WIDTH // max(1, n_categorical))))


def make_pipeline(family: Family, task: str, config: dict, X: pd.DataFrame,
                  seed: int | None = 0) -> Pipeline:
    """An unfitted pipeline: preprocessing for ``X``'s columns, then the estimator.

    Parameters
    ----------
    family : Family
    task : {"classification", "regression"}
    config : dict
        Hyperparameters of the estimator (validated against the family's space).
    X : DataFrame of shape (n_rows, n_columns)
        The features (only their column types and value counts are used).
    seed : int, optional
        ``random_state`` for seeded estimators.
    """
    numeric, categorical = split_columns(X)
    encoding = family.categorical_encoding
    transformers = []
    # Categorical block first: its output columns are then 0..len(categorical)-1,
    # which is what histogram gradient boosting's ``categorical_features`` needs.
    if categorical:
        if encoding == "one_hot":
            encoder = OneHotEncoder(handle_unknown="infrequent_if_exist",
                                    min_frequency=MIN_LEVEL_FREQUENCY,
                                    max_categories=levels_per_column(len(categorical)),
                                    sparse_output=False)
        else:
            # Unknown levels at predict time are coded like missing ones: -1 for the
            # imputed trees' ordinal codes; NaN (native missing) for the native encoding.
            unknown = np.nan if encoding == "native" else -1
            encoder = OrdinalEncoder(handle_unknown="use_encoded_value", unknown_value=unknown,
                                     encoded_missing_value=unknown,
                                     min_frequency=MIN_LEVEL_FREQUENCY,
                                     max_categories=MAX_LEVELS)
        steps = [("to_text", FunctionTransformer(to_text, feature_names_out="one-to-one"))]
        if encoding != "native":
            steps.append(("impute", SimpleImputer(strategy="constant",
                                                  fill_value=MISSING_LEVEL)))
        steps.append(("encode", encoder))
        transformers.append(("categorical", Pipeline(steps), categorical))
    if numeric:
        num_steps: list = [("to_float", FunctionTransformer(to_float,
                                                            feature_names_out="one-to-one"))]
        if encoding != "native":
            num_steps.append(("impute", SimpleImputer(strategy="median", add_indicator=True)))
        if family.needs_scaling:
            num_steps.append(("scale", StandardScaler()))
        transformers.append(("numeric", Pipeline(num_steps), numeric))
    if not transformers:
        raise BadInputError("no usable feature column (all are constant, empty, dates "
                            "or identifiers)")
    pre = ColumnTransformer(transformers, remainder="drop", verbose_feature_names_out=False)
    model = family.make_estimator(task, config, seed)
    if encoding == "native" and categorical:
        model.set_params(categorical_features=list(range(len(categorical))))
    if family.scale_target and task == "regression":
        model = TransformedTargetRegressor(regressor=model, transformer=StandardScaler())
    return Pipeline([("prepare", pre), ("model", model)])
