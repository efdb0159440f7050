"""Sidereal period, pole, shape and phase curve of a PA rotator: ``fit_pa_geometry``.

The driver is a flat sequence of steps over one frozen problem
(``docs/methods-sparse.md``):

1. **Coarse scan**: the linear bisector model (:mod:`tumble.sparse.kernel`)
   over the sidereal-frequency grid for :data:`COARSE_POLES` spin directions,
   block by block (memory bounded by :data:`tumble.sparse.kernel.BLOCK_ELEMENTS`
   and the grid limit :data:`MAX_FREQUENCIES`); the best pole per frequency is kept.
2. **Candidates**: the :data:`N_CANDIDATES` deepest distinct minima.
3. **Fine poles**: each candidate rescanned for :data:`FINE_POLES` spin
   directions over a few grid steps.
4. **Refinement**: the closed-form ellipsoid model with the phase function
   (:mod:`tumble.sparse.model`) fitted by least squares from the best fine
   poles of each candidate; the mirror pole (longitude + 180 deg) of the best.
5. **Alias family**: every refined candidate within ``max(ALIAS_DELTA_CHI2, 2 ln N)``
   (N independent frequencies; chi-squares scaled by the reduced chi-square) of the
   best; more than one member, a best period at the edge of the range, a poor fit or
   no detected rotation means the period is undecided.
6. **Posterior**: an emcee ensemble around the best solution gives the 68 %
   intervals (conditional on that solution's mode).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from tumble.sparse import kernel as KR
from tumble.sparse.model import (
    N_SHAPE_PARAMS,
    PHASE_MODELS,
    EllipsoidProblem,
    SparseFitError,
    ellipsoid_problem,
    model_magnitudes,
    profiled_chi2,
)

__all__ = [
    "GeometricPAFit",
    "PoleSolution",
    "AliasMember",
    "PosteriorSummary",
    "fit_pa_geometry",
    "DEFAULT_PERIOD_RANGE_H",
    "MAX_FREQUENCIES",
    "ALIAS_DELTA_CHI2",
    "DETECTION_DELTA_BIC",
    "POLE_FIT_SIGMAS",
    "pole_fit_spread_chi2",
]

HOURS_PER_DAY = 24.0
#: Default sidereal-period range, hours: 2 h (near the spin barrier of bodies larger than a few
#: hundred metres, Pravec & Harris 2000, from memory) to 1000 h (slow rotators of several hundred
#: hours are common among small main-belt asteroids, from memory; the grid grows by only ~2 % from
#: 100 h); the upper end is lowered to a quarter of the span when the span is shorter.
DEFAULT_PERIOD_RANGE_H = (2.0, 1000.0)
#: Grid step 1 / (OVERSAMPLE * 4 * span): the 4th harmonic of the rotation drifts by a quarter
#: cycle over the span between neighbouring frequencies, the main (2nd) one by an eighth.
OVERSAMPLE = 2.0
#: Largest frequency grid (documented limit: 2-1000 h over about 114 years); beyond it the
#: fit stops with a one-line error instead of growing its memory (the grid's two arrays then
#: hold 48 MB).
MAX_FREQUENCIES = 4_000_000
#: Spin directions of the coarse scan over the whole sphere (about 29 deg apart).
COARSE_POLES = 48
#: Spin directions of the fine rescan of each candidate (about 10 deg apart).
FINE_POLES = 400
#: Candidate frequencies (distinct minima of the coarse scan) refined with the full model.
N_CANDIDATES = 8
#: Fine rescan half-width around each candidate, in coarse grid steps (and its sub-steps).
FINE_HALF_STEPS = 2
FINE_SUBSTEPS = 4
#: Two refined candidates closer than this many coarse grid steps are the same solution.
SAME_SOLUTION_STEPS = 2.0
#: Sidereal periods of one rotation seen with poles of opposite sense differ by up to twice the
#: phase-angle bisector's mean angular rate (|f_sid - f_syn| <= rate / 2 pi, e.g. Kaasalainen
#: 2004's sidereal-synodic relation): alias-family members closer to the best than that (plus this
#: many grid steps) are the same rotation with another pole, not another period.
SAME_ROTATION_EXTRA_STEPS = 2.0
#: Extra starts (spread over the sphere) of the pole refinement at the best period.
POLE_STARTS = 10
#: Two pole solutions closer than this are the same (degrees).
SAME_POLE_DEG = 15.0
#: Alias family: candidates within this Delta chi2 of the best (after scaling by the best
#: fit's reduced chi-square, when above 1), at least: 9 is the 3-sigma level of one parameter
#: (chi-square law with one degree of freedom; common practice). Wide scans raise it to
#: 2 ln N for N independent frequencies (see _alias_threshold).
ALIAS_DELTA_CHI2 = 9.0
#: Poles: a pole solution whose chi-square lies within this many standard deviations of the
#: chi-square statistic (sqrt(2 dof), the chi-square law's own spread) of the best is as good a
#: fit by goodness of fit, and its sidereal period is covered by the interval. A likelihood-ratio
#: threshold (the alias one) assumes the ellipsoid is the true shape; on non-ellipsoidal bodies
#: one apparition ranks poles wrongly by more than that (a dense PA body of the calibration
#: library: true pole 101 deg away, 11.6 worse in chi-square; benchmarks/bench_pa_period.py).
POLE_FIT_SIGMAS = 1.0
#: A best period within this fraction of either end of the searched range is not called unique
#: (its minimum may lie outside the range; issue 14's "not at the edge of the grid").
EDGE_FRACTION = 0.01
#: Rotation counts as detected when the ellipsoid beats the no-rotation model (a sphere:
#: phase curve only) by a Delta BIC above this ("very strong", Kass & Raftery 1995).
DETECTION_DELTA_BIC = 10.0
#: The best fit must reach a reduced chi-square below this (errors with the floor) for a period
#: to be called unique: above it the ellipsoid with its phase curve leaves structure several times
#: the errors (activity, a companion, tumbling, bad photometry) and any period is suspect.
MAX_REDUCED_CHI2 = 3.0
#: Parameters the rotation adds to the no-rotation model: f, lon, lat, phi0, a/b, b/c.
N_ROTATION_PARAMS = 6
#: Error floor added in quadrature to every quoted error, mag (survey photometric
#: calibration is rarely better than ~0.01 mag; common practice).
ERROR_FLOOR_MAG = 0.01
#: Phase-angle range (deg) of the sparse points below which no phase slope is fitted (scan)
#: and the phase function is fixed (fit); from 5 deg one G12, from 20 deg G1 and G2 free
#: (with at least HG1G2_MIN_POINTS points).
PHASE_RANGE_SLOPE_DEG = 2.0
PHASE_RANGE_G12_DEG = 5.0
PHASE_RANGE_G1G2_DEG = 20.0
HG1G2_MIN_POINTS = 100
#: Fewest points accepted.
MIN_POINTS = 20
#: Largest semi-axis ratios a/b and b/c of the fit.
MAX_AXIS_RATIO = 4.0
#: Fast mode (``period_hint_h``): half-width of the searched window around the hint,
#: relative (also at least 2 / span): covers the synodic-sidereal difference of main-belt
#: and near-Earth geometry alike.
HINT_HALF_WIDTH_REL = 0.02
#: Function evaluations of one least-squares refinement (each Jacobian is one batched call).
LSQ_MAX_NFEV = 100
#: Posterior sampling: walkers per parameter, steps, and the discarded burn-in fraction.
WALKERS_PER_PARAM = 3
N_STEPS = 400
BURN_FRACTION = 0.5


@dataclass(frozen=True)
class PoleSolution:
    """One spin direction of the best period.

    Attributes
    ----------
    lon_deg, lat_deg : float
        Ecliptic J2000 longitude and latitude of the spin axis, degrees.
    chi2 : float
        Chi-square of the refined fit with this pole.
    delta_chi2_scaled : float
        Difference from the best pole's chi-square, divided by the reduced chi-square (>= 0).
    kind : str
        'best', 'mirror' (near longitude + 180 deg: the ambiguity of near-ecliptic geometry,
        Kaasalainen & Lamberg 2006) or 'other' (another acceptable pole).
    """

    lon_deg: float
    lat_deg: float
    chi2: float
    delta_chi2_scaled: float
    kind: str


@dataclass(frozen=True)
class AliasMember:
    """A period within the alias threshold of the best.

    Attributes
    ----------
    period_h : float
        Sidereal period, hours.
    delta_chi2_scaled : float
        Chi-square above the best, scaled by the reduced chi-square.
    pole_lon_deg, pole_lat_deg : float
        Its pole, degrees.
    same_rotation : bool
        True when its frequency lies within the pole-sense spread of the best
        (``GeometricPAFit.pole_sense_spread_per_d``): the best period seen with another pole,
        not a separate alias (the period interval covers it).
    """

    period_h: float
    delta_chi2_scaled: float
    pole_lon_deg: float
    pole_lat_deg: float
    same_rotation: bool = False


@dataclass(frozen=True, eq=False)
class PosteriorSummary:
    """emcee run around the best solution.

    Attributes
    ----------
    names : tuple of str
        Parameter names (order of ``samples``' columns).
    samples : numpy.ndarray, shape (S, d)
        Flattened post-burn-in samples (``f_per_d`` column in cycles/day, angles in
        degrees or radians as named).
    acceptance : float
        Mean acceptance fraction.
    n_walkers, n_steps : int
    tau_max : float
        Largest integrated autocorrelation time estimated (nan when too short to tell).
    """

    names: tuple
    samples: np.ndarray
    acceptance: float
    n_walkers: int
    n_steps: int
    tau_max: float


@dataclass(frozen=True, eq=False)
class GeometricPAFit:
    """Result of :func:`fit_pa_geometry` (scientific estimates for research use).

    Attributes
    ----------
    object_id : str
    status : str
        'unique' (one period), 'undecided' (an alias family of several periods) or
        'no rotation detected' (the ellipsoid does not beat a sphere with its phase curve).
    message : str
        One sentence saying why.
    period_h : float
        Sidereal rotation period, hours, when the status is 'unique'; nan otherwise.
    period_h_lo, period_h_hi : float
        68 % interval of the best sidereal period (posterior percentiles 16 and 84, widened to
        cover the periods of the other acceptable poles), hours.
    best_period_h : float
        Period of the best fit whatever the status, hours.
    period_syn_h : float
        Synodic period given as ``period_hint_h`` (nan when none).
    pole_lon_deg, pole_lat_deg : float
        Best spin axis, ecliptic J2000, degrees (nan when the geometry was not in the data).
    poles : tuple of PoleSolution
        The best pole, the mirror solution, and every other distinct pole (restarts over the
        sphere at the best period) within ``pole_delta_chi2`` of the best.
    b_over_a, c_over_b : float
        Axis ratios of the ellipsoid (<= 1).
    h_mag : dict
        Zero-point group ('band=r', 'session=2') -> H in that band (mag; for sessions a
        zero-point, not an absolute magnitude).
    g1, g2 : float
        Phase parameters (Muinonen et al. 2010).
    phase_model, law : str
        Phase function and scattering law used.
    chi2, dof, reduced_chi2 : float
        Fit at the quoted errors (with the error floor).
    max_log_likelihood : float
        Gaussian log-likelihood at the best fit (quoted errors with floor; zero-points profiled).
    bic : float
        ``k ln n - 2 max_log_likelihood`` with k every fitted parameter.
    n_params, n_points : int
    chi2_null : float
        Chi-square of the no-rotation model (sphere, same phase function).
    delta_bic_rotation : float
        BIC of the no-rotation model minus that of the ellipsoid (scaled chi-squares).
    alias_family : tuple of AliasMember
        Every refined period within ``alias_delta_chi2`` of the best (the best first); members
        flagged ``same_rotation`` are the best period with another pole and do not make the
        period undecided.
    alias_delta_chi2 : float
        The threshold used: ``max(ALIAS_DELTA_CHI2, 2 ln N)`` for N independent frequencies.
    pole_delta_chi2 : float
        The poles' threshold: ``max(alias_delta_chi2, POLE_FIT_SIGMAS sqrt(2 dof))`` (goodness of
        fit; the ellipsoid's pole ranking is not trusted beyond the chi-square's own spread).
    pole_sense_spread_per_d : float
        Largest difference between sidereal frequencies of one rotation seen with different poles:
        twice the bisector's mean angular rate over 2 pi, plus two grid steps, cycles/day.
    geometry_fixed : bool
        True when the data held no Sun/observer directions (period then close to synodic,
        pole meaningless).
    geometry_note : str
    parameters : numpy.ndarray, shape (d,)
        Best non-linear parameter vector (``parameter_names`` order).
    parameter_names : tuple of str
    posterior : PosteriorSummary or None
    scan_frequency_per_d : numpy.ndarray, shape (F,)
        Coarse-scan sidereal frequencies, cycles/day.
    scan_chi2 : numpy.ndarray, shape (F,)
        Best chi-square over the coarse poles at each frequency (linear bisector model).
    warnings : tuple of str
    """

    object_id: str
    status: str
    message: str
    period_h: float
    period_h_lo: float
    period_h_hi: float
    best_period_h: float
    period_syn_h: float
    pole_lon_deg: float
    pole_lat_deg: float
    poles: tuple
    b_over_a: float
    c_over_b: float
    h_mag: dict
    g1: float
    g2: float
    phase_model: str
    law: str
    chi2: float
    dof: int
    reduced_chi2: float
    max_log_likelihood: float
    bic: float
    n_params: int
    n_points: int
    chi2_null: float
    delta_bic_rotation: float
    alias_family: tuple
    alias_delta_chi2: float
    pole_delta_chi2: float
    pole_sense_spread_per_d: float
    geometry_fixed: bool
    geometry_note: str
    parameters: np.ndarray
    parameter_names: tuple
    posterior: PosteriorSummary | None
    scan_frequency_per_d: np.ndarray
    scan_chi2: np.ndarray
    warnings: tuple = field(default_factory=tuple)

    @property
    def unique(self) -> bool:
        """True when one period stands out (status 'unique')."""
        return self.status == "unique"

    def to_dict(self) -> dict:
        """JSON-ready summary (no scan arrays, no samples)."""
        def num(v):
            return None if v is None or (isinstance(v, float) and not math.isfinite(v)) else float(v)

        return {
            "object": self.object_id, "status": self.status, "message": self.message,
            "period_h": num(self.period_h), "period_h_lo": num(self.period_h_lo),
            "period_h_hi": num(self.period_h_hi), "best_period_h": num(self.best_period_h),
            "period_syn_h": num(self.period_syn_h),
            "pole_lon_deg": num(self.pole_lon_deg), "pole_lat_deg": num(self.pole_lat_deg),
            "poles": [{"lon_deg": num(p.lon_deg), "lat_deg": num(p.lat_deg), "chi2": p.chi2,
                       "delta_chi2_scaled": p.delta_chi2_scaled, "kind": p.kind} for p in self.poles],
            "b_over_a": self.b_over_a, "c_over_b": self.c_over_b, "h_mag": dict(self.h_mag),
            "g1": self.g1, "g2": self.g2, "phase_model": self.phase_model, "law": self.law,
            "chi2": self.chi2, "dof": self.dof, "reduced_chi2": self.reduced_chi2,
            "max_log_likelihood": self.max_log_likelihood, "bic": self.bic, "n_params": self.n_params,
            "n_points": self.n_points, "chi2_null": self.chi2_null, "delta_bic_rotation": self.delta_bic_rotation,
            "alias_family": [{"period_h": a.period_h, "delta_chi2_scaled": a.delta_chi2_scaled,
                              "pole_lon_deg": num(a.pole_lon_deg), "pole_lat_deg": num(a.pole_lat_deg),
                              "same_rotation": a.same_rotation}
                             for a in self.alias_family],
            "alias_delta_chi2": self.alias_delta_chi2, "pole_delta_chi2": self.pole_delta_chi2, "pole_sense_spread_per_d": self.pole_sense_spread_per_d,
            "geometry_fixed": self.geometry_fixed,
            "geometry_note": self.geometry_note, "warnings": list(self.warnings),
            "posterior": None if self.posterior is None else {
                "acceptance": self.posterior.acceptance, "n_walkers": self.posterior.n_walkers,
                "n_steps": self.posterior.n_steps, "tau_max": num(self.posterior.tau_max)},
        }


# ---------------------------------------------------------------------------
# the frozen problem


@dataclass(frozen=True, eq=False)
class _Problem:
    """Everything the steps share: the scan arrays, the ellipsoid arrays and the grid."""

    object_id: str
    scan: KR.ScanProblem
    ellipsoid: EllipsoidProblem
    f0: float
    df: float
    n_freq: int
    geometry_fixed: bool
    geometry_note: str
    period_syn_h: float


def _groups(lc):
    """Zero-point group of each point: the session (session >= 0) or the band (sparse points)."""
    names, index = [], np.empty(lc.n_points, dtype=int)
    keys = {}
    for i, (s, b) in enumerate(zip(lc.session.tolist(), lc.band.tolist())):
        key = f"session={int(s)}" if s >= 0 else f"band={b}"
        if key not in keys:
            keys[key] = len(names)
            names.append(key)
        index[i] = keys[key]
    return index, tuple(names)


def _auto_phase_model(lc, phase_deg) -> str:
    sparse = np.asarray(lc.session) < 0
    if not np.any(sparse):
        return "fixed"
    rng = float(np.ptp(phase_deg[sparse]))
    if rng >= PHASE_RANGE_G1G2_DEG and int(sparse.sum()) >= HG1G2_MIN_POINTS:
        return "hg1g2"
    if rng >= PHASE_RANGE_G12_DEG:
        return "hg12"
    return "fixed"


def _scan_nuisance(lc, group, n_groups, phase_deg):
    """Zero-point indicators and, for sparse points with a phase range, two phase-curve columns."""
    from tumble.phase_function import hg1g2_basis

    cols = [(group == g).astype(float) for g in range(n_groups)]
    sparse = np.asarray(lc.session) < 0
    if np.any(sparse) and np.ptp(phase_deg[sparse]) >= PHASE_RANGE_SLOPE_DEG:
        a = np.where(sparse, phase_deg, 0.0)
        phi1 = hg1g2_basis(np.clip(a, 0.0, 150.0))[0]
        c1 = np.where(sparse, a - a[sparse].mean(), 0.0)
        curv = -2.5 * np.log10(np.maximum(phi1, 1e-6))
        c2 = np.where(sparse, curv - curv[sparse].mean(), 0.0)
        cols += [c1, c2]
    return np.column_stack(cols)


def _frequency_grid(span_d, period_range_h, period_hint_h):
    if period_hint_h is not None:
        if not (period_hint_h > 0 and math.isfinite(period_hint_h)):
            raise SparseFitError(f"period_hint_h must be a positive number, got {period_hint_h!r}")
        fc = HOURS_PER_DAY / float(period_hint_h)
        half = max(HINT_HALF_WIDTH_REL * fc, 2.0 / span_d)
        f_lo, f_hi = max(fc - half, 1e-6), fc + half
    else:
        lo_h, hi_h = period_range_h if period_range_h is not None else (
            DEFAULT_PERIOD_RANGE_H[0], min(DEFAULT_PERIOD_RANGE_H[1], 0.25 * span_d * HOURS_PER_DAY))
        if not (0 < lo_h < hi_h):
            raise SparseFitError(f"bad period range {lo_h} h to {hi_h} h (the span is {span_d:.1f} d)")
        f_lo, f_hi = HOURS_PER_DAY / hi_h, HOURS_PER_DAY / lo_h
    df = 1.0 / (OVERSAMPLE * 4.0 * span_d)
    n = int(math.ceil((f_hi - f_lo) / df)) + 1
    if n > MAX_FREQUENCIES:
        raise SparseFitError(
            f"the sidereal scan would need {n} frequencies (span {span_d:.0f} d, periods "
            f"{HOURS_PER_DAY / f_hi:.3g}-{HOURS_PER_DAY / f_lo:.3g} h), above the limit of {MAX_FREQUENCIES}; "
            "narrow period_range_h or give period_hint_h")
    return f_lo, df, max(n, 2)


def _build_problem(lc, period_range_h, period_hint_h, law, phase_model, error_floor_mag) -> _Problem:
    from tumble.model import viewing_geometry

    if lc.n_points < MIN_POINTS:
        raise SparseFitError(f"{lc.object_id}: {lc.n_points} points are too few for the geometry-aware fit "
                             f"(need {MIN_POINTS})")
    span = lc.span_d
    if not span > 0:
        raise SparseFitError(f"{lc.object_id}: the data span no time")
    geo = viewing_geometry(lc)
    phase_deg = np.asarray(lc.phase_deg if lc.phase_deg is not None else geo.phase_deg, float)
    t_abs = np.asarray(lc.t, float)
    epoch = float(np.round(0.5 * (t_abs[0] + t_abs[-1]), 1))
    t = t_abs - epoch
    y = np.asarray(lc.reduced_mag, float)
    w = 1.0 / (np.asarray(lc.err, float) ** 2 + float(error_floor_mag) ** 2)
    group, names = _groups(lc)
    if phase_model == "auto":
        phase_model = _auto_phase_model(lc, phase_deg)
    ell = ellipsoid_problem(t, y, w, geo.sun_dir, geo.obs_dir, phase_deg, group, names, law, phase_model, epoch)
    z0 = _scan_nuisance(lc, group, len(names), phase_deg)
    scan = KR.scan_problem(t, y, w, z0, geo.sun_dir, geo.obs_dir, epoch)
    f0, df, n = _frequency_grid(span, period_range_h, period_hint_h)
    return _Problem(lc.object_id, scan, ell, f0, df, n, bool(geo.fixed), geo.note,
                    float(period_hint_h) if period_hint_h is not None else float("nan"))


# ---------------------------------------------------------------------------
# steps


def _coarse_scan(pb: _Problem, progress=None):
    """Best chi-square over the coarse poles at every grid frequency, and that pole's index."""
    lon, lat = KR.fibonacci_poles(COARSE_POLES)
    poles = KR.pole_vectors(lon, lat)
    batch = KR.prepare_poles(pb.scan, poles)
    block = batch.block_length()
    best = np.empty(pb.n_freq)
    arg = np.empty(pb.n_freq, dtype=np.int32)
    for lo in range(0, pb.n_freq, block):
        nb = min(block, pb.n_freq - lo)
        c = KR.chi2_block(batch, pb.f0 + lo * pb.df, pb.df, nb)
        arg[lo:lo + nb] = np.argmin(c, axis=0)
        best[lo:lo + nb] = c[arg[lo:lo + nb], np.arange(nb)]
        if progress is not None:
            progress(lo + nb, pb.n_freq)
    return best, arg, np.column_stack([lon, lat])


