"""Setting up a suggestion: which studies answer, whose trials, which neighbours.

:meth:`KnowledgeBase.suggest <warmstart.history.KnowledgeBase.suggest>` and the
backtest (:mod:`warmstart.backtest`) both build the strategies' input with
:func:`suggestion_context`, so the two always apply the same rules:

* **Metric.** Metrics are never mixed. Asked for none, the task's default metric
  (balanced accuracy, R²) is used when the family has studies of it, otherwise the
  metric most of the family's studies use (:func:`choose_metric`).
* **Row counts** of the past datasets come from their stored fingerprints and scale
  logged fit times to the new dataset.
* **Neighbours** are every same-task dataset with a study of the family and metric,
  nearest first (:func:`warmstart.similarity.nearest`).
"""

from __future__ import annotations

from collections.abc import Collection, Mapping
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import NothingToSuggestError
from warmstart.families.base import Family
from warmstart.fingerprint import Fingerprint
from warmstart.metrics import DEFAULT_METRIC
from warmstart.prediction_cache import PredictionStore
from warmstart.similarity import nearest
from warmstart.spaces import user_space
from warmstart.strategies import (
    Strategy,
    SuggestContext,
    Suggestions,
    TrialIndex,
    prepare_trials,
)
from warmstart.surrogate import SurrogateCache

# With a fit-time cap, strategies are asked for this many times k (the cap removes some).
CAPPED_OVERSAMPLING = 10


def choose_metric(studies: pd.DataFrame, task: str, metric: str | None = None) -> str:
    """The metric whose studies answer (see the module docstring).

    Parameters
    ----------
    studies : DataFrame
        Non-empty: the studies of one family for ``task``, with ``family`` and
        ``metric`` columns.
    metric : str, optional
        The metric asked for; :class:`NothingToSuggestError` when no study uses it.
    """
    counts = studies["metric"].value_counts()
    if metric is None:
        default = DEFAULT_METRIC[task]
        return default if default in counts.index else str(counts.index[0])
    if metric not in counts.index:
        family = studies["family"].iloc[0]
        raise NothingToSuggestError(
            f"no {family!r} study in the history uses metric {metric!r} "
            f"(available: {', '.join(counts.index)})"
        )
    return metric


def dataset_rows(fingerprints: Mapping[str, Fingerprint]) -> dict[str, float]:
    """Dataset id -> row count from its fingerprint (NaN when not recorded)."""
    return {i: float(fp.values.get("rows") or np.nan) for i, fp in fingerprints.items()}


def suggestion_context(query: Fingerprint, family: Family, studies: pd.DataFrame,
                       trials: pd.DataFrame, fingerprints: Mapping[str, Fingerprint],
                       names: Mapping[str, str], *, metric: str | None = None,
                       exclude: Collection[str] = (), space: Any = None, seed: int = 0,
                       candidates: list[dict[str, Any]] | None = None,
                       surrogates: SurrogateCache | None = None,
                       cache_dir: str | None = None) -> SuggestContext:
    """The strategies' input for ``query``: the history's answer, set up once.

    Parameters
    ----------
    query : Fingerprint
    family : Family
    studies : DataFrame
        Non-empty: the family's studies for the query's task (any metric).
    trials : DataFrame
        Their trials as prepared by :func:`~warmstart.strategies.prepare_trials`
        (configurations parsed or still JSON text; extra studies are dropped).
    fingerprints : mapping
        Dataset id -> stored fingerprint, for (at least) the studies' datasets.
    names : mapping
        Dataset id -> display name.
    metric : str, optional
        See :func:`choose_metric`.
    exclude : collection of str
        Dataset ids left out of the history (the backtest's held-out group).
    space : SearchSpace, JSON list or path of a JSON file, optional
        A user restriction of the family's space.
    seed : int
    candidates : list of dict, optional
        Configurations every strategy must choose from.
    surrogates : SurrogateCache, optional
        A cache to share with other contexts on the same history.
    cache_dir : str, optional
        Directory for strategies' JSON caches (``auto``'s choices).
    """
    task = query.task
    metric = choose_metric(studies, task, metric)
    keep = (studies["metric"] == metric) & ~studies["dataset_id"].isin(list(exclude))
    studies = studies[keep].reset_index(drop=True)
    in_history = trials["study_id"].isin(studies["study_id"])
    if not in_history.all():
        trials = trials[in_history].reset_index(drop=True)
    fps = {i: fingerprints[i] for i in set(studies["dataset_id"]) if i in fingerprints}
    same_task = {i: fp for i, fp in fps.items() if fp.task == task}
    restriction = None if space is None else user_space(space, family, task)
    full = family.space(task)
    return SuggestContext(
        query=query, family=family, space=restriction or full,
        neighbours=nearest(query, same_task, names, k=None), studies=studies,
        trials=TrialIndex(trials, full), dataset_rows=dataset_rows(fps), seed=seed,
        restricted=restriction is not None, candidates=candidates,
        surrogates=SurrogateCache() if surrogates is None else surrogates,
        fingerprints=same_task, cache_dir=cache_dir)


def ranked(strategy: Strategy, ctx: SuggestContext, k: int,
           max_fit_seconds: float | None = None) -> Suggestions:
    """The strategy's first ``k`` proposals (those within ``max_fit_seconds`` when
    given), ranked 1..k, as :class:`~warmstart.strategies.Suggestions`;
    :class:`NothingToSuggestError` when none is left."""
    want = k if max_fit_seconds is None else CAPPED_OVERSAMPLING * k
    out = strategy.propose(ctx, want)
    if max_fit_seconds is not None:
        out = [s for s in out if s.expected_fit_seconds is None
               or s.expected_fit_seconds <= max_fit_seconds]
    out = Suggestions(replace(s, rank=i + 1) for i, s in enumerate(out[:k]))
    if not out:
        raise NothingToSuggestError("no configuration passes the filters")
    return out


def suggest(kb: Any, query: Fingerprint, family: Family, strategy: Strategy, *, k: int,
            metric: str | None = None, space: Any = None,
            max_fit_seconds: float | None = None, seed: int = 0) -> Suggestions:
    """What :meth:`KnowledgeBase.suggest <warmstart.history.KnowledgeBase.suggest>`
    answers, for a query already fingerprinted and arguments already checked."""
    t = kb.tables(family=family.name, task=query.task)  # reads only this family's rows
    studies = t["studies"]
    studies = studies[(studies["family"] == family.name) & (studies["task"] == query.task)]
    if studies.empty:
        raise NothingToSuggestError(
            f"the history at {kb.path} has no {query.task} study of family "
            f"{family.name!r}; log one first (warmstart log ...)"
        )
    datasets = t["datasets"]
    ctx = suggestion_context(
        query, family, studies,
        # configs stay JSON text until a strategy reads them (most read a few rows)
        prepare_trials(t["trials"], studies, parse_configs=False),
        kb.fingerprints(datasets), dict(zip(datasets["dataset_id"], datasets["name"])),
        metric=metric, space=space, seed=seed, cache_dir=str(Path(kb.path) / ".cache"),
        surrogates=SurrogateCache(PredictionStore(kb.path)))  # predictions kept on disk
    return ranked(strategy, ctx, k, max_fit_seconds)


__all__ = ["choose_metric", "dataset_rows", "ranked", "suggest", "suggestion_context"]
