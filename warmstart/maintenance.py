"""Keeping a team history healthy: info, check, repair, compact, migrate, export, import.

All of these work beside live readers and writers, without locks (see
:mod:`warmstart.storage` for the file rules they rely on).

* :func:`check` verifies the format marker, every file's schema, that every trial belongs
  to a committed study and every study to a dataset, unique identifiers, finite scores
  for ``ok`` trials, known catalogue versions and valid JSON. ``repair=True`` removes
  temporary and orphan files older than a grace period (leftovers of killed writers;
  younger ones may belong to a writer still running) and moves unreadable files to
  ``<history>/quarantine/``. It never touches committed rows.
* :func:`compact` merges each table's files into one ``merged-*.parquet`` file. It writes
  the merged file first, then deletes only the files it listed before merging and whose
  every row the merged file holds; readers de-duplicate by key meanwhile, and a file a
  writer commits during compaction is not deleted.
* :func:`export` writes one portable ZIP file (no compression: Parquet is already
  compressed) holding ``warmstart-export.json`` (kind, format version, counts, content
  hash) and ``datasets.parquet``, ``studies.parquet``, ``trials.parquet``.
  :func:`import_` merges such a file: studies already present, by id or by content (same
  dataset, family, task, metric and trials), are skipped, so importing twice adds nothing.
* :func:`migrate` converts the format-0 layout (one flat ``trials.parquet``: a row per
  trial, fingerprints in ``fp_<meta-feature>`` columns, see :data:`FORMAT0_COLUMNS`) to
  the current one, in place; the new marker is the commit point and the old file is kept
  under ``backup-format-0/``.

Nothing is ever loaded with pickle: tables are Parquet, configurations JSON.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import shutil
import zipfile
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from warmstart.errors import BadInputError
from warmstart.families import FAMILIES
from warmstart.filesystems import history_location
from warmstart.fingerprint import KNOWN_CATALOGUE_VERSIONS
from warmstart.layout import (
    FORMAT_FILE,
    FORMAT_VERSION,
    KEYS,
    SCHEMAS,
    dedupe,
    marker_is_current,
    read_marker,
    write_marker,
)
from warmstart.metrics import MAXIMIZE, MINIMIZE
from warmstart.spaces import config_key
from warmstart.storage import (
    ROW_GROUP_ROWS,
    age_seconds,
    batch_name,
    fsync_dir,
    parse_log_name,
    read_file,
    temp_files,
    visible_files,
    write_atomic,
    write_bytes_atomic,
)
from warmstart.tasks import TASKS
from warmstart.values import finite_or_none
from warmstart.version import __version__

if TYPE_CHECKING:  # annotations only: warmstart.history imports this module
    from warmstart.history import KnowledgeBase

DEFAULT_GRACE_SECONDS = 900.0
QUARANTINE = "quarantine"
EXPORT_KIND = "warmstart-history-export"
EXPORT_MARKER = "warmstart-export.json"
STATUSES = ("ok", "failed")
EXAMPLES = 3  # how many offending ids a finding quotes

OK_, PROBLEM, REPAIRED, NOTE = "ok", "problem", "repaired", "note"


# -- check ------------------------------------------------------------------------------
@dataclass(frozen=True)
class Finding:
    """One line of a check report: which check, its outcome, and details."""

    check: str
    status: str  # "ok", "problem", "repaired" or "note"
    detail: str = ""


@dataclass
class CheckReport:
    """What :func:`check` found. ``ok`` is True when no problem remains."""

    path: str
    format_version: int
    findings: list[Finding] = field(default_factory=list)
    counts: dict[str, int] = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return not any(f.status == PROBLEM for f in self.findings)

    @property
    def problems(self) -> list[Finding]:
        return [f for f in self.findings if f.status == PROBLEM]

    def add(self, check: str, bad: list[str] | int, what: str, ok_detail: str = "") -> None:
        """Record ``check``: a problem when ``bad`` (offenders, or a count) is non-empty."""
        n = bad if isinstance(bad, int) else len(bad)
        if n:
            examples = "" if isinstance(bad, int) else " (e.g. " + ", ".join(
                map(str, bad[:EXAMPLES])) + ")"
            self.findings.append(Finding(check, PROBLEM, f"{n} {what}{examples}"))
        else:
            self.findings.append(Finding(check, OK_, ok_detail))

    def to_dict(self) -> dict[str, Any]:
        return {"path": self.path, "format_version": self.format_version, "ok": self.ok,
                "counts": dict(self.counts),
                "findings": [f.__dict__.copy() for f in self.findings]}


def _schema_mismatch(path: Path, expected: pa.Schema) -> str | None:
    """Why ``path`` is not a readable Parquet file of ``expected``; None when it is."""
    try:
        got = pq.read_schema(path)
        pq.ParquetFile(path).metadata  # noqa: B018 - the footer must parse too
    except (OSError, pa.ArrowException) as exc:
        return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    for f in expected:
        if f.name not in got.names:
            return f"column {f.name!r} missing"
        if not got.field(f.name).type.equals(f.type):
            return f"column {f.name!r} is {got.field(f.name).type}, not {f.type}"
    extra = sorted(set(got.names) - set(expected.names))
    return f"unexpected columns {', '.join(extra)}" if extra else None


def _json_ok(text: Any, kind: type) -> bool:
    try:
        return isinstance(json.loads(text), kind)
    except (TypeError, ValueError):
        return False


def _meta_ok(text: Any) -> bool:
    try:
        values = json.loads(text)
    except (TypeError, ValueError):
        return False
    return isinstance(values, dict) and all(
        v is None or (isinstance(v, (int, float)) and not isinstance(v, bool)
                      and math.isfinite(v)) for v in values.values())


def content_problems(datasets: pd.DataFrame, studies: pd.DataFrame, trials: pd.DataFrame,
                     report: CheckReport) -> None:
    """Row-level checks on visible (or about-to-be-imported) rows; adds findings."""
    sid = studies["study_id"]
    report.add("studies have a dataset", sorted(set(studies.loc[
        ~studies["dataset_id"].isin(datasets["dataset_id"]), "study_id"])),
        "studies refer to a dataset that is not in the history")
    counts = trials.groupby("study_id").size()
    short = studies[studies["n_trials"] != sid.map(counts).fillna(0).astype(int)]
    report.add("studies have all their trials", list(short["study_id"]),
               "studies do not have the number of trials they declare")
    report.add("trials belong to a study", sorted(set(trials.loc[
        ~trials["study_id"].isin(sid), "study_id"])), "trials of studies not in the history")
    report.add("known families", sorted(set(studies["family"]) - set(FAMILIES)),
               "unknown model families")
    report.add("valid tasks and directions", list(studies.loc[
        ~studies["task"].isin(TASKS) | ~studies["direction"].isin((MAXIMIZE, MINIMIZE))
        | studies["metric"].isna() | (studies["metric"] == ""), "study_id"]),
        "studies with an invalid task, direction or metric")
    ok = trials["status"] == "ok"
    score = trials["score"].to_numpy(dtype=float, na_value=np.nan)
    bad_score = trials[ok & ~np.isfinite(score)]
    report.add("finite scores for ok trials",
               [f"{r.study_id[:12]}#{r.trial_index}" for r in bad_score.itertuples()],
               "ok trials without a finite score")
    report.add("known trial statuses", sorted(set(trials["status"].dropna()) - set(STATUSES))
               + (["<null>"] if trials["status"].isna().any() else []),
               "unknown trial statuses")
    fit = trials["fit_seconds"].to_numpy(dtype=float, na_value=np.nan)
    bad_fit = trials[~np.isnan(fit) & ~(np.isfinite(fit) & (fit >= 0))]
    report.add("valid fit times", [f"{r.study_id[:12]}#{r.trial_index}"
                                   for r in bad_fit.itertuples()],
               "trials with a negative or infinite fit time")
    bad_cfg = [f"{r.study_id[:12]}#{r.trial_index}" for r in trials.itertuples()
               if not _json_ok(r.config, dict)]
    report.add("configurations are JSON objects", bad_cfg, "trials with invalid JSON configs")
    report.add("known catalogue versions", sorted(set(
        datasets.loc[~datasets["catalogue_version"].isin(KNOWN_CATALOGUE_VERSIONS),
                     "dataset_id"])),
        f"fingerprints from catalogue versions this warmstart does not know "
        f"(known: {list(KNOWN_CATALOGUE_VERSIONS)})")
    report.add("fingerprints are valid JSON", [
        r.dataset_id for r in datasets.itertuples()
        if not (_meta_ok(r.meta_features) and _json_ok(r.warnings, list))],
        "datasets whose meta-features or warnings are not valid JSON")


def _refuse_problems(tables: dict[str, pd.DataFrame], source: Any, version: int) -> None:
    """Raise :class:`BadInputError` naming the first problem :func:`content_problems`
    finds in rows about to be written from ``source``."""
    report = CheckReport(str(source), version)
    content_problems(tables["datasets"], tables["studies"], tables["trials"], report)
    if not report.ok:
        first = report.problems[0]
        raise BadInputError(f"{source} fails the check '{first.check}': {first.detail}")


def _conflicting(frame: pd.DataFrame, keys: list[str], ignore: list[str]) -> list[str]:
    """Keys held by rows that differ in anything but ``ignore`` (true id clashes)."""
    if frame.empty:
        return []
    content = frame.drop(columns=ignore).drop_duplicates()
    dup = content[content.duplicated(keys, keep=False)]
    return sorted({"#".join(map(str, k)) if len(keys) > 1 else str(k[0])
                   for k in dup[keys].itertuples(index=False)})


def check(kb: KnowledgeBase, repair: bool = False,
          grace_seconds: float | None = None) -> CheckReport:
    """Verify a history; optionally repair what can be repaired safely.

    Parameters
    ----------
    kb : KnowledgeBase
    repair : bool
        Remove temporary files and orphan files (files of studies that were never
        committed) older than ``grace_seconds``; move unreadable files or files of the
        wrong schema to ``<history>/quarantine/``. Committed rows are never touched.
    grace_seconds : float, optional
        Minimum age of a leftover before it counts as a problem and may be removed
        (default 900 s): a younger one may belong to a writer that is still running.

    Returns
    -------
    CheckReport
        Exit code 1 in the CLI when ``report.ok`` is False.
    """
    grace = DEFAULT_GRACE_SECONDS if grace_seconds is None else float(grace_seconds)
    if grace < 0 or not math.isfinite(grace):
        raise BadInputError("the grace period must be a finite number of seconds >= 0")
    root = kb.path
    report = CheckReport(str(root), kb.format_version)
    report.add("format marker", [] if marker_is_current(read_marker(root)[0]) else [FORMAT_FILE],
               "marker files with an unexpected version or table list",
               f"format version {FORMAT_VERSION}")
    if repair and not os.access(root, os.W_OK):
        raise BadInputError(f"history {root} is read-only; cannot repair it")
    if not _check_files(root, repair, report):
        # row-level checks would only repeat the reader's error
        report.findings.append(Finding("rows", NOTE, "skipped: fix the unreadable files first"))
        return report
    per_file = {t: [(f, read_file(f, SCHEMAS[t])) for f in visible_files(root / t)]
                for t in SCHEMAS}
    _check_leftovers(root, per_file, grace, repair, report)
    _check_identifiers(per_file, report)
    visible = kb.tables()
    content_problems(visible["datasets"], visible["studies"], visible["trials"], report)
    report.counts = {"files": sum(len(visible_files(root / t)) for t in SCHEMAS),
                     **{t: int(len(v)) for t, v in visible.items()}}
    return report


_PerFile = dict[str, list[tuple[Path, pa.Table]]]  # table -> (file, its rows)


def _check_files(root: Path, repair: bool, report: CheckReport) -> bool:
    """Every file readable, with its table's schema (with ``repair``: bad ones moved to
    ``quarantine/``). Returns whether every remaining file is readable."""
    bad_files, n_files = [], 0
    for table, schema in SCHEMAS.items():
        for f in visible_files(root / table):
            n_files += 1
            why = _schema_mismatch(f, schema)
            if why:
                bad_files.append((table, f, why))
    if bad_files and repair:
        for table, f, _why in bad_files:
            dest = root / QUARANTINE / table
            dest.mkdir(parents=True, exist_ok=True)
            os.rename(f, dest / f.name)
        report.findings.append(Finding("readable files", REPAIRED, f"{len(bad_files)} files "
                                       f"moved to {QUARANTINE}/"))
        bad_files = []
    report.add("readable files", [f"{t}/{f.name}: {why}" for t, f, why in bad_files],
               "files unreadable or not of the table's schema", f"{n_files} files")
    return not bad_files


def _committed(per_file: _PerFile) -> tuple[set[str], set[str]]:
    """Ids of the committed studies and of the datasets they refer to."""
    studies = [tb for _f, tb in per_file["studies"]]
    return ({s for tb in studies for s in tb.column("study_id").to_pylist()},
            {d for tb in studies for d in tb.column("dataset_id").to_pylist()})


def _leftovers(root: Path, per_file: _PerFile) -> list[Path]:
    """Temporary files, and trial or dataset files no committed study refers to."""
    committed, referenced = _committed(per_file)
    leftovers: list[Path] = list(temp_files(root))
    for table in ("trials", "datasets"):
        for f, tb in per_file[table]:
            parsed = parse_log_name(f)
            if parsed is not None:
                orphan = parsed[0] not in committed
            elif table == "trials":
                orphan = not committed.intersection(tb.column("study_id").to_pylist())
            else:
                orphan = not referenced.intersection(tb.column("dataset_id").to_pylist())
            if orphan:
                leftovers.append(f)
    return leftovers


def _check_leftovers(root: Path, per_file: _PerFile, grace: float, repair: bool,
                     report: CheckReport) -> None:
    """Leftovers older than ``grace`` seconds are problems (removed with ``repair``);
    younger ones are noted and left alone (a writer may still be running)."""
    leftovers = _leftovers(root, per_file)
    old = [f for f in leftovers if age_seconds(f) >= grace]
    young = len(leftovers) - len(old)
    if old and repair:
        for f in old:
            f.unlink(missing_ok=True)
        for table in SCHEMAS:
            fsync_dir(root / table)
        report.findings.append(Finding("leftovers of killed writers", REPAIRED,
                                       f"{len(old)} files removed"))
    else:
        report.add("leftovers of killed writers",
                   [str(f.relative_to(root)) for f in old],
                   f"temporary or orphan files older than {grace:g} s "
                   "(remove with --repair)", "none")
    if young:
        report.findings.append(Finding(
            "files being written", NOTE, f"{young} temporary or uncommitted files younger "
            f"than {grace:g} s (a writer may be running; left alone)"))


def _check_identifiers(per_file: _PerFile, report: CheckReport) -> None:
    """No key shared by committed rows that differ (beyond a dataset's name and time)."""
    committed, referenced = _committed(per_file)
    raw = {t: pa.concat_tables([tb for _f, tb in per_file[t]]).to_pandas()
           if per_file[t] else SCHEMAS[t].empty_table().to_pandas() for t in SCHEMAS}
    raw["trials"] = raw["trials"][raw["trials"]["study_id"].isin(committed)]
    raw["datasets"] = raw["datasets"][raw["datasets"]["dataset_id"].isin(referenced)]
    report.add("unique identifiers",
               _conflicting(raw["studies"], KEYS["studies"], [])
               + _conflicting(raw["trials"], KEYS["trials"], [])
               + _conflicting(raw["datasets"], KEYS["datasets"], ["name", "created_at"]),
               "identifiers shared by rows with different content")


# -- content hash -----------------------------------------------------------------------
def content_hash(tables: dict[str, pd.DataFrame]) -> str:
    """SHA-256 over every visible row of the three tables, sorted by key (hex).

    Equal hashes mean equal content, however the rows are spread over files.
    """
    h = hashlib.sha256()
    for name in SCHEMAS:
        frame = tables[name].sort_values(KEYS[name], kind="stable").reset_index(drop=True)
        h.update(name.encode())
        h.update(repr(list(frame.columns)).encode())
        h.update(pd.util.hash_pandas_object(frame, index=False).to_numpy().tobytes())
    return h.hexdigest()


def summary(kb: KnowledgeBase) -> dict[str, Any]:
    """Row counts, file count and content hash of what readers see."""
    t = kb.tables()
    return {"files": sum(len(visible_files(kb.path / n)) for n in SCHEMAS),
            **{n: int(len(v)) for n, v in t.items()}, "content_hash": content_hash(t)}


def info(kb: KnowledgeBase) -> dict[str, Any]:
    """Counts per family, task and metric, fingerprints per catalogue version, files and
    size on disk (what ``warmstart kb info`` prints)."""
    t = kb.tables()
    studies, trials, datasets = t["studies"], t["trials"], t["datasets"]
    per = []
    if len(studies):
        counts = trials.groupby("study_id").size()
        s = studies.assign(trials=studies["study_id"].map(counts).fillna(0).astype(int))
        grouped = s.groupby(["family", "task", "metric"], sort=True)
        for (fam, task, metric), g in grouped:
            per.append({"family": fam, "task": task, "metric": metric,
                        "studies": int(len(g)), "datasets": int(g["dataset_id"].nunique()),
                        "trials": int(g["trials"].sum())})
    versions = datasets.groupby("catalogue_version").size()
    size = sum(f.stat().st_size for f in kb.path.rglob("*") if f.is_file())
    return {
        "path": str(kb.path),
        "format_version": kb.format_version,
        "datasets": int(len(datasets)),
        "studies": int(len(studies)),
        "trials": int(len(trials)),
        "files": sum(len(visible_files(kb.path / tb)) for tb in SCHEMAS),
        "bytes_on_disk": int(size),
        "by_family": per,
        "fingerprints_by_catalogue_version": {int(k): int(v) for k, v in versions.items()},
    }


# -- compact ----------------------------------------------------------------------------
def compact(kb: KnowledgeBase) -> dict[str, Any]:
    """Merge each table's committed rows into one file, then delete the merged files.

    Safe beside readers (they de-duplicate by key, and retry a listing when a file they
    listed is gone) and writers (only files listed before merging, and whose every row
    is in the merged file, are deleted; orphans and in-flight files are left alone).

    Returns
    -------
    dict
        ``before`` and ``after`` summaries (files, rows per table, content hash) and the
        number of files ``removed``.
    """
    kb._check_writable()
    before = summary(kb)
    listed = {t: [(f, read_file(f, SCHEMAS[t])) for f in visible_files(kb.path / t)]
              for t in SCHEMAS}
    studies = dedupe(pa.concat_tables([tb for _f, tb in listed["studies"]])
                     if listed["studies"] else SCHEMAS["studies"].empty_table(), "studies")
    removed = sum(_merge_table(kb.path / table, table, listed[table], studies)
                  for table in ("datasets", "trials", "studies"))
    after = summary(kb)
    return {"path": str(kb.path), "before": before, "after": after, "removed": removed}


def _merge_table(directory: Path, table: str, files: list[tuple[Path, pa.Table]],
                 studies: pa.Table) -> int:
    """Merge the committed rows of ``files`` (one table's, as listed) into one file, then
    delete those whose every row it holds; returns how many were deleted."""
    if len(files) <= 1:
        return 0
    committed = set(studies.column("study_id").to_pylist())
    key_col = "dataset_id" if table == "datasets" else "study_id"
    wanted = (set(studies.column("dataset_id").to_pylist()) if table == "datasets"
              else committed)
    # an uncommitted writer's file is not ours to merge, and stays even if its rows
    # are known
    ours = [(f, tb) for f, tb in files
            if (parsed := parse_log_name(f)) is None or parsed[0] in committed]
    parts = [tb.filter(pa.array(np.isin(np.asarray(tb.column(key_col).to_pylist(),
                                                   dtype=object), list(wanted)), pa.bool_()))
             for _f, tb in ours]
    merged = dedupe(pa.concat_tables(parts), table) if parts else None
    if merged is None or merged.num_rows == 0:
        return 0
    if table == "trials":
        merged = family_order(merged, studies)
    write_atomic(merged, directory, batch_name("merged"), ROW_GROUP_ROWS)
    have = set(_keys(merged, table))
    removed = 0
    for f, tb in ours:
        if set(_keys(tb, table)) <= have:
            f.unlink(missing_ok=True)
            removed += 1
    fsync_dir(directory)
    return removed


def family_order(trials: pa.Table, studies: pa.Table) -> pa.Table:
    """Trials sorted by their study's family and task, then study and trial index.

    Written in row groups of ``ROW_GROUP_ROWS``, a family's trials then sit in few row
    groups, which a reader asking about one family reads alone (see
    :func:`warmstart.storage.read_where_in`).
    """
    tags = studies.select(["study_id", "family", "task"])
    joined = trials.join(tags, "study_id", join_type="left outer")
    order = [(c, "ascending") for c in ("family", "task", "study_id", "trial_index")]
    return joined.sort_by(order).select(SCHEMAS["trials"].names).cast(SCHEMAS["trials"])


def _keys(tb: pa.Table, table: str) -> list[tuple]:
    cols = [tb.column(c).to_pylist() for c in KEYS[table]]
    return list(zip(*cols))


# -- export / import --------------------------------------------------------------------
def _parquet_bytes(table: pa.Table) -> bytes:
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, compression="zstd")
    return sink.getvalue().to_pybytes()


