"""Reading and validating a table of finished trials before it is logged.

:func:`check_trials` records what was run: each parameter is checked by the family's
scikit-learn estimator itself (its declared parameter constraints, which ``fit``
checks first), not by warmstart's search space, so
scikit-learn's defaults, wider ranges, strings such as ``'sqrt'`` and parameters the
space does not search are all stored as given. Tables saved from a search's
``cv_results_`` are read too (see :mod:`warmstart.searches`). Every problem in the table
is reported at once.
"""

from __future__ import annotations

import math
import numbers
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.families.base import Family
from warmstart.io import read_table
from warmstart.metrics import Metric
from warmstart.searches import (
    is_search_table,
    model_keywords,
    parse_literal,
    search_table_trials,
)

RESERVED = ("score", "fit_seconds", "status", "error")
OK, FAILED = "ok", "failed"


@dataclass(frozen=True)
class Trial:
    """One evaluated configuration."""

    config: dict[str, Any]
    score: float | None
    fit_seconds: float | None
    status: str
    error: str | None


TrialsInput = pd.DataFrame | str | os.PathLike | Sequence[Mapping[str, Any]]


def load_trials(trials: TrialsInput) -> pd.DataFrame:
    """Accept a DataFrame, a list of dicts, or a CSV / Parquet / JSON-lines file."""
    if isinstance(trials, pd.DataFrame):
        return trials
    if isinstance(trials, (str, os.PathLike)):
        return read_table(trials)
    rows = list(trials)
    if not all(isinstance(r, Mapping) for r in rows):
        raise BadInputError("trials must be a table or a list of objects")
    # object columns keep an explicit None apart from a missing key (NaN)
    return pd.DataFrame(rows, dtype=object)


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA


def _to_number(value: Any, column: str) -> tuple[float | None, str | None]:
    """``(number, None)``, ``(None, None)`` for an empty cell, or ``(None, why)``."""
    if _blank(value):
        return None, None
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
        try:
            value = float(str(value))
        except ValueError:
            return None, f"{column} must be a number, not {value!r}"
    value = float(value)
    if not math.isfinite(value):
        return None, f"{column} must be finite, not {value}"
    return value, None


# -- checking trials with the estimator's own parameter validation -------------------

MAX_PROBLEM_LINES = 20
_UNSET = object()  # the cell leaves the parameter at the estimator's default
_BLANK = object()  # an empty cell: None where the estimator's default is None, else unset
_SCORE_WORDS = ("score", "acc", "auc", "r2", "f1", "loss", "metric", "result", "test",
                "valid", "val_", "cv_", "perf", "precision", "recall")
_TIME_WORDS = ("time", "sec", "duration", "elapsed", "runtime")


