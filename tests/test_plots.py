"""Figures (tumble.plots) on demo objects: each writes a non-empty PNG of the figure's size, with
axis labels that carry units and a title naming the object. Sizes and labels are compared, not pixels."""

from __future__ import annotations

import numpy as np
import pytest

from tumble import plots

ROOT_DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "catalogs_demo"
CAMPAIGN = ROOT_DEMO / "campaign"


@pytest.fixture(scope="module")
def pa_lc():
    from tumble.photometry import read_lightcurve

    return read_lightcurve([CAMPAIGN / "KRN-001__kestrel.csv"])


@pytest.fixture(scope="module")
def npa_lc():
    from tumble.photometry import read_lightcurve

    return read_lightcurve([CAMPAIGN / "KRN-003__kestrel.csv", CAMPAIGN / "KRN-003__lanternbay.ecsv"])


def _png_size(path):
    # PNG IHDR: width and height are big-endian 32-bit integers at bytes 16..24 (PNG specification,
    # ISO/IEC 15948, section 11.2.2); checked against matplotlib's own reader
    data = path.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    w, h = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    import matplotlib.image

    img = matplotlib.image.imread(path)
    assert img.shape[:2] == (h, w)
    return w, h


def _check(fig, path, object_id):
    assert path.exists() and path.stat().st_size > 1000
    w, h = _png_size(path)
    fw, fh = fig.get_size_inches() * fig.dpi
    assert (w, h) == (round(fw), round(fh))
    titles = [fig.get_suptitle()] + [ax.get_title() for ax in fig.axes]
    assert any(object_id in t for t in titles), titles
    shown = [ax for ax in fig.axes if ax.axison and ax.get_label() != "<colorbar>"]
    # every panel of a bottom row (or a lone panel) names its x quantity; labels carry a unit in brackets
    assert all(ax.get_xlabel() for ax in shown if ax.get_subplotspec() is None or ax.get_subplotspec().is_last_row())
    for ax in shown:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label:
                assert "(" in label and ")" in label, label
    assert any(ax.get_ylabel() for ax in shown)
    return w, h


def test_scan_marks_chosen_period_and_aliases(pa_lc, tmp_path):
    from tumble.periodogram import fourier_scan

    scan = fourier_scan(pa_lc)
    fig = plots.plot_scan(scan, path=tmp_path / "scan.png")
    _check(fig, tmp_path / "scan.png", pa_lc.object_id)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "trial light-curve period (h)" and ax.get_xscale() == "log"
    vlines = [ln.get_xdata()[0] for ln in ax.get_lines() if len(ln.get_xdata()) == 2 and
              ln.get_xdata()[0] == ln.get_xdata()[1]]
    assert any(abs(x - scan.best_period_h) < 1e-9 for x in vlines)
    texts = [t.get_text() for t in ax.texts]
    assert texts and all(" h" in t for t in texts)  # alias annotations with the period


def test_two_period_map_and_p2_scan(npa_lc, tmp_path):
    res = plots.two_period_zoom(npa_lc, 16.24, 12.567, n=11)
    assert res.mode == "grid" and res.delta_chi2_map.shape == (11, 11)
    fig = plots.plot_two_period_map(res, path=tmp_path / "map.png")
    _check(fig, tmp_path / "map.png", npa_lc.object_id)
    ax = fig.axes[0]
    assert ax.get_xlabel().startswith("P2") and ax.get_ylabel().startswith("P1")


def test_lightcurve_folded_residuals_pa(pa_lc, tmp_path):
    model = plots.fit_model(pa_lc, 1.71026, rotation_period_h=3.42051)
    for name, fn in (("lc", plots.plot_lightcurve), ("fold", plots.plot_folded), ("res", plots.plot_residuals)):
        fig = fn(pa_lc, model, path=tmp_path / f"{name}.png")
        _check(fig, tmp_path / f"{name}.png", pa_lc.object_id)
    lc_fig = plots.plot_lightcurve(pa_lc, model)
    shown = [ax for ax in lc_fig.axes if ax.axison]
    assert len(shown) == pa_lc.n_sessions
    assert all(ax.yaxis_inverted() for ax in shown)  # magnitudes: bright up (common practice)
    fold = plots.plot_folded(pa_lc, model)
    assert "3.42051 h" in fold.axes[0].get_xlabel()


