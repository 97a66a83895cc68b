"""One pass over a table, batch by batch, into the summaries a fingerprint is computed from.

A DataFrame is first converted to Arrow and cut into record batches; a Parquet file is
read with ``iter_batches``; both then go through the same :class:`Scanner`, so a frame and
its Parquet file give the same summaries. Per batch every column is turned into a numpy
array once and processed with whole-array operations (columns one after another, so each
stays in cache). What is kept between batches is bounded (see :mod:`.sketches`):

* exact, mergeable: row count, per-column missing / infinite / zero counts, min, max,
  integer-valuedness, moments up to the 4th (numbers, and text parsed as numbers), missing
  cells and rows, and the table hash;
* exact while small, approximate beyond: level counts (up to ``LEVEL_CAP`` levels, then a
  k-minimum-values distinct count), missingness patterns (up to ``PATTERN_CAP``), distinct
  rows (k-minimum-values over row hashes);
* a seeded uniform sample of ``SAMPLE_CAP`` rows, for everything else.

All of it lives in an :class:`Accumulator`. A directory of Parquet files is summarised
part by part (:class:`warmstart.io.Part`), each part in its own accumulator, and the
accumulators are merged in part order -- the same computation whether the parts run here
or on the workers of a cluster, so both give bit-for-bit the same fingerprint.

The sample does not depend on batching: row ``i`` of the whole table has the fixed
priority ``mix64(i ^ seed)`` and the sample is the ``SAMPLE_CAP`` rows of smallest
priority, so neither the batch size, nor the split into parts, nor the order in which
parts are merged can change it.

The table hash of a single file or frame is a SHA-256 over the row hashes in order. A
directory's cannot be computed in order on many workers, so it is a SHA-256 of four
64-bit sums of (differently) mixed row hashes, with the row count and the column names:
it depends on which rows the table holds, not on their order nor on how they are split
over files and row groups, so the same rows re-partitioned keep their hash. It differs
from the hash of the same rows written as one file, whose hash is kept as it was so that
histories logged before still recognise their datasets.
"""

from __future__ import annotations

import hashlib
import os
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from warmstart.errors import BadInputError
from warmstart.fingerprint.sketches import (
    NULL_HASH,
    BottomKSample,
    DistinctSketch,
    LevelCounter,
    Moments,
    hash_floats,
    hash_ints,
    key_of,
    mix64,
    sorted_distinct,
    unique_counts,
)
from warmstart.io import (
    ParquetDirectory,
    Part,
    is_parquet,
    open_directory,
    open_parquet,
    part_batches,
    read_table,
)

NUMBER, DATETIME, TEXT, UNSUPPORTED = "number", "datetime", "text", "unsupported"
BATCH_ROWS = 65536
SAMPLE_CAP = 5000
LEVEL_CAP = 4096
PATTERN_CAP = 4096
DISTINCT_K = 4096
SEED = 20021
SEQUENCE, ROW_SET = "sequence", "set"  # how an Accumulator hashes the table
# Four keys for the row-set hash: 4 x 64 bits, so a SHA-256 digest is not wasted.
_LANES = mix64(np.arange(1, 5, dtype=np.uint64) * np.uint64(0x9E3779B97F4A7C15))
# Numbers as Arrow's string -> float64 cast reads them (decimal point, optional exponent).
_NUMBER_RE = r"^\s*[-+]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][-+]?[0-9]+)?\s*$"


@dataclass
class Source:
    """A table to scan: its Arrow schema, row count and a way to iterate its batches.

    For a directory of Parquet files, ``directory`` holds its parts, which are read
    ``batch_rows`` rows at a time.
    """

    schema: pa.Schema
    n_rows: int
    batches: Callable[[], Iterator[pa.RecordBatch]]
    mixed: list[str] = field(default_factory=list)
    directory: ParquetDirectory | None = None
    batch_rows: int = BATCH_ROWS


