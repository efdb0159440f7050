"""PA period errors: the red-noise factor, the session jackknife of the frequency, the frequency
width against the least-squares formula, and a real dense PA rotator against its published period."""

from __future__ import annotations

import math

import numpy as np
import pytest

from tumble.periodogram.red_noise import red_noise_factor, red_noise_factor_reference

UD2005 = "/work/shared/external_data/ud2005_snuo/2005UD_SNUO_2018Oct_lightcurve.csv"


def _nights(n_nights=8, per_night=120, cadence_min=3.0):
    """Times (d) and sessions of a dense campaign: ``per_night`` points every ``cadence_min`` on each night."""
    t = np.concatenate([k + np.arange(per_night) * cadence_min / 1440.0 for k in range(n_nights)])
    s = np.repeat(np.arange(n_nights), per_night)
    return t, s


def test_beta_is_one_on_white_noise(rng):
    # Winn et al. 2008 (AJ 135, 1201, section 3) and Pont, Zucker & Queloz 2006 (MNRAS 373, 231):
    # for independent residuals the binned scatter follows sigma_1/sqrt(N) * sqrt(M/(M-1)), beta = 1.
    t, s = _nights(n_nights=20)
    betas = []
    for _ in range(100):
        err = rng.uniform(0.01, 0.03, t.size)
        r = rng.normal(0.0, err) + np.repeat(rng.normal(0, 0.05, 20), 120)  # nightly zero-points
        f = red_noise_factor(t, r, err, s)
        betas.append(f.beta_per_bin)
    b = np.array(betas)
    assert np.all(np.isfinite(b))
    # the mean of beta^2 over realisations (unbiased; beta itself is low by Jensen's inequality, about
    # 1 %) within 4 % of 1 at every bin duration: about three standard errors at 120 min
    assert np.allclose((b**2).mean(axis=0), 1.0, atol=0.04)


def test_beta_of_white_plus_block_correlated_noise(rng):
    # Pont, Zucker & Queloz 2006, eq. 1: white noise sigma_w plus a component constant over a bin
    # of N points (sigma_r) averages as sigma_N^2 = sigma_w^2/N + sigma_r^2, so for bins equal to
    # the correlated blocks beta^2 = (sigma_w^2/N + sigma_r^2) / ((sigma_w^2 + sigma_r^2)/N).
    t, s = _nights(n_nights=20, per_night=120, cadence_min=3.0)  # 60-min blocks of N = 20 points
    sw, sr, n = 0.01, 0.004, 20
    vals = []
    for _ in range(10):
        block = np.floor(t * 24.0).astype(int)  # 1-hour blocks aligned with the 60-min bins
        red = rng.normal(0.0, sr, block.max() + 1)[block]
        r = rng.normal(0.0, sw, t.size) + red
        vals.append(red_noise_factor(t, r, np.full(t.size, sw), s, bin_minutes=(60.0,)).beta_per_bin[0])
    # the per-night mean removal takes 1/(blocks per night) = 1/6 of the block variance away
    sr2 = sr**2 * (1 - 1 / 6)
    expected = math.sqrt((sw**2 / n + sr2) / ((sw**2 + sr2) / n))
    assert np.mean(vals) == pytest.approx(expected, rel=0.08)
    assert expected > 1.5  # the case is far from white


def test_beta_fast_against_slow_reference(rng):
    t, s = _nights(n_nights=5, per_night=60, cadence_min=5.0)
    err = rng.uniform(0.01, 0.02, t.size)
    r = rng.normal(0.0, err) + 0.01 * np.sin(2 * np.pi * t * 7.3)
    fast = red_noise_factor(t, r, err, s, bin_minutes=(20.0, 45.0), n_params=3)
    for k, w in enumerate((20.0, 45.0)):
        assert fast.beta_per_bin[k] == pytest.approx(red_noise_factor_reference(t, r, err, s, w, n_params=3), rel=1e-10)
