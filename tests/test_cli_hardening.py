"""The command line under hostile or unusual conditions, and what it tells a new user.

Real files and, where a hang, a real stderr or another user matters, real subprocesses
(``python -m cli.main``) with timeouts.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_diabetes, load_iris, load_wine

from cli.main import main
from tests.conftest import dir_digest
from warmstart.families import FAMILIES
from warmstart.history import KnowledgeBase

ROOT = Path(__file__).resolve().parent.parent
TRIALS = "n_estimators,max_depth,score,fit_seconds\n100,4,0.95,0.3\n200,,0.96,0.5\n"


def run(*args: str, timeout: float = 120, env: dict | None = None, **kw
        ) -> subprocess.CompletedProcess:
    """The real command line in a subprocess (the FIFO test must not hang the suite)."""
    full_env = {**os.environ, "PYTHONWARNINGS": "default", **(env or {})}
    return subprocess.run([sys.executable, "-m", "cli.main", *map(str, args)], cwd=ROOT,
                          capture_output=True, text=True, timeout=timeout, env=full_env,
                          **kw)


def invoke(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env)


@pytest.fixture
def history(tmp_path) -> Path:
    """A history with random_forest studies of two real datasets (iris, wine)."""
    kb = KnowledgeBase.init(tmp_path / "kb").path
    (tmp_path / "trials.csv").write_text(TRIALS)
    # reference datasets: scikit-learn's bundled iris and wine
    for name, loader in (("iris", load_iris), ("wine", load_wine)):
        loader(as_frame=True).frame.to_csv(tmp_path / f"{name}.csv", index=False)
        r = invoke("log", tmp_path / f"{name}.csv", "-t", "target", "-f", "random_forest",
                   "--trials", tmp_path / "trials.csv", "--kb", kb)
        assert r.exit_code == 0, r.output
    return kb


# -- 1. one-line errors ------------------------------------------------------------------
def test_a_history_file_that_cannot_be_read_is_one_line(tmp_path):
    kb = KnowledgeBase.init(tmp_path / "kb").path
    marker = kb / "warmstart-history.json"
    marker.unlink()
    marker.mkdir()  # reading it raises IsADirectoryError, an OSError, even for root
    data = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(data, index=False)
    for args in (["similar", data, "-t", "target"], ["kb", "info"]):
        r = invoke(*args, "--kb", kb)
        assert r.exit_code == 2, r.output
        lines = r.output.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: "), r.output


def test_unreadable_history_and_data_are_one_line_for_another_user(tmp_path):
    if os.geteuid() != 0:
        pytest.skip("needs root to run the command as another user")
    try:
        probe = subprocess.run([sys.executable, "-c", "import cli.main"], cwd=ROOT,
                               user=65534, capture_output=True).returncode
    except PermissionError:
        probe = -1
    if probe != 0:
        pytest.skip("this Python or the project is not readable by user 65534")
    # pytest's tmp_path is private to root: work in a folder another user can enter
    work = Path(tempfile.mkdtemp(prefix="warmstart-other-user-"))
    try:
        work.chmod(0o755)
        kb = KnowledgeBase.init(work / "kb").path
        data = work / "iris.csv"
        load_iris(as_frame=True).frame.to_csv(data, index=False)
        for p in [kb, *kb.rglob("*")]:
            p.chmod(0o700 if p.is_dir() else 0o600)  # root's alone
        data.chmod(0o600)
        before = dir_digest(kb)
        nobody = dict(user=65534, group=65534, extra_groups=[])
        for args in (["similar", data, "-t", "target", "--kb", kb],
                     ["kb", "info", "--kb", kb]):
            r = run(*args, **nobody, env={"HOME": str(work)})
            assert r.returncode == 2, (r.stdout, r.stderr)
            lines = r.stderr.strip().splitlines()
            assert len(lines) == 1 and lines[0].startswith("error: "), r.stderr
            assert "Permission denied" in lines[0] or "not readable" in lines[0], lines[0]
            assert "Traceback" not in r.stderr
        assert dir_digest(kb) == before
    finally:
        shutil.rmtree(work)


# -- 5. no hanging -----------------------------------------------------------------------
@pytest.mark.parametrize("what", ["data", "trials", "--fingerprint", "--space"])
def test_a_fifo_is_refused_without_waiting_for_a_writer(tmp_path, what):
    kb = KnowledgeBase.init(tmp_path / "kb").path
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    data = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(data, index=False)
    (tmp_path / "t.csv").write_text(TRIALS)
    args = {"data": ["fingerprint", fifo, "-t", "target"],
            "trials": ["log", data, "-t", "target", "-f", "random_forest", "--trials", fifo,
                       "--kb", kb],
            "--fingerprint": ["similar", "--fingerprint", fifo, "--kb", kb],
            "--space": ["tune", data, "-t", "target", "-f", "random_forest", "-n", 1,
                        "--space", fifo, "--no-log"]}[what]
    r = run(*args, timeout=60)  # a read of the FIFO would block forever
    assert r.returncode == 2, r.stderr
    assert r.stderr.strip().splitlines() == [r.stderr.strip()]
    assert "named pipe (FIFO)" in r.stderr


# -- 3. extreme values -------------------------------------------------------------------
@pytest.mark.parametrize("kind", ["near 1e307", "uint64 near 2**64"])
def test_extreme_regression_targets_are_not_called_constant(tmp_path, kind):
    rng = np.random.default_rng(0)
    n = 300
    if kind == "near 1e307":
        # reference: numpy.finfo(float64).max is about 1.798e308, so these are finite but
        # their squares (a variance) overflow
        y = 1e307 * (1 + rng.random(n))
        path = tmp_path / "big.csv"
        pd.DataFrame({"x": rng.normal(size=n), "target": y}).to_csv(path, index=False)
    else:
        # reference: numpy.iinfo(uint64).max = 2**64 - 1
        y = np.uint64(2**64 - 1) - rng.integers(0, 10**6, n).astype(np.uint64) * np.uint64(8192)
        path = tmp_path / "u64.parquet"
        pd.DataFrame({"x": rng.normal(size=n), "target": y}).to_parquet(path)
    assert len(np.unique(y)) > 1
    r = run("fingerprint", path, "-t", "target", "--json")
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["task"] == "regression"
    assert "Warning" not in r.stderr and "warn(" not in r.stderr, r.stderr  # numpy's


# -- 4. header names ---------------------------------------------------------------------
def test_headers_na_null_nan_are_column_names(tmp_path):
    path = tmp_path / "names.csv"
    rng = np.random.default_rng(1)
    # reference: RFC 4180 -- the header line holds field names, whatever their spelling
    frame = pd.DataFrame(rng.normal(size=(60, 3)), columns=["NA", "null", "nan"])
    frame["target"] = rng.integers(0, 2, 60)
    frame.to_csv(path, index=False)
    r = invoke("fingerprint", path, "-t", "target", "--json")
    assert r.exit_code == 0, r.output
    assert json.loads(r.stdout)["meta_features"]["columns"] == 3


# -- 13. consistent answers --------------------------------------------------------------
def test_empty_history_is_exit_1_nothing_to_compare_with(tmp_path):
    kb = KnowledgeBase.init(tmp_path / "kb").path
    data = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(data, index=False)
    for args in (["similar", data, "-t", "target"],
                 ["suggest", data, "-t", "target", "-f", "random_forest"],
                 ["backtest", "-f", "random_forest"]):
        r = invoke(*args, "--kb", kb)
        assert r.exit_code == 1, (args, r.output)
        assert "nothing to compare with" in r.output and "warmstart log" in r.output


def test_similar_says_how_many_candidates_and_prints_the_task(history, tmp_path):
    r = invoke("similar", tmp_path / "iris.csv", "-t", "target", "-k", 5, "--kb", history)
    assert r.exit_code == 0, r.output
    assert "task: classification (inferred from target 'target')" in r.output
    assert "only 2 classification datasets in the history (asked for 5)" in r.output


def test_suggest_distance_matches_similar_or_says_why(history, tmp_path):
    args = [tmp_path / "iris.csv", "-t", "target", "--kb", history, "--json"]
    near = json.loads(invoke("similar", *args).stdout)
    sug = json.loads(invoke("suggest", *args, "-f", "random_forest").stdout)
    by_name = {n["name"]: n["distance"] for n in near}
    same = all(abs(by_name[s["source_name"]] - s["distance"]) < 1e-9
               for s in sug if s.get("source_name") in by_name)
    text = invoke("suggest", *args[:-1], "-f", "random_forest").output
    assert same or "scaled over the datasets with a study of this family" in text
    assert "task: classification" in text


def test_suggest_plural_and_no_metric_default_for_random(history, tmp_path):
    r = invoke("suggest", tmp_path / "iris.csv", "-t", "target", "-f", "random_forest",
               "-k", 1, "-s", "random", "--kb", history)
    assert r.exit_code == 0, r.output
    assert "1 starting configuration for" in r.output
    assert "configurations for" not in r.output and "metric default" not in r.output


# -- 14. output fits the terminal --------------------------------------------------------
def test_tables_fit_columns_and_name_wide(history, tmp_path):
    args = ["suggest", tmp_path / "iris.csv", "-t", "target", "-f", "random_forest",
            "--kb", history]
    narrow = invoke(*args, env={"COLUMNS": "60"}).output.splitlines()
    table = [ln for ln in narrow if ln.startswith(("#  ", "-  ", "1  ", "2  "))]
    assert table and all(len(ln) <= 60 for ln in table), table
    assert any("--wide shows everything" in ln for ln in narrow)
    wide = invoke(*args, "--wide", env={"COLUMNS": "60"}).output
    assert "configuration" in wide and max(map(len, wide.splitlines())) > 60


def test_backtest_writes_no_progress_when_stderr_is_not_a_terminal(history, tmp_path):
    r = run("backtest", "-f", "random_forest", "--strategies", "defaults",
            "--random-repeats", 1, "--plot", tmp_path / "regret.png", "--kb", history)
    assert r.returncode == 0, r.stderr
    assert r.stderr == ""  # no "held-out datasets" bar in a pipe
    assert (tmp_path / "regret.png").read_bytes()[:4] == b"\x89PNG"


# -- 2. outputs checked before any trial --------------------------------------------------
def test_tune_with_an_unwritable_out_runs_no_trial(tmp_path):
    kb = KnowledgeBase.init(tmp_path / "kb").path
    data = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(data, index=False)
    before = dir_digest(kb)
    r = run("tune", data, "-t", "target", "-f", "random_forest", "-n", 3,
            "--out", tmp_path / "missing" / "best.json", "--kb", kb)
    assert r.returncode == 2 and r.stdout == "", (r.stdout, r.stderr)
    assert "does not exist" in r.stderr
    assert dir_digest(kb) == before


# -- 15. help that teaches ---------------------------------------------------------------
def _commands(group, path=()):
    for name, cmd in group.commands.items():
        yield (*path, name)
        if hasattr(cmd, "commands"):
            yield from _commands(cmd, (*path, name))


@pytest.mark.parametrize("path", [(), *_commands(main)], ids=lambda p: " ".join(p) or "-")
def test_every_help_ends_with_an_example(path):
    r = invoke(*path, "--help")
    assert r.exit_code == 0
    lines = r.output.rstrip().splitlines()
    assert lines[-2].strip() == "Example:" and lines[-1].strip().startswith("warmstart ")


def test_family_and_trials_options_list_their_values():
    text = " ".join(invoke("log", "--help").output.split())
    assert all(name in text for name in FAMILIES)
    assert all(col in text for col in ("'score'", "'fit_seconds'", "'status'", "'error'"))


def test_the_example_space_file_is_accepted_and_respected(history, tmp_path):
    space = ROOT / "examples" / "space_random_forest.json"
    r = invoke("suggest", tmp_path / "iris.csv", "-t", "target", "-f", "random_forest",
               "--space", space, "--kb", history, "--json")
    assert r.exit_code == 0, r.output
    bounds = {e["name"]: e for e in json.loads(space.read_text())}
    for s in json.loads(r.stdout):
        n = s["config"].get("n_estimators", 100)
        assert bounds["n_estimators"]["low"] <= n <= bounds["n_estimators"]["high"]
        assert s["config"].get("criterion", "gini") in bounds["criterion"]["choices"]


# -- 16. leakage -------------------------------------------------------------------------
def _leaky(tmp_path) -> Path:
    # reference: common practice -- a copy of the target is the textbook leak
    frame = load_diabetes(as_frame=True).frame
    frame["target_copy"] = frame["target"] * 2.0 + 1.0
    path = tmp_path / "leaky.csv"
    frame.to_csv(path, index=False)
    return path


def test_leakage_is_warned_by_fingerprint_log_and_tune(tmp_path):
    path = _leaky(tmp_path)
    kb = KnowledgeBase.init(tmp_path / "kb").path
    (tmp_path / "t.csv").write_text("alpha,score\n1.0,0.4\n")
    fp = run("fingerprint", path, "-t", "target")
    log = run("log", path, "-t", "target", "-f", "linear", "--trials", tmp_path / "t.csv",
              "--kb", kb)
    tune = run("tune", path, "-t", "target", "-f", "linear", "-n", 1, "--cv", 2,
               "--no-log")
    for r, stream in ((fp, fp.stderr), (log, log.stderr), (tune, tune.stdout)):
        assert r.returncode == 0, r.stderr
        assert "possible leakage" in stream and "target_copy (|r| = 1.000)" in stream


def test_no_leakage_warning_on_real_datasets_without_leaks(tmp_path):
    # iris: petal sizes separate the classes well but not almost perfectly (reference:
    # Fisher 1936, versicolor and virginica overlap)
    path = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(path, index=False)
    r = invoke("fingerprint", path, "-t", "target", "--json")
    assert not [w for w in json.loads(r.stdout)["warnings"] if "leakage" in w]


# -- 17. tune says what it did -----------------------------------------------------------
def test_tune_reports_dropped_columns_neighbours_and_takes_max_fit_seconds(history, tmp_path):
    frame = load_iris(as_frame=True).frame
    frame["shop"] = "north"  # a constant column, dropped from the model
    path = tmp_path / "iris_shop.csv"
    frame.to_csv(path, index=False)
    r = invoke("tune", path, "-t", "target", "-f", "random_forest", "-n", 2, "--cv", 2,
               "--max-fit-seconds", 100, "--no-log", "--kb", history)
    assert r.exit_code == 0, r.output
    assert "constant columns dropped: shop" in r.output
    assert "from the nearest datasets: iris (distance" in r.output
    assert "task: classification" in r.output


def test_tune_on_an_empty_history_does_not_say_log_first(tmp_path):
    kb = KnowledgeBase.init(tmp_path / "kb").path
    path = tmp_path / "iris.csv"
    load_iris(as_frame=True).frame.to_csv(path, index=False)
    r = invoke("tune", path, "-t", "target", "-f", "random_forest", "-n", 1, "--cv", 2,
               "--kb", kb)
    assert r.exit_code == 0, r.output
    assert "starting cold" in r.output and "log one first" not in r.output


# -- 19. docs ----------------------------------------------------------------------------
def test_realdata_readme_has_no_machine_paths():
    text = (ROOT / "benchmarks" / "realdata" / "README.md").read_text()
    assert "cd /" not in text and "/work/" not in text
