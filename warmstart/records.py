"""The studies of a history as records: their content hash (no study is logged twice),
tombstones of deleted studies, and the listing behind ``kb list``, ``kb show`` and
``kb delete``.

A study's content hash (stored in its row) is a SHA-256 over its dataset, family, task,
metric and the multiset of its trials (configuration, score, status), so logging the
same trials again, in any order, finds the earlier study by one column's comparison.
Without locks, two writers logging the same study at the same instant may both succeed;
``kb check`` notes such twins and ``kb delete`` removes one.

Deleting writes a tombstone: one row in ``deletions/`` (see
:data:`warmstart.layout.DELETION_SCHEMA`) by atomic rename, like every other write. The
study's rows stay on disk until ``kb compact`` drops them; every reader skips a study
with a tombstone (:func:`warmstart.history.visible_tables` reads the tombstones before
and after the other tables, so a compaction running meanwhile can never show a study
without its trials). Tombstones are never removed, so a deleted study stays deleted
whatever file still holds its rows.
"""

from __future__ import annotations

import hashlib
import json
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyarrow as pa

from warmstart.errors import BadInputError
from warmstart.layout import DELETION_SCHEMA, DELETIONS, SCHEMAS
from warmstart.metrics import LOWER
from warmstart.storage import batch_name, read_dir, write_atomic
from warmstart.values import finite_or_none
from warmstart.version import __version__

if TYPE_CHECKING:  # annotations only: warmstart.history imports this module
    from warmstart.history import KnowledgeBase

MIN_PREFIX = 4  # shortest id prefix accepted for show and delete


# -- content hash -----------------------------------------------------------------------
def study_content_hash(dataset_id: str, family: str, task: str, metric: str,
                       configs: list[str], scores: list[Any], statuses: list[str]) -> str:
    """SHA-256 (hex) of a study's dataset, family, task, metric and set of trials.

    Parameters
    ----------
    configs : list of str, length n_trials
        Canonical configuration keys (:func:`warmstart.spaces.config_key`), as stored.
    scores : list of float or None, length n_trials
    statuses : list of str, length n_trials

    The trials are sorted first, so their order does not matter; equal trials count
    as many times as they occur.
    """
    lines = sorted(json.dumps([c, finite_or_none(None if s is None else float(s)), st])
                   for c, s, st in zip(configs, scores, statuses))
    head = json.dumps([dataset_id, family, task, metric])
    return hashlib.sha256("\n".join([head, *lines]).encode()).hexdigest()


def content_hashes(studies: pd.DataFrame, trials: pd.DataFrame) -> list[str]:
    """:func:`study_content_hash` of each row of ``studies`` (its trials from ``trials``)."""
    groups = {sid: g for sid, g in trials.groupby("study_id", sort=False)}
    empty = trials.iloc[:0]
    out = []
    for r in studies.itertuples():
        g = groups.get(r.study_id, empty)
        scores = [None if pd.isna(s) else float(s) for s in g["score"]]
        out.append(study_content_hash(r.dataset_id, r.family, r.task, r.metric,
                                      list(g["config"]), scores, list(g["status"])))
    return out


# -- tombstones -------------------------------------------------------------------------
def deleted_ids(root: Path) -> set[str]:
    """Ids of the studies with a tombstone in the history at ``root``."""
    if not (root / DELETIONS).is_dir():
        return set()
    return set(read_dir(root / DELETIONS, DELETION_SCHEMA, columns=["study_id"])
               .column("study_id").to_pylist())


def without_deleted(tables: dict[str, pa.Table], gone: set[str]) -> dict[str, pa.Table]:
    """``tables`` (datasets, studies, trials) without the studies in ``gone``, and
    without datasets no remaining study refers to."""
    if not gone:
        return tables
    gone_arr = pa.array(sorted(gone), pa.string())

    def keep(tb: pa.Table) -> pa.Table:
        return tb.filter(pa.array(~np.isin(tb.column("study_id").to_numpy(zero_copy_only=False),
                                           gone_arr.to_numpy(zero_copy_only=False))))

    studies = keep(tables["studies"])
    live = studies.column("dataset_id").to_numpy(zero_copy_only=False)
    ds = tables["datasets"]
    ds = ds.filter(pa.array(np.isin(ds.column("dataset_id").to_numpy(zero_copy_only=False),
                                    live)))
    return {"datasets": ds, "studies": studies, "trials": keep(tables["trials"])}


