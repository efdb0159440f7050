"""Tests of tumble.model: the exact linear marginal likelihood and the physical light-curve models."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tumble.model import (
    DEFAULT_PHASE_DEG,
    FourierBasis,
    FourierVariant,
    PhysicalModel,
    fit_linear,
    linear_log_evidence,
    linear_log_evidence_reference,
    nuisance_design,
    prepare_linear,
    viewing_geometry,
)
from tumble.exceptions import TumbleError
from tumble.photometry import LightCurve


def _lc(rng, n=40, sparse=False, phase=False, directions=False):
    t = 2460000.0 + np.sort(rng.uniform(0, 3, n))
    sess = np.full(n, -1) if sparse else (t - t[0]).astype(int)
    y = 0.2 * np.cos(2 * np.pi * t / 0.3) + 0.05 * rng.standard_normal(n) + np.where(sess >= 0, 0.1 * sess, 0.0)
    err = 0.05 * rng.uniform(0.8, 1.2, n)
    kw = {}
    if phase:
        kw["phase_deg"] = np.linspace(5.0, 15.0, n)
    if directions:
        kw["sun_dir"] = np.tile([1.0, 0.0, 0.0], (n, 1))
        a = math.radians(25.0)
        kw["obs_dir"] = np.tile([math.cos(a), math.sin(a), 0.0], (n, 1))
    return LightCurve.from_arrays(t, y, err, session=sess, light_time_corrected=True, min_points=5, **kw)


@pytest.mark.parametrize("sparse,phase,kappa_min", [(False, False, 0.0), (True, True, 0.0), (False, False, 1.3),
                                                    (True, False, 3.0)])
def test_linear_evidence_matches_brute_force_integral(rng, sparse, phase, kappa_min):
    # Exact marginal likelihood of Bayesian linear regression with a conjugate normal-inverse-gamma
    # prior (O'Hagan & Forster 2004, Kendall's Advanced Theory of Statistics 2B, section 11;
    # Bishop 2006, PRML, eq. 3.86): the fast projected/Cholesky kernel against the textbook
    # Gaussian integral (dense covariance, slogdet) with numerical quadrature over the error scale.
    # With kappa_min > 0 the scale prior is truncated and the closed form gains a regularised incomplete
    # gamma factor (scipy.special.gammainc); the quadrature then simply starts at ln kappa_min.
    # kappa_min = 3 puts the bound far above the fitted scale (the series branch of the log).
    lc = _lc(rng, sparse=sparse, phase=phase)
    data = prepare_linear(lc, kappa_min=kappa_min)
    basis = FourierBasis.build([FourierVariant(2, True), FourierVariant(1, False), FourierVariant(2, False, 1),
                                FourierVariant(1, False, 2, pure_f2=True)])
    f = np.array([1 / 0.3, 1.1 / 0.3])
    fast = linear_log_evidence(data, basis, f, np.array([0.7, 0.9]))
    for i, (ff, f2) in enumerate(zip(f, [0.7, 0.9])):
        x = basis.design(data, [ff], [f2])[0] / data.sw[:, None]
        for v, cols in enumerate(basis.columns):
            ref = linear_log_evidence_reference(lc.reduced_mag, lc.err, data.z, x[:, cols], basis.sigma[cols],
                                                n_kappa=1000 if kappa_min == 0 else 8000, kappa_min=kappa_min)
            assert fast[i, v] == pytest.approx(ref, abs=2e-3)


def test_evidence_prefers_the_true_frequency_and_order(rng):
    # Occam's razor of the marginal likelihood (MacKay 2003, Information Theory, Inference and
    # Learning Algorithms, ch. 28): a single sinusoid is better explained by H=1 than by H=6.
    lc = _lc(rng, n=80)
    data = prepare_linear(lc)
    basis = FourierBasis.build([FourierVariant(1, False), FourierVariant(6, True)])
    f = np.linspace(3.0, 3.7, 301)
    lz = linear_log_evidence(data, basis, f)
    assert abs(f[np.argmax(lz[:, 0])] - 1 / 0.3) < 0.01
    i = int(np.argmax(lz[:, 0]))
    assert lz[i, 0] > lz[i, 1]


def test_design_matches_direct_trigonometry(rng):
    # The angle-addition recurrence against direct np.cos/np.sin (common practice), and the drift
    # polynomials (Bonnet's recurrence, degree 5) against scipy.special.eval_legendre (reference library).
    from scipy.special import eval_legendre

    lc = _lc(rng, n=30)
    data = prepare_linear(lc)
    basis = FourierBasis.build([FourierVariant(3, 5, 2)])
    f1, f2 = 2.7, 0.61
    x = basis.design(data, [f1], [f2])[0] / data.sw[:, None]
    t = data.t_d
    cols = []
    for j in range(1, 4):
        c, s = np.cos(2 * np.pi * j * f1 * t), np.sin(2 * np.pi * j * f1 * t)
        cols += [c, s]
        for d in range(1, 6):
            cols += [c * eval_legendre(d, data.tau), s * eval_legendre(d, data.tau)]
    for j, k in basis.combos:
        ph = 2 * np.pi * (j * f1 + k * f2) * t
        cols += [np.cos(ph), np.sin(ph)]
    np.testing.assert_allclose(x, np.stack(cols, axis=1), atol=1e-9)
    assert not np.any(basis.combos[:, 0] == 0)  # no pure second-frequency terms unless asked for
    # with pure_f2, the pure second-frequency terms k f2 (j = 0, k = 1..m) of the two-dimensional series of
    # Pravec et al. (2005, Icarus 173, 108) join the basis, and only the variants that ask for them use them
    both = FourierBasis.build([FourierVariant(3, 0, 2), FourierVariant(3, 0, 2, pure_f2=True)])
    assert {(0, 1), (0, 2)} <= {tuple(c) for c in both.combos}
    assert len(both.columns[1]) == len(both.columns[0]) + 4
    x = both.design(data, [f1], [f2])[0] / data.sw[:, None]
    i = [tuple(c) for c in both.combos].index((0, 2))
    col = both.n_columns - 2 * len(both.combos) + 2 * i
    np.testing.assert_allclose(x[:, col], np.cos(2 * np.pi * 2 * f2 * t), atol=1e-9)


# Toutatis (REFERENCES section 8): LAM with P_psi = 5.41 d, P_phi = 7.35 d (Hudson & Ostro 1995,
# Science 270, 84); its light curve holds the frequencies 0.135, 0.271 and 0.643 c/d (Mueller et al.
# 2000, DPS), i.e. f_phi, 2 f_phi and 2 (f_phi + f_psi) (Kaasalainen 2001, A&A 376, 302).
TOUTATIS_P_PSI_D = 5.41
TOUTATIS_P_PHI_D = 7.35


def _toutatis_like(rng, noise_mag=0.01):
    f_phi, f_psi = 1 / TOUTATIS_P_PHI_D, 1 / TOUTATIS_P_PSI_D
    # three months of dense nightly photometry, calibrated to one zero-point; amplitudes invented
    nights = np.arange(90)
    t = np.concatenate([n + np.linspace(0.0, 0.3, 25) for n in nights]) + 2460000.0
    tt = t - t[0]
    y = (0.35 * np.cos(2 * np.pi * f_phi * tt + 0.4) + 0.25 * np.cos(2 * np.pi * 2 * f_phi * tt + 1.9)
         + 0.40 * np.cos(2 * np.pi * 2 * (f_phi + f_psi) * tt + 2.7))
    y = y + noise_mag * rng.standard_normal(len(t))
    lc = LightCurve.from_arrays(t, y, np.full(len(t), noise_mag), session=np.zeros(len(t), int),
                                light_time_corrected=True)
    return lc, f_phi, f_psi


def test_npa_family_fits_a_toutatis_like_light_curve_to_the_noise(rng):
    # On the basis pair f1 = f_phi + f_psi, f2 = f_phi (f2 < f1/2, the admissible set of the evidence)
    # Toutatis's frequencies are f2, 2 f2 and 2 f1: the j = 0 terms carry two of the three. With them the
    # family fits to the noise (reduced chi-square ~ 1); without them it cannot.
    from tumble.classify.families import npa_variants, pa_variants

    lc, f_phi, f_psi = _toutatis_like(rng)
    data = prepare_linear(lc)
    family = npa_variants(pa_variants(data.span_d))
    without = FourierBasis.build(family)
    with_j0 = FourierBasis.build([FourierVariant(v.n_harmonics, v.drift, v.combo_order, pure_f2=True)
                                  for v in family])
    f1, f2 = f_phi + f_psi, f_phi
    assert f2 < f1 / 2
    kappa = [min(fit_linear(data, b, v, f1, f2).kappa for v in range(len(b.variants))) for b in (with_j0, without)]
    assert kappa[0] == pytest.approx(1.0, abs=0.05)  # kappa = sqrt(chi2/dof)
    assert kappa[1] > 5.0
    # and the evidence agrees: the completed series is decisively better on these data
    lz = [linear_log_evidence(data, b, [f1], [f2]).max() for b in (with_j0, without)]
    assert lz[0] - lz[1] > 100.0


def test_fit_linear_recovers_offsets_and_signal(rng):
    n = 200
    t = 2460000.0 + np.sort(rng.uniform(0, 4, n))
    sess = (t - t[0]).astype(int)
    truth = 0.15 * np.cos(2 * np.pi * 3.1 * (t - t.mean())) + np.array([0.0, 0.3, -0.2, 0.1, 0.5])[sess]
    err = np.full(n, 0.01)
    y = truth + err * rng.standard_normal(n)
    lc = LightCurve.from_arrays(t, y, err, session=sess, light_time_corrected=True)
    data = prepare_linear(lc)
    basis = FourierBasis.build([FourierVariant(1, False)])
    fit = fit_linear(data, basis, 0, 3.1)
    assert np.std(fit.model_mag - truth) < 0.003
    assert fit.kappa == pytest.approx(1.0, abs=0.15)


def test_nuisance_design_columns(rng):
    lc = _lc(rng, sparse=True, phase=True)
    z, names = nuisance_design(lc)
    assert [n.split(":")[0] for n in names] == ["zp", "phase", "phase-curvature"]
    assert z.shape == (lc.n_points, 3)
    # the curvature column is orthogonal to the constant and the slope (its linear part removed)
    assert abs(np.polyfit(lc.phase_deg, z[:, 2], 1)[0]) < 1e-10
    lc2 = _lc(rng, sparse=False)
    z2, names2 = nuisance_design(lc2)
    np.testing.assert_array_equal(z2.sum(axis=1), 1.0)  # each point in exactly one session
    assert len(names2) == lc2.n_sessions


def test_fixed_geometry_when_directions_missing(rng):
    lc = _lc(rng)
    g = viewing_geometry(lc)
    assert g.fixed and "fixed geometry" in g.note
    cosang = np.sum(g.sun_dir * g.obs_dir, axis=1)
    np.testing.assert_allclose(np.degrees(np.arccos(cosang)), DEFAULT_PHASE_DEG, atol=1e-9)
    g2 = viewing_geometry(_lc(rng, directions=True))
    assert not g2.fixed
    np.testing.assert_allclose(g2.phase_deg, 25.0, atol=1e-9)


def _slow_magnitudes(model, x, lc):
    """Reference: RotationState.to_body point by point and the per-point LS reference integral."""
    from tumble.brightness import lommel_seeliger_ellipsoid_reference

    st = model.rotation_states(x[None])[0]
    g = model.geometry
    sun = np.asarray(st.to_body(lc.t, g.sun_dir, method="direct")).reshape(-1, 3)
    obs = np.asarray(st.to_body(lc.t, g.obs_dir, method="direct")).reshape(-1, 3)
    args, axes = model.state_arrays(x[None])
    return np.array([-2.5 * math.log10(lommel_seeliger_ellipsoid_reference(s, o, axes[0])) for s, o in zip(sun, obs)])


@pytest.mark.parametrize("mode", ["PA", "SAM", "LAM"])
def test_physical_magnitudes_match_slow_reference(rng, mode):
    lc = _lc(rng, n=12, directions=True)
    model = PhysicalModel(lc, mode, period_range_h=(1.0, 100.0))
    x = model.space.sample_prior(3, rng)
    fast = model.shape_magnitudes(x)
    for k in range(3):
        np.testing.assert_allclose(fast[k], _slow_magnitudes(model, x[k], lc), atol=1e-6)


def test_physical_likelihood_marginalises_offsets(rng):
    # Gaussian likelihood with flat-prior zero-points integrated out: compare with an explicit
    # weighted least-squares solution plus the log-determinant term (Gaussian integral identity).
    lc = _lc(rng, n=25, directions=True)
    model = PhysicalModel(lc, "PA", period_range_h=(1.0, 100.0))
    x = model.space.sample_prior(2, rng)
    ll = model(x)
    for k in range(2):
        m = model.shape_magnitudes(x[k:k + 1])[0]
        jit = math.exp(x[k, model.space.index("ln_jitter_mag")])
        var = lc.err**2 + jit**2
        w = 1 / var
        z = model.z
        a = z.T @ (w[:, None] * z)
        coef = np.linalg.solve(a, z.T @ (w * (lc.reduced_mag - m)))
        r = lc.reduced_mag - m - z @ coef
        ref = (-0.5 * np.sum(r**2 * w) - 0.5 * np.sum(np.log(2 * np.pi * var)) - 0.5 * np.linalg.slogdet(a)[1]
               + 0.5 * z.shape[1] * np.log(2 * np.pi))
        assert ll[k] == pytest.approx(ref, rel=1e-10, abs=1e-8)


def test_physical_likelihood_peaks_at_truth(rng):
    # A light curve made by the same model: the truth beats nearby and random parameter vectors.
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    st = RotationState.from_periods(0.6, 0.9, 30.0, 5.0, "SAM", l_lon_deg=30, l_lat_deg=20)
    from tumble.brightness import axes_from_inertia_ratios

    axes = axes_from_inertia_ratios(0.6, 0.9)
    sim = simulate_lightcurve(st, axes, DenseCampaign(2460000.5, n_nights=4, hours_per_night=5, cadence_min=15),
                              noise=NoiseModel(0.01), rng=rng)
    lc = sim.lightcurve
    model = PhysicalModel(lc, "SAM", p_psi_range_h=(1.0, 200.0), epoch_jd=st.epoch_jd)
    u = (1.0 - st.id_i3) / (1.0 - st.i2_i3)
    truth = {"p_psi_h": 30.0, "excitation_u": u, "l_lon_rad": math.radians(30), "l_lat_rad": math.radians(20),
             "phi0_rad": 0.0, "psi0_rad": 0.0, "a_over_b": axes[0] / axes[1], "b_over_c": axes[1] / axes[2],
             "ln_jitter_mag": math.log(1e-3)}
    xt = model.space.to_vector(truth)
    d = model.derived(xt[None])
    assert d["p_phi_h"][0] == pytest.approx(5.0, rel=1e-9)
    assert d["excitation"][0] == pytest.approx(st.excitation, rel=1e-12)
    others = model.space.sample_prior(16, rng)
    near = xt + 0.02 * rng.standard_normal((4, len(xt)))
    ll_t = model(xt[None])[0]
    assert ll_t > np.max(model(others))
    assert ll_t > np.max(model(model.space.wrap(near)))


@pytest.mark.parametrize("law", ["ls-lambert", "lambert"])
@pytest.mark.parametrize("mode", ["PA", "SAM"])
def test_physical_model_takes_its_law_from_the_registry(rng, law, mode):
    # The physical model's magnitudes under each registered law against the law's slow surface
    # quadrature (tumble.brightness.ellipsoid_quadrature) on the direct attitude, point by point.
    from tumble.brightness import scattering_law

    lc = _lc(rng, n=8, directions=True)
    model = PhysicalModel(lc, mode, period_range_h=(1.0, 100.0), law=law, lambert_weight=0.25)
    assert model.law == scattering_law(law, 0.25)
    x = model.space.sample_prior(2, rng)
    fast = model.shape_magnitudes(x)
    for k in range(2):
        st = model.rotation_states(x[k][None])[0]
        sun = np.asarray(st.to_body(lc.t, model.geometry.sun_dir, method="direct")).reshape(-1, 3)
        obs = np.asarray(st.to_body(lc.t, model.geometry.obs_dir, method="direct")).reshape(-1, 3)
        _, axes = model.state_arrays(x[k][None])
        ref = -2.5 * np.log10(model.law.reference_brightness(sun, obs, axes[0]))
        np.testing.assert_allclose(fast[k], ref, atol=2e-5)
    with pytest.raises(TumbleError, match="unknown scattering law"):
        PhysicalModel(lc, mode, law="hapke")


def test_physical_model_with_inertia_free_of_the_shape(rng):
    # A SAM whose inertia is not that of its shape (Apophis-like ratios 0.64 : 0.97 : 1, Lee et al. 2022,
    # A&A 661, L3, on a 1.5 : 1.2 : 1 ellipsoid), simulated with LS + 0.1 Lambert (Kaasalainen et al. 2001):
    # the free-inertia model with the same law puts the truth above nearby and random vectors, keeps
    # P_phi of the state, and gives -inf outside I1 < I2 < I3, I1 + I2 >= I3.
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    st = RotationState.from_periods(0.64, 0.97, 60.0, 6.0, "SAM", l_lon_deg=40, l_lat_deg=-30)
    axes = (1.5, 1.2, 1.0)
    sim = simulate_lightcurve(st, axes, DenseCampaign(2460000.5, n_nights=3, hours_per_night=5, cadence_min=20),
                              noise=NoiseModel(0.01), law="ls-lambert", lambert_weight=0.1, rng=rng)
    lc = sim.lightcurve
    model = PhysicalModel(lc, "SAM", p_psi_range_h=(1.0, 200.0), epoch_jd=st.epoch_jd, law="ls-lambert",
                          lambert_weight=0.1, free_inertia=True)
    assert {"i1_i3", "i2_i3"} <= set(model.space.names)
    truth = {"p_psi_h": 60.0, "excitation_u": (1.0 - st.id_i3) / (1.0 - st.i2_i3), "l_lon_rad": math.radians(40),
             "l_lat_rad": math.radians(-30), "phi0_rad": 0.0, "psi0_rad": 0.0, "a_over_b": 1.25, "b_over_c": 1.2,
             "ln_jitter_mag": math.log(1e-3), "i1_i3": 0.64, "i2_i3": 0.97}
    xt = model.space.to_vector(truth)
    assert model.derived(xt[None])["p_phi_h"][0] == pytest.approx(6.0, rel=1e-9)
    ll_t = model(xt[None])[0]
    assert ll_t > np.max(model(model.space.sample_prior(16, rng)))
    near = xt + 0.02 * rng.standard_normal((4, len(xt)))
    assert ll_t > np.max(model(model.space.wrap(near)))
    bad = xt.copy()
    bad[model.space.index("i1_i3")], bad[model.space.index("i2_i3")] = 0.3, 0.6  # I1 + I2 < I3: no real body
    swapped = xt.copy()
    swapped[model.space.index("i1_i3")], swapped[model.space.index("i2_i3")] = 0.97, 0.64  # I1 > I2
    assert np.all(model(np.stack([bad, swapped])) == -np.inf)
    tied = PhysicalModel(lc, "SAM", p_psi_range_h=(1.0, 200.0), epoch_jd=st.epoch_jd)
    assert "i1_i3" not in tied.space.names


def test_design_fast_kernel_matches_its_slow_reference(rng):
    # The combination columns by angle addition from the harmonic tables against np.cos/np.sin of each
    # column's own phase (FourierBasis.design_reference): the same columns to round-off (common practice:
    # the recurrences lose about one unit of 1e-16 per step; 1e-11 leaves room for 60-day phases).
    t = 2460000.0 + np.sort(rng.uniform(0, 60, 200))
    lc = LightCurve.from_arrays(t, 0.1 * rng.standard_normal(200), np.full(200, 0.05), session=(t - t[0]).astype(int),
                                light_time_corrected=True)
    data = prepare_linear(lc)
    basis = FourierBasis.build([FourierVariant(4, 2, 3), FourierVariant(3, 0, 3, pure_f2=True)])
    assert np.any(basis.combos[:, 0] < 0) and np.any(basis.combos[:, 0] == 0)
    f1, f2 = rng.uniform(1.0, 9.0, 7), rng.uniform(0.05, 0.9, 7)
    fast, slow = basis.design(data, f1, f2), basis.design_reference(data, f1, f2)
    assert fast.shape == slow.shape == (7, 200, basis.n_columns)
    np.testing.assert_allclose(fast / data.sw[None, :, None], slow / data.sw[None, :, None], rtol=0, atol=1e-11)


@pytest.mark.parametrize("mode,free", [("SAM", False), ("LAM", False), ("SAM", True), ("LAM", True)])
def test_period_ratio_fast_kernel_matches_the_validated_periods(rng, mode, free):
    # ln(P_phi/P_psi) of the fast kernel (tumble.dynamics.period_ratio_unit_momentum on the admissible rows)
    # against the slow reference through periods_unit_momentum (the closed form of Kaasalainen 2001, itself
    # tested against the integrated Euler equations): equal to round-off, and nan where the state is not admissible
    lc = _lc(rng, n=12, directions=True)
    model = PhysicalModel(lc, mode, period_range_h=(1.0, 100.0), free_inertia=free)
    x = model.space.sample_prior(256, rng)  # a free inertia drawn from its box is admissible in about 1 of 4
    x[0, model.space.index("excitation_u")] = np.nan
    fast, slow = model.log_period_ratio(x), model.log_period_ratio_reference(x)
    assert np.isnan(fast[0]) and np.isnan(slow[0])
    np.testing.assert_array_equal(np.isnan(fast), np.isnan(slow))
    assert np.isfinite(fast).sum() >= 20
    np.testing.assert_allclose(fast, slow, rtol=1e-13, atol=0, equal_nan=True)


@pytest.mark.parametrize("mode", ["PA", "SAM", "LAM"])
def test_shape_magnitudes_fast_route_matches_the_direct_reference(rng, mode):
    # the attitude's Fourier series (the fast route) against special functions at every point (the
    # direct route, tested against solve_ivp in test_dynamics): the same magnitudes to 1e-9 mag
    # (the series' neglected tail is 1e-15 of the unit matrix; common practice)
    lc = _lc(rng, n=50, directions=True)
    model = PhysicalModel(lc, mode, period_range_h=(1.0, 100.0))
    x = model.space.sample_prior(16, rng)
    np.testing.assert_allclose(model.shape_magnitudes(x), model.shape_magnitudes_reference(x), rtol=0, atol=1e-9)
