"""Two-period Fourier series for tumbling (NPA) light curves: ``two_period_scan``.

The model (Pravec et al. 2005, Icarus 173, 108, eq. 1) of order m is

    F(t) = C0 + sum_{j=1..m} [C_j0 cos(2 pi j f1 t) + S_j0 sin(2 pi j f1 t)]
              + sum_{k=1..m} sum_{j=-m..m} [C_jk cos(2 pi (j f1 + k f2) t) + S_jk sin(...)]

with (2m+1)^2 coefficients (the constant is one of the zero-points here), plus
the nuisance terms of the 1-D scan (one zero-point per session, optional
phase-angle terms). Pravec et al. fit in flux; we fit magnitudes, which is
the same to first order for amplitudes of a few tenths of a magnitude.

Search (Pravec et al. 2005, sec. 3): P1 from the 1-D scan; a P2 scan with P1
held; joint least-squares refinement of both. A full (P1, P2) grid gives a
map. The evidence that the second period is needed is the F-test and the
Delta BIC between the best 1-D and 2-D fits (docs/methods-period-search.md).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from tumble.periodogram import _kernels as K
from tumble.periodogram._design import PeriodSearchError, ScanData, prepare
from tumble.periodogram.scan import (
    HOURS_PER_DAY,
    OVERSAMPLE,
    ScanResult,
    _check_order,
    _scan_chi2,
    default_period_range_h,
    fourier_scan,
    frequency_grid,
)

#: Ill-conditioning test of the 2-D map (cf. scan.EXACT_COND_FACTOR): the map is kept to ~1e-8
#: relative accuracy, the refined best pair is always exact (least squares).
MAP_COND_FACTOR = 1e-5
#: Ill-conditioning test of the P2 scan of the 'refine' search: that scan only ranks candidates
#: (predicted relative accuracy ~4e-13 / factor, i.e. ~1e-6), and every candidate is then
#: evaluated exactly (docs/methods-period-search.md, section 8).
SCAN_COND_FACTOR = 4e-7
#: Working memory aimed at by one call of the map kernel (rows x P2 block), bytes: the
#: map's memory does not grow with the span or the grid length beyond the output itself.
MAP_BLOCK_BYTES = 50_000_000
#: Fewest P2 frequencies per block (below this the per-call overhead dominates).
MAP_MIN_BLOCK = 4096
#: Oversampling factor of the automatic P2 grid of the 'refine' search (step 1 / (q m T)); the
#: candidates are then examined on the step of the 1-D scan's oversampling factor.
P2_OVERSAMPLE = 2.0
#: Number of the deepest local minima of the P2 scan that are examined exactly.
P2_CANDIDATES = 8
#: Number of the best exactly examined P2 candidates refined jointly with P1.
JOINT_STARTS = 3
#: Distinct minima kept (and refined exactly) by the 1-D scan that gives P1 in 'refine' mode.
P1_SCAN_PEAKS = 3

__all__ = ["TwoPeriodResult", "two_period_scan", "commensurate_mask", "two_period_basis", "two_period_chi2",
           "two_period_chi2_reference"]


def two_period_basis(order: int, order_1d: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Integer multipliers (j, k) of (f1, f2) of the 2-D series' exponentials, in kernel order.

    First the harmonics of f1 (j = 1..max(m, order_1d), k = 0), then k = 1..m
    with j = -m..m: for order_1d <= m, ``m + m (2m + 1)`` exponentials, i.e.
    ``(2m + 1)^2 - 1`` real columns (Pravec et al. 2005).
    """
    n1 = max(order, order_1d or 0)
    jm = list(range(1, n1 + 1))
    km = [0] * n1
    for k in range(1, order + 1):
        for j in range(-order, order + 1):
            jm.append(j)
            km.append(k)
    return np.array(jm, dtype=int), np.array(km, dtype=int)


