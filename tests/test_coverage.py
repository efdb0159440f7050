"""Cycles covered and phase coverage of a period (tumble.coverage)."""

import numpy as np

from tumble.coverage import period_coverage


def test_full_coverage_of_several_cycles():
    # arithmetic of the definition: a 30-day span holds 30 d / 10 h = 72 cycles; evenly spread points
    # every 0.7 h fill every one of the 20 phase bins
    t = 2460000.5 + np.arange(0, 30 * 24, 0.7) / 24.0
    c = period_coverage(t, 10.0)
    assert c.n_cycles == np.ptp(t) * 24 / 10.0
    assert c.phase_coverage == 1.0


def test_one_short_night_covers_part_of_a_long_period():
    # 4 hours of a 40-hour period: a tenth of a cycle, so 2 or 3 of the 20 bins (common practice: such a
    # fold cannot establish the period)
    t = 2460000.5 + np.linspace(0, 4, 100) / 24.0
    c = period_coverage(t, 40.0)
    assert abs(c.n_cycles - 0.1) < 1e-9
    assert 0.1 <= c.phase_coverage <= 0.15


def test_missing_period():
    c = period_coverage([2460000.5, 2460001.5], float("nan"))
    assert np.isnan(c.n_cycles) and np.isnan(c.phase_coverage)
