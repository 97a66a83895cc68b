"""Format 2 of the history: migration from format 1, no study logged twice, kb list /
show / delete with tombstones, one name per dataset, and caches that follow deletions.

Datasets are scikit-learn's bundled iris, wine and breast_cancer (their fingerprints).
"""

from __future__ import annotations

import json
import shutil
import zipfile
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner
from sklearn.datasets import load_breast_cancer, load_iris, load_wine

from cli.main import main
from tests.conftest import dir_digest
from tests.test_history_maintenance import migrated_copy
from warmstart import fingerprint
from warmstart.families import get_family
from warmstart.history import KnowledgeBase
from warmstart.layout import DELETIONS
from warmstart.maintenance import EXPORT_KIND, EXPORT_MARKER, _parquet_bytes, content_hash
from warmstart.migrations import _backup_format1, _read_format1
from warmstart.storage import visible_files

FIXTURE = Path(__file__).parent / "fixtures" / "history_format1"
FIXTURE_SEEN = Path(__file__).parent / "fixtures" / "history_format1_visible.json"


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def fps():
    # reference datasets: scikit-learn's bundled iris, wine and breast_cancer
    return {n: fingerprint(loader(as_frame=True).frame, target="target")
            for n, loader in (("iris", load_iris), ("wine", load_wine),
                              ("cancer", load_breast_cancer))}


def rf_trials(seed: int, n: int = 6) -> list[dict]:
    rng = np.random.default_rng(seed)
    space = get_family("random_forest").space("classification")
    return [dict(space.sample(rng), score=round(float(rng.uniform(0.6, 0.99)), 6),
                 fit_seconds=0.1) for _ in range(n)]


# -- migration from format 1 ------------------------------------------------------------
def _as_seen(tables) -> dict:
    return {n: json.loads(f.astype(str).to_json(orient="records")) for n, f in tables.items()}


def test_migrate_format1_fixture_keeps_what_readers_saw(tmp_path):
    path, out = migrated_copy(FIXTURE, tmp_path, 1)
    assert (out["from_version"], out["to_version"], out["studies"]) == (1, 2, 4)
    kb = KnowledgeBase(path)
    seen = _as_seen(kb.tables())
    old = json.loads(FIXTURE_SEEN.read_text())  # what the format-1 code showed
    rename = {"maximize": "higher", "minimize": "lower"}
    for s in old["studies"]:
        s["better"], s["trial_count"] = rename[s.pop("direction")], s.pop("n_trials")
    assert [{k: v for k, v in s.items() if k != "content_hash"} for s in seen["studies"]] \
        == old["studies"]
    assert seen["trials"] == old["trials"] and seen["datasets"] == old["datasets"]
    # format 1 named the dataset logged as "iris" then "iris-again" by its first name
    assert "iris" in {d["name"] for d in seen["datasets"]}
    assert kb.check(grace_seconds=0).ok
    assert "already has format version 2" in cli("kb", "migrate", "--kb", path).output


def test_interrupted_format1_migration_runs_again(tmp_path):
    path = tmp_path / "old"
    shutil.copytree(FIXTURE, path)
    _backup_format1(path)  # killed after the copy, while clearing the old files
    for f in visible_files(path / "trials")[:2]:
        f.unlink()
    assert cli("kb", "migrate", "--kb", path).exit_code == 0
    t = KnowledgeBase(path).tables()
    assert (len(t["studies"]), len(t["trials"]), len(t["datasets"])) == (4, 9, 3)


