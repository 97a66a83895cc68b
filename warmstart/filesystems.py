"""Where a history may live: local paths and the URIs of pyarrow's file systems.

The history's writes (see :mod:`warmstart.storage`) need one guarantee from a file
system: renaming a fully written file onto a new name in the same directory is atomic,
so a reader sees a file completely or not at all, with no lock. :data:`FILE_SYSTEMS`
states, per URI scheme that pyarrow resolves (``pyarrow.fs.FileSystem.from_uri``),
whether that holds:

========== ============== ==========================================================
scheme     atomic rename  so warmstart
========== ============== ==========================================================
(a path)   yes            reads and writes it (POSIX ``rename(2)``; NFS and SMB
                          servers rename in one server-side operation)
``file``   yes            the same: ``file:///abs/path`` is resolved to the local
                          path ``/abs/path`` and takes the local code path
``hdfs``   yes            refuses: HDFS renames atomically, but warmstart opens a
                          history through the local file system only; mount it
``s3``     no             refuses: S3 has no rename (pyarrow's move copies, then
                          deletes), so a reader can see a half-written file
``gs``     no             refuses, as S3 (also spelt ``gcs``)
``abfs``   not always     refuses: atomic only on accounts with a hierarchical
                          namespace, which a URI does not tell (also ``abfss``, ``az``)
========== ============== ==========================================================

Refusal happens on the URI's text alone, before any file system object is made, so no
network connection is ever attempted. A history written locally stays plain Parquet
that other engines read as it is, wherever it is copied (``kb export`` makes one file).
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace
from pathlib import Path
from urllib.parse import unquote, urlsplit

from warmstart.errors import BadInputError

LOCAL = "local"


@dataclass(frozen=True)
class FileSystemGuarantees:
    """What one file system guarantees the history, and whether warmstart uses it.

    ``atomic_rename`` is True, False or None (depends on the account or server);
    ``usable`` says whether warmstart reads and writes a history there; ``why`` is the
    one-line reason shown when it is not.
    """

    scheme: str
    name: str
    atomic_rename: bool | None
    usable: bool
    why: str


def _no_rename(scheme: str, name: str, why: str) -> FileSystemGuarantees:
    return FileSystemGuarantees(scheme, name, False, False, why)


_S3 = "has no atomic rename (a move is a copy, then a delete)"
FILE_SYSTEMS: dict[str, FileSystemGuarantees] = {
    LOCAL: FileSystemGuarantees(LOCAL, "local file system", True, True,
                                "rename(2) within one directory is atomic"),
    "file": FileSystemGuarantees("file", "local file system", True, True,
                                 "resolved to the local path"),
    "hdfs": FileSystemGuarantees("hdfs", "HDFS", True, False,
                                 "renames atomically, but warmstart opens histories through "
                                 "the local file system only: mount it and give the path"),
    "s3": _no_rename("s3", "Amazon S3", _S3),
    "gs": _no_rename("gs", "Google Cloud Storage", _S3),
    "gcs": _no_rename("gcs", "Google Cloud Storage", _S3),
    "abfs": FileSystemGuarantees("abfs", "Azure storage", None, False,
                                 "renames atomically only with a hierarchical namespace, "
                                 "which the URI does not tell"),
}
FILE_SYSTEMS.update({alias: replace(FILE_SYSTEMS["abfs"], scheme=alias)
                     for alias in ("abfss", "az")})


def filesystem_guarantees(location: str | os.PathLike) -> FileSystemGuarantees:
    """The guarantees of the file system a history path or URI names.

    Parameters
    ----------
    location : str or path-like
        A local path, or a URI ``scheme://...``.

    Raises
    ------
    BadInputError
        For a scheme pyarrow's file systems do not resolve.
    """
    scheme = _scheme(location)
    if scheme not in FILE_SYSTEMS:
        raise BadInputError(f"history location {os.fspath(location)}: unknown file system "
                            f"{scheme!r}; known: {', '.join(sorted(FILE_SYSTEMS))}")
    return FILE_SYSTEMS[scheme]


def history_location(location: str | os.PathLike) -> Path:
    """The local path of a history given as a path or a URI.

    A path is returned as it is; ``file:///abs/path`` (RFC 8089, host empty or
    ``localhost``, percent-escapes decoded) becomes ``/abs/path``. Any other scheme is
    refused with one line saying which guarantee it lacks (see the module table),
    before anything is opened or connected to.
    """
    if isinstance(location, os.PathLike) or "://" not in location:
        return Path(location)
    fs = filesystem_guarantees(location)
    if not fs.usable:
        raise BadInputError(f"history at {location}: {fs.name} {fs.why}; warmstart writes "
                            "a history only where renames are atomic (a local or network "
                            "file system path, or file://)")
    parts = urlsplit(location)
    if parts.netloc not in ("", "localhost") or parts.query or parts.fragment:
        raise BadInputError(f"history at {location}: a file:// URI must name a local "
                            "absolute path (file:///path)")
    return Path(unquote(parts.path))


def _scheme(location: str | os.PathLike) -> str:
    if isinstance(location, os.PathLike) or "://" not in location:
        return LOCAL
    return urlsplit(location).scheme.lower()


__all__ = ["FILE_SYSTEMS", "FileSystemGuarantees", "filesystem_guarantees",
           "history_location"]
