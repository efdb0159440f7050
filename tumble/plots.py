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
- :func:`plot_posterior_pairs`: pair plot of the main posterior parameters.
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
    "plot_residuals",
    "plot_posterior_pairs",
    "plot_period_diameter",
    "plot_completeness",
    "MAIN_PARAMETERS",
]

HOURS_PER_DAY = 24.0

#: Font sizes (points) used by every figure: readable at 100 % zoom at 100 dpi.
FONTS = {"font.size": 11, "axes.titlesize": 12, "axes.labelsize": 11, "xtick.labelsize": 10,
         "ytick.labelsize": 10, "legend.fontsize": 9, "figure.titlesize": 13}
DPI = 100

#: Our colour and symbol code for verdicts in sample figures:
#: key -> (label, marker, face colour, edge colour).
VERDICT_STYLES = {
    "PA": ("PA", "o", "#2b6cb0", "#1a365d"),
    "NPA/SAM": ("NPA, SAM", "^", "#c53030", "#742a2a"),
    "NPA/LAM": ("NPA, LAM", "v", "#dd6b20", "#7b341e"),
    "NPA": ("NPA, mode open", "D", "#805ad5", "#44337a"),
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
def plot_scan(scan, *, chosen_period_h: float | None = None, n_aliases: int = 6, path=None):
    """The 1-D scan: chi-square against trial period, chosen period and its aliases marked.

    Parameters
    ----------
    scan : tumble.periodogram.ScanResult
    chosen_period_h : float, optional
        Period to mark as chosen (default: the scan's best light-curve period), hours.
    n_aliases : int
        Ranked peaks (other than the best) to mark with their alias labels.
    """
    freq = np.asarray(scan.frequency_per_d, float)
    period = HOURS_PER_DAY / freq
    chi2 = np.asarray(scan.chi2, float)
    dof = max(scan.n_points - len(scan.nuisance_names) - 2 * scan.order, 1)
    order = np.argsort(period)
    chosen = scan.best_period_h if chosen_period_h is None else float(chosen_period_h)
    with _rc():
        fig = _figure(9.0, 4.2)
        ax = fig.add_subplot()
        ax.plot(period[order], chi2[order] / dof, color="#2d3748", lw=0.7)
        ax.set_xscale("log")
        ax.set_xlabel("trial light-curve period (h)")
        ax.set_ylabel(r"reduced $\chi^2$ (order %d Fourier fit)" % scan.order)
        ax.axvline(chosen, color="#c53030", lw=1.5, ls="-", label=f"chosen: {chosen:.5g} h")
        shown = 0
        for peak in scan.peaks:
            if shown >= n_aliases:
                break
            if abs(peak.period_h / chosen - 1.0) < 1e-6:
                continue
            ax.axvline(peak.period_h, color="#dd6b20", lw=0.9, ls="--")
            # labels staggered down the axes so that close peaks stay readable
            ax.annotate(f"{peak.alias}: {peak.period_h:.4g} h", xy=(peak.period_h, 0.98 - 0.075 * shown),
                        xycoords=("data", "axes fraction"), xytext=(3, 0), textcoords="offset points",
                        fontsize=8, va="top", color="#7b341e",
                        bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.85})
            shown += 1
        if shown:
            ax.plot([], [], color="#dd6b20", lw=0.9, ls="--", label="other ranked peaks (alias label)")
        ax.legend(loc="lower right")
        ax.set_title(f"{scan.object_id}: 1-D period scan")
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


