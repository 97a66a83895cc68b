"""Reading tables: CSV and Parquet files into pandas, and Parquet in record batches.

A directory of Parquet files (a partitioned table) is read as one table: its files in
sorted path order, hive-style ``key=value`` directories becoming columns as
``pyarrow.dataset`` makes them (integers when every value is one, else text), the files'
schemas unified (a column that is all-missing in one file and text in another is text).
It is cut into :class:`Part` s -- consecutive row groups of one file -- which are read and
summarised one at a time, here or on the workers of a cluster.
"""

from __future__ import annotations

import json
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from warmstart.errors import BadInputError

PARQUET_SUFFIXES = (".parquet", ".pq")
CSV_SUFFIXES = (".csv", ".tsv", ".txt")
JSONL_SUFFIXES = (".jsonl", ".ndjson")
# Consecutive row groups of one file are read as one part up to this many rows: big
# enough that a task's overhead is small, small enough that 100 workers have work.
PART_ROWS = 1 << 20


def is_parquet(path: str | os.PathLike) -> bool:
    """Whether ``path`` holds Parquet (by its magic bytes, whatever its name)."""
    try:
        with open(path, "rb") as fh:
            return fh.read(4) == b"PAR1"
    except OSError:
        return False


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    """Read a CSV, Parquet or JSON-lines file, or a directory of Parquet files, into a
    DataFrame (a directory's rows in the order of :func:`open_directory`).

    Raises :class:`BadInputError` with a one-line reason for a missing, empty,
    undecodable or malformed file, or one with duplicate column names.
    """
    p = Path(path)
    if not p.exists():
        raise BadInputError(f"file not found: {p}")
    if p.is_dir():
        return read_directory(p)
    if p.stat().st_size == 0:
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
    except (pd.errors.ParserError, pd.errors.EmptyDataError, pa.ArrowException,
            ValueError) as exc:
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise BadInputError(f"could not read {p} as a table: {reason}") from None
    if df.columns.duplicated().any():
        dupes = sorted(set(map(str, df.columns[df.columns.duplicated()])))
        raise BadInputError(f"{p} has duplicate column names: {', '.join(dupes)}")
    return df


def _read_csv(p: Path) -> pd.DataFrame:
    sep = "\t" if p.suffix.lower() == ".tsv" else ","
    with open(p, "rb") as fh:
        head = fh.read(65536)
    if b"\x00" in head:
        raise BadInputError(f"{p} is not a text table (it contains NUL bytes)")
    sep = _delimiter(head, sep)
    # pandas silently renames duplicate headers (a, a.1): read the header row raw.
    raw = pd.read_csv(p, sep=sep, header=None, nrows=1, encoding="utf-8", dtype=str)
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
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except FileNotFoundError:
        raise BadInputError(f"{what} file not found: {path}") from None
    except IsADirectoryError:
        raise BadInputError(f"{what} file {path} is a directory") from None
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise BadInputError(f"{what} file {path} is not valid JSON: {exc}") from None


# -- directories of Parquet files ------------------------------------------------------------
@dataclass(frozen=True)
class Part:
    """Consecutive row groups of one Parquet file of a directory: a unit of work.

    Attributes
    ----------
    path : str
        Absolute path of the file.
    row_groups : tuple of int
    start : int
        Position of the part's first row in the whole table.
    rows : int
    partition : tuple of (str, object)
        The file's partition values (column name, value; None where missing).
    """

    path: str
    row_groups: tuple[int, ...]
    start: int
    rows: int
    partition: tuple[tuple[str, object], ...] = ()


@dataclass(frozen=True)
class ParquetDirectory:
    """A directory of Parquet files read as one table (see :func:`open_directory`).

    Plain data only, so it can be sent to the workers of a cluster.
    """

    root: str
    schema: pa.Schema
    parts: tuple[Part, ...]
    n_files: int

    @property
    def n_rows(self) -> int:
        return sum(p.rows for p in self.parts)

    def batches(self, batch_rows: int = 65536) -> Iterator[pa.RecordBatch]:
        """Every part's batches, in order."""
        for part in self.parts:
            yield from part_batches(part, self.schema, batch_rows)


def open_directory(path: str | os.PathLike, part_rows: int = PART_ROWS) -> ParquetDirectory:
    """Find the Parquet files of a directory and cut them into parts; read footers only.

    Files are taken in sorted path order and, within a file, in row order; names starting
    with ``.`` or ``_`` are skipped (as ``pyarrow.dataset`` does). Raises
    :class:`BadInputError` for a directory without Parquet files, a file that is not
    Parquet, files whose columns cannot be unified, or a partition key that is also a
    column.
    """
    root = Path(path).resolve()
    files = _data_files(root)
    if not files:
        raise BadInputError(f"{path} holds no Parquet files")
    for f in files:
        if not is_parquet(f):
            raise BadInputError(f"{f} is not a Parquet file (a data directory holds only "
                                "Parquet files; names starting with . or _ are skipped)")
    metas = []
    for f in files:
        try:
            metas.append(pq.ParquetFile(f).metadata)
        except (OSError, pa.ArrowException) as exc:
            raise BadInputError(f"could not read {f} as Parquet: {_first_line(exc)}") from None
    schemas = [m.schema.to_arrow_schema() for m in metas]
    keys = _partition_keys(root, files)
    clash = sorted(set(keys) & {n for s in schemas for n in s.names})
    if clash:
        raise BadInputError(f"{path}: partition keys are also columns of its files: "
                            f"{', '.join(clash)}")
    part_fields, keys_of = _partitions(root, files, keys, path)
    parts, start = [], 0
    for f, meta in zip(files, metas):
        partition = tuple((fld.name, keys_of.get(f, {}).get(fld.name)) for fld in part_fields)
        for groups, rows in _runs(meta, part_rows):
            parts.append(Part(f, groups, start, rows, partition))
            start += rows
    return ParquetDirectory(str(root), _unified(schemas, part_fields, path), tuple(parts),
                            len(files))


