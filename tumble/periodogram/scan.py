"""1-D multi-harmonic period scan with per-session zero-points: ``fourier_scan``.

At every trial frequency f the model is an m-th order Fourier series plus the
nuisance terms of :mod:`tumble.periodogram._design` (one zero-point per session,
one per band for sparse points, optional linear phase-angle terms),

    y(t) = Z beta + sum_{h=1..m} [ a_h cos(2 pi h f t) + b_h sin(2 pi h f t) ],

fitted by weighted least squares (e.g. Harris et al. 1989, Icarus 77, 171, for
the Fourier-series light-curve fit with per-night zero-points). The statistic is
the chi-square of that fit; the kernels are in :mod:`tumble.periodogram._kernels`
and the definitions of the grid, the uncertainty, the aliases and the false-alarm
probability in ``docs/methods-period-search.md``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from tumble.periodogram import _kernels as K
from tumble.periodogram._design import PeriodSearchError, ScanData, prepare

__all__ = [
    "Peak",
    "ScanResult",
    "FourierFit",
    "fourier_scan",
    "fourier_fit",
    "fourier_chi2",
    "fourier_chi2_reference",
    "frequency_grid",
    "default_period_range_h",
    "alias_label",
    "false_alarm_probability",
    "SIDEREAL_DAY_PER_D",
    "FAP_THRESHOLD",
    "OVERSAMPLE",
]

HOURS_PER_DAY = 24.0
#: Frequency of the sidereal day in cycles per solar (mean) day: 86400 s / 86164.0905 s (from memory).
SIDEREAL_DAY_PER_D = 86400.0 / 86164.0905
#: Default oversampling factor of the automatic grid (grid step = 1 / (OVERSAMPLE * order * span)).
OVERSAMPLE = 5.0
#: A peak is called confident when its false-alarm probability is below this.
FAP_THRESHOLD = 0.01
#: Significance level of the Wald tests that decide between a period and its multiples.
WALD_ALPHA = 1e-3
#: Frequencies per chunk of the fast scan (memory ~ 0.5 kB per frequency at order 4).
CHUNK = 1 << 17
#: Largest automatic grid accepted.
MAX_GRID = 20_000_000
#: A frequency is recomputed exactly (QR) when
#: EXACT_COND_FACTOR * (chi2_0 / n) * (chi2_0 / chi2(f)) / pivot > 1: the error of the
#: normal-equation chi-square measured against the lstsq reference is ~4e-13 times that
#: product (signal-to-noise squared over the inverse condition), so this keeps it near 1e-9.
EXACT_COND_FACTOR = 3e-4


# ---------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class Peak:
    """One distinct chi-square minimum of a scan.

    Attributes
    ----------
    frequency_per_d : float
        Refined frequency of the minimum, cycles/day.
    period_h : float
        Its period, hours.
    period_h_err : float
        1-sigma uncertainty of ``period_h`` (Delta chi2 = 1 after rescaling by the
        reduced chi-square), hours.
    chi2 : float
        Chi-square at the minimum.
    delta_chi2 : float
        ``chi2 - chi2`` of the global minimum (>= 0), unscaled.
    delta_chi2_scaled : float
        ``delta_chi2`` divided by the reduced chi-square of the global minimum.
    alias : str
        Relation to the dominant light-curve frequency: ``best``, ``half``
        (P/2), ``double`` (2P), ``third``, ``triple``, ``+1/day``, ``-1/day``,
        ``+2/day``, ``-2/day``, ``+1/sidereal day``, ``-1/sidereal day``, or
        ``independent``.
    false_alarm_probability : float
        Probability that noise alone gives a peak this deep anywhere in the
        searched band (see :func:`false_alarm_probability`).
    """

    frequency_per_d: float
    period_h: float
    period_h_err: float
    chi2: float
    delta_chi2: float
    delta_chi2_scaled: float
    alias: str
    false_alarm_probability: float

    def to_dict(self) -> dict:
        return {
            "period_h": self.period_h,
            "period_h_err": self.period_h_err,
            "frequency_per_d": self.frequency_per_d,
            "chi2": self.chi2,
            "delta_chi2": self.delta_chi2,
            "delta_chi2_scaled": self.delta_chi2_scaled,
            "alias": self.alias,
            "false_alarm_probability": self.false_alarm_probability,
        }


@dataclass(frozen=True)
class FourierFit:
    """Exact weighted least-squares fit of the Fourier series (plus nuisance) at one frequency.

    Attributes
    ----------
    frequency_per_d : float
        Fundamental frequency, cycles/day.
    order : int
        Number of harmonics m.
    coefficients_mag : numpy.ndarray, shape (m, 2)
        ``(a_h, b_h)``: cosine and sine amplitudes of harmonic h, mag, for
        phases measured from ``epoch_jd``.
    coefficients_mag_err : numpy.ndarray, shape (m, 2)
        Their 1-sigma errors (covariance rescaled by the reduced chi-square), mag.
    covariance : numpy.ndarray, shape (2m, 2m)
        Rescaled covariance of ``coefficients_mag.ravel()``, mag^2.
    nuisance : dict
        Nuisance parameter name -> value (zero-points in mag, phase slopes in mag/deg).
    chi2 : float
        Chi-square of the fit.
    dof : int
        Degrees of freedom, n - (nuisance + 2m).
    epoch_jd : float
        Reference epoch (TDB JD) of the phases.
    amplitude_mag : float
        Peak-to-peak amplitude of the fitted series, mag.
    """

    frequency_per_d: float
    order: int
    coefficients_mag: np.ndarray
    coefficients_mag_err: np.ndarray
    covariance: np.ndarray
    nuisance: dict
    chi2: float
    dof: int
    epoch_jd: float
    amplitude_mag: float

    @property
    def harmonic_amplitudes_mag(self) -> np.ndarray:
        """Semi-amplitude sqrt(a_h^2 + b_h^2) of each harmonic, mag, shape (m,)."""
        return np.hypot(self.coefficients_mag[:, 0], self.coefficients_mag[:, 1])

    def series_mag(self, t_jd) -> np.ndarray:
        """The fitted Fourier series (no zero-points) at TDB JD times ``t_jd``, mag."""
        t = np.asarray(t_jd, dtype=float) - self.epoch_jd
        h = np.arange(1, self.order + 1)
        ph = 2.0 * np.pi * np.mod(np.outer(t, h) * self.frequency_per_d, 1.0)
        return np.cos(ph) @ self.coefficients_mag[:, 0] + np.sin(ph) @ self.coefficients_mag[:, 1]

    def wald_p_value(self, harmonics) -> float:
        """p-value of the Wald test that the given harmonics are all zero (chi-square law)."""
        h = np.asarray(list(harmonics), dtype=int)
        if h.size == 0:
            return 1.0
        sel = np.concatenate([[2 * (k - 1), 2 * (k - 1) + 1] for k in h])
        c = self.coefficients_mag.ravel()[sel]
        cov = self.covariance[np.ix_(sel, sel)]
        try:
            stat = float(c @ np.linalg.solve(cov, c))
        except np.linalg.LinAlgError:
            return float("nan")
        return float(stats.chi2.sf(stat, sel.size))


@dataclass(frozen=True)
class ScanResult:
    """Result of :func:`fourier_scan`.

    Attributes
    ----------
    object_id : str
        Object designation.
    frequency_per_d : numpy.ndarray, shape (F,)
        Trial frequencies, cycles/day.
    chi2 : numpy.ndarray, shape (F,)
        Chi-square of the best order-m series plus nuisance terms at each frequency.
    order : int
        Fourier order m.
    sessions : bool
        One zero-point per session (True) or per band (False).
    n_points : int
        Number of points.
    nuisance_names : tuple of str
        Nuisance parameters profiled out (zero-points, phase-angle slopes).
    phase_terms : tuple of str
        Groups that got a linear phase-angle term.
    chi2_constant : float
        Chi-square of the nuisance-only (no light-curve variation) model.
    chi2_slow_trend : float
        Chi-square of the best order-m series with a period longer than the
        searched range (between ``max_period_h`` and twice the span): the
        "slow trend" null model of the false-alarm probability (inf when that
        range is empty).
    slow_trend_period_h : float
        Period of that best slow fit, hours (nan when none).
    epoch_jd : float
        Reference epoch (TDB JD) of the coefficients.
    span_d : float
        Time span, days.
    min_period_h, max_period_h : float
        Searched period range, hours.
    oversample : float
        Oversampling factor of the automatic grid (nan for a user grid).
    best_period_h : float
        Dominant light-curve period (the period of the strongest harmonic of the
        best fit), hours.
    best_period_h_err : float
        Its 1-sigma uncertainty, hours.
    best_frequency_per_d : float
        ``24 / best_period_h``, cycles/day.
    dominant_harmonic : int
        The harmonic h* of the best-fitting period that dominates
        (``fit.frequency_per_d * h* = best_frequency_per_d``).
    fit : FourierFit
        Exact fit at the global chi-square minimum (coefficients, errors, zero-points).
    fit_period_h, fit_period_h_err : float
        Period of the global chi-square minimum and its error, hours.
    amplitude_mag : float
        Peak-to-peak amplitude of the best fit, mag.
    reduced_chi2 : float
        ``fit.chi2 / fit.dof``.
    rotation_period_h, rotation_period_h_err : float
        Adopted principal-axis rotation period and error, hours.
    rotation_rule : str
        Which rule chose ``rotation_period_h`` (see ``docs/methods-period-search.md``).
    rotation_candidates_h : tuple of float
        The single- and double-peaked candidates (and a multiple when the data chose one), hours.
    peaks : tuple of Peak
        Distinct minima ranked by chi-square, the global one first.
    false_alarm_probability : float
        False-alarm probability of the global minimum.
    fap_threshold : float
        Threshold below which a period is called confident.
    confident : bool
        ``false_alarm_probability < fap_threshold``.
    n_exact : int
        Grid frequencies recomputed by the exact QR solve because the fast
        normal equations were ill-conditioned there.
    method : str
        Sum engine used ('nufft', 'direct' or 'reference').
    """

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.scan_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.scan_html(self)

    object_id: str
    frequency_per_d: np.ndarray
    chi2: np.ndarray
    order: int
    sessions: bool
    n_points: int
    nuisance_names: tuple
    phase_terms: tuple
    chi2_constant: float
    chi2_slow_trend: float
    slow_trend_period_h: float
    epoch_jd: float
    span_d: float
    min_period_h: float
    max_period_h: float
    oversample: float
    best_period_h: float
    best_period_h_err: float
    best_frequency_per_d: float
    dominant_harmonic: int
    fit: FourierFit
    fit_period_h: float
    fit_period_h_err: float
    amplitude_mag: float
    reduced_chi2: float
    rotation_period_h: float
    rotation_period_h_err: float
    rotation_rule: str
    rotation_candidates_h: tuple
    peaks: tuple
    false_alarm_probability: float
    fap_threshold: float
    confident: bool
    n_exact: int
    method: str

    @property
    def period_h(self) -> np.ndarray:
        """Trial periods, hours, shape (F,)."""
        return HOURS_PER_DAY / self.frequency_per_d

    @property
    def coefficients_mag(self) -> np.ndarray:
        """Fourier coefficients of the best fit, shape (order, 2), mag."""
        return self.fit.coefficients_mag

    def to_dict(self) -> dict:
        """JSON-ready summary (no grid arrays)."""
        return {
            "object": self.object_id,
            "order": self.order,
            "sessions": self.sessions,
            "n_points": self.n_points,
            "n_nuisance": len(self.nuisance_names),
            "phase_terms": list(self.phase_terms),
            "span_d": self.span_d,
            "min_period_h": self.min_period_h,
            "max_period_h": self.max_period_h,
            "n_frequencies": int(self.frequency_per_d.size),
            "n_exact": self.n_exact,
            "best_period_h": self.best_period_h,
            "best_period_h_err": self.best_period_h_err,
            "best_frequency_per_d": self.best_frequency_per_d,
            "dominant_harmonic": self.dominant_harmonic,
            "fit_period_h": self.fit_period_h,
            "fit_period_h_err": self.fit_period_h_err,
            "rotation_period_h": self.rotation_period_h,
            "rotation_period_h_err": self.rotation_period_h_err,
            "rotation_rule": self.rotation_rule,
            "rotation_candidates_h": list(self.rotation_candidates_h),
            "amplitude_mag": self.amplitude_mag,
            "chi2_min": self.fit.chi2,
            "chi2_constant": self.chi2_constant,
            "chi2_slow_trend": self.chi2_slow_trend,
            "slow_trend_period_h": self.slow_trend_period_h,
            "reduced_chi2": self.reduced_chi2,
            "false_alarm_probability": self.false_alarm_probability,
            "fap_threshold": self.fap_threshold,
            "confident": self.confident,
            "epoch_jd_tdb": self.epoch_jd,
            "coefficients_mag": self.fit.coefficients_mag.tolist(),
            "coefficients_mag_err": self.fit.coefficients_mag_err.tolist(),
            "nuisance": dict(self.fit.nuisance),
            "peaks": [p.to_dict() for p in self.peaks],
        }

    def to_table(self):
        """The scan as an astropy Table (period_h, frequency_per_d, chi2) with the summary in ``meta``."""
        from astropy.table import Table

        tab = Table()
        tab["frequency_per_d"] = self.frequency_per_d
        tab["frequency_per_d"].unit = "1 / d"
        tab["period_h"] = self.period_h
        tab["period_h"].unit = "h"
        tab["chi2"] = self.chi2
        meta = self.to_dict()
        tab.meta.update(meta)
        return tab


# ---------------------------------------------------------------------------
# Grid


def default_period_range_h(data: ScanData, sessions: bool = True) -> tuple[float, float]:
    """Default searched period range (hours), documented in docs/methods-period-search.md.

    - Dense data (most points in sessions): shortest period
      ``max(0.05 h, 2 x median spacing of consecutive points within a session)``
      (twice the typical sampling interval); longest period: the whole span, but
      with free session zero-points at most ``max(48 h, 4 x the longest session)``.
    - Sparse data (most points session -1): 1 h to ``min(1000 h, span / 2)``.
    """
    span_h = data.span_d * HOURS_PER_DAY
    if data.sparse:
        lo = 1.0
        hi = min(1000.0, 0.5 * span_h)
    else:
        lengths, steps = [], []
        for g in data.groups:
            tg = np.sort(data.t[g.index])
            if tg.size >= 2:
                lengths.append(tg[-1] - tg[0])
                steps.append(np.diff(tg))
        step = float(np.median(np.concatenate(steps))) * HOURS_PER_DAY if steps else 0.0
        lo = max(0.05, 2.0 * step)
        longest = max(lengths) * HOURS_PER_DAY if lengths else span_h
        hi = span_h if not sessions else min(span_h, max(48.0, 4.0 * longest))
    if not hi > lo:
        raise PeriodSearchError(
            f"default period range is empty ({lo:.4g} h to {hi:.4g} h); give min/max periods explicitly")
    return float(lo), float(hi)


def frequency_grid(span_d: float, order: int, min_period_h: float, max_period_h: float,
                   oversample: float = OVERSAMPLE) -> np.ndarray:
    """Uniform frequency grid (cycles/day) for a scan.

    The step is ``1 / (oversample * order * span)``: between neighbouring trial
    frequencies the phase of the highest harmonic drifts by ``1/oversample`` of
    a cycle over the whole span (common practice; cf. VanderPlas 2018, ApJS 236,
    16, sec. 7.1, for the single-harmonic case).
    """
    if not (min_period_h > 0 and max_period_h > min_period_h):
        raise PeriodSearchError(f"bad period range {min_period_h} h to {max_period_h} h")
    if not span_d > 0:
        raise PeriodSearchError("the data span no time; cannot search for periods")
    f_lo = HOURS_PER_DAY / max_period_h
    f_hi = HOURS_PER_DAY / min_period_h
    df = 1.0 / (oversample * order * span_d)
    n = int(np.ceil((f_hi - f_lo) / df)) + 1
    if n > MAX_GRID:
        raise PeriodSearchError(
            f"the grid would hold {n} frequencies (span {span_d:.1f} d, periods {min_period_h:.3g}-"
            f"{max_period_h:.3g} h); narrow the period range")
    return f_lo + df * np.arange(max(n, 2))


# ---------------------------------------------------------------------------
# Chi-square at given frequencies


def _basis(order):
    return np.zeros(order, dtype=int), np.arange(1, order + 1)


def _exact_chi2(data: ScanData, order: int, freqs) -> np.ndarray:
    jm, km = _basis(order)
    return K.exact_evaluator(data, jm, km)(np.atleast_1d(freqs))


def _exact_chi2_at(data: ScanData, order: int, freq: float) -> float:
    """Exact chi-square at one frequency (the lean one-frequency QR path)."""
    jm, km = _basis(order)
    return K.exact_evaluator(data, jm, km).scalar(freq)


def _scan_chi2(data: ScanData, order: int, freqs: np.ndarray, *, method: str = "auto", progress=None):
    """Chi-square on a grid: fast kernel per chunk, exact QR where it is ill-conditioned."""
    freqs = np.asarray(freqs, dtype=float)
    jm, km = _basis(order)
    if method == "reference":
        chi2 = K.reference_basis_chi2(data.t, data.y, data.w, data.z, jm, km, freqs)
        return chi2, 0, "reference"
    uniform = K.is_uniform(freqs)
    chunk = CHUNK if uniform else CHUNK // 2
    if progress is not None:
        chunk = min(chunk, 1 << 15)  # smaller chunks so that a progress bar moves
    chi2 = np.empty(freqs.size)
    n_exact = 0
    chi2_0 = data.chi2_nuisance
    starts = list(range(0, freqs.size, chunk))
    used = "direct" if method == "direct" else "nufft"
    for lo in starts:
        f = freqs[lo:lo + chunk]
        engine = K.make_engine(f, "direct" if method == "direct" else "nufft")
        c, piv = K.scan_basis_chi2(data.t, data.w, data.y_res, data.groups, jm, km, engine)
        c, piv = c[0], piv[0]
        with np.errstate(divide="ignore", invalid="ignore"):
            risk = EXACT_COND_FACTOR * engine.risk_scale * (chi2_0 / data.n_points) * (chi2_0 / c) / piv
        flag = ~np.isfinite(c) | (c <= 0) | ~(risk <= 1.0)
        if np.any(flag):
            idx = np.flatnonzero(flag)
            c[idx] = _exact_chi2(data, order, f[idx])
            n_exact += idx.size
        chi2[lo:lo + chunk] = c
        if progress is not None:
            progress(f.size)
    return chi2, n_exact, used


def fourier_chi2(lc, frequencies_per_d, *, order: int = 4, sessions: bool = True,
                 phase_term: bool | None = None, method: str = "auto") -> np.ndarray:
    """Chi-square of the order-m Fourier series plus nuisance terms at the given frequencies.

    The fast path (:func:`fourier_scan`'s kernel) without peak finding.

    Parameters
    ----------
    lc : LightCurve
        The light curve.
    frequencies_per_d : array_like
        Trial frequencies, cycles/day.
    order : int
        Number of harmonics.
    sessions, phase_term : see :func:`fourier_scan`.
    method : {'auto', 'nufft', 'direct', 'reference'}
        Sum engine; 'reference' is one least-squares solve per frequency.
    """
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    _check_order(order, data)
    with K.single_thread_blas():
        chi2, _, _ = _scan_chi2(data, order, np.atleast_1d(np.asarray(frequencies_per_d, float)), method=method)
    return chi2


def fourier_chi2_reference(lc, frequencies_per_d, *, order: int = 4, sessions: bool = True,
                           phase_term: bool | None = None) -> np.ndarray:
    """Slow reference: one ``numpy.linalg.lstsq`` of the full design per frequency."""
    return fourier_chi2(lc, frequencies_per_d, order=order, sessions=sessions, phase_term=phase_term,
                        method="reference")


#: Highest Fourier order accepted (light-curve fits rarely need more than 6-8 harmonics).
MAX_ORDER = 12


def _check_order(order, data):
    if int(order) != order or order < 1 or order > MAX_ORDER:
        raise PeriodSearchError(f"Fourier order must be an integer from 1 to {MAX_ORDER}, got {order}")
    if data.n_points <= data.n_nuisance + 2 * order:
        raise PeriodSearchError(
            f"{data.n_points} points cannot constrain an order-{order} series with "
            f"{data.n_nuisance} zero-points/phase terms; lower the order or add data")


# ---------------------------------------------------------------------------
# Exact fit, refinement and uncertainty


def _fit(data: ScanData, order: int, freq: float) -> FourierFit:
    jm, km = _basis(order)
    sw = np.sqrt(data.w)
    x = np.hstack([data.z, K.design_matrix(data.t, freq, jm, km)])
    xw = x * sw[:, None]
    yw = sw * data.y
    coef, *_ = np.linalg.lstsq(xw, yw, rcond=None)
    r = yw - xw @ coef
    chi2 = float(r @ r)
    q = data.n_nuisance
    dof = data.n_points - q - 2 * order
    s2 = chi2 / dof if dof > 0 else float("nan")
    cov = np.linalg.pinv(xw.T @ xw) * (s2 if np.isfinite(s2) else 1.0)
    c = coef[q:].reshape(order, 2)
    cerr = np.sqrt(np.clip(np.diag(cov)[q:], 0, None)).reshape(order, 2)
    phase = np.linspace(0.0, 1.0, 2048, endpoint=False)
    h = np.arange(1, order + 1)
    ang = 2.0 * np.pi * np.outer(phase, h)
    series = np.cos(ang) @ c[:, 0] + np.sin(ang) @ c[:, 1]
    return FourierFit(
        frequency_per_d=float(freq), order=int(order), coefficients_mag=c, coefficients_mag_err=cerr,
        covariance=cov[q:, q:], nuisance=dict(zip(data.nuisance_names, map(float, coef[:q]))),
        chi2=chi2, dof=int(dof), epoch_jd=data.epoch_jd, amplitude_mag=float(np.ptp(series)),
    )


def _refine(data, order, f_lo, f_hi, f0):
    """Exact chi-square minimum in [f_lo, f_hi] (bounded Brent search)."""
    fun = lambda f: _exact_chi2_at(data, order, f)  # noqa: E731
    tol = max(1e-14 * abs(f0), 1e-6 * (f_hi - f_lo))
    res = optimize.minimize_scalar(fun, bounds=(f_lo, f_hi), method="bounded",
                                   options={"xatol": tol, "maxiter": 200})
    f_best, c_best = float(res.x), float(res.fun)
    c0 = fun(f0)
    if c0 < c_best:
        f_best, c_best = f0, c0
    return f_best, c_best


def _delta_chi2_halfwidth(data, order, f_hat, chi2_hat, s2, step0, f_limit_lo, f_limit_hi):
    """Half-width of {f : (chi2(f) - chi2_hat)/s2 <= 1} around the minimum, cycles/day.

    Each side: expand a bracket from ``step0`` until the rescaled Delta chi2
    exceeds 1 (or the limit is reached), then find the crossing by Brent's method.
    """
    g = lambda f: (_exact_chi2_at(data, order, f) - chi2_hat) / s2 - 1.0  # noqa: E731
    out = []
    for direction, limit in ((+1, f_limit_hi), (-1, f_limit_lo)):
        step = step0
        inner = f_hat
        found = None
        for _ in range(60):
            f = f_hat + direction * step
            if direction * (f - limit) >= 0:
                f = limit
            val = g(f)
            if val > 0:
                a, b = sorted((inner, f))
                try:
                    found = abs(optimize.brentq(g, a, b, xtol=1e-12 * max(1.0, abs(f_hat)) + 1e-3 * step,
                                                rtol=1e-12) - f_hat)
                except ValueError:
                    found = abs(f - f_hat)
                break
            if f == limit:
                found = abs(limit - f_hat)
                break
            inner = f
            step *= 2.0
        out.append(found if found is not None else abs(step))
    return 0.5 * (out[0] + out[1])


# ---------------------------------------------------------------------------
# Peaks, aliases, significance


_MULTIPLES = (("", 1.0), ("half", 2.0), ("double", 0.5), ("third", 3.0), ("triple", 1.0 / 3.0),
              ("quarter", 4.0), ("quadruple", 0.25))
_OFFSETS = (("", 0.0), ("+1/day", 1.0), ("-1/day", -1.0), ("+2/day", 2.0), ("-2/day", -2.0),
            ("+1/sidereal day", SIDEREAL_DAY_PER_D), ("-1/sidereal day", -SIDEREAL_DAY_PER_D))


def alias_label(freq: float, best: float, tol: float) -> str:
    """Name the relation of ``freq`` to the dominant frequency ``best`` (cycles/day).

    Candidates are ``r * best + d`` with the period ratios r named ``half``
    (P/2), ``double`` (2P), ``third``, ``triple``, ``quarter``, ``quadruple`` and
    the offsets d of +-1 and +-2 cycles per solar day and +-1 per sidereal day
    (window aliases of nightly sampling, e.g. Lafler & Kinman 1965; common
    practice). The simplest match within ``tol`` (cycles/day) wins:
    ``best``, then pure ratios, then pure day aliases, then combinations such
    as ``double -1/day``; ``independent`` when nothing matches. A negative
    frequency aliases to its absolute value.
    """
    order = []
    for oname, d in _OFFSETS:
        for mname, r in _MULTIPLES:
            order.append((0 if not oname else (1 if not mname else 2), mname, oname, r, d))
    order.sort(key=lambda x: x[0])
    for _, mname, oname, r, d in order:
        f = r * best + d
        if f != 0 and abs(freq - abs(f)) <= tol:
            name = " ".join(x for x in (mname, oname) if x)
            return name or "best"
    return "independent"


def false_alarm_probability(chi2_constant, chi2, n_points, n_nuisance, order, n_independent) -> float:
    """False-alarm probability of a chi-square minimum over a searched band.

    Single-frequency significance from the F-test of the order-m series
    against the nuisance-only model (Schwarzenberg-Czerny 1996, ApJ 460, L107:
    the multiharmonic periodogram follows Fisher's F(2m, n - q - 2m) law for
    white Gaussian noise), then corrected for the number of independent
    frequencies searched, ``1 - (1 - p)^M`` (Horne & Baliunas 1986, ApJ 302, 757).

    Parameters
    ----------
    chi2_constant, chi2 : float
        Chi-square of the null model and of the peak. :func:`fourier_scan`
        uses as null the better of the nuisance-only model and the best slow
        trend (a series with a period longer than the searched range).
    n_points, n_nuisance, order : int
        Data count, nuisance parameters and Fourier order.
    n_independent : float
        Effective number of independent frequencies, ``order * (f_max - f_min) * span``.
    """
    dof = n_points - n_nuisance - 2 * order
    if dof <= 0 or not (chi2 > 0) or not np.isfinite(chi2_constant):
        return 1.0
    fstat = ((chi2_constant - chi2) / (2 * order)) / (chi2 / dof)
    if fstat <= 0:
        return 1.0
    p = float(stats.f.sf(fstat, 2 * order, dof))
    m = max(1.0, float(n_independent))
    return float(-np.expm1(m * np.log1p(-min(p, 1.0 - 1e-16)))) if p > 0 else 0.0


def _slow_trend_chi2(data: ScanData, order: int, f_lo: float) -> tuple[float, float]:
    """Best chi-square of the order-m series at frequencies in [1/(2 span), f_lo).

    The null model of the false-alarm probability is the better of the
    constant light curve and this slow trend: a periodicity is significant only
    if it beats both. With nightly (or survey) sampling a slow trend has
    window aliases near 1 and 2 cycles/day that would otherwise pass for
    short periods (e.g. activity or phase-curve residuals in sparse data).
    """
    f_min = 0.5 / data.span_d
    if not f_lo > f_min:
        return float("inf"), float("nan")
    df = 1.0 / (OVERSAMPLE * order * data.span_d)
    freqs = np.arange(f_min, f_lo, df)
    if freqs.size < 2:
        freqs = np.array([f_min, 0.5 * (f_min + f_lo)])
    if freqs.size <= 256:
        chi2 = _exact_chi2(data, order, freqs)
    else:
        chi2, _, _ = _scan_chi2(data, order, freqs)
    i = int(np.nanargmin(chi2))
    return float(chi2[i]), float(freqs[i])


def _local_minima(chi2: np.ndarray) -> np.ndarray:
    c = np.where(np.isfinite(chi2), chi2, np.inf)
    n = c.size
    if n == 1:
        return np.array([0])
    left = np.concatenate([[np.inf], c[:-1]])
    right = np.concatenate([c[1:], [np.inf]])
    return np.flatnonzero((c < left) & (c <= right))


# ---------------------------------------------------------------------------
# The public scan


def fourier_scan(lc, order: int | None = None, periods=None, *, min_period_h: float | None = None,
                 max_period_h: float | None = None, sessions: bool = True, phase_term: bool | None = None,
                 oversample: float = OVERSAMPLE, max_peaks: int = 10, fap_threshold: float = FAP_THRESHOLD,
                 method: str = "auto", progress=False) -> ScanResult:
    """Multi-harmonic period scan with per-session zero-points.

    Parameters
    ----------
    lc : tumble.photometry.LightCurve
        The light curve (``lc.t``, reduced magnitudes, errors, sessions, bands).
    order : int or None
        Number of Fourier harmonics m (None: 4 for dense data, 2 for sparse data).
    periods : array_like or None
        Trial periods in hours (any spacing); None for the automatic grid.
    min_period_h, max_period_h : float or None
        Period range of the automatic grid, hours (defaults:
        :func:`default_period_range_h`).
    sessions : bool
        One free zero-point per session (sparse points: one per band) when
        True; one per band when False.
    phase_term : bool or None
        Linear phase-angle term per zero-point group (None: automatic for
        groups spanning >= 2 deg of phase angle; needs ``lc.phase_deg``).
    oversample : float
        Oversampling factor of the automatic grid.
    max_peaks : int
        Number of distinct minima to report.
    fap_threshold : float
        False-alarm probability below which the best period is called confident.
    method : {'auto', 'nufft', 'direct', 'reference'}
        Trigonometric-sum engine ('reference' = one lstsq per frequency, slow).
    progress : bool or callable
        True for a tqdm bar on stderr (shown after one second); or a callable
        receiving the number of frequencies done in each chunk.

    Returns
    -------
    ScanResult

    Raises
    ------
    PeriodSearchError
        Too few points for the order, or an empty or too large grid.
    """
    with K.single_thread_blas():
        return _fourier_scan(lc, order, periods, min_period_h, max_period_h, sessions, phase_term, oversample,
                             max_peaks, fap_threshold, method, progress)


def _fourier_scan(lc, order, periods, min_period_h, max_period_h, sessions, phase_term, oversample, max_peaks,
                  fap_threshold, method, progress):
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    if order is None:
        order = 2 if data.sparse else 4
    _check_order(order, data)
    if periods is not None:
        p = np.atleast_1d(np.asarray(periods, dtype=float))
        if p.size < 3 or not np.all(np.isfinite(p)) or np.any(p <= 0):
            raise PeriodSearchError("periods must hold at least 3 positive finite values (hours)")
        freqs = np.sort(HOURS_PER_DAY / p)
        lo_h, hi_h = float(p.min()), float(p.max())
        over = float("nan")
    else:
        d_lo, d_hi = default_period_range_h(data, sessions) if (min_period_h is None or max_period_h is None) \
            else (min_period_h, max_period_h)
        lo_h = float(min_period_h if min_period_h is not None else d_lo)
        hi_h = float(max_period_h if max_period_h is not None else max(d_hi, 2 * lo_h))
        freqs = frequency_grid(data.span_d, order, lo_h, hi_h, oversample)
        over = float(oversample)

    bar = None
    cb = progress if callable(progress) else None
    if progress is True:
        from tqdm.auto import tqdm

        bar = tqdm(total=freqs.size, unit="freq", delay=1.0, leave=False, desc=f"scan {lc.object_id}")
        cb = bar.update
    try:
        chi2, n_exact, used = _scan_chi2(data, order, freqs, method=method, progress=cb)
    finally:
        if bar is not None:
            bar.close()
    return _summarise(lc.object_id, data, order, freqs, chi2, n_exact, used, sessions, lo_h, hi_h, over,
                      max_peaks, fap_threshold)


def _summarise(object_id, data, order, freqs, chi2, n_exact, method, sessions, lo_h, hi_h, over,
               max_peaks, fap_threshold) -> ScanResult:
    span = data.span_d
    n_indep = order * (freqs[-1] - freqs[0]) * span if freqs.size > 1 else 1.0
    chi2_trend, f_trend = _slow_trend_chi2(data, order, float(freqs[0]))
    chi2_null = min(data.chi2_nuisance, chi2_trend)
    # distinct minima: discard those within 1/(2 span) of a deeper one
    mins = _local_minima(chi2)
    mins = mins[np.argsort(chi2[mins])]
    sep = 0.5 / span
    chosen: list[int] = []
    for i in mins:
        if all(abs(freqs[i] - freqs[j]) > sep for j in chosen):
            chosen.append(int(i))
        if len(chosen) >= max_peaks:
            break
    if not chosen:
        raise PeriodSearchError(f"{object_id}: the scan produced no finite chi-square")
    # refine each minimum exactly
    refined = []
    for i in chosen:
        lo = freqs[max(i - 1, 0)]
        hi = freqs[min(i + 1, freqs.size - 1)]
        if hi <= lo:
            refined.append((float(freqs[i]), float(chi2[i]), i))
            continue
        f_r, c_r = _refine(data, order, lo, hi, float(freqs[i]))
        refined.append((f_r, c_r, i))
    refined.sort(key=lambda r: r[1])
    f_fit, chi2_fit, i_fit = refined[0]
    fit = _fit(data, order, f_fit)
    s2 = fit.chi2 / fit.dof if fit.dof > 0 else 1.0
    s2 = s2 if s2 > 0 else 1.0
    step_grid = float(np.median(np.diff(freqs))) if freqs.size > 1 else 1e-3 / span

    def halfwidth(f_hat, c_hat, i):
        lim_lo = max(f_hat - 2.0 / span, 0.5 * f_hat)
        lim_hi = f_hat + 2.0 / span
        return _delta_chi2_halfwidth(data, order, f_hat, c_hat, s2, 0.02 * step_grid, lim_lo, lim_hi)

    sig_fit = halfwidth(f_fit, chi2_fit, i_fit)
    # dominant harmonic of the best fit
    amps = fit.harmonic_amplitudes_mag
    h_star = int(np.argmax(amps)) + 1
    f_dom = h_star * f_fit
    sig_dom = h_star * sig_fit
    p_dom = HOURS_PER_DAY / f_dom
    p_dom_err = HOURS_PER_DAY * sig_dom / f_dom**2
    p_fit = HOURS_PER_DAY / f_fit
    p_fit_err = HOURS_PER_DAY * sig_fit / f_fit**2

    # rotation period (principal-axis rule)
    rule, p_rot, p_rot_err, cands = _rotation_rule(data, order, fit, h_star, f_dom, p_dom, p_dom_err)

    tol = max(2.0 * step_grid, 0.25 / span)
    peaks = []
    for f_r, c_r, i in refined:
        sig = sig_fit if f_r == f_fit else halfwidth(f_r, c_r, i)
        peaks.append(Peak(
            frequency_per_d=f_r, period_h=HOURS_PER_DAY / f_r, period_h_err=HOURS_PER_DAY * sig / f_r**2,
            chi2=c_r, delta_chi2=max(0.0, c_r - chi2_fit), delta_chi2_scaled=max(0.0, c_r - chi2_fit) / s2,
            alias=alias_label(f_r, f_dom, tol),
            false_alarm_probability=false_alarm_probability(chi2_null, c_r, data.n_points,
                                                            data.n_nuisance, order, n_indep),
        ))
    fap = peaks[0].false_alarm_probability
    return ScanResult(
        object_id=object_id, frequency_per_d=freqs, chi2=chi2, order=int(order), sessions=bool(sessions),
        n_points=data.n_points, nuisance_names=data.nuisance_names, phase_terms=data.phase_terms,
        chi2_constant=data.chi2_nuisance, chi2_slow_trend=chi2_trend,
        slow_trend_period_h=(HOURS_PER_DAY / f_trend if f_trend > 0 else float("nan")), epoch_jd=data.epoch_jd, span_d=span, min_period_h=lo_h,
        max_period_h=hi_h, oversample=over, best_period_h=p_dom, best_period_h_err=p_dom_err,
        best_frequency_per_d=f_dom, dominant_harmonic=h_star, fit=fit, fit_period_h=p_fit,
        fit_period_h_err=p_fit_err, amplitude_mag=fit.amplitude_mag, reduced_chi2=float(s2),
        rotation_period_h=p_rot, rotation_period_h_err=p_rot_err, rotation_rule=rule,
        rotation_candidates_h=cands, peaks=tuple(peaks), false_alarm_probability=fap,
        fap_threshold=float(fap_threshold), confident=bool(fap < fap_threshold), n_exact=int(n_exact),
        method=method,
    )


RULE_DOUBLE_ASSUMED = ("double-peaked assumption (common practice): rotation = 2 x dominant period; "
                       "the data do not distinguish the two halves (Wald p={p:.3g})")
RULE_DOUBLE_DATA = ("double-peaked (data): the two halves of the rotation differ significantly "
                    "(Wald test of the odd harmonics at 2 x dominant period, p={p:.3g})")
RULE_MULTIPLE_DATA = ("{h}-fold (data): the light curve repeats only after {h} dominant cycles "
                      "(Wald test of the other harmonics, p={p:.3g})")


def _rotation_rule(data, order, fit, h_star, f_dom, p_dom, p_dom_err):
    """Choose the rotation period from the dominant light-curve period (see the methods doc)."""
    single, double = p_dom, 2.0 * p_dom
    if h_star >= 3:
        others = [h for h in range(1, order + 1) if h % h_star != 0]
        p = fit.wald_p_value(others)
        if p < WALD_ALPHA:
            return RULE_MULTIPLE_DATA.format(h=h_star, p=p), h_star * p_dom, h_star * p_dom_err, \
                (single, double, h_star * p_dom)
    if h_star == 2:
        fit2 = fit
    else:
        fit2 = _fit(data, order, 0.5 * f_dom)
    odd = [h for h in range(1, order + 1) if h % 2 == 1]
    # with order 1 the double-period model cannot hold the dominant frequency: no test
    p = fit2.wald_p_value(odd) if order >= 2 else float("nan")
    if p < WALD_ALPHA:
        return RULE_DOUBLE_DATA.format(p=p), double, 2.0 * p_dom_err, (single, double)
    return RULE_DOUBLE_ASSUMED.format(p=p), double, 2.0 * p_dom_err, (single, double)


def fourier_fit(lc, period_h: float, *, order: int = 4, sessions: bool = True,
                phase_term: bool | None = None) -> FourierFit:
    """Exact weighted least-squares fit of the order-m series (plus nuisance) at one period (hours)."""
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    _check_order(order, data)
    if not period_h > 0:
        raise PeriodSearchError(f"period must be positive, got {period_h} h")
    return _fit(data, order, HOURS_PER_DAY / float(period_h))