def export(kb: KnowledgeBase, file: str | os.PathLike) -> dict[str, Any]:
    """Write the visible history to one ZIP file (see the module docstring).

    The file is written under a temporary name and renamed, so it is complete or absent.
    """
    dest = Path(file)
    if dest.is_dir():
        raise BadInputError(f"export file {dest} is a directory")
    if not dest.parent.is_dir():
        raise BadInputError(f"cannot write {dest}: directory {dest.parent} does not exist")
    tables = kb.arrow_tables()
    frames = {t: v.to_pandas() for t, v in tables.items()}
    marker = {"kind": EXPORT_KIND, "format_version": FORMAT_VERSION,
              "created_by": f"warmstart {__version__}",
              "exported_at": datetime.now(timezone.utc).isoformat(timespec="seconds"),
              "counts": {t: int(v.num_rows) for t, v in tables.items()},
              "content_hash": content_hash(frames)}
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=zipfile.ZIP_STORED) as zf:
        zf.writestr(EXPORT_MARKER, json.dumps(marker, indent=2) + "\n")
        for t, v in tables.items():
            zf.writestr(f"{t}.parquet", _parquet_bytes(v))
    try:
        write_bytes_atomic(buf.getvalue(), dest)
    except PermissionError:
        raise BadInputError(f"cannot write {dest}: permission denied") from None
    return {"file": str(dest), "bytes": dest.stat().st_size, **marker["counts"],
            "content_hash": marker["content_hash"]}


