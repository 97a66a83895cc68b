"""kb check / compact / migrate / export / import, through the CLI and the library."""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_diabetes, load_iris, load_wine

from cli.main import main
from tests.conftest import dir_digest
from tests.test_history_concurrency import ROOT, WRITER, assert_consistent
from warmstart import fingerprint
from warmstart.history import KnowledgeBase
from warmstart.layout import SCHEMAS
from warmstart.storage import batch_name, write_atomic

FIXTURE = Path(__file__).parent / "fixtures" / "history_format0"


def cli(*args: str):
    return CliRunner().invoke(main, list(map(str, args)))


def independent_hash(root: Path) -> tuple[dict[str, int], str]:
    """Row counts and a hash of the history's rows, computed without warmstart's reader:
    every table read with pyarrow, one row per key (a dataset's newest row, which names
    it), sorted, as JSON.
    """
    counts, h = {}, hashlib.sha256()
    keys = {"datasets": ["dataset_id"], "studies": ["study_id"],
            "trials": ["study_id", "trial_index"]}
    for name, key in keys.items():
        files = sorted(p for p in (root / name).glob("*.parquet"))
        df = pd.concat([pq.read_table(f).to_pandas() for f in files]) if files else None
        if df is None:
            counts[name] = 0
            continue
        order = key + (["created_at"] if "created_at" in df else [])
        newest_first = [True] * len(key) + [name != "datasets"] * (len(order) - len(key))
        df = df.sort_values(order, ascending=newest_first).drop_duplicates(key)
        df = df.sort_values(key).reset_index(drop=True)
        counts[name] = len(df)
        h.update(df.to_json(orient="records", date_format="iso").encode())
    return counts, h.hexdigest()


@pytest.fixture(scope="module")
def fps():
    # reference datasets: scikit-learn's bundled iris, wine and diabetes
    return {n: fingerprint(loader(as_frame=True).frame, target="target")
            for n, loader in (("iris", load_iris), ("wine", load_wine),
                              ("diabetes", load_diabetes))}


def fill(kb: KnowledgeBase, fps, n: int, prefix: str = "s", start: int = 0) -> None:
    """Log ``n`` studies, each with trials of its own (numbers from ``start`` on)."""
    for i in range(start, start + n):
        name = ("iris", "wine", "diabetes")[i % 3]
        kb.log(fingerprint_of=fps[name], family="random_forest", name=f"{prefix}{i}",
               trials=[{"n_estimators": 10 + i + j, "max_depth": 3, "score": 0.1 + 0.01 * j}
                       for j in range(4)])


# -- check ------------------------------------------------------------------------------
def test_check_clean_history_exits_0_with_json(kb, fps):
    fill(kb, fps, 3)
    r = cli("kb", "check", "--kb", kb.path, "--json")
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    assert out["ok"] is True and out["counts"]["studies"] == 3
    assert out["counts"]["trials"] == 12 and out["counts"]["datasets"] == 3
    r = cli("kb", "check", "--kb", kb.path)
    assert r.exit_code == 0 and "no problems found" in r.output


def _plant(kb: KnowledgeBase, study=None, trial=None, dataset=None) -> None:
    """Commit one hand-made study (bypassing log's validation) to break one rule."""
    now = pd.Timestamp.now(tz="UTC")
    d = {"dataset_id": "d" * 16, "name": "planted", "task": "classification",
         "target": "y", "catalogue_version": 1, "meta_features": '{"rows": 10.0}',
         "warnings": "[]", "created_at": now, **(dataset or {})}
    s = {"study_id": "e" * 32, "dataset_id": "d" * 16, "family": "random_forest",
         "task": "classification", "metric": "accuracy", "better": "higher",
         "label": "planted", "trial_count": 1, "source": "log", "tool_version": "0",
         "created_at": now, **(study or {})}
    t = {"study_id": "e" * 32, "trial_index": 0, "config": '{"max_depth":3}', "score": 0.5,
         "fit_seconds": 1.0, "status": "ok", "error": None, **(trial or {})}
    for name, row in (("datasets", d), ("trials", t), ("studies", s)):
        if row.get("_skip"):
            continue
        write_atomic(pa.Table.from_pylist([{k: v for k, v in row.items()}],
                                          schema=SCHEMAS[name]), kb.path / name,
                     batch_name("import"))


