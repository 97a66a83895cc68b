"""``auto``: choose the ranking strategy per family and task on the history itself.

For a query, ``auto`` scores a small grid of candidate strategies (:data:`CANDIDATES`)
by leave-one-dataset-out normalised regret at ``k = CHOICE_K`` on the history the query
sees, and answers with the winner:

* each of up to ``MAX_CHOICE_DATASETS`` past datasets (a seeded choice among those
  that can rank anything) is held out in turn; every candidate proposes from the
  other datasets, and its regret there is ``(best - best of its first k) / (best -
  median)`` over the held-out dataset's own normalised trials (configurations it never
  ran get its own surrogate's prediction, as in :mod:`warmstart.backtest`);
* the lowest mean regret wins; ties go to the earlier candidate in the grid.

**Nested.** The dataset being suggested for never takes part in the choice: in a
backtest it is already out of the context; in ``suggest``, a dataset at distance 0 (the
query seen before) is left out of the choice (it still gives its best trial first).

**Fallback.** With fewer than ``MIN_CHOICE_DATASETS`` datasets that can rank anything,
a mean over so few held-out datasets is noise, and ``FALLBACK`` is used: the blend that
shrinks the similarity weights half-way to uniform (it neither trusts the neighbours
fully nor ignores them).

**Bounded cost.** The grid is small, at most ``MAX_CHOICE_DATASETS`` datasets are held
out, and on a large history both the choice and the answer read at most ``MAX_POOL``
datasets: the choice a seeded sample of the history (so it stays one choice per family
and task, whatever the query, and a newly logged dataset outside the sample keeps the
cached choice; see :func:`choice_pool`), the answer the query's ``MAX_POOL`` nearest.

**Cache.** The choice depends only on the studies the context holds (ids are unique
and studies are append-only), the family, task, metric, space, candidates and seed. It is
kept in memory and, when the context names a cache directory (``suggest`` uses
``<history>/.cache/``), as a JSON file ``auto-<digest>.json`` written by atomic rename.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import tempfile
from pathlib import Path
from typing import Any

import numpy as np

from warmstart.similarity import nearest
from warmstart.strategies.base import Strategy, Suggestion
from warmstart.strategies.context import SuggestContext
from warmstart.strategies.nearest_best import NearestBest
from warmstart.strategies.portfolio import GreedyPortfolio
from warmstart.strategies.transfer import TransferForest

CHOICE_K = 5
MIN_CHOICE_DATASETS = 8
MAX_CHOICE_DATASETS = 20
MAX_POOL = 200
CACHE_VERSION = 2

# The grid: the shipped portfolio, a wider softer one, the blend at three strengths
# (1 = the dataset-agnostic list), nearest-best and the transfer forest.
CANDIDATES: tuple[Strategy, ...] = (
    GreedyPortfolio("portfolio n=20 t=0.25", neighbours=20, temperature=0.25),
    GreedyPortfolio("portfolio n=10 t=1", neighbours=10, temperature=1.0),
    GreedyPortfolio("blend 0.3", neighbours=20, temperature=0.25, shrink=0.3),
    GreedyPortfolio("blend 0.7", neighbours=20, temperature=0.25, shrink=0.7),
    GreedyPortfolio("global", weighted=False, neighbours=None),
    NearestBest(),
    TransferForest(),
)
FALLBACK: Strategy = GreedyPortfolio("blend 0.5", neighbours=20, temperature=0.25,
                                     shrink=0.5)
_MEMORY: dict[str, dict[str, Any]] = {}


class AutoChoice:
    """See the module docstring."""

    name = "auto"
    description = ("per family and task, the strategy with the lowest leave-one-dataset-out "
                   f"regret at {CHOICE_K} on the history (fallback: {FALLBACK.name})")
    uses_history = True
    stochastic = False

    def __init__(self, candidates: tuple[Strategy, ...] = CANDIDATES,
                 fallback: Strategy = FALLBACK):
        self.candidates = candidates
        self.fallback = fallback

    def choose(self, ctx: SuggestContext) -> dict[str, Any]:
        """The choice for this context: ``{"chosen", "datasets", "regrets", "rule"}``
        (cached; see the module docstring)."""
        digest = self._digest(ctx)
        if digest in _MEMORY:
            return _MEMORY[digest]
        path = None if ctx.cache_dir is None else Path(ctx.cache_dir) / f"auto-{digest}.json"
        choice = _read(path)
        names = {s.name for s in (*self.candidates, self.fallback)}
        if choice is None or choice["chosen"] not in names:
            choice = self._choose(ctx)
            _write(path, choice)
        _MEMORY[digest] = choice
        return choice

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        choice = self.choose(ctx)
        by_name = {s.name: s for s in (*self.candidates, self.fallback)}
        nearest_ids = [n.dataset_id for n in ctx.neighbours[:MAX_POOL]]
        out = by_name[choice["chosen"]].propose(_keep(ctx, nearest_ids), k)
        return [dataclasses.replace(s, strategy=self.name, choice=choice) for s in out]

    # -- the choice ------------------------------------------------------------------------
    def _choose(self, ctx: SuggestContext) -> dict[str, Any]:
        ctx = _keep(ctx, choice_pool(ctx))
        ids = _rankable(ctx)
        if len(ids) < MIN_CHOICE_DATASETS:
            return {"chosen": self.fallback.name, "datasets": len(ids), "regrets": {},
                    "rule": f"fewer than {MIN_CHOICE_DATASETS} datasets: fallback"}
        rng = np.random.default_rng(ctx.seed)
        ids = sorted(rng.permutation(ids)[:MAX_CHOICE_DATASETS].tolist())
        regrets = np.array([[inner_regret(ctx, s, d) for s in self.candidates] for d in ids])
        with np.errstate(all="ignore"):
            mean = np.array([np.nan if np.isnan(c).all() else np.nanmean(c)
                             for c in regrets.T])
        if np.isnan(mean).all():  # no candidate proposed anything
            return {"chosen": self.fallback.name, "datasets": len(ids), "regrets": {},
                    "rule": "no candidate could be scored: fallback"}
        best = int(np.nanargmin(mean))
        return {"chosen": self.candidates[best].name, "datasets": len(ids),
                "regrets": {s.name: None if np.isnan(m) else float(m)
                            for s, m in zip(self.candidates, mean)},
                "rule": f"lowest leave-one-dataset-out regret at {CHOICE_K}"}

    def _digest(self, ctx: SuggestContext) -> str:
        pool = set(choice_pool(ctx))
        sids = sorted(s for s, d in zip(ctx.studies["study_id"], ctx.studies["dataset_id"])
                      if d in pool)
        parts = [str(CACHE_VERSION), ctx.family.name, ctx.query.task, str(ctx.seed),
                 ",".join(sorted(set(ctx.studies["metric"]))), json.dumps(ctx.space.to_dict()),
                 "|".join(s.name for s in (*self.candidates, self.fallback)),
                 f"{CHOICE_K}-{MIN_CHOICE_DATASETS}-{MAX_CHOICE_DATASETS}-{MAX_POOL}",
                 "" if ctx.candidates is None else ",".join(sorted(ctx.candidate_keys)),
                 *sids]
        return hashlib.sha256("\n".join(parts).encode()).hexdigest()[:32]


def choice_pool(ctx: SuggestContext) -> list[str]:
    """The datasets the choice reads: all but the query's own, or on a large history the
    ``MAX_POOL`` whose seeded hash of their id is smallest.

    A hash rank, not a shuffle, so that the sample stays the same as the history grows:
    a new dataset joins it only if its hash ranks among the smallest, and otherwise
    leaves the cached choice valid (the digest covers only the sampled datasets).
    """
    pool = sorted(set(ctx.studies["dataset_id"]) - _skipped(ctx))
    if len(pool) <= MAX_POOL:
        return pool
    rank = {d: hashlib.sha256(f"{ctx.seed}:{d}".encode()).hexdigest() for d in pool}
    return sorted(sorted(pool, key=rank.__getitem__)[:MAX_POOL])


def _keep(ctx: SuggestContext, dataset_ids: list[str]) -> SuggestContext:
    """A view of ``ctx`` with only these datasets' studies and neighbours (``ctx`` itself
    when that is all of them)."""
    keep = set(dataset_ids)
    if keep >= set(ctx.studies["dataset_id"]):
        return ctx
    studies = ctx.studies[ctx.studies["dataset_id"].isin(keep)].reset_index(drop=True)
    return dataclasses.replace(ctx, studies=studies,
                               neighbours=[n for n in ctx.neighbours if n.dataset_id in keep])


def _skipped(ctx: SuggestContext) -> set[str]:
    """Datasets kept out of the choice: the query itself when seen before."""
    nb = ctx.exact_match()
    return set() if nb is None else {nb.dataset_id}


def _truth(ctx: SuggestContext, dataset_id: str) -> dict[str, float]:
    """Canonical key -> mean normalised score of the dataset's own trials."""
    pos = ctx.dataset_positions(dataset_id)
    keys = ctx.trials.keys_at(pos)
    vals = ctx.trials.column("normalised")[pos]
    out: dict[str, list[float]] = {}
    for key, v in zip(keys, vals):
        out.setdefault(key, []).append(float(v))
    return {key: float(np.mean(v)) for key, v in out.items()}


