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
    _check_fonts(fig)
    _check_labels_inside(fig)
    return w, h


def _check_labels_inside(fig):
    # every axis label and title is drawn inside the figure (none cut at the edge)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    width, height = fig.get_size_inches() * fig.dpi
    for ax in fig.axes:
        for text in (ax.xaxis.label, ax.yaxis.label, ax.title):
            if text.get_text() and text.get_visible():
                box = text.get_window_extent(renderer)
                assert box.x0 >= -1 and box.x1 <= width + 1 and box.y0 >= -1 and box.y1 <= height + 1, \
                    text.get_text()


def _check_fonts(fig):
    # readable at 100 %: no text below MIN_FONT_PT (9 pt at 100 dpi; common practice for figure text)
    from matplotlib.text import Text

    small = [(t.get_text(), t.get_fontsize()) for t in fig.findobj(Text)
             if t.get_text().strip() and t.get_visible() and t.get_fontsize() < plots.MIN_FONT_PT]
    assert not small, small


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
    table_pair = (16.24, 12.567)  # the (P1, P2) of the results table
    fig = plots.plot_two_period_map(res, reported_pair_h=table_pair, path=tmp_path / "map.png")
    _check(fig, tmp_path / "map.png", npa_lc.object_id)
    ax = fig.axes[0]
    assert ax.get_xlabel().startswith("P2") and ax.get_ylabel().startswith("P1")
    # the marker is the table's pair, P2 on x and P1 on y (never swapped)
    marker = [ln for ln in ax.get_lines() if ln.get_gid() == "reported-pair"]
    assert len(marker) == 1
    assert (marker[0].get_xdata()[0], marker[0].get_ydata()[0]) == (table_pair[1], table_pair[0])
    # log-like colour scale and confidence contours at the two-parameter Delta chi-square levels
    # (scipy.stats.chi2, the reference for chi-square quantiles; 2.30, 6.18, 11.8 in Press et al., NR 15.6)
    from scipy.stats import chi2

    assert any(type(getattr(c, "norm", None)).__name__ == "SymLogNorm" for c in ax.collections)
    contours = [c for c in ax.collections if hasattr(c, "levels")]
    assert len(contours) == 1
    levels = contours[0].levels
    assert np.allclose(levels, chi2.ppf(plots.CONFIDENCE_LEVELS, 2))
    assert np.allclose(levels, [2.30, 6.18, 11.8], atol=0.05)


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
    shown = [ax for ax in fig.axes if ax.axison and ax.get_frame_on()]  # corner hides the upper triangle
    assert len(shown) == 6  # 3 main parameters present: 3 diagonal + 3 pairs
    assert "p_psi_h (h)" in {ax.get_xlabel() for ax in shown}
    with pytest.raises(plots.PlotError):
        plots.plot_posterior_pairs(samples[:, :2], names, units)


def test_posterior_angles_in_degrees_and_wrap_aware(tmp_path):
    # a longitude posterior straddling the 0/2 pi wrap is one mode: drawn in degrees around its circular
    # mean (about 0 deg), not split between ~0 and ~360 (circular statistics, common practice)
    rng = np.random.default_rng(5)
    lon = np.mod(rng.normal(0.0, 0.1, 2000), 2 * np.pi)
    lat = rng.normal(0.5, 0.05, 2000)
    p = rng.normal(20.0, 0.2, 2000)
    x, names, units = plots.posterior_columns_for_display(np.column_stack([p, lon, lat]),
                                                          ["p_psi_h", "l_lon_rad", "l_lat_rad"], ["h", "rad", "rad"])
    assert names == ["p_psi_h", "l_lon_deg", "l_lat_deg"] and units == ["h", "deg", "deg"]
    assert np.ptp(x[:, 1]) < 90.0 and abs(np.mean(x[:, 1])) < 2.0
    assert np.allclose(x[:, 2], np.degrees(lat))
    fig = plots.plot_posterior_pairs(np.column_stack([p, lon, lat]), ["p_psi_h", "l_lon_rad", "l_lat_rad"],
                                     ["h", "rad", "rad"], object_id="KRN-009", path=tmp_path / "post.png")
    _check(fig, tmp_path / "post.png", "KRN-009")
    labels = {ax.get_xlabel() for ax in fig.axes}
    assert "l_lon_deg (deg)" in labels and not any("rad" in lb for lb in labels)


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


