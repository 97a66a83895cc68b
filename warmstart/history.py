"""The team history: a directory of Parquet tables of datasets, studies and trials.

:class:`KnowledgeBase` opens a history, reads it and logs studies into it; the other
questions it answers are thin delegates (``suggest`` to :mod:`warmstart.suggesting`,
``info``, ``check``, ``compact``, ``export``, ``import_`` and ``migrate`` to
:mod:`warmstart.maintenance`). The tables' schemas and the format marker are in
:mod:`warmstart.layout`.

Each ``log`` writes its own three files, named ``<study_id>-<dataset_id>.parquet``
(a fresh uuid4 study id), and never rewrites another's: the dataset row first, the
trials next, the study row last. The study row is the commit point: readers see a
study, its trials and its dataset row only once a study file holding it exists, so a
writer killed at any moment leaves nothing visible behind (``kb check --repair``
removes what it left, see :mod:`warmstart.maintenance`). Rows are de-duplicated by key
on read (a dataset logged by several studies keeps its earliest row), which is what lets
compaction merge files beside live readers and writers. Readers and writers take no
locks (only compactions hold one, against each other): see
:mod:`warmstart.storage` for what this needs from a (network) filesystem. Any engine
can read the tables, e.g. ``pandas.read_parquet("<history>/trials")``; readers of the
raw files should apply the same visibility rule.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import uuid
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as pads

from warmstart import maintenance, migrations, records, suggesting
from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.filesystems import history_location
from warmstart.fingerprint import Fingerprint, fingerprint
from warmstart.layout import (
    DELETIONS,
    FORMAT_FILE,
    FORMAT_VERSION,
    SCHEMAS,
    TABLE_DIRS,
    dedupe,
    read_current_marker,
    write_marker,
)
from warmstart.metrics import DEFAULT_METRIC, HIGHER, LOWER, Metric, resolve_metric
from warmstart.similarity import Neighbour, nearest
from warmstart.spaces import SearchSpace, config_key
from warmstart.storage import (
    _pause,
    log_name,
    parse_log_name,
    read_dir,
    write_atomic,
)
from warmstart.strategies import DEFAULT_STRATEGY, Suggestion, get_strategy
from warmstart.trials import OK, Trial, TrialsInput, check_trials
from warmstart.version import __version__

ENV_VAR = "WARMSTART_KB"
DEFAULT_PATH = "knowledge_base"
# Parsed stored fingerprints kept per KnowledgeBase instance (a few MB at this size).
META_CACHE_SIZE = 50_000


def resolve_path(path: str | os.PathLike | None = None) -> Path:
    """Where the history lives: ``path``, else ``$WARMSTART_KB``, else ``./knowledge_base``.

    A ``file://`` URI is its local path; a URI of a file system without atomic rename
    is refused with one line (see :func:`warmstart.filesystems.history_location`)."""
    return history_location(path or os.environ.get(ENV_VAR) or DEFAULT_PATH)


@dataclass(frozen=True)
class LoggedStudy:
    """What :meth:`KnowledgeBase.log` wrote."""

    study_id: str
    dataset_id: str
    dataset_is_new: bool
    family: str
    task: str
    metric: str
    better: str
    label: str
    trial_count: int
    n_ok: int
    best_score: float | None
    # True when the same study was already in the history: nothing was written and
    # study_id is the earlier study's
    already_logged: bool = False

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)


def query_fingerprint(data: pd.DataFrame | str | os.PathLike | None, target: str | None,
                      task: str | None,
                      fingerprint_of: Fingerprint | str | os.PathLike | None, *,
                      cluster: Any = None) -> Fingerprint:
    """The fingerprint a question is about: ``fingerprint_of`` (a Fingerprint or its JSON
    file), else that of ``data`` with its ``target`` (scanned on ``cluster`` if given, see
    :func:`warmstart.fingerprint.fingerprint`)."""
    if fingerprint_of is not None:
        fp = (fingerprint_of if isinstance(fingerprint_of, Fingerprint)
              else Fingerprint.from_json_file(fingerprint_of))
        if task is not None and task != fp.task:
            raise BadInputError(f"the fingerprint is for {fp.task}, not {task}")
        return fp
    if data is None or target is None:
        raise BadInputError("give the dataset and its target, or a fingerprint")
    # a path goes straight to fingerprint(), which reads Parquet in batches
    return fingerprint(data, target=target, task=task, cluster=cluster)


def study_tables(study_id: str, dataset_id: str, label: str, family: str, fp: Fingerprint,
                 metric: Metric, trials: list[Trial], source: str,
                 now: datetime, dataset_name: str | None = None) -> dict[str, pa.Table]:
    """The three one-study tables ``log`` writes: the dataset row, the trials, the study
    (``dataset_name`` names the dataset; default ``label``)."""
    trial_table = pa.Table.from_pylist([
        {"study_id": study_id, "trial_index": i, "config": config_key(t.config),
         "score": t.score, "fit_seconds": t.fit_seconds, "status": t.status,
         "error": t.error} for i, t in enumerate(trials)
    ], schema=SCHEMAS["trials"])
    study_table = pa.Table.from_pylist([{
        "study_id": study_id, "dataset_id": dataset_id, "family": family,
        "task": fp.task, "metric": metric.name, "better": metric.better,
        "label": label, "trial_count": len(trials), "source": source,
        "tool_version": __version__, "created_at": now,
        "content_hash": trials_hash(dataset_id, family, fp.task, metric.name, trials),
    }], schema=SCHEMAS["studies"])
    # The dataset row is written by every study, even when the dataset is known: a
    # study then never depends on another study's files, and duplicates cost one
    # small row (readers keep the earliest; compaction drops the rest).
    dataset_table = pa.Table.from_pylist([{
        "dataset_id": dataset_id, "name": dataset_name or label, "task": fp.task,
        "target": fp.target,
        "catalogue_version": fp.catalogue_version,
        "meta_features": json.dumps(fp.to_dict()["meta_features"], sort_keys=True),
        "warnings": json.dumps(fp.warnings), "created_at": now,
    }], schema=SCHEMAS["datasets"])
    return {"datasets": dataset_table, "trials": trial_table, "studies": study_table}


def trials_hash(dataset_id: str, family: str, task: str, metric: str,
                trials: list[Trial]) -> str:
    """The content hash of a study about to be logged (see
    :func:`warmstart.records.study_content_hash`)."""
    return records.study_content_hash(dataset_id, family, task, metric,
                                      [config_key(t.config) for t in trials],
                                      [t.score for t in trials], [t.status for t in trials])


def visible_tables(root: Path, family: str | None = None, task: str | None = None,
                   trial_columns: list[str] | None = None) -> dict[str, pa.Table]:
    """What :meth:`KnowledgeBase.arrow_tables` returns, for the history at ``root``.

    Tombstones are read first (their studies' files are skipped) and again last: a
    study deleted meanwhile, whose rows a compaction may have dropped while this read
    the others, is then left out too.
    """
    gone = records.deleted_ids(root)
    cond = None
    for col, value in (("family", family), ("task", task)):
        if value is not None:
            term = pads.field(col) == value
            cond = term if cond is None else cond & term
    studies = dedupe(read_dir(root / "studies", SCHEMAS["studies"], filter=cond),
                     "studies")
    ids = set(studies.column("study_id").to_pylist()) - gone

    def committed(files: list[Path]) -> list[Path]:
        return [f for f in files if (p := parse_log_name(f)) is None or p[0] in ids]

    id_list = pa.array(sorted(ids), pa.string())
    trials = read_dir(root / "trials", SCHEMAS["trials"], columns=trial_columns,
                      where_in=("study_id", id_list), select=committed)
    trials = dedupe(trials, "trials") if trial_columns is None else trials
    ds_ids = pa.array(sorted(set(studies.column("dataset_id").to_pylist())), pa.string())
    datasets = read_dir(root / "datasets", SCHEMAS["datasets"],
                        filter=pads.field("dataset_id").isin(ds_ids), select=committed)
    out = {"datasets": dedupe(datasets, "datasets"), "studies": studies, "trials": trials}
    return records.without_deleted(out, gone | records.deleted_ids(root))


def write_study(root: Path, fname: str, tables: dict[str, pa.Table]) -> None:
    """Write one study's tables as ``fname`` in each table directory: dataset first,
    trials next, the study row last (the study file commits)."""
    try:
        write_atomic(tables["datasets"], root / "datasets", fname)
        _pause("after-dataset")
        write_atomic(tables["trials"], root / "trials", fname)
        _pause("after-trials")
        write_atomic(tables["studies"], root / "studies", fname)
    except PermissionError:
        raise BadInputError(f"history {root} is read-only (permission denied)") from None


def dataset_state(root: Path, dataset_id: str, digest: str) -> tuple[str | None, str | None]:
    """``(name, earlier)``: the name of ``dataset_id`` when a visible study refers to it
    (else None), and the id of a visible study of it whose content hash is ``digest``
    (else None).

    Files written by ``log`` carry the dataset id in their name, so only that dataset's
    files and the few merged or imported ones are read.
    """
    def of_dataset(files: list[Path]) -> list[Path]:
        return [f for f in files if (p := parse_log_name(f)) is None or p[1] == dataset_id]

    here = pads.field("dataset_id") == dataset_id
    found = read_dir(root / "studies", SCHEMAS["studies"], columns=["study_id", "content_hash"],
                     filter=here, select=of_dataset).to_pandas()
    found = found[~found["study_id"].isin(records.deleted_ids(root))]
    if found.empty:
        return None, None
    ids = set(found["study_id"])
    same = sorted(found.loc[found["content_hash"] == digest, "study_id"])
    rows = read_dir(root / "datasets", SCHEMAS["datasets"], filter=here, select=lambda fs: [
        f for f in of_dataset(fs) if (p := parse_log_name(f)) is None or p[0] in ids])
    rows = dedupe(rows, "datasets")
    return (rows.column("name")[0].as_py() if rows.num_rows else None,
            same[0] if same else None)


def check_writable(root: Path) -> None:
    """Refuse (:class:`BadInputError`) a history whose table directories are missing or
    read-only, before anything is written."""
    for table in TABLE_DIRS:
        d = root / table
        if table == DELETIONS and not d.is_dir() and root.is_dir():
            # empty until a first deletion, so a copy that keeps no empty folders (a git
            # checkout, some sync tools) lacks it: made here, readers need not have it
            with contextlib.suppress(OSError):
                d.mkdir()
        if not d.is_dir():
            raise BadInputError(f"history {root} is missing its {table}/ directory")
        if not os.access(d, os.W_OK | os.X_OK):
            raise BadInputError(f"history {root} is read-only ({d} is not writable)")


def without_failed_studies(tables: dict[str, pa.Table]) -> dict[str, pa.Table]:
    """``tables`` without the studies that have trials but none that succeeded (status
    ``ok`` with a finite score), their trials, and the datasets only they refer to.

    Such a study is logged and kept (``kb check`` notes it), but it has nothing to
    teach: every reader that answers questions (``suggest``, ``backtest``, ``similar``,
    the service) sees the history through this rule. A history without a failed trial
    costs one pass over the status column (5 ms a million trials), one with failed
    trials a grouping by study (50 ms a million trials).
    """
    trials, studies = tables["trials"], tables["studies"]
    good = pc.fill_null(pc.and_(pc.equal(trials["status"], "ok"),
                                pc.is_finite(trials["score"])), False)
    bad = pc.invert(good)
    if not pc.any(bad).as_py():
        return tables
    ids = trials["study_id"]
    per = pa.table({"study_id": ids, "good": good}).group_by("study_id").aggregate(
        [("good", "any")])
    failed = per["study_id"].filter(pc.invert(per["good_any"]))
    if len(failed) == 0:
        return tables
    studies = studies.filter(pc.invert(pc.is_in(studies["study_id"], value_set=failed)))
    return {
        "datasets": tables["datasets"].filter(pc.is_in(
            tables["datasets"]["dataset_id"], value_set=pc.unique(studies["dataset_id"]))),
        "studies": studies,
        "trials": _drop_rows(trials, bad, failed),
    }


def _drop_rows(trials: pa.Table, bad: pa.ChunkedArray, failed: pa.Array) -> pa.Table:
    """``trials`` without the rows of the ``failed`` studies, which are all ``bad`` rows:
    only those are looked up."""
    at = np.flatnonzero(bad.to_numpy(zero_copy_only=False))
    hit = pc.is_in(trials["study_id"].take(pa.array(at)), value_set=failed)
    keep = np.ones(trials.num_rows, dtype=bool)
    keep[at[hit.to_numpy(zero_copy_only=False)]] = False
    return trials.filter(pa.array(keep))


class KnowledgeBase:
    """A team history on disk.

    Parameters
    ----------
    path : path-like, optional
        The history's directory; defaults to :func:`resolve_path`. It must already be a
        history (see :meth:`init`).
    """

    def __init__(self, path: str | os.PathLike | None = None):
        self.path = resolve_path(path)
        if self.path.exists() and not self.path.is_dir():
            raise BadInputError(f"history path {self.path} is a file, not a directory")
        meta = read_current_marker(self.path)
        self.format_version = FORMAT_VERSION
        self.created_by = str(meta.get("created_by", ""))
        # parsed stored fingerprints, by their JSON text (see _meta_values)
        self._meta_cache: dict[str, dict[str, float]] = {}

    @classmethod
    def init(cls, path: str | os.PathLike) -> KnowledgeBase:
        """Create an empty history at ``path`` (or open the one already there)."""
        root = history_location(path)
        if root.exists() and not root.is_dir():
            raise BadInputError(f"cannot create a history at {root}: it is a file")
        if (root / FORMAT_FILE).is_file():
            return cls(root)
        if root.is_dir() and any(root.iterdir()):
            raise BadInputError(f"cannot create a history in {root}: directory is not empty")
        try:
            root.mkdir(parents=True, exist_ok=True)
            for table in TABLE_DIRS:
                (root / table).mkdir(exist_ok=True)
            write_marker(root)
        except PermissionError:
            raise BadInputError(f"cannot create a history at {root}: permission denied") from None
        return cls(root)

    # -- reading --------------------------------------------------------------------
    def arrow_tables(self, family: str | None = None, task: str | None = None,
                     trial_columns: list[str] | None = None, *,
                     include_failed: bool = False) -> dict[str, pa.Table]:
        """The visible rows of the three tables as Arrow tables, sorted and de-duplicated.

        Visible means committed: the studies (optionally only those of ``family`` and
        ``task``), the trials of those studies, and the dataset rows they refer to;
        trial and dataset rows count only from files of committed studies, so nothing a
        killed or still-running writer left is ever seen. Only the needed files and rows
        are read (Parquet filters), which keeps a question about one family fast on a
        large history.

        Studies whose every trial failed are left out (see
        :func:`without_failed_studies`) unless ``include_failed`` is True, as the
        maintenance tools (check, info, export, import, compact) ask.
        """
        need = None if trial_columns is None or include_failed else list(dict.fromkeys(
            [*trial_columns, "study_id", "status", "score"]))
        try:
            out = visible_tables(self.path, family, task, need or trial_columns)
        except BadInputError:
            raise
        except (TypeError, ValueError, pa.ArrowException):
            # a Parquet file of another schema reads as rows of nulls, which fail
            # later: name it, and how to set it aside, rather than the failure
            maintenance.refuse_foreign_files(self.path, "read")
            raise
        if include_failed:
            return out
        out = without_failed_studies(out)
        if trial_columns is not None:
            out["trials"] = out["trials"].select(trial_columns)
        return out

    def tables(self, family: str | None = None, task: str | None = None, *,
               include_failed: bool = False) -> dict[str, pd.DataFrame]:
        """The visible rows of all three tables as DataFrames (see :meth:`arrow_tables`).

        Rows are de-duplicated by key and sorted by it, so the result does not depend on
        how the rows are spread over files.
        """
        return {k: v.to_pandas() for k, v in self.arrow_tables(
            family, task, include_failed=include_failed).items()}

    def fingerprints(self, datasets: pd.DataFrame | None = None) -> dict[str, Fingerprint]:
        """Stored fingerprints by dataset id (of ``datasets``, default every dataset)."""
        if datasets is None:
            datasets = self.tables()["datasets"]
        out = {}
        for did, meta, version, task, target, warnings in zip(
                datasets["dataset_id"], datasets["meta_features"],
                datasets["catalogue_version"], datasets["task"], datasets["target"],
                datasets["warnings"]):
            out[did] = Fingerprint(dict(self._meta_values(meta)), int(version), task, target,
                                   "", json.loads(warnings))
        return out

    def _meta_values(self, meta_json: str) -> dict[str, float]:
        """Parsed ``meta_features`` JSON (null -> NaN), cached by the text itself, so
        repeated questions to one KnowledgeBase parse each stored fingerprint once."""
        values = self._meta_cache.get(meta_json)
        if values is None:
            if len(self._meta_cache) >= META_CACHE_SIZE:
                self._meta_cache.clear()
            values = self._meta_cache[meta_json] = {
                k: (np.nan if v is None else float(v)) for k, v in json.loads(meta_json).items()}
        return values

    # -- writing ----------------------------------------------------------------------
    def log(self, data: pd.DataFrame | str | os.PathLike | None = None, *,
            target: str | None = None, family: str, trials: TrialsInput, metric: str | None = None,
            better: str | None = None, name: str | None = None,
            fingerprint_of: Fingerprint | str | os.PathLike | None = None,
            task: str | None = None, source: str = "log", cluster: Any = None,
            file_name: str | None = None) -> LoggedStudy:
        """Log one finished study.

        Parameters
        ----------
        data : DataFrame or path, optional
            The dataset (features and target). Not needed when ``fingerprint_of`` is given.
        target : str
            The target column (with ``data``).
        family : str
            A declared model family (see :func:`warmstart.families`).
        trials : DataFrame, path or list of dicts
            One row per trial: parameter columns, ``score``, optional ``fit_seconds``,
            ``status`` and ``error``; or a search's saved ``cv_results_`` table. Each
            parameter is checked by the estimator itself, not by the search space, so
            what was run is stored as given (see :func:`warmstart.trials.check_trials`).
        metric : str, optional
            scikit-learn scorer name; defaults to balanced accuracy or R².
        better : {"higher", "lower"}, optional
            Required for a metric scikit-learn does not know.
        name : str, optional
            A label for the study, and the dataset's name: a known dataset given a
            ``name`` is renamed (its newest name shows everywhere); without one it
            keeps its name. Default: the data file's name.
        file_name : str, optional
            The data file's name when ``data`` is not given here (the service's clients
            fingerprint locally): labels a new dataset as a path ``data`` would.
        fingerprint_of : Fingerprint or path to its JSON, optional
            Use this fingerprint instead of computing one from ``data``.
        task : {"classification", "regression"}, optional
            Overrides the task inferred from the target.
        cluster : str or dask.distributed.Client, optional
            Fingerprint a path ``data`` on this dask cluster (same result).

        Everything is validated before anything is written; on any error nothing is.
        A study already in the history (same dataset, family, task, metric and set of
        trials) is not written again: the result has ``already_logged`` set and the
        earlier study's id.
        """
        fam = get_family(family)
        fp = query_fingerprint(data, target, task, fingerprint_of, cluster=cluster)
        metric_obj = resolve_metric(metric or DEFAULT_METRIC[fp.task], better)
        checked = check_trials(trials, fam, fp.task, metric_obj)
        if not re.fullmatch(r"[0-9a-f]{64}", fp.dataset_hash):
            raise BadInputError("the fingerprint's dataset_hash is not 64 hex digits")
        if not isinstance(source, str) or not source:
            raise BadInputError("source must be a non-empty string")
        self._check_writable()

        dataset_id, study_id = fp.dataset_hash[:16], uuid.uuid4().hex
        known, earlier = dataset_state(self.path, dataset_id, trials_hash(
            dataset_id, fam.name, fp.task, metric_obj.name, checked))
        label = name or known or file_name or (
            Path(data).stem if isinstance(data, (str, os.PathLike))
            else f"dataset-{fp.dataset_hash[:8]}")
        if earlier is None:
            write_study(self.path, log_name(study_id, dataset_id), study_tables(
                study_id, dataset_id, label, fam.name, fp, metric_obj, checked, source,
                datetime.now(timezone.utc), dataset_name=name or known))
        scores = [t.score for t in checked if t.status == OK]
        best = None
        if scores:
            best = max(scores) if metric_obj.better == HIGHER else min(scores)
        return LoggedStudy(earlier or study_id, dataset_id, known is None, fam.name, fp.task,
                           metric_obj.name, metric_obj.better, label, len(checked),
                           len(scores), best, already_logged=earlier is not None)

    def log_search(self, search: Any, X: pd.DataFrame, y: Any, *, name: str | None = None,
                   metric: str | None = None) -> LoggedStudy:
        """Log a fitted scikit-learn search (GridSearchCV, RandomizedSearchCV or a halving
        search) run on ``X`` and ``y``.

        The family comes from the (final pipeline step's) estimator class, the metric from
        ``search.scoring`` (``metric`` picks one of several), fit seconds from
        ``mean_fit_time``. ``X`` and ``y`` are fingerprinted here; no rows are stored.
        """
        from warmstart.searches import trials_from_search

        found = trials_from_search(search, metric)
        if not isinstance(X, pd.DataFrame):
            X = pd.DataFrame(np.asarray(X)).rename(columns=lambda c: f"x{c}")
        target = getattr(y, "name", None) or "target"
        if target in X.columns:
            raise BadInputError(f"X already has a column named {target!r}, the target's name")
        frame = X.assign(**{target: np.asarray(y)})
        return self.log(frame, target=target, family=found.family, trials=found.trials,
                        metric=found.metric, task=found.task, name=name)

    def _check_writable(self) -> None:
        check_writable(self.path)

    # -- questions ------------------------------------------------------------------
    def similar(self, data: pd.DataFrame | str | os.PathLike | None = None, *,
                target: str | None = None, k: int = 5, task: str | None = None,
                fingerprint_of: Fingerprint | str | os.PathLike | None = None,
                cluster: Any = None) -> list[Neighbour]:
        """The ``k`` past datasets (same task) nearest to this one, with explanations.

        See :mod:`warmstart.similarity` for the scaling and the distance. ``cluster``
        fingerprints a path ``data`` on a dask cluster (the same fingerprint).
        """
        if k < 1:
            raise BadInputError("k must be at least 1")
        query = query_fingerprint(data, target, task, fingerprint_of, cluster=cluster)
        datasets = self.tables()["datasets"]
        same_task = datasets[datasets["task"] == query.task]
        return nearest(query, self.fingerprints(same_task),
                       dict(zip(same_task["dataset_id"], same_task["name"])), k=k)

    def suggest(self, data: pd.DataFrame | str | os.PathLike | None = None, *,
                target: str | None = None, family: str, k: int = 10,
                task: str | None = None, metric: str | None = None,
                strategy: str | None = None, space: SearchSpace | None = None,
                max_fit_seconds: float | None = None, seed: int = 0,
                fingerprint_of: Fingerprint | str | os.PathLike | None = None,
                cluster: Any = None) -> list[Suggestion]:
        """A ranked list of starting configurations for ``family`` on this dataset.

        Parameters
        ----------
        family : str
        k : int
            How many configurations.
        metric : str, optional
            Use only studies of this metric. By default the task's default metric
            (balanced accuracy, R²) when the history has such studies of the family,
            else the metric most of them use. Metrics are never mixed.
        strategy : str, optional
            A name from :data:`warmstart.strategies.STRATEGIES`.
        space : SearchSpace, JSON list or path of a JSON file, optional
            Restrict suggestions to this space (values outside are clipped to its
            bounds; configurations with a categorical value outside it are dropped).
        max_fit_seconds : float, optional
            Drop suggestions whose expected fit time exceeds this.
        cluster : str or dask.distributed.Client, optional
            Fingerprint a path ``data`` on this dask cluster (the same fingerprint).

        Raises :class:`NothingToSuggestError` when the history has no study of the
        family for this task. See :mod:`warmstart.suggesting` for the set-up.
        """
        if k < 1:
            raise BadInputError("k must be at least 1")
        fam = get_family(family)
        strat = get_strategy(strategy or DEFAULT_STRATEGY)
        query = query_fingerprint(data, target, task, fingerprint_of, cluster=cluster)
        return suggesting.suggest(self, query, fam, strat, k=k, metric=metric, space=space,
                                  max_fit_seconds=max_fit_seconds, seed=seed)

    # -- summaries and maintenance (implemented in warmstart.maintenance) -------------
    def info(self) -> dict[str, Any]:
        """Counts per family and metric, fingerprints per catalogue version, size on disk.
        See :func:`warmstart.maintenance.info`."""
        return maintenance.info(self)

    def check(self, repair: bool = False, grace_seconds: float | None = None
              ) -> maintenance.CheckReport:
        """Verify the history's integrity; with ``repair``, remove leftovers of killed
        writers and set unreadable files aside (``.ok`` is False on any problem).
        See :func:`warmstart.maintenance.check`."""
        return maintenance.check(self, repair=repair, grace_seconds=grace_seconds)

    def compact(self) -> dict[str, Any]:
        """Merge each table's files into one, beside live readers and writers.
        See :func:`warmstart.maintenance.compact`."""
        return maintenance.compact(self)

    def export(self, file: str | os.PathLike) -> dict[str, Any]:
        """Write the visible history to one portable file.
        See :func:`warmstart.maintenance.export`."""
        return maintenance.export(self, file)

    def import_(self, file: str | os.PathLike) -> dict[str, Any]:
        """Merge an exported history (``import`` is a Python keyword, hence the ``_``).
        See :func:`warmstart.maintenance.import_`."""
        return maintenance.import_(self, file)

    @staticmethod
    def migrate(path: str | os.PathLike | None = None) -> dict[str, Any]:
        """Convert an older-format history in place. See :func:`warmstart.migrations.migrate`."""
        return migrations.migrate(resolve_path(path))

    # -- the studies as records (implemented in warmstart.records) --------------------
    def list_studies(self) -> list[dict[str, Any]]:
        """The datasets with their studies, best scores, dates and names.
        See :func:`warmstart.records.list_studies`."""
        return records.list_studies(self)

    def show(self, ref: str) -> dict[str, Any]:
        """One study (with its trials) or dataset (with its studies), by id, unique id
        prefix or name. See :func:`warmstart.records.show`."""
        return records.show(self, ref)

    def delete(self, ref: str) -> dict[str, Any]:
        """Delete one study (writes its tombstone; readers skip it from then on).
        See :func:`warmstart.records.delete`."""
        return records.delete(self, ref)


__all__ = ["DEFAULT_PATH", "ENV_VAR", "FORMAT_VERSION", "KnowledgeBase", "LoggedStudy",
           "HIGHER", "LOWER", "query_fingerprint", "resolve_path"]
