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
