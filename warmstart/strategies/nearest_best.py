"""Nearest-best: the best trials of the nearest past datasets.

The nearest-neighbour warm start of Feurer, Springenberg & Hutter (AAAI 2015): rank the
past datasets by meta-feature distance and take the best configuration found on each.
Here the list is filled round by round: the best trial of every neighbour in order of
distance, then the second best of each, and so on, skipping configurations already
listed. A dataset identical to the query (distance 0) therefore always contributes the
first suggestion, its best trial.
"""

from __future__ import annotations

from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext


class NearestBest:
    name = "nearest-best"
    description = "best trials of the nearest datasets, round-robin by distance"
    uses_history = True
    stochastic = False

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        allowed = ctx.candidate_keys
        # a neighbour's trials are ranked when the round-robin first reaches it
        sizes = [sum(ctx.trials.study_positions(s).size
                     for s in ctx.dataset_studies(nb.dataset_id)) for nb in ctx.neighbours]
        out: list[Suggestion] = []
        seen: set[str] = set()
        depth = 0
        while len(out) < k and any(depth < n for n in sizes):
            for nb, n in zip(ctx.neighbours, sizes):
                if depth >= n or len(out) >= k:
                    continue
                pos = int(ctx.dataset_positions(nb.dataset_id)[depth])
                config = ctx.space.clip(ctx.trials.configs_at([pos])[0])
                if config is None:
                    continue
                key = ctx.key(config)
                if key in seen or (allowed is not None and key not in allowed):
                    continue
                seen.add(key)
                row = ctx.trials.rows_at([pos]).iloc[0]
                out.append(ctx.from_trial(self.name, row, nb, config, rank=len(out) + 1))
            depth += 1
        return out
