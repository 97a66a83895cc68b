"""Distances between fingerprints: scaling over the history, neighbours, explanations.

Scaling. Count-like meta-features (rows, columns, classes, ...) are first mapped by
``log1p``; then every meta-feature is centred on its median over the history and divided
by its inter-quartile range (falling back to the standard deviation, then to 1, when the
history does not spread it), a robust scaling that a few extreme datasets cannot stretch.
Scaled differences are clipped at ``CLIP`` so no single meta-feature dominates.

Distance. The root-mean-square of the scaled differences over the meta-features both
fingerprints define (finite on both sides; a meta-feature undefined on either side is
left out, as is one the two catalogue versions do not share). Two identical
fingerprints are at distance 0. Similarity is ``1 / (1 + distance)``.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from warmstart.fingerprint import CATALOGUE, Fingerprint
from warmstart.values import finite_or_none

CLIP = 5.0
AGREE_STEP = 0.05  # scaled units within which two agreements count as equally close
# Bookkeeping features that say nothing about how a dataset behaves under tuning.
IGNORED: frozenset[str] = frozenset({"sample_rows"})


@dataclass(frozen=True)
class Scaler:
    """Per-meta-feature transform fitted on the history.

    Attributes
    ----------
    names : list of str
        The meta-features in column order.
    center, scale : ndarray of shape (n_features,)
    log_mask : ndarray of shape (n_features,) of bool
        Which columns get ``log1p`` before centring.
    """

    names: list[str]
    center: np.ndarray
    scale: np.ndarray
    log_mask: np.ndarray

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Scale raw values, shape (n, n_features) -> (n, n_features); NaN stays NaN."""
        X = np.array(X, dtype=float, copy=True)
        with np.errstate(invalid="ignore"):
            X[:, self.log_mask] = np.sign(X[:, self.log_mask]) * np.log1p(
                np.abs(X[:, self.log_mask]))
        return (X - self.center) / self.scale


def feature_names(fingerprints: Mapping[str, Fingerprint], query: Fingerprint) -> list[str]:
    """Meta-features of the query that at least one history fingerprint also has."""
    seen: set[str] = set()
    for fp in fingerprints.values():
        seen.update(fp.values)
    return [n for n in query.values if n in seen and n not in IGNORED]


def matrix(fingerprints: list[Fingerprint], names: list[str]) -> np.ndarray:
    """Raw values, shape (n_fingerprints, n_names); NaN where absent or undefined."""
    return np.array([[fp.values.get(n, np.nan) for n in names] for fp in fingerprints],
                    dtype=float).reshape(len(fingerprints), len(names))


def fit_scaler(X: np.ndarray, names: list[str]) -> Scaler:
    """Fit the robust scaling on the history's raw matrix ``X`` (n_datasets, n_features)."""
    log_mask = np.array([CATALOGUE[n].count_like if n in CATALOGUE else False for n in names],
                        dtype=bool)
    Xl = np.array(X, dtype=float, copy=True)
    with np.errstate(invalid="ignore"):
        Xl[:, log_mask] = np.sign(Xl[:, log_mask]) * np.log1p(np.abs(Xl[:, log_mask]))
    with np.errstate(all="ignore"), warnings.catch_warnings():
        # a column nobody defines is all NaN: numpy warns, the fallbacks below handle it
        warnings.simplefilter("ignore", RuntimeWarning)
        center = np.nanmedian(Xl, axis=0)
        q1, q3 = np.nanquantile(Xl, [0.25, 0.75], axis=0)
        std = np.nanstd(Xl, axis=0)
    scale = q3 - q1
    scale = np.where(np.isfinite(scale) & (scale > 1e-12), scale,
                     np.where(np.isfinite(std) & (std > 1e-12), std, 1.0))
    center = np.where(np.isfinite(center), center, 0.0)
    return Scaler(names, center, scale, log_mask)