def frame_to_arrow(df: pd.DataFrame) -> tuple[pa.Table, list[str]]:
    """Convert a DataFrame to Arrow, returning the table and the mixed-type columns.

    Object columns holding numbers and text together, or Python objects Arrow cannot
    type, become text (missing values kept) and are reported as mixed; object columns of
    numbers only become numbers, so a frame and the Parquet file written from it agree.
    """
    names = [str(c) for c in df.columns]
    if len(set(names)) != len(names):
        raise BadInputError("the table has duplicate column names")
    arrays, mixed = [], []
    for name, (_, col) in zip(names, df.items()):
        if col.dtype == object:
            kind = pd.api.types.infer_dtype(col, skipna=True)
            if kind in ("integer", "floating", "mixed-integer-float", "decimal"):
                col = pd.to_numeric(col, errors="coerce")
            elif kind in ("mixed", "mixed-integer", "complex", "bytes", "period", "interval"):
                mixed.append(name)
                col = col.map(lambda v: v if _is_missing(v) else str(v)).astype(object)
        try:
            arr = pa.array(col, from_pandas=True)
        except (pa.ArrowException, TypeError, ValueError):
            mixed.append(name)
            arr = pa.array(col.map(lambda v: None if _is_missing(v) else str(v)),
                           type=pa.large_string())
        if isinstance(arr, pa.ChunkedArray):
            arr = arr.combine_chunks()
        arrays.append(arr)
    return pa.Table.from_arrays(arrays, names=names), sorted(set(mixed))


def _is_missing(v) -> bool:
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def source_of(data: pd.DataFrame | str | os.PathLike, batch_rows: int = BATCH_ROWS) -> Source:
    """Wrap a DataFrame, a file (Parquet streamed; CSV / JSON lines read whole) or a
    directory of Parquet files (streamed part by part)."""
    if not isinstance(data, pd.DataFrame):
        if os.path.isdir(data):
            d = open_directory(data)
            return Source(d.schema, d.n_rows, lambda: d.batches(batch_rows), [], d,
                          batch_rows)
        if is_parquet(data):
            schema, n_rows, batches = open_parquet(data, batch_rows)
            return Source(schema, n_rows, batches)
        data = read_table(data)
    table, mixed = frame_to_arrow(data)
    return Source(table.schema, table.num_rows,
                  lambda: iter(table.to_batches(max_chunksize=batch_rows)), mixed)


def kind_of(t: pa.DataType) -> str:
    """How a column of Arrow type ``t`` is read: number, datetime, text or unsupported."""
    if pa.types.is_dictionary(t):
        return TEXT
    if (pa.types.is_boolean(t) or pa.types.is_integer(t) or pa.types.is_floating(t)
            or pa.types.is_decimal(t) or pa.types.is_null(t) or pa.types.is_duration(t)):
        return NUMBER
    if pa.types.is_timestamp(t) or pa.types.is_date(t) or pa.types.is_time(t):
        return DATETIME
    if (pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_binary(t)
            or pa.types.is_large_binary(t)):
        return TEXT
    return UNSUPPORTED


# -- per-batch conversions -----------------------------------------------------------------
def as_float(arr: pa.Array) -> np.ndarray:
    """A number column as float64, NaN for missing (integers beyond 2**53 are rounded)."""
    t = arr.type
    if pa.types.is_null(t):
        return np.full(len(arr), np.nan)
    if pa.types.is_duration(t):
        arr = arr.cast(pa.int64())
    if t != pa.float64():
        arr = pc.cast(arr, pa.float64(), safe=False)
    return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=np.float64)


