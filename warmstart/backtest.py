"""Backtest ranking strategies on the history itself: would they have helped before?

Protocol (leave-one-dataset-out). Each past dataset with a study of the family is held
out in turn; every strategy proposes ``max(ks)`` configurations from the rest of the
history (same task and metric; when ``groups`` are given, the held-out dataset's whole
group is left out, so related data never helps itself). Histories of more than
``LOO_MAX_GROUPS`` groups are backtested by ``GROUPED_FOLDS`` seeded folds of groups
instead, which bounds the cost.

Quality of a suggestion on the held-out dataset: its score there when that
configuration (same canonical key, see :func:`warmstart.strategies.canonical_key`) was
run in the held-out study (mean over repeats), otherwise the prediction of a surrogate
fitted on the held-out study's trials (:mod:`warmstart.surrogate`); predicted lookups
are counted and reported per strategy.

Normalised regret at ``k`` on a held-out dataset, with scores oriented so that higher is
better::

    regret@k = (best - max(first k suggestions)) / (best - median)

``best`` and ``median`` over the held-out dataset's own trials. 0 means the list found
the best configuration known there, 1 that it did no better than the median trial;
datasets whose best equals their median are skipped (they cannot rank anything).
A strategy proposing fewer than k configurations is judged on those it proposed.
Stochastic strategies (random search) are run ``random_repeats`` times with different
seeds and their regret averaged per dataset.
"""

from __future__ import annotations

import json
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.fingerprint import Fingerprint
from warmstart.metrics import DEFAULT_METRIC, MINIMIZE
from warmstart.similarity import nearest
from warmstart.spaces import SearchSpace
from warmstart.strategies import (
    STRATEGIES,
    Strategy,
    SuggestContext,
    canonical_key,
    get_strategy,
    prepare_trials,
)
from warmstart.surrogate import fit_surrogate

DEFAULT_KS = (1, 3, 5, 10)
LOO_MAX_GROUPS = 200
GROUPED_FOLDS = 10
RANDOM = "random"


@dataclass
class BacktestResult:
    """Regret of each strategy on each held-out dataset.

    Attributes
    ----------
    family : str
    ks : tuple of int
    strategies : list of str
    metrics : dict
        Task -> metric used.
    per_dataset : DataFrame
        One row per (dataset, strategy, k): ``dataset_id``, ``name``, ``task``,
        ``strategy``, ``k``, ``regret``.
    lookups : dict
        Strategy -> {"lookups": int, "predicted": int}.
    skipped : list of str
        Held-out datasets left out (best equals median).
    """

    family: str
    ks: tuple[int, ...]
    strategies: list[str]
    metrics: dict[str, str]
    per_dataset: pd.DataFrame
    lookups: dict[str, dict[str, int]]
    skipped: list[str] = field(default_factory=list)

    @property
    def n_held_out(self) -> int:
        """How many datasets were held out and scored."""
        return int(self.per_dataset["dataset_id"].nunique())

    def regrets(self, strategy: str, k: int) -> np.ndarray:
        """Per-dataset regrets of one strategy at one k, shape (n_datasets,)."""
        d = self.per_dataset
        return d[(d["strategy"] == strategy) & (d["k"] == k)]["regret"].to_numpy()

    def summary(self) -> list[dict[str, Any]]:
        """Per (strategy, k): mean, std, quartiles of regret, and share beating random."""
        out = []
        d = self.per_dataset
        has_random = RANDOM in self.strategies
        for s in self.strategies:
            lk = self.lookups.get(s, {"lookups": 0, "predicted": 0})
            for k in self.ks:
                r = d[(d["strategy"] == s) & (d["k"] == k)].set_index("dataset_id")["regret"]
                row: dict[str, Any] = {"strategy": s, "k": k, "datasets": int(r.size),
                                       "mean_regret": _stat(np.mean, r),
                                       "std_regret": _stat(np.std, r),
                                       "q25": _stat(lambda x: np.quantile(x, 0.25), r),
                                       "median_regret": _stat(np.median, r),
                                       "q75": _stat(lambda x: np.quantile(x, 0.75), r)}
                if has_random and s != RANDOM:
                    rr = d[(d["strategy"] == RANDOM) & (d["k"] == k)].set_index(
                        "dataset_id")["regret"].reindex(r.index)
                    wins = (r < rr).astype(float) + 0.5 * (r == rr).astype(float)
                    row["beats_random"] = float(wins.mean()) if r.size else None
                row["predicted_share"] = (lk["predicted"] / lk["lookups"]
                                          if lk["lookups"] else 0.0)
                out.append(row)
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"family": self.family, "ks": list(self.ks), "strategies": self.strategies,
                "metrics": self.metrics, "summary": self.summary(),
                "lookups": self.lookups, "skipped": self.skipped,
                "per_dataset": self.per_dataset.to_dict(orient="records")}