def test_format1_export_imports(tmp_path):
    path = tmp_path / "old"
    shutil.copytree(FIXTURE, path)
    # an export written by format-1 code has format-1 study rows: make one from the fixture
    tables = _read_format1(path)
    old_studies = pa.concat_tables([pq.read_table(f) for f in visible_files(path / "studies")])
    assert "direction" in old_studies.schema.names
    # its marker's hash is of the format-1 tables, as the export code computes it
    digest = content_hash({"studies": old_studies.to_pandas(),
                           **{t: tables[t].to_pandas() for t in ("datasets", "trials")}})
    with zipfile.ZipFile(tmp_path / "v1.zip", "w") as zf:
        zf.writestr(EXPORT_MARKER, json.dumps({"kind": EXPORT_KIND, "format_version": 1,
                                               "content_hash": digest}))
        zf.writestr("studies.parquet", _parquet_bytes(old_studies))
        for t in ("datasets", "trials"):
            zf.writestr(f"{t}.parquet", _parquet_bytes(tables[t]))
    kb = KnowledgeBase.init(tmp_path / "new")
    assert kb.import_(tmp_path / "v1.zip")["studies_added"] == 4
    assert set(kb.tables()["studies"]["better"]) == {"higher", "lower"}
    assert kb.check(grace_seconds=0).ok


# -- no duplicates ----------------------------------------------------------------------
def test_relogging_the_same_study_is_refused(kb, fps, tmp_path):
    first = kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(0))
    before = dir_digest(kb.path)
    # the same trials in another order are the same study
    again = kb.log(fingerprint_of=fps["iris"], family="random_forest",
                   trials=rf_trials(0)[::-1])
    assert again.already_logged and again.study_id == first.study_id
    assert dir_digest(kb.path) == before
    trials = tmp_path / "t.jsonl"
    trials.write_text("".join(json.dumps(t) + "\n" for t in rf_trials(0)))
    fp = tmp_path / "fp.json"
    fp.write_text(fps["iris"].to_json())
    r = cli("log", "--fingerprint", fp, "-f", "random_forest", "--trials", trials, "--kb",
            kb.path)
    assert r.exit_code == 0 and f"already logged as {first.study_id}" in r.output
    assert dir_digest(kb.path) == before
    # another family, metric, dataset or one score changed is another study
    changed = rf_trials(0)
    changed[0]["score"] += 0.001
    for kwargs in ({"trials": changed}, {"metric": "accuracy"},
                   {"fingerprint_of": fps["wine"]}):
        args = {"fingerprint_of": fps["iris"], "trials": rf_trials(0), **kwargs}
        assert not kb.log(family="random_forest", **args).already_logged
    assert len(kb.tables()["studies"]) == 4


# -- list, show, delete ------------------------------------------------------------------
def test_list_show_delete_through_the_cli(kb, fps):
    a = kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(1),
               name="iris")
    b = kb.log(fingerprint_of=fps["wine"], family="random_forest", trials=rf_trials(2),
               name="wine")
    r = cli("kb", "list", "--kb", kb.path, "--json")
    assert r.exit_code == 0, r.output
    listed = json.loads(r.output)
    assert [d["name"] for d in listed] == ["iris", "wine"]
    best = max(t["score"] for t in rf_trials(1))
    assert listed[0]["studies"][0]["best_score"] == best
    assert listed[0]["studies"][0]["trial_count"] == 6
    text = cli("kb", "list", "--kb", kb.path).output
    assert a.study_id[:12] in text and "2 datasets, 2 studies" in text
    shown = json.loads(cli("kb", "show", a.study_id[:8], "--kb", kb.path, "--json").output)
    assert shown["kind"] == "study" and len(shown["trials"]) == 6
    shown = json.loads(cli("kb", "show", "wine", "--kb", kb.path, "--json").output)
    assert shown["kind"] == "dataset" and shown["studies"][0]["study_id"] == b.study_id
    assert "iris" in cli("kb", "show", a.dataset_id, "--kb", kb.path).output
    r = cli("kb", "delete", a.study_id[:10], "--kb", kb.path)
    assert r.exit_code == 0 and a.study_id in r.output
    assert [d["name"] for d in kb.list_studies()] == ["wine"]
    assert len(visible_files(kb.path / DELETIONS)) == 1
    r = cli("kb", "delete", a.study_id, "--kb", kb.path)  # already deleted
    assert r.exit_code == 2 and r.output.startswith("error: no study")
    # deleted, the same study may be logged again (a new study)
    again = kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(1))
    assert not again.already_logged and again.study_id != a.study_id


