"""Many writers at once, and writers killed at any moment, on real files.

Writers are real processes (``tests/history_writer.py``); kills are real SIGKILLs.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest
from sklearn.datasets import load_iris

from warmstart import fingerprint
from warmstart.history import KnowledgeBase
from warmstart.maintenance import summary
from warmstart.storage import PAUSE_ENV, PAUSE_SECONDS_ENV, PAUSE_STEPS, temp_files

WRITER = Path(__file__).with_name("history_writer.py")
ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture
def fp_file(tmp_path: Path) -> Path:
    # One fingerprint computed once (reference dataset: scikit-learn's bundled iris).
    path = tmp_path / "iris-fp.json"
    path.write_text(fingerprint(load_iris(as_frame=True).frame, target="target").to_json())
    return path


def run_writer(*args: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, str(WRITER), *args], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def assert_consistent(kb: KnowledgeBase) -> dict:
    """What a reader sees: whole studies only, each with its dataset and all its trials."""
    t = kb.tables()
    studies, trials = t["studies"], t["trials"]
    counts = trials.groupby("study_id").size()
    assert (studies["study_id"].map(counts).fillna(0) == studies["trial_count"]).all()
    assert trials["study_id"].isin(studies["study_id"]).all()
    assert studies["dataset_id"].isin(t["datasets"]["dataset_id"]).all()
    assert not studies["study_id"].duplicated().any()
    return t


def test_eight_concurrent_writers_land_every_study_once(tmp_path, fp_file):
    kb = KnowledgeBase.init(tmp_path / "kb")
    n_proc, n_each = 8, 50
    procs = [run_writer("fork-write", str(kb.path), str(fp_file), str(n_proc), str(n_each))]
    reads = 0
    while any(p.poll() is None for p in procs):  # a reader racing the writers
        assert_consistent(kb)
        reads += 1
        time.sleep(0.3)
    for p in procs:
        out, err = p.communicate()
        assert p.returncode == 0, err
    t = assert_consistent(kb)
    expected = {f"w{p}-{i}" for p in range(n_proc) for i in range(n_each)}
    assert sorted(t["studies"]["label"]) == sorted(expected)  # each exactly once
    assert len(t["trials"]) == 3 * n_proc * n_each
    assert len(t["datasets"]) == 1  # the same dataset, logged by 400 studies
    committed = (tmp_path / "kb.committed").read_text().split()
    assert sorted(committed) == sorted(t["studies"]["study_id"])
    assert temp_files(kb.path) == []
    report = kb.check(grace_seconds=0)
    assert report.ok, report.problems
    assert reads > 0


def test_writers_killed_mid_write_leave_nothing_visible(tmp_path, fp_file):
    kb = KnowledgeBase.init(tmp_path / "kb")
    rounds = 30
    p = run_writer("kill", str(kb.path), str(fp_file), str(rounds), "7")
    out, err = p.communicate(timeout=120)
    assert p.returncode == 0, err
    lines = [json.loads(x) for x in out.splitlines()]
    results = lines[1:]
    assert len(results) == rounds and all(r["killed"] for r in results)
    mid = [r for r in results if r["mid_write"]]
    paused = results[:2 * len(PAUSE_STEPS)]
    print(f"\nkills: {rounds}, landed mid-write: {len(mid)} "
          f"(at a paused step: {sum(r['mid_write'] for r in paused)}/{len(paused)}, "
          f"at random times: {sum(r['mid_write'] for r in results[len(paused):])}/"
          f"{rounds - len(paused)}); measured write {lines[0]['measured_write_seconds']:.3f} s")
    assert len(mid) >= len(paused) // 2  # the kills really hit the write path

    # Readers see only whole studies, and every study whose log returned is there.
    t = assert_consistent(kb)
    committed = set((tmp_path / "kb.committed").read_text().split())
    assert committed <= set(t["studies"]["study_id"])
    before = summary(kb)

    # check sees the leftovers; repair removes them without touching committed rows.
    report = kb.check(grace_seconds=0)
    assert not report.ok
    assert [f.check for f in report.problems] == ["leftovers of killed writers"]
    young = kb.check()  # default grace: fresh leftovers may belong to a live writer
    assert young.ok and any(f.status == "note" for f in young.findings)
    repaired = kb.check(repair=True, grace_seconds=0)
    assert repaired.ok
    assert temp_files(kb.path) == []
    assert kb.check(grace_seconds=0).ok
    after = summary(kb)
    assert after["content_hash"] == before["content_hash"]
    assert after["files"] == 3 * after["studies"]


# -- deleting ---------------------------------------------------------------------------
def test_deletes_beside_writers_compactions_and_readers(tmp_path, fp_file):
    kb = KnowledgeBase.init(tmp_path / "kb")
    first = run_writer("write", str(kb.path), str(fp_file), "old", "30")
    assert first.wait() == 0, first.stderr.read()
    old = sorted(kb.tables()["studies"]["study_id"])
    doomed = old[::2]
    ids = tmp_path / "doomed.txt"
    ids.write_text("\n".join(doomed) + "\n")
    procs = [run_writer("fork-write", str(kb.path), str(fp_file), "2", "25"),
             run_writer("compact", str(kb.path), str(fp_file), "15"),
             run_writer("delete", str(kb.path), str(fp_file), str(ids))]
    reads = 0
    while any(p.poll() is None for p in procs):  # a reader racing all three
        t = assert_consistent(kb)
        done = set((tmp_path / "kb.deleted").read_text().split()) if (
            tmp_path / "kb.deleted").exists() else set()
        # a delete that returned is seen by every read that starts after it
        assert not done & set(kb.tables()["studies"]["study_id"])
        reads += 1
    for p in procs:
        _out, err = p.communicate()
        assert p.returncode == 0, err
    t = assert_consistent(kb)
    live = set(t["studies"]["study_id"])
    assert not live & set(doomed)
    assert set(old) - set(doomed) <= live
    assert len(live) == len(old) - len(doomed) + 2 * 25
    assert kb.check(grace_seconds=0).ok
    kb.compact()
    for table in ("studies", "trials"):
        held = {s for f in (kb.path / table).glob("*.parquet")
                for s in pq.read_table(f, columns=["study_id"]).column("study_id").to_pylist()}
        assert not held & set(doomed)  # compaction dropped every deleted row
    assert reads > 0


@pytest.mark.parametrize("step", ["mid-file", "before-rename"])
def test_a_delete_killed_mid_write_deletes_nothing(tmp_path, fp_file, step):
    kb = KnowledgeBase.init(tmp_path / "kb")
    w = run_writer("write", str(kb.path), str(fp_file), "s", "3")
    assert w.wait() == 0, w.stderr.read()
    target = sorted(kb.tables()["studies"]["study_id"])[0]
    ids = tmp_path / "ids.txt"
    ids.write_text(target + "\n")
    env = {**os.environ, "PYTHONPATH": str(ROOT), PAUSE_ENV: step, PAUSE_SECONDS_ENV: "60"}
    p = subprocess.Popen([sys.executable, str(WRITER), "delete", str(kb.path), str(fp_file),
                          str(ids)], env=env, stderr=subprocess.PIPE)
    deadline = time.time() + 60
    while not temp_files(kb.path / "deletions") and time.time() < deadline:
        time.sleep(0.05)
    assert temp_files(kb.path / "deletions"), "the delete never reached its write"
    p.send_signal(signal.SIGKILL)
    p.wait()
    t = assert_consistent(kb)
    assert target in set(t["studies"]["study_id"])  # the tombstone never appeared
    report = kb.check(grace_seconds=0)
    assert [f.check for f in report.problems] == ["leftovers of killed writers"]
    assert kb.check(repair=True, grace_seconds=0).ok
    assert temp_files(kb.path) == []
    kb.delete(target)  # and deleting again works
    assert target not in set(kb.tables()["studies"]["study_id"])
