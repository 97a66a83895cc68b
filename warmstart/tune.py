"""A warm-started tuning study for one scikit-learn model family on one dataset.

:func:`tune` first evaluates the history's suggestions for the dataset (the nearest
past datasets' best configurations, see :meth:`KnowledgeBase.suggest`), then spends the
rest of the budget on Gaussian-process expected improvement (``"gp-ei"``,
:mod:`warmstart.bayes`) started from those trials, or on seeded random search, and logs
the study into the history. Its steps are small functions, in order: argument checks,
the folds, the warm-start queue, the trial loop (:class:`_Proposer` then
:func:`_evaluate`) and logging. Progress goes to a plain callback; drawing it is the
caller's business.

Each trial is a cross-validated score (``sklearn.model_selection.cross_validate`` with
the scorer's name; stratified folds for classification, plain folds for regression,
shuffled with the seed). Given the same data, seed and history, the same trials come in
the same order.

Time: every fit runs single-threaded (BLAS and OpenMP limited to one thread), so that
``jobs`` (cross-validation folds run in parallel) is the only parallelism and trials do
not oversubscribe a shared machine. A trial's ``fit_seconds`` — what is logged — is the
mean fit time of one fold scaled linearly to all rows (``mean fold fit time * rows /
mean training-fold rows``): an estimate of fitting once on the whole dataset, which is
what the history's ``fit_seconds`` stands for. ``cv_seconds`` is the trial's wall time.
"""

from __future__ import annotations

import contextlib
import json
import os
import time
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from warmstart.errors import BadInputError, NothingToSuggestError
from warmstart.families import Family, get_family
from warmstart.fingerprint import Fingerprint, fingerprint, load_frame
from warmstart.history import KnowledgeBase, LoggedStudy
from warmstart.io import check_writable
from warmstart.metrics import DEFAULT_METRIC, resolve_metric
from warmstart.spaces import SearchSpace, config_key
from warmstart.storage import write_bytes_atomic
from warmstart.strategies import user_space
from warmstart.trials import FAILED, OK

# scikit-learn (and the Bayesian optimiser and pipelines built on it) loads in seconds:
# imported in the functions that run trials, so the command line starts without it.
if TYPE_CHECKING:
    from sklearn.model_selection import KFold, StratifiedKFold

# The search is named for its method: Gaussian-process expected improvement.
GP_EI, RANDOM = "gp-ei", "random"
SEARCHES = (GP_EI, RANDOM)
WARM, DEFAULTS = "warm-start", "defaults"
MAX_WARM_START = 5
STOP_BUDGET, STOP_TIME, STOP_INTERRUPT = "budget", "time limit", "interrupted"


@dataclass(frozen=True)
class TuneTrial:
    """One evaluated configuration of a tuning study.

    ``score`` is the mean cross-validated score (None when the trial failed);
    ``fold_scores`` the per-fold scores; ``origin`` says what proposed it:
    ``"warm-start"`` (a suggestion from the history), ``"defaults"`` (the family's
    defaults, the first trial of a cold study), ``"gp-ei"`` (Gaussian-process expected
    improvement) or ``"random"`` (random search, and the first draws of the ``"gp-ei"``
    search before its surrogate has enough trials). ``index`` counts from 0 in running order.
    """

    index: int
    config: dict[str, Any]
    origin: str
    status: str
    score: float | None
    fold_scores: list[float]
    fit_seconds: float | None
    cv_seconds: float
    error: str | None = None

    @property
    def fold_sd(self) -> float | None:
        """Standard deviation of the fold scores (population, ddof=0); None if failed."""
        return float(np.std(self.fold_scores)) if self.fold_scores else None

    def to_dict(self) -> dict[str, Any]:
        return {**self.__dict__, "fold_sd": self.fold_sd}


