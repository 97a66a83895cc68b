"""Ranking strategies for ``suggest``: each turns the history into a ranked list."""

from __future__ import annotations

from warmstart.errors import BadInputError
from warmstart.strategies.base import (
    Strategy,
    SuggestContext,
    Suggestion,
    normalise_scores,
    prepare_trials,
)
from warmstart.strategies.nearest_best import NearestBest

STRATEGIES: dict[str, Strategy] = {s.name: s for s in (NearestBest(),)}
DEFAULT_STRATEGY = "nearest-best"


def get_strategy(name: str) -> Strategy:
    try:
        return STRATEGIES[name]
    except KeyError:
        raise BadInputError(
            f"unknown strategy {name!r}; choose from {', '.join(STRATEGIES)}"
        ) from None


__all__ = ["DEFAULT_STRATEGY", "STRATEGIES", "Strategy", "SuggestContext", "Suggestion",
           "get_strategy", "normalise_scores", "prepare_trials"]
