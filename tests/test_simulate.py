"""Light-curve simulator and ``tumble simulate``: symmetry, round trips, plans, noise, seeds."""

import json

import numpy as np
import pytest
from astropy.time import Time
from astropy.timeseries import LombScargle

from tumble import brightness as br
from tumble import simulate as sim
from tumble.cli import main
from tumble.schema import loads_strict
from tumble.dynamics import RotationState
from tumble.photometry import read_lightcurve

START = 2461000.5  # JD UTC
AXES = (2.0, 1.4, 1.0)


@pytest.fixture(scope="module")
def sam_state():
    return RotationState.from_periods(0.5, 0.85, 40.0, 10.0, "SAM", l_lon_deg=40.0, l_lat_deg=50.0, epoch_jd=START)


@pytest.fixture(scope="module")
def lam_state():
    return RotationState.excited(0.5, 0.85, 0.7, 20.0, 200.0, -30.0, 10.0, 20.0, START)


def _fixed_geometry(n, phase_deg=20.0):
    al = np.radians(phase_deg)
    sun = np.tile([1.0, 0.0, 0.0], (n, 1))
    obs = np.tile([np.cos(al), np.sin(al), 0.0], (n, 1))
    return sun, obs


# ---------------------------------------------------------------- model symmetry


def test_pa_ellipsoid_light_curve_repeats_at_half_period():
    # A principal-axis rotator's ellipsoid light curve is double-peaked and
    # repeats every P/2 (common practice: the ellipsoid is symmetric under a
    # 180-degree turn about its spin axis).
    period_h = 7.3
    state = RotationState.principal_axis(period_h, 75.0, 35.0, 12.0, START)
    t = START + np.linspace(0.0, period_h / 24.0, 721)
    sun, obs = _fixed_geometry(len(t))
    m0 = sim.model_magnitudes(state, AXES, t, sun, obs)
    m_half = sim.model_magnitudes(state, AXES, t + 0.5 * period_h / 24.0, sun, obs)
    m_quarter = sim.model_magnitudes(state, AXES, t + 0.25 * period_h / 24.0, sun, obs)
    np.testing.assert_allclose(m_half, m0, atol=1e-12)
    assert np.ptp(m0) > 0.2  # a real amplitude ...
    assert np.max(np.abs(m_quarter - m0)) > 0.1  # ... which does not repeat at P/4
    # two maxima and two minima per rotation (cyclic sampling of one period)
    m = m0[:-1]
    peaks = np.sum((m < np.roll(m, 1)) & (m < np.roll(m, -1)))  # brightness maxima = magnitude minima
    troughs = np.sum((m > np.roll(m, 1)) & (m > np.roll(m, -1)))
    assert peaks == 2 and troughs == 2


def test_pa_simulation_peaks_at_twice_the_rotation_frequency():
    # Lomb-Scargle (astropy) of a dense, noise-free PA simulation: the strongest
    # frequency is 2/P (double-peaked light curve, common practice), and with the
    # real geometry the curve repeats at P/2 to within the slow change of the
    # viewing geometry over a few hours.
    period_h = 6.0
    state = RotationState.principal_axis(period_h, 30.0, 60.0, 0.0, START)
    plan = sim.DenseCampaign(START + 0.1, n_nights=3, hours_per_night=7.0, cadence_min=5.0, jitter_fraction=0.0)
    out = sim.simulate_lightcurve(state, AXES, plan, noise=sim.NoiseModel(sigma_mag=0.0), rng=1)
    lc = out.lightcurve
    t_h = (lc.t - lc.t[0]) * 24.0
    freq = np.linspace(0.05, 1.0, 20000)
    power = LombScargle(t_h, lc.reduced_mag).power(freq)
    assert freq[np.argmax(power)] == pytest.approx(2.0 / period_h, rel=2e-3)
    half = int(round(0.5 * period_h * 60 / 5.0))  # P/2 in cadence steps
    night = out.lightcurve.session
    same_night = night[half:] == night[:-half]
    diff = (out.model_mag[half:] - out.model_mag[:-half])[same_night]
    assert np.max(np.abs(diff)) < 2e-3


