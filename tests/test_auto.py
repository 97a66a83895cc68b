"""The ``auto`` choice (nested, cached, fallback), the greedy gains, transfer, verdicts."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from warmstart.backtest import BacktestResult, verdict
from warmstart.families import get_family
from warmstart.history import KnowledgeBase
from warmstart.strategies import auto, prepare_trials
from warmstart.strategies.auto import AutoChoice, inner_regret
from warmstart.strategies.portfolio import GreedyPortfolio, greedy_steps
from warmstart.strategies.transfer import TransferForest
from warmstart.suggesting import suggestion_context

DEMO = Path(__file__).resolve().parent.parent / "knowledge_base"
SMALL_GRID = (GreedyPortfolio("near", neighbours=5, temperature=0.25),
              GreedyPortfolio("global", weighted=False, neighbours=None))


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """A copy of the demo history, and its family/task with the most datasets."""
    path = tmp_path_factory.mktemp("auto") / "kb"
    shutil.copytree(DEMO, path)
    kb = KnowledgeBase(path)
    t = kb.tables()
    counts = t["studies"].groupby(["family", "task"])["dataset_id"].nunique()
    family, task = counts.idxmax()
    assert counts.max() >= auto.MIN_CHOICE_DATASETS + 1
    return kb, t, family, task


def _context(demo, query_id: str, exclude=(), cache_dir=None):
    kb, t, family, task = demo
    st = t["studies"][(t["studies"]["family"] == family) & (t["studies"]["task"] == task)]
    fps = kb.fingerprints(t["datasets"])
    names = dict(zip(t["datasets"]["dataset_id"], t["datasets"]["name"]))
    return suggestion_context(fps[query_id], get_family(family), st,
                              prepare_trials(t["trials"], st), fps, names, exclude=exclude,
                              cache_dir=cache_dir)


def _ids(demo) -> list[str]:
    _, t, family, task = demo
    st = t["studies"][(t["studies"]["family"] == family) & (t["studies"]["task"] == task)]
    return sorted(st["dataset_id"].unique())


class Recorder:
    """A strategy that records which datasets each inner question could see."""

    name = "recorder"
    description = "records its inputs"
    uses_history = True
    stochastic = False

    def __init__(self):
        self.seen: list[tuple[object, set[str]]] = []

    def propose(self, ctx, k):
        visible = set(ctx.studies["dataset_id"]) | {n.dataset_id for n in ctx.neighbours}
        self.seen.append((ctx.query, visible))
        return SMALL_GRID[1].propose(ctx, k)


def test_choice_is_nested_the_query_never_takes_part(demo):
    ids = _ids(demo)
    query = ids[0]
    ctx = _context(demo, query)
    assert ctx.exact_match() is not None and ctx.exact_match().dataset_id == query
    rec = Recorder()
    AutoChoice(candidates=(rec,))._choose(ctx)
    assert rec.seen  # every inner question hides both the query and the held-out dataset
    id_of = {id(fp): d for d, fp in ctx.fingerprints.items()}
    for fp, visible in rec.seen:
        held_out = id_of[id(fp)]
        assert query not in visible and held_out not in visible
        assert held_out != query
    # reference: definition of nesting - the same choice as with the query out of the history
    chooser = AutoChoice(candidates=SMALL_GRID)
    inside = chooser._choose(ctx)
    outside = chooser._choose(_context(demo, query, exclude={query}))
    assert inside == outside


def test_inner_regret_is_zero_when_the_list_holds_the_best_trial(demo):
    ids = _ids(demo)
    ctx = _context(demo, ids[0], exclude={ids[0]})
    held = ids[1]

    class Oracle:  # proposes the held-out dataset's own best trial
        name, description, uses_history, stochastic = "oracle", "", True, False

        def propose(self, view, k):
            best = ctx.trials.rows_at(ctx.dataset_positions(held)[:1]).iloc[0]
            return [ctx.from_trial("oracle", best, ctx.neighbours[0], best["config"])]

    # reference: regret@k = (best - best of list) / (best - median) is 0 at the best
    assert inner_regret(ctx, Oracle(), held) == pytest.approx(0.0)


def test_choice_cache_hit_and_miss(demo, tmp_path):
    ids = _ids(demo)
    auto._MEMORY.clear()
    ctx = _context(demo, ids[0], exclude={ids[0]}, cache_dir=str(tmp_path))
    chooser = AutoChoice(candidates=SMALL_GRID)
    first = chooser.choose(ctx)
    files = list(tmp_path.glob("auto-*.json"))
    assert len(files) == 1 and json.loads(files[0].read_text()) == first  # miss: written
    other = next(s.name for s in SMALL_GRID if s.name != first["chosen"])
    files[0].write_text(json.dumps({**first, "chosen": other}))
    auto._MEMORY.clear()
    assert chooser.choose(ctx)["chosen"] == other  # hit: read from the file
    smaller = _context(demo, ids[0], exclude={ids[0], ids[1]}, cache_dir=str(tmp_path))
    chooser.choose(smaller)  # other studies: another key, another file
    assert len(list(tmp_path.glob("auto-*.json"))) == 2
    auto._MEMORY.clear()


def test_few_datasets_fall_back_to_the_stated_rule(demo):
    ids = _ids(demo)
    keep = ids[: auto.MIN_CHOICE_DATASETS - 1]
    ctx = _context(demo, ids[-1], exclude=set(ids) - set(keep))
    choice = AutoChoice(candidates=SMALL_GRID)._choose(ctx)
    assert choice["chosen"] == auto.FALLBACK.name
    assert choice["datasets"] == len(keep) and "fallback" in choice["rule"]
    out = AutoChoice(candidates=SMALL_GRID).propose(ctx, 3)
    assert out and all(s.strategy == "auto" and s.choice == choice for s in out)


def test_greedy_gains_add_up_to_the_objective_and_do_not_grow():
    rng = np.random.default_rng(3)
    P = rng.random((30, 8))
    w = rng.dirichlet(np.ones(8))
    order, gains, parts = greedy_steps(P, w, 6)
    # reference: the objective sum_j w_j max_{c in S} P[c, j] (Wistuba et al. 2015)
    assert sum(gains) == pytest.approx(float(P[order].max(axis=0) @ w))
    assert np.allclose(parts.sum(axis=1), gains)
    # reference: Nemhauser, Wolsey & Fisher 1978 - greedy gains of a monotone
    # submodular objective never increase
    assert all(a >= b - 1e-12 for a, b in zip(gains, gains[1:]))


def test_best_on_lists_datasets_where_it_ran_with_their_scores(demo):
    ids = _ids(demo)
    ctx = _context(demo, ids[0], exclude={ids[0]})
    frame = ctx.trials.frame.assign(key=[ctx.key(c) for c in ctx.trials.frame["config"]])
    dataset_of = dict(zip(ctx.studies["study_id"], ctx.studies["dataset_id"]))
    for s in GreedyPortfolio("p", shrink=0.5).propose(ctx, 5) + TransferForest().propose(ctx, 5):
        assert s.best_on and s.gain is not None and s.gain >= 0
        mine = frame[frame["key"] == ctx.key(s.config)]
        for b in s.best_on:  # reference: the trials themselves (mean normalised score)
            there = mine[mine["study_id"].map(dataset_of) == b["dataset_id"]]
            assert not there.empty
            assert b["normalised"] == pytest.approx(there["normalised"].mean())
        assert s.source_dataset_id == s.best_on[0]["dataset_id"]


def test_transfer_is_seeded_and_inside_the_space(demo):
    ids = _ids(demo)
    ctx = _context(demo, ids[0], exclude={ids[0]})
    a = [s.config for s in TransferForest("t1").propose(ctx, 5)]
    b = [s.config for s in TransferForest("t2").propose(ctx, 5)]
    assert a == b and len(a) == 5
    assert all(ctx.space.clip(c) == c for c in a)


def _result(means: dict[str, list[float]]) -> BacktestResult:
    rows = [{"dataset_id": f"d{i}", "name": f"d{i}", "task": "classification",
             "strategy": s, "k": 5, "regret": r}
            for s, rs in means.items() for i, r in enumerate(rs)]
    return BacktestResult("knn", (5,), list(means), {"classification": "x"},
                          pd.DataFrame(rows), {})


def test_verdict_names_the_winner_margin_and_sample_size():
    small = verdict(_result({"portfolio": [0.1, 0.3], "random": [0.4, 0.6]}))
    # reference: arithmetic - means 0.2 and 0.5, margin 0.3, 2 datasets
    assert small == ["knn classification: portfolio wins at k=5 (mean regret 0.200; 0.300 "
                     "below random) over 2 held-out datasets; warning: "
                     "small sample (< 15 datasets), the difference may be noise"]
    big = verdict(_result({"a": [0.5] * 20, "b": [0.2] * 20}))
    assert big[0].startswith("knn classification: b wins at k=5 (mean regret 0.200; 0.300 "
                             "below a) over 20") and "warning" not in big[0]


def test_choice_and_answer_read_at_most_max_pool_datasets(demo, monkeypatch):
    ids = _ids(demo)
    monkeypatch.setattr(auto, "MAX_POOL", auto.MIN_CHOICE_DATASETS + 1)
    ctx = _context(demo, ids[0], exclude={ids[0]})
    assert len(ids) - 1 > auto.MAX_POOL
    rec = Recorder()
    choice = AutoChoice(candidates=(rec,))._choose(ctx)
    # the sample is the pool; one of its datasets is held out of each inner question
    assert choice["datasets"] <= auto.MAX_POOL
    assert all(len(visible) <= auto.MAX_POOL - 1 for _, visible in rec.seen)
    out = AutoChoice(candidates=(rec,), fallback=rec).propose(ctx, 3)
    nearest = {n.dataset_id for n in ctx.neighbours[:auto.MAX_POOL]}
    assert out and rec.seen[-1][1] <= nearest


def test_the_choice_sample_is_stable_as_the_history_grows(demo, monkeypatch):
    # A history one dataset smaller stands for the history before that dataset was logged.
    ids = _ids(demo)
    monkeypatch.setattr(auto, "MAX_POOL", auto.MIN_CHOICE_DATASETS + 1)
    full = _context(demo, ids[0], exclude={ids[0]})
    pool = auto.choice_pool(full)
    assert len(pool) == auto.MAX_POOL < len(ids) - 1
    outside = next(d for d in ids[1:] if d not in pool)
    inside = pool[0]
    before_outside = _context(demo, ids[0], exclude={ids[0], outside})
    before_inside = _context(demo, ids[0], exclude={ids[0], inside})
    chooser = AutoChoice()
    # logging a dataset outside the sample keeps the sample and the cached choice valid
    assert auto.choice_pool(before_outside) == pool
    assert chooser._digest(before_outside) == chooser._digest(full)
    # one that ranks into the sample changes both
    assert inside not in auto.choice_pool(before_inside)
    assert chooser._digest(before_inside) != chooser._digest(full)
