"""Median-anchored portfolio: the greedy portfolio scored like the regret it is judged by.

The greedy portfolio (:mod:`warmstart.strategies.portfolio`) maximises a weighted mean
of min-max normalised scores, where 0 is each source study's *worst* trial. A backtest
reports normalised regret relative to the study's *median* instead,
``(best - x) / (best - median)``. This variant normalises every source study the same
way before the greedy step: one minus the regret, with the regret capped at
``regret_cap`` (``R >= 1``) and the result scaled to [0, 1]:

    r = min((best - x) / (best - median), R),        a = 1 - r / R

so 1 is the study's best trial, ``1 - 1/R`` its median and 0 anything with regret ``R``
or more (``R = 1``: anything at or below the median). The greedy step then maximises the
weighted mean of ``a``, i.e. minimises the weighted mean of the capped regret of the
best configuration listed so far - the quantity the backtest reports, on the
neighbours. Two effects: studies with a small best-median gap are no longer flattened
next to those with a large best-worst spread, and (more so for small ``R``) a
configuration gets little credit for being merely better than a study's worst trials.
Because ``a`` is an affine map of the min-max score followed by clipping, it is
computed from the ``normalised`` column (whatever orientation the metric has); a study
whose median equals its best gets 1 everywhere (it cannot tell configurations apart).

Surrogates are fitted on the anchored scores and cached apart from the min-max ones.
A suggestion's ``normalised_score``, ``expected_normalised`` and ``support`` values
are on the anchored scale. Everything else (neighbours, weights, candidates, the
distance-0 rule) is the greedy portfolio's.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.strategies.base import Suggestion
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.portfolio import GreedyPortfolio


def _anchor(s: np.ndarray, med: np.ndarray, hi: np.ndarray, cap: float) -> np.ndarray:
    gap = hi - med
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.minimum((hi - s) / gap, cap)
    return np.where(gap > 0, 1.0 - r / cap, 1.0)


def anchored_trials(trials: pd.DataFrame, regret_cap: float = 1.0) -> pd.DataFrame:
    """A copy of ``trials`` whose ``normalised`` column is median-anchored per study.

    Parameters
    ----------
    trials : DataFrame
        With columns ``study_id`` and ``normalised`` (oriented scores, higher is
        better, e.g. min-max normalised).
    regret_cap : float, >= 1
        ``R``: regrets ``(max - s) / (max - median)`` above it count as ``R``.

    Returns
    -------
    DataFrame
        ``trials`` with ``normalised`` replaced by ``1 - min(regret, R) / R`` within
        each study (all ones for a study whose median equals its best).
    """
    out = trials.copy()
    if out.empty:
        return out
    grouped = out.groupby("study_id", sort=False)["normalised"]
    out["normalised"] = _anchor(out["normalised"].to_numpy(dtype=float),
                                grouped.transform("median").to_numpy(dtype=float),
                                grouped.transform("max").to_numpy(dtype=float), regret_cap)
    return out


class AnchoredPortfolio(GreedyPortfolio):
    """The greedy portfolio on median-anchored scores (see the module docstring).

    Takes :class:`GreedyPortfolio`'s parameters and ``regret_cap`` (``R >= 1``).
    """

    def __init__(self, name: str = "anchored-portfolio", *, regret_cap: float = 1.0,
                 **kwargs):
        if not regret_cap >= 1.0:
            raise BadInputError(f"regret_cap must be at least 1, got {regret_cap!r}")
        self.regret_cap = float(regret_cap)
        kwargs.setdefault("description", (
            f"greedy complementary list over the {kwargs.get('neighbours', 20)} nearest "
            "datasets, similarity-weighted, scores anchored at each study's median; "
            "unseen scores from per-study surrogates"))
        super().__init__(name, **kwargs)

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        # Own surrogate cache per cap. The anchoring depends only on each study's own
        # trials, so the cache stays valid across queries (as for the min-max ones).
        scores = pd.DataFrame({"study_id": ctx.trials.column("study_id"),
                               "normalised": ctx.trials.column("normalised")})
        anchored = anchored_trials(scores, self.regret_cap)["normalised"].to_numpy()
        view = dataclasses.replace(
            ctx, trials=ctx.trials.rescored(anchored),
            surrogates=ctx.surrogates.section(f"median-anchored {self.regret_cap!r}"))
        return super().propose(view, k)


__all__ = ["AnchoredPortfolio", "anchored_trials"]
