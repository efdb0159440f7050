"""Tests of tumble.inference: priors, parameter spaces, sampling, convergence, evidence, Bayes factors.

Every check names its outside source: a textbook formula, a published scale,
or a general-purpose reference library (scipy, emcee, dynesty).
"""

from __future__ import annotations

import math
import pickle
import warnings

import dynesty
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, special, stats

from tumble.exceptions import ConvergenceWarning, TumbleError
from tumble.inference import (
    JEFFREYS_1961,
    KASS_RAFTERY_1995,
    IsotropicLatitude,
    LogPosterior,
    LogUniform,
    Normal,
    Parameter,
    ParameterSpace,
    PeriodicUniform,
    Uniform,
    VonMises,
    bic,
    bic_log_evidence,
    jeffreys_level,
    kass_raftery_level,
    laplace_log_evidence,
    ln_bayes_factor,
    log_evidence,
    posterior_probability,
    sample_posterior,
)
from tumble.inference import diagnostics as diag
from tumble.inference.evidence import stepping_stone, thermodynamic_integral

PRIORS = [
    Uniform(-2.0, 3.0),
    LogUniform(0.5, 40.0),
    Normal(1.0, 2.0),
    Normal(1.0, 2.0, low=0.0, high=4.0),
    VonMises(1.0, 3.0),
    PeriodicUniform(0.0, 2 * np.pi),
    IsotropicLatitude(),
]

# scipy.stats equivalents (reference library) of each prior
SCIPY = [
    stats.uniform(-2.0, 5.0),
    stats.loguniform(0.5, 40.0),
    stats.norm(1.0, 2.0),
    stats.truncnorm(-0.5, 1.5, loc=1.0, scale=2.0),
    stats.vonmises(3.0, loc=1.0),
    stats.uniform(0.0, 2 * np.pi),
    None,  # cos(b)/2: checked by quadrature below
]


# ---------------------------------------------------------------------------
# priors and spaces
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("prior, ref", list(zip(PRIORS, SCIPY)), ids=lambda p: type(p).__name__)
def test_prior_density_matches_scipy_and_is_normalised(prior, ref):
    lo, hi = prior.low, prior.high
    lo = max(lo, -50.0)
    hi = min(hi, 50.0)
    x = np.linspace(lo + 1e-6, hi - 1e-6, 101)
    if ref is not None:
        # scipy.stats (reference library) densities; von Mises in scipy is on [-pi+loc, pi+loc)
        np.testing.assert_allclose(np.exp(prior.log_pdf(x)), ref.pdf(x) if not isinstance(prior, VonMises)
                                   else ref.pdf(prior.wrap(x)), rtol=1e-10, atol=1e-14)
    # a proper density integrates to one (definition; scipy.integrate.quad)
    total, _ = integrate.quad(lambda v: float(np.exp(prior.log_pdf(v))), lo, hi, limit=200)
    assert total == pytest.approx(1.0, abs=1e-7)


@pytest.mark.parametrize("prior", PRIORS, ids=lambda p: type(p).__name__)
def test_prior_ppf_inverts_cdf(prior):
    # inverse-CDF sampling (definition): cdf(ppf(u)) = u, and the cdf is the integral of the pdf
    u = np.linspace(0.01, 0.99, 25)
    x = prior.ppf(u)
    np.testing.assert_allclose(prior.cdf(x), u, atol=1e-8)
    lo = max(prior.low, -30.0)
    c, _ = integrate.quad(lambda v: float(np.exp(prior.log_pdf(v))), lo, float(x[10]), limit=200)
    assert c == pytest.approx(u[10], abs=1e-7)


def test_prior_samples_follow_the_density(rng):
    # Kolmogorov-Smirnov test against scipy.stats (reference library)
    for prior, ref in zip(PRIORS, SCIPY):
        if ref is None or isinstance(prior, VonMises):
            continue
        draws = prior.ppf(rng.uniform(size=4000))
        assert stats.kstest(draws, ref.cdf).pvalue > 1e-3


def _space():
    return ParameterSpace([
        Parameter("period_h", LogUniform(2.0, 50.0), "h"),
        Parameter("phase_rad", PeriodicUniform(), "rad"),
        Parameter("lat_rad", IsotropicLatitude(), "rad"),
        Parameter("slope_mag_per_deg", Normal(0.03, 0.01), "mag/deg"),
        Parameter("b_over_a", Uniform(0.3, 1.0)),
        Parameter("angle_rad", VonMises(0.5, 2.0), "rad"),
    ])