def read_export(file: str | os.PathLike) -> tuple[dict[str, Any], dict[str, pa.Table]]:
    """Open an export file and validate it; returns its marker and its three tables."""
    if isinstance(file, str) and "://" in file:  # a Path would fold https:// into https:/
        if not file.lower().startswith("file://"):
            raise BadInputError(f"cannot import {file}: kb import reads a local file (a path "
                                "or a file:// URI); download it first")
        file = history_location(file)
    src = Path(file)
    if not src.is_file():
        raise BadInputError(f"export file not found: {src}")
    try:
        with zipfile.ZipFile(src) as zf:
            names = set(zf.namelist())
            need = {EXPORT_MARKER, *(f"{t}.parquet" for t in SCHEMAS)}
            if not need <= names:
                raise BadInputError(f"{src} is not a warmstart export (missing "
                                    f"{', '.join(sorted(need - names))})")
            marker = json.loads(zf.read(EXPORT_MARKER).decode("utf-8"))
            blobs = {t: zf.read(f"{t}.parquet") for t in SCHEMAS}
    except (zipfile.BadZipFile, OSError):
        raise BadInputError(f"{src} is not a warmstart export (not a ZIP file)") from None
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise BadInputError(f"{src} has an invalid {EXPORT_MARKER}") from None
    if not isinstance(marker, dict) or marker.get("kind") != EXPORT_KIND:
        raise BadInputError(f"{src} is not a warmstart export (wrong kind)")
    version = marker.get("format_version")
    if not isinstance(version, int) or version > FORMAT_VERSION or version < 1:
        raise BadInputError(
            f"{src} has format version {version!r} (written by "
            f"{marker.get('created_by', '?')}); this warmstart {__version__} imports "
            f"format versions 1 to {FORMAT_VERSION}: upgrade warmstart")
    tables = {}
    for t, blob in blobs.items():
        try:
            raw = pq.read_table(pa.BufferReader(blob))
        except (OSError, pa.ArrowException) as exc:
            raise BadInputError(f"{src}: {t}.parquet is unreadable ({exc})") from None
        missing = [f.name for f in SCHEMAS[t] if f.name not in raw.schema.names]
        if missing:
            raise BadInputError(f"{src}: {t}.parquet lacks columns {', '.join(missing)}")
        try:
            tables[t] = raw.select(SCHEMAS[t].names).cast(SCHEMAS[t])
        except (pa.ArrowException, ValueError) as exc:
            raise BadInputError(f"{src}: {t}.parquet has the wrong column types ({exc})"
                                ) from None
    return marker, tables


