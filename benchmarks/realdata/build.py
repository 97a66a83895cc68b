"""Build the realdata meta-dataset: fingerprints and a fixed configuration pool's scores.

For every dataset of :func:`benchmarks.realdata.datasets.load_datasets` and every family
in ``FAMILIES``, each configuration of a fixed seeded pool (``POOL_SIZE``, the first being
the family's defaults) is scored by 3-fold cross-validation (stratified for
classification; balanced accuracy or R²). The pipeline is
:func:`warmstart.pipelines.make_pipeline`; its preprocessing step does not depend on the
configuration, so it is fitted once per fold and reused for every configuration (the
same numbers as refitting the whole pipeline, much faster).

Resumable: each (family, dataset) result is cached as one JSON file under ``cache/``
(written atomically); a rerun skips what is cached. ``results/`` gets the consolidated,
committed files: ``datasets.json`` (name, group, task, target, shape, fingerprint) and
``scores.parquet`` (family, dataset, config_index, config, score, fit_seconds, status).

Run: ``nice -n 15 python -m benchmarks.realdata.build --jobs 1 [--reuse DIR]``.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
import warnings
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")  # one core per worker process

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

HERE = Path(__file__).resolve().parent
CACHE = HERE / "cache"
RESULTS = HERE / "results"
POOL_SIZE = 50
POOL_SEED = 20240601
CV_SEED = 0
# Every shipped family. The build runs them in this order (family by family): the three
# added with the enlarged benchmark first, cheapest first, so that a build stopped early
# has as many whole families as possible.
FAMILIES = ("svm_rbf", "extra_trees", "random_forest", "knn", "linear",
            "hist_gradient_boosting")
# Caps that keep the build inside what two shared cores can do (see README.md), per
# (family, task); everything else keeps the family's declared space:
# * boosting: at most 50 rounds and 32 leaves (declared: 10-1000 rounds, 4-256 leaves);
# * both forests: at most 50 trees (declared: 10-1000; the default 100 is clipped to 50);
# * support vector regression: C at most 1e3 (declared 1e4): SVR's fit time grows with C
#   (measured on 666 rows: 0.4-0.8 s per fit at C = 1e3, 1.7-2.6 s at C = 5e3).
_HGB = [{"name": "max_iter", "low": 10, "high": 50},
        {"name": "max_leaf_nodes", "low": 4, "high": 32}]
_FOREST = [{"name": "n_estimators", "low": 10, "high": 50, "log": True}]
RESTRICT = {
    ("hist_gradient_boosting", "classification"): _HGB,
    ("hist_gradient_boosting", "regression"): _HGB,
    ("random_forest", "classification"): _FOREST,
    ("random_forest", "regression"): _FOREST,
    ("extra_trees", "classification"): _FOREST,
    ("extra_trees", "regression"): _FOREST,
    ("svm_rbf", "regression"): [{"name": "C", "low": 1e-3, "high": 1e3, "log": True}],
}
METRIC = {"classification": "balanced_accuracy", "regression": "r2"}


def family_space(family: str, task: str):
    """The (restricted) search space the pool is drawn from."""
    from warmstart.families import get_family
    from warmstart.spaces import SearchSpace

    base = get_family(family).space(task)
    spec = RESTRICT.get((family, task))
    return SearchSpace.from_dict(spec, within=base) if spec else base


def pool(family: str, task: str) -> list[dict]:
    """The fixed pool: the family's defaults (clipped into the space), then seeded draws.

    Duplicates (possible for small discrete spaces) are redrawn, so the pool has
    ``POOL_SIZE`` distinct configurations where the space allows.
    """
    from warmstart.spaces import config_key

    space = family_space(family, task)
    rng = np.random.default_rng([POOL_SEED, sum(map(ord, family + task))])
    out = [space.clip({})]
    seen = {config_key(out[0])}
    tries = 0
    while len(out) < POOL_SIZE and tries < 50 * POOL_SIZE:
        tries += 1
        c = space.sample(rng)
        if config_key(c) not in seen:
            seen.add(config_key(c))
            out.append(c)
    return out


def _atomic_json(obj, path: Path) -> None:
    tmp = path.with_suffix(".tmp")
    tmp.write_text(json.dumps(obj, allow_nan=False), encoding="utf-8")
    os.replace(tmp, path)


def _cache_path(family: str, name: str) -> Path:
    return CACHE / family / (name.replace("/", "__") + ".json")


def evaluate(family_name: str, name: str, frame: pd.DataFrame, target: str, task: str
             ) -> dict:
    """Score the pool on one dataset; the cached record (see module docstring)."""
    from sklearn.base import clone
    from sklearn.metrics import get_scorer
    from sklearn.model_selection import KFold, StratifiedKFold

    from warmstart.families import get_family
    from warmstart.pipelines import make_pipeline

    fam = get_family(family_name)
    X, y = frame.drop(columns=[target]), frame[target]
    cv = (StratifiedKFold(3, shuffle=True, random_state=CV_SEED) if task == "classification"
          else KFold(3, shuffle=True, random_state=CV_SEED))
    scorer = get_scorer(METRIC[task])
    folds = []
    for train, test in cv.split(X, y):
        prep = make_pipeline(fam, task, {}, X).steps[0][1]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            Xtr = prep.fit_transform(X.iloc[train], y.iloc[train])
            Xte = prep.transform(X.iloc[test])
        folds.append((Xtr, y.iloc[train].to_numpy(), Xte, y.iloc[test].to_numpy()))
    rows = []
    for i, config in enumerate(pool(family_name, task)):
        scores, fits, error = [], [], None
        for Xtr, ytr, Xte, yte in folds:
            model = clone(make_pipeline(fam, task, config, X).steps[-1][1])
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    t0 = time.perf_counter()
                    model.fit(Xtr, ytr)
                    fits.append(time.perf_counter() - t0)
                    scores.append(float(scorer(model, Xte, yte)))
            except Exception as exc:  # a failed trial is data too
                error = f"{type(exc).__name__}: {exc}"[:200]
                break
        ok = error is None and np.all(np.isfinite(scores))
        rows.append({"config_index": i, "config": config,
                     "score": float(np.mean(scores)) if ok else None,
                     "fit_seconds": float(np.mean(fits)) if ok else None,
                     "status": "ok" if ok else "failed", "error": error})
    return {"family": family_name, "dataset": name, "task": task, "rows": rows}


def _work(args) -> tuple[str, str, float]:
    family, d = args
    t0 = time.perf_counter()
    try:
        record = evaluate(family, d.name, d.frame, d.target, d.task)
    except Exception as exc:  # not cached: a rerun tries this pair again
        print(f"{family} {d.name} not evaluated: {type(exc).__name__}: {exc}",
              file=sys.stderr, flush=True)
        return family, d.name, float("nan")
    path = _cache_path(family, d.name)
    path.parent.mkdir(parents=True, exist_ok=True)
    _atomic_json(record, path)
    return family, d.name, time.perf_counter() - t0


def fingerprints(datasets) -> list[dict]:
    from warmstart.fingerprint import fingerprint

    out = []
    for d in datasets:
        fp = fingerprint(d.frame, target=d.target, task=d.task)
        out.append({"name": d.name, "group": d.group, "task": d.task, "target": d.target,
                    "rows": int(d.frame.shape[0]), "columns": int(d.frame.shape[1] - 1),
                    "fingerprint": fp.to_dict()})
    return out


def consolidate(datasets, families=FAMILIES) -> None:
    """Write results/datasets.json and results/scores.parquet from the cache."""
    RESULTS.mkdir(exist_ok=True)
    _atomic_json(fingerprints(datasets), RESULTS / "datasets.json")
    rows = []
    for family in families:
        for d in datasets:
            path = _cache_path(family, d.name)
            if not path.is_file():
                continue
            rec = json.loads(path.read_text(encoding="utf-8"))
            for r in rec["rows"]:
                rows.append({"family": family, "dataset": d.name, "task": d.task,
                             "config_index": r["config_index"],
                             "config": json.dumps(r["config"], sort_keys=True),
                             "score": r["score"], "fit_seconds": r["fit_seconds"],
                             "status": r["status"]})
    df = pd.DataFrame(rows)
    tmp = RESULTS / "scores.parquet.tmp"
    df.to_parquet(tmp, index=False)
    os.replace(tmp, RESULTS / "scores.parquet")


def reuse(scores_path: Path, meta_path: Path, datasets, families=FAMILIES) -> int:
    """Seed the cache from an earlier build's ``scores.parquet`` and ``datasets.json``.

    A (family, dataset) pair is taken over only when it is not cached yet, the dataset
    has the same target, rows and columns as then, and the earlier pool is exactly the
    current one (every configuration, in order) - i.e. when rebuilding it would run the
    same fits. Returns the number of pairs taken over. Scores do not record the code
    version: only reuse a build made with the same ``warmstart.pipelines``.
    """
    old = pd.read_parquet(scores_path)
    meta = {m["name"]: m for m in json.loads(meta_path.read_text(encoding="utf-8"))}
    n = 0
    for d in datasets:
        m = meta.get(d.name)
        if m is None or (m["target"], m["rows"], m["columns"]) != (
                d.target, d.frame.shape[0], d.frame.shape[1] - 1):
            continue
        for family in families:
            path = _cache_path(family, d.name)
            g = old[(old["family"] == family) & (old["dataset"] == d.name)]
            g = g.sort_values("config_index")
            want = [json.dumps(c, sort_keys=True) for c in pool(family, d.task)]
            if path.is_file() or g["config"].tolist() != want:
                continue
            rows = [{"config_index": int(r.config_index), "config": json.loads(r.config),
                     "score": None if pd.isna(r.score) else float(r.score),
                     "fit_seconds": None if pd.isna(r.fit_seconds) else float(r.fit_seconds),
                     "status": r.status, "error": None} for r in g.itertuples()]
            path.parent.mkdir(parents=True, exist_ok=True)
            _atomic_json({"family": family, "dataset": d.name, "task": d.task,
                          "rows": rows, "reused_from": str(scores_path)}, path)
            n += 1
    return n


def build(jobs: int = 2, families=FAMILIES, limit: int | None = None) -> float:
    """Evaluate every missing (family, dataset) pair, then consolidate. Returns seconds."""
    from benchmarks.realdata.datasets import load_datasets

    t0 = time.perf_counter()
    datasets = load_datasets()[:limit]
    # Family by family; within a family in a seeded random order, so that a build stopped
    # early leaves a family with a random subset of datasets (spread over groups and both
    # halves of the evaluation), not the alphabetically first packages.
    order = np.random.default_rng(POOL_SEED).permutation(len(datasets))
    todo = [(f, datasets[i]) for f in families for i in order
            if not _cache_path(f, datasets[i].name).is_file()]
    print(f"{len(datasets)} datasets, {len(todo)} (family, dataset) pairs to evaluate",
          file=sys.stderr, flush=True)
    log = CACHE / "build-log.jsonl"
    CACHE.mkdir(exist_ok=True)
    if jobs > 1 and todo:
        from multiprocessing import get_context

        with get_context("fork").Pool(jobs) as p:
            done = p.imap_unordered(_work, todo)
            for n, (family, name, secs) in enumerate(done, 1):
                _log(log, family, name, secs, n, len(todo))
    else:
        for n, item in enumerate(todo, 1):
            _log(log, *_work(item), n, len(todo))
    consolidate(datasets, families)
    total = time.perf_counter() - t0
    with log.open("a") as fh:
        fh.write(json.dumps({"event": "build finished", "seconds": total}) + "\n")
    return total


def _log(log: Path, family: str, name: str, secs: float, n: int, total: int) -> None:
    with log.open("a") as fh:
        fh.write(json.dumps({"family": family, "dataset": name, "seconds": secs,
                             "at": time.time()}) + "\n")
    print(f"[{n}/{total}] {family} {name} {secs:.1f}s", file=sys.stderr, flush=True)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--families", default=",".join(FAMILIES))
    ap.add_argument("--limit", type=int, default=None, help="only the first N datasets")
    ap.add_argument("--reuse", metavar="DIR", default=None,
                    help="first seed the cache from DIR/scores.parquet and DIR/datasets.json "
                         "of an earlier build (see reuse())")
    ap.add_argument("--consolidate-only", action="store_true",
                    help="only write results/ from what is cached (e.g. after stopping)")
    a = ap.parse_args(argv)
    if a.consolidate_only:
        from benchmarks.realdata.datasets import load_datasets

        consolidate(load_datasets()[:a.limit], tuple(a.families.split(",")))
        return
    if a.reuse:
        from benchmarks.realdata.datasets import load_datasets

        d = Path(a.reuse)
        n = reuse(d / "scores.parquet", d / "datasets.json", load_datasets(),
                  tuple(a.families.split(",")))
        print(f"reused {n} (family, dataset) pairs from {d}", file=sys.stderr, flush=True)
    secs = build(a.jobs, tuple(a.families.split(",")), a.limit)
    print(f"build done in {secs / 60:.1f} min", file=sys.stderr)


if __name__ == "__main__":
    main()
