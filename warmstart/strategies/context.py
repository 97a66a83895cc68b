"""What a ranking strategy is given: :class:`SuggestContext`.

The context is a frozen record built by
:func:`warmstart.suggesting.suggestion_context` (for ``suggest`` and the backtest).
Its trials are a :class:`~warmstart.strategies.trial_index.TrialIndex` (row-level,
lazily parsed access) and its surrogates a :class:`~warmstart.surrogate.SurrogateCache`
(shared between contexts when the history is the same). What the context derives from
its own fields (the family's space, candidate keys, studies per dataset) is computed
once per context; a ``dataclasses.replace`` copy starts afresh, so it never sees values
of the fields it replaced.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd

from warmstart.families.base import Family
from warmstart.fingerprint import Fingerprint
from warmstart.prediction_cache import fit_identity
from warmstart.similarity import Neighbour
from warmstart.spaces import SearchSpace
from warmstart.strategies.base import (
    SAME_DATASET_DISTANCE,
    Suggestion,
    canonical_key,
    moved_values,
)
from warmstart.strategies.trial_index import TrialIndex
from warmstart.surrogate import StudySurrogate, SurrogateCache, fit_rows, fit_surrogate
from warmstart.values import finite_or_none


@dataclass(frozen=True)
class SuggestContext:
    """Everything a strategy may use.

    Attributes
    ----------
    query : Fingerprint
    family : Family
    space : SearchSpace
        The family's space for the task, possibly restricted by the user.
    neighbours : sequence of Neighbour
        Every same-task dataset that has a study of the family, nearest first.
    studies : DataFrame
        Studies of the family, task and metric; one row each.
    trials : TrialIndex
        Their ``ok`` trials with per-study ``normalised`` scores (1 = best).
    dataset_rows : mapping
        Dataset id -> row count, for cost scaling.
    seed : int
    restricted : bool
        True when ``space`` is a user restriction (the library-defaults baseline then
        returns the defaults clipped into it instead of ``{}``).
    candidates : list of dict, optional
        When given, strategies choose only among these configurations (the backtest
        uses it to keep every suggestion inside an evaluated pool).
    surrogates : SurrogateCache
        Fitted per-study surrogates; shared between contexts by the backtest, since a
        study's surrogate does not depend on the query.
    fingerprints : mapping
        Dataset id -> stored fingerprint of the studies' datasets (strategies that
        model across datasets, or hold datasets out to choose, read them).
    cache_dir : str, optional
        Where strategies may keep JSON caches of the history (``<history>/.cache``);
        None keeps them in memory only.
    """

    query: Fingerprint
    family: Family
    space: SearchSpace
    neighbours: Sequence[Neighbour]
    studies: pd.DataFrame
    trials: TrialIndex
    dataset_rows: Mapping[str, float]
    seed: int = 0
    restricted: bool = False
    candidates: list[dict[str, Any]] | None = None
    surrogates: SurrogateCache = field(default_factory=SurrogateCache)
    fingerprints: Mapping[str, Fingerprint] = field(default_factory=dict)
    cache_dir: str | None = None

    @cached_property
    def full_space(self) -> SearchSpace:
        """The family's declared space for the task (configurations are encoded in it)."""
        return self.family.space(self.query.task)

    def key(self, config: dict[str, Any]) -> str:
        """:func:`~warmstart.strategies.canonical_key` of ``config`` in :attr:`full_space`."""
        return canonical_key(self.full_space, config)

    @cached_property
    def candidate_keys(self) -> set[str] | None:
        """Canonical keys of :attr:`candidates`, or None when unrestricted."""
        if self.candidates is None:
            return None
        return {self.key(c) for c in self.candidates}

    @cached_property
    def _studies_of(self) -> dict[str, list[str]]:
        by: dict[str, list[str]] = {}
        for d, s in zip(self.studies["dataset_id"], self.studies["study_id"]):
            by.setdefault(d, []).append(s)
        return by

    def dataset_studies(self, dataset_id: str) -> list[str]:
        """Study ids of one dataset, in :attr:`studies` order."""
        return self._studies_of.get(dataset_id, [])

    def dataset_positions(self, dataset_id: str) -> np.ndarray:
        """Row numbers of :attr:`trials` of every study on one dataset, best first
        (ties: study, trial order); see :meth:`TrialIndex.ranked_positions`."""
        return self.trials.ranked_positions(self.dataset_studies(dataset_id))

    def exact_match(self) -> Neighbour | None:
        """The nearest neighbour when it is at distance 0 (the same dataset), else None."""
        if self.neighbours and self.neighbours[0].distance <= SAME_DATASET_DISTANCE:
            return self.neighbours[0]
        return None

    # -- surrogates ----------------------------------------------------------------------
    def _fit_positions(self, study_id: str) -> np.ndarray:
        """Rows of :attr:`trials` one study's surrogate is fitted on (a bounded sample)."""
        pos = self.trials.study_positions(study_id)
        return pos[fit_rows(pos.size, self.seed)]

    @cached_property
    def _space_id(self) -> str:
        return json.dumps(self.full_space.to_dict(), sort_keys=True, default=str)

    def _identity(self, study_id: str) -> tuple[int, str, str]:
        """What a study's predictions depend on beyond its id (see prediction_cache)."""
        pos = self._fit_positions(study_id)
        return self.seed, self._space_id, fit_identity(
            self.trials.column("trial_index")[pos], self.trials.column("normalised")[pos])

    def _fit(self, study_id: str, kind: str) -> StudySurrogate:
        pos = self._fit_positions(study_id)
        # fitted on the trials the space can hold (clipped into it); a value it has no
        # place for ('sqrt' where the space has fractions) says nothing about the space
        configs = [self.full_space.clip(c) for c in self.trials.configs_at(pos)]
        usable = np.array([c is not None for c in configs], dtype=bool)
        return fit_surrogate([c for c in configs if c is not None],
                             self.trials.column("normalised")[pos][usable],
                             self.full_space, kind, self.seed)

    def predict(self, study_id: str, kind: str, configs: list[dict[str, Any]],
                keys: Sequence[str]) -> np.ndarray:
        """Predicted normalised scores of ``configs`` (canonical ``keys``) on one study,
        shape (len(configs),), from its surrogate fitted on its ``ok`` trials (cached)."""
        return self.surrogates.predict(study_id, kind, configs, keys,
                                       lambda: self._fit(study_id, kind),
                                       lambda: self._identity(study_id))

    # -- building suggestions --------------------------------------------------------------
    @cached_property
    def _study_meta(self) -> dict[str, tuple[str, str]]:
        return dict(zip(self.studies["study_id"],
                        zip(self.studies["label"], self.studies["metric"])))

    def from_trial(self, strategy: str, row: Any, nb: Neighbour, config: dict[str, Any],
                   **overrides: Any) -> Suggestion:
        """A suggestion whose source is one logged trial (a row of :attr:`trials`)."""
        label, metric = self._study_meta[row["study_id"]]
        fit = row["fit_seconds"]
        given = row["config"]
        given = json.loads(given) if isinstance(given, str) else given
        fields: dict[str, Any] = dict(
            rank=0, config=config, strategy=strategy, source_dataset_id=nb.dataset_id,
            source_name=nb.name, study_id=row["study_id"], study_label=label,
            distance=nb.distance, score=float(row["score"]),
            normalised_score=float(row["normalised"]), metric=metric,
            fit_seconds=finite_or_none(fit),
            expected_fit_seconds=self.expected_seconds(fit, nb.dataset_id),
            moved=moved_values(given, config, self.estimator_defaults))
        fields.update(overrides)
        return Suggestion(**fields)

    @cached_property
    def estimator_defaults(self) -> dict[str, Any]:
        """The estimator's own defaults (what a logged trial left unset ran with)."""
        from warmstart.trials import estimator_rules

        return estimator_rules(self.family, self.query.task).defaults

    @property
    def query_rows(self) -> float:
        """The query dataset's row count (NaN when unknown)."""
        return float(self.query.values.get("rows", np.nan))

    def expected_seconds(self, fit_seconds: float | None, dataset_id: str) -> float | None:
        """Scale a logged fit time to the query's size (linear in rows)."""
        if finite_or_none(fit_seconds) is None:
            return None
        src = self.dataset_rows.get(dataset_id, np.nan)
        if not np.isfinite(src) or src <= 0 or not np.isfinite(self.query_rows):
            return float(fit_seconds)
        return float(fit_seconds) * self.query_rows / src


__all__ = ["SuggestContext"]