def _candidates(best: np.ndarray, n: int) -> np.ndarray:
    """Indices of the ``n`` deepest local minima of the scan (ends included)."""
    c = np.where(np.isfinite(best), best, np.inf)
    left = np.r_[np.inf, c[:-1]]
    right = np.r_[c[1:], np.inf]
    idx = np.flatnonzero((c <= left) & (c <= right) & np.isfinite(c))
    return idx[np.argsort(c[idx])][:n]


def _fine_starts(pb: _Problem, f_c: float):
    """Best fine-grid (pole, frequency) and the best pole far (> 60 deg) from it."""
    lon, lat = KR.fibonacci_poles(FINE_POLES)
    poles = KR.pole_vectors(lon, lat)
    step = pb.df / FINE_SUBSTEPS
    n = 2 * FINE_HALF_STEPS * FINE_SUBSTEPS + 1
    f_start = f_c - FINE_HALF_STEPS * pb.df
    c = KR.bisector_chi2(pb.scan, poles, f_start, step, n)
    i, j = np.unravel_index(np.argmin(c), c.shape)
    starts = [(f_start + j * step, lon[i], lat[i])]
    far = np.degrees(np.arccos(np.clip(poles @ poles[i], -1, 1))) > 60.0
    if np.any(far):
        cm = np.where(far[:, None], c, np.inf)
        i2, j2 = np.unravel_index(np.argmin(cm), cm.shape)
        starts.append((f_start + j2 * step, lon[i2], lat[i2]))
    return starts