@dataclass(frozen=True)
class TwoPeriodResult:
    """Result of :func:`two_period_scan`.

    Attributes
    ----------
    object_id : str
        Object designation.
    order : int
        Order m of the 2-D series.
    order_1d : int
        Order of the 1-D comparison model (its f1 harmonics are also in the 2-D model).
    mode : str
        'refine' (1-D P1, P2 scan, joint refinement) or 'grid' (full map, then refinement).
    p1_h, p1_h_err, p2_h, p2_h_err : float
        Best periods and 1-sigma errors (marginal, from the Delta chi2 = 1
        ellipse after rescaling by the reduced chi-square), hours.
    f1_per_d, f2_per_d : float
        The corresponding frequencies, cycles/day.
    chi2_1d, chi2_2d : float
        Chi-square of the best 1-D fit (order ``order_1d`` at P1) and of the best 2-D fit.
    n_params_1d, n_params_2d : int
        Free parameters of each model, counting nuisance terms and the frequencies.
    n_points : int
        Number of points.
    f_test_p_value : float
        p-value of the F-test of the 2-D against the 1-D model.
    delta_bic : float
        ``BIC_1D - BIC_2D`` with BIC = chi2 + k ln n: positive favours the second period.
    p2_grid_h : numpy.ndarray, shape (F2,)
        Trial P2 values, hours.
    chi2_p2 : numpy.ndarray, shape (F2,) or (F1, F2)
        Chi-square of the P2 scan at P1 fixed ('refine'; a candidate ranking, relative
        accuracy ~1e-6, see ``SCAN_COND_FACTOR``), or the full map ('grid', ~1e-8);
        nan where f2 is commensurate with f1 (:func:`commensurate_mask`).
    p1_grid_h : numpy.ndarray or None
        Trial P1 values of the map, hours ('grid' mode).
    delta_chi2_map : numpy.ndarray
        ``chi2_p2 - min(chi2_p2)``.
    coefficients_mag : numpy.ndarray, shape (n_b, 2)
        (cos, sin) amplitudes of each exponential of :func:`two_period_basis`, mag.
    amplitude_mag : float
        Peak-to-peak range of the fitted 2-D series over the data span, mag.
    epoch_jd : float
        Reference epoch (TDB JD) of the phases.
    scan_1d : ScanResult or None
        The 1-D scan that gave P1 (None when P1 was given).
    """

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.two_period_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.two_period_html(self)

    object_id: str
    order: int
    order_1d: int
    mode: str
    p1_h: float
    p1_h_err: float
    p2_h: float
    p2_h_err: float
    f1_per_d: float
    f2_per_d: float
    chi2_1d: float
    chi2_2d: float
    n_params_1d: int
    n_params_2d: int
    n_points: int
    f_test_p_value: float
    delta_bic: float
    p2_grid_h: np.ndarray
    chi2_p2: np.ndarray
    p1_grid_h: np.ndarray | None
    delta_chi2_map: np.ndarray
    coefficients_mag: np.ndarray
    amplitude_mag: float
    epoch_jd: float
    scan_1d: ScanResult | None

    def frequencies_per_d(self) -> np.ndarray:
        """Frequencies j f1 + k f2 of the fitted exponentials, cycles/day."""
        jm, km = two_period_basis(self.order, self.order_1d)
        return jm * self.f1_per_d + km * self.f2_per_d

    def to_dict(self) -> dict:
        return {
            "object": self.object_id,
            "order": self.order,
            "order_1d": self.order_1d,
            "mode": self.mode,
            "p1_h": self.p1_h,
            "p1_h_err": self.p1_h_err,
            "p2_h": self.p2_h,
            "p2_h_err": self.p2_h_err,
            "chi2_1d": self.chi2_1d,
            "chi2_2d": self.chi2_2d,
            "n_params_1d": self.n_params_1d,
            "n_params_2d": self.n_params_2d,
            "f_test_p_value": self.f_test_p_value,
            "delta_bic": self.delta_bic,
            "amplitude_mag": self.amplitude_mag,
        }


# ---------------------------------------------------------------------------


def _exact(data: ScanData, basis, f1: float, f2: float) -> float:
    """Exact chi-square of the 2-D series at (f1, f2) (QR after projecting out the nuisance; SVD if rank-deficient)."""
    jm, km = basis
    return K.exact_evaluator(data, jm, km).scalar(f2, f1)


def _fit2d(data: ScanData, basis, f1: float, f2: float):
    jm, km = basis
    sw = np.sqrt(data.w)
    x = np.hstack([data.z, K.design_matrix(data.t, f2, jm, km, f1)]) * sw[:, None]
    coef, *_ = np.linalg.lstsq(x, sw * data.y, rcond=None)
    c = coef[data.n_nuisance:].reshape(-1, 2)
    model = K.design_matrix(data.t, f2, jm, km, f1) @ coef[data.n_nuisance:]
    return c, float(np.ptp(model))


