"""Other directions of a tumbler's angular momentum (tumble.classify.poles) against the mirror symmetry."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tumble.brightness import axes_from_inertia_ratios
from tumble.classify import poles as PL
from tumble.classify import solutions as S
from tumble.classify.rotation import thin_lightcurve
from tumble.dynamics import RotationState
from tumble.simulate import DenseCampaign, NoiseModel, opposition_elements, simulate_lightcurve


def test_symmetric_directions_of_a_pole():
    # the mirror through the ecliptic of a pseudo-vector (lambda, beta) is (lambda + 180, beta) (the
    # classic pole ambiguity; Kaasalainen & Lamberg 2006, Inverse Problems 22, 749); the antipode
    # (lambda + 180, -beta) and the reflection (lambda, -beta) have the other sense of rotation
    got = {label: (math.degrees(lon), math.degrees(lat))
           for label, lon, lat in PL.symmetric_directions(math.radians(275.0), math.radians(-85.0))}
    assert got["mirror"] == pytest.approx((95.0, -85.0))
    assert got["antipode"] == pytest.approx((95.0, 85.0))
    assert got["reflection"] == pytest.approx((275.0, 85.0))


def test_pole_starts_put_l_there_and_cover_the_phases():
    plan = DenseCampaign(2460000.5, n_nights=2, hours_per_night=6.0, cadence_min=30.0)
    st = RotationState.from_periods(0.5, 0.85, 30.0, 7.5, "SAM")
    lc = simulate_lightcurve(st, axes_from_inertia_ratios(0.5, 0.85), plan, noise=NoiseModel(0.01), rng=1).lightcurve
    sp = S.npa_models(lc, lc.span_d * 24.0)["SAM"].space
    x = sp.wrap(np.array([30.0, 0.5, 0.1, 0.2, 1.0, 2.0, 1.5, 1.2, -7.0]))
    xs = PL.pole_starts(sp, x, 1.0, -0.5, n_phases=4)
    assert xs.shape == (16, sp.ndim)
    np.testing.assert_allclose(xs[:, sp.index("l_lon_rad")], 1.0)
    np.testing.assert_allclose(xs[:, sp.index("l_lat_rad")], -0.5)
    pairs = {(round(a, 6), round(b, 6)) for a, b in xs[:, [sp.index("phi0_rad"), sp.index("psi0_rad")]]}
    assert len(pairs) == 16


def test_the_mirror_pole_of_an_ecliptic_sam_fits_as_well_with_the_same_periods():
    # An ellipsoid seen from the ecliptic plane (orbit inclination 0): the mirror image of the whole
    # scene through that plane is the same ellipsoid with L at (lambda + 180, beta) (Kaasalainen &
    # Lamberg 2006): the same light curve, so the refit from the mirror direction must fit as well
    # and give the same periods; the interval that covers the poles holds the solution's own.
    t0 = 2460000.5
    st = RotationState.from_periods(0.55, 0.85, 40.0, 9.0, "SAM", l_lon_deg=60.0, l_lat_deg=35.0)
    plan = DenseCampaign(t0, n_nights=6, hours_per_night=7.0, cadence_min=15.0)
    lc = simulate_lightcurve(st, axes_from_inertia_ratios(0.55, 0.85), plan,
                             elements=opposition_elements(t0, i_deg=0.0, days_before=2.0),
                             noise=NoiseModel(0.005), rng=4).lightcurve
    sub = thin_lightcurve(lc, 200)
    model = S.npa_models(sub, lc.span_d * 24.0)["SAM"]
    pair = S.FrequencyPair(24.0 / 40.0, 24.0 / 9.0, (), "truth")
    opt = S.fit_pair(model, "SAM", pair, S.FitBudget(), wide=True)
    assert opt is not None
    poles = PL.other_poles(model, opt.x)
    mirror = {f.label: f for f in poles.fits}["mirror"]
    lap = S.laplace_approximation(model, opt.x)
    assert mirror.delta_log_likelihood > -1.0, [(f.label, f.delta_log_likelihood) for f in poles.fits]
    assert abs(mirror.p_phi_h - lap.p_phi_h) < max(lap.p_phi_sigma_h, 1e-6 * lap.p_phi_h)
    assert mirror in poles.as_good
    lo, hi = PL.covering_interval((lap.p_phi_h - lap.p_phi_sigma_h, lap.p_phi_h + lap.p_phi_sigma_h), "p_phi_h", poles)
    assert lo <= min(lap.p_phi_h, mirror.p_phi_h) and hi >= max(lap.p_phi_h, mirror.p_phi_h)
    # the threshold is half the chi-square law's spread sqrt(2 dof) of the fit (the PA poles' rule)
    assert poles.threshold_nats == pytest.approx(0.5 * math.sqrt(2.0 * (model.y.size - model.space.ndim)))


def test_covering_interval_keeps_a_withheld_interval_withheld():
    fit = PL.PoleFit("antipode", np.zeros(3), 0.0, 10.0, 3.0, 0.1, 0.01, 0.0, 0.0)
    poles = PL.OtherPoles((fit,), 5.0)
    lo, hi = PL.covering_interval((math.nan, math.nan), "p_phi_h", poles)
    assert math.isnan(lo) and math.isnan(hi)
    assert PL.covering_interval((3.05, 3.07), "p_phi_h", poles) == pytest.approx((2.99, 3.07))
    # a fit beyond the threshold widens nothing
    far = PL.OtherPoles((PL.PoleFit("mirror", np.zeros(3), -6.0, 10.0, 2.0, 0.1, 0.01, 0.0, 0.0),), 5.0)
    assert PL.covering_interval((3.05, 3.07), "p_phi_h", far) == (3.05, 3.07)
