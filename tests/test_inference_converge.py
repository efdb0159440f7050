"""Tests of the moves, charts and diagnostics that make the per-solution NPA posterior converge."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from tumble.inference import Parameter, ParameterSpace, Uniform
from tumble.inference.local import (
    ATTITUDE_NAMES,
    AttitudeAxisMove,
    LogCoordinateChart,
    haar_log_density,
    rotation_exp,
)
from tumble.inference.space import LogUniform


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


# ---------------------------------------------------------------------------
# the Haar density and the attitude-axis move
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
    for q in (0.25, 0.5, 0.75):
        # weighted quantile of the importance sample against scipy's
        order = np.argsort(ang)
        cw = np.cumsum(weight[order]) / weight.sum()
        assert ang[order][np.searchsorted(cw, q)] == pytest.approx(np.quantile(ref, q), abs=0.02)
    # and the Haar density integrates to 8 pi^2 over the ball (the group's volume in these units)
    assert weight.mean() * (2 * math.pi) ** 3 * len(w) / n == pytest.approx(8 * math.pi**2, rel=0.01)


def _mh_steps(move, x, log_target, n_steps, seed, with_factor=True):
    random = np.random.RandomState(seed)
    lp = log_target(x)
    for _ in range(n_steps):
        new, factor = move._propose(x, random)
        lp_new = log_target(new)
        log_alpha = lp_new - lp + (factor if with_factor else 0.0)
        ok = np.log(random.uniform(size=len(x))) < log_alpha
        x = np.where(ok[:, None], new, x)
        lp = np.where(ok, lp_new, lp)
    return x


def test_attitude_axis_move_leaves_the_haar_measure_invariant():
    # start from exact Haar draws (scipy), apply the move as a Metropolis-Hastings kernel whose target
    # is the Haar density in exponential coordinates: the angle distribution must stay Haar's
    # (Kolmogorov-Smirnov against the analytic CDF). Without the Hastings factor the same kernel
    # drifts towards the flat density in w (angles pile towards pi): the factor is what is tested.
    w0 = Rotation.random(20_000, random_state=11).as_rotvec()
    move = AttitudeAxisMove([0, 1, 2], [0.3, -0.2, 0.9], scale_rad=0.7)

    def log_target(w):
        return haar_log_density(w)

    with_factor = _mh_steps(move, w0, log_target, 40, seed=5)
    without = _mh_steps(move, w0, log_target, 40, seed=5, with_factor=False)
    p_with = stats.kstest(np.linalg.norm(with_factor, axis=1), _haar_angle_cdf).pvalue
    p_without = stats.kstest(np.linalg.norm(without, axis=1), _haar_angle_cdf).pvalue
    assert p_with > 1e-3
    assert p_without < 1e-6
    # the move turns about its axis only: R' R^T is a rotation about the axis
    r0, r1 = rotation_exp(w0[:50]), rotation_exp(with_factor[:50])
    rel = Rotation.from_matrix(r1 @ np.swapaxes(r0, 1, 2)).as_rotvec()
    moved = np.linalg.norm(rel, axis=1) > 1e-9
    axis = np.array([0.3, -0.2, 0.9]) / np.linalg.norm([0.3, -0.2, 0.9])
    cross = np.linalg.norm(np.cross(rel[moved], axis), axis=1)
    np.testing.assert_allclose(cross, 0.0, atol=1e-8)


def test_attitude_axis_move_is_built_from_the_covariance_of_the_attitude_block():
    space = ParameterSpace([Parameter("p", Uniform(0, 1))] + [Parameter(n, Uniform(-3, 3)) for n in ATTITUDE_NAMES])
    axis = np.array([1.0, 2.0, -2.0]) / 3.0
    cov = np.eye(4) * 1e-4
    cov[1:, 1:] += 0.25 * np.outer(axis, axis)
    move = AttitudeAxisMove.from_covariance(space, cov)
    assert abs(abs(move.axis @ axis) - 1.0) < 1e-9
    assert move.scale_rad == pytest.approx(math.sqrt(0.25 + 1e-4), rel=1e-6)
    assert list(move.idx) == [1, 2, 3]
    assert AttitudeAxisMove.from_covariance(ParameterSpace([Parameter("p", Uniform(0, 1))]), np.eye(1)) is None


# ---------------------------------------------------------------------------
# the log-coordinate chart
# ---------------------------------------------------------------------------
def test_log_chart_changes_variables_with_the_right_density(rng):
    # a log-uniform parameter becomes a flat coordinate (zero correction); a uniform one keeps its
    # prior through the correction: uniform draws of the chart coordinates weighted by exp(correction)
    # reproduce Uniform(1, 3)'s mean 2 and variance 1/3 and LogUniform(1, 4)'s mean 3/ln 4 (the
    # distributions' moments)
    space = ParameterSpace([Parameter("a", Uniform(1.0, 3.0)), Parameter("b", LogUniform(1.0, 4.0)),
                            Parameter("c", Uniform(-1.0, 1.0))])
    chart = LogCoordinateChart(space, ("a", "b"))
    assert chart.space.names == ("ln_a", "ln_b", "c")
    n = 400_000
    y = np.column_stack([rng.uniform(0.0, math.log(3.0), n), rng.uniform(0.0, math.log(4.0), n), rng.uniform(-1, 1, n)])
    corr = chart.log_correction(y)
    w = np.exp(corr)
    x = chart.to_model(y)
    a, b = x[:, 0], x[:, 1]
    assert w.mean() == pytest.approx(1.0, abs=0.01)  # the density integrates to one over the chart
    mean_a = np.sum(w * a) / w.sum()
    assert mean_a == pytest.approx(2.0, abs=0.01)
    assert np.sum(w * (a - mean_a) ** 2) / w.sum() == pytest.approx(1 / 3, abs=0.01)
    # a LogUniform parameter: the correction is zero and b = e^y has mean (4 - 1) / ln 4
    chart_b = LogCoordinateChart(space, ("b",))
    np.testing.assert_allclose(chart_b.log_correction(chart_b.from_model(x[:10])), 0.0, atol=1e-12)
    assert b.mean() == pytest.approx(3.0 / math.log(4.0), rel=0.01)
    x0 = np.array([[1.5, 2.0, 0.3], [2.9, 1.1, -0.5]])
    np.testing.assert_allclose(chart.to_model(chart.from_model(x0)), x0, rtol=1e-12)


def test_log_chart_refuses_a_parameter_that_can_be_zero():
    from tumble.exceptions import TumbleError

    space = ParameterSpace([Parameter("c", Uniform(-1.0, 1.0))])
    with pytest.raises(TumbleError, match="log coordinate"):
        LogCoordinateChart(space, ("c",))


# ---------------------------------------------------------------------------
# the random-direction move
# ---------------------------------------------------------------------------
def _correlated_cov(rng, d=6, rho=0.9):
    a = rng.normal(size=(d, d))
    q, _ = np.linalg.qr(a)
    vals = np.geomspace(1e-4, 1.0, d)
    cov = (q * vals) @ q.T
    sd = np.sqrt(np.diag(cov))
    return cov, sd


def test_random_direction_move_accepts_everything_on_its_own_gaussian(rng):
    # a Gaussian equal to the move's own mean and covariance: every conditional along a direction is
    # exactly the proposal, so log alpha = 0 (the independence sampler's property, Tierney 1994,
    # section 2.3.3; the target's density from scipy.stats.multivariate_normal)
    from tumble.inference.local import RandomDirectionMove

    cov, _ = _correlated_cov(rng)
    mean = rng.normal(size=len(cov))
    target = stats.multivariate_normal(mean, cov).logpdf
    for dim in (1, 3):
        move = RandomDirectionMove(mean, cov, dim=dim, scale=1.0)
        x = stats.multivariate_normal(mean, cov).rvs(400, random_state=1)
        new, factor = move._propose(x, np.random.RandomState(2))
        np.testing.assert_allclose(target(new) - target(x) + factor, 0.0, atol=1e-6)
        # the whitened point changed within the drawn frame only, to the drawn coordinates
        frames = move.frames(len(x), np.random.RandomState(3))
        c_new = np.random.RandomState(4).standard_normal((len(x), dim))
        moved, _, _ = move.set_coordinates(x, frames, c_new)
        z0 = np.linalg.solve(move.chol, (x - mean).T).T
        z1 = np.linalg.solve(move.chol, (moved - mean).T).T
        np.testing.assert_allclose(np.einsum("nd,ndk->nk", z1, frames), c_new, atol=1e-9)
        outside = (z1 - z0) - np.einsum("ndk,nk->nd", frames, np.einsum("nd,ndk->nk", z1 - z0, frames))
        np.testing.assert_allclose(outside, 0.0, atol=1e-9)


def test_random_direction_move_leaves_a_heavy_tailed_target_invariant(rng):
    # a Student-t target (scipy.stats.multivariate_t) is not the move's Gaussian: started from exact
    # draws, the Metropolis-Hastings kernel keeps each coordinate's t marginal (Kolmogorov-Smirnov
    # against scipy.stats.t); without the Hastings factor the draws shrink towards the proposal
    from tumble.inference.local import RandomDirectionMove

    d, df = 4, 4.0
    cov = np.array([[1.0, 0.8, 0.0, 0.1], [0.8, 1.0, 0.3, 0.0], [0.0, 0.3, 1.0, -0.5], [0.1, 0.0, -0.5, 1.0]])
    t = stats.multivariate_t(np.zeros(d), cov, df=df)
    x0 = t.rvs(20_000, random_state=7)
    move = RandomDirectionMove(np.zeros(d), cov, dim=1, scale=1.0)
    with_factor = _mh_steps(move, x0, t.logpdf, 30, seed=8)
    without = _mh_steps(move, x0, t.logpdf, 30, seed=8, with_factor=False)
    for i in range(d):
        marginal = stats.t(df, scale=math.sqrt(cov[i, i])).cdf
        assert stats.kstest(with_factor[:, i], marginal).pvalue > 1e-3
    assert min(stats.kstest(without[:, i], stats.t(df, scale=math.sqrt(cov[i, i])).cdf).pvalue for i in range(d)) < 1e-6
