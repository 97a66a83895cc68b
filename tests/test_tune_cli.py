"""``warmstart tune`` through click's CliRunner."""

from __future__ import annotations

import json

from click.testing import CliRunner

from cli.main import main
from tests.conftest import dir_digest
from tests.test_tune import interrupt_on_call


def run(*args, env=None):
    return CliRunner().invoke(main, [str(a) for a in args], env=env)


def test_tune_logs_and_similar_then_finds_the_dataset(kb, iris_csv, tmp_path):
    out = tmp_path / "best.json"
    r = run("tune", iris_csv, "--target", "target", "--family", "knn", "--budget", 3,
            "--cv", 3, "--kb", kb.path, "--out", out)
    assert r.exit_code == 0, r.output + r.stderr
    assert "starting cold" in r.stdout and "logged study" in r.stdout
    lines = r.stdout.splitlines()
    header = next(i for i, ln in enumerate(lines) if ln.startswith("rank"))
    ranked = [ln.split() for ln in lines[header + 2: header + 5]]
    scores = [float(row[3]) for row in ranked]
    assert scores == sorted(scores, reverse=True)  # ranked best first
    saved = json.loads(out.read_text())
    assert saved["score"] == max(t for t in kb.tables()["trials"]["score"])
    s = run("similar", iris_csv, "--target", "target", "--kb", kb.path)
    assert s.exit_code == 0 and "iris" in s.stdout


def test_no_log_leaves_the_history_unchanged(kb, iris_csv):
    before = dir_digest(kb.path)
    r = run("tune", iris_csv, "-t", "target", "-f", "linear", "-n", 2, "--cv", 2,
            "--kb", kb.path, "--no-log")
    assert r.exit_code == 0, r.output
    assert "logged study" not in r.stdout
    assert dir_digest(kb.path) == before


def test_no_log_needs_no_history(iris_csv, tmp_path):
    r = run("tune", iris_csv, "-t", "target", "-f", "linear", "-n", 2, "--cv", 2,
            "--kb", tmp_path / "nothing-here", "--no-log", "--json")
    assert r.exit_code == 0, r.output
    doc = json.loads(r.stdout)
    assert len(doc["trials"]) == 2 and doc["logged"] is None
    assert doc["notes"] == ["no history: starting cold"]
    assert not (tmp_path / "nothing-here").exists()


def test_interrupt_exits_130_after_logging_finished_trials(kb, iris_csv, monkeypatch):
    interrupt_on_call(monkeypatch, 3)
    r = run("tune", iris_csv, "-t", "target", "-f", "knn", "-n", 6, "--cv", 2,
            "--kb", kb.path)
    assert r.exit_code == 130  # reference: common practice, 128 + SIGINT (2)
    assert "interrupted" in r.stderr
    t = kb.tables()
    assert len(t["studies"]) == 1 and t["studies"]["source"].iloc[0] == "tune"
    assert len(t["trials"]) == 2


def test_progress_bar_can_be_forced_on(iris_csv):
    r = run("tune", iris_csv, "-t", "target", "-f", "linear", "-n", 3, "--cv", 2,
            "--no-log", "--kb", "missing", "--progress")
    assert r.exit_code == 0, r.output
    assert "3/3" in r.stderr and "best 0." in r.stderr
    quiet = run("tune", iris_csv, "-t", "target", "-f", "linear", "-n", 2, "--cv", 2,
                "--no-log", "--kb", "missing")
    assert "best 0." not in quiet.stderr  # not a terminal: no bar by default
    forced = run("tune", iris_csv, "-t", "target", "-f", "linear", "-n", 2, "--cv", 2,
                 "--no-log", "--kb", "missing", env={"WARMSTART_PROGRESS": "1"})
    assert "2/2" in forced.stderr


def test_bad_input_exits_2_and_writes_nothing(kb, iris_csv):
    before = dir_digest(kb.path)
    for args in (["-n", 0], ["-n", 2, "--cv", 1], ["-n", 2, "--metric", "nonsense"],
                 ["-n", 2, "--strategy", "nonsense"]):
        r = run("tune", iris_csv, "-t", "target", "-f", "knn", *args, "--kb", kb.path)
        assert r.exit_code == 2 and r.stderr.startswith("error: "), r.output
    r = run("tune", iris_csv, "-t", "target", "-f", "knn", "-n", 2, "--kb", "not-a-history")
    assert r.exit_code == 2 and "not a warmstart history" in r.stderr
    assert dir_digest(kb.path) == before
