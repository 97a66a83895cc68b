"""Classification complexity: class overlap and boundary measures.

Ho & Basu, IEEE TPAMI 24(3), 2002; the multiclass forms of Lorena, Garcia, Lehmann,
Souto & Ho, ACM Computing Surveys 52(5), 2019. Computed on the ``COMPLEXITY_ROWS``
labelled sample rows of smallest sampling priority (a seeded sub-sample; all labelled
rows when fewer), in :func:`design_matrix.design`'s space (numeric columns standardised,
categorical ones one-hot; of a table of more than ``COLUMN_CAP`` feature columns, a
seeded sample of ``COLUMN_CAP`` of them). Distances are Euclidean.
"""

from __future__ import annotations

import numpy as np

from warmstart.fingerprint.catalogue import CLASSIFICATION, group, meta_feature
from warmstart.fingerprint.design_matrix import design, labelled_rows
from warmstart.fingerprint.profile import DatasetProfile

COMPLEXITY = group("complexity", "Class overlap and boundary complexity (classification)")
COMPLEXITY_ROWS = 1000


def fisher_ratios(X: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Fisher's discriminant ratio per feature, shape (d,).

    ``r_f = sum_c n_c (mean_cf - mean_f)^2 / sum_c sum_{i in c} (x_if - mean_cf)^2``
    (Lorena et al. 2019, eq. 2; for two classes of equal size it is half of Ho & Basu's
    ``(mu_1 - mu_2)^2 / (s_1^2 + s_2^2)``). Infinite when a feature separates the classes
    with no spread inside them, 0 when it carries no class difference at all.
    """
    classes = np.unique(y)
    mean = X.mean(axis=0)
    between = np.zeros(X.shape[1])
    within = np.zeros(X.shape[1])
    for c in classes:
        xc = X[y == c]
        mc = xc.mean(axis=0)
        between += xc.shape[0] * (mc - mean) ** 2
        within += ((xc - mc) ** 2).sum(axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(between > 0, between / within, 0.0)


def boundary_fraction(D: np.ndarray, y: np.ndarray) -> float:
    """N1: share of points joined to another class by an edge of the minimum spanning tree.

    ``D`` is the (n, n) distance matrix; zero distances (duplicate points) are replaced by
    a tiny positive value, since a zero entry is "no edge" to scipy's spanning tree.
    """
    from scipy.sparse.csgraph import minimum_spanning_tree  # only when computed

    W = np.where(D > 0, D, 1e-12 * (D.max() or 1.0))
    np.fill_diagonal(W, 0.0)
    tree = minimum_spanning_tree(W).tocoo()
    cross = y[tree.row] != y[tree.col]
    on_boundary = np.unique(np.concatenate([tree.row[cross], tree.col[cross]]))
    return on_boundary.size / y.size


def _subset(p: DatasetProfile) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(X, y, distance matrix) of the complexity sub-sample, cached."""
    from scipy.spatial.distance import pdist, squareform  # only when computed

    if "complexity" not in p.cache:
        X, y = design(p)
        pri = p.sample_priority[labelled_rows(p)]
        if y.size > COMPLEXITY_ROWS:
            keep = np.sort(np.argsort(pri, kind="stable")[:COMPLEXITY_ROWS])
            X, y = X[keep], y[keep]
        D = squareform(pdist(X)) if X.shape[1] and y.size > 1 else np.zeros((y.size,) * 2)
        p.cache["complexity"] = (X, y, D)
    return p.cache["complexity"]


def _usable(p: DatasetProfile) -> bool:
    X, y, _ = _subset(p)
    return X.shape[1] > 0 and y.size >= 3 and np.unique(y).size >= 2


@meta_feature("fisher_overlap", COMPLEXITY,
              "Feature overlap by the maximum Fisher's discriminant ratio (F1)",
              "1 / (1 + max_f r_f), r_f Fisher's discriminant ratio of feature f (Ho & "
              "Basu 2002, F1; multiclass form of Lorena et al. 2019); low = a feature "
              "separates the classes", "(0, 1]", CLASSIFICATION, basis="column_sample")
def fisher_overlap(p: DatasetProfile) -> float:
    if not _usable(p):
        return float("nan")
    X, y, _ = _subset(p)
    return float(1.0 / (1.0 + fisher_ratios(X, y).max()))


@meta_feature("boundary_fraction", COMPLEXITY,
              "Share of points on the class boundary of a minimum spanning tree (N1)",
              "points with an MST edge to another class / points (Ho & Basu 2002, N1)",
              "[0, 1]", CLASSIFICATION, basis="column_sample")
def boundary_fraction_mf(p: DatasetProfile) -> float:
    if not _usable(p):
        return float("nan")
    _, y, D = _subset(p)
    return boundary_fraction(D, y)


def _nearest_distances(D: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per point: distance to its nearest same-class and other-class neighbour."""
    E = D.copy()
    np.fill_diagonal(E, np.inf)
    same = y[:, None] == y[None, :]
    intra = np.where(same, E, np.inf).min(axis=1)
    extra = np.where(same, np.inf, E).min(axis=1)
    return intra, extra


@meta_feature("intra_extra_ratio", COMPLEXITY,
              "Nearest same-class over nearest other-class distances (N2)",
              "r / (1 + r), r = sum_i d(i, nearest same class) / sum_i d(i, nearest other "
              "class) (Ho & Basu 2002, N2; bounded form of Lorena et al. 2019)", "[0, 1)",
              CLASSIFICATION, basis="column_sample")
def intra_extra_ratio(p: DatasetProfile) -> float:
    if not _usable(p):
        return float("nan")
    _, y, D = _subset(p)
    intra, extra = _nearest_distances(D, y)
    ok = np.isfinite(intra) & np.isfinite(extra)
    if not ok.any() or extra[ok].sum() == 0:
        return float("nan")
    r = intra[ok].sum() / extra[ok].sum()
    return float(r / (1.0 + r))


@meta_feature("nearest_neighbour_error", COMPLEXITY,
              "Leave-one-out error rate of a 1-nearest-neighbour classifier (N3)",
              "share of points whose nearest other point has another class (Ho & Basu "
              "2002, N3); ties go to the earlier row", "[0, 1]", CLASSIFICATION,
              basis="column_sample")
def nearest_neighbour_error(p: DatasetProfile) -> float:
    if not _usable(p):
        return float("nan")
    _, y, D = _subset(p)
    E = D.copy()
    np.fill_diagonal(E, np.inf)
    return float(np.mean(y[np.argmin(E, axis=1)] != y))
