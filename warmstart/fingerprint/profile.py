"""Turn a table into a :class:`DatasetProfile`: typed columns, a target, warnings.

Every meta-feature function reads a profile, never the raw table, so the typing rules
and the handling of dirty columns live in one place. The table is read once, in batches
(:mod:`.scan`); the profile holds exact one-pass summaries of every row plus a seeded
sample of at most ``SAMPLE_CAP`` rows (all rows when the table is smaller).

Column typing rules (applied to every column but the target, in this order). They give
each column a role (:func:`column_roles`, in brackets), which the preprocessing pipelines
use too, so that a pipeline models exactly the columns its fingerprint describes:

* unsupported Arrow types (lists, structs, maps): read as their text form;
* all-missing (``empty``): no non-missing (for numbers: no finite) value -- dropped,
  warned;
* date/time (``date``): a date, time or timestamp type, or text of which at least 95 %
  of the sampled values (first 200 non-missing) look like and parse as dates -- counted
  in ``datetime_column_fraction`` but not used as features, warned;
* constant (``constant``): one distinct value -- dropped, warned;
* boolean (``boolean``): a bool type, numbers whose only values are 0 and 1, or text
  with exactly two values forming true/false, yes/no, t/f, y/n (any case) or 1/0 -- used
  as 0/1 numbers;
* identifier (``identifier``): whole numbers that are all distinct (more than 20 values)
  and either fill a dense range (max - min + 1 <= 2 x count) or sit in a column named
  like an id (``id``, ``..._id``, ``...Id``, ``...ID``); or text whose (more than 20)
  non-missing values are all distinct -- dropped, warned. Beyond ``LEVEL_CAP`` distinct
  values "all distinct" means an estimated distinct count of at least 97 % of the values
  (the sketch's error is about 1.6 %);
* integer-coded categorical (``categorical``): whole numbers with 3 to
  ``INTEGER_CATEGORY_MAX_LEVELS`` distinct values *and* a name that marks a code (ending
  in ``_id``, ``_code``, ``_type``, ``_class``, ``_cat``, ``_category``, ``_group``,
  ``_kind``, ``_zip``, ``_level``, or named ``code``, ``type``, ``kind``, ``category``,
  ``zip``): both pieces of evidence are needed, since few integer levels alone (ratings,
  counts of children) usually do carry an order;
* numbers stored as text (``numeric_text``): text of which at least 95 % (but not all)
  of the values parse as decimal numbers -- used as numbers, the rest treated as
  missing, warned. Text that is entirely numeric (zip codes, codes with leading zeros)
  stays categorical: it was stored as text on purpose;
* numeric (``numeric``): every other number column. Infinite values are treated as
  missing (in the numeric and the missing groups), warned;
* categorical (``categorical``): everything else. Text that mixes numbers and words (5 %
  to 95 % of the values parse as numbers, or Python objects of several types in a
  DataFrame) is categorical, warned. High-cardinality columns (more than max(50, half
  the non-missing values) levels) are kept for the categorical summaries but left out of
  the model-based groups (landmarks, information, complexity), warned.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa

from warmstart.errors import BadInputError
from warmstart.fingerprint.scan import (
    BATCH_ROWS,
    DATETIME,
    LEVEL_CAP,
    NUMBER,
    SAMPLE_CAP,
    Scan,
    Source,
    frame_to_arrow,
    parse_numbers,
    scan,
    source_of,
)

INTEGER_CATEGORY_MAX_LEVELS = 50
ID_MIN_VALUES = 20
_CODE_SUFFIXES = ("_id", "_code", "_type", "_class", "_cat", "_category", "_group", "_kind",
                  "_zip", "_level")
_CODE_NAMES = {"code", "type", "kind", "category", "zip"}
_ID_NAME = re.compile(r"(^id$|_id$|[a-z0-9]Id$|ID$)")
_BOOL_STRINGS = ({"true", "false"}, {"yes", "no"}, {"t", "f"}, {"y", "n"}, {"1", "0"})
_TRUE = {"true", "yes", "t", "y", "1"}
_FALSE = {"false", "no", "f", "n", "0"}
CLASSIFICATION, REGRESSION = "classification", "regression"
TASKS = (CLASSIFICATION, REGRESSION)

# Column roles (see column_roles). Numeric, boolean and numeric-text columns are modelled
# as numbers, categorical ones as levels; the other four are not features.
NUMERIC, BOOLEAN, NUMERIC_TEXT, CATEGORICAL = "numeric", "boolean", "numeric_text", "categorical"
DATE, IDENTIFIER, CONSTANT, EMPTY = "date", "identifier", "constant", "empty"
NUMBER_ROLES = (NUMERIC, BOOLEAN, NUMERIC_TEXT)
FEATURE_ROLES = (*NUMBER_ROLES, CATEGORICAL)
ROLES = (*FEATURE_ROLES, DATE, IDENTIFIER, CONSTANT, EMPTY)


@dataclass
class DatasetProfile:
    """A typed view of a table, ready for meta-feature functions.

    Row-level arrays (``numeric``, ``categorical``, ``missing_mask``, ``y``) hold the
    sample (``sample_rows`` rows, all of them for a table of at most ``SAMPLE_CAP`` rows);
    the ``*_moments``, counts and ``class_counts`` fields are exact over every row.

    Attributes
    ----------
    task : {"classification", "regression"}
    n_rows : int
        Rows of the table (all of them, including rows with a missing target).
    n_columns : int
        Feature columns (the target excluded), before any were dropped.
    numeric : ndarray of shape (sample_rows, n_numeric)
        Numeric and boolean columns as float64, NaN for missing (and infinite) values.
    categorical : list of ndarray of shape (sample_rows,)
        One integer-code array per categorical column (codes in sorted level order),
        -1 for missing.
    categorical_levels : list of int
        Distinct non-missing levels per categorical column, over all rows (estimated
        beyond ``LEVEL_CAP`` levels).
    n_boolean, n_datetime : int
        Counts of boolean and datetime columns (boolean columns are also in ``numeric``).
    missing_mask : ndarray of shape (sample_rows, n_columns) of bool
        Missingness of every feature column in the sample, dropped columns included.
    y : ndarray of shape (sample_rows,)
        Regression: float target, NaN where missing. Classification: integer class codes
        (0..classes-1, sorted by label), -1 where missing.
    classes : int
        Number of classes (classification), 0 for regression.
    warnings : list of str
        What was noticed and done with dirty columns.
    sample_rows : int
    numeric_boolean : ndarray of shape (n_numeric,) of bool
    numeric_moments : ndarray of shape (5, n_numeric)
        Per numeric column over all rows: count, mean, M2, M3, M4 (sums of centred powers).
    numeric_integer : ndarray of shape (n_numeric,) of bool
    categorical_counts : list of (ndarray or None)
        Exact level counts over all rows; None beyond ``LEVEL_CAP`` levels.
    categorical_high : ndarray of shape (n_categorical,) of bool
        High-cardinality columns (left out of the model-based groups).
    missing_cells, missing_rows : int
    missing_by_column : ndarray of shape (n_columns,)
    missing_patterns : ndarray or None
        Row count of each missingness pattern over all rows; None beyond ``PATTERN_CAP``.
    class_counts : ndarray of shape (classes,)
    target_moments : ndarray of shape (5,)
        Regression target over all rows: count, mean, M2, M3, M4.
    target_zeros, target_missing : int
    distinct_rows : float
        Distinct rows (exact up to 4096, estimated beyond).
    sample_priority : ndarray of shape (sample_rows,) of uint64
        Each sampled row's sampling priority (smaller = drawn earlier), for sub-samples.
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
    sample_rows: int = 0
    numeric_boolean: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    numeric_moments: np.ndarray = field(default_factory=lambda: np.zeros((5, 0)))
    numeric_integer: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    categorical_counts: list = field(default_factory=list)
    categorical_high: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    missing_cells: int = 0
    missing_rows: int = 0
    missing_by_column: np.ndarray = field(default_factory=lambda: np.zeros(0))
    missing_patterns: np.ndarray | None = None
    class_counts: np.ndarray = field(default_factory=lambda: np.zeros(0))
    target_moments: np.ndarray = field(default_factory=lambda: np.full(5, np.nan))
    target_zeros: int = 0
    target_missing: int = 0
    distinct_rows: float = float("nan")
    sample_priority: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.uint64))


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
    return _task_from(bool(finite.size) and bool(np.all(finite == np.round(finite))),
                      float(np.unique(finite).size))