def _two_period_residual(t_h, m, f1, f2, order):
    """Max residual of a least-squares 2-D Fourier series in (f1, f2) (Pravec et al. 2005)."""
    cols = [np.ones_like(t_h)]
    for j in range(order + 1):
        for k in range(-order, order + 1):
            if j == 0 and k <= 0:
                continue
            arg = 2 * np.pi * (j * f1 + k * f2) * t_h
            cols += [np.cos(arg), np.sin(arg)]
    design = np.array(cols).T
    coef, *_ = np.linalg.lstsq(design, m, rcond=None)
    return np.max(np.abs(design @ coef - m))


@pytest.mark.parametrize("which", ["sam", "lam"])
def test_npa_light_curve_is_two_periodic(which, sam_state, lam_state):
    # At fixed geometry the light curve of a free rotator holds only the
    # frequencies n1 f_phi + n2 f_psi (Kaasalainen 2001, A&A 376, 302), so a 2-D
    # Fourier series in (f_phi, f_psi) (Pravec et al. 2005, Icarus 173, 108)
    # fits it to the truncation error; slightly wrong frequencies do not.
    state = sam_state if which == "sam" else lam_state
    t = START + np.sort(np.random.default_rng(1).uniform(0.0, 25.0, 1200))
    sun, obs = _fixed_geometry(len(t))
    m = sim.model_magnitudes(state, AXES, t, sun, obs)
    t_h = (t - START) * 24.0
    f_phi, f_psi = 1.0 / state.p_phi_h, 1.0 / state.p_psi_h
    assert np.ptp(m) > 0.3
    assert _two_period_residual(t_h, m, f_phi, f_psi, 7) < 5e-5  # measured 9e-6 (SAM), 2e-5 (LAM)
    assert _two_period_residual(t_h, m, 1.01 * f_phi, f_psi, 7) > 5e-3  # measured 0.08, 0.017


def test_sphere_follows_the_lommel_seeliger_sphere_phase_law(sam_state):
    # A sphere has no rotational light curve: reduced magnitude = H - 2.5 log10
    # Phi_LS(alpha), the Lommel-Seeliger sphere law (Muinonen & Lumme 2015).
    plan = sim.DenseCampaign(START, n_nights=2, hours_per_night=4.0, cadence_min=20.0)
    out = sim.simulate_lightcurve(sam_state, (1.3, 1.3, 1.3), plan, h_mag=14.0,
                                  noise=sim.NoiseModel(sigma_mag=0.0), rng=0)
    lc = out.lightcurve
    expected = 14.0 - 2.5 * np.log10(br.sphere_ls_phase_function(lc.phase_deg))
    np.testing.assert_allclose(lc.reduced_mag, expected, atol=1e-10)


def test_light_time_and_distance_terms(sam_state):
    # Emission time t_obs(TDB) - Delta/c with 0.0057755183 d per au (IAU 2012
    # au, SI c); apparent minus reduced magnitude is 5 log10(r Delta).
    plan = sim.DenseCampaign(START, n_nights=1, hours_per_night=2.0, cadence_min=30.0)
    out = sim.simulate_lightcurve(sam_state, AXES, plan, noise=sim.NoiseModel(sigma_mag=0.0), rng=0)
    lc = out.lightcurve
    tdb = Time(lc.t_obs, format="jd", scale="utc").tdb
    # (a double JD near 2.46e6 resolves 4.7e-10 d, so compare to 1e-9 d)
    np.testing.assert_allclose((tdb.jd1 - lc.t) + tdb.jd2, lc.delta_au * 0.0057755183, rtol=0, atol=1e-9)
    np.testing.assert_allclose(lc.mag - out.model_mag, 0.0, atol=1e-12)
    np.testing.assert_allclose(lc.mag - lc.reduced_mag, 5 * np.log10(lc.r_au * lc.delta_au), atol=1e-12)
    # the model magnitude at the emission time, not at the observation time
    m_emit = sim.model_magnitudes(sam_state, AXES, lc.t, lc.sun_dir, lc.obs_dir, r_au=lc.r_au,
                                  delta_au=lc.delta_au, h_mag=15.0)
    np.testing.assert_allclose(m_emit, lc.mag, atol=1e-12)


