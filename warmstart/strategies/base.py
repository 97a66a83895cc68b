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
        if "_full_space" not in self.extra:
            self.extra["_full_space"] = self.family.space(self.query.task)
        return self.extra["_full_space"]

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

    # -- row-level access to the trials (parses and keys only the rows asked for) ----
    def configs_at(self, positions: Any) -> list[dict[str, Any]]:
        """Parsed configurations of the trials at ``positions`` (row numbers of
        :attr:`trials`), in that order; each row is parsed once and cached."""
        cache = self._lazy["configs"]
        raw = self._lazy["raw"]
        out = []
        for i in positions:
            c = cache[i]
            if c is None:
                c = cache[i] = json.loads(raw[i])
            out.append(c)
        return out

    def keys_at(self, positions: Any) -> np.ndarray:
        """Canonical keys of the trials at ``positions``, shape (len(positions),) (cached;
        a ``key`` column in ``trials`` is used as is)."""
        positions = np.asarray(positions, dtype=np.intp)
        frame = self._lazy["frame"]
        if "key" in frame.columns:
            return frame["key"].to_numpy()[positions]
        cache = self._lazy["keys"]
        todo = [i for i in positions if cache[i] is None]
        for i, c in zip(todo, self.configs_at(todo)):
            cache[i] = self.key(c)
        return cache[positions]

    def rows_at(self, positions: Any) -> pd.DataFrame:
        """The trials at ``positions`` (in that order) with parsed configurations."""
        positions = np.asarray(positions, dtype=np.intp)
        t = self._lazy["frame"].iloc[positions].copy()
        if not self._lazy["parsed"]:
            t["config"] = self.configs_at(positions)
        return t

    def study_positions(self, study_id: str) -> np.ndarray:
        """Row numbers of :attr:`trials` belonging to one study, ascending."""
        groups = self._lazy.get("by_study")
        if groups is None:
            sid = self._lazy["frame"]["study_id"].to_numpy()
            groups = self._lazy["by_study"] = {
                k: np.asarray(v, dtype=np.intp)
                for k, v in pd.Series(np.arange(sid.size)).groupby(sid, sort=False).groups
                .items()} if sid.size else {}
        return groups.get(study_id, np.zeros(0, dtype=np.intp))

    def dataset_studies(self, dataset_id: str) -> list[str]:
        """Study ids of one dataset, in :attr:`studies` order."""
        if "_dataset_studies" not in self.extra or self.extra["_dataset_studies"][0] is not \
                self.studies:
            by: dict[str, list[str]] = {}
            for d, s in zip(self.studies["dataset_id"], self.studies["study_id"]):
                by.setdefault(d, []).append(s)
            self.extra["_dataset_studies"] = (self.studies, by)
        return self.extra["_dataset_studies"][1].get(dataset_id, [])

    def dataset_positions(self, dataset_id: str) -> np.ndarray:
        """Row numbers of the trials of every study on one dataset, best first (ties:
        study, trial order): the order of :meth:`dataset_trials` (cached)."""
        cache = self._lazy["ranked"]
        if dataset_id not in cache:
            sids = self.dataset_studies(dataset_id)
            pos = (np.sort(np.concatenate([self.study_positions(s) for s in sids]))
                   if sids else np.zeros(0, dtype=np.intp))
            t = self._lazy["frame"].iloc[pos][["normalised", "study_id", "trial_index"]]
            t = t.set_axis(pos)
            t = t.sort_values(["normalised", "study_id", "trial_index"],
                              ascending=[False, True, True], kind="stable")
            cache[dataset_id] = t.index.to_numpy(dtype=np.intp)
        return cache[dataset_id]

    def surrogate(self, study_id: str, kind: str = "forest"):
        """The (cached) surrogate of one study, fitted on its ``ok`` trials."""
        from warmstart.surrogate import fit_surrogate

        cache_key = (study_id, kind)
        if cache_key not in self.surrogates:
            pos = self.study_positions(study_id)
            self.surrogates[cache_key] = fit_surrogate(
                self.configs_at(pos), self._lazy["frame"]["normalised"].to_numpy()[pos],
                self.full_space, kind, self.seed)
        return self.surrogates[cache_key]

    def trial_keys(self) -> np.ndarray:
        """Canonical keys of :attr:`trials`' configurations, shape (n_trials,) (cached;
        a ``key`` column in ``trials`` is used as is)."""
        return self.keys_at(np.arange(len(self._lazy["frame"])))

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
        return self.rows_at(self.dataset_positions(dataset_id))

    def from_trial(self, strategy: str, row: Any, nb: Neighbour, config: dict[str, Any],
                   **overrides: Any) -> Suggestion:
        """A suggestion whose source is one logged trial (``row`` of :attr:`trials`)."""
        if "_study_meta" not in self.extra or self.extra["_study_meta"][0] is not self.studies:
            self.extra["_study_meta"] = (self.studies, dict(zip(
                self.studies["study_id"], zip(self.studies["label"], self.studies["metric"]))))
        label, metric = self.extra["_study_meta"][1][row["study_id"]]
        fit = row["fit_seconds"]
        fields: dict[str, Any] = dict(
            rank=0, config=config, strategy=strategy, source_dataset_id=nb.dataset_id,
            source_name=nb.name, study_id=row["study_id"], study_label=label,
            distance=nb.distance, score=float(row["score"]),
            normalised_score=float(row["normalised"]), metric=metric,
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


# ``trials`` is a property so that a context can hold configurations still as JSON text
# (as :meth:`KnowledgeBase.suggest` passes them): on a large history a strategy then
# parses only the rows it reads, through :meth:`SuggestContext.configs_at` and the
# other row-level helpers, and reading ``ctx.trials`` itself parses every row once.
def _get_trials(self: SuggestContext) -> pd.DataFrame:
    lazy = self._lazy
    if not lazy["parsed"]:
        frame = lazy["frame"]
        lazy["frame"] = frame.assign(config=self.configs_at(range(len(frame))))
        lazy["parsed"] = True
    return lazy["frame"]


def _set_trials(self: SuggestContext, trials: pd.DataFrame) -> None:
    n = len(trials)
    cfg = trials["config"].to_numpy(dtype=object) if "config" in trials.columns else None
    raw = cfg is not None and n > 0 and isinstance(cfg[0], str)
    self._lazy = {"frame": trials, "parsed": not raw, "raw": cfg if raw else None,
                  "configs": np.full(n, None, dtype=object) if raw or cfg is None
                  else cfg.copy(),
                  "keys": np.full(n, None, dtype=object), "ranked": {}}


SuggestContext.trials = property(_get_trials, _set_trials)  # type: ignore[assignment]


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
                   normalisation: str = "minmax", parse_configs: bool = True) -> pd.DataFrame:
    """Keep ``ok`` trials of ``studies``, parse configs, add per-study normalised scores.

    The normalisation is :func:`normalise_scores` per study, computed for all studies
    at once. With ``parse_configs=False`` the ``config`` column keeps its JSON text (a
    :class:`SuggestContext` then parses rows only when a strategy reads them).
    """
    if normalisation not in NORMALISATIONS:
        raise BadInputError(f"unknown normalisation {normalisation!r}")
    t = trials[(trials["status"] == "ok") & trials["study_id"].isin(studies["study_id"])]
    t = t.dropna(subset=["score"]).reset_index(drop=True)
    direction = dict(zip(studies["study_id"], studies["direction"]))
    if parse_configs:
        t["config"] = [json.loads(c) for c in t["config"]]
    score = t["score"].to_numpy(dtype=float)
    minimize = t["study_id"].map(direction).to_numpy() == MINIMIZE
    s = pd.Series(np.where(minimize, -score, score))
    by = s.groupby(t["study_id"].to_numpy(), sort=False)
    lo, hi = by.transform("min").to_numpy(), by.transform("max").to_numpy()
    flat = hi == lo
    with np.errstate(invalid="ignore", divide="ignore"):
        if normalisation == "rank":
            size = by.transform("size").to_numpy(dtype=float)
            norm = (by.rank(method="average").to_numpy() - 1.0) / (size - 1.0)
        else:
            norm = (s.to_numpy() - lo) / (hi - lo)
    t["normalised"] = np.where(flat, 1.0, norm)
    return t
