"""The one Gaussian-process factory shared by Bayesian optimisation and the surrogates."""

from __future__ import annotations

import numpy as np
import pytest

from warmstart.bayes import make_surrogate
from warmstart.families import get_family
from warmstart.gp import gaussian_process
from warmstart.surrogate import fit_surrogate


def _matern52(X: np.ndarray, Y: np.ndarray, ell: float) -> np.ndarray:
    # reference: Rasmussen & Williams 2006, eq. 4.17 (Matern, nu = 5/2):
    # k(r) = (1 + sqrt(5) r + 5 r^2 / 3) exp(-sqrt(5) r), r the length-scaled distance
    r = np.sqrt((((X[:, None, :] - Y[None, :, :]) / ell) ** 2).sum(-1))
    return (1 + np.sqrt(5) * r + 5 * r ** 2 / 3) * np.exp(-np.sqrt(5) * r)


@pytest.mark.parametrize("ell", [0.5, 1.0])
def test_kernel_is_constant_times_matern52_plus_white_noise(ell):
    rng = np.random.default_rng(0)
    X, Y = rng.random((6, 3)), rng.random((4, 3))
    kernel = gaussian_process(3, seed=0, length_scale=ell).kernel
    np.testing.assert_allclose(kernel(X, Y), _matern52(X, Y, ell), rtol=1e-12)
    # white noise adds its level (1e-2) on the diagonal of k(X, X) only
    np.testing.assert_allclose(kernel(X), _matern52(X, X, ell) + 1e-2 * np.eye(6),
                               rtol=1e-12)


def test_bayes_and_surrogate_use_their_own_settings_of_the_factory():
    gp = make_surrogate(4, seed=7)
    assert gp.n_restarts_optimizer == 2 and gp.random_state == 7 and gp.normalize_y
    np.testing.assert_array_equal(gp.kernel.k1.k2.length_scale, np.full(4, 0.5))
    space = get_family("svm_rbf").space("classification")
    rng = np.random.default_rng(1)
    configs = [space.sample(rng) for _ in range(12)]
    sur = fit_surrogate(configs, rng.random(12), space, kind="gp", seed=3)
    assert sur.model.n_restarts_optimizer == 0 and sur.model.random_state == 3
    np.testing.assert_array_equal(sur.model.kernel.k1.k2.length_scale,
                                  np.ones(space.width))
    assert np.all((sur.predict(configs) >= 0) & (sur.predict(configs) <= 1))
