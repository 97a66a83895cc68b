"""Fingerprint of a partitioned table: one process against a dask LocalCluster.

Usage::

    nice -n 10 python benchmarks/cluster_fingerprint.py [--rows 20000000] [--files 20]
        [--workers 2] [--dir /tmp/warmstart-bench-partitioned]

1. Writes (once; reused while its row count matches) a hive-partitioned directory
   ``region=<r>/part-<i>.parquet`` of ROWS rows in FILES files: 4 numeric columns
   (normal, log-normal, counts, heavy-tailed), 3 text categories (5, 40 and 400 levels),
   a boolean, a binary target; about 5 % of feature cells missing. Row groups of 250,000
   rows, so each file of 1M rows is one part (one task).
2. Times the fingerprint in this process (the baseline), then on the LocalCluster of
   WORKERS single-threaded worker processes that ``cluster="local:N"`` starts: start-up,
   a first run (workers import warmstart) and a second run; prints the ratio
   baseline / cluster and checks that the JSON is identical.
3. Measures what one task ships: the pickled accumulator of one part (with the
   sample threshold, as on the cluster) and the first round's result; and the client's
   cost of merging one accumulator -- the numbers in benchmarks/SCALING.md.
"""

from __future__ import annotations

import argparse
import json
import os
import pickle
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

ROW_GROUP = 250_000
REGIONS = ("east", "north", "south", "west")
TARGET = "returned"