def as_nanoseconds(arr: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """A date/time column as (int64 values, missing mask)."""
    t = arr.type
    null = np.asarray(arr.is_null().to_numpy(zero_copy_only=False), dtype=bool)
    if pa.types.is_date(t):
        arr = pc.cast(arr, pa.timestamp("ns"), safe=False)
    elif pa.types.is_timestamp(t):
        arr = pc.cast(arr, pa.timestamp("ns", t.tz), safe=False)
    elif pa.types.is_time32(t):
        arr = arr.cast(pa.int32())
    values = arr.cast(pa.int64()).fill_null(0).to_numpy(zero_copy_only=False)
    return np.asarray(values, dtype=np.int64), null


def as_text(arr: pa.Array) -> tuple[np.ndarray, pa.Array]:
    """A text column as (int64 codes, -1 for missing; dictionary of distinct strings)."""
    if kind_of(arr.type) == UNSUPPORTED:
        arr = pa.array([None if v is None else repr(v) for v in arr.to_pylist()],
                       type=pa.large_string())
    enc = arr if pa.types.is_dictionary(arr.type) else pc.dictionary_encode(arr)
    codes = np.asarray(enc.indices.cast(pa.int64()).fill_null(-1).to_numpy(
        zero_copy_only=False), dtype=np.int64)
    d = enc.dictionary
    if d.type != pa.large_string():
        try:
            d = pc.cast(d, pa.large_string())
        except pa.ArrowException:
            d = pa.array([None if v is None else (v.decode("utf-8", "replace")
                          if isinstance(v, bytes) else str(v)) for v in d.to_pylist()],
                         type=pa.large_string())
    if d.null_count:
        dnull = np.asarray(d.is_null().to_numpy(zero_copy_only=False), dtype=bool)
        codes = np.where((codes >= 0) & dnull[np.maximum(codes, 0)], -1, codes)
        d = d.fill_null("")
    return codes, d


def hash_strings(d: pa.Array, key: np.uint64) -> np.ndarray:
    """Hash each string of a large_string array from its UTF-8 bytes, shape (len(d),).

    Vectorised over the bytes: each byte is mixed with its position in its string, the
    mixes are summed per string (``np.add.reduceat``) and mixed again with the length.
    """
    n = len(d)
    if n == 0:
        return np.zeros(0, dtype=np.uint64)
    bufs = d.buffers()
    offsets = np.frombuffer(bufs[1], dtype=np.int64)[d.offset: d.offset + n + 1]
    data = (np.frombuffer(bufs[2], dtype=np.uint8) if bufs[2] is not None
            else np.zeros(0, dtype=np.uint8))
    starts, lengths = offsets[:-1], np.diff(offsets)
    base = offsets[0]
    body = data[base: offsets[-1]].astype(np.uint64)
    sums = np.zeros(n, dtype=np.uint64)
    if body.size:
        within = np.arange(body.size, dtype=np.int64) - np.repeat(starts - base, lengths)
        terms = mix64(((within.astype(np.uint64) << 8) | body) ^ key)
        nonempty = lengths > 0
        sums[nonempty] = np.add.reduceat(terms, (starts - base)[nonempty])
    return mix64(sums ^ mix64(lengths.astype(np.uint64) ^ key))


def parse_numbers(d: pa.Array) -> np.ndarray:
    """Each string parsed as a decimal number, NaN where it is not one; shape (len(d),)."""
    out = np.full(len(d), np.nan)
    if len(d) == 0:
        return out
    ok = np.asarray(pc.match_substring_regex(d, _NUMBER_RE).fill_null(False).to_numpy(
        zero_copy_only=False), dtype=bool)
    if ok.any():
        chosen = pc.utf8_trim_whitespace(d.filter(pa.array(ok)))
        try:
            out[ok] = pc.cast(chosen, pa.float64()).to_numpy(zero_copy_only=False)
        except pa.ArrowException:
            out[ok] = pd.to_numeric(pd.Series(chosen.to_pylist()), errors="coerce").to_numpy()
    return out


# -- the scan ------------------------------------------------------------------------------
@dataclass
class NumberStats:
    """Per number column (and per text column, for its values parsed as numbers)."""

    finite: np.ndarray       # count of finite values
    infinite: np.ndarray     # count of +-inf
    zeros: np.ndarray        # count of exact zeros
    minimum: np.ndarray
    maximum: np.ndarray
    integer: np.ndarray      # bool: every finite value is a whole number
    moments: Moments


def _number_stats(n: int) -> NumberStats:
    return NumberStats(np.zeros(n), np.zeros(n), np.zeros(n), np.full(n, np.inf),
                       np.full(n, -np.inf), np.ones(n, dtype=bool), Moments(n))


@dataclass
class Scan:
    """Everything one pass over the table produced (see the module docstring)."""

    names: list[str]
    kinds: list[str]
    types: list[str]
    target: str
    n_rows: int
    mixed: list[str]
    number_cols: list[int]
    text_cols: list[int]
    datetime_cols: list[int]
    feature_cols: list[int]          # every column but the target, in table order
    nonnull: np.ndarray              # per column, count of non-missing (NaN/None) cells
    number: NumberStats              # aligned with number_cols
    parsed: NumberStats              # aligned with text_cols
    levels: list[LevelCounter]       # aligned with number_cols + text_cols
    distinct: list[DistinctSketch]   # aligned with number_cols + text_cols
    missing_by_column: np.ndarray    # aligned with feature_cols (NaN, inf and None)
    missing_cells: int
    missing_rows: int
    patterns: LevelCounter
    row_distinct: DistinctSketch
    dataset_hash: str
    sample_index: np.ndarray
    sample_priority: np.ndarray
    sample_numbers: np.ndarray       # (sample, number_cols) float
    sample_text: np.ndarray          # (sample, text_cols) object, None for missing
    sample_missing: np.ndarray       # (sample, feature_cols) bool

    def column_levels(self, col: int) -> LevelCounter:
        return self.levels[self._slot(col)]

    def column_distinct(self, col: int) -> tuple[float, bool]:
        counter = self.levels[self._slot(col)]
        if not counter.overflowed:
            return float(counter.size), True
        return self.distinct[self._slot(col)].estimate()

    def _slot(self, col: int) -> int:
        if col in self.number_cols:
            return self.number_cols.index(col)
        return len(self.number_cols) + self.text_cols.index(col)


@dataclass
class Layout:
    """How each column of a schema is read; it depends on the schema and target alone."""

    names: list[str]
    kinds: list[str]
    types: list[str]
    target: str
    number_cols: list[int]
    text_cols: list[int]
    datetime_cols: list[int]
    feature_cols: list[int]          # every column but the target, in table order
    keys: list[np.uint64]            # per column, the key its values are hashed with

    @classmethod
    def of(cls, schema: pa.Schema, target: str) -> Layout:
        """Raises :class:`BadInputError` for duplicate names or a missing target."""
        names = list(schema.names)
        if len(set(names)) != len(names):
            raise BadInputError("the table has duplicate column names")
        if target not in names:
            cols = ", ".join(names[:20])
            raise BadInputError(f"target column {target!r} not found; columns are: {cols}")
        kinds = [kind_of(f.type) for f in schema]
        return cls(names, kinds, [str(f.type) for f in schema], target,
                   [i for i, k in enumerate(kinds) if k == NUMBER],
                   [i for i, k in enumerate(kinds) if k in (TEXT, UNSUPPORTED)],
                   [i for i, k in enumerate(kinds) if k == DATETIME],
                   [i for i, nm in enumerate(names) if nm != target],
                   [key_of(nm) for nm in names])


class Accumulator:
    """The mergeable summaries of a run of rows (see the module docstring).

    Fed batch by batch with :meth:`add`; two accumulators of adjacent runs combine with
    :meth:`merge`. ``hashing`` chooses the table hash: ``"sequence"``, a SHA-256 over the
    row hashes in order (a single file or frame; not mergeable), or ``"set"``, sums of
    mixed row hashes that do not depend on the rows' order or on how they are split
    (a directory; mergeable). ``bound`` is a known upper bound on the priorities of the
    rows the whole table's sample will keep: rows above it are not gathered.
    """

    def __init__(self, layout: Layout, sample_cap: int = SAMPLE_CAP,
                 hashing: str = SEQUENCE, bound: int | None = None):
        n_num, n_txt = len(layout.number_cols), len(layout.text_cols)
        self.layout, self.hashing, self.rows = layout, hashing, 0
        self.number, self.parsed = _number_stats(n_num), _number_stats(n_txt)
        self.levels = [LevelCounter(LEVEL_CAP) for _ in range(n_num + n_txt)]
        self.distinct = [DistinctSketch(DISTINCT_K) for _ in range(n_num + n_txt)]
        self.nonnull = np.zeros(len(layout.names))
        self.miss_col = np.zeros(len(layout.feature_cols))
        self.miss_cells = self.miss_rows = 0
        self.patterns = LevelCounter(PATTERN_CAP)
        self.row_distinct = DistinctSketch(DISTINCT_K)
        self.sample = BottomKSample(sample_cap, SEED, bound)
        self.digest = (hashlib.sha256(repr((layout.names, layout.target)).encode())
                       if hashing == SEQUENCE else None)
        self.lanes = np.zeros(_LANES.size, dtype=np.uint64)
        self._feature_pos = {c: j for j, c in enumerate(layout.feature_cols)}

    def add(self, batch: pa.RecordBatch, offset: int) -> None:
        """Fold in a batch whose first row is row ``offset`` of the whole table."""
        nb = batch.num_rows
        if nb == 0:
            return
        lay = self.layout
        cand = self.sample.candidates(offset, nb)
        row_h = np.zeros(nb, dtype=np.uint64)
        mask = np.zeros((nb, len(lay.feature_cols)), dtype=bool, order="F")  # by column
        payload: dict[str, np.ndarray] = {}
        if cand is not None:
            payload["num"] = np.empty((cand[0].size, len(lay.number_cols)))
            payload["text"] = np.empty((cand[0].size, len(lay.text_cols)), dtype=object)
        self._numbers(batch, cand, row_h, mask, payload)
        self._texts(batch, cand, row_h, mask, payload)
        for c in lay.datetime_cols:
            v, null = as_nanoseconds(batch.column(c))
            row_h += hash_ints(v, null, lay.keys[c])
            self.nonnull[c] += nb - int(null.sum())
            if c in self._feature_pos:
                mask[:, self._feature_pos[c]] = null
        self._rows(mask, row_h)
        if cand is not None:
            payload["mask"] = mask[cand[0]]
            self.sample.offer(offset, cand[0], cand[1], payload)
        self.rows += nb

    def _numbers(self, batch, cand, row_h, mask, payload) -> None:
        lay, nb = self.layout, batch.num_rows
        moments_b = np.zeros((5, len(lay.number_cols)))
        for j, c in enumerate(lay.number_cols):
            x = as_float(batch.column(c))
            nan = np.isnan(x)
            ok = np.isfinite(x)
            h = hash_floats(x, lay.keys[c], nan)
            row_h += h
            v = x[ok]
            n_nan = int(nan.sum())
            _update_numbers(self.number, moments_b, j, v, nb - n_nan - v.size)
            self.nonnull[c] += nb - n_nan
            _update_number_levels(self.levels[j], self.distinct[j], v, h[ok], lay.keys[c])
            if c in self._feature_pos:
                mask[:, self._feature_pos[c]] = ~ok
            if cand is not None:
                payload["num"][:, j] = x[cand[0]]
        self.number.moments.merge(*moments_b)

    def _texts(self, batch, cand, row_h, mask, payload) -> None:
        lay, n_num = self.layout, len(self.layout.number_cols)
        parsed_b = np.zeros((5, len(lay.text_cols)))
        for t, c in enumerate(lay.text_cols):
            codes, d = as_text(batch.column(c))
            dh = np.append(hash_strings(d, lay.keys[c]), NULL_HASH)
            row_h += dh[codes]
            present = codes >= 0
            self.nonnull[c] += int(present.sum())
            counts = np.bincount(codes[present], minlength=len(d))
            used = np.flatnonzero(counts)
            levels = self.levels[n_num + t]
            if not levels.overflowed:
                if used.size > LEVEL_CAP:
                    levels.give_up()
                else:
                    levels.add(np.asarray(d.take(pa.array(used)).to_numpy(
                        zero_copy_only=False), dtype=object), counts[used].astype(float))
            self.distinct[n_num + t].add(dh[used])
            values = np.append(parse_numbers(d), np.nan)[codes]
            finite = np.isfinite(values)
            _update_numbers(self.parsed, parsed_b, t, values[finite],
                            int((np.isinf(values)).sum()))
            if c in self._feature_pos:
                mask[:, self._feature_pos[c]] = ~present
            if cand is not None:
                payload["text"][:, t] = _sample_text(d, codes[cand[0]])
        self.parsed.moments.merge(*parsed_b)

    def _rows(self, mask: np.ndarray, row_h: np.ndarray) -> None:
        self.miss_col += mask.sum(axis=0)
        any_missing = mask.any(axis=1)
        self.miss_cells += int(mask.sum())
        self.miss_rows += int(any_missing.sum())
        if not self.patterns.overflowed:
            self.patterns.add(*unique_counts(_pattern_keys(mask)))
        if self.digest is not None:
            self.digest.update(row_h.astype("<u8").tobytes())
        else:
            # integer sums wrap modulo 2**64, so they are exact and merge in any order
            self.lanes += mix64(row_h[:, None] ^ _LANES[None, :]).sum(axis=0, dtype=np.uint64)
        self.row_distinct.add(mix64(row_h))

    def merge(self, other: Accumulator) -> Accumulator:
        """Fold in the summaries of the rows after this run (or, for everything but the
        floating-point rounding of the moments, any other rows); returns ``self``."""
        if self.digest is not None or other.digest is not None:
            raise ValueError("accumulators with a sequence hash cannot be merged")
        self.rows += other.rows
        _merge_numbers(self.number, other.number)
        _merge_numbers(self.parsed, other.parsed)
        for a, b in zip(self.levels, other.levels):
            a.merge(b)
        for a, b in zip(self.distinct, other.distinct):
            a.merge(b)
        self.nonnull += other.nonnull
        self.miss_col += other.miss_col
        self.miss_cells += other.miss_cells
        self.miss_rows += other.miss_rows
        self.patterns.merge(other.patterns)
        self.row_distinct.merge(other.row_distinct)
        self.sample.merge(other.sample)
        self.lanes += other.lanes
        return self

    def dataset_hash(self) -> str:
        if self.digest is not None:
            return self.digest.hexdigest()
        lay = self.layout
        d = hashlib.sha256(repr(("rows as a set", lay.names, lay.target)).encode())
        d.update(np.array([self.rows], dtype="<u8").tobytes())
        d.update(self.lanes.astype("<u8").tobytes())
        return d.hexdigest()

    def finish(self, mixed: list[str] | None = None) -> Scan:
        """The :class:`Scan` of every row added; raises when there were none."""
        if self.rows == 0:
            raise BadInputError("the table has no rows")
        lay = self.layout
        index, priority, payload = self.sample.in_row_order()
        return Scan(
            names=lay.names, kinds=lay.kinds, types=lay.types, target=lay.target,
            n_rows=self.rows, mixed=list(mixed or []), number_cols=lay.number_cols,
            text_cols=lay.text_cols, datetime_cols=lay.datetime_cols,
            feature_cols=lay.feature_cols, nonnull=self.nonnull, number=self.number,
            parsed=self.parsed, levels=self.levels, distinct=self.distinct,
            missing_by_column=self.miss_col, missing_cells=self.miss_cells,
            missing_rows=self.miss_rows, patterns=self.patterns,
            row_distinct=self.row_distinct, dataset_hash=self.dataset_hash(),
            sample_index=index, sample_priority=priority,
            sample_numbers=payload.get("num", np.empty((0, len(lay.number_cols)))),
            sample_text=payload.get("text", np.empty((0, len(lay.text_cols)), dtype=object)),
            sample_missing=payload.get("mask", np.empty((0, len(lay.feature_cols)),
                                                        dtype=bool)),
        )


def _sample_text(d: pa.Array, pos: np.ndarray) -> np.ndarray:
    """The strings at dictionary positions ``pos`` (-1 = missing -> None), as objects."""
    vals = (np.asarray(d.take(pa.array(np.maximum(pos, 0))).to_numpy(zero_copy_only=False),
                       dtype=object) if len(d) else np.full(pos.size, None, dtype=object))
    vals[pos < 0] = None
    return vals


def _merge_numbers(a: NumberStats, b: NumberStats) -> None:
    a.finite += b.finite
    a.infinite += b.infinite
    a.zeros += b.zeros
    a.minimum = np.minimum(a.minimum, b.minimum)
    a.maximum = np.maximum(a.maximum, b.maximum)
    a.integer &= b.integer
    m = b.moments
    a.moments.merge(m.n, m.mean, m.m2, m.m3, m.m4)


def scan(source: Source, target: str, sample_cap: int = SAMPLE_CAP) -> Scan:
    """Read every batch of ``source`` once and summarise it (see :class:`Scan`).

    A directory is summarised part by part and the parts merged in order, exactly as
    a cluster does it (:mod:`warmstart.cluster`), so both give the same fingerprint.
    """
    layout = Layout.of(source.schema, target)
    if source.directory is None:
        acc = Accumulator(layout, sample_cap)
        offset = 0
        for batch in source.batches():
            acc.add(batch, offset)
            offset += batch.num_rows
        return acc.finish(source.mixed)
    total: Accumulator | None = None
    for part in source.directory.parts:
        bound = None if total is None else total.sample.full_bound()
        acc = scan_part(source.directory.schema, part, layout, sample_cap,
                        source.batch_rows, bound)
        total = acc if total is None else total.merge(acc)
    return finish_directory(source.directory, total, layout, sample_cap)


def scan_part(schema: pa.Schema, part: Part, layout: Layout, sample_cap: int,
              batch_rows: int, bound: int | None = None) -> Accumulator:
    """The accumulator of one part of a directory (run here or on a cluster's worker)."""
    acc = Accumulator(layout, sample_cap, ROW_SET, bound)
    offset = part.start
    for batch in part_batches(part, schema, batch_rows):
        acc.add(batch, offset)
        offset += batch.num_rows
    if acc.rows != part.rows:
        raise BadInputError(f"{part.path} changed while it was read ({acc.rows} rows, "
                            f"its footer said {part.rows})")
    return acc


def finish_directory(directory: ParquetDirectory, total: Accumulator | None,
                     layout: Layout, sample_cap: int) -> Scan:
    """The scan of a directory from the merge of all its parts' accumulators."""
    if total is None:  # files without row groups
        total = Accumulator(layout, sample_cap, ROW_SET)
    if total.rows != directory.n_rows:
        raise BadInputError(f"{directory.root}: {total.rows} rows were summarised but its "
                            f"footers hold {directory.n_rows}; nothing was computed")
    return total.finish()


def _update_numbers(stats: NumberStats, moments_b: np.ndarray, j: int, v: np.ndarray,
                    n_infinite: int) -> None:
    """Fold one column's finite batch values ``v`` into ``stats``.

    The batch's own count, mean and centred power sums go to ``moments_b[:, j]``; they are
    merged into the running moments for all columns at once after the batch.
    """
    stats.infinite[j] += n_infinite
    if v.size == 0:
        return
    stats.finite[j] += v.size
    stats.zeros[j] += v.size - np.count_nonzero(v)
    stats.minimum[j] = min(stats.minimum[j], v.min())
    stats.maximum[j] = max(stats.maximum[j], v.max())
    if stats.integer[j]:
        stats.integer[j] = bool(np.all(v == np.round(v)))
    mean = v.mean()
    d = v - mean
    d2 = d * d
    moments_b[:, j] = (v.size, mean, d2.sum(), (d2 * d).sum(), (d2 * d2).sum())


def _update_number_levels(counter: LevelCounter, sketch: DistinctSketch, v: np.ndarray,
                          h: np.ndarray, key: np.uint64) -> None:
    """Exact level counts while few, else the distinct sketch from the value hashes."""
    if not counter.overflowed:
        if v.size > 2 * LEVEL_CAP and sorted_distinct(v[: 2 * LEVEL_CAP + 1]).size > LEVEL_CAP:
            counter.give_up()  # a prefix alone has too many distinct values
        else:
            counter.add(*unique_counts(v))
            if not counter.overflowed:
                sketch.add(hash_floats(sorted_distinct(v), key))
                return
    sketch.add(h)


def _pattern_keys(mask: np.ndarray) -> np.ndarray:
    """One uint64 per row identifying its missingness pattern (exact up to 64 columns)."""
    n, m = mask.shape
    if m == 0:
        return np.zeros(n, dtype=np.uint64)
    packed = np.packbits(mask, axis=1, bitorder="little")
    width = -(-packed.shape[1] // 8) * 8
    padded = np.zeros((n, width), dtype=np.uint8)
    padded[:, : packed.shape[1]] = packed
    words = padded.view("<u8")
    key = words[:, 0].copy()
    for w in range(1, words.shape[1]):
        key = mix64(key ^ mix64(words[:, w] + np.uint64(w)))
    return key
