"""Evaluate the ranking strategies on the realdata meta-dataset (see README.md).

Protocol
--------
* Each (family, dataset) of ``results/scores.parquet`` becomes one study. Held-out truth:
  all ``POOL_SIZE`` pool configurations (every one was run). History: a seeded subset
  of ``HISTORY_TRIALS`` of them per study, as a past tuning study would have tried only
  some configurations - so the portfolio's surrogates have something to fill in.
* Candidates are restricted to the pool, so every suggestion's true score on the
  held-out dataset is known (the script checks that no lookup was predicted).
* Dataset groups are split in two halves (seeded, balanced by dataset count). All
  settings - the portfolio's neighbourhood size, temperature and surrogate, the
  normalisation, and which strategy is the default - are chosen on the tuning half
  only, by mean regret at k = ``TUNE_K`` averaged over families, holding out tuning
  datasets against a history of the other tuning groups. The targets are reported on
  the evaluation half: each evaluation dataset is held out against the history of
  every other group (both halves; never its own group).

Targets, per family, on the evaluation half: the default strategy's mean regret at 5
is below random search's at 10 and below the dataset-agnostic portfolio's at 5.

Run: ``python -m benchmarks.realdata.evaluate`` (builds first when results are missing).
"""

from __future__ import annotations

import argparse
import hashlib
import itertools
import json
import math
import sys
import time

import numpy as np
import pandas as pd

from benchmarks.realdata import build
from warmstart.backtest import backtest_tables, plot_regret
from warmstart.fingerprint import Fingerprint
from warmstart.strategies import GreedyPortfolio, LibraryDefaults, NearestBest, RandomConfigs
from warmstart.strategies.anchored import AnchoredPortfolio
from warmstart.strategies.hedged import HedgedPortfolio

HISTORY_TRIALS = 20
SPLIT_SEED = 7
TUNE_K = 5
KS = (1, 3, 5, 10)
RANDOM_REPEATS = 50
GRID = {"neighbours": (5, 10, 20), "temperature": (0.25, 1.0, math.inf),
        "surrogate": ("forest", "gp")}
NORMALISATIONS = ("minmax", "rank")
# Median-anchored scores are computed by the strategy from the min-max history.
ANCHORED_TOP = 3  # how many of the best min-max portfolio settings are tried anchored
REGRET_CAPS = (1.0, 2.0, 4.0)  # and with which regret caps
HEDGE_EVERY = (2, 3)  # hedged: every n-th place from the dataset-agnostic list


def _id(name: str) -> str:
    return hashlib.sha1(name.encode()).hexdigest()[:16]


def load_results(refingerprint: bool = False):
    """Tables in the history's layout, fingerprints and groups, from results/."""
    meta = json.loads((build.RESULTS / "datasets.json").read_text(encoding="utf-8"))
    scores = pd.read_parquet(build.RESULTS / "scores.parquet")
    if refingerprint:
        from benchmarks.realdata.datasets import load_datasets
        from warmstart.fingerprint import fingerprint

        frames = {d.name: d for d in load_datasets()}
        for m in meta:
            d = frames[m["name"]]
            m["fingerprint"] = fingerprint(d.frame, target=d.target, task=d.task).to_dict()
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
        metric = build.METRIC[task]
        studies.append({"study_id": sid, "dataset_id": _id(name), "family": family,
                        "task": task, "metric": metric, "direction": "maximize",
                        "label": name, "n_trials": len(g)})
        for r in g.itertuples(index=False):
            trials.append({"study_id": sid, "trial_index": int(r.config_index),
                           "config": r.config, "score": r.score,
                           "fit_seconds": r.fit_seconds, "status": r.status})
    tables = {"datasets": datasets, "studies": pd.DataFrame(studies),
              "trials": pd.DataFrame(trials)}
    return tables, fps, groups


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


def _family_setup(family: str):
    tasks = ("classification", "regression")
    cands = {t: build.pool(family, t) for t in tasks}
    space = {t: build.family_space(family, t) for t in tasks} if family in build.RESTRICT \
        else None
    return cands, space


def run(tables, fps, groups, family, strategies, holdout, ks=KS, normalisation="minmax",
        cache=None):
    cands, space = _family_setup(family)
    hist = history_subset(tables["trials"])
    return backtest_tables(tables, fps, family, ks, strategies, space=space,
                           random_repeats=RANDOM_REPEATS, groups=groups, holdout=holdout,
                           candidates=cands, history_trials={t: hist for t in cands},
                           normalisation=normalisation, surrogate_cache=cache)


