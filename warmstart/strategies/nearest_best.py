"""Nearest-best: the best trials of the nearest past datasets.

The nearest-neighbour warm start of Feurer, Springenberg & Hutter (AAAI 2015): rank the
past datasets by meta-feature distance and take the best configuration found on each.
Here the list is filled round by round: the best trial of every neighbour in order of
distance, then the second best of each, and so on, skipping configurations already
listed. A dataset identical to the query (distance 0) therefore always contributes the
first suggestion, its best trial.
"""

from __future__ import annotations

from warmstart.strategies.base import SuggestContext, Suggestion


class NearestBest:
    name = "nearest-best"
    description = "best trials of the nearest datasets, round-robin by distance"
    uses_history = True
    stochastic = False

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        allowed = ctx.candidate_keys()
        per_dataset = [(nb, ctx.dataset_trials(nb.dataset_id)) for nb in ctx.neighbours]
        out: list[Suggestion] = []
        seen: set[str] = set()
        depth = 0
        while len(out) < k and any(depth < len(t) for _, t in per_dataset):
            for nb, t in per_dataset:
                if depth >= len(t) or len(out) >= k:
                    continue
                row = t.iloc[depth]
                config = ctx.space.clip(row["config"])
                if config is None:
                    continue
                key = ctx.key(config)
                if key in seen or (allowed is not None and key not in allowed):
                    continue
                seen.add(key)
                out.append(ctx.from_trial(self.name, row, nb, config, rank=len(out) + 1))
            depth += 1
        return out
