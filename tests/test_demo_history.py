"""The shipped demo history (knowledge_base/) and the example files (examples/).

The committed history must be what ``examples/make_demo_history.py`` builds today:
one small study is rebuilt here and compared, fingerprint and trials, with the
committed one.
"""

from __future__ import annotations

import importlib.util
import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.model_selection import KFold, cross_val_score
from threadpoolctl import threadpool_limits

from cli.main import main
from warmstart.families import get_family
from warmstart.fingerprint import CATALOGUE, CATALOGUE_VERSION
from warmstart.history import KnowledgeBase
from warmstart.metrics import resolve_metric
from warmstart.pipelines import make_pipeline
from warmstart.trials import check_trials

ROOT = Path(__file__).resolve().parent.parent
KB_PATH = ROOT / "knowledge_base"
EXAMPLE_CSV = ROOT / "examples" / "quillmarsh_loyalty_churn.csv"
EXAMPLE_TRIALS = ROOT / "examples" / "quillmarsh_loyalty_churn_trials.csv"
STALE = "demo history is stale: run python examples/make_demo_history.py"


def _load_generator():
    path = ROOT / "examples" / "make_demo_history.py"
    spec = importlib.util.spec_from_file_location("make_demo_history", path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


gen = _load_generator()


@pytest.fixture(scope="module")
def committed() -> dict[str, pd.DataFrame]:
    return KnowledgeBase(KB_PATH).tables()


def _study(tables, label: str, family: str) -> tuple[pd.Series, pd.DataFrame, pd.Series]:
    """The committed study row, its trials (in order) and its dataset row."""
    studies = tables["studies"]
    match = studies[(studies["label"] == label) & (studies["family"] == family)]
    if len(match) != 1:
        pytest.fail(f"{STALE} (expected one {family} study labelled {label}, "
                    f"found {len(match)})")
    study = match.iloc[0]
    trials = tables["trials"][tables["trials"]["study_id"] == study["study_id"]]
    dataset = tables["datasets"][tables["datasets"]["dataset_id"] == study["dataset_id"]]
    return study, trials.sort_values("trial_index"), dataset.iloc[0]


# -- (a) the committed history -----------------------------------------------------------
def test_committed_history_is_complete(committed):
    datasets, studies, trials = committed["datasets"], committed["studies"], committed["trials"]
    assert len(datasets) >= 25
    assert set(datasets["task"]) == {"classification", "regression"}
    assert studies["family"].nunique() >= 2
    counts = trials.groupby("study_id").size()
    assert (studies["study_id"].map(counts).fillna(0).astype(int)
            == studies["trial_count"]).all()
    # Every dataset the generator declares is there, with one study per declared family.
    expected = {(gen.LABEL_PREFIX + s.name, f) for s in gen.DATASETS.values()
                for f in s.families}
    found = set(zip(studies["label"], studies["family"]))
    assert found == expected, STALE
    assert (trials["status"] == "ok").mean() > 0.9


def test_committed_history_spans_varied_datasets(committed):
    """Class balance from balanced to about 1:50, missing shares from none to over 10 %."""
    fps = KnowledgeBase(KB_PATH).fingerprints(committed["datasets"])
    cls = [fp.values["minority_majority_ratio"] for fp in fps.values()
           if fp.task == "classification"]
    missing = [fp.values["missing_cell_fraction"] for fp in fps.values()]
    rows = [fp.values["rows"] for fp in fps.values()]
    assert min(cls) <= 1 / 40 and max(cls) >= 0.9
    assert min(missing) == 0.0 and max(missing) >= 0.1
    assert min(rows) <= 250 and max(rows) >= 7000


# -- (b) the committed history reproduces --------------------------------------------------
def test_smallest_study_reproduces(committed, tmp_path):
    spec = min(gen.DATASETS.values(), key=lambda s: len(s.frame()))
    family = gen.HGB
    label = gen.LABEL_PREFIX + spec.name
    study, old_trials, old_dataset = _study(committed, label, family)

    df = spec.frame()
    fp = gen.demo_fingerprint(spec, df)
    old_values = json.loads(old_dataset["meta_features"])
    if (int(old_dataset["catalogue_version"]) != CATALOGUE_VERSION
            or set(old_values) != set(CATALOGUE)):
        pytest.fail(f"{STALE} (it has catalogue version {old_dataset['catalogue_version']} "
                    f"with {len(old_values)} meta-features; this warmstart has "
                    f"{CATALOGUE_VERSION} with {len(CATALOGUE)})")
    assert old_dataset["dataset_id"] == fp.dataset_hash[:16], f"{STALE} (data changed)"
    differ = [k for k, v in fp.values.items()
              if not _close(v, np.nan if old_values[k] is None else old_values[k])]
    assert not differ, f"{STALE} (meta-features changed: {', '.join(differ)})"

    # Rebuild the study as the generator does, log it into a fresh history, read it back.
    kb = KnowledgeBase.init(tmp_path / "kb")
    kb.log(fingerprint_of=fp, family=family, trials=gen.run_study(spec, family, df),
           name=label)
    new_trials = kb.tables()["trials"].sort_values("trial_index")
    assert list(new_trials["config"]) == list(old_trials["config"]), STALE
    assert np.allclose(new_trials["score"], old_trials["score"], rtol=0, atol=1e-9,
                       equal_nan=True), STALE
    assert list(new_trials["status"]) == list(old_trials["status"])

    # The stored score is a plain scikit-learn cross-validation of the stored config.
    # reference: sklearn.model_selection.cross_val_score (mean over shuffled KFold)
    best = old_trials.loc[old_trials["score"].idxmax()]
    X, y = df.drop(columns=[spec.target]), df[spec.target]
    seed = gen.seed_for("cv", spec.name, family)
    pipe = make_pipeline(get_family(family), spec.task, json.loads(best["config"]), X, seed)
    with threadpool_limits(1):  # as the generator runs; threads only contend on a busy box
        scores = cross_val_score(pipe, X, y, scoring="r2",
                                 cv=KFold(gen.N_FOLDS, shuffle=True, random_state=seed))
    assert spec.task == "regression"
    assert math.isclose(scores.mean(), best["score"], abs_tol=1e-9)


def _close(a: float, b: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-9)


def test_configs_are_seeded_samples_of_the_narrowed_space():
    space = gen.affordable_space(gen.RF, "classification")
    a = gen.sample_configs("returns-card-fraud", gen.RF, "classification")
    assert a == gen.sample_configs("returns-card-fraud", gen.RF, "classification")
    assert a != gen.sample_configs("warranty-claim", gen.RF, "classification")
    assert all(space.validate(c) == c for c in a)
    assert max(c["n_estimators"] for c in a) <= 100


# -- (c) the example files --------------------------------------------------------------------
def test_example_dataset_is_new_and_suggest_gives_provenance(committed):
    df = pd.read_csv(EXAMPLE_CSV)
    assert 3000 <= len(df) <= 5000 and set(df["churned"]) == {0, 1}
    assert df.isna().any().any()
    runner = CliRunner()
    res = runner.invoke(main, ["suggest", str(EXAMPLE_CSV), "--target", "churned",
                               "--family", gen.HGB, "-k", "5", "--kb", str(KB_PATH), "--json"])
    assert res.exit_code == 0, res.output
    found = json.loads(res.output)
    assert len(found) == 5
    studies = committed["studies"].set_index("study_id")
    space = get_family(gen.HGB).space("classification")
    for s in found:
        assert s["study_id"] in studies.index
        assert studies.loc[s["study_id"], "family"] == gen.HGB
        assert s["source_name"].startswith(gen.LABEL_PREFIX)
        assert s["distance"] > 0  # the example is not one of the history's datasets
        assert space.validate(s["config"]) == s["config"]
    res = runner.invoke(main, ["similar", str(EXAMPLE_CSV), "--target", "churned",
                               "--kb", str(KB_PATH), "--json"])
    assert res.exit_code == 0, res.output
    names = [n["name"] for n in json.loads(res.output)]
    # The generator draws the example in the spirit of the loyalty-lapse table.
    assert gen.LABEL_PREFIX + "loyalty-lapse" in names[:3]


def test_example_trials_file_logs(tmp_path):
    trials = pd.read_csv(EXAMPLE_TRIALS)
    checked = check_trials(trials, get_family(gen.HGB), "classification",
                           resolve_metric("balanced_accuracy"))
    assert [t.status for t in checked].count("failed") == 1
    kb_dir = tmp_path / "kb"
    runner = CliRunner()
    assert runner.invoke(main, ["kb", "init", str(kb_dir)]).exit_code == 0
    res = runner.invoke(main, ["log", str(EXAMPLE_CSV), "--target", "churned", "--family",
                               gen.HGB, "--trials", str(EXAMPLE_TRIALS), "--kb", str(kb_dir),
                               "--json"])
    assert res.exit_code == 0, res.output
    logged = json.loads(res.stdout)  # stderr has the fingerprint warnings
    assert logged["trial_count"] == len(trials) and logged["n_ok"] == len(trials) - 1
