"""Transfer across datasets: one model of normalised score over every study of a family.

The neighbour-based portfolios only read the nearest datasets' studies. This strategy
pools all of them: a seeded random forest learns a trial's normalised score from its
dataset's scaled meta-features (the robust scaling of :mod:`warmstart.similarity`,
fitted on the history) and the configuration's unit encoding
(:meth:`~warmstart.spaces.SearchSpace.encode`). Learning initialisations across
datasets from such pooled evidence follows Wistuba, Schilling & Schmidt-Thieme
(ECML-PKDD 2015); surrogate benchmarks fit models of the same shape.

For the new dataset every tree of the forest is one plausible response surface. The
greedy portfolio (:func:`~warmstart.strategies.portfolio.greedy_steps`) is built over
the trees with uniform weights, so the list maximises the expected best-of-k under the
forest's spread instead of repeating near-copies of the single highest mean.

Candidates are the history's configurations (brought into the search space,
de-duplicated) or ``ctx.candidates``; a dataset at distance 0 gives its best trial first.
A history larger than ``max_rows`` trials is subsampled (seeded) before fitting; the
fitted model is cached in the context's surrogate cache under the digest of the
studies it saw.
"""

from __future__ import annotations

import hashlib

import numpy as np

from warmstart.similarity import feature_names, fit_scaler, matrix
from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.explain import observed_support, pick_source
from warmstart.strategies.portfolio import candidate_configs, exact_first, greedy_steps


class TransferForest:
    """See the module docstring.

    Parameters
    ----------
    name : str
    trees : int
        Trees of the forest (and sources of the greedy step).
    max_rows : int
        Cap on the trials the forest is fitted on.
    min_leaf : int
        ``min_samples_leaf`` of the trees (smooths the response surfaces).
    """

    uses_history = True
    stochastic = False

    def __init__(self, name: str = "transfer", *, trees: int = 40, max_rows: int = 20000,
                 min_leaf: int = 3):
        self.name = name
        self.trees = int(trees)
        self.max_rows = int(max_rows)
        self.min_leaf = int(min_leaf)
        self.description = ("greedy list over the response surfaces of one random forest "
                            "of normalised score from (meta-features, configuration), fitted "
                            "on every study of the family")

    def _model(self, ctx: SuggestContext):
        """(forest, scaler, study ids, their rows) fitted on the context's studies, cached."""
        sids = sorted(ctx.studies["study_id"])
        digest = hashlib.sha256("\n".join(sids).encode()).hexdigest()[:24]
        tag = f"{digest}-{self.trees}-{self.min_leaf}-{self.max_rows}-{ctx.seed}"
        return ctx.surrogates.section("transfer").model(tag, "forest",
                                                        lambda: self._fit(ctx, sids))

    def _fit(self, ctx: SuggestContext, sids: list[str]):
        from sklearn.ensemble import RandomForestRegressor

        dataset_of = dict(zip(ctx.studies["study_id"], ctx.studies["dataset_id"]))
        fps = {d: ctx.fingerprints[d] for d in set(dataset_of.values()) if d in ctx.fingerprints}
        names = feature_names(fps, ctx.query) if fps else []
        ids = sorted(fps)
        raw = matrix([fps[i] for i in ids], names)
        scaler = fit_scaler(raw, names) if names else None
        # a dataset without a stored fingerprint sits at the history's median (0)
        meta = {d: np.zeros(len(names)) for d in dataset_of.values()}
        if scaler is not None:
            meta.update(zip(ids, _finite(scaler.transform(raw))))
        pos = np.concatenate([ctx.trials.study_positions(s) for s in sids]
                             or [np.zeros(0, dtype=np.intp)])
        if pos.size > self.max_rows:  # bounded cost on large histories
            pos = np.sort(np.random.default_rng(ctx.seed).choice(pos, self.max_rows,
                                                                 replace=False))
        if pos.size == 0:
            return None
        rows = ctx.trials.column("study_id")[pos]
        X = np.hstack([np.array([meta[dataset_of[s]] for s in rows]),
                       ctx.full_space.encode(ctx.trials.configs_at(pos))])
        model = RandomForestRegressor(n_estimators=self.trees, min_samples_leaf=self.min_leaf,
                                      max_features=0.5, random_state=ctx.seed, n_jobs=1)
        model.fit(X, ctx.trials.column("normalised")[pos])
        return model, scaler, pos

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        fitted = self._model(ctx)
        if fitted is None:
            return []
        model, scaler, pos = fitted
        src = ctx.trials.rows_at(pos).assign(key=ctx.trials.keys_at(pos))
        keys, configs = candidate_configs(ctx, pos)
        if not keys:
            return []
        q = (np.zeros(0) if scaler is None else
             _finite(scaler.transform(matrix([ctx.query], scaler.names)))[0])
        X = np.hstack([np.repeat(q[None, :], len(keys), axis=0), ctx.full_space.encode(configs)])
        P = np.clip(np.column_stack([t.predict(X) for t in model.estimators_]), 0.0, 1.0)
        w = np.full(P.shape[1], 1.0 / P.shape[1])
        first = exact_first(ctx, {key: i for i, key in enumerate(keys)})
        order, gains, _ = greedy_steps(P, w, k, first)
        if not ctx.explain:
            return [Suggestion(rank=r, config=configs[i], strategy=self.name)
                    for r, i in enumerate(order, 1)]
        out = []
        for rank, (i, gain) in enumerate(zip(order, gains), 1):
            best_on = observed_support(ctx, src, keys[i])
            common = dict(rank=rank, expected_normalised=float(P[i] @ w), predicted=True,
                          gain=gain, best_on=best_on)
            row, nb = pick_source(ctx, src, keys[i], best_on)
            out.append(Suggestion(config=configs[i], strategy=self.name, **common)
                       if row is None else ctx.from_trial(self.name, row, nb, configs[i],
                                                          **common))
        return out


def _finite(X: np.ndarray) -> np.ndarray:
    """Scaled meta-features with undefined values at the history's median (0)."""
    return np.where(np.isfinite(X), X, 0.0)


__all__ = ["TransferForest"]
