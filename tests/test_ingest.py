"""Logging scikit-learn searches: fitted search objects and their saved ``cv_results_``.

Real searches (RandomizedSearchCV and HalvingRandomSearchCV, over a bare estimator and
over a Pipeline) on datasets shipped with scikit-learn, using scikit-learn's defaults
and ranges wider than the families' spaces. The reference for every trial is the
search's own record: ``cv_results_['params']``, ``mean_test_*`` and ``mean_fit_time``.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from scipy.stats import loguniform
from sklearn.base import clone
from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine
from sklearn.ensemble import (
    ExtraTreesRegressor,
    HistGradientBoostingRegressor,
    RandomForestClassifier,
)
from sklearn.experimental import enable_halving_search_cv  # noqa: F401
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, make_scorer
from sklearn.model_selection import (
    GridSearchCV,
    HalvingRandomSearchCV,
    RandomizedSearchCV,
    cross_val_score,
)
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC
from sklearn.tree import DecisionTreeClassifier
from threadpoolctl import threadpool_limits

from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.metrics import resolve_metric
from warmstart.searches import model_keywords, trials_from_search
from warmstart.trials import check_trials

pytestmark = pytest.mark.filterwarnings("ignore::UserWarning",
                                        "ignore::sklearn.exceptions.FitFailedWarning",
                                        "ignore::sklearn.exceptions.ConvergenceWarning")


@pytest.fixture(scope="module", autouse=True)
def one_thread():
    with threadpool_limits(1):  # OpenMP threads only contend on a busy machine
        yield


def scaled(model):
    return Pipeline([("scale", StandardScaler()), ("model", model)])


def _forest():  # bare estimator; sqrt, log_loss and n_estimators=8 are outside the space
    X, y = load_breast_cancer(return_X_y=True)
    grid = {"max_features": ["sqrt", "log2", None, 0.5, 3], "max_depth": [None, 2, 80],
            "min_samples_leaf": [1, 2, 60], "criterion": ["gini", "log_loss"],
            "bootstrap": [True, False]}
    return RandomizedSearchCV(RandomForestClassifier(n_estimators=8, random_state=0), grid,
                              n_iter=8, cv=3, random_state=0).fit(X, y)


def _svm():  # pipeline; gamma strings and C, gamma far outside the space
    X, y = load_wine(return_X_y=True)
    grid = {"model__C": loguniform(1e-5, 1e6), "model__gamma": ["scale", "auto", 1e-7, 50.0],
            "model__class_weight": [None, "balanced"]}
    return RandomizedSearchCV(scaled(SVC()), grid, n_iter=8, cv=3, random_state=0,
                              scoring="balanced_accuracy").fit(X, y)


def _boosting():  # pipeline, halving on samples; l2_regularization=0.0 is the default
    X, y = load_diabetes(return_X_y=True)
    grid = {"model__l2_regularization": [0.0, 0.5, 500.0],
            "model__learning_rate": loguniform(1e-3, 2.0),
            "model__max_depth": [None, 3], "model__early_stopping": ["auto", False]}
    model = HistGradientBoostingRegressor(max_iter=30, random_state=0)
    return HalvingRandomSearchCV(scaled(model), grid, n_candidates=8, cv=3, factor=2,
                                 min_resources=80, random_state=0).fit(X, y)


def _trees():  # bare estimator, halving on n_estimators (a parameter, so every row stays)
    X, y = load_diabetes(return_X_y=True)
    grid = {"max_features": [1.0, "sqrt", 0.3], "min_samples_split": [2, 80]}
    return HalvingRandomSearchCV(ExtraTreesRegressor(random_state=0), grid, n_candidates=4,
                                 resource="n_estimators", min_resources=4, max_resources=16,
                                 factor=2, cv=3, random_state=0).fit(X, y)


# name -> (build, family, task, metric, the base estimator's settings every trial used)
SEARCHES = {
    "forest": (_forest, "random_forest", "classification", "accuracy", {"n_estimators": 8}),
    "svm": (_svm, "svm_rbf", "classification", "balanced_accuracy", {}),
    "boosting": (_boosting, "hist_gradient_boosting", "regression", "r2", {"max_iter": 30}),
    "trees": (_trees, "extra_trees", "regression", "r2", {}),
}


@pytest.fixture(scope="module")
def searches():
    return {name: spec[0]() for name, spec in SEARCHES.items()}


def save(df: pd.DataFrame, path: Path) -> Path:
    """Save a cv_results_ frame as a user would."""
    if path.suffix == ".csv":
        df.to_csv(path, index=False)
    elif path.suffix == ".jsonl":  # 15 decimals: pandas' default of 10 drops digits
        df.to_json(path, orient="records", lines=True, double_precision=15)
    else:  # pyarrow refuses columns mixing types ('sqrt' and 0.5): those go as text
        mixed = {}
        for c in df.columns:
            try:
                pa.array(df[c].tolist())
            except (pa.ArrowInvalid, pa.ArrowTypeError):
                mixed[c] = str
        df.astype(mixed).to_parquet(path)
    return path


def expected_rows(search) -> list[int]:
    """The cv_results_ rows each candidate ends with: successive halving on samples
    re-scores survivors on more samples, and the last (largest) evaluation is kept."""
    res = search.cv_results_
    if getattr(search, "resource", "n_samples") != "n_samples" or "iter" not in res:
        return list(range(len(res["params"])))
    last: dict[str, int] = {}
    for i, params in enumerate(res["params"]):
        key = repr(sorted(params.items()))
        if key not in last or res["iter"][i] >= res["iter"][last[key]]:
            last[key] = i
    return sorted(last.values())


def stripped(params: dict) -> dict:
    return {k.rpartition("__")[2]: (v.item() if isinstance(v, np.generic) else v)
            for k, v in params.items()}


def same_value(a, b) -> bool:
    if isinstance(a, (int, float)) and isinstance(b, (int, float)) \
            and not isinstance(a, bool) and not isinstance(b, bool):
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-15)
    return type(a) is type(b) and a == b


def assert_trials_match(trials, search, settings=None):
    res = search.cv_results_
    rows = expected_rows(search)
    assert len(trials) == len(rows)
    for trial, i in zip(trials, rows):
        want = {**(settings or {}), **stripped(res["params"][i])}
        assert trial.config.keys() == want.keys(), (trial.config, want)
        assert all(same_value(trial.config[k], want[k]) for k in want), (trial.config, want)
        score = res["mean_test_score"][i]
        if np.isnan(score):
            assert trial.status == "failed" and trial.score is None
        else:
            assert trial.status == "ok" and math.isclose(trial.score, score, rel_tol=1e-12)
        assert math.isclose(trial.fit_seconds, res["mean_fit_time"][i], rel_tol=1e-9)


@pytest.mark.parametrize("name", sorted(SEARCHES))
@pytest.mark.parametrize("suffix", [".csv", ".parquet", ".jsonl"])
def test_saved_results_round_trip(searches, tmp_path, name, suffix):
    _, family, task, metric, _ = SEARCHES[name]
    search = searches[name]
    path = save(pd.DataFrame(search.cv_results_), tmp_path / f"results{suffix}")
    trials = check_trials(path, get_family(family), task, resolve_metric(metric))
    assert_trials_match(trials, search)


@pytest.mark.parametrize("name", sorted(SEARCHES))
def test_fitted_search_gives_family_metric_and_every_trial(searches, name):
    _, family, task, metric, settings = SEARCHES[name]
    search = searches[name]
    got = trials_from_search(search)
    assert (got.family, got.task, got.metric) == (family, task, metric)
    trials = check_trials(got.trials, get_family(family), task, resolve_metric(metric))
    assert_trials_match(trials, search, settings)


def test_halving_keeps_every_candidate_once(searches):
    search = searches["boosting"]
    # reference: HalvingRandomSearchCV's n_candidates_ (candidates in the first round)
    assert len(trials_from_search(search).trials) == search.n_candidates_[0]
    assert len(search.cv_results_["params"]) > search.n_candidates_[0]


def test_default_scoring_is_the_estimators_accuracy(searches):
    search = searches["forest"]
    assert trials_from_search(search).metric == "accuracy"
    # reference: the same candidate cross-validated with the scorer named "accuracy"
    X, y = load_breast_cancer(return_X_y=True)
    est = clone(search.estimator).set_params(**search.cv_results_["params"][0])
    again = cross_val_score(est, X, y, cv=3, scoring="accuracy").mean()
    assert math.isclose(again, search.cv_results_["mean_test_score"][0], rel_tol=1e-12)


def test_failed_fits_become_failed_trials(tmp_path):
    X, y = load_breast_cancer(return_X_y=True)
    # max_samples needs bootstrap=True (reference: RandomForestClassifier.fit raises)
    search = RandomizedSearchCV(RandomForestClassifier(n_estimators=4, random_state=0),
                                {"bootstrap": [True, False], "max_samples": [0.5]},
                                n_iter=2, cv=3, error_score=np.nan, random_state=0).fit(X, y)
    assert np.isnan(search.cv_results_["mean_test_score"]).sum() == 1
    fam, metric = get_family("random_forest"), resolve_metric("accuracy")
    for source in (save(pd.DataFrame(search.cv_results_), tmp_path / "r.csv"),
                   trials_from_search(search).trials):
        trials = check_trials(source, fam, "classification", metric)
        assert sorted(t.status for t in trials) == ["failed", "ok"]
        failed = next(t for t in trials if t.status == "failed")
        assert failed.config["bootstrap"] is False and failed.config["max_samples"] == 0.5


@pytest.fixture(scope="module")
def multi():
    X, y = load_breast_cancer(return_X_y=True)
    return RandomizedSearchCV(scaled(LogisticRegression()), {"model__C": loguniform(1e-6, 1e2)},
                              n_iter=4, cv=3, random_state=0, scoring=["accuracy", "roc_auc"],
                              refit="roc_auc").fit(X, y)


def test_multi_metric_results_pick_the_metric(multi, tmp_path):
    res = multi.cv_results_
    assert trials_from_search(multi).metric == "roc_auc"  # refit's metric by default
    got = trials_from_search(multi, metric="accuracy")
    assert got.metric == "accuracy"
    assert np.allclose(got.trials["score"].to_numpy(float), res["mean_test_accuracy"])
    path = save(pd.DataFrame(res), tmp_path / "multi.csv")
    fam = get_family("linear")
    trials = check_trials(path, fam, "classification", resolve_metric("roc_auc"))
    assert [t.score for t in trials] == pytest.approx(list(res["mean_test_roc_auc"]))
    with pytest.raises(BadInputError, match=r"several metrics \(accuracy, roc_auc\)"):
        check_trials(path, fam, "classification", resolve_metric("balanced_accuracy"))
    with pytest.raises(BadInputError, match="several metrics"):
        trials_from_search(multi, metric="f1")


def test_named_and_callable_scorers():
    X, y = load_wine(return_X_y=True)
    search = GridSearchCV(scaled(SVC()), {"model__C": [1.0, 10.0]}, cv=3,
                          scoring={"acc": "accuracy", "bal": "balanced_accuracy"},
                          refit="bal").fit(X, y)
    assert trials_from_search(search).metric == "balanced_accuracy"  # the scorer's name
    assert trials_from_search(search, metric="acc").metric == "accuracy"
    search = GridSearchCV(scaled(SVC()), {"model__C": [1.0]}, cv=3,
                          scoring=make_scorer(accuracy_score)).fit(X, y)
    with pytest.raises(BadInputError, match="pass metric=NAME"):
        trials_from_search(search)
    assert trials_from_search(search, metric="accuracy").metric == "accuracy"
    with pytest.raises(BadInputError, match="scored with 'balanced_accuracy', not 'f1'"):
        trials_from_search(GridSearchCV(SVC(), {"C": [1.0]}, cv=3,
                                        scoring="balanced_accuracy").fit(X, y), metric="f1")


def test_unknown_model_class_names_the_families():
    X, y = load_wine(return_X_y=True)
    search = GridSearchCV(DecisionTreeClassifier(), {"max_depth": [2, 3]}, cv=3).fit(X, y)
    with pytest.raises(BadInputError) as err:
        trials_from_search(search)
    message = str(err.value)
    assert "DecisionTreeClassifier, which no family uses" in message
    assert all(f in message for f in ("random_forest", "hist_gradient_boosting", "svm_rbf",
                                      "knn", "linear", "extra_trees"))
    with pytest.raises(BadInputError, match="not a fitted scikit-learn search"):
        trials_from_search(GridSearchCV(SVC(), {"C": [1.0]}))


def test_other_pipeline_steps_are_refused_nested_model_steps_stripped(tmp_path):
    X, y = load_wine(return_X_y=True)
    search = GridSearchCV(scaled(SVC()), {"scale__with_mean": [True, False],
                                          "model__C": [1.0]}, cv=3).fit(X, y)
    with pytest.raises(BadInputError, match="'scale__with_mean' do not belong to the "
                                            "model's step 'model'"):
        trials_from_search(search)
    path = save(pd.DataFrame(search.cv_results_), tmp_path / "steps.csv")
    with pytest.raises(BadInputError, match="'scale__with_mean'"):
        check_trials(path, get_family("svm_rbf"), "classification", resolve_metric("accuracy"))
    nested = Pipeline([("scale", StandardScaler()), ("inner", Pipeline([("clf", SVC())]))])
    search = GridSearchCV(nested, {"inner__clf__C": [0.5, 2.0]}, cv=3).fit(X, y)
    assert list(trials_from_search(search).trials["C"]) == [0.5, 2.0]


def test_model_keywords_infers_the_model_step():
    keywords = {"C", "gamma"}
    assert model_keywords(["C", "gamma"], keywords) == {"C": "C", "gamma": "gamma"}
    assert model_keywords(["svc__C"], keywords) == {"svc__C": "C"}
    assert model_keywords(["m__C", "m__gamma"], keywords, step="m") == {
        "m__C": "C", "m__gamma": "gamma"}
    with pytest.raises(BadInputError, match="'pca__n_components'"):
        model_keywords(["svc__C", "pca__n_components"], keywords)
    with pytest.raises(BadInputError, match="replaced the model step 'svc' itself"):
        model_keywords(["svc", "svc__C"], keywords, step="svc")
    with pytest.raises(BadInputError, match="cannot tell which pipeline step"):
        model_keywords(["a__C", "b__gamma"], keywords)


def test_results_without_params_column(searches, tmp_path):
    svm, forest = searches["svm"], searches["forest"]
    acc = resolve_metric("balanced_accuracy")
    # class_weight's empty cells are None, which is SVC's default: nothing is lost
    path = save(pd.DataFrame(svm.cv_results_).drop(columns="params"), tmp_path / "s.csv")
    assert_trials_match(check_trials(path, get_family("svm_rbf"), "classification", acc), svm)
    # max_features=None left an empty cell, and the default is 'sqrt': ambiguous
    path = save(pd.DataFrame(forest.cv_results_).drop(columns="params"), tmp_path / "f.csv")
    with pytest.raises(BadInputError, match="param_max_features may be None or not set"):
        check_trials(path, get_family("random_forest"), "classification", acc)
