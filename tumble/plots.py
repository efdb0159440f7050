"""Figures of one object and of a sample (matplotlib, Agg canvas; no display needed).

Every function returns a :class:`matplotlib.figure.Figure` and, when ``path`` is
given, also writes it as a PNG atomically (:func:`tumble._io.atomic_path`).
Figures are built on :class:`matplotlib.figure.Figure` directly, never through
``pyplot``, so nothing opens a window and nothing global is changed.

Figures
-------
- :func:`plot_scan`: 1-D period scan, chosen period and its aliases marked.
- :func:`plot_two_period_map`: Delta chi-square over (P1, P2).
- :func:`plot_lightcurve`: light curve against time, one panel per session, with the model.
- :func:`plot_folded`: folded light curve (PA: on the rotation period; NPA: on each
  light-curve period after subtracting the other component's fitted series).
- :func:`plot_residuals`: data minus model against time.
- :func:`plot_composite_fold`: composite light curve on the best single period, colour by session.
- :func:`plot_residual_periodogram`: periodogram of the residuals after removing P1.
- :func:`frequency_combinations`, :func:`session_zero_points`: the tables beside the figures.
- :func:`plot_phase_curve`: sparse data, reduced magnitude against phase angle with H,G1,G2.
- :func:`plot_posterior_pairs`: pair plot of the main posterior parameters (``corner``).
- :func:`plot_period_diameter`: period-diameter diagram of a sample with
  iso-damping-time lines, points coded by verdict (:data:`VERDICT_STYLES`).

The model drawn is a linear Fourier fit at the verdict's light-curve periods
(:func:`fit_model`): per-session zero-points (and phase-angle terms) as in the
period search, plus harmonics of ``f1`` (PA) or the two-period series of
Pravec et al. (2005, Icarus 173, 108) (NPA). It shows what the periods
explain; it is not the physical rotation-state model.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from tumble._io import atomic_path
from tumble.exceptions import TumbleError

__all__ = [
    "PlotError",
    "VERDICT_STYLES",
    "verdict_style",
    "LightCurveModel",
    "fit_model",
    "model_from_verdict",
    "save_figure",
    "plot_scan",
    "plot_two_period_map",
    "two_period_zoom",
    "plot_lightcurve",
    "plot_folded",
    "plot_orbit_fold",
    "plot_residuals",
    "plot_posterior_pairs",
    "plot_period_diameter",
    "plot_completeness",
    "MAIN_PARAMETERS",
    "MIN_FONT_PT",
    "SessionPanel",
    "session_panels",
    "plot_scan_summary",
    "plot_composite_fold",
    "ResidualPeriodogram",
    "residual_periodogram",
    "plot_residual_periodogram",
    "FrequencyTerm",
    "frequency_combinations",
    "ZeroPoint",
    "session_zero_points",
    "plot_phase_curve",
    "posterior_columns_for_display",
    "sample_period_h",
]

HOURS_PER_DAY = 24.0

#: Smallest font size of any text in a figure, points: readable at 100 % zoom at 100 dpi (a test checks it).
MIN_FONT_PT = 9.0
#: Font sizes (points) used by every figure.
FONTS = {"font.size": 11, "axes.titlesize": 12, "axes.labelsize": 11, "xtick.labelsize": 10,
         "ytick.labelsize": 10, "legend.fontsize": 9.5, "figure.titlesize": 13}
DPI = 100
#: Probability contents of the confidence contours drawn on the two-period map (1, 2 and 3 sigma of a
#: Gaussian); the Delta chi-square levels for two parameters follow from scipy.stats.chi2 (Press et al.,
#: Numerical Recipes, sect. 15.6: 2.30, 6.18, 11.8).
CONFIDENCE_LEVELS = (0.6827, 0.9545, 0.9973)
#: The one y-axis convention of every period-scan figure (CLI and report alike): Delta chi-square from the
#: deepest minimum in units of its reduced chi-square, minima pointing down, not inverted.
SCAN_Y_LABEL = r"$\Delta\chi^2$ / reduced $\chi^2$ (dimensionless)"
#: Columns of the session panels of the light-curve figure.
LIGHTCURVE_COLUMNS = 4

#: Our colour and symbol code for verdicts in sample figures:
#: key -> (label, marker, face colour, edge colour).
VERDICT_STYLES = {
    "PA": ("PA", "o", "#2b6cb0", "#1a365d"),
    "NPA/SAM": ("NPA, SAM", "^", "#c53030", "#742a2a"),
    "NPA/LAM": ("NPA, LAM", "v", "#dd6b20", "#7b341e"),
    "NPA": ("NPA, mode unknown", "D", "#805ad5", "#44337a"),
    "undecided": ("undecided", "s", "none", "#4a5568"),
}

#: Parameters shown by the posterior pair plot when present (in this order).
MAIN_PARAMETERS = ("period_h", "p_psi_h", "excitation_u", "a_over_b", "b_over_c", "l_lon_rad", "l_lat_rad")


class PlotError(TumbleError, ValueError):
    """A figure cannot be drawn from these inputs."""


def verdict_style(rotation: str, mode: str = "none") -> str:
    """Key of :data:`VERDICT_STYLES` for a verdict (rotation, mode)."""
    rotation = str(rotation).strip()
    if rotation == "PA":
        return "PA"
    if rotation == "NPA":
        mode = str(mode).strip().upper()
        return f"NPA/{mode}" if mode in ("SAM", "LAM") else "NPA"
    return "undecided"


def _figure(width_in: float, height_in: float):
    import matplotlib
    from matplotlib.figure import Figure

    with matplotlib.rc_context(FONTS):
        fig = Figure(figsize=(width_in, height_in), dpi=DPI, layout="constrained")
    return fig


def _rc():
    import matplotlib

    return matplotlib.rc_context(FONTS)


def save_figure(fig, path: str | os.PathLike) -> os.PathLike:
    """Write ``fig`` as a PNG to ``path`` atomically; returns the path."""
    with _rc(), atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=DPI)
    return path


def _finish(fig, path):
    if path is not None:
        save_figure(fig, path)
    return fig


# ---------------------------------------------------------------------------
# the drawn model
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class LightCurveModel:
    """Linear Fourier model of a light curve at given light-curve frequencies.

    Attributes
    ----------
    object_id : str
    kind : {'PA', 'NPA'}
        One-period series (harmonics of ``f1``) or two-period series.
    f1_per_d, f2_per_d : float
        Light-curve frequencies, cycles/day (``f2_per_d`` NaN for PA).
    jm, km : numpy.ndarray of int, shape (n_terms,)
        Term ``i`` oscillates at ``jm[i] f1 + km[i] f2``.
    coefficients_mag : numpy.ndarray, shape (n_terms, 2)
        (cos, sin) amplitudes of each term, mag, phases from ``epoch_jd``.
    epoch_jd : float
        Reference epoch of the phases (TDB JD, as ``LightCurve.t``).
    y_mag : numpy.ndarray, shape (n,)
        The fitted magnitudes (reduced when distances are known), mag.
    nuisance_mag : numpy.ndarray, shape (n,)
        Fitted zero-point (and phase-angle) part at each point, mag.
    rotation_period_h : float
        Period used for the PA fold, hours.
    chi2 : float
        Chi-square of the fit.
    """

    object_id: str
    kind: str
    f1_per_d: float
    f2_per_d: float
    jm: np.ndarray
    km: np.ndarray
    coefficients_mag: np.ndarray
    epoch_jd: float
    y_mag: np.ndarray
    nuisance_mag: np.ndarray
    rotation_period_h: float
    chi2: float

    def series_mag(self, t_jd, select=None) -> np.ndarray:
        """Fitted series (no zero-points) at TDB JD ``t_jd``; ``select`` is a boolean mask of terms."""
        t = np.asarray(t_jd, dtype=float) - self.epoch_jd
        f2 = 0.0 if not np.isfinite(self.f2_per_d) else self.f2_per_d
        freq = self.jm * self.f1_per_d + self.km * f2
        c = self.coefficients_mag
        if select is not None:
            freq, c = freq[select], c[select]
        ang = 2.0 * np.pi * np.mod(np.outer(t, freq), 1.0)
        return np.cos(ang) @ c[:, 0] + np.sin(ang) @ c[:, 1]

    def model_mag(self, t_jd) -> np.ndarray:
        """Model at the data times (zero-points included); ``t_jd`` must be the light curve's ``t``."""
        return self.nuisance_mag + self.series_mag(t_jd)


