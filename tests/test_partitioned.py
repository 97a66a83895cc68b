"""Directories of Parquet files (hive-style partitions included) as data: read like
pyarrow.dataset, fingerprinted part by part with the same values as the whole frame, a
sample that does not depend on batching, and a hash that ignores how rows are split."""

from __future__ import annotations

import math
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.dataset as pads
import pyarrow.parquet as pq
import pytest

from warmstart import KnowledgeBase, fingerprint
from warmstart.errors import BadInputError
from warmstart.fingerprint import CATALOGUE, load_frame, profile_table
from warmstart.fingerprint.scan import SEED, Source, scan
from warmstart.io import open_directory, read_table

REPO = Path(__file__).resolve().parents[1]
TARGET = "churned"


def mixed_frame(n: int, seed: int = 0) -> pd.DataFrame:
    """Numbers, text categories, booleans and dates, each with missing values."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    df = pd.DataFrame({
        "spend": np.exp(x),
        "visits": pd.array(rng.poisson(4, n), dtype="Int64"),
        "channel": rng.choice(["web", "store", "phone", "app"], n).astype(object),
        "member": pd.array(rng.random(n) < 0.4, dtype="boolean"),
        "signup": pd.Timestamp("2021-01-01") + pd.to_timedelta(rng.integers(0, 900, n), "D"),
        "region": rng.choice(["north", "south"], n),
        "year": rng.choice([2023, 2024], n),
        TARGET: (x + rng.normal(size=n) > 0.4).astype(np.int64),
    })
    df.loc[rng.random(n) < 0.06, "spend"] = np.nan
    df.loc[rng.random(n) < 0.05, "visits"] = pd.NA
    df.loc[rng.random(n) < 0.07, "channel"] = None
    df.loc[rng.random(n) < 0.04, "member"] = pd.NA
    df.loc[rng.random(n) < 0.05, "signup"] = pd.NaT
    return df


def write_partitioned(root: Path, n: int = 6000, seed: int = 0, files_per_dir: int = 3
                      ) -> Path:
    """``region=.../year=.../part-i.parquet``: 4 directories x ``files_per_dir`` files,
    several row groups each; one file holds ``channel`` only as missing (Arrow type null)."""
    df = mixed_frame(n, seed)
    for (region, year), g in df.groupby(["region", "year"], sort=True):
        d = root / f"region={region}" / f"year={year}"
        d.mkdir(parents=True)
        for i, idx in enumerate(np.array_split(np.arange(len(g)), files_per_dir)):
            part = g.iloc[idx].drop(columns=["region", "year"])
            if (region, year, i) == ("south", 2024, 1):
                part = part.assign(channel=None)  # all missing: written with type null
            table = pa.Table.from_pandas(part, preserve_index=False)
            pq.write_table(table, d / f"part-{i}.parquet", row_group_size=200)
    (root / "_SUCCESS").write_text("")  # marker files of other writers are skipped
    (root / ".part-0.parquet.crc").write_bytes(b"\x00")
    return root


@pytest.fixture(scope="module")
def data_dir(tmp_path_factory) -> Path:
    return write_partitioned(tmp_path_factory.mktemp("partitioned") / "sales")


def _close(a: float, b: float, rel: float = 1e-9) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return a == pytest.approx(b, rel=rel, abs=1e-12)


def test_a_directory_reads_as_pyarrow_dataset_reads_it(data_dir):
    ours = read_table(data_dir)
    # reference: pyarrow.dataset with hive partitioning (partition keys become columns)
    theirs = pads.dataset(data_dir, format="parquet", partitioning="hive").to_table()
    assert ours.shape == (6000, 8)
    assert list(ours.columns) == theirs.schema.names
    assert str(theirs.schema.field("year").type) == "int32"
    assert ours["year"].dtype == np.int32 and set(ours["region"]) == {"north", "south"}
    pd.testing.assert_frame_equal(ours, theirs.to_pandas(), check_dtype=False)
    assert load_frame(data_dir).equals(ours)  # what tune reads


def test_files_are_taken_in_sorted_path_order(data_dir):
    d = open_directory(data_dir)
    paths = [p.path for p in d.parts]
    rel = [Path(p).relative_to(data_dir).as_posix() for p in paths]
    assert rel == sorted(rel) and d.n_files == 12 and len(set(paths)) == 12
    assert [p.start for p in d.parts] == list(np.cumsum([0] + [p.rows for p in d.parts])[:-1])
    assert d.n_rows == 6000


def test_fingerprint_of_a_directory_equals_that_of_its_rows_in_one_frame(data_dir):
    frame = read_table(data_dir)
    a = fingerprint(data_dir, target=TARGET, sample_cap=1000)
    b = fingerprint(frame, target=TARGET, sample_cap=1000)
    # same rows in the same order: the exact values agree up to merge rounding and the
    # sample is the same rows, so the sample-based values agree too
    bad = [k for k in CATALOGUE if not _close(a.values[k], b.values[k])]
    assert bad == []
    assert a.warnings == b.warnings and a.task == b.task == "classification"
    # reference: pandas row count and isna() over the feature columns
    assert a.values["rows"] == len(frame)
    features = frame.drop(columns=TARGET)
    assert a.values["missing_cell_fraction"] == pytest.approx(features.isna().to_numpy().mean())
    assert a.values["missing_row_fraction"] == pytest.approx(
        features.isna().any(axis=1).mean())
    # a directory is hashed as a set of rows, the one frame in sequence (see scan.py)
    assert a.dataset_hash != b.dataset_hash


def test_the_same_directory_always_gives_the_same_fingerprint(data_dir):
    a = fingerprint(data_dir, target=TARGET, sample_cap=500)
    b = fingerprint(data_dir, target=TARGET, sample_cap=500)
    assert a.to_json() == b.to_json()


def _splitmix64(x: int) -> int:
    # reference: SplitMix64 finaliser (Steele, Lea & Flood, OOPSLA 2014), in Python ints
    m = (1 << 64) - 1
    x = ((x ^ (x >> 30)) * 0xBF58476D1CE4E5B9) & m
    x = ((x ^ (x >> 27)) * 0x94D049BB133111EB) & m
    return x ^ (x >> 31)


def test_sample_is_the_rows_of_smallest_priority_whatever_the_batches(data_dir):
    seed = (SEED * 0x9E3779B97F4A7C15) % 2**64
    expected = sorted(_splitmix64(i ^ seed) for i in range(6000))[:300]
    for batch_rows in (65536, 97):
        p = profile_table(data_dir, TARGET, sample_cap=300, batch_rows=batch_rows)
        assert sorted(int(v) for v in p.sample_priority) == expected
    # parts of any size: a single row group per part changes nothing in the sample
    d = open_directory(data_dir, part_rows=1)
    assert len(d.parts) > 12
    small = scan(Source(d.schema, d.n_rows, d.batches, [], d, 50), TARGET, 300)
    whole = scan(Source(*_source_args(data_dir)), TARGET, 300)
    assert np.array_equal(small.sample_index, whole.sample_index)
    assert np.array_equal(small.sample_numbers, whole.sample_numbers, equal_nan=True)
    assert small.dataset_hash == whole.dataset_hash and small.n_rows == whole.n_rows
    assert np.allclose(small.number.moments.m2, whole.number.moments.m2, rtol=1e-12)


def _source_args(root):
    d = open_directory(root)
    return d.schema, d.n_rows, d.batches, [], d, 65536


def test_the_hash_ignores_how_rows_are_split_and_ordered(data_dir, tmp_path):
    frame = read_table(data_dir)
    shuffled = frame.sample(frac=1.0, random_state=3).reset_index(drop=True)
    other = tmp_path / "flat"
    other.mkdir()
    table = pa.Table.from_pandas(shuffled, preserve_index=False)
    for i, idx in enumerate(np.array_split(np.arange(len(shuffled)), 5)):
        pq.write_table(table.take(idx), other / f"chunk-{i}.parquet", row_group_size=777)
    a = fingerprint(data_dir, target=TARGET)
    b = fingerprint(other, target=TARGET)
    assert a.dataset_hash == b.dataset_hash
    assert a.values["rows"] == b.values["rows"]
    # one changed cell changes it
    changed = shuffled.copy()
    changed.loc[17, "spend"] = 123.5
    (other / "chunk-0.parquet").unlink()
    shutil.rmtree(other)
    other.mkdir()
    pq.write_table(pa.Table.from_pandas(changed, preserve_index=False), other / "a.parquet")
    assert fingerprint(other, target=TARGET).dataset_hash != a.dataset_hash


def test_columns_missing_from_a_file_are_missing_there(tmp_path):
    root = tmp_path / "d"
    root.mkdir()
    pq.write_table(pa.table({"a": [1.0, 2.0, 3.0], "y": [0, 1, 0]}), root / "1.parquet")
    pq.write_table(pa.table({"a": [4, 5], "b": ["u", "v"], "y": [1, 0]}), root / "2.parquet")
    df = read_table(root)
    # reference: pyarrow.dataset fills a column a file lacks with nulls
    theirs = pads.dataset([str(root / "1.parquet"), str(root / "2.parquet")],
                          schema=pa.schema([("a", pa.float64()), ("y", pa.int64()),
                                            ("b", pa.string())])).to_table().to_pandas()
    pd.testing.assert_frame_equal(df, theirs, check_dtype=False)
    assert df["a"].tolist() == [1.0, 2.0, 3.0, 4.0, 5.0]


@pytest.mark.parametrize("make, message", [
    (lambda r: (r / "x.csv").write_text("a,y\n1,0\n"), "is not a Parquet file"),
    (lambda r: None, "holds no Parquet files"),
    (lambda r: (pq.write_table(pa.table({"a": [1], "y": [0]}), r / "1.parquet"),
                pq.write_table(pa.table({"a": ["t"], "y": [1]}), r / "2.parquet")),
     "incompatible columns"),
    (lambda r: ((r / "a=1").mkdir(),
                pq.write_table(pa.table({"a": [1], "y": [0]}), r / "a=1" / "1.parquet")),
     "partition keys are also columns"),
])
def test_unusable_directories_give_one_line_errors(tmp_path, make, message):
    root = tmp_path / "bad"
    root.mkdir()
    make(root)
    with pytest.raises(BadInputError, match=message) as err:
        fingerprint(root, target="y")
    assert "\n" not in str(err.value)


def test_the_history_answers_questions_about_a_directory(data_dir):
    kb = KnowledgeBase(REPO / "knowledge_base")
    by_path = kb.similar(data_dir, target=TARGET, k=3)
    by_fp = kb.similar(fingerprint_of=fingerprint(data_dir, target=TARGET), k=3)
    assert [n.dataset_id for n in by_path] == [n.dataset_id for n in by_fp]
    assert len(by_path) == 3