def _linear_start(pb: _Problem, f: float, lon: float, lat: float) -> np.ndarray:
    """Start vector of the full model from the linear bisector fit at (pole, f)."""
    p = KR.pole_vectors(lon, lat)
    sw = np.sqrt(pb.scan.w)
    x = KR.pole_design(pb.scan, p, f) * sw[:, None]
    coef, *_ = np.linalg.lstsq(x, sw * pb.scan.y, rcond=None)
    q0 = pb.scan.z0.shape[1]
    c, s = coef[q0 + 2], coef[q0 + 3]
    phi0 = 0.5 * math.atan2(-s, c)
    k = math.hypot(c, s)
    ln_ab = float(np.clip(2.0 * k * 0.4 * math.log(10.0), 0.05, math.log(MAX_AXIS_RATIO) - 0.05))
    phase = PHASE_MODELS[pb.ellipsoid.phase.name].start
    return np.array([f, lon, lat, phi0, ln_ab, 0.2, *phase], float)


def _bounds(pb: _Problem, f_c: float):
    ph = pb.ellipsoid.phase
    half = max(3.0 * pb.df, 1e-9)
    lo = [f_c - half, -np.inf, -90.0, -np.inf, 0.0, 0.0, *ph.lower]
    hi = [f_c + half, np.inf, 90.0, np.inf, math.log(MAX_AXIS_RATIO), math.log(MAX_AXIS_RATIO), *ph.upper]
    return np.array(lo, float), np.array(hi, float)