def _design(t, f1, f2, jm, km):
    freq = jm * f1 + km * (0.0 if not np.isfinite(f2) else f2)
    ang = 2.0 * np.pi * np.mod(np.outer(t, freq), 1.0)
    x = np.empty((t.size, 2 * freq.size))
    x[:, 0::2] = np.cos(ang)
    x[:, 1::2] = np.sin(ang)
    return x


def fit_model(lc, p1_h: float, p2_h: float | None = None, *, rotation_period_h: float | None = None,
              order: int | None = None, order_2d: int = 2) -> LightCurveModel:
    """Weighted least-squares Fourier model at light-curve period ``p1_h`` (and ``p2_h``), hours.

    ``order`` harmonics of ``f1`` (default 4 for dense data, 2 for sparse) and, with
    ``p2_h``, the two-period terms ``j f1 + k f2`` with ``|j|, |k| <= order_2d``
    (:func:`tumble.periodogram.two_period_basis`). Zero-points as in the period search
    (:func:`tumble.periodogram.prepare`).
    """
    from tumble.periodogram import prepare, two_period_basis

    if not (p1_h is not None and np.isfinite(p1_h) and p1_h > 0):
        raise PlotError(f"{lc.object_id}: no light-curve period to draw a model at")
    data = prepare(lc)
    if order is None:
        order = 2 if data.sparse else 4
    two = p2_h is not None and np.isfinite(p2_h) and p2_h > 0
    if two:
        jm, km = two_period_basis(order_2d, order)
    else:
        jm, km = np.arange(1, order + 1), np.zeros(order, dtype=int)
    f1 = HOURS_PER_DAY / float(p1_h)
    f2 = HOURS_PER_DAY / float(p2_h) if two else math.nan
    xf = _design(data.t, f1, f2, jm, km)
    x = np.hstack([data.z, xf])
    sw = np.sqrt(data.w)
    coef, *_ = np.linalg.lstsq(x * sw[:, None], sw * data.y, rcond=None)
    q = data.n_nuisance
    resid = data.y - x @ coef
    rot = rotation_period_h if rotation_period_h is not None and np.isfinite(rotation_period_h) else p1_h
    return LightCurveModel(
        object_id=str(lc.object_id), kind="NPA" if two else "PA", f1_per_d=f1, f2_per_d=f2,
        jm=np.asarray(jm, int), km=np.asarray(km, int), coefficients_mag=coef[q:].reshape(-1, 2),
        epoch_jd=float(data.epoch_jd), y_mag=np.asarray(data.y), nuisance_mag=data.z @ coef[:q],
        rotation_period_h=float(rot), chi2=float(np.sum(data.w * resid**2)),
    )


def _num(v) -> float:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return math.nan
    return v


def model_from_verdict(lc, verdict: dict) -> LightCurveModel:
    """The drawn model for a verdict dictionary (``verdict.json`` or a results row)."""
    p1, p2, per = _num(verdict.get("p1_h")), _num(verdict.get("p2_h")), _num(verdict.get("period_h"))
    if not np.isfinite(p1):
        p1 = per
    rotation = str(verdict.get("rotation", ""))
    use_p2 = rotation != "PA" and np.isfinite(p2)
    return fit_model(lc, p1, p2 if use_p2 else None, rotation_period_h=per if np.isfinite(per) else None)


# ---------------------------------------------------------------------------
# periodograms
# ---------------------------------------------------------------------------
def _scan_panel(ax, scan, chosen_period_h=None, n_aliases: int = 6) -> None:
    """Draw a 1-D scan into ``ax`` in the convention of :data:`SCAN_Y_LABEL`."""
    freq = np.asarray(scan.frequency_per_d, float)
    period = HOURS_PER_DAY / freq
    chi2 = np.asarray(scan.chi2, float)
    s2 = scan.reduced_chi2 if np.isfinite(scan.reduced_chi2) and scan.reduced_chi2 > 0 else 1.0
    order = np.argsort(period)
    y = (chi2 - np.nanmin(chi2)) / s2
    ax.plot(period[order], y[order], color="#2d3748", lw=0.7)
    ax.set_xscale("log")
    ax.set_xlabel("trial light-curve period (h)")
    ax.set_ylabel(SCAN_Y_LABEL)
    deepest = float(scan.best_period_h)
    reported = deepest if chosen_period_h is None else float(chosen_period_h)
    label = "reported P1" if chosen_period_h is not None else "deepest minimum"
    ax.axvline(reported, color="#c53030", lw=1.5, ls="-", label=f"{label}: {reported:.5g} h")
    if chosen_period_h is not None and abs(deepest / reported - 1.0) > 1e-6:
        ax.axvline(deepest, color="#2b6cb0", lw=1.2, ls="-.", label=f"deepest minimum: {deepest:.5g} h")
    rot = float(getattr(scan, "rotation_period_h", math.nan))
    if np.isfinite(rot) and abs(rot / reported - 1.0) > 1e-6 and abs(rot / deepest - 1.0) > 1e-6:
        ax.axvline(rot, color="#2f855a", lw=1.0, ls=":", label=f"rotation period (scan rule): {rot:.5g} h")
    shown = 0
    for peak in scan.peaks:
        if shown >= n_aliases:
            break
        if (peak.alias == "best" or abs(peak.period_h / reported - 1.0) < 1e-6
                or abs(peak.period_h / deepest - 1.0) < 1e-6):
            continue  # the deepest minimum's own peak is drawn above
        ax.axvline(peak.period_h, color="#dd6b20", lw=0.9, ls="--")
        # labels staggered down the axes so that close peaks stay readable
        ax.annotate(f"{peak.alias}: {peak.period_h:.4g} h", xy=(peak.period_h, 0.98 - 0.08 * shown),
                    xycoords=("data", "axes fraction"), xytext=(3, 0), textcoords="offset points",
                    fontsize=MIN_FONT_PT, va="top", color="#7b341e",
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85})
        shown += 1
    if shown:
        ax.plot([], [], color="#dd6b20", lw=0.9, ls="--", label="other ranked minima (alias relation)")
    ax.legend(loc="lower right")