def _task_from(integer: bool, distinct: float) -> str:
    return CLASSIFICATION if integer and distinct <= 20 else REGRESSION


def profile_frame(df: pd.DataFrame, target: str, task: str | None = None) -> DatasetProfile:
    """Build a :class:`DatasetProfile` from a DataFrame (see :func:`profile_table`)."""
    return profile_table(df, target, task)


def profile_table(data: pd.DataFrame | str | os.PathLike, target: str,
                  task: str | None = None, *, sample_cap: int = SAMPLE_CAP,
                  batch_rows: int = BATCH_ROWS) -> DatasetProfile:
    """Build a :class:`DatasetProfile` from a DataFrame or a file, in one pass.

    Parquet files are streamed in record batches of ``batch_rows`` rows; CSV and JSON
    lines are read whole first. Raises :class:`BadInputError` when the table cannot
    describe a supervised task: no rows, a missing target column, fewer than two usable
    target values, or a constant target.
    """
    if task is not None and task not in TASKS:
        raise BadInputError(f"task must be 'classification' or 'regression', not {task!r}")
    if not isinstance(target, str):
        target = str(target)
    if isinstance(data, pd.DataFrame):
        if target not in map(str, data.columns):
            cols = ", ".join(map(str, data.columns[:20]))
            raise BadInputError(f"target column {target!r} not found; columns are: {cols}")
        if len(data) == 0:
            raise BadInputError("the table has no rows")
    if sample_cap < 10 or batch_rows < 1:
        raise BadInputError("sample_cap must be at least 10 and batch_rows at least 1")
    return build_profile(scan(source_of(data, batch_rows), target, sample_cap), task)


