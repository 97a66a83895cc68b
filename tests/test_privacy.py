"""The history keeps aggregate statistics only: no cell of the logged data is stored.

Marker values are planted where a careless summary would copy them (the most frequent
label of a column, the maximum of a column, a lone outlier), the dataset is logged, and
every file of the history is searched: raw bytes, and every decoded cell of every table
(Parquet pages are compressed, so raw bytes alone would miss them).
"""

from __future__ import annotations

import json
import math
import struct
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
from click.testing import CliRunner

from cli.main import main
from warmstart.history import KnowledgeBase

TEXT_MARKER = "ZQXMARKER77"
NUM_MARKER = 918273.645
WAREHOUSE_MARKER = "QQVWAREHOUSE31"  # a second label, present in a single row


def dataset(n: int = 300) -> pd.DataFrame:
    rng = np.random.default_rng(11)
    spend = rng.gamma(2.0, 40.0, n)
    spend[17] = NUM_MARKER  # the column's maximum, an extreme outlier
    region = rng.choice(["north", "south", "east"], n).astype(object)
    region[: n // 2] = TEXT_MARKER  # the most frequent level
    depot = rng.choice([f"d{i}" for i in range(8)], n).astype(object)
    depot[5] = WAREHOUSE_MARKER
    return pd.DataFrame({"spend": spend, "region": region, "depot": depot,
                         "visits": rng.poisson(4, n), "churned": rng.integers(0, 2, n)})


def number_forms(x: float) -> list[bytes]:
    return [repr(x).encode(), f"{x:.6g}".encode(), f"{x:g}".encode(),
            struct.pack("<d", x), struct.pack("<f", x)]


def test_logged_history_holds_no_planted_value(tmp_path: Path):
    kb = KnowledgeBase.init(tmp_path / "kb")
    data = tmp_path / "quillmarsh_customers.csv"
    dataset().to_csv(data, index=False)
    trials = tmp_path / "trials.csv"
    trials.write_text("n_estimators,max_depth,score\n100,4,0.61\n300,,0.64\n")
    r = CliRunner().invoke(main, ["log", str(data), "-t", "churned", "-f", "random_forest",
                                  "--trials", str(trials), "--kb", str(kb.path)])
    assert r.exit_code == 0, r.output
    files = [p for p in kb.path.rglob("*") if p.is_file()]
    assert len(files) == 4  # marker + one file per table

    # 1. raw bytes of every file
    for p in files:
        raw = p.read_bytes()
        for needle in [TEXT_MARKER.encode(), WAREHOUSE_MARKER.encode(),
                       *number_forms(NUM_MARKER)]:
            assert needle not in raw, (p, needle)

    # 2. every decoded cell of every table, and every value inside its JSON cells
    n_cells = 0
    for p in (f for f in files if f.suffix == ".parquet"):
        for row in pq.read_table(p).to_pylist():
            for value in row.values():
                n_cells += 1
                for leaf in _leaves(value):
                    if isinstance(leaf, str):
                        assert TEXT_MARKER not in leaf and WAREHOUSE_MARKER not in leaf
                        assert "918273" not in leaf
                    elif isinstance(leaf, float) and math.isfinite(leaf):
                        assert not math.isclose(leaf, NUM_MARKER, rel_tol=1e-6), (p, row)
    assert n_cells > 20

    # 3. the same through the library's reader
    for frame in kb.tables().values():
        text = frame.astype(str).to_csv()
        assert TEXT_MARKER not in text and "918273" not in text


def _leaves(value):
    """A cell and, when it holds JSON, every scalar inside it."""
    yield value
    if isinstance(value, str) and value[:1] in "{[":
        try:
            stack = [json.loads(value)]
        except ValueError:
            return
        while stack:
            v = stack.pop()
            if isinstance(v, dict):
                stack.extend(v.keys())
                stack.extend(v.values())
            elif isinstance(v, list):
                stack.extend(v)
            else:
                yield v


def test_nothing_is_loaded_with_pickle():
    # Tables are Parquet and configurations JSON; no code path unpickles anything.
    root = Path(__file__).resolve().parents[1]
    for p in [*(root / "warmstart").rglob("*.py"), *(root / "cli").rglob("*.py")]:
        src = p.read_text(encoding="utf-8")
        for needle in ("import pickle", "read_pickle", "pickle.load", "joblib.load",
                       "allow_pickle=True", "import dill", "cloudpickle"):
            assert needle not in src, (p, needle)
