"""Synodic and sidereal PA periods: the phase-angle-bisector rule of thumb against a simulated body,
and the verdict's synodic interval."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tumble.dynamics import RotationState
from tumble.geometry import bisector_longitude_rate_deg_per_d, synodic_sidereal_difference_h
from tumble.periodogram import fourier_scan
from tumble.simulate import DenseCampaign, NoiseModel, opposition_elements, simulate_lightcurve


def test_difference_formula_worked_example():
    # |f_syn - f_sid| = rate / 360 c/d (Harris et al. 1984, Icarus 57, 251; Pravec et al. 2005,
    # Icarus 173, 108, from memory): a 24 h rotator whose bisector moves 1 deg/day drifts by
    # 1/360 c/d, i.e. 24^2 / 360 / 24 h = 0.0667 h.
    assert synodic_sidereal_difference_h(24.0, 1.0) == pytest.approx(24.0 / 360.0)
    assert synodic_sidereal_difference_h(24.0, -1.0) == pytest.approx(24.0 / 360.0)


def test_bisector_rate_of_a_circle():
    # a bisector turning uniformly at 0.7 deg/day in the ecliptic (geometry by construction)
    t = np.linspace(0.0, 40.0, 200)
    lon = np.radians(100.0 + 0.7 * t)
    d = np.column_stack([np.cos(lon), np.sin(lon), np.zeros_like(t)])
    assert bisector_longitude_rate_deg_per_d(t, d, d) == pytest.approx(0.7)
    assert math.isnan(bisector_longitude_rate_deg_per_d(t[:1], d[:1], d[:1]))


def test_simulated_synodic_period_follows_the_bisector():
    # A PA body with its pole at the ecliptic north pole near opposition: the light curve's
    # (synodic) period exceeds the sidereal one by P^2 * rate / 360 for a prograde spin and a
    # bisector moving in the sense of rotation (the phase-angle-bisector rule of thumb, Harris et
    # al. 1984; exact for this pole). Checked to 20 % of the difference, which is many times the
    # scan's error here.
    p_sid = 30.0
    state = RotationState.principal_axis(p_sid, 0.0, 90.0, 0.0, 2459000.5)
    plan = DenseCampaign(start_jd_utc=2459000.5, n_nights=14, hours_per_night=6.0, cadence_min=10.0,
                         night_spacing_d=2.0)
    el = opposition_elements(2459000.5, a_au=1.3, e=0.1, i_deg=2.0, days_before=14.0)
    lc = simulate_lightcurve(state, (1.6, 1.1, 1.0), plan, el, noise=NoiseModel(0.005), rng=4).lightcurve
    rate = bisector_longitude_rate_deg_per_d(lc.t, lc.sun_dir, lc.obs_dir)
    predicted = math.copysign(synodic_sidereal_difference_h(p_sid, rate), rate)
    syn = fourier_scan(lc, min_period_h=25.0, max_period_h=35.0)
    measured = syn.rotation_period_h - p_sid
    assert abs(predicted) > 5.0 * syn.rotation_period_h_err
    assert measured == pytest.approx(predicted, rel=0.2)


def test_synodic_period_error_is_widened_by_the_bisector_drift():
    # the verdict's synodic period: error = hypot(fit error, |P_syn - P_sid|) (the rule of thumb
    # above); without geometry the difference cannot be bounded and the warning says so
    from tumble.classify.rules import _synodic_period

    warn = []
    out = _synodic_period({"period_h": 52.0, "period_h_err": 0.011}, 0.5, warn)
    drift = synodic_sidereal_difference_h(52.0, 0.5)
    assert out["period_kind"] == "synodic"
    assert out["period_h_err"] == pytest.approx(math.hypot(0.011, drift))
    assert out["period_h_err"] > 10 * 0.011 and "synodic" in warn[0]
    warn = []
    out = _synodic_period({"period_h": 52.0, "period_h_err": 0.011}, math.nan, warn)
    assert out == {"period_kind": "synodic"} and "cannot be bounded" in warn[0]


def test_sidereal_period_names_the_poles_its_interval_covers():
    # The verdict's sidereal period: its error is half the geometry-aware fit's interval, and the
    # warning says when several poles fit as well (one apparition rarely fixes the pole: the
    # pole-sense and mirror ambiguities of Kaasalainen & Lamberg 2006, Inverse Problems 22, 749)
    from types import SimpleNamespace

    from tumble.classify.rules import _sidereal_period
    from tumble.sparse.fit import PoleSolution

    poles = (PoleSolution(234.0, 75.0, 487.3, 0.0, "best"), PoleSolution(35.0, -4.0, 498.2, 10.9, "other"),
             PoleSolution(214.0, -16.0, 499.0, 11.6, "other"), PoleSolution(54.0, 75.0, 600.0, 112.7, "mirror"))
    g = SimpleNamespace(geometry_fixed=False, status="unique", period_h=2.98363, period_h_lo=2.98360,
                        period_h_hi=2.98402, poles=poles, pole_delta_chi2=40.5)
    warn = []
    out = _sidereal_period(g, {"period_syn_h": 2.98456}, warn, sparse_route=False)
    assert out["period_kind"] == "sidereal" and out["period_h_err"] == pytest.approx(0.5 * (2.98402 - 2.98360))
    assert "3 poles fit as well" in warn[0]
    warn = []
    _sidereal_period(SimpleNamespace(**{**vars(g), "poles": poles[:1]}), {"period_syn_h": 2.98456}, warn, False)
    assert "mirror solution" in warn[0]