# -- from a scan to a profile --------------------------------------------------------------
@dataclass
class _Columns:
    numeric: list = field(default_factory=list)      # (name, sample values, stats or None)
    categorical: list = field(default_factory=list)  # (name, sample values, counter, levels)
    n_boolean: int = 0
    n_datetime: int = 0
    notes: dict = field(default_factory=dict)        # warning text -> [column labels]

    def note(self, what: str, label: str) -> None:
        self.notes.setdefault(what, []).append(label)


_NOTES = (
    "all-missing columns dropped",
    "constant columns dropped",
    "identifier-like columns (unique per row) dropped",
    "unsupported column types read as text",
    "infinite values treated as missing in",
    "numbers stored as text (non-numbers treated as missing) in",
    "mixed types (numbers and text) treated as categorical in",
    "integer codes treated as categorical",
    "date/time columns counted but not used as features",
    "high-cardinality categorical columns (kept for the categorical summaries, left out of "
    "landmarks, information and complexity)",
)
_DROPPED = {EMPTY: _NOTES[0], CONSTANT: _NOTES[1], IDENTIFIER: _NOTES[2], DATE: _NOTES[8]}


def build_profile(s: Scan, task: str | None = None) -> DatasetProfile:
    """Type the columns of a :class:`Scan` and assemble the profile."""
    cols = _Columns()
    for c, role in zip(s.feature_cols, scan_roles(s)):
        _add_column(s, c, role, cols)
    warnings = [f"{what}: {', '.join(cols.notes[what])}" for what in _NOTES if what in cols.notes]

    t = s.names.index(s.target)
    y_sample, classes, counts, tmom, tzeros, tmissing, task = _target(s, t, task)
    if tmissing:
        warnings.append(f"{tmissing} rows with a missing target ignored by target-based "
                        "meta-features")
    n_sample = s.sample_index.size
    numeric = (np.column_stack([v for _, v, _ in cols.numeric]) if cols.numeric
               else np.empty((n_sample, 0)))
    stats = [st for _, _, st in cols.numeric]
    moments = np.array([st[0] if st is not None else np.full(5, np.nan) for st in stats]
                       ).reshape(-1, 5).T
    integer = np.array([bool(st[1]) if st is not None else True for st in stats], dtype=bool)
    cat_codes, cat_counts, cat_levels, cat_high = [], [], [], []
    for _, values, counter, levels in cols.categorical:
        codes, _ = pd.factorize(pd.Series(values, dtype=object), sort=True)
        cat_codes.append(codes.astype(np.int64))
        cat_counts.append(None if counter.overflowed else np.asarray(counter.counts))
        cat_levels.append(int(round(levels[0])))
        cat_high.append(levels[2])
    patterns = None if s.patterns.overflowed else np.asarray(s.patterns.counts)
    profile = DatasetProfile(
        task=task, n_rows=s.n_rows, n_columns=len(s.feature_cols), numeric=numeric,
        numeric_names=[nm for nm, _, _ in cols.numeric], categorical=cat_codes,
        categorical_names=[nm for nm, _, _, _ in cols.categorical],
        categorical_levels=cat_levels, n_boolean=cols.n_boolean, n_datetime=cols.n_datetime,
        missing_mask=s.sample_missing, y=y_sample, classes=classes, target=s.target,
        dataset_hash=s.dataset_hash, warnings=warnings, sample_rows=n_sample,
        numeric_boolean=np.array([st is None for st in stats], dtype=bool),
        numeric_moments=moments, numeric_integer=integer, categorical_counts=cat_counts,
        categorical_high=np.array(cat_high, dtype=bool), missing_cells=s.missing_cells,
        missing_rows=s.missing_rows, missing_by_column=s.missing_by_column,
        missing_patterns=patterns, class_counts=counts, target_moments=tmom,
        target_zeros=tzeros, target_missing=tmissing,
        distinct_rows=_rows_distinct(s), sample_priority=s.sample_priority,
    )
    from warmstart.fingerprint.target import leakage_warnings  # target imports profile

    profile.warnings.extend(leakage_warnings(profile))
    return profile


