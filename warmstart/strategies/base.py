"""What every ranking strategy shares: its output, score normalisation, matching keys.

A strategy's input, :class:`~warmstart.strategies.context.SuggestContext`, lives in
:mod:`warmstart.strategies.context`.

Scores are normalised per study by min-max over the study's ``ok`` trials, oriented so
that 1 is the study's best and 0 its worst whether higher or lower scores are better; a study
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
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Protocol

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.metrics import LOWER
from warmstart.spaces import SearchSpace, config_key
from warmstart.values import finite_or_none

if TYPE_CHECKING:  # for annotations only: the context module imports this one
    from warmstart.strategies.context import SuggestContext

NORMALISATIONS = ("minmax", "rank")


# Distances at or below this count as "the same dataset" (floating-point round-off of
# the scaled-distance computation can leave ~1e-17 for identical fingerprints).
SAME_DATASET_DISTANCE = 1e-9


def normalise_scores(scores: np.ndarray, better: str | np.ndarray, method: str = "minmax",
                     groups: np.ndarray | None = None) -> np.ndarray:
    """Normalise scores to [0, 1] within each study, 1 = the study's best.

    Parameters
    ----------
    scores : ndarray of shape (n_trials,), finite
    better : {"higher", "lower"} or ndarray of shape (n_trials,) of them
        Which scores are better, for all trials or per trial.
    method : {"minmax", "rank"}
        ``"minmax"``: ``(s - min) / (max - min)``; ``"rank"``: ``(rank - 1) / (n - 1)``
        with average ranks for ties (1 = best trial), which ignores the size of gaps.
    groups : ndarray of shape (n_trials,), optional
        The study of each trial; each study is normalised on its own (default: one
        study). A study whose trials all scored the same gets 1 for every trial.
    """
    if method not in NORMALISATIONS:
        raise BadInputError(f"unknown normalisation {method!r}")
    s = np.asarray(scores, dtype=float)
    s = np.where(np.asarray(better) == LOWER, -s, s)
    by = pd.Series(s).groupby(np.zeros(s.size) if groups is None else np.asarray(groups),
                              sort=False)
    lo, hi = by.transform("min").to_numpy(), by.transform("max").to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        if method == "rank":
            size = by.transform("size").to_numpy(dtype=float)
            norm = (by.rank(method="average").to_numpy() - 1.0) / (size - 1.0)
        else:
            norm = (s - lo) / (hi - lo)
    return np.where(hi == lo, 1.0, norm)


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

    Why it is at its rank: ``best_on`` lists the datasets where this configuration was
    actually run and scored highest (``{"dataset_id", "name", "normalised"}``, best
    first; the source trial comes from the first), and ``gain`` is what it adds to the
    portfolio objective of the suggestions above it (weighted mean over the sources of
    the best normalised score listed so far). ``choice`` is set by ``auto``: the strategy
    it chose, on how many datasets, their mean regrets and the rule.

    ``moved`` says where the configuration differs from the source trial as logged,
    because it was brought into the active space (see :func:`moved_values`): one
    ``{"parameter", "from", "to"}`` per value, ``"to"`` None and ``"dropped"`` True for
    a parameter the space does not search (the estimator's default then applies).
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
    gain: float | None = None
    best_on: tuple[dict[str, Any], ...] = ()
    choice: dict[str, Any] | None = None
    moved: tuple[dict[str, Any], ...] = ()

    def to_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["support"] = [dict(s) for s in self.support]
        d["best_on"] = [dict(s) for s in self.best_on]
        d["moved"] = [dict(m) for m in self.moved]
        d["choice"] = None if self.choice is None else json.loads(json.dumps(self.choice))
        for key in ("distance", "score", "normalised_score", "fit_seconds",
                    "expected_fit_seconds", "expected_normalised", "gain"):
            d[key] = finite_or_none(d[key])
        return d


class Suggestions(list):
    """The ranked suggestions (a list of :class:`Suggestion`, best first), with views for
    a user's own search."""

    def to_frame(self) -> pd.DataFrame:
        """One row per suggestion (index ``rank``), one flat column per parameter.

        Returns
        -------
        DataFrame of shape (n_suggestions, n_parameters)
            Columns in the order the parameters first appear; a parameter a suggestion
            leaves out (inactive, or the estimator's default) is missing (NaN) there.
        """
        names = list(dict.fromkeys(k for s in self for k in s.config))
        rows = [[s.config.get(n, np.nan) for n in names] for s in self]
        frame = pd.DataFrame(rows, columns=names, index=pd.Index([s.rank for s in self],
                                                                   name="rank"))
        return frame.infer_objects()

    def to_grid(self, prefix: str = "") -> list[dict[str, list[Any]]]:
        """The configurations as a ``param_grid`` for scikit-learn's ``GridSearchCV``: one
        dict per suggestion mapping each parameter to a one-value list, so the search
        runs exactly these configurations. ``prefix`` names the model's pipeline step
        (``"model__"``)."""
        return [{prefix + k: [v] for k, v in s.config.items()} for s in self]


def moved_values(given: dict[str, Any], config: dict[str, Any],
                 defaults: dict[str, Any]) -> tuple[dict[str, Any], ...]:
    """Where ``config`` (brought into a space) differs from the trial ``given`` as logged.

    Parameters
    ----------
    given : dict
        The logged configuration (out-of-space values, parameters the space does not
        search and all).
    config : dict
        The configuration suggested.
    defaults : dict
        The estimator's own defaults: what a parameter missing from ``given`` ran with
        (scikit-learn's ``early_stopping='auto'`` where the space searches true/false).

    Returns
    -------
    tuple of dict
        ``{"parameter", "from", "to"}`` for each value that changed, in ``config``'s
        order, then ``{"parameter", "from", "to": None, "dropped": True}`` for each
        given parameter the configuration leaves out.
    """
    out = []
    for name, value in config.items():
        before = given.get(name, defaults.get(name, value))
        if not _same_value(before, value):
            out.append({"parameter": name, "from": before, "to": value})
    for name, value in given.items():
        if name not in config:
            out.append({"parameter": name, "from": value, "to": None, "dropped": True})
    return tuple(out)


def _same_value(a: Any, b: Any) -> bool:
    # True == 1 in Python, but a flag and a number are different values here
    return a == b and isinstance(a, bool) == isinstance(b, bool)


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
    :class:`~warmstart.strategies.trial_index.TrialIndex` then parses rows only when a
    strategy reads them).
    """
    t = trials[(trials["status"] == "ok") & trials["study_id"].isin(studies["study_id"])]
    t = t.dropna(subset=["score"]).reset_index(drop=True)
    better = dict(zip(studies["study_id"], studies["better"]))
    if parse_configs:
        t["config"] = [json.loads(c) for c in t["config"]]
    t["normalised"] = normalise_scores(
        t["score"].to_numpy(dtype=float), t["study_id"].map(better).to_numpy(),
        normalisation, groups=t["study_id"].to_numpy())
    return t