def _data_files(root: Path) -> list[str]:
    """Files under ``root`` in sorted relative-path order, hidden (``.``, ``_``) ones not."""
    out = []
    for dirpath, dirnames, filenames in os.walk(root):
        dirnames[:] = sorted(d for d in dirnames if not d.startswith((".", "_")))
        out += [os.path.join(dirpath, f) for f in filenames if not f.startswith((".", "_"))]
    return sorted(out, key=lambda f: Path(f).relative_to(root).as_posix())


def _partitions(root: Path, files: list[str], keys: list[str], path
                ) -> tuple[list[pa.Field], dict[str, dict]]:
    """The partition fields as pyarrow.dataset types them (integers when every value is
    one, else text) and each file's partition values."""
    if not keys:
        return [], {}
    try:
        found = ds.dataset(files, format="parquet", partitioning="hive",
                           partition_base_dir=str(root))
    except (OSError, pa.ArrowException) as exc:
        raise BadInputError(f"could not read {path} as a directory of Parquet files: "
                            f"{_first_line(exc)}") from None
    values = {f.path: ds.get_partition_keys(f.partition_expression)
              for f in found.get_fragments()}
    return [found.schema.field(k) for k in keys], values


def _partition_keys(root: Path, files: list[str]) -> list[str]:
    """Names of the hive-style ``key=value`` directories, in order of first appearance."""
    keys: dict[str, None] = {}
    for f in files:
        for seg in Path(f).relative_to(root).parts[:-1]:
            if "=" in seg:
                keys.setdefault(seg.split("=", 1)[0], None)
    return list(keys)


def _runs(meta: pq.FileMetaData, part_rows: int) -> list[tuple[tuple[int, ...], int]]:
    """Row groups of a file cut into runs of at most ``part_rows`` rows (at least one)."""
    runs: list[tuple[tuple[int, ...], int]] = []
    groups: list[int] = []
    rows = 0
    for g in range(meta.num_row_groups):
        n = meta.row_group(g).num_rows
        if groups and rows + n > part_rows:
            runs.append((tuple(groups), rows))
            groups, rows = [], 0
        groups.append(g)
        rows += n
    if groups:
        runs.append((tuple(groups), rows))
    return runs


def _unified(schemas: list[pa.Schema], part_fields: list[pa.Field], path) -> pa.Schema:
    try:
        schema = pa.unify_schemas([s.remove_metadata() for s in schemas],
                                  promote_options="permissive")
    except (pa.ArrowException, TypeError) as exc:
        raise BadInputError(f"the files of {path} have incompatible columns: "
                            f"{_first_line(exc)}") from None
    if len(set(schema.names)) != len(schema.names):
        dupes = sorted({n for n in schema.names if schema.names.count(n) > 1})
        raise BadInputError(f"{path} has duplicate column names: {', '.join(dupes)}")
    # the first file's metadata, as pyarrow.dataset keeps it (pandas dtypes on reading)
    return pa.schema(list(schema) + part_fields, metadata=schemas[0].metadata)


def part_batches(part: Part, schema: pa.Schema, batch_rows: int = 65536
                 ) -> Iterator[pa.RecordBatch]:
    """The record batches of one part, conformed to the directory's ``schema``.

    Columns a file lacks are all-missing, partition keys are constant columns, and every
    column is cast to the unified type. Raises :class:`BadInputError` when it cannot be.
    """
    values = dict(part.partition)
    try:
        # No pre-buffering, as in open_parquet: memory stays at one row group.
        pf = pq.ParquetFile(part.path, pre_buffer=False, buffer_size=1 << 20)
        own = [n for n in pf.schema_arrow.names if n in schema.names]
        for b in pf.iter_batches(batch_size=batch_rows, row_groups=list(part.row_groups),
                                 columns=own):
            yield _conform(b, schema, values)
    except (OSError, pa.ArrowException) as exc:
        raise BadInputError(f"could not read {part.path} as Parquet: {_first_line(exc)}"
                            ) from None


def _conform(b: pa.RecordBatch, schema: pa.Schema, values: dict) -> pa.RecordBatch:
    n, arrays = b.num_rows, []
    for fld in schema:
        if fld.name in values:
            v = values[fld.name]
            arr = pa.nulls(n, fld.type) if v is None else pa.repeat(pa.scalar(v, fld.type), n)
        elif fld.name in b.schema.names:
            arr = b.column(fld.name)
            if arr.type != fld.type:
                arr = arr.cast(fld.type)
        else:
            arr = pa.nulls(n, fld.type)
        arrays.append(arr)
    return pa.RecordBatch.from_arrays(arrays, schema=schema)


def read_directory(path: str | os.PathLike) -> pd.DataFrame:
    """A directory of Parquet files as one DataFrame (see :func:`open_directory`)."""
    d = open_directory(path)
    table = pa.Table.from_batches(list(d.batches()), schema=d.schema)
    if table.num_rows == 0:
        raise BadInputError(f"{path} holds no rows")
    return table.to_pandas()


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__
