"""Keeping a team history healthy: info, check, repair, compact, export, import.

All of these work beside live readers and writers, who take no locks (see
:mod:`warmstart.storage` for the file rules they rely on); only a compaction holds one,
against another compaction.

* :func:`check` verifies the format marker, every file's schema, that every trial belongs
  to a committed study and every study to a dataset, unique identifiers, finite scores
  for ``ok`` trials, known catalogue versions and valid JSON, and notes studies whose
  every trial failed (kept; the readers that answer questions leave them out) and studies
  logged twice. ``repair=True`` removes temporary and orphan files older than a grace
  period (leftovers of killed writers; younger ones may belong to a writer still running)
  and moves unreadable or foreign files to ``<history>/quarantine/``, never over a file
  there. It never deletes a file it did not recognise, nor touches committed rows.
* :func:`compact` merges each table's files into one ``merged-*.parquet`` file, leaving
  out the rows of deleted studies (those with a tombstone, see :mod:`warmstart.records`).
  It writes the merged file first, then deletes only the files it listed before merging
  whose every row the merged file holds or belongs to a deleted study; readers
  de-duplicate by key and skip deleted studies meanwhile, and a file a writer commits
  during compaction is not deleted. Tombstones are merged too, never dropped. One
  compaction runs at a time (an ``O_EXCL`` lock file with a stale-lock rule); :func:`info`
  and :func:`compact` refuse a foreign file in a table folder, pointing to
  ``check --repair``.
* :func:`export` writes one portable ZIP file (no compression: Parquet is already
  compressed) holding ``warmstart-export.json`` (kind, format version, counts, content
  hash) and ``datasets.parquet``, ``studies.parquet``, ``trials.parquet``; deleted
  studies are left out. :func:`import_` merges such a file: studies already present, by
  id or by content (same dataset, family, task, metric and trials), and studies deleted
  here are skipped, so importing twice adds nothing. It first recomputes the content
  hash (a mismatch is refused) and reads the members in pieces, at most
  :data:`MAX_IMPORT_BYTES` uncompressed, so a crafted file cannot exhaust memory.
  Exports of format 1 are converted as they are read.
* ``migrate`` (older formats to this one) is in :mod:`warmstart.migrations`.

Nothing is ever loaded with pickle: tables are Parquet, configurations JSON.
"""

from __future__ import annotations

import hashlib
import io
import json
import math
import os
import socket
import tempfile
import uuid
import zipfile
import zlib
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
    DELETION_SCHEMA,
    DELETIONS,
    FORMAT_FILE,
    FORMAT_VERSION,
    KEYS,
    SCHEMAS,
    dedupe,
    format_version_of,
    marker_is_current,
    read_marker,
    table_schema,
)
from warmstart.metrics import HIGHER, LOWER
from warmstart.records import deleted_ids, studies_from_format1
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
        got = pq.ParquetFile(path).schema_arrow  # the footer must parse
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
    short = studies[studies["trial_count"] != sid.map(counts).fillna(0).astype(int)]
    report.add("studies have all their trials", list(short["study_id"]),
               "studies do not have the number of trials they declare")
    report.add("trials belong to a study", sorted(set(trials.loc[
        ~trials["study_id"].isin(sid), "study_id"])), "trials of studies not in the history")
    report.add("known families", sorted(set(studies["family"]) - set(FAMILIES)),
               "unknown model families")
    report.add("valid tasks and better values", list(studies.loc[
        ~studies["task"].isin(TASKS) | ~studies["better"].isin((HIGHER, LOWER))
        | studies["metric"].isna() | (studies["metric"] == ""), "study_id"]),
        "studies with an invalid task, better value or metric")
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


