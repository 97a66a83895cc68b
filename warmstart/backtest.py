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

import importlib.util
import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field, replace
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd

from warmstart.errors import BadInputError, NothingToSuggestError
from warmstart.families import get_family
from warmstart.families.base import Family
from warmstart.fingerprint import Fingerprint
from warmstart.io import check_writable
from warmstart.metrics import LOWER
from warmstart.spaces import SearchSpace
from warmstart.strategies import (
    STRATEGIES,
    Strategy,
    canonical_key,
    get_strategy,
    prepare_trials,
)
from warmstart.suggesting import choose_metric, suggestion_context
from warmstart.surrogate import SurrogateCache, fit_surrogate

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
                "verdict": verdict(self),
                "per_dataset": self.per_dataset.to_dict(orient="records")}


SMALL_SAMPLE = 15


def verdict(result: BacktestResult, k: int = 5) -> list[str]:
    """One line per task of ``result``: which strategy wins at ``k`` (the nearest scored
    k when ``k`` was not), by how much over the runner-up and random search, over how many
    held-out datasets; a warning when fewer than ``SMALL_SAMPLE`` datasets were held out.
    """
    k = min(result.ks, key=lambda x: (abs(x - k), x))
    d = result.per_dataset[result.per_dataset["k"] == k]
    lines = []
    for task in sorted(d["task"].unique()):
        mean = d[d["task"] == task].groupby("strategy")["regret"].mean().dropna()
        n = int(d[d["task"] == task]["dataset_id"].nunique())
        if mean.empty:
            continue
        order = mean.sort_values(kind="stable")
        line = f"{result.family} {task}: {order.index[0]} wins at k={k}"
        line += f" (mean regret {order.iloc[0]:.3f}"
        if len(order) > 1:
            line += f"; {order.iloc[1] - order.iloc[0]:.3f} below {order.index[1]}"
        if RANDOM in mean.index and RANDOM not in order.index[:2]:
            line += f", {mean[RANDOM] - order.iloc[0]:.3f} below {RANDOM}"
        line += f") over {n} held-out datasets"
        if n < SMALL_SAMPLE:
            line += (f"; warning: small sample (< {SMALL_SAMPLE} datasets), the "
                     "difference may be noise")
        lines.append(line)
    return lines


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
                    surrogate_cache: SurrogateCache | None = None,
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
    surrogate_cache : SurrogateCache, optional
        Reused across calls with the same history and normalisation.
    """
    fam = get_family(family)
    ks, repeats = _check_ks(ks), _check_repeats(random_repeats)
    run = _Run(fam, ks, _check_strategies(strategies), fingerprints,
               dict(zip(tables["datasets"]["dataset_id"], tables["datasets"]["name"])),
               seed, repeats, SurrogateCache() if surrogate_cache is None else surrogate_cache)
    plans = _plan(tables, fam, metric, space, candidates, history_trials, normalisation)
    if not plans:
        raise NothingToSuggestError(
            f"nothing to compare with: backtesting {fam.name!r} needs at least two "
            "datasets with a study of it (same task and metric) in the history; fill it "
            "with 'warmstart log' (finished studies) or 'warmstart tune'")
    jobs = []
    for plan in plans:
        excluded = _exclusions(plan.dataset_ids, groups or {}, seed)
        jobs += [(plan, h, excluded[h]) for h in plan.dataset_ids
                 if holdout is None or h in holdout]
    return _run_jobs(run, plans, jobs, progress)


def _run_jobs(run: _Run, plans: list[_TaskPlan], jobs: list[tuple[_TaskPlan, str, set[str]]],
              progress: Callable[[int, int], None] | None) -> BacktestResult:
    """Hold out each job's dataset in turn and collect the regrets."""
    per: list[dict[str, Any]] = []
    lookups = {s.name: {"lookups": 0, "predicted": 0} for s in run.strategies}
    skipped: list[str] = []
    for n_done, (plan, h, excluded) in enumerate(jobs, 1):
        outcome = _one_holdout(run, plan, h, excluded)
        name = run.names.get(h, h)
        if outcome is None:
            skipped.append(name)
        for strategy, curve, n_lookups, n_pred in outcome or ():
            lookups[strategy]["lookups"] += n_lookups
            lookups[strategy]["predicted"] += n_pred
            per.extend({"dataset_id": h, "name": name, "task": plan.task,
                        "strategy": strategy, "k": k, "regret": r}
                       for k, r in zip(run.ks, curve))
        if progress is not None:
            progress(n_done, len(jobs))
    cols = ["dataset_id", "name", "task", "strategy", "k", "regret"]
    return BacktestResult(run.family.name, run.ks, [s.name for s in run.strategies],
                          {plan.task: plan.metric for plan in plans},
                          pd.DataFrame(per, columns=cols), lookups, skipped)