def _rows_distinct(s: Scan) -> float:
    est, exact = s.row_distinct.estimate()
    return est if exact else min(est, float(s.n_rows))


# -- column roles: the one set of typing rules -----------------------------------------------
def column_roles(frame: pd.DataFrame, target: str | None = None) -> dict:
    """The role of every feature column of ``frame``, by the profile's typing rules.

    This is how the fingerprint types a table (see the module docstring), and what the
    preprocessing pipelines model, so the two always describe the same columns.

    Parameters
    ----------
    frame : DataFrame of shape (n_rows, n_columns)
    target : str, optional
        The target column, which gets no role. Without it every column is a feature.

    Returns
    -------
    dict
        Column label (as in ``frame``) -> role, in column order. Roles used as
        features: ``"numeric"``, ``"boolean"`` (0/1), ``"numeric_text"`` (numbers
        stored as text) and ``"categorical"``; dropped: ``"date"``, ``"identifier"``,
        ``"constant"`` and ``"empty"`` (all missing).
    """
    if not isinstance(frame, pd.DataFrame):
        raise BadInputError(f"expected a DataFrame, not {type(frame).__name__}")
    if len(frame) == 0:
        raise BadInputError("the table has no rows")
    table, mixed = frame_to_arrow(frame)
    if target is None:
        # The scan needs a target: an all-missing column of a free name, typed as nothing.
        target = "target" + "_" * (1 + max(map(len, table.column_names), default=0))
        table = table.append_column(target, pa.nulls(table.num_rows))
    elif str(target) not in table.column_names:
        cols = ", ".join(table.column_names[:20])
        raise BadInputError(f"target column {str(target)!r} not found; columns are: {cols}")
    source = Source(table.schema, table.num_rows,
                    lambda: iter(table.to_batches(max_chunksize=BATCH_ROWS)), mixed)
    s = scan(source, str(target))
    labels = list(frame.columns)
    return {labels[c]: role for c, role in zip(s.feature_cols, scan_roles(s))}


def scan_roles(s: Scan) -> list[str]:
    """The role of each feature column of a scan, aligned with ``s.feature_cols``."""
    return [_role(s, c) for c in s.feature_cols]


def _role(s: Scan, c: int) -> str:
    if s.kinds[c] == DATETIME:
        return DATE if s.nonnull[c] else EMPTY
    return _number_role(s, c) if s.kinds[c] == NUMBER else _text_role(s, c)


def _number_role(s: Scan, c: int) -> str:
    label, j, st = s.names[c], s.number_slot(c), s.number
    finite, lo, hi = st.finite[j], st.minimum[j], st.maximum[j]
    if finite == 0:
        return EMPTY
    if lo == hi:
        return CONSTANT
    distinct, exact = s.column_distinct(c)
    integer = bool(st.integer[j])
    if s.types[c] == "bool" or (distinct == 2 and lo == 0 and hi == 1):
        return BOOLEAN
    if integer and finite > ID_MIN_VALUES and _all_distinct(distinct, exact, finite) and (
            hi - lo + 1 <= 2 * finite or _ID_NAME.search(label)):
        return IDENTIFIER
    if integer and 3 <= distinct <= INTEGER_CATEGORY_MAX_LEVELS and _is_code_name(label):
        return CATEGORICAL  # an integer code
    return NUMERIC