def plot_scan(scan, *, chosen_period_h: float | None = None, n_aliases: int = 6, path=None):
    """The 1-D scan: Delta chi-square against trial period, the reported period and its aliases marked.

    Parameters
    ----------
    scan : tumble.periodogram.ScanResult
    chosen_period_h : float, optional
        The reported light-curve period P1 (default: none; the deepest minimum is marked), hours.
        When it differs from the deepest minimum both are drawn and labelled.
    n_aliases : int
        Ranked minima (other than the marked ones) to mark with their alias labels.
    """
    with _rc():
        fig = _figure(9.0, 4.4)
        ax = fig.add_subplot()
        _scan_panel(ax, scan, chosen_period_h, n_aliases)
        ax.set_title(f"{scan.object_id}: 1-D period scan, " + r"$\Delta\chi^2$" + " from the deepest minimum "
                     f"(order-{scan.order} Fourier series, {scan.n_points} points)")
    return _finish(fig, path)


def plot_scan_summary(scan, two=None, *, path=None):
    """What ``tumble scan --plot`` draws: the 1-D scan (and the two-period scan below it), in the same
    conventions as the report's figures."""
    with _rc():
        fig = _figure(9.0, 4.4 if two is None else 9.4)
        axes = fig.subplots(1 if two is None else 2, 1, squeeze=False)[:, 0]
        _scan_panel(axes[0], scan)
        axes[0].set_title(f"{scan.object_id}: 1-D period scan, " + r"$\Delta\chi^2$" + " from the deepest "
                          f"minimum (order-{scan.order} Fourier series, {scan.n_points} points)")
        if two is not None:
            _map_panel(fig, axes[1], two)
    return _finish(fig, path)


def two_period_zoom(lc, p1_h: float, p2_h: float, *, n: int = 41, half_width_cycles: float = 1.5,
                    order: int = 2):
    """A (P1, P2) grid of ``n x n`` around (``p1_h``, ``p2_h``), ``+- half_width_cycles / span`` in
    frequency, scanned with :func:`tumble.periodogram.two_period_scan` in grid mode."""
    from tumble.periodogram import two_period_scan

    span = max(float(lc.span_d), 1e-3)
    df = half_width_cycles / span

    def grid(p):
        f = HOURS_PER_DAY / p
        fs = np.linspace(max(f - df, 0.5 * f), f + df, n)
        return HOURS_PER_DAY / fs

    import warnings

    with warnings.catch_warnings():
        # the error ellipse of a poorly constrained pair may be degenerate; the map is all we draw
        warnings.simplefilter("ignore", RuntimeWarning)
        return two_period_scan(lc, order=order, p1_grid=grid(p1_h), p2_grid=grid(p2_h))


def _map_scale(result) -> float:
    """Reduced chi-square of the best two-period fit (the Delta chi-square unit of the map)."""
    dof = max(int(result.n_points) - int(result.n_params_2d), 1)
    s2 = float(result.chi2_2d) / dof
    return s2 if np.isfinite(s2) and s2 > 0 else 1.0


def _map_panel(fig, ax, result, reported_pair_h=None) -> None:
    """Draw a two-period result into ``ax``: the (P1, P2) map with confidence contours, or the P2 curve."""
    from matplotlib.colors import SymLogNorm
    from scipy.stats import chi2 as chi2_dist

    s2 = _map_scale(result)
    dmap = np.asarray(result.delta_chi2_map, float) / s2
    if reported_pair_h is None:
        reported_pair_h = (result.p1_h, result.p2_h)
    rp1, rp2 = (float(x) for x in reported_pair_h)
    if result.p1_grid_h is not None and dmap.ndim == 2:
        p1 = np.asarray(result.p1_grid_h, float)
        p2 = np.asarray(result.p2_grid_h, float)
        i1, i2 = np.argsort(p1), np.argsort(p2)
        z = dmap[np.ix_(i1, i2)]
        vmax = max(float(np.nanmax(z)), 10.0)
        mesh = ax.pcolormesh(p2[i2], p1[i1], z, shading="nearest", cmap="viridis_r",
                             norm=SymLogNorm(linthresh=1.0, vmin=0.0, vmax=vmax))
        fig.colorbar(mesh, ax=ax, label=r"$\Delta\chi^2$ / reduced $\chi^2$ (symmetric-log scale)")
        levels = chi2_dist.ppf(CONFIDENCE_LEVELS, 2)
        cs = ax.contour(p2[i2], p1[i1], z, levels=levels, colors=["white", "#fbd38d", "#feb2b2"],
                        linewidths=1.2)
        ax.clabel(cs, fmt={lv: f"{100 * c:.1f}%" for lv, c in zip(cs.levels, CONFIDENCE_LEVELS)},
                  fontsize=MIN_FONT_PT)
        ax.plot([rp2], [rp1], marker="+", ms=16, mew=2.5, color="#e53e3e", ls="none", gid="reported-pair",
                label=f"reported: P1 = {rp1:.5g} h, P2 = {rp2:.5g} h")
        j1, j2 = np.unravel_index(np.nanargmin(dmap), dmap.shape)
        g1, g2 = float(result.p1_grid_h[j1]), float(result.p2_grid_h[j2])
        if abs(g1 / rp1 - 1.0) > 1e-6 or abs(g2 / rp2 - 1.0) > 1e-6:
            ax.plot([g2], [g1], marker="o", ms=7, mfc="none", mec="white", mew=1.5, ls="none",
                    label=f"grid minimum: P1 = {g1:.5g} h, P2 = {g2:.5g} h")
        ax.set_xlabel("P2, second light-curve period (h)")
        ax.set_ylabel("P1, light-curve period of the larger component (h)")
        ax.legend(loc="upper right")
        ax.set_title(f"{result.object_id}: two-period scan, contours at 68.3, 95.4 and 99.7 % "
                     "(2 parameters)")
    else:
        p2 = np.asarray(result.p2_grid_h, float)
        o = np.argsort(p2)
        ax.plot(p2[o], dmap[o], color="#2d3748", lw=0.7)
        ax.set_xscale("log")
        ax.axvline(rp2, color="#c53030", label=f"reported P2 = {rp2:.5g} h")
        ax.set_xlabel(f"P2, second light-curve period (h), P1 fixed at {rp1:.5g} h")
        ax.set_ylabel(r"$\Delta\chi^2$ / reduced $\chi^2$ (dimensionless)")
        ax.legend(loc="upper right")
        ax.set_title(f"{result.object_id}: two-period scan over P2")