def test_space_round_trips(rng):
    space = _space()
    x = space.sample_prior(50, rng)
    # dict <-> vector
    np.testing.assert_array_equal(space.to_vector(space.to_dict(x)), x)
    # vector <-> unit cube (cdf and inverse cdf)
    np.testing.assert_allclose(space.from_unit_cube(space.to_unit_cube(x)), x, atol=1e-8)
    assert space.names[0] == "period_h" and space.units[0] == "h"
    with pytest.raises(TumbleError):
        space.to_vector({"period_h": 1.0})


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(-20, 60, allow_nan=False), min_size=6, max_size=6))
def test_fast_log_prior_equals_reference(values):
    # the grouped fast path against the plain sum of one-dimensional densities
    space = _space()
    x = np.array(values)[None, :]
    fast, ref = space.log_prior(x), space.log_prior_reference(space.wrap(x))
    if np.isfinite(ref[0]):
        np.testing.assert_allclose(fast, ref, rtol=1e-12)
    else:
        assert fast[0] == -np.inf


def test_log_prior_accepts_any_leading_shape(rng):
    # one vector, a batch and a (chains, walkers) block all agree with the reference sum
    space = _space()
    x = space.sample_prior(12, rng).reshape(3, 4, 6)
    ref = space.log_prior_reference(x)
    np.testing.assert_allclose(space.log_prior(x), ref, rtol=1e-12)
    assert np.ndim(space.log_prior(x[0, 0])) == 0
    assert float(space.log_prior(x[0, 0])) == pytest.approx(float(ref[0, 0]))
    outside = x[0, 0].copy()
    outside[4] = 2.0  # b_over_a beyond its uniform prior
    assert float(space.log_prior(outside)) == -np.inf


def test_wrap_folds_periodic_only():
    space = _space()
    x = np.array([[3.0, 7.0, 0.1, 0.02, 0.5, -4.0]])
    w = space.wrap(x)
    assert w[0, 1] == pytest.approx(7.0 - 2 * np.pi)
    assert w[0, 5] == pytest.approx(-4.0 + 2 * np.pi)
    np.testing.assert_array_equal(w[0, [0, 2, 3, 4]], x[0, [0, 2, 3, 4]])


# ---------------------------------------------------------------------------
# log-posterior
# ---------------------------------------------------------------------------
def _gauss_loglike(x):
    return -0.5 * np.sum(x * x, axis=-1)


def test_log_posterior_tempering_pickling_and_errors():
    space = ParameterSpace([Parameter("a", Uniform(-5, 5)), Parameter("b", Uniform(-5, 5))])
    post = LogPosterior(_gauss_loglike, space, beta=0.3)
    x = np.array([[0.5, -1.0], [9.0, 0.0]])
    out = post(x)
    # power posterior (Friel & Pettitt 2008, eq. 2): log prior + beta log L
    assert out[0] == pytest.approx(-math.log(100) + 0.3 * _gauss_loglike(x[0]))
    assert out[1] == -np.inf
    assert post(x[0]) == pytest.approx(out[0])  # single-vector call gives a float
    clone = pickle.loads(pickle.dumps(post))
    np.testing.assert_array_equal(clone(x), out)
    bad = LogPosterior(lambda z: np.full(len(z), np.nan), space)
    with pytest.raises(TumbleError, match="nan"):
        bad(x)


def test_periodic_window_is_one_normalised_period():
    # a periodic coordinate is sampled on one period centred where asked; the density there
    # is the prior's and integrates to one (scipy.integrate.quad)
    space = ParameterSpace([Parameter("phi", VonMises(0.3, 2.0))])
    post = LogPosterior(lambda z: np.zeros(len(z)), space, periodic_centre=[3.0])
    lo = 3.0 - np.pi
    total, _ = integrate.quad(lambda v: float(np.exp(post.log_prior(np.array([[v]]))[0])), lo, lo + 2 * np.pi, limit=200)
    assert total == pytest.approx(1.0, abs=1e-9)
    assert post.log_prior(np.array([[lo - 0.01]]))[0] == -np.inf
    assert post.log_prior(np.array([[lo + 0.01]]))[0] == pytest.approx(space.log_prior(np.array([[lo + 0.01]]))[0])
    assert post.into_window(np.array([[lo - 0.5]]))[0, 0] == pytest.approx(lo - 0.5 + 2 * np.pi)