def _stat(fn, r) -> float | None:
    return float(fn(r.to_numpy())) if len(r) else None


def backtest(kb, family: str, ks: Sequence[int] = DEFAULT_KS,
             strategies: Sequence[str | Strategy] | None = None, *,
             metric: str | None = None, space: SearchSpace | None = None, seed: int = 0,
             random_repeats: int = 10,
             progress: Callable[[int, int], None] | None = None) -> BacktestResult:
    """Backtest strategies on a :class:`~warmstart.history.KnowledgeBase`.

    Parameters
    ----------
    kb : KnowledgeBase
    family : str
    ks : sequence of int
        List lengths to score (each >= 1).
    strategies : sequence of str or Strategy, optional
        Default: every registered strategy.
    metric : str, optional
        Use studies of this metric only (default per task as in ``suggest``).
    space : SearchSpace, optional
        Restrict suggestions to this space.
    seed : int
    random_repeats : int
        Repeats of stochastic strategies.
    progress : callable, optional
        Called as ``progress(done, total)`` after each held-out dataset.
    """
    t = kb.tables()
    fps = kb.fingerprints(t["datasets"])
    return backtest_tables(t, fps, family, ks, strategies, metric=metric, space=space,
                           seed=seed, random_repeats=random_repeats, progress=progress)