class EstimatorRules:
    """What one family's estimator for one task accepts, with cached verdicts.

    Built from the estimator the family constructs (its fixed keywords applied) and the
    class's scikit-learn parameter constraints (``_parameter_constraints``, what
    ``BaseEstimator._validate_params`` checks at the start of ``fit``). scikit-learn
    checks each parameter on its own, so each distinct (parameter, value) pair is
    checked once however many trials repeat it.
    """

    def __init__(self, family: Family, task: str):
        from sklearn.utils._param_validation import make_constraint  # loads scikit-learn

        estimator = family.make_estimator(task, {})
        self.estimator = type(estimator).__name__
        self.defaults: dict[str, Any] = estimator.get_params(deep=False)
        self._declared = getattr(type(estimator), "_parameter_constraints", {})
        self._constraints = {k: [make_constraint(c) for c in v]
                             for k, v in self._declared.items() if v != "no_validation"}
        self._cache: dict[tuple, tuple[Any, str | None]] = {}

    def unknown(self, column: str, name: str) -> str | None:
        """Why ``name`` is not a keyword of the estimator, or None when it is one."""
        if name in self.defaults:
            return None
        hint = (" (a saved row index? write the file with index=False)"
                if column.startswith("Unnamed:") or column in ("", "index") else "")
        return (f"trials table has parameter {column!r}, which {self.estimator} does not "
                f"declare{hint}; its keywords: {', '.join(sorted(self.defaults))}")

    def check(self, name: str, cell: Any) -> tuple[Any, str | None]:
        """``(value, None)`` to store (``_UNSET`` for none) or ``(None, why)``."""
        try:
            key = (name, type(cell), "nan" if cell != cell else cell)
            hash(key)
        except (TypeError, ValueError):  # unhashable (dict, list) or ambiguous (array)
            key = (name, type(cell), repr(cell))
        verdict = self._cache.get(key)
        if verdict is None:
            verdict = self._cache[key] = self._verdict(name, cell)
        return verdict

    def _verdict(self, name: str, cell: Any) -> tuple[Any, str | None]:
        from sklearn.utils._param_validation import (  # loads scikit-learn
            InvalidParameterError,
            validate_parameter_constraints,
        )

        value = _cell_value(cell)
        if value is _BLANK:
            return (None if self.defaults.get(name) is None else _UNSET), None
        if value is None and not self._accepts(name, None):
            return _UNSET, None  # a null where None is no value: not set
        value, why = _json_value(value)
        if why:
            return None, f"parameter {name!r} = {_short(value)} cannot be stored as JSON ({why})"
        for candidate in (value, *_csv_readings(value)):
            if self._accepts(name, candidate):
                return self._canonical(name, candidate), None
        try:
            validate_parameter_constraints({name: self._declared[name]}, {name: value},
                                           caller_name=self.estimator)
        except InvalidParameterError as exc:
            return None, str(exc)
        return value, None  # pragma: no cover - _accepts and scikit-learn agree

    def check_sorted(self, name: str, distinct: np.ndarray
                     ) -> tuple[np.ndarray, list[str | None] | None]:
        """Values to store and problems (None: none) for sorted distinct numbers.

        An interval constraint that holds at both ends holds between them (scikit-learn's
        ``Interval`` checks the type, then the bounds), so when one does, scikit-learn is
        asked about the two ends only; otherwise each value is checked on its own.
        """
        from sklearn.utils._param_validation import Interval  # loads scikit-learn

        ends = distinct[[0, -1]].tolist() if distinct.size > 2 else None
        if ends and type(ends[0]) in (int, float) and all(map(math.isfinite, ends)):
            for c in self._constraints.get(name, ()):
                if isinstance(c, Interval) and all(c.is_satisfied_by(v) for v in ends):
                    as_float = type(self._canonical(name, ends[0])) is float
                    return distinct.astype(float if as_float else distinct.dtype
                                           ).astype(object), None
        verdicts = [self.check(name, v) for v in distinct.tolist()]
        values = np.empty(len(verdicts), dtype=object)
        values[:] = [_UNSET if why else value for value, why in verdicts]
        whys = [why for _, why in verdicts]
        return values, (whys if any(whys) else None)

    def _accepts(self, name: str, value: Any) -> bool:
        constraints = self._constraints.get(name)
        return constraints is None or any(c.is_satisfied_by(value) for c in constraints)

    def _canonical(self, name: str, value: Any) -> Any:
        """A whole number for a float-only parameter is stored as a float (``C=1`` and
        ``C=1.0`` are one configuration); where integers are allowed they mean something
        else (``max_features=1`` is one feature), so they stay."""
        if type(value) is not int:
            return value
        constraints = self._constraints.get(name, ())
        if any(getattr(c, "type", None) in (int, numbers.Integral) for c in constraints):
            return value
        return float(value) if self._accepts(name, float(value)) else value


_RULES: dict[tuple, EstimatorRules] = {}


def estimator_rules(family: Family, task: str) -> EstimatorRules:
    """The (cached) :class:`EstimatorRules` of ``family`` for ``task``."""
    key = (family.name, task, family.estimators[task],
           repr(sorted((family.fixed or {}).get(task, {}).items())))
    if key not in _RULES:
        _RULES[key] = EstimatorRules(family, task)
    return _RULES[key]


