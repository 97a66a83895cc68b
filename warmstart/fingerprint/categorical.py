"""Categorical columns: cardinality and how evenly their levels are used."""

import numpy as np
from scipy import stats

from warmstart.fingerprint.catalogue import column_summary, group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

CATEGORICAL = group("categorical", "Categorical columns")


@column_summary("categorical_levels", CATEGORICAL, "Distinct levels of categorical columns",
                "count of distinct non-missing values per column", "[2, inf)")
def categorical_levels(p: DatasetProfile) -> np.ndarray:
    return np.asarray(p.categorical_levels, dtype=float)


def _level_entropy(codes: np.ndarray) -> float:
    counts = np.bincount(codes[codes >= 0])
    counts = counts[counts > 0]
    return float(stats.entropy(counts) / np.log(counts.size)) if counts.size > 1 else 0.0


@meta_feature("categorical_entropy_mean", CATEGORICAL,
              "Mean normalised entropy of categorical columns",
              "mean over columns of H(column) / ln(levels) (Shannon 1948)", "[0, 1]")
def categorical_entropy_mean(p: DatasetProfile) -> float:
    if not p.categorical:
        return float("nan")
    return float(np.mean([_level_entropy(c) for c in p.categorical]))


@meta_feature("one_hot_width_ratio", CATEGORICAL,
              "Columns after one-hot encoding relative to columns before",
              "(numeric columns + sum of levels) / usable columns", "[1, inf)",
              count_like=True)
def one_hot_width_ratio(p: DatasetProfile) -> float:
    usable = len(p.numeric_names) + len(p.categorical_names)
    if usable == 0:
        return float("nan")
    return (len(p.numeric_names) + sum(p.categorical_levels)) / usable