def _text_role(s: Scan, c: int) -> str:
    t, nonnull = s.text_slot(c), s.nonnull[c]
    if nonnull == 0:
        return EMPTY
    distinct, exact = s.column_distinct(c)
    if distinct == 1:
        return CONSTANT
    if distinct == 2 and exact:
        if {str(k).strip().lower() for k in s.column_levels(c).keys} in _BOOL_STRINGS:
            return BOOLEAN
    share = s.parsed.finite[t] / nonnull
    if 0.95 <= share < 1.0:
        return NUMERIC_TEXT
    if share < 0.95 and _looks_like_dates(s.sample_text[:, t]):
        return DATE
    if nonnull > ID_MIN_VALUES and _all_distinct(distinct, exact, nonnull):
        return IDENTIFIER
    return CATEGORICAL


def _add_column(s: Scan, c: int, role: str, cols: _Columns) -> None:
    """Record one typed column in ``cols``: its sample values, summaries and notes."""
    label = s.names[c]
    if s.kinds[c] == "unsupported":
        cols.note("unsupported column types read as text", label)
    if s.kinds[c] == NUMBER:
        j = s.number_slot(c)
        if s.number.infinite[j]:
            cols.note("infinite values treated as missing in",
                      f"{label} ({int(s.number.infinite[j])})")
    if role in _DROPPED:
        cols.note(_DROPPED[role], label)
        if role == DATE:
            cols.n_datetime += 1
        return
    if role == BOOLEAN:
        cols.n_boolean += 1
    if s.kinds[c] == NUMBER:
        _add_number(s, c, role, cols)
    else:
        _add_text(s, c, role, cols)


def _add_number(s: Scan, c: int, role: str, cols: _Columns) -> None:
    label, j, st = s.names[c], s.number_slot(c), s.number
    values = s.sample_numbers[:, j].copy()
    values[~np.isfinite(values)] = np.nan
    if role == BOOLEAN:
        cols.numeric.append((label, values, None))
    elif role == CATEGORICAL:
        cols.note("integer codes treated as categorical", label)
        distinct, exact = s.column_distinct(c)
        cols.categorical.append((label, values, s.column_levels(c), (distinct, exact, False)))
    else:
        moments = np.array([st.moments.n[j], st.moments.mean[j], st.moments.m2[j],
                            st.moments.m3[j], st.moments.m4[j]])
        cols.numeric.append((label, values, (moments, bool(st.integer[j]))))


def _add_text(s: Scan, c: int, role: str, cols: _Columns) -> None:
    label, t, nonnull = s.names[c], s.text_slot(c), s.nonnull[c]
    raw = s.sample_text[:, t]
    if role == BOOLEAN:
        cols.numeric.append((label, text_as_booleans(raw), None))
        return
    if role == NUMERIC_TEXT:
        cols.note("numbers stored as text (non-numbers treated as missing) in",
                  f"{label} ({int(nonnull - s.parsed.finite[t])})")
        p = s.parsed.moments
        moments = np.array([p.n[t], p.mean[t], p.m2[t], p.m3[t], p.m4[t]])
        cols.numeric.append((label, text_as_numbers(raw),
                             (moments, bool(s.parsed.integer[t]))))
        return
    share = s.parsed.finite[t] / nonnull
    if label in s.mixed or 0.05 < share < 0.95:
        cols.note("mixed types (numbers and text) treated as categorical in", label)
    distinct, exact = s.column_distinct(c)
    high = distinct > max(50.0, 0.5 * nonnull)
    if high:
        cols.note("high-cardinality categorical columns (kept for the categorical summaries, "
                  "left out of landmarks, information and complexity)", label)
    cols.categorical.append((label, raw, s.column_levels(c), (distinct, exact, bool(high))))


def _all_distinct(distinct: float, exact: bool, count: float) -> bool:
    return distinct >= count if exact else distinct >= 0.97 * count


def _is_code_name(label: str) -> bool:
    low = label.lower()
    return low.endswith(_CODE_SUFFIXES) or low in _CODE_NAMES


# -- conversions shared with the pipelines ----------------------------------------------------
def _as_text(values) -> pa.Array:
    """Non-missing values as strings (``str(v)``, as a frame's mixed column is read)."""
    col = pd.Series(values, dtype=object)
    missing = col.isna().to_numpy()
    text = [None if m else (v if isinstance(v, str) else str(v))
            for v, m in zip(col.tolist(), missing)]
    return pa.array(text, type=pa.large_string())


