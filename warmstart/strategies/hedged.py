"""Hedged portfolio: similarity-weighted suggestions interleaved with robust defaults.

The similarity-weighted greedy portfolio (``portfolio``) bets on the nearest datasets
being like the new one; the dataset-agnostic one (``global-portfolio``) lists
configurations that do well across the whole history. When the meta-features say
little about which configurations suit a dataset, the nearest datasets can mislead
while robust defaults rarely do badly. This strategy hedges between the two lists:
every ``every``-th place goes to the next configuration of the dataset-agnostic list
and every other place to the next one of the similarity-weighted list (``every = 2``
alternates, starting with the weighted list), skipping configurations already listed.

The list is the same whatever ``k``: the first ``k`` suggestions of a longer list are
the list for ``k``. The first place always comes from the weighted list, so a dataset
identical to the query (distance 0) still contributes its best trial first.
"""

from __future__ import annotations

import dataclasses

from warmstart.errors import BadInputError
from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.portfolio import GreedyPortfolio


class HedgedPortfolio:
    """See the module docstring.

    Parameters
    ----------
    name : str
    every : int, >= 2
        Every ``every``-th place (2nd, 4th, ... for 2) comes from the dataset-agnostic list.
    neighbours, temperature, surrogate :
        Settings of the similarity-weighted list (as :class:`GreedyPortfolio`); the
        dataset-agnostic list uses every dataset, uniform weights and the same surrogate.
    """

    uses_history = True
    stochastic = False

    def __init__(self, name: str = "hedged-portfolio", *, every: int = 2,
                 neighbours: int | None = 20, temperature: float = 0.25,
                 surrogate: str = "forest"):
        if int(every) != every or every < 2:
            raise BadInputError(f"every must be an integer of at least 2, got {every!r}")
        self.name = name
        self.every = int(every)
        self.neighbours = neighbours
        self.temperature = temperature
        self.surrogate = surrogate
        self.near = GreedyPortfolio(name, neighbours=neighbours, temperature=temperature,
                                    surrogate=surrogate)
        self.far = GreedyPortfolio(name, weighted=False, neighbours=None,
                                   surrogate=surrogate)
        self.description = (
            f"greedy list over the {neighbours} nearest datasets with every {self.every}"
            "-th place taken from the dataset-agnostic greedy list")

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        near, far = self.near.propose(ctx, k), self.far.propose(ctx, k)
        out: list[Suggestion] = []
        listed: set[str] = set()
        i = j = 0
        while len(out) < k and (i < len(near) or j < len(far)):
            from_far = (len(out) + 1) % self.every == 0
            if (from_far and j < len(far)) or i >= len(near):
                s, j = far[j], j + 1
            else:
                s, i = near[i], i + 1
            key = ctx.key(s.config)
            if key not in listed:
                listed.add(key)
                out.append(dataclasses.replace(s, rank=len(out) + 1, strategy=self.name))
        return out


__all__ = ["HedgedPortfolio"]
