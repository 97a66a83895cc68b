"""Information-theoretic view of features and target (Michie, Spiegelhalter & Taylor 1994).

Every feature is discretised on the sample's labelled rows: numeric columns into
``BINS`` equal-frequency bins (edges at the 10 %, 20 %, ... quantiles; tied edges merged,
so a column with few values gets fewer bins), boolean columns into their two values,
categorical columns (not high-cardinality) into their levels; a missing value is a bin of
its own. In a table of more than ``COLUMN_CAP`` such features, a seeded sample of
``COLUMN_CAP`` of them is used (:func:`catalogue.column_sample`). A regression target is
discretised the same way. Entropies are in nats, from plug-in (maximum-likelihood)
probabilities.
"""

from __future__ import annotations

import numpy as np

from warmstart.fingerprint.catalogue import group, meta_feature, reduce_or_nan
from warmstart.fingerprint.design_matrix import labelled_rows, sampled_features
from warmstart.fingerprint.profile import CLASSIFICATION, DatasetProfile

INFORMATION = group("information", "Entropy and mutual information (discretised features)")
BINS = 10


def equal_frequency_codes(x: np.ndarray, bins: int = BINS) -> np.ndarray:
    """Bin codes 0..k-1 of ``x`` (shape (n,)) by equal-frequency edges; NaN gets code k."""
    ok = ~np.isnan(x)
    if not ok.any():
        return np.zeros(x.size, dtype=np.int64)
    edges = np.unique(np.quantile(x[ok], np.linspace(0, 1, bins + 1)[1:-1]))
    codes = np.searchsorted(edges, x, side="right")
    return np.where(ok, codes, edges.size + 1).astype(np.int64)


def entropy_of(codes: np.ndarray) -> float:
    """Shannon entropy (nats) of non-negative integer codes."""
    from scipy import stats  # scipy.stats loads in seconds: only when computed

    return float(stats.entropy(np.bincount(codes)))


def mutual_information(a: np.ndarray, b: np.ndarray) -> float:
    """Plug-in mutual information (nats) of two code arrays: H(a) + H(b) - H(a, b)."""
    joint = a * (int(b.max()) + 1) + b
    return max(0.0, entropy_of(a) + entropy_of(b) - entropy_of(joint))


def _tables(p: DatasetProfile):
    """(feature codes list, target codes), cached."""
    if "information" not in p.cache:
        rows = labelled_rows(p)
        y = p.y[rows]
        y = y.astype(np.int64) if p.task == CLASSIFICATION else equal_frequency_codes(y)
        numeric, categorical = sampled_features(p)
        features = []
        for j in numeric:
            x = p.numeric[rows, j]
            if p.numeric_boolean[j]:
                features.append(np.where(np.isnan(x), 2, x).astype(np.int64))
            else:
                features.append(equal_frequency_codes(x))
        for j in categorical:
            c = p.categorical[j][rows]
            features.append(np.where(c < 0, c.max() + 1, c).astype(np.int64))
        p.cache["information"] = (features, y)
    return p.cache["information"]


def _entropies(p: DatasetProfile) -> np.ndarray:
    features, _ = _tables(p)
    return np.array([entropy_of(f) for f in features])


def _mi(p: DatasetProfile) -> np.ndarray:
    if "mi" not in p.cache:
        features, y = _tables(p)
        p.cache["mi"] = np.array([mutual_information(f, y) for f in features])
    return p.cache["mi"]


@meta_feature("feature_entropy_mean", INFORMATION,
              "Mean normalised entropy of the discretised features",
              "mean over features of H(X) / ln(bins used) (Shannon 1948); 0 for one bin",
              "[0, 1]", basis="column_sample")
def feature_entropy_mean(p: DatasetProfile) -> float:
    features, _ = _tables(p)
    if not features:
        return float("nan")
    out = []
    for f in features:
        k = np.unique(f).size
        out.append(entropy_of(f) / np.log(k) if k > 1 else 0.0)
    return float(np.mean(out))


@meta_feature("mutual_information_mean", INFORMATION,
              "Mean mutual information between a feature and the target",
              "mean over features of I(X; y) = H(X) + H(y) - H(X, y), nats", "[0, inf)",
              basis="column_sample")
def mutual_information_mean(p: DatasetProfile) -> float:
    return reduce_or_nan(_mi(p), np.mean)


@meta_feature("mutual_information_max", INFORMATION,
              "Largest mutual information between one feature and the target",
              "max over features of I(X; y), nats", "[0, inf)", basis="column_sample")
def mutual_information_max(p: DatasetProfile) -> float:
    return reduce_or_nan(_mi(p), np.max)


@meta_feature("equivalent_feature_count", INFORMATION,
              "Features needed, at the mean information each, to determine the target",
              "H(y) / mean I(X; y) (Michie et al. 1994); NaN when no feature informs",
              "[0, inf)", basis="column_sample")
def equivalent_feature_count(p: DatasetProfile) -> float:
    _, y = _tables(p)
    mi = _mi(p)
    mean = mi.mean() if mi.size else 0.0
    return entropy_of(y) / mean if mean > 1e-12 else float("nan")


@meta_feature("noise_signal_ratio", INFORMATION,
              "Non-target information in the features relative to target information",
              "(mean H(X) - mean I(X; y)) / mean I(X; y) (Michie et al. 1994); NaN when no "
              "feature informs", "[0, inf)", basis="column_sample")
def noise_signal_ratio(p: DatasetProfile) -> float:
    mi = _mi(p)
    mean = mi.mean() if mi.size else 0.0
    return float((_entropies(p).mean() - mean) / mean) if mean > 1e-12 else float("nan")
