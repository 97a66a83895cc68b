"""Evaluate the ranking strategies on the realdata meta-dataset (see README.md).

Protocol
--------
* Each (family, dataset) of ``results/scores.parquet`` becomes one study. Held-out truth:
  all ``POOL_SIZE`` pool configurations (every one was run). History: a seeded subset
  of ``HISTORY_TRIALS`` of them per study, as a past tuning study would have tried only
  some configurations - so the portfolio's surrogates have something to fill in.
* Candidates are restricted to the pool, so every suggestion's true score on the
  held-out dataset is known (the script checks that no lookup was predicted).
* Dataset groups are split in two halves (seeded, balanced by dataset count). The
  portfolio's settings (neighbourhood size, temperature) are chosen on the tuning half
  only, by mean regret at k = ``TUNE_K`` averaged over the (family, task) cells, holding
  out tuning datasets against a history of the other tuning groups; the chosen setting
  is evaluated as ``tuned-portfolio``. Every registered strategy
  (:data:`warmstart.strategies.STRATEGIES`) is evaluated with its shipped settings.
  Results are reported on the evaluation half: each evaluation dataset is held out
  against the history of every other group (both halves; never its own group).

Targets, per family and task, on the evaluation half: the default strategy's
(:data:`warmstart.strategies.DEFAULT_STRATEGY`) mean regret at 5 is below random
search's at 10 and below the dataset-agnostic portfolio's at 5 (stretch: below random
search's at 20).

Families are those present in ``results/scores.parquet`` (a partial build evaluates
what it has). Run: ``python -m benchmarks.realdata.evaluate`` (builds first when
results are missing).
"""

from __future__ import annotations

import argparse
import hashlib
import itertools
import json
import math
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

import warmstart.strategies as ws
from benchmarks.realdata import build
from warmstart.backtest import backtest_tables
from warmstart.fingerprint import Fingerprint

HISTORY_TRIALS = 20
SPLIT_SEED = 7
TUNE_K = 5
KS = (1, 3, 5, 10, 20)
RANDOM_REPEATS = 50
# The tuning grid: the portfolio's neighbourhood size and temperature (forest
# surrogates, min-max scores: the earlier runs found GP surrogates and rank scores worse).
GRID = {"neighbours": (5, 10, 20), "temperature": (0.25, 1.0, math.inf)}
TASKS = ("classification", "regression")
TUNED = "tuned-portfolio"
GLOBAL, RANDOM = "global-portfolio", "random"


def _id(name: str) -> str:
    return hashlib.sha1(name.encode()).hexdigest()[:16]


def default_strategy() -> str:
    """The name of the strategy ``suggest`` uses by default."""
    return getattr(ws, "DEFAULT_STRATEGY", "portfolio")


def _refingerprint(meta: list[dict]) -> None:
    from benchmarks.realdata.datasets import load_datasets
    from warmstart.fingerprint import fingerprint

    frames = {d.name: d for d in load_datasets()}
    for m in meta:
        d = frames[m["name"]]
        m["fingerprint"] = fingerprint(d.frame, target=d.target, task=d.task).to_dict()


def load_results(refingerprint: bool = False, results: Path | None = None):
    """Tables in the history's layout, fingerprints and groups, from ``results/``."""
    results = results or build.RESULTS
    meta = json.loads((results / "datasets.json").read_text(encoding="utf-8"))
    scores = pd.read_parquet(results / "scores.parquet")
    if refingerprint:
        _refingerprint(meta)
    fps = {_id(m["name"]): Fingerprint.from_dict(m["fingerprint"]) for m in meta}
    datasets = pd.DataFrame([{
        "dataset_id": _id(m["name"]), "name": m["name"], "task": m["task"],
        "target": m["target"], "catalogue_version": m["fingerprint"]["catalogue_version"],
        "meta_features": json.dumps(m["fingerprint"]["meta_features"]),
        "warnings": "[]"} for m in meta])
    groups = {_id(m["name"]): m["group"] for m in meta}
    studies, trials = [], []
    for (family, name, task), g in scores.groupby(["family", "dataset", "task"]):
        sid = f"{family}:{name}"
        studies.append({"study_id": sid, "dataset_id": _id(name), "family": family,
                        "task": task, "metric": build.METRIC[task], "better": "higher",
                        "label": name, "trial_count": len(g)})
        for r in g.itertuples(index=False):
            trials.append({"study_id": sid, "trial_index": int(r.config_index),
                           "config": r.config, "score": r.score,
                           "fit_seconds": r.fit_seconds, "status": r.status})
    tables = {"datasets": datasets, "studies": pd.DataFrame(studies),
              "trials": pd.DataFrame(trials)}
    return tables, fps, groups


