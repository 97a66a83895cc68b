"""What a history directory holds: the tables' schemas and keys, the rule that picks
one row per key, and the format marker.

Both the reader and writer (:mod:`warmstart.history`) and the maintenance tools
(:mod:`warmstart.maintenance`) build on this module, and it imports neither.

Layout (format version 2)::

    <history>/
      warmstart-history.json     {"format_version": 2, "created_by": ..., "tables": [...]}
      datasets/<id>.parquet      one row per dataset: its name, fingerprint (no rows of data)
      studies/<id>.parquet       one row per study: family, metric, better, label, content hash
      trials/<id>.parquet        one row per trial: configuration (JSON), score, time
      deletions/<id>.parquet     one row per deleted study (a tombstone; never removed)

Format 2 renamed the study fields ``direction`` (``maximize``/``minimize``) to ``better``
(``higher``/``lower``) and ``n_trials`` to ``trial_count``, added the study's
``content_hash`` and the ``deletions`` table, and made a dataset's newest row give its
name (so ``log --name`` relabels it); :func:`warmstart.maintenance.migrate` converts
formats 0 and 1.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from warmstart.errors import BadInputError
from warmstart.storage import write_bytes_atomic
from warmstart.version import __version__

FORMAT_FILE = "warmstart-history.json"
FORMAT_VERSION = 2

_TS = pa.timestamp("us", tz="UTC")
SCHEMAS: dict[str, pa.Schema] = {
    "datasets": pa.schema([
        ("dataset_id", pa.string()),
        ("name", pa.string()),
        ("task", pa.string()),
        ("target", pa.string()),
        ("catalogue_version", pa.int32()),
        ("meta_features", pa.string()),  # JSON object: name -> value (null = undefined)
        ("warnings", pa.string()),  # JSON list of strings
        ("created_at", _TS),
    ]),
    "studies": pa.schema([
        ("study_id", pa.string()),
        ("dataset_id", pa.string()),
        ("family", pa.string()),
        ("task", pa.string()),
        ("metric", pa.string()),
        ("better", pa.string()),  # "higher" or "lower": which scores are better
        ("label", pa.string()),
        ("trial_count", pa.int32()),
        ("source", pa.string()),  # "log" or "tune"
        ("tool_version", pa.string()),
        ("created_at", _TS),
        # sha256 of dataset, family, task, metric and the set of trials (see
        # warmstart.records.study_content_hash): equal hashes mean a study logged twice
        ("content_hash", pa.string()),
    ]),
    "trials": pa.schema([
        ("study_id", pa.string()),
        ("trial_index", pa.int32()),
        ("config", pa.string()),  # JSON object: estimator keyword -> value
        ("score", pa.float64()),
        ("fit_seconds", pa.float64()),
        ("status", pa.string()),  # "ok" or "failed"
        ("error", pa.string()),
    ]),
}
# The format-1 study row (the other two tables have not changed since); exports and
# histories of format 1 are converted on reading (see warmstart.migrations).
FORMAT1_STUDIES = pa.schema([
    ("study_id", pa.string()), ("dataset_id", pa.string()), ("family", pa.string()),
    ("task", pa.string()), ("metric", pa.string()), ("direction", pa.string()),
    ("label", pa.string()), ("n_trials", pa.int32()), ("source", pa.string()),
    ("tool_version", pa.string()), ("created_at", _TS)])


def table_schema(table: str, version: int) -> pa.Schema:
    """The schema of ``table`` in format ``version`` (1 or the current one)."""
    return FORMAT1_STUDIES if (table == "studies" and version == 1) else SCHEMAS[table]


# The tombstones of deleted studies: a table of its own, outside SCHEMAS (the three
# tables readers return and exports hold). A study with a tombstone is invisible.
DELETIONS = "deletions"
DELETION_SCHEMA = pa.schema([
    ("study_id", pa.string()),
    ("deleted_at", _TS),
    ("tool_version", pa.string()),
])
# Every table directory of a history, as the format marker lists them.
TABLE_DIRS = (*SCHEMAS, DELETIONS)
KEYS = {"datasets": ["dataset_id"], "studies": ["study_id"], "trials": ["study_id", "trial_index"],
        DELETIONS: ["study_id"]}
# Among rows sharing a key, the first in this order wins, whatever file it came from. A
# dataset's newest row wins, so the latest ``log --name`` names it everywhere.
ORDER = {"datasets": [("dataset_id", "ascending"), ("created_at", "descending"),
                      ("name", "ascending")],
         "studies": [("study_id", "ascending"), ("created_at", "ascending")],
         "trials": [("study_id", "ascending"), ("trial_index", "ascending")],
         DELETIONS: [("study_id", "ascending"), ("deleted_at", "ascending")]}


def dedupe(table: pa.Table, name: str) -> pa.Table:
    """Sort ``table`` (of history table ``name``) by key and keep one row per key.

    The winner does not depend on which files the rows came from, so merging or
    reordering files never changes what readers see.
    """
    if table.num_rows < 2:
        return table
    table = table.sort_by(ORDER[name])
    keep = np.ones(table.num_rows, dtype=bool)
    same = np.ones(table.num_rows - 1, dtype=bool)
    for col in KEYS[name]:
        a = table.column(col)
        same &= pc.equal(a.slice(1), a.slice(0, table.num_rows - 1)).to_numpy(
            zero_copy_only=False)
    keep[1:] = ~same
    return table if keep.all() else table.filter(pa.array(keep))


# -- the format marker ------------------------------------------------------------------
def format_version_of(value: Any) -> int | None:
    """``value`` as a format version, or None when it is not one.

    A format version is a JSON integer >= 0. The string ``"1"``, the float ``1.5`` and the
    boolean ``true`` are not (``int()`` would quietly accept all three). The history's
    marker and the export marker are both checked with this function.
    """
    if isinstance(value, bool) or not isinstance(value, int) or value < 0:
        return None
    return value


def read_marker(root: Path, hint: str = "") -> tuple[dict[str, Any], int]:
    """The parsed marker of the history at ``root`` and its format version.

    Raises :class:`BadInputError` when ``root`` has no marker (the message ends with
    ``hint``) or the marker is not valid.
    """
    path = root / FORMAT_FILE
    if not path.is_file():
        raise BadInputError(f"{root} is not a warmstart history (no {FORMAT_FILE}){hint}")
    try:
        meta = json.loads(path.read_text(encoding="utf-8"))
        raw = meta["format_version"]
    except (ValueError, KeyError, TypeError):
        raise BadInputError(f"{path} is not a valid history marker file") from None
    version = format_version_of(raw)
    if version is None:
        raise BadInputError(f"{path} is not a valid history marker file (format_version "
                            f"{raw!r} is not a format version (a whole number >= 0))")
    return meta, version


def read_current_marker(root: Path) -> dict[str, Any]:
    """:func:`read_marker`, refusing a history of another format version with what to do."""
    meta, version = read_marker(root, f"; create one with 'warmstart kb init {root}'")
    if version > FORMAT_VERSION:
        by = meta.get("created_by") or "a newer warmstart"
        raise BadInputError(
            f"history {root} has format version {version} (written by {by}); this "
            f"warmstart {__version__} reads format versions up to {FORMAT_VERSION}: "
            f"upgrade to a warmstart that reads format {version}"
        )
    if version < FORMAT_VERSION:
        raise BadInputError(
            f"history {root} has the old format version {version}; convert it with "
            f"'warmstart kb migrate --kb {root}' (the data is kept)"
        )
    return meta


def marker_is_current(meta: dict[str, Any]) -> bool:
    """Whether a parsed marker names this format version and exactly these tables."""
    return (format_version_of(meta.get("format_version")) == FORMAT_VERSION
            and sorted(meta.get("tables", [])) == sorted(TABLE_DIRS))


def write_marker(root: Path, **extra: Any) -> None:
    """Write the marker of the current format (atomically; it is a commit point)."""
    marker = {"format_version": FORMAT_VERSION, "created_by": f"warmstart {__version__}",
              "tables": list(TABLE_DIRS), **extra}
    write_bytes_atomic(json.dumps(marker, indent=2).encode() + b"\n", root / FORMAT_FILE)


__all__ = ["DELETIONS", "DELETION_SCHEMA", "FORMAT1_STUDIES", "FORMAT_FILE", "FORMAT_VERSION",
           "KEYS", "ORDER", "SCHEMAS", "TABLE_DIRS", "dedupe", "format_version_of",
           "marker_is_current", "read_current_marker", "read_marker", "table_schema",
           "write_marker"]
