"""Turn a raw table into a :class:`DatasetProfile`: typed columns, a target, warnings.

Every meta-feature function reads a profile, never the raw table, so the typing rules
and the handling of dirty columns live in one place.

Column typing rules (applied to every column but the target):

* booleans: a bool dtype, or exactly the two values {0, 1} / {"true", "false"} / {"yes", "no"};
* datetimes: a datetime dtype, or strings of which at least 95 % of a 200-value sample
  parse as dates; they are counted but not otherwise used;
* identifiers: integer or string columns whose values are all distinct (and, for
  integers, a contiguous or increasing run is not required) in a table of more than 20
  rows; dropped with a warning;
* constant and all-missing columns: dropped with a warning;
* numeric: any other numeric column, except integer columns with at most
  ``INTEGER_CATEGORY_MAX_LEVELS`` distinct values *and* a name that marks them as a code
  (ending in ``_id``, ``_code``, ``_type``, ``_class``, ``_cat`` or ``_group``), which are
  categorical: the number itself carries no order there;
* categorical: everything else (strings, pandas categoricals, mixed types).
  Mixed-type columns (numbers and strings together) get a warning.
  Infinite values in numeric columns are treated as missing, with a warning.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError

INTEGER_CATEGORY_MAX_LEVELS = 50
_CODE_SUFFIXES = ("_id", "_code", "_type", "_class", "_cat", "_group")
_BOOL_STRINGS = ({"true", "false"}, {"yes", "no"}, {"t", "f"}, {"y", "n"})
CLASSIFICATION, REGRESSION = "classification", "regression"
TASKS = (CLASSIFICATION, REGRESSION)


@dataclass
class DatasetProfile:
    """A typed view of a table, ready for meta-feature functions.

    Attributes
    ----------
    task : {"classification", "regression"}
    n_rows : int
        Rows of the table (all of them, including rows with a missing target).
    n_columns : int
        Feature columns (the target excluded), before any were dropped.
    numeric : ndarray of shape (n_rows, n_numeric)
        Numeric columns as float64, NaN for missing (and for infinite values).
    categorical : list of ndarray
        One integer-code array per categorical column, -1 for missing.
    categorical_levels : list of int
        Number of distinct non-missing levels per categorical column.
    n_boolean, n_datetime : int
        Counts of boolean and datetime columns (boolean columns are also in ``numeric``).
    missing_mask : ndarray of shape (n_rows, n_columns) of bool
        Missingness of every feature column, dropped columns included.
    y : ndarray of shape (n_rows,)
        Regression: float target, NaN where missing. Classification: integer class codes
        (0..classes-1, sorted by label), -1 where missing.
    classes : int
        Number of classes (classification), 0 for regression.
    warnings : list of str
        What was noticed and done with dirty columns.
    """

    task: str
    n_rows: int
    n_columns: int
    numeric: np.ndarray
    numeric_names: list[str]
    categorical: list[np.ndarray]
    categorical_names: list[str]
    categorical_levels: list[int]
    n_boolean: int
    n_datetime: int
    missing_mask: np.ndarray
    y: np.ndarray
    classes: int
    target: str
    dataset_hash: str
    warnings: list[str] = field(default_factory=list)
    cache: dict = field(default_factory=dict, repr=False)


def infer_task(y: pd.Series) -> str:
    """Classification or regression, from the target's values.

    Non-numeric or boolean targets are classification; numeric targets whose non-missing
    values are all integers with at most 20 distinct values are classification; every
    other numeric target is regression. Override with ``task=`` when this guesses wrong.
    """
    values = y.dropna()
    if not pd.api.types.is_numeric_dtype(values) or pd.api.types.is_bool_dtype(values):
        return CLASSIFICATION
    arr = values.to_numpy(dtype=float)
    finite = arr[np.isfinite(arr)]
    if finite.size and np.all(finite == np.round(finite)) and np.unique(finite).size <= 20:
        return CLASSIFICATION
    return REGRESSION


def table_hash(df: pd.DataFrame, target: str) -> str:
    """SHA-256 of a table's content (values, column names, the target's name), hex.

    Identical content gives the identical hash, which is how the history recognises a
    dataset logged twice; a hash cannot be turned back into rows.
    """
    h = hashlib.sha256()
    h.update(repr((list(map(str, df.columns)), target)).encode())
    h.update(pd.util.hash_pandas_object(df, index=False).to_numpy().tobytes())
    return h.hexdigest()


def profile_frame(df: pd.DataFrame, target: str, task: str | None = None) -> DatasetProfile:
    """Build a :class:`DatasetProfile` from a DataFrame.

    Raises :class:`BadInputError` when the table cannot describe a supervised task: no
    rows, a missing target column, fewer than two usable rows, or a constant target.
    """
    if target not in df.columns:
        cols = ", ".join(map(str, df.columns[:20]))
        raise BadInputError(f"target column {target!r} not found; columns are: {cols}")
    if df.columns.duplicated().any():
        raise BadInputError("the table has duplicate column names")
    if task is not None and task not in TASKS:
        raise BadInputError(f"task must be 'classification' or 'regression', not {task!r}")
    y_raw = df[target]
    if len(df) == 0:
        raise BadInputError("the table has no rows")
    if y_raw.notna().sum() < 2:
        raise BadInputError(f"target column {target!r} has fewer than two non-missing values")
    task = task or infer_task(y_raw)
    warnings: list[str] = []
    features = df.drop(columns=[target])
    missing_mask = features.isna().to_numpy()

    numeric_cols, numeric_names = [], []
    cat_codes, cat_names, cat_levels = [], [], []
    n_bool = n_dt = 0
    dropped_constant, dropped_empty, dropped_ids, infinite, mixed = [], [], [], [], []
    n = len(df)
    for name in features.columns:
        col = features[name]
        label = str(name)
        nonnull = col.dropna()
        if nonnull.empty:
            dropped_empty.append(label)
            continue
        if pd.api.types.is_datetime64_any_dtype(col) or _looks_like_dates(nonnull):
            n_dt += 1
            continue
        if _is_boolean(nonnull):
            n_bool += 1
            numeric_cols.append(_as_bool_float(col))
            numeric_names.append(label)
            continue
        n_unique = nonnull.nunique()
        if n_unique == 1:
            dropped_constant.append(label)
            continue
        is_num = pd.api.types.is_numeric_dtype(col)
        is_int = is_num and _integer_valued(nonnull)
        if n > 20 and n_unique == len(nonnull) == n and (is_int or not is_num):
            dropped_ids.append(label)
            continue
        if is_num and not (is_int and n_unique <= INTEGER_CATEGORY_MAX_LEVELS
                           and label.lower().endswith(_CODE_SUFFIXES)):
            values = col.to_numpy(dtype=float, na_value=np.nan)
            bad = np.isinf(values)
            if bad.any():
                infinite.append(label)
                values = np.where(bad, np.nan, values)
            numeric_cols.append(values)
            numeric_names.append(label)
            continue
        if col.dtype == object and _is_mixed(nonnull):
            mixed.append(label)
        codes, uniques = pd.factorize(col.astype("string") if col.dtype == object else col)
        cat_codes.append(codes.astype(np.int64))
        cat_names.append(label)
        cat_levels.append(len(uniques))

    for what, cols in (("all-missing columns dropped", dropped_empty),
                       ("constant columns dropped", dropped_constant),
                       ("identifier-like columns (unique per row) dropped", dropped_ids),
                       ("infinite values treated as missing in", infinite),
                       ("mixed types (numbers and text) treated as categorical in", mixed)):
        if cols:
            warnings.append(f"{what}: {', '.join(cols)}")
    high_card = [nm for nm, k in zip(cat_names, cat_levels) if k > max(50, 0.5 * n)]
    if high_card:
        warnings.append(f"high-cardinality categorical columns: {', '.join(high_card)}")

    y, classes = _encode_target(y_raw, task)
    if task == CLASSIFICATION and classes < 2:
        raise BadInputError(f"target column {target!r} is constant (one class)")
    if task == REGRESSION and np.nanstd(y) == 0:
        raise BadInputError(f"target column {target!r} is constant")
    if y_raw.isna().any():
        warnings.append(f"{int(y_raw.isna().sum())} rows with a missing target ignored by "
                        "target and landmark meta-features")
    numeric = np.column_stack(numeric_cols) if numeric_cols else np.empty((n, 0))
    return DatasetProfile(
        task=task, n_rows=n, n_columns=features.shape[1], numeric=numeric,
        numeric_names=numeric_names, categorical=cat_codes, categorical_names=cat_names,
        categorical_levels=cat_levels, n_boolean=n_bool, n_datetime=n_dt,
        missing_mask=missing_mask, y=y, classes=classes, target=str(target),
        dataset_hash=table_hash(df, str(target)), warnings=warnings,
    )


def _encode_target(y: pd.Series, task: str) -> tuple[np.ndarray, int]:
    if task == REGRESSION:
        try:
            values = pd.to_numeric(y, errors="raise").to_numpy(dtype=float, na_value=np.nan)
        except (ValueError, TypeError):
            raise BadInputError(
                f"target column {y.name!r} is not numeric, so it cannot be a regression target"
            ) from None
        values = np.where(np.isinf(values), np.nan, values)
        return values, 0
    codes, uniques = pd.factorize(y.astype("string") if y.dtype == object else y, sort=True)
    return codes.astype(np.int64), len(uniques)  # -1 marks a missing label


def _integer_valued(values: pd.Series) -> bool:
    if pd.api.types.is_integer_dtype(values):
        return True
    arr = values.to_numpy(dtype=float)
    arr = arr[np.isfinite(arr)]
    return bool(arr.size) and bool(np.all(arr == np.round(arr)))


def _is_boolean(values: pd.Series) -> bool:
    if pd.api.types.is_bool_dtype(values):
        return True
    uniq = pd.unique(values)
    if len(uniq) != 2:
        return False
    if pd.api.types.is_numeric_dtype(values):
        return set(np.asarray(uniq, dtype=float).tolist()) == {0.0, 1.0}
    lowered = {str(u).strip().lower() for u in uniq}
    return lowered in _BOOL_STRINGS


def _as_bool_float(col: pd.Series) -> np.ndarray:
    if pd.api.types.is_numeric_dtype(col):
        return col.to_numpy(dtype=float, na_value=np.nan)
    lowered = col.astype("string").str.strip().str.lower()
    return lowered.map({"true": 1.0, "yes": 1.0, "t": 1.0, "y": 1.0, "false": 0.0, "no": 0.0,
                        "f": 0.0, "n": 0.0}).to_numpy(dtype=float, na_value=np.nan)


def _looks_like_dates(values: pd.Series) -> bool:
    if values.dtype != object and not pd.api.types.is_string_dtype(values):
        return False
    sample = values.astype(str).head(200)
    if not sample.str.contains(r"\d{1,4}[-/.:]\d{1,2}", regex=True).mean() >= 0.95:
        return False
    parsed = pd.to_datetime(sample, errors="coerce", format="mixed")
    return bool(parsed.notna().mean() >= 0.95)


def _is_mixed(values: pd.Series) -> bool:
    kinds = {type(v) for v in values.head(10000)}
    has_number = any(issubclass(k, (int, float, np.number)) and k is not bool for k in kinds)
    has_text = str in kinds
    if has_number and has_text:
        return True
    if has_text:
        as_num = pd.to_numeric(values.head(10000), errors="coerce")
        share = as_num.notna().mean()
        return 0.05 < share < 0.95
    return False
