"""Reading tables: CSV and Parquet files into pandas, and Parquet in record batches."""

from __future__ import annotations

import json
import os
import stat
from collections.abc import Callable, Iterator
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from warmstart.errors import BadInputError

PARQUET_SUFFIXES = (".parquet", ".pq")
CSV_SUFFIXES = (".csv", ".tsv", ".txt")
JSONL_SUFFIXES = (".jsonl", ".ndjson")


def is_parquet(path: str | os.PathLike) -> bool:
    """Whether ``path`` holds Parquet (by its magic bytes, whatever its name)."""
    try:
        if not stat.S_ISREG(os.stat(path).st_mode):
            return False  # opening a FIFO would block: read_table refuses it
        with open(path, "rb") as fh:
            return fh.read(4) == b"PAR1"
    except (OSError, ValueError):
        return False


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read a CSV, Parquet or JSON-lines file into a DataFrame.

    Raises :class:`BadInputError` with a one-line reason for a missing, empty,
    undecodable or malformed file, or one with duplicate column names.
    """
    p = Path(path)
    size = regular_file(p).st_size
    if size == 0:
        raise BadInputError(f"file is empty: {p}")
    try:
        if is_parquet(p):
            df = pq.read_table(p).to_pandas()
        elif p.suffix.lower() in JSONL_SUFFIXES:
            df = pd.read_json(p, lines=True, dtype=False, precise_float=True)
        elif p.suffix.lower() in PARQUET_SUFFIXES:
            raise BadInputError(f"{p} is named like Parquet but is not a Parquet file")
        else:
            df = _read_csv(p)
    except BadInputError:
        raise
    except UnicodeDecodeError:
        raise BadInputError(f"{p} is not UTF-8 text (undecodable bytes)") from None
    except OSError as exc:
        raise BadInputError(f"could not read {p}: {exc.strerror or exc}") from None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, pa.ArrowException,
            ValueError) as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise BadInputError(f"could not read {p} as a table: {reason}") from None
    if df.columns.duplicated().any():
        dupes = sorted(set(map(str, df.columns[df.columns.duplicated()])))
        raise BadInputError(f"{p} has duplicate column names: {', '.join(dupes)}")
    return df


def shown(path: str | os.PathLike) -> str:
    """A path for a one-line message: a very long one keeps its start and end."""
    text = str(path)
    return text if len(text) <= 80 else f"{text[:40]}...{text[-30:]} ({len(text)} characters)"


def regular_file(path: str | os.PathLike, what: str = "file") -> os.stat_result:
    """``stat`` of ``path``, refusing anything that is not a regular file.

    A FIFO, socket or device would block or never end when read, so it is refused
    before it is opened; so is a path the system cannot look up (too long, a file
    used as a folder, not permitted). Raises :class:`BadInputError` with one line.
    """
    try:
        st = os.stat(path)
    except FileNotFoundError:
        raise BadInputError(f"{what} not found: {shown(path)}") from None
    except OSError as exc:
        raise BadInputError(f"cannot use {what} {shown(path)}: {exc.strerror or exc}"
                            ) from None
    if stat.S_ISDIR(st.st_mode):
        raise BadInputError(f"expected a {what}, got a directory: {shown(path)}")
    if not stat.S_ISREG(st.st_mode):
        kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(st.st_mode) else
                "a socket" if stat.S_ISSOCK(st.st_mode) else "a device")
        raise BadInputError(f"{shown(path)} is {kind}, not a regular file")
    return st


def _read_csv(p: Path) -> pd.DataFrame:
    sep = "\t" if p.suffix.lower() == ".tsv" else ","
    with open(p, "rb") as fh:
        head = fh.read(65536)
    if b"\x00" in head:
        raise BadInputError(f"{p} is not a text table (it contains NUL bytes)")
    sep = _delimiter(head, sep)
    # pandas silently renames duplicate headers (a, a.1): read the header row raw, and
    # literally: headers "NA", "null" and "nan" are column names, not missing values.
    raw = pd.read_csv(p, sep=sep, header=None, nrows=1, encoding="utf-8", dtype=str,
                      keep_default_na=False, na_filter=False)
    names = [str(x) for x in raw.iloc[0].tolist()]
    if len(set(names)) != len(names):
        dupes = sorted({n for n in names if names.count(n) > 1})
        raise BadInputError(f"{p} has duplicate column names: {', '.join(dupes)}")
    return pd.read_csv(p, sep=sep, encoding="utf-8", low_memory=False)


def _delimiter(head: bytes, default: str) -> str:
    """The field delimiter: ``default``, unless the header line has none of it but does
    have ';', tab or '|' (a file exported with another list separator, e.g. ';' where
    the decimal mark is a comma). Read with the wrong one it would be a single column."""
    first = head.split(b"\n", 1)[0].decode("utf-8", errors="replace")
    if default in first:
        return default
    counts = {d: first.count(d) for d in (";", "\t", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] > 0 else default


def iter_parquet_batches(path: str | os.PathLike, batch_rows: int = 65536
                         ) -> Iterator[pa.RecordBatch]:
    """Yield the record batches of a Parquet file, ``batch_rows`` rows at a time."""
    pf = pq.ParquetFile(path)
    yield from pf.iter_batches(batch_size=batch_rows)


def open_parquet(path: str | os.PathLike, batch_rows: int = 65536
                 ) -> tuple[pa.Schema, int, Callable[[], Iterator[pa.RecordBatch]]]:
    """A Parquet file's Arrow schema, row count and a re-startable batch iterator.

    Only the footer is read here; the batches are read lazily, ``batch_rows`` rows at a
    time, so memory does not grow with the file. Raises :class:`BadInputError` for an
    unreadable file.
    """
    try:
        pf = pq.ParquetFile(path)
        schema = pf.schema_arrow
        n_rows = pf.metadata.num_rows
    except (OSError, pa.ArrowException) as exc:
        raise BadInputError(f"could not read {path} as Parquet: {exc}") from None
    if len(set(schema.names)) != len(schema.names):
        dupes = sorted({n for n in schema.names if schema.names.count(n) > 1})
        raise BadInputError(f"{path} has duplicate column names: {', '.join(dupes)}")

    def batches() -> Iterator[pa.RecordBatch]:
        try:
            # No pre-buffering: pre-buffered column chunks stay allocated until the file
            # is closed, so memory would grow with the file instead of one row group.
            pf = pq.ParquetFile(path, pre_buffer=False, buffer_size=1 << 20)
            yield from pf.iter_batches(batch_size=batch_rows)
        except (OSError, pa.ArrowException) as exc:
            raise BadInputError(f"could not read {path} as Parquet: {exc}") from None

    return schema, n_rows, batches


def read_json_file(path: str | os.PathLike, what: str):
    """Load a JSON file, raising :class:`BadInputError` naming ``what`` it should be."""
    regular_file(path, f"{what} file")
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except FileNotFoundError:
        raise BadInputError(f"{what} file not found: {path}") from None
    except IsADirectoryError:
        raise BadInputError(f"{what} file {path} is a directory") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BadInputError(f"{what} file {path} is not valid JSON: {exc}") from None
    except OSError as exc:
        raise BadInputError(f"{what} file {shown(path)}: {exc.strerror or exc}") from None


def check_writable(path: str | os.PathLike, what: str) -> Path:
    """Refuse an output path that cannot be written, before any work is done.

    ``path`` must not be a directory and its folder must exist and accept a new file:
    a hidden probe file is created there and removed (permission bits alone say nothing
    for root or on network filesystems). Raises :class:`BadInputError` naming ``what``.
    """
    p = Path(path)
    try:
        if p.is_dir():
            raise BadInputError(f"{what} {shown(p)} is a directory; give a file name")
        folder = p.parent
        if not folder.is_dir():
            raise BadInputError(f"cannot write {what} {shown(p)}: folder "
                                f"{shown(folder)} does not exist")
        probe = folder / f".warmstart-probe-{os.getpid()}"
        os.close(os.open(probe, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))
        os.unlink(probe)
    except OSError as exc:
        raise BadInputError(f"cannot write {what} {shown(p)}: {exc.strerror or exc}"
                            ) from None
    return p
