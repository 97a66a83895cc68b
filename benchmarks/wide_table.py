"""Fingerprint of a wide table: many columns, few rows.

Usage::

    nice -n 10 python benchmarks/wide_table.py [--columns 10000] [--rows 1000]

Writes a ROWS x COLUMNS Parquet file (numeric columns of several shapes, one in ten
categorical, a binary target), then fingerprints it in a fresh subprocess and prints its
wall time and peak resident memory (ru_maxrss) beside the targets (<= 20 s, < 1 GB for
10,000 x 1,000) and beside a pandas baseline on the same file (``read_parquet``,
``describe``, ``corr`` of the first 500 numeric columns). Then checks that a table
wider than ``MAX_COLUMNS`` is refused with exit 2 and one line, before the scan.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq


def write_wide(path: str, rows: int, columns: int, seed: int = 0) -> None:
    """A ROWS x COLUMNS table: 90 % numeric columns, 10 % categorical, a binary target."""
    rng = np.random.default_rng(seed)
    base = rng.normal(size=rows)
    cols = {}
    for j in range(columns):
        if j % 10 == 9:
            levels = np.array([f"level_{k}" for k in range(2 + j % 7)], dtype=object)
            cols[f"c{j:06d}"] = pa.array(levels[rng.integers(0, levels.size, rows)])
        elif j % 3 == 0:
            cols[f"c{j:06d}"] = pa.array(rng.normal(size=rows) + 0.3 * base)
        elif j % 3 == 1:
            cols[f"c{j:06d}"] = pa.array(rng.integers(0, 20, rows).astype(float))
        else:
            cols[f"c{j:06d}"] = pa.array(rng.lognormal(size=rows))
    cols["target"] = pa.array((base + rng.normal(size=rows) > 0).astype(np.int64))
    pq.write_table(pa.table(cols), path)


def run_measured(code: str) -> tuple[float, float, int, str]:
    """(wall seconds, peak MB, exit code, stderr) of a fresh Python process running code.

    The peak is the child's own ``ru_maxrss`` from ``os.wait4`` (this parent is small, so
    what the child inherits at fork is negligible)."""
    t = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, text=True)
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.returncode = os.waitstatus_to_exitcode(status)
    wall = time.perf_counter() - t
    return wall, usage.ru_maxrss / 1024, proc.returncode, err.strip()


def pandas_baseline(path: str) -> str:
    return (f"import pandas as pd\ndf = pd.read_parquet({path!r})\n"
            "df.describe(include='all')\n"
            "df.select_dtypes('number').iloc[:, :500].corr()")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--columns", type=int, default=10_000)
    ap.add_argument("--rows", type=int, default=1_000)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "wide.parquet")
        write_wide(path, args.rows, args.columns)
        print(f"wrote {args.rows:,} rows x {args.columns:,} columns "
              f"({os.path.getsize(path) / 2**20:.0f} MB)")
        base = run_measured(pandas_baseline(path))
        fp = run_measured("import warmstart\n"
                          f"warmstart.fingerprint({path!r}, target='target')")
        if fp[2] != 0:
            print(f"fingerprint failed (exit {fp[2]}): {fp[3][-500:]}")
        print(f"{'':<34}{'wall s':>8}{'peak MB':>9}")
        print(f"{'pandas baseline':<34}{base[0]:>8.1f}{base[1]:>9.0f}")
        print(f"{'fingerprint':<34}{fp[0]:>8.1f}{fp[1]:>9.0f}   "
              f"ratio {fp[0] / base[0]:.2f}; target <= 20 s, < 1024 MB")
        from warmstart.fingerprint.scan import MAX_COLUMNS

        too_wide = os.path.join(tmp, "too_wide.parquet")
        pq.write_table(pa.table({f"c{j}": pa.array(np.zeros(3)) for j in
                                 range(MAX_COLUMNS + 1)} | {"target": pa.array([0, 1, 0])}),
                       too_wide)
        r = run_measured("import sys\nfrom cli.main import main\nsys.argv = ['warmstart', "
                         f"'fingerprint', {too_wide!r}, '-t', 'target']\nmain()")
        print(f"{MAX_COLUMNS + 2:,} columns: exit {r[2]} in {r[0]:.1f} s, peak {r[1]:.0f} MB: "
              f"{r[3]}")


if __name__ == "__main__":
    main()