# ---------------------------------------------------------------------------
# diagnostics
# ---------------------------------------------------------------------------
def _rhat_reference(chains):
    """Slow, literal split R-hat of Gelman et al. (2013, BDA3 eqs. 11.2-11.4), each half pooled over walkers."""
    seqs = []
    for c in chains:
        h = c.shape[0] // 2
        seqs.append(c[:h].reshape(-1, c.shape[-1]))
        seqs.append(c[c.shape[0] - h:].reshape(-1, c.shape[-1]))
    n = min(len(s) for s in seqs)
    m = len(seqs)
    out = []
    for p in range(chains[0].shape[-1]):
        means = [sum(s[i, p] for i in range(n)) / n for s in seqs]
        grand = sum(means) / m
        b = n / (m - 1) * sum((mu - grand) ** 2 for mu in means)
        w = sum(sum((s[i, p] - mu) ** 2 for i in range(n)) / (n - 1) for s, mu in zip(seqs, means)) / m
        out.append(math.sqrt(((n - 1) / n * w + b / n) / w))
    return np.array(out)


def test_split_rhat_matches_reference(rng):
    chains = [rng.normal(size=(40, 4, 2)), rng.normal(loc=0.5, size=(40, 4, 2))]
    np.testing.assert_allclose(diag.split_rhat(chains), _rhat_reference(chains), rtol=1e-10)


def test_integrated_time_of_ar1(rng):
    # AR(1) x_t = phi x_{t-1} + e_t has tau = (1 + phi) / (1 - phi) (Sokal 1997, eq. 2.20 example)
    phi, n, k = 0.8, 20000, 8
    e = rng.normal(size=(n, k))
    x = np.empty((n, k))
    x[0] = e[0] / math.sqrt(1 - phi**2)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + e[t]
    tau = diag.integrated_time(x[:, :, None])[0]
    assert tau == pytest.approx((1 + phi) / (1 - phi), rel=0.1)


def test_walker_clusters_and_acceptance():
    means = np.array([[0.0, 0.0], [0.1, 0.0], [10.0, 0.0], [10.2, 0.1]])
    labels = diag.cluster_walkers(means, np.array([1.0, 1.0]))
    assert labels.tolist() == [0, 0, 1, 1]
    # circular distance: 0.1 and 2 pi - 0.1 are neighbours on a period of 2 pi
    labels = diag.cluster_walkers(np.array([[0.1], [2 * np.pi - 0.1]]), np.array([0.1]), np.array([2 * np.pi]))
    assert labels.tolist() == [0, 0]
    chain = np.zeros((5, 2, 1))
    chain[1:, 0, 0] = np.arange(1, 5)  # walker 0 moves every step, walker 1 never
    np.testing.assert_array_equal(diag.acceptance_from_chain(chain), [1.0, 0.0])


# ---------------------------------------------------------------------------
# sampling
# ---------------------------------------------------------------------------
_COV = np.array([[1.0, 0.6, 0.0], [0.6, 2.0, 0.3], [0.0, 0.3, 0.5]])
_PREC = np.linalg.inv(_COV)


def _corr_loglike(x):
    return -0.5 * np.einsum("ki,ij,kj->k", x - 1.0, _PREC, x - 1.0)


def _box_space():
    return ParameterSpace([Parameter("u", Uniform(-30, 30), "m"), Parameter("v", Uniform(-30, 30), "s"),
                           Parameter("w", Uniform(-30, 30))])