def plot_two_period_map(result, *, path=None, max_delta_chi2: float | None = None):
    """Delta chi-square over (P1, P2) of a :class:`tumble.periodogram.TwoPeriodResult`.

    In 'grid' mode the map is drawn as an image (colour clipped at ``max_delta_chi2``,
    default the 95th percentile); in 'refine' mode (P1 fixed) the P2 scan is drawn as a curve.
    """
    dmap = np.asarray(result.delta_chi2_map, float)
    with _rc():
        fig = _figure(7.5, 5.6)
        ax = fig.add_subplot()
        if result.p1_grid_h is not None and dmap.ndim == 2:
            p1 = np.asarray(result.p1_grid_h, float)
            p2 = np.asarray(result.p2_grid_h, float)
            i1, i2 = np.argsort(p1), np.argsort(p2)
            z = dmap[np.ix_(i1, i2)]
            vmax = max_delta_chi2 or float(np.nanpercentile(z, 95)) or 1.0
            mesh = ax.pcolormesh(p2[i2], p1[i1], np.clip(z, 0, vmax), shading="nearest", cmap="viridis_r")
            fig.colorbar(mesh, ax=ax, label=r"$\Delta\chi^2$ (clipped at %.3g)" % vmax)
            ax.plot([result.p2_h], [result.p1_h], marker="+", ms=16, mew=2, color="#e53e3e",
                    label=f"best: P1 = {result.p1_h:.5g} h, P2 = {result.p2_h:.5g} h")
            ax.set_xlabel("P2, second light-curve period (h)")
            ax.set_ylabel("P1, first light-curve period (h)")
            ax.legend(loc="upper right")
            ax.set_title(f"{result.object_id}: two-period scan, " + r"$\Delta\chi^2$ map")
        else:
            p2 = np.asarray(result.p2_grid_h, float)
            o = np.argsort(p2)
            ax.plot(p2[o], dmap[o], color="#2d3748", lw=0.7)
            ax.set_xscale("log")
            ax.axvline(result.p2_h, color="#c53030", label=f"best P2 = {result.p2_h:.5g} h")
            ax.set_xlabel(f"P2, second light-curve period (h), P1 fixed at {result.p1_h:.5g} h")
            ax.set_ylabel(r"$\Delta\chi^2$")
            ax.legend(loc="upper right")
            ax.set_title(f"{result.object_id}: two-period scan over P2")
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# light curves
# ---------------------------------------------------------------------------
def _session_groups(lc):
    s = np.asarray(lc.session, int)
    groups = [(f"session {int(k)}", np.flatnonzero(s == k)) for k in np.unique(s[s >= 0])]
    if np.any(s < 0):
        groups.append(("sparse points", np.flatnonzero(s < 0)))
    return groups


def _dense_model(model: LightCurveModel, t, idx, n_per_day: int = 480):
    """Model curve through one session: series on a fine grid plus the interpolated zero-point part."""
    ts = t[idx]
    n = int(min(4000, max(50, (ts[-1] - ts[0]) * n_per_day)))
    grid = np.linspace(ts[0], ts[-1], n)
    nuis = np.interp(grid, ts, model.nuisance_mag[idx])
    return grid, nuis + model.series_mag(grid)


