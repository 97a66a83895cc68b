"""Landmarks: how well cheap models do, cross-validated on the sample.

Each model sees :func:`design_matrix.design` (median imputation, standardisation, one-hot) on
the labelled sample rows, with ``FOLDS`` seeded folds (stratified for classification);
the score is computed once on the pooled out-of-fold predictions -- balanced accuracy for
classification, R^2 for regression (Pfahringer, Bensusan & Giraud-Carrier, ICML 2000).
"""

from __future__ import annotations

import functools
import warnings

import numpy as np

from warmstart.fingerprint.catalogue import BOTH, CLASSIFICATION, group, meta_feature
from warmstart.fingerprint.design_matrix import design
from warmstart.fingerprint.profile import DatasetProfile

LANDMARKS = group("landmarks", "Cross-validated scores of cheap models (on the sample)")
FOLDS = 3
SEED = 0
_SCORE = "balanced accuracy (classification) or R^2 (regression), 3 seeded folds"


def out_of_fold_score(p: DatasetProfile, make_model) -> float:
    """Score of ``make_model(task, classes)`` from pooled out-of-fold predictions."""
    from sklearn.metrics import balanced_accuracy_score, r2_score
    from sklearn.model_selection import KFold, StratifiedKFold

    X, y = design(p)
    classification = p.task == CLASSIFICATION
    if X.shape[1] == 0 or y.size < 2 * FOLDS:
        return float("nan")
    if classification:
        y = np.unique(y, return_inverse=True)[1]
        if np.bincount(y).max() == y.size:
            return float("nan")
        splitter = StratifiedKFold(FOLDS, shuffle=True, random_state=SEED)
    else:
        splitter = KFold(FOLDS, shuffle=True, random_state=SEED)
    pred = np.empty(y.size, dtype=y.dtype if classification else float)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for train, test in splitter.split(X, y):
            if classification and np.unique(y[train]).size < 2:
                pred[test] = y[train][0]
                continue
            model = make_model(p.task, int(y.max()) + 1).fit(X[train], y[train])
            pred[test] = model.predict(X[test])
        if classification:
            return float(balanced_accuracy_score(y, pred))
        return float(r2_score(y, pred))


def _stump(task, classes):
    from sklearn.tree import DecisionTreeClassifier, DecisionTreeRegressor

    cls = DecisionTreeClassifier if task == CLASSIFICATION else DecisionTreeRegressor
    return cls(max_depth=1, random_state=SEED)


class OneNearestNeighbour:
    """1-nearest-neighbour prediction by squared Euclidean distance (ties: first row).

    A plain numpy version (one BLAS product per block of test rows); it predicts what
    scikit-learn's ``KNeighborsClassifier(n_neighbors=1)`` does, faster on small data.
    """

    def fit(self, X: np.ndarray, y: np.ndarray) -> OneNearestNeighbour:
        self.X_, self.y_ = np.asarray(X, dtype=float), np.asarray(y)
        self.sq_ = np.einsum("ij,ij->i", self.X_, self.X_)
        return self

    def predict(self, X: np.ndarray, block: int = 2048) -> np.ndarray:
        X = np.asarray(X, dtype=float)
        out = np.empty(X.shape[0], dtype=self.y_.dtype)
        for start in range(0, X.shape[0], block):
            part = X[start: start + block]
            d = self.sq_[None, :] - 2.0 * part @ self.X_.T  # + |x|^2, constant per row
            out[start: start + block] = self.y_[np.argmin(d, axis=1)]
        return out


def _nearest(task, classes):
    return OneNearestNeighbour()


def _naive_bayes(task, classes):
    from sklearn.naive_bayes import GaussianNB

    return GaussianNB()


def _linear(task, classes):
    from sklearn.linear_model import LogisticRegression, Ridge

    if task != CLASSIFICATION:
        return Ridge(alpha=1.0)
    # liblinear is many times faster for two classes but has no multinomial model.
    solver = "liblinear" if classes == 2 else "lbfgs"
    return LogisticRegression(C=1.0, solver=solver, max_iter=200)


_RANGE = "[0, 1] or (-inf, 1]"
# (name, description, method, range, tasks, model factory), in catalogue order.
_LANDMARKS = (
    ("landmark_stump", "Score of a one-split decision tree", "decision tree of depth 1",
     _RANGE, BOTH, _stump),
    ("landmark_nearest_neighbour", "Score of 1-nearest-neighbour",
     "1-NN (Cover & Hart 1967), Euclidean on the standardised design", _RANGE, BOTH,
     _nearest),
    ("landmark_gaussian_bayes", "Score of Gaussian naive Bayes", "Gaussian naive Bayes",
     "[0, 1]", CLASSIFICATION, _naive_bayes),
    ("landmark_linear", "Score of a regularised linear model",
     "logistic regression (C=1; liblinear for two classes, multinomial L-BFGS for more) "
     "or ridge regression (alpha=1)", _RANGE, BOTH,
     _linear),
)
for _name, _description, _method, _range, _tasks, _factory in _LANDMARKS:
    meta_feature(_name, LANDMARKS, _description, f"{_method}; {_SCORE}", _range, _tasks,
                 basis="column_sample")(functools.partial(out_of_fold_score, make_model=_factory))