def _signatures(studies: pd.DataFrame, trials: pd.DataFrame) -> pd.Series:
    """A content signature per study id (index): its dataset, family, task, metric,
    direction, creation time and trials. Equal signatures mean the same study record,
    even when it travelled under another id."""
    t = trials.sort_values(["study_id", "trial_index"])
    lines = (t["config"].astype(str) + "|" + t["score"].map(repr).astype(str) + "|"
             + t["status"].astype(str))
    per = lines.groupby(t["study_id"]).agg("\n".join)
    head = studies[["dataset_id", "family", "task", "metric", "direction"]].astype(str).agg(
        "|".join, axis=1) + "|" + studies["created_at"].astype(str)
    body = studies["study_id"].map(per).fillna("").astype(str)
    sig = [hashlib.sha256((a + "\n" + b).encode()).hexdigest() for a, b in zip(head, body)]
    return pd.Series(sig, index=studies["study_id"].to_numpy(), dtype=object)


def import_(kb: KnowledgeBase, file: str | os.PathLike) -> dict[str, Any]:
    """Merge an export file into this history.

    Everything is validated first (schemas, the same row checks as :func:`check`); on
    any problem nothing is written. Studies already present, by id or by content, are
    skipped; datasets already present (same id, i.e. same data) keep their rows. The new
    rows are written as three ``import-*.parquet`` files, the studies file last (the
    commit point), so an interrupted import leaves nothing visible.

    Returns
    -------
    dict
        Counts of studies added and skipped, and datasets and trials added.
    """
    marker, tables = read_export(file)
    frames = {t: dedupe(v, t).to_pandas() for t, v in tables.items()}
    _refuse_problems(frames, file, int(marker["format_version"]))
    kb._check_writable()
    have = kb.tables()
    new = frames["studies"]
    same_id = new["study_id"].isin(have["studies"]["study_id"])
    known_sigs = set(_signatures(have["studies"], have["trials"]))
    sigs = _signatures(new, frames["trials"])
    same_content = new["study_id"].map(sigs).isin(known_sigs) & ~same_id
    add = new[~same_id & ~same_content]
    trials = frames["trials"][frames["trials"]["study_id"].isin(add["study_id"])]
    datasets = frames["datasets"][frames["datasets"]["dataset_id"].isin(add["dataset_id"])
                                  & ~frames["datasets"]["dataset_id"].isin(
                                      have["datasets"]["dataset_id"])]
    if len(add):
        for name, frame in (("datasets", datasets), ("trials", trials), ("studies", add)):
            if len(frame):
                tb = pa.Table.from_pandas(frame, schema=SCHEMAS[name], preserve_index=False)
                write_atomic(tb, kb.path / name, batch_name("import"))
    return {"file": str(file), "studies_added": int(len(add)),
            "studies_already_present": int(len(new) - len(add)),
            "datasets_added": int(len(datasets)), "trials_added": int(len(trials))}