def _cell_value(cell: Any) -> Any:
    """A cell as a Python value: numpy scalars unwrapped, text parsed, empties _BLANK."""
    if cell is None:
        return None  # an explicit None (JSON null, a search's None)
    if isinstance(cell, np.generic):
        cell = cell.item()
    if isinstance(cell, str):
        cell = parse_literal(cell)
    if _blank(cell) or cell is pd.NaT:
        return _BLANK
    return cell


def _csv_readings(value: Any) -> tuple[Any, ...]:
    """What a value may have been before a CSV or a DataFrame changed it: a whole float
    from an integer column with empty cells, 0/1 or 'true'/'false' for a flag."""
    if isinstance(value, float) and value.is_integer():
        return (int(value),)
    if type(value) is int and value in (0, 1):
        return (bool(value),)
    if isinstance(value, str) and value.strip().lower() in ("true", "false"):
        return (value.strip().lower() == "true",)
    return ()


def _json_value(value: Any) -> tuple[Any, str | None]:
    """``value`` as plain JSON types (tuples as lists, numpy scalars unwrapped) or why not."""
    if isinstance(value, np.generic):
        value = value.item()
    if value is None or isinstance(value, (bool, int, str)):
        return value, None
    if isinstance(value, float):
        return (value, None) if math.isfinite(value) else (value, "not a finite number")
    if isinstance(value, (list, tuple)):
        items = [_json_value(v) for v in value]
        bad = next((why for _, why in items if why), None)
        return ([v for v, _ in items], None) if bad is None else (value, bad)
    if isinstance(value, Mapping):
        if not all(isinstance(k, str) for k in value):
            return value, "dictionary keys must be strings"
        items = {k: _json_value(v) for k, v in value.items()}
        bad = next((why for _, why in items.values() if why), None)
        return ({k: v for k, (v, _) in items.items()}, None) if bad is None else (value, bad)
    return value, f"a {type(value).__name__} object; give its parameters instead"


def _short(value: Any, width: int = 60) -> str:
    text = repr(value)
    return text if len(text) <= width else text[: width - 3] + "..."


class _Problems:
    """Problems found in a trials table, each with the rows it occurs on."""

    def __init__(self) -> None:
        self._rows: dict[str, list[int]] = {}

    def add(self, text: str, row: int | None = None) -> None:
        rows = self._rows.setdefault(text, [])
        if row is not None:
            rows.append(row)

    def __len__(self) -> int:
        return len(self._rows)

    def lines(self) -> list[str]:
        """One line per problem: table-wide ones first, then by the first row they are on."""
        out = []
        for text, rows in sorted(self._rows.items(), key=lambda kv: kv[1][:1] or [0]):
            if not rows:
                out.append(text)
            elif len(rows) == 1:
                out.append(f"trial row {rows[0]}: {text}")
            else:
                shown = ", ".join(map(str, rows[:5]))
                more = f" and {len(rows) - 5} more" if len(rows) > 5 else ""
                out.append(f"trial rows {shown}{more}: {text}")
        return out

    def raise_if_any(self) -> None:
        lines = self.lines()
        if not lines:
            return
        if len(lines) == 1:
            raise BadInputError(lines[0])
        shown = lines[:MAX_PROBLEM_LINES]
        if len(lines) > MAX_PROBLEM_LINES:
            shown.append(f"... and {len(lines) - MAX_PROBLEM_LINES} more")
        raise BadInputError(f"the trials table has {len(lines)} problems:\n  "
                            + "\n  ".join(shown))