def test_deleted_study_is_invisible_to_every_reader_and_compact_drops_it(kb, fps, tmp_path):
    keep = [kb.log(fingerprint_of=fps[n], family="random_forest", trials=rf_trials(i),
                   name=n) for i, n in enumerate(("iris", "wine"))]
    gone = kb.log(fingerprint_of=fps["cancer"], family="random_forest",
                  trials=rf_trials(9), name="cancer")
    kb.delete(gone.study_id)
    t = kb.tables()
    assert gone.study_id not in set(t["studies"]["study_id"])
    assert gone.study_id not in set(t["trials"]["study_id"])
    assert gone.dataset_id not in set(t["datasets"]["dataset_id"])
    assert kb.info()["studies"] == 2
    assert all(n.dataset_id != gone.dataset_id
               for n in kb.similar(fingerprint_of=fps["cancer"], k=5))
    sug = kb.suggest(fingerprint_of=fps["cancer"], family="random_forest", k=5)
    assert all(s.study_id != gone.study_id for s in sug)
    assert kb.export(tmp_path / "e.zip")["studies"] == 2
    other = KnowledgeBase.init(tmp_path / "other")
    other.import_(tmp_path / "e.zip")
    assert set(other.tables()["studies"]["study_id"]) == {s.study_id for s in keep}
    assert kb.check(grace_seconds=0).ok
    out = kb.compact()
    assert out["after"]["studies"] == 2
    for table in ("studies", "trials", "datasets"):
        names = [f.name for f in visible_files(kb.path / table)]
        assert not any(gone.study_id in n for n in names)
    assert len(visible_files(kb.path / DELETIONS)) == 1  # the tombstone stays
    assert kb.check(grace_seconds=0).ok


def test_import_skips_a_study_deleted_here(kb, fps, tmp_path):
    s = kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(3))
    kb.export(tmp_path / "before.zip")
    kb.delete(s.study_id)
    out = kb.import_(tmp_path / "before.zip")
    assert out["studies_added"] == 0 and out["studies_already_present"] == 1
    assert kb.info()["studies"] == 0


def test_name_relabels_a_dataset_everywhere(kb, fps, tmp_path):
    kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(4),
           name="flowers")
    kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(5),
           name="iris-2024")
    # without --name a known dataset keeps its current name
    s = kb.log(fingerprint_of=fps["iris"], family="knn",
               trials=[{"n_neighbors": 5, "score": 0.9}])
    assert s.label == "iris-2024"
    assert list(kb.tables()["datasets"]["name"]) == ["iris-2024"]
    assert kb.similar(fingerprint_of=fps["iris"], k=1)[0].name == "iris-2024"
    assert [d["name"] for d in kb.list_studies()] == ["iris-2024"]
    kb.compact()  # merged files keep the newest name
    assert list(kb.tables()["datasets"]["name"]) == ["iris-2024"]
    kb.export(tmp_path / "e.zip")
    other = KnowledgeBase.init(tmp_path / "other")
    other.import_(tmp_path / "e.zip")
    assert list(other.tables()["datasets"]["name"]) == ["iris-2024"]


@pytest.mark.parametrize("args, expected", [
    (("kb", "show", "zz"), "no study or dataset 'zz'"),
    (("kb", "show", "   "), "name a study or dataset"),
    (("kb", "delete", "nosuchstudy"), "no study 'nosuchstudy'"),
])
def test_show_and_delete_refuse_unknown_names(kb, fps, args, expected):
    kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(6))
    before = dir_digest(kb.path)
    r = cli(*args, "--kb", kb.path)
    assert r.exit_code == 2 and r.output.strip().splitlines() == [r.output.strip()]
    assert expected in r.output and dir_digest(kb.path) == before