def commensurate_mask(order: int, f1, f2, span_d: float) -> np.ndarray:
    """True where f2 lies within 1/(2 span) of (p/q) f1 with q = 1..order (shape (len(f1), len(f2))).

    There the 2-D series is a 1-D series of f1/q with more harmonics, not a
    second period (e.g. a principal-axis rotator's higher harmonics would pass
    for P2); such pairs are excluded from the search and the evidence.
    """
    f1 = np.atleast_1d(np.asarray(f1, float))[:, None]
    f2 = np.atleast_1d(np.asarray(f2, float))[None, :]
    mask = np.zeros((f1.shape[0], f2.shape[1]), dtype=bool)
    for q in range(1, order + 1):
        base = f1 / q
        p = np.maximum(np.round(f2 / base), 1.0)
        mask |= np.abs(f2 - p * base) < 0.5 / span_d
    return mask


def two_period_chi2(lc, p1_h, p2_h, *, order: int = 2, sessions: bool = True, phase_term=None,
                    method: str = "auto", progress=None) -> np.ndarray:
    """Chi-square map of the 2-D series over trial periods (hours): shape (len(p1_h), len(p2_h)).

    The fast kernel (NUFFT sums over the P2 axis, rows in batches). At
    commensurate pairs, where two exponentials of the series coincide, the
    value is that of the reduced (rank-deficient) model.
    """
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    _check_order(order, data)
    f1 = HOURS_PER_DAY / np.atleast_1d(np.asarray(p1_h, float))
    f2 = HOURS_PER_DAY / np.atleast_1d(np.asarray(p2_h, float))
    order_f2 = np.argsort(f2)
    with K.single_thread_blas():
        chi2 = _map_chi2(data, two_period_basis(order), f1, f2[order_f2], method=method, progress=progress)
    out = np.empty_like(chi2)
    out[:, order_f2] = chi2
    return out


def two_period_chi2_reference(lc, p1_h, p2_h, *, order: int = 2, sessions: bool = True,
                              phase_term=None) -> np.ndarray:
    """Slow reference of :func:`two_period_chi2`: one ``lstsq`` per (P1, P2) pair (no masking)."""
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    jm, km = two_period_basis(order)
    f1 = HOURS_PER_DAY / np.atleast_1d(np.asarray(p1_h, float))
    f2 = HOURS_PER_DAY / np.atleast_1d(np.asarray(p2_h, float))
    return np.array([K.reference_basis_chi2(data.t, data.y, data.w, data.z, jm, km, f2, f1=a) for a in f1])