# -- list, show, delete -----------------------------------------------------------------
def study_rows(tables: dict[str, pd.DataFrame]) -> pd.DataFrame:
    """One row per visible study with its dataset's name, trial counts and best score."""
    studies, trials, datasets = tables["studies"], tables["trials"], tables["datasets"]
    ok = trials[(trials["status"] == "ok") & trials["score"].notna()]
    hi = ok.groupby("study_id")["score"].max()
    lo = ok.groupby("study_id")["score"].min()
    sid = studies["study_id"]
    best = np.where(studies["better"] == LOWER, sid.map(lo), sid.map(hi))
    names = dict(zip(datasets["dataset_id"], datasets["name"]))
    return studies.assign(
        dataset_name=studies["dataset_id"].map(names),
        trials=sid.map(trials.groupby("study_id").size()).fillna(0).astype(int),
        ok=sid.map(ok.groupby("study_id").size()).fillna(0).astype(int),
        best_score=pd.Series(best, index=studies.index, dtype=float),
    ).sort_values(["dataset_name", "dataset_id", "created_at", "study_id"], kind="stable")


def _study_dict(r: Any) -> dict[str, Any]:
    return {"study_id": r.study_id, "dataset_id": r.dataset_id, "dataset_name": r.dataset_name,
            "label": r.label, "family": r.family, "task": r.task, "metric": r.metric,
            "better": r.better, "trial_count": int(r.trials), "ok": int(r.ok),
            "best_score": finite_or_none(r.best_score), "source": r.source,
            "created_at": pd.Timestamp(r.created_at).isoformat(timespec="seconds")}


def _dataset_dict(d: Any, rows: pd.DataFrame) -> dict[str, Any]:
    return {"dataset_id": d.dataset_id, "name": d.name, "task": d.task, "target": d.target,
            "catalogue_version": int(d.catalogue_version),
            "created_at": pd.Timestamp(d.created_at).isoformat(timespec="seconds"),
            "studies": [_study_dict(r) for r in rows.itertuples()]}


def list_studies(kb: KnowledgeBase) -> list[dict[str, Any]]:
    """The visible datasets (by name), each with its studies (oldest first): ids,
    family, metric, which way is better, trial counts, best score and date."""
    tables = kb.tables()
    rows = study_rows(tables)
    by_ds = {did: g for did, g in rows.groupby("dataset_id", sort=False)}
    datasets = tables["datasets"].sort_values(["name", "dataset_id"], kind="stable")
    return [_dataset_dict(d, by_ds.get(d.dataset_id, rows.iloc[:0]))
            for d in datasets.itertuples()]


def _matches(ref: str, ids: pd.Series, names: pd.Series) -> pd.Series:
    exact_name = names == ref
    if exact_name.any():
        return exact_name
    if len(ref) < MIN_PREFIX:
        return pd.Series(False, index=ids.index)
    return ids.str.startswith(ref.lower())