def test_ambiguous_prefix_is_refused(kb, fps):
    ids = {kb.log(fingerprint_of=fps["iris"], family="random_forest",
                  trials=rf_trials(10 + i)).study_id for i in range(40)}
    # among 40 random ids, two share a first hex digit; a 1-digit prefix is too short anyway
    r = cli("kb", "show", next(iter(ids))[:1], "--kb", kb.path)
    assert r.exit_code == 2
    prefixes = [i[:4] for i in ids]
    shared = next((p for p in prefixes if prefixes.count(p) > 1), None)
    if shared is not None:
        r = cli("kb", "delete", shared, "--kb", kb.path)
        assert r.exit_code == 2 and "matches" in r.output


# -- caches follow deletions ---------------------------------------------------------------
def _answer(kb: KnowledgeBase, query) -> list[dict]:
    return [s.to_dict() for s in kb.suggest(fingerprint_of=query, family="random_forest",
                                            k=5)]


def test_caches_give_the_answer_of_a_fresh_history(tmp_path, fps):
    kb = KnowledgeBase.init(tmp_path / "kb")
    logged = [kb.log(fingerprint_of=fps[n], family="random_forest", trials=rf_trials(20 + i),
                     name=n) for i, n in enumerate(("iris", "wine", "cancer", "iris", "wine"))]
    query = fingerprint(load_wine(as_frame=True).frame.head(120), target="target")

    def fresh(name: str) -> list[dict]:
        # reference: a new history holding the same studies (written by import)
        kb.export(tmp_path / f"{name}.zip")
        other = KnowledgeBase.init(tmp_path / name)
        other.import_(tmp_path / f"{name}.zip")
        return _answer(other, query)

    cold = _answer(kb, query)
    assert (kb.path / ".cache").is_dir()
    assert _answer(kb, query) == cold == fresh("fresh1")  # warm cache
    kb.compact()
    assert _answer(kb, query) == cold
    kb.delete(logged[1].study_id)  # wine's first study: the query's nearest dataset
    after = _answer(kb, query)
    assert after == fresh("fresh2")
    assert all(s["study_id"] != logged[1].study_id for s in after)
    shutil.rmtree(kb.path / ".cache")
    assert _answer(kb, query) == after  # cold again
    kb.compact()
    assert _answer(kb, query) == after


def test_import_skips_the_same_trials_logged_elsewhere(tmp_path, fps):
    a, b = KnowledgeBase.init(tmp_path / "a"), KnowledgeBase.init(tmp_path / "b")
    for kb in (a, b):  # two teams logged the same study on their own
        kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(30))
    b.log(fingerprint_of=fps["wine"], family="random_forest", trials=rf_trials(31))
    b.export(tmp_path / "b.zip")
    out = a.import_(tmp_path / "b.zip")
    assert (out["studies_added"], out["studies_already_present"]) == (1, 1)
    assert a.info()["studies"] == 2


def test_check_notes_twins_written_at_the_same_instant(kb, fps):
    s = kb.log(fingerprint_of=fps["iris"], family="random_forest", trials=rf_trials(40))
    # a second writer that checked before the first committed: copy the study under a new id
    twin = "f" * 32
    for table in ("datasets", "trials", "studies"):
        src = next((kb.path / table).glob(f"{s.study_id}-*.parquet"))
        tb = pq.read_table(src)
        if "study_id" in tb.schema.names:
            tb = tb.set_column(tb.schema.get_field_index("study_id"), "study_id",
                               pa.array([twin] * tb.num_rows, pa.string()))
        pq.write_table(tb, kb.path / table / f"{twin}-{s.dataset_id}.parquet")
    report = kb.check(grace_seconds=0)
    assert report.ok
    assert any(f.check == "studies logged twice" and f.status == "note"
               for f in report.findings)