@dataclass(frozen=True)
class _Run:
    """What every held-out dataset of one backtest shares."""

    family: Family
    ks: tuple[int, ...]
    strategies: list[Strategy]
    fingerprints: Mapping[str, Fingerprint]
    names: Mapping[str, str]
    seed: int
    repeats: int
    surrogates: SurrogateCache


@dataclass(frozen=True)
class _TaskPlan:
    """One task's studies (of its metric), held-out truth and history trials."""

    task: str
    metric: str
    studies: pd.DataFrame
    truth: pd.DataFrame  # every ok trial, for the held-out dataset's own scores
    history: pd.DataFrame  # what strategies see, with canonical keys
    space: SearchSpace | None
    candidates: list[dict] | None

    @property
    def dataset_ids(self) -> list[str]:
        return sorted(self.studies["dataset_id"].unique())


def _check_ks(ks: Sequence[int]) -> tuple[int, ...]:
    ks = tuple(sorted({int(k) for k in ks}))
    if not ks or ks[0] < 1:
        raise BadInputError("every k must be a positive integer")
    return ks


def _check_repeats(random_repeats: int) -> int:
    if random_repeats < 1:
        raise BadInputError("random_repeats must be at least 1")
    return random_repeats


def _check_strategies(strategies: Sequence[str | Strategy] | None) -> list[Strategy]:
    strats = [get_strategy(s) for s in (strategies or list(STRATEGIES))]
    names = [s.name for s in strats]
    if len(set(names)) != len(names):
        raise BadInputError("each strategy may be named only once")
    return strats


def _plan(tables: dict[str, pd.DataFrame], fam: Family, metric: str | None, space,
          candidates: dict[str, list[dict]] | None,
          history_trials: dict[str, pd.DataFrame] | None,
          normalisation: str) -> list[_TaskPlan]:
    """A plan per task with at least two datasets studied under the task's metric."""
    studies = tables["studies"][tables["studies"]["family"] == fam.name]
    plans = []
    for task in sorted(studies["task"].unique()):
        st = studies[studies["task"] == task]
        try:
            m = choose_metric(st, task, metric)
        except NothingToSuggestError:  # the metric asked for: none in this task
            continue
        st = st[st["metric"] == m].reset_index(drop=True)
        if st["dataset_id"].nunique() < 2:
            continue
        hist = prepare_trials((history_trials or {}).get(task, tables["trials"]), st,
                              normalisation)
        hist["key"] = [canonical_key(fam.space(task), c) for c in hist["config"]]
        plans.append(_TaskPlan(task, m, st, prepare_trials(tables["trials"], st), hist,
                               space.get(task) if isinstance(space, dict) else space,
                               (candidates or {}).get(task)))
    return plans


def _exclusions(ids: list[str], groups: Mapping[str, str], seed: int) -> dict[str, set[str]]:
    """Held-out id -> ids left out of its history (its group, or its fold of groups)."""
    group = {i: groups.get(i, i) for i in ids}
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


