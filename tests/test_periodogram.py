"""Period search: the fast scan against reference libraries, the slow reference, published periods.

Sources named beside each check. Random data come from explicit, seeded
generators.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tumble.periodogram import (
    FAP_THRESHOLD,
    PeriodSearchError,
    SIDEREAL_DAY_PER_D,
    alias_label,
    fourier_chi2,
    fourier_chi2_reference,
    fourier_fit,
    fourier_scan,
    frequency_grid,
    prepare,
    two_period_chi2,
    two_period_basis,
    two_period_chi2_reference,
    two_period_scan,
)
from tumble.periodogram import _kernels as K
from tumble.photometry import LightCurve, read_lightcurve

JD0 = 2460400.5


def _nights(rng, n_nights, per_night, night_h=6.0, spread_d=None, jd0=JD0):
    """Times (JD) of a multi-night campaign: nightly runs of ``night_h`` hours."""
    spread_d = spread_d or 2 * n_nights
    nights = np.sort(rng.choice(int(spread_d), n_nights, replace=False)).astype(float)
    t = [jd0 + n + 0.05 + np.sort(rng.uniform(0, night_h / 24, per_night)) for n in nights]
    return np.concatenate(t), np.repeat(np.arange(n_nights), per_night)


def _double_peaked(t, period_h, rng, amp=0.25):
    """A double-peaked light curve (dominant 2nd harmonic of the rotation), mag."""
    ph = 2 * np.pi * (t - JD0) * 24.0 / period_h
    p1, p3 = rng.uniform(0, 2 * np.pi, 2)
    return (amp * np.cos(2 * ph) + 0.04 * np.cos(ph + p1) + 0.03 * np.cos(3 * ph + p3)
            + 0.015 * np.sin(4 * ph))


@pytest.fixture
def dense_lc(rng):
    """A dense multi-night light curve with free nightly zero-points (invented campaign)."""
    t, sess = _nights(rng, 10, 60, spread_d=20)
    y = 14.2 + _double_peaked(t, 7.3, rng) + rng.normal(0, 0.1, 10)[sess] + rng.normal(0, 0.015, t.size)
    return LightCurve.from_arrays(t, y, np.full(t.size, 0.015), session=sess, band="R", object_id="2031 QX7")


# ---------------------------------------------------------------------------
# The statistic against reference implementations


@pytest.mark.parametrize("order", [1, 2, 3, 4])
def test_chi2_equals_astropy_lombscargle_without_offsets(rng, order):
    # Reference library: astropy.timeseries.LombScargle(nterms=m), method 'chi2'.
    # With normalization='psd' its power is half of chi2_ref - chi2(f), where chi2_ref
    # is the chi-square about the weighted mean (astropy's chi2_impl), so
    # chi2(f) = chi2_ref - 2 * power exactly.
    from astropy.timeseries import LombScargle

    t, sess = _nights(rng, 8, 40, spread_d=16)
    err = rng.uniform(0.01, 0.03, t.size)
    y = 16.0 + _double_peaked(t, 5.1, rng, amp=0.2) + rng.normal(0, err)
    lc = LightCurve.from_arrays(t, y, err, band="V")
    data = prepare(lc, sessions=False)
    freqs = np.linspace(0.3, 30.0, 1500)
    ours = fourier_chi2(lc, freqs, order=order, sessions=False)
    tt = np.asarray(lc.t) - data.epoch_jd  # a time shift; keeps astropy's phases precise
    ls = LombScargle(tt, np.asarray(lc.mag), np.asarray(lc.err), nterms=order, fit_mean=True, center_data=True)
    power = ls.power(freqs, method="chi2", normalization="psd")
    chi2_ref = data.chi2_nuisance
    np.testing.assert_allclose(ours, chi2_ref - 2.0 * power, rtol=1e-8, atol=0)


def test_fast_equals_slow_reference_with_session_offsets(dense_lc):
    # Slow, obviously correct reference: one numpy.linalg.lstsq of the full design
    # (zero-points + Fourier columns) per frequency. The grid includes the 1/day and
    # 2/day aliases and long periods, where nightly sampling is ill-conditioned.
    f_alias = np.concatenate([np.linspace(0.95, 1.05, 201), np.linspace(1.98, 2.02, 81)])
    freqs = np.sort(np.concatenate([np.linspace(0.05, 12.0, 900), f_alias]))
    fast = fourier_chi2(dense_lc, freqs, order=4)
    slow = fourier_chi2_reference(dense_lc, freqs, order=4)
    np.testing.assert_allclose(fast, slow, rtol=1e-9, atol=0)


def test_fast_uniform_grid_equals_reference_at_daily_alias(dense_lc):
    # The uniform-grid (type-1 NUFFT) path, on a grid through the 1/day alias.
    freqs = frequency_grid(dense_lc.span_d, 4, 24 / 1.1, 24 / 0.9)
    fast = fourier_chi2(dense_lc, freqs, order=4)
    slow = fourier_chi2_reference(dense_lc, freqs[::7], order=4)
    np.testing.assert_allclose(fast[::7], slow, rtol=1e-9, atol=0)


def test_fast_equals_reference_sparse_two_bands_with_phase_term(rng):
    # Sparse survey-like data: session -1, two bands sharing one zero-point each,
    # a linear phase-angle term per band; reference: lstsq per frequency.
    n = 160
    t = np.sort(JD0 + rng.uniform(0, 300, n))
    band = rng.choice(["g", "r"], n)
    phase = 5 + 15 * np.abs(np.sin((t - JD0) / 60))
    y = 17 + 0.04 * phase + 0.5 * (band == "g") + _double_peaked(t, 9.7, rng) + rng.normal(0, 0.03, n)
    lc = LightCurve.from_arrays(t, y, np.full(n, 0.03), band=band, phase_deg=phase)
    data = prepare(lc)
    assert data.phase_terms == ("band=g", "band=r")
    freqs = np.linspace(0.5, 8.0, 700)
    np.testing.assert_allclose(fourier_chi2(lc, freqs, order=3), fourier_chi2_reference(lc, freqs, order=3),
                               rtol=1e-9, atol=0)


def test_sum_engines_agree(rng):
    # Trigonometric sums: type-1 NUFFT (FINUFFT) and type-3 NUFFT against the plain sum.
    tau = rng.uniform(-40, 40, 300)
    c = rng.normal(size=(2, 300)) + 1j * rng.normal(size=(2, 300))
    f = 0.1 + 0.013 * np.arange(500)
    direct = K.DirectEngine(f)(tau, c)
    scale = np.sum(np.abs(c), axis=1)[:, None]
    assert np.max(np.abs(K.UniformNufftEngine(f[0], 0.013, f.size)(tau, c) - direct) / scale) < 1e-12
    assert np.max(np.abs(K.Type3NufftEngine(f)(tau, c) - direct) / scale) < 1e-10


def test_batched_cholesky_last_pivot_is_chi2(rng):
    # chi2 = chi2_0 - b' A^-1 b (Schur complement; Golub & Van Loan 2013, sec. 4.2),
    # against numpy.linalg.solve.
    x = rng.normal(size=(50, 30, 6))
    y = rng.normal(size=(50, 30))
    a = np.einsum("bni,bnj->bij", x, x)
    b = np.einsum("bni,bn->bi", x, y)
    c0 = np.einsum("bn,bn->b", y, y)
    m = np.zeros((7, 7, 50))
    m[:6, :6] = np.moveaxis(a, 0, -1)
    m[:6, 6] = m[6, :6] = b.T
    m[6, 6] = c0
    chi2, piv = K.augmented_cholesky_chi2(m)
    expect = c0 - np.einsum("bi,bi->b", b, np.linalg.solve(a, b[..., None])[..., 0])
    np.testing.assert_allclose(chi2, expect, rtol=1e-11)
    assert np.all((piv > 0) & (piv <= 1))


def test_batched_cholesky_in_blocks_and_with_a_first_unknown_eliminated(rng):
    # More systems than one cache block (the factorisation works block by block), and skip=1:
    # chi2 is unchanged and the condition indicator is that of the Schur complement of the
    # first unknown (Golub & Van Loan 2013, sec. 4.2), against numpy.linalg.solve.
    n_sys = 20_000
    x = rng.normal(size=(n_sys, 12, 6))
    x[:, :, 0] = 1.0  # a constant column, as a folded-in zero-point
    y = rng.normal(size=(n_sys, 12))
    a = np.einsum("bni,bnj->bij", x, x)
    b = np.einsum("bni,bn->bi", x, y)
    c0 = np.einsum("bn,bn->b", y, y)
    m = np.zeros((7, 7, n_sys))
    m[:6, :6] = np.moveaxis(a, 0, -1)
    m[:6, 6] = m[6, :6] = b.T
    m[6, 6] = c0
    # the same systems with the constant projected out beforehand
    xp = x[:, :, 1:] - x[:, :, 1:].mean(axis=1, keepdims=True)
    yp = y - y.mean(axis=1, keepdims=True)
    mp = np.zeros((6, 6, n_sys))
    mp[:5, :5] = np.moveaxis(np.einsum("bni,bnj->bij", xp, xp), 0, -1)
    mp[:5, 5] = mp[5, :5] = np.einsum("bni,bn->bi", xp, yp).T
    mp[5, 5] = np.einsum("bn,bn->b", yp, yp)
    chi2, piv = K.augmented_cholesky_chi2(m, skip=1)
    chi2_p, piv_p = K.augmented_cholesky_chi2(mp)
    expect = c0 - np.einsum("bi,bi->b", b, np.linalg.solve(a, b[..., None])[..., 0])
    np.testing.assert_allclose(chi2, expect, rtol=1e-10)
    np.testing.assert_allclose(chi2_p, expect, rtol=1e-10)
    np.testing.assert_allclose(piv, piv_p, rtol=1e-10)


def test_exact_qr_path_equals_lstsq_with_one_f1_per_frequency(rng):
    # The exact fallback (QR of [X | y] after projecting out nightly zero-points, one f1 per
    # frequency, SVD where rank-deficient) against the slow reference, one numpy.linalg.lstsq of
    # the full design per pair; f2 = f1 makes two columns coincide (rank-deficient design).
    t, sess = _nights(rng, 8, 20, spread_d=16)
    y = 15 + 0.2 * np.cos(2 * np.pi * (t - JD0) * 3.1) + rng.normal(0, 0.02, t.size) \
        + rng.normal(0, 0.05, 8)[sess]
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.02), session=sess)
    data = prepare(lc, sessions=True)
    jm, km = two_period_basis(2)
    f1 = np.array([3.1, 3.1, 2.7, 4.2, 2.05])
    f2 = np.array([0.4, 3.1, 1.3, 0.9, 0.61])
    fast = K.projected_qr_chi2(data.t, data.w, data.y_res, data.groups, jm, km, f2, f1=f1, block=2)
    slow = [K.reference_basis_chi2(data.t, data.y, data.w, data.z, jm, km, [b], f1=a)[0] for a, b in zip(f1, f2)]
    np.testing.assert_allclose(fast, slow, rtol=1e-9)


def test_long_uniform_grid_equals_reference_on_a_subset(dense_lc, rng):
    # A grid longer than one assembly/factorisation block: the fast scan on 30 000 frequencies,
    # checked against the slow reference (one lstsq per frequency) on 150 of them.
    freqs = 0.05 + 0.0011 * np.arange(30_000)
    fast = fourier_chi2(dense_lc, freqs, order=4)
    sub = np.sort(rng.choice(freqs.size, 150, replace=False))
    slow = fourier_chi2_reference(dense_lc, freqs[sub], order=4)
    np.testing.assert_allclose(fast[sub], slow, rtol=1e-9, atol=0)


# ---------------------------------------------------------------------------
# Exact recovery and invariances


def test_noiseless_recovery_of_offsets_and_coefficients(rng):
    # Noiseless data, arbitrary session offsets: the least-squares fit at the true
    # period must return them exactly (to rounding; common practice of a
    # consistency check).
    t, sess = _nights(rng, 6, 30, spread_d=12)
    period_h = 6.25
    coefs = np.array([[0.2, -0.05], [0.03, 0.11], [-0.02, 0.01]])
    offsets = rng.uniform(-0.5, 0.5, 6)
    lc0 = LightCurve.from_arrays(t, np.full(t.size, 15.0), np.full(t.size, 0.01), session=sess)
    epoch = prepare(lc0).epoch_jd
    tt = np.asarray(lc0.t) - epoch
    ph = 2 * np.pi * np.outer(tt * 24 / period_h, np.arange(1, 4))
    y = 15.0 + offsets[sess] + np.cos(ph) @ coefs[:, 0] + np.sin(ph) @ coefs[:, 1]
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.01), session=sess)
    fit = fourier_fit(lc, period_h, order=3)
    np.testing.assert_allclose(fit.coefficients_mag, coefs, atol=1e-9)
    zp = np.array([fit.nuisance[f"zp:session={s}"] for s in range(6)])
    np.testing.assert_allclose(zp, 15.0 + offsets, atol=1e-9)
    assert fit.chi2 < 1e-12
    scan = fourier_scan(lc, order=3, min_period_h=2.0, max_period_h=20.0)
    assert abs(scan.fit_period_h - period_h) < 1e-6 * period_h


@settings(max_examples=8, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(shift_d=st.floats(min_value=-3000.0, max_value=3000.0, allow_nan=False))
def test_time_shift_changes_nothing_but_phases(dense_lc, shift_d):
    # Invariance (common practice): shifting every model time by a constant leaves the
    # chi-square curve unchanged and only rotates the Fourier phases. The shift is a
    # multiple of 2^-10 d so that adding it to the JDs is exact in binary, and the
    # times are given as TDB emission times so that no time-scale conversion enters.
    shift_d = round(shift_d * 1024) / 1024
    freqs = np.linspace(2.0, 9.0, 300)
    base = fourier_chi2(dense_lc, freqs, order=3)
    lc2 = LightCurve.from_arrays(np.asarray(dense_lc.t) + shift_d, np.asarray(dense_lc.mag),
                                 np.asarray(dense_lc.err), session=np.asarray(dense_lc.session), band="R",
                                 time_scale="tdb", light_time_corrected=True)
    np.testing.assert_allclose(fourier_chi2(lc2, freqs, order=3), base, rtol=1e-9)
    fit1 = fourier_fit(dense_lc, 7.3, order=3)
    fit2 = fourier_fit(lc2, 7.3, order=3)
    np.testing.assert_allclose(fit1.harmonic_amplitudes_mag, fit2.harmonic_amplitudes_mag, rtol=1e-7)
    # a cos(h phi) + b sin(h phi) = Re[(a - i b) exp(i h phi)]: the complex amplitude of
    # harmonic h turns by 2 pi h f (epoch2 - epoch1 - shift)
    h = np.arange(1, 4)
    dphi = 2 * np.pi * h * (24 / 7.3) * (fit2.epoch_jd - fit1.epoch_jd - shift_d)
    z1 = (fit1.coefficients_mag[:, 0] - 1j * fit1.coefficients_mag[:, 1]) * np.exp(1j * dphi)
    z2 = fit2.coefficients_mag[:, 0] - 1j * fit2.coefficients_mag[:, 1]
    np.testing.assert_allclose(z2, z1, atol=1e-7)


def test_permuting_rows_changes_nothing(rng, dense_lc):
    # Invariance (common practice): the kernel sums over points, so the order of
    # the rows cannot matter. Checked on the kernel itself with permuted arrays.
    data = prepare(dense_lc)
    perm = rng.permutation(data.n_points)
    inv = np.argsort(perm)
    groups = [K.NuisanceGroup(index=inv[g.index], v=g.v) for g in data.groups]
    jm, km = np.zeros(4, int), np.arange(1, 5)
    eng = K.make_engine(np.linspace(1, 10, 400))
    a, piv = K.scan_basis_chi2(data.t, data.w, data.y_res, data.groups, jm, km, eng)
    b, _ = K.scan_basis_chi2(data.t[perm], data.w[perm], data.y_res[perm], groups, jm, km, eng)
    ok = piv > 1e-3  # where the normal equations are well conditioned (the rest goes to QR)
    assert ok.mean() > 0.9
    np.testing.assert_allclose(a[ok], b[ok], rtol=1e-10)
    # and through the public constructor, which sorts
    lc2 = LightCurve.from_arrays(np.asarray(dense_lc.t_obs)[perm], np.asarray(dense_lc.mag)[perm],
                                 np.asarray(dense_lc.err)[perm], session=np.asarray(dense_lc.session)[perm])
    f = np.linspace(1, 10, 200)
    np.testing.assert_allclose(fourier_chi2(lc2, f), fourier_chi2(dense_lc, f), rtol=1e-12)


# ---------------------------------------------------------------------------
# Scan results: grid, aliases, rotation rule


def test_grid_rule():
    # Grid step 1/(oversample * order * span): the highest harmonic's phase drifts by
    # 1/oversample cycle over the span between neighbours (common practice).
    f = frequency_grid(30.0, 4, 2.0, 48.0, oversample=5)
    assert np.allclose(np.diff(f), 1 / (5 * 4 * 30.0))
    assert f[0] == pytest.approx(0.5) and f[-1] >= 12.0 - 1 / 600


def test_alias_labels():
    # Window aliases of nightly sampling at +-1 and +-2 cycles per solar day and
    # +-1 per sidereal day (common practice); sidereal day 86164.0905 s (from memory).
    f = 3.3
    assert alias_label(f, f, 1e-3) == "best"
    assert alias_label(2 * f, f, 1e-3) == "half"
    assert alias_label(f / 2, f, 1e-3) == "double"
    assert alias_label(f + 1.0, f, 1e-3) == "+1/day"
    assert alias_label(f - 1.0, f, 1e-3) == "-1/day"
    assert alias_label(f + SIDEREAL_DAY_PER_D, f, 1e-4) == "+1/sidereal day"
    assert alias_label(f / 2 - 1.0, f, 1e-3) == "double -1/day"
    assert alias_label(f * 1.37, f, 1e-3) == "independent"


def test_dense_scan_finds_double_peaked_rotation(dense_lc):
    # Double-peaked light curves: the rotation period is twice the dominant
    # light-curve period (e.g. Harris et al. 1989, Icarus 77, 171; common practice).
    scan = fourier_scan(dense_lc, order=4, min_period_h=1.0, max_period_h=30.0)
    assert scan.best_period_h == pytest.approx(7.3 / 2, rel=1e-3)
    assert scan.rotation_period_h == pytest.approx(7.3, rel=1e-3)
    assert "double" in scan.rotation_rule
    assert set(scan.rotation_candidates_h[:2]) == {scan.best_period_h, 2 * scan.best_period_h}
    assert scan.confident and scan.false_alarm_probability < 1e-10
    assert scan.peaks[0].delta_chi2 == 0.0
    assert all(p.delta_chi2 >= 0 for p in scan.peaks)
    assert scan.amplitude_mag == pytest.approx(0.5, abs=0.12)
    labels = {p.alias for p in scan.peaks}
    assert "double" in labels  # the best fit is at the rotation period, twice the dominant one


def test_too_few_points_is_an_error(rng):
    t = JD0 + np.sort(rng.uniform(0, 2, 12))
    lc = LightCurve.from_arrays(t, 15 + rng.normal(0, 0.01, 12), np.full(12, 0.01), session=np.zeros(12, int))
    with pytest.raises(PeriodSearchError, match="cannot constrain"):
        fourier_scan(lc, order=6)
    with pytest.raises(PeriodSearchError, match="period range"):
        fourier_scan(lc, order=1, min_period_h=5.0, max_period_h=2.0)


def test_pure_noise_is_not_confident():
    # White Gaussian noise: the false-alarm probability of the best peak should
    # rarely pass the threshold (F-test law of Schwarzenberg-Czerny 1996 with the
    # Horne & Baliunas 1986 correction for independent frequencies).
    hits = 0
    for seed in range(10):
        g = np.random.default_rng(seed)
        t, sess = _nights(g, 5, 40, spread_d=10)
        lc = LightCurve.from_arrays(t, 15 + g.normal(0, 0.02, t.size), np.full(t.size, 0.02), session=sess)
        hits += fourier_scan(lc, order=2, min_period_h=1, max_period_h=12).confident
    assert hits <= 1


# ---------------------------------------------------------------------------
# Injection and recovery


def _injection(seed):
    """One injected light curve: even seeds dense nightly data, odd seeds sparse survey data."""
    g = np.random.default_rng(1000 + seed)
    if seed % 2 == 0:
        p_dom = float(np.exp(g.uniform(np.log(0.1), np.log(30.0))))
        p_rot = 2 * p_dom
        cadence_d = min(6.0 / 24 / 40, p_dom / 24 / 12)
        n_nights = 5
        nights = np.sort(g.choice(12, n_nights, replace=False)).astype(float)
        t = np.concatenate([JD0 + n + 0.05 + np.arange(40) * cadence_d + g.uniform(0, 0.2 * cadence_d, 40)
                            for n in nights])
        sess = np.repeat(np.arange(n_nights), 40)
        y = 15 + _double_peaked(t, p_rot, g, amp=g.uniform(0.15, 0.3)) + g.normal(0, 0.1, n_nights)[sess]
        err = np.full(t.size, 0.02)
        y = y + g.normal(0, err)
        lc = LightCurve.from_arrays(t, y, err, session=sess)
    else:
        p_dom = float(np.exp(g.uniform(np.log(2.0), np.log(500.0))))
        p_rot = 2 * p_dom
        n = 220
        nights = np.sort(g.choice(250, n, replace=False)).astype(float)
        t = JD0 + nights + g.uniform(0.1, 0.35, n)
        phase = 8 + 12 * np.abs(np.sin((t - JD0) / 70))
        err = g.uniform(0.02, 0.04, n)
        y = 17 + 0.035 * phase + _double_peaked(t, p_rot, g, amp=g.uniform(0.15, 0.3)) + g.normal(0, err)
        lc = LightCurve.from_arrays(t, y, err, phase_deg=phase)
    return lc, p_dom


def _recover(seeds):
    z, hit = [], 0
    for seed in seeds:
        lc, p_dom = _injection(seed)
        scan = fourier_scan(lc, order=4, min_period_h=p_dom / 2.2, max_period_h=p_dom * 2.2)
        zz = (scan.best_period_h - p_dom) / scan.best_period_h_err
        ok = abs(zz) <= 3.0 and scan.rotation_period_h == pytest.approx(2 * p_dom, rel=0.01)
        hit += ok
        if ok:
            z.append(zz)
    return hit / len(seeds), np.asarray(z)


def _check_recovery(frac, z):
    # Coverage: recovered (no alias) and within 3 sigma in >= 95% of injections;
    # calibration: the scatter of (P - P_true)/sigma is 1 within a factor 1.5.
    assert frac >= 0.95
    scatter = 1.4826 * np.median(np.abs(z - np.median(z)))
    assert 1 / 1.5 <= scatter <= 1.5, scatter
    assert 1 / 1.5 <= np.sqrt(np.mean(z**2)) <= 1.5


def test_injection_recovery_small():
    frac, z = _recover(range(40))
    _check_recovery(frac, z)


@pytest.mark.slow
def test_injection_recovery_200_seeds():
    frac, z = _recover(range(200))
    _check_recovery(frac, z)


# ---------------------------------------------------------------------------
# Two periods


def test_two_period_fast_equals_reference(rng):
    # Slow reference: one lstsq of the 2-D series design (Pravec et al. 2005, eq. 1) per pair.
    t, sess = _nights(rng, 12, 25, spread_d=30)
    y = 15 + 0.2 * np.cos(2 * np.pi * (t - JD0) * 0.9) + 0.1 * np.cos(2 * np.pi * (t - JD0) * 1.3) \
        + rng.normal(0, 0.02, t.size) + rng.normal(0, 0.05, 12)[sess]
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.02), session=sess)
    p1 = np.array([26.0, 26.7, 30.0])
    p2 = 24 / np.linspace(0.2, 3.0, 60)
    for sessions in (False, True):
        fast = two_period_chi2(lc, p1, p2, order=2, sessions=sessions)
        slow = two_period_chi2_reference(lc, p1, p2, order=2, sessions=sessions)
        np.testing.assert_allclose(fast, slow, rtol=1e-7)


def _sparse_survey(rng, n=200, span_d=120.0, period_h=7.7, p2_h=None):
    """Sparse survey-like sampling (session -1, two bands, a phase-angle range), an invented object."""
    t = np.sort(JD0 + rng.uniform(0, span_d, n))
    band = rng.choice(["g", "r"], n)
    phase = 5 + 12 * np.abs(np.sin((t - JD0) / 50))
    y = 17 + 0.03 * phase + 0.4 * (band == "g") + _double_peaked(t, period_h, rng, amp=0.2) + rng.normal(0, 0.03, n)
    if p2_h is not None:
        y = y + 0.1 * np.cos(2 * np.pi * (t - JD0) * 24 / p2_h + 0.3)
    return LightCurve.from_arrays(t, y, np.full(n, 0.03), band=band, phase_deg=phase, object_id="2039 TR4")


def test_two_period_refine_search_is_exact_at_its_result(rng):
    # The 'refine' search scans P2 on a coarse grid with a looser conditioning test and then
    # examines its deepest minima exactly: the reported best pair must be exact (slow
    # reference: one lstsq of the 2-D series design of Pravec et al. 2005, eq. 1, with the
    # nuisance columns), at least as good as every point of its own P2 scan, and the scan
    # itself must agree with the reference to its documented accuracy (1e-6 relative).
    lc = _sparse_survey(rng, p2_h=31.0)
    res = two_period_scan(lc, order=2)
    data = prepare(lc)
    jm, km = two_period_basis(2, res.order_1d)
    exact = K.reference_basis_chi2(data.t, data.y, data.w, data.z, jm, km, [res.f2_per_d], f1=res.f1_per_d)[0]
    assert res.chi2_2d == pytest.approx(exact, rel=1e-9)
    assert res.chi2_2d <= np.nanmin(res.chi2_p2) * (1 + 1e-9)
    # the automatic P2 grid of the refine search: step 1 / (2 m T) (P2_OVERSAMPLE = 2)
    f2 = 24.0 / res.p2_grid_h
    assert np.median(np.abs(np.diff(f2))) == pytest.approx(1.0 / (2 * 2 * data.span_d), rel=1e-6)
    sub = np.flatnonzero(np.isfinite(res.chi2_p2))[::97]
    f1_scan = 24.0 / res.scan_1d.fit_period_h  # the P1 held during the P2 scan
    ref = K.reference_basis_chi2(data.t, data.y, data.w, data.z, jm, km, f2[sub], f1=f1_scan)
    np.testing.assert_allclose(res.chi2_p2[sub], ref, rtol=1e-6)
    # the second period is found (the injected 31 h or its lattice partner, Kaasalainen 2001)
    lattice = np.abs([j * res.f1_per_d + k * res.f2_per_d for j in range(-4, 5) for k in (1, 2)])
    assert np.min(np.abs(lattice - 24.0 / 31.0)) / (24.0 / 31.0) < 0.005
    assert res.delta_bic > 10


def _calibrated_campaign(rng, n_nights, spread_d, per_night=20, night_h=7.0):
    t, sess = _nights(rng, n_nights, per_night, night_h=night_h, spread_d=spread_d)
    return t, sess


def test_two_period_recovers_toutatis_frequencies(rng):
    # Toutatis (LAM): P_psi = 5.41 d, P_phi = 7.35 d (Hudson & Ostro 1995, Science 270, 84);
    # light-curve frequencies f_phi, 2 f_phi and 2 (f_phi + f_psi) (Mueller et al. 2002,
    # Icarus 158, 305, from memory; Kaasalainen 2001, A&A 376, 302 for the lattice n1 f_phi + n2 f_psi).
    f_phi, f_psi = 1 / 7.35, 1 / 5.41
    t, sess = _calibrated_campaign(rng, 45, 90, per_night=12)
    tt = t - JD0
    y = (15 + 0.10 * np.cos(2 * np.pi * f_phi * tt) + 0.20 * np.cos(2 * np.pi * 2 * f_phi * tt + 1)
         + 0.15 * np.cos(2 * np.pi * 2 * (f_phi + f_psi) * tt + 2) + rng.normal(0, 0.02, t.size))
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.02), session=sess)
    res = two_period_scan(lc, order=2, sessions=False, min_period_h=20.0, max_period_h=400.0)
    assert res.p1_h / 24 == pytest.approx(7.35, rel=0.005)
    freqs = np.abs(res.frequencies_per_d())
    for f in (f_phi, 2 * f_phi, 2 * (f_phi + f_psi)):
        assert np.min(np.abs(freqs - f)) / f < 0.005
    assert res.f_test_p_value < 1e-10 and res.delta_bic > 10


def test_two_period_recovers_apophis_main_period(rng):
    # Apophis (SAM): P_phi = 27.38 h, P_psi = 263 h; the main light-curve period is
    # 1/(f_phi - f_psi) = 30.56 h (Pravec et al. 2014, Icarus 233, 48).
    f_phi, f_psi = 24 / 27.38, 24 / 263.0
    f1 = f_phi - f_psi
    assert 24 / f1 == pytest.approx(30.56, abs=0.01)
    t, sess = _calibrated_campaign(rng, 40, 60, per_night=20, night_h=8.0)
    tt = t - JD0
    y = (15 + 0.25 * np.cos(2 * np.pi * 2 * f1 * tt) + 0.05 * np.cos(2 * np.pi * f1 * tt + 0.5)
         + 0.08 * np.cos(2 * np.pi * 2 * f_phi * tt + 1.0) + 0.06 * np.cos(2 * np.pi * (2 * f1 + f_psi) * tt + 2.0)
         + rng.normal(0, 0.02, t.size))
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.02), session=sess)
    res = two_period_scan(lc, order=2, sessions=False, min_period_h=10.0, max_period_h=600.0)
    assert res.p1_h == pytest.approx(30.56, rel=0.005)
    freqs = np.abs(res.frequencies_per_d())
    for f in (2 * f1, 2 * f_phi, 2 * f1 + f_psi):
        assert np.min(np.abs(freqs - f)) / f < 0.005
    # P2 is one basis vector of the frequency lattice (any pair generating it fits
    # equally well; Kaasalainen 2001): f_psi must be a small combination of f1, f2.
    lattice = np.array([j * res.f1_per_d + k * res.f2_per_d for j in range(-4, 5) for k in (-2, -1, 1, 2)])
    assert np.min(np.abs(np.abs(lattice) - f_psi)) / f_psi < 0.005
    assert res.delta_bic > 10


def test_two_period_not_needed_for_principal_axis_rotator(rng):
    # A single-period light curve: the second period must not be preferred by BIC
    # (Schwarz 1978; Delta BIC = BIC_1D - BIC_2D <= 0 means no support).
    t, sess = _calibrated_campaign(rng, 10, 20, per_night=40)
    y = 15 + _double_peaked(t, 9.1, rng) + rng.normal(0, 0.02, t.size)
    lc = LightCurve.from_arrays(t, y, np.full(t.size, 0.02), session=sess)
    res = two_period_scan(lc, order=2, sessions=False, min_period_h=2.0, max_period_h=60.0)
    assert res.delta_bic < 0
    assert res.f_test_p_value > 1e-3
    # the same in the full-grid mode
    grid = two_period_scan(lc, order=2, sessions=False, p1_grid=np.linspace(8.6, 9.6, 15),
                           p2_grid=np.linspace(2.0, 40.0, 150))
    assert grid.mode == "grid" and grid.delta_chi2_map.shape == (15, 150)
    assert np.nanmin(grid.delta_chi2_map) == 0.0
    assert grid.delta_bic < 0


# ---------------------------------------------------------------------------
# Real sparse data


def test_gault_sparse_ztf_claims_no_period(gault_csv):
    # Real sparse ZTF photometry of (6478) Gault (Ye et al. 2019, ApJL 874, L16, from
    # memory): 65 points over 451 days during activity. The published period is
    # about 2.5 h with <= 0.05 mag amplitude (Purdum et al. 2021, ApJL 911, L35, from
    # memory); none can be found here (common practice), so no peak may reach the
    # false-alarm threshold.
    lc = read_lightcurve(gault_csv)
    scan = fourier_scan(lc)
    assert np.all(np.isfinite(scan.chi2))
    assert not scan.confident
    assert all(p.false_alarm_probability >= FAP_THRESHOLD for p in scan.peaks)
    assert scan.phase_terms  # the sparse points span 10-23 deg of phase angle
