"""Bayesian optimisation: expected improvement, decoding, perturbation, convergence."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from warmstart.bayes import BayesianOptimizer, expected_improvement, from_unit, perturb
from warmstart.families import FAMILIES, TASKS, get_family
from warmstart.spaces import FLOAT, INT


@pytest.mark.parametrize("mu,sigma,best", [(0.3, 0.2, 0.5), (1.0, 0.5, 0.2), (0.0, 1e-3, 0.0),
                                           (-2.0, 3.0, 1.0)])
def test_expected_improvement_matches_numerical_integral(mu, sigma, best):
    # reference: Jones, Schonlau & Welch 1998, eq. 15: EI = E[max(Y - best, 0)] for
    # Y ~ N(mu, sigma^2); checked against scipy.integrate.quad of that expectation
    want, _ = integrate.quad(lambda y: (y - best) * stats.norm.pdf(y, mu, sigma), best,
                             mu + 12 * sigma)
    got = expected_improvement(np.array([mu]), np.array([sigma]), best)[0]
    assert got == pytest.approx(max(want, 0.0), rel=1e-6, abs=1e-12)


def test_expected_improvement_without_uncertainty_is_the_gain():
    ei = expected_improvement(np.array([0.7, 0.2]), np.array([0.0, 0.0]), 0.5)
    np.testing.assert_allclose(ei, [0.2, 0.0])  # reference: Jones et al. 1998, sigma = 0


def test_expected_improvement_at_the_incumbent():
    # reference: at mu = best, EI = sigma * phi(0) = sigma / sqrt(2 pi)
    ei = expected_improvement(np.array([1.0]), np.array([2.0]), 1.0)[0]
    assert ei == pytest.approx(2.0 / math.sqrt(2 * math.pi))


@given(u=st.floats(0, 1))
@settings(max_examples=60, deadline=None)
def test_from_unit_inverts_unit(u):
    for fam in FAMILIES.values():
        for task in TASKS:
            for p in fam.space(task):
                if p.kind in (FLOAT, INT):
                    value = from_unit(p, u)
                    assert p.problem(value) is None
                    if p.kind == FLOAT:
                        assert p.unit(value) == pytest.approx(u, abs=1e-9)


@given(seed=st.integers(0, 10_000), scale=st.floats(0.01, 1.0))
@settings(max_examples=40, deadline=None)
def test_perturbed_configs_are_valid(seed, scale):
    rng = np.random.default_rng(seed)
    for fam in FAMILIES.values():
        for task in TASKS:
            space = fam.space(task)
            start = space.sample(rng)
            near = perturb(space, start, rng, scale=scale)
            assert space.validate(near) == near


def test_perturb_follows_conditions():
    space = get_family("random_forest").space("classification")
    rng = np.random.default_rng(0)
    base = {**space.defaults(), "bootstrap": True, "max_samples": 0.5}
    outs = [perturb(space, base, rng, switch=0.5) for _ in range(200)]
    assert all(("max_samples" in c) == c["bootstrap"] for c in outs)
    assert any(not c["bootstrap"] for c in outs) and any(c["bootstrap"] for c in outs)


def test_bayes_converges_on_a_smooth_objective():
    # A known optimum: log10(C) = 2 with balanced class weights, fit_intercept ignored.
    space = get_family("linear").space("classification")

    def score(c):
        return -(math.log10(c["C"]) - 2.0) ** 2 + (0.5 if c["class_weight"] else 0.0)

    opt = BayesianOptimizer(space, seed=0)
    configs, scores = [], []
    for _ in range(14):
        c = opt.propose(configs, scores)
        configs.append(c)
        scores.append(score(c))
    best = configs[int(np.argmax(scores))]
    assert abs(math.log10(best["C"]) - 2.0) < 0.3 and best["class_weight"] == "balanced"
    # the same trials give the same proposal (determinism)
    assert opt.propose(configs, scores) == BayesianOptimizer(space, 0).propose(configs, scores)


def test_failed_trials_do_not_stop_the_surrogate():
    space = get_family("svm_rbf").space("regression")
    rng = np.random.default_rng(1)
    configs = [space.sample(rng) for _ in range(5)]
    nxt = BayesianOptimizer(space, seed=1).propose(configs, [0.1, None, 0.3, None, 0.2])
    assert space.validate(nxt) == nxt