# ---------------------------------------------------------------- files


@pytest.mark.parametrize("name", ["lc.csv", "lc.ecsv", "lc.fits", "lc.xml", "lc.tsv.gz"])
def test_written_file_reproduces_the_model(tmp_path, sam_state, name):
    # Read back by the photometry reader, the file gives the same times and
    # geometry, and the model evaluated on what was read reproduces the
    # magnitudes to float precision (plus the recorded night offsets and noise).
    plan = sim.DenseCampaign(START, n_nights=3, hours_per_night=3.0, cadence_min=10.0, zero_point_sigma_mag=0.05)
    out = sim.simulate_lightcurve(sam_state, AXES, plan, noise=sim.NoiseModel(sigma_mag=0.02), rng=7)
    written = sim.write_simulation(out, tmp_path / name)
    assert written[-1].name == name + ".truth.json"
    back = read_lightcurve(tmp_path / name)
    lc = out.lightcurve
    np.testing.assert_array_equal(back.mag, lc.mag)
    np.testing.assert_array_equal(back.session, lc.session)
    np.testing.assert_allclose(back.t, lc.t, rtol=0, atol=1e-10)  # about 10 microseconds at worst
    model = sim.model_magnitudes(sam_state, AXES, back.t, back.sun_dir, back.obs_dir, r_au=back.r_au,
                                 delta_au=back.delta_au, phase_deg=back.phase_deg, h_mag=15.0)
    np.testing.assert_allclose(model + out.night_offset_mag + out.noise_mag, back.mag, rtol=0, atol=1e-9)
    truth = sim.read_truth(tmp_path / name)
    assert truth["state"]["mode"] == "SAM"
    assert truth["night_zero_points_mag"] == pytest.approx(
        [out.night_offset_mag[lc.session == k][0] for k in range(3)], abs=1e-15)


def test_truth_in_ecsv_metadata_and_state_round_trip(tmp_path, lam_state):
    out = sim.simulate_lightcurve(lam_state, AXES, sim.DenseCampaign(START, n_nights=1), rng=3)
    sim.write_simulation(out, tmp_path / "a.ecsv", sidecar=False)
    assert not (tmp_path / "a.ecsv.truth.json").exists()
    truth = sim.read_truth(tmp_path / "a.ecsv")
    assert truth == json.loads(json.dumps(out.truth))
    state = sim.state_from_dict(truth["state"])
    assert state == lam_state
    assert sim.plan_from_dict(truth["plan"]) == sim.DenseCampaign(START, n_nights=1)
    assert sim.plan_from_dict(sim.SparseSurvey(START).to_dict()) == sim.SparseSurvey(START)
    with pytest.raises(sim.SimulationError):
        sim.write_simulation(out, tmp_path / "a.csv", sidecar=False)


# ---------------------------------------------------------------- plans, noise, seeds


def test_dense_plan_counts(rng):
    plan = sim.DenseCampaign(START, n_nights=4, hours_per_night=6.0, cadence_min=5.0, night_spacing_d=2.0,
                             jitter_fraction=0.0)
    assert plan.points_per_night == 73  # 6 h every 5 min, both ends
    times = plan.times()
    assert len(times.t_utc_jd) == plan.n_points == 4 * 73
    np.testing.assert_array_equal(np.unique(times.session), np.arange(4))
    starts = [times.t_utc_jd[times.night == k].min() for k in range(4)]
    np.testing.assert_allclose(np.diff(starts), 2.0)
    np.testing.assert_allclose(np.diff(times.t_utc_jd[times.night == 0]) * 1440, 5.0)
    # with timing jitter: same counts, each time within +-10 % of a cadence of its grid point
    jittered = sim.DenseCampaign(START, n_nights=4, hours_per_night=6.0, cadence_min=5.0, night_spacing_d=2.0)
    tj = jittered.times(rng).t_utc_jd
    assert len(tj) == 4 * 73 and np.all(np.diff(tj) > 0)
    dev = (tj - times.t_utc_jd) * 1440
    assert np.all(np.abs(dev) <= 0.5) and np.std(dev) > 0.1
    with pytest.raises(sim.SimulationError):
        sim.DenseCampaign(START, hours_per_night=30.0)


