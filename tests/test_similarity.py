"""Scaling, NaN-aware distances and explanations of the nearest-dataset search."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.preprocessing import RobustScaler

from warmstart.fingerprint import Fingerprint
from warmstart.similarity import distances, fit_scaler, nearest, scaled_differences


def fp(**values: float) -> Fingerprint:
    return Fingerprint({k: float(v) for k, v in values.items()}, 1, "classification", "y",
                       "0" * 64)


def test_scaling_is_median_and_iqr_after_log_for_counts():
    rng = np.random.default_rng(0)
    X = np.column_stack([rng.lognormal(5, 1, 40), rng.normal(0, 3, 40)])
    scaler = fit_scaler(X, ["rows", "numeric_skewness_mean"])  # rows is count-like
    expected = RobustScaler().fit_transform(np.column_stack([np.log1p(X[:, 0]), X[:, 1]]))
    # reference: sklearn.preprocessing.RobustScaler (median, 25-75 % inter-quartile range)
    np.testing.assert_allclose(scaler.transform(X), expected, rtol=1e-10, atol=1e-12)


def test_distance_is_rms_over_meta_features_both_sides_define():
    q = np.array([0.0, 1.0, np.nan])
    others = np.array([[3.0, 1.0, 2.0], [np.nan, np.nan, np.nan]])
    d = distances(scaled_differences(q, others))
    # reference: root-mean-square, worked by hand: sqrt((3^2 + 0^2) / 2)
    assert d[0] == pytest.approx(np.sqrt(4.5))
    assert d[1] == np.inf  # nothing shared: never the nearest


def test_undefined_meta_feature_neither_crashes_nor_dominates():
    history = {"a": fp(rows=100, skew=0.1, classes=2),
               "b": fp(rows=5000, skew=3.0, classes=2),
               "c": fp(rows=120, skew=0.2, classes=np.nan)}
    found = nearest(fp(rows=110, skew=0.15, classes=2), history, {}, k=3)
    assert [n.dataset_id for n in found][:2] in (["a", "c"], ["c", "a"])
    assert all(np.isfinite(n.distance) for n in found)
    assert found[-1].dataset_id == "b"


def test_identical_fingerprint_is_at_distance_zero_and_first():
    history = {"a": fp(rows=100, skew=0.1), "b": fp(rows=300, skew=1.0)}
    found = nearest(fp(rows=300, skew=1.0), history, {"b": "bee"}, k=2)
    assert found[0].name == "bee" and found[0].distance == 0 and found[0].similarity == 1


def test_agreement_on_a_value_the_whole_history_shares_is_listed_last():
    history = {f"d{i}": fp(dates=0.0, skew=float(i), kurt=float(i % 3)) for i in range(10)}
    found = nearest(fp(dates=0.0, skew=4.0, kurt=1.0), history, {}, k=1)
    assert found[0].dataset_id == "d4"
    # all three agree exactly; 'dates' is 0 everywhere, 'skew' = 4 is unique to d4
    assert [m for m, _, _ in found[0].agree] == ["skew", "kurt", "dates"]
