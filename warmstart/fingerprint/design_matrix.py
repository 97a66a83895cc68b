"""The model design matrix of the sample, for the sample-based (model) meta-features.

``design(p)`` is the feature matrix landmarks and complexity measures see: numeric and
boolean columns imputed by their median and standardised (zero mean, unit variance; a
column constant in the sample is dropped), then each categorical column that is not
high-cardinality one-hot encoded -- its ``MAX_ONE_HOT_LEVELS`` most frequent levels,
one "other" column for the rest and one for missing values. Only rows with a target are
kept. All of it runs on the seeded sample, so its cost does not grow with the table's
rows; of a table of more than ``COLUMN_CAP`` feature columns it uses a seeded sample of
``COLUMN_CAP`` of them (:func:`catalogue.column_sample`), so it is bounded in columns too.
"""

from __future__ import annotations

import warnings

import numpy as np

from warmstart.fingerprint.catalogue import column_sample
from warmstart.fingerprint.profile import CLASSIFICATION, DatasetProfile

MAX_ONE_HOT_LEVELS = 10


def labelled_rows(p: DatasetProfile) -> np.ndarray:
    """Mask of sample rows with a target, shape (sample_rows,)."""
    return p.y >= 0 if p.task == CLASSIFICATION else np.isfinite(p.y)


def standardised(x: np.ndarray) -> np.ndarray:
    """Median-impute and standardise columns; drop columns constant after imputation.

    Parameters
    ----------
    x : ndarray of shape (n, d), NaN for missing

    Returns
    -------
    ndarray of shape (n, d_kept)
    """
    if x.shape[1] == 0 or x.shape[0] == 0:
        return np.empty((x.shape[0], 0))
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-missing columns: NaN median
        med = np.nanmedian(x, axis=0)
    z = np.where(np.isnan(x), np.where(np.isnan(med), 0.0, med), x)
    sd = z.std(axis=0)
    keep = sd > 1e-12 * np.maximum(np.abs(z).max(axis=0), 1.0)
    return (z[:, keep] - z[:, keep].mean(axis=0)) / sd[keep]


def one_hot(codes: np.ndarray, max_levels: int = MAX_ONE_HOT_LEVELS) -> np.ndarray:
    """One-hot columns for the most frequent levels, plus "other" and "missing" if used.

    Parameters
    ----------
    codes : ndarray of shape (n,) of int, -1 for missing

    Returns
    -------
    ndarray of shape (n, k) of float
    """
    present = codes >= 0
    counts = np.bincount(codes[present]) if present.any() else np.zeros(0, dtype=int)
    top = np.argsort(-counts, kind="stable")[:max_levels]
    top = top[counts[top] > 0]
    cols = [(codes == level) for level in top]
    other = present & ~np.isin(codes, top)
    if other.any():
        cols.append(other)
    if (~present).any():
        cols.append(~present)
    return np.column_stack(cols).astype(float) if cols else np.empty((codes.size, 0))


def sampled_features(p: DatasetProfile) -> tuple[np.ndarray, list[int]]:
    """The feature columns the column-sampled measures use: positions in ``p.numeric``
    and indices of categorical columns (high-cardinality ones left out), each in table
    order -- all of them up to ``COLUMN_CAP`` features (:func:`catalogue.column_sample`)."""
    n_num = p.numeric.shape[1]
    cats = [j for j, high in enumerate(p.categorical_high) if not high]
    chosen = column_sample(list(p.numeric_names) + [p.categorical_names[j] for j in cats])
    return chosen[chosen < n_num], [cats[f - n_num] for f in chosen[chosen >= n_num]]


def design(p: DatasetProfile) -> tuple[np.ndarray, np.ndarray]:
    """(X, y) on labelled sample rows; X of shape (n_labelled, n_design_columns)."""
    if "design" not in p.cache:
        rows = labelled_rows(p)
        numeric, categorical = sampled_features(p)
        blocks = [standardised(p.numeric[rows][:, numeric])]
        for j in categorical:
            blocks.append(one_hot(p.categorical[j][rows]))
        X = np.hstack(blocks) if blocks else np.empty((int(rows.sum()), 0))
        p.cache["design"] = (X, p.y[rows])
    return p.cache["design"]
