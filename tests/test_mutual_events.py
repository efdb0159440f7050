"""Mutual events of a binary: disc overlap, eclipse/occultation flux loss, the simulator's binary option."""

import math

import numpy as np
import pytest

from tumble import simulate as sim
from tumble.brightness import sphere_ls_phase_function
from tumble.dynamics import RotationState
from tumble.mutual_events import (BinaryOrbit, MutualEventError, binary_flux_loss, disc_overlap_area,
                                  disc_overlap_area_reference)

START = 2461000.5


@pytest.mark.parametrize("r1, r2, d", [(1.0, 0.3, 0.0), (1.0, 0.3, 0.5), (1.0, 0.3, 1.0), (1.0, 0.3, 1.25),
                                       (1.0, 0.3, 1.31), (1.0, 1.0, 1.0), (0.4, 1.0, 0.9), (1.0, 0.5, 3.0)])
def test_disc_overlap_matches_grid_count(r1, r2, d):
    # textbook lens area of two discs (common practice) against the slow grid count
    assert disc_overlap_area(r1, r2, d) == pytest.approx(disc_overlap_area_reference(r1, r2, d), abs=2e-3)


def test_disc_overlap_edge_cases():
    # no overlap beyond r1 + r2, full containment within |r1 - r2|, equal discs at d = r: textbook values
    # (common practice): the lens of two unit discs one radius apart is 2 pi/3 - sqrt(3)/2
    assert disc_overlap_area(1.0, 0.3, 1.3) == 0.0
    assert disc_overlap_area(1.0, 0.3, 5.0) == 0.0
    assert disc_overlap_area(1.0, 0.3, 0.7) == pytest.approx(math.pi * 0.09)
    assert disc_overlap_area(0.3, 1.0, 0.2) == pytest.approx(math.pi * 0.09)
    assert disc_overlap_area(1.0, 1.0, 1.0) == pytest.approx(2 * math.pi / 3 - math.sqrt(3) / 2)
    assert disc_overlap_area(1.0, 1.0, 0.0) == pytest.approx(math.pi)
    # continuity at both edges
    assert disc_overlap_area(1.0, 0.3, 1.3 - 1e-9) == pytest.approx(0.0, abs=1e-6)
    assert disc_overlap_area(1.0, 0.3, 0.7 + 1e-9) == pytest.approx(math.pi * 0.09, abs=1e-6)


@pytest.mark.parametrize("sign", [1.0, -1.0])
@pytest.mark.parametrize("d", [0.0, 0.4, 0.9, 1.1, 1.25, 1.4])
def test_zero_phase_event_loss_is_the_overlap_area(sign, d):
    # At zero phase a Lommel-Seeliger disc is uniform (mu0 = mu), the shadow hides behind the
    # occulter, and the flux lost is the overlapping area of the two discs over their total area
    # (textbook disc overlap; common practice). sign +1: satellite in front (transit), -1: behind.
    q = 0.3
    o = np.array([[1.0, 0.0, 0.0]])
    pos = np.array([[sign * 4.0, d, 0.0]])
    loss = binary_flux_loss(pos, o, o, q, n_grid=96)[0]
    expected = disc_overlap_area(1.0, q, d) / (math.pi * (1 + q * q))
    assert loss == pytest.approx(expected, abs=1e-3)


def test_eclipse_without_occultation_loses_light():
    # Sun 30 deg from the observer; the satellite sits on the Sun side so its shadow falls on the
    # primary while the observer sees the two discs apart: an eclipse only (common practice: a
    # mutual eclipse can happen outside any occultation at non-zero phase)
    a = math.radians(30)
    s = np.array([[math.cos(a), math.sin(a), 0.0]])
    o = np.array([[1.0, 0.0, 0.0]])
    pos = 4.0 * s
    assert np.linalg.norm(pos[0] - (pos[0] @ o[0]) * o[0]) > 1.3  # discs apart for the observer
    q = 0.3
    loss = binary_flux_loss(pos, s, o, q, n_grid=96)[0]
    # a small shadow at the subsolar point (mu0 = 1, mu = cos alpha) removes pi q^2 mu / (mu0 + mu) of
    # Lommel-Seeliger flux from a system of flux (pi/2) Phi(alpha) (1 + q^2) (LS sphere phase function,
    # Muinonen & Lumme 2015); the sphere's curvature under the shadow makes it a few per cent smaller
    expected = math.pi * q * q * math.cos(a) / (1 + math.cos(a)) / (0.5 * math.pi * sphere_ls_phase_function(30.0) * (1 + q * q))
    assert loss == pytest.approx(expected, rel=0.05)
    assert binary_flux_loss(-4.0 * np.array([[0.0, 0.0, 1.0]]), s, o, 0.3)[0] == 0.0


