"""A tuning study with its cross-validation fits on a dask LocalCluster, against one process.

Usage::

    nice -n 10 python benchmarks/cluster_tune.py [--rows 5000] [--budget 4] [--cv 5]
        [--family random_forest] [--workers 2]

Builds a seeded synthetic classification table (``sklearn.datasets.make_classification``,
ROWS rows, 20 features), then runs the same study (random search, seed 0, not logged)
three times: in this process with ``jobs=1`` (the baseline), with ``jobs=2`` (joblib
processes), and on the LocalCluster of WORKERS single-threaded workers that
``cluster="local:N"`` starts (its start-up timed apart). Prints wall times side by side,
the ratios baseline / run, and checks that the trials' scores are identical.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import pandas as pd
from sklearn.datasets import make_classification

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from warmstart.cluster import connect  # noqa: E402
from warmstart.tune import tune  # noqa: E402


def table(rows: int) -> pd.DataFrame:
    X, y = make_classification(n_samples=rows, n_features=20, n_informative=8,
                               random_state=0)
    df = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    df["y"] = y
    return df


def timed(label: str, **kw) -> tuple[float, list]:
    t0 = time.perf_counter()
    res = tune(refit=False, **kw)  # the timings are of the trials, as before refit existed
    wall = time.perf_counter() - t0
    print(f"{label:<34} {wall:8.1f} s  ({res.n_ok}/{len(res.trials)} trials ok)", flush=True)
    return wall, [(t.config, t.fold_scores) for t in res.trials]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=5_000)
    ap.add_argument("--budget", type=int, default=4)
    ap.add_argument("--cv", type=int, default=5)
    ap.add_argument("--family", default="random_forest")
    ap.add_argument("--workers", type=int, default=2)
    args = ap.parse_args(argv)
    df = table(args.rows)
    kw = dict(data=df, target="y", family=args.family, budget=args.budget, cv=args.cv,
              seed=0, search="random", log=False)
    print(f"{args.family}: {args.budget} trials x {args.cv} folds on {args.rows} rows x 20")
    base, scores = timed("one process, jobs=1 (baseline)", jobs=1, **kw)
    two, scores_two = timed("one process, jobs=2", jobs=2, **kw)
    t0 = time.perf_counter()
    with connect(f"local:{args.workers}") as client:
        print(f"{'LocalCluster start-up':<34} {time.perf_counter() - t0:8.1f} s")
        spread, scores_spread = timed(f"cluster local:{args.workers}", cluster=client, **kw)
    print(f"ratio baseline / jobs=2:     {base / two:5.2f}")
    print(f"ratio baseline / cluster:    {base / spread:5.2f}")
    same = scores == scores_two == scores_spread
    print(f"trials and fold scores identical in all three runs: {same}")
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