def failed_study_ids(studies: pd.DataFrame, trials: pd.DataFrame) -> list[str]:
    """Ids of the studies that have trials but none that succeeded (an ``ok`` status and
    a finite score): those :func:`warmstart.history.without_failed_studies` leaves out."""
    score = trials["score"].to_numpy(dtype=float, na_value=np.nan)
    good = set(trials.loc[(trials["status"] == "ok").to_numpy() & np.isfinite(score),
                          "study_id"])
    return sorted(set(studies["study_id"]) & (set(trials["study_id"]) - good))


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
    visible = kb.tables(include_failed=True)
    content_problems(visible["datasets"], visible["studies"], visible["trials"], report)
    twins = visible["studies"][visible["studies"]["content_hash"].duplicated(keep=False)
                               & visible["studies"]["content_hash"].notna()]
    if len(twins):
        report.findings.append(Finding("studies logged twice", NOTE, (
            f"{len(twins)} studies share their content with another (e.g. "
            f"{', '.join(twins['study_id'].str[:12].head(EXAMPLES))}): 'kb delete' one")))
    failed = failed_study_ids(visible["studies"], visible["trials"])
    if failed:
        report.findings.append(Finding(
            "studies with a successful trial", NOTE,
            f"{len(failed)} {'study' if len(failed) == 1 else 'studies'} whose every "
            f"trial failed (e.g. {', '.join(failed[:EXAMPLES])}): kept, but suggest, "
            "backtest and similar leave them out"))
    report.counts = {"files": sum(len(visible_files(root / t)) for t in SCHEMAS),
                     **{t: int(len(v)) for t, v in visible.items()}}
    return report


_PerFile = dict[str, list[tuple[Path, pa.Table]]]  # table -> (file, its rows)


def foreign_files(root: Path) -> list[tuple[str, Path, str]]:
    """Files in the table folders that are not history files: ``(table, path, why)`` for
    each ``.parquet`` file that is not Parquet, or not of its table's schema (a data
    set copied in by mistake, a file of another tool). Reads one footer per file."""
    return [(table, f, why) for table, schema in SCHEMAS.items()
            for f in visible_files(root / table) if (why := _schema_mismatch(f, schema))]


def refuse_foreign_files(root: Path, doing: str) -> None:
    """Raise one line naming the first foreign file and pointing to ``--repair``."""
    found = foreign_files(root)
    if found:
        table, f, why = found[0]
        more = f" and {len(found) - 1} more" if len(found) > 1 else ""
        raise BadInputError(
            f"cannot {doing} history {root}: {table}/{f.name} is not one of its files "
            f"({why}){more}; move foreign files aside with 'warmstart kb check --repair "
            f"--kb {root}'")


def _set_aside(root: Path, table: str, f: Path) -> Path:
    """Move ``f`` to ``quarantine/<table>/``, never over a file already there."""
    dest = root / QUARANTINE / table
    dest.mkdir(parents=True, exist_ok=True)
    target = dest / f.name
    while target.exists():
        target = dest / f"{f.stem}-{uuid.uuid4().hex[:8]}{f.suffix}"
    os.rename(f, target)
    return target


def _check_files(root: Path, repair: bool, report: CheckReport) -> bool:
    """Every file readable, with its table's schema (with ``repair``: foreign ones moved
    to ``quarantine/``, never deleted). Returns whether every remaining file is readable."""
    n_files = sum(len(visible_files(root / t)) for t in (*SCHEMAS, DELETIONS))
    bad_files = foreign_files(root)
    if bad_files and repair:
        for table, f, _why in bad_files:
            _set_aside(root, table, f)
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
    t = kb.tables(include_failed=True)
    return {"files": sum(len(visible_files(kb.path / n)) for n in SCHEMAS),
            **{n: int(len(v)) for n, v in t.items()}, "content_hash": content_hash(t)}


def info(kb: KnowledgeBase) -> dict[str, Any]:
    """Counts per family, task and metric, fingerprints per catalogue version, files and
    size on disk (what ``warmstart kb info`` prints).

    A foreign file in a table folder is refused with one line pointing to
    ``kb check --repair`` (see :func:`refuse_foreign_files`)."""
    refuse_foreign_files(kb.path, "read")
    t = kb.tables(include_failed=True)
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
        "studies_all_failed": len(failed_study_ids(studies, trials)),
        "by_family": per,
        "fingerprints_by_catalogue_version": {int(k): int(v) for k, v in versions.items()},
    }


