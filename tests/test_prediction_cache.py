"""The on-disk cache of surrogate predictions: cold, warm, after compaction and after a
study is deleted, ``suggest`` gives the same suggestions as with no cache at all.

Runs on a copy of the shipped demo history, with the default (surrogate-using) strategy.
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import load_wine

from warmstart import KnowledgeBase
from warmstart.prediction_cache import CACHE_DIR, PredictionStore, fit_identity
from warmstart.surrogate import MAX_FIT_TRIALS, fit_rows

DEMO = Path(__file__).resolve().parents[1] / "knowledge_base"


def _cache_digest(kb_path: Path) -> dict[str, str]:
    root = kb_path / CACHE_DIR
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*.json"))}


def _suggest(kb_path: Path, query: pd.DataFrame) -> list[dict]:
    # a new KnowledgeBase each time: nothing is shared in memory between the calls
    found = KnowledgeBase(kb_path).suggest(query, target="target", family="random_forest",
                                           k=8, seed=3)
    return [s.to_dict() for s in found]


@pytest.fixture(scope="module")
def query() -> pd.DataFrame:
    return load_wine(as_frame=True).frame  # reference: scikit-learn's bundled wine data


@pytest.fixture
def history(tmp_path: Path) -> Path:
    path = tmp_path / "kb"
    shutil.copytree(DEMO, path, ignore=shutil.ignore_patterns(CACHE_DIR))
    return path


def test_cold_warm_and_uncached_suggestions_are_identical(history, query):
    cold = _suggest(history, query)
    assert any(s["predicted"] for s in cold)  # the surrogates were used
    written = _cache_digest(history)
    assert written  # predictions were stored
    warm = _suggest(history, query)
    assert warm == cold
    assert _cache_digest(history) == written  # every prediction came from disk
    shutil.rmtree(history / CACHE_DIR)
    assert _suggest(history, query) == cold  # a cold cache again: the same answer


def test_compaction_keeps_the_cache_valid_and_the_answer_the_same(history, query):
    before = _suggest(history, query)
    cached = _cache_digest(history)
    out = KnowledgeBase(history).compact()
    assert out["before"]["content_hash"] == out["after"]["content_hash"]
    assert _suggest(history, query) == before
    assert _cache_digest(history) == cached  # same rows, same names: nothing refitted
    shutil.rmtree(history / CACHE_DIR)
    assert _suggest(history, query) == before


def test_after_a_study_is_deleted_warm_and_cold_caches_agree(history, query, tmp_path):
    first = _suggest(history, query)
    victim = next(s["study_id"] for s in first if s["study_id"])
    KnowledgeBase(history).delete(victim)  # a tombstone; its rows stay until compaction
    warm = _suggest(history, query)
    assert all(s["study_id"] != victim for s in warm)
    # reference: a new history holding the remaining studies (written by import)
    KnowledgeBase(history).export(tmp_path / "rest.zip")
    fresh = KnowledgeBase.init(tmp_path / "fresh")
    fresh.import_(tmp_path / "rest.zip")
    assert _suggest(fresh.path, query) == warm
    shutil.rmtree(history / CACHE_DIR)
    assert _suggest(history, query) == warm
    KnowledgeBase(history).compact()  # drops the deleted rows
    assert _suggest(history, query) == warm


def test_fit_rows_is_bounded_seeded_and_complete_for_small_studies():
    assert fit_rows(10).tolist() == list(range(10))
    big = fit_rows(100_000, seed=4)
    assert big.size == MAX_FIT_TRIALS and np.all(np.diff(big) > 0)
    assert np.array_equal(big, fit_rows(100_000, seed=4))
    assert not np.array_equal(big, fit_rows(100_000, seed=5))


def test_store_round_trip_and_a_changed_identity_misses(tmp_path):
    store = PredictionStore(tmp_path)
    ident = fit_identity(np.arange(3), np.array([0.0, 0.5, 1.0]))
    store.save("s1", "forest", 0, "space", ident, {"a": 0.25, "b": 1.0})
    assert store.load("s1", "forest", 0, "space", ident) == {"a": 0.25, "b": 1.0}
    other = fit_identity(np.arange(3), np.array([0.0, 0.5, 0.9]))
    assert store.load("s1", "forest", 0, "space", other) == {}
    assert store.load("s1", "forest", 1, "space", ident) == {}
    assert not list(tmp_path.rglob(".tmp-*"))  # written by atomic rename