def check_trials(trials: TrialsInput, family: Family, task: str,
                 metric: Metric) -> list[Trial]:
    """Check a trials table with the family's estimator and return its trials.

    Parameters
    ----------
    trials : DataFrame, path or list of dicts
        One row per trial: a column per estimator keyword (names may carry the model's
        pipeline step prefix, ``model__C``), ``score``, optional ``fit_seconds``,
        ``status`` and ``error``. A search's ``cv_results_`` table is accepted as well.
    family : Family
    task : {"classification", "regression"}
    metric : Metric
        Checks the scores' range; picks ``mean_test_<name>`` in multi-metric results.

    Returns
    -------
    list of Trial
        Configurations hold the values as given (JSON types; a float-only parameter's
        whole number as a float). An empty cell is None where the estimator's default is
        None, and otherwise leaves the parameter out (its default applies). An explicit
        None (JSON null) is the value None where the estimator accepts None, and leaves
        the parameter out where it does not.

    Raises :class:`BadInputError` listing every problem found (up to
    ``MAX_PROBLEM_LINES`` lines), each with the rows it is on, 1-based as a spreadsheet
    shows them.
    """
    df = load_trials(trials)
    rules = estimator_rules(family, task)
    if is_search_table(df):
        df = search_table_trials(df, metric.name, rules.defaults)
    if df.shape[0] == 0:
        raise BadInputError("the trials table has no rows")
    if df.columns.duplicated().any():
        raise BadInputError("the trials table has duplicate column names")
    problems = _Problems()
    mapped: list[str] = []
    if "score" not in df.columns:
        why, mapped = _missing_score(df, metric, rules)
        problems.add(why)
    # the columns named in that advice are not also reported as unknown parameters
    configs = _configs(df.drop(columns=mapped), rules, problems)
    outcomes = _outcomes(df, metric, problems)
    problems.raise_if_any()
    return [Trial(config, *outcome) for config, outcome in zip(configs, outcomes)]


def _configs(df: pd.DataFrame, rules: EstimatorRules, problems: _Problems
             ) -> list[dict[str, Any]]:
    columns = [c for c in df.columns if c not in RESERVED]
    keyword = model_keywords([str(c) for c in columns], rules.defaults)
    names, values = [], []
    for column in columns:
        name = keyword[str(column)]
        why = rules.unknown(str(column), name)
        if why:
            problems.add(why)
            continue
        names.append(name)
        values.append(_column(df[column], name, rules, problems))
    sparse = [any(v is _UNSET for v in col) for col in values]
    if not any(sparse):
        return [dict(zip(names, row)) for row in zip(*values)] if names else \
            [{} for _ in range(df.shape[0])]
    return [{k: v for k, v in zip(names, row) if v is not _UNSET} for row in zip(*values)]


def _column(series: pd.Series, name: str, rules: EstimatorRules, problems: _Problems
            ) -> list[Any]:
    """One parameter's value on every row (``_UNSET`` where it is left out or wrong).

    A numeric column is checked once per distinct value (see
    :meth:`EstimatorRules.check_sorted`); any other cell by cell, with cached verdicts.
    """
    if series.dtype.kind not in "biuf":
        out = []
        for row, cell in enumerate(series.tolist(), start=1):
            value, why = rules.check(name, cell)
            if why:
                problems.add(why, row)
            out.append(_UNSET if why else value)
        return out
    arr = series.to_numpy()
    blank = np.isnan(arr) if arr.dtype.kind == "f" else np.zeros(arr.shape, dtype=bool)
    out = np.empty(arr.shape, dtype=object)
    out[blank] = rules.check(name, math.nan)[0]
    distinct, inverse = np.unique(arr[~blank], return_inverse=True)
    kept, whys = rules.check_sorted(name, distinct)
    out[~blank] = kept[inverse]
    if whys is not None:
        hit = np.array([w is not None for w in whys], dtype=bool)[inverse]
        for row, k in zip(np.flatnonzero(~blank)[hit] + 1, inverse[hit]):
            problems.add(whys[k], int(row))
    return out.tolist()