def test_correlated_gaussian_posterior_converges_and_matches_moments():
    post = sample_posterior(_corr_loglike, _box_space(), start=[1.0, 1.0, 1.0], rng=11, n_walkers=16, first_block=600)
    d = post.diagnostics
    assert d.converged, d.reasons
    assert not d.multimodal and d.n_modes == 1
    assert np.all(d.rhat < 1.05) and np.all((d.acceptance_fraction > 0.15) & (d.acceptance_fraction < 0.7))
    assert d.n_steps - d.n_burn >= 50 * d.max_autocorr_time_steps
    # analytic moments of the bivariate normal; tolerance ~5 Monte Carlo standard errors
    n_eff = post.n_samples / 2.0
    np.testing.assert_allclose(post.samples.mean(axis=0), [1.0, 1.0, 1.0], atol=5 * math.sqrt(2.0 / n_eff))
    np.testing.assert_allclose(np.cov(post.samples.T), _COV, atol=0.15)
    # 68 % interval of a normal: median -+ 0.9945 sd (scipy.stats.norm.ppf(0.84))
    iv = post.interval("v")
    z = stats.norm.ppf(0.84)
    assert iv.minus == pytest.approx(z * math.sqrt(2.0), rel=0.1) and iv.unit == "s"
    assert np.allclose(post.log_likelihood, _corr_loglike(post.samples))


def test_same_seed_gives_identical_samples():
    kw = dict(start=[1.0, 1.0, 1.0], n_walkers=16, max_steps=300, first_block=300, warn=False)
    a = sample_posterior(_corr_loglike, _box_space(), rng=5, **kw)
    b = sample_posterior(_corr_loglike, _box_space(), rng=5, **kw)
    c = sample_posterior(_corr_loglike, _box_space(), rng=6, **kw)
    assert a.samples.tobytes() == b.samples.tobytes()
    assert a.log_prob.tobytes() == b.log_prob.tobytes()
    assert a.samples.tobytes() != c.samples.tobytes()


class _SerialPool:
    """Minimal stand-in for a process pool (anything with ``map``)."""

    def __init__(self):
        self.calls = 0

    def map(self, fn, chunks):
        self.calls += 1
        return [fn(c) for c in chunks]


def test_pool_and_moves_are_passed_through():
    import emcee

    kw = dict(start=[1.0, 1.0, 1.0], n_walkers=16, max_steps=100, first_block=100, warn=False)
    plain = sample_posterior(_corr_loglike, _box_space(), rng=2, **kw)
    pool = _SerialPool()
    pooled = sample_posterior(_corr_loglike, _box_space(), rng=2, pool=pool, **kw)
    assert pool.calls > 0
    assert pooled.samples.tobytes() == plain.samples.tobytes()  # chunked evaluation changes nothing
    de = sample_posterior(_corr_loglike, _box_space(), rng=2, moves=emcee.moves.DEMove(), **kw)
    assert de.samples.shape[1] == 3 and de.samples.tobytes() != plain.samples.tobytes()


def test_too_short_budget_is_reported_unconverged():
    with pytest.warns(ConvergenceWarning, match="autocorrelation"):
        post = sample_posterior(_corr_loglike, _box_space(), start=[1.0, 1.0, 1.0], rng=1, n_walkers=16, max_steps=120)
    assert not post.converged
    assert any("autocorrelation" in r for r in post.diagnostics.reasons)
    assert post.diagnostics.n_steps == 120


def _bimodal_loglike(x):
    # equal mixture of two unit normals 20 sd apart in the first coordinate
    r2 = x[:, 1] ** 2 + x[:, 2] ** 2
    return np.logaddexp(-0.5 * ((x[:, 0] + 10.0) ** 2 + r2), -0.5 * ((x[:, 0] - 10.0) ** 2 + r2))


def test_bimodal_posterior_is_reported_multimodal():
    with pytest.warns(ConvergenceWarning, match="modes"):
        post = sample_posterior(_bimodal_loglike, _box_space(), start=[[-10.0, 0.0, 0.0], [10.0, 0.0, 0.0]], rng=3,
                                n_walkers=16, max_steps=4000, first_block=600)
    d = post.diagnostics
    assert not d.converged and d.multimodal and d.n_modes == 2
    assert sorted(np.round(d.mode_centres[:, 0]).tolist()) == [-10.0, 10.0]
    assert d.mode_ensembles in (((0,), (1,)), ((1,), (0,)))  # each ensemble stayed in its mode
    assert np.max(d.rhat) > 1.05


def test_bimodal_from_prior_start_is_not_converged():
    # walkers drawn from the whole prior land in both modes and cannot cross between them
    with pytest.warns(ConvergenceWarning):
        post = sample_posterior(_bimodal_loglike, _box_space(), rng=4, n_walkers=16, max_steps=3000, first_block=600)
    assert not post.converged and post.diagnostics.multimodal


