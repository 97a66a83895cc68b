"""History under load: concurrent writers, and ``suggest`` on a large history.

Usage::

    nice -n 10 python benchmarks/history_load.py [--per-writer 40] [--datasets 10000]
                                                  [--trials 1000000] [--queries 20]
                                                  [--only writers|suggest]

1. Writers. A fresh history on local disk; 1, 4 and 8 writer processes (forked after
   one import, so start-up is not measured) each log ``--per-writer`` small studies at
   the same time through the Python API with a precomputed fingerprint. Prints studies
   per second for each, and the ratio to one writer.
2. Suggest. Generates a compacted history directly (one Parquet file per table, the
   real schemas): ``--datasets`` datasets with random meta-feature values over the whole
   catalogue, one study each spread over the six families and both tasks, and
   ``--trials`` trials in total with configurations sampled from each family's space.
   Then times ``suggest`` (``--queries`` different query fingerprints) and prints p50
   and p99, cold (no prediction cache: every surrogate fitted) and warm (the same query
   again: predictions read from ``<history>/.cache``), next to the baseline read path
   (every row of every table, no Parquet filters), with the ratios. Targets: p99
   <= 0.2 s warm, <= 1 s cold.
3. One big study. A history holding one study of ``--big-study`` trials; ``suggest``
   cold and warm (target <= 2 s), next to reading its tables.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pyarrow as pa

from warmstart.families import FAMILIES
from warmstart.fingerprint import CATALOGUE, CATALOGUE_VERSION, Fingerprint
from warmstart.history import SCHEMAS, KnowledgeBase
from warmstart.maintenance import family_order
from warmstart.prediction_cache import CACHE_DIR
from warmstart.spaces import config_key
from warmstart.storage import ROW_GROUP_ROWS, batch_name, write_atomic

TASKS = ("classification", "regression")
METRIC = {"classification": "balanced_accuracy", "regression": "r2"}


def random_fingerprint(rng: np.random.Generator, task: str) -> Fingerprint:
    values = {n: float(rng.lognormal(2.0, 1.5)) if mf.count_like else float(rng.normal())
              for n, mf in CATALOGUE.items()}
    values["rows"] = float(rng.integers(100, 100_000))
    return Fingerprint(values, CATALOGUE_VERSION, task, "target",
                       "".join(rng.choice(list("0123456789abcdef"), 64)), [])


# -- 1. writers -------------------------------------------------------------------------
def writers(n_proc: int, per_writer: int, fp: Fingerprint, root: Path) -> float:
    kb = KnowledgeBase.init(root / f"w{n_proc}")
    trials = [{"n_estimators": 10 + j, "max_depth": 3, "score": 0.5 + 0.01 * j}
              for j in range(5)]
    t0 = time.perf_counter()
    pids = []
    for p in range(n_proc):
        pid = os.fork()
        if pid == 0:
            code = 1
            try:
                for i in range(per_writer):
                    kb.log(fingerprint_of=fp, family="random_forest", trials=trials,
                           name=f"w{p}-{i}")
                code = 0
            finally:
                os._exit(code)
        pids.append(pid)
    if any(os.waitpid(pid, 0)[1] for pid in pids):
        raise SystemExit("a writer failed")
    wall = time.perf_counter() - t0
    got = len(kb.tables()["studies"])
    assert got == n_proc * per_writer, got
    return n_proc * per_writer / wall


# -- 2. a large compacted history -----------------------------------------------------
def generate(root: Path, n_datasets: int, n_trials: int, seed: int = 0,
             name: str = "large") -> KnowledgeBase:
    rng = np.random.default_rng(seed)
    kb = KnowledgeBase.init(root / name)
    now = datetime.now(timezone.utc)
    fams = sorted(FAMILIES)
    per = n_trials // n_datasets
    pools = {}  # a pool of sampled configurations per (family, task)
    for f in fams:
        for task in TASKS:
            space = FAMILIES[f].space(task)
            pools[f, task] = [config_key(space.sample(rng)) for _ in range(2000)]
    ds_rows, st_rows = [], []
    t_study, t_index, t_config, t_score, t_fit = [], [], [], [], []
    for d in range(n_datasets):
        task = TASKS[d % 2]
        fp = random_fingerprint(rng, task)
        did = f"{d:016x}"
        sid = f"{d:032x}"
        fam = fams[(d // 2) % len(fams)]
        ds_rows.append({"dataset_id": did, "name": f"quillmarsh-table-{d}", "task": task,
                        "target": "target", "catalogue_version": CATALOGUE_VERSION,
                        "meta_features": json.dumps(fp.to_dict()["meta_features"]),
                        "warnings": "[]", "created_at": now})
        st_rows.append({"study_id": sid, "dataset_id": did, "family": fam, "task": task,
                        "metric": METRIC[task], "better": "higher", "label": f"s{d}",
                        "trial_count": per, "source": "log", "tool_version": "bench",
                        "created_at": now})
        pool = pools[fam, task]
        t_study.append(np.full(per, sid, dtype=object))
        t_index.append(np.arange(per, dtype=np.int32))
        t_config.append(np.asarray(pool, dtype=object)[rng.integers(0, len(pool), per)])
        t_score.append(rng.uniform(0.3, 0.95, per))
        t_fit.append(rng.lognormal(0.0, 1.0, per))
    n = per * n_datasets
    trials = pa.table({
        "study_id": pa.array(np.concatenate(t_study), pa.string()),
        "trial_index": pa.array(np.concatenate(t_index), pa.int32()),
        "config": pa.array(np.concatenate(t_config), pa.string()),
        "score": pa.array(np.concatenate(t_score)),
        "fit_seconds": pa.array(np.concatenate(t_fit)),
        "status": pa.array(np.full(n, "ok", dtype=object), pa.string()),
        "error": pa.nulls(n, pa.string()),
    }, schema=SCHEMAS["trials"])
    write_atomic(pa.Table.from_pylist(ds_rows, schema=SCHEMAS["datasets"]),
                 kb.path / "datasets", batch_name("merged"))
    studies = pa.Table.from_pylist(st_rows, schema=SCHEMAS["studies"])
    # the layout compaction writes: trials grouped by family, small row groups
    write_atomic(family_order(trials, studies), kb.path / "trials", batch_name("merged"),
                 ROW_GROUP_ROWS)
    write_atomic(studies, kb.path / "studies", batch_name("merged"))
    return kb


def timed_suggest(kb: KnowledgeBase, query: Fingerprint, family: str) -> float:
    t = time.perf_counter()
    out = kb.suggest(fingerprint_of=query, family=family, k=10)
    elapsed = time.perf_counter() - t
    assert len(out) == 10
    return elapsed


def run_big_study(n_trials: int, rng: np.random.Generator, root: Path) -> None:
    """Part 3: suggest from a history whose only study holds ``n_trials`` trials."""
    kb = generate(root, 1, n_trials, seed=2, name="big")
    family = sorted(FAMILIES)[0]  # the family generate gives dataset 0 (classification)
    query = random_fingerprint(rng, TASKS[0])
    cold = timed_suggest(kb, query, family)
    warm = timed_suggest(kb, query, family)
    t = time.perf_counter()
    kb.tables()
    read = time.perf_counter() - t
    print(f"\n3. one study of {n_trials:,} trials ({family})")
    print(f"   suggest cold {cold:6.3f} s   warm {warm:6.3f} s   (target <= 2 s)")
    print(f"   baseline: read all rows {read:6.3f} s   (cold / baseline {cold / read:.2f})")


def percentiles(times: list[float]) -> tuple[float, float]:
    return float(np.percentile(times, 50)), float(np.percentile(times, 99))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--per-writer", type=int, default=40)
    ap.add_argument("--datasets", type=int, default=10_000)
    ap.add_argument("--trials", type=int, default=1_000_000)
    ap.add_argument("--queries", type=int, default=20)
    ap.add_argument("--big-study", type=int, default=100_000)
    ap.add_argument("--only", choices=("writers", "suggest"),
                    help="run one part (both by default)")
    args = ap.parse_args()
    rng = np.random.default_rng(1)
    with tempfile.TemporaryDirectory(dir=os.environ.get("TMPDIR", "/tmp")) as tmp:
        root = Path(tmp)
        fp = random_fingerprint(rng, "classification")  # drawn always: same queries
        if args.only != "suggest":
            run_writers(args.per_writer, fp, root)
        if args.only != "writers":
            run_suggest(args, rng, root)
            run_big_study(args.big_study, rng, root)


def run_writers(per_writer: int, fp: Fingerprint, root: Path) -> None:
    print(f"1. concurrent writers ({per_writer} studies each, local disk, fsync on)")
    base = None
    for n in (1, 4, 8):
        rate = writers(n, per_writer, fp, root)
        base = base or rate
        print(f"   {n} writer(s): {rate:7.1f} studies/s   ratio to 1 writer {rate / base:.2f}")


def run_suggest(args: argparse.Namespace, rng: np.random.Generator, root: Path) -> None:
    t0 = time.perf_counter()
    kb = generate(root, args.datasets, args.trials)
    size = sum(f.stat().st_size for f in kb.path.rglob("*.parquet"))
    print(f"\n2. suggest on {args.datasets} datasets / {args.trials} trials "
          f"(generated in {time.perf_counter() - t0:.1f} s, {size / 2**20:.1f} MiB)")
    cold, warm, full = [], [], []
    for q in range(args.queries):
        task = TASKS[q % 2]
        query = random_fingerprint(rng, task)
        family = sorted(FAMILIES)[q % len(FAMILIES)]
        shutil.rmtree(kb.path / CACHE_DIR, ignore_errors=True)
        cold.append(timed_suggest(kb, query, family))
        warm.append(timed_suggest(kb, query, family))
        t = time.perf_counter()
        kb.tables()  # baseline read path: every row of every table
        full.append(time.perf_counter() - t)
    b50, b99 = percentiles(full)
    for what, times, target in (("cold cache", cold, 1.0), ("warm cache", warm, 0.2)):
        p50, p99 = percentiles(times)
        print(f"   suggest, {what:<15} p50 {p50:6.3f} s   p99 {p99:6.3f} s   "
              f"(p99 target <= {target} s; p50 / baseline {p50 / b50:.2f})")
    print(f"   baseline: read all rows  p50 {b50:6.3f} s   p99 {b99:6.3f} s")
    t = time.perf_counter()
    kb.tables(family="random_forest", task="classification")
    print(f"   filtered read of one family/task: {time.perf_counter() - t:.3f} s")

if __name__ == "__main__":
    sys.exit(main())