def text_as_numbers(values) -> np.ndarray:
    """Text parsed as decimal numbers, as the scan parses it.

    Parameters
    ----------
    values : array-like of shape (n,)
        Strings (other values are read as ``str(v)``); None, NaN and pd.NA are missing.

    Returns
    -------
    ndarray of shape (n,) of float64
        NaN for missing values, text that is not a number, and infinities.
    """
    out = parse_numbers(_as_text(values))
    out[~np.isfinite(out)] = np.nan
    return out


def text_as_booleans(values) -> np.ndarray:
    """True/false text (true/false, yes/no, t/f, y/n, 1/0, any case) as 1.0 / 0.0.

    Parameters
    ----------
    values : array-like of shape (n,)

    Returns
    -------
    ndarray of shape (n,) of float64
        NaN for missing values and for text that is neither true nor false.
    """
    low = pd.Series(_as_text(values).to_pylist(), dtype=object).str.strip().str.lower()
    return np.where(low.isin(_TRUE), 1.0, np.where(low.isin(_FALSE), 0.0, np.nan))


def _looks_like_dates(raw: np.ndarray) -> bool:
    values = pd.Series([v for v in raw if v is not None][:200], dtype=object).astype(str)
    if values.empty or not values.str.contains(r"\d{1,4}[-/.:]\d{1,2}", regex=True).mean() >= 0.95:
        return False
    parsed = pd.to_datetime(values, errors="coerce", format="mixed")
    return bool(parsed.notna().mean() >= 0.95)


def _target(s: Scan, t: int, task: str | None):
    """(sample y, classes, exact class counts, moments, zeros, missing, task)."""
    name = s.target
    if s.kinds[t] == NUMBER:
        j = s.number_slot(t)
        st, raw = s.number, s.sample_numbers[:, j]
        mom = st.moments
        stats = (np.array([mom.n[j], mom.mean[j], mom.m2[j], mom.m3[j], mom.m4[j]]),
                 int(st.zeros[j]), int(s.n_rows - st.finite[j]), bool(st.integer[j]))
        numeric_ok, boolean = True, s.types[t] == "bool"
    elif s.kinds[t] == DATETIME:
        raise BadInputError(f"target column {name!r} holds dates, which cannot be a target")
    else:
        k = s.text_slot(t)
        st, raw = s.parsed, s.sample_text[:, k]
        mom = st.moments
        stats = (np.array([mom.n[k], mom.mean[k], mom.m2[k], mom.m3[k], mom.m4[k]]),
                 int(st.zeros[k]), int(s.n_rows - st.finite[k]), bool(st.integer[k]))
        numeric_ok, boolean = st.finite[k] == s.nonnull[t], False
    moments, zeros, missing, integer = stats
    counter = s.column_levels(t)
    labelled = s.nonnull[t] if s.kinds[t] != NUMBER else moments[0]
    if labelled < 2:
        raise BadInputError(f"target column {name!r} has fewer than two non-missing values")
    if task is None:
        if s.kinds[t] != NUMBER or boolean:
            task = CLASSIFICATION
        else:
            task = _task_from(integer, s.column_distinct(t)[0])
    if task == REGRESSION:
        if not numeric_ok:
            raise BadInputError(f"target column {name!r} is not numeric, so it cannot be a "
                                "regression target")
        # A range test, not the variance: the sum of squares of values near 1e307
        # overflows, and uint64 values near 2**64 lose their spread as floats.
        if s.column_distinct(t)[0] < 2:
            raise BadInputError(f"target column {name!r} is constant")
        y = raw.astype(float) if s.kinds[t] == NUMBER else text_as_numbers(raw)
        y = np.where(np.isfinite(y), y, np.nan)
        return y, 0, np.zeros(0), moments, zeros, missing, task
    if counter.overflowed:
        raise BadInputError(f"target column {name!r} has more than {LEVEL_CAP} distinct "
                            "labels, too many for classification")
    labels, counts = counter.keys, np.asarray(counter.counts, dtype=float)
    if labels.size < 2:
        raise BadInputError(f"target column {name!r} is constant (one class)")
    lookup = {v: i for i, v in enumerate(labels.tolist())}
    y = np.array([lookup.get(v, -1) if v is not None and v == v else -1 for v in raw.tolist()],
                 dtype=np.int64)
    missing = int(s.n_rows - counts.sum())
    return y, int(labels.size), counts, np.full(5, np.nan), 0, missing, task
