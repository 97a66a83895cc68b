"""The target: class balance (classification) or distribution (regression)."""

import numpy as np

from warmstart.fingerprint.catalogue import (
    BOTH,
    CLASSIFICATION,
    REGRESSION,
    group,
    meta_feature,
)
from warmstart.fingerprint.profile import DatasetProfile
from warmstart.fingerprint.sketches import shape_statistics

TARGET = group("target", "Target: class balance or distribution")


def class_counts(p: DatasetProfile) -> np.ndarray:
    """Counts per class over all rows, shape (classes,), labelled rows only."""
    return np.asarray(p.class_counts, dtype=float)


def _sample_y(p: DatasetProfile) -> np.ndarray:
    return p.y[np.isfinite(p.y)]


def _shape(p: DatasetProfile) -> tuple[float, float, float]:
    skew, kurt, cv = shape_statistics(p.target_moments.reshape(5, 1))
    return float(skew[0]), float(kurt[0]), float(cv[0])


@meta_feature("classes", TARGET, "Number of classes", "count of distinct target labels",
              "[2, inf)", CLASSIFICATION, count_like=True)
def classes(p: DatasetProfile) -> float:
    return p.classes


@meta_feature("class_entropy_normalised", TARGET,
              "Entropy of the class distribution divided by its maximum",
              "H(y) / ln(classes), H in nats (Shannon 1948)", "[0, 1]", CLASSIFICATION)
def class_entropy_normalised(p: DatasetProfile) -> float:
    from scipy import stats  # scipy.stats loads in seconds: only when computed

    return float(stats.entropy(class_counts(p)) / np.log(p.classes))


@meta_feature("minority_majority_ratio", TARGET,
              "Size of the smallest class over the largest", "min count / max count",
              "(0, 1]", CLASSIFICATION)
def minority_majority_ratio(p: DatasetProfile) -> float:
    counts = class_counts(p)
    return float(counts.min() / counts.max())


@meta_feature("imbalance_degree", TARGET,
              "Imbalance degree with the total-variation distance",
              "ID = (m - 1) + d(z, e) / d(l_m, e), m = number of minority classes, d the "
              "total-variation distance, e the uniform distribution, l_m the distribution "
              "with m minority classes farthest from e (Ortigosa-Hernandez, Inza & Lozano, "
              "Pattern Recognition Letters 2017); 0 when balanced",
              "[0, classes - 1)", CLASSIFICATION)
def imbalance_degree(p: DatasetProfile) -> float:
    counts = class_counts(p)
    k = counts.size
    z = counts / counts.sum()
    e = np.full(k, 1.0 / k)
    m = int(np.sum(z < 1.0 / k - 1e-12))
    if m == 0:
        return 0.0
    # The distribution farthest from uniform with m minority classes: m classes at zero,
    # k - m - 1 at 1/k and the remaining mass on one majority class.
    farthest = np.concatenate([np.zeros(m), np.full(k - m - 1, 1.0 / k),
                               [1.0 - (k - m - 1) / k]])
    tv = 0.5 * np.abs(z - e).sum()
    tv_max = 0.5 * np.abs(farthest - e).sum()
    return float((m - 1) + tv / tv_max)


@meta_feature("target_skewness", TARGET, "Skewness of the regression target",
              "Fisher-Pearson g1 = m3 / m2^1.5 (biased, as scipy.stats.skew default)",
              "(-inf, inf)", REGRESSION)
def target_skewness(p: DatasetProfile) -> float:
    return _shape(p)[0]


@meta_feature("target_kurtosis", TARGET, "Excess kurtosis of the regression target",
              "g2 = m4 / m2^2 - 3 (biased, as scipy.stats.kurtosis default)",
              "[-2, inf)", REGRESSION)
def target_kurtosis(p: DatasetProfile) -> float:
    return _shape(p)[1]


@meta_feature("target_variation", TARGET,
              "Coefficient of variation of the regression target",
              "std / |mean| (population std); NaN when the mean is 0", "[0, inf)", REGRESSION)
def target_variation(p: DatasetProfile) -> float:
    return _shape(p)[2]


@meta_feature("target_zero_fraction", TARGET, "Share of regression targets exactly zero",
              "count(y == 0) / count(y)", "[0, 1]", REGRESSION)
def target_zero_fraction(p: DatasetProfile) -> float:
    return p.target_zeros / p.target_moments[0]


@meta_feature("target_outlier_fraction", TARGET,
              "Share of regression targets outside the 1.5 IQR fences",
              "count(y < Q1 - 1.5 IQR or y > Q3 + 1.5 IQR) / count(y) (Tukey 1977)",
              "[0, 1]", REGRESSION, basis="sample")
def target_outlier_fraction(p: DatasetProfile) -> float:
    y = _sample_y(p)
    q1, q3 = np.quantile(y, [0.25, 0.75])
    iqr = q3 - q1
    return float(np.mean((y < q1 - 1.5 * iqr) | (y > q3 + 1.5 * iqr)))


@meta_feature("majority_class_share", TARGET, "Share of labelled rows in the largest class",
              "max count / labelled rows (the accuracy of always predicting it)", "(0, 1]",
              CLASSIFICATION)
def majority_class_share(p: DatasetProfile) -> float:
    counts = class_counts(p)
    return float(counts.max() / counts.sum())


@meta_feature("target_missing_fraction", TARGET, "Share of rows whose target is missing",
              "rows with a missing (or infinite) target / rows", "[0, 1)", BOTH)
def target_missing_fraction(p: DatasetProfile) -> float:
    return p.target_missing / p.n_rows
