"""What travels between the service and its client: JSON forms of the library's results.

Each ``*_from_dict`` rebuilds the object a :class:`~warmstart.history.KnowledgeBase`
method returns from that object's ``to_dict()``, so a result asked of a server is the
same Python object, field for field, as one asked of the directory.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from warmstart.backtest import BacktestResult
from warmstart.fingerprint import Fingerprint
from warmstart.history import LoggedStudy
from warmstart.maintenance import CheckReport, Finding
from warmstart.similarity import Neighbour
from warmstart.strategies import Suggestion
from warmstart.trials import TrialsInput, load_trials

# The "kind" of an error answer, which the client turns back into the library's error.
BAD_INPUT, INVALID_REQUEST, NOTHING_TO_SUGGEST = "bad_input", "invalid_request", "nothing"
NOT_FOUND, UNAUTHORISED, WRITES_DISABLED = "not_found", "unauthorised", "writes_disabled"
TOO_LARGE, INTERNAL = "too_large", "internal"


def jsonable(obj: Any) -> Any:
    """``obj`` with NaN and infinities as None and numpy scalars as Python ones."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return jsonable(obj.item())
    if isinstance(obj, pd.Timestamp):
        return obj.isoformat()
    return obj


def _nan(x: Any) -> float:
    return math.nan if x is None else float(x)


# -- tables ---------------------------------------------------------------------------------
def frame_to_wire(df: pd.DataFrame) -> dict[str, Any]:
    """A DataFrame as ``{"columns", "dtypes", "rows"}`` (timestamps in ISO 8601)."""
    rows = df.astype(object).where(df.notna(), None).to_numpy().tolist()
    return {"columns": [str(c) for c in df.columns],
            "dtypes": [str(t) for t in df.dtypes], "rows": jsonable(rows)}


def frame_from_wire(d: dict[str, Any]) -> pd.DataFrame:
    """Inverse of :func:`frame_to_wire`: the same columns with the same dtypes."""
    df = pd.DataFrame(d["rows"], columns=d["columns"])
    for col, dtype in zip(d["columns"], d["dtypes"]):
        if dtype.startswith("datetime64"):
            df[col] = pd.to_datetime(df[col], utc="UTC" in dtype, format="ISO8601")
        df[col] = df[col].astype(dtype)
    return df


def trials_to_wire(trials: TrialsInput) -> list[dict[str, Any]]:
    """A trials table (frame, file or list of dicts) as JSON objects.

    A blank cell (NaN, as CSV gives it) is left out of its object, so the server reads it
    as blank too (``None`` where the estimator's default is None, else unset); an
    explicit None (as JSON lines can hold) is sent as null and stays None.
    """
    df = load_trials(trials)
    return jsonable([{k: v for k, v in row.items()
                      if not (isinstance(v, float) and math.isnan(v))}
                     for row in df.astype(object).to_dict(orient="records")])


def stored_fingerprint(d: dict[str, Any]) -> Fingerprint:
    """A stored fingerprint from its ``to_dict()``: as trusted as the history it came from
    (stored ones carry no dataset hash, which :meth:`Fingerprint.from_dict` requires)."""
    return Fingerprint({k: _nan(v) for k, v in d["meta_features"].items()},
                       int(d["catalogue_version"]), d["task"], d["target"],
                       d.get("dataset_hash", ""), list(d.get("warnings", [])))


# -- results ----------------------------------------------------------------------------------
def neighbour_from_dict(d: dict[str, Any]) -> Neighbour:
    def rows(items):
        return [(r["meta_feature"], _nan(r["query"]), _nan(r["neighbour"])) for r in items]

    distance = math.inf if d["distance"] is None else float(d["distance"])
    return Neighbour(d["dataset_id"], d["name"], distance, _nan(d["similarity"]),
                     int(d["shared_meta_features"]), rows(d["agree_most"]),
                     rows(d["differ_most"]))


def suggestion_from_dict(d: dict[str, Any]) -> Suggestion:
    fields = dict(d)
    fields["support"] = tuple(dict(s) for s in d.get("support", ()))
    return Suggestion(**fields)


def logged_from_dict(d: dict[str, Any]) -> LoggedStudy:
    return LoggedStudy(**d)


def check_from_dict(d: dict[str, Any]) -> CheckReport:
    return CheckReport(d["path"], int(d["format_version"]),
                       [Finding(**f) for f in d["findings"]], dict(d["counts"]))


def backtest_from_dict(d: dict[str, Any]) -> BacktestResult:
    cols = ["dataset_id", "name", "task", "strategy", "k", "regret"]
    per = pd.DataFrame(d["per_dataset"], columns=cols)
    per["k"] = per["k"].astype(int)
    per["regret"] = per["regret"].astype(float)
    return BacktestResult(d["family"], tuple(int(k) for k in d["ks"]), list(d["strategies"]),
                          dict(d["metrics"]), per, {k: dict(v) for k, v in d["lookups"].items()},
                          list(d["skipped"]))
