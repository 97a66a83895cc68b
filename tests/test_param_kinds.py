"""The per-kind parameter classes: sampling distributions, rounding and clipping, the
unit-cube encoding and its inverse, JSON round trips and user restrictions."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from sklearn.preprocessing import MinMaxScaler, OneHotEncoder

import warmstart.strategies
from warmstart.errors import BadInputError
from warmstart.families import FAMILIES, TASKS, get_family
from warmstart.spaces import (
    NONE_SHARE,
    UNUSABLE,
    BoolParam,
    CategoricalParam,
    Condition,
    FloatParam,
    IntParam,
    Param,
    SearchSpace,
    from_unit,
    user_space,
)

N = 20_000
SPACES = [(name, task) for name in sorted(FAMILIES) for task in TASKS]


def _draws(param: Param, n: int = N, seed: int = 0) -> list:
    rng = np.random.default_rng(seed)
    return [param.sample(rng) for _ in range(n)]


# -- sampling -----------------------------------------------------------------------------
def test_log_float_sampling_is_log_uniform():
    p = FloatParam("C", 1e-3, 1e2, log=True)
    x = np.array(_draws(p))
    ref = stats.loguniform(1e-3, 1e2)  # reference: scipy.stats.loguniform
    assert x.mean() == pytest.approx(ref.mean(), rel=0.05)
    assert np.median(x) == pytest.approx(ref.median(), rel=0.05)
    assert np.log(x).var() == pytest.approx(np.log(1e5) ** 2 / 12, rel=0.03)  # uniform var
    assert stats.kstest(x, ref.cdf).pvalue > 1e-3


def test_linear_float_sampling_is_uniform():
    p = FloatParam("max_features", 0.1, 1.0)
    x = np.array(_draws(p))
    ref = stats.uniform(0.1, 0.9)  # reference: scipy.stats.uniform
    assert x.mean() == pytest.approx(ref.mean(), rel=0.01)
    assert stats.kstest(x, ref.cdf).pvalue > 1e-3
    assert x.min() >= 0.1 and x.max() <= 1.0


def test_log_int_sampling_is_rounded_log_uniform():
    # reference: scipy.stats.loguniform cdf; rounding to the nearest integer and clipping
    # to the bounds is common practice for integer hyperparameters
    p = IntParam("n_neighbors", 1, 100, log=True)
    x = np.array(_draws(p))
    assert x.dtype.kind == "i" and x.min() >= 1 and x.max() <= 100
    ks = np.arange(1, 101)
    edges = np.clip(np.r_[ks - 0.5, 100.5], 1, 100)
    expected = np.diff(stats.loguniform(1, 100).cdf(edges)) * N
    observed = np.bincount(x, minlength=101)[1:]
    assert expected.min() > 20  # enough expected counts per cell for chi-square
    assert stats.chisquare(observed, expected).pvalue > 1e-3


def test_categorical_and_bool_draws_are_uniform():
    cat = CategoricalParam("criterion", ("gini", "entropy", "log_loss"))
    counts = [sum(v == c for v in _draws(cat)) for c in cat.choices]
    assert stats.chisquare(counts).pvalue > 1e-3  # reference: scipy.stats.chisquare
    flips = _draws(BoolParam("bootstrap"))
    assert all(isinstance(v, bool) for v in flips)
    assert stats.binomtest(sum(flips), N, 0.5).pvalue > 1e-3  # reference: binomial test


def test_none_share_of_numeric_parameters():
    draws = _draws(IntParam("max_depth", 2, 30, allow_none=True))
    nones = sum(v is None for v in draws)
    assert stats.binomtest(nones, N, NONE_SHARE).pvalue > 1e-3  # reference: binomial test
    assert all(2 <= v <= 30 for v in draws if v is not None)


# -- rounding and clipping ------------------------------------------------------------------
@given(x=st.floats(-1e4, 1e4, allow_nan=False))
@settings(max_examples=200, deadline=None)
def test_int_clip_is_round_half_even_then_clip(x):
    p = IntParam("n_estimators", 10, 1000)
    # reference: numpy.rint (round half to even, as Python's round) and numpy.clip
    want = int(np.clip(np.rint(x), 10, 1000))
    got = p.clip(x)
    assert got == want and type(got) is int
    assert p.problem(got) is None


@given(x=st.floats(-10, 10, allow_nan=False))
@settings(max_examples=100, deadline=None)
def test_float_clip_matches_numpy_clip(x):
    p = FloatParam("gamma", 1e-5, 10.0, log=True)
    assert p.clip(x) == float(np.clip(x, 1e-5, 10.0))  # reference: numpy.clip


def test_clip_refuses_what_cannot_be_mended():
    assert CategoricalParam("w", ("uniform", "distance")).clip("cosine") is UNUSABLE
    assert BoolParam("b").clip(None) is UNUSABLE
    assert IntParam("k", 1, 5).clip("three") is UNUSABLE
    assert IntParam("d", 1, 5, allow_none=True).clip(None) is None
    assert CategoricalParam("cw", (None, "balanced")).clip(None) is None


def test_validation_messages_per_kind():
    assert "integer" in IntParam("k", 1, 5).problem(2.5)
    assert "outside [1, 5]" in IntParam("k", 1, 5).problem(9)
    assert "finite" in FloatParam("a", 0.0, 1.0).problem(math.inf)
    assert "number" in FloatParam("a", 0.0, 1.0).problem(True)
    assert "true or false" in BoolParam("b").problem(1)
    assert CategoricalParam("p", (1, 2)).problem(np.int64(2)) is None
    assert CategoricalParam("p", (1, 2)).coerce(2.0) == 2
    assert type(CategoricalParam("p", (1, 2)).coerce(np.int64(2))) is int


# -- unit-cube encoding ----------------------------------------------------------------------
@given(v=st.floats(1e-3, 1e2))
@settings(max_examples=100, deadline=None)
def test_unit_position_matches_min_max_scaling(v):
    lin, log = FloatParam("a", 1e-3, 1e2), FloatParam("b", 1e-3, 1e2, log=True)
    # reference: sklearn.preprocessing.MinMaxScaler fitted on the bounds (of the logs)
    want_lin = MinMaxScaler().fit([[1e-3], [1e2]]).transform([[v]])[0, 0]
    want_log = MinMaxScaler().fit(np.log([[1e-3], [1e2]])).transform([[math.log(v)]])[0, 0]
    assert lin.to_unit(v) == [pytest.approx(want_lin, abs=1e-12)]
    assert log.to_unit(v) == [pytest.approx(want_log, abs=1e-12)]


@given(v=st.floats(1e-5, 1e4))
@settings(max_examples=100, deadline=None)
def test_float_unit_round_trip(v):
    for p in (FloatParam("a", 1e-5, 1e4), FloatParam("b", 1e-5, 1e4, log=True)):
        assert p.from_unit(p.to_unit(v)) == pytest.approx(v, rel=1e-9)
        assert from_unit(p, p.unit(v)) == pytest.approx(v, rel=1e-9)


@given(k=st.integers(1, 1000))
@settings(max_examples=100, deadline=None)
def test_int_unit_round_trip_is_exact(k):
    for p in (IntParam("n", 1, 1000), IntParam("m", 1, 1000, log=True, allow_none=True)):
        assert p.from_unit(p.to_unit(k)) == k
    assert IntParam("m", 1, 1000, allow_none=True).from_unit([1.0, 1.0]) is None


def test_one_hot_matches_scikit_learn():
    p = CategoricalParam("criterion", ("gini", "entropy", "log_loss"))
    values = ["entropy", "gini", "log_loss", "gini"]
    # reference: sklearn.preprocessing.OneHotEncoder with the declared categories
    want = OneHotEncoder(categories=[list(p.choices)]).fit_transform(
        np.array(values, dtype=object).reshape(-1, 1)).toarray()
    np.testing.assert_array_equal([p.to_unit(v) for v in values], want)
    assert [p.from_unit(row) for row in want] == values
    assert [BoolParam("b").from_unit(BoolParam("b").to_unit(v)) for v in (True, False)] \
        == [True, False]


@pytest.mark.parametrize("name,task", SPACES)
def test_decode_inverts_encode(name, task):
    space = get_family(name).space(task)
    rng = np.random.default_rng(1)
    configs = [space.sample(rng) for _ in range(50)]
    X = space.encode(configs)
    assert X.shape == (50, space.width)
    back = space.decode(X)
    for want, got in zip(configs, back):
        assert got.keys() == want.keys()
        for k, v in want.items():
            assert got[k] == (pytest.approx(v, rel=1e-9) if isinstance(v, float) else v)
            assert type(got[k]) is type(v)


# -- JSON -------------------------------------------------------------------------------------
@pytest.mark.parametrize("name,task", SPACES)
def test_json_round_trip(name, task):
    space = get_family(name).space(task)
    text = json.dumps(space.to_dict())
    again = SearchSpace.from_dict(json.loads(text))
    assert again == space and json.dumps(again.to_dict()) == text
    rng_a, rng_b = np.random.default_rng(4), np.random.default_rng(4)
    assert [space.sample(rng_a) for _ in range(20)] == [again.sample(rng_b) for _ in range(20)]


@pytest.mark.parametrize("bad", [
    [{"name": "x", "type": "complex"}],
    [{"name": "x", "type": "int", "low": 1}],
    [{"name": "x", "type": "float", "low": 2.0, "high": 1.0}],
    [{"name": "x", "type": "int", "low": 0.5, "high": 3}],
    [{"name": "x", "type": "categorical", "choices": []}],
    [{"name": "x", "type": "bool"}, {"name": "x", "type": "bool"}],
    [{"name": "x", "type": "bool", "condition": {"parent": "y", "in": [True]}}],
])
def test_json_description_errors_are_bad_input(bad):
    with pytest.raises(BadInputError):
        SearchSpace.from_dict(bad)


def test_describe_per_kind():
    assert IntParam("d", 2, 30, allow_none=True).describe() == "[2, 30] or None"
    assert FloatParam("lr", 0.005, 1.0, log=True).describe() == "[0.005, 1] log"
    assert CategoricalParam("cw", (None, "balanced")).describe() == "None | balanced"
    assert BoolParam("b").describe() == "true | false"


# -- user restrictions -----------------------------------------------------------------------
def test_restriction_per_kind():
    declared = get_family("random_forest").space("classification")
    narrow = SearchSpace.from_dict([{"name": "n_estimators", "high": 100},
                                    {"name": "criterion", "choices": ["gini"]},
                                    {"name": "max_features", "low": 0.5, "log": True}],
                                   declared)
    assert narrow["n_estimators"].high == 100 and narrow["n_estimators"].log
    assert narrow["criterion"].choices == ("gini",)
    assert narrow["max_features"].log and narrow["bootstrap"] == declared["bootstrap"]
    assert narrow["max_samples"].condition == Condition("bootstrap", (True,))
    for bad, why in [({"name": "n_estimators", "high": 50.5}, "integer"),
                     ({"name": "n_estimators", "low": "ten"}, "must lie inside"),
                     ({"name": "criterion", "choices": "gini"}, "non-empty subset"),
                     ({"name": "criterion", "choices": ["gini", "mse"]}, "non-empty subset"),
                     ({"name": ["n_estimators"]}, "unknown parameter")]:
        with pytest.raises(BadInputError, match=why):
            SearchSpace.from_dict([bad], declared)


def test_user_space_from_list_file_or_space(tmp_path):
    fam = get_family("knn")
    spec = [{"name": "n_neighbors", "low": 3, "high": 30}]
    path = tmp_path / "space.json"
    path.write_text(json.dumps(spec))
    from_list, from_file = user_space(spec, fam, "regression"), user_space(path, fam,
                                                                           "regression")
    assert from_list == from_file and from_list["n_neighbors"].low == 3
    assert user_space(from_list, fam, "regression") is from_list
    assert warmstart.strategies.user_space is user_space
    with pytest.raises(BadInputError, match="not found"):
        user_space(tmp_path / "absent.json", fam, "regression")