def scaled_differences(query: np.ndarray, others: np.ndarray) -> np.ndarray:
    """|query - other| per meta-feature, clipped at CLIP; NaN where either side is NaN.

    Parameters
    ----------
    query : ndarray of shape (n_features,), scaled
    others : ndarray of shape (n_others, n_features), scaled
    """
    return np.minimum(np.abs(others - query[None, :]), CLIP)


def distances(diffs: np.ndarray) -> np.ndarray:
    """Root-mean-square over defined meta-features, shape (n_others,); inf if none shared."""
    defined = np.isfinite(diffs)
    counts = defined.sum(axis=1)
    sq = np.where(defined, diffs, 0.0) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        d = np.sqrt(sq.sum(axis=1) / counts)
    return np.where(counts > 0, d, np.inf)


@dataclass(frozen=True)
class Neighbour:
    """A past dataset near the query, with why."""

    dataset_id: str
    name: str
    distance: float
    similarity: float
    shared_features: int
    agree: list[tuple[str, float, float]]  # (meta-feature, query value, its value)
    differ: list[tuple[str, float, float]]

    def to_dict(self) -> dict[str, object]:
        def items(rows):
            return [{"meta_feature": n, "query": finite_or_none(a),
                     "neighbour": finite_or_none(b)} for n, a, b in rows]

        return {"dataset_id": self.dataset_id, "name": self.name,
                "distance": finite_or_none(self.distance),
                "similarity": finite_or_none(self.similarity),
                "shared_meta_features": self.shared_features,
                "agree_most": items(self.agree), "differ_most": items(self.differ)}


def nearest(query: Fingerprint, history: Mapping[str, Fingerprint], names: Mapping[str, str],
            k: int | None = 5, explain: int = 3) -> list[Neighbour]:
    """The ``k`` history fingerprints nearest to ``query`` (all of them when k is None).

    Parameters
    ----------
    query : Fingerprint
    history : mapping of dataset id -> Fingerprint
        Candidates (already restricted to the query's task by the caller).
    names : mapping of dataset id -> display name
    k : int or None
    explain : int
        How many meta-features to list as agreeing most and differing most.

    Ties in distance are broken by dataset id, so the order is deterministic.
    """
    if not history:
        return []
    ids = sorted(history)
    fps = [history[i] for i in ids]
    cols = feature_names(history, query)
    X = matrix(fps, cols)
    scaler = fit_scaler(X, cols)
    q_raw = matrix([query], cols)[0]
    Xs, qs = scaler.transform(X), scaler.transform(q_raw[None, :])[0]
    diffs = scaled_differences(qs, Xs)
    d = distances(diffs)
    order = sorted(range(len(ids)), key=lambda i: (d[i], ids[i]))
    if k is not None:
        order = order[:k]
    # Agreeing on a value most of the history shares (no date columns, two classes) says
    # little; among meta-features that agree equally closely (within AGREE_STEP scaled
    # units), those where the query's value is rare in the history are listed first.
    with np.errstate(invalid="ignore"):
        commonness = np.mean(np.abs(Xs - qs[None, :]) < AGREE_STEP, axis=0)
    out = []
    for i in order:
        defined = np.flatnonzero(np.isfinite(diffs[i]))
        by_diff = defined[np.argsort(diffs[i, defined], kind="stable")]
        closeness = np.floor(diffs[i, defined] / AGREE_STEP)
        by_agreement = defined[np.lexsort((commonness[defined], closeness))]
        agree = [(cols[j], q_raw[j], X[i, j]) for j in by_agreement[:explain]]
        differ = [(cols[j], q_raw[j], X[i, j]) for j in by_diff[::-1][:explain]
                  if diffs[i, j] > 0]
        out.append(Neighbour(ids[i], names.get(ids[i], ids[i]), float(d[i]),
                             float(1.0 / (1.0 + d[i])), int(defined.size), agree, differ))
    return out
