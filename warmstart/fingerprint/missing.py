"""Missing values: how many, where, and in how many patterns."""

import numpy as np

from warmstart.fingerprint.catalogue import group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

MISSING = group("missing", "Missing values")


def _mask(p: DatasetProfile) -> np.ndarray:
    return p.missing_mask


@meta_feature("missing_cell_fraction", MISSING, "Share of feature cells that are missing",
              "missing cells / (rows x columns)", "[0, 1]")
def missing_cell_fraction(p: DatasetProfile) -> float:
    m = _mask(p)
    return float(m.mean()) if m.size else 0.0


@meta_feature("missing_row_fraction", MISSING, "Share of rows with at least one missing cell",
              "rows with any missing / rows", "[0, 1]")
def missing_row_fraction(p: DatasetProfile) -> float:
    m = _mask(p)
    return float(m.any(axis=1).mean()) if m.size else 0.0


@meta_feature("missing_column_fraction", MISSING,
              "Share of columns with at least one missing cell",
              "columns with any missing / columns", "[0, 1]")
def missing_column_fraction(p: DatasetProfile) -> float:
    m = _mask(p)
    return float(m.any(axis=0).mean()) if m.size else 0.0


@meta_feature("missing_column_max", MISSING, "Missing share of the most incomplete column",
              "max over columns of missing / rows", "[0, 1]")
def missing_column_max(p: DatasetProfile) -> float:
    m = _mask(p)
    return float(m.mean(axis=0).max()) if m.size else 0.0


def _patterns(p: DatasetProfile) -> np.ndarray:
    """Counts of each distinct row-wise missingness pattern."""
    m = _mask(p)
    if m.shape[1] == 0:
        return np.array([m.shape[0]])
    packed = np.packbits(m, axis=1)
    _, counts = np.unique(packed, axis=0, return_counts=True)
    return counts


@meta_feature("missing_pattern_count", MISSING,
              "Number of distinct missingness patterns across rows",
              "distinct rows of the 0/1 missingness matrix (Little & Rubin 2019, ch. 1)",
              "[1, rows]", count_like=True)
def missing_pattern_count(p: DatasetProfile) -> float:
    return float(_patterns(p).size)


@meta_feature("missing_pattern_top_share", MISSING,
              "Share of rows in the most common missingness pattern",
              "max pattern count / rows", "(0, 1]")
def missing_pattern_top_share(p: DatasetProfile) -> float:
    counts = _patterns(p)
    return float(counts.max() / counts.sum())
