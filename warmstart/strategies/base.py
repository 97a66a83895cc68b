"""What every ranking strategy shares: its inputs, its output, score normalisation.

Scores are normalised per study by min-max over the study's ``ok`` trials, oriented so
that 1 is the study's best and 0 its worst whatever the metric's direction; a study
whose trials all scored the same gets 1 for every trial. Min-max (rather than ranks)
keeps the size of gaps: a configuration that is nearly as good as the best scores
close to 1 even when many trials sit between them.

Configurations are matched across studies by :func:`canonical_key`: the configuration
brought into the family's declared space (missing parameters take their declared
default, inactive ones are dropped), so ``{}`` and an explicit list of the defaults
count as the same configuration.
"""

from __future__ import annotations

import json
import os
from dataclasses import dataclass, field
from typing import Any, Protocol

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.families.base import Family
from warmstart.fingerprint import Fingerprint
from warmstart.metrics import MINIMIZE
from warmstart.similarity import Neighbour
from warmstart.spaces import SearchSpace, config_key

NORMALISATIONS = ("minmax", "rank")


# Distances at or below this count as "the same dataset" (floating-point round-off of
# the scaled-distance computation can leave ~1e-17 for identical fingerprints).
SAME_DATASET_DISTANCE = 1e-9


def normalise_scores(scores: np.ndarray, direction: str, method: str = "minmax") -> np.ndarray:
    """Normalise one study's scores to [0, 1], 1 = best.

    Parameters
    ----------
    scores : ndarray of shape (n_trials,), finite
    direction : {"maximize", "minimize"}
    method : {"minmax", "rank"}
        ``"minmax"``: ``(s - min) / (max - min)``; ``"rank"``: ``(rank - 1) / (n - 1)``
        with average ranks for ties (1 = best trial), which ignores the size of gaps.
    """
    s = np.asarray(scores, dtype=float)
    if direction == MINIMIZE:
        s = -s
    if method not in NORMALISATIONS:
        raise BadInputError(f"unknown normalisation {method!r}")
    lo, hi = s.min(), s.max()
    if hi == lo:
        return np.ones_like(s)
    if method == "rank":
        from scipy.stats import rankdata

        return (rankdata(s) - 1.0) / (s.size - 1.0)
    return (s - lo) / (hi - lo)


