"""Trials from scikit-learn searches: a fitted search object or its saved ``cv_results_``.

A search's ``cv_results_`` (``pd.DataFrame(search.cv_results_)``, saved as CSV, Parquet
or JSON lines) becomes an ordinary trials table: the ``params`` column (or, when it is
missing or unreadable, the ``param_*`` columns) gives each trial's parameters,
``mean_test_score`` (``mean_test_<name>`` for several metrics) its score,
``mean_fit_time`` its fit seconds, and a NaN score marks a failed trial. Parameter names
prefixed by the pipeline step of the model (``model__C``) are stripped; parameters of
other steps are refused, because a study records the model's parameters only.

Written to CSV, the cells hold Python's text for the values (``None`` becomes an empty
cell in ``param_*`` columns, but stays ``None`` in ``params``, whose dictionaries numpy
writes as ``np.float64(0.1)``): :func:`parse_literal` reads them back without evaluating
any code.
"""

from __future__ import annotations

import ast
import json
import math
import numbers
from collections.abc import Collection, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from sklearn.pipeline import Pipeline

from warmstart.errors import BadInputError
from warmstart.families import FAMILIES, TASKS, Family

SCORE_PREFIX = "mean_test_"
PARAM_PREFIX = "param_"
STEP_SEP = "__"

# Keywords that change how fast or how reproducibly a model is fitted, not which model
# it is: a search's base estimator carries them, but a configuration should not.
NOT_SETTINGS = frozenset({"n_jobs", "verbose", "random_state", "warm_start", "cache_size",
                          "copy_X"})

_NUMPY_SCALARS = {
    **dict.fromkeys(("float64", "float32", "float16", "longdouble", "double"), float),
    **dict.fromkeys(("int64", "int32", "int16", "int8", "uint64", "uint32", "uint16",
                     "uint8", "intp"), int),
    "bool_": bool, "bool": bool, "str_": str,
}
_NAMED = {"None": None, "True": True, "False": False, "nan": math.nan, "inf": math.inf,
          "True_": True, "False_": False, "NaN": math.nan, "NAN": math.nan}


@dataclass(frozen=True)
class SearchTrials:
    """What a fitted search ran, ready for ``KnowledgeBase.log``.

    Attributes
    ----------
    trials : DataFrame
        One row per candidate: a column per parameter (object dtype; ``None`` is the
        value None, NaN means "not set"), ``score``, ``fit_seconds`` (mean over folds,
        seconds), ``status`` and ``error``.
    family, task : str
        Detected from the class of the (final pipeline step's) estimator.
    metric : str
        The metric the scores are in: the search's scorer name, or the estimator's own
        ``score`` (accuracy for a classifier, R² for a regressor).
    estimator : str
        The estimator's class, as the family names it (``sklearn.svm.SVC``).
    """

    trials: pd.DataFrame
    family: str
    task: str
    metric: str
    estimator: str


def parse_literal(text: str) -> Any:
    """Read a cell holding Python's text for a value; return ``text`` itself otherwise.

    Accepts literals (numbers, strings, ``None``, ``True``, lists, tuples, dicts),
    ``nan``/``inf`` and numpy's scalar reprs (``np.float64(0.1)``, ``np.True_``).
    Nothing is evaluated: any other expression (``SVC(C=1)``, ``sqrt``) is a string.
    """
    stripped = text.strip()
    if not stripped:
        return math.nan  # an empty cell: not set
    try:
        return _literal(ast.parse(stripped, mode="eval").body)
    except (SyntaxError, ValueError, TypeError, RecursionError, MemoryError):
        return text


def _literal(node: ast.AST) -> Any:
    if isinstance(node, ast.Constant):
        return node.value
    if isinstance(node, (ast.List, ast.Tuple)):
        items = [_literal(e) for e in node.elts]
        return items if isinstance(node, ast.List) else tuple(items)
    if isinstance(node, ast.Dict) and None not in node.keys:
        return {_literal(k): _literal(v) for k, v in zip(node.keys, node.values)}
    if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
        value = _literal(node.operand)
        if isinstance(value, (int, float)) and not isinstance(value, bool):
            return -value if isinstance(node.op, ast.USub) else value
    if isinstance(node, ast.Name) and node.id in _NAMED:
        return _NAMED[node.id]
    if isinstance(node, ast.Attribute) and _is_numpy(node.value) and node.attr in _NAMED:
        return _NAMED[node.attr]
    if (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
            and _is_numpy(node.func.value) and node.func.attr in _NUMPY_SCALARS
            and len(node.args) == 1 and not node.keywords):
        return _NUMPY_SCALARS[node.func.attr](_literal(node.args[0]))
    raise ValueError("not a literal")