def plot_two_period_map(result, *, reported_pair_h=None, path=None):
    """Delta chi-square over (P1, P2) of a :class:`tumble.periodogram.TwoPeriodResult`.

    In 'grid' mode the map is drawn on a symmetric-log colour scale (linear below 1) in units of
    the best fit's reduced chi-square, with the 68.3, 95.4 and 99.7 % confidence contours of two
    parameters; the marker is the reported pair ``reported_pair_h = (P1, P2)`` (the table's values;
    default the scan's best pair) and a circle marks the grid minimum when it differs. In 'refine'
    mode (P1 fixed) the P2 scan is drawn as a curve.
    """
    with _rc():
        fig = _figure(8.0, 6.0)
        ax = fig.add_subplot()
        _map_panel(fig, ax, result, reported_pair_h)
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# light curves
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class SessionPanel:
    """One session of a light curve as the figures label it.

    Attributes
    ----------
    session : int
        Session index (-1: the sparse points).
    index : numpy.ndarray of int
        Points of the session.
    title : str
        UTC date of its first point, site (when the light curve names it) and band, point count.
    """

    session: int
    index: np.ndarray
    title: str


def _utc_date(jd_utc: float) -> str:
    from astropy.time import Time

    return Time(float(jd_utc), format="jd", scale="utc").strftime("%Y-%m-%d")


def session_panels(lc) -> list[SessionPanel]:
    """The sessions of ``lc`` in time order with their titles ("2026-03-14 UTC, kestrel, R, 85 points").

    The site is ``lc.meta['session_sites'][session]`` when the reader recorded it, else the name of
    the single source file, else omitted.
    """
    s = np.asarray(lc.session, int)
    sites = dict(lc.meta.get("session_sites", {}) or {})
    sources = list(lc.meta.get("sources", []) or [])
    single = ""
    if len(sources) == 1:
        # the file name without the object's designation usually names the site or observer
        stem = os.path.basename(str(sources[0])).split(".")[0]
        single = stem.replace(str(lc.object_id), "").strip(" _-") or stem
    out = []
    for k in np.unique(s[s >= 0]):
        idx = np.flatnonzero(s == k)
        site = str(sites.get(int(k), sites.get(str(int(k)), single)) or "")
        bands = ",".join(sorted(set(np.asarray(lc.band)[idx].astype(str))))
        first = ", ".join([f"{_utc_date(lc.t_obs[idx[0]])} UTC"] + ([site] if site else []))
        out.append(SessionPanel(int(k), idx, f"{first}\n{bands}, {idx.size} points"))
    if np.any(s < 0):
        idx = np.flatnonzero(s < 0)
        out.append(SessionPanel(-1, idx, f"sparse points {_utc_date(lc.t_obs[idx[0]])} to "
                                         f"{_utc_date(lc.t_obs[idx[-1]])} UTC\n{idx.size} points"))
    return out


def _dense_model(model: LightCurveModel, t, idx, n_per_day: int = 480):
    """Model curve through one session: series on a fine grid plus the interpolated zero-point part."""
    ts = t[idx]
    n = int(min(4000, max(50, (ts[-1] - ts[0]) * n_per_day)))
    grid = np.linspace(ts[0], ts[-1], n)
    nuis = np.interp(grid, ts, model.nuisance_mag[idx])
    return grid, nuis + model.series_mag(grid)