@pytest.mark.parametrize("plant, check_name", [
    ({"trial": {"score": float("nan")}}, "finite scores for ok trials"),
    ({"trial": {"score": float("inf")}}, "finite scores for ok trials"),
    ({"trial": {"status": "maybe"}}, "known trial statuses"),
    ({"trial": {"config": "{not json"}}, "configurations are JSON objects"),
    ({"trial": {"fit_seconds": -2.0}}, "valid fit times"),
    ({"study": {"trial_count": 5}}, "studies have all their trials"),
    ({"study": {"family": "no_such_family"}}, "known families"),
    ({"study": {"better": "sideways"}}, "valid tasks and better values"),
    ({"dataset": {"catalogue_version": 99}}, "known catalogue versions"),
    ({"dataset": {"meta_features": "[1, 2"}}, "fingerprints are valid JSON"),
    ({"dataset": {"_skip": True}}, "studies have a dataset"),
])
def test_check_finds_each_planted_problem(kb, fps, plant, check_name):
    fill(kb, fps, 1)
    _plant(kb, **plant)
    r = cli("kb", "check", "--kb", kb.path, "--json")
    assert r.exit_code == 1, r.output
    problems = [f["check"] for f in json.loads(r.output)["findings"]
                if f["status"] == "problem"]
    assert problems == [check_name]


def test_check_finds_clashing_ids_and_unreadable_files(kb, fps):
    fill(kb, fps, 2)
    _plant(kb)
    _plant(kb, study={"label": "another study under the same id"})
    r = cli("kb", "check", "--kb", kb.path, "--json")
    assert r.exit_code == 1
    assert "unique identifiers" in r.output
    # A file that is not Parquet: readers refuse with a message, repair sets it aside.
    (kb.path / "trials" / "garbage.parquet").write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(100))
    r = cli("kb", "info", "--kb", kb.path)
    assert r.exit_code == 2 and "garbage.parquet is not one of its files" in r.output
    r = cli("kb", "check", "--kb", kb.path, "--repair")
    assert "moved to quarantine/" in r.output
    assert (kb.path / "quarantine" / "trials" / "garbage.parquet").is_file()
    assert cli("kb", "info", "--kb", kb.path).exit_code == 0


# -- compact ----------------------------------------------------------------------------
def test_compact_keeps_content_and_merges_files(kb, fps):
    fill(kb, fps, 12)
    counts, digest = independent_hash(kb.path)
    assert counts == {"datasets": 3, "studies": 12, "trials": 48}
    r = cli("kb", "compact", "--kb", kb.path, "--json")
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    assert out["before"]["files"] == 36 and out["after"]["files"] == 3
    assert out["before"]["content_hash"] == out["after"]["content_hash"]
    assert independent_hash(kb.path) == (counts, digest)
    assert kb.check(grace_seconds=0).ok
    fill(kb, fps, 2, prefix="late", start=12)  # logging after compaction still works
    assert kb.check(grace_seconds=0).ok
    text = cli("kb", "compact", "--kb", kb.path).output
    assert "content unchanged" in text
    assert independent_hash(kb.path)[0]["studies"] == 14


