"""What every ranking strategy shares: its inputs, its output, score normalisation.

Scores are normalised per study by min-max over the study's ``ok`` trials, oriented so
that 1 is the study's best and 0 its worst whatever the metric's direction; a study
whose trials all scored the same gets 1 for every trial. Min-max (rather than ranks)
keeps the size of gaps: a configuration that is nearly as good as the best scores
close to 1 even when many trials sit between them.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pandas as pd

from warmstart.families.base import Family
from warmstart.fingerprint import Fingerprint
from warmstart.metrics import MINIMIZE
from warmstart.similarity import Neighbour
from warmstart.spaces import SearchSpace


def normalise_scores(scores: np.ndarray, direction: str) -> np.ndarray:
    """Min-max normalise one study's scores to [0, 1], 1 = best.

    Parameters
    ----------
    scores : ndarray of shape (n_trials,), finite
    direction : {"maximize", "minimize"}
    """
    s = np.asarray(scores, dtype=float)
    if direction == MINIMIZE:
        s = -s
    lo, hi = s.min(), s.max()
    if hi == lo:
        return np.ones_like(s)
    return (s - lo) / (hi - lo)


@dataclass(frozen=True)
class Suggestion:
    """One starting configuration and where it comes from.

    ``expected_fit_seconds`` scales the source trial's logged fit time linearly by the
    ratio of row counts (new dataset / source dataset); None when no time was logged.
    ``predicted`` is True when ``normalised_score`` comes from a surrogate model rather
    than from a trial actually run on the source dataset.
    """

    rank: int
    config: dict[str, Any]
    strategy: str
    source_dataset_id: str | None = None
    source_name: str | None = None
    study_id: str | None = None
    study_label: str | None = None
    distance: float | None = None
    score: float | None = None
    normalised_score: float | None = None
    metric: str | None = None
    fit_seconds: float | None = None
    expected_fit_seconds: float | None = None
    predicted: bool = False

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        for key in ("distance", "score", "normalised_score", "fit_seconds",
                    "expected_fit_seconds"):
            v = d[key]
            d[key] = None if v is None or not np.isfinite(v) else float(v)
        return d


@dataclass
class SuggestContext:
    """Everything a strategy may use, prepared by :meth:`KnowledgeBase.suggest`.

    Attributes
    ----------
    query : Fingerprint
    family : Family
    space : SearchSpace
        The family's space for the task, possibly restricted by the user.
    neighbours : list of Neighbour
        Every same-task dataset that has a study of the family, nearest first.
    studies : DataFrame
        Studies of the family, task and metric; one row each.
    trials : DataFrame
        Their ``ok`` trials, with columns ``study_id``, ``config`` (dict), ``score``,
        ``normalised`` (per study, 1 = best), ``fit_seconds``.
    dataset_rows : dict
        Dataset id -> row count, for cost scaling.
    seed : int
    """

    query: Fingerprint
    family: Family
    space: SearchSpace
    neighbours: list[Neighbour]
    studies: pd.DataFrame
    trials: pd.DataFrame
    dataset_rows: dict[str, float]
    seed: int = 0
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def query_rows(self) -> float:
        return float(self.query.values.get("rows", np.nan))

    def expected_seconds(self, fit_seconds: float | None, dataset_id: str) -> float | None:
        """Scale a logged fit time to the query's size (linear in rows)."""
        if fit_seconds is None or not np.isfinite(fit_seconds):
            return None
        src = self.dataset_rows.get(dataset_id, np.nan)
        if not np.isfinite(src) or src <= 0 or not np.isfinite(self.query_rows):
            return float(fit_seconds)
        return float(fit_seconds) * self.query_rows / src


class Strategy(Protocol):
    """A ranking method: proposes up to ``k`` configurations, best first."""

    name: str
    description: str

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]: ...


def prepare_trials(trials: pd.DataFrame, studies: pd.DataFrame) -> pd.DataFrame:
    """Keep ``ok`` trials of ``studies``, parse configs, add per-study normalised scores."""
    t = trials[(trials["status"] == "ok") & trials["study_id"].isin(studies["study_id"])]
    t = t.dropna(subset=["score"]).copy()
    direction = dict(zip(studies["study_id"], studies["direction"]))
    t["config"] = [json.loads(c) for c in t["config"]]
    t["normalised"] = np.nan
    for sid, idx in t.groupby("study_id").groups.items():
        t.loc[idx, "normalised"] = normalise_scores(t.loc[idx, "score"].to_numpy(),
                                                    direction[sid])
    return t.reset_index(drop=True)