def _residual_batch(x, ell: EllipsoidProblem) -> np.ndarray:
    """Weighted residuals (K, n [+1]) of parameter vectors x (K, d), zero-points profiled."""
    x = np.atleast_2d(x)
    r = ell.y[None, :] - model_magnitudes(ell, x)
    g = ell.group
    wsum = np.bincount(g, weights=ell.w, minlength=ell.n_groups)
    zp = np.stack([np.bincount(g, weights=ell.w * row, minlength=ell.n_groups) for row in r]) / wsum
    out = np.sqrt(ell.w)[None, :] * (r - zp[:, g])
    if ell.phase.name == "hg1g2":  # G1 + G2 <= 1 (Muinonen et al. 2010), as a stiff penalty
        pen = 1e3 * np.maximum(0.0, x[:, N_SHAPE_PARAMS] + x[:, N_SHAPE_PARAMS + 1] - 1.0)
        out = np.concatenate([out, pen[:, None]], axis=1)
    return out


def _residuals(x, ell: EllipsoidProblem, steps=None):
    return _residual_batch(x[None], ell)[0]


def _jacobian(x, ell: EllipsoidProblem, steps):
    """Forward-difference Jacobian with every perturbed vector in one batched model call."""
    xs = np.vstack([x, x[None] + np.diag(steps)])
    r = _residual_batch(xs, ell)
    return ((r[1:] - r[0][None]) / steps[:, None]).T