def test_compact_beside_a_concurrent_writer(tmp_path, fps):
    kb = KnowledgeBase.init(tmp_path / "kb")
    fill(kb, fps, 6)
    fp_file = tmp_path / "fp.json"
    fp_file.write_text(fps["wine"].to_json())
    env = {"PYTHONPATH": str(ROOT), "PATH": "/usr/bin:/bin"}
    proc = subprocess.Popen([sys.executable, str(WRITER), "fork-write", str(kb.path),
                             str(fp_file), "2", "40"], env=env, stderr=subprocess.PIPE)
    rounds = 0
    while proc.poll() is None or rounds == 0:
        out = kb.compact()
        # studies only ever get added, never lost, while the writer runs
        assert out["after"]["studies"] >= out["before"]["studies"]
        assert_consistent(kb)
        rounds += 1
    assert proc.wait() == 0, proc.stderr.read()
    t = assert_consistent(kb)
    labels = set(t["studies"]["label"])
    assert labels == {f"s{i}" for i in range(6)} | {f"w{p}-{i}" for p in range(2)
                                                     for i in range(40)}
    assert kb.check(grace_seconds=0).ok
    before = independent_hash(kb.path)
    kb.compact()
    assert independent_hash(kb.path) == before
    assert rounds >= 2  # compaction really ran while the writer was writing


# -- versions ---------------------------------------------------------------------------
def migrated_copy(fixture: Path, tmp_path: Path, version: int) -> tuple[Path, dict]:
    """A copy of an old-format ``fixture``, refused by readers, then migrated by the CLI;
    returns its path and what ``kb migrate --json`` said."""
    path = tmp_path / "old"
    shutil.copytree(fixture, path)
    r = cli("kb", "info", "--kb", path)
    assert r.exit_code == 2 and "kb migrate" in r.output
    assert f"format version {version}" in r.output
    r = cli("kb", "migrate", "--kb", path, "--json")
    assert r.exit_code == 0, r.output
    return path, json.loads(r.output)


def test_migrate_format0_fixture(tmp_path):
    path, _out = migrated_copy(FIXTURE, tmp_path, 0)
    flat = pq.read_table(path / "backup-format-0" / "trials.parquet").to_pandas()
    kb = KnowledgeBase(path)
    t = kb.tables()
    assert len(t["studies"]) == flat["study"].nunique() == 4
    assert len(t["trials"]) == len(flat) == 10
    assert len(t["datasets"]) == flat["dataset_hash"].nunique() == 3
    assert sorted(t["trials"]["score"]) == sorted(flat["score"])
    iris = flat[flat["dataset"] == "iris"].iloc[0]
    stored = kb.fingerprints()[iris["dataset_hash"][:16]]
    for col in (c for c in flat.columns if c.startswith("fp_")):
        a, b = stored.values[col[3:]], iris[col]
        assert (a != a and b != b) or a == pytest.approx(b, rel=1e-12)
    assert kb.check(grace_seconds=0).ok
    # migrating again is a no-op
    assert "already has format version 2" in cli("kb", "migrate", "--kb", path).output


def test_newer_format_is_refused_with_the_version_needed(kb):
    marker = kb.path / "warmstart-history.json"
    meta = json.loads(marker.read_text())
    marker.write_text(json.dumps({**meta, "format_version": 7,
                                  "created_by": "warmstart 3.2.0"}))
    r = cli("kb", "info", "--kb", kb.path)
    assert r.exit_code == 2
    assert "format version 7" in r.output and "warmstart 3.2.0" in r.output
    assert "upgrade" in r.output


