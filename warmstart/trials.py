"""Reading and validating a table of finished trials before it is logged."""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.io import read_table
from warmstart.metrics import Metric
from warmstart.spaces import BOOL, SearchSpace

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
    return pd.DataFrame(rows)


def validate_trials(trials: TrialsInput, space: SearchSpace, metric: Metric) -> list[Trial]:
    """Check every trial against the family's space and the metric.

    Empty cells (NaN/None) in a parameter column mean "unset" (the estimator's default,
    or ``None`` where the parameter allows it). Raises :class:`BadInputError` naming the
    first problem and its row (1-based, as a spreadsheet shows it).
    """
    df = load_trials(trials)
    if df.shape[0] == 0:
        raise BadInputError("the trials table has no rows")
    if "score" not in df.columns:
        raise BadInputError("the trials table has no 'score' column")
    if df.columns.duplicated().any():
        raise BadInputError("the trials table has duplicate column names")
    params = [c for c in df.columns if c not in RESERVED]
    for name in params:
        if name not in space:
            raise BadInputError(
                f"trials table has parameter {name!r}, which this family does not declare "
                f"(declared: {', '.join(space.names)})"
            )
    out = []
    records = df.to_dict(orient="records")
    for i, rec in enumerate(records, start=1):
        where = f"trial row {i}"
        status = _status(rec.get("status"), where)
        score = _number(rec.get("score"), "score", where)
        if status == OK:
            if score is None:
                raise BadInputError(f"{where}: an 'ok' trial needs a finite numeric score")
            why = metric.check(score)
            if why:
                raise BadInputError(f"{where}: {why}")
        fit = _number(rec.get("fit_seconds"), "fit_seconds", where)
        if fit is not None and fit < 0:
            raise BadInputError(f"{where}: fit_seconds must not be negative ({fit})")
        error = rec.get("error")
        error = None if _blank(error) else str(error)
        config: dict[str, Any] = {}
        for name in params:
            value = rec[name]
            if _blank(value):
                param = space[name]
                if param.allow_none or None in param.choices:
                    config[name] = None
                continue  # unset: the estimator's default applies
            config[name] = _from_cell(value, space[name].kind)
        try:
            config = space.validate(config)
        except BadInputError as exc:
            raise BadInputError(f"{where}: {exc}") from None
        out.append(Trial(config, score, fit, status, error))
    return out


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA


def _status(value: Any, where: str) -> str:
    if _blank(value):
        return OK
    if value not in (OK, FAILED):
        raise BadInputError(f"{where}: status must be 'ok' or 'failed', not {value!r}")
    return value


def _number(value: Any, column: str, where: str) -> float | None:
    if _blank(value):
        return None
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
        try:
            value = float(str(value))
        except ValueError:
            raise BadInputError(f"{where}: {column} must be a number, not {value!r}") from None
    value = float(value)
    if not math.isfinite(value):
        raise BadInputError(f"{where}: {column} must be finite, not {value}")
    return value


def _from_cell(value: Any, kind: str) -> Any:
    """Undo what CSV does to values: numpy scalars, 'True'/'False' strings."""
    if isinstance(value, np.generic):
        value = value.item()
    if kind == BOOL and isinstance(value, str) and value.strip().lower() in ("true", "false"):
        return value.strip().lower() == "true"
    if kind == BOOL and isinstance(value, (int, float)) and value in (0, 1):
        return bool(value)
    return value
