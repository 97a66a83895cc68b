"""Logging scikit-learn searches into a history, then suggesting inside the family's space.

Real RandomizedSearchCV and HalvingRandomSearchCV runs on datasets shipped with
scikit-learn, over a bare estimator and over a Pipeline, with scikit-learn's defaults
and ranges wider than the family's space: every trial lands (counted against the
search's own record), and the suggestions then lie inside the space, value by value,
with every value moved into it reported.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy.stats import loguniform
from sklearn.datasets import load_breast_cancer, load_diabetes, load_wine
from sklearn.ensemble import HistGradientBoostingRegressor, RandomForestClassifier
from sklearn.experimental import enable_halving_search_cv  # noqa: F401
from sklearn.linear_model import Ridge
from sklearn.model_selection import HalvingRandomSearchCV, RandomizedSearchCV
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC
from threadpoolctl import threadpool_limits

from cli.main import main
from tests.conftest import dir_digest
from warmstart import KnowledgeBase
from warmstart.families import get_family


def _in_space(space, config):
    # a suggestion is inside the space when clipping leaves it unchanged
    return space.clip(config) == {k: v for k, v in config.items()}


def assert_inside(space, suggestions):
    """Each value of each suggestion is allowed by the space, parameter by parameter;
    each value reported as moved came from outside it (or is not searched there)."""
    for s in suggestions:
        config = s["config"] if isinstance(s, dict) else s.config
        moved = s["moved"] if isinstance(s, dict) else s.moved
        assert config and all(name in space for name in config), config
        for name, value in config.items():
            assert space[name].problem(value) is None, (name, value)
        assert _in_space(space, config)
        for m in moved:
            if m.get("dropped"):
                assert m["parameter"] not in config and m["to"] is None
            else:
                assert config[m["parameter"]] == m["to"]
                assert space[m["parameter"]].problem(m["from"]) is not None, m


def test_log_search_bare_and_pipeline_then_suggest_inside_space(tmp_path):
    kb = KnowledgeBase.init(tmp_path / "kb")
    # reference: scikit-learn's bundled breast-cancer data, 569 rows x 30 features
    X, y = load_breast_cancer(return_X_y=True, as_frame=True)
    X, y = X.iloc[::3], y.iloc[::3]
    # gamma='scale' is scikit-learn's default; C spans wider than the family's space
    search = RandomizedSearchCV(
        SVC(), {"C": loguniform(1e-4, 1e5), "gamma": ["scale", 1e-3, 1e-2]},
        n_iter=6, cv=3, random_state=0).fit(X, y)
    logged = kb.log_search(search, X, y, name="cancer-svm")
    assert logged.trial_count == 6 and logged.family == "svm_rbf"
    assert logged.metric == "accuracy"  # reference: scikit-learn, a classifier's score()
    pipe = Pipeline([("scale", StandardScaler()), ("model", SVC())])
    halving = HalvingRandomSearchCV(
        pipe, {"model__C": loguniform(1e-4, 1e5)}, n_candidates=6, cv=3, random_state=0,
        scoring="balanced_accuracy").fit(X, y)
    logged2 = kb.log_search(halving, X, y)
    assert logged2.trial_count == 6 and logged2.metric == "balanced_accuracy"
    trials = kb.tables()["trials"]
    assert len(trials) == 12  # every trial landed
    found = kb.suggest(X.assign(target=y.to_numpy()), target="target", family="svm_rbf",
                       k=5, metric="accuracy")
    space = get_family("svm_rbf").space("classification")
    assert found and all(_in_space(space, s.config) for s in found)
    assert_inside(space, found)


def test_log_cv_results_table_through_cli(tmp_path):
    # reference: scikit-learn's bundled diabetes data (442 rows, 10 features)
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    search = RandomizedSearchCV(Ridge(), {"alpha": loguniform(1e-6, 1e6)}, n_iter=5, cv=3,
                                random_state=0, scoring="r2").fit(X, y)
    results = tmp_path / "cv_results.csv"
    pd.DataFrame(search.cv_results_).to_csv(results, index=False)
    data = tmp_path / "diabetes.csv"
    X.assign(progression=y).to_csv(data, index=False)
    runner = CliRunner()
    assert runner.invoke(main, ["kb", "init", str(tmp_path / "kb")]).exit_code == 0
    res = runner.invoke(main, ["log", str(data), "--target", "progression", "--family",
                               "linear", "--trials", str(results), "--kb",
                               str(tmp_path / "kb"), "--json"])
    assert res.exit_code == 0, res.output
    trials = KnowledgeBase(tmp_path / "kb").tables()["trials"]
    assert len(trials) == 5
    assert np.allclose(sorted(trials["score"]), sorted(search.cv_results_["mean_test_score"]))


def _forest_searches():
    """Searches over scikit-learn's RandomForestClassifier on the wine data: its defaults
    ('sqrt', None), values below and above the family's bounds (n_estimators 5 < 10,
    max_depth 1 < 2 and 100 > 60, min_samples_leaf 120 > 50, max_features 0.02 < 0.05)."""
    # reference: scikit-learn's bundled wine data, 178 rows x 13 features, 3 classes
    X, y = load_wine(return_X_y=True, as_frame=True)
    grid = {"n_estimators": [5, 12], "max_depth": [None, 1, 100],
            "min_samples_leaf": [1, 3, 120], "max_features": ["sqrt", None, 0.02, 0.5]}
    bare = RandomizedSearchCV(RandomForestClassifier(random_state=0), grid, n_iter=10, cv=3,
                              random_state=0, scoring="balanced_accuracy").fit(X, y)
    pipe = Pipeline([("scale", StandardScaler()),
                     ("model", RandomForestClassifier(random_state=0))])
    halving = HalvingRandomSearchCV(
        pipe, {f"model__{k}": v for k, v in grid.items()}, n_candidates=10, cv=3, factor=2,
        min_resources=40, random_state=1, scoring="balanced_accuracy").fit(X, y)
    return X, y, bare, halving


@pytest.mark.filterwarnings("ignore::UserWarning")
def test_log_saved_searches_through_cli_then_suggest_inside_space(tmp_path):
    X, y, bare, halving = _forest_searches()
    data = tmp_path / "wine.csv"
    X.assign(cultivar=y).to_csv(data, index=False)
    kb_dir = str(tmp_path / "kb")
    runner = CliRunner()
    assert runner.invoke(main, ["kb", "init", kb_dir]).exit_code == 0
    for i, search in enumerate((bare, halving)):
        results = tmp_path / f"cv_results_{i}.csv"
        pd.DataFrame(search.cv_results_).to_csv(results, index=False)
        res = runner.invoke(main, ["log", str(data), "--target", "cultivar", "--family",
                                   "random_forest", "--trials", str(results), "--kb",
                                   kb_dir] + (["--json"] if i else []))
        assert res.exit_code == 0, res.output
        if i:  # --json: its metric field
            assert json.loads(res.stdout)["metric"] == "balanced_accuracy"
        else:  # no --metric: the note names the metric the scores were recorded as
            assert res.stdout.splitlines()[1].startswith(
                "note: no --metric given, so the scores were recorded as balanced_accuracy")
    trials = KnowledgeBase(kb_dir).tables()["trials"]
    # reference: the searches' own records; a halving candidate is one trial however
    # many rounds re-scored it (n_candidates_[0] distinct candidates)
    assert len(bare.cv_results_["params"]) == 10 and halving.n_candidates_[0] == 10
    assert len(trials) == 20
    stored = [json.loads(c) for c in trials["config"]]
    assert sum(c.get("max_features") == "sqrt" for c in stored) == (
        sum(p["max_features"] == "sqrt" for p in bare.cv_results_["params"])
        + len({repr(sorted(p.items())) for p in halving.cv_results_["params"]
               if p["model__max_features"] == "sqrt"}))
    assert {c["n_estimators"] for c in stored} == {5, 12}  # stored as run
    res = runner.invoke(main, ["suggest", str(data), "--target", "cultivar", "--family",
                               "random_forest", "-k", "5", "--kb", kb_dir, "--json"])
    assert res.exit_code == 0, res.output
    found = json.loads(res.stdout)
    space = get_family("random_forest").space("classification")
    assert_inside(space, found)
    # every source trial ran 5 or 12 trees: the 5 was moved up to the space's 10
    for s in found:
        if s["config"]["n_estimators"] == 10:
            assert {"parameter": "n_estimators", "from": 5, "to": 10} in s["moved"]
        else:
            assert s["config"]["n_estimators"] == 12
    assert any(s["moved"] for s in found)


@pytest.fixture(scope="module")
def boosting_history(tmp_path_factory):
    """Two searches over HistGradientBoostingRegressor logged into one history.

    reference: scikit-learn's bundled diabetes data, 442 rows x 10 features.
    l2_regularization=0.0 is the estimator's default and lies below the family's
    log-scale range; max_iter 5 < 10 and learning_rate up to 2 > 1.
    """
    X, y = load_diabetes(return_X_y=True, as_frame=True)
    grid = {"l2_regularization": [0.0, 1.0], "max_iter": [5, 20],
            "learning_rate": loguniform(1e-3, 2.0)}
    kb = KnowledgeBase.init(tmp_path_factory.mktemp("boosting") / "kb")
    bare = HalvingRandomSearchCV(HistGradientBoostingRegressor(random_state=0), grid,
                                 n_candidates=8, cv=3, factor=2, min_resources=100,
                                 random_state=0)
    pipe = Pipeline([("scale", StandardScaler()),
                     ("model", HistGradientBoostingRegressor(random_state=0))])
    wrapped = RandomizedSearchCV(pipe, {f"model__{k}": v for k, v in grid.items()},
                                 n_iter=8, cv=3, random_state=1)
    with threadpool_limits(1):  # OpenMP threads only contend on a busy machine
        bare.fit(X, y)
        wrapped.fit(X, y)
    assert kb.log_search(bare, X, y).trial_count == bare.n_candidates_[0] == 8
    assert kb.log_search(wrapped, X, y).trial_count == 8
    assert len(kb.tables()["trials"]) == 16  # every trial landed
    return kb, X.assign(progression=y)


@pytest.mark.parametrize("strategy", ["auto", "portfolio", "transfer", "nearest-best"])
def test_defaults_outside_the_space_are_suggested_inside_it(boosting_history, strategy):
    kb, frame = boosting_history
    found = kb.suggest(frame, target="progression", family="hist_gradient_boosting", k=6,
                       strategy=strategy)
    space = get_family("hist_gradient_boosting").space("regression")
    assert len(found) == 6
    assert_inside(space, found)
    # every trial set l2_regularization to 0 or 1; 0 lies outside and moves to 1e-8
    for s in found:
        l2 = s.config["l2_regularization"]
        assert l2 in (1.0, space["l2_regularization"].low)
        if l2 != 1.0 and s.study_id is not None:
            assert {"parameter": "l2_regularization", "from": 0.0, "to": l2} in s.moved


def test_encoding_places_logged_values_where_the_space_holds_them():
    # reference: SearchSpace.clip's documented rule (nearest bound; a value the
    # parameter cannot hold is unusable), the encoding then puts it at the default
    space = get_family("hist_gradient_boosting").space("regression")
    logged = [{"l2_regularization": 0.0, "max_iter": 5, "learning_rate": 2.0},
              {"max_features": "sqrt"}]
    held = [space.clip(logged[0]), space.defaults()]
    assert np.array_equal(space.encode(logged), space.encode(held))


def test_cli_reports_every_problem_of_a_trials_file_and_writes_nothing(tmp_path):
    # reference: SVC's parameter constraints (C > 0; gamma 'scale', 'auto' or >= 0) and
    # balanced accuracy's range [0, 1]
    X, y = load_wine(return_X_y=True, as_frame=True)
    data = tmp_path / "wine.csv"
    X.assign(cultivar=y).to_csv(data, index=False)
    kb_dir = tmp_path / "kb"
    runner = CliRunner()
    assert runner.invoke(main, ["kb", "init", str(kb_dir)]).exit_code == 0
    before = dir_digest(kb_dir)
    bad = pd.DataFrame({"C": [1.0, -1.0] + [1.0] * 30, "gamma": ["scale", "x"] + [0.1] * 30,
                        "score": [0.9, 0.8] + [1.5 + i for i in range(30)]})
    bad.to_csv(tmp_path / "bad.csv", index=False)
    pd.DataFrame({"C": [1.0, 2.0], "score": [85.0, 90.5]}).to_csv(tmp_path / "pct.csv",
                                                                   index=False)
    args = ["log", str(data), "--target", "cultivar", "--family", "svm_rbf", "--kb",
            str(kb_dir), "--trials"]
    res = runner.invoke(main, args + [str(tmp_path / "bad.csv")])
    assert res.exit_code == 2
    lines = res.stderr.splitlines()
    assert lines[0] == "error: the trials table has 32 problems:"
    assert len(lines) == 1 + 20 + 1 and lines[-1].strip() == "... and 12 more"
    assert "trial row 2: The 'C' parameter of SVC must be a float" in lines[1]
    assert "trial row 2: The 'gamma' parameter of SVC" in lines[2]
    res = runner.invoke(main, args + [str(tmp_path / "pct.csv")])
    assert res.exit_code == 2 and "divide them by 100" in res.stderr
    assert len(res.stderr.splitlines()) == 1
    assert dir_digest(kb_dir) == before  # nothing written
