"""From the history into a user's own search: --format grid, to_frame, make_pipeline,
and tune()'s refitted model.

References: scikit-learn's GridSearchCV (a list of dicts as ``param_grid`` runs each
dict's grid), ``check_is_fitted``, and the determinism of a seeded fit on the same rows.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy.stats import loguniform
from sklearn.datasets import load_wine
from sklearn.model_selection import GridSearchCV, RandomizedSearchCV
from sklearn.pipeline import Pipeline
from sklearn.svm import SVC
from sklearn.utils.validation import check_is_fitted

import warmstart
from cli.main import main
from warmstart import KnowledgeBase
from warmstart.errors import BadInputError
from warmstart.tune import tune


@pytest.fixture(scope="module")
def wine_history(tmp_path_factory):
    """A history holding one search over SVC on the wine data (178 rows, 13 features);
    C is drawn wider than the family's [1e-3, 1e4] and gamma includes 'scale'."""
    # reference: scikit-learn's bundled wine data
    X, y = load_wine(return_X_y=True, as_frame=True)
    search = RandomizedSearchCV(SVC(), {"C": loguniform(1e-5, 1e6),
                                        "gamma": ["scale", 1e-7, 1e-3, 50.0]},
                                n_iter=10, cv=3, random_state=0,
                                scoring="balanced_accuracy").fit(X, y)
    root = tmp_path_factory.mktemp("wine")
    kb = KnowledgeBase.init(root / "kb")
    kb.log_search(search, X, y, name="wine")
    data = root / "wine.csv"
    X.assign(cultivar=y).to_csv(data, index=False)
    return kb, data, X, y


def test_format_grid_is_a_param_grid_of_the_suggestions(wine_history):
    kb, data, X, y = wine_history
    args = ["suggest", str(data), "--target", "cultivar", "--family", "svm_rbf", "-k", "4",
            "--kb", str(kb.path)]
    runner = CliRunner()
    grid = json.loads(runner.invoke(main, args + ["--format", "grid"]).stdout)
    found = json.loads(runner.invoke(main, args + ["--json"]).stdout)
    assert grid == [{k: [v] for k, v in s["config"].items()} for s in found]
    assert all(len(values) == 1 for g in grid for values in g.values())
    # reference: GridSearchCV runs exactly one candidate per one-value dict, in order
    search = GridSearchCV(SVC(), grid, cv=3).fit(X, y)
    assert list(search.cv_results_["params"]) == [s["config"] for s in found]
    res = runner.invoke(main, args + ["--format", "grid", "--json"])
    assert res.exit_code == 2 and "contradict" in res.output


def test_suggestions_to_frame_and_to_grid(wine_history):
    kb, data, X, y = wine_history
    found = kb.suggest(X.assign(cultivar=y), target="cultivar", family="svm_rbf", k=4)
    frame = found.to_frame()
    assert frame.index.name == "rank" and list(frame.index) == [s.rank for s in found]
    assert list(frame.columns) == ["C", "gamma", "class_weight"]  # the space's order
    for s in found:
        row = frame.loc[s.rank]
        assert all(row[k] == v or (v is None and row[k] is None) for k, v in s.config.items())
    assert frame["C"].dtype == float
    pipe = Pipeline([("model", SVC())])
    grid = found.to_grid(prefix="model__")
    search = GridSearchCV(pipe, grid, cv=3).fit(X, y)
    assert [{k.removeprefix("model__"): v for k, v in p.items()}
            for p in search.cv_results_["params"]] == [s.config for s in found]


def test_make_pipeline_turns_a_suggestion_into_a_fitted_model(wine_history):
    kb, data, X, y = wine_history
    best = kb.suggest(X.assign(cultivar=y), target="cultivar", family="svm_rbf", k=1)[0]
    model = warmstart.make_pipeline("svm_rbf", "classification", best.config, X).fit(X, y)
    check_is_fitted(model)
    params = model.named_steps["model"].get_params()
    assert all(params[k] == v for k, v in best.config.items())
    # a suggestion itself is accepted; the same seeded pipeline predicts the same
    again = warmstart.make_pipeline("svm_rbf", "classification", best, X).fit(X, y)
    assert np.array_equal(model.predict(X), again.predict(X))
    assert "make_pipeline" in dir(warmstart)
    with pytest.raises(BadInputError, match="'colour', which SVC does not take"):
        warmstart.make_pipeline("svm_rbf", "classification", {"colour": 1}, X)
    with pytest.raises(BadInputError, match="unknown model family 'svm'"):
        warmstart.make_pipeline("svm", "classification", {}, X)
    with pytest.raises(BadInputError, match="task must be one of"):
        warmstart.make_pipeline("svm_rbf", "clustering", {}, X)


def test_tune_returns_the_best_pipeline_refitted_on_all_rows():
    df = load_wine(as_frame=True).frame
    X, y = df.drop(columns="target"), df["target"]
    result = tune(df, target="target", family="linear", budget=2, cv=3, seed=3)
    check_is_fitted(result.model)
    # reference: the same seeded pipeline fitted on every row predicts the same
    want = warmstart.make_pipeline("linear", "classification", result.best.config, X,
                                   seed=3).fit(X, y)
    assert np.array_equal(result.model.predict(X), want.predict(X))
    assert np.allclose(result.model.predict_proba(X), want.predict_proba(X))
    assert "model" not in result.to_dict()  # never written anywhere
    assert tune(df, target="target", family="linear", budget=1, cv=3, seed=3,
                refit=False).model is None


def test_refit_uses_every_labelled_row():
    df = load_wine(as_frame=True).frame.astype({"target": float})
    df.loc[:9, "target"] = np.nan  # ten rows without a label are left out, as in the trials
    result = tune(df, target="target", family="linear", budget=1, cv=3, seed=0,
                  task="classification")
    model = result.model.named_steps["model"]
    # reference: scikit-learn records the rows a model was fitted on (n_features_in_ is
    # per column; the preprocessing's imputer saw every labelled row)
    imputer = result.model.named_steps["prepare"].named_transformers_["numeric"]["impute"]
    labelled = pd.DataFrame(df.drop(columns="target")).iloc[10:]
    assert np.allclose(imputer.statistics_[:13], labelled.median().to_numpy())
    assert model.classes_.tolist() == [0.0, 1.0, 2.0]
