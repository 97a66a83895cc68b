"""Missing values: how many, where, and in how many patterns.

A cell is missing when it is null / NaN, or an infinite number (treated as missing
everywhere). Counts are exact over all rows; the pattern counts are exact up to
``PATTERN_CAP`` distinct patterns and come from the sample beyond.
"""

import numpy as np

from warmstart.fingerprint.catalogue import group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

MISSING = group("missing", "Missing values")


@meta_feature("missing_cell_fraction", MISSING, "Share of feature cells that are missing",
              "missing cells / (rows x columns)", "[0, 1]")
def missing_cell_fraction(p: DatasetProfile) -> float:
    return p.missing_cells / (p.n_rows * p.n_columns) if p.n_columns else 0.0


@meta_feature("missing_row_fraction", MISSING, "Share of rows with at least one missing cell",
              "rows with any missing / rows", "[0, 1]")
def missing_row_fraction(p: DatasetProfile) -> float:
    return p.missing_rows / p.n_rows


@meta_feature("missing_column_fraction", MISSING,
              "Share of columns with at least one missing cell",
              "columns with any missing / columns", "[0, 1]")
def missing_column_fraction(p: DatasetProfile) -> float:
    m = p.missing_by_column
    return float(np.mean(m > 0)) if m.size else 0.0


@meta_feature("missing_column_max", MISSING, "Missing share of the most incomplete column",
              "max over columns of missing / rows", "[0, 1]")
def missing_column_max(p: DatasetProfile) -> float:
    m = p.missing_by_column
    return float(m.max() / p.n_rows) if m.size else 0.0


def _patterns(p: DatasetProfile) -> np.ndarray:
    """Row counts of each distinct missingness pattern (all rows, or the sample)."""
    if p.missing_patterns is not None:
        return p.missing_patterns
    m = p.missing_mask
    if m.shape[1] == 0 or m.shape[0] == 0:
        return np.array([max(m.shape[0], 1)])
    _, counts = np.unique(np.packbits(m, axis=1), axis=0, return_counts=True)
    return counts


@meta_feature("missing_pattern_count", MISSING,
              "Number of distinct missingness patterns across rows",
              "distinct rows of the 0/1 missingness matrix (Little & Rubin 2019, ch. 1); "
              "exact up to 4096 patterns, counted in the sample beyond",
              "[1, rows]", count_like=True, basis="sketch", integer=True)
def missing_pattern_count(p: DatasetProfile) -> float:
    return float(_patterns(p).size)


@meta_feature("missing_pattern_top_share", MISSING,
              "Share of rows in the most common missingness pattern",
              "max pattern count / rows (sample beyond 4096 patterns)", "(0, 1]",
              basis="sketch")
def missing_pattern_top_share(p: DatasetProfile) -> float:
    counts = _patterns(p)
    return float(counts.max() / counts.sum())
