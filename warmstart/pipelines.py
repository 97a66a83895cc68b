"""Preprocessing + estimator pipelines for the model families, for any tabular frame.

Columns are typed by :func:`warmstart.fingerprint.profile.column_roles`, the rules the
fingerprint uses, so a pipeline models exactly the columns the fingerprint describes.
Every family gets that typing and a front end adapted to what its model needs:

* dropped: date/time columns (typed or date text), all-missing and constant columns,
  and identifier-like columns;
* numeric columns (numbers, booleans -- bool types, 0/1 numbers or true/false text --
  and numbers stored as text, parsed as the fingerprint parses them, with the text that
  is not a number as missing; infinite values are missing too): median imputation with
  missing-value indicators, then standardisation when the family is scale-sensitive
  (``Family.needs_scaling``). Histogram gradient boosting takes missing values natively
  and is not imputed;
* categorical columns (text, pandas categoricals, mixed types, integer codes): missing
  values become a level of their own, levels rarer than 1 % of rows are grouped into
  one, and the number of levels kept per column is capped, then encoded as the family
  asks (``Family.categorical_encoding``): one-hot, ordinal codes, or ordinal codes
  declared categorical to the estimator. For one-hot the cap shrinks as the number of
  categorical columns grows, so that wide text data cannot blow up the width that
  linear, kernel and distance models see (at most ``MAX_ONE_HOT_WIDTH`` columns);
* the target is standardised for regression models whose hyperparameters are in
  target units (``Family.scale_target``, support vector regression).

Columns are selected by position, so any column labels work (they must be distinct as
text, as the fingerprint needs).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

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
from warmstart.fingerprint.profile import (
    BOOLEAN,
    CATEGORICAL,
    NUMBER_ROLES,
    NUMERIC,
    NUMERIC_TEXT,
    column_roles,
    text_as_booleans,
    text_as_numbers,
)

MAX_LEVELS = 30  # levels kept per categorical column (the rest grouped as "infrequent")
MIN_LEVEL_FREQUENCY = 0.01  # levels rarer than this fraction of rows are grouped
MAX_ONE_HOT_WIDTH = 256  # one-hot columns in total, across all categorical columns
MISSING_LEVEL = "(missing)"


def split_columns(X: pd.DataFrame, roles: dict | None = None) -> tuple[list[int], list[int]]:
    """Positions of the numeric and categorical feature columns of ``X``.

    Parameters
    ----------
    X : DataFrame of shape (n_rows, n_columns)
    roles : dict, optional
        :func:`column_roles` of ``X`` (or of the table ``X`` was taken from, target
        excluded), when already computed.

    Columns that are not features (see the module docstring) are in neither list.
    """
    return _split(_roles_by_position(X, roles))


def _split(kinds: list[str]) -> tuple[list[int], list[int]]:
    return ([i for i, r in enumerate(kinds) if r in NUMBER_ROLES],
            [i for i, r in enumerate(kinds) if r == CATEGORICAL])


def _roles_by_position(X: pd.DataFrame, roles: dict | None) -> list[str]:
    if roles is None:
        return list(column_roles(X).values())
    if list(roles) != list(X.columns):
        raise BadInputError("the column roles are for other columns than the table's")
    return list(roles.values())


def to_float(X, roles: list[str] | None = None) -> np.ndarray:
    """Numeric columns as float64, with missing (NaN, None, pd.NA) and infinite as NaN.

    Parameters
    ----------
    X : DataFrame or array of shape (n_rows, n_columns)
    roles : list of str, optional
        Each column's role: ``"numeric_text"`` is parsed as the fingerprint parses
        numbers stored as text, ``"boolean"`` text is read as true/false; anything else
        (the default) is converted with ``pandas.to_numeric``.

    Returns
    -------
    ndarray of shape (n_rows, n_columns)
    """
    df = pd.DataFrame(X)
    roles = roles if roles is not None else [NUMERIC] * df.shape[1]
    out = np.empty(df.shape)
    for j, role in enumerate(roles):
        col = df.iloc[:, j]
        if role == NUMERIC_TEXT:
            out[:, j] = text_as_numbers(col)
        elif role == BOOLEAN and _is_text(col):
            out[:, j] = text_as_booleans(col)
        else:
            out[:, j] = _numbers(col)
    out[~np.isfinite(out)] = np.nan
    return out


def _is_text(col: pd.Series) -> bool:
    return not (pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col)
                or pd.api.types.infer_dtype(col, skipna=True) in ("boolean", "empty"))


def _numbers(col: pd.Series) -> np.ndarray:
    """A numeric, boolean or duration column as float64 (durations in their own unit)."""
    if pd.api.types.is_timedelta64_dtype(col):
        values = col.to_numpy()
        return np.where(pd.isna(values), np.nan, values.view(np.int64).astype(float))
    if col.dtype == object and pd.api.types.infer_dtype(col, skipna=True) == "boolean":
        col = col.astype("boolean")
    return pd.to_numeric(col, errors="coerce").to_numpy(dtype=float, na_value=np.nan)


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


def make_pipeline(family: Family | str, task: str, config: Mapping[str, Any] | Any,
                  X: pd.DataFrame, seed: int | None = 0, roles: dict | None = None
                  ) -> Pipeline:
    """An unfitted pipeline: preprocessing for ``X``'s columns, then the estimator.

    The same pipeline ``tune`` cross-validates, so a suggestion becomes a model with
    ``make_pipeline(family, task, suggestion.config, X).fit(X, y)``.

    Parameters
    ----------
    family : Family or str
        A family or its name (see :func:`warmstart.families`).
    task : {"classification", "regression"}
    config : dict, or a Suggestion
        Keyword arguments of the family's estimator (a suggestion's ``config`` is used).
    X : DataFrame of shape (n_rows, n_columns)
        The features, without the target (only their column types and value counts
        are used).
    seed : int, optional
        ``random_state`` for seeded estimators.
    roles : dict, optional
        :func:`column_roles` of the table ``X`` comes from (target excluded, same
        columns in the same order); typed from ``X`` itself when not given.

    Raises :class:`BadInputError` for an unknown family, task or estimator keyword.
    """
    family, config = _check_pipeline_args(family, task, config, X)
    kinds = _roles_by_position(X, roles)
    numeric, categorical = _split(kinds)
    encoding = family.categorical_encoding
    transformers = []
    # Categorical block first: its output columns are then 0..len(categorical)-1,
    # which is what histogram gradient boosting's ``categorical_features`` needs.
    if categorical:
        transformers.append(("categorical", _categorical_block(encoding, len(categorical)),
                             categorical))
    if numeric:
        read = FunctionTransformer(to_float, kw_args={"roles": [kinds[i] for i in numeric]},
                                   feature_names_out="one-to-one")
        num_steps: list = [("to_float", read)]
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


def _check_pipeline_args(family: Family | str, task: str, config: Any, X: Any
                         ) -> tuple[Family, dict[str, Any]]:
    """The family and the configuration as a dict, or :class:`BadInputError`."""
    from warmstart.families import TASKS, get_family

    family = get_family(family) if isinstance(family, str) else family
    if task not in TASKS:
        raise BadInputError(f"task must be one of {', '.join(TASKS)}, not {task!r}")
    config = getattr(config, "config", config)  # a Suggestion gives its configuration
    if not isinstance(config, Mapping):
        raise BadInputError(f"config must be a dict of estimator keywords, not "
                            f"{type(config).__name__}")
    known = family.estimator_class(task)().get_params(deep=False)
    unknown = [k for k in config if k not in known]
    if unknown:
        raise BadInputError(f"config has {', '.join(map(repr, unknown))}, which "
                            f"{family.estimator_class(task).__name__} does not take")
    if not isinstance(X, pd.DataFrame):
        raise BadInputError(f"X must be a pandas DataFrame, not {type(X).__name__}")
    return family, dict(config)


def _categorical_block(encoding: str, n_categorical: int) -> Pipeline:
    """Text conversion, missing level (unless native) and the family's encoder."""
    if encoding == "one_hot":
        encoder = OneHotEncoder(handle_unknown="infrequent_if_exist",
                                min_frequency=MIN_LEVEL_FREQUENCY,
                                max_categories=levels_per_column(n_categorical),
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
        steps.append(("impute", SimpleImputer(strategy="constant", fill_value=MISSING_LEVEL)))
    steps.append(("encode", encoder))
    return Pipeline(steps)
