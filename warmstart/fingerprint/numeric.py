"""Numeric column distributions, each summarised across columns.

Moments (skewness, kurtosis, variation) are exact over all rows, merged batch by batch;
quantile-based ones (outliers, near-constant columns) use the sample. Boolean columns
are left out: two values have no useful shape.
"""

import numpy as np

from warmstart.fingerprint.catalogue import column_summary, group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile
from warmstart.fingerprint.sketches import shape_statistics

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


def _shape(p: DatasetProfile):
    if "shape" not in p.cache:
        p.cache["shape"] = shape_statistics(p.numeric_moments[:, ~p.numeric_boolean])
    return p.cache["shape"]


def _sample_numeric(p: DatasetProfile) -> np.ndarray:
    return p.numeric[:, ~p.numeric_boolean]


@column_summary("numeric_skewness", NUMERIC, "Skewness of numeric columns",
                "g1 = m3 / m2^1.5 per column, biased (scipy.stats.skew, bias=True)",
                "(-inf, inf)")
def numeric_skewness(p: DatasetProfile) -> np.ndarray:
    return _shape(p)[0]


@column_summary("numeric_kurtosis", NUMERIC, "Excess kurtosis of numeric columns",
                "g2 = m4 / m2^2 - 3 per column, biased (scipy.stats.kurtosis, bias=True)",
                "[-2, inf)")
def numeric_kurtosis(p: DatasetProfile) -> np.ndarray:
    return _shape(p)[1]


@column_summary("numeric_outlier_fraction", NUMERIC,
                "Share of values outside the 1.5 IQR fences, per numeric column",
                "count(x < Q1 - 1.5 IQR or x > Q3 + 1.5 IQR) / count(x) (Tukey 1977), "
                "quartiles by linear interpolation (numpy default)", "[0, 1]",
                basis="sample")
def numeric_outlier_fraction(p: DatasetProfile) -> np.ndarray:
    x = _sample_numeric(p)
    counts = np.sum(~np.isnan(x), axis=0)
    x = x[:, counts > 0]
    if x.shape[1] == 0:
        return np.array([])
    q1, q3 = np.nanquantile(x, [0.25, 0.75], axis=0)
    iqr = q3 - q1
    out = (x < q1 - 1.5 * iqr) | (x > q3 + 1.5 * iqr)
    return out.sum(axis=0) / np.sum(~np.isnan(x), axis=0)


@column_summary("numeric_variation", NUMERIC,
                "Coefficient of variation of numeric columns",
                "sqrt(m2) / |mean| per column; NaN where the mean is 0", "[0, inf)")
def numeric_variation(p: DatasetProfile) -> np.ndarray:
    return _shape(p)[2]


@meta_feature("near_constant_fraction", NUMERIC,
              "Share of numeric columns where one value covers at least 95% of rows",
              "columns whose most frequent value has share >= 0.95 / numeric columns "
              "(common practice for near-zero-variance screening)", "[0, 1]",
              basis="sample")
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


@meta_feature("integer_column_fraction", NUMERIC,
              "Share of (non-boolean) numeric columns holding whole numbers only",
              "columns whose every finite value is an integer / numeric columns", "[0, 1]")
def integer_column_fraction(p: DatasetProfile) -> float:
    keep = ~p.numeric_boolean
    return float(np.mean(p.numeric_integer[keep])) if keep.any() else float("nan")
