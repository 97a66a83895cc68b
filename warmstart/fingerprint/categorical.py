"""Categorical columns: cardinality and how evenly their levels are used.

Level counts are exact up to ``LEVEL_CAP`` levels per column; beyond, the distinct count
is a k-minimum-values estimate and the entropy is computed on the sample.
"""

import numpy as np

from warmstart.fingerprint.catalogue import column_summary, group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

CATEGORICAL = group("categorical", "Categorical columns")


@column_summary("categorical_levels", CATEGORICAL, "Distinct levels of categorical columns",
                "count of distinct non-missing values per column (k-minimum-values "
                "estimate beyond 4096, Beyer et al. 2007)", "[2, inf)", basis="sketch")
def categorical_levels(p: DatasetProfile) -> np.ndarray:
    return np.asarray(p.categorical_levels, dtype=float)


def normalised_entropy(counts: np.ndarray) -> float:
    """Shannon entropy of counts over its maximum ln(levels), levels = non-zero counts."""
    from scipy import stats  # scipy.stats loads in seconds: only when computed

    counts = np.asarray(counts, dtype=float)
    counts = counts[counts > 0]
    return float(stats.entropy(counts) / np.log(counts.size)) if counts.size > 1 else 0.0


@meta_feature("categorical_entropy_mean", CATEGORICAL,
              "Mean normalised entropy of categorical columns",
              "mean over columns of H(column) / ln(levels) (Shannon 1948); exact level "
              "counts, the sample for columns beyond 4096 levels", "[0, 1]", basis="sketch")
def categorical_entropy_mean(p: DatasetProfile) -> float:
    if not p.categorical:
        return float("nan")
    values = []
    for counts, codes in zip(p.categorical_counts, p.categorical):
        if counts is None:
            counts = np.bincount(codes[codes >= 0]) if (codes >= 0).any() else np.zeros(0)
        values.append(normalised_entropy(counts))
    return float(np.mean(values))


@meta_feature("one_hot_width_ratio", CATEGORICAL,
              "Columns after one-hot encoding relative to columns before",
              "(numeric columns + sum of levels) / usable columns", "[1, inf)",
              count_like=True, basis="sketch")
def one_hot_width_ratio(p: DatasetProfile) -> float:
    usable = len(p.numeric_names) + len(p.categorical_names)
    if usable == 0:
        return float("nan")
    return (len(p.numeric_names) + sum(p.categorical_levels)) / usable


@meta_feature("high_cardinality_fraction", CATEGORICAL,
              "Share of categorical columns with very many levels",
              "columns with more than max(50, non-missing / 2) levels / categorical columns",
              "[0, 1]", basis="sketch")
def high_cardinality_fraction(p: DatasetProfile) -> float:
    return float(np.mean(p.categorical_high)) if p.categorical else float("nan")