# ---------------------------------------------------------------------------
# issue 19: one convention, readable labels, the new diagnostic views
# ---------------------------------------------------------------------------
def test_scan_cli_and_report_share_one_y_convention(npa_lc, tmp_path):
    from tumble.periodogram import fourier_scan

    scan = fourier_scan(npa_lc)
    report_fig = plots.plot_scan(scan, chosen_period_h=16.24, path=tmp_path / "r.png")
    cli_fig = plots.plot_scan_summary(scan, path=tmp_path / "c.png")
    _check(report_fig, tmp_path / "r.png", npa_lc.object_id)
    _check(cli_fig, tmp_path / "c.png", npa_lc.object_id)
    a, b = report_fig.axes[0], cli_fig.axes[0]
    assert a.get_ylabel() == b.get_ylabel() == plots.SCAN_Y_LABEL
    assert not a.yaxis_inverted() and not b.yaxis_inverted()
    legend = [t.get_text() for t in a.get_legend().get_texts()]
    assert any(t.startswith("reported P1: 16.24 h") for t in legend)
    # the deepest minimum is labelled as such when it is not the reported period, never "best"/"chosen"
    assert not any(t.startswith(("chosen", "best")) for t in legend)


def pa_lc_single():
    from tumble.photometry import read_lightcurve

    return read_lightcurve([CAMPAIGN / "KRN-001__kestrel.csv"])


def test_lightcurve_panels_dated_same_range_all_nights(npa_lc, tmp_path):
    model = plots.fit_model(npa_lc, 16.24, 12.567)
    fig = plots.plot_lightcurve(npa_lc, model, path=tmp_path / "lc.png")
    _check(fig, tmp_path / "lc.png", npa_lc.object_id)
    shown = [ax for ax in fig.axes if ax.axison]
    assert len(shown) == npa_lc.n_sessions  # every night, not the first twelve
    import re

    assert all(re.match(r"\d{4}-\d{2}-\d{2} UTC", ax.get_title()) for ax in shown)
    # with one source file per object, the site comes from its name (KRN-001__kestrel.csv -> kestrel)
    single = plots.session_panels(pa_lc_single())
    assert all(p.title.split("\n")[0].endswith(", kestrel") for p in single)
    ranges = {round(abs(np.diff(ax.get_ylim())[0]), 9) for ax in shown}
    assert len(ranges) == 1  # one magnitude range for every night


def test_residual_histogram_label_fits(pa_lc, tmp_path):
    model = plots.fit_model(pa_lc, 1.71026, rotation_period_h=3.42051)
    fig = plots.plot_residuals(pa_lc, model, path=tmp_path / "res.png")
    _check(fig, tmp_path / "res.png", pa_lc.object_id)
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    hist = fig.axes[1]
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    renderer = canvas.get_renderer()
    box = hist.xaxis.label.get_window_extent(renderer)
    width, _ = fig.get_size_inches() * fig.dpi
    assert box.x0 >= 0 and box.x1 <= width  # the whole label is inside the figure


def test_composite_fold_by_session(npa_lc, tmp_path):
    model = plots.fit_model(npa_lc, 16.24, 12.567)
    fig = plots.plot_composite_fold(npa_lc, model, path=tmp_path / "comp.png")
    _check(fig, tmp_path / "comp.png", npa_lc.object_id)
    ax = fig.axes[0]
    assert len([ln for ln in ax.get_lines()]) == npa_lc.n_sessions  # one colour per session
    assert "16.24 h" in ax.get_xlabel()