def test_sparse_plan_counts_and_gaps(rng):
    plan = sim.SparseSurvey(START, span_d=700.0, n_nights=80, points_per_night=3, visit_spacing_min=40.0)
    times = plan.times(rng)
    assert len(times.t_utc_jd) == plan.n_points == 240
    assert np.all(times.session == -1)
    day = np.floor(times.t_utc_jd - START)
    assert len(np.unique(day)) == 80
    assert day.min() >= 0 and day.max() < 700
    assert np.all(np.diff(times.t_utc_jd) > 0)
    assert np.diff(np.unique(day)).max() > 1  # random gaps between observed nights
    with pytest.raises(sim.SimulationError):
        sim.SparseSurvey(START, span_d=10.0, n_nights=20)


def test_sparse_simulation_keeps_points_sparse(lam_state):
    plan = sim.SparseSurvey(START, span_d=200.0, n_nights=30, points_per_night=2)
    out = sim.simulate_lightcurve(lam_state, AXES, plan, rng=11)
    assert out.lightcurve.n_points == 60
    assert np.all(out.lightcurve.session == -1)
    assert out.truth["n_nights"] == 30


def test_sparse_elongation_cut(lam_state):
    # Solar elongation from the geometry against astropy's own Sun and asteroid
    # positions seen from the geocentre (GCRS separation); visits below the cut
    # are dropped and counted.
    from astropy.coordinates import get_body_barycentric
    from tumble import geometry

    plan = sim.SparseSurvey(START, span_d=720.0, n_nights=100, points_per_night=2, min_elongation_deg=90.0)
    out = sim.simulate_lightcurve(lam_state, AXES, plan, rng=8)
    truth = out.truth
    lc = out.lightcurve
    assert lc.n_points + truth["n_dropped_elongation"] == plan.n_points
    assert 0 < truth["n_dropped_elongation"] < plan.n_points  # two years span every elongation
    tdb = Time(lc.t_obs, format="jd", scale="utc").tdb
    sun = get_body_barycentric("sun", tdb, ephemeris="builtin").xyz.to_value("au").T
    earth = get_body_barycentric("earth", tdb, ephemeris="builtin").xyz.to_value("au").T
    ast_helio = -lc.sun_dir * lc.r_au[:, None]  # ecliptic, from the simulator
    ast = geometry.equatorial_to_ecliptic(sun - earth) + ast_helio  # geocentric asteroid, ecliptic
    to_sun = geometry.equatorial_to_ecliptic(sun - earth)
    cosang = np.sum(ast * to_sun, axis=1) / np.linalg.norm(ast, axis=1) / np.linalg.norm(to_sun, axis=1)
    elong = np.degrees(np.arccos(np.clip(cosang, -1, 1)))
    assert elong.min() >= 90.0 - 1e-3
    np.testing.assert_allclose(sim.solar_elongation_deg(
        geometry.observing_geometry(tdb.jd1 + tdb.jd2, geometry.OrbitalElements(**truth["elements"]))), elong,
        atol=2e-3)  # light time moves the asteroid by ~1e-3 deg