@dataclass(frozen=True)
class Suggestion:
    """One starting configuration and where it comes from.

    ``expected_fit_seconds`` scales the source trial's logged fit time linearly by the
    ratio of row counts (new dataset / source dataset); None when no time was logged.
    ``normalised_score`` is the source trial's normalised score in its own study.
    Strategies that pool several datasets also give ``expected_normalised``, the
    similarity-weighted mean normalised score over their source datasets, and
    ``support``, one entry per source: ``{"dataset_id", "name", "weight", "normalised",
    "predicted"}``. ``predicted`` is True when any of those values comes from a
    surrogate model rather than from trials actually run.
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
    expected_normalised: float | None = None
    support: tuple[dict[str, Any], ...] = ()

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["support"] = [dict(s) for s in self.support]
        for key in ("distance", "score", "normalised_score", "fit_seconds",
                    "expected_fit_seconds", "expected_normalised"):
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
    restricted : bool
        True when ``space`` is a user restriction (the library-defaults baseline then
        returns the defaults clipped into it instead of ``{}``).
    candidates : list of dict, optional
        When given, strategies choose only among these configurations (the backtest
        uses it to keep every suggestion inside an evaluated pool).
    surrogates : dict
        Cache of fitted surrogates by (study id, kind); shared between contexts by the
        backtest, since a study's surrogate does not depend on the query.
    """

    query: Fingerprint
    family: Family
    space: SearchSpace
    neighbours: list[Neighbour]
    studies: pd.DataFrame
    trials: pd.DataFrame
    dataset_rows: dict[str, float]
    seed: int = 0
    restricted: bool = False
    candidates: list[dict[str, Any]] | None = None
    surrogates: dict[tuple[str, str], Any] = field(default_factory=dict)
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def full_space(self) -> SearchSpace:
        """The family's declared space for the task (configurations are encoded in it)."""
        return self.family.space(self.query.task)

    def key(self, config: dict[str, Any]) -> str:
        """:func:`canonical_key` of ``config`` in the family's declared space."""
        return canonical_key(self.full_space, config)

    def candidate_keys(self) -> set[str] | None:
        """Canonical keys of :attr:`candidates`, or None when unrestricted."""
        if self.candidates is None:
            return None
        if "_candidate_keys" not in self.extra:
            self.extra["_candidate_keys"] = {self.key(c) for c in self.candidates}
        return self.extra["_candidate_keys"]

    def surrogate(self, study_id: str, kind: str = "forest"):
        """The (cached) surrogate of one study, fitted on its ``ok`` trials."""
        from warmstart.surrogate import fit_surrogate

        cache_key = (study_id, kind)
        if cache_key not in self.surrogates:
            t = self.trials[self.trials["study_id"] == study_id]
            self.surrogates[cache_key] = fit_surrogate(
                list(t["config"]), t["normalised"].to_numpy(), self.full_space, kind,
                self.seed)
        return self.surrogates[cache_key]

    def trial_keys(self) -> np.ndarray:
        """Canonical keys of :attr:`trials`' configurations, shape (n_trials,) (cached;
        a ``key`` column in ``trials`` is used as is)."""
        if "key" in self.trials.columns:
            return self.trials["key"].to_numpy()
        if "_trial_keys" not in self.extra:
            self.extra["_trial_keys"] = np.array([self.key(c) for c in self.trials["config"]],
                                                 dtype=object)
        return self.extra["_trial_keys"]

    def predict(self, study_id: str, kind: str, configs: list[dict[str, Any]],
                keys: list[str]) -> np.ndarray:
        """Surrogate predictions for one study, shape (len(configs),), cached by key."""
        cached = self.surrogates.setdefault(("predictions", study_id, kind), {})
        todo = [i for i, key in enumerate(keys) if key not in cached]
        if todo:
            pred = self.surrogate(study_id, kind).predict([configs[i] for i in todo])
            cached.update({keys[i]: float(v) for i, v in zip(todo, pred)})
        return np.array([cached[key] for key in keys], dtype=float)

    def exact_match(self) -> Neighbour | None:
        """The nearest neighbour when it is at distance 0 (the same dataset), else None."""
        if self.neighbours and self.neighbours[0].distance <= SAME_DATASET_DISTANCE:
            return self.neighbours[0]
        return None

    def dataset_trials(self, dataset_id: str) -> pd.DataFrame:
        """Trials of every study on one dataset, best first (ties: study, trial order)."""
        sids = self.studies.loc[self.studies["dataset_id"] == dataset_id, "study_id"]
        t = self.trials[self.trials["study_id"].isin(sids)]
        return t.sort_values(["normalised", "study_id", "trial_index"],
                             ascending=[False, True, True], kind="stable")

    def from_trial(self, strategy: str, row: Any, nb: Neighbour, config: dict[str, Any],
                   **overrides: Any) -> Suggestion:
        """A suggestion whose source is one logged trial (``row`` of :attr:`trials`)."""
        meta = self.studies.set_index("study_id").loc[row["study_id"]]
        fit = row["fit_seconds"]
        fields: dict[str, Any] = dict(
            rank=0, config=config, strategy=strategy, source_dataset_id=nb.dataset_id,
            source_name=nb.name, study_id=row["study_id"], study_label=meta["label"],
            distance=nb.distance, score=float(row["score"]),
            normalised_score=float(row["normalised"]), metric=meta["metric"],
            fit_seconds=None if fit != fit else float(fit),
            expected_fit_seconds=self.expected_seconds(fit, nb.dataset_id))
        fields.update(overrides)
        return Suggestion(**fields)

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


def user_space(spec: Any, family: Family, task: str) -> SearchSpace:
    """A user restriction of ``family``'s space for ``task``.

    ``spec`` is a :class:`SearchSpace` (returned as is), a JSON list as accepted by
    :meth:`SearchSpace.from_dict`, or the path of a JSON file holding one.
    """
    if isinstance(spec, SearchSpace):
        return spec
    if isinstance(spec, (str, os.PathLike)):
        try:
            with open(spec, encoding="utf-8") as fh:
                spec = json.load(fh)
        except FileNotFoundError:
            raise BadInputError(f"search-space file not found: {spec}") from None
        except (json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise BadInputError(f"search-space file {spec} is not valid JSON: {exc}") from None
    return SearchSpace.from_dict(spec, within=family.space(task))


def canonical_key(space: SearchSpace, config: dict[str, Any]) -> str:
    """A configuration's identity for matching across studies (see the module docstring).

    Falls back to the raw key when the configuration does not fit ``space``.
    """
    clipped = space.clip(config)
    return config_key(clipped if clipped is not None else config)


class Strategy(Protocol):
    """A ranking method: proposes up to ``k`` configurations, best first.

    ``uses_history`` says whether it reads the history (those strategies must put the
    best trial of a distance-0 dataset first); ``stochastic`` whether its output depends
    on ``ctx.seed`` (the backtest then averages it over several seeds).
    """

    name: str
    description: str
    uses_history: bool
    stochastic: bool

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]: ...


def prepare_trials(trials: pd.DataFrame, studies: pd.DataFrame,
                   normalisation: str = "minmax") -> pd.DataFrame:
    """Keep ``ok`` trials of ``studies``, parse configs, add per-study normalised scores."""
    t = trials[(trials["status"] == "ok") & trials["study_id"].isin(studies["study_id"])]
    t = t.dropna(subset=["score"]).copy()
    direction = dict(zip(studies["study_id"], studies["direction"]))
    t["config"] = [json.loads(c) for c in t["config"]]
    t["normalised"] = np.nan
    for sid, idx in t.groupby("study_id").groups.items():
        t.loc[idx, "normalised"] = normalise_scores(t.loc[idx, "score"].to_numpy(),
                                                    direction[sid], normalisation)
    return t.reset_index(drop=True)
