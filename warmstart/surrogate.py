"""Per-study surrogate regressors: predict a configuration's normalised score on a past dataset.

A transfer surrogate in the sense of Wistuba, Schilling & Schmidt-Thieme (2016): one
regressor per past study, fitted on that study's own trials, with configurations
encoded by :meth:`warmstart.spaces.SearchSpace.encode` and the target the study's
normalised score (1 = its best trial, 0 its worst; see
:mod:`warmstart.strategies.base`). Strategies use it to fill in how a candidate would
have done on a neighbour where nobody ran it; the backtest uses it, on the held-out
study, for configurations that were not run there.

Models (``kind``):

* ``"forest"`` (default): a random forest (Breiman 2001) of ``N_TREES`` trees with
  ``min_samples_leaf=2``; robust to the mix of one-hot and scaled numeric columns and
  to the few dozen trials a study typically has.
* ``"gp"``: a Gaussian process with a Matérn-5/2 kernel plus white noise on the
  standardised target (scikit-learn's ``GaussianProcessRegressor``).

A study with fewer than ``MIN_TRIALS`` trials, or whose trials all scored the same,
gets a constant model predicting the mean of its normalised scores: too little to
learn a response surface from.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from warmstart.errors import BadInputError
from warmstart.spaces import SearchSpace

MIN_TRIALS = 5
N_TREES = 50
KINDS = ("forest", "gp")


@dataclass
class StudySurrogate:
    """A fitted surrogate for one study.

    Attributes
    ----------
    space : SearchSpace
        The space configurations are encoded in (the family's full space).
    kind : str
        ``"forest"``, ``"gp"`` or ``"constant"``.
    model : object or None
        The fitted scikit-learn regressor (None for ``"constant"``).
    constant : float
        The prediction of a constant model.
    """

    space: SearchSpace
    kind: str
    model: Any = None
    constant: float = 0.5

    def predict(self, configs: Sequence[Mapping[str, Any]]) -> np.ndarray:
        """Predicted normalised scores, shape (n_configs,), clipped to [0, 1]."""
        n = len(configs)
        if n == 0:
            return np.zeros(0)
        if self.model is None:
            return np.full(n, self.constant)
        pred = self.model.predict(self.space.encode(configs))
        return np.clip(np.asarray(pred, dtype=float), 0.0, 1.0)


def fit_surrogate(configs: Sequence[Mapping[str, Any]], normalised: np.ndarray,
                  space: SearchSpace, kind: str = "forest", seed: int = 0) -> StudySurrogate:
    """Fit a surrogate on one study's trials.

    Parameters
    ----------
    configs : sequence of dict, length n_trials
    normalised : ndarray of shape (n_trials,)
        The trials' normalised scores in [0, 1].
    space : SearchSpace
        Used to encode configurations.
    kind : {"forest", "gp"}
    seed : int
        ``random_state`` of the forest / the GP's optimiser restarts.
    """
    if kind not in KINDS:
        raise BadInputError(f"unknown surrogate {kind!r}; choose from {', '.join(KINDS)}")
    y = np.asarray(normalised, dtype=float)
    if len(configs) != y.shape[0]:
        raise BadInputError("configs and scores differ in length")
    if y.size < MIN_TRIALS or np.ptp(y) == 0:
        return StudySurrogate(space, "constant", None, float(y.mean()) if y.size else 0.5)
    X = space.encode(configs)
    if kind == "forest":
        from sklearn.ensemble import RandomForestRegressor

        model = RandomForestRegressor(n_estimators=N_TREES, min_samples_leaf=2,
                                      random_state=seed, n_jobs=1)
    else:
        from warmstart.gp import gaussian_process

        model = gaussian_process(X.shape[1], seed, length_scale=1.0, restarts=0)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # GP convergence chatter on tiny studies
        model.fit(X, y)
    return StudySurrogate(space, kind, model)


class SurrogateCache:
    """Fitted study surrogates and their predictions, by (study id, kind).

    A study's surrogate depends only on that study's trials, never on the query, so one
    cache can serve many questions: the backtest shares one over all held-out datasets.
    Surrogates fitted on other scores of the same trials (e.g. median-anchored ones) go
    in a :meth:`section` of their own.
    """

    def __init__(self) -> None:
        self._models: dict[tuple[str, str], StudySurrogate] = {}
        self._predictions: dict[tuple[str, str], dict[str, float]] = {}
        self._sections: dict[str, SurrogateCache] = {}

    def model(self, study_id: str, kind: str,
              fit: Callable[[], StudySurrogate]) -> StudySurrogate:
        """The cached surrogate of one study, fitted by ``fit()`` on first need."""
        if (study_id, kind) not in self._models:
            self._models[(study_id, kind)] = fit()
        return self._models[(study_id, kind)]

    def predict(self, study_id: str, kind: str, configs: Sequence[Mapping[str, Any]],
                keys: Sequence[str], fit: Callable[[], StudySurrogate]) -> np.ndarray:
        """Predictions of one study's surrogate, shape (len(configs),), cached by the
        configurations' canonical ``keys``."""
        cached = self._predictions.setdefault((study_id, kind), {})
        todo = [i for i, key in enumerate(keys) if key not in cached]
        if todo:
            pred = self.model(study_id, kind, fit).predict([configs[i] for i in todo])
            cached.update({keys[i]: float(v) for i, v in zip(todo, pred)})
        return np.array([cached[key] for key in keys], dtype=float)

    def section(self, name: str) -> SurrogateCache:
        """A cache of its own for surrogates fitted on other scores, kept in this one."""
        return self._sections.setdefault(name, SurrogateCache())


__all__ = ["KINDS", "MIN_TRIALS", "StudySurrogate", "SurrogateCache", "fit_surrogate"]