def write_directory(root: Path, rows: int, files: int, seed: int = 0) -> None:
    """The synthetic partitioned table, written in row groups (little memory)."""
    rng = np.random.default_rng(seed)
    per_file = -(-rows // files)
    done = 0
    for i in range(files):
        d = root / f"region={REGIONS[i % len(REGIONS)]}"
        d.mkdir(parents=True, exist_ok=True)
        n_file = min(per_file, rows - done)
        with pq.ParquetWriter(d / f"part-{i:03d}.parquet", _schema()) as w:
            left = n_file
            while left > 0:
                n = min(ROW_GROUP, left)
                w.write_table(_chunk(rng, n), row_group_size=ROW_GROUP)
                left -= n
        done += n_file
    (root / "_ROWS").write_text(str(rows))


def _schema() -> pa.Schema:
    return pa.schema([("amount", pa.float64()), ("lead_days", pa.float64()),
                      ("items", pa.int64()), ("noise", pa.float64()),
                      ("channel", pa.string()), ("category", pa.string()),
                      ("store", pa.string()), ("member", pa.bool_()), (TARGET, pa.int64())])


def _chunk(rng: np.random.Generator, n: int) -> pa.Table:
    base = rng.normal(size=n)
    num = {"amount": rng.normal(size=n) + 0.5 * base, "lead_days": rng.lognormal(size=n),
           "noise": rng.standard_t(3, size=n)}
    cols = {}
    for k, v in num.items():
        v[rng.random(n) < 0.05] = np.nan
        cols[k] = pa.array(v, from_pandas=True)
    items = rng.poisson(3, size=n)
    cols["items"] = pa.array(items, mask=rng.random(n) < 0.05)
    for name, k in (("channel", 5), ("category", 40), ("store", 400)):
        levels = np.array([f"{name}_{j}" for j in range(k)], dtype=object)
        cols[name] = pa.array(levels[rng.integers(0, k, size=n)],
                              mask=rng.random(n) < 0.05, type=pa.string())
    cols["member"] = pa.array(rng.random(n) < 0.3, mask=rng.random(n) < 0.05)
    cols[TARGET] = pa.array((base + rng.normal(size=n) > 0.8).astype(np.int64))
    return pa.table(cols, schema=_schema())


def timed(func):
    t0 = time.perf_counter()
    out = func()
    return out, time.perf_counter() - t0


def task_sizes(root: Path) -> dict:
    """Pickled size of one part's accumulator and of a first-round result; merge time."""
    from warmstart.fingerprint.scan import SAMPLE_CAP, SEED, Layout, scan_part
    from warmstart.fingerprint.sketches import BottomKSample
    from warmstart.io import open_directory

    d, footers = timed(lambda: open_directory(root))
    layout = Layout.of(d.schema, TARGET)
    first = BottomKSample(SAMPLE_CAP, SEED).smallest(0, d.n_rows)
    bound = BottomKSample.bound_of([first], SAMPLE_CAP)
    accs = [scan_part(d.schema, p, layout, SAMPLE_CAP, 65536, bound) for p in d.parts[:3]]
    sizes = [len(pickle.dumps(a, protocol=5)) for a in accs]
    a = accs[1] if len(accs) > 1 else accs[0]
    parts_of = {"sample": a.sample, "distinct_sketches": [a.distinct, a.row_distinct],
                "level_counts": [a.levels, a.patterns]}
    breakdown = {k: len(pickle.dumps(v, protocol=5)) for k, v in parts_of.items()}
    t0 = time.perf_counter()
    for a in accs[1:]:
        accs[0].merge(a)
    merge = (time.perf_counter() - t0) / max(1, len(accs) - 1)
    return {"parts": len(d.parts), "footer_seconds": footers,
            "accumulator_bytes": max(sizes), "breakdown_bytes": breakdown,
            "sample_rows_in_a_part": int(a.sample.index.size),
            "first_round_bytes": len(pickle.dumps(first, protocol=5)),
            "merge_seconds": merge}


def main(argv: list[str] | None = None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=20_000_000)
    ap.add_argument("--files", type=int, default=20)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--dir", default="/tmp/warmstart-bench-partitioned")
    args = ap.parse_args(argv)
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from warmstart import fingerprint
    from warmstart.cluster import connect

    root = Path(args.dir)
    marker = root / "_ROWS"
    if not (marker.exists() and marker.read_text() == str(args.rows)):
        import shutil

        shutil.rmtree(root, ignore_errors=True)
        _, t = timed(lambda: write_directory(root, args.rows, args.files))
        print(f"wrote {args.rows:,} rows in {args.files} files under {root} in {t:.1f} s")
    print(f"machine: {os.cpu_count()} cores")

    print(f"load average before: {os.getloadavg()[0]:.1f} (other work shares the cores)")
    cpu0 = _cpu()
    alone, t_alone = timed(lambda: fingerprint(root, target=TARGET))
    print(f"one process:          {t_alone:8.2f} s  (CPU {_cpu() - cpu0:.1f} s: Arrow "
          "decodes on its own threads)")
    t0 = time.perf_counter()
    with connect(f"local:{args.workers}") as client:  # what --cluster local:N starts
        t_start = time.perf_counter() - t0
        print(f"cluster start-up:     {t_start:8.2f} s  ({args.workers} worker processes)")
        first, t_first = timed(lambda: fingerprint(root, target=TARGET, cluster=client))
        print(f"cluster, first run:   {t_first:8.2f} s  (workers import warmstart)")
        before = _cpu() + sum(client.run(_cpu).values())
        second, t_second = timed(lambda: fingerprint(root, target=TARGET, cluster=client))
        spent = _cpu() + sum(client.run(_cpu).values()) - before
        print(f"cluster, second run:  {t_second:8.2f} s  (CPU {spent:.1f} s, client and "
              "workers)")
    same = first.to_json() == alone.to_json() == second.to_json()
    print(f"ratio one process / cluster (second run): {t_alone / t_second:.2f}  "
          f"(first run: {t_alone / t_first:.2f}); identical JSON: {same}")
    sizes = task_sizes(root)
    print("per task: " + json.dumps(sizes))
    if not same:
        raise SystemExit("the cluster's fingerprint differs from the single-process one")


def _cpu() -> float:
    """CPU seconds (user + system) of this process so far."""
    t = os.times()
    return t.user + t.system


if __name__ == "__main__":
    main()