def families_present(tables) -> list[str]:
    """The build's families that have studies, in ``build.FAMILIES`` order."""
    have = set(tables["studies"]["family"])
    return [f for f in build.FAMILIES if f in have]


def coverage(tables, groups, family: str, ids: set) -> dict[str, dict[str, int]]:
    """Task -> {"datasets", "groups"} of ``family``'s studies among dataset ids ``ids``."""
    st = tables["studies"]
    st = st[(st["family"] == family) & st["dataset_id"].isin(ids)]
    return {t: {"datasets": int(g["dataset_id"].nunique()),
                "groups": len({groups[i] for i in g["dataset_id"]})}
            for t, g in st.groupby("task")}


def covered(cov: dict) -> bool:
    """A half can test a family when some task's studies span two groups or more (a
    held-out dataset needs history outside its own group)."""
    return any(c["groups"] >= 2 for c in cov.values())


def history_subset(trials: pd.DataFrame, n: int = HISTORY_TRIALS) -> pd.DataFrame:
    """A seeded subset of ``n`` trials per study (the history a team would have)."""
    parts = []
    for sid, g in trials.groupby("study_id", sort=True):
        seed = int(hashlib.sha1(sid.encode()).hexdigest()[:8], 16)
        take = np.sort(np.random.default_rng(seed).choice(len(g), min(n, len(g)),
                                                          replace=False))
        parts.append(g.iloc[take])
    return pd.concat(parts, ignore_index=True)


def split_groups(groups: dict[str, str], seed: int = SPLIT_SEED) -> tuple[set, set]:
    """Dataset ids of the tuning and the evaluation half; no group straddles them."""
    sizes = pd.Series(list(groups.values())).value_counts()
    rng = np.random.default_rng(seed)
    order = sorted(sizes.index, key=lambda g: (-sizes[g], rng.random()))
    halves: list[list[str]] = [[], []]
    count = [0, 0]
    for g in order:  # largest first, each to the smaller half
        h = 0 if count[0] < count[1] or (count[0] == count[1] and rng.random() < 0.5) else 1
        halves[h].append(g)
        count[h] += sizes[g]
    tune = {i for i, g in groups.items() if g in set(halves[0])}
    return tune, set(groups) - tune


def _restrict(tables, ids):
    st = tables["studies"][tables["studies"]["dataset_id"].isin(ids)]
    return {"datasets": tables["datasets"][tables["datasets"]["dataset_id"].isin(ids)],
            "studies": st, "trials": tables["trials"][tables["trials"]["study_id"].isin(
                st["study_id"])]}


def recorded_pool(tables, family: str) -> dict[str, list[dict]]:
    """Task -> the pool the build evaluated for ``family``, read from the results (not
    recomputed, so a later change to the sampling code cannot desynchronise them)."""
    st = tables["studies"][tables["studies"]["family"] == family]
    tr = tables["trials"][tables["trials"]["study_id"].isin(st["study_id"])]
    out = {}
    for task, ids in st.groupby("task")["study_id"]:
        t = tr[tr["study_id"].isin(ids)].sort_values(["study_id", "trial_index"])
        lists = t.groupby("study_id")["config"].agg(tuple)
        assert lists.nunique() == 1, f"{family}/{task}: studies ran different pools"
        out[task] = [json.loads(c) for c in lists.iloc[0]]
    return out


def run(tables, fps, groups, family, strategies, holdout, ks=KS):
    """Backtest ``strategies`` on ``family``, holding out ``holdout`` (None: every one)."""
    cands = recorded_pool(tables, family)
    # the capped space where the build capped it (defaults and random draws stay inside)
    space = {t: build.family_space(family, t) for t in TASKS
             if (family, t) in build.RESTRICT}
    hist = history_subset(tables["trials"])
    return backtest_tables(tables, fps, family, ks, strategies, space=space or None,
                           random_repeats=RANDOM_REPEATS, groups=groups, holdout=holdout,
                           candidates=cands, history_trials={t: hist for t in cands})


