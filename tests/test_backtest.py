"""The leave-one-dataset-out backtest, in the library and through the CLI."""

from __future__ import annotations

import builtins
import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_breast_cancer, load_iris, load_wine

from cli.main import main
from warmstart.backtest import _regret_curve, backtest, plot_regret
from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.history import KnowledgeBase
from warmstart.similarity import nearest

SPACE = get_family("knn").space("classification")
# One shared set of distinct configurations, so every held-out lookup is a real trial.
CONFIGS = [{"n_neighbors": k, "weights": w, "p": 2}
           for k, w in zip((1, 2, 3, 5, 8, 13, 21, 34, 55, 89), ["uniform", "distance"] * 5)]


@pytest.fixture(scope="module")
def shared_history(tmp_path_factory):
    kb = KnowledgeBase.init(tmp_path_factory.mktemp("bt") / "kb")
    frames = {"iris": load_iris(as_frame=True).frame, "wine": load_wine(as_frame=True).frame,
              "cancer": load_breast_cancer(as_frame=True).frame}
    for i, (name, df) in enumerate(frames.items()):
        # made-up scores whose best configuration differs per dataset
        rows = [{**c, "score": 0.5 + 0.04 * ((j * (i + 2)) % 10), "fit_seconds": 0.01}
                for j, c in enumerate(CONFIGS)]
        kb.log(df, target="target", family="knn", trials=pd.DataFrame(rows), name=name)
    return kb


def test_regret_formula_worked_example():
    # reference: common practice - regret normalised by the best-to-median gap;
    # values 0.5, 0.9, 0.7 with best 1.0 and median 0.6
    r = _regret_curve(np.array([0.5, 0.9, 0.7]), 1.0, 0.6, (1, 2, 3, 5))
    assert np.allclose(r, [1.25, 0.25, 0.25, 0.25])
    assert np.isnan(_regret_curve(np.array([]), 1.0, 0.6, (1,))).all()


def test_backtest_looks_up_real_trials_and_predicts_the_rest(shared_history):
    res = backtest(shared_history, "knn", (1, 3), ["nearest-best", "random", "defaults"],
                   random_repeats=3)
    assert set(res.per_dataset["name"]) == {"iris", "wine", "cancer"}
    # nearest-best only proposes logged configurations, all of which ran everywhere
    assert res.lookups["nearest-best"]["predicted"] == 0
    # {} (the estimator's defaults) was never logged: its score is predicted
    assert res.lookups["defaults"] == {"lookups": 3, "predicted": 3}
    for s in res.summary():
        assert s["mean_regret"] >= 0 and s["datasets"] == 3
    # random search samples the space: mostly configurations nobody ran
    assert res.lookups["random"]["predicted"] > 0


def test_nearest_best_regret_at_1_recomputed_by_hand(shared_history):
    res = backtest(shared_history, "knn", (1,), ["nearest-best"])
    t = shared_history.tables()
    fps = shared_history.fingerprints(t["datasets"])
    label = dict(zip(t["datasets"]["dataset_id"], t["datasets"]["name"]))
    trials = t["trials"].merge(t["studies"][["study_id", "dataset_id"]], on="study_id")
    for held in fps:
        # the held-out dataset's nearest *other* dataset, and that one's best trial
        rest = {i: f for i, f in fps.items() if i != held}
        nb = nearest(fps[held], rest, label, k=1)[0]
        theirs = trials[trials["dataset_id"] == nb.dataset_id]
        cfg = theirs.loc[theirs["score"].idxmax(), "config"]
        own = trials[trials["dataset_id"] == held].set_index("config")["score"]
        expected = (own.max() - own[cfg]) / (own.max() - own.median())
        got = res.per_dataset.set_index("dataset_id").loc[held, "regret"]
        assert np.isclose(got, expected)


def test_plot_is_written_and_missing_matplotlib_is_a_clear_error(shared_history, tmp_path,
                                                                 monkeypatch):
    res = backtest(shared_history, "knn", (1, 3), ["nearest-best", "random"],
                   random_repeats=2)
    png = tmp_path / "r.png"
    plot_regret(res, png)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # reference: PNG specification
    real_import = builtins.__import__

    def no_mpl(name, *a, **kw):
        if name.startswith("matplotlib"):
            raise ImportError(name)
        return real_import(name, *a, **kw)

    monkeypatch.setattr(builtins, "__import__", no_mpl)
    with pytest.raises(BadInputError, match="needs matplotlib"):
        plot_regret(res, tmp_path / "s.png")


def test_backtest_cli_table_json_progress_and_errors(shared_history, tmp_path):
    kb = str(shared_history.path)
    runner = CliRunner()
    r = runner.invoke(main, ["backtest", "--family", "knn", "--ks", "1,3", "--strategies",
                             "nearest-best,portfolio,random", "--kb", kb,
                             "--plot", str(tmp_path / "p.png")])
    assert r.exit_code == 0, r.output
    # stderr is not a terminal here: no progress bar, no stray line (issue 15)
    assert "held-out datasets" not in r.stderr
    for word in ("nearest-best", "portfolio", "random", "beats random", "plot written"):
        assert word in r.stdout
    r = runner.invoke(main, ["backtest", "-f", "knn", "--ks", "5", "--strategies",
                             "global-portfolio,random", "--kb", kb, "--json"])
    d = json.loads(r.stdout)
    assert d["ks"] == [5] and {s["strategy"] for s in d["summary"]} == {
        "global-portfolio", "random"}
    for bad in (["--ks", "0,2"], ["--ks", "a"], ["--strategies", "nope"]):
        r = runner.invoke(main, ["backtest", "-f", "knn", "--kb", kb, *bad])
        assert r.exit_code == 2 and r.stderr.startswith("error: ")
    r = runner.invoke(main, ["backtest", "-f", "linear", "--kb", kb])
    # too little history is "nothing to compare with" (exit 1), as for similar and suggest
    assert r.exit_code == 1 and "at least two datasets" in r.stderr