# -- migrate ----------------------------------------------------------------------------
FORMAT0_FILE = "trials.parquet"
FORMAT0_COLUMNS = ("study", "logged_at", "dataset", "dataset_hash", "task", "target",
                   "family", "metric", "direction", "catalogue_version", "params", "score",
                   "fit_seconds", "status")
FP_PREFIX = "fp_"


def migrate(path: str | os.PathLike) -> dict[str, Any]:
    """Convert a format-0 history at ``path`` to the current format, in place.

    Format 0 (warmstart 0.0.x) kept one flat ``trials.parquet``: a row per trial with
    the columns :data:`FORMAT0_COLUMNS` (``params`` a JSON object, ``study`` a label
    unique per study) and one ``fp_<name>`` float column per meta-feature. Study ids are
    derived from the study labels, so migrating again after an interruption gives the
    same ids. The old file is moved to ``backup-format-0/`` once the new marker (the
    commit point) is written.
    """
    root = Path(path)
    marker, version = read_marker(root)
    if version == FORMAT_VERSION:
        return {"path": str(root), "from_version": version, "to_version": version,
                "migrated": False, "datasets": 0, "studies": 0, "trials": 0}
    if version != 0:
        raise BadInputError(f"cannot migrate format version {version}; this warmstart "
                            f"{__version__} migrates format 0 to {FORMAT_VERSION}")
    if not os.access(root, os.W_OK):
        raise BadInputError(f"history {root} is read-only; cannot migrate it")
    src = root / FORMAT0_FILE
    by = str(marker.get("created_by", "warmstart 0.0"))
    tables = _from_format0(_read_format0(src), by.replace("warmstart ", ""))
    _refuse_problems({t: v.to_pandas() for t, v in tables.items()}, src, 0)
    for t in SCHEMAS:  # clear what an interrupted earlier migration wrote (never visible)
        d = root / t
        d.mkdir(exist_ok=True)
        for f in visible_files(d):
            f.unlink()
    for t in ("datasets", "trials", "studies"):
        write_atomic(tables[t], root / t, batch_name("migrated"))
    write_marker(root, migrated_from={"format_version": 0, "created_by": by})
    backup = root / "backup-format-0"
    backup.mkdir(exist_ok=True)
    shutil.move(str(src), str(backup / FORMAT0_FILE))
    return {"path": str(root), "from_version": 0, "to_version": FORMAT_VERSION,
            "migrated": True, **{t: int(tables[t].num_rows) for t in SCHEMAS},
            "backup": str(backup / FORMAT0_FILE)}


