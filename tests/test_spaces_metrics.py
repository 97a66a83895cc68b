"""Search spaces, which way metrics are better, and the trials validator."""

from __future__ import annotations

import inspect
import json

import numpy as np
import pytest
from sklearn.metrics import get_scorer, get_scorer_names

from warmstart.errors import BadInputError
from warmstart.families import FAMILIES, get_family
from warmstart.metrics import HIGHER, LOWER, resolve_metric
from warmstart.spaces import SearchSpace, config_key


@pytest.mark.parametrize("family", sorted(FAMILIES))
@pytest.mark.parametrize("task", ["classification", "regression"])
def test_declared_names_are_estimator_keywords(family, task):
    fam = get_family(family)
    # reference: scikit-learn estimator signatures (inspect.signature of __init__)
    keywords = set(inspect.signature(fam.estimator_class(task).__init__).parameters)
    assert set(fam.space(task).names) <= keywords


@pytest.mark.parametrize("family", sorted(FAMILIES))
@pytest.mark.parametrize("task", ["classification", "regression"])
def test_samples_validate_and_round_trip_json(family, task):
    space = get_family(family).space(task)
    rng = np.random.default_rng(3)
    for _ in range(25):
        config = space.sample(rng)
        assert space.validate(json.loads(config_key(config))) == config
        assert space.clip(config) == config
    X = space.encode([space.sample(rng) for _ in range(10)])
    assert X.shape[0] == 10 and np.all((X >= 0) & (X <= 1))


def test_validate_refuses_unknown_and_ill_typed():
    space = get_family("knn").space("classification")
    with pytest.raises(BadInputError, match="unknown parameter 'leaf'"):
        space.validate({"leaf": 3})
    with pytest.raises(BadInputError, match="must be an integer"):
        space.validate({"n_neighbors": 2.5})
    with pytest.raises(BadInputError, match="must be one of"):
        space.validate({"weights": "cosine"})
    with pytest.raises(BadInputError, match="outside"):
        space.validate({"n_neighbors": 0})


def test_conditional_parameter_dropped_when_inactive():
    space = get_family("random_forest").space("classification")
    assert "max_samples" not in space.validate({"bootstrap": False, "max_samples": 0.5})
    assert space.validate({"bootstrap": True, "max_samples": 0.5})["max_samples"] == 0.5


def test_clip_brings_values_inside_and_drops_bad_categoricals():
    space = get_family("svm_rbf").space("classification")
    clipped = space.clip({"C": 1e9, "gamma": 1e-9})
    assert clipped["C"] == space["C"].high and clipped["gamma"] == space["gamma"].low
    assert space.clip({"class_weight": "heavy"}) is None


def test_user_space_must_narrow_the_declared_one():
    declared = get_family("svm_rbf").space("regression")
    narrow = SearchSpace.from_dict([{"name": "C", "low": 0.1, "high": 10}], declared)
    assert narrow["C"].low == 0.1 and narrow["gamma"] == declared["gamma"]
    with pytest.raises(BadInputError, match="must lie inside"):
        SearchSpace.from_dict([{"name": "C", "low": 1e-9, "high": 10}], declared)


@pytest.mark.parametrize("name", get_scorer_names())
def test_every_scorer_is_higher_is_better(name):
    # reference: scikit-learn user guide, "The scoring parameter": scorer objects follow
    # the convention that higher return values are better; a loss is negated (sign -1),
    # and its name then starts with neg_.
    scorer = get_scorer(name)
    if scorer._sign == -1:
        assert name.startswith("neg_")
    assert resolve_metric(name).better == HIGHER


def test_metric_ranges_and_custom_metrics():
    # reference: scikit-learn docs — balanced accuracy in [0, 1]; R^2 at most 1; neg_* <= 0
    assert resolve_metric("balanced_accuracy").check(1.2)
    assert resolve_metric("r2").check(-3.0) is None and resolve_metric("r2").check(1.5)
    assert resolve_metric("neg_log_loss").check(0.3)
    assert resolve_metric("weighted_cost", LOWER).better == LOWER
    with pytest.raises(BadInputError, match="not a scikit-learn scorer"):
        resolve_metric("weighted_cost")
    with pytest.raises(BadInputError, match="higher-is-better"):
        resolve_metric("r2", LOWER)
