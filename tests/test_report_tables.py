"""The diagnostic tables of an object page (tumble.report.object_tables)."""

import numpy as np

from tumble.photometry import LightCurve
from tumble.report import object_tables


def _two_period_lc():
    # a noiseless sum of two incommensurate periodic signals over 8 nights of 6 h (the two-period
    # series of Pravec et al. 2005, Icarus 173, 108)
    t = 2460000.5 + np.concatenate([np.linspace(k, k + 0.25, 60) for k in range(8)])
    p1, p2 = 5.3, 8.9
    mag = 15.0 + 0.2 * np.cos(2 * np.pi * t * 24 / p1) + 0.1 * np.sin(2 * np.pi * t * 24 / p2 + 0.3)
    return LightCurve.from_arrays(t, mag, np.full(t.size, 0.01), object_id="synthetic",
                                  light_time_corrected=True, time_scale="tdb")


def test_object_tables_coverage_combinations_zero_points():
    lc = _two_period_lc()
    tables = dict((ident, html) for ident, _, html in
                  object_tables({"object": "synthetic", "rotation": "NPA", "p1_h": 5.3, "p2_h": 8.9}, lc))
    assert set(tables) == {"coverage", "combinations", "zero-points"}
    # span 7.25 d = 174 h: 32.8 cycles of 5.3 h
    assert "32.8" in tables["coverage"]
    # the strongest terms are f1 (0.2 mag) and f2 (0.1 mag), in that order
    rows = tables["combinations"].split("<tr>")[2:4]
    assert "<td class=\"num\">1</td><td class=\"num\">0</td>" in rows[0] and "0.2<" in rows[0]
    assert "<td class=\"num\">0</td><td class=\"num\">1</td>" in rows[1] and "0.1<" in rows[1]
    assert tables["zero-points"].count("<tr>") == 1 + lc.n_sessions
    # terms with periods longer than a 6 h night (8.9 h) are marked as degenerate with the zero-points
    assert " *</td>" in tables["combinations"] and "longer than the longest session" in tables["combinations"]


def test_no_tables_without_photometry():
    assert object_tables({"object": "x", "rotation": "PA", "period_h": 5.0}) == []