@dataclass
class TuneResult:
    """What :func:`tune` did: the trials in order, the best, why it stopped, the log."""

    family: str
    task: str
    metric: str
    target: str
    rows: int
    cv: int
    seed: int
    search: str
    budget: int
    trials: list[TuneTrial] = field(default_factory=list)
    stopped: str = STOP_BUDGET
    notes: list[str] = field(default_factory=list)
    logged: LoggedStudy | None = None
    seconds: float = 0.0
    # the best configuration's pipeline fitted on every labelled row (refit=True); kept
    # in memory only, never written (nothing is pickled)
    model: Any = field(default=None, repr=False)

    @property
    def interrupted(self) -> bool:
        return self.stopped == STOP_INTERRUPT

    @property
    def n_ok(self) -> int:
        """Trials that finished with a score."""
        return sum(t.status == OK for t in self.trials)

    @property
    def best(self) -> TuneTrial | None:
        ranked = self.ranked()
        return ranked[0] if ranked and ranked[0].status == OK else None

    def ranked(self) -> list[TuneTrial]:
        """Trials best first (greater is better), failed ones last, ties by order."""
        return sorted(self.trials, key=lambda t: (t.status != OK, -(t.score or 0.0), t.index))

    def best_config(self) -> dict[str, Any] | None:
        """The JSON written by ``out=``: the best configuration and its context
        (``trial`` numbered from 1, as in the command's table)."""
        b = self.best
        if b is None:
            return None
        return {"family": self.family, "task": self.task, "metric": self.metric,
                "score": b.score, "trial": b.index + 1, "cv": self.cv, "seed": self.seed,
                "config": b.config}

    def to_dict(self) -> dict[str, Any]:
        return {
            "family": self.family, "task": self.task, "metric": self.metric,
            "target": self.target, "rows": self.rows, "cv": self.cv, "seed": self.seed,
            "search": self.search, "budget": self.budget, "stopped": self.stopped,
            "seconds": self.seconds, "notes": list(self.notes),
            "best": self.best_config(),
            "logged": None if self.logged is None else self.logged.to_dict(),
            "trials": [t.to_dict() for t in self.trials],
        }


