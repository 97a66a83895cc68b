"""The history is readable by another engine as it is: DuckDB, applying the documented
visibility rule (history.py, DEVELOPERS.md "Storage design"), gets the counts of
``KnowledgeBase.info()`` -- also with leftovers of killed writers and duplicated rows of a
compaction in progress beside the demo history's files."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest
from sklearn.datasets import load_iris

from warmstart import KnowledgeBase, fingerprint
from warmstart.storage import PAUSE_ENV, PAUSE_SECONDS_ENV, TEMP_PREFIX

duckdb = pytest.importorskip("duckdb")

ROOT = Path(__file__).resolve().parents[1]
WRITER = ROOT / "tests" / "history_writer.py"
TABLES = ("datasets", "studies", "trials")

# The rule, in SQL: a study is visible once a file holds its row (one row per study_id);
# a row of trials/ or datasets/ counts only from a file of a committed study (files named
# <study_id>-<dataset_id>.parquet) or from a file of many studies (merged, imported),
# only for committed studies, and once per key.
COUNTS = """
WITH studies AS (
    SELECT DISTINCT study_id, dataset_id, family, task, metric FROM read_parquet($studies)
), visible_trials AS (
    SELECT DISTINCT t.study_id, t.trial_index
    FROM read_parquet($trials, filename = true) t
    WHERE t.study_id IN (SELECT study_id FROM studies)
      AND (NOT regexp_matches(parse_filename(t.filename), $log_name)
           OR regexp_extract(parse_filename(t.filename), $log_name, 1)
              IN (SELECT study_id FROM studies))
), visible_datasets AS (
    SELECT DISTINCT d.dataset_id
    FROM read_parquet($datasets, filename = true) d
    WHERE d.dataset_id IN (SELECT dataset_id FROM studies)
      AND (NOT regexp_matches(parse_filename(d.filename), $log_name)
           OR regexp_extract(parse_filename(d.filename), $log_name, 1)
              IN (SELECT study_id FROM studies))
)
SELECT (SELECT count(*) FROM visible_datasets), (SELECT count(*) FROM studies),
       (SELECT count(*) FROM visible_trials)
"""
BY_FAMILY = """
WITH studies AS (
    SELECT DISTINCT study_id, dataset_id, family, task, metric FROM read_parquet($studies)
), trials AS (
    SELECT DISTINCT study_id, trial_index FROM read_parquet($trials)
)
SELECT s.family, s.task, s.metric, count(DISTINCT s.study_id), count(DISTINCT s.dataset_id),
       count(t.trial_index)
FROM studies s LEFT JOIN trials t USING (study_id)
GROUP BY ALL ORDER BY ALL
"""
LOG_NAME = r"^([0-9a-f]{32})-([0-9a-f]{16})\.parquet$"


def listed(kb: Path, table: str) -> list[str]:
    """A table's files: hidden names (``.tmp-*`` of writers still writing) are not data."""
    return sorted(str(p) for p in (kb / table).iterdir()
                  if p.suffix == ".parquet" and not p.name.startswith((".", "_")))


def duckdb_counts(kb: Path) -> tuple[int, int, int]:
    con = duckdb.connect()
    files = {t: listed(kb, t) for t in TABLES}
    return con.execute(COUNTS, {**files, "log_name": LOG_NAME}).fetchone()


def _killed_writer(kb: Path, fp_file: Path, step: str) -> None:
    """A real writer process paused at ``step`` of its first log, then SIGKILLed."""
    before = {t: set(os.listdir(kb / t)) for t in TABLES}
    env = {**os.environ, "PYTHONPATH": str(ROOT), PAUSE_ENV: step, PAUSE_SECONDS_ENV: "60"}
    p = subprocess.Popen([sys.executable, str(WRITER), "write", str(kb), str(fp_file),
                          f"killed-{step}", "1"], env=env, stderr=subprocess.PIPE)
    target = "trials" if step == "after-trials" else "datasets"
    deadline = time.monotonic() + 60
    while not set(os.listdir(kb / target)) - before[target]:
        assert p.poll() is None and time.monotonic() < deadline, p.stderr.read()
        time.sleep(0.05)
    time.sleep(0.2)  # well inside the pause
    p.send_signal(signal.SIGKILL)
    p.wait()
    p.stderr.close()


@pytest.fixture(scope="module")
def messy_kb(tmp_path_factory) -> Path:
    """The demo history plus what a reader must not count twice or at all."""
    kb = tmp_path_factory.mktemp("duck") / "kb"
    shutil.copytree(ROOT / "knowledge_base", kb)
    fp_file = kb.parent / "iris.json"
    # reference dataset: scikit-learn's bundled iris
    fp_file.write_text(fingerprint(load_iris(as_frame=True).frame, target="target").to_json())
    _killed_writer(kb, fp_file, "after-trials")  # dataset and trials rows, no study row
    _killed_writer(kb, fp_file, "mid-file")      # a half-written .tmp-* file
    # a compaction that wrote its merged files and has not yet deleted the originals
    for table in TABLES:
        first = listed(kb, table)[0]
        shutil.copy(first, kb / table / f"merged-{uuid.uuid4().hex}.parquet")
    return kb


def test_duckdb_counts_the_demo_history_as_kb_info_does():
    kb = ROOT / "knowledge_base"
    info = KnowledgeBase(kb).info()
    assert duckdb_counts(kb) == (info["datasets"], info["studies"], info["trials"])
    con = duckdb.connect()
    rows = con.execute(BY_FAMILY, {t: listed(kb, t) for t in ("studies", "trials")}).fetchall()
    assert [tuple(r) for r in rows] == [
        (f["family"], f["task"], f["metric"], f["studies"], f["datasets"], f["trials"])
        for f in info["by_family"]]


def test_duckdb_with_the_visibility_rule_ignores_leftovers_and_duplicates(messy_kb):
    info = KnowledgeBase(messy_kb).info()
    demo = KnowledgeBase(ROOT / "knowledge_base").info()
    assert (info["datasets"], info["studies"], info["trials"]) == (
        demo["datasets"], demo["studies"], demo["trials"])
    assert duckdb_counts(messy_kb) == (info["datasets"], info["studies"], info["trials"])
    assert any(p.name.startswith(TEMP_PREFIX) for p in (messy_kb / "datasets").iterdir())
    # without the rule the counts are wrong: the rule is what makes them agree
    con = duckdb.connect()
    rows, keys = con.execute(
        "SELECT count(*), count(DISTINCT (study_id, trial_index)) FROM read_parquet($f)",
        {"f": listed(messy_kb, "trials")}).fetchone()
    assert rows > keys > info["trials"]  # duplicates, and trials of an uncommitted study