def plot_lightcurve(lc, model: LightCurveModel | None = None, *, max_panels: int | None = None, path=None):
    """Magnitudes against time, one panel per session (all of them by default), with the model.

    Every dense panel shows the same magnitude range (centred on its session), so amplitudes compare
    across nights; each is titled with its UTC date, site (when known), band and point count.
    Sparse points (session -1) get one panel against days. Magnitudes are the fitted ones (reduced
    to unit distances when the distances are known).
    """
    t = np.asarray(lc.t, float)
    y = np.asarray(lc.reduced_mag, float)
    err = np.asarray(lc.err, float)
    groups = session_panels(lc)
    shown = groups if max_panels is None else groups[:max_panels]
    ncol = min(LIGHTCURVE_COLUMNS, len(shown))
    nrow = int(math.ceil(len(shown) / ncol))
    mag_label = "reduced magnitude (mag)" if lc.has_distances else "magnitude (mag)"
    curves = {}
    for g in shown:
        if model is not None and g.session >= 0 and g.index.size > 1:
            curves[g.session] = _dense_model(model, t, g.index)
    # one magnitude range for every dense panel: the widest session (data and model), with a margin
    spans = [np.ptp(np.concatenate([y[g.index] + err[g.index], y[g.index] - err[g.index]]
                                   + ([curves[g.session][1]] if g.session in curves else [])))
             for g in shown if g.session >= 0]
    half = 0.55 * max(spans) if spans else 0.0
    with _rc():
        fig = _figure(3.6 * ncol + 0.6, 2.7 * nrow + 0.9)
        axes = fig.subplots(nrow, ncol, squeeze=False)
        for k, g in enumerate(shown):
            ax = axes[k // ncol][k % ncol]
            idx = g.index
            sparse = g.session < 0
            t0 = float(np.floor(t[idx][0] - 0.5) + 0.5) if not sparse else float(np.floor(t[idx][0]))
            scale = 1.0 if sparse else HOURS_PER_DAY
            ax.errorbar((t[idx] - t0) * scale, y[idx], yerr=err[idx], fmt=".", ms=3, lw=0.5,
                        color="#2b6cb0", ecolor="#90cdf4")
            if model is not None:
                if sparse:
                    o = np.argsort(t[idx])
                    ax.plot((t[idx][o] - t0) * scale, model.model_mag(t)[idx][o], ".", ms=2, color="#c53030")
                elif g.session in curves:
                    gt, m = curves[g.session]
                    ax.plot((gt - t0) * scale, m, color="#c53030", lw=1.2)
            if not sparse and half > 0:
                mid = 0.5 * (np.max(y[idx]) + np.min(y[idx]))
                ax.set_ylim(mid - half, mid + half)
            ax.invert_yaxis()
            ax.set_title(g.title, fontsize=MIN_FONT_PT + 0.5, linespacing=1.1)
            ax.set_xlabel(f"time - JD {t0:.1f} TDB ({'d' if sparse else 'h'})")
            ax.set_ylabel(mag_label)
        for k in range(len(shown), nrow * ncol):
            axes[k // ncol][k % ncol].set_axis_off()
        more = f"; first {len(shown)} of {len(groups)} sessions" if len(groups) > len(shown) else ""
        what = "data (blue) and model (red)" if model is not None else "data"
        same = f", every night on the same {2 * half:.2g} mag range" if half > 0 else ""
        fig.suptitle(f"{lc.object_id}: light curve per session, {what}{same}{more}")
    return _finish(fig, path)


def _fold_panel(ax, phase, y, err, curve_phase, curve, title, period_h, mag_label):
    ax.errorbar(phase, y, yerr=err, fmt=".", ms=3, lw=0.4, color="#2b6cb0", ecolor="#bee3f8", alpha=0.8)
    ax.plot(curve_phase, curve, color="#c53030", lw=1.5)
    ax.invert_yaxis()
    ax.set_xlim(0, 1)
    ax.set_xlabel(f"rotational phase (cycles of {period_h:.6g} h)")
    ax.set_ylabel(mag_label)
    ax.set_title(title, fontsize=11)


def plot_folded(lc, model: LightCurveModel, *, path=None):
    """Folded light curve with the model.

    PA: the data minus their zero-points, folded on the rotation period. NPA: the
    standard two-period view, one panel per light-curve period, each folded on its
    period after subtracting the fitted series of the other component (the terms
    that are not pure harmonics of the folding frequency) and the zero-points.
    """
    t = np.asarray(lc.t, float)
    err = np.asarray(lc.err, float)
    y = model.y_mag - model.nuisance_mag
    mag_label = "magnitude minus zero-point (mag)"
    grid = np.linspace(0.0, 1.0, 400)
    with _rc():
        if model.kind == "PA":
            fig = _figure(7.5, 4.6)
            ax = fig.add_subplot()
            p = model.rotation_period_h
            f = HOURS_PER_DAY / p
            phase = np.mod((t - model.epoch_jd) * f, 1.0)
            curve = model.series_mag(model.epoch_jd + grid / f)
            _fold_panel(ax, phase, y, err, grid, curve, f"folded on P = {p:.6g} h", p, mag_label)
            fig.suptitle(f"{lc.object_id}: folded light curve (PA)")
        else:
            fig = _figure(12.0, 4.6)
            axes = fig.subplots(1, 2, squeeze=False)[0]
            for ax, (freq, keep, name, other) in zip(axes, (
                    (model.f1_per_d, model.km == 0, "P1", "P2"),
                    (model.f2_per_d, model.jm == 0, "P2", "P1"))):
                p = HOURS_PER_DAY / freq
                phase = np.mod((t - model.epoch_jd) * freq, 1.0)
                yy = y - model.series_mag(t, ~keep)
                curve = model.series_mag(model.epoch_jd + grid / freq, keep)
                _fold_panel(ax, phase, yy, err, grid, curve,
                            f"folded on {name} = {p:.6g} h, {other} component subtracted", p, mag_label)
            fig.suptitle(f"{lc.object_id}: two-period folded light curve (NPA view)")
    return _finish(fig, path)


def plot_orbit_fold(fold, *, object_id: str = "", depths_mag=None, path=None):
    """The standard view of mutual events: the light curve after removing the primary's rotation, folded
    on the orbital period (:func:`tumble.classify.binary.fold_on_orbit`).

    Residuals (mag, fainter down) against orbital phase with the deeper event at phase 0 and the other
    at 0.5; the binned median (red), the event windows shaded, and the fitted depths as dashed lines
    when given.

    Parameters
    ----------
    fold : tumble.classify.binary.OrbitFold
    object_id : str
    depths_mag : (float, float) or None
        Depths of the deeper and the other event (mag), drawn at their phases.
    path : path or None
        Write the PNG here.
    """
    with _rc():
        fig = _figure(9.0, 4.8)
        ax = fig.add_subplot()
        sess = np.asarray(fold.session, int)
        ax.errorbar(fold.phase, fold.residual_mag, yerr=fold.err_mag, fmt="none", lw=0.3, ecolor="#bee3f8",
                    alpha=0.6, zorder=1)
        ax.scatter(fold.phase, fold.residual_mag, c=np.where(sess >= 0, sess, -1), s=5, cmap="tab20", zorder=2)
        ok = np.isfinite(fold.bin_median_mag)
        ax.plot(fold.bin_phase[ok], fold.bin_median_mag[ok], color="#c53030", lw=1.6, zorder=3,
                label="median per phase bin")
        if np.isfinite(fold.width_phase):
            for centre in (0.0, 0.5):
                ax.axvspan(centre - 0.5 * fold.width_phase, centre + 0.5 * fold.width_phase, color="#fbd38d",
                           alpha=0.35, zorder=0, lw=0)
        if depths_mag is not None:
            for k, (centre, depth) in enumerate(zip((0.0, 0.5), depths_mag)):
                if np.isfinite(depth):
                    half = 0.5 * (fold.width_phase if np.isfinite(fold.width_phase) else 0.1)
                    ax.hlines(depth, centre - half, centre + half, colors="#2d3748", linestyles="dashed", lw=1.2,
                              label="fitted event depth (peak of the dip)" if k == 0 else None)
        ax.axhline(0.0, color="#2d3748", lw=0.6)
        ax.set_xlim(-0.25, 0.75)
        lo, hi = np.nanpercentile(fold.residual_mag, [0.5, 99.5])
        pad = 0.1 * max(hi - lo, 1e-3)
        ax.set_ylim(hi + pad, lo - pad)  # magnitudes: fainter (events) down
        ax.set_xlabel(f"orbital phase (cycles of P_orb = {fold.p_orb_h:.5g} h; 0 = deeper event)")
        ax.set_ylabel("residual after the primary's rotation (mag)")
        how = "fitted outside the events" if fold.masked_events else "fitted to all points"
        ax.set_title(f"primary's {fold.p_primary_h:.5g} h series ({how}) and zero-points removed; "
                     f"epoch JD {fold.epoch_jd:.5f}", fontsize=MIN_FONT_PT + 1)
        ax.legend(loc="lower right", fontsize=MIN_FONT_PT)
        fig.suptitle(f"{object_id}: folded on the orbital period (mutual events)" if object_id
                     else "folded on the orbital period (mutual events)")
    return _finish(fig, path)


def plot_residuals(lc, model: LightCurveModel, *, path=None):
    """Data minus model against time (colour by session) and their histogram in units of the errors."""
    t = np.asarray(lc.t, float)
    err = np.asarray(lc.err, float)
    r = model.y_mag - model.model_mag(t)
    t0 = float(np.floor(t[0]))
    with _rc():
        fig = _figure(11.0, 4.4)
        ax, axh = fig.subplots(1, 2, gridspec_kw={"width_ratios": [2.6, 1.4]})
        s = np.asarray(lc.session, int)
        ax.scatter(t - t0, r, c=np.where(s >= 0, s, -1), s=6, cmap="tab20")
        ax.axhline(0.0, color="#2d3748", lw=0.8)
        ax.set_xlabel(f"time - JD {t0:.1f} TDB (d)")
        ax.set_ylabel("residual, data - model (mag)")
        ax.set_title(f"residuals (rms {np.sqrt(np.mean(r**2)):.3g} mag; colour = session)", fontsize=11)
        z = r / err
        axh.hist(z[np.isfinite(z)], bins=30, color="#4a5568")
        axh.set_xlabel("residual / error (sigma)")
        axh.set_ylabel("points (count)")
        axh.set_title("in units of the quoted error", fontsize=MIN_FONT_PT + 1)
        fig.suptitle(f"{lc.object_id}: residuals of the {model.kind} Fourier model")
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# diagnostic views of a tumbling claim
# ---------------------------------------------------------------------------
#: Frequencies of the residual periodogram per unit of 1/span (oversampling; common practice: 5-10).
RESIDUAL_OVERSAMPLE = 10
#: Strongest combination terms listed in the frequency-combination table.
MAX_COMBINATIONS = 12


def plot_composite_fold(lc, model: LightCurveModel, *, period_h: float | None = None, path=None):
    """Composite light curve: the data minus their zero-points folded on the best single period,
    coloured by session (a session that does not line up with the others shows at once).

    ``period_h`` defaults to the model's rotation period (PA) or P1 (NPA), hours.
    """
    t = np.asarray(lc.t, float)
    y = model.y_mag - model.nuisance_mag
    p = float(period_h) if period_h is not None else (
        model.rotation_period_h if model.kind == "PA" else HOURS_PER_DAY / model.f1_per_d)
    f = HOURS_PER_DAY / p
    phase = np.mod((t - model.epoch_jd) * f, 1.0)
    groups = session_panels(lc)
    with _rc():
        fig = _figure(9.5, 5.0)
        ax = fig.add_subplot()
        import matplotlib

        cmap = matplotlib.colormaps["turbo"]
        for k, g in enumerate(groups):
            colour = cmap((k + 0.5) / max(len(groups), 1))
            ax.plot(phase[g.index], y[g.index], ".", ms=4, color=colour,
                    label=g.title.replace("\n", ", ") if len(groups) <= 16 else None)
        ax.invert_yaxis()
        ax.set_xlim(0, 1)
        ax.set_xlabel(f"rotational phase (cycles of {p:.6g} h)")
        ax.set_ylabel("magnitude minus zero-point (mag)")
        if len(groups) <= 16:
            ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), fontsize=MIN_FONT_PT, title="session")
        ax.set_title(f"{lc.object_id}: composite light curve folded on {p:.6g} h, colour = session "
                     f"({len(groups)} sessions)")
    return _finish(fig, path)