class _HeldOut:
    """The held-out dataset's own trials: oriented scores by canonical key, and a
    surrogate (fitted on first need) for configurations it never ran."""

    def __init__(self, plan: _TaskPlan, full: SearchSpace, dataset_id: str, seed: int):
        mine = plan.studies[plan.studies["dataset_id"] == dataset_id]
        sign = -1.0 if mine["better"].iloc[0] == LOWER else 1.0
        self.own = plan.truth[plan.truth["study_id"].isin(mine["study_id"])]
        self.oriented = sign * self.own["score"].to_numpy(dtype=float)
        self.best = float(self.oriented.max())
        self.median = float(np.median(self.oriented))
        self.full, self.seed = full, seed
        keys = [canonical_key(full, c) for c in self.own["config"]]
        self.observed = pd.Series(self.oriented).groupby(pd.Series(keys)).mean().to_dict()
        self.lookups = self.predicted = 0

    @cached_property
    def _surrogate(self):
        lo = float(self.oriented.min())
        return fit_surrogate(list(self.own["config"]), (self.oriented - lo) / (self.best - lo),
                             self.full, "forest", self.seed)

    def value(self, config: dict[str, Any]) -> float:
        """The configuration's oriented score here: run, or predicted (counted)."""
        key = canonical_key(self.full, config)
        self.lookups += 1
        if key in self.observed:
            return self.observed[key]
        self.predicted += 1
        lo = float(self.oriented.min())
        return lo + float(self._surrogate.predict([config])[0]) * (self.best - lo)


def _one_holdout(run: _Run, plan: _TaskPlan, h: str, excluded: set[str]):
    """Per strategy: (name, regret at each k, lookups, predicted lookups); None when
    the held-out dataset cannot rank anything (its best equals its median)."""
    held = _HeldOut(plan, run.family.space(plan.task), h, run.seed)
    if not held.best > held.median:
        return None
    ctx = suggestion_context(
        run.fingerprints[h], run.family, plan.studies, plan.history, run.fingerprints,
        run.names, metric=plan.metric, exclude=excluded, space=plan.space, seed=run.seed,
        candidates=plan.candidates, surrogates=run.surrogates)
    kmax = max(run.ks)
    out = []
    for s in run.strategies:
        held.lookups = held.predicted = 0
        curves = []
        for r in range(run.repeats if s.stochastic else 1):
            seeded = ctx if r == 0 else replace(ctx, seed=run.seed + r)
            values = [held.value(p.config) for p in s.propose(seeded, kmax)[:kmax]]
            curves.append(_regret_curve(np.asarray(values), held.best, held.median, run.ks))
        out.append((s.name, np.nanmean(np.array(curves), axis=0) if curves else
                    [math.nan] * len(run.ks), held.lookups, held.predicted))
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


_NO_MATPLOTLIB = "plotting needs matplotlib; install it with pip install 'warmstart[plot]'"


def check_plot_output(path: str | os.PathLike) -> None:
    """Refuse a plot that could not be written (no matplotlib, an unwritable place)
    before the backtest runs. Raises :class:`BadInputError`."""
    if importlib.util.find_spec("matplotlib") is None:
        raise BadInputError(_NO_MATPLOTLIB)
    check_writable(path, "the plot")


# Coinciding curves (two strategies with the same regret) must stay visible: each
# strategy gets its own dash pattern and marker, and earlier ones are drawn wider.
_LINE_STYLES = ("-", "--", "-.", ":")
_MARKERS = ("o", "s", "^", "D", "v", "x")


def plot_regret(result: BacktestResult, path, title: str | None = None) -> None:
    """Save a plot of mean regret against k per strategy (band: inter-quartile range).

    Needs matplotlib (``pip install 'warmstart[plot]'``).
    """
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise BadInputError(_NO_MATPLOTLIB) from None
    summary = pd.DataFrame(result.summary())
    fig, ax = plt.subplots(figsize=(6.4, 4.2))
    n = len(result.strategies)
    for i, s in enumerate(result.strategies):
        d = summary[summary["strategy"] == s].sort_values("k")
        if d["mean_regret"].isna().all():
            continue
        line, = ax.plot(d["k"], d["mean_regret"], label=s,
                        linestyle=_LINE_STYLES[i % len(_LINE_STYLES)],
                        marker=_MARKERS[i % len(_MARKERS)], markerfacecolor="none",
                        linewidth=1.2 + 1.5 * (n - 1 - i) / max(n - 1, 1), zorder=2 + i)
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


__all__ = ["DEFAULT_KS", "SMALL_SAMPLE", "BacktestResult", "backtest", "backtest_tables",
           "check_plot_output", "plot_regret", "verdict"]
