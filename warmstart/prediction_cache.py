"""Surrogate predictions kept next to the history, so that a repeated ``suggest`` does not
refit the per-study surrogates (:mod:`warmstart.surrogate`).

A logged study never changes, so what its surrogate predicts for a configuration stays
true; the predictions are stored per study as JSON under ``<history>/.cache/predictions/``
(hidden from the history's readers, never pickled) and written by atomic rename. A file
is named by a digest of everything the predictions depend on -- the study id, the
surrogate kind and seed, the search space the configurations are encoded in, the cache
format, and the study's *fit identity*: a hash of the rows its surrogate is fitted on
(trial numbers and normalised scores of the sub-sample, see
:func:`warmstart.surrogate.fit_rows`). A study whose rows change (deleted, re-imported,
or rewritten by a future format) therefore gets a new name and its old file is simply
never read again; compaction moves rows between files without changing them, so it keeps
the cache valid. A cold or missing cache only costs time: predictions are recomputed and
identical, since the fit is seeded. A history on a read-only mount just runs uncached.
"""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

import numpy as np

from warmstart.storage import write_bytes_atomic

CACHE_DIR = ".cache"
FORMAT = 1


def fit_identity(trial_index: np.ndarray, normalised: np.ndarray) -> str:
    """A hash of the rows a study's surrogate is fitted on.

    Parameters
    ----------
    trial_index : ndarray of int, shape (n,)
        The rows' trial numbers within their study, in the order fitted.
    normalised : ndarray of float, shape (n,)
        Their normalised scores.
    """
    h = hashlib.sha256(np.ascontiguousarray(trial_index, dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(normalised, dtype="<f8").tobytes())
    return h.hexdigest()


class PredictionStore:
    """Per-study prediction files of one history (see the module docstring)."""

    def __init__(self, history: str | os.PathLike):
        self.root = Path(history) / CACHE_DIR / "predictions"

    def _path(self, study_id: str, kind: str, seed: int, space: str, identity: str) -> Path:
        key = json.dumps([FORMAT, study_id, kind, int(seed), space, identity])
        return self.root / f"{hashlib.sha256(key.encode()).hexdigest()[:40]}.json"

    def load(self, study_id: str, kind: str, seed: int, space: str,
             identity: str) -> dict[str, float]:
        """The stored predictions {configuration key: value}; empty when none."""
        try:
            data = json.loads(self._path(study_id, kind, seed, space, identity).read_text())
        except (OSError, ValueError):
            return {}
        if not isinstance(data, dict) or data.get("study_id") != study_id:
            return {}
        pred = data.get("predictions")
        return {str(k): float(v) for k, v in pred.items()} if isinstance(pred, dict) else {}

    def save(self, study_id: str, kind: str, seed: int, space: str, identity: str,
             predictions: dict[str, float]) -> None:
        """Store the predictions (replacing the file atomically); failures are ignored,
        the cache being an optimisation only."""
        path = self._path(study_id, kind, seed, space, identity)
        body = json.dumps({"format": FORMAT, "study_id": study_id, "kind": kind,
                           "predictions": predictions}, sort_keys=True, allow_nan=False)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            write_bytes_atomic(body.encode(), path)
        except (OSError, ValueError):
            pass


__all__ = ["CACHE_DIR", "PredictionStore", "fit_identity"]