def test_given_cadence_injection(lam_state, sam_state, gault_csv):
    # Injection into a real cadence: the sparse ZTF times of (6478) Gault
    # (shared external data) and a simulated dense campaign's times and sessions.
    real = read_lightcurve(gault_csv)
    plan = sim.GivenCadence.from_lightcurve(real)
    out = sim.simulate_lightcurve(lam_state, AXES, plan, noise=sim.NoiseModel(sigma_mag=0.0), rng=1)
    np.testing.assert_array_equal(out.lightcurve.t_obs, real.t_obs)
    np.testing.assert_array_equal(out.lightcurve.session, real.session)
    np.testing.assert_array_equal(out.lightcurve.band, real.band)
    dense = sim.simulate_lightcurve(sam_state, AXES, sim.DenseCampaign(START, n_nights=3, zero_point_sigma_mag=0.1),
                                    rng=2).lightcurve
    again = sim.simulate_lightcurve(lam_state, AXES, sim.GivenCadence.from_lightcurve(dense, 0.05), rng=3)
    np.testing.assert_array_equal(again.lightcurve.session, dense.session)
    for k in range(3):  # one zero point per given session
        assert np.ptp(again.night_offset_mag[dense.session == k]) == 0.0
    assert len(set(np.round(again.night_offset_mag, 12))) == 3
    back = sim.plan_from_dict(json.loads(json.dumps(again.truth["plan"])))
    np.testing.assert_array_equal(back.t_utc_jd, dense.t_obs)
    with pytest.raises(sim.SimulationError):
        sim.GivenCadence([START, START])


def test_same_seed_same_output(tmp_path, lam_state):
    plan = sim.SparseSurvey(START, span_d=300.0, n_nights=25, points_per_night=2)
    noise = sim.NoiseModel(sigma_mag=0.03, outlier_fraction=0.1)
    a = sim.simulate_lightcurve(lam_state, AXES, plan, noise=noise, rng=42)
    b = sim.simulate_lightcurve(lam_state, AXES, plan, noise=noise, rng=42)
    c = sim.simulate_lightcurve(lam_state, AXES, plan, noise=noise, rng=43)
    np.testing.assert_array_equal(a.lightcurve.mag, b.lightcurve.mag)
    np.testing.assert_array_equal(a.lightcurve.t_obs, b.lightcurve.t_obs)
    assert not np.array_equal(a.lightcurve.t_obs, c.lightcurve.t_obs)
    sim.write_simulation(a, tmp_path / "a.csv")
    sim.write_simulation(b, tmp_path / "b.csv")
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    assert a.truth["seed"] == 42


def test_noise_and_zero_points_have_the_requested_statistics(sam_state):
    plan = sim.DenseCampaign(START, n_nights=6, hours_per_night=8.0, cadence_min=2.0, zero_point_sigma_mag=0.1)
    noise = sim.NoiseModel(sigma_mag=0.05, outlier_fraction=0.05, outlier_sigma_mag=1.0)
    out = sim.simulate_lightcurve(sam_state, AXES, plan, noise=noise, rng=2024)
    n = out.lightcurve.n_points
    inl = out.noise_mag[~out.outlier]
    # sample standard deviation of N Gaussian draws: 5-sigma band of sigma/sqrt(2N)
    assert abs(inl.std() - 0.05) < 5 * 0.05 / np.sqrt(2 * len(inl))
    # binomial count of outliers within 5 sigma
    assert abs(out.outlier.sum() - 0.05 * n) < 5 * np.sqrt(n * 0.05 * 0.95)
    # one offset per night, as recorded in the truth
    for k in range(6):
        assert np.ptp(out.night_offset_mag[out.lightcurve.session == k]) == 0.0
    assert out.truth["night_zero_points_mag"] == pytest.approx(
        [out.night_offset_mag[out.lightcurve.session == k][0] for k in range(6)])
    np.testing.assert_allclose(out.lightcurve.err, 0.05)


def test_bad_inputs_raise(sam_state):
    plan = sim.DenseCampaign(START, n_nights=1)
    with pytest.raises(sim.SimulationError):
        sim.simulate_lightcurve(sam_state, (1.0, 2.0, 0.5), plan)  # not a >= b >= c
    with pytest.raises(sim.SimulationError):
        sim.simulate_lightcurve(sam_state, AXES, plan, law="mirror")
    with pytest.raises(sim.SimulationError):
        sim.NoiseModel(outlier_fraction=1.5)
    with pytest.raises(sim.SimulationError):
        sim.state_from_dict({"mode": "SAM", "i1_i3": 0.5})


