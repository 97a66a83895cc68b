"""Why a suggestion is where it is: the datasets it did best on, and its source trial.

A pooled strategy ranks a configuration for what it adds to the list (see
:mod:`warmstart.strategies.portfolio`). The explanation therefore names the datasets
where that configuration was actually run and scored highest (normalised score,
1 = the best trial of its study), not merely some dataset where it was run, and takes
the suggestion's source trial from the first of them.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import pandas as pd

from warmstart.similarity import Neighbour
from warmstart.strategies.context import SuggestContext

BEST_ON = 3


def observed_support(ctx: SuggestContext, src: pd.DataFrame, key: str,
                     prefer: Sequence[str] = (), limit: int = BEST_ON
                     ) -> tuple[dict[str, Any], ...]:
    """The datasets where configuration ``key`` was run, best normalised score first.

    Parameters
    ----------
    ctx : SuggestContext
    src : DataFrame
        Trials with ``study_id``, ``key`` and ``normalised`` columns.
    key : str
        Canonical key of the configuration.
    prefer : sequence of str
        Dataset ids listed first, in this order, when the configuration ran there (the
        datasets it added most to the portfolio objective).
    limit : int

    Returns
    -------
    tuple of dict
        ``{"dataset_id", "name", "normalised"}`` (mean over repeats and studies), at most
        ``limit`` entries.
    """
    mine = src[src["key"] == key]
    if mine.empty:
        return ()
    dataset_of = dict(zip(ctx.studies["study_id"], ctx.studies["dataset_id"]))
    score = mine.groupby(mine["study_id"].map(dataset_of))["normalised"].mean()
    rank = {d: i for i, d in enumerate(prefer)}
    order = sorted(score.index, key=lambda d: (rank.get(d, len(rank)), -score[d], d))
    names = _names(ctx)
    return tuple({"dataset_id": d, "name": names.get(d, d), "normalised": float(score[d])}
                 for d in order[:limit])


def pick_source(ctx: SuggestContext, src: pd.DataFrame, key: str,
                best_on: Sequence[dict[str, Any]]) -> tuple[Any, Neighbour | None]:
    """The best trial of ``key`` on the first ``best_on`` dataset, and that neighbour
    (``(None, None)`` when the configuration was never run)."""
    if not best_on:
        return None, None
    d = best_on[0]["dataset_id"]
    nb = next((n for n in ctx.neighbours if n.dataset_id == d), None)
    studies = set(ctx.dataset_studies(d))
    t = src[(src["key"] == key) & src["study_id"].isin(studies)]
    if nb is None or t.empty:
        return None, None
    return t.sort_values("normalised", ascending=False, kind="stable").iloc[0], nb


def _names(ctx: SuggestContext) -> dict[str, str]:
    return {n.dataset_id: n.name for n in ctx.neighbours}


__all__ = ["BEST_ON", "observed_support", "pick_source"]