def _outcomes(df: pd.DataFrame, metric: Metric, problems: _Problems
              ) -> list[tuple[float | None, float | None, str, str | None]]:
    """Each row's ``(score, fit_seconds, status, error)``, problems added to ``problems``."""
    n = df.shape[0]
    status = np.full(n, OK, dtype=object)
    if "status" in df.columns:
        given = df["status"]
        known = given.isin([OK, FAILED]).to_numpy()
        status[known] = given[known].to_numpy()
        for row in np.flatnonzero(~known & given.notna().to_numpy()):
            problems.add(f"status must be 'ok' or 'failed', not {given.iloc[row]!r}", row + 1)
            status[row] = FAILED
    ok = status == OK
    score = _numbers(df, "score", problems)
    if "score" in df.columns:
        for row in np.flatnonzero(ok & df["score"].isna().to_numpy()):
            problems.add("an 'ok' trial needs a finite numeric score", row + 1)
        _check_range(score, ok & np.isfinite(score), metric, problems)
    fit = _numbers(df, "fit_seconds", problems)
    for row in np.flatnonzero(fit < 0):
        problems.add(f"fit_seconds must not be negative ({fit[row]})", row + 1)
    errors = ([None if _blank(e) else str(e) for e in df["error"].tolist()]
              if "error" in df.columns else [None] * n)
    return list(zip(_or_none(score), _or_none(fit), status.tolist(), errors))


def _or_none(values: np.ndarray) -> list[float | None]:
    return [None if math.isnan(x) else x for x in values.tolist()]


def _numbers(df: pd.DataFrame, column: str, problems: _Problems) -> np.ndarray:
    """A numeric column as floats, NaN where empty (or wrong, with a problem added)."""
    if column not in df.columns:
        return np.full(df.shape[0], np.nan)
    series = df[column]
    if series.dtype.kind in "iuf":
        values = np.array(series.to_numpy(dtype=float))  # a copy: pandas may share memory
        cells = {int(r): values[r] for r in np.flatnonzero(np.isinf(values))}
    else:
        values = np.full(df.shape[0], np.nan)
        cells = dict(enumerate(series.tolist()))
    for row, cell in cells.items():
        number, why = _to_number(cell, column)
        if why:
            problems.add(why, row + 1)
        values[row] = np.nan if number is None else number
    return values


def _check_range(score: np.ndarray, ok: np.ndarray, metric: Metric,
                 problems: _Problems) -> None:
    given = score[ok]
    if (metric.low, metric.high) == (0.0, 1.0) and given.size and given.min() >= 1 \
            and given.max() <= 100 and given.max() > 1:
        problems.add(f"the scores are outside the range [0, 1] of {metric.name} and look "
                     f"like percentages (all {given.size} lie between 1 and 100): divide "
                     "them by 100")
        return
    for row in np.flatnonzero(ok & ((score < metric.low) | (score > metric.high))):
        problems.add(metric.check(float(score[row])), row + 1)


def _missing_score(df: pd.DataFrame, metric: Metric, rules: EstimatorRules
                   ) -> tuple[str, list[str]]:
    """Say which columns were found and which likely hold the score and the fit time;
    return that and the columns the advice names."""
    found = [str(c) for c in df.columns]
    free = [c for c in found if c not in rules.defaults and c not in RESERVED
            and pd.api.types.is_numeric_dtype(df[c])]
    scores = [c for c in free if _mentions(c, (*_SCORE_WORDS, metric.name.lower()))]
    times = [c for c in free if _mentions(c, _TIME_WORDS) and c not in scores]
    renames, named = [], list(scores)
    if scores:
        alt = f" (or {', '.join(map(repr, scores[1:]))})" if len(scores) > 1 else ""
        renames.append(f"{scores[0]!r}{alt} -> 'score'")
    if times and "fit_seconds" not in found:
        renames.append(f"{times[0]!r} -> 'fit_seconds'")
        named.append(times[0])
    advice = (f"likely mapping: {', '.join(renames)}" if scores else
              "rename the column holding each trial's score to 'score'")
    return (f"the trials table has no 'score' column (columns found: {', '.join(found)}); "
            f"{advice}"), named


def _mentions(name: str, words: Sequence[str]) -> bool:
    return any(w in name.lower() for w in words)
