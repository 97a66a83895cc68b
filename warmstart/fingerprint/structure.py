"""Linear structure among numeric columns: correlation and principal components.

On the sample's numeric and boolean columns (a seeded sample of ``COLUMN_CAP`` of them
in a wider table, see :func:`catalogue.column_sample`), median-imputed and standardised
(columns constant in the sample left out); principal components are the eigenvalues of the
resulting correlation matrix, i.e. PCA of the standardised columns (Jolliffe 2002).
"""

from __future__ import annotations

import numpy as np

from warmstart.fingerprint.catalogue import column_sample, group, meta_feature, reduce_or_nan
from warmstart.fingerprint.design_matrix import standardised
from warmstart.fingerprint.profile import DatasetProfile

STRUCTURE = group("structure", "Correlation and principal components of numeric columns")


def correlation_matrix(z: np.ndarray) -> np.ndarray:
    """Pearson correlation of standardised columns, shape (d, d)."""
    return (z.T @ z) / z.shape[0]


def _z(p: DatasetProfile) -> np.ndarray:
    if "structure_z" not in p.cache:
        cols = column_sample(p.numeric_names)
        p.cache["structure_z"] = standardised(p.numeric[:, cols])
    return p.cache["structure_z"]


def _upper(p: DatasetProfile) -> np.ndarray:
    z = _z(p)
    if z.shape[1] < 2:
        return np.array([])
    c = correlation_matrix(z)
    return np.abs(c[np.triu_indices_from(c, k=1)])


def _eigenvalues(p: DatasetProfile) -> np.ndarray:
    z = _z(p)
    if z.shape[1] == 0:
        return np.array([])
    ev = np.linalg.eigvalsh(correlation_matrix(z))[::-1]
    return np.clip(ev, 0.0, None)


@meta_feature("correlation_abs_mean", STRUCTURE,
              "Mean absolute Pearson correlation between pairs of numeric columns",
              "mean over column pairs of |r| (Pearson 1895)", "[0, 1]", basis="column_sample")
def correlation_abs_mean(p: DatasetProfile) -> float:
    return reduce_or_nan(_upper(p), np.mean)


@meta_feature("correlation_abs_max", STRUCTURE,
              "Largest absolute Pearson correlation between two numeric columns",
              "max over column pairs of |r|", "[0, 1]", basis="column_sample")
def correlation_abs_max(p: DatasetProfile) -> float:
    return reduce_or_nan(_upper(p), np.max)


@meta_feature("pca_components_95_fraction", STRUCTURE,
              "Share of principal components needed for 95% of the variance",
              "smallest k with sum of the k largest eigenvalues >= 0.95 x total, over the "
              "number of columns (PCA of standardised columns)", "(0, 1]", basis="column_sample")
def pca_components_95_fraction(p: DatasetProfile) -> float:
    ev = _eigenvalues(p)
    if ev.size == 0 or ev.sum() <= 0:
        return float("nan")
    share = np.cumsum(ev) / ev.sum()
    k = int(np.searchsorted(share, 0.95 - 1e-12) + 1)
    return min(k, ev.size) / ev.size


@meta_feature("pca_first_component_share", STRUCTURE,
              "Share of variance on the first principal component",
              "largest eigenvalue / sum of eigenvalues of the correlation matrix", "(0, 1]",
              basis="column_sample")
def pca_first_component_share(p: DatasetProfile) -> float:
    ev = _eigenvalues(p)
    return float(ev[0] / ev.sum()) if ev.size and ev.sum() > 0 else float("nan")
