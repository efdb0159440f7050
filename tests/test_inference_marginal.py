"""Tests of the jitter-marginal likelihood, the optimum's polish and the solution-mode sampling tail.

References outside the project: scipy.integrate.quad (the jitter integral), scipy.stats (analytic
Gaussian and banana targets with known moments), the model's own likelihood (the slow reference).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from tumble.inference import Parameter, ParameterSpace, Uniform
from tumble.inference.local import FixedCoordinateChart, polish_mode, sample_local_mode
from tumble.inference.marginal import JITTER_PARAMETER, JitterMarginalLikelihood


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


def _sam_model(rng, n_nights=3, cadence_min=30, noise_mag=0.01):
    """A small simulated SAM and its physical model (inertia 0.6 : 0.9 : 1, P_psi 30 h, P_phi 5 h)."""
    from tumble.brightness import axes_from_inertia_ratios
    from tumble.dynamics import RotationState
    from tumble.model import PhysicalModel
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    st = RotationState.from_periods(0.6, 0.9, 30.0, 5.0, "SAM", l_lon_deg=30, l_lat_deg=20)
    axes = axes_from_inertia_ratios(0.6, 0.9)
    sim = simulate_lightcurve(st, axes, DenseCampaign(2460000.5, n_nights=n_nights, hours_per_night=5,
                                                      cadence_min=cadence_min), noise=NoiseModel(noise_mag), rng=rng)
    truth = {"p_psi_h": 30.0, "excitation_u": (1.0 - st.id_i3) / (1.0 - st.i2_i3),
             "l_lon_rad": math.radians(30), "l_lat_rad": math.radians(20), "phi0_rad": 0.0, "psi0_rad": 0.0,
             "a_over_b": axes[0] / axes[1], "b_over_c": axes[1] / axes[2], "ln_jitter_mag": math.log(1e-3)}
    model = PhysicalModel(sim.lightcurve, "SAM", p_psi_range_h=(1.0, 200.0), epoch_jd=st.epoch_jd)
    return model, model.space.to_vector(truth), sim.lightcurve


def test_jitter_nodes_match_the_models_own_likelihood(rng):
    # fast kernel (per-session matrix products) and the general batched path against the model itself
    model, x_true, _ = _sam_model(rng, n_nights=2, cadence_min=40)
    lik = JitterMarginalLikelihood(model, n_nodes=16)
    x = np.vstack([x_true, model.space.sample_prior(4, rng)])
    ref = lik.node_log_likelihood_reference(x)
    np.testing.assert_allclose(lik.node_log_likelihood(x), ref, rtol=1e-10, atol=1e-8)
    lik.sessions = None  # the general path (phase-slope columns, sparse bands)
    np.testing.assert_allclose(lik.node_log_likelihood(x), ref, rtol=1e-10, atol=1e-8)


@pytest.mark.parametrize("noise_mag", [0.01, 0.05])
def test_jitter_marginal_equals_adaptive_quadrature(rng, noise_mag):
    # ln of int L(x, s) ds / (s_hi - s_lo) by scipy.integrate.quad (adaptive Gauss-Kronrod) through the
    # model's likelihood: at the truth (the data want no jitter: a plateau against the lower bound) and
    # at states that fit badly (a narrow peak at a large jitter)
    model, x_true, _ = _sam_model(rng, noise_mag=noise_mag)
    lik = JitterMarginalLikelihood(model)
    k = model.space.index(JITTER_PARAMETER)
    lo, hi = lik.nodes[0], lik.nodes[-1]
    states = np.vstack([x_true, x_true + np.r_[0.3, 0.0, 0.1, 0.0, 0.2, 0.0, 0.0, 0.0, 0.0],
                        model.space.sample_prior(1, rng)])
    fast = lik(states)
    for x, value in zip(states, fast):
        nodes = lik.node_log_likelihood(x[None])[0]
        peak = lik.nodes[int(np.argmax(nodes))]
        top = float(np.max(nodes))

        def integrand(s, x=x, top=top):
            xs = x.copy()
            xs[k] = s
            return math.exp(float(model(xs[None])[0]) - top)

        val, _ = integrate.quad(integrand, lo, hi, points=[peak], limit=500, epsabs=0, epsrel=1e-10)
        assert value == pytest.approx(top + math.log(val / (hi - lo)), abs=1e-3)


def test_jitter_draws_follow_their_conditional_and_carry_the_models_likelihood(rng):
    model, x_true, _ = _sam_model(rng, noise_mag=0.03)
    lik = JitterMarginalLikelihood(model)
    k = model.space.index(JITTER_PARAMETER)
    x = x_true + np.r_[0.2, 0.0, 0.05, 0.0, 0.1, 0.0, 0.0, 0.0, 0.0]  # a misfit: the jitter is measured
    xs = np.repeat(x[None], 4000, axis=0)
    s, ll = lik.draw_jitter(xs, 7)
    check = xs[:5].copy()
    check[:, k] = s[:5]
    np.testing.assert_allclose(ll[:5], model(check), rtol=1e-10, atol=1e-8)
    # the mean and sd of the draws against the conditional density integrated by scipy.integrate.quad
    lo, hi = lik.nodes[0], lik.nodes[-1]
    top = float(np.max(lik.node_log_likelihood(x[None])))

    def dens(v):
        xv = x.copy()
        xv[k] = v
        return math.exp(float(model(xv[None])[0]) - top)

    peak = lik.nodes[int(np.argmax(lik.node_log_likelihood(x[None])[0]))]
    z = integrate.quad(dens, lo, hi, points=[peak], limit=500)[0]
    mean = integrate.quad(lambda v: v * dens(v), lo, hi, points=[peak], limit=500)[0] / z
    var = integrate.quad(lambda v: (v - mean) ** 2 * dens(v), lo, hi, points=[peak], limit=500)[0] / z
    sd = math.sqrt(var)
    h = lik.nodes[1] - lik.nodes[0]
    # the draws are exact on the grid up to the cell width (uniform within a cell: variance + h^2/12)
    assert abs(s.mean() - mean) < 5 * math.sqrt((var + h * h / 12) / len(s)) + 0.05 * h
    assert math.sqrt(s.var()) == pytest.approx(math.sqrt(var + h * h / 12), rel=0.1)
    assert sd > 0


def _gaussian_space(d):
    return ParameterSpace([Parameter(f"x{i}", Uniform(-50.0, 50.0)) for i in range(d)])


def test_polish_reaches_the_top_of_a_correlated_gaussian():
    # the mode of N(mean, cov) is its mean; the gain is the log-density difference (scipy.stats)
    mean = np.array([1.0, -2.0, 0.5])
    chol = np.array([[1.0, 0.0, 0.0], [0.95, 0.3, 0.0], [0.0, 0.3, 0.4]]) * 0.2
    cov = chol @ chol.T  # correlation 0.95 between the first two
    dist = stats.multivariate_normal(mean, cov)
    start = mean + np.array([0.3, 0.1, -0.2])
    pol = polish_mode(lambda x: np.atleast_1d(dist.logpdf(np.atleast_2d(x))), _gaussian_space(3), start)
    sd = np.sqrt(np.diag(cov))
    np.testing.assert_allclose((pol.x - mean) / sd, 0.0, atol=1e-3)
    assert pol.log_posterior_gain == pytest.approx(dist.logpdf(mean) - dist.logpdf(start), rel=1e-6)


def test_polish_keeps_a_start_at_the_top():
    dist = stats.multivariate_normal(np.zeros(2), np.eye(2))
    pol = polish_mode(lambda x: np.atleast_1d(dist.logpdf(np.atleast_2d(x))), _gaussian_space(2), np.zeros(2))
    assert pol.log_posterior_gain == 0.0
    np.testing.assert_array_equal(pol.x, np.zeros(2))


class _MarginalOfThree:
    """The marginal of (x0, x1) of a 3-D Gaussian (scipy.stats); the third column is ignored."""

    def __init__(self, mean, cov):
        self.dist = stats.multivariate_normal(mean[:2], cov[:2, :2])

    def __call__(self, x):
        return np.atleast_1d(self.dist.logpdf(np.atleast_2d(x)[:, :2]))


def test_sampler_with_a_coordinate_integrated_out_recovers_the_marginal():
    # a likelihood that has integrated out its third coordinate: sampled through a chart without it,
    # the two others have the marginal's mean and covariance (scipy.stats.multivariate_normal)
    mean = np.array([0.4, -1.0, 3.0])
    cov = np.array([[0.04, 0.03, 0.01], [0.03, 0.09, 0.0], [0.01, 0.0, 1.0]])
    space = _gaussian_space(3)
    chart = FixedCoordinateChart(space, "x2", 0.0)
    np.testing.assert_array_equal(chart.to_model(chart.from_model(np.array([[1.0, 2.0, 0.0]]))), [[1.0, 2.0, 0.0]])
    assert chart.space.names == ("x0", "x1")
    post = sample_local_mode(_MarginalOfThree(mean, cov), space, mean, chart=chart, max_steps=2000, rng=5)
    d = post.diagnostics
    assert d.converged, d.reasons
    assert post.samples.shape[1] == 3 and np.all(post.samples[:, 2] == 0.0)
    s = post.samples[:, :2]
    sd = np.sqrt(np.diag(cov[:2, :2]))
    n_eff = len(s) / 2.0  # thinned at tau/2
    assert np.all(np.abs(s.mean(axis=0) - mean[:2]) / sd < 5 / math.sqrt(n_eff))
    np.testing.assert_allclose(np.cov(s, rowvar=False) / np.outer(sd, sd), cov[:2, :2] / np.outer(sd, sd), atol=0.08)


def test_local_sampler_on_a_banana_has_its_known_moments():
    # the "twisted Gaussian" of Haario, Saksman & Tamminen (1999, Comput. Stat. 14, 375):
    # x0 ~ N(0, 10^2), x1 = y + b (x0^2 - 100) with y ~ N(0, 1); E[x1] = 0, Var[x1] = 1 + 2 b^2 10^4
    b = 0.01
    space = ParameterSpace([Parameter("x0", Uniform(-80.0, 80.0)), Parameter("x1", Uniform(-80.0, 80.0))])
    norm0, norm1 = stats.norm(0.0, 10.0), stats.norm(0.0, 1.0)

    def loglike(x):
        x = np.atleast_2d(x)
        return norm0.logpdf(x[:, 0]) + norm1.logpdf(x[:, 1] - b * (x[:, 0] ** 2 - 100.0))

    post = sample_local_mode(loglike, space, np.array([0.0, -1.0]), max_steps=4000, rng=9)
    s = post.samples
    n_eff = len(s) / 2.0
    assert abs(s[:, 0].mean()) < 5 * 10.0 / math.sqrt(n_eff)
    assert abs(s[:, 1].mean()) < 5 * math.sqrt(3.0) / math.sqrt(n_eff)
    assert s[:, 0].std() == pytest.approx(10.0, rel=0.1)
    assert s[:, 1].var() == pytest.approx(1.0 + 2.0 * b**2 * 1e4, rel=0.2)


def test_solution_mode_tail_reports_honestly_and_draws_the_jitter(rng):
    # the route's sampling tail on a small simulated SAM: the jitter is drawn per sample (not held),
    # the stored log-likelihood is the model's at each sample, and 'converged' is exactly the criteria
    from tumble.classify.rotation import optimise_state, sample_solution_mode

    model, x_true, lc = _sam_model(rng)
    x_opt, _ = optimise_state(model, x_true, n_iter=20)
    post = sample_solution_mode(model, x_opt, span_d=lc.span_d, max_steps=200, rng=4)
    d = post.diagnostics
    assert d.converged == (len(d.reasons) == 0)
    assert d.polish_gain >= 0.0
    k = model.space.index(JITTER_PARAMETER)
    assert np.unique(post.samples[:, k]).size > 10
    idx = np.linspace(0, len(post.samples) - 1, 6).astype(int)
    np.testing.assert_allclose(post.log_likelihood[idx], model(post.samples[idx]), rtol=1e-9, atol=1e-7)
    assert np.all(np.isfinite(model.space.log_prior(post.samples)))


def test_a_refused_state_voids_only_its_own_row(rng):
    # a state the closed form refuses (within SEPARATRIX_TOLERANCE of the SAM/LAM separatrix) among valid ones:
    # -inf on its row, and the other rows equal to their values without it (the batched ensembles of
    # tumble.inference.local._run rely on it: a shared call is the sum of its parts); the model's own
    # likelihood (the slow reference) still refuses the whole batch
    from tumble.dynamics import SEPARATRIX_TOLERANCE
    from tumble.model import _inertia_from_ratios

    model, x_true, _ = _sam_model(rng, n_nights=2, cadence_min=40)
    lik = JitterMarginalLikelihood(model, n_nodes=16)
    sp = model.space
    bad = x_true.copy()
    i1, i2 = _inertia_from_ratios(bad[sp.index("a_over_b")], bad[sp.index("b_over_c")])
    # SAM: I_d = 1 - u (1 - I2); u just below 1 puts I_d 0.1 tolerance above I2
    bad[sp.index("excitation_u")] = 1.0 - 0.1 * SEPARATRIX_TOLERANCE / (1.0 - i2)
    good = np.vstack([x_true, sp.sample_prior(3, rng)])
    alone = lik.node_log_likelihood(good)
    mixed = lik.node_log_likelihood(np.vstack([good[:2], bad, good[2:]]))
    assert np.all(np.isneginf(mixed[2]))
    np.testing.assert_array_equal(np.delete(mixed, 2, axis=0), alone)
    assert np.all(np.isneginf(model(np.vstack([good, bad]))))
