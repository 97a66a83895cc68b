"""One-pass batched reading: frames, Parquet and CSV agree; batching and reruns do not
change anything; memory-bounded state stays bounded."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from warmstart import fingerprint
from warmstart.fingerprint import CATALOGUE, profile_table
from warmstart.fingerprint.scan import SAMPLE_CAP

EXACT = [n for n, mf in CATALOGUE.items() if mf.basis == "exact"]


def _table(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    df = pd.DataFrame({
        "spend": np.exp(x),
        "basket": rng.poisson(3, n).astype(float),
        "channel": rng.choice(["web", "store", "phone", "app"], n),
        "member": rng.choice([True, False], n),
        "region_code": rng.choice([3, 14, 15, 92], n),
        "returned": (x + rng.normal(size=n) > 0.3).astype(np.int64),
    })
    df.loc[rng.random(n) < 0.05, "spend"] = np.nan
    df.loc[rng.random(n) < 0.05, "channel"] = None
    return df


def _same(a: dict, b: dict, names, rel: float = 0.0) -> None:
    for k in names:
        x, y = a[k], b[k]
        if math.isnan(x) or math.isnan(y):
            assert math.isnan(x) and math.isnan(y), k
        else:
            assert x == pytest.approx(y, rel=rel, abs=1e-12 if rel else 0.0), k


def test_small_frame_and_its_parquet_give_identical_fingerprints(tmp_path):
    df = _table(700)
    path = tmp_path / "t.parquet"
    df.to_parquet(path)
    a, b = fingerprint(df, target="returned"), fingerprint(path, target="returned")
    # below the sample cap the sample is the whole table, so every value agrees
    assert a.values["sample_rows"] == 700 < SAMPLE_CAP
    _same(a.values, b.values, CATALOGUE)
    assert a.dataset_hash == b.dataset_hash and a.warnings == b.warnings


def test_batching_changes_exact_values_only_by_rounding(tmp_path):
    df = _table(3000, seed=1)
    whole = fingerprint(df, target="returned", sample_cap=500)
    pieces = fingerprint(df, target="returned", sample_cap=500, batch_rows=128)
    _same(whole.values, pieces.values, EXACT, rel=1e-10)
    # the seeded sample does not depend on the batches either: sample-based values agree
    _same(whole.values, pieces.values, CATALOGUE, rel=1e-10)
    assert whole.dataset_hash == pieces.dataset_hash


def test_large_parquet_in_row_groups_matches_the_frame(tmp_path):
    df = _table(12_000, seed=2)
    path = tmp_path / "big.parquet"
    pq.write_table(pa.Table.from_pandas(df, preserve_index=False), path, row_group_size=1000)
    a = fingerprint(path, target="returned", sample_cap=800, batch_rows=3000)
    b = fingerprint(df, target="returned", sample_cap=800)
    assert a.values["sample_rows"] == 800 and a.values["rows"] == 12_000
    _same(a.values, b.values, EXACT, rel=1e-10)
    _same(a.values, b.values, CATALOGUE, rel=1e-10)  # same rows in the same order
    assert a.dataset_hash == b.dataset_hash


def test_exact_values_equal_full_data_formulas_beyond_the_cap():
    df = _table(6000, seed=3)
    fp = fingerprint(df, target="returned", sample_cap=300, batch_rows=1000)
    feats = df.drop(columns="returned")
    # reference: pandas isna on every row (not the 300-row sample)
    assert fp.values["missing_cell_fraction"] == pytest.approx(feats.isna().to_numpy().mean())
    assert fp.values["missing_row_fraction"] == pytest.approx(feats.isna().any(axis=1).mean())
    counts = df["returned"].value_counts()
    assert fp.values["minority_majority_ratio"] == pytest.approx(counts.min() / counts.max())
    from scipy import stats
    # reference: scipy.stats.skew (bias=True) over every row
    sk = [stats.skew(df[c].dropna()) for c in ("spend", "basket")]
    assert fp.values["numeric_skewness_max"] == pytest.approx(max(sk), rel=1e-9)
    assert fp.values["numeric_skewness_min"] == pytest.approx(min(sk), rel=1e-9)


def test_same_file_same_fingerprint_and_hash_tracks_content(tmp_path):
    df = _table(600, seed=4)
    path = tmp_path / "t.csv"
    df.to_csv(path, index=False)
    a = fingerprint(path, target="returned")
    b = fingerprint(path, target="returned")
    assert a.to_json() == b.to_json()
    changed = df.copy()
    changed.loc[17, "basket"] += 1
    assert fingerprint(changed, target="returned").dataset_hash != fingerprint(
        df, target="returned").dataset_hash
    # ints written as floats to Parquet are the same content
    pq_path = tmp_path / "f.parquet"
    df.astype({"basket": "float32"}).to_parquet(pq_path)
    assert fingerprint(pq_path, target="returned").dataset_hash == fingerprint(
        df, target="returned").dataset_hash


def test_sample_is_bounded_and_seeded():
    df = _table(9000, seed=5)
    p = profile_table(df, target="returned", sample_cap=400, batch_rows=512)
    assert p.sample_rows == 400 and p.numeric.shape[0] == 400
    assert p.missing_mask.shape == (400, 5)
    q = profile_table(df, target="returned", sample_cap=400, batch_rows=9000)
    assert np.array_equal(p.numeric, q.numeric, equal_nan=True)
    # the sample's class balance tracks the table's (reference: common practice)
    share = (df["returned"] == 1).mean()
    assert abs(np.mean(p.y == 1) - share) < 0.08


def test_sketched_values_beyond_the_caps_are_estimates():
    rng = np.random.default_rng(6)
    n = 20_000
    df = pd.DataFrame({"code": [f"c{v}" for v in rng.integers(0, 9000, n)],
                       "x": rng.normal(size=n), "y": rng.integers(0, 2, n)})
    fp = fingerprint(df, target="y", sample_cap=500)
    true_levels = df["code"].nunique()
    # reference: Beyer et al. 2007 -- k=4096 minimum values, ~1.6 % relative std
    assert abs(fp.values["categorical_levels_max"] / true_levels - 1) < 0.08
    assert 0 <= fp.values["duplicate_row_fraction"] < 0.05
