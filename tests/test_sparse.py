"""Geometry-aware PA fit (tumble.sparse): kernels against their references, published phase
functions, sidereal periods of simulated bodies, real ZTF data, and bounded scan memory."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tumble.dynamics import RotationState
from tumble.photometry import LightCurve, is_sparse_sessions, read_lightcurve
from tumble.phase_function import hg1g2, hg12
from tumble.simulate import DenseCampaign, NoiseModel, SparseSurvey, opposition_elements, simulate_lightcurve
from tumble.sparse import SparseFitError, fit_pa_geometry, fit_phase_curve
from tumble.sparse import kernel as KR
from tumble.sparse.fit import _build_problem
from tumble.sparse.model import model_magnitudes, model_magnitudes_reference

GB = 1 << 30


def _random_problem(rng, n=70):
    t = np.sort(rng.uniform(-300.0, 300.0, n))
    s = rng.normal(size=(n, 3))
    s /= np.linalg.norm(s, axis=1)[:, None]
    o = s + 0.3 * rng.normal(size=(n, 3))
    o /= np.linalg.norm(o, axis=1)[:, None]
    z0 = np.column_stack([np.ones(n), rng.uniform(0.0, 20.0, n)])
    return KR.scan_problem(t, 0.1 * rng.normal(size=n), np.full(n, 100.0), z0, s, o, 0.0)


@pytest.mark.parametrize("n_freq", [17, 300])  # direct sums and the NUFFT path
def test_bisector_kernel_matches_lstsq_reference(rng, n_freq):
    problem = _random_problem(rng)
    lon, lat = KR.fibonacci_poles(6)
    poles = KR.pole_vectors(lon, lat)
    f0, df = 1.3, 7e-4
    fast = KR.bisector_chi2(problem, poles, f0, df, n_freq)
    ref = KR.bisector_chi2_reference(problem, poles, f0 + df * np.arange(n_freq))
    np.testing.assert_allclose(fast, ref, rtol=1e-6)


def test_bisector_blocks_do_not_grow_with_the_grid(rng):
    problem = _random_problem(rng)
    poles = KR.pole_vectors(*KR.fibonacci_poles(48))
    batch = KR.prepare_poles(problem, poles)
    # the complex sums of one block stay within the budget, whatever the grid length
    assert batch.block_length() * batch.n_poles * (2 * batch.q + 6) <= KR.BLOCK_ELEMENTS


def test_pole_frame_is_right_handed():
    p = np.vstack([KR.pole_vectors([0, 75, 200, 300], [10, -40, 89.9, 0]), [[0, 0, 1.0], [0, 0, -1.0]]])
    e1, e2 = KR.pole_frame(p)
    np.testing.assert_allclose(np.cross(e1, e2), p, atol=1e-12)
    np.testing.assert_allclose(np.sum(e1 * p, axis=1), 0.0, atol=1e-12)


@pytest.mark.parametrize("law,tol", [("lommel-seeliger", 1e-9), ("ls-lambert", 1e-5)])
def test_ellipsoid_model_matches_rotation_matrix_reference(rng, law, tol):
    lc = _sparse_sim(1, n_nights=40).lightcurve
    pb = _build_problem(lc, None, 10.0, law, "hg1g2", 0.01)
    x = np.array([24.0 / 10.0, 123.0, -35.0, 0.7, math.log(1.4), math.log(1.2), 0.3, 0.4])
    fast = model_magnitudes(pb.ellipsoid, x[None])[0]
    slow = model_magnitudes_reference(pb.ellipsoid, x)
    assert fast.size == lc.n_points
    np.testing.assert_allclose(fast, slow, atol=tol)


def test_hg1g2_recovered_from_noiseless_published_basis():
    # Muinonen et al. (2010, Icarus 209, 542): basis functions of tumble.phase_function
    # (their Table 1); a noiseless curve must give back H, G1, G2 to 1e-3
    phase = np.linspace(0.3, 60.0, 40)
    for h, g1, g2 in [(15.0, 0.3, 0.4), (12.2, 0.62, 0.2), (18.5, 0.1, 0.7)]:
        fit = fit_phase_curve(phase, hg1g2(phase, h, g1, g2), 0.01)
        assert abs(fit.h_mag - h) < 1e-3 and abs(fit.g1 - g1) < 1e-3 and abs(fit.g2 - g2) < 1e-3


def test_hg12_recovered_from_noiseless_published_mapping():
    # Muinonen et al. (2010): H,G12 through their piecewise-linear G12 -> (G1, G2) mapping
    phase = np.linspace(1.0, 40.0, 30)
    fit = fit_phase_curve(phase, hg12(phase, 14.3, 0.45), model="hg12")
    assert abs(fit.h_mag - 14.3) < 1e-3 and abs(fit.g12 - 0.45) < 1e-3


def test_phase_curve_rejects_bad_input():
    with pytest.raises(SparseFitError, match="too few"):
        fit_phase_curve([1.0, 2.0], [15.0, 15.1])
    with pytest.raises(SparseFitError, match="unknown model"):
        fit_phase_curve([1.0, 2.0, 3.0], [15.0, 15.1, 15.2], model="hg")


def _sparse_sim(seed, *, period_h=10.0637, lon=107.5, lat=38.9, n_nights=100, span_d=800.0):
    state = RotationState.principal_axis(period_h, lon, lat, 30.0, 2459000.5)
    plan = SparseSurvey(start_jd_utc=2459000.5, span_d=span_d, n_nights=n_nights, points_per_night=2,
                        min_elongation_deg=90.0)
    from tumble.brightness import PhaseTrend

    return simulate_lightcurve(state, (1.6, 1.2, 1.0), plan, noise=NoiseModel(0.03), rng=seed,
                               trend=PhaseTrend("hg", g=0.15, relative_to_sphere=True))


def test_sparse_pa_sidereal_period_and_pole_recovered():
    # Simulated multi-apparition sparse survey (two oppositions, 74 points, 0.03 mag): the
    # sidereal period within 1 % (the target) and inside the reported interval, a pole
    # within 20 deg of the truth or its mirror (Kaasalainen & Lamberg 2006: the l + 180 deg ambiguity)
    sim = _sparse_sim(2, period_h=10.063527624731542)
    fit = fit_pa_geometry(sim.lightcurve, rng=1, n_steps=100)
    truth = 10.063527624731542
    assert fit.status == "unique", fit.message
    assert abs(fit.period_h - truth) < 0.01 * truth
    assert fit.period_h_lo <= truth <= fit.period_h_hi
    p_true = KR.pole_vectors(107.5, 38.9)
    p_mirror = KR.pole_vectors(287.5, 38.9)
    ang = [math.degrees(math.acos(np.clip(KR.pole_vectors(p.lon_deg, p.lat_deg) @ q, -1, 1)))
           for p in fit.poles if p.delta_chi2_scaled <= fit.alias_delta_chi2 for q in (p_true, p_mirror)]
    assert min(ang) < 20.0
    assert abs(fit.b_over_a - 1.2 / 1.6) < 0.1  # the simulated axes 1.6 : 1.2 : 1.0
    assert fit.bic == pytest.approx(fit.n_params * math.log(fit.n_points) - 2.0 * fit.max_log_likelihood)
    d = fit.to_dict()
    assert d["status"] == "unique" and d["alias_family"][0]["delta_chi2_scaled"] == 0.0


def test_pole_threshold_is_the_chi_square_spread():
    # The poles' threshold is a goodness-of-fit one: the standard deviation of the chi-square law
    # with the fit's degrees of freedom, sqrt(2 dof) (scipy.stats.chi2), never below the alias
    # threshold; every listed pole other than the mirror lies within it
    from scipy.stats import chi2

    from tumble.sparse import fit as F

    for dof in (10, 300, 5000):
        assert F._pole_threshold(9.0, dof) == pytest.approx(max(9.0, F.POLE_FIT_SIGMAS * chi2(dof).std()))
    sim = _sparse_sim(2, period_h=10.063527624731542)
    fit = fit_pa_geometry(sim.lightcurve, rng=1, n_steps=100)
    assert fit.pole_delta_chi2 == pytest.approx(max(fit.alias_delta_chi2, chi2(fit.dof).std()))
    assert all(p.delta_chi2_scaled <= fit.pole_delta_chi2 or p.kind == "mirror" for p in fit.poles)
    assert fit.to_dict()["pole_delta_chi2"] == fit.pole_delta_chi2


def test_sidereal_period_where_the_synodic_differs():
    # Near-Earth geometry over 90 days (phase 14-47 deg): the phase-angle bisector moves fast,
    # so a time-Fourier (synodic) period misses the sidereal one by far more than its error
    # (the PAB rule of thumb, Harris et al. 1984, Icarus 57, 251); the geometry-aware fit
    # recovers the sidereal period within its interval.
    from tumble.periodogram import fourier_scan

    p_sid = 20.0
    state = RotationState.principal_axis(p_sid, 30.0, 80.0, 0.0, 2459000.5)
    plan = DenseCampaign(start_jd_utc=2459000.5, n_nights=16, hours_per_night=5.0, cadence_min=10.0,
                         night_spacing_d=6.0)
    el = opposition_elements(2459000.5, a_au=1.2, e=0.1, i_deg=5.0, days_before=8.0)
    lc = simulate_lightcurve(state, (1.5, 1.1, 1.0), plan, el, noise=NoiseModel(0.01), rng=3).lightcurve
    syn = fourier_scan(lc, min_period_h=18.0, max_period_h=22.0)
    assert abs(syn.rotation_period_h - p_sid) > 3.0 * syn.rotation_period_h_err
    fit = fit_pa_geometry(lc, period_range_h=(15.0, 30.0), rng=1, n_steps=100)
    assert fit.status == "unique", fit.message
    assert fit.period_h_lo <= p_sid <= fit.period_h_hi
    assert abs(fit.period_h - p_sid) < abs(syn.rotation_period_h - p_sid) / 10.0


def test_pole_sense_spread_follows_the_orbital_motion():
    # The bisector of a main-belt body turns about once per orbit, so sidereal solutions of opposite
    # sense differ by about 2 / P_orb (Kepler's third law, P_orb = a^1.5 yr; the sidereal-synodic
    # relation of Kaasalainen 2004); with no geometry the spread is the grid tolerance alone.
    from tumble.sparse.fit import SAME_ROTATION_EXTRA_STEPS, _pole_sense_spread

    state = RotationState.principal_axis(10.0637, 107.5, 38.9, 30.0, 2459000.5)
    plan = SparseSurvey(start_jd_utc=2459000.5, span_d=800.0, n_nights=100, points_per_night=2,
                        min_elongation_deg=90.0)
    el = opposition_elements(2459100.5, a_au=2.5, e=0.05, i_deg=5.0)
    lc = simulate_lightcurve(state, (1.6, 1.2, 1.0), plan, el, noise=NoiseModel(0.03), rng=2).lightcurve
    pb = _build_problem(lc, None, None, "lommel-seeliger", "auto", 0.01)
    p_orb_d = 365.25 * 2.5**1.5
    extra = SAME_ROTATION_EXTRA_STEPS * pb.df
    assert _pole_sense_spread(pb) - extra == pytest.approx(2.0 / p_orb_d, rel=0.35)
    flat = LightCurve.from_arrays(lc.t, lc.mag, lc.err, object_id="no-geometry")
    pb0 = _build_problem(flat, None, None, "lommel-seeliger", "auto", 0.01)
    assert pb0.geometry_fixed and _pole_sense_spread(pb0) == pytest.approx(SAME_ROTATION_EXTRA_STEPS * pb0.df)


@pytest.mark.slow
def test_gault_ztf_classify_reports_no_unique_period(gault_csv):
    # (6478) Gault, 65 real ZTF points (shared/external_data/gault_ztf/README.md; Ye et al. 2019):
    # the published period is about 2.5 h at <= 0.05 mag (Purdum et al. 2021), so no period is
    # expected from these points (common practice). The sparse route of classify runs and says so:
    # undecided, no period, the reason named (the file has r, Delta and phase but no directions).
    from tumble.classify import classify

    v = classify(read_lightcurve(gault_csv), rng=1, detection_limit=False).verdict
    d = v.to_dict()
    assert d["route"] == "sparse"
    assert v.rotation == "undecided" and v.grade == "none"
    assert d.get("period_h") is None or not math.isfinite(d["period_h"])
    assert "no observing geometry" in v.grade_reason


def test_gault_ztf_gives_no_unique_period(gault_csv):
    # (6478) Gault, 65 ZTF points over 451 days (shared/external_data/gault_ztf/README.md): the
    # published period is about 2.5 h at <= 0.05 mag (Purdum et al. 2021), so none is expected
    # from these points (common practice); the fit must say "undecided", never a lone number.
    lc = read_lightcurve(gault_csv)
    fit = fit_pa_geometry(lc, rng=1, n_steps=60)
    assert fit.status != "unique"
    assert math.isnan(fit.period_h)
    assert fit.geometry_fixed and any("no observing geometry" in w for w in fit.warnings)


def _two_blocks_27_years():
    """100 points in two 4-h blocks 27 years apart (the file of issue 16's Why section)."""
    g = np.random.default_rng(1)
    t0 = 2450000.5
    t = np.concatenate([t0 + np.linspace(0.0, 4.0 / 24, 50), t0 + 27 * 365.25 + np.linspace(0.0, 4.0 / 24, 50)])
    mag = 15.0 + 0.2 * np.sin(4 * np.pi * t * 24 / 6.0) + 0.01 * g.standard_normal(100)
    return LightCurve.from_arrays(t, mag, np.full(100, 0.01), object_id="two-blocks")


_MEMORY_SCRIPT = """
import resource, sys
sys.path.insert(0, {tests!r})
from test_sparse import _two_blocks_27_years
from tumble.periodogram import fourier_scan, two_period_scan
from tumble.sparse import fit_pa_geometry
lc = _two_blocks_27_years()
assert lc.span_d > 9800
fourier_scan(lc, min_period_h=95.0, max_period_h=105.0)
two_period_scan(lc, min_period_h=5.9, max_period_h=6.1)
fit_pa_geometry(lc, period_range_h=(5.98, 6.02), sample=False)
# VmHWM is the peak of this process's own memory map; ru_maxrss would also carry the high-water mark
# of the (large) pytest process it was forked from, which Linux keeps across exec
try:
    hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM:")][0]
    print(int(hwm.split()[1]) * 1024)
except (OSError, IndexError):
    print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024)
"""


def test_scan_memory_bounded_on_a_27_year_span():
    # peak resident memory of a fresh process (resource.getrusage) running the 1-D scan, the
    # two-period search and the sparse fit on the 27-year file with small grids (the full
    # measurement over spans of 30-10 000 d is in benchmarks/bench_sparse.py)
    import os
    import subprocess
    import sys
    from pathlib import Path

    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    out = subprocess.run([sys.executable, "-c", _MEMORY_SCRIPT.format(tests=str(Path(__file__).parent))],
                         capture_output=True, text=True, env=env, timeout=600)
    assert out.returncode == 0, out.stderr[-2000:]
    peak = int(out.stdout.strip().splitlines()[-1])
    assert 0 < peak < GB


def test_sparse_grid_limit_is_a_clear_error():
    lc = _two_blocks_27_years()
    with pytest.raises(SparseFitError, match="above the limit"):
        fit_pa_geometry(lc, period_range_h=(0.2, 100.0))


def test_is_sparse_is_one_rule():
    assert is_sparse_sessions([-1, -1, 0])
    assert not is_sparse_sessions([-1, 0, 0])
    assert not is_sparse_sessions([-1, -1, 0, 0])  # exactly half is not "most"
    assert _sparse_sim(1, n_nights=30).lightcurve.is_sparse