def task_means(res, k: int) -> dict[str, dict[str, float]]:
    """Strategy -> task -> mean regret at ``k`` over the held-out datasets."""
    d = res.per_dataset[res.per_dataset["k"] == k]
    return {s: {t: float(v) for t, v in g.groupby("task")["regret"].mean().items()}
            for s, g in d.groupby("strategy")}


def _digest(sub, fps, groups, family, names, extra=()) -> str:
    """A digest of one family's results in ``sub``, the fingerprints, the groups and the
    settings: the key of the cached backtests."""
    h = hashlib.sha1()
    st = sub["studies"][sub["studies"]["family"] == family]
    tr = sub["trials"][sub["trials"]["study_id"].isin(st["study_id"])]
    h.update(pd.util.hash_pandas_object(tr[["study_id", "config", "score"]],
                                        index=False).to_numpy().tobytes())
    h.update(json.dumps({i: fps[i].to_dict()["meta_features"] for i in sorted(fps)},
                        sort_keys=True).encode())
    h.update(repr((TUNE_K, HISTORY_TRIALS, SPLIT_SEED, sorted(names),
                   sorted(groups.items()), extra)).encode())
    return h.hexdigest()[:16]


def _cached_tune(sub, fps, groups, family, strats) -> dict[str, dict[str, float]]:
    """Strategy -> task -> mean regret at TUNE_K on the tuning half, cached in cache/ by
    a digest of the inputs (results, fingerprints, groups, settings), so a rerun after
    adding a family only computes the new one. Delete cache/tune-* after changing the
    strategies' code."""
    digest = _digest(sub, fps, groups, family, [s.name for s in strats])
    path = build.CACHE / f"tune-{family}-{digest}.json"
    if path.is_file():
        return json.loads(path.read_text(encoding="utf-8"))
    out = task_means(run(sub, fps, groups, family, strats, None, (TUNE_K,)), TUNE_K)
    build.CACHE.mkdir(exist_ok=True)
    path.write_text(json.dumps(out), encoding="utf-8")
    return out


def grid_strategies() -> list:
    """Nearest-best and the portfolio at every (neighbours, temperature) of ``GRID``."""
    out = [ws.get_strategy("nearest-best")]
    for n, t in itertools.product(*GRID.values()):
        out.append(ws.GreedyPortfolio(f"portfolio n={n} t={t}", neighbours=n, temperature=t))
    return out


def tune(tables, fps, groups, tune_ids, families, log=print) -> pd.DataFrame:
    """Mean regret at TUNE_K of every grid strategy per (family, task) cell on the tuning
    half, and their mean over the cells; sorted best first."""
    sub = _restrict(tables, tune_ids)
    strats = grid_strategies()
    per = {f: _cached_tune(sub, fps, groups, f, strats) for f in families}
    rows = []
    for s in strats:
        cells = {f"{f}/{t}": per[f][s.name][t] for f in families for t in TASKS
                 if t in per[f].get(s.name, {})}
        rows.append({"strategy": s.name, "neighbours": getattr(s, "neighbours", None),
                     "temperature": getattr(s, "temperature", None), **cells,
                     "mean": float(np.mean(list(cells.values())))})
        log(f"  tune {s.name}: mean {rows[-1]['mean']:.3f}")
    return pd.DataFrame(rows).sort_values("mean", kind="stable").reset_index(drop=True)


def tuned_strategy(row):
    """The tuning half's best grid row as a strategy named ``TUNED``."""
    if row["strategy"] == "nearest-best":
        return ws.get_strategy("nearest-best")
    return ws.GreedyPortfolio(TUNED, neighbours=int(row["neighbours"]),
                              temperature=float(row["temperature"]))


def evaluation_strategies(tuned, names: list[str] | None = None) -> list:
    """The default first, then the other registered strategies that use the history, the
    tuned setting, and last the baselines (the dataset-agnostic list, random, defaults)."""
    names = names or list(ws.STRATEGIES)
    strats = [ws.get_strategy(n) for n in names]
    baseline = {GLOBAL, RANDOM, "defaults"}
    default = [s for s in strats if s.name == default_strategy()]
    history = [s for s in strats if s.name not in baseline and s not in default]
    rest = [s for s in strats if s.name in baseline]
    rest.sort(key=lambda s: [GLOBAL, RANDOM, "defaults"].index(s.name))
    tuned_l = [tuned] if tuned.name not in {s.name for s in strats} else []
    return default + history + tuned_l + rest