def tune(data: pd.DataFrame | str | os.PathLike, *, target: str, family: str, budget: int,
         metric: str | None = None, cv: int = 5, seed: int = 0, jobs: int = 1,
         time_limit: float | None = None, search: str = GP_EI,
         kb: KnowledgeBase | str | os.PathLike | None = None, log: bool = True,
         task: str | None = None, out: str | os.PathLike | None = None,
         max_fit_seconds: float | None = None,
         name: str | None = None, warm_start: int | None = None,
         space: SearchSpace | str | os.PathLike | list | None = None,
         defaults_first: bool = True, strategy: str | None = None,
         progress: Callable[[TuneTrial], None] | None = None,
         cluster: Any = None, refit: bool = True) -> TuneResult:
    """Run a warm-started tuning study of ``family`` on ``data`` and log it.

    Parameters
    ----------
    data : DataFrame or path
        Features and target (CSV, Parquet or JSON lines). Rows with a missing target
        are left out of the cross-validation.
    target : str
        The target column.
    family : str
        A model family (see :func:`warmstart.families`).
    budget : int
        Trials to run, warm-start ones included (>= 1). Failed trials count.
    metric : str, optional
        A scikit-learn scorer name; defaults to balanced accuracy or R².
    cv : int
        Cross-validation folds (>= 2).
    seed : int
        Seeds the folds, the estimators, random search and the surrogate.
    jobs : int
        Folds fitted in parallel (``n_jobs`` of ``cross_validate``; -1 = all cores).
    time_limit : float, optional
        Seconds; no new trial starts once it has passed (a running one finishes).
    search : {"gp-ei", "random"}
        What proposes trials after the warm start: Gaussian-process expected
        improvement (:mod:`warmstart.bayes`) or seeded random search.
    kb : KnowledgeBase or path, optional
        The history to take suggestions from and to log into. Without one the study
        starts cold and is not logged; so does a study with ``log=False`` whose path
        holds no usable history.
    log : bool
        Log the study (``source="tune"``) into ``kb``. Interrupted and time-limited
        studies are logged too, with the trials that finished.
    task : {"classification", "regression"}, optional
        Overrides the task inferred from the target.
    out : path, optional
        Write the best configuration as JSON here (see :meth:`TuneResult.best_config`).
        Checked to be writable before any trial runs.
    max_fit_seconds : float, optional
        Leave out of the warm start the suggestions expected to take longer (seconds)
        to fit on this dataset, as ``suggest`` does.
    name : str, optional
        Label of the study (and of the dataset when it is new); defaults to the file
        name.
    warm_start : int, optional
        Suggestions to evaluate first; default ``min(5, max(1, budget // 2))``. A study
        that gets no suggestion (no history, no study of the family, ``warm_start=0``)
        evaluates the family's declared defaults first (see ``defaults_first``).
    space : SearchSpace, JSON list or path of a JSON file, optional
        Restrict the search to part of the family's space (see
        :meth:`SearchSpace.from_dict`); suggestions are clipped into it.
    defaults_first : bool
        Whether a study without suggestions evaluates the defaults first (True), or
        starts straight with its search (plain random search, as a baseline).
    strategy : str, optional
        The history's ranking strategy for the suggestions (see
        :data:`warmstart.strategies.STRATEGIES`); the history's default otherwise.
    progress : callable, optional
        Called with each finished :class:`TuneTrial`, in running order (the command
        line draws a progress bar with it).
    cluster : str or dask.distributed.Client, optional
        Run the cross-validation fits on a dask cluster (a scheduler address,
        ``"local:N"`` or a Client; see :func:`warmstart.cluster.connect`), one task per
        fold; ``jobs`` is then unused. Trials still run in order, so the trials and their
        scores are the same as without a cluster. A fold whose worker keeps dying makes
        a failed trial (its error says so). A path DATA is fingerprinted on the cluster.
    refit : bool
        Fit the best trial's pipeline (:func:`warmstart.make_pipeline`, with ``seed``) on
        every labelled row, in this process, into ``result.model``. Not done when no
        trial succeeded or the study was interrupted.

    Returns
    -------
    TuneResult
        ``stopped`` is ``"budget"``, ``"time limit"`` or ``"interrupted"`` (Ctrl-C:
        the finished trials are still logged, the caller decides how to exit).
        ``model`` is the refitted pipeline (None without ``refit``); it is held in
        memory only.
    """
    kb = _open_history(kb, log)
    fam = _check_arguments(family, budget, cv, jobs, time_limit, search, warm_start)
    if log and kb is not None:
        kb._check_writable()
    if max_fit_seconds is not None and not (isinstance(max_fit_seconds, (int, float))
                                            and max_fit_seconds >= 0):
        raise BadInputError(f"max_fit_seconds must be a number >= 0, not {max_fit_seconds!r}")
    if out is not None:  # before any trial: a study must not end in "cannot write"
        check_writable(out, "the best configuration (out)")
    with _connect(cluster) as client:
        df, fp, scoring = _load(data, target, task, metric, client)
        space = fam.space(fp.task) if space is None else user_space(space, fam, fp.task)
        notes: list[str] = list(fp.warnings)  # e.g. the columns dropped from the model
        folds = _folds(df, target, fam, fp.task, scoring, cv, seed, jobs, notes, client)
        queue, queue_origin = _warm_queue(kb, fp, fam.name, space, budget, warm_start,
                                          scoring, seed, strategy, defaults_first, notes,
                                          max_fit_seconds)
        result = TuneResult(fam.name, fp.task, scoring, str(target), len(folds.y), cv, seed,
                            search, budget, notes=notes)
        proposer = _Proposer(space, search, queue, queue_origin, seed)
        _run_trials(result, proposer, folds, time_limit, progress)
    if log and kb is not None and result.trials:
        # a path goes along only so that a new dataset is named after its file; a known
        # one keeps its name unless ``name`` renames it
        named_by = data if isinstance(data, (str, os.PathLike)) else df
        result.logged = _log_study(kb, result, named_by, fp, name)
    if out is not None and result.best is not None:
        write_bytes_atomic(json.dumps(result.best_config(), indent=2).encode() + b"\n",
                           Path(out))
    if refit and result.best is not None and not result.interrupted:  # after the log
        result.model = _refit(folds, result.best.config, result.notes)
    return result


# -- argument checks ----------------------------------------------------------------------
def _open_history(kb: KnowledgeBase | str | os.PathLike | None,
                  log: bool) -> KnowledgeBase | None:
    """The history at ``kb``; None when there is none and the study is not to be logged
    (a study that writes nothing needs no history: it starts cold)."""
    if not isinstance(kb, (str, os.PathLike)):
        return kb
    try:
        return KnowledgeBase(kb)
    except BadInputError:
        if log:
            raise
        return None


