"""Atomic, append-only Parquet files: the storage layer under the team history.

Every table of the history is a directory of Parquet files. A file appears only by an
atomic rename of a fully written, fsynced temporary file whose name starts with ``.``
(hidden names are ignored by readers), so a reader sees a file completely or not at all.
Files are never rewritten in place; the only deletions are by compaction (after the
merged file holding the same rows has been committed) and by repair (leftovers of killed
writers, older than a grace period).

File names
----------
``<study_id>-<dataset_id>.parquet``
    Written by one ``log`` call (one file in each table). ``study_id`` is a random
    uuid4 (32 hex digits), so names never collide, whichever host writes them.
``merged-<uuid>.parquet``, ``import-<uuid>.parquet``, ``migrated-<uuid>.parquet``
    Written by compaction, import and migration; they may hold many studies.
``.tmp-<uuid>-<name>``
    A file being written. Readers ignore it; ``kb check --repair`` removes old ones.

What the design needs from a filesystem
---------------------------------------
No locks are taken, by writers or readers. The design needs only:

* ``rename`` of a file onto a new name within one directory is atomic (POSIX local
  filesystems; NFSv3/v4 and SMB servers do this as a single server-side operation);
* a file's content is durable before it is renamed (we ``fsync`` the file, then the
  directory);
* names are unique: every writer invents its own uuid4 names and never writes or
  renames onto a name another writer may use.

On a shared network filesystem (NFS, SMB) this is enough for any number of writers on
any number of hosts. Caveats: client-side attribute and directory caches may make a new
study visible to another host only after a few seconds (close-to-open consistency);
a reader that lists a directory just before a compaction deletes a file retries its
listing (see :func:`read_dir`). Not safe: synchronised folders and object-store mounts
(cloud-drive sync clients, S3/GCS FUSE mounts) where rename is a copy and a delete, or
where two hosts' changes are merged later; there a reader may see a half-copied file
and a sync conflict may drop one side. Keep the history on a real filesystem and share
it between such places with ``warmstart kb export`` / ``import``.
"""

from __future__ import annotations

import os
import re
import time
import uuid
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.dataset as pads
import pyarrow.parquet as pq

from warmstart.errors import BadInputError

TEMP_PREFIX = ".tmp-"
LOG_NAME = re.compile(r"^([0-9a-f]{32})-([0-9a-f]{16})\.parquet$")
PAUSE_ENV, PAUSE_SECONDS_ENV = "WARMSTART_TEST_PAUSE_AT", "WARMSTART_TEST_PAUSE_SECONDS"
# Steps where a crash-safety test may ask a writer to pause (and then kill it there).
PAUSE_STEPS = ("mid-file", "before-rename", "after-dataset", "after-trials")


def _pause(step: str) -> None:
    """Sleep between write steps when a test asks for it (crash-safety tests only)."""
    if os.environ.get(PAUSE_ENV) in (step, "all"):
        time.sleep(float(os.environ.get(PAUSE_SECONDS_ENV, "0.2")))


def fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    except OSError:  # some filesystems refuse fsync on directories; rename stays atomic
        pass
    finally:
        os.close(fd)


def log_name(study_id: str, dataset_id: str) -> str:
    """The file name one ``log`` call uses in every table."""
    return f"{study_id}-{dataset_id}.parquet"


def parse_log_name(path: Path) -> tuple[str, str] | None:
    """``(study_id, dataset_id)`` of a file written by ``log``; None for other files."""
    m = LOG_NAME.match(path.name)
    return (m.group(1), m.group(2)) if m else None


def batch_name(kind: str) -> str:
    """A fresh name for a file holding many studies (``merged``, ``import``...)."""
    return f"{kind}-{uuid.uuid4().hex}.parquet"


ROW_GROUP_ROWS = 32_768  # merged files: small enough for a query to skip most groups


