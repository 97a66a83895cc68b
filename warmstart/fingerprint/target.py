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
              "[2, inf)", CLASSIFICATION, count_like=True, integer=True)
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


# -- leakage: one column that alone gives the target away ---------------------------------
LEAK_CORRELATION = 0.98  # |Pearson r| of one numeric column with the target
LEAK_ACCURACY = 0.99  # accuracy of the one-column lookup landmark below
LEAK_MIN_ROWS = 30  # fewer labelled sample rows say nothing
LEAK_BINS = 10  # numeric columns are cut at their deciles for the lookup


def leakage_warnings(p: DatasetProfile) -> list[str]:
    """Warnings naming each feature that alone predicts the target almost perfectly.

    A column is flagged when, on the sample, ``|r| >= 0.98`` (Pearson correlation of a
    numeric column with the target; classes as codes only when there are two), or, for
    classification, when predicting each row's class as the majority class of its level
    (numeric columns: of its decile bin) is right for at least 99% of the rows and
    clearly better than always predicting the majority class. Such a column is often a
    leak (the target in another form, or recorded after the outcome): tuning on it
    looks perfect and generalises badly.
    """
    labelled = np.isfinite(p.y) & (p.y >= 0 if p.classes else True)
    if labelled.sum() < LEAK_MIN_ROWS:
        return []
    y = p.y[labelled].astype(float)
    flagged: list[str] = []
    for name, col in zip(p.numeric_names, p.numeric.T):
        x = col[labelled].astype(float)
        ok = np.isfinite(x)
        if ok.sum() < LEAK_MIN_ROWS or np.ptp(x[ok]) == 0:
            continue
        if p.classes in (0, 2) and np.ptp(y[ok]) > 0:
            r = np.corrcoef(_standardise(x[ok]), _standardise(y[ok]))[0, 1]
            if abs(r) >= LEAK_CORRELATION:
                flagged.append(f"{name} (|r| = {abs(r):.3f})")
                continue
        if p.classes:
            edges = np.unique(np.quantile(x[ok], np.linspace(0, 1, LEAK_BINS + 1)[1:-1]))
            acc = _lookup_accuracy(np.digitize(x[ok], edges), y[ok].astype(np.int64))
            if acc is not None:
                flagged.append(f"{name} (one-column accuracy {acc:.3f})")
    if p.classes:
        for name, codes, levels in zip(p.categorical_names, p.categorical,
                                       p.categorical_levels):
            keep = codes[labelled] >= 0
            if levels > max(LEAK_BINS, keep.sum() // 10):  # many levels: lookup overfits
                continue
            acc = _lookup_accuracy(codes[labelled][keep], y[keep].astype(np.int64))
            if acc is not None:
                flagged.append(f"{name} (one-column accuracy {acc:.3f})")
    if not flagged:
        return []
    return ["possible leakage: one column alone predicts the target almost perfectly: "
            + ", ".join(flagged)]


def _standardise(x: np.ndarray) -> np.ndarray:
    """Centre and scale by the range first: values near 1e307 would overflow r."""
    span = np.ptp(x)
    return (x - x.min()) / span if span > 0 else x - x.min()


def _lookup_accuracy(groups: np.ndarray, y: np.ndarray) -> float | None:
    """Accuracy of predicting each row's class as its group's majority class, or None
    when below :data:`LEAK_ACCURACY` or not clearly above the majority-class rate."""
    if y.size < LEAK_MIN_ROWS:
        return None
    _, g = np.unique(groups, return_inverse=True)
    table = np.zeros((g.max() + 1, y.max() + 1))
    np.add.at(table, (g, y), 1)
    acc = table.max(axis=1).sum() / y.size
    baseline = np.bincount(y).max() / y.size
    if acc < LEAK_ACCURACY or acc - baseline < 0.5 * (1 - baseline):
        return None
    return float(acc)