def test_periodic_parameter_across_the_wrap_point():
    # von Mises likelihood centred on the wrap point: circular mean pi and mean resultant length
    # I1(k)/I0(k) (Mardia & Jupp 2000, eq. 3.5.37), with a uniform angle prior
    kappa = 4.0
    space = ParameterSpace([Parameter("phi", PeriodicUniform(-np.pi), "rad"), Parameter("y", Uniform(-5, 5)),
                            Parameter("z", Uniform(-5, 5))])

    def loglike(x):
        return kappa * np.cos(x[:, 0] - np.pi) - 0.5 * x[:, 1] ** 2 - 0.5 * (x[:, 2] / 0.5) ** 2

    post = sample_posterior(loglike, space, start=[3.1, 0.0, 0.0], rng=8, n_walkers=16, start_scale=0.05)
    assert post.converged, post.diagnostics.reasons
    phi = post["phi"]
    assert np.all((phi >= -np.pi) & (phi < np.pi))
    assert abs(diag.circular_mean(phi, 2 * np.pi)) == pytest.approx(np.pi, abs=0.05)
    r = np.hypot(np.cos(phi).mean(), np.sin(phi).mean())
    assert r == pytest.approx(special.i1(kappa) / special.i0(kappa), abs=0.02)
    iv = post.interval("phi")
    assert -np.pi <= iv.median < np.pi and iv.low < iv.median < iv.high


class _Interrupt(Exception):
    pass


class _FailingLike:
    """Gaussian log-likelihood that raises after a number of calls (simulates a killed run)."""

    def __init__(self, fail_after):
        self.calls, self.fail_after = 0, fail_after

    def __call__(self, x):
        self.calls += 1
        if self.fail_after is not None and self.calls > self.fail_after:
            raise _Interrupt
        return _corr_loglike(x)


def test_checkpoint_resume_reproduces_uninterrupted_run(tmp_path):
    kw = dict(start=[1.0, 1.0, 1.0], n_walkers=16, max_steps=900, first_block=300, warn=False)
    full = sample_posterior(_FailingLike(None), _box_space(), rng=21, checkpoint=tmp_path / "a.npz", **kw)
    path = tmp_path / "b.npz"
    with pytest.raises(_Interrupt):  # dies during the second block, after the first checkpoint
        sample_posterior(_FailingLike(2 * 2 * 300 + 1 + 150), _box_space(), rng=21, checkpoint=path, **kw)
    assert path.exists()
    resumed = sample_posterior(_FailingLike(None), _box_space(), rng=999, checkpoint=path, resume=True, **kw)
    assert resumed.diagnostics.n_steps == full.diagnostics.n_steps
    assert resumed.samples.tobytes() == full.samples.tobytes()


# ---------------------------------------------------------------------------
# evidence
# ---------------------------------------------------------------------------
def _linear_gaussian(n_data, n_par, seed):
    """Bayesian linear regression y = X w + noise, w ~ N(0, s0^2 I): ln Z closed form (Bishop 2006, eq. 3.86)."""
    g = np.random.default_rng(seed)
    t = np.linspace(-1, 1, n_data)
    design = np.column_stack([t**k for k in range(n_par)])
    sigma, s0 = 0.3, 3.0
    y = design @ g.normal(0, 1, n_par) + sigma * g.normal(size=n_data)
    const = -n_data * math.log(sigma) - 0.5 * n_data * math.log(2 * math.pi)

    def loglike(w):
        r = y - w @ design.T
        return -0.5 * np.sum(r * r, axis=-1) / sigma**2 + const

    space = ParameterSpace([Parameter(f"w{i}", Normal(0.0, s0)) for i in range(n_par)])
    # Bishop (2006) eq. 3.86 with alpha = 1/s0^2, beta = 1/sigma^2
    alpha, beta = 1 / s0**2, 1 / sigma**2
    a_mat = alpha * np.eye(n_par) + beta * design.T @ design
    m_n = beta * np.linalg.solve(a_mat, design.T @ y)
    e_mn = beta / 2 * np.sum((y - design @ m_n) ** 2) + alpha / 2 * m_n @ m_n
    ln_z = (n_par / 2 * math.log(alpha) + n_data / 2 * math.log(beta) - e_mn
            - 0.5 * np.linalg.slogdet(a_mat)[1] - n_data / 2 * math.log(2 * math.pi))
    # cross-check of the closed form: y ~ N(0, sigma^2 I + s0^2 X X^T) (scipy.stats reference)
    cov = sigma**2 * np.eye(n_data) + s0**2 * design @ design.T
    assert ln_z == pytest.approx(stats.multivariate_normal(np.zeros(n_data), cov).logpdf(y), abs=1e-8)
    return loglike, space, ln_z