def write_atomic(table: pa.Table, directory: Path, name: str,
                 row_group_rows: int | None = None) -> Path:
    """Write ``table`` as ``directory/name`` so that it appears complete or not at all."""
    tmp = directory / f"{TEMP_PREFIX}{uuid.uuid4().hex}-{name}"
    final = directory / name
    try:
        with open(tmp, "wb") as fh:
            pq.write_table(table, fh, compression="zstd", row_group_size=row_group_rows)
            _pause("mid-file")
            fh.flush()
            os.fsync(fh.fileno())
        _pause("before-rename")
        os.rename(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(directory)
    return final


def write_bytes_atomic(data: bytes, final: Path) -> None:
    """Write a small file (the format marker) atomically."""
    tmp = final.parent / f"{TEMP_PREFIX}{uuid.uuid4().hex}-{final.name}"
    try:
        with open(tmp, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.rename(tmp, final)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    fsync_dir(final.parent)


def visible_files(directory: Path) -> list[Path]:
    """The committed Parquet files of a table directory, in a stable order."""
    if not directory.is_dir():
        return []
    return sorted(p for p in directory.iterdir()
                  if p.suffix == ".parquet" and not p.name.startswith((".", "_")))


def unreadable(path: Path, exc: BaseException) -> BadInputError:
    reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
    return BadInputError(f"history file {path} is unreadable ({reason}); "
                         "'warmstart kb check --repair' sets it aside")


def read_file(path: Path, schema: pa.Schema, columns: list[str] | None = None) -> pa.Table:
    """One table file, cast to ``schema`` (raises :class:`BadInputError` when unreadable)."""
    try:
        return pq.read_table(path, schema=schema, columns=columns)
    except FileNotFoundError:
        raise
    except (OSError, pa.ArrowException) as exc:
        raise unreadable(path, exc) from None


def read_files(files: list[Path], schema: pa.Schema, columns: list[str] | None = None,
               filter: pads.Expression | None = None) -> pa.Table:
    """Read ``files`` as one table (only ``columns``, only rows matching ``filter``).

    Raises FileNotFoundError when a file vanished (the caller lists again) and
    :class:`BadInputError` naming the file when one is not valid Parquet of ``schema``.
    """
    if columns is not None:
        schema_out = pa.schema([schema.field(c) for c in columns])
    else:
        schema_out = schema
    if not files:
        return schema_out.empty_table()
    try:
        dset = pads.dataset([str(f) for f in files], schema=schema, format="parquet")
        return dset.to_table(columns=columns, filter=filter)
    except FileNotFoundError:
        raise
    except (OSError, pa.ArrowException) as exc:
        if isinstance(exc, OSError) and not any(f.exists() for f in files):
            raise FileNotFoundError(str(exc)) from None
        for f in files:  # find the culprit, so the message names it
            if not f.exists():
                raise FileNotFoundError(str(f)) from None
            read_file(f, schema, columns)
        raise unreadable(files[0].parent, exc) from None


def read_where_in(files: list[Path], schema: pa.Schema, column: str, values: pa.Array,
                  columns: list[str] | None = None) -> pa.Table:
    """Rows of ``files`` whose ``column`` is in ``values``, reading as little as possible.

    Files written by ``log`` (one study each) are read together. A larger file is read
    in two passes: first only ``column``, to find the row groups holding a match, then
    only those row groups. Merged files keep a family's trials together in few row
    groups (see :func:`warmstart.maintenance.compact`), so a question about one family
    decodes a fraction of a large history.
    """
    small = [f for f in files if parse_log_name(f) is not None]
    wanted = pads.field(column).isin(values)
    parts = [read_files(small, schema, columns, wanted)] if small else []
    for f in (f for f in files if parse_log_name(f) is None):
        try:
            pf = pq.ParquetFile(f)
            n_groups = pf.metadata.num_row_groups
            if n_groups <= 1:
                parts.append(read_files([f], schema, columns, wanted))
                continue
            keys = pf.read(columns=[column]).column(column)
            hit = pc.is_in(keys, value_set=values).to_numpy(zero_copy_only=False)
            sizes = [pf.metadata.row_group(i).num_rows for i in range(n_groups)]
            starts = np.concatenate([[0], np.cumsum(sizes)])
            groups = [i for i in range(n_groups) if hit[starts[i]:starts[i + 1]].any()]
            if not groups:
                continue
            tb = pf.read_row_groups(groups, columns=columns)
        except FileNotFoundError:
            raise
        except (OSError, pa.ArrowException) as exc:
            raise unreadable(f, exc) from None
        tb = tb.filter(pc.is_in(tb.column(column), value_set=values))
        names = columns or schema.names
        parts.append(tb.select(names).cast(pa.schema([schema.field(c) for c in names])))
    if not parts:
        return read_files([], schema, columns)
    return pa.concat_tables(parts)


def read_dir(directory: Path, schema: pa.Schema, columns: list[str] | None = None,
             filter: pads.Expression | None = None, select=None,
             where_in: tuple[str, pa.Array] | None = None) -> pa.Table:
    """Read every committed file of a table directory into one table.

    ``select(files) -> files`` may narrow the listing (e.g. to committed studies);
    ``where_in=(column, values)`` keeps only rows whose ``column`` is in ``values``
    (see :func:`read_where_in`). A file that disappears between listing and reading (a
    concurrent compaction removed it after writing its merged replacement) makes the
    listing be retried, so the result never misses rows: the merged file holds them.
    """
    for _attempt in range(50):
        files = visible_files(directory)
        if select is not None:
            files = select(files)
        try:
            if where_in is not None:
                return read_where_in(files, schema, where_in[0], where_in[1], columns)
            return read_files(files, schema, columns, filter)
        except FileNotFoundError:
            time.sleep(0.01)
    raise RuntimeError(f"{directory} kept changing while being read")


def temp_files(root: Path) -> list[Path]:
    """Temporary files under ``root`` (being written now, or left by a killed writer)."""
    return sorted(p for p in root.rglob(f"{TEMP_PREFIX}*") if p.is_file())


def age_seconds(path: Path) -> float:
    """Seconds since ``path`` was last modified (0 when it has just vanished)."""
    try:
        return max(0.0, time.time() - path.stat().st_mtime)
    except FileNotFoundError:
        return 0.0