def plot_lightcurve(lc, model: LightCurveModel | None = None, *, max_panels: int = 12, path=None):
    """Magnitudes against time, one panel per session (up to ``max_panels``), with the model.

    Sparse points (session -1) get one panel against days. Magnitudes are the fitted
    ones (reduced to unit distances when the distances are known).
    """
    t = np.asarray(lc.t, float)
    y = np.asarray(lc.reduced_mag, float)
    err = np.asarray(lc.err, float)
    groups = _session_groups(lc)
    shown = groups[:max_panels]
    ncol = min(3, len(shown))
    nrow = int(math.ceil(len(shown) / ncol))
    mag_label = "reduced magnitude (mag)" if lc.has_distances else "magnitude (mag)"
    with _rc():
        fig = _figure(4.0 * ncol + 0.6, 2.8 * nrow + 0.8)
        axes = fig.subplots(nrow, ncol, squeeze=False)
        for k, (label, idx) in enumerate(shown):
            ax = axes[k // ncol][k % ncol]
            sparse = label == "sparse points"
            t0 = float(np.floor(t[idx][0] - 0.5) + 0.5) if not sparse else float(np.floor(t[idx][0]))
            scale = 1.0 if sparse else HOURS_PER_DAY
            ax.errorbar((t[idx] - t0) * scale, y[idx], yerr=err[idx], fmt=".", ms=3, lw=0.5,
                        color="#2b6cb0", ecolor="#90cdf4")
            if model is not None:
                if sparse:
                    o = np.argsort(t[idx])
                    ax.plot((t[idx][o] - t0) * scale, model.model_mag(t)[idx][o], ".", ms=2, color="#c53030")
                elif idx.size > 1:
                    g, m = _dense_model(model, t, idx)
                    ax.plot((g - t0) * scale, m, color="#c53030", lw=1.2)
            ax.invert_yaxis()
            ax.set_title(f"{label} ({idx.size} points)", fontsize=10)
            ax.set_xlabel(f"time - JD {t0:.1f} TDB ({'d' if sparse else 'h'})")
            ax.set_ylabel(mag_label)
        for k in range(len(shown), nrow * ncol):
            axes[k // ncol][k % ncol].set_axis_off()
        more = f"; first {len(shown)} of {len(groups)} sessions" if len(groups) > len(shown) else ""
        what = "data (blue) and model (red)" if model is not None else "data"
        fig.suptitle(f"{lc.object_id}: light curve per session, {what}{more}")
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


def plot_residuals(lc, model: LightCurveModel, *, path=None):
    """Data minus model against time (colour by session) and their histogram in units of the errors."""
    t = np.asarray(lc.t, float)
    err = np.asarray(lc.err, float)
    r = model.y_mag - model.model_mag(t)
    t0 = float(np.floor(t[0]))
    with _rc():
        fig = _figure(10.0, 4.2)
        ax, axh = fig.subplots(1, 2, gridspec_kw={"width_ratios": [3, 1]})
        s = np.asarray(lc.session, int)
        ax.scatter(t - t0, r, c=np.where(s >= 0, s, -1), s=6, cmap="tab20")
        ax.axhline(0.0, color="#2d3748", lw=0.8)
        ax.set_xlabel(f"time - JD {t0:.1f} TDB (d)")
        ax.set_ylabel("residual, data - model (mag)")
        ax.set_title(f"residuals (rms {np.sqrt(np.mean(r**2)):.3g} mag; colour = session)", fontsize=11)
        z = r / err
        axh.hist(z[np.isfinite(z)], bins=30, color="#4a5568")
        axh.set_xlabel("residual / quoted error (dimensionless)")
        axh.set_ylabel("number of points (count)")
        fig.suptitle(f"{lc.object_id}: residuals of the {model.kind} Fourier model")
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# posterior
# ---------------------------------------------------------------------------
def plot_posterior_pairs(samples, names, units=None, *, object_id: str = "", params=None, max_params: int = 5,
                         max_points: int = 2000, path=None):
    """Pair plot (our own): histograms on the diagonal, samples below it.

    Parameters
    ----------
    samples : array_like, shape (n_samples, n_params)
    names, units : sequence of str
        Parameter names and units, one per column.
    params : sequence of str, optional
        Columns to show (default: those of :data:`MAIN_PARAMETERS` present, else the first
        ``max_params``).
    """
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
    k = len(cols)
    if x.shape[0] > max_points:
        x = x[np.linspace(0, x.shape[0] - 1, max_points).astype(int)]
    labels = [f"{names[c]} ({units[c]})" if units[c] else f"{names[c]} (dimensionless)" for c in cols]
    size = max(2.2 * k, 4.5)
    with _rc():
        fig = _figure(size + 0.5, size + 0.5)
        axes = fig.subplots(k, k, squeeze=False)
        for i in range(k):
            for j in range(k):
                ax = axes[i][j]
                if j > i:
                    ax.set_axis_off()
                    continue
                if i == j:
                    ax.hist(x[:, cols[i]], bins=30, color="#4a5568", histtype="stepfilled")
                    ax.set_ylabel("samples (count)" if i == 0 else "")
                else:
                    ax.plot(x[:, cols[j]], x[:, cols[i]], ".", ms=1.5, color="#2b6cb0", alpha=0.5)
                    if j == 0:
                        ax.set_ylabel(labels[i], fontsize=9)
                if i == k - 1:
                    ax.set_xlabel(labels[j], fontsize=9)
                ax.tick_params(labelsize=8)
        fig.suptitle(f"{object_id}: posterior of the main parameters ({x.shape[0]} samples shown)")
    return _finish(fig, path)


# ---------------------------------------------------------------------------
# samples
# ---------------------------------------------------------------------------
def sample_period_h(row) -> float:
    """The period plotted for a verdict: PA ``period_h``; NPA ``p_psi_h``, else ``p1_h``; else ``p1_h``."""
    rotation = str(row.get("rotation", ""))
    for name in (("period_h", "p1_h") if rotation == "PA" else
                 ("p_psi_h", "p1_h") if rotation == "NPA" else ("p1_h", "period_h")):
        v = _num(row.get(name))
        if np.isfinite(v) and v > 0:
            return v
    return math.nan


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
            ax.annotate(f"{tau:g} Gyr", xy=(dd[-1], line[-1]), xytext=(-4, 3), textcoords="offset points",
                        ha="right", fontsize=8, color="#4a5568")
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
        ax.set_xlabel("diameter (km)")
        ax.set_ylabel("period (h): PA rotation, NPA P_psi (else P1)")
        ax.legend(loc="lower right")
        ax.set_title(f"{title}: period-diameter diagram ({int(ok.sum())} of {len(rows)} objects plotted)")
    return _finish(fig, path)


def plot_completeness(table, path):
    """The survey completeness map (detection probability of NPA per period and amplitude bin).

    It lives with the injection machinery in :mod:`tumble.completeness`; re-exported here so that
    every figure of the package can be found in one module.
    """
    from tumble.completeness import plot_completeness as _plot

    return _plot(table, path)