def _steps(pb, d):
    """Finite-difference steps: f (1e-3 grid step), lon/lat (deg), phi0 (rad), shapes, phase parameters."""
    return np.array([1e-3 * pb.df, 1e-4, 1e-4, 1e-5, 1e-5, 1e-5] + [1e-5] * (d - N_SHAPE_PARAMS))


@dataclass(frozen=True, eq=False)
class _Solution:
    x: np.ndarray
    chi2: float
    jac: np.ndarray


def _refine(pb: _Problem, x0: np.ndarray, f_c: float) -> _Solution:
    lo, hi = _bounds(pb, f_c)
    margin = 1e-9 * np.where(np.isfinite(hi - lo), hi - lo, 0.0)
    x0 = np.clip(x0, lo + margin, hi - margin)
    scale = np.array([pb.df, 10.0, 10.0, 0.3, 0.1, 0.1] + [0.1] * (x0.size - N_SHAPE_PARAMS))
    steps = _steps(pb, x0.size)
    res = optimize.least_squares(_residuals, x0, jac=_jacobian, bounds=(lo, hi), x_scale=scale,
                                 args=(pb.ellipsoid, steps), method="trf", max_nfev=LSQ_MAX_NFEV)
    x = np.array(res.x)
    x[1] = x[1] % 360.0
    return _Solution(x, float(np.sum(res.fun[:pb.ellipsoid.n_points] ** 2)), np.asarray(res.jac))


def _refine_candidate(pb: _Problem, f_c: float) -> _Solution:
    best = None
    for f, lon, lat in _fine_starts(pb, f_c):
        x0 = _linear_start(pb, f, lon, lat)
        # the start's rotation phase and its quarter-turn alternative: keep the better one
        xs = np.vstack([x0, x0 + np.eye(x0.size)[3] * 0.5 * math.pi])
        chi2, _ = profiled_chi2(pb.ellipsoid, xs)
        sol = _refine(pb, xs[int(np.argmin(chi2))], f_c)
        if best is None or sol.chi2 < best.chi2:
            best = sol
    return best


def _null_chi2(pb: _Problem) -> float:
    """Chi-square of the no-rotation model: a sphere (shape term zero) with the phase function."""
    ell = pb.ellipsoid
    base = np.array([pb.f0, 0.0, 90.0, 0.0, 0.0, 0.0])
    ph = ell.phase
    if not ph.parameters:
        return float(profiled_chi2(ell, base[None])[0][0])
    fun = lambda g: _residual_batch(np.r_[base, g][None], ell)[0]  # noqa: E731
    res = optimize.least_squares(fun, np.array(ph.start), bounds=(np.array(ph.lower), np.array(ph.upper)))
    return float(np.sum(res.fun[:ell.n_points] ** 2))