def _cached_regrets(sub, fps, groups, family, strats, norm) -> dict[str, float]:
    """Mean regret at TUNE_K per strategy, cached in cache/ by a digest of the inputs
    (the family's results, the fingerprints, the groups, the settings), so a rerun
    after adding a family only computes the new one. Delete cache/ after changing the
    strategies' code."""
    h = hashlib.sha1()
    st = sub["studies"][sub["studies"]["family"] == family]
    tr = sub["trials"][sub["trials"]["study_id"].isin(st["study_id"])]
    h.update(pd.util.hash_pandas_object(tr[["study_id", "config", "score"]],
                                        index=False).to_numpy().tobytes())
    h.update(json.dumps({i: fps[i].to_dict()["meta_features"] for i in sorted(fps)},
                        sort_keys=True).encode())
    h.update(repr((norm, TUNE_K, HISTORY_TRIALS, SPLIT_SEED, sorted(s.name for s in strats),
                   sorted(groups.items()))).encode())
    path = build.CACHE / f"tune-{family}-{h.hexdigest()[:16]}.json"
    if path.is_file():
        return json.loads(path.read_text(encoding="utf-8"))
    res = run(sub, fps, groups, family, strats, None, (TUNE_K,), norm)
    out = {s.name: float(res.regrets(s.name, TUNE_K).mean()) for s in strats}
    build.CACHE.mkdir(exist_ok=True)
    path.write_text(json.dumps(out), encoding="utf-8")
    return out


def _grid_strategies():
    out = [NearestBest()]
    for n, t, s in itertools.product(*GRID.values()):
        out.append(GreedyPortfolio(f"portfolio n={n} t={t} {s}", neighbours=n,
                                   temperature=t, surrogate=s))
    return out


def tune(tables, fps, groups, tune_ids, families, log=print):
    """Grid over portfolio settings (min-max scores), then the normalisation of the best
    two candidates (min-max vs rank), then the ``ANCHORED_TOP`` best portfolio settings
    with median-anchored scores and each of ``REGRET_CAPS``
    (:mod:`warmstart.strategies.anchored`), then the best setting hedged with the
    dataset-agnostic list (:mod:`warmstart.strategies.hedged`, each of ``HEDGE_EVERY``),
    on the tuning half only."""
    sub = _restrict(tables, tune_ids)
    rows = []

    def score(strats, norm, label=None):
        per = {f: _cached_regrets(sub, fps, groups, f, strats, norm) for f in families}
        for s in strats:
            res = {f: per[f][s.name] for f in families}
            kind = "nearest-best" if s.name == "nearest-best" else "portfolio"
            if isinstance(s, AnchoredPortfolio):
                kind = "anchored-portfolio"
            if isinstance(s, HedgedPortfolio):
                kind = f"hedged-portfolio every={s.every}"
            row = {"strategy": kind, "normalisation": label or norm,
                   "neighbours": getattr(s, "neighbours", None),
                   "temperature": getattr(s, "temperature", None),
                   "surrogate": getattr(s, "surrogate", None), **res,
                   "mean": float(np.mean(list(res.values())))}
            rows.append(row)
            log(f"  tune {norm} {s.name}: " + " ".join(f"{f}={v:.3f}"
                                                        for f, v in res.items()))

    grid = _grid_strategies()
    score(grid, "minmax")
    first = pd.DataFrame(rows).sort_values("mean", kind="stable")
    best_portfolio = first[first["strategy"] == "portfolio"].iloc[0]
    score([NearestBest(), _strategy_from(best_portfolio)], "rank")
    top = first[first["strategy"] == "portfolio"].head(ANCHORED_TOP)
    for cap in REGRET_CAPS:
        score([AnchoredPortfolio(f"anchored n={r.neighbours} t={r.temperature} "
                                 f"{r.surrogate} cap={cap:g}", neighbours=int(r.neighbours),
                                 temperature=float(r.temperature), surrogate=r.surrogate,
                                 regret_cap=cap) for r in top.itertuples()],
              "minmax", f"median cap {cap:g}")
    bp = best_portfolio
    score([HedgedPortfolio(f"hedged every={e}", every=e, neighbours=int(bp["neighbours"]),
                           temperature=float(bp["temperature"]), surrogate=bp["surrogate"])
           for e in HEDGE_EVERY], "minmax", None)
    return pd.DataFrame(rows).sort_values("mean", kind="stable").reset_index(drop=True)


def _strategy_from(row) -> object:
    if row["strategy"] == "nearest-best":
        return NearestBest()
    if row["strategy"].startswith("hedged-portfolio"):
        return HedgedPortfolio("hedged-portfolio", every=int(row["strategy"].split("=")[1]),
                               neighbours=int(row["neighbours"]),
                               temperature=float(row["temperature"]),
                               surrogate=row["surrogate"])
    if row["strategy"] == "anchored-portfolio":
        return AnchoredPortfolio("anchored-portfolio", neighbours=int(row["neighbours"]),
                                 temperature=float(row["temperature"]),
                                 surrogate=row["surrogate"],
                                 regret_cap=float(row["normalisation"].split()[-1]))
    return GreedyPortfolio("portfolio", neighbours=int(row["neighbours"]),
                           temperature=float(row["temperature"]), surrogate=row["surrogate"])


