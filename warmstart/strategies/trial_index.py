"""Row-level access to the trials a strategy ranks, parsing and keying only what it reads.

On a large history, :meth:`KnowledgeBase.suggest` hands strategies the trials with their
configurations still as JSON text: most strategies read a few rows (the best trials of
the nearest datasets), and parsing a million configurations takes about 0.3 s. A
:class:`TrialIndex` parses a row on first read and keeps it, and keeps the canonical
keys, the rows of each study and the best-first orders it has computed. Everything it
caches depends only on its own trials, so views of one context that share an index
(``dataclasses.replace`` with another seed) share the caches safely, and a view with
other scores gets its own index from :meth:`TrialIndex.rescored`.
"""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from functools import cached_property
from typing import Any

import numpy as np
import pandas as pd

from warmstart.spaces import SearchSpace
from warmstart.strategies.base import canonical_key

_NO_ROWS = np.zeros(0, dtype=np.intp)


class TrialIndex:
    """Prepared trials (see :func:`~warmstart.strategies.prepare_trials`) by row number.

    Parameters
    ----------
    frame : DataFrame
        One row per ``ok`` trial with ``study_id``, ``trial_index``, ``config`` (a dict,
        or its JSON text to be parsed on demand), ``score``, ``normalised`` (per study,
        1 = best) and ``fit_seconds``; optionally ``key`` (canonical keys, used as is).
    space : SearchSpace
        The family's declared space, in which canonical keys are computed.

    Row numbers ("positions") are those of ``frame``: ``0 .. len(frame) - 1``.
    """

    def __init__(self, frame: pd.DataFrame, space: SearchSpace):
        n = len(frame)
        cfg = frame["config"].to_numpy(dtype=object) if "config" in frame.columns else None
        text = cfg is not None and n > 0 and isinstance(cfg[0], str)
        self.space = space
        self._frame = frame
        self._text = cfg if text else None
        self._configs = cfg.copy() if cfg is not None and not text else np.full(n, None, object)
        self._keys = (frame["key"].to_numpy(dtype=object) if "key" in frame.columns
                      else np.full(n, None, dtype=object))
        self._ranked: dict[tuple[str, ...], np.ndarray] = {}
        self._clipped: dict[str, dict[Any, tuple[dict[str, Any] | None, str | None]]] = {}

    def __len__(self) -> int:
        return len(self._frame)

    @cached_property
    def frame(self) -> pd.DataFrame:
        """All trials with parsed configurations (parses every row not yet read)."""
        if self._text is None:
            return self._frame
        return self._frame.assign(config=self.configs_at(range(len(self))))

    def column(self, name: str) -> np.ndarray:
        """One column other than ``config`` as an array, shape (n_trials,); parses nothing."""
        return self._frame[name].to_numpy()

    def configs_at(self, positions: Iterable[int]) -> list[dict[str, Any]]:
        """Parsed configurations at ``positions``, in that order (each row parsed once)."""
        out = []
        for i in positions:
            c = self._configs[i]
            if c is None:
                c = self._configs[i] = json.loads(self._text[i])
            out.append(c)
        return out

    def keys_at(self, positions: Sequence[int]) -> np.ndarray:
        """Canonical keys at ``positions``, shape (len(positions),) (each computed once)."""
        positions = np.asarray(positions, dtype=np.intp)
        todo = [i for i in positions if self._keys[i] is None]
        for i, c in zip(todo, self.configs_at(todo)):
            self._keys[i] = canonical_key(self.space, c)
        return self._keys[positions]

    def clipped_at(self, space: SearchSpace, space_id: str, positions: Sequence[int]
                   ) -> list[tuple[dict[str, Any] | None, str | None]]:
        """Configurations at ``positions`` brought into ``space`` (``space.clip``) with
        the canonical key of each result, in that order; ``(None, None)`` where the
        configuration cannot be brought into it.

        Cached per ``space_id`` (a string naming ``space``) and per row; rows whose JSON
        text is identical share one entry, since clipping depends on the configuration
        alone. Strategies clip the same rows many times when ``auto`` holds datasets out.
        """
        memo = self._clipped.setdefault(space_id, {})
        text = self._text
        ids = list(positions) if text is None else [text[i] for i in positions]
        todo = {m: i for m, i in zip(ids, positions) if m not in memo}
        for m, c in zip(todo, self.configs_at(todo.values())):
            clipped = space.clip(c)
            memo[m] = (clipped, None if clipped is None else canonical_key(self.space, clipped))
        return [memo[m] for m in ids]

    def rows_at(self, positions: Sequence[int]) -> pd.DataFrame:
        """The trials at ``positions`` (in that order) with parsed configurations."""
        positions = np.asarray(positions, dtype=np.intp)
        rows = self._frame.iloc[positions].copy()
        if self._text is not None:
            rows["config"] = self.configs_at(positions)
        return rows

    @cached_property
    def _by_study(self) -> dict[str, np.ndarray]:
        sid = self.column("study_id")
        if not sid.size:
            return {}
        groups = pd.Series(np.arange(sid.size)).groupby(sid, sort=False).groups
        return {k: np.asarray(v, dtype=np.intp) for k, v in groups.items()}

    def study_positions(self, study_id: str) -> np.ndarray:
        """Row numbers of one study's trials, ascending."""
        return self._by_study.get(study_id, _NO_ROWS)

    def ranked_positions(self, study_ids: Sequence[str]) -> np.ndarray:
        """Row numbers of the trials of ``study_ids``, best first (ties: study id, trial
        index), cached by the tuple of ids."""
        cache_key = tuple(study_ids)
        if cache_key not in self._ranked:
            pos = (np.sort(np.concatenate([self.study_positions(s) for s in cache_key]))
                   if cache_key else _NO_ROWS)
            t = self._frame.iloc[pos][["normalised", "study_id", "trial_index"]].set_axis(pos)
            t = t.sort_values(["normalised", "study_id", "trial_index"],
                              ascending=[False, True, True], kind="stable")
            self._ranked[cache_key] = t.index.to_numpy(dtype=np.intp)
        return self._ranked[cache_key]

    def rescored(self, normalised: np.ndarray) -> TrialIndex:
        """The same trials with other ``normalised`` scores, shape (n_trials,).

        Parsed configurations, keys and study rows are shared (they do not depend on the
        scores); best-first orders are computed afresh.
        """
        view = TrialIndex.__new__(TrialIndex)
        view.space = self.space
        view._frame = self._frame.assign(normalised=np.asarray(normalised, dtype=float))
        view._text, view._configs, view._keys = self._text, self._configs, self._keys
        view._ranked, view._clipped = {}, self._clipped
        if "_by_study" in self.__dict__:
            view.__dict__["_by_study"] = self._by_study
        return view


__all__ = ["TrialIndex"]