def _posterior(pb: _Problem, sol: _Solution, s2: float, n_steps: int, rng) -> PosteriorSummary | None:
    import emcee

    ell = pb.ellipsoid
    d = sol.x.size
    lo, hi = _bounds(pb, sol.x[0])
    lo[1], hi[1] = sol.x[1] - 180.0, sol.x[1] + 180.0
    lo[3], hi[3] = sol.x[3] - math.pi, sol.x[3] + math.pi
    jac = sol.jac[:ell.n_points]
    try:
        cov = np.linalg.pinv(jac.T @ jac) * s2
        sd = np.sqrt(np.clip(np.diag(cov), 0, None))
    except np.linalg.LinAlgError:
        sd = np.zeros(d)
    width = np.minimum(np.where(sd > 0, sd, 1e-3 * (hi - lo)), 0.05 * (hi - lo))
    n_walkers = max(2 * d + 2, WALKERS_PER_PARAM * d)
    x0 = sol.x[None] + 0.5 * width[None] * rng.standard_normal((n_walkers, d))
    x0 = np.clip(x0, lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo))
    args = (ell, lo, hi, s2)
    bad = ~np.isfinite(_log_posterior(x0, *args))
    for shrink in (0.1, 0.01, 0.0):  # walkers started outside the support move towards the optimum
        if not np.any(bad):
            break
        x0[bad] = sol.x[None] + shrink * (x0[bad] - sol.x[None])
        bad = ~np.isfinite(_log_posterior(x0, *args))
    sampler = emcee.EnsembleSampler(n_walkers, d, _log_posterior, args=args, vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31))).get_state()
    sampler.run_mcmc(x0, n_steps, progress=False)
    burn = int(BURN_FRACTION * n_steps)
    chain = sampler.get_chain(discard=burn, flat=True)
    import logging

    log = logging.getLogger("emcee")
    level = log.level
    log.setLevel(logging.ERROR)  # the short-chain case is reported in the result's warnings
    try:
        tau = float(np.max(sampler.get_autocorr_time(discard=burn, quiet=True)))
    except Exception:  # noqa: BLE001 - emcee raises several kinds when the chain is short
        tau = float("nan")
    finally:
        log.setLevel(level)
    names = _names(ell)
    return PosteriorSummary(names, chain, float(np.mean(sampler.acceptance_fraction)), n_walkers, n_steps, tau)


def _log_posterior(x, ell, lo, hi, s2):
    x = np.atleast_2d(x)
    inside = np.all((x >= lo) & (x <= hi), axis=1)
    out = np.full(x.shape[0], -np.inf)
    if np.any(inside):
        chi2, _ = profiled_chi2(ell, x[inside])
        if ell.phase.name == "hg1g2":  # the least-squares fit's stiff penalty on G1 + G2 > 1
            chi2 = chi2 + (1e3 * np.maximum(0.0, x[inside, N_SHAPE_PARAMS] + x[inside, N_SHAPE_PARAMS + 1] - 1.0)) ** 2
        # isotropic prior on the spin axis: cos(latitude)
        out[inside] = -0.5 * chi2 / s2 + np.log(np.maximum(np.cos(np.radians(x[inside, 2])), 1e-300))
    return out


def _names(ell: EllipsoidProblem):
    return ("f_per_d", "lon_deg", "lat_deg", "phi0_rad", "ln_a_over_b", "ln_b_over_c", *ell.phase.parameters)


# ---------------------------------------------------------------------------
# the driver


