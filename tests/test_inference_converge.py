"""Tests of the per-solution sampler's convergence machinery: the attitude chart's Haar density, the run-length cap."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from tumble.inference.local import haar_log_density


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


# ---------------------------------------------------------------------------
# the Haar density of the attitude chart
# ---------------------------------------------------------------------------
def _haar_angle_cdf(t):
    # the rotation angle of a Haar-random rotation has density (1 - cos t) / pi on [0, pi]
    # (Miles 1965, Biometrika 52, 636), so its CDF is (t - sin t) / pi
    return (t - np.sin(t)) / math.pi


def test_haar_density_matches_scipy_random_rotations(rng):
    # reference: scipy's Haar-random rotations. Importance weights exp(haar_log_density) of uniform
    # draws in the ball |w| < pi reproduce the angle distribution of scipy's rotations
    n = 400_000
    w = rng.uniform(-math.pi, math.pi, (n, 3))
    w = w[np.linalg.norm(w, axis=1) < math.pi]
    weight = np.exp(haar_log_density(w))
    ang = np.linalg.norm(w, axis=1)
    ref = np.linalg.norm(Rotation.random(200_000, random_state=3).as_rotvec(), axis=1)
    assert stats.kstest(ref[:20_000], _haar_angle_cdf).pvalue > 1e-3  # scipy's rotations follow Miles' law
    for q in (0.25, 0.5, 0.75):
        # weighted quantile of the importance sample against scipy's
        order = np.argsort(ang)
        cw = np.cumsum(weight[order]) / weight.sum()
        assert ang[order][np.searchsorted(cw, q)] == pytest.approx(np.quantile(ref, q), abs=0.02)
    # and the Haar density integrates to 8 pi^2 over the ball (the group's volume in these units)
    assert weight.mean() * (2 * math.pi) ** 3 * len(w) / n == pytest.approx(8 * math.pi**2, rel=0.01)


# ---------------------------------------------------------------------------
# the default budget is a cap, not a run length
# ---------------------------------------------------------------------------
def test_the_adaptive_run_stops_when_converged_well_before_its_cap(rng):
    # a 4-dimensional correlated Gaussian (scipy.stats.multivariate_normal, the reference outside
    # the project): the run converges (>= 50 tau, R-hat, acceptance) and stops at the first check
    # that passes, far below DEFAULT_MAX_STEPS; its quantiles are the Gaussian's (scipy.stats.norm)
    from tumble.inference import Parameter, ParameterSpace, Uniform
    from tumble.inference.local import DEFAULT_MAX_STEPS, sample_local_mode
    from tumble.inference.sampling import default_n_walkers

    d = 4
    a = rng.normal(size=(d, d))
    cov = a @ a.T / d + 0.1 * np.eye(d)
    mean = rng.normal(size=d)
    space = ParameterSpace([Parameter(f"x{i}", Uniform(-20.0, 20.0)) for i in range(d)])
    dist = stats.multivariate_normal(mean, cov)

    def loglike(x):
        return np.atleast_1d(dist.logpdf(np.atleast_2d(x)))

    post = sample_local_mode(loglike, space, mean, rng=3)
    diag = post.diagnostics
    assert diag.converged, diag.reasons
    assert diag.tau_multiples >= 50
    assert diag.n_steps + diag.pilot_steps < DEFAULT_MAX_STEPS / 2
    assert diag.n_evaluations < DEFAULT_MAX_STEPS * default_n_walkers(d) * 2 / 2
    sd = np.sqrt(np.diag(cov))
    for i in range(d):
        q = np.quantile(post.samples[:, i], [0.15865, 0.84135])
        np.testing.assert_allclose(q, stats.norm(mean[i], sd[i]).ppf([0.15865, 0.84135]), atol=0.15 * sd[i])