def backtest_tables(tables: dict[str, pd.DataFrame], fingerprints: dict[str, Fingerprint],
                    family: str, ks: Sequence[int] = DEFAULT_KS,
                    strategies: Sequence[str | Strategy] | None = None, *,
                    metric: str | None = None, space: SearchSpace | dict | None = None,
                    seed: int = 0, random_repeats: int = 10,
                    groups: dict[str, str] | None = None,
                    holdout: set[str] | None = None,
                    candidates: dict[str, list[dict]] | None = None,
                    history_trials: dict[str, pd.DataFrame] | None = None,
                    normalisation: str = "minmax",
                    surrogate_cache: dict | None = None,
                    progress: Callable[[int, int], None] | None = None) -> BacktestResult:
    """The backtest on in-memory tables (what :func:`backtest` runs).

    Extra parameters, for benchmarks:

    groups : dict, optional
        Dataset id -> group; a held-out dataset's whole group is left out of its history.
    holdout : set of str, optional
        Only these dataset ids are held out (others still serve as history).
    candidates : dict, optional
        Task -> configurations every strategy must choose from.
    history_trials : dict, optional
        Task -> trials table used as *history* (e.g. a subsample of each study), while
        ``tables["trials"]`` stays the held-out truth.
    space : SearchSpace or dict, optional
        One space for all tasks, or task -> space.
    normalisation : {"minmax", "rank"}
        How history scores are normalised per study (see
        :func:`warmstart.strategies.normalise_scores`).
    surrogate_cache : dict, optional
        Reused across calls with the same history and normalisation.
    """
    fam = get_family(family)
    ks = tuple(sorted({int(k) for k in ks}))
    if not ks or ks[0] < 1:
        raise BadInputError("every k must be a positive integer")
    if random_repeats < 1:
        raise BadInputError("random_repeats must be at least 1")
    strats = [get_strategy(s) for s in (strategies or list(STRATEGIES))]
    names = [s.name for s in strats]
    if len(set(names)) != len(names):
        raise BadInputError("each strategy may be named only once")
    studies_all = tables["studies"][tables["studies"]["family"] == fam.name]
    datasets = tables["datasets"]
    names_of = dict(zip(datasets["dataset_id"], datasets["name"]))
    rows_of = {r.dataset_id: float(json.loads(r.meta_features).get("rows") or np.nan)
               for r in datasets.itertuples(index=False)}
    per: list[dict[str, Any]] = []
    lookups = {s.name: {"lookups": 0, "predicted": 0} for s in strats}
    skipped: list[str] = []
    metrics: dict[str, str] = {}
    plan = []
    for task in sorted(studies_all["task"].unique()):
        st = studies_all[studies_all["task"] == task]
        m = metric or (DEFAULT_METRIC[task] if DEFAULT_METRIC[task] in set(st["metric"])
                       else str(st["metric"].value_counts().index[0]))
        st = st[st["metric"] == m].reset_index(drop=True)
        if st["dataset_id"].nunique() < 2:
            continue
        metrics[task] = m
        plan.append((task, st))
    if not plan:
        raise BadInputError(f"backtesting {fam.name!r} needs at least two datasets with a "
                            "study of it (same task and metric) in the history")
    jobs = []
    for task, st in plan:
        truth = prepare_trials(tables["trials"], st)
        hist = prepare_trials(history_trials[task] if history_trials and task in
                              history_trials else tables["trials"], st, normalisation)
        hist["key"] = [canonical_key(fam.space(task), c) for c in hist["config"]]
        ids = sorted(st["dataset_id"].unique())
        group = {i: (groups or {}).get(i, i) for i in ids}
        excluded = _exclusions(ids, group, seed)
        for h in ids:
            if holdout is None or h in holdout:
                jobs.append((task, st, truth, hist, h, excluded[h]))
    surrogate_cache = {} if surrogate_cache is None else surrogate_cache
    for n_done, (task, st, truth, hist, h, excl) in enumerate(jobs, 1):
        task_space = space.get(task) if isinstance(space, dict) else space
        outcome = _one_holdout(fam, task, st, truth, hist, h, excl, fingerprints, names_of,
                               rows_of, strats, ks, task_space, seed, random_repeats,
                               (candidates or {}).get(task), surrogate_cache)
        if outcome is None:
            skipped.append(names_of.get(h, h))
        else:
            for name, curve, n_lookups, n_pred in outcome:
                lookups[name]["lookups"] += n_lookups
                lookups[name]["predicted"] += n_pred
                for k, r in zip(ks, curve):
                    per.append({"dataset_id": h, "name": names_of.get(h, h), "task": task,
                                "strategy": name, "k": k, "regret": r})
        if progress is not None:
            progress(n_done, len(jobs))
    cols = ["dataset_id", "name", "task", "strategy", "k", "regret"]
    return BacktestResult(fam.name, ks, names, metrics, pd.DataFrame(per, columns=cols),
                          lookups, skipped)


def _exclusions(ids: list[str], group: dict[str, str], seed: int) -> dict[str, set[str]]:
    """Held-out id -> ids left out of its history (its group, or its fold of groups)."""
    labels = sorted(set(group.values()))
    if len(labels) <= LOO_MAX_GROUPS:
        fold = {g: g for g in labels}
    else:
        perm = np.random.default_rng(seed).permutation(len(labels))
        fold = {labels[p]: str(i % GROUPED_FOLDS) for i, p in enumerate(perm)}
    members: dict[str, set[str]] = {}
    for i in ids:
        members.setdefault(fold[group[i]], set()).add(i)
    return {i: members[fold[group[i]]] for i in ids}


