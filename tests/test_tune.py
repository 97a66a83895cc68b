"""tune(): warm start, search, failures, limits, logging, reproducibility."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_iris, load_wine
from sklearn.model_selection import KFold, StratifiedKFold, cross_val_score
from threadpoolctl import threadpool_limits

import warmstart.tune as tune_module
from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.pipelines import make_pipeline
from warmstart.tune import tune


def iris() -> pd.DataFrame:
    return load_iris(as_frame=True).frame


def wine() -> pd.DataFrame:
    return load_wine(as_frame=True).frame


def test_same_seed_same_trials_in_same_order():
    runs = [tune(iris(), target="target", family="knn", budget=6, cv=3, seed=4)
            for _ in range(2)]
    a, b = ([(t.config, t.score, t.origin) for t in r.trials] for r in runs)
    assert a == b and len(a) == 6
    assert [t.origin for t in runs[0].trials][:4] == ["defaults", "random", "random", "gp-ei"]
    other = tune(iris(), target="target", family="knn", budget=4, cv=3, seed=5,
                 search="random")
    assert [t.config for t in other.trials][1:] != [c for c, _, _ in a][1:4]


def test_scores_are_the_cross_validated_scores():
    result = tune(wine(), target="target", family="linear", budget=3, cv=3, seed=2)
    df = wine()
    X, y = df.drop(columns="target"), df["target"]
    folds = StratifiedKFold(3, shuffle=True, random_state=2)
    for t in result.trials:
        pipe = make_pipeline(get_family("linear"), "classification", t.config, X, seed=2)
        with threadpool_limits(1):
            want = cross_val_score(pipe, X, y, cv=folds, scoring="balanced_accuracy")
        # reference: sklearn cross_val_score with the same stratified, shuffled folds
        np.testing.assert_allclose(t.fold_scores, want)
        assert t.score == pytest.approx(want.mean())
        assert t.fit_seconds > 0 and t.cv_seconds >= 0


def test_regression_uses_plain_folds_and_r2():
    df = load_wine(as_frame=True).frame.drop(columns="target")
    result = tune(df, target="alcohol", family="linear", budget=2, cv=3, seed=0)
    assert result.task == "regression" and result.metric == "r2"
    X, y = df.drop(columns="alcohol"), df["alcohol"]
    pipe = make_pipeline(get_family("linear"), "regression", result.trials[0].config, X)
    want = cross_val_score(pipe, X, y, cv=KFold(3, shuffle=True, random_state=0),
                           scoring="r2")  # reference: sklearn KFold + r2 scorer
    np.testing.assert_allclose(result.trials[0].fold_scores, want)


def test_warm_start_evaluates_the_suggestions_first_and_logs(kb):
    # a past study on wine, logged as any team member would
    trials = [{"n_neighbors": 40, "weights": "distance", "p": 1, "score": 0.9},
              {"n_neighbors": 3, "weights": "uniform", "p": 2, "score": 0.7}]
    kb.log(wine(), target="target", family="knn", trials=trials)
    want = [s.config for s in kb.suggest(iris(), target="target", family="knn", k=2)]
    result = tune(iris(), target="target", family="knn", budget=4, cv=3, kb=kb,
                  warm_start=2, name="iris")
    assert [t.config for t in result.trials[:2]] == want
    assert [t.origin for t in result.trials[:2]] == ["warm-start", "warm-start"]
    t = kb.tables()
    study = t["studies"][t["studies"]["study_id"] == result.logged.study_id].iloc[0]
    assert study["source"] == "tune" and study["trial_count"] == 4 and study["label"] == "iris"
    logged = t["trials"][t["trials"]["study_id"] == result.logged.study_id]
    assert [json.loads(c) for c in logged.sort_values("trial_index")["config"]] == \
        [tr.config for tr in result.trials]
    np.testing.assert_allclose(logged.sort_values("trial_index")["score"],
                               [tr.score for tr in result.trials])


def test_empty_history_starts_cold(kb):
    result = tune(iris(), target="target", family="svm_rbf", budget=2, cv=2, kb=kb, log=False)
    assert any("starting cold" in n for n in result.notes)
    assert result.trials[0].origin == "defaults" and result.logged is None
    assert kb.tables()["studies"].empty


def test_a_failing_trial_is_recorded_and_the_study_goes_on(kb):
    # n_neighbors = 100 is inside the declared space but larger than a training fold
    # of 60 rows: scikit-learn raises "Expected n_neighbors <= n_samples_fit".
    kb.log(wine(), target="target", family="knn",
           trials=[{"n_neighbors": 100, "weights": "uniform", "p": 2, "score": 0.8}])
    small = iris().sample(90, random_state=0)
    result = tune(small, target="target", family="knn", budget=3, cv=3, kb=kb, warm_start=1)
    first = result.trials[0]
    assert first.status == "failed" and first.score is None
    assert "n_neighbors" in first.error and first.error.startswith("ValueError")
    assert len(result.trials) == 3 and all(t.status == "ok" for t in result.trials[1:])
    logged = kb.tables()["trials"]
    logged = logged[logged["study_id"] == result.logged.study_id].sort_values("trial_index")
    assert logged["status"].tolist() == ["failed", "ok", "ok"]
    assert "n_neighbors" in logged["error"].iloc[0]


def test_time_limit_stops_between_trials_and_logs(kb):
    result = tune(iris(), target="target", family="knn", budget=200, cv=2, kb=kb,
                  time_limit=0.5)
    assert result.stopped == "time limit"
    assert 1 <= len(result.trials) < 200
    assert result.logged.trial_count == len(result.trials)


def interrupt_on_call(monkeypatch, n: int) -> None:
    """Make the ``n``-th trial evaluation raise KeyboardInterrupt (as Ctrl-C would)."""
    real = tune_module._evaluate
    calls = []

    def evaluate(*args, **kwargs):
        calls.append(1)
        if len(calls) == n:
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(tune_module, "_evaluate", evaluate)


def test_interruption_keeps_finished_trials(kb, monkeypatch):
    interrupt_on_call(monkeypatch, 3)
    result = tune(iris(), target="target", family="linear", budget=5, cv=2, kb=kb)
    assert result.interrupted and len(result.trials) == 2
    assert result.logged.trial_count == 2


def test_out_file_holds_the_best_configuration(tmp_path):
    out = tmp_path / "best.json"
    result = tune(iris(), target="target", family="svm_rbf", budget=4, cv=3, out=out)
    saved = json.loads(out.read_text())
    best = max((t for t in result.trials if t.status == "ok"), key=lambda t: t.score)
    assert saved["config"] == best.config and saved["score"] == best.score
    assert saved["trial"] == best.index + 1 and saved["family"] == "svm_rbf"
    assert get_family("svm_rbf").space("classification").validate(saved["config"])


@pytest.mark.parametrize("kwargs,match", [
    ({"budget": 0}, "budget"), ({"cv": 1}, "cv"), ({"jobs": 0}, "jobs"),
    ({"time_limit": -1}, "time limit"), ({"search": "grid"}, "search"),
    ({"metric": "made_up"}, "scorer"), ({"family": "nope"}, "unknown model family"),
    ({"target": "nope"}, "target column"), ({"cv": 60}, "smallest class"),
])
def test_bad_input(kwargs, match):
    args = {"target": "target", "family": "knn", "budget": 2, **kwargs}
    with pytest.raises(BadInputError, match=match):
        tune(iris(), **args)


def test_space_file_narrows_every_trial(tmp_path):
    spec = tmp_path / "space.json"
    spec.write_text(json.dumps([{"name": "n_neighbors", "low": 3, "high": 9},
                                {"name": "weights", "choices": ["distance"]}]))
    result = tune(iris(), target="target", family="knn", budget=5, cv=2, space=spec,
                  search="random")
    # the declared default weights="uniform" is excluded: the cold first trial takes the
    # first allowed choice instead
    assert result.trials[0].config == {"n_neighbors": 5, "weights": "distance", "p": 2}
    for t in result.trials:
        assert 3 <= t.config["n_neighbors"] <= 9 and t.config["weights"] == "distance"


def test_plain_random_search_skips_the_defaults():
    a = tune(iris(), target="target", family="knn", budget=3, cv=2, search="random",
             defaults_first=False, seed=1)
    b = tune(iris(), target="target", family="knn", budget=4, cv=2, search="random", seed=1)
    assert [t.origin for t in a.trials] == ["random"] * 3
    assert b.trials[0].origin == "defaults"
    assert [t.config for t in b.trials[1:]] == [t.config for t in a.trials]


def test_progress_callback_gets_each_finished_trial_in_order():
    seen = []
    result = tune(iris(), target="target", family="knn", budget=4, cv=2, seed=1,
                  progress=seen.append)
    assert seen == result.trials and [t.index for t in seen] == [0, 1, 2, 3]
    assert result.n_ok == sum(t.score is not None for t in seen) == 4


def test_unlogged_study_needs_no_history(tmp_path):
    missing = tmp_path / "no-history-here"
    result = tune(iris(), target="target", family="linear", budget=2, cv=2, kb=missing,
                  log=False)
    assert result.notes == ["no history: starting cold"] and result.logged is None
    assert not missing.exists()
    with pytest.raises(BadInputError, match="not a warmstart history"):
        tune(iris(), target="target", family="linear", budget=2, cv=2, kb=missing)
