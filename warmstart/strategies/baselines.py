"""Baselines that read nothing from the history: random configurations, library defaults."""

from __future__ import annotations

import numpy as np

from warmstart.spaces import config_key
from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext


class RandomConfigs:
    """Random search: configurations drawn from the search space with ``ctx.seed``.

    Draws uniformly (log-uniformly where declared) from ``ctx.space``, skipping
    duplicates; with ``ctx.candidates`` it draws from those without replacement.
    """

    name = "random"
    description = "random configurations from the search space (seeded)"
    uses_history = False
    stochastic = True

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        rng = np.random.default_rng(ctx.seed)
        if ctx.candidates is not None:
            order = rng.permutation(len(ctx.candidates))[:k]
            configs = [ctx.candidates[i] for i in order]
        else:
            configs, seen = [], set()
            for _ in range(50 * k):
                if len(configs) == k:
                    break
                c = ctx.space.sample(rng)
                if config_key(c) not in seen:
                    seen.add(config_key(c))
                    configs.append(c)
        return [Suggestion(rank=i, config=dict(c), strategy=self.name)
                for i, c in enumerate(configs, 1)]


class LibraryDefaults:
    """The estimator's own defaults: ``{}`` (the defaults brought into a user space)."""

    name = "defaults"
    description = "the estimator's own default configuration"
    uses_history = False
    stochastic = False

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        config = ctx.space.clip({}) if ctx.restricted else {}
        if config is None:
            return []
        allowed = ctx.candidate_keys
        if allowed is not None and ctx.key(config) not in allowed:
            return []
        return [Suggestion(rank=1, config=config, strategy=self.name)]