def _is_numpy(node: ast.AST) -> bool:
    return isinstance(node, ast.Name) and node.id in ("np", "numpy")


def is_search_table(df: pd.DataFrame) -> bool:
    """Whether ``df`` looks like a search's ``cv_results_`` rather than a trials table."""
    names = [str(c) for c in df.columns]
    has_score = any(n.startswith(SCORE_PREFIX) for n in names)
    return has_score and ("params" in names or any(n.startswith(PARAM_PREFIX) for n in names))


def model_keywords(names: Collection[str], keywords: Collection[str],
                   step: str | None = None) -> dict[str, str]:
    """Map parameter names to the model's keywords, stripping the model's step prefix.

    Parameters
    ----------
    names : collection of str
        Parameter names as the search or the table gives them (``model__C`` or ``C``).
    keywords : collection of str
        The model's constructor keywords, used to tell which step is the model when
        ``step`` is not given.
    step : str, optional
        The model's step path in the pipeline (``"model"``, or ``"outer__model"`` when
        nested); ``""`` for a bare estimator. Inferred when None: the only prefix used,
        or the only one whose names are all model keywords.

    Raises :class:`BadInputError` naming every parameter that belongs to another step.
    """
    split = {n: n.rpartition(STEP_SEP) for n in names}
    steps = sorted({p for p, _, _ in split.values()})
    if step is None:
        fits = [s for s in steps if s and all(k in keywords for p, _, k in split.values()
                                              if p == s)]
        if steps == [""] or len(steps) == 1:
            step = steps[0] if steps else ""
        elif len(fits) == 1:
            step = fits[0]
        else:
            raise BadInputError(
                "cannot tell which pipeline step is the model: parameters name the steps "
                f"{', '.join(repr(s) for s in steps if s)}; keep only the model's columns")
    others = [n for n, (p, _, _) in split.items() if p != step]
    if step and step in others:
        raise BadInputError(
            f"the search replaced the model step {step!r} itself (parameter {step!r}); log "
            "the trials of each model as a separate study")
    if others:
        where = f"the model's step {step!r}" if step else "the model"
        raise BadInputError(
            f"parameter(s) {', '.join(map(repr, others))} do not belong to {where}: a study "
            "records the model's own parameters only; drop them, or log the trials of each "
            "setting of the other steps as separate studies")
    return {n: k for n, (_, _, k) in split.items()}


def score_column(df: pd.DataFrame, metric: str) -> str:
    """The ``mean_test_*`` column holding ``metric``'s scores."""
    found = [str(c)[len(SCORE_PREFIX):] for c in df.columns
             if str(c).startswith(SCORE_PREFIX)]
    if "score" in found:
        return SCORE_PREFIX + "score"
    if metric in found:
        return SCORE_PREFIX + metric
    raise BadInputError(
        f"these search results hold scores for several metrics ({', '.join(found)}) and "
        f"none is called {metric!r}: choose one with the metric (--metric NAME)")


def _row_configs(df: pd.DataFrame) -> list[dict[str, Any]]:
    """Each row's parameters: its ``params`` dict when readable, else its ``param_*`` cells.

    Values are raw (parsed from text where the file held text); a key left out is a
    parameter the search did not set for that candidate.
    """
    cells = [c for c in df.columns if str(c).startswith(PARAM_PREFIX)]
    whole = df["params"].tolist() if "params" in df.columns else [None] * len(df)
    cell_rows = df[cells].to_dict(orient="records") if cells else [{}] * len(df)
    out = []
    for params, row in zip(whole, cell_rows):
        if isinstance(params, str):
            params = parse_literal(params)
        if isinstance(params, Mapping):
            out.append({str(k): v for k, v in params.items()})
            continue
        config = {}
        for col, value in row.items():
            if isinstance(value, str):
                value = parse_literal(value)
            # scikit-learn leaves None and "not set" alike empty in param_* columns
            blank = value is None or (isinstance(value, float) and math.isnan(value))
            config[str(col)[len(PARAM_PREFIX):]] = _EMPTY if blank else value
        out.append(config)
    return out


_EMPTY = object()  # an empty param_* cell: None, or not set


def _resolve_empty(rows: list[dict[str, Any]], defaults: Mapping[str, Any]) -> None:
    """Read empty ``param_*`` cells as "not set" (NaN), which the trials check turns
    into None where the default is None; where it is not, the cell is ambiguous."""
    unclear = sorted({k for r in rows for k, v in r.items()
                      if v is _EMPTY and defaults.get(k) is not None})
    if unclear:
        raise BadInputError(
            f"these search results have no readable 'params' column, and empty cells in "
            f"{', '.join(PARAM_PREFIX + k for k in unclear)} may be None or not set (the "
            "defaults differ); save the table with its 'params' column")
    for r in rows:
        for k, v in r.items():
            if v is _EMPTY:
                r[k] = math.nan


