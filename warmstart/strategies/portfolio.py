"""Greedy portfolios: a short list of configurations that complement each other.

Greedy ordered defaults (Wistuba, Schilling & Schmidt-Thieme, ECML-PKDD 2015; Pfisterer
et al., "Learning multiple defaults", 2018): with ``P[c, j]`` the normalised score of
candidate ``c`` on source study ``j`` and weights ``w_j`` summing to 1, pick, one at a
time, the candidate that most raises

    sum_j  w_j * max(b_j, P[c, j]),        b_j = best P[., j] among those already picked

(``b_j`` starts at 0). A configuration that only repeats what is already covered adds
nothing, so the list spreads over the configurations that are best on different
neighbours. Ties (e.g. once every source is covered) go to the higher weighted mean
``sum_j w_j P[c, j]``, then to the first candidate in canonical-key order.

``P[c, j]`` is the trial's normalised score where ``c`` was run in study ``j`` (the
mean if it was run more than once) and otherwise the prediction of study ``j``'s
surrogate (:mod:`warmstart.surrogate`); the suggestion says which (``predicted`` and
``support``).

Two variants:

* similarity-weighted (``portfolio``): the sources are the studies of the
  ``neighbours`` nearest datasets, with dataset weights ``softmax(-d / (t * m))``,
  ``d`` the distance, ``m`` the median distance among those neighbours (a scale-free
  temperature), ``t`` the ``temperature`` (``inf`` = uniform); a dataset's weight is
  shared equally by its studies.
* dataset-agnostic (``global-portfolio``): every dataset in the history, uniform
  weights - one list for all datasets, the baseline the weighted variant must beat.
* blend (``shrink`` = ``s`` in (0, 1], ``blend-portfolio``): the similarity weights
  shrunk towards uniform weights over every dataset, ``(1 - s) w + s / n``, so the
  list moves continuously from the neighbours' (``s = 0``) to the dataset-agnostic one
  (``s = 1``); ``auto`` chooses ``s`` per family on the history.

Candidates are the configurations of the sources' trials (brought into the search
space, de-duplicated), or ``ctx.candidates`` when given. Both variants first place
the best trial of a distance-0 dataset, if any (the same data seen before), then
continue greedily.
"""

from __future__ import annotations

import math

import numpy as np

from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.explain import observed_support, pick_source

MAX_SUPPORT = 10


def dataset_weights(distances: np.ndarray, temperature: float) -> np.ndarray:
    """Softmax weights of neighbours from their distances, shape (n,), summing to 1.

    Parameters
    ----------
    distances : ndarray of shape (n,), finite, >= 0
    temperature : float
        Relative to the median distance; ``inf`` gives uniform weights.
    """
    d = np.asarray(distances, dtype=float)
    if d.size == 0:
        return d
    if not math.isfinite(temperature):
        return np.full(d.size, 1.0 / d.size)
    scale = float(np.median(d))
    scale = scale if scale > 0 else 1.0
    z = -(d - d.min()) / (temperature * scale)
    w = np.exp(z)
    return w / w.sum()


def greedy_steps(P: np.ndarray, w: np.ndarray, k: int, first: int | None = None
                 ) -> tuple[list[int], list[float], np.ndarray]:
    """The greedy picks (see the module docstring), what each adds, and to which source.

    Parameters
    ----------
    P : ndarray of shape (n_candidates, n_sources), values in [0, 1]
    w : ndarray of shape (n_sources,), summing to 1
    k : int
    first : int, optional
        A candidate forced into first place.

    Returns
    -------
    order : list of int
        Candidate indices, at most ``k``.
    gains : list of float
        Rise of the objective ``sum_j w_j max(b_j, P[c, j])`` at each pick.
    contributions : ndarray of shape (len(order), n_sources)
        ``w_j * max(0, P[c, j] - b_j)`` of each pick: where its gain comes from.
    """
    n = P.shape[0]
    chosen: list[int] = []
    gains: list[float] = []
    parts = []
    b = np.zeros(P.shape[1])
    mean = P @ w
    free = np.ones(n, dtype=bool)
    while len(chosen) < min(k, n):
        if first is not None and not chosen:
            i = first
        else:
            gain = np.maximum(P, b[None, :]) @ w
            gain = np.where(free, gain, -np.inf)
            top = gain.max()
            # exact ties within float noise go to the higher weighted mean
            tied = np.flatnonzero(gain >= top - 1e-12)
            i = int(tied[np.argmax(mean[tied])])
        part = w * np.maximum(P[i] - b, 0.0)
        chosen.append(i)
        gains.append(float(part.sum()))
        parts.append(part)
        free[i] = False
        b = np.maximum(b, P[i])
    return chosen, gains, np.array(parts).reshape(len(chosen), P.shape[1])


def greedy_order(P: np.ndarray, w: np.ndarray, k: int, first: int | None = None) -> list[int]:
    """Indices of ``k`` candidates picked greedily (see :func:`greedy_steps`)."""
    return greedy_steps(P, w, k, first)[0]


def candidate_configs(ctx: SuggestContext, positions: np.ndarray
                      ) -> tuple[list[str], list[dict]]:
    """Candidates in canonical-key order: ``ctx.candidates`` when given, else the
    configurations of the trials at ``positions`` (rows of ``ctx.trials``), brought
    into ``ctx.space`` and de-duplicated; (keys, configurations)."""
    cands: dict[str, dict] = {}
    if ctx.candidates is not None:
        for c in ctx.candidates:
            clipped = ctx.space.clip(c)
            if clipped is not None:
                cands.setdefault(ctx.key(clipped), clipped)
    else:  # the trials' clipped forms are cached in ctx.trials
        for clipped, key in ctx.trials.clipped_at(ctx.space, ctx.space_id, positions):
            if clipped is not None:
                cands.setdefault(key, clipped)
    keys = sorted(cands)
    return keys, [cands[key] for key in keys]


