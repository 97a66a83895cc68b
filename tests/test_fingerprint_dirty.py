"""Dirty columns are detected, handled and reported; the fingerprint still computes."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from cli.main import main
from warmstart import BadInputError, fingerprint
from warmstart.fingerprint import profile_table
from warmstart.fingerprint.profile import column_roles

N = 200


def _base(seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=N)
    return pd.DataFrame({"spend": 40 + 10 * x, "visits": rng.integers(0, 9, N),
                         "region": rng.choice(["north", "south", "east"], N),
                         "churned": (x + rng.normal(size=N) > 0).astype(int)})


def _warning(fp, text: str) -> str:
    hits = [w for w in fp.warnings if text in w]
    assert hits, f"no warning containing {text!r} in {fp.warnings}"
    return hits[0]


def _all_finite_or_nan(fp) -> bool:
    return all(isinstance(v, float) and (math.isfinite(v) or math.isnan(v))
               for v in fp.values.values())


@pytest.mark.parametrize("column, values, text, role", [
    ("customer_id", np.arange(5000, 5000 + N), "identifier", "identifier"),
    ("order_ref", [f"ord-{i:04d}" for i in range(N)], "identifier", "identifier"),
    ("shuffled_id", np.random.default_rng(1).permutation(N) * 7 + 3, "identifier",
     "identifier"),
    ("always_seven", np.full(N, 7.0), "constant", "constant"),
    ("always_text", ["same"] * N, "constant", "constant"),
    ("nothing", np.full(N, np.nan), "all-missing", "empty"),
    ("nothing_text", pd.Series([None] * N, dtype=object), "all-missing", "empty"),
])
def test_dropped_columns_are_reported(column, values, text, role):
    df = _base()
    df[column] = values
    fp = fingerprint(df, target="churned")
    assert column in _warning(fp, text)
    assert column_roles(df, "churned")[column] == role
    assert fp.values["dropped_column_fraction"] == pytest.approx(1 / 4)
    assert fp.values["columns"] == 4 and _all_finite_or_nan(fp)


def test_large_integers_that_are_not_ids_stay_numeric():
    df = _base()
    # all distinct whole numbers, but spread far wider than the row count: a measurement
    df["income"] = np.random.default_rng(2).choice(10**6, size=N, replace=False)
    fp = fingerprint(df, target="churned")
    assert not any("income" in w for w in fp.warnings)
    assert fp.values["numeric_column_fraction"] == pytest.approx(3 / 4)


def test_infinite_values_are_missing():
    df = _base()
    df.loc[[3, 9], "spend"] = [np.inf, -np.inf]
    fp = fingerprint(df, target="churned")
    assert "spend (2)" in _warning(fp, "infinite")
    p = profile_table(df, target="churned")
    clean = df["spend"].replace([np.inf, -np.inf], np.nan).dropna()
    from scipy import stats
    # reference: scipy.stats.skew on the finite values (infinities treated as missing)
    assert fp.values["numeric_skewness_max"] >= stats.skew(clean) - 1e-9
    assert p.missing_by_column[0] == 2
    assert fp.values["missing_cell_fraction"] == pytest.approx(2 / (N * 3))


def test_mixed_types_are_categorical():
    df = _base()
    df["mixed"] = [1 if i % 3 else "unknown" for i in range(N)]
    fp = fingerprint(df, target="churned")
    assert "mixed" in _warning(fp, "mixed types")
    assert fp.values["categorical_column_fraction"] == pytest.approx(2 / 4)


def test_numbers_stored_as_text_are_parsed():
    df = _base()
    df["price"] = [f"{v:.2f}" if i % 40 else "?" for i, v in enumerate(df["spend"])]
    fp = fingerprint(df, target="churned")
    assert "price (5)" in _warning(fp, "numbers stored as text")
    assert fp.values["numeric_column_fraction"] == pytest.approx(3 / 4)
    assert column_roles(df, "churned")["price"] == "numeric_text"
    # codes stored as text on purpose (every value numeric, with leading zeros) stay text
    df = _base()
    df["zip"] = [f"{v:05d}" for v in np.random.default_rng(3).integers(0, 40, N)]
    assert fingerprint(df, target="churned").values["categorical_column_fraction"] == 0.5
    assert column_roles(df, "churned")["zip"] == "categorical"


def test_dates_are_counted_not_used():
    df = _base()
    df["signup"] = pd.date_range("2024-01-01", periods=N, freq="D").strftime("%Y-%m-%d")
    df["seen_at"] = pd.date_range("2024-01-01", periods=N, freq="h")
    fp = fingerprint(df, target="churned")
    w = _warning(fp, "date/time")
    assert "signup" in w and "seen_at" in w
    assert fp.values["datetime_column_fraction"] == pytest.approx(2 / 5)
    roles = column_roles(df, "churned")
    assert roles["signup"] == roles["seen_at"] == "date"


def test_booleans_of_every_spelling():
    df = _base()
    rng = np.random.default_rng(4)
    df["member"] = rng.choice(["Yes", "No"], N)
    df["opted_in"] = rng.choice([True, False], N)
    df["has_card"] = rng.integers(0, 2, N)
    fp = fingerprint(df, target="churned")
    assert fp.values["boolean_column_fraction"] == pytest.approx(3 / 6)
    roles = column_roles(df, "churned")
    assert [roles[c] for c in ("member", "opted_in", "has_card")] == ["boolean"] * 3


def test_high_cardinality_strings():
    df = _base()
    df["postcode"] = [f"P{v}" for v in np.random.default_rng(5).integers(0, 150, N)]
    fp = fingerprint(df, target="churned")
    assert "postcode" in _warning(fp, "high-cardinality")
    assert fp.values["high_cardinality_fraction"] == pytest.approx(1 / 2)
    assert math.isfinite(fp.values["landmark_linear"])


def test_integer_codes_need_name_evidence():
    df = _base()
    df["store_code"] = np.random.default_rng(6).choice([11, 27, 35, 48, 90], N)
    df["rating"] = np.random.default_rng(7).integers(1, 6, N)
    fp = fingerprint(df, target="churned")
    assert "store_code" in _warning(fp, "integer codes")
    assert not any("rating" in w for w in fp.warnings)
    assert fp.values["categorical_column_fraction"] == pytest.approx(2 / 5)


def test_missing_target_rows_are_counted_and_bad_targets_rejected():
    df = _base()
    df.loc[:9, "churned"] = np.nan
    fp = fingerprint(df, target="churned", task="classification")
    assert fp.values["target_missing_fraction"] == pytest.approx(10 / N)
    _warning(fp, "missing target")
    with pytest.raises(BadInputError, match="constant"):
        fingerprint(df.assign(churned=1), target="churned")
    with pytest.raises(BadInputError, match="not found"):
        fingerprint(df, target="nope")
    with pytest.raises(BadInputError, match="not numeric"):
        fingerprint(df, target="region", task="regression")


def test_everything_dirty_at_once_through_parquet(tmp_path):
    df = _base()
    df["customer_id"] = np.arange(N)
    df["nothing"] = np.nan
    df["always"] = "x"
    df["when"] = pd.date_range("2023-05-01", periods=N, freq="D")
    df.loc[0, "spend"] = np.inf
    path = tmp_path / "dirty.parquet"
    df.to_parquet(path)
    fp = fingerprint(path, target="churned")
    assert len(fp.warnings) >= 5 and _all_finite_or_nan(fp)
    # the frame's roles are the roles the profile of its Parquet file used
    p, roles = profile_table(path, target="churned"), column_roles(df, "churned")
    assert p.numeric_names == [c for c, r in roles.items() if r in ("numeric", "boolean")]
    assert p.categorical_names == [c for c, r in roles.items() if r == "categorical"]


# -- through the command line: exit 0, warnings on stderr and in the JSON -------------
@pytest.fixture
def dirty_csv(tmp_path):
    df = _base()
    df["customer_id"] = np.arange(1, N + 1)
    df["blank"] = np.nan
    df["mixed"] = [1 if i % 2 else "n/a?" for i in range(N)]
    df["signup"] = pd.date_range("2024-01-01", periods=N, freq="D").strftime("%Y-%m-%d")
    df.loc[5, "spend"] = np.inf
    path = tmp_path / "dirty.csv"
    df.to_csv(path, index=False)
    return path


def test_cli_fingerprint_warns_on_stderr_and_exits_0(dirty_csv):
    res = CliRunner().invoke(main, ["fingerprint", str(dirty_csv), "--target", "churned"])
    assert res.exit_code == 0, res.output
    for text in ("identifier", "customer_id", "all-missing", "blank", "mixed types",
                 "date/time", "signup", "infinite"):
        assert text in res.stderr
    assert "landmark_linear" in res.stdout and "warning" not in res.stdout


def test_cli_fingerprint_json_carries_warnings(dirty_csv):
    res = CliRunner().invoke(main, ["fingerprint", str(dirty_csv), "-t", "churned", "--json"])
    assert res.exit_code == 0
    out = json.loads(res.stdout)
    assert any("customer_id" in w for w in out["warnings"])
    assert out["meta_features"]["sample_rows"] == N


def test_cli_bad_target_is_one_line_exit_2(dirty_csv):
    res = CliRunner().invoke(main, ["fingerprint", str(dirty_csv), "--target", "nope"])
    assert res.exit_code == 2
    assert res.stderr.startswith("error: target column 'nope' not found")
    assert len(res.stderr.strip().splitlines()) == 1
