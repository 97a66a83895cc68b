"""Checking a large trials table with the estimator's own parameter validation.

Usage::

    nice -n 10 python benchmarks/trials_check_speed.py [--trials 100000] [--seed 0]

Builds a ``--trials``-row table of histogram gradient boosting trials, the way a long
random search writes it: three continuous parameters drawn afresh for every trial (so
almost every configuration is distinct), four discrete ones and scikit-learn defaults
outside the family's space (``l2_regularization=0.0``, ``early_stopping='auto'``).
Times ``check_trials`` on it as a DataFrame and read back from CSV, next to the baseline
of validating each distinct configuration through the estimator
(``est.set_params(**config)`` then ``est._validate_params()``, measured on a sample and
scaled up), and prints the ratio. scikit-learn's import (about 0.4 s, once per
process) is left out of every timing.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from warmstart.families import get_family
from warmstart.metrics import resolve_metric
from warmstart.spaces import config_key
from warmstart.trials import check_trials

FAMILY, TASK = "hist_gradient_boosting", "classification"


def make_table(n: int, seed: int) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame({
        "learning_rate": np.exp(rng.uniform(np.log(1e-3), np.log(2.0), n)),
        "l2_regularization": np.where(rng.random(n) < 0.2, 0.0, rng.exponential(1.0, n)),
        "max_features": rng.uniform(0.1, 1.0, n),
        "max_iter": rng.choice([50, 100, 200, 500, 2000], n),
        "max_leaf_nodes": rng.choice([7, 15, 31, 63, 127], n),
        "max_depth": np.array([3, 5, 8, None], dtype=object)[rng.integers(4, size=n)],
        "early_stopping": rng.choice(np.array(["auto", "True", "False"], dtype=object), n),
        "score": rng.uniform(0.5, 0.99, n),
        "fit_seconds": rng.exponential(2.0, n),
    })


def baseline_seconds(trials: list, sample: int = 5000) -> tuple[float, int]:
    """Per-distinct-configuration validation through the estimator, scaled to all."""
    fam = get_family(FAMILY)
    distinct = list({config_key(t.config): t.config for t in trials}.values())
    est = fam.make_estimator(TASK, {})
    part = distinct[:sample]
    t0 = time.perf_counter()
    for config in part:
        est.set_params(**config)
        est._validate_params()
    return (time.perf_counter() - t0) * len(distinct) / len(part), len(distinct)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args()
    fam, metric = get_family(FAMILY), resolve_metric("balanced_accuracy")
    df = make_table(args.trials, args.seed)
    check_trials(df.head(10), fam, TASK, metric)  # imports scikit-learn's estimator once
    t0 = time.perf_counter()
    trials = check_trials(df, fam, TASK, metric)
    frame_s = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "trials.csv"
        df.to_csv(path, index=False)
        t0 = time.perf_counter()
        from_csv = check_trials(path, fam, TASK, metric)
        csv_s = time.perf_counter() - t0
    assert len(trials) == len(from_csv) == args.trials
    base_s, n_distinct = baseline_seconds(trials)
    print(f"{args.trials} trials, {n_distinct} distinct configurations ({FAMILY}, {TASK})")
    print(f"{'what':<44} {'seconds':>8} {'ratio to baseline':>18}")
    print(f"{'baseline: _validate_params per distinct config':<44} {base_s:8.2f} {1.0:18.2f}")
    print(f"{'check_trials, DataFrame':<44} {frame_s:8.2f} {frame_s / base_s:18.2f}")
    print(f"{'check_trials, CSV file (read + check)':<44} {csv_s:8.2f} {csv_s / base_s:18.2f}")


if __name__ == "__main__":
    main()