def _one_holdout(fam, task, st, truth, hist, h, excl, fingerprints, names_of, rows_of,
                 strats, ks, space, seed, repeats, candidates, cache):
    direction = st.loc[st["dataset_id"] == h, "direction"].iloc[0]
    sign = -1.0 if direction == MINIMIZE else 1.0
    full = fam.space(task)
    own = truth[truth["study_id"].isin(st.loc[st["dataset_id"] == h, "study_id"])]
    oriented = sign * own["score"].to_numpy(dtype=float)
    best, median = float(oriented.max()), float(np.median(oriented))
    if not best > median:
        return None
    keys = [canonical_key(full, c) for c in own["config"]]
    observed = pd.Series(oriented).groupby(pd.Series(keys)).mean().to_dict()
    lo = float(oriented.min())
    held: list = []  # the held-out study's surrogate, fitted on first need

    def predicted_value(config) -> float:
        if not held:
            held.append(fit_surrogate(list(own["config"]), (oriented - lo) / (best - lo),
                                      full, "forest", seed))
        return lo + float(held[0].predict([config])[0]) * (best - lo)

    hist_studies = st[~st["dataset_id"].isin(excl)].reset_index(drop=True)
    hist_trials = hist[hist["study_id"].isin(hist_studies["study_id"])].reset_index(drop=True)
    hist_ids = set(hist_studies["dataset_id"])
    fps = {i: fingerprints[i] for i in hist_ids}
    neighbours = nearest(fingerprints[h], fps, names_of, k=None)
    ctx = SuggestContext(query=fingerprints[h], family=fam, space=space or full,
                         neighbours=neighbours, studies=hist_studies, trials=hist_trials,
                         dataset_rows={i: rows_of.get(i, np.nan) for i in hist_ids},
                         seed=seed, restricted=space is not None, candidates=candidates,
                         surrogates=cache)
    kmax = max(ks)
    out = []
    for s in strats:
        curves, n_lookups, n_pred = [], 0, 0
        for r in range(repeats if s.stochastic else 1):
            ctx.seed = seed + r
            proposals = s.propose(ctx, kmax)[:kmax]
            values = []
            for p in proposals:
                key = canonical_key(full, p.config)
                n_lookups += 1
                if key in observed:
                    values.append(observed[key])
                else:
                    n_pred += 1
                    values.append(predicted_value(p.config))
            curves.append(_regret_curve(np.asarray(values), best, median, ks))
        ctx.seed = seed
        out.append((s.name, np.nanmean(np.array(curves), axis=0) if curves else
                    [math.nan] * len(ks), n_lookups, n_pred))
    return out


def _regret_curve(values: np.ndarray, best: float, median: float,
                  ks: Sequence[int]) -> np.ndarray:
    """Normalised regret of the running best of ``values`` at each k, shape (len(ks),).

    ``values`` are oriented scores (higher is better); NaN at every k if empty.
    """
    if values.size == 0:
        return np.full(len(ks), np.nan)
    running = np.maximum.accumulate(values)
    at = np.array([running[min(k, values.size) - 1] for k in ks])
    return (best - at) / (best - median)


def plot_regret(result: BacktestResult, path, title: str | None = None) -> None:
    """Save a plot of mean regret against k per strategy (band: inter-quartile range).

    Needs matplotlib (``pip install 'warmstart[plot]'``).
    """
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise BadInputError("plotting needs matplotlib; install it with "
                            "pip install 'warmstart[plot]'") from None
    summary = pd.DataFrame(result.summary())
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    for s in result.strategies:
        d = summary[summary["strategy"] == s].sort_values("k")
        if d["mean_regret"].isna().all():
            continue
        line, = ax.plot(d["k"], d["mean_regret"], marker="o", label=s)
        ax.fill_between(d["k"], d["q25"].astype(float), d["q75"].astype(float),
                        color=line.get_color(), alpha=0.12)
    ax.set_xlabel("k (configurations tried)")
    ax.set_ylabel("normalised regret (0 = best known, 1 = median)")
    ax.set_xticks(list(result.ks))
    ax.set_title(title or f"backtest: {result.family}")
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    try:
        fig.savefig(path, dpi=120)
    except OSError as exc:
        raise BadInputError(f"cannot write the plot to {path}: {exc.strerror}") from None
    finally:
        plt.close(fig)


__all__ = ["DEFAULT_KS", "BacktestResult", "backtest", "backtest_tables", "plot_regret"]