def _read_format0(src: Path) -> pd.DataFrame:
    """The flat format-0 table, with every column :data:`FORMAT0_COLUMNS` names."""
    try:
        flat = pq.read_table(src).to_pandas()
    except (OSError, pa.ArrowException) as exc:
        raise BadInputError(f"cannot read the format-0 table {src}: {exc}") from None
    missing = [c for c in FORMAT0_COLUMNS if c not in flat.columns]
    if missing:
        raise BadInputError(f"{src} is not a format-0 table (missing {', '.join(missing)})")
    return flat


def _format0_config(text: Any) -> str:
    try:
        config = json.loads(text)
    except (TypeError, ValueError):
        config = None
    if not isinstance(config, dict):
        raise BadInputError(f"format-0 params {str(text)[:40]!r} is not a JSON object")
    return config_key(config)


def _from_format0(flat: pd.DataFrame, tool_version: str) -> dict[str, pa.Table]:
    fp_cols = [c for c in flat.columns if c.startswith(FP_PREFIX)]
    flat = flat.reset_index(drop=True)
    flat["logged_at"] = pd.to_datetime(flat["logged_at"], utc=True)
    flat["trial_index"] = flat.groupby("study", sort=False).cumcount()
    flat["dataset_id"] = flat["dataset_hash"].str[:16]
    flat["study_id"] = [hashlib.sha256(f"format0:{s}".encode()).hexdigest()[:32]
                        for s in flat["study"]]
    first = flat.groupby("study", sort=False).head(1)
    studies = pd.DataFrame({
        "study_id": first["study_id"], "dataset_id": first["dataset_id"],
        "family": first["family"], "task": first["task"], "metric": first["metric"],
        "direction": first["direction"], "label": first["study"],
        "n_trials": first["study"].map(flat["study"].value_counts()).astype("int32"),
        "source": "log", "tool_version": tool_version, "created_at": first["logged_at"]})
    ds = first.sort_values("logged_at", kind="stable").drop_duplicates("dataset_id")
    meta = [json.dumps({c[len(FP_PREFIX):]: finite_or_none(v) for c, v in zip(fp_cols, row)},
                       sort_keys=True)
            for row in ds[fp_cols].to_numpy(dtype=float)]
    datasets = pd.DataFrame({
        "dataset_id": ds["dataset_id"], "name": ds["dataset"], "task": ds["task"],
        "target": ds["target"], "catalogue_version": ds["catalogue_version"].astype("int32"),
        "meta_features": meta, "warnings": "[]", "created_at": ds["logged_at"]})
    trials = pd.DataFrame({
        "study_id": flat["study_id"], "trial_index": flat["trial_index"].astype("int32"),
        "config": [_format0_config(p) for p in flat["params"]],
        "score": flat["score"].astype(float), "fit_seconds": flat["fit_seconds"].astype(float),
        "status": flat["status"], "error": None})
    return {name: pa.Table.from_pandas(frame, schema=SCHEMAS[name], preserve_index=False)
            for name, frame in (("datasets", datasets), ("studies", studies),
                                ("trials", trials))}
