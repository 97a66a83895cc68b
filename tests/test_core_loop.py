"""The core loop end to end through the CLI: kb init -> log -> similar -> suggest."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import stats
from sklearn.datasets import load_breast_cancer

from cli.main import main
from tests.conftest import dir_digest
from warmstart.families import get_family

RF_CLASSIFICATION = get_family("random_forest").space("classification")


def run(*args: str, env: dict | None = None):
    result = CliRunner().invoke(main, [str(a) for a in args], env=env)
    return result


def trials_file(path: Path, seed: int, n: int = 6, space=RF_CLASSIFICATION) -> Path:
    rng = np.random.default_rng(seed)
    rows = [dict(space.sample(rng), score=round(float(rng.uniform(0.6, 0.99)), 6),
                 fit_seconds=round(float(rng.uniform(0.1, 2.0)), 3)) for _ in range(n)]
    # JSON lines is the lossless form (None stays null, booleans stay booleans)
    path.write_text("".join(json.dumps(r) + "\n" for r in rows))
    return path


def best_config(path: Path) -> dict:
    rows = [json.loads(line) for line in path.read_text().splitlines()]
    best = max(rows, key=lambda r: r["score"])
    return {k: v for k, v in best.items() if k not in ("score", "fit_seconds")}


@pytest.fixture
def history(tmp_path: Path) -> Path:
    path = tmp_path / "team-history"
    assert run("kb", "init", path).exit_code == 0
    return path


def test_round_trip_same_file_is_its_own_nearest_neighbour(history, tmp_path, iris_csv,
                                                          cancer_csv, wine_csv):
    for i, data in enumerate((iris_csv, cancer_csv, wine_csv)):
        t = trials_file(tmp_path / f"trials{i}.jsonl", seed=i)
        res = run("log", data, "--target", "target", "--family", "random_forest",
                  "--trials", t, "--kb", history)
        assert res.exit_code == 0, res.output
    res = run("similar", cancer_csv, "--target", "target", "--kb", history, "--json")
    assert res.exit_code == 0, res.output
    found = json.loads(res.output)
    assert found[0]["name"] == "cancer" and found[0]["distance"] == 0.0
    assert found[0]["similarity"] == 1.0 and found[1]["distance"] > 0
    res = run("suggest", cancer_csv, "--target", "target", "--family", "random_forest",
              "--kb", history, "--json", "-k", "4")
    assert res.exit_code == 0, res.output
    suggestions = json.loads(res.output)
    assert suggestions[0]["config"] == best_config(tmp_path / "trials1.jsonl")
    assert suggestions[0]["source_name"] == "cancer" and suggestions[0]["normalised_score"] == 1
    assert len(suggestions) == 4
    assert len({json.dumps(s["config"], sort_keys=True) for s in suggestions}) == 4
    # the readable forms print the same content
    text = run("suggest", cancer_csv, "--target", "target", "--family", "random_forest",
               "--kb", history).output
    assert "cancer" in text and "norm. score" in text and "held-out data" in text
    text = run("similar", cancer_csv, "--target", "target", "--kb", history).output
    assert text.splitlines()[0].startswith("task: classification")
    assert text.splitlines()[3].split()[1] == "cancer"


def test_logging_the_same_data_twice_links_the_dataset(history, tmp_path, iris_csv):
    for seed in (1, 2):
        res = run("log", iris_csv, "--target", "target", "--family", "random_forest",
                  "--trials", trials_file(tmp_path / f"t{seed}.jsonl", seed),
                  "--kb", history, "--json")
        assert res.exit_code == 0, res.output
        assert json.loads(res.output)["dataset_is_new"] is (seed == 1)
    info = json.loads(run("kb", "info", "--kb", history, "--json").output)
    assert info["datasets"] == 1 and info["studies"] == 2 and info["trials"] == 12
    assert info["by_family"][0]["family"] == "random_forest"
    assert info["fingerprints_by_catalogue_version"]


def test_log_from_a_fingerprint_file(history, tmp_path, iris_csv):
    fp = tmp_path / "iris.fingerprint.json"
    res = run("fingerprint", iris_csv, "--target", "target", "--json")
    assert res.exit_code == 0
    fp.write_text(res.output)
    res = run("log", "--fingerprint", fp, "--family", "random_forest", "--name", "iris-remote",
              "--trials", trials_file(tmp_path / "t.jsonl", 0), "--kb", history, "--json")
    assert res.exit_code == 0, res.output
    # the same data, fingerprinted later on this machine, is recognised
    res = run("log", iris_csv, "--target", "target", "--family", "random_forest",
              "--trials", trials_file(tmp_path / "t2.jsonl", 5), "--kb", history, "--json")
    assert json.loads(res.output)["dataset_is_new"] is False
    res = run("similar", "--fingerprint", fp, "--kb", history, "--json")
    assert json.loads(res.output)[0]["name"] == "iris-remote"


def test_csv_trials_with_empty_cells_mean_unset(history, tmp_path, iris_csv):
    t = tmp_path / "trials.csv"
    t.write_text("n_estimators,max_depth,bootstrap,max_samples,score,fit_seconds,status,error\n"
                 "100,,True,0.5,0.91,1.5,ok,\n"
                 "200,8,False,,0.93,2.0,ok,\n"
                 "300,4,True,,,,failed,MemoryError\n")
    res = run("log", iris_csv, "--target", "target", "--family", "random_forest",
              "--trials", t, "--kb", history, "--json")
    assert res.exit_code == 0, res.output
    logged = json.loads(res.output)
    assert logged["trial_count"] == 3 and logged["n_ok"] == 2 and logged["best_score"] == 0.93
    res = run("suggest", iris_csv, "--target", "target", "--family", "random_forest",
              "--kb", history, "--json")
    first = json.loads(res.output)[0]["config"]
    assert first["n_estimators"] == 200 and first["max_depth"] == 8
    assert first["bootstrap"] is False and "max_samples" not in first


def test_history_location_flag_env_and_default(tmp_path, iris_csv, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert run("kb", "init", "knowledge_base").exit_code == 0
    assert run("kb", "init", "other").exit_code == 0
    t = trials_file(tmp_path / "t.jsonl", 0)
    args = ["log", iris_csv, "--target", "target", "--family", "random_forest", "--trials", t]
    assert run(*args).exit_code == 0  # ./knowledge_base
    assert run(*args, env={"WARMSTART_KB": str(tmp_path / "other")}).exit_code == 0
    # the same study again is refused (exit 0, nothing written); other trials are logged
    again = run(*args, "--kb", "other")
    assert again.exit_code == 0 and "already logged as" in again.output
    args[-1] = trials_file(tmp_path / "t2.jsonl", 1)
    assert run(*args, "--kb", "other").exit_code == 0
    count = {p: json.loads(run("kb", "info", "--kb", p, "--json").output)["studies"]
             for p in ("knowledge_base", "other")}
    assert count == {"knowledge_base": 1, "other": 2}


def test_nothing_to_suggest_exits_1(history, iris_csv, diabetes_csv, tmp_path):
    res = run("suggest", iris_csv, "--target", "target", "--family", "knn", "--kb", history)
    assert res.exit_code == 1 and "no classification study of family 'knn'" in res.output
    run("log", iris_csv, "--target", "target", "--family", "random_forest",
        "--trials", trials_file(tmp_path / "t.jsonl", 0), "--kb", history)
    # a regression dataset finds no classification study to borrow from
    res = run("suggest", diabetes_csv, "--target", "target", "--family", "random_forest",
              "--kb", history)
    assert res.exit_code == 1


def test_task_override(tmp_path, history):
    df = pd.DataFrame({"x": np.arange(60) % 7, "y": np.arange(60) % 3})
    df.to_csv(tmp_path / "d.csv", index=False)
    auto = json.loads(run("fingerprint", tmp_path / "d.csv", "--target", "y", "--json").output)
    forced = json.loads(run("fingerprint", tmp_path / "d.csv", "--target", "y",
                            "--task", "regression", "--json").output)
    assert auto["task"] == "classification" and forced["task"] == "regression"


def test_families_lists_six_families_with_spaces():
    res = run("families", "--json")
    fams = {f["name"]: f for f in json.loads(res.output)}
    assert {"hist_gradient_boosting", "random_forest", "extra_trees", "linear", "svm_rbf",
            "knn"} <= set(fams)
    rf = fams["random_forest"]["tasks"]["classification"]["space"]
    cond = next(p for p in rf if p["name"] == "max_samples")["condition"]
    assert cond == {"parent": "bootstrap", "in": [True]}
    assert "max_iter" in run("families").output


def test_fingerprint_reference_facts(iris_csv, cancer_csv, diabetes_csv):
    iris = json.loads(run("fingerprint", iris_csv, "--target", "target", "--json").output)
    mf = iris["meta_features"]
    # reference: scikit-learn iris documentation — 150 rows, 4 features, 50/50/50 classes
    assert (mf["rows"], mf["columns"], mf["classes"]) == (150, 4, 3)
    assert mf["class_entropy_normalised"] == pytest.approx(1.0)
    assert mf["minority_majority_ratio"] == 1.0
    assert mf["target_skewness"] is None  # regression-only: null in JSON
    cancer = json.loads(run("fingerprint", cancer_csv, "--target", "target", "--json").output)
    # reference: scikit-learn breast-cancer documentation — 212 malignant, 357 benign
    assert cancer["meta_features"]["minority_majority_ratio"] == pytest.approx(212 / 357)
    p = np.array([212, 357]) / 569
    # reference: scipy.stats.entropy (natural log), normalised by ln(2)
    assert cancer["meta_features"]["class_entropy_normalised"] == pytest.approx(
        stats.entropy(p) / np.log(2))
    X = load_breast_cancer().data
    # reference: scipy.stats.skew with its default bias=True (Fisher-Pearson g1)
    assert cancer["meta_features"]["numeric_skewness_max"] == pytest.approx(
        stats.skew(X, axis=0).max())
    diab = json.loads(run("fingerprint", diabetes_csv, "--target", "target", "--json").output)
    y = pd.read_csv(diabetes_csv)["target"].to_numpy()
    assert diab["task"] == "regression"
    assert diab["meta_features"]["target_skewness"] == pytest.approx(stats.skew(y))
    assert diab["meta_features"]["target_kurtosis"] == pytest.approx(stats.kurtosis(y))


def test_fingerprint_table_is_grouped(iris_csv):
    res = run("fingerprint", iris_csv, "--target", "target")
    assert res.exit_code == 0
    assert "[shape]" in res.output and "[target]" in res.output and "[missing]" in res.output


@pytest.mark.parametrize("case", ["missing file", "missing target", "empty file",
                                  "unknown family", "malformed trials", "bad parameter",
                                  "score out of range", "no score column"])
def test_bad_input_exits_2_and_leaves_history_unchanged(case, history, tmp_path, iris_csv):
    run("log", iris_csv, "--target", "target", "--family", "random_forest",
        "--trials", trials_file(tmp_path / "good.jsonl", 0), "--kb", history)
    before = dir_digest(history)
    data, target, family = iris_csv, "target", "random_forest"
    trials = trials_file(tmp_path / "t.jsonl", 1)
    if case == "missing file":
        data = tmp_path / "nope.csv"
    elif case == "missing target":
        target = "species"
    elif case == "empty file":
        data = tmp_path / "empty.csv"
        data.write_text("")
    elif case == "unknown family":
        family = "neural_soup"
    elif case == "malformed trials":
        trials = tmp_path / "bad.jsonl"
        trials.write_text('{"n_estimators": 10, "score": 0.9}\n{"n_estim')
    elif case == "bad parameter":
        trials = tmp_path / "bad.jsonl"
        trials.write_text('{"n_trees": 10, "score": 0.9}\n')
    elif case == "score out of range":
        trials = tmp_path / "bad.jsonl"
        trials.write_text('{"n_estimators": 10, "score": 1.9}\n')
    elif case == "no score column":
        trials = tmp_path / "bad.jsonl"
        trials.write_text('{"n_estimators": 10, "accuracy": 0.9}\n')
    res = run("log", data, "--target", target, "--family", family, "--trials", trials,
              "--kb", history)
    assert res.exit_code == 2, res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert dir_digest(history) == before
