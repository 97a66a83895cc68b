"""Checking trials with the estimator's own parameter validation, and errors that teach.

The reference throughout is scikit-learn itself: a value is accepted exactly when the
estimator's ``_validate_params`` (what ``fit`` runs first) accepts it, and a refusal
carries scikit-learn's own message.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sklearn.ensemble import RandomForestClassifier
from sklearn.svm import SVC
from sklearn.utils._param_validation import InvalidParameterError

from warmstart.errors import BadInputError
from warmstart.families import FAMILIES, TASKS, get_family
from warmstart.metrics import resolve_metric
from warmstart.searches import parse_literal
from warmstart.trials import MAX_PROBLEM_LINES, check_trials, estimator_rules

ACC = resolve_metric("accuracy")
R2 = resolve_metric("r2")
RF, HGB, SVM = (get_family(n) for n in ("random_forest", "hist_gradient_boosting", "svm_rbf"))
EXAMPLE_TRIALS = Path(__file__).parent.parent / "examples/quillmarsh_loyalty_churn_trials.csv"


def configs(table, family=RF, task="classification", metric=ACC):
    return [t.config for t in check_trials(table, family, task, metric)]


def sklearn_accepts(family, task: str, name: str, value) -> bool:
    # reference: scikit-learn's BaseEstimator._validate_params on the family's estimator
    est = family.make_estimator(task, {})
    est.set_params(**{name: value})
    try:
        est._validate_params()
    except InvalidParameterError:
        return False
    return True


def test_scikit_learn_defaults_and_wider_ranges_are_stored_as_given():
    rows = [
        (HGB, "classification", {"l2_regularization": 0.0, "learning_rate": 3.0,
                                 "early_stopping": "auto", "loss": "log_loss"}),
        (SVM, "classification", {"gamma": "scale", "C": 1e6}),
        (SVM, "regression", {"gamma": "auto", "epsilon": 0.0}),
        (RF, "classification", {"max_features": "sqrt", "n_estimators": 5,
                                "criterion": "log_loss", "ccp_alpha": 0.01}),
        (get_family("knn"), "regression", {"n_neighbors": 500, "p": 3,
                                           "algorithm": "kd_tree"}),
    ]
    for family, task, config in rows:
        # the family's space refuses each (out of range, a string, or not searched) ...
        with pytest.raises(BadInputError):
            family.space(task).validate(config)
        # ... but the estimator accepts them, so they are recorded exactly
        assert all(sklearn_accepts(family, task, k, v) for k, v in config.items())
        metric = ACC if task == "classification" else R2
        assert configs([{**config, "score": 0.5}], family, task, metric) == [config]


PROBES = [-1, 2, 10**9, 0.5, 1.5, 1234567.25, -0.25, "sqrt", "scale", "auto", "balanced",
          "log_loss", "squared_error", "uniform", None, True, False]


@pytest.mark.parametrize("family", sorted(FAMILIES))
@pytest.mark.parametrize("task", TASKS)
def test_accepts_exactly_what_scikit_learn_accepts(family, task):
    fam = get_family(family)
    rules = estimator_rules(fam, task)
    # Probes leave out 0, 1 and whole floats: those are read as a CSV may have written
    # them (1.0 -> 1, 0 -> False) before scikit-learn decides.
    for name in fam.make_estimator(task, {}).get_params(deep=False):
        for value in PROBES:
            stored, why = rules.check(name, value)
            # a None the estimator refuses is read as "not set", not as an error
            kept = why is None and (value is not None or stored is None)
            assert kept == sklearn_accepts(fam, task, name, value), (name, value)
            assert value is not None or why is None


def test_refusal_carries_scikit_learns_message():
    X, y = load_breast_cancer(return_X_y=True)
    # reference: the message scikit-learn's own fit raises for the same value
    with pytest.raises(InvalidParameterError) as fit_error:
        RandomForestClassifier(max_features="cube", n_estimators=2).fit(X, y)
    with pytest.raises(BadInputError) as ours:
        check_trials([{"max_features": "cube", "score": 0.9}], RF, "classification", ACC)
    assert str(ours.value) == f"trial row 1: {fit_error.value}"


def test_numeric_column_checked_per_value_at_the_bounds():
    # learning_rate must be > 0 (reference: HistGradientBoostingClassifier's constraints)
    rates = [-1.0, 0.0, 1e-12, 0.1, 0.5, 3.0, 1e6]
    table = pd.DataFrame({"learning_rate": rates, "score": 0.8})
    with pytest.raises(BadInputError) as err:
        check_trials(table, HGB, "classification", ACC)
    bad = [i + 1 for i, r in enumerate(rates) if not sklearn_accepts(HGB, "classification",
                                                                      "learning_rate", r)]
    assert bad == [1, 2]
    lines = str(err.value).splitlines()[1:]
    assert [int(line.split(":")[0].split()[-1]) for line in lines] == bad
    good = table.iloc[2:]
    assert [c["learning_rate"] for c in configs(good, HGB)] == rates[2:]


def test_unknown_keyword_names_it_and_the_valid_ones():
    est = RandomForestClassifier()
    with pytest.raises(ValueError, match="Invalid parameter 'n_neighbors'"):
        est.set_params(n_neighbors=5)  # reference: scikit-learn refuses the same name
    with pytest.raises(BadInputError) as err:
        check_trials([{"n_neighbors": 5, "score": 0.9}], RF, "classification", ACC)
    message = str(err.value)
    assert "'n_neighbors'" in message and "does not declare" in message
    assert all(name in message for name in est.get_params())
    with pytest.raises(BadInputError, match="index=False"):
        check_trials(pd.DataFrame({"Unnamed: 0": [0], "score": [0.9]}), RF,
                     "classification", ACC)


def test_empty_cells_follow_the_estimators_default():
    table = pd.DataFrame({"max_depth": [np.nan, 4.0], "max_features": [np.nan, 0.5],
                          "n_estimators": [100.0, np.nan], "bootstrap": ["true", "False"],
                          "score": [0.9, 0.8]})
    # max_depth defaults to None (so an empty cell is None); max_features defaults to
    # 'sqrt' (reference: RandomForestClassifier signature), so an empty cell leaves it
    # out. Whole floats of an int column with holes are ints, text flags are booleans.
    assert configs(table) == [
        {"max_depth": None, "n_estimators": 100, "bootstrap": True},
        {"max_depth": 4, "max_features": 0.5, "bootstrap": False},
    ]
    # an explicit None is the value None where the estimator accepts it, default or not;
    # a missing key is not set, and so is a null where None is no value (a JSON blank)
    assert configs([{"max_features": None, "score": 0.9}, {"max_features": 0.5, "score": 0.8},
                    {"score": 0.7}]) == [{"max_features": None}, {"max_features": 0.5}, {}]
    assert not sklearn_accepts(HGB, "classification", "l2_regularization", None)
    assert configs([{"l2_regularization": None, "max_depth": None, "score": 0.9}], HGB) == [
        {"max_depth": None}]


def test_whole_numbers_become_floats_only_where_integers_are_not_allowed():
    got = configs([{"C": 1, "gamma": 2, "score": 0.9}], SVM)[0]
    assert got == {"C": 1.0, "gamma": 2.0} and type(got["C"]) is float
    # max_features=1 means one feature (reference: RandomForestClassifier docs): kept int
    got = configs([{"max_features": 1, "score": 0.9}])[0]
    assert type(got["max_features"]) is int


def test_values_json_cannot_hold_are_named():
    ok = configs([{"class_weight": {"0": 1.0, "1": 2.0}, "monotonic_cst": (1, 0),
                   "ccp_alpha": np.float64(0.5), "score": 0.9}])[0]
    assert ok == {"class_weight": {"0": 1.0, "1": 2.0}, "monotonic_cst": [1, 0],
                  "ccp_alpha": 0.5}
    assert type(ok["ccp_alpha"]) is float
    bad = [{"class_weight": {0: 1.0, 1: 2.0}, "score": 0.9},
           {"max_features": SVC(), "score": 0.9},
           {"ccp_alpha": math.inf, "score": 0.9}]
    with pytest.raises(BadInputError) as err:
        check_trials(bad, RF, "classification", ACC)
    message = str(err.value)
    assert "has 3 problems" in message
    assert "'class_weight' = {0: 1.0, 1: 2.0} cannot be stored as JSON (dictionary keys" \
        in message
    assert "'max_features' = SVC() cannot be stored as JSON (a SVC object" in message
    assert "'ccp_alpha' = inf cannot be stored as JSON (not a finite number)" in message


def test_in_space_tables_are_stored_cell_for_cell():
    # reference: the shipped example file's own cells; an empty cell is None where
    # HistGradientBoostingClassifier's default is None (max_depth) and unset otherwise
    fam, metric = HGB, resolve_metric("balanced_accuracy")
    trials = check_trials(EXAMPLE_TRIALS, fam, "classification", metric)
    base = {"max_depth": None}
    assert [t.config for t in trials] == [
        {"learning_rate": 0.1, "max_iter": 100, "max_leaf_nodes": 31, "min_samples_leaf": 20,
         **base},
        {"learning_rate": 0.05, "max_iter": 200, "max_leaf_nodes": 15, "min_samples_leaf": 40,
         "l2_regularization": 1.0, **base},
        {"learning_rate": 0.2, "max_iter": 60, "max_leaf_nodes": 63, "max_depth": 8},
        {"learning_rate": 0.03, "max_iter": 300, "max_leaf_nodes": 8, "max_features": 0.5,
         **base},
        {"learning_rate": 0.005, "max_iter": 1000, "max_leaf_nodes": 256,
         "min_samples_leaf": 1, **base}]
    # integer columns read back as integers (the CSV wrote 20.0 beside empty cells)
    assert all(type(t.config["max_iter"]) is int for t in trials)
    assert type(trials[2].config["max_depth"]) is int
    # every value lies in the family's space, so the space keeps it as it is
    space = fam.space("classification")
    assert all(space.validate(t.config) == t.config for t in trials)
    assert [t.status for t in trials] == ["ok"] * 4 + ["failed"]
    assert trials[0].score == 0.7313292723631509 and trials[4].score is None
    assert trials[4].error == "stopped by the analyst: over the 10-minute budget"
    assert [t.fit_seconds for t in trials] == [1.024, 1.123, 0.846, 0.953, None]


@pytest.mark.parametrize("text, value", [
    ("np.float64(0.1)", 0.1), ("None", None), ("sqrt", "sqrt"), ("True", True),
    ("-1e-3", -0.001), ("(1, 2)", (1, 2)), ("{'a': np.True_, 'b': [None]}",
                                            {"a": True, "b": [None]}),
    ("np.int64(-3)", -3), ("'scale'", "scale"), ("SVC(C=1)", "SVC(C=1)"),
    ("__import__('os').getcwd()", "__import__('os').getcwd()"), ("1 + 1", "1 + 1"),
])
def test_parse_literal_reads_python_text_without_evaluating(text, value):
    # reference: ast.literal_eval semantics, extended with numpy's scalar reprs
    got = parse_literal(text)
    assert got == value and type(got) is type(value)


def test_parse_literal_empty_and_nan_are_not_set():
    assert math.isnan(parse_literal("")) and math.isnan(parse_literal("nan"))


# -- errors that teach -------------------------------------------------------------------

def test_missing_score_lists_columns_and_likely_mapping():
    table = pd.DataFrame({"n_estimators": [100, 200], "val_accuracy": [0.8, 0.9],
                          "train_secs": [1.0, 2.0]})
    with pytest.raises(BadInputError) as err:
        check_trials(table, RF, "classification", ACC)
    message = str(err.value)
    assert "no 'score' column" in message
    assert "columns found: n_estimators, val_accuracy, train_secs" in message
    assert "'val_accuracy' -> 'score'" in message
    assert "'train_secs' -> 'fit_seconds'" in message
    assert "\n" not in message  # the columns it names are not also unknown parameters


def test_percentage_scores_suggest_dividing_by_100():
    table = pd.DataFrame({"n_estimators": [100, 200, 300], "score": [85.0, 91.5, 78.25]})
    with pytest.raises(BadInputError) as err:
        check_trials(table, RF, "classification", ACC)
    # one line, not one per row (accuracy lies in [0, 1], reference: sklearn.metrics)
    assert str(err.value) == ("the scores are outside the range [0, 1] of accuracy and look "
                              "like percentages (all 3 lie between 1 and 100): divide them "
                              "by 100")
    assert [t.score for t in check_trials(table.assign(score=table.score / 100), RF,
                                          "classification", ACC)] == [0.85, 0.915, 0.7825]


def test_every_problem_is_reported_in_one_run():
    table = pd.DataFrame({
        "n_estimators": [100, 0, 100, 100, 100],
        "colour": [1, 1, 1, 1, 1],
        "score": ["0.9", "0.8", "high", "1.5", "0.7"],
        "fit_seconds": [1.0, 1.0, 1.0, 1.0, -2.0],
        "status": ["ok", "ok", "ok", "ok", "done"],
    })
    with pytest.raises(BadInputError) as err:
        check_trials(table, RF, "classification", ACC)
    lines = str(err.value).splitlines()
    assert lines[0] == "the trials table has 6 problems:"
    body = "\n".join(lines[1:])
    for part in ("parameter 'colour', which RandomForestClassifier does not declare",
                 "trial row 2: The 'n_estimators' parameter of RandomForestClassifier must "
                 "be an int in the range [1, inf). Got 0 instead.",
                 "trial row 3: score must be a number, not 'high'",
                 "trial row 4: score 1.5 is outside the range [0.0, 1.0] of accuracy",
                 "trial row 5: fit_seconds must not be negative (-2.0)",
                 "trial row 5: status must be 'ok' or 'failed', not 'done'"):
        assert part in body


def test_problems_are_grouped_by_rows_and_capped():
    same = pd.DataFrame({"n_estimators": [0] * 12, "score": 0.9})
    with pytest.raises(BadInputError) as err:
        check_trials(same, RF, "classification", ACC)
    assert str(err.value).startswith("trial rows 1, 2, 3, 4, 5 and 7 more: The "
                                     "'n_estimators' parameter")
    many = pd.DataFrame({"n_estimators": -np.arange(1, 31), "score": 0.9})
    with pytest.raises(BadInputError) as err:
        check_trials(many, RF, "classification", ACC)
    lines = str(err.value).splitlines()
    assert lines[0] == "the trials table has 30 problems:"
    assert len(lines) == 1 + MAX_PROBLEM_LINES + 1
    assert lines[-1].strip() == f"... and {30 - MAX_PROBLEM_LINES} more"
