"""Ranking strategies for ``suggest``: each turns the history into a ranked list.

Register a new strategy by adding an instance to ``_ALL`` below (see DEVELOPERS.md).
"""

from __future__ import annotations

from warmstart.errors import BadInputError
from warmstart.spaces import user_space
from warmstart.strategies.anchored import AnchoredPortfolio
from warmstart.strategies.auto import AutoChoice
from warmstart.strategies.base import (
    Strategy,
    Suggestion,
    Suggestions,
    canonical_key,
    normalise_scores,
    prepare_trials,
)
from warmstart.strategies.baselines import LibraryDefaults, RandomConfigs
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.hedged import HedgedPortfolio
from warmstart.strategies.nearest_best import NearestBest
from warmstart.strategies.portfolio import GreedyPortfolio
from warmstart.strategies.transfer import TransferForest
from warmstart.strategies.trial_index import TrialIndex

_ALL: tuple[Strategy, ...] = (
    AutoChoice(),
    GreedyPortfolio("portfolio"),
    NearestBest(),
    GreedyPortfolio("global-portfolio", weighted=False, neighbours=None),
    GreedyPortfolio("blend-portfolio", shrink=0.5),
    TransferForest(),
    # alternatives tried on the realdata benchmark's tuning half (not better there)
    AnchoredPortfolio("anchored-portfolio"),
    HedgedPortfolio("hedged-portfolio"),
    RandomConfigs(),
    LibraryDefaults(),
)
STRATEGIES: dict[str, Strategy] = {s.name: s for s in _ALL}
# Chooses per family and task on the history itself (warmstart/strategies/auto.py);
# measured on the realdata benchmark's evaluation half (benchmarks/realdata/README.md).
DEFAULT_STRATEGY = "auto"


def get_strategy(name: str | Strategy) -> Strategy:
    """The strategy called ``name`` (a Strategy instance is returned as is)."""
    if not isinstance(name, str):
        return name
    try:
        return STRATEGIES[name]
    except KeyError:
        raise BadInputError(
            f"unknown strategy {name!r}; choose from {', '.join(STRATEGIES)}"
        ) from None


__all__ = ["DEFAULT_STRATEGY", "STRATEGIES", "AnchoredPortfolio", "AutoChoice",
           "GreedyPortfolio",
           "HedgedPortfolio", "LibraryDefaults",
           "NearestBest", "RandomConfigs", "Strategy", "SuggestContext", "Suggestion",
           "Suggestions",
           "TrialIndex", "TransferForest", "canonical_key", "get_strategy", "normalise_scores",
           "prepare_trials",
           "user_space"]