def fit_pa_geometry(lc, *, period_range_h=None, period_hint_h: float | None = None, law: str = "lommel-seeliger",
                    phase_model: str = "auto", sample: bool = True, n_steps: int = N_STEPS,
                    error_floor_mag: float = ERROR_FLOOR_MAG, n_candidates: int = N_CANDIDATES,
                    rng=None, progress=None) -> GeometricPAFit:
    """Sidereal period, pole, shape and phase curve of a PA rotator from sparse or dense photometry.

    Parameters
    ----------
    lc : tumble.photometry.LightCurve
        Light curve; with ``sun_dir``/``obs_dir`` for a sidereal period and a pole
        (without them a fixed geometry stands in and the result says so).
    period_range_h : (float, float) or None
        Searched sidereal periods, hours (default :data:`DEFAULT_PERIOD_RANGE_H`, the
        upper end at most a quarter of the span).
    period_hint_h : float or None
        Fast mode: search only within :data:`HINT_HALF_WIDTH_REL` (and 2/span) of this
        period, e.g. the synodic period of a Fourier scan of dense data; it is kept as
        ``period_syn_h``.
    law : {'lommel-seeliger', 'ls-lambert'}
        Scattering law (:data:`tumble.sparse.model.SCATTERING_LAWS`).
    phase_model : {'auto', 'hg1g2', 'hg12', 'fixed'}
        Phase function; 'auto' picks by the sparse points' phase-angle range.
    sample : bool
        Run the emcee posterior for the 68 % intervals (otherwise they come from the
        curvature of the least-squares fit).
    n_steps : int
        emcee steps.
    error_floor_mag : float
        Added in quadrature to the quoted errors, mag.
    n_candidates : int
        Candidate periods refined with the full model.
    rng : numpy.random.Generator, int or None
        Random source of the posterior sampling.
    progress : callable or None
        ``progress(done, total)`` during the coarse scan.

    Returns
    -------
    GeometricPAFit

    Raises
    ------
    SparseFitError
        Too few points, a bad option, or a grid above :data:`MAX_FREQUENCIES`.
    """
    rng = np.random.default_rng(rng)
    if int(n_steps) < 20 and sample:
        raise SparseFitError(f"n_steps must be at least 20, got {n_steps}")
    pb = _build_problem(lc, period_range_h, period_hint_h, law, phase_model, error_floor_mag)
    best_scan, _, _ = _coarse_scan(pb, progress)
    cand = _candidates(best_scan, int(n_candidates))
    sols = [_refine_candidate(pb, pb.f0 + i * pb.df) for i in cand]
    sols = _distinct(sorted(sols, key=lambda s: s.chi2), pb.df)
    best = sols[0]
    ell = pb.ellipsoid
    n = ell.n_points
    k = ell.n_nonlinear + ell.n_groups
    dof = max(n - k, 1)
    best, pole_sols = _pole_family(pb, best)
    sols[0] = best
    s2 = max(1.0, best.chi2 / dof)
    alias_dchi2 = _alias_threshold(pb)
    pole_dchi2 = _pole_threshold(alias_dchi2, dof)
    family = [s for s in sols if (s.chi2 - best.chi2) / s2 <= alias_dchi2]
    spread = _pole_sense_spread(pb)
    same = [abs(float(s.x[0]) - float(best.x[0])) <= spread for s in family]
    chi2_null = _null_chi2(pb)
    delta_bic = (chi2_null - best.chi2) / s2 - N_ROTATION_PARAMS * math.log(n)
    poles = tuple(PoleSolution(float(p.x[1]), float(p.x[2]), p.chi2, (p.chi2 - best.chi2) / s2, kind)
                  for p, kind in pole_sols if (p.chi2 - best.chi2) / s2 <= pole_dchi2 or kind == "mirror")
    post = _posterior(pb, best, s2, int(n_steps), rng) if sample else None
    best_p = HOURS_PER_DAY / float(best.x[0])
    p_lo, p_hi = _period_interval(best, post, s2, n)
    # the other acceptable poles give other sidereal periods: the interval covers each of them with
    # the best solution's own statistical width about it (the union of the poles' intervals)
    below, above = best_p - p_lo, p_hi - best_p
    for p in poles:
        if p.delta_chi2_scaled <= pole_dchi2:
            p_other = next(HOURS_PER_DAY / q.x[0] for q, _ in pole_sols if q.chi2 == p.chi2)
            p_lo, p_hi = min(p_lo, p_other - below), max(p_hi, p_other + above)
    for s, is_same in zip(family, same):  # so do the family members that are the same rotation
        if is_same:
            p_lo, p_hi = min(p_lo, HOURS_PER_DAY / s.x[0]), max(p_hi, HOURS_PER_DAY / s.x[0])
    distinct = [s for s, is_same in zip(family, same) if not is_same or s is best]
    status, message = _decide(delta_bic, distinct, pb, best.chi2 / dof, alias_dchi2, float(best.x[0]))
    n_same = sum(same) - 1
    if status == "unique" and n_same > 0:
        message += (f"; {n_same} other solution(s) within {spread:.2g} c/d are the same rotation with another pole "
                    "(covered by the period interval)")
    _, zp = profiled_chi2(ell, best.x[None])
    g1, g2 = (float(v[0]) for v in ell.phase.g1g2(best.x[None, N_SHAPE_PARAMS:]))
    warnings = []
    if pb.geometry_fixed:
        warnings.append("no observing geometry in the data: the period is close to synodic and the pole is not "
                        "determined")
    if post is not None and not (post.tau_max * 50 < post.n_steps * (1 - BURN_FRACTION)):
        warnings.append("posterior chain shorter than 50 autocorrelation times: intervals are indicative")
    ll = -0.5 * best.chi2 - 0.5 * float(np.sum(np.log(2 * np.pi / ell.w)))
    ab, bc = math.exp(best.x[4]), math.exp(best.x[5])
    nan = float("nan")
    return GeometricPAFit(
        object_id=pb.object_id, status=status, message=message,
        period_h=best_p if status == "unique" else nan, period_h_lo=p_lo, period_h_hi=p_hi,
        best_period_h=best_p, period_syn_h=pb.period_syn_h,
        pole_lon_deg=nan if pb.geometry_fixed else float(best.x[1]),
        pole_lat_deg=nan if pb.geometry_fixed else float(best.x[2]), poles=poles,
        b_over_a=1.0 / ab, c_over_b=1.0 / bc, h_mag=dict(zip(ell.group_names, map(float, zp[0]))),
        g1=g1, g2=g2, phase_model=ell.phase.name, law=ell.law.name, chi2=best.chi2, dof=int(dof),
        reduced_chi2=best.chi2 / dof, max_log_likelihood=ll, bic=k * math.log(n) - 2.0 * ll, n_params=int(k),
        n_points=n, chi2_null=chi2_null, delta_bic_rotation=float(delta_bic),
        alias_family=tuple(AliasMember(HOURS_PER_DAY / float(s.x[0]), (s.chi2 - best.chi2) / s2, float(s.x[1]),
                                       float(s.x[2]), bool(is_same)) for s, is_same in zip(family, same)),
        alias_delta_chi2=alias_dchi2, pole_delta_chi2=pole_dchi2, pole_sense_spread_per_d=spread, geometry_fixed=pb.geometry_fixed, geometry_note=pb.geometry_note,
        parameters=best.x, parameter_names=_names(ell), posterior=post,
        scan_frequency_per_d=pb.f0 + pb.df * np.arange(pb.n_freq), scan_chi2=best_scan,
        warnings=tuple(warnings),
    )


def _angle_deg(x1, x2) -> float:
    a, b = KR.pole_vectors(x1[1], x1[2]), KR.pole_vectors(x2[1], x2[2])
    return math.degrees(math.acos(max(-1.0, min(1.0, float(a @ b)))))


def _pole_family(pb: _Problem, best: _Solution):
    """Refine the best period from the mirror pole and from POLE_STARTS spread poles.

    Returns the (possibly improved) best solution and the list of distinct pole
    solutions ``(solution, kind)``: 'best', 'mirror' (longitude + 180 deg), 'other'.
    """
    found = [(best, "best")]
    mirror = _refine(pb, np.r_[best.x[0], (best.x[1] + 180.0) % 360.0, best.x[2:]], best.x[0])
    found.append((mirror, "mirror"))
    lon, lat = KR.fibonacci_poles(POLE_STARTS)
    for lo_, la_ in zip(lon, lat):
        x0 = _linear_start(pb, float(best.x[0]), float(lo_), float(la_))
        x0[4:] = best.x[4:]
        found.append((_refine(pb, x0, best.x[0]), "other"))
    top = min(found, key=lambda item: item[0].chi2)[0]
    out = []
    for sol, kind in sorted(found, key=lambda item: item[0].chi2):
        if all(_angle_deg(sol.x, o.x) > SAME_POLE_DEG for o, _ in out):
            out.append((sol, kind))
    # label: the best, then whichever is nearest to its mirror direction
    out = [(s_, "best" if s_ is top else ("mirror" if _angle_deg(s_.x, np.r_[0, top.x[1] + 180.0, top.x[2]]) <
                                            SAME_POLE_DEG else "other")) for s_, _ in out]
    return top, out


