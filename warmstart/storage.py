"""Atomic, append-only Parquet files: the storage layer under the team history.

Every table of the history is a directory of Parquet files. A file appears only by an
atomic rename of a fully written, fsynced temporary file whose name starts with ``.``
(hidden names are ignored by readers and by pyarrow's dataset discovery), so a reader
sees a file completely or not at all. Nothing here takes a lock: ``rename`` within one
directory is atomic on local POSIX filesystems and on NFS, which is all the design needs.
"""

from __future__ import annotations

import os
import time
import uuid
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

TEMP_PREFIX = ".tmp-"


def _pause(step: str) -> None:
    """Sleep between write steps when a test asks for it (crash-safety tests only)."""
    if os.environ.get("WARMSTART_TEST_PAUSE_AT") in (step, "all"):
        time.sleep(float(os.environ.get("WARMSTART_TEST_PAUSE_SECONDS", "0.2")))


def fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    except OSError:  # some filesystems refuse fsync on directories; rename stays atomic
        pass
    finally:
        os.close(fd)


def write_atomic(table: pa.Table, directory: Path, name: str) -> Path:
    """Write ``table`` as ``directory/name`` so that it appears complete or not at all."""
    tmp = directory / f"{TEMP_PREFIX}{uuid.uuid4().hex}-{name}"
    final = directory / name
    try:
        with open(tmp, "wb") as fh:
            pq.write_table(table, fh, compression="zstd")
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
    with open(tmp, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.rename(tmp, final)
    fsync_dir(final.parent)


def visible_files(directory: Path) -> list[Path]:
    """The committed Parquet files of a table directory, in a stable order."""
    if not directory.is_dir():
        return []
    return sorted(p for p in directory.iterdir()
                  if p.suffix == ".parquet" and not p.name.startswith((".", "_")))


def read_dir(directory: Path, schema: pa.Schema) -> pa.Table:
    """Read every committed file of a table directory into one table.

    A file that disappears between listing and reading (a concurrent compaction removed
    it after writing its merged replacement) is skipped and the listing retried, so the
    result never misses rows: the merged file holds them.
    """
    for _attempt in range(20):
        tables, vanished = [], False
        for path in visible_files(directory):
            try:
                tables.append(pq.read_table(path, schema=schema))
            except FileNotFoundError:
                vanished = True
                break
        if not vanished:
            return pa.concat_tables(tables) if tables else schema.empty_table()
    raise RuntimeError(f"{directory} kept changing while being read")


def temp_files(root: Path) -> list[Path]:
    """Leftover temporary files under ``root`` (from writers that were killed)."""
    return sorted(p for p in root.rglob(f"{TEMP_PREFIX}*") if p.is_file())
