"""Numeric column distributions, each summarised across columns."""

import numpy as np

from warmstart.fingerprint.catalogue import column_summary, group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

NUMERIC = group("numeric", "Distributions of numeric columns")


def central_moments(x: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """NaN-aware column means and 2nd-4th central moments (biased, divisor n).

    Parameters
    ----------
    x : ndarray of shape (n_rows, n_columns), NaN for missing

    Returns
    -------
    mean, m2, m3, m4 : ndarray of shape (n_columns,)
    """
    mean = np.nanmean(x, axis=0)
    d = x - mean
    return mean, np.nanmean(d**2, axis=0), np.nanmean(d**3, axis=0), np.nanmean(d**4, axis=0)


def _moments(p: DatasetProfile):
    if "moments" not in p.cache:
        x = p.numeric[:, _non_boolean(p)]
        with np.errstate(all="ignore"):
            p.cache["moments"] = central_moments(x) if x.shape[1] else (np.array([]),) * 4
    return p.cache["moments"]


def _non_boolean(p: DatasetProfile) -> np.ndarray:
    """Mask of numeric columns that are not boolean (booleans have no useful shape)."""
    x = p.numeric
    if "non_boolean" not in p.cache:
        keep = np.ones(x.shape[1], dtype=bool)
        for j in range(x.shape[1]):
            v = x[:, j]
            v = v[~np.isnan(v)]
            keep[j] = not np.all((v == 0) | (v == 1))
        p.cache["non_boolean"] = keep
    return p.cache["non_boolean"]


@column_summary("numeric_skewness", NUMERIC, "Skewness of numeric columns",
                "g1 = m3 / m2^1.5 per column, biased (scipy.stats.skew, bias=True)",
                "(-inf, inf)")
def numeric_skewness(p: DatasetProfile) -> np.ndarray:
    _, m2, m3, _ = _moments(p)
    with np.errstate(all="ignore"):
        return np.where(m2 > 0, m3 / m2**1.5, np.nan)


@column_summary("numeric_kurtosis", NUMERIC, "Excess kurtosis of numeric columns",
                "g2 = m4 / m2^2 - 3 per column, biased (scipy.stats.kurtosis, bias=True)",
                "[-2, inf)")
def numeric_kurtosis(p: DatasetProfile) -> np.ndarray:
    _, m2, _, m4 = _moments(p)
    with np.errstate(all="ignore"):
        return np.where(m2 > 0, m4 / m2**2 - 3.0, np.nan)


@column_summary("numeric_outlier_fraction", NUMERIC,
                "Share of values outside the 1.5 IQR fences, per numeric column",
                "count(x < Q1 - 1.5 IQR or x > Q3 + 1.5 IQR) / count(x) (Tukey 1977)",
                "[0, 1]")
def numeric_outlier_fraction(p: DatasetProfile) -> np.ndarray:
    x = p.numeric[:, _non_boolean(p)]
    if x.shape[1] == 0:
        return np.array([])
    with np.errstate(all="ignore"):
        q1, q3 = np.nanquantile(x, [0.25, 0.75], axis=0)
        iqr = q3 - q1
        out = (x < q1 - 1.5 * iqr) | (x > q3 + 1.5 * iqr)
        return out.sum(axis=0) / np.sum(~np.isnan(x), axis=0)


@column_summary("numeric_variation", NUMERIC,
                "Coefficient of variation of numeric columns",
                "sqrt(m2) / |mean| per column; NaN where the mean is 0", "[0, inf)")
def numeric_variation(p: DatasetProfile) -> np.ndarray:
    mean, m2, _, _ = _moments(p)
    with np.errstate(all="ignore"):
        return np.where(mean != 0, np.sqrt(m2) / np.abs(mean), np.nan)


@meta_feature("near_constant_fraction", NUMERIC,
              "Share of numeric columns where one value covers at least 95% of rows",
              "columns whose most frequent value has share >= 0.95 / numeric columns "
              "(common practice for near-zero-variance screening)", "[0, 1]")
def near_constant_fraction(p: DatasetProfile) -> float:
    x = p.numeric
    if x.shape[1] == 0:
        return float("nan")
    shares = []
    for j in range(x.shape[1]):
        v = x[:, j]
        v = v[~np.isnan(v)]
        _, counts = np.unique(v, return_counts=True)
        shares.append(counts.max() / v.size if v.size else 0.0)
    return float(np.mean(np.asarray(shares) >= 0.95))