# -- compact ----------------------------------------------------------------------------
COMPACT_LOCK = ".compact.lock"
# A lock older than this is taken over whoever holds it: compacting even a million-trial
# history takes minutes, so a holder this old has died on another host.
STALE_LOCK_SECONDS = 3600.0


def compact(kb: KnowledgeBase) -> dict[str, Any]:
    """Merge each table's committed rows into one file, then delete the merged files.

    Safe beside readers (they de-duplicate by key, skip deleted studies, and retry a
    listing when a file they listed is gone) and writers (only files listed before
    merging, and whose every row is in the merged file or belongs to a deleted study,
    are deleted; orphans and in-flight files are left alone). Deleted studies' rows are
    dropped; their tombstones are merged and kept.

    One compaction runs at a time: it holds ``<history>/.compact.lock``, created with
    ``O_EXCL``. A later one returns at once with ``compacted`` False and who holds the
    lock. A lock is stale, and taken over, when its holder's process on this host is
    gone or when it is older than ``STALE_LOCK_SECONDS`` (an hour). A foreign file in a
    table folder is refused with one line pointing to ``kb check --repair``.

    Returns
    -------
    dict
        ``compacted``; when True, ``before`` and ``after`` summaries (files, rows per
        table, content hash) and the number of files ``removed``; when False,
        ``running``: which process holds the lock.
    """
    kb._check_writable()
    lock, mine = take_compact_lock(kb.path)
    if lock is None:
        return {"path": str(kb.path), "compacted": False, "running": mine}
    try:
        refuse_foreign_files(kb.path, "compact")
        before = summary(kb)
        gone = deleted_ids(kb.path)
        listed = {t: _still_there(kb.path / t, SCHEMAS[t]) for t in SCHEMAS}
        studies = dedupe(pa.concat_tables([tb for _f, tb in listed["studies"]])
                         if listed["studies"] else SCHEMAS["studies"].empty_table(),
                         "studies")
        removed = sum(_merge_table(kb.path / table, table, listed[table], studies, gone)
                      for table in ("datasets", "trials", "studies"))
        removed += _merge_deletions(kb.path / DELETIONS)
        after = summary(kb)
    finally:
        release_compact_lock(lock, mine)
    return {"path": str(kb.path), "compacted": True, "before": before, "after": after,
            "removed": removed}


def _still_there(directory: Path, schema: pa.Schema) -> list[tuple[Path, pa.Table]]:
    """Every visible file of a table folder with its rows; a file gone since the listing
    is skipped (its rows are in whichever merged file replaced it, which stays)."""
    out = []
    for f in visible_files(directory):
        try:
            out.append((f, read_file(f, schema)))
        except FileNotFoundError:
            continue
    return out