@dataclass(frozen=True)
class ResidualPeriodogram:
    """Lomb-Scargle periodogram of the residuals after removing the P1 series and the zero-points.

    Attributes
    ----------
    frequency_per_d, power : numpy.ndarray, shape (m,)
        Frequencies (cycles/day) and normalised power (astropy 'standard', 0 to 1).
    peak_period_h : float
        Period of the highest peak, hours.
    peak_fap : float
        Its false-alarm probability (astropy, Baluev 2008 approximation).
    p1_h : float
        The period removed, hours.
    rms_mag : float
        Rms of the residuals, mag.
    """

    frequency_per_d: np.ndarray
    power: np.ndarray
    peak_period_h: float
    peak_fap: float
    p1_h: float
    rms_mag: float


def residual_periodogram(lc, p1_h: float, *, min_period_h: float = 0.5,
                         max_period_h: float | None = None) -> ResidualPeriodogram:
    """Periodogram of what the one-period model at ``p1_h`` leaves (astropy's LombScargle, floating mean).

    A tumbler's second period shows here as a significant peak; a PA body's residuals are flat.
    """
    from astropy.timeseries import LombScargle

    model = fit_model(lc, p1_h)
    t = np.asarray(lc.t, float)
    r = model.y_mag - model.model_mag(t)
    err = np.asarray(lc.err, float)
    span = max(float(np.ptp(t)), 1e-3)
    f_max = HOURS_PER_DAY / min_period_h
    f_min = HOURS_PER_DAY / max_period_h if max_period_h else 0.5 / span
    n = int(min(200000, max(500, (f_max - f_min) * span * RESIDUAL_OVERSAMPLE)))
    freq = np.linspace(f_min, f_max, n)
    ls = LombScargle(t, r, err)
    power = ls.power(freq)
    i = int(np.argmax(power))
    fap = float(ls.false_alarm_probability(power[i], minimum_frequency=f_min, maximum_frequency=f_max))
    return ResidualPeriodogram(freq, power, HOURS_PER_DAY / freq[i], fap, float(p1_h),
                               float(np.sqrt(np.mean(r**2))))


def plot_residual_periodogram(lc, p1_h: float, *, p2_h: float | None = None, path=None):
    """The residual periodogram (:func:`residual_periodogram`) with the reported P2 marked."""
    from tumble.display import format_fap

    res = residual_periodogram(lc, p1_h)
    with _rc():
        fig = _figure(9.0, 4.4)
        ax = fig.add_subplot()
        period = HOURS_PER_DAY / res.frequency_per_d
        ax.plot(period, res.power, color="#2d3748", lw=0.7)
        ax.set_xscale("log")
        ax.axvline(res.peak_period_h, color="#2b6cb0", ls="-.", lw=1.2,
                   label=f"highest peak {res.peak_period_h:.5g} h (false-alarm probability "
                         f"{format_fap(res.peak_fap)})")
        if p2_h is not None and np.isfinite(p2_h):
            ax.axvline(p2_h, color="#c53030", lw=1.5, label=f"reported P2 = {p2_h:.5g} h")
            # a double-peaked P2 component puts its power at P2/2 in a one-harmonic periodogram
            ax.axvline(p2_h / 2, color="#c53030", lw=1.0, ls=":", label=f"P2/2 = {p2_h / 2:.5g} h (its harmonic)")
        ax.set_xlabel("trial period (h)")
        ax.set_ylabel("Lomb-Scargle power of the residuals (dimensionless)")
        ax.legend(loc="upper right")
        ax.set_title(f"{lc.object_id}: periodogram of the residuals after removing P1 = {p1_h:.5g} h "
                     f"(rms {res.rms_mag:.2g} mag)")
    return _finish(fig, path)