def exact_first(ctx: SuggestContext, row_of: dict[str, int]) -> int | None:
    """The candidate row (``row_of``: canonical key -> row) of the best trial of a
    distance-0 dataset that is a candidate, or None."""
    nb = ctx.exact_match()
    if nb is None:
        return None
    for config in ctx.trials.configs_at(ctx.dataset_positions(nb.dataset_id)):
        clipped = ctx.space.clip(config)
        if clipped is not None and ctx.key(clipped) in row_of:
            return row_of[ctx.key(clipped)]
    return None


class GreedyPortfolio:
    """See the module docstring. Parameters are the variant's settings.

    The defaults (20 neighbours, temperature 0.25, random-forest surrogates) were chosen on
    the tuning half of the realdata benchmark (``benchmarks/realdata``) by mean
    normalised regret at k = 5 over its families.
    """

    uses_history = True
    stochastic = False

    def __init__(self, name: str = "portfolio", *, neighbours: int | None = 20,
                 temperature: float = 0.25, surrogate: str = "forest",
                 weighted: bool = True, shrink: float = 0.0,
                 description: str | None = None):
        self.name = name
        self.shrink = float(shrink)
        self.neighbours = neighbours
        self.temperature = temperature
        self.surrogate = surrogate
        self.weighted = weighted
        self.description = description or (
            f"greedy complementary list over every dataset, similarity weights of the "
            f"{neighbours} nearest shrunk by {self.shrink:g} towards uniform; unseen "
            f"scores from per-study {surrogate} surrogates"
            if weighted and self.shrink else
            f"greedy complementary list over the {neighbours} nearest datasets, "
            f"similarity-weighted; unseen scores from per-study {surrogate} surrogates"
            if weighted else
            f"greedy complementary list over every dataset, uniform weights; unseen "
            f"scores from per-study {surrogate} surrogates")

    # -- sources and candidates ---------------------------------------------------
    def _sources(self, ctx: SuggestContext) -> tuple[list, np.ndarray]:
        nbs = list(ctx.neighbours)
        n_near = len(nbs) if self.neighbours is None else self.neighbours
        if self.weighted and not self.shrink:
            nbs = nbs[:n_near]
        d = np.array([nb.distance if math.isfinite(nb.distance) else 1e6 for nb in nbs])
        if self.weighted:
            w = np.zeros(len(nbs))
            w[:n_near] = dataset_weights(d[:n_near], self.temperature)
            w = (1 - self.shrink) * w + self.shrink / max(len(nbs), 1)
        else:
            w = dataset_weights(d, math.inf)
        units, weights = [], []
        for nb, wd in zip(nbs, w):
            sids = ctx.dataset_studies(nb.dataset_id)
            for sid in sids:
                units.append((nb, sid))
                weights.append(wd / len(sids))
        return units, np.asarray(weights, dtype=float)

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        units, w = self._sources(ctx)
        if not units:
            return []
        unit_ids = [sid for _, sid in units]
        # only the sources' rows are parsed and keyed (in the order of ctx.trials)
        pos = np.unique(np.concatenate([ctx.trials.study_positions(sid)
                                        for sid in set(unit_ids)]))
        src = ctx.trials.rows_at(pos).assign(key=ctx.trials.keys_at(pos))
        keys, configs = candidate_configs(ctx, pos)
        if not keys:
            return []
        row_of = {key: i for i, key in enumerate(keys)}
        col_of = {sid: j for j, sid in enumerate(unit_ids)}
        P = np.full((len(keys), len(units)), np.nan)
        obs = src.groupby(["study_id", "key"])["normalised"].mean()
        for (sid, key), v in obs.items():
            if key in row_of:
                P[row_of[key], col_of[sid]] = v
        seen = np.isfinite(P)
        for j, sid in enumerate(unit_ids):
            missing = np.flatnonzero(~seen[:, j])
            if missing.size:
                P[missing, j] = ctx.predict(sid, self.surrogate,
                                            [configs[i] for i in missing],
                                            [keys[i] for i in missing])
        order, gains, parts = greedy_steps(P, w, k, exact_first(ctx, row_of))
        if not ctx.explain:
            return [Suggestion(rank=r, config=configs[i], strategy=self.name)
                    for r, i in enumerate(order, 1)]
        return [self._suggestion(ctx, src, units, w, P, seen, configs[i], keys[i], i, r,
                                 gains[r - 1], parts[r - 1])
                for r, i in enumerate(order, 1)]

    def _suggestion(self, ctx, src, units, w, P, seen, config, key, i, rank, gain,
                    part) -> Suggestion:
        support = tuple(
            {"dataset_id": units[j][0].dataset_id, "name": units[j][0].name,
             "weight": float(w[j]), "normalised": float(P[i, j]),
             "predicted": not bool(seen[i, j])}
            for j in np.argsort(-w, kind="stable")[:MAX_SUPPORT])
        # datasets where it was run, those it added most to the objective first
        prefer = [units[j][0].dataset_id for j in np.argsort(-part, kind="stable")
                  if seen[i, j] and part[j] > 0]
        best_on = observed_support(ctx, src, key, prefer)
        common = dict(rank=rank, expected_normalised=float(P[i] @ w),
                      predicted=not bool(seen[i].all()), support=support, gain=gain,
                      best_on=best_on)
        row, nb = pick_source(ctx, src, key, best_on)
        if row is None:  # only possible with ctx.candidates: nobody ran it
            return Suggestion(config=config, strategy=self.name, metric=None, **common)
        return ctx.from_trial(self.name, row, nb, config, **common)