def test_two_period_view_subtracts_the_other_component(tmp_path):
    # a noiseless sum of two incommensurate periodic signals: after subtracting the other period's fitted
    # series, the data folded on one period lie on that period's curve (the two-period view of
    # Pravec et al. 2005, Icarus 173, 108, fig. 2)
    from tumble.photometry import LightCurve

    t = 2460000.5 + np.concatenate([np.linspace(k, k + 0.25, 60) for k in range(8)])
    p1, p2 = 5.3, 8.9  # hours
    mag = 15.0 + 0.2 * np.cos(2 * np.pi * t * 24 / p1) + 0.1 * np.sin(2 * np.pi * t * 24 / p2 + 0.3)
    lc = LightCurve.from_arrays(t, mag, np.full(t.size, 0.01), object_id="synthetic two-period",
                                light_time_corrected=True, time_scale="tdb")
    model = plots.fit_model(lc, p1, p2, order=2)
    fig = plots.plot_folded(lc, model, path=tmp_path / "fold2.png")
    _check(fig, tmp_path / "fold2.png", "synthetic two-period")
    assert len([a for a in fig.axes if a.axison]) == 2
    # the fitted P1-only series reproduces the injected 0.2 mag cosine
    keep = model.km == 0
    grid = model.epoch_jd + np.linspace(0, 1, 50)
    expected = 0.2 * np.cos(2 * np.pi * grid * 24 / p1)
    got = model.series_mag(grid, keep)
    assert np.allclose(got - got.mean(), expected - expected.mean(), atol=2e-3)
    resid = model.y_mag - model.model_mag(np.asarray(lc.t))
    assert np.sqrt(np.mean(resid**2)) < 1e-3


def test_posterior_pairs(tmp_path):
    rng = np.random.default_rng(3)
    samples = rng.normal(size=(400, 4)) * [0.1, 0.01, 0.2, 1.0] + [12.0, 0.4, 1.5, 0.0]
    names, units = ["p_psi_h", "excitation_u", "a_over_b", "phi0_rad"], ["h", "", "", "rad"]
    fig = plots.plot_posterior_pairs(samples, names, units, object_id="KRN-003", path=tmp_path / "post.png")
    _check(fig, tmp_path / "post.png", "KRN-003")
    shown = [ax for ax in fig.axes if ax.axison]
    assert len(shown) == 6  # 3 main parameters present: 3 diagonal + 3 pairs
    assert "p_psi_h (h)" in {ax.get_xlabel() for ax in shown}
    with pytest.raises(plots.PlotError):
        plots.plot_posterior_pairs(samples[:, :2], names, units)


def test_period_diameter_iso_tau_lines_follow_harris(tmp_path):
    from astropy.table import Table

    census = Table.read(ROOT_DEMO / "census" / "krn_census.ecsv")
    rows = [dict(zip(census.colnames, r)) for r in census]
    fig = plots.plot_period_diameter(rows, census["diameter_km"], title="KRN census", formula="harris",
                                     taus_gyr=(0.045, 4.5), path=tmp_path / "pd.png")
    _check(fig, tmp_path / "pd.png", "KRN census")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "diameter (km)" and ax.get_xscale() == "log"
    # Harris (1994, Icarus 107, 209): tau = P^3 / (C^3 D^2), P in h, D in km, tau in Gyr, C = 17,
    # so P = C (tau D^2)^(1/3) on a line of constant tau
    lines = [ln for ln in ax.get_lines() if ln.get_linestyle() == "--" and len(ln.get_xdata()) > 2]
    assert len(lines) == 2
    for tau, ln in zip((0.045, 4.5), lines):
        d, p = np.asarray(ln.get_xdata()), np.asarray(ln.get_ydata())
        assert np.allclose(p, 17.0 * np.cbrt(tau * d**2), rtol=1e-10)
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    n_pa = int(np.sum((census["rotation"] == "PA") & (census["status"] == "ok")))
    assert f"PA ({n_pa})" in labels


def test_verdict_style_codes():
    assert plots.verdict_style("PA") == "PA"
    assert plots.verdict_style("NPA", "LAM") == "NPA/LAM"
    assert plots.verdict_style("NPA", "none") == "NPA"
    assert plots.verdict_style("undecided", "none") == "undecided"
    markers = {v[1] for v in plots.VERDICT_STYLES.values()}
    assert len(markers) == len(plots.VERDICT_STYLES)  # every verdict its own symbol
