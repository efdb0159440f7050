"""The Laplace approximation where the data leave a direction unconstrained (tumble.inference.local)."""

from __future__ import annotations

import numpy as np

from tumble.inference import Parameter, ParameterSpace, Uniform
from tumble.inference.local import laplace_approximation

#: width of the one-dimensional ridge the likelihood leaves (parameter units)
RIDGE_SIGMA = 0.01


def _ridge(x):
    """log L of data that fix y - x only: flat along the direction (1, 1)."""
    x = np.atleast_2d(x)
    return -0.5 * ((x[:, 1] - x[:, 0] - 5.0) / RIDGE_SIGMA) ** 2


def test_an_unconstrained_direction_is_limited_by_the_first_prior_it_meets():
    # x ~ U(0, 1) and y = x + 5 +- sigma with a wide flat prior on y: the posterior's exact moments are
    # var x = 1/12 (the uniform distribution's variance, w^2 / 12; common practice), var y = 1/12 +
    # sigma^2 and corr(x, y) = 1 / sqrt(1 + 12 sigma^2). The Laplace covariance must keep the ridge's
    # proportions: before, each parameter was clipped at its own prior's width separately, so y kept
    # the variance of the ridge of the prior widths (about 1, twelve times too broad) while x was cut
    # to 1/12 -- a period riding on such a direction got an interval of the whole prior.
    space = ParameterSpace([Parameter("x", Uniform(0.0, 1.0)), Parameter("y", Uniform(0.0, 100.0))])
    lap = laplace_approximation(_ridge, space, np.array([0.5, 5.5]))
    var = np.diag(lap.covariance)
    np.testing.assert_allclose(var, [1.0 / 12.0, 1.0 / 12.0 + RIDGE_SIGMA**2], rtol=0.1)
    corr = lap.covariance[0, 1] / np.sqrt(var[0] * var[1])
    assert corr > 0.99
    # the difference y - x keeps the likelihood's own width (the constrained direction is untouched)
    g = np.array([-1.0, 1.0])
    assert np.sqrt(g @ lap.covariance @ g) < 3 * RIDGE_SIGMA
    assert lap.n_regularised == 1