def table_text(result, title: str) -> str:
    lines = [title, f"{'strategy':18s} " + " ".join(f"{'k=' + str(k):>17s}" for k in KS)
             + "   beats random@5"]
    summary = pd.DataFrame(result.summary())
    for s in result.strategies:
        d = summary[summary["strategy"] == s].set_index("k")
        cells = [f"{d.loc[k, 'mean_regret']:.3f} ± {d.loc[k, 'std_regret']:.3f}".rjust(17)
                 for k in KS]
        br = d.loc[5].get("beats_random") if "beats_random" in d else None
        br_s = "-" if br is None or br != br else f"{100 * br:.0f}%"
        lines.append(f"{s:18s} " + " ".join(cells) + f"   {br_s:>15s}")
    n = result.per_dataset["dataset_id"].nunique()
    lines.append(f"(mean ± std of normalised regret over {n} held-out datasets)")
    return "\n".join(lines)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description="realdata benchmark: evaluate strategies")
    ap.add_argument("--skip-build", action="store_true",
                    help="never build; fail if results/ is missing")
    ap.add_argument("--refingerprint", action="store_true",
                    help="recompute fingerprints with the current catalogue")
    ap.add_argument("--families", default=",".join(build.FAMILIES))
    ap.add_argument("--no-plot", action="store_true")
    a = ap.parse_args(argv)
    if not (build.RESULTS / "scores.parquet").is_file():
        if a.skip_build:
            print("results/scores.parquet is missing; run the build", file=sys.stderr)
            return 2
        build.build()
    families = a.families.split(",")
    t0 = time.perf_counter()
    tables, fps, groups = load_results(a.refingerprint)
    tune_ids, eval_ids = split_groups(groups)
    n_groups = (len({groups[i] for i in tune_ids}), len({groups[i] for i in eval_ids}))
    print(f"{len(groups)} datasets in {len(set(groups.values()))} groups: tuning half "
          f"{len(tune_ids)} datasets ({n_groups[0]} groups), evaluation half "
          f"{len(eval_ids)} ({n_groups[1]} groups)")
    grid = tune(tables, fps, groups, tune_ids, families)
    best = grid.iloc[0]
    chosen = _strategy_from(best)
    # median-anchored scores are computed by the strategy from the min-max history
    norm = "minmax" if best["normalisation"].startswith("median") else best["normalisation"]
    print("\nTuning half, mean regret@5 (top 5 settings):")
    print(grid.head(5).to_string(index=False, float_format=lambda v: f"{v:.3f}"))
    out = {"chosen": {k: (None if isinstance(v, float) and v != v else v)
                      for k, v in best.to_dict().items()},
           "grid": grid.replace({np.inf: "inf"}).to_dict(orient="records"), "families": {}}
    # the chosen strategy, the other history strategies, then the baselines
    others = [s for s in (NearestBest(), GreedyPortfolio("portfolio")) if s.name != chosen.name]
    strategies = [chosen, *others,
                  GreedyPortfolio("global-portfolio", weighted=False, neighbours=None,
                                  surrogate=getattr(chosen, "surrogate", "forest")),
                  RandomConfigs(), LibraryDefaults()]
    ok_all = True
    for family in families:
        out["families"][family] = {}
        for half, ids in (("tuning", tune_ids), ("evaluation", eval_ids)):
            # tuning half: history = other tuning groups; evaluation half: all other groups
            tabs = _restrict(tables, tune_ids) if half == "tuning" else tables
            res = run(tabs, fps, groups, family, strategies, ids, KS, norm)
            predicted = sum(v["predicted"] for v in res.lookups.values())
            assert predicted == 0, "a benchmark suggestion fell outside the pool"
            print("\n" + table_text(res, f"{family} - {half} half (default = "
                                         f"{chosen.name})"))
            d, r, g = (res.regrets(chosen.name, 5).mean(), res.regrets("random", 10).mean(),
                       res.regrets("global-portfolio", 5).mean())
            met = bool(d < r and d < g)
            ok_all &= met or half == "tuning"
            print(f"targets: default@5 {d:.3f} < random@10 {r:.3f}: {d < r}; "
                  f"< global-portfolio@5 {g:.3f}: {d < g}")
            out["families"][family][half] = {"summary": res.summary(), "default@5": d,
                                             "random@10": r, "global@5": g,
                                             "targets_met": met}
            if half == "evaluation" and not a.no_plot:
                plot_regret(res, build.RESULTS / f"regret_{family}.png",
                            f"realdata, evaluation half: {family}")
    out["seconds"] = time.perf_counter() - t0
    (build.RESULTS / "benchmark.json").write_text(
        json.dumps(out, indent=1, default=float), encoding="utf-8")
    print(f"\nevaluation took {out['seconds']:.0f} s; targets met on every family: {ok_all}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