def cell_summary(d: pd.DataFrame) -> list[dict]:
    """Per (task, strategy, k) of a per-dataset regret table: held-out datasets, mean and
    std of regret, and the share of datasets where the strategy beats random search at
    the same k (ties count half)."""
    rand = d[d["strategy"] == RANDOM].set_index(["dataset_id", "k"])["regret"]
    out = []
    for (task, s, k), g in d.groupby(["task", "strategy", "k"], sort=False):
        r = g["regret"].dropna()
        row = {"task": task, "strategy": s, "k": int(k), "datasets": int(r.size),
               "mean": float(r.mean()) if r.size else None,
               "std": float(r.std(ddof=0)) if r.size else None}
        if s != RANDOM and not rand.empty:
            rr = rand.reindex(list(zip(g["dataset_id"], g["k"]))).to_numpy()
            v = g["regret"].to_numpy()
            ok = ~(np.isnan(v) | np.isnan(rr))
            row["beats_random"] = float(np.mean((v[ok] < rr[ok]) + 0.5 * (v[ok] == rr[ok]))
                                        ) if ok.any() else None
        out.append(row)
    return out


def _fmt(m, s) -> str:
    return "-" if m is None or m != m else f"{m:.3f} ± {s:.3f}"


def table_text(summary: list[dict], strategies: list[str], title: str) -> str:
    """One block per task: strategies by k, mean ± std of normalised regret."""
    df = pd.DataFrame(summary)
    lines = [title]
    for task in TASKS:
        t = df[df["task"] == task]
        if t.empty:
            continue
        n = int(t["datasets"].max())
        lines.append(f"  {task} ({n} held-out datasets)")
        lines.append(f"  {'strategy':20s} " + " ".join(f"{'k=' + str(k):>15s}" for k in KS)
                     + "  beats random@5")
        for s in strategies:
            d = t[t["strategy"] == s].set_index("k")
            if d.empty:
                continue
            cells = [_fmt(d.loc[k, "mean"], d.loc[k, "std"]).rjust(15) if k in d.index
                     else "-".rjust(15) for k in KS]
            br = d.loc[5].get("beats_random") if 5 in d.index else None
            br_s = "-" if br is None or br != br else f"{100 * br:.0f}%"
            lines.append(f"  {s:20s} " + " ".join(cells) + f"  {br_s:>14s}")
    return "\n".join(lines)


def k5_rows(summary: list[dict], family: str, strategies: list[str]) -> list[dict]:
    """One row per task: every strategy at k = 5, and random search at 5, 10 and 20."""
    df = pd.DataFrame(summary)
    out = []
    for task in TASKS:
        t = df[df["task"] == task]
        if t.empty:
            continue
        row = {"family": family, "task": task, "datasets": int(t["datasets"].max())}
        for s in strategies:
            for k in ((5, 10, 20) if s == RANDOM else (5,)):
                d = t[(t["strategy"] == s) & (t["k"] == k)]
                if not d.empty:
                    row[f"{s}@{k}"] = (d["mean"].iloc[0], d["std"].iloc[0])
        out.append(row)
    return out


def targets(row: dict, default: str) -> dict:
    """The issue's targets for one (family, task) row of :func:`k5_rows`."""
    d = row.get(f"{default}@5", (math.nan,))[0]
    r10, r20 = row.get(f"{RANDOM}@10", (math.nan,))[0], row.get(f"{RANDOM}@20", (math.nan,))[0]
    g = row.get(f"{GLOBAL}@5", (math.nan,))[0]
    return {"default": default, "default@5": d, "below_random@10": bool(d < r10),
            "below_global@5": bool(d < g), "below_random@20": bool(d < r20)}


