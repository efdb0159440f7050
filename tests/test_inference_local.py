"""Tests of the per-solution sampler (tumble.inference.local) and the likelihood kernels it calls."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.spatial.transform import Rotation

from tumble.inference import IsotropicLatitude, Parameter, ParameterSpace, PeriodicUniform, Uniform
from tumble.inference.local import (
    AttitudeChart,
    LaplaceIndependenceMove,
    ModeRegion,
    direction_phase_angles,
    direction_phase_matrix,
    laplace_approximation,
    laplace_approximation_reference,
    rotation_exp,
    rotation_log,
    sample_local_mode,
)


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


def _correlated_gaussian(rng, d=5, rho=0.95):
    """A strongly correlated Gaussian with scales spanning three decades (last coordinate an angle)."""
    a = rng.normal(size=(d, d))
    q, _ = np.linalg.qr(a)
    corr = q @ np.diag(np.geomspace(1.0, 1.0 / (1 - rho) ** 2, d)) @ q.T
    sd_c = np.sqrt(np.diag(corr))
    corr = corr / np.outer(sd_c, sd_c)
    sd = np.geomspace(1e-3, 0.3, d)
    cov = corr * np.outer(sd, sd)
    mean = np.array([0.5, -1.0, 2.0, 0.3, 3.0])[:d]
    space = ParameterSpace([Parameter(f"x{i}", Uniform(-10.0, 10.0)) for i in range(d - 1)]
                           + [Parameter("angle_rad", PeriodicUniform(), "rad")])
    return mean, cov, space


class _GaussianLikelihood:
    """log N(x; mean, cov) from scipy.stats (the reference outside the project)."""

    def __init__(self, mean, cov):
        self.dist = stats.multivariate_normal(mean, cov)

    def __call__(self, x):
        return np.atleast_1d(self.dist.logpdf(np.atleast_2d(x)))


def test_laplace_covariance_of_a_gaussian_is_its_covariance(rng):
    # the inverse Hessian of a Gaussian log-density is its covariance (exact; Bishop 2006, section 4.4),
    # up to the regularising ridge 1/width^2 of the prior supports (0.2 % for the angle here)
    mean, cov, space = _correlated_gaussian(rng)
    lap = laplace_approximation(_GaussianLikelihood(mean, cov), space, mean)
    sd = np.sqrt(np.diag(cov))
    np.testing.assert_allclose(lap.covariance / np.outer(sd, sd), cov / np.outer(sd, sd), atol=4e-3)
    assert lap.n_regularised == 0


def test_hessian_stencil_matches_the_entrywise_reference(rng):
    # a non-Gaussian (Rosenbrock-like) log-density: the vectorised stencil equals the slow one
    space = ParameterSpace([Parameter("a", Uniform(-5, 5)), Parameter("b", Uniform(-5, 5)),
                            Parameter("c", Uniform(-5, 5))])

    def loglike(x):
        x = np.atleast_2d(x)
        return -(x[:, 0] - 1) ** 2 - 5 * (x[:, 1] - x[:, 0] ** 2) ** 2 - 0.5 * (x[:, 2] + x[:, 0] * x[:, 1]) ** 2

    x0 = np.array([1.0, 1.0, -1.0])
    lap = laplace_approximation(loglike, space, x0)
    ref = laplace_approximation_reference(loglike, space, x0, lap.steps)
    np.testing.assert_allclose(lap.hessian, ref, rtol=1e-7, atol=1e-7)


def test_local_sampler_recovers_a_correlated_gaussian(rng):
    # moments and quantiles against the analytic Gaussian (scipy.stats): the reference outside the project
    mean, cov, space = _correlated_gaussian(rng)
    post = sample_local_mode(_GaussianLikelihood(mean, cov), space, mean + 0.1 * np.sqrt(np.diag(cov)),
                             max_steps=3000, rng=1)
    d = post.diagnostics
    assert d.converged, d.reasons
    assert d.method == "local-mode" and d.n_ensembles >= 2
    assert d.tau_multiples >= 50 and np.all(d.rhat < 1.05)
    assert d.mode_edge_fraction <= 0.01
    s = post.samples.copy()
    s[:, -1] = mean[-1] + np.mod(s[:, -1] - mean[-1] + math.pi, 2 * math.pi) - math.pi
    sd = np.sqrt(np.diag(cov))
    n_eff = len(s) / 2.0  # thinned at tau/2
    assert np.all(np.abs(s.mean(axis=0) - mean) / sd < 5 / math.sqrt(n_eff))
    emp = np.cov(s, rowvar=False) / np.outer(sd, sd)
    np.testing.assert_allclose(emp, cov / np.outer(sd, sd), atol=0.08)
    for i in range(len(mean)):
        q = np.quantile(s[:, i], [0.15865, 0.84135])
        ref = stats.norm(mean[i], sd[i]).ppf([0.15865, 0.84135])
        np.testing.assert_allclose(q, ref, atol=0.1 * sd[i])


def test_too_small_budget_is_reported_unconverged(rng):
    mean, cov, space = _correlated_gaussian(rng)
    post = sample_local_mode(_GaussianLikelihood(mean, cov), space, mean, max_steps=60, pilot_steps=10, rng=2)
    assert not post.diagnostics.converged
    assert any("autocorrelation" in r for r in post.diagnostics.reasons)


def test_a_posterior_wider_than_its_mode_region_is_reported(rng):
    # the Laplace scale handed in is 20 times too narrow and there is no pilot: the samples fill the
    # region's edge, which must be reported (never an interval silently cut by the region)
    mean, cov, space = _correlated_gaussian(rng, d=3)
    from tumble.inference.local import LaplaceApproximation

    lap = LaplaceApproximation(mean, cov / 400.0, 0.0, -np.linalg.inv(cov / 400.0), np.ones(3), 0, "given")
    post = sample_local_mode(_GaussianLikelihood(mean, cov), space, mean, laplace=lap, pilot_steps=0,
                             max_steps=400, rng=3)
    assert not post.diagnostics.converged
    assert post.diagnostics.mode_edge_fraction > 0.01
    assert any("not contained in the mode" in r for r in post.diagnostics.reasons)


def test_independence_move_hastings_factor(rng):
    # an independence proposal equal to the target accepts every move (Tierney 1994, section 2.3.3)
    mean, cov = np.zeros(2), np.array([[1.0, 0.8], [0.8, 1.0]])
    move = LaplaceIndependenceMove(mean, cov, df=1e6, scale=1.0)
    x = move.draw(500, np.random.RandomState(1))
    target = stats.multivariate_normal(mean, cov).logpdf
    new, factor = move._propose(x, np.random.RandomState(2))
    log_alpha = target(new) - target(x) + factor
    np.testing.assert_allclose(log_alpha, 0.0, atol=1e-4)


def test_mode_region_distance_is_mahalanobis_with_wrapped_angles():
    cov = np.diag([4.0, 0.25])
    region = ModeRegion(lambda x: np.zeros(len(x)), np.array([0.0, 3.0]), cov, 9.0, np.array([np.nan, 2 * np.pi]))
    x = np.array([[2.0, 3.0], [0.0, 3.0 + 2 * np.pi + 0.5], [7.0, 3.0]])
    np.testing.assert_allclose(region.distance2(x), [1.0, 1.0, 12.25])
    out = region(x)
    assert np.isfinite(out[:2]).all() and out[2] == -np.inf and region.n_outside == 1


# ---------------------------------------------------------------------------
# the attitude chart
# ---------------------------------------------------------------------------
def test_rotation_maps_match_scipy(rng):
    # reference: scipy.spatial.transform.Rotation (rotation vectors, intrinsic z-y-z Euler angles)
    w = rng.normal(size=(20, 3))
    np.testing.assert_allclose(rotation_exp(w), Rotation.from_rotvec(w).as_matrix(), atol=1e-12)
    w_small = 0.5 * w / np.linalg.norm(w, axis=1)[:, None] * rng.uniform(0, 2.5, (20, 1))
    np.testing.assert_allclose(rotation_log(rotation_exp(w_small)), w_small, atol=1e-10)
    lon, lat, ph = rng.uniform(-3, 3, 20), rng.uniform(-1.5, 1.5, 20), rng.uniform(-3, 3, 20)
    m = direction_phase_matrix(lon, lat, ph)
    ref = Rotation.from_euler("ZYZ", np.stack([lon, math.pi / 2 - lat, ph], axis=1)).as_matrix()
    np.testing.assert_allclose(m, ref, atol=1e-12)
    back = direction_phase_angles(m)
    np.testing.assert_allclose(back[1], lat, atol=1e-10)
    np.testing.assert_allclose(np.mod(back[0] - lon + math.pi, 2 * math.pi) - math.pi, 0, atol=1e-10)
    np.testing.assert_allclose(np.mod(back[2] - ph + math.pi, 2 * math.pi) - math.pi, 0, atol=1e-10)


def test_attitude_chart_carries_the_isotropic_prior(rng):
    # the chart's prior correction times the flat prior on the cube is the Haar measure: it integrates
    # to one and gives isotropic directions (<sin^2 lat> = 1/3, common practice) with uniform phases,
    # as scipy's Haar-random rotations do
    space = ParameterSpace([Parameter("l_lon_rad", PeriodicUniform(), "rad"),
                            Parameter("l_lat_rad", IsotropicLatitude(), "rad"),
                            Parameter("phi0_rad", PeriodicUniform(), "rad"), Parameter("k", Uniform(0, 1))])
    chart = AttitudeChart(space, np.array([1.0, 0.4, -2.0, 0.5]), "l_lon_rad", "l_lat_rad", "phi0_rad")
    n = 400_000
    y = np.column_stack([rng.uniform(-math.pi, math.pi, (n, 3)), np.full(n, 0.5)])
    w = np.exp(chart.log_correction(y))
    assert w.mean() == pytest.approx(1.0, abs=0.01)
    x = chart.to_model(y)
    s2 = np.sum(w * np.sin(x[:, 1]) ** 2) / w.sum()
    ref = Rotation.random(200_000, random_state=5).as_matrix()[:, 2, 2] ** 2  # sin^2 of the z-axis latitude
    assert s2 == pytest.approx(1 / 3, abs=0.005)
    assert s2 == pytest.approx(ref.mean(), abs=0.006)
    assert abs(np.sum(w * np.cos(x[:, 2])) / w.sum()) < 0.01
    # round trip of the chart near its origin
    y0 = np.column_stack([0.3 * rng.normal(size=(10, 3)), rng.uniform(0, 1, 10)])
    np.testing.assert_allclose(chart.from_model(chart.to_model(y0)), y0, atol=1e-9)


def test_implicit_chart_changes_variables_with_the_right_density(rng):
    # g = ln(a b) replaces a: uniform draws of the chart coordinates weighted by the chart's prior
    # correction reproduce the model prior of a (Uniform(1, 3): mean 2, variance 1/3; the uniform
    # distribution's moments), and the chart round-trips
    from tumble.inference.local import ChartLikelihood, ImplicitChart

    space = ParameterSpace([Parameter("a", Uniform(1.0, 3.0)), Parameter("b", Uniform(0.5, 2.0))])

    def g(x):
        return np.log(x[:, 0] * x[:, 1])

    chart = ImplicitChart(space, np.array([2.0, 1.0]), "a", g, "ln_ab", half_width=2.0)
    n = 200_000
    y = np.column_stack([rng.uniform(chart.g0 - 2, chart.g0 + 2, n), rng.uniform(0.5, 2.0, n)])
    x, corr = chart.to_model_with_correction(y)
    w = np.where(np.isfinite(corr), np.exp(corr), 0.0)
    a = np.nan_to_num(x[:, 0])
    mean = np.sum(w * a) / w.sum()
    assert mean == pytest.approx(2.0, abs=0.01)
    assert np.sum(w * (a - mean) ** 2) / w.sum() == pytest.approx(1 / 3, abs=0.01)
    assert w.mean() == pytest.approx(1.0, abs=0.02)  # the density integrates to one over the chart
    x0 = np.array([[1.5, 0.7], [2.5, 1.9]])
    np.testing.assert_allclose(chart.to_model(chart.from_model(x0)), x0, atol=1e-9)
    # the chart's likelihood is the model's plus the correction
    ll = ChartLikelihood(lambda x: -np.sum(x**2, axis=1), chart)
    yy = chart.from_model(x0)
    np.testing.assert_allclose(ll(yy), -np.sum(x0**2, axis=1) + chart.log_correction(yy), rtol=1e-9)


# ---------------------------------------------------------------------------
# the physical model's fast likelihood against its reference, and an honest report on a small NPA case
# ---------------------------------------------------------------------------
def _sam_lightcurve(rng, n_nights=3, cadence_min=30):
    from tumble.brightness import axes_from_inertia_ratios
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    st = RotationState.from_periods(0.6, 0.9, 30.0, 5.0, "SAM", l_lon_deg=30, l_lat_deg=20)
    axes = axes_from_inertia_ratios(0.6, 0.9)
    sim = simulate_lightcurve(st, axes, DenseCampaign(2460000.5, n_nights=n_nights, hours_per_night=5,
                                                      cadence_min=cadence_min), noise=NoiseModel(0.01), rng=rng)
    truth = {"p_psi_h": 30.0, "excitation_u": (1.0 - st.id_i3) / (1.0 - st.i2_i3),
             "l_lon_rad": math.radians(30), "l_lat_rad": math.radians(20), "phi0_rad": 0.0, "psi0_rad": 0.0,
             "a_over_b": axes[0] / axes[1], "b_over_c": axes[1] / axes[2], "ln_jitter_mag": math.log(1e-3)}
    return sim.lightcurve, st, truth


@pytest.mark.parametrize("mode", ["PA", "SAM"])
def test_profiled_likelihood_matches_per_walker_reference(rng, mode):
    from tumble.model import PhysicalModel

    lc, _, _ = _sam_lightcurve(rng, n_nights=2, cadence_min=40)
    model = PhysicalModel(lc, mode, period_range_h=(1.0, 100.0))
    assert model._indicator_nuisance  # dense sessions: the diagonal fast path
    x = model.space.sample_prior(5, rng)
    fast = model._profiled(x)
    ref = model._profiled_reference(x)
    for f, r in zip(fast, ref):
        np.testing.assert_allclose(f, r, rtol=1e-10, atol=1e-12)
    model._indicator_nuisance = False  # the general batched path on the same data
    for f, r in zip(model._profiled(x), ref):
        np.testing.assert_allclose(f, r, rtol=1e-10, atol=1e-12)


def test_small_npa_case_reports_its_convergence_honestly(rng):
    # a small simulated SAM sampled from its optimum with a small budget: whatever the outcome,
    # 'converged' must be exactly the criteria the diagnostics show, and the samples stay in the mode
    from tumble.classify.rotation import optimise_state
    from tumble.model import PhysicalModel

    lc, st, truth = _sam_lightcurve(rng)
    model = PhysicalModel(lc, "SAM", p_psi_range_h=(1.0, 200.0), epoch_jd=st.epoch_jd)
    x_opt, _ = optimise_state(model, model.space.to_vector(truth), n_iter=20)
    chart = model.sampling_chart(x_opt)
    # the chart maps the optimum to itself and back (attitude vector 0, the period ratio in place of u)
    y_opt = chart.from_model(x_opt[None])
    np.testing.assert_allclose(chart.to_model(y_opt)[0], x_opt, atol=1e-8)
    post = sample_local_mode(model, model.space, x_opt, max_steps=160, pilot_steps=40, chart=chart, rng=4)
    d = post.diagnostics
    lo, hi = d.acceptance_range
    criteria = (d.tau_multiples >= d.tau_multiple and np.all((d.acceptance_fraction >= lo) & (d.acceptance_fraction <= hi))
                and np.all(d.rhat < d.rhat_max) and d.n_modes == 1 and d.mode_edge_fraction <= 0.01)
    assert d.converged == bool(criteria)
    assert d.converged == (len(d.reasons) == 0)
    assert post.names == model.space.names
    assert np.all(np.isfinite(model.space.log_prior(post.samples)))
    # the samples stay in the optimum's mode: every P_psi within the mode region's reach of the
    # optimum (its Laplace width times the region's radius); 33 points over 3 nights leave narrow
    # alias peaks of P_psi inside that width, so the simulated 30 h itself is not the check here
    from tumble.inference.local import MODE_REGION_SCALE, MODE_REGION_TAIL, laplace_approximation as lap_fn

    sd = lap_fn(model, model.space, x_opt).sd[model.space.index("p_psi_h")]
    reach = MODE_REGION_SCALE * math.sqrt(stats.chi2.ppf(1 - MODE_REGION_TAIL, model.space.ndim)) * sd
    p_psi = post["p_psi_h"]
    assert np.all(np.abs(p_psi - x_opt[model.space.index("p_psi_h")]) <= reach)


class _CountingLikelihood(_GaussianLikelihood):
    """The scipy Gaussian, counting its calls; raises after ``fail_after`` calls when given."""

    def __init__(self, mean, cov, fail_after=None):
        super().__init__(mean, cov)
        self.n_calls = 0
        self.fail_after = fail_after

    def __call__(self, x):
        self.n_calls += 1
        if self.fail_after is not None and self.n_calls > self.fail_after:
            raise FloatingPointError("the likelihood failed on purpose")
        return super().__call__(x)


def test_batched_ensembles_reproduce_the_sequential_chains(rng, monkeypatch):
    # the ensembles' likelihood requests batched into shared calls (local._run) against the slow reference
    # that runs them one after the other (local._run_reference): the same chains (each ensemble keeps its
    # own random stream; the Gaussian's rows are independent, so the values are bit-identical), about half
    # the likelihood calls with two ensembles
    from tumble.inference import local

    mean, cov, space = _correlated_gaussian(rng)
    fast_like = _CountingLikelihood(mean, cov)
    fast = sample_local_mode(fast_like, space, mean, max_steps=400, rng=7)
    monkeypatch.setattr(local, "_run", local._run_reference)
    slow_like = _CountingLikelihood(mean, cov)
    slow = sample_local_mode(slow_like, space, mean, max_steps=400, rng=7)
    np.testing.assert_array_equal(fast.samples, slow.samples)
    np.testing.assert_array_equal(fast.log_likelihood, slow.log_likelihood)
    assert fast.diagnostics.n_evaluations == slow.diagnostics.n_evaluations
    assert fast_like.n_calls < 0.6 * slow_like.n_calls


def test_a_failing_likelihood_in_batched_ensembles_is_raised_not_hung(rng):
    mean, cov, space = _correlated_gaussian(rng)
    with pytest.raises(FloatingPointError, match="on purpose"):
        sample_local_mode(_CountingLikelihood(mean, cov, fail_after=150), space, mean, max_steps=400, rng=7)