@dataclass(frozen=True)
class FrequencyTerm:
    """One term ``j f1 + k f2`` of the two-period series and its semi-amplitude.

    Attributes
    ----------
    j, k : int
    frequency_per_d : float
        ``j f1 + k f2``, cycles/day.
    period_h : float
        Its period, hours (inf for a zero frequency).
    amplitude_mag : float
        Semi-amplitude sqrt(C^2 + S^2) of the fitted term, mag.
    """

    j: int
    k: int
    frequency_per_d: float
    period_h: float
    amplitude_mag: float


def frequency_combinations(model: LightCurveModel, max_terms: int = MAX_COMBINATIONS) -> tuple[FrequencyTerm, ...]:
    """The fitted terms ``j f1 + k f2`` of the model, strongest first (PA: the harmonics of f1)."""
    f2 = model.f2_per_d if np.isfinite(model.f2_per_d) else 0.0
    amp = np.hypot(model.coefficients_mag[:, 0], model.coefficients_mag[:, 1])
    out = []
    for i in np.argsort(-amp)[:max_terms]:
        f = float(model.jm[i] * model.f1_per_d + model.km[i] * f2)
        out.append(FrequencyTerm(int(model.jm[i]), int(model.km[i]), f,
                                 HOURS_PER_DAY / abs(f) if f != 0 else math.inf, float(amp[i])))
    return tuple(out)


@dataclass(frozen=True)
class ZeroPoint:
    """The fitted zero-point of one session.

    Attributes
    ----------
    session : int
    title : str
        As in the light-curve figure (date, site, band, points).
    zero_point_mag : float
        Median of the fitted nuisance part over the session's points, mag (the zero-point itself when
        no phase-angle terms are fitted).
    """

    session: int
    title: str
    zero_point_mag: float


def session_zero_points(lc, model: LightCurveModel) -> tuple[ZeroPoint, ...]:
    """Per-session zero-points of the drawn model, in time order."""
    return tuple(ZeroPoint(g.session, g.title, float(np.median(model.nuisance_mag[g.index])))
                 for g in session_panels(lc))


def plot_phase_curve(lc, model: LightCurveModel | None = None, *, path=None):
    """Sparse data: reduced magnitude against phase angle with the fitted H,G1,G2 curve
    (:func:`tumble.phase_function.fit_hg1g2`; Muinonen et al. 2010). With a model, its rotational
    series is removed first, so the scatter left is what the phase curve does not explain."""
    from tumble.phase_function import fit_hg1g2

    if lc.phase_deg is None or not lc.has_distances:
        raise PlotError(f"{lc.object_id}: no phase angles and distances, so no phase curve")
    alpha = np.asarray(lc.phase_deg, float)
    y = np.asarray(lc.reduced_mag, float)
    if model is not None:
        y = y - model.series_mag(np.asarray(lc.t, float))
    err = np.asarray(lc.err, float)
    fit = fit_hg1g2(alpha, y, err)
    grid = np.linspace(max(0.0, alpha.min() - 1.0), alpha.max() + 1.0, 300)
    with _rc():
        fig = _figure(8.0, 5.0)
        ax = fig.add_subplot()
        ax.errorbar(alpha, y, yerr=err, fmt=".", ms=3, lw=0.4, color="#2b6cb0", ecolor="#bee3f8")
        ax.plot(grid, fit.reduced_mag(grid), color="#c53030", lw=1.5,
                label=f"H,G1,G2 fit: H = {fit.h_mag:.2f} mag, G1 = {fit.g1:.2f}, G2 = {fit.g2:.2f} "
                      f"(rms {fit.rms_mag:.2g} mag)")
        ax.invert_yaxis()
        ax.set_xlabel("solar phase angle (deg)")
        ax.set_ylabel("reduced magnitude" + (", rotation removed" if model is not None else "") + " (mag)")
        ax.legend(loc="lower right")
        ax.set_title(f"{lc.object_id}: phase curve ({fit.n_points} points)")
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# posterior
# ---------------------------------------------------------------------------
#: Angles that wrap around (drawn in degrees centred on their circular mean, never split at 0/360).
_WRAPPING = ("lon", "phi0", "psi0", "phase", "angle")


def posterior_columns_for_display(x, names, units):
    """Posterior columns as drawn: angles in radians converted to degrees, wrapping angles centred on
    their circular mean (so a mode at the 0/2 pi wrap stays one mode). Returns (x, names, units)."""
    x = np.array(x, float, copy=True)
    names, units = list(names), list(units)
    for c, (name, unit) in enumerate(zip(names, units)):
        if unit != "rad" and not name.endswith("_rad"):
            continue
        deg = np.degrees(x[:, c])
        base = name[:-4] if name.endswith("_rad") else name
        if any(w in base for w in _WRAPPING) and "lat" not in base:
            mean = np.degrees(np.arctan2(np.mean(np.sin(x[:, c])), np.mean(np.cos(x[:, c]))))
            deg = mean + np.mod(deg - mean + 180.0, 360.0) - 180.0
        x[:, c] = deg
        names[c], units[c] = f"{base}_deg", "deg"
    return x, names, units


