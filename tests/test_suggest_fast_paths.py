"""The fast paths of ``suggest``: vectorised per-study normalisation and configurations
parsed only when a strategy reads them must not change any result."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy.stats import rankdata
from sklearn.preprocessing import minmax_scale

from warmstart.families import get_family
from warmstart.fingerprint import Fingerprint
from warmstart.similarity import Neighbour
from warmstart.spaces import config_key
from warmstart.strategies import STRATEGIES, SuggestContext, TrialIndex, prepare_trials
from warmstart.surrogate import fit_surrogate

FAMILY = get_family("knn")
SPACE = FAMILY.space("classification")


def _history(seed: int = 0, n_datasets: int = 6, per: int = 9):
    """Studies (alternating directions, one flat study) and their trials, with ties."""
    rng = np.random.default_rng(seed)
    studies, trials = [], []
    for d in range(n_datasets):
        sid = f"s{d}"
        studies.append({"study_id": sid, "dataset_id": f"d{d}", "family": "knn",
                        "task": "classification", "metric": "m", "label": f"study {d}",
                        "better": "lower" if d % 2 else "higher"})
        scores = np.round(rng.uniform(0, 1, per), 1)  # rounding makes ties
        if d == 3:
            scores[:] = 0.5
        for i, sc in enumerate(scores):
            trials.append({"study_id": sid, "trial_index": i, "score": float(sc),
                           "config": config_key(SPACE.sample(rng)),
                           "fit_seconds": float(rng.uniform(0.1, 2)), "status": "ok",
                           "error": None})
    trials.append(dict(trials[0], trial_index=99, status="failed", score=np.nan))
    return pd.DataFrame(studies), pd.DataFrame(trials)


@pytest.mark.parametrize("method", ["minmax", "rank"])
def test_prepare_trials_normalises_each_study_like_the_references(method):
    studies, trials = _history()
    t = prepare_trials(trials, studies, method)
    assert len(t) == len(trials) - 1  # the failed trial is dropped
    for _, st in studies.iterrows():
        got = t.loc[t["study_id"] == st["study_id"], "normalised"].to_numpy()
        s = t.loc[t["study_id"] == st["study_id"], "score"].to_numpy()
        s = -s if st["better"] == "lower" else s
        if np.ptp(s) == 0:
            want = np.ones_like(s)  # reference: common practice (a flat study is all best)
        elif method == "rank":
            want = (rankdata(s) - 1) / (s.size - 1)  # reference: scipy.stats.rankdata
        else:
            want = minmax_scale(s)  # reference: sklearn.preprocessing.minmax_scale
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)
    # reference: json.loads (Python standard library) parses the stored JSON text
    assert list(t["config"]) == [json.loads(c) for c in trials["config"][:-1]]


def _context(trials: pd.DataFrame, studies: pd.DataFrame, exact: bool) -> SuggestContext:
    query = Fingerprint({"rows": 100.0}, 1, "classification", "y", "0" * 64)
    nbs = [Neighbour(f"d{d}", f"data {d}", 0.0 if exact and d == 2 else 0.3 + 0.1 * d,
                     0.5, 1, [], []) for d in (2, 0, 1, 3, 4, 5)]
    rows = {f"d{d}": 50.0 * (d + 1) for d in range(6)}
    return SuggestContext(query=query, family=FAMILY, space=SPACE, neighbours=nbs,
                          studies=studies, trials=TrialIndex(trials, SPACE), dataset_rows=rows,
                          seed=1)


@pytest.mark.parametrize("exact", [False, True])
@pytest.mark.parametrize("name", sorted(STRATEGIES))
def test_configs_kept_as_json_text_give_the_same_suggestions(name, exact):
    studies, raw = _history(seed=3)
    parsed = prepare_trials(raw, studies)
    text = prepare_trials(raw, studies, parse_configs=False)
    assert isinstance(text["config"].iloc[0], str)
    want = [s.to_dict() for s in STRATEGIES[name].propose(_context(parsed, studies, exact), 8)]
    ctx = _context(text, studies, exact)
    got = [s.to_dict() for s in STRATEGIES[name].propose(ctx, 8)]
    assert got == want and (name in ("random", "defaults") or len(got) > 0)
    # reading every trial parses every row, as json.loads does (reference: Python json)
    assert list(ctx.trials.frame["config"]) == list(parsed["config"])
    other = _context(parsed, studies, exact)
    best_first = ctx.trials.rows_at(ctx.dataset_positions("d1"))
    assert best_first.equals(other.trials.rows_at(other.dataset_positions("d1")))
    # reference: pandas sort_values over the dataset's trials (best first, then trial order)
    want = parsed[parsed["study_id"] == "s1"].sort_values(
        ["normalised", "trial_index"], ascending=[False, True], kind="stable")
    assert best_first.equals(want)


def test_surrogate_cache_fits_once_and_a_rescored_view_keeps_parsed_rows():
    studies, raw = _history(seed=5)
    ctx = _context(prepare_trials(raw, studies, parse_configs=False), studies, False)
    pos = ctx.trials.study_positions("s0")
    configs, keys = ctx.trials.configs_at(pos), list(ctx.trials.keys_at(pos))
    fits = []

    def fit():
        fits.append(1)
        return fit_surrogate(configs, ctx.trials.column("normalised")[pos], SPACE)

    first = ctx.surrogates.predict("s0", "forest", configs, keys, fit)
    again = ctx.surrogates.predict("s0", "forest", configs[:3], keys[:3], fit)
    assert len(fits) == 1 and np.array_equal(again, first[:3])
    # reference: the surrogate's own predictions, uncached
    np.testing.assert_array_equal(first, fit().predict(configs))
    assert ctx.surrogates.section("other") is ctx.surrogates.section("other")
    view = ctx.trials.rescored(1.0 - ctx.trials.column("normalised"))
    assert view.configs_at(pos)[0] is configs[0]  # parsed once, shared
    assert view.rows_at(view.ranked_positions(["s0"]))["trial_index"].tolist() == \
        ctx.trials.rows_at(pos).sort_values(["normalised", "trial_index"], kind="stable")[
            "trial_index"].tolist()