# -- export / import --------------------------------------------------------------------
def test_export_import_round_trip_between_two_teams(tmp_path, fps):
    a = KnowledgeBase.init(tmp_path / "a")
    b = KnowledgeBase.init(tmp_path / "b")
    fill(a, fps, 5, prefix="a")
    fill(b, fps, 4, prefix="b", start=5)  # same datasets, different studies
    r = cli("kb", "export", tmp_path / "a.zip", "--kb", a.path, "--json")
    assert r.exit_code == 0, r.output
    r = cli("kb", "import", tmp_path / "a.zip", "--kb", b.path, "--json")
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    assert out["studies_added"] == 5 and out["trials_added"] == 20
    assert out["datasets_added"] == 0  # b already has all three datasets
    digest = dir_digest(b.path)
    r = cli("kb", "import", tmp_path / "a.zip", "--kb", b.path, "--json")
    assert json.loads(r.output)["studies_added"] == 0
    assert dir_digest(b.path) == digest  # importing twice adds nothing
    # and back: both teams end with the same content
    cli("kb", "export", tmp_path / "b.zip", "--kb", b.path)
    r = cli("kb", "import", tmp_path / "b.zip", "--kb", a.path, "--json")
    assert json.loads(r.output)["studies_added"] == 4
    ha, hb = independent_hash(a.path), independent_hash(b.path)
    assert ha[0] == hb[0] == {"datasets": 3, "studies": 9, "trials": 36}
    ta, tb = a.tables(), b.tables()
    for name in ("studies", "trials"):
        pd.testing.assert_frame_equal(ta[name], tb[name])
    assert a.check(grace_seconds=0).ok and b.check(grace_seconds=0).ok
    # into an empty history, the same content hash as the source
    c = KnowledgeBase.init(tmp_path / "c")
    cli("kb", "import", tmp_path / "b.zip", "--kb", c.path)
    assert json.loads(cli("kb", "check", "--kb", c.path, "--json").output)["counts"] == \
        json.loads(cli("kb", "check", "--kb", b.path, "--json").output)["counts"] | {
            "files": 3}


def test_export_member_is_plain_parquet(kb, fps, tmp_path):
    import zipfile

    fill(kb, fps, 2)
    kb.export(tmp_path / "x.zip")
    with zipfile.ZipFile(tmp_path / "x.zip") as zf:
        assert sorted(zf.namelist()) == ["datasets.parquet", "studies.parquet",
                                         "trials.parquet", "warmstart-export.json"]
        studies = pq.read_table(pa.BufferReader(zf.read("studies.parquet"))).to_pandas()
    assert sorted(studies["label"]) == ["s0", "s1"]


def test_pruned_read_of_a_merged_file_matches_a_plain_filter(tmp_path):
    # reference: pyarrow.dataset's own filter over the whole file
    import pyarrow.dataset as pads

    from warmstart.storage import read_where_in

    rows = [{"study_id": f"{i % 7:032x}", "trial_index": i, "config": "{}", "score": 0.5,
             "fit_seconds": None, "status": "ok", "error": None} for i in range(100)]
    table = pa.Table.from_pylist(rows, schema=SCHEMAS["trials"]).sort_by("study_id")
    d = tmp_path / "trials"
    d.mkdir()
    f = write_atomic(table, d, batch_name("merged"), row_group_rows=10)
    assert pq.ParquetFile(f).metadata.num_row_groups == 10
    wanted = pa.array([f"{2:032x}", f"{5:032x}"])
    got = read_where_in([f], SCHEMAS["trials"], "study_id", wanted)
    expected = pads.dataset(str(f)).to_table(filter=pads.field("study_id").isin(wanted))
    assert got.sort_by("trial_index").equals(expected.sort_by("trial_index"))
    assert got.num_rows == 28  # 100 rows, ids i % 7 in {2, 5}: 14 + 14


def test_family_filtered_read_equals_filtering_everything(kb, fps):
    fill(kb, fps, 6)
    kb.log(fingerprint_of=fps["iris"], family="knn", trials=[{"n_neighbors": 5, "score": 0.9}])
    kb.compact()
    everything = kb.tables()
    part = kb.tables(family="knn", task="classification")
    s = everything["studies"]
    s = s[(s["family"] == "knn") & (s["task"] == "classification")].reset_index(drop=True)
    pd.testing.assert_frame_equal(part["studies"], s)
    t = everything["trials"]
    pd.testing.assert_frame_equal(
        part["trials"], t[t["study_id"].isin(s["study_id"])].reset_index(drop=True))
    assert len(part["trials"]) == 1