def markdown_k5(rows: list[dict]) -> str:
    """The k = 5 table (mean ± std) in Markdown, one line per (family, task)."""
    cols = [c for c in rows[0] if "@" in c]
    for r in rows[1:]:
        cols += [c for c in r if "@" in c and c not in cols]
    head = "| family | task | n | " + " | ".join(cols) + " |"
    lines = [head, "|" + "---|" * (3 + len(cols))]
    for r in rows:
        cells = [_fmt(*r[c]) if c in r else "-" for c in cols]
        lines.append(f"| {r['family']} | {r['task']} | {r['datasets']} | "
                     + " | ".join(cells) + " |")
    return "\n".join(lines)


def _clean(obj):
    """JSON-safe copy: NaN/inf become None/"inf", tuples lists."""
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_clean(v) for v in obj]
    if isinstance(obj, (float, np.floating)):
        return None if obj != obj else ("inf" if math.isinf(obj) else float(obj))
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def cached_backtest(tables, fps, groups, family, strategies, ids, half) -> pd.DataFrame:
    """:func:`run` on one half, its per-dataset regrets cached in cache/ (Parquet) by a
    digest of the inputs, so that a rerun only computes families whose results changed.
    Delete cache/eval-* after changing the strategies' code."""
    names = [s.name for s in strategies]
    # the settings too: the tuned setting keeps its name when the tuning picks another
    settings = [(s.name, *(getattr(s, a, None) for a in ("neighbours", "temperature",
                                                           "weighted", "shrink")))
                for s in strategies]
    digest = _digest(tables, fps, groups, family, names,
                     (half, sorted(ids), KS, RANDOM_REPEATS, repr(settings)))
    path = build.CACHE / f"eval-{family}-{half}-{digest}.parquet"
    if path.is_file():
        return pd.read_parquet(path)
    res = run(tables, fps, groups, family, strategies, ids)
    predicted = sum(v["predicted"] for v in res.lookups.values())
    assert predicted == 0, "a benchmark suggestion fell outside the pool"
    build.CACHE.mkdir(exist_ok=True)
    tmp = path.with_suffix(".tmp")
    res.per_dataset.to_parquet(tmp, index=False)
    tmp.replace(path)
    return res.per_dataset