def _last_rounds(df: pd.DataFrame, configs: list[dict[str, Any]],
                 resource: str | None) -> np.ndarray:
    """Rows to keep: for successive halving on samples, each candidate's last round.

    A halving search re-evaluates surviving candidates on more samples each round; the
    earlier rows are the same configuration scored on a subsample, so only each
    candidate's evaluation on the most samples is kept. When the resource is a parameter
    (``n_estimators``...), each round's rows are distinct configurations and all stay.
    """
    keep = np.ones(len(df), dtype=bool)
    if "iter" not in df.columns or "n_resources" not in df.columns:
        return keep
    budget = pd.to_numeric(df["n_resources"], errors="coerce").to_numpy(float)
    if resource is None:  # from a file: the resource is a parameter if one equals it
        resource = next((k for k in (configs[0] if configs else {})
                         if all(_number(c.get(k)) == b for c, b in zip(configs, budget))),
                        "n_samples")
    if resource != "n_samples":
        return keep
    rounds = pd.to_numeric(df["iter"], errors="coerce").to_numpy(float)
    last: dict[str, int] = {}
    for i, config in enumerate(configs):
        key = json.dumps(config, sort_keys=True, default=repr)
        if key not in last or rounds[i] >= rounds[last[key]]:
            last[key] = i
    keep[:] = False
    keep[list(last.values())] = True
    return keep


def _number(value: Any) -> float | None:
    if isinstance(value, numbers.Real) and not isinstance(value, bool):
        return float(value)
    return None


def search_table_trials(df: pd.DataFrame, metric: str, keywords: Mapping[str, Any], *,
                        step: str | None = None, resource: str | None = None,
                        settings: Mapping[str, Any] | None = None) -> pd.DataFrame:
    """Turn a ``cv_results_`` table into a trials table.

    Parameters
    ----------
    df : DataFrame of shape (n_rows, n_columns)
        ``pd.DataFrame(search.cv_results_)``, possibly read back from a file.
    metric : str
        Picks ``mean_test_<metric>`` when the table holds several metrics.
    keywords : mapping
        The model's constructor keywords and their defaults (``get_params()``).
    step, resource : str, optional
        The model's pipeline step path and a halving search's resource, when known.
    settings : mapping, optional
        Constructor arguments of the search's base estimator, applied under each
        candidate's parameters (what was run beside the searched values).

    Returns
    -------
    DataFrame of shape (n_trials, n_params + 4)
        Parameter columns (object dtype; NaN = not set), ``score``, ``fit_seconds``,
        ``status`` and ``error``.
    """
    column = score_column(df, metric)
    configs = _row_configs(df)
    keep = _last_rounds(df, configs, resource)
    names = list(dict.fromkeys(k for c in configs for k in c))
    rename = model_keywords(names, keywords, step)
    if len(set(rename.values())) < len(rename):
        raise BadInputError("two columns set the same model parameter: "
                            f"{', '.join(n for n in rename if n != rename[n])}")
    rows = [{**(settings or {}), **{rename[k]: v for k, v in c.items()}}
            for c, kept in zip(configs, keep) if kept]
    _resolve_empty(rows, keywords)
    columns = list(dict.fromkeys([*(settings or {}), *rename.values()]))
    out = pd.DataFrame({k: pd.Series([r.get(k, math.nan) for r in rows], dtype=object)
                        for k in columns}, index=range(len(rows)))
    score = pd.to_numeric(df[column], errors="coerce").to_numpy(float)[keep]
    out["score"] = score
    fit = (pd.to_numeric(df["mean_fit_time"], errors="coerce").to_numpy(float)[keep]
           if "mean_fit_time" in df.columns else np.full(len(rows), np.nan))
    out["fit_seconds"] = np.where(np.isfinite(fit) & (fit >= 0), fit, np.nan)
    failed = ~np.isfinite(score)
    out["status"] = np.where(failed, "failed", "ok")
    out["error"] = np.where(failed, f"{column} is NaN in the search results", None)
    return out


def final_estimator(estimator: Any) -> tuple[Any, str]:
    """The model at the end of (possibly nested) pipelines, and its step path."""
    path = []
    while isinstance(estimator, Pipeline):
        name, estimator = estimator.steps[-1]
        path.append(name)
    return estimator, STEP_SEP.join(path)