def test_residual_periodogram_finds_the_second_period(tmp_path):
    # a noiseless sum of two periods: after removing P1 the residual periodogram peaks at P2, with a
    # false-alarm probability from astropy's LombScargle (Baluev 2008), the reference implementation
    from tumble.photometry import LightCurve

    t = 2460000.5 + np.concatenate([np.linspace(k, k + 0.3, 80) for k in range(10)])
    p1, p2 = 5.3, 8.9
    rng = np.random.default_rng(11)
    mag = (15.0 + 0.2 * np.cos(2 * np.pi * t * 24 / p1) + 0.08 * np.sin(2 * np.pi * t * 24 / p2)
           + rng.normal(0, 0.005, t.size))
    lc = LightCurve.from_arrays(t, mag, np.full(t.size, 0.005), object_id="synthetic",
                                light_time_corrected=True, time_scale="tdb")
    res = plots.residual_periodogram(lc, p1)
    assert abs(res.peak_period_h / p2 - 1) < 0.01 and res.peak_fap < 1e-10
    fig = plots.plot_residual_periodogram(lc, p1, p2_h=p2, path=tmp_path / "rp.png")
    _check(fig, tmp_path / "rp.png", "synthetic")
    assert "< 1e-10" in " ".join(t.get_text() for t in fig.axes[0].get_legend().get_texts())
    # the frequency-combination table of the two-period model: the strongest terms are f1 and f2
    model = plots.fit_model(lc, p1, p2, order=2)
    terms = plots.frequency_combinations(model)
    assert {(terms[0].j, terms[0].k), (terms[1].j, terms[1].k)} == {(1, 0), (0, 1)}
    assert terms[0].amplitude_mag == pytest.approx(0.2, abs=0.005)
    assert terms[1].amplitude_mag == pytest.approx(0.08, abs=0.005)
    zps = plots.session_zero_points(lc, model)
    assert len(zps) == lc.n_sessions


def test_phase_curve_of_sparse_data(tmp_path):
    from tumble.photometry import read_survey

    lcs = read_survey(ROOT_DEMO / "sparse" / "svs_sample.csv.gz")
    lc = next(x for x in lcs if x.phase_deg is not None)
    fig = plots.plot_phase_curve(lc, path=tmp_path / "phase.png")
    _check(fig, tmp_path / "phase.png", lc.object_id)
    ax = fig.axes[0]
    assert ax.get_xlabel() == "solar phase angle (deg)" and ax.yaxis_inverted()
    assert "H,G1,G2 fit" in ax.get_legend().get_texts()[0].get_text()


def test_period_diameter_plain_ticks_and_tau_in_myr(tmp_path):
    from astropy.table import Table

    census = Table.read(ROOT_DEMO / "census" / "krn_census.ecsv")
    rows = [dict(zip(census.colnames, r)) for r in census]
    fig = plots.plot_period_diameter(rows, census["diameter_km"], title="KRN census", path=tmp_path / "pd.png")
    _check(fig, tmp_path / "pd.png", "KRN census")
    ax = fig.axes[0]
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig).draw()
    ticks = [t.get_text() for t in ax.get_xticklabels() + ax.get_yticklabels() if t.get_text()]
    assert ticks and not any("10^" in t or "times" in t for t in ticks), ticks
    taus = [t.get_text() for t in ax.texts]
    assert "tau = 4.5 Myr" in taus and "tau = 450 Myr" in taus and not any("0.0045" in t or "e+" in t for t in taus)
    assert ax.get_ylabel() == "rotation period (h): P for PA, P_psi for NPA"


def test_sample_period_never_mixes_light_curve_periods():
    assert np.isnan(plots.sample_period_h({"rotation": "NPA", "p1_h": 5.0}))
    assert plots.sample_period_h({"rotation": "NPA", "p_psi_h": 30.0, "p1_h": 5.0}) == 30.0
    assert np.isnan(plots.sample_period_h({"rotation": "undecided", "p1_h": 5.0}))