@pytest.mark.parametrize("n_data, n_par, seed", [(20, 2, 1), (60, 4, 2)])
def test_evidence_matches_linear_gaussian(n_data, n_par, seed):
    loglike, space, ln_z = _linear_gaussian(n_data, n_par, seed)
    ev = log_evidence(loglike, space, rng=seed, n_replicas=3, steps_per_rung=160)
    assert ev.reliable, ev.reasons
    # within 3 of its own one-sigma errors, and the error itself useful (< 0.3 nats)
    assert abs(ev.ln_z - ln_z) < 3 * ev.ln_z_err
    assert ev.ln_z_err < 0.3
    assert ev.betas[0] == 0.0 and ev.betas[-1] == 1.0


@pytest.mark.slow
@pytest.mark.parametrize("n_data, n_par, seed", [(20, 2, 1), (60, 4, 2), (200, 6, 3)])
def test_evidence_matches_linear_gaussian_default_settings(n_data, n_par, seed):
    loglike, space, ln_z = _linear_gaussian(n_data, n_par, seed)
    ev = log_evidence(loglike, space, rng=seed)
    assert abs(ev.ln_z - ln_z) < 3 * ev.ln_z_err and ev.ln_z_err < 0.3


def test_laplace_is_exact_for_linear_gaussian():
    # the Laplace approximation is exact for a Gaussian posterior (Kass & Raftery 1995, eq. 4)
    loglike, space, ln_z = _linear_gaussian(40, 3, 4)
    est = laplace_log_evidence(loglike, space, np.zeros(3))
    assert est.reliable
    assert est.ln_z == pytest.approx(ln_z, abs=1e-4)


def _banana_problem():
    """3-parameter curved ("banana") likelihood in a uniform box, a non-Gaussian toy."""
    space = ParameterSpace([Parameter("x1", Uniform(-6, 6)), Parameter("x2", Uniform(-3, 11)),
                            Parameter("x3", Uniform(-1, 1))])

    def loglike(x):
        x = np.atleast_2d(x)
        q = (x[:, 0] / 1.5) ** 2 + ((x[:, 1] - 0.3 * x[:, 0] ** 2) / 0.5) ** 2 + (x[:, 2] / 0.2) ** 2
        return -0.5 * q + 4.0

    return loglike, space


def test_evidence_matches_dynesty_on_banana():
    loglike, space = _banana_problem()
    # dynesty static nested sampling (Speagle 2020, MNRAS 493, 3132), general-purpose reference library
    ns = dynesty.NestedSampler(lambda v: float(loglike(v)[0]), space.from_unit_cube, space.ndim, nlive=500,
                               rstate=np.random.default_rng(7))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ns.run_nested(dlogz=0.1, print_progress=False)
    ref = float(ns.results.logz[-1])
    ev = log_evidence(loglike, space, rng=7, n_replicas=3, steps_per_rung=160)
    assert abs(ev.ln_z - ref) < 0.3
    # both against the exact value: the shear x2 -> x2 - 0.3 x1^2 has unit Jacobian, so
    # Z = e^4 (2 pi)^{3/2} (1.5 * 0.5 * 0.2) / box volume (box truncation negligible)
    exact = 4.0 + 1.5 * math.log(2 * math.pi) + math.log(1.5 * 0.5 * 0.2) - math.log(12 * 14 * 2)
    assert abs(ref - exact) < 0.3 and abs(ev.ln_z - exact) < 3 * ev.ln_z_err


