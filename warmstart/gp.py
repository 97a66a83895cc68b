"""The Gaussian-process regressor used by Bayesian optimisation and the per-study surrogates.

Both model a score over the unit-cube encoding of a search space
(:meth:`warmstart.spaces.SearchSpace.encode`) with scikit-learn's
``GaussianProcessRegressor``: a constant times a Matern 5/2 kernel with one length scale
per encoded column (ARD), plus white noise for the noise of cross-validated scores. The
kernel follows Snoek, Larochelle & Adams (2012), who recommend Matern 5/2 over the
squared exponential for hyperparameter response surfaces.
"""

from __future__ import annotations

import numpy as np
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

# Inputs live in [0, 1], so length scales are bounded to [0.01, 100] of that unit;
# targets are standardised (normalize_y), so the amplitude and noise bounds are fractions
# of the scores' variance.
LENGTH_SCALE_BOUNDS = (1e-2, 1e2)
AMPLITUDE_BOUNDS = (1e-2, 1e2)
NOISE_BOUNDS = (1e-6, 1.0)


def gaussian_process(width: int, seed: int, length_scale: float = 0.5,
                     restarts: int = 2) -> GaussianProcessRegressor:
    """An unfitted GP regressor: constant x Matern 5/2 (ARD) + white noise.

    Parameters
    ----------
    width : int
        Number of encoded input columns (one length scale each).
    seed : int
        ``random_state`` of the optimiser's restarts.
    length_scale : float
        Starting length scale of every column, in units of the [0, 1] encoding.
    restarts : int
        Extra optimiser starts from random hyperparameters (``n_restarts_optimizer``):
        more is steadier on a few points, and costs a fit each.
    """
    kernel = (ConstantKernel(1.0, AMPLITUDE_BOUNDS)
              * Matern(length_scale=np.full(width, float(length_scale)),
                       length_scale_bounds=LENGTH_SCALE_BOUNDS, nu=2.5)
              + WhiteKernel(1e-2, NOISE_BOUNDS))
    return GaussianProcessRegressor(kernel=kernel, normalize_y=True,
                                    n_restarts_optimizer=restarts, random_state=seed)


__all__ = ["gaussian_process"]