def _check_arguments(family: str, budget: Any, cv: Any, jobs: Any, time_limit: Any,
                     search: Any, warm_start: Any) -> Family:
    """Refuse unusable settings before any data is read; return the family."""
    fam = get_family(family)
    _check_int("budget", budget, 1)
    _check_int("cv", cv, 2)
    if not isinstance(jobs, int) or isinstance(jobs, bool) or not (jobs >= 1 or jobs == -1):
        raise BadInputError(f"jobs must be a positive integer or -1, not {jobs!r}")
    if time_limit is not None and not (isinstance(time_limit, (int, float)) and time_limit > 0):
        raise BadInputError(f"time limit must be a positive number of seconds, not {time_limit!r}")
    if search not in SEARCHES:
        raise BadInputError(f"search must be one of {', '.join(SEARCHES)}, not {search!r}")
    if warm_start is not None:
        _check_int("warm_start", warm_start, 0)
    return fam


def _check_int(what: str, value: Any, low: int) -> None:
    if not isinstance(value, (int, np.integer)) or isinstance(value, bool) or value < low:
        raise BadInputError(f"{what} must be an integer >= {low}, not {value!r}")


def _connect(cluster: Any):
    """A dask client for ``cluster`` (see :func:`warmstart.cluster.connect`), or None."""
    if cluster is None:
        return contextlib.nullcontext()
    from warmstart.cluster import connect

    return connect(cluster)


def _load(data: pd.DataFrame | str | os.PathLike, target: str, task: str | None,
          metric: str | None, client: Any = None) -> tuple[pd.DataFrame, Fingerprint, str]:
    """The table, its fingerprint (which validates the table and the target) and the
    scorer name the trials are scored with."""
    df = load_frame(data)
    if target not in df.columns:
        raise BadInputError(f"target column {target!r} not found; columns are: "
                            f"{', '.join(map(str, df.columns[:20]))}")
    from sklearn.metrics import get_scorer_names

    # A path is fingerprinted as a path, so the study's dataset id is the one 'log DATA'
    # and 'suggest DATA' compute (a directory's hash differs from its rows' in one frame).
    # A DataFrame is already here: it is fingerprinted here, not shipped to the cluster.
    if isinstance(data, pd.DataFrame):
        fp = fingerprint(df, target=target, task=task)
    else:
        fp = fingerprint(data, target=target, task=task, cluster=client)
    metric_name = metric or DEFAULT_METRIC[fp.task]
    if metric_name not in get_scorer_names():
        raise BadInputError(f"metric {metric_name!r} is not a scikit-learn scorer name "
                            "(tune computes the score itself)")
    return df, fp, resolve_metric(metric_name).name


# -- folds --------------------------------------------------------------------------------
@dataclass(frozen=True)
class _Folds:
    """What every trial of a study shares: the labelled rows, the splitter, the scorer."""

    family: Family
    task: str
    X: pd.DataFrame
    y: pd.Series
    splitter: KFold | StratifiedKFold
    scoring: str
    seed: int
    jobs: int
    # The fits' dispatcher on a cluster (warmstart.cluster.ClusterFolds), else None.
    remote: Any = None

    @property
    def train_rows(self) -> float:
        """Mean rows of a training fold (scales a fold's fit time to all rows)."""
        cv = self.splitter.get_n_splits()
        return len(self.y) * (cv - 1) / cv


def _folds(df: pd.DataFrame, target: str, fam: Family, task: str, scoring: str, cv: int,
           seed: int, jobs: int, notes: list[str], client: Any = None) -> _Folds:
    """Labelled rows and seeded, shuffled folds: stratified for classification."""
    from sklearn.model_selection import KFold, StratifiedKFold

    labelled = df[df[target].notna()]
    if len(labelled) < len(df):
        notes.append(f"{len(df) - len(labelled)} rows with a missing target left out")
    X = labelled.drop(columns=[target]).reset_index(drop=True)
    y = labelled[target].reset_index(drop=True)
    if task == "classification":
        smallest = int(y.value_counts().min())
        if smallest < cv:
            raise BadInputError(f"the smallest class has {smallest} rows, fewer than the "
                                f"{cv} folds; lower --cv")
        splitter: KFold | StratifiedKFold = StratifiedKFold(n_splits=cv, shuffle=True,
                                                            random_state=seed)
    else:
        y = pd.to_numeric(y, errors="coerce")
        if len(y) < cv:
            raise BadInputError(f"{len(y)} labelled rows cannot make {cv} folds")
        splitter = KFold(n_splits=cv, shuffle=True, random_state=seed)
    remote = None
    if client is not None:
        from warmstart.cluster import ClusterFolds

        remote = ClusterFolds(client, X, y, splitter)
    return _Folds(fam, task, X, y, splitter, scoring, seed, jobs, remote)


