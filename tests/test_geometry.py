"""Observing geometry against constants, astropy, and round trips."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tumble import geometry as geo
from tumble.exceptions import GeometryError


def test_light_time_per_au():
    # IAU 2012 Resolution B2 (au = 149 597 870.7 km) and c = 299 792.458 km/s:
    # 499.004784 s per au.
    assert geo.LIGHT_TIME_DAYS_PER_AU * 86400 == pytest.approx(499.004784, abs=1e-6)
    assert geo.light_time_days(0.2) * 86400 == pytest.approx(99.80096, abs=1e-5)


def test_light_time_against_astropy_constants():
    # astropy.constants (CODATA / IAU values) as the reference library.
    import astropy.constants as const
    import astropy.units as u

    lt = (1 * u.au / const.c).to_value(u.day)
    assert geo.LIGHT_TIME_DAYS_PER_AU == pytest.approx(lt, rel=1e-12)


def test_reduced_magnitude_example():
    # H(alpha) = m - 5 log10(r Delta) (Bowell et al. 1989): m = 15, r = 2, Delta = 1.2.
    assert geo.reduced_magnitude(15.0, 2.0, 1.2) == pytest.approx(13.098944, abs=1e-6)
    with pytest.raises(GeometryError):
        geo.reduced_magnitude(15.0, 0.0, 1.0)


def test_phase_angle_matches_astropy_separation(rng):
    # astropy's angular separation (Vincenty formula) as the reference.
    from astropy.coordinates import CartesianRepresentation, SkyCoord

    s = rng.normal(size=(50, 3))
    o = rng.normal(size=(50, 3))
    ours = geo.phase_angle_deg(s, o)
    c1 = SkyCoord(CartesianRepresentation(*s.T), representation_type="cartesian", frame="icrs")
    c2 = SkyCoord(CartesianRepresentation(*o.T), representation_type="cartesian", frame="icrs")
    np.testing.assert_allclose(ours, c1.separation(c2).deg, atol=1e-10)
    b = geo.phase_angle_bisector(s, o)
    np.testing.assert_allclose(geo.phase_angle_deg(b, s), ours / 2, atol=1e-9)


@settings(max_examples=300, deadline=None)
@given(m=st.floats(-50, 50), e=st.floats(0, 0.99))
def test_kepler_round_trip(m, e):
    # Kepler's equation M = E - e sin E (Murray & Dermott 1999, eq. 2.52): round trip to 1e-12 rad.
    ecc = geo.solve_kepler(m, e)
    assert ecc - e * np.sin(ecc) == pytest.approx(m, abs=1e-12)


def test_kepler_vectorised_high_e():
    m = np.linspace(-4 * np.pi, 4 * np.pi, 20001)
    for e in (0.0, 0.5, 0.9, 0.99, 0.999):
        ecc = geo.solve_kepler(m, e)
        np.testing.assert_allclose(ecc - e * np.sin(ecc), m, atol=1e-12)


def test_elements_state_round_trip(rng):
    # Two-body elements -> state -> elements (Murray & Dermott 1999, ch. 2).
    for _ in range(20):
        el = geo.OrbitalElements(
            a_au=rng.uniform(0.6, 5), e=rng.uniform(0, 0.95), i_deg=rng.uniform(0.5, 170),
            node_deg=rng.uniform(0, 360), peri_deg=rng.uniform(0, 360), mean_anomaly_deg=rng.uniform(0, 360),
            epoch_jd=2460000.5,
        )
        pos, vel = el.position_velocity(2460000.5)
        back = geo.OrbitalElements.from_state(pos, vel, 2460000.5)
        for f in ("a_au", "e", "i_deg"):
            assert getattr(back, f) == pytest.approx(getattr(el, f), rel=1e-9, abs=1e-9)
        p2, _ = back.position_velocity(2460100.5)
        p1, _ = el.position_velocity(2460100.5)
        np.testing.assert_allclose(p2, p1, atol=1e-9)


def test_energy_and_angular_momentum_conserved(rng):
    # Two-body invariants (vis-viva): v^2 / 2 - GM / r = -GM / (2a).
    el = geo.OrbitalElements(1.8, 0.4, 12.0, 80.0, 150.0, 10.0, 2460000.5)
    t = 2460000.5 + np.linspace(0, 2000, 300)
    pos, vel = el.position_velocity(t)
    energy = 0.5 * np.sum(vel**2, axis=1) - geo.GM_SUN_AU3_D2 / np.linalg.norm(pos, axis=1)
    np.testing.assert_allclose(energy, -geo.GM_SUN_AU3_D2 / (2 * el.a_au), rtol=1e-12)
    h = np.cross(pos, vel)
    np.testing.assert_allclose(h, np.broadcast_to(h[0], h.shape), rtol=1e-10, atol=1e-14)


def test_earth_two_body_against_astropy_ephemeris():
    # The Earth's osculating elements from astropy's built-in ephemeris (ERFA epv00),
    # propagated 30 days as a two-body orbit, agree with the full ephemeris to
    # better than 1e-3 au (planetary perturbations and the Moon are left out of
    # the two-body orbit, so the agreement is not exact).
    t0 = 2460310.5
    pos, vel = geo.earth_heliocentric_ecliptic(t0)
    el = geo.OrbitalElements.from_state(pos[0], vel[0], t0)
    assert el.a_au == pytest.approx(1.0, abs=0.02)  # common practice: 1 au
    assert el.e == pytest.approx(0.0167, abs=0.003)  # from memory: Earth's e ~ 0.0167
    assert el.i_deg < 0.01  # ecliptic frame: the Earth's inclination is ~0
    t = t0 + np.arange(0, 31)
    ours = el.position(t)
    ref, _ = geo.earth_heliocentric_ecliptic(t)
    assert np.max(np.linalg.norm(ours - ref, axis=1)) < 1e-3


def test_observing_geometry_consistency():
    # A main-belt-like orbit: distances and phase angle are mutually consistent
    # (law of cosines in the Sun-asteroid-observer triangle, common practice).
    el = geo.OrbitalElements(2.6, 0.1, 8.0, 100.0, 30.0, 40.0, 2460000.5)
    t = 2460000.5 + np.linspace(0, 200, 50)
    g = geo.observing_geometry(t, el)
    earth, _ = geo.earth_heliocentric_ecliptic(t)
    r_earth = np.linalg.norm(earth, axis=1)
    cos_alpha = (g.r_au**2 + g.delta_au**2 - r_earth**2) / (2 * g.r_au * g.delta_au)
    np.testing.assert_allclose(np.cos(np.radians(g.phase_deg)), cos_alpha, atol=1e-5)  # light time shifts the asteroid
    np.testing.assert_allclose(np.linalg.norm(g.sun_dir, axis=1), 1.0)
    assert np.all(g.phase_deg < 25)  # a main-belt asteroid never exceeds ~30 deg (common practice)


def test_topocentric_offset_is_earth_radius_sized():
    el = geo.OrbitalElements(1.2, 0.2, 5.0, 10.0, 20.0, 30.0, 2460000.5)
    t = np.array([2460000.5, 2460000.75])
    station = geo.Observatory(lon_deg=-70.0, lat_deg=-30.0, height_m=2200.0)
    g0 = geo.observer_heliocentric_ecliptic(t)
    g1 = geo.observer_heliocentric_ecliptic(t, station)
    offset_km = np.linalg.norm(g1 - g0, axis=1) * geo.AU_KM
    # The station lies about one Earth radius (6371 km, IAU nominal) from the geocentre.
    np.testing.assert_allclose(offset_km, 6371, rtol=0.01)
    _ = geo.observing_geometry(t, el, station)


def test_bad_elements():
    with pytest.raises(GeometryError):
        geo.OrbitalElements(-1.0, 0.1, 0, 0, 0, 0, 2460000.5)
    with pytest.raises(GeometryError):
        geo.OrbitalElements(1.0, 1.0, 0, 0, 0, 0, 2460000.5)
