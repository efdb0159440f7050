"""Tests of the decision layer: testability, significance before periods, adequacy, the screen,
the grade sentence, the frequency prior and the frequency integration against its slow reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from tumble.classify import classify, decide, grade_sentence, screen
from tumble.classify.prior import (
    admissible_f2_intervals,
    admissible_f2_log_mass,
    commensurate_mask,
    f2_log_prior,
)
from tumble.classify.calibration import FEATURES
from tumble.classify.evidence import MIN_LNB_ERROR
from tumble.classify.quadrature import dense_trapezoid_reference, integrate_peak
from tumble.classify.thresholds import GRADE_EDGES_2LNB, MIN_CYCLES
from tumble.classify.verdict import NO_PERIOD_REASON, UNTESTABLE_REASON, format_probability
from tumble.dynamics import RotationState
from tumble.geometry import OrbitalElements
from tumble.photometry import LightCurve
from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve


def _flat_lc(rng, sigma):
    t = 2460000.5 + np.concatenate([k + np.sort(rng.uniform(0, 0.25, 60)) for k in range(5)])
    mag = 15.0 + (sigma * rng.standard_normal(t.size) if sigma > 0 else 0.0)
    return LightCurve.from_arrays(t, mag, np.full(t.size, max(sigma, 0.01)), session=(t - t[0]).astype(int),
                                  light_time_corrected=True)


# ------------------------------------------------------------------ the frequency prior
def test_admissible_set_matches_a_brute_force_mask():
    # the interval arithmetic of the renormalised f2 prior against a dense evaluation of its definition
    span = 9.3
    for f1 in (0.7, 2.3, 6.1, 11.0):
        lo, hi = MIN_CYCLES / span, 0.5 * f1
        x = np.geomspace(lo, hi, 400_001)
        ok = ~commensurate_mask(f1, x, span)
        brute = integrate.trapezoid(ok / x, x)
        assert admissible_f2_log_mass(f1, span) == pytest.approx(brute, abs=2e-4)
        for a, b in admissible_f2_intervals(f1, span):
            assert lo <= a < b <= hi


def test_f2_prior_is_normalised_over_the_admissible_set():
    # a probability density: its integral over f2 is one (scipy quadrature over each interval)
    span, f1 = 12.0, 3.7
    total = sum(integrate.quad(lambda f: math.exp(f2_log_prior(f1, f, span)), a, b)[0]
                for a, b in admissible_f2_intervals(f1, span))
    assert total == pytest.approx(1.0, rel=1e-8)
    assert f2_log_prior(f1, f1 / 3, span) == -np.inf  # inside a commensurate band


# ------------------------------------------------------------------ quadrature
@pytest.mark.parametrize("width", [1e-4, 3e-3, 0.05])
def test_peak_integral_agrees_with_dense_trapezoid(width):
    # a narrow (Laplace branch) and a resolved (trapezoid branch) peak on a sloping background:
    # the fast integral against the slow reference (a dense trapezoid)
    centre = 1.2345

    def fun(f):
        f = np.asarray(f, float)
        return -0.5 * ((f - centre) / width) ** 2 - 3.0 * f

    fast = integrate_peak(fun, centre + 0.3 * width, 0.02 if width < 0.01 else 0.3, 0.5, 2.0)
    lo, hi = centre - 12 * width, centre + 12 * width
    ref = dense_trapezoid_reference(fun, lo, hi, n=400_001)
    # within the error the evidence states for itself (the two rules' difference, at least MIN_LNB_ERROR)
    stated = max(MIN_LNB_ERROR, abs(fast.ln_integral - fast.ln_integral_alt))
    assert abs(fast.ln_integral - ref) <= stated


# ------------------------------------------------------------------ flat and noise curves
@pytest.mark.parametrize("sigma", [0.0, 0.01])
def test_flat_or_pure_noise_gives_no_period_and_no_grade(rng, sigma):
    # common practice: a period needs a significant periodogram peak; noise has none
    v = classify(_flat_lc(rng, sigma), fit_state=False).verdict
    assert v.rotation == "undecided" and v.grade == "none"
    assert math.isnan(v.period_h) and math.isnan(v.p1_h)
    assert any(w.startswith(NO_PERIOD_REASON) for w in v.warnings)


def test_screen_on_noise_is_not_a_candidate(rng):
    s = screen(_flat_lc(rng, 0.01))
    assert s.screen_flag == "unknown" and math.isnan(s.period_h)


# ------------------------------------------------------------------ testability
def test_slow_pa_rotator_over_a_short_arc_is_untestable(rng):
    # a 40 h PA body over six nights (about 3.5 rotations): every second period the span could resolve
    # is commensurate with the first, so NPA cannot be tested (the verdict issue's slow-rotator case)
    st = RotationState.principal_axis(40.0, 30.0, 40.0)
    plan = DenseCampaign(2460000.5, n_nights=6, hours_per_night=7.0, cadence_min=8.0, zero_point_sigma_mag=0.02)
    lc = simulate_lightcurve(st, (1.5, 1.15, 1.0), plan, noise=NoiseModel(0.01), rng=rng).lightcurve
    v = classify(lc, fit_state=False).verdict
    assert v.rotation == "undecided" and v.grade == "none" and not v.npa_testable
    assert math.isnan(v.p_npa)
    assert any(w.startswith(UNTESTABLE_REASON) for w in v.warnings)


def test_short_campaign_lam_is_not_pa_above_the_lowest_grade(rng):
    # a LAM tumbler (P_psi 33 h, P_phi 17.3 h) over five nights: whatever the route concludes,
    # it must not be a PA verdict graded above the lowest
    st = RotationState.from_periods(0.55, 0.85, 33.0, 17.35, "LAM", l_lon_deg=60.0, l_lat_deg=20.0)
    plan = DenseCampaign(2460000.5, n_nights=5, hours_per_night=7.0, cadence_min=6.0, zero_point_sigma_mag=0.02)
    lc = simulate_lightcurve(st, (1.6, 1.2, 1.0), plan, noise=NoiseModel(0.01), rng=rng).lightcurve
    v = classify(lc, fit_state=False).verdict
    assert not (v.rotation == "PA" and v.grade in ("sound", "firm"))


def test_pa_verdict_carries_a_detection_limit(rng):
    lc = _clear_pa(rng)
    r = classify(lc, fit_state=False)
    v = r.verdict
    assert v.rotation == "PA" and v.npa_testable
    # Gaussian linear models (common practice): a signature of rms s raises chi-square by about
    # N s^2 / sigma^2, which must at least reach the threshold (Occam factors only add), and a signature
    # three times the per-point noise is detected with a hundred points
    sigma = float(np.median(np.hypot(lc.err, r.evidence.error_floor_mag)))
    threshold = r.detection_limit.threshold_2lnb
    assert sigma * math.sqrt(threshold / lc.n_points) < v.npa_limit_mag < 3 * sigma
    assert 5 < v.n_cycles and v.phase_coverage > 0.9 and v.period_fap < 1e-10


def test_close_approach_pa_ellipsoid_is_not_npa(rng):
    # A PA ellipsoid on an Earth-like orbit 2.3 deg ahead of the Earth (Delta ~ 0.04 au, phase angle
    # ~ 85 deg, geometry changing within a night): the changing geometry must not read as tumbling.
    # Earth's mean elements at J2000 (a, e, longitude of perihelion 102.94 deg, mean longitude 100.46 deg;
    # Standish's approximate planetary elements, values from memory).
    elements = OrbitalElements(a_au=1.0, e=0.0167, i_deg=1.5, node_deg=100.0, peri_deg=2.94,
                               mean_anomaly_deg=-2.47 + 2.3, epoch_jd=2451545.0)
    st = RotationState.principal_axis(6.2, 120.0, -40.0, epoch_jd=2451545.0)
    plan = DenseCampaign(2451545.5, n_nights=8, hours_per_night=6.0, cadence_min=6.0, zero_point_sigma_mag=0.02)
    sim = simulate_lightcurve(st, (1.7, 1.25, 1.0), plan, elements, noise=NoiseModel(0.01), rng=rng)
    lc = sim.lightcurve
    assert np.median(lc.delta_au) < 0.06 and np.median(lc.phase_deg) > 60
    v = classify(lc, fit_state=False).verdict
    assert v.rotation != "NPA"


# ------------------------------------------------------------------ grade sentences
@pytest.mark.parametrize("ln_b,grade,uncapped,reason", [
    (-235.5, "tentative", "firm", "the PA model leaves a periodic residual at 3.1 h"),
    (-4.86, "tentative", "sound", "the period posterior is multimodal"),
    (-2.5, "tentative", "tentative", ""),
    (1.2, "none", "tentative", "NPA favoured but p_npa = 0.25 < 0.5 at prior 0.1"),
])
def test_grade_sentence_agrees_with_its_numbers(ln_b, grade, uncapped, reason):
    rotation = "undecided" if grade == "none" else ("NPA" if ln_b > 0 else "PA")
    text = grade_sentence(dict(rotation=rotation, ln_bayes_factor=ln_b, grade=grade, grade_uncapped=uncapped,
                               grade_reason=reason))
    two = abs(2 * ln_b)
    assert f"{two:.1f}" in text
    # the band named is the band the number lies in (Kass & Raftery 1995 edges)
    edges = (0.0,) + tuple(GRADE_EDGES_2LNB)
    level = sum(two >= e for e in edges[1:])
    if level == len(edges) - 1:
        assert f"at least {edges[-1]:g}" in text
    else:
        assert f"between {edges[level]:g} and {edges[level + 1]:g}" in text
    assert f"'{uncapped}'" in text
    if grade != uncapped and grade != "none":
        assert "capped" in text and reason in text
    if grade == "none":
        assert text.startswith("Undecided")


def _clear_pa(rng):
    st = RotationState.principal_axis(7.3, 40.0, 50.0)
    plan = DenseCampaign(2460000.5, n_nights=4, hours_per_night=5.0, cadence_min=8.0, zero_point_sigma_mag=0.05)
    return simulate_lightcurve(st, (1.6, 1.2, 1.0), plan, noise=NoiseModel(0.01), rng=rng).lightcurve


def test_decide_caps_and_states_the_uncapped_grade(rng):
    lc = _clear_pa(rng)
    ev = classify(lc, fit_state=False, detection_limit=False).evidence
    from dataclasses import replace

    from tumble.classify.adequacy import ModelAdequacy

    ev = replace(ev, ln_bayes_factor=-30.0, ln_bayes_factor_err=0.1, pa_window_mass=1.0, window_disagreement=False,
                 npa_testable=True, f2_admissible_share=1.0)
    bad = ModelAdequacy(9.0, 8.0, 3.0, 5.0, 1e-8, np.zeros(lc.n_points))
    v = decide(ev, span_d=lc.span_d, adequacy=bad)
    assert v.rotation == "PA" and v.grade == "tentative" and v.grade_uncapped == "firm"
    assert "scaled by 3" in v.grade_reason and "periodic residual" in v.grade_reason


def test_probability_display_precision():
    assert format_probability(1e-305) == "< 0.001"
    assert format_probability(1 - 1e-12) == "> 0.999"
    assert format_probability(0.25) == "0.250"


def test_screen_without_a_testable_second_period_is_unknown_not_an_error(rng, monkeypatch):
    # on close approaches every P2 of the two-period grid can be commensurate with P1 (seen on the
    # library): the screen cannot tell, which is its 'unknown' flag with the reason, not an error row
    import tumble.periodogram
    from tumble.periodogram import PeriodSearchError

    def no_second_period(*a, **k):
        raise PeriodSearchError("sim: every P2 of the grid is commensurate with P1")

    monkeypatch.setattr(tumble.periodogram, "two_period_scan", no_second_period)
    s = screen(_clear_pa(rng))
    assert s.screen_flag == "unknown" and math.isnan(s.screen_score)
    assert any("no second period can be tested" in w for w in s.warnings)
    assert s.period_h == pytest.approx(7.3, rel=5e-3)  # the one-period scan still gives its period


def test_a_probability_below_the_lowest_grade_is_no_verdict(rng, monkeypatch):
    # a stated rotation carries at least the lowest grade (Kass & Raftery 1995 band 2 ln B >= 2, as a
    # probability 0.731 at even odds); a calibrated P(PA) of 0.6 states none
    from dataclasses import replace

    import tumble.classify.calibration as cal
    from scipy import special

    lc = _clear_pa(rng)
    ev = classify(lc, fit_state=False, detection_limit=False, sidereal=False).evidence
    ev = replace(ev, ln_bayes_factor=-30.0, ln_bayes_factor_err=0.1, pa_window_mass=1.0, window_disagreement=False,
                 npa_testable=True, f2_admissible_share=1.0)
    k = len(cal.FEATURES)
    flat_map = cal.CalibrationMap(cal.FEATURES, np.zeros(k), np.ones(k), np.zeros(k), np.zeros(k),
                                  float(special.logit(0.4)), 0.1, "test")
    monkeypatch.setattr(cal, "load_calibration", lambda: flat_map)
    v = decide(ev, span_d=lc.span_d, prior_npa=0.1, calibration_features=np.zeros(len(FEATURES)))
    assert v.calibrated and v.p_npa == pytest.approx(0.4)
    assert v.rotation == "undecided" and v.grade == "none"
    assert any("below the lowest grade" in w for w in v.warnings)
