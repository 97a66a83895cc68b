"""Logging scikit-learn searches into a history, then suggesting inside the family's space."""

from __future__ import annotations

import numpy as np
import pandas as pd
from click.testing import CliRunner
from scipy.stats import loguniform
from sklearn.datasets import load_breast_cancer, load_diabetes
from sklearn.experimental import enable_halving_search_cv  # noqa: F401
from sklearn.linear_model import Ridge
from sklearn.model_selection import HalvingRandomSearchCV, RandomizedSearchCV
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from cli.main import main
from warmstart import KnowledgeBase
from warmstart.families import get_family


def _in_space(space, config):
    # a suggestion is inside the space when clipping leaves it unchanged
    return space.clip(config) == {k: v for k, v in config.items()}


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
