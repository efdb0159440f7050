"""Fast kernels of the physical model's attitude (tumble.dynamics) against the slow references kept beside them."""

from __future__ import annotations

import numpy as np
import pytest

from tumble import dynamics
from tumble.dynamics import ecliptic_to_body, period_ratio_unit_momentum, periods_unit_momentum

EPOCH = 2460000.5


@pytest.fixture
def rng():
    return np.random.default_rng(20261205)


def _npa_batch(rng, k, repeats=1):
    """``k`` SAM/LAM states away from the separatrix, each inertia repeated ``repeats`` times with other
    periods, directions and phases (as in an optimiser's Jacobian or a search's starts)."""
    i1 = rng.uniform(0.4, 0.75, k)
    i2 = rng.uniform(np.maximum(i1, 1 - i1) + 0.03, 0.98)
    sam = np.arange(k) % 2 == 0
    idd = np.where(sam, rng.uniform(i2 + 0.005, 0.999), rng.uniform(i1 + 0.01, i2 - 0.005))
    i1, i2, idd = (np.repeat(v, repeats) for v in (i1, i2, idd))
    n = len(i1)
    return (i1, i2, idd, rng.uniform(5.0, 100.0, n), rng.uniform(0, 360, n),
            np.degrees(np.arcsin(rng.uniform(-1, 1, n))), rng.uniform(0, 360, n), rng.uniform(0, 360, n), EPOCH)


def test_period_ratio_kernel_matches_the_validated_periods(rng):
    # the lean kernel against periods_unit_momentum (the closed form of Kaasalainen 2001, A&A 376, 302,
    # tested against the integrated Euler equations in test_dynamics): the same expressions, bit-identical
    args = _npa_batch(rng, 200)
    pp, pf = periods_unit_momentum(*args[:3])
    np.testing.assert_array_equal(period_ratio_unit_momentum(*args[:3]), pf / pp)


def test_series_computed_once_per_inertia_equal_the_per_state_series(rng):
    # the Fourier series of B(x) of a batch that repeats its inertia (computed once per distinct inertia)
    # against the series computed state by state (the reference): identical numbers
    args = _npa_batch(rng, 6, repeats=4)
    c = dynamics._constants(*args[:3])
    sel = np.arange(len(args[0]))
    fast = dynamics._unique_coefficients(c, sel, 40).coef
    slow = dynamics._fourier_coefficients(c, sel, 40).coef
    assert fast.shape == slow.shape == (24, 9, 21)
    np.testing.assert_array_equal(fast, slow)


def test_attitude_of_a_batch_with_repeated_inertia_matches_the_direct_route(rng):
    # ecliptic_to_body by the Fourier route (series shared across repeated inertia) against special functions
    # at every point (scipy ellipj / elliprf / elliprj, the direct route): round-off (1e-12; common practice)
    args = _npa_batch(rng, 5, repeats=3)
    t = EPOCH + np.sort(rng.uniform(-60, 60, 300))
    vec = rng.normal(size=(2, 1, 300, 3))
    vec /= np.linalg.norm(vec, axis=-1, keepdims=True)
    fast = ecliptic_to_body(*args, t, vec)
    slow = ecliptic_to_body(*args, t, vec, method="direct")
    assert fast.shape == (2, 15, 300, 3)
    assert np.max(np.abs(fast - slow)) < 1e-12


@pytest.mark.parametrize("harmonics", [8, 9, 29, 96])
def test_series_from_the_reflected_quarter_period_equal_the_half_period_series(rng, harmonics):
    # the fast kernel samples B(x) by special functions on half of the half period and reflects the rest
    # (B(pi - x) = S * B(x), from the parity of sn, cn, dn; Landau & Lifshitz 1976, section 37); the slow
    # reference computes every sample: the same coefficients to round-off (1e-14 of the unit matrix)
    args = _npa_batch(rng, 10)
    c = dynamics._constants(*args[:3])
    sel = np.arange(10)
    fast = dynamics._fourier_coefficients(c, sel, harmonics).coef
    slow = dynamics._fourier_coefficients(c, sel, harmonics, symmetric=False).coef
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-14)


def _small_sam_model(mode="SAM"):
    """A physical model of a simulated dense SAM (Kaasalainen 2001 closed-form attitude), 120 points."""
    from tumble.brightness import axes_from_inertia_ratios
    from tumble.classify.rotation import thin_lightcurve
    from tumble.classify.solutions import npa_models
    from tumble.dynamics import RotationState
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    plan = DenseCampaign(EPOCH, n_nights=5, hours_per_night=6.0, cadence_min=12.0, zero_point_sigma_mag=0.02)
    st = RotationState.from_periods(0.5, 0.85, 30.0, 7.5, "SAM", l_lon_deg=60.0, l_lat_deg=35.0)
    lc = simulate_lightcurve(st, axes_from_inertia_ratios(0.5, 0.85), plan, noise=NoiseModel(0.01), rng=3).lightcurve
    return npa_models(thin_lightcurve(lc, 120), lc.span_d * 24.0)[mode]


def test_jitter_grid_likelihood_matches_one_model_call_per_vector(rng):
    # the magnitudes computed once per state against the model called on every (state, jitter)
    # vector (slow reference); a state at the separatrix (I_d = I2, refused by the closed form)
    # voids its own row only
    model = _small_sam_model()
    sp = model.space
    xs = sp.sample_prior(6, rng)
    grid = np.linspace(sp.lows[sp.index("ln_jitter_mag")], sp.highs[sp.index("ln_jitter_mag")], 7)
    fast = model.jitter_log_likelihood(xs, grid)
    ref = model.jitter_log_likelihood_reference(xs, grid)
    np.testing.assert_allclose(fast, ref, rtol=1e-10, atol=1e-8)
    bad = xs.copy()
    bad[2, sp.index("excitation_u")] = 1.0  # SAM I_d = I2: the separatrix
    out = model.jitter_log_likelihood(bad, grid)
    assert np.all(np.isneginf(out[2]))
    np.testing.assert_allclose(np.delete(out, 2, axis=0), np.delete(ref, 2, axis=0), rtol=1e-10, atol=1e-8)


def test_whitened_residuals_per_row_leave_the_other_states_alone(rng):
    # invalid="nan": a state the closed form refuses gets the out-of-prior residual on its row only,
    # the others equal their residuals computed alone (the reference's one-state calls)
    from tumble.classify.rotation import OUT_OF_PRIOR_RESIDUAL, whitened_residuals

    model = _small_sam_model()
    sp = model.space
    xs = sp.sample_prior(4, rng)
    # inside the prior, but b ~ c puts I_d within the closed form's tolerance of I2 (the separatrix)
    xs[1, sp.index("b_over_c")] = 1.0 + 1e-7
    assert np.isfinite(sp.log_prior(xs[1:2]))[0]
    assert np.all(whitened_residuals(model, xs) == OUT_OF_PRIOR_RESIDUAL)  # invalid="raise": the whole batch
    r = whitened_residuals(model, xs, invalid="nan")
    assert np.all(r[1] == OUT_OF_PRIOR_RESIDUAL)
    for i in (0, 2, 3):
        np.testing.assert_allclose(r[i], whitened_residuals(model, xs[i:i + 1])[0], rtol=1e-10, atol=1e-10)