def test_ls_lambert_law_differs_a_little_from_pure_ls(sam_state):
    # The Lambert term (Kaasalainen et al. 2001, c = 0.1) changes the shape of
    # the light curve only slightly at low phase.
    plan = sim.DenseCampaign(START, n_nights=1, hours_per_night=4.0, cadence_min=15.0)
    quiet = sim.NoiseModel(sigma_mag=0.0)
    ls = sim.simulate_lightcurve(sam_state, AXES, plan, noise=quiet, rng=0).model_mag
    lsl = sim.simulate_lightcurve(sam_state, AXES, plan, noise=quiet, rng=0, law="ls-lambert").model_mag
    d = (lsl - lsl.mean()) - (ls - ls.mean())
    assert 0 < np.max(np.abs(d)) < 0.05


# ---------------------------------------------------------------- command line


@pytest.mark.parametrize("args", [
    ["--mode", "pa", "--period", "5.5"],
    ["--mode", "sam", "--p-psi", "40", "--p-phi", "12", "--zero-point-sigma", "0.02"],
    ["--mode", "lam", "--p-psi", "20", "--id-i3", "0.7", "--plan", "sparse", "--nights", "30", "--hg", "0.2"],
    ["--mode", "sam", "--p-psi", "30", "--id-i3", "0.9", "--plan", "sparse", "--points-per-night", "1",
     "--nights", "40", "--phase-slope", "0.03"],
])
def test_cli_writes_readable_files(tmp_path, capsys, args):
    out = tmp_path / "x.ecsv"
    assert main(["simulate", "-o", str(out), "--seed", "5", *args]) == 0
    printed = capsys.readouterr().out
    assert "wrote" in printed and str(out) in printed
    lc = read_lightcurve(out)
    truth = sim.read_truth(out)
    assert lc.n_points == truth["n_points"]
    mode = args[1].upper()
    assert truth["state"]["mode"] == mode


def test_cli_state_file_json_output_and_errors(tmp_path, capsys):
    state = tmp_path / "state.json"
    state.write_text(json.dumps({"mode": "LAM", "i1_i3": 0.5, "i2_i3": 0.85, "p_psi_h": 20.0, "p_phi_h": 9.0,
                                 "l_lon_deg": 10.0, "l_lat_deg": 20.0}))
    out = tmp_path / "s.csv"
    assert main(["simulate", "-o", str(out), "--state", str(state), "--json", "--seed", "1"]) == 0
    truth = loads_strict(capsys.readouterr().out)
    assert truth["state"]["mode"] == "LAM"
    assert truth["state"]["p_phi_h"] == pytest.approx(9.0, rel=1e-9)
    # the same seed again gives the same file
    first = out.read_bytes()
    assert main(["simulate", "-o", str(out), "--state", str(state), "--quiet", "--seed", "1"]) == 0
    assert out.read_bytes() == first
    # bad input: exit code 2 with a one-line message
    assert main(["simulate", "-o", str(out), "--mode", "sam", "--p-psi", "40"]) == 2
    assert main(["simulate", "-o", str(out), "--mode", "sam", "--p-psi", "40", "--id-i3", "0.6"]) == 2
    assert main(["simulate", "-o", str(out), "--axes", "1,2"]) == 2
    assert main(["simulate", "-o", str(out), "--state", str(tmp_path / "missing.json")]) == 2
    assert main(["simulate", "-o", str(tmp_path / "s.csv"), "--no-sidecar"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 5 and "tumble simulate: error:" in err


def test_scan_recovers_the_simulated_pa_period(tmp_path, capsys):
    # End to end: `tumble scan` reads what `tumble simulate` wrote and finds the
    # rotation period of a double-peaked PA light curve (common practice).
    pytest.importorskip("tumble.cli.scan_cmd")
    out = tmp_path / "pa.csv"
    assert main(["simulate", "-o", str(out), "--mode", "pa", "--period", "6.0", "--nights", "3", "--seed", "1",
                 "--quiet"]) == 0
    assert main(["scan", str(out), "--json", "--quiet"]) == 0
    res = loads_strict(capsys.readouterr().out)
    assert res["rotation_period_h"] == pytest.approx(6.0, abs=max(3 * res["rotation_period_h_err"], 2e-3))
