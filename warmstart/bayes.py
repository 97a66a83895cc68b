"""Bayesian optimisation over a :class:`~warmstart.spaces.SearchSpace`.

A Gaussian-process surrogate of the cross-validated score (scikit-learn's
``GaussianProcessRegressor``: constant x Matern 5/2 kernel with one length scale per
encoded column, plus a white-noise term for the noise of cross-validation) is fitted to
the trials so far, on the space's numeric encoding (:meth:`SearchSpace.encode`). The
next configuration maximises expected improvement (Jones, Schonlau & Welch 1998,
eq. 15; the kernel choice follows Snoek, Larochelle & Adams 2012) over a finite set of
candidates: fresh random draws from the space plus local perturbations of the best
configurations so far. Every candidate is a valid configuration of the space, so no
continuous optimum ever needs rounding back.

Scores are "greater is better" (scikit-learn's scorer convention). Failed trials take
the worst score observed, which steers the search away from where estimators raise.

This is the ``"gp-ei"`` search of :func:`warmstart.tune.tune` (``tune --search gp-ei``).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy.stats import norm
from sklearn.exceptions import ConvergenceWarning
from sklearn.gaussian_process import GaussianProcessRegressor
from threadpoolctl import threadpool_limits

from warmstart.gp import gaussian_process
from warmstart.spaces import BOOL, CATEGORICAL, Param, SearchSpace, config_key


def expected_improvement(mu: np.ndarray, sigma: np.ndarray, best: float,
                         xi: float = 0.0) -> np.ndarray:
    """Expected improvement over ``best`` of a Gaussian prediction, for maximisation.

    ``EI = (mu - best - xi) * Phi(z) + sigma * phi(z)`` with
    ``z = (mu - best - xi) / sigma`` (Jones, Schonlau & Welch 1998, eq. 15); where
    ``sigma`` is 0 the improvement is certain: ``max(mu - best - xi, 0)``.

    Parameters
    ----------
    mu, sigma : ndarray of shape (n,)
        Predictive mean and standard deviation (``sigma >= 0``), in score units.
    best : float
        The best score observed so far.
    xi : float
        Margin that favours exploration (score units).

    Returns
    -------
    ndarray of shape (n,), non-negative.
    """
    mu = np.asarray(mu, dtype=float)
    sigma = np.asarray(sigma, dtype=float)
    gain = mu - best - xi
    safe = np.where(sigma > 0, sigma, 1.0)
    z = gain / safe
    ei = gain * norm.cdf(z) + safe * norm.pdf(z)
    return np.where(sigma > 0, np.maximum(ei, 0.0), np.maximum(gain, 0.0))


def from_unit(param: Param, u: float) -> Any:
    """Inverse of :meth:`Param.unit`: a position in [0, 1] back to a valid value."""
    u = min(1.0, max(0.0, float(u)))
    lo, hi = float(param.low), float(param.high)
    if param.log:
        x = math.exp(math.log(lo) + u * (math.log(hi) - math.log(lo)))
    else:
        x = lo + u * (hi - lo)
    x = min(hi, max(lo, x))
    if param.kind == "int":
        return int(min(hi, max(lo, round(x))))
    return x


def perturb(space: SearchSpace, config: Mapping[str, Any], rng: np.random.Generator,
            scale: float = 0.1, switch: float = 0.2) -> dict[str, Any]:
    """A valid configuration near ``config``.

    Numeric values move by a normal step of standard deviation ``scale`` on the
    parameter's [0, 1] (log where declared) scale; categorical and boolean values, and
    the "None" of parameters that allow it, change with probability ``switch``.
    Parameters that become active take a random value, inactive ones are dropped.
    """
    out: dict[str, Any] = {}
    for p in space.params:  # parents are declared before their children
        if not space.is_active(p, out):
            continue
        if p.name not in config:
            out[p.name] = p.sample(rng)
            continue
        value = config[p.name]
        if p.kind in (CATEGORICAL, BOOL):
            if rng.random() < switch:
                others = [c for c in ((False, True) if p.kind == BOOL else p.choices)
                          if c != value or type(c) is not type(value)]
                value = others[int(rng.integers(len(others)))] if others else value
            out[p.name] = value
            continue
        if p.allow_none and rng.random() < switch:
            # toggle between "no limit" and a value near the top of the range
            value = None if value is not None else from_unit(p, 1.0 - abs(rng.normal(0, scale)))
        elif value is not None:
            value = from_unit(p, p.unit(value) + rng.normal(0.0, scale))
        out[p.name] = value
    return space.validate(out)


def make_surrogate(width: int, seed: int) -> GaussianProcessRegressor:
    """The Gaussian-process surrogate: constant x Matern 5/2 (ARD) + white noise.

    Inputs live in [0, 1] (the space's encoding), so length scales are bounded to
    [0.01, 100] of that unit; targets are standardised (``normalize_y``), so the noise
    level is a fraction of the scores' variance.
    """
    return gaussian_process(width, seed, length_scale=0.5, restarts=2)


class BayesianOptimizer:
    """Propose the next configuration by expected improvement.

    Parameters
    ----------
    space : SearchSpace
    seed : int
        Makes every proposal a deterministic function of (seed, trials so far).
    n_random : int
        Random candidates drawn from the space at each step.
    n_local : int
        Perturbed candidates around each of the ``n_top`` best configurations.
    n_initial : int
        Below this many scored trials, proposals are random draws (a surrogate of one
        or two points says little).
    xi : float
        Exploration margin, as a fraction of the observed scores' standard deviation.
    """

    def __init__(self, space: SearchSpace, seed: int = 0, n_random: int = 300,
                 n_local: int = 40, n_top: int = 5, n_initial: int = 3, xi: float = 0.01):
        self.space = space
        self.seed = int(seed)
        self.n_random, self.n_local, self.n_top = n_random, n_local, n_top
        self.n_initial, self.xi = n_initial, xi

    def uses_surrogate(self, scores: Sequence[float | None]) -> bool:
        """Whether :meth:`propose` with these scores consults the surrogate (enough
        scored trials) rather than drawing at random."""
        return sum(s is not None and bool(np.isfinite(s)) for s in scores) >= self.n_initial

    def propose(self, configs: Sequence[Mapping[str, Any]],
                scores: Sequence[float | None]) -> dict[str, Any]:
        """The next configuration to evaluate.

        Parameters
        ----------
        configs : sequence of dict
            Configurations evaluated so far, in order.
        scores : sequence of float or None
            Their scores (greater is better); None for a failed trial.
        """
        rng = np.random.default_rng([self.seed, len(configs)])
        seen = {config_key(c) for c in configs}
        if not self.uses_surrogate(scores):
            return self._fresh(rng, seen)
        ok = [s for s in scores if s is not None and np.isfinite(s)]
        worst = min(ok)
        y = np.array([worst if s is None or not np.isfinite(s) else s for s in scores])
        X = self.space.encode(configs)
        candidates = self._candidates(configs, y, rng, seen)
        if not candidates:
            return self._fresh(rng, seen)
        gp = make_surrogate(X.shape[1], self.seed)
        # One BLAS thread: these matrices are tiny, and thread start-up and contention
        # on a shared machine cost far more than they save.
        with threadpool_limits(1), warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)
            gp.fit(X, y)
            mu, sigma = gp.predict(self.space.encode(candidates), return_std=True)
        ei = expected_improvement(mu, sigma, float(y.max()), self.xi * float(np.std(y)))
        return candidates[int(np.argmax(ei))]

    def _candidates(self, configs, y, rng, seen) -> list[dict[str, Any]]:
        out, keys = [], set(seen)

        def add(c):
            k = config_key(c)
            if k not in keys:
                keys.add(k)
                out.append(c)

        for _ in range(self.n_random):
            add(self.space.sample(rng))
        order = np.argsort(-y, kind="stable")[: self.n_top]
        for i in order:
            for j in range(self.n_local):
                add(perturb(self.space, configs[i], rng, scale=0.05 if j % 2 else 0.15))
        return out

    def _fresh(self, rng, seen) -> dict[str, Any]:
        return random_config(self.space, rng, seen)


def random_config(space: SearchSpace, rng: np.random.Generator, seen: set[str],
                  tries: int = 100) -> dict[str, Any]:
    """A random configuration not in ``seen`` (keys of :func:`config_key`), if one is
    found in ``tries`` draws; otherwise the last draw (tiny spaces run out)."""
    config = space.sample(rng)
    for _ in range(tries):
        if config_key(config) not in seen:
            break
        config = space.sample(rng)
    return config


__all__ = ["BayesianOptimizer", "expected_improvement", "from_unit", "make_surrogate",
           "perturb", "random_config"]