def plot_posterior_pairs(samples, names, units=None, *, object_id: str = "", params=None, max_params: int = 5,
                         max_points: int = 20000, path=None):
    """Pair plot of the main posterior parameters, drawn by ``corner`` (Foreman-Mackey 2016, JOSS 1, 24).

    Angles are shown in degrees, wrapping angles centred on their circular mean
    (:func:`posterior_columns_for_display`); the diagonal carries the 16th, 50th and 84th percentiles.

    Parameters
    ----------
    samples : array_like, shape (n_samples, n_params)
    names, units : sequence of str
        Parameter names and units, one per column.
    params : sequence of str, optional
        Columns to show (default: those of :data:`MAIN_PARAMETERS` present, else the first
        ``max_params``).
    """
    import corner
    from matplotlib.figure import Figure

    x = np.asarray(samples, float)
    names = [str(n) for n in names]
    units = [str(u) for u in (units if units is not None else [""] * len(names))]
    if x.ndim != 2 or x.shape[0] < 2 or x.shape[1] != len(names):
        raise PlotError(f"{object_id}: posterior samples must be (n >= 2, {len(names)}); got {x.shape}")
    if params is None:
        params = [p for p in MAIN_PARAMETERS if p in names][:max_params]
        if not params:
            params = names[:max_params]
    cols = [names.index(p) for p in params]
    if x.shape[0] > max_points:
        x = x[np.linspace(0, x.shape[0] - 1, max_points).astype(int)]
    xs, shown_names, shown_units = posterior_columns_for_display(x[:, cols], [names[c] for c in cols],
                                                                 [units[c] for c in cols])
    ok = np.all(np.isfinite(xs), axis=1)
    xs = xs[ok]
    if xs.shape[0] < 2 or np.any(np.ptp(xs, axis=0) <= 0):
        raise PlotError(f"{object_id}: the posterior has a parameter without spread; no pair plot")
    labels = [f"{n} ({u})" if u else f"{n} (dimensionless)" for n, u in zip(shown_names, shown_units)]
    k = len(cols)
    size = max(2.3 * k, 5.0)
    with _rc():
        fig = Figure(figsize=(size, size + 0.4), dpi=DPI)
        corner.corner(xs, fig=fig, labels=labels, quantiles=(0.15865, 0.5, 0.84135), show_titles=True,
                      title_fmt=".3g", title_kwargs={"fontsize": MIN_FONT_PT + 0.5},
                      label_kwargs={"fontsize": MIN_FONT_PT + 1}, plot_datapoints=True, bins=30,
                      max_n_ticks=4)
        for ax in fig.axes:
            ax.tick_params(labelsize=MIN_FONT_PT)
        fig.suptitle(f"{object_id}: posterior of the main parameters ({xs.shape[0]} samples; "
                     "lines: 16th, 50th, 84th percentiles)", y=0.995)
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# samples
# ---------------------------------------------------------------------------
def sample_period_h(row) -> float:
    """The one period a sample figure plots: the rotation period (PA ``period_h``, NPA ``p_psi_h``);
    NaN when the verdict claims none (undecided, a screen, an NPA without P_psi), so the y-axis never
    mixes light-curve periods with rotation periods."""
    rotation = str(row.get("rotation", ""))
    name = {"PA": "period_h", "NPA": "p_psi_h"}.get(rotation)
    v = _num(row.get(name)) if name else math.nan
    return v if np.isfinite(v) and v > 0 else math.nan


def _plain_log_ticks(axis) -> None:
    """Tick labels of a log axis as plain numbers (0.2, 1, 30), not 2x10^-1."""
    from matplotlib.ticker import FuncFormatter, LogLocator

    axis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(FuncFormatter(lambda v, _: ""))


def _tau_label(tau_gyr: float) -> str:
    """A damping time in the unit that reads naturally: Myr below 1 Gyr."""
    def two_figures(x):  # 2 significant figures without exponent notation (450, not 4.5e+02)
        return f"{float(f'{x:.2g}'):g}"

    if tau_gyr < 1.0:
        return f"tau = {two_figures(tau_gyr * 1000)} Myr"
    return f"tau = {two_figures(tau_gyr)} Gyr"


def plot_period_diameter(rows, diameters_km, *, title: str = "sample", taus_gyr=(0.0045, 0.045, 0.45, 4.5),
                         formula: str = "burns-safronov", path=None, **formula_params):
    """Period-diameter diagram with iso-damping-time lines, points coded by verdict.

    Parameters
    ----------
    rows : sequence of dict
        Results rows (``object``, ``status``, ``rotation``, ``mode``, periods).
    diameters_km : sequence of float
        Diameter of each row, km (NaN: not plotted).
    taus_gyr : sequence of float
        Damping times of the drawn lines, Gyr.
    formula, **formula_params
        Damping formula and its parameters (:func:`tumble.damping.iso_tau_lines`).
    """
    from tumble.damping import iso_tau_lines

    rows = list(rows)
    d = np.asarray(diameters_km, float)
    if d.shape != (len(rows),):
        raise PlotError(f"{title}: {len(rows)} rows but {d.size} diameters")
    p = np.array([sample_period_h(r) for r in rows])
    ok = np.array([str(r.get("status", "ok")) == "ok" for r in rows]) & np.isfinite(p) & np.isfinite(d) & (d > 0)
    with _rc():
        fig = _figure(8.0, 6.0)
        ax = fig.add_subplot()
        if ok.any():
            lo, hi = float(np.min(d[ok])) / 3.0, float(np.max(d[ok])) * 3.0
        else:
            lo, hi = 0.1, 10.0
        dd, pp = iso_tau_lines(taus_gyr, np.logspace(np.log10(lo), np.log10(hi), 100), formula, **formula_params)
        for tau, line in zip(np.atleast_1d(taus_gyr), pp):
            ax.plot(dd, line, color="#a0aec0", lw=1.0, ls="--")
            ax.annotate(_tau_label(float(tau)), xy=(dd[-1], line[-1]), xytext=(-4, 3),
                        textcoords="offset points", ha="right", fontsize=MIN_FONT_PT, color="#4a5568")
        counts = {}
        for key, (label, marker, face, edge) in VERDICT_STYLES.items():
            sel = ok & np.array([verdict_style(r.get("rotation", ""), r.get("mode", "none")) == key for r in rows])
            counts[key] = int(sel.sum())
            if sel.any():
                ax.scatter(d[sel], p[sel], marker=marker, s=36, facecolors=face, edgecolors=edge, linewidths=1.0,
                           label=f"{label} ({counts[key]})", zorder=3)
        ax.plot([], [], color="#a0aec0", ls="--", label=f"iso-damping time ({formula})")
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlim(lo, hi)
        _plain_log_ticks(ax.xaxis)
        _plain_log_ticks(ax.yaxis)
        ax.set_xlabel("diameter (km)")
        ax.set_ylabel("rotation period (h): P for PA, P_psi for NPA")
        ax.legend(loc="lower right")
        ax.set_title(f"{title}: period-diameter diagram\n({int(ok.sum())} of {len(rows)} objects have a "
                     "rotation period and a size)")
    return _finish(fig, path)


def plot_completeness(table, path):
    """The survey completeness map (detection probability of NPA per period and amplitude bin).

    It lives with the injection machinery in :mod:`tumble.completeness`; re-exported here so that
    every figure of the package can be found in one module.
    """
    from tumble.completeness import plot_completeness as _plot

    return _plot(table, path)