def _map_chi2(data: ScanData, basis, f1: np.ndarray, f2: np.ndarray, *, method="auto", progress=None,
              cond_factor: float = MAP_COND_FACTOR):
    """Chi-square map (len(f1), len(f2)), computed in blocks of rows and of P2 frequencies.

    Both the number of rows and the number of P2 frequencies per call are chosen
    so that the per-call working memory stays near :data:`MAP_BLOCK_BYTES`,
    whatever the span and the grid length (only the output map grows with them).
    """
    jm, km = basis
    n_b = jm.size
    chi2 = np.empty((f1.size, f2.size))
    chi2_0 = data.chi2_nuisance
    n_pairs = sum(g.index.size ** 2 for g in data.groups)
    # per row: the strengths; per (row, frequency): the (2 n_b + 1)^2 normal matrix (twice) and the sums
    per_row = 25 * (data.n_points + n_pairs) * 16
    per_cell = (2 * n_b + 1) ** 2 * 8 * 2 + 2 * n_b * (n_b + 1) * 16
    f2_block = int(min(f2.size, max(MAP_MIN_BLOCK, MAP_BLOCK_BYTES // (per_row + per_cell))))
    f2_block = max(1, f2_block)
    for c_lo in range(0, f2.size, f2_block):
        fc = f2[c_lo:c_lo + f2_block]
        engine = K.make_engine(fc, "direct" if method == "direct" else "nufft")
        paired, explicit = K.split_groups(data.groups, fc.size, n_b)
        rows = int(max(1, min(64, MAP_BLOCK_BYTES // (per_row + per_cell * fc.size))))
        for lo in range(0, f1.size, rows):
            fb = f1[lo:lo + rows]
            c, piv = K.scan_basis_chi2(data.t, data.w, data.y_res, data.groups, jm, km, engine, f1=fb,
                                       paired=paired, explicit=explicit)
            with np.errstate(divide="ignore", invalid="ignore"):
                risk = cond_factor * engine.risk_scale * (chi2_0 / data.n_points) * (chi2_0 / c) / piv
            flag = ~np.isfinite(c) | (c <= 0) | ~(risk <= 1.0)
            if np.any(flag):
                # all flagged pairs of the batch in one batched QR call
                r_idx, c_idx = np.nonzero(flag)
                c[r_idx, c_idx] = K.exact_evaluator(data, jm, km)(fc[c_idx], f1=fb[r_idx])
            chi2[lo:lo + rows, c_lo:c_lo + fc.size] = c
            if progress is not None and c_lo + fc.size >= f2.size:
                progress(fb.size)
    return chi2


def _local_minima(c: np.ndarray) -> np.ndarray:
    """Indices of the local minima of a curve (nan = +inf; the ends count against +inf)."""
    c = np.where(np.isfinite(c), c, np.inf)
    if c.size == 1:
        return np.array([0]) if np.isfinite(c[0]) else np.zeros(0, dtype=int)
    left = np.concatenate([[np.inf], c[:-1]])
    right = np.concatenate([c[1:], [np.inf]])
    return np.flatnonzero((c < left) & (c <= right) & np.isfinite(c))


def _p2_candidates(data, basis, order, f1, f2, chi2_scan, fine_step, span, n_cand=P2_CANDIDATES):
    """The ``n_cand`` deepest local minima of a P2 scan, each examined exactly, best first.

    Around each minimum the exact chi-square (QR) is evaluated at the scan's own point and, when
    ``fine_step`` is smaller than the scan's step, at ``fine_step`` spacing out to one scan step on
    either side (commensurate points skipped); each minimum contributes its best point.
    Returns a list of ``(f2, chi2)`` sorted by chi2.
    """
    mins = _local_minima(chi2_scan)
    mins = mins[np.argsort(chi2_scan[mins])][:n_cand]
    coarse = float(np.median(np.diff(f2))) if f2.size > 1 else fine_step
    r = int(np.ceil(coarse / fine_step - 1e-9)) if fine_step < coarse else 0
    offsets = fine_step * np.arange(-r, r + 1) if r else np.zeros(1)
    cand = f2[mins][:, None] + offsets[None, :]
    ok = (cand > 0) & ~commensurate_mask(order, [f1], cand.ravel(), span)[0].reshape(cand.shape)
    if not np.any(ok):
        i = int(np.nanargmin(chi2_scan))
        return [(float(f2[i]), _exact(data, basis, f1, float(f2[i])))]
    jm, km = basis
    exact = np.full(cand.shape, np.inf)
    exact[ok] = K.exact_evaluator(data, jm, km)(cand[ok], f1=f1)
    out = []
    for row in range(cand.shape[0]):
        if np.any(ok[row]):
            i = int(np.argmin(exact[row]))
            out.append((float(cand[row, i]), float(exact[row, i])))
    out.sort(key=lambda x: x[1])
    return out


def _halfwidth(fun, x0, c0, s2, step0, limit):
    """Distance from x0 to where (fun(x) - c0)/s2 = 1, averaged over both sides."""
    out = []
    for direction in (+1, -1):
        step, inner, found = step0, x0, None
        for _ in range(50):
            x = x0 + direction * min(step, limit)
            val = (fun(x) - c0) / s2 - 1.0
            if val > 0:
                a, b = sorted((inner, x))
                g = lambda z: (fun(z) - c0) / s2 - 1.0  # noqa: E731
                try:
                    found = abs(optimize.brentq(g, a, b, xtol=1e-3 * step0 + 1e-15, rtol=1e-10) - x0)
                except ValueError:
                    found = abs(x - x0)
                break
            if step >= limit:
                found = limit
                break
            inner = x
            step *= 2.0
        out.append(found if found is not None else limit)
    return 0.5 * (out[0] + out[1])


def _refine_pair(data, basis, f1, f2, step1, step2, xatol=1e-4, rtol=1e-9, simplex=0.5):
    """Joint least-squares refinement of (f1, f2) from a start (Nelder-Mead on the exact chi2).

    ``xatol`` and ``simplex`` (the initial simplex' size) are in units of the steps (the 1-sigma
    widths are typically 0.1 to 1 step), ``rtol`` is relative to the chi-square.
    """
    fun = lambda v: _exact(data, basis, f1 + v[0] * step1, f2 + v[1] * step2)  # noqa: E731
    c0 = fun([0.0, 0.0])
    res = optimize.minimize(fun, x0=[0.0, 0.0], method="Nelder-Mead",
                            options={"xatol": xatol, "fatol": rtol * c0,
                                     "initial_simplex": [[0, 0], [simplex, 0], [0, simplex]], "maxiter": 400})
    v = res.x if res.fun <= c0 else np.zeros(2)
    return f1 + v[0] * step1, f2 + v[1] * step2, float(min(res.fun, c0))


def _one_d_chi2(data, order_1d, f):
    jm1, km1 = np.zeros(order_1d, dtype=int), np.arange(1, order_1d + 1)
    return K.exact_evaluator(data, jm1, km1).scalar(f)


def _choose_order_1d(data, f1, order, max_order):
    """1-D Fourier order at f1 with the lowest BIC (Schwarz 1978), between 1 and ``max_order``."""
    n = data.n_points
    best, best_bic = order, np.inf
    for m1 in range(1, max_order + 1):
        if n <= data.n_nuisance + 2 * m1 + 2:
            break
        bic = _one_d_chi2(data, m1, f1) + (data.n_nuisance + 2 * m1 + 1) * np.log(n)
        if bic < best_bic:
            best, best_bic = m1, bic
    return best


def two_period_scan(lc, order: int = 2, p1: float | None = None, p2_grid=None, *, p1_grid=None,
                    order_1d: int | None = None, min_period_h: float | None = None,
                    max_period_h: float | None = None, sessions: bool = True, phase_term: bool | None = None,
                    oversample: float = OVERSAMPLE, p2_oversample: float | None = None, method: str = "auto",
                    progress=False) -> TwoPeriodResult:
    """Two-period (2-D Fourier series) search.

    Parameters
    ----------
    lc : LightCurve
        The light curve.
    order : int
        Order m of the 2-D series ((2m+1)^2 coefficients; Pravec et al. 2005).
    p1 : float or None
        First period, hours. None: the period of the global minimum of a 1-D
        :func:`fourier_scan` of the same order (then refined jointly with P2).
    p2_grid : array_like or None
        Trial P2 values, hours. None: the automatic grid over
        ``[min_period_h, max_period_h]`` (see :func:`frequency_grid`), with the oversampling
        factor ``p2_oversample`` in 'refine' mode and ``oversample`` in 'grid' mode.
    p1_grid : array_like or None
        Trial P1 values, hours. When given, the full (P1, P2) grid is computed
        ('grid' mode) and its minimum refined; otherwise 'refine' mode.
    order_1d : int or None
        Order of the 1-D comparison model, whose f1 harmonics are also kept in
        the 2-D model (so that the models are nested and the f2 terms are not
        credited with higher harmonics of f1). None: chosen by BIC between 1 and
        ``max(4, 2 m)`` at P1 ('refine' mode; in 'grid' mode at the P1 of the grid
        with the best 1-D fit).
    min_period_h, max_period_h : float or None
        Period range of the automatic grids, hours.
    sessions, phase_term, oversample, method : see :func:`fourier_scan`.
    p2_oversample : float or None
        Oversampling factor of the automatic P2 grid in 'refine' mode (None: ``P2_OVERSAMPLE``,
        2, capped at ``oversample``). The ``P2_CANDIDATES`` deepest minima of that scan are then
        evaluated exactly on the step of ``oversample`` out to one P2 step on either side, and the
        best of them starts the joint refinement.
    progress : bool or callable
        tqdm bar (True) or a callable receiving the rows done.

    Returns
    -------
    TwoPeriodResult
    """
    with K.single_thread_blas():
        return _two_period_scan(lc, order, p1, p2_grid, p1_grid, order_1d, min_period_h, max_period_h, sessions,
                                phase_term, oversample, p2_oversample, method, progress)


def _two_period_scan(lc, order, p1, p2_grid, p1_grid, order_1d, min_period_h, max_period_h, sessions,
                     phase_term, oversample, p2_oversample, method, progress):
    data = prepare(lc, sessions=sessions, phase_term=phase_term)
    _check_order(order, data)
    span = data.span_d
    if min_period_h is None or max_period_h is None:
        d_lo, d_hi = default_period_range_h(data, sessions)
        min_period_h = d_lo if min_period_h is None else min_period_h
        max_period_h = d_hi if max_period_h is None else max_period_h
    fine_step = 1.0 / (oversample * order * span)
    if p2_grid is None:
        q2 = oversample if p1_grid is not None else min(oversample, p2_oversample or P2_OVERSAMPLE)
        f2 = frequency_grid(span, order, min_period_h, max_period_h, q2)
    else:
        f2 = np.sort(HOURS_PER_DAY / np.atleast_1d(np.asarray(p2_grid, float)))
    scan_1d = None

    bar = None
    cb = progress if callable(progress) else None
    if progress is True:
        from tqdm.auto import tqdm

        total = (len(p1_grid) if p1_grid is not None else 1)
        bar = tqdm(total=total, unit="row", delay=1.0, leave=False, desc=f"2-D scan {lc.object_id}")
        cb = bar.update
    try:
        if p1_grid is not None:
            mode = "grid"
            f1_grid = np.sort(HOURS_PER_DAY / np.atleast_1d(np.asarray(p1_grid, float)))
            if order_1d:
                m1 = int(order_1d)
            else:
                # the 1-D comparison order by BIC at the best 1-D P1 of the grid
                c1, _, _ = _scan_chi2(data, order, f1_grid, method=method)
                m1 = _choose_order_1d(data, float(f1_grid[int(np.nanargmin(c1))]), order, max(4, 2 * order))
            basis = two_period_basis(order, m1)
            _check_size(data, basis, order)
            chi2_map = _map_chi2(data, basis, f1_grid, f2, method=method, progress=cb)
            chi2_map[commensurate_mask(order, f1_grid, f2, span)] = np.nan
            if not np.any(np.isfinite(chi2_map)):
                raise PeriodSearchError(f"{lc.object_id}: every (P1, P2) pair of the grid is degenerate")
            r, c = np.unravel_index(np.nanargmin(chi2_map), chi2_map.shape)
            f1_0, f2_0 = float(f1_grid[r]), float(f2[c])
            step1 = float(np.median(np.diff(f1_grid))) if f1_grid.size > 1 else 1.0 / (oversample * order * span)
            p1_grid_h = HOURS_PER_DAY / f1_grid
        else:
            mode = "refine"
            if p1 is None:
                scan_1d = fourier_scan(lc, order=order, min_period_h=min_period_h, max_period_h=max_period_h,
                                       sessions=sessions, phase_term=phase_term, oversample=oversample,
                                       method=method, max_peaks=P1_SCAN_PEAKS)
                f1_0 = HOURS_PER_DAY / scan_1d.fit_period_h
            else:
                f1_0 = HOURS_PER_DAY / float(p1)
            m1 = int(order_1d or _choose_order_1d(data, f1_0, order, max(4, 2 * order)))
            basis = two_period_basis(order, m1)
            _check_size(data, basis, order)
            chi2_map = _map_chi2(data, basis, np.array([f1_0]), f2, method=method, progress=cb,
                                 cond_factor=SCAN_COND_FACTOR)[0]
            chi2_map[commensurate_mask(order, [f1_0], f2, span)[0]] = np.nan
            if not np.any(np.isfinite(chi2_map)):
                raise PeriodSearchError(f"{lc.object_id}: every P2 of the grid is commensurate with P1")
            # the deepest minima of the scan, examined exactly (on the fine step for the automatic grid)
            starts = _p2_candidates(data, basis, order, f1_0, f2, chi2_map,
                                    fine_step if p2_grid is None else np.inf, span)
            step1 = fine_step
            p1_grid_h = None
    finally:
        if bar is not None:
            bar.close()
    step2 = float(np.median(np.diff(f2))) if f2.size > 1 else fine_step
    if mode == "refine" and p2_grid is None:
        step2 = fine_step
    if mode == "grid":
        starts = [(f2_0, None)]
    def refine(f1_s, f2_s, **kw):
        f1_r, f2_r, c_r = _refine_pair(data, basis, f1_s, f2_s, step1, step2, **kw)
        if commensurate_mask(order, [f1_r], [f2_r], span)[0, 0]:
            # the refinement drifted onto a commensurate pair: keep the start
            f1_r, f2_r, c_r = f1_s, f2_s, _exact(data, basis, f1_s, f2_s)
        return f1_r, f2_r, c_r

    # joint refinement of (P1, P2) from the best start (grid mode) or from each of the JOINT_STARTS
    # best candidates of the P2 scan (refine mode: P1 refined locally for each of them)
    refined = [refine(f1_0, f2_s) for f2_s, _ in starts[:JOINT_STARTS]]
    f1_b, f2_b, chi2_2d = min(refined, key=lambda r: r[2])

    # the best 1-D fit: order m1 at P1, refined locally
    res1 = optimize.minimize_scalar(lambda f: _one_d_chi2(data, m1, f), bounds=(f1_b - 2 * step1, f1_b + 2 * step1),
                                    method="bounded", options={"xatol": 1e-6 * step1})
    chi2_1d = float(min(res1.fun, _one_d_chi2(data, m1, f1_b)))

    n = data.n_points
    n_b = basis[0].size
    k1 = data.n_nuisance + 2 * m1 + 1
    k2 = data.n_nuisance + 2 * n_b + 2
    dof2 = n - k2
    if dof2 > 0 and chi2_2d > 0 and chi2_1d > chi2_2d:
        fstat = ((chi2_1d - chi2_2d) / (k2 - k1)) / (chi2_2d / dof2)
        p_f = float(stats.f.sf(fstat, k2 - k1, dof2))
    else:
        p_f = 1.0
    delta_bic = float((chi2_1d + k1 * np.log(n)) - (chi2_2d + k2 * np.log(n)))

    # uncertainties: Delta chi2 = 1 after rescaling, marginal over the other frequency
    s2 = chi2_2d / dof2 if dof2 > 0 and chi2_2d > 0 else 1.0
    g1 = lambda f: _exact(data, basis, f, f2_b)  # noqa: E731
    g2 = lambda f: _exact(data, basis, f1_b, f)  # noqa: E731
    w1 = _halfwidth(g1, f1_b, chi2_2d, s2, 0.01 * step1, 2.0 / span)
    w2 = _halfwidth(g2, f2_b, chi2_2d, s2, 0.01 * step2, 2.0 / span)
    # curvature matrix from the two conditional widths and one diagonal point
    h11, h22 = 2.0 * s2 / w1**2, 2.0 * s2 / w2**2
    c12 = _exact(data, basis, f1_b + w1, f2_b + w2) - chi2_2d
    h12 = (c12 - 0.5 * h11 * w1**2 - 0.5 * h22 * w2**2) / (w1 * w2)
    hess = np.array([[h11, h12], [h12, h22]])
    try:
        cov = 2.0 * s2 * np.linalg.inv(hess)
        with np.errstate(invalid="ignore"):  # a negative variance is caught just below
            sig1, sig2 = np.sqrt(cov[0, 0]), np.sqrt(cov[1, 1])
        if not (np.isfinite(sig1) and np.isfinite(sig2) and cov[0, 0] > 0 and cov[1, 1] > 0):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:
        sig1, sig2 = w1, w2
    coefs, amp = _fit2d(data, basis, f1_b, f2_b)
    finite = np.where(np.isfinite(chi2_map), chi2_map, np.nan)
    return TwoPeriodResult(
        object_id=lc.object_id, order=int(order), order_1d=int(m1), mode=mode,
        p1_h=HOURS_PER_DAY / f1_b, p1_h_err=HOURS_PER_DAY * sig1 / f1_b**2,
        p2_h=HOURS_PER_DAY / f2_b, p2_h_err=HOURS_PER_DAY * sig2 / f2_b**2,
        f1_per_d=f1_b, f2_per_d=f2_b, chi2_1d=chi2_1d, chi2_2d=chi2_2d, n_params_1d=k1, n_params_2d=k2,
        n_points=n, f_test_p_value=p_f, delta_bic=delta_bic, p2_grid_h=HOURS_PER_DAY / f2,
        chi2_p2=chi2_map, p1_grid_h=p1_grid_h, delta_chi2_map=finite - np.nanmin(finite),
        coefficients_mag=coefs, amplitude_mag=amp, epoch_jd=data.epoch_jd, scan_1d=scan_1d,
    )


def _check_size(data, basis, order):
    n_b = basis[0].size
    if data.n_points <= data.n_nuisance + 2 * n_b + 2:
        raise PeriodSearchError(
            f"{data.n_points} points cannot constrain an order-{order} two-period series "
            f"({2 * n_b} coefficients and {data.n_nuisance} zero-points/phase terms)")