def plot_cells(per: pd.DataFrame, names: list[str], path: Path, title: str) -> None:
    """Mean regret against k per strategy, one panel per task."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    tasks = [t for t in TASKS if t in set(per["task"])]
    fig, axes = plt.subplots(1, len(tasks), figsize=(6.0 * len(tasks), 4.2), squeeze=False)
    for ax, task in zip(axes[0], tasks):
        d = per[per["task"] == task]
        for s in names:
            m = d[d["strategy"] == s].groupby("k")["regret"].mean()
            if not m.empty:
                ax.plot(m.index, m.to_numpy(), marker="o", label=s,
                        linestyle="--" if s in (GLOBAL, RANDOM, "defaults") else "-")
        n = d["dataset_id"].nunique()
        ax.set_title(f"{title}, {task} ({n} datasets)", fontsize=9)
        ax.set_xlabel("k (configurations tried)")
        ax.set_ylabel("mean normalised regret (0 = pool best, 1 = median)")
        ax.set_xticks(list(KS))
        ax.set_ylim(0, min(1.5, ax.get_ylim()[1]))
        ax.grid(alpha=0.3)
    axes[0][0].legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def evaluate_family(tables, fps, groups, family, strategies, ids, half, plot=True) -> dict:
    """Backtest one family on one half; print its tables; the JSON record."""
    per = cached_backtest(tables, fps, groups, family, strategies, ids, half)
    names = [s.name for s in strategies]
    summary = cell_summary(per)
    print("\n" + table_text(summary, names, f"{family} - {half} half "
                                              f"(default = {default_strategy()})"))
    rows = k5_rows(summary, family, names)
    for r in rows:
        r["targets"] = targets(r, default_strategy())
        t = r["targets"]
        print(f"  targets {r['task']}: default@5 {t['default@5']:.3f} below random@10: "
              f"{t['below_random@10']}, below global@5: {t['below_global@5']}, "
              f"below random@20 (stretch): {t['below_random@20']}")
    if plot and half == "evaluation":
        plot_cells(per, names, build.RESULTS / f"regret_{family}.png",
                   f"realdata evaluation half: {family}")
    return {"summary": summary, "k5": rows}


def _coverage_report(tables, groups, families, tune_ids, eval_ids):
    """Print what each family covers in each half; the coverage, the families the tuning
    half can tune on and those the evaluation half can test."""
    cov = {f: {"tuning": coverage(tables, groups, f, tune_ids),
               "evaluation": coverage(tables, groups, f, eval_ids)} for f in families}
    for f, c in cov.items():
        print(f"  {f}: " + "; ".join(f"{h} " + ", ".join(
            f"{t} {v['datasets']} datasets/{v['groups']} groups" for t, v in c[h].items())
            for h in c))
    tune_fams = [f for f in families if covered(cov[f]["tuning"])]
    tested = [f for f in families if covered(cov[f]["evaluation"])]
    print(f"tuned on: {', '.join(tune_fams)}; evaluated: {', '.join(tested)}")
    return cov, tune_fams, tested


def _parse(argv):
    ap = argparse.ArgumentParser(description="realdata benchmark: evaluate strategies")
    ap.add_argument("--skip-build", action="store_true",
                    help="never build; fail if results/ is missing")
    ap.add_argument("--refingerprint", action="store_true",
                    help="recompute fingerprints with the current catalogue")
    ap.add_argument("--families", default=None,
                    help="comma-separated (default: every family in the results)")
    ap.add_argument("--strategies", default=None,
                    help="comma-separated registered strategies (default: all of them)")
    ap.add_argument("--tuning-half", action="store_true",
                    help="also report every strategy on the tuning half")
    ap.add_argument("--no-plot", action="store_true")
    return ap.parse_args(argv)


def main(argv=None) -> int:
    a = _parse(argv)
    if not (build.RESULTS / "scores.parquet").is_file():
        if a.skip_build:
            print("results/scores.parquet is missing; run the build", file=sys.stderr)
            return 2
        build.build(jobs=1)
    t0 = time.perf_counter()
    tables, fps, groups = load_results(a.refingerprint)
    families = [f for f in families_present(tables)
                if a.families is None or f in a.families.split(",")]
    tune_ids, eval_ids = split_groups(groups)
    n_groups = (len({groups[i] for i in tune_ids}), len({groups[i] for i in eval_ids}))
    print(f"{len(groups)} datasets in {len(set(groups.values()))} groups: tuning half "
          f"{len(tune_ids)} datasets ({n_groups[0]} groups), evaluation half "
          f"{len(eval_ids)} ({n_groups[1]} groups)")
    cov, tune_fams, families = _coverage_report(tables, groups, families, tune_ids, eval_ids)
    grid = tune(tables, fps, groups, tune_ids, tune_fams)
    print("\nTuning half, mean regret@5 over (family, task) cells (grid, best first):")
    print(grid.to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    tuned = tuned_strategy(grid.iloc[0])
    strategies = evaluation_strategies(tuned, a.strategies and a.strategies.split(","))
    out = {"datasets": len(groups), "groups": len(set(groups.values())),
           "tuning_half": {"datasets": len(tune_ids), "groups": n_groups[0]},
           "evaluation_half": {"datasets": len(eval_ids), "groups": n_groups[1]},
           "default_strategy": default_strategy(), "tuned": grid.iloc[0].to_dict(),
           "grid": grid.to_dict(orient="records"),
           "strategies": [s.name for s in strategies], "coverage": cov,
           "tuned_on": tune_fams, "families": {}}
    halves = [("evaluation", eval_ids)] + ([("tuning", tune_ids)] if a.tuning_half else [])
    for family in families:
        out["families"][family] = {}
        for half, ids in halves:
            tabs = tables if half == "evaluation" else _restrict(tables, tune_ids)
            out["families"][family][half] = evaluate_family(
                tabs, fps, groups, family, strategies, ids, half, not a.no_plot)
    rows = [r for f in families for r in out["families"][f]["evaluation"]["k5"]]
    md = markdown_k5(rows)
    print("\nEvaluation half, mean ± std of normalised regret at k = 5 (random also at 10, "
          "20):\n" + md)
    out["seconds"] = time.perf_counter() - t0
    (build.RESULTS / "table_k5.md").write_text(md + "\n", encoding="utf-8")
    (build.RESULTS / "benchmark.json").write_text(
        json.dumps(_clean(out), indent=1, allow_nan=False), encoding="utf-8")
    print(f"\nevaluation took {out['seconds']:.0f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
