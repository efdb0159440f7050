"""Tests of the calibrated p_npa: the map's arithmetic, the prior-odds correction and the grade bands."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special

from tumble.classify.calibration import (
    FEATURES,
    GRADE_PROBABILITIES,
    CalibrationMap,
    calibrated_p_npa,
    calibration_features,
    grade_from_probability,
    load_calibration,
)
from tumble.classify.thresholds import GRADE_EDGES_2LNB


def _map(base_rate=0.3):
    return CalibrationMap(FEATURES, np.zeros(5), np.ones(5), np.zeros(5), np.array([1.0, 0, 0, 0, 0]), 0.0,
                          base_rate, "test")


def test_prior_odds_correction_is_bayes_theorem():
    # posterior odds = likelihood ratio x prior odds (Kass & Raftery 1995, eq. 1): a map calibrated at the
    # library's base rate moved to another prior changes the odds by the ratio of prior odds
    cmap = _map(base_rate=0.3)
    x = np.array([0.8, 0, 0, 0, 0])
    p_lib = cmap.probability(x)
    assert p_lib == pytest.approx(special.expit(0.8))
    for prior in (0.01, 0.1, 0.3, 0.7):
        p = calibrated_p_npa(cmap, x, prior)
        odds = p / (1 - p)
        expected = (p_lib / (1 - p_lib)) * (prior / (1 - prior)) / (0.3 / 0.7)
        assert odds == pytest.approx(expected, rel=1e-12)
    assert calibrated_p_npa(cmap, x, 0.3) == pytest.approx(p_lib)


def test_missing_features_take_the_fill_value():
    cmap = CalibrationMap(FEATURES, np.zeros(5), np.ones(5), np.array([0, 0, 2.0, 0, 0]),
                          np.array([0, 0, 1.0, 0, 0]), 0.0, 0.5, "test")
    assert cmap.probability(np.array([0, 0, np.nan, 0, 0])) == pytest.approx(special.expit(2.0))


def test_grade_probabilities_are_the_kass_raftery_bands_at_even_odds():
    # 2 ln B = 2, 6, 10 at prior odds 1: p = B / (1 + B) with B = exp(edge / 2) (Kass & Raftery 1995, section 3.2)
    for edge, p in zip(GRADE_EDGES_2LNB, GRADE_PROBABILITIES):
        b = math.exp(edge / 2)
        assert p == pytest.approx(b / (1 + b))
    assert grade_from_probability(0.5) == "none"
    assert grade_from_probability(0.8) == "tentative"
    assert grade_from_probability(0.96) == "sound"
    assert grade_from_probability(0.999) == "firm"
    assert grade_from_probability(float("nan")) == "none"


def test_features_follow_their_definitions():
    x = calibration_features(ln_b=-math.inf, sparse_fraction=0.0)
    assert x[0] == pytest.approx(-math.log1p(1e4))  # clipped, then the signed logarithm
    assert x[1] == pytest.approx(x[0]) and x[2] == 0.0  # all points in nightly sessions: ln B's full weight
    y = calibration_features(ln_b=20.0, sparse_fraction=0.75)
    assert y[1] == pytest.approx(0.25 * math.log1p(20.0)) and y[2] == 0.75
    assert np.all(np.isnan(calibration_features(ln_b=math.nan, sparse_fraction=1.0)[:2]))


def test_the_shipped_map_reads_the_same_features():
    cmap = load_calibration()
    if cmap is None:
        pytest.skip("no calibration map shipped")
    assert cmap.features == FEATURES and 0 < cmap.base_rate < 1
    # monotone in ln B: more evidence never lowers P(NPA), dense or sparse
    for name in ("signed_log_ln_b", "dense_signed_log_ln_b"):
        assert cmap.coefficients[FEATURES.index(name)] >= 0