def family_of(estimator: Any) -> tuple[Family, str]:
    """The family and task whose estimator class is exactly ``type(estimator)``."""
    cls = type(estimator)
    for fam in FAMILIES.values():
        for task in TASKS:
            if fam.estimator_class(task) is cls:
                return fam, task
    known = "; ".join(f"{f.name} ({', '.join(c.rpartition('.')[2] for c in f.estimators.values())})"
                      for f in FAMILIES.values())
    raise BadInputError(f"the search's model is {cls.__module__}.{cls.__qualname__}, which no "
                        f"family uses; known families: {known}")


def search_metric(search: Any, task: str, metric: str | None = None) -> tuple[str, str]:
    """The metric a search scored with and the ``cv_results_`` name of its scores.

    Returns ``(metric_name, key)``: scores are in ``mean_test_<key>``. With
    ``scoring=None`` the search used the estimator's own ``score``: accuracy for a
    classifier, R² for a regressor (scikit-learn's ``ClassifierMixin.score`` and
    ``RegressorMixin.score``). With several metrics, ``metric`` (else ``refit`` when it
    names one) picks the scores.
    """
    scoring = search.scoring
    if getattr(search, "multimetric_", False):
        found = [str(c)[len(SCORE_PREFIX):] for c in search.cv_results_
                 if str(c).startswith(SCORE_PREFIX)]
        key = metric if metric is not None else (
            search.refit if isinstance(search.refit, str) else None)
        if key not in found:
            raise BadInputError(f"the search scored several metrics ({', '.join(found)}): "
                                "choose one with metric=NAME")
        named = scoring.get(key) if isinstance(scoring, Mapping) else key
        return (named if isinstance(named, str) else key), key
    if scoring is None or isinstance(scoring, str):
        used = scoring or ("accuracy" if task == "classification" else "r2")
        if metric is not None and metric != used:
            what = repr(used) if scoring else f"the estimator's default score ({used})"
            raise BadInputError(f"the search scored with {what}, not {metric!r}")
        return used, "score"
    if metric is None:
        raise BadInputError("the search's scoring is a function, whose metric cannot be "
                            "named from it: pass metric=NAME (and its direction if it is "
                            "not a scikit-learn scorer)")
    return metric, "score"


def estimator_settings(estimator: Any, family: Family, task: str) -> dict[str, Any]:
    """Constructor arguments of ``estimator`` that differ from the family's own.

    A search's base estimator (``RandomForestClassifier(n_estimators=50)``) ran every
    candidate with those settings, so they belong to each trial's configuration;
    keywords in :data:`NOT_SETTINGS` are left out.
    """
    base = family.make_estimator(task, {}).get_params(deep=False)
    return {k: v for k, v in estimator.get_params(deep=False).items()
            if k not in NOT_SETTINGS and not _same_setting(v, base.get(k, _ABSENT))}


_ABSENT = object()


def _same_setting(a: Any, b: Any) -> bool:
    if a is b:
        return True
    if _number(a) is not None and _number(b) is not None:
        x, y = _number(a), _number(b)
        return x == y or (math.isnan(x) and math.isnan(y))
    try:
        return type(a) is type(b) and bool(a == b)
    except (TypeError, ValueError):  # arrays and the like: treat as a setting
        return False


def trials_from_search(search: Any, metric: str | None = None) -> SearchTrials:
    """The trials a fitted scikit-learn search ran, with their family and metric.

    Parameters
    ----------
    search : fitted GridSearchCV, RandomizedSearchCV, HalvingGridSearchCV or
        HalvingRandomSearchCV
        Over a bare estimator or a Pipeline whose last step is the model.
    metric : str, optional
        For a search over several metrics, the one to record (default: ``refit``'s);
        for a callable scorer, its name. Must agree with a named scorer.

    Returns
    -------
    SearchTrials
        The trials table (every candidate; for halving on samples, its evaluation on
        the most samples), the family and task from the model's class, the metric.

    Raises :class:`BadInputError` for an unfitted search, a model class no family uses
    (naming the known families), or parameters of pipeline steps other than the model.
    """
    results = getattr(search, "cv_results_", None)
    if results is None or not hasattr(search, "estimator"):
        raise BadInputError(f"{type(search).__name__} is not a fitted scikit-learn search "
                            "(no cv_results_): fit it first")
    model, step = final_estimator(search.estimator)
    family, task = family_of(model)
    name, key = search_metric(search, task, metric)
    keywords = model.get_params(deep=False)
    table = search_table_trials(pd.DataFrame(results), key, keywords, step=step,
                                resource=getattr(search, "resource", None),
                                settings=estimator_settings(model, family, task))
    return SearchTrials(table, family.name, task, name, family.estimators[task])
