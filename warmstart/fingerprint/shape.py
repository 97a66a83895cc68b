"""Shape and column types (the "simple" meta-features of the literature)."""

import numpy as np

from warmstart.fingerprint.catalogue import group, meta_feature
from warmstart.fingerprint.profile import DatasetProfile

SHAPE = group("shape", "Size, shape and column types")


@meta_feature("rows", SHAPE, "Number of rows", "count of rows in the table",
              "[1, inf)", count_like=True, integer=True)
def rows(p: DatasetProfile) -> float:
    return p.n_rows


@meta_feature("columns", SHAPE, "Number of feature columns (target excluded)",
              "count of columns other than the target", "[0, inf)", count_like=True,
              integer=True)
def columns(p: DatasetProfile) -> float:
    return p.n_columns


@meta_feature("log_rows_per_column", SHAPE, "Log ratio of rows to columns",
              "ln(rows / max(columns, 1))", "(-inf, inf)")
def log_rows_per_column(p: DatasetProfile) -> float:
    return float(np.log(p.n_rows / max(p.n_columns, 1)))


def _fraction(count: int, p: DatasetProfile) -> float:
    return count / p.n_columns if p.n_columns else float("nan")


@meta_feature("numeric_column_fraction", SHAPE, "Share of columns used as numeric",
              "numeric (non-boolean) columns / columns", "[0, 1]")
def numeric_column_fraction(p: DatasetProfile) -> float:
    return _fraction(len(p.numeric_names) - p.n_boolean, p)


@meta_feature("categorical_column_fraction", SHAPE, "Share of columns used as categorical",
              "categorical columns / columns", "[0, 1]")
def categorical_column_fraction(p: DatasetProfile) -> float:
    return _fraction(len(p.categorical_names), p)


@meta_feature("boolean_column_fraction", SHAPE, "Share of two-valued (boolean) columns",
              "boolean columns / columns", "[0, 1]")
def boolean_column_fraction(p: DatasetProfile) -> float:
    return _fraction(p.n_boolean, p)


@meta_feature("datetime_column_fraction", SHAPE, "Share of date/time columns",
              "datetime columns / columns", "[0, 1]")
def datetime_column_fraction(p: DatasetProfile) -> float:
    return _fraction(p.n_datetime, p)


@meta_feature("dropped_column_fraction", SHAPE,
              "Share of columns dropped as unusable (constant, all-missing, identifiers)",
              "dropped columns / columns", "[0, 1]")
def dropped_column_fraction(p: DatasetProfile) -> float:
    used = len(p.numeric_names) + len(p.categorical_names) + p.n_datetime
    return _fraction(p.n_columns - used, p)


@meta_feature("duplicate_row_fraction", SHAPE, "Share of rows that repeat an earlier row",
              "1 - distinct rows / rows; distinct rows counted from 64-bit row hashes, "
              "exactly up to 4096 and by a k-minimum-values sketch beyond (Beyer et al. "
              "2007)", "[0, 1)", basis="sketch")
def duplicate_row_fraction(p: DatasetProfile) -> float:
    return float(max(0.0, 1.0 - p.distinct_rows / p.n_rows))


@meta_feature("sample_rows", SHAPE, "Rows in the seeded sample used by sample-based groups",
              "min(rows, SAMPLE_CAP) rows of smallest seeded hash priority (bookkeeping; "
              "left out of distances)", "[1, rows]", count_like=True, basis="sample",
              integer=True)
def sample_rows(p: DatasetProfile) -> float:
    return p.sample_rows