def take_compact_lock(root: Path) -> tuple[Path | None, str]:
    """Take the compaction lock of the history at ``root``.

    Returns ``(lock path, what this process wrote in it)`` when taken, ``(None, who
    holds it)`` when a live compaction holds it. A stale lock (see :func:`compact`) is
    renamed aside first, so of several processes finding it stale only one takes over.
    """
    lock = root / COMPACT_LOCK
    mine = json.dumps({"pid": os.getpid(), "host": socket.gethostname(),
                       "started_at": datetime.now(timezone.utc).isoformat(timespec="seconds"),
                       "token": uuid.uuid4().hex})
    for _attempt in range(5):
        try:
            fd = os.open(lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            text, holder = _lock_holder(lock)
            if text is None:
                continue  # released meanwhile: try again
            if not _lock_is_stale(lock, holder):
                return None, _describe_holder(holder)
            _break_stale_lock(lock, text)
            continue
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(mine)
            fh.flush()
            os.fsync(fh.fileno())
        return lock, mine
    return None, "another process (the lock kept changing hands)"


def release_compact_lock(lock: Path, mine: str) -> None:
    """Remove the lock if it is still the one this process wrote."""
    text, _holder = _lock_holder(lock)
    if text == mine:
        lock.unlink(missing_ok=True)


def _lock_holder(lock: Path) -> tuple[str | None, dict[str, Any] | None]:
    """The lock's text (None when there is no lock) and its parsed content (None when
    unreadable, e.g. just created and not yet written)."""
    try:
        text = lock.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None, None
    try:
        holder = json.loads(text)
    except ValueError:
        holder = None
    return text, holder if isinstance(holder, dict) else None


def _lock_is_stale(lock: Path, holder: dict[str, Any] | None) -> bool:
    if age_seconds(lock) >= STALE_LOCK_SECONDS:
        return True
    if holder is None or holder.get("host") != socket.gethostname():
        return False  # another host's process cannot be checked: wait for the age
    pid = holder.get("pid")
    if isinstance(pid, bool) or not isinstance(pid, int) or pid <= 0:
        return False
    try:
        os.kill(pid, 0)  # signal 0: only asks whether the process exists
    except ProcessLookupError:
        return True
    except (PermissionError, OverflowError):
        return False
    return False


def _break_stale_lock(lock: Path, stale_text: str) -> None:
    """Rename the stale lock aside (atomic: one of several takers wins) and delete it; if
    what was renamed is not the stale lock read before (a fresh one replaced it
    meanwhile), link it back unless a lock is there again."""
    aside = lock.with_name(f"{COMPACT_LOCK}.stale-{uuid.uuid4().hex}")
    try:
        os.rename(lock, aside)
    except FileNotFoundError:
        return
    try:
        if aside.read_text(encoding="utf-8") != stale_text:
            try:
                os.link(aside, lock)
            except FileExistsError:
                pass
    finally:
        aside.unlink(missing_ok=True)


def _describe_holder(holder: dict[str, Any] | None) -> str:
    if holder is None:
        return "a process that is starting"
    return (f"process {holder.get('pid', '?')} on {holder.get('host', '?')} since "
            f"{holder.get('started_at', '?')}")


def _merge_table(directory: Path, table: str, files: list[tuple[Path, pa.Table]],
                 studies: pa.Table, gone: set[str]) -> int:
    """Merge the committed rows of ``files`` (one table's, as listed) into one file,
    leaving out the studies in ``gone``, then delete the files whose every row it holds
    or left out on purpose; returns how many were deleted."""
    committed = set(studies.column("study_id").to_pylist())
    live = studies.filter(pa.array(~np.isin(
        np.asarray(studies.column("study_id").to_pylist(), dtype=object), list(gone)),
        pa.bool_()))
    key_col = "dataset_id" if table == "datasets" else "study_id"
    wanted = set(live.column(key_col).to_pylist())
    # an uncommitted writer's file is not ours to merge, and stays even if its rows
    # are known
    ours = [(f, tb) for f, tb in files
            if (parsed := parse_log_name(f)) is None or parsed[0] in committed]
    kept = [tb.filter(pa.array(np.isin(np.asarray(tb.column(key_col).to_pylist(),
                                                  dtype=object), list(wanted)), pa.bool_()))
            for _f, tb in ours]
    dropping = any(k.num_rows < tb.num_rows for k, (_f, tb) in zip(kept, ours))
    if len(files) <= 1 and not dropping:
        return 0
    merged = dedupe(pa.concat_tables(kept), table) if kept else None
    have: set[tuple] = set()
    if merged is not None and merged.num_rows:
        if table == "trials":
            merged = family_order(merged, live)
        write_atomic(merged, directory, batch_name("merged"), ROW_GROUP_ROWS)
        have = set(_keys(merged, table))
    removed = 0
    for (f, _tb), k in zip(ours, kept):
        if set(_keys(k, table)) <= have:
            f.unlink(missing_ok=True)
            removed += 1
    fsync_dir(directory)
    return removed


def _merge_deletions(directory: Path) -> int:
    """Merge the tombstone files into one (every tombstone is kept)."""
    files = visible_files(directory)
    if len(files) <= 1:
        return 0
    tables = [read_file(f, DELETION_SCHEMA) for f in files]
    merged = dedupe(pa.concat_tables(tables), DELETIONS)
    write_atomic(merged, directory, batch_name("merged"))
    for f in files:
        f.unlink(missing_ok=True)
    fsync_dir(directory)
    return len(files)


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
    tables = kb.arrow_tables(include_failed=True)
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


# An export's members are copied to a temporary directory in pieces of this size,
# counting what they really hold.
READ_CHUNK_BYTES = 1 << 20
# The most an import reads: the marker and the three tables, uncompressed. The demo
# history exports to under 1 MB and a million trials to about 60 MB; this leaves room
# and still fits in the memory of a laptop.
MAX_IMPORT_BYTES = 2 * 1024 ** 3


def _export_members(src: Path, max_bytes: int, into: Path) -> dict[str, Path]:
    """Copy the marker and table members of the export ``src`` into the directory
    ``into``, in pieces; returns their paths.

    Refuses the file before inflating anything when its directory declares more than
    ``max_bytes`` uncompressed. A member that holds more than it declares is stopped at
    its declared size by ``zipfile``, whose CRC check then fails; the running count is a
    second guard. The members go to disk, not memory, so a small crafted file cannot
    make the import hold more than a piece in memory, nor write more than ``max_bytes``.
    """
    need = [EXPORT_MARKER, *(f"{t}.parquet" for t in SCHEMAS)]
    with zipfile.ZipFile(src) as zf:
        infos = {i.filename: i for i in zf.infolist()}  # a repeated name: the last wins
        missing = [n for n in need if n not in infos]
        if missing:
            raise BadInputError(f"{src} is not a warmstart export (missing "
                                f"{', '.join(sorted(missing))})")
        declared = sum(infos[n].file_size for n in need)
        if declared > max_bytes:
            raise BadInputError(f"{src} declares {declared:,} bytes uncompressed; kb "
                                f"import reads at most {max_bytes:,}")
        out, total = {}, 0
        for n in need:
            out[n] = into / n
            with zf.open(infos[n]) as fh, open(out[n], "wb") as dest:
                while chunk := fh.read(READ_CHUNK_BYTES):
                    total += len(chunk)
                    if total > max_bytes:
                        raise BadInputError(f"{src} holds more than {max_bytes:,} bytes "
                                            "uncompressed (more than it declares)")
                    dest.write(chunk)
    return out


def _check_content_hash(src: Path, marker: dict[str, Any], tables: dict[str, pa.Table]) -> None:
    """Refuse an export whose tables do not have the content hash its marker states
    (damaged in transit, or edited by hand)."""
    stated = marker.get("content_hash")
    if not isinstance(stated, str) or len(stated) != 64:
        raise BadInputError(f"{src} has an invalid {EXPORT_MARKER} (no content_hash)")
    got = content_hash({t: v.to_pandas() for t, v in tables.items()})
    if got != stated:
        raise BadInputError(f"{src} is damaged or was edited: its tables' content hash "
                            f"{got[:16]}... differs from the {stated[:16]}... its marker "
                            "states")


def _table_of(src: Path, t: str, member: Path, version: int) -> pa.Table:
    """Member ``t`` of an export (copied to ``member``) as a table of the schema of format
    ``version``."""
    schema = table_schema(t, version)
    try:
        raw = pq.read_table(member)
    except (OSError, pa.ArrowException) as exc:
        why = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
        raise BadInputError(f"{src}: {t}.parquet is unreadable "
                            f"({why.replace(str(member), f'{t}.parquet')})") from None
    missing = [f.name for f in schema if f.name not in raw.schema.names]
    if missing:
        raise BadInputError(f"{src}: {t}.parquet lacks columns {', '.join(missing)}")
    try:
        return raw.select(schema.names).cast(schema)
    except (pa.ArrowException, ValueError) as exc:
        raise BadInputError(f"{src}: {t}.parquet has the wrong column types ({exc})"
                            ) from None


def read_export(file: str | os.PathLike, max_bytes: int = MAX_IMPORT_BYTES
                ) -> tuple[dict[str, Any], dict[str, pa.Table]]:
    """Open an export file and validate it; returns its marker and its three tables.

    At most ``max_bytes`` are read, uncompressed (see :func:`_export_members`), and the
    tables must have the content hash the marker states.
    """
    if isinstance(file, str) and "://" in file:  # a Path would fold https:// into https:/
        if not file.lower().startswith("file://"):
            raise BadInputError(f"cannot import {file}: kb import reads a local file (a path "
                                "or a file:// URI); download it first")
        file = history_location(file)
    src = Path(file)
    if not src.is_file():
        raise BadInputError(f"export file not found: {src}")
    with tempfile.TemporaryDirectory(prefix="warmstart-import-") as tmp:
        try:
            members = _export_members(src, max_bytes, Path(tmp))
        except zipfile.BadZipFile as exc:
            why = str(exc) if "CRC" in str(exc) else "not a ZIP file"
            raise BadInputError(f"{src} is not a warmstart export ({why})") from None
        except (OSError, EOFError, NotImplementedError, RuntimeError, zlib.error) as exc:
            raise BadInputError(f"{src} is not a readable warmstart export ({exc})"
                                ) from None
        marker = _export_marker(src, members[EXPORT_MARKER])
        version = format_version_of(marker["format_version"])
        tables = {t: _table_of(src, t, members[f"{t}.parquet"], version) for t in SCHEMAS}
    # the hash is of the tables as their format wrote them (it covers column names)
    _check_content_hash(src, marker, tables)
    if version == 1:  # format-1 study rows, converted as kb migrate does
        tables["studies"] = pa.Table.from_pandas(studies_from_format1(
            tables["studies"].to_pandas(), tables["trials"].to_pandas()),
            schema=SCHEMAS["studies"], preserve_index=False)
    return marker, tables


def _export_marker(src: Path, member: Path) -> dict[str, Any]:
    """The export's marker, validated: its kind and an importable format version."""
    try:
        marker = json.loads(member.read_bytes().decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        raise BadInputError(f"{src} has an invalid {EXPORT_MARKER}") from None
    if not isinstance(marker, dict) or marker.get("kind") != EXPORT_KIND:
        raise BadInputError(f"{src} is not a warmstart export (wrong kind)")
    version = format_version_of(marker.get("format_version"))
    if version is None:
        raise BadInputError(f"{src} has an invalid {EXPORT_MARKER} (format_version "
                            f"{marker.get('format_version')!r} is not a format version (a "
                            "whole number >= 0))")
    if version > FORMAT_VERSION or version < 1:
        raise BadInputError(
            f"{src} has format version {version!r} (written by "
            f"{marker.get('created_by', '?')}); this warmstart {__version__} imports "
            f"format versions 1 to {FORMAT_VERSION}: upgrade warmstart")
    return marker


def _signatures(studies: pd.DataFrame, trials: pd.DataFrame) -> pd.Series:
    """A content signature per study id (index): its dataset, family, task, metric,
    better, creation time and trials. Equal signatures mean the same study record,
    even when it travelled under another id."""
    t = trials.sort_values(["study_id", "trial_index"])
    lines = (t["config"].astype(str) + "|" + t["score"].map(repr).astype(str) + "|"
             + t["status"].astype(str))
    per = lines.groupby(t["study_id"]).agg("\n".join)
    head = studies[["dataset_id", "family", "task", "metric", "better"]].astype(str).agg(
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
    have = kb.tables(include_failed=True)
    new = frames["studies"]
    # a study deleted here stays deleted: its tombstone would hide it anyway
    same_id = (new["study_id"].isin(have["studies"]["study_id"])
               | new["study_id"].isin(deleted_ids(kb.path)))
    known_sigs = set(_signatures(have["studies"], have["trials"]))
    sigs = _signatures(new, frames["trials"])
    # the same study under another id: the same record, or the same trials (which
    # log refuses too, see warmstart.records)
    same_content = (new["study_id"].map(sigs).isin(known_sigs)
                    | new["content_hash"].isin(have["studies"]["content_hash"].dropna())
                    ) & ~same_id
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