def _distinct(sols, df):
    """Drop solutions within SAME_SOLUTION_STEPS grid steps of a better one (sorted input)."""
    out = []
    for s in sols:
        if all(abs(s.x[0] - o.x[0]) > SAME_SOLUTION_STEPS * df for o in out):
            out.append(s)
    return out


def _period_interval(sol: _Solution, post, s2, n):
    """68 % interval of the period: posterior percentiles, else the least-squares curvature."""
    if post is not None and post.samples.size:
        p = HOURS_PER_DAY / post.samples[:, 0]
        lo, hi = np.percentile(p, [15.865, 84.135])
        return float(lo), float(hi)
    jac = sol.jac[:n]
    cov = np.linalg.pinv(jac.T @ jac) * s2
    sf = math.sqrt(max(cov[0, 0], 0.0))
    f = float(sol.x[0])
    return HOURS_PER_DAY / (f + sf), HOURS_PER_DAY / max(f - sf, 1e-12)


def _alias_threshold(pb: _Problem) -> float:
    """Delta chi2 of the alias family: ALIAS_DELTA_CHI2, raised to 2 ln N for N independent trials.

    The rotation's main (second) harmonic has about ``N = 2 (f_hi - f_lo) span`` independent
    frequencies in the searched band; among N noise-only minima the deepest beats a given one by
    about ``2 ln N`` in chi-square (a Bonferroni-type look-elsewhere allowance: N exp(-D/2) = 1),
    so a period is unique only when the runner-up is worse by more than that.
    """
    span = float(pb.scan.t[-1] - pb.scan.t[0])
    n_indep = max(2.0, 2.0 * pb.df * (pb.n_freq - 1) * span)
    return float(max(ALIAS_DELTA_CHI2, 2.0 * math.log(n_indep)))


def pole_fit_spread_chi2(dof: int) -> float:
    """Delta chi-square within which another pole fits as well by goodness of fit: :data:`POLE_FIT_SIGMAS`
    standard deviations of the chi-square law, ``sqrt(2 dof)`` (the one definition; the PA sidereal
    fit here and the tumbling solutions' mirror poles, :mod:`tumble.classify.poles`, use it)."""
    return float(POLE_FIT_SIGMAS * math.sqrt(2.0 * max(int(dof), 0)))


def _pole_threshold(alias_dchi2: float, dof: int) -> float:
    """Delta chi2 (scaled) within which another pole is as good: :func:`pole_fit_spread_chi2`, at least the alias one."""
    return float(max(alias_dchi2, pole_fit_spread_chi2(dof)))


def _pole_sense_spread(pb: _Problem) -> float:
    """Largest sidereal-frequency difference of one rotation seen with different poles, cycles/day.

    The rotation phase seen from the phase-angle bisector is ``2 pi f_sid t - s theta(t)``, with
    ``theta`` the bisector's longitude about the pole and ``|s| <= 1`` set by the pole; a pole of
    the opposite sense matches the same synodic signal at a sidereal frequency shifted by up to
    ``2 <dtheta/dt> / 2 pi``. The mean rate is the least-squares slope of the bisector's unwrapped
    ecliptic longitude against time; two grid steps are added for the refined optimum's scatter.
    With no geometry (a fixed bisector) the spread is the two grid steps alone.
    """
    b = pb.scan.bisector
    t = pb.scan.t
    lam = np.unwrap(np.arctan2(b[:, 1], b[:, 0]))
    slope = 0.0
    if np.ptp(t) > 0 and not pb.geometry_fixed:
        slope = float(np.polyfit(t - t.mean(), lam, 1)[0])
    return abs(slope) / math.pi + SAME_ROTATION_EXTRA_STEPS * pb.df


def _decide(delta_bic, family, pb, reduced_chi2, alias_dchi2, f_best):
    """Status and message (the decision rule of docs/methods-sparse.md)."""
    if reduced_chi2 > MAX_REDUCED_CHI2:
        return ("undecided",
                f"undecided period: the best ellipsoid leaves a reduced chi-square of {reduced_chi2:.3g} "
                f"(above {MAX_REDUCED_CHI2:g}); these data hold more than a PA ellipsoid with a phase curve explains")
    if delta_bic < DETECTION_DELTA_BIC:
        return ("no rotation detected",
                f"the rotating ellipsoid does not beat a constant body with the same phase curve "
                f"(Delta BIC {delta_bic:.1f} < {DETECTION_DELTA_BIC:g}): no period from these data")
    f_lo, f_hi = pb.f0, pb.f0 + pb.df * (pb.n_freq - 1)
    if min(f_best - f_lo, f_hi - f_best) < EDGE_FRACTION * f_best:
        return ("undecided",
                f"undecided period: the best period {HOURS_PER_DAY / f_best:.6g} h lies at the edge of the searched "
                f"range ({HOURS_PER_DAY / f_hi:.4g}-{HOURS_PER_DAY / f_lo:.4g} h); widen period_range_h")
    if len(family) > 1:
        periods = ", ".join(f"{HOURS_PER_DAY / s.x[0]:.6g}" for s in family[:6])
        more = "" if len(family) <= 6 else f" and {len(family) - 6} more"
        return ("undecided",
                f"undecided period: {len(family)} periods fit within Delta chi2 {alias_dchi2:.3g} of the best "
                f"({periods}{more} h)")
    kind = "sidereal" if not pb.geometry_fixed else "apparent (no geometry)"
    return "unique", f"one {kind} period stands out by more than Delta chi2 {alias_dchi2:.3g}"