@pytest.mark.slow
def test_evidence_matches_dynesty_on_sinusoid():
    rng = np.random.default_rng(5)
    t = np.sort(rng.uniform(0, 10, 30))
    y = np.sin(2 * np.pi * 0.8 * t + 2.0) + 0.3 + 0.3 * rng.standard_normal(30)
    space = ParameterSpace([Parameter("amp", Uniform(0, 3)), Parameter("freq", Uniform(0.7, 0.9), "1/d"),
                            Parameter("phase", PeriodicUniform(0, 2 * np.pi), "rad"),
                            Parameter("offset", Uniform(-2, 2))])

    def loglike(th):
        th = np.atleast_2d(th)
        m = th[:, :1] * np.sin(2 * np.pi * th[:, 1:2] * t + th[:, 2:3]) + th[:, 3:4]
        return -0.5 * np.sum(((y - m) / 0.3) ** 2, axis=1) - 30 * math.log(0.3 * math.sqrt(2 * math.pi))

    ns = dynesty.NestedSampler(lambda v: float(loglike(v)[0]), space.from_unit_cube, 4, nlive=500, periodic=[2],
                               rstate=np.random.default_rng(1))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ns.run_nested(dlogz=0.01, print_progress=False)
    ev = log_evidence(loglike, space, rng=2)
    assert abs(ev.ln_z - ns.results.logz[-1]) < 0.3


def test_stepping_stone_and_thermodynamic_kernels_against_direct_sums(rng):
    # slow references: the mean of exp(dbeta lnL) directly, and the plain trapezoid sum
    betas = np.array([0.0, 0.1, 0.5, 1.0])
    samples = [rng.normal(-3.0, 1.0, 500) for _ in betas]
    ln_r, _ = stepping_stone(betas, samples)
    for k in range(3):
        direct = math.log(np.mean(np.exp((betas[k + 1] - betas[k]) * samples[k])))
        assert ln_r[k] == pytest.approx(direct, rel=1e-12)
    e = np.array([-10.0, -6.0, -4.0, -3.0])
    v = np.zeros(4)
    plain = sum((betas[k + 1] - betas[k]) * (e[k] + e[k + 1]) / 2 for k in range(3))
    assert thermodynamic_integral(betas, e, v, log_spacing=False) == pytest.approx(plain)


def test_bic():
    # Schwarz (1978): BIC = k ln n - 2 ln Lhat; ln Z ~ -BIC/2 (Kass & Raftery 1995, eq. 9)
    assert bic(-10.0, 3, 100) == pytest.approx(3 * math.log(100) + 20.0)
    assert bic_log_evidence(-10.0, 3, 100) == pytest.approx(-0.5 * (3 * math.log(100) + 20.0))


# ---------------------------------------------------------------------------
# Bayes factors
# ---------------------------------------------------------------------------
def test_posterior_probability():
    # posterior odds = Bayes factor x prior odds (Kass & Raftery 1995, eq. 1)
    assert posterior_probability(0.0, 0.2) == pytest.approx(0.2)
    assert posterior_probability(math.log(3.0), 0.5) == pytest.approx(0.75)
    assert posterior_probability(math.log(19.0), 0.05) == pytest.approx(0.5)
    assert posterior_probability(800.0, 0.1) == 1.0 and posterior_probability(-800.0, 0.1) == 0.0
    np.testing.assert_allclose(posterior_probability(np.array([0.0, math.log(3.0)]), 0.5), [0.5, 0.75])
    with pytest.raises(TumbleError):
        posterior_probability(1.0, 1.0)


def test_kass_raftery_levels_at_the_published_edges():
    # Kass & Raftery (1995) section 3.2 on 2 ln B: 0-2, 2-6, 6-10, >10
    two_ln_b = np.array([0.0, 1.99, 2.0, 5.99, 6.0, 9.99, 10.0, 40.0])
    assert kass_raftery_level(two_ln_b / 2).tolist() == [0, 0, 1, 1, 2, 2, 3, 3]
    assert kass_raftery_level(-3.5) == 2  # strength regardless of direction: 2|ln B| = 7
    assert KASS_RAFTERY_1995.edges == (2.0, 6.0, 10.0) and "1995" in KASS_RAFTERY_1995.source
    # Jeffreys (1961), Appendix B on log10 B: 0.5, 1, 1.5, 2
    assert jeffreys_level(np.log(10.0) * np.array([0.4, 0.7, 1.2, 1.7, 2.5])).tolist() == [0, 1, 2, 3, 4]
    assert JEFFREYS_1961.n_levels == 5


def test_ln_bayes_factor_propagates_errors():
    bf = ln_bayes_factor(-10.0, -13.0, 0.3, 0.4)
    assert bf.ln_b == pytest.approx(3.0) and bf.ln_b_err == pytest.approx(0.5) and bf.two_ln_b == 6.0
