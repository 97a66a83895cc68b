"""What the server keeps between requests: one KnowledgeBase and results derived from it.

Derived results (the tables, the fingerprints, the map, backtests) are cached under a
key made of the committed study files' names, sizes and modification times: any new
study, import or compaction changes it, and the cache starts afresh. ``similar`` is
answered from the cached tables with the library's own function; the other questions
(``suggest``, ``log``...) go to the KnowledgeBase itself, so all answer exactly as the
directory would.
"""

from __future__ import annotations

import hashlib
import logging
import threading
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any

import numpy as np
import pandas as pd

from warmstart.backtest import DEFAULT_KS, BacktestResult, backtest
from warmstart.errors import WarmstartError
from warmstart.fingerprint import Fingerprint
from warmstart.history import KnowledgeBase
from warmstart.metrics import LOWER
from warmstart.service.maps import TaskMap, similarity_map
from warmstart.similarity import Neighbour, nearest
from warmstart.storage import visible_files

log = logging.getLogger("warmstart.service")
WEB_BACKTEST = {"ks": DEFAULT_KS, "strategies": None, "metric": None, "seed": 0,
                "random_repeats": 10}


class HistoryState:
    """A history served over HTTP, with a cache of what its pages show.

    Parameters
    ----------
    path : path-like
        The history directory (must already be a history).
    """

    def __init__(self, path):
        self.kb = KnowledgeBase(path)
        self._lock = threading.Lock()
        self._key: str | None = None
        self._cache: dict[Any, Any] = {}
        self._jobs = ThreadPoolExecutor(max_workers=1, thread_name_prefix="backtest")
        self._running: dict[Any, Future] = {}

    def key(self) -> str:
        """A digest of the committed study and tombstone files: changes whenever the
        history does."""
        h = hashlib.sha256()
        for p in [*visible_files(self.kb.path / "studies"),
                  *visible_files(self.kb.path / "deletions")]:
            try:
                st = p.stat()
            except FileNotFoundError:  # removed by a compaction meanwhile
                continue
            h.update(f"{p.name}\0{st.st_size}\0{st.st_mtime_ns}\n".encode())
        return h.hexdigest()[:16]

    def cached(self, name: Any, compute: Callable[[], Any]) -> Any:
        """``compute()``'s value for the history as it is now, computed once: requests
        arriving while it is being computed wait for that one instead of starting their
        own (a busy server would otherwise read the whole history once per request)."""
        key = self.key()
        with self._lock:
            if key != self._key:
                self._key, self._cache = key, {}
            pending = self._cache.get(name)
            mine = pending is None
            if mine:
                pending = self._cache[name] = Future()
        if not mine:
            return pending.result()
        try:
            value = compute()
        except BaseException as exc:
            with self._lock:  # a later request tries again
                if self._cache.get(name) is pending:
                    del self._cache[name]
            pending.set_exception(exc)
            raise
        pending.set_result(value)
        return value

    # -- derived results ------------------------------------------------------------------
    def tables(self) -> dict[str, pd.DataFrame]:
        return self.cached("tables", self.kb.tables)

    def fingerprints(self) -> dict[str, Fingerprint]:
        return self.cached("fingerprints",
                           lambda: self.kb.fingerprints(self.tables()["datasets"]))

    def similar(self, query: Fingerprint, k: int) -> list[Neighbour]:
        """:meth:`KnowledgeBase.similar` of ``query`` on the cached tables and fingerprints
        (the same neighbours: the same datasets, in the same order, to the same function)."""
        datasets = self.tables()["datasets"]
        same_task = datasets[datasets["task"] == query.task]
        fps = self.fingerprints()
        return nearest(query, {i: fps[i] for i in same_task["dataset_id"]},
                       dict(zip(same_task["dataset_id"], same_task["name"])), k=k)

    def names(self) -> dict[str, str]:
        d = self.tables()["datasets"]
        return dict(zip(d["dataset_id"], d["name"]))

    def maps(self) -> dict[str, TaskMap]:
        return self.cached("maps", lambda: similarity_map(self.fingerprints()))

    def study_rows(self) -> pd.DataFrame:
        """One row per study with its trial count, ok count and best score."""
        return self.cached("study_rows", self._study_rows)

    def _study_rows(self) -> pd.DataFrame:
        t = self.tables()
        studies, trials = t["studies"], t["trials"]
        ok = trials[trials["status"] == "ok"]
        hi, lo = ok.groupby("study_id")["score"].max(), ok.groupby("study_id")["score"].min()
        best = np.where(studies["better"] == LOWER, studies["study_id"].map(lo),
                        studies["study_id"].map(hi))
        counts = trials.groupby("study_id").size()
        return studies.assign(trials=studies["study_id"].map(counts).fillna(0).astype(int),
                              ok=studies["study_id"].map(ok.groupby("study_id").size())
                              .fillna(0).astype(int), best_score=best)

    def backtest(self, family: str, **params) -> BacktestResult:
        """The backtest of ``family`` (computed once per history state and parameters)."""
        p = {**WEB_BACKTEST, **params}
        p["ks"] = tuple(p["ks"])
        p["strategies"] = None if p["strategies"] is None else tuple(p["strategies"])
        name = ("backtest", family, tuple(sorted(p.items())))
        return self.cached(name, lambda: backtest(
            self.kb, family, p["ks"], p["strategies"], metric=p["metric"], seed=p["seed"],
            random_repeats=p["random_repeats"]))

    def backtest_later(self, family: str) -> tuple[BacktestResult | None, str | None]:
        """The web view's backtest of ``family`` if ready, else start it in the background.

        Returns ``(result, None)`` when ready, ``(None, None)`` while running and
        ``(None, message)`` when it failed.
        """
        key = (self.key(), family)
        with self._lock:
            job = self._running.get(key)
            if job is None:
                job = self._running[key] = self._jobs.submit(self.backtest, family)
        if not job.done():
            return None, None
        exc = job.exception()
        if exc is not None:
            with self._lock:
                self._running.pop(key, None)  # a later visit tries again
            if isinstance(exc, WarmstartError):
                return None, str(exc)
            log.error("backtest of %s failed", family, exc_info=exc)
            return None, "the backtest failed; the server's log says why"
        return job.result(), None

    def close(self) -> None:
        self._jobs.shutdown(wait=False, cancel_futures=True)
