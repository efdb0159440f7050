"""Tests of the per-solution sampler's convergence machinery: the attitude chart's Haar density, the attitude-axis move, the run-length cap."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from tumble.inference import Parameter, ParameterSpace, Uniform
from tumble.inference.local import ATTITUDE_NAMES, AttitudeAxisMove, haar_log_density, rotation_exp


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


# ---------------------------------------------------------------------------
# the Haar density of the attitude chart and the attitude-axis move
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


def test_the_default_mixture_turns_the_attitude_only_where_there_is_one():
    from tumble.inference.local import MOVE_WEIGHTS, LaplaceIndependenceMove, _moves

    with_attitude = ParameterSpace([Parameter("p", Uniform(0, 1))] + [Parameter(n, Uniform(-3, 3)) for n in ATTITUDE_NAMES])
    plain = ParameterSpace([Parameter(f"x{i}", Uniform(0, 1)) for i in range(4)])
    for space, expect in ((with_attitude, True), (plain, False)):
        cov = np.eye(4) * 0.01
        moves = _moves(LaplaceIndependenceMove(np.full(4, 0.5), cov), MOVE_WEIGHTS, space, cov)
        assert any(isinstance(m, AttitudeAxisMove) for m, _ in moves) is expect
        assert len(moves) == len(MOVE_WEIGHTS) - (0 if expect else 1)


# ---------------------------------------------------------------------------
# the default budget is a cap, not a run length
# ---------------------------------------------------------------------------
def test_the_adaptive_run_stops_when_converged_well_before_its_cap(rng):
    # a 4-dimensional correlated Gaussian (scipy.stats.multivariate_normal, the reference outside
    # the project): the run converges (>= 50 tau, R-hat, acceptance) and stops at the first check
    # that passes, far below DEFAULT_MAX_STEPS; its quantiles are the Gaussian's (scipy.stats.norm)
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