def test_binary_orbit_validation():
    with pytest.raises(MutualEventError, match="contact"):
        BinaryOrbit(12.0, 0.3, 1.2)
    with pytest.raises(MutualEventError, match="size_ratio"):
        BinaryOrbit(12.0, 1.5, 4.0)
    with pytest.raises(MutualEventError, match="p_orb_h"):
        BinaryOrbit(-1.0, 0.3, 4.0)


def _runs(mask):
    edges = np.flatnonzero(np.diff(np.r_[0, mask.astype(int), 0]))
    return list(zip(edges[::2], edges[1::2]))


def test_simulated_edge_on_binary_has_two_events_per_orbit():
    # An edge-on circular orbit (pole perpendicular to the Sun and observer directions) gives two
    # mutual events per orbit half an orbit apart; near zero phase each removes the satellite's
    # disc area from sight: depth 2.5 log10(1 + q^2) (common practice; disc overlap above)
    q, p_orb_h = 0.3, 12.0
    plan = sim.GivenCadence(START + np.arange(0, 1.0, 1.0 / 720), session=np.zeros(720, int))
    state = RotationState.principal_axis(3.0, 0.0, 90.0, 0.0, START)
    base = sim.simulate_lightcurve(state, (1.0, 1.0, 1.0), plan, noise=sim.NoiseModel(0.0), rng=1)
    o, s = base.lightcurve.obs_dir.mean(axis=0), base.lightcurve.sun_dir.mean(axis=0)
    pole = np.cross(o, s)
    pole /= np.linalg.norm(pole)
    binary = BinaryOrbit(p_orb_h, q, 4.0, math.degrees(math.atan2(pole[1], pole[0])), math.degrees(math.asin(pole[2])),
                         37.0, START)
    r = sim.simulate_lightcurve(state, (1.0, 1.0, 1.0), plan, noise=sim.NoiseModel(0.0), rng=1, binary=binary)
    assert r.truth["binary"]["p_orb_h"] == p_orb_h
    depth = r.model_mag - np.median(r.model_mag)
    expected = 2.5 * math.log10(1 + q * q)
    runs = _runs(depth > 0.5 * expected)
    assert len(runs) == 4  # two orbits of 12 h in 24 h
    peaks = [float(depth[a:b].max()) for a, b in runs]
    assert min(peaks) == pytest.approx(expected, rel=0.05)
    assert max(peaks) < 1.3 * expected  # the transit's shadow, offset at the small phase angle, adds a little
    centres = np.array([np.mean(r.lightcurve.t[a:b]) for a, b in runs])
    np.testing.assert_allclose(np.diff(centres) * 24.0, p_orb_h / 2, rtol=0.03)
    # outside the events the satellite adds its light: q^2 of the primary's at this phase
    assert np.median(r.model_mag) - np.median(base.model_mag) == pytest.approx(-expected, abs=2e-3)


def test_cli_simulate_binary(tmp_path, capsys):
    # the binary option from the command line: the truth holds the orbit, a bad orbit exits 2
    from tumble.cli import main
    from tumble.simulate import read_truth

    out = tmp_path / "bin.csv"
    assert main(["simulate", "-o", str(out), "--period", "2.26", "--binary-orbit", "11.9", "--size-ratio", "0.25",
                 "--orbit-radius", "3", "--nights", "2", "--seed", "3"]) == 0
    assert "binary: P_orb = 11.9 h" in capsys.readouterr().out
    assert read_truth(out)["binary"]["size_ratio"] == 0.25
    assert main(["simulate", "-o", str(tmp_path / "bad.csv"), "--binary-orbit", "11.9", "--orbit-radius", "1.1"]) == 2
    assert "contact" in capsys.readouterr().err