def _rankable(ctx: SuggestContext) -> list[str]:
    """Datasets in the context (minus the query) whose best trial beats their median."""
    skip = _skipped(ctx)
    out = []
    for d in sorted(set(ctx.studies["dataset_id"]) - skip):
        if d not in ctx.fingerprints:
            continue
        v = np.array(list(_truth(ctx, d).values()))
        if v.size and v.max() > np.median(v):
            out.append(d)
    return out


def inner_regret(ctx: SuggestContext, strategy: Strategy, dataset_id: str) -> float:
    """Regret at ``CHOICE_K`` of ``strategy`` on one history dataset held out of ``ctx``.

    The held-out dataset and the query's own dataset (distance 0) are removed from the
    studies and neighbours; scores are the held-out dataset's normalised trials.
    """
    out = _skipped(ctx) | {dataset_id}
    studies = ctx.studies[~ctx.studies["dataset_id"].isin(out)].reset_index(drop=True)
    others = {d: ctx.fingerprints[d] for d in set(studies["dataset_id"])
              if d in ctx.fingerprints}
    names = {n.dataset_id: n.name for n in ctx.neighbours}
    query = ctx.fingerprints[dataset_id]
    view = dataclasses.replace(ctx, query=query, studies=studies, explain=False,
                               neighbours=nearest(query, others, names, k=None))
    truth = _truth(ctx, dataset_id)
    proposed = strategy.propose(view, CHOICE_K)[:CHOICE_K]
    if not proposed:
        return float("nan")
    keys = [ctx.key(s.config) for s in proposed]
    missing = [i for i, key in enumerate(keys) if key not in truth]
    values = np.array([truth.get(key, np.nan) for key in keys])
    if missing:
        study = ctx.dataset_studies(dataset_id)[0]
        values[missing] = ctx.predict(study, "forest", [proposed[i].config for i in missing],
                                      [keys[i] for i in missing])
    v = np.array(list(truth.values()))
    best, median = float(v.max()), float(np.median(v))
    return (best - float(values.max())) / (best - median)


def _read(path: Path | None) -> dict[str, Any] | None:
    if path is None or not path.is_file():
        return None
    try:
        choice = json.loads(path.read_text())
    except (OSError, ValueError):
        return None  # a damaged cache file is recomputed and replaced
    return choice if isinstance(choice, dict) and "chosen" in choice else None


def _write(path: Path | None, choice: dict[str, Any]) -> None:
    """Atomic write (temporary file + rename); a read-only history just skips caching."""
    if path is None:
        return
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=".tmp-", suffix=".json")
        with os.fdopen(fd, "w") as f:
            json.dump(choice, f, indent=2, sort_keys=True)
        os.replace(tmp, path)
    except OSError:
        return


__all__ = ["CANDIDATES", "CHOICE_K", "FALLBACK", "MAX_CHOICE_DATASETS", "MAX_POOL",
           "MIN_CHOICE_DATASETS", "AutoChoice", "inner_regret"]