def _warm_note(found: list) -> str:
    """What the warm start is made of: how many configurations, from which datasets."""
    sources: dict[str, float] = {}
    for s in found:
        if s.source_name is not None:
            sources.setdefault(s.source_name, s.distance)
    text = f"warm start: {len(found)} configuration{'s' if len(found) != 1 else ''}"
    if not sources:
        return text + f" ({found[0].strategy}, not taken from past studies)" if found else text
    near = ", ".join(f"{n} (distance {d:.3g})" if d is not None else n
                     for n, d in sources.items())
    return text + f" from the nearest datasets: {near}"


# -- the warm-start queue and the search --------------------------------------------------
def _warm_queue(kb: KnowledgeBase | None, fp: Fingerprint, family: str, space: SearchSpace,
                budget: int, warm_start: int | None, scoring: str, seed: int,
                strategy: str | None, defaults_first: bool, notes: list[str],
                max_fit_seconds: float | None = None) -> tuple[list[dict[str, Any]], str]:
    """The configurations to run first and their origin: the history's suggestions, else
    (a cold study) the family's defaults, else nothing."""
    n_warm = min(MAX_WARM_START, max(1, budget // 2)) if warm_start is None else warm_start
    n_warm = min(n_warm, budget)
    queue: list[dict[str, Any]] = []
    if kb is None:
        notes.append("no history: starting cold")
    elif n_warm > 0:
        try:
            found = kb.suggest(fingerprint_of=fp, family=family, k=n_warm, metric=scoring,
                               seed=seed, space=space, strategy=strategy,
                               max_fit_seconds=max_fit_seconds)
            queue = [space.validate(s.config) for s in found]
            notes.append(_warm_note(found))
        except NothingToSuggestError:
            # not the history's "log one first": this study is logged when it ends
            notes.append(f"starting cold: the history has no {fp.task} study of {family} "
                         f"with metric {scoring} yet")
    if not queue and defaults_first:
        # A cold study starts where a user without a history would: the defaults.
        return [_defaults_within(space)], DEFAULTS
    return queue, WARM


class _Proposer:
    """Where the next trial comes from: the queue first (skipping configurations already
    run), then Gaussian-process expected improvement or seeded random search."""

    def __init__(self, space: SearchSpace, search: str, queue: list[dict[str, Any]],
                 queue_origin: str, seed: int):
        from warmstart.bayes import BayesianOptimizer

        self.space, self.search = space, search
        self.queue, self.queue_origin = list(queue), queue_origin
        self.optimizer = BayesianOptimizer(space, seed=seed)
        self.rng = np.random.default_rng(seed)

    def next(self, trials: list[TuneTrial]) -> tuple[dict[str, Any], str]:
        """The next configuration and its origin label, given the trials so far."""
        seen = {config_key(t.config) for t in trials}
        while self.queue and config_key(self.queue[0]) in seen:
            self.queue.pop(0)
        if self.queue:
            return self.queue.pop(0), self.queue_origin
        if self.search == GP_EI:
            scores = [t.score for t in trials]
            config = self.optimizer.propose([t.config for t in trials], scores)
            return config, GP_EI if self.optimizer.uses_surrogate(scores) else RANDOM
        from warmstart.bayes import random_config

        return random_config(self.space, self.rng, seen), RANDOM


def _run_trials(result: TuneResult, proposer: _Proposer, folds: _Folds,
                time_limit: float | None,
                progress: Callable[[TuneTrial], None] | None) -> None:
    """Evaluate proposals into ``result.trials`` until the budget, the time limit or
    Ctrl-C; set ``result.stopped`` and ``result.seconds``."""
    start = time.monotonic()
    try:
        with threadpool_limits(1):  # see the module docstring: one thread per fit
            while len(result.trials) < result.budget:
                if time_limit is not None and time.monotonic() - start >= time_limit:
                    result.stopped = STOP_TIME
                    break
                config, origin = proposer.next(result.trials)
                trial = _evaluate(folds, config, len(result.trials), origin)
                result.trials.append(trial)
                if progress is not None:
                    progress(trial)
    except KeyboardInterrupt:
        result.stopped = STOP_INTERRUPT
    result.seconds = time.monotonic() - start


def _evaluate(folds: _Folds, config: dict[str, Any], index: int, origin: str) -> TuneTrial:
    """Cross-validate one configuration; an exception makes a failed trial."""
    from warmstart.pipelines import make_pipeline

    t0 = time.monotonic()
    try:
        pipe = make_pipeline(folds.family, folds.task, config, folds.X, seed=folds.seed)
        res = _cross_validate(folds, pipe)
        scores = [float(s) for s in res["test_score"]]
        if not all(np.isfinite(scores)):
            raise ValueError("the scorer returned a non-finite score")
        fit = float(np.mean(res["fit_time"])) * len(folds.y) / folds.train_rows
        return TuneTrial(index, config, origin, OK, float(np.mean(scores)), scores, fit,
                         time.monotonic() - t0)
    except KeyboardInterrupt:
        raise
    except Exception as exc:  # a trial that raises is recorded and the study goes on
        text = str(exc).strip().splitlines()
        error = f"{type(exc).__name__}: {text[0] if text else ''}".strip()
        return TuneTrial(index, config, origin, FAILED, None, [], None,
                         time.monotonic() - t0, error[:500])


def _cross_validate(folds: _Folds, pipe: Any) -> dict[str, Any]:
    """The fit dispatch: ``test_score`` and ``fit_time`` per fold, in one process
    (``jobs`` folds at a time) or one task per fold on the cluster."""
    if folds.remote is not None:
        return folds.remote.cross_validate(pipe, folds.scoring)
    from sklearn.model_selection import cross_validate

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence chatter would break the table
        return cross_validate(pipe, folds.X, folds.y, cv=folds.splitter,
                              scoring=folds.scoring, n_jobs=folds.jobs, error_score="raise")


def _refit(folds: _Folds, config: dict[str, Any], notes: list[str]) -> Any:
    """The configuration's pipeline fitted on every labelled row, as a trial fits it;
    None (with a note) when that fit fails."""
    from warmstart.pipelines import make_pipeline

    try:
        pipe = make_pipeline(folds.family, folds.task, config, folds.X, seed=folds.seed)
        with threadpool_limits(1), warnings.catch_warnings():
            warnings.simplefilter("ignore")  # as in the trials: convergence chatter
            return pipe.fit(folds.X, folds.y)
    except Exception as exc:  # the study is logged already; say why there is no model
        notes.append(f"refit on all rows failed: {type(exc).__name__}: {exc}"[:500])
        return None


# -- logging ------------------------------------------------------------------------------
def _log_study(kb: KnowledgeBase, result: TuneResult, df: pd.DataFrame | str | os.PathLike,
               fp: Fingerprint, label: str | None) -> LoggedStudy:
    """Log the finished trials as one study (``source="tune"``)."""
    rows = [{**t.config, "score": t.score, "fit_seconds": t.fit_seconds,
             "status": t.status, "error": t.error} for t in result.trials]
    return kb.log(df, target=result.target, family=result.family, trials=rows,
                  metric=result.metric, name=label, fingerprint_of=fp, source="tune")


def _defaults_within(space: SearchSpace) -> dict[str, Any]:
    """The declared defaults brought inside a (possibly narrowed) space: numbers clipped
    to its bounds, a categorical default it excludes replaced by its first choice."""
    config = space.defaults()
    for p in space:
        if p.name in config and p.choices and p.problem(config[p.name]) is not None:
            config[p.name] = p.choices[0]
    return space.validate(space.clip(config))


__all__ = ["GP_EI", "SEARCHES", "TuneResult", "TuneTrial", "tune"]