def resolve(kb: KnowledgeBase, ref: str, studies_only: bool = False
            ) -> tuple[str, str, dict[str, pd.DataFrame]]:
    """``("study"|"dataset", id, tables)`` for a study id, a dataset id, a unique prefix
    of one (at least :data:`MIN_PREFIX` characters) or a dataset's or study's name."""
    if not isinstance(ref, str) or not ref.strip():
        raise BadInputError("name a study or dataset: an id, a unique id prefix or a name")
    ref = ref.strip()
    tables = kb.tables()
    s, d = tables["studies"], tables["datasets"]
    hits = [("study", i) for i in s.loc[_matches(ref, s["study_id"], s["label"]), "study_id"]]
    if not studies_only:
        hits += [("dataset", i) for i in d.loc[_matches(ref, d["dataset_id"], d["name"]),
                                               "dataset_id"]]
    if len(hits) > 1 and not studies_only:
        datasets = [h for h in hits if h[0] == "dataset"]
        hits = datasets if len(datasets) == 1 else hits  # a name of a dataset and its study
    what = "study" if studies_only else "study or dataset"
    if not hits:
        raise BadInputError(f"no {what} {ref!r} in the history "
                            "(see 'warmstart kb list')")
    if len(hits) > 1:
        shown = ", ".join(f"{k} {i[:12]}" for k, i in hits[:5])
        raise BadInputError(f"{ref!r} matches {len(hits)} entries ({shown}): give more of "
                            "the id")
    return hits[0][0], hits[0][1], tables


def show(kb: KnowledgeBase, ref: str) -> dict[str, Any]:
    """One study (with its trials) or one dataset (with its studies), named by
    :func:`resolve`'s rules; ``{"kind": "study"|"dataset", ...}``."""
    kind, ident, tables = resolve(kb, ref)
    rows = study_rows(tables)
    if kind == "dataset":
        d = next(tables["datasets"][tables["datasets"]["dataset_id"] == ident].itertuples())
        meta = json.loads(d.meta_features)
        return {"kind": "dataset", **_dataset_dict(d, rows[rows["dataset_id"] == ident]),
                "meta_features": meta, "warnings": json.loads(d.warnings)}
    r = next(rows[rows["study_id"] == ident].itertuples())
    t = tables["trials"]
    t = t[t["study_id"] == ident].sort_values("trial_index")
    trials = [{"trial_index": int(x.trial_index), "config": json.loads(x.config),
               "score": finite_or_none(x.score), "fit_seconds": finite_or_none(x.fit_seconds),
               "status": x.status, "error": x.error} for x in t.itertuples()]
    return {"kind": "study", **_study_dict(r), "content_hash": r.content_hash,
            "trials": trials}


def delete(kb: KnowledgeBase, ref: str) -> dict[str, Any]:
    """Delete one study (an id, a unique id prefix or its label) by writing its
    tombstone; readers skip it from then on and ``kb compact`` drops its rows.

    Returns what was deleted: the study's id, dataset, family, metric, trial count.
    """
    _kind, sid, tables = resolve(kb, ref, studies_only=True)
    kb._check_writable()
    r = next(study_rows(tables).pipe(lambda f: f[f["study_id"] == sid]).itertuples())
    now = datetime.now(timezone.utc)
    row = pa.Table.from_pylist([{"study_id": sid, "deleted_at": now,
                                 "tool_version": __version__}], schema=DELETION_SCHEMA)
    try:
        write_atomic(row, kb.path / DELETIONS, batch_name("deleted"))
    except PermissionError:
        raise BadInputError(f"history {kb.path} is read-only (permission denied)") from None
    return {**_study_dict(r), "deleted_at": now.isoformat(timespec="seconds")}




# -- format 1 -----------------------------------------------------------------------------
FORMAT1_BETTER = {"maximize": "higher", "minimize": "lower"}


def studies_from_format1(studies: pd.DataFrame, trials: pd.DataFrame) -> pd.DataFrame:
    """Format-1 study rows (``direction``, ``n_trials``) as current ones: ``better``
    (``higher``/``lower``), ``trial_count`` and the ``content_hash`` of their trials.
    A direction other than the two format-1 values is kept, for the checks to report."""
    out = studies.rename(columns={"direction": "better", "n_trials": "trial_count"})
    out["better"] = [FORMAT1_BETTER.get(v, v) for v in out["better"]]
    out["content_hash"] = content_hashes(out, trials)
    return out[SCHEMAS["studies"].names]


__all__ = ["FORMAT1_BETTER", "content_hashes", "delete", "deleted_ids",
           "list_studies", "resolve", "show", "study_content_hash", "study_rows",
           "studies_from_format1", "without_deleted"]
