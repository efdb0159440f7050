"""Frequency-integrated evidence NPA:PA of the shape-free families (a flat driver over a frozen problem).

At fixed frequencies the marginal likelihood over every linear coefficient, the zero-points and the
error scale is exact (:func:`tumble.model.linear_log_evidence`); each family is an equal-weight
mixture over its orders (:mod:`tumble.classify.families`). The frequencies are integrated
numerically under the priors of :mod:`tumble.classify.prior`:

- ``f1`` over the windows around the strongest peaks of a coarse 1-D scan and their
  half/double/3:2 aliases (the same truncated prior in both families, so the restriction cancels);
- ``f2`` over the admissible set ``A(f1)`` (renormalised log-uniform prior);

by :func:`tumble.classify.quadrature.integrate_peak` on each window, and a product (separable)
rule for the two-dimensional windows. The quadrature error is the difference between the two
rules on the dominant windows.

The driver :func:`fourier_evidence` is a flat sequence of steps named after what they do, each a
plain function of the frozen :class:`EvidenceProblem`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import partial

import numpy as np

from tumble.classify.families import NPA_COMBO_ORDERS, NPA_MAX_BASE_HARMONICS, mixture, npa_variants, pa_variants
from tumble.classify.noise import MODEL_ERROR_FLOOR_MAG, error_scale_floor, geometry_error_floor
from tumble.classify.prior import (
    DAILY_WIDTH,
    admissible_f2_share,
    commensurate_mask,
    daily_alias_mask,
    f2_log_prior,
    frequency_limits,
    log_uniform_logpdf,
)
from tumble.classify.quadrature import PeakIntegral, integrate_peak, log_trapezoid, logsumexp, peak_indices
from tumble.classify.thresholds import MIN_CYCLES
from tumble.exceptions import TumbleError
from tumble.model import FourierBasis, FourierVariant, LinearData, fit_linear, linear_log_evidence, prepare_linear

__all__ = ["ClassifyError", "EvidenceResult", "FrequencyWidth", "frequency_width", "combined_frequency_width",
           "session_jackknife_f1", "pa_red_noise_beta", "FREQUENCY_WIDTH_RULES", "EvidenceProblem", "fourier_evidence", "fourier_evidence_with_problem", "build_problem",
           "NpaWindow", "npa_window"]

#: Largest f2 grid per window (the step is widened beyond it; the peaks are refined anyway).
MAX_F2_GRID = 3000
#: Candidate f1 windows (after the best) that get the two-period integration.
NPA_MAX_WINDOWS = 4
#: Windows more than this many nats below the best PA window are not given the NPA integration.
WINDOW_LN_RANGE = 15.0
#: Peaks of the light two-period scan integrated per window.
N_F2_PEAKS = 4
#: A coordinate-ascent scan of f1 at the best f2 is run only on coarse grids up to this length.
MAX_ASCENT_GRID = 40_000
#: Smallest quadrature error credited to ln B (nats): the rules agree to about this on resolved peaks.
MIN_LNB_ERROR = 0.05
#: The fine search for a narrow PA peak spans this many Laplace widths of the found peak on each side:
#: the richer harmonic orders of the mixture can have a peak several times narrower than the order
#: that dominates the coarse grid, offset from it by a few of its widths when that order is too poor.
FINE_SEARCH_SIGMAS = 6.0
#: Points of that fine grid (a step of 0.05 widths resolves a peak 20 times narrower).
FINE_SEARCH_POINTS = 241
#: A fine-grid point must beat the found peak by this many nats to replace it (above the grid's noise).
FINE_SEARCH_MIN_GAIN = 0.5
#: A PA peak within this many of its widths of the daily-alias exclusion is pinned at its edge.
DAILY_EDGE_SIGMAS = 3.0
#: The delete-one-session jackknife of f1 needs at least this many sessions (common practice: the
#: jackknife variance from fewer groups is itself too uncertain to use).
MIN_JACKKNIFE_SESSIONS = 4
#: Half-width of the f1 search of each jackknife replicate, in coarse steps (a step is 1/(6 span):
#: the replicate stays on the same peak, never on a cycle-count alias 1/span away).
JACKKNIFE_HALF_WIDTH_STEPS = 1.0


class ClassifyError(TumbleError, ValueError):
    """The classification cannot run on these data or with these settings."""


def observable_amplitude(fourier_mag, session) -> float:
    """Peak-to-peak (mag) of a fitted Fourier part after removing its mean in each session.

    With a free zero-point per session, the level of a slow Fourier term from night to night trades
    with the zero-points and is not measured; only its variation within the sessions is. The raw
    peak-to-peak of such a fit can reach magnitudes (a slow term against the nightly offsets of
    differential photometry), which must not set a model-error floor or be reported as an amplitude.
    Sparse points (session -1) form one group.
    """
    y = np.asarray(fourier_mag, float).copy()
    s = np.asarray(session)
    for k in np.unique(s):
        m = s == k
        y[m] -= y[m].mean()
    return float(np.ptp(y)) if y.size else math.nan


@dataclass(frozen=True)
class EvidenceResult:
    """Bayes factor NPA:PA of the shape-free models and the frequencies behind it.

    Attributes
    ----------
    ln_z_pa, ln_z_npa : float
        Log evidences (nats) of the PA and NPA families, up to a common constant
        (f1 prior truncated to the candidate windows, identical in both).
    ln_bayes_factor : float
        ``ln_z_npa - ln_z_pa`` (nats); NaN when NPA is not testable.
    ln_bayes_factor_err : float
        Estimated quadrature error of ``ln_bayes_factor`` (nats).
    f1_per_d, f1_sigma_per_d : float
        Fundamental light-curve frequency of the dominant PA window and its
        posterior standard deviation, cycles/day.
    f1_npa_per_d, f2_per_d, f2_sigma_per_d, f1_npa_sigma_per_d : float
        Frequency pair of the dominant NPA window (cycles/day) and their
        standard deviations.
    pa_window_mass, npa_window_mass : float
        Posterior mass of the dominant window within each family (1 = unimodal).
    pa_variant, npa_variant : str
        The most probable harmonic order of each family at its best frequency.
    second_harmonic_dominates : bool
        The 2nd harmonic of ``f1`` carries more power than the first (double-peaked curve).
    amplitude_mag : float
        Peak-to-peak amplitude of the best PA fit's Fourier part over the observed points, mag.
    windows : tuple of dict
        Per candidate ``f1`` window: ``f1_per_d``, ``ln_pa``, ``ln_npa``, ``f2_per_d``.
    window_disagreement : bool
        Windows holding at least 10 % of the combined posterior mass favour different hypotheses.
    npa_pairs : tuple of (float, float)
        Frequency pairs (f1, f2), cycles/day, of the strongest two-period peaks, best first
        (starting points of the physical fit).
    kappa_pa, kappa_npa : float
        Fitted error scales of the best PA and NPA fits (1 = errors as quoted plus the floor).
    delta_bic : float
        ``BIC_NPA - BIC_PA`` at the best frequencies of the largest variants.
    n_evaluations : int
        Frequency (pair) evaluations of the marginal likelihood.
    route : str
        Description of how the evidence was computed.
    f2_admissible_share : float
        Share of the log-frequency range ``[1.5/span, f1/2]`` at the dominant PA window's ``f1``
        that is admissible for a second frequency (:func:`tumble.classify.prior.admissible_f2_share`).
    npa_testable : bool
        An admissible NPA alternative exists on these data.
    error_floor_mag, kappa_min : float
        The model-error floor (mag) and the error-scale bound used.
    f1_sigma_white_per_d : float
        Laplace width of the PA peak (independent residuals), c/d; ``f1_sigma_per_d`` is this width
        by the rule ``f1_sigma_method`` (:data:`FREQUENCY_WIDTH_RULES`), widened at the daily edge.
    f1_red_noise_beta : float
        Time-averaging factor of the best PA fit's residuals (1 = white; diagnostic).
    f1_sigma_jackknife_per_d : float
        Delete-one-session jackknife width of f1, c/d (NaN unless computed; diagnostic).
    f1_sigma_method : str
        The width rule used.
    f1_at_daily_edge : bool
        The PA peak sits at the edge of the daily-alias exclusion: the period cannot be told from
        the nightly zero-points closer to k cycles/day, and ``f1_sigma_per_d`` is widened to the
        exclusion's half-width.
    f1_fine_gain : float
        Nats by which the fine search's narrow peak beat the window's peak (0: the peak was kept).
    """

    ln_z_pa: float
    ln_z_npa: float
    ln_bayes_factor: float
    ln_bayes_factor_err: float
    f1_per_d: float
    f1_sigma_per_d: float
    f1_npa_per_d: float
    f1_npa_sigma_per_d: float
    f2_per_d: float
    f2_sigma_per_d: float
    pa_window_mass: float
    npa_window_mass: float
    pa_variant: str
    npa_variant: str
    second_harmonic_dominates: bool
    amplitude_mag: float
    windows: tuple
    window_disagreement: bool
    npa_pairs: tuple
    kappa_pa: float
    kappa_npa: float
    delta_bic: float
    n_evaluations: int
    route: str
    f2_admissible_share: float = math.nan
    npa_testable: bool = True
    error_floor_mag: float = math.nan
    kappa_min: float = math.nan
    f1_sigma_white_per_d: float = math.nan
    f1_red_noise_beta: float = math.nan
    f1_sigma_jackknife_per_d: float = math.nan
    f1_sigma_method: str = ""
    f1_at_daily_edge: bool = False
    f1_fine_gain: float = 0.0


@dataclass(frozen=True)
class FrequencyWidth:
    """The 1-sigma width of the PA fundamental frequency by several estimators (c/d).

    Attributes
    ----------
    white : float
        Laplace width of the frequency-marginal evidence (independent residuals assumed).
    beta : float
        Time-averaging factor of the best PA fit's residuals (:func:`tumble.periodogram.red_noise.red_noise_factor`).
    jackknife : float
        Delete-one-session jackknife standard deviation of the best frequency (NaN with fewer than
        :data:`MIN_JACKKNIFE_SESSIONS` sessions).
    n_sessions : int
        Sessions (groups) of the jackknife.
    """

    white: float
    beta: float
    jackknife: float
    n_sessions: int


@dataclass(frozen=True)
class EvidenceProblem:
    """Everything the frequency integration needs, fixed before it starts.

    Attributes
    ----------
    data : tumble.model.LinearData
        Whitened data with the model-error floor and the error-scale bound.
    span_d : float
    f_lo, f_hi : float
        Range of the f1 prior, c/d.
    f2_lo : float
        Lowest admissible f2, c/d (``MIN_CYCLES / span``).
    step, step2 : float
        Coarse f1 step and f2 grid step, c/d.
    oversample : float
    nightly : bool
        Most points have a nightly zero-point (f1 at k/day is excluded).
    pa_basis, npa_basis : tumble.model.FourierBasis
    coarse_grid, coarse_values : numpy.ndarray
        The coarse 1-D scan (light PA model) and its log evidence with the f1 exclusions.
    error_floor_mag, kappa_min : float
    """

    data: LinearData
    span_d: float
    f_lo: float
    f_hi: float
    f2_lo: float
    step: float
    step2: float
    oversample: float
    nightly: bool
    pa_basis: FourierBasis
    npa_basis: FourierBasis
    coarse_grid: np.ndarray
    coarse_values: np.ndarray
    error_floor_mag: float
    kappa_min: float

    # -- log densities (prior included) ---------------------------------------------------------
    def f1_log_prior(self, f):
        """Log-uniform f1 prior with the daily exclusion (``-inf`` where excluded)."""
        f = np.asarray(f, float)
        return np.where(daily_alias_mask(f, self.span_d, self.nightly), -np.inf,
                        log_uniform_logpdf(f, self.f_lo, self.f_hi))

    def pa_log_density(self, f):
        """PA family: ``ln Z(f1) + ln p(f1)`` over an array of f1."""
        return mixture(linear_log_evidence(self.data, self.pa_basis, f)) + self.f1_log_prior(f)

    def npa_log_density_f2(self, f2, *, f1):
        """NPA family along f2 at fixed f1: ``ln Z(f1, f2) + ln p(f2 | f1)``."""
        f2 = np.asarray(f2, float)
        return (mixture(linear_log_evidence(self.data, self.npa_basis, np.full(len(f2), f1), f2))
                + f2_log_prior(f1, f2, self.span_d))

    def npa_log_density_f1(self, f1, *, f2):
        """NPA family along f1 at fixed f2: ``ln Z(f1, f2) + ln p(f1) + ln p(f2 | f1)``."""
        f1 = np.asarray(f1, float)
        return (mixture(linear_log_evidence(self.data, self.npa_basis, f1, np.full(len(f1), f2)))
                + self.f1_log_prior(f1) + f2_log_prior(f1, f2, self.span_d))


@dataclass(frozen=True)
class NpaWindow:
    """The two-period integral of one f1 window.

    Attributes
    ----------
    ln, ln_alt : float
        ``ln ∫∫`` by the chosen and the alternative quadrature rule.
    f1, f2, s1, s2 : float
        Best frequencies and their Laplace widths, c/d.
    mass : float
        Share of the window's f2 integral in its dominant f2 peak.
    peaks : tuple of (f1, f2, ln)
        The f2 peaks found at the window's f1.
    n_evaluations : int
    """

    ln: float
    ln_alt: float
    f1: float
    f2: float
    s1: float
    s2: float
    mass: float
    peaks: tuple
    n_evaluations: int


def _empty_window(f1c) -> NpaWindow:
    return NpaWindow(-np.inf, -np.inf, float(f1c), np.nan, np.nan, np.nan, 1.0, (), 0)


def build_problem(lc, *, p_min_h: float, p_max_h: float, oversample: float, weights, max_coarse: int,
                  error_floor_mag: float | None) -> EvidenceProblem:
    """The coarse scan, the model-error floor and the error-scale bound, frozen into a problem."""
    auto_floor = error_floor_mag is None
    data = prepare_linear(lc, weights=weights, error_floor_mag=MODEL_ERROR_FLOOR_MAG if auto_floor else error_floor_mag)
    span = data.span_d
    limits = frequency_limits(span, p_min_h, p_max_h)
    if limits is None:
        raise ClassifyError(
            f"{lc.object_id}: the data span {span:.3g} d cannot cover {MIN_CYCLES} cycles of any period in "
            f"{p_min_h}..{p_max_h} h")
    f_lo, f_hi = limits
    scan_basis = FourierBasis.build([FourierVariant(2, False)])
    step = 1.0 / (oversample * span * 2)
    n_coarse = int((f_hi - f_lo) / step) + 1
    if n_coarse > max_coarse:
        step = (f_hi - f_lo) / max_coarse
        n_coarse = max_coarse + 1
    grid = f_lo + step * np.arange(n_coarse)
    nightly = bool(np.mean(lc.session >= 0) > 0.5 and lc.n_sessions >= 2)
    coarse = linear_log_evidence(data, scan_basis, grid)[:, 0]
    coarse = np.where(daily_alias_mask(grid, span, nightly), -np.inf, coarse)
    if auto_floor:
        best = grid[peak_indices(coarse, 1, 3)[0]]
        amp0 = observable_amplitude(fit_linear(data, FourierBasis.build([FourierVariant(4, False)]), 0, best).fourier_mag,
                                    lc.session)
        error_floor_mag = geometry_error_floor(lc, amp0)
    kappa_min = error_scale_floor(lc, error_floor_mag)
    data = prepare_linear(lc, weights=weights, error_floor_mag=error_floor_mag, kappa_min=kappa_min)
    pa_vars = pa_variants(span)
    return EvidenceProblem(
        data=data, span_d=span, f_lo=f_lo, f_hi=f_hi, f2_lo=MIN_CYCLES / span, step=step,
        step2=1.0 / (oversample * span * max(NPA_COMBO_ORDERS)), oversample=oversample, nightly=nightly,
        pa_basis=FourierBasis.build(pa_vars), npa_basis=FourierBasis.build(npa_variants(pa_vars)),
        coarse_grid=grid, coarse_values=coarse, error_floor_mag=float(error_floor_mag), kappa_min=float(kappa_min))


def candidate_f1_centres(problem: EvidenceProblem, n_windows: int) -> list:
    """Centres of the f1 windows: the strongest coarse peaks and the aliases of the best."""
    peaks = peak_indices(problem.coarse_values, n_windows, 3)
    centres = [problem.coarse_grid[i] for i in peaks]
    best = centres[0]
    for alias in (best / 2, best * 2, best * 1.5, best / 1.5):
        if problem.f_lo <= alias <= problem.f_hi and all(abs(alias - c) > 3 * problem.step for c in centres):
            centres.append(alias)
    return centres


def integrate_pa_window(problem: EvidenceProblem, centre: float) -> PeakIntegral:
    """The PA family's integral over one f1 window."""
    return integrate_peak(problem.pa_log_density, centre, 2 * problem.step, problem.f_lo, problem.f_hi)


def windows_for_npa(ln_pa) -> list:
    """Indices of the PA windows that also get the two-period integration (best first, within range)."""
    order = list(np.argsort(-ln_pa))
    return sorted(int(i) for k, i in enumerate(order)
                  if k < NPA_MAX_WINDOWS and (k < 2 or ln_pa[i] > ln_pa.max() - WINDOW_LN_RANGE))


def _f2_grid(problem: EvidenceProblem, f2_hi: float) -> tuple:
    step2 = problem.step2
    n2 = int((f2_hi - problem.f2_lo) / step2) + 1
    if n2 > MAX_F2_GRID:
        step2 = (f2_hi - problem.f2_lo) / MAX_F2_GRID
        n2 = MAX_F2_GRID + 1
    grid2 = problem.f2_lo + step2 * np.arange(n2)
    return grid2[grid2 <= f2_hi], step2


def _light_f2_scan(problem: EvidenceProblem, f1c: float, grid2) -> np.ndarray:
    """Peak finding along f2 with one light two-period variant (the best PA base's harmonics, order 2)."""
    lz1 = linear_log_evidence(problem.data, problem.pa_basis, [f1c])[0]
    base = problem.pa_basis.variants[int(np.argmax(lz1))]
    light = FourierBasis.build([FourierVariant(min(base.n_harmonics, NPA_MAX_BASE_HARMONICS), base.drift, 2)])
    v = linear_log_evidence(problem.data, light, np.full(len(grid2), f1c), grid2)[:, 0]
    return np.where(commensurate_mask(f1c, grid2, problem.span_d), -np.inf, v)


def _npa_window_once(problem: EvidenceProblem, f1c: float) -> NpaWindow:
    """Two-period integral of the window at ``f1c`` (separable product rule)."""
    f2_hi = 0.5 * f1c
    if not f2_hi > problem.f2_lo * 1.01:
        return _empty_window(f1c)
    grid2, step2 = _f2_grid(problem, f2_hi)
    n_eval = len(grid2)
    v_light = _light_f2_scan(problem, f1c, grid2)
    pk2 = peak_indices(v_light, N_F2_PEAKS, 3)
    f2_at_c = partial(problem.npa_log_density_f2, f1=f1c)
    f2_windows = [integrate_peak(f2_at_c, grid2[j], 2 * step2, problem.f2_lo, f2_hi) for j in pk2]
    n_eval += sum(w.n_evaluations for w in f2_windows)
    # the continuum between the peaks on a three-times thinner grid
    thin = grid2[::3]
    mask = np.ones(len(thin), bool)
    for j in pk2:
        mask &= np.abs(thin - grid2[j]) > 2 * step2
    cont = -np.inf
    if mask.sum() > 1:
        n_eval += int(mask.sum())
        cont = log_trapezoid(thin[mask], f2_at_c(thin[mask]))
    ln_f2_parts = [w.ln_integral for w in f2_windows] + [cont]
    jbest = int(np.argmax([w.ln_integral for w in f2_windows]))
    f2b = f2_windows[jbest].best
    # f1 width under NPA at the best f2
    pk1 = integrate_peak(partial(problem.npa_log_density_f1, f2=f2b), f1c, 2 * problem.step, problem.f_lo,
                         problem.f_hi)
    n_eval += pk1.n_evaluations
    # re-centre f2 at the NPA's own f1 and redo the dominant f2 window
    f1n = pk1.best
    f2_at_n = partial(problem.npa_log_density_f2, f1=f1n)
    hi_n = min(0.5 * f1n, f2_hi)
    w2n = integrate_peak(f2_at_n, f2b, 2 * step2, problem.f2_lo, hi_n)
    n_eval += w2n.n_evaluations
    # the other f2 windows and the continuum on the same f1 slice: with precise data the
    # evidence is sharp in f1, and slices at different f1 must not be mixed
    others = []
    if abs(f1n - f1c) > 0:
        found = [w2n.best]
        for k, w in enumerate(f2_windows):
            if k == jbest or w.best > hi_n or min(abs(w.best - b) for b in found) < 3 * step2:
                continue
            wk = integrate_peak(f2_at_n, w.best, 2 * step2, problem.f2_lo, hi_n)
            n_eval += wk.n_evaluations
            if min(abs(wk.best - b) for b in found) >= 3 * step2:  # not the same peak climbed again
                found.append(wk.best)
                others.append(wk.ln_integral)
        sel = mask & (thin <= hi_n) & (np.abs(thin - w2n.best) > 2 * step2)
        if sel.sum() > 1:
            n_eval += int(sel.sum())
            others.append(log_trapezoid(thin[sel], f2_at_n(thin[sel])))
    else:
        others = [p for k, p in enumerate(ln_f2_parts) if k != jbest]
    if not np.isfinite(w2n.best_value):
        # no admissible f2 at the NPA's own f1: the window holds no NPA model at all
        return NpaWindow(-np.inf, -np.inf, float(f1n), float(w2n.best), float(pk1.sigma), np.nan, 1.0, (), n_eval)
    ln_f2_n = logsumexp([w2n.ln_integral] + others)
    # separable product rule: ∫∫ Z p1 p2 ≈ [∫ Z(f1, f2*) p1 p2 df1] [∫ Z(f1*, f2) p2 df2] / [Z(f1*, f2*) p2(f2*)]
    ln_npa = pk1.ln_integral + ln_f2_n - w2n.best_value
    ln_npa_alt = pk1.ln_integral_alt + logsumexp([w2n.ln_integral_alt] + others) - w2n.best_value
    mass = float(np.exp(w2n.ln_integral - ln_f2_n)) if np.isfinite(ln_f2_n) else 1.0
    peaks = tuple((float(f1c), float(w.best), float(w.ln_integral)) for w in f2_windows)
    return NpaWindow(float(ln_npa), float(ln_npa_alt), float(f1n), float(w2n.best), float(pk1.sigma),
                     float(w2n.sigma), mass, peaks, n_eval)


def npa_window(problem: EvidenceProblem, f1c: float) -> NpaWindow:
    """Two-period integral of the window at ``f1c``, re-run once at the NPA's own f1 if it moved.

    A drifting one-period fit can prefer a slightly different f1 than the lattice basis.
    """
    r = _npa_window_once(problem, f1c)
    if np.isfinite(r.f1) and abs(r.f1 - f1c) > 0.25 * problem.step:
        r2 = _npa_window_once(problem, r.f1)
        n = r.n_evaluations + r2.n_evaluations
        r = r2 if r2.ln >= r.ln else r
        r = NpaWindow(**{**r.__dict__, "n_evaluations": n})
    return r


def ascent_windows(problem: EvidenceProblem, f2_best: float, known_f1) -> list:
    """New f1 centres from a scan of f1 at the best f2 with a light two-period basis.

    Coordinate ascent: a better f1 outside the windows (a lattice vector the one-period scan missed)
    becomes a new window of both families.
    """
    grid = problem.coarse_grid
    if not (np.isfinite(f2_best) and len(grid) <= MAX_ASCENT_GRID):
        return []
    light = FourierBasis.build([FourierVariant(2, True, 2)])
    g1 = grid[grid >= 2.0 * f2_best]
    if len(g1) <= 3:
        return []
    v1 = linear_log_evidence(problem.data, light, g1, np.full(len(g1), f2_best))[:, 0]
    v1 = np.where(daily_alias_mask(g1, problem.span_d, problem.nightly), -np.inf, v1)
    return [float(g1[j]) for j in peak_indices(v1, 2, 3)
            if all(abs(g1[j] - f) > 3 * problem.step for f in known_f1)]


def _best_pa_fit(problem: EvidenceProblem, f1: float):
    """The most probable PA variant's fit at ``f1`` and that variant's index."""
    vpa = int(np.argmax(linear_log_evidence(problem.data, problem.pa_basis, [f1])[0]))
    return fit_linear(problem.data, problem.pa_basis, vpa, f1), vpa


def pa_red_noise_beta(problem: EvidenceProblem, lc, f1: float) -> float:
    """Time-averaging factor beta of the best PA fit's residuals at ``f1`` (Winn et al. 2008, section 3)."""
    from tumble.periodogram.red_noise import red_noise_factor

    fit, _ = _best_pa_fit(problem, f1)
    data = problem.data
    n_par = len(fit.coefficients) + max(0, data.n_nuisance - len(np.unique(lc.session)))
    return red_noise_factor(lc.t, data.y - fit.model_mag, 1.0 / data.sw, lc.session, n_params=n_par).beta


def _pa_log_density_of(f, *, problem: EvidenceProblem, data: LinearData):
    """The PA family's ``ln Z(f1) + ln p(f1)`` on other data (a jackknife replicate) with the problem's basis and prior."""
    return mixture(linear_log_evidence(data, problem.pa_basis, f)) + problem.f1_log_prior(f)


def session_jackknife_f1(problem: EvidenceProblem, lc, f1: float, weights=None) -> tuple:
    """Delete-one-session jackknife standard deviation of the PA frequency (c/d) and the number of sessions.

    Each replicate drops one session (sparse points, session -1, are never dropped), rebuilds the
    whitened data with the same model-error floor and error-scale bound, and finds the peak of the
    PA family's frequency-marginal evidence within :data:`JACKKNIFE_HALF_WIDTH_STEPS` coarse steps of
    ``f1``. The grouped jackknife variance is ``(g - 1)/g * sum (f_i - mean f)^2`` over the ``g``
    sessions (Quenouille 1956, Tukey 1958; for groups of observations, Efron & Tibshirani 1993,
    An Introduction to the Bootstrap, section 11.5). It carries the night-to-night scatter of the
    frequency that correlated residuals within nights (and a shape that changes from night to night)
    produce, which the Laplace width of independent residuals does not.
    """
    session = np.asarray(lc.session)
    groups = [s for s in np.unique(session) if s >= 0]
    if len(groups) < MIN_JACKKNIFE_SESSIONS:
        return math.nan, len(groups)
    w = None if weights is None else np.asarray(weights, float)
    half = JACKKNIFE_HALF_WIDTH_STEPS * problem.step
    found = []
    for g in groups:
        keep = session != g
        sub = lc.subset(keep)
        data = prepare_linear(sub, weights=None if w is None else w[keep], error_floor_mag=problem.error_floor_mag,
                              kappa_min=problem.kappa_min)
        pk = integrate_peak(partial(_pa_log_density_of, problem=problem, data=data), f1, half, problem.f_lo,
                            problem.f_hi)
        found.append(pk.best)
    f = np.asarray(found, float)
    ng = len(f)
    return float(math.sqrt((ng - 1) / ng * np.sum((f - f.mean()) ** 2))), ng


def frequency_width(problem: EvidenceProblem, lc, f1: float, sigma_white: float, weights=None,
                    jackknife: bool = False) -> FrequencyWidth:
    """The PA frequency's width by the Laplace rule, the red-noise factor and (optionally) the session jackknife."""
    beta = pa_red_noise_beta(problem, lc, f1)
    jack, ng = session_jackknife_f1(problem, lc, f1, weights) if jackknife else (math.nan, 0)
    return FrequencyWidth(float(sigma_white), float(beta), float(jack), int(ng))


def fine_pa_peak(problem: EvidenceProblem, peak: PeakIntegral) -> tuple:
    """A narrower, higher PA peak near the window's peak: ``(PeakIntegral, gain in nats)``.

    The window's grid resolves the peak of the dominant harmonic order; a richer order of the
    mixture can put a peak several times narrower and many nats higher within a few widths of it
    (the poorer order's misfit biases its peak). The mixture is evaluated on
    :data:`FINE_SEARCH_POINTS` points over +-:data:`FINE_SEARCH_SIGMAS` widths; a point higher by
    :data:`FINE_SEARCH_MIN_GAIN` nats is refined by :func:`integrate_peak` and replaces the peak.
    Returns the given peak and 0 when nothing higher is found.
    """
    if not (np.isfinite(peak.sigma) and peak.sigma > 0):
        return peak, 0.0
    half = FINE_SEARCH_SIGMAS * peak.sigma
    grid = np.linspace(peak.best - half, peak.best + half, FINE_SEARCH_POINTS)
    grid = grid[(grid >= problem.f_lo) & (grid <= problem.f_hi)]
    if grid.size < 3:
        return peak, 0.0
    v = problem.pa_log_density(grid)
    j = int(np.argmax(v))
    gain = float(v[j] - peak.best_value)
    if not gain > FINE_SEARCH_MIN_GAIN:
        return peak, 0.0
    step = grid[1] - grid[0]
    fine = integrate_peak(problem.pa_log_density, float(grid[j]), 2.0 * step, problem.f_lo, problem.f_hi)
    return (fine, float(fine.best_value - peak.best_value)) if fine.best_value > peak.best_value else (peak, 0.0)


def at_daily_edge(problem: EvidenceProblem, f1: float, sigma: float) -> bool:
    """The PA peak lies within :data:`DAILY_EDGE_SIGMAS` widths of the daily-alias exclusion (nightly data only).

    Without a width (no negative curvature: a peak cut by the exclusion has none) one coarse step is used.
    """
    if not problem.nightly:
        return False
    d = DAILY_EDGE_SIGMAS * sigma if np.isfinite(sigma) and sigma > 0 else problem.step
    return bool(np.any(daily_alias_mask(np.array([f1 - d, f1 + d]), problem.span_d, problem.nightly)))


def _width_white(w: FrequencyWidth) -> float:
    return w.white


def _width_beta(w: FrequencyWidth) -> float:
    return w.white * w.beta if np.isfinite(w.beta) else w.white


def _width_jackknife(w: FrequencyWidth) -> float:
    return max(w.white, w.jackknife) if np.isfinite(w.jackknife) else _width_beta(w)


#: Rules that turn the estimators of :class:`FrequencyWidth` into the reported f1 width, by name.
FREQUENCY_WIDTH_RULES = {"white": _width_white, "beta": _width_beta, "jackknife": _width_jackknife}
#: The rule used (chosen on the calibration half of the library: docs/methods-classify.md).
FREQUENCY_WIDTH_RULE = "white"


def combined_frequency_width(w: FrequencyWidth, rule: str = FREQUENCY_WIDTH_RULE) -> tuple:
    """The reported f1 width (c/d) by the named rule of :data:`FREQUENCY_WIDTH_RULES`, and the rule's name."""
    return float(FREQUENCY_WIDTH_RULES[rule](w)), rule


def _best_fit_diagnostics(problem: EvidenceProblem, f1: float, nw: NpaWindow, session) -> dict:
    """Variant labels, error scales, amplitude, harmonic dominance and Delta BIC at the best frequencies."""
    data, pa_b, npa_b = problem.data, problem.pa_basis, problem.npa_basis
    vpa = int(np.argmax(linear_log_evidence(data, pa_b, [f1])[0]))
    fit_pa = fit_linear(data, pa_b, vpa, f1)
    coef = fit_pa.coefficients
    # coefficient layout of the variant: per harmonic cos, sin (+ drift cos, sin)
    per = 2 * (1 + pa_b.variants[vpa].drift)
    p1 = float(np.sum(coef[0:2] ** 2))
    p2 = float(np.sum(coef[per:per + 2] ** 2)) if len(coef) >= per + 2 else 0.0
    out = dict(pa_variant=pa_b.variants[vpa].label, kappa_pa=float(fit_pa.kappa), amplitude_mag=observable_amplitude(fit_pa.fourier_mag, session),
               second_harmonic_dominates=bool(p2 >= p1), npa_variant="", kappa_npa=math.nan, delta_bic=math.inf)
    if np.isfinite(nw.f2):
        vnpa = int(np.argmax(linear_log_evidence(data, npa_b, [nw.f1], [nw.f2])[0]))
        fit_npa = fit_linear(data, npa_b, vnpa, nw.f1, nw.f2)
        # BIC with the largest variants at the best frequencies (+1 for each frequency)
        k_pa = len(pa_b.columns[-1]) + 1
        k_npa = len(npa_b.columns[-1]) + 2
        chi_pa = fit_linear(data, pa_b, len(pa_b.variants) - 1, f1).kappa ** 2 * data.nu
        chi_npa = fit_linear(data, npa_b, len(npa_b.variants) - 1, nw.f1, nw.f2).kappa ** 2 * data.nu
        n = data.n_points
        dbic = (n * math.log(chi_npa / n) + k_npa * math.log(n)) - (n * math.log(chi_pa / n) + k_pa * math.log(n))
        out.update(npa_variant=npa_b.variants[vnpa].label, kappa_npa=float(fit_npa.kappa), delta_bic=float(dbic))
    return out


def _npa_pairs(npa: dict, span_d: float) -> tuple:
    """Distinct (f1, f2) pairs of the strongest two-period peaks, best first (at most four)."""
    allpk = [(w.f1, w.f2, w.ln) for w in npa.values() if np.isfinite(w.f2)]
    for w in npa.values():
        allpk += list(w.peaks)
    allpk.sort(key=lambda e: -e[2])
    pairs = []
    for f1p, f2p, _ in allpk:
        if all(abs(f1p - a) > 1e-6 or abs(f2p - b) > 0.3 / span_d for a, b in pairs):
            pairs.append((float(f1p), float(f2p)))
    return tuple(pairs[:4])


def fourier_evidence(lc, **kwargs) -> EvidenceResult:
    """Bayes factor NPA:PA of the shape-free Fourier families (see :func:`fourier_evidence_with_problem`)."""
    return fourier_evidence_with_problem(lc, **kwargs)[1]


def fourier_evidence_with_problem(lc, *, p_min_h: float = 0.5, p_max_h: float = 2000.0, n_windows: int = 5,
                     oversample: float = 3.0, weights=None, max_coarse: int = 100_000,
                     error_floor_mag: float | None = None) -> tuple:
    """The evidence problem and the Bayes factor NPA:PA of the shape-free Fourier families (module notes).

    Parameters
    ----------
    lc : LightCurve
    p_min_h, p_max_h : float
        Range of the fundamental light-curve period searched, hours.
    n_windows : int
        Number of coarse-scan peaks (besides the aliases of the best) integrated.
    oversample : float
        Coarse grid step is ``1 / (oversample * span * H)`` for the scan order H.
    weights : array_like (n,), optional
        Extra weights (robust re-weighting).
    max_coarse : int
        Largest number of coarse frequencies (the step is widened beyond it).
    error_floor_mag : float, optional
        Model-error floor added in quadrature to the quoted errors (default: from the amplitude and
        the geometry change, :func:`tumble.classify.noise.geometry_error_floor`).

    Returns
    -------
    (EvidenceProblem, EvidenceResult)
        ``ln_bayes_factor`` is NaN and ``npa_testable`` False when no admissible second frequency
        exists at the dominant f1 (the data cannot test NPA).
    """
    problem = build_problem(lc, p_min_h=p_min_h, p_max_h=p_max_h, oversample=oversample, weights=weights,
                            max_coarse=max_coarse, error_floor_mag=error_floor_mag)
    pa_windows = [integrate_pa_window(problem, c) for c in candidate_f1_centres(problem, n_windows)]
    keep = windows_for_npa(np.array([w.ln_integral for w in pa_windows]))
    npa = {i: npa_window(problem, pa_windows[i].best) for i in keep}
    ibest = max(keep, key=lambda i: npa[i].ln)
    for fc in ascent_windows(problem, npa[ibest].f2, [pa_windows[i].best for i in keep]):
        pa_windows.append(integrate_pa_window(problem, fc))
        keep.append(len(pa_windows) - 1)
        npa[keep[-1]] = npa_window(problem, pa_windows[-1].best)
    n_eval = (len(problem.coarse_grid) + sum(w.n_evaluations for w in pa_windows)
              + sum(w.n_evaluations for w in npa.values()))

    ln_pa_k = np.array([pa_windows[i].ln_integral for i in keep])
    ln_npa_k = np.array([npa[i].ln for i in keep])
    ln_z_pa = logsumexp(ln_pa_k)
    ln_z_npa = logsumexp(ln_npa_k)
    ipa = keep[int(np.argmax(ln_pa_k))]
    inpa = keep[int(np.argmax(ln_npa_k))] if np.any(np.isfinite(ln_npa_k)) else ipa
    # the period's location and width from the highest (possibly narrow) point of the dominant PA
    # window; the window's integral (and ln B) stays the window rule's
    pa_peak, fine_gain = fine_pa_peak(problem, pa_windows[ipa])
    f1 = pa_peak.best
    share = admissible_f2_share(f1, problem.span_d)
    testable = bool(np.isfinite(ln_z_npa))
    ln_b = ln_z_npa - ln_z_pa if testable else math.nan
    # quadrature error: the two rules on the dominant windows
    alt_pa = pa_windows[ipa].ln_integral_alt
    alt_npa = npa[inpa].ln_alt
    err = math.hypot(alt_pa - pa_windows[ipa].ln_integral if np.isfinite(alt_pa) else 0.0,
                     alt_npa - npa[inpa].ln if np.isfinite(alt_npa) and np.isfinite(npa[inpa].ln) else 0.0)
    err = max(err, MIN_LNB_ERROR)
    # window masses and disagreement
    both = np.logaddexp(ln_pa_k + math.log(0.5), ln_npa_k + math.log(0.5))
    w_mass = np.exp(both - logsumexp(both))
    favour = np.sign(ln_npa_k - ln_pa_k)
    big = w_mass >= 0.1
    disagree = bool(testable and big.sum() > 1 and len(set(favour[big].tolist())) > 1)
    pa_mass = float(np.exp(ln_pa_k.max() - ln_z_pa))
    npa_mass = float(np.exp(ln_npa_k.max() - ln_z_npa)) * npa[inpa].mass if testable else 1.0
    r = npa[inpa]
    diag = _best_fit_diagnostics(problem, f1, r, lc.session)
    width = frequency_width(problem, lc, f1, pa_peak.sigma, weights)
    f1_sigma, f1_method = combined_frequency_width(width)
    daily_edge = at_daily_edge(problem, f1, f1_sigma)
    if daily_edge:  # the posterior is cut by the exclusion: the period may lie anywhere across it
        f1_sigma = max(f1_sigma, DAILY_WIDTH / problem.span_d) if np.isfinite(f1_sigma) else DAILY_WIDTH / problem.span_d
    windows = tuple(dict(f1_per_d=float(pa_windows[i].best), ln_pa=float(pa_windows[i].ln_integral),
                         ln_npa=float(npa[i].ln), f2_per_d=float(npa[i].f2)) for i in keep)
    route = ("exact linear marginal likelihood (Fourier coefficients, zero-points, error scale) per frequency; "
             "frequencies integrated by grid quadrature with Laplace refinement of unresolved peaks, "
             f"f1 over {len(keep)} candidate windows, f2 log-uniform over the admissible part of [1.5/span, f1/2] "
             f"(commensurate bands removed, renormalised); PA = mixture of {len(problem.pa_basis.variants)} "
             f"harmonic/drift orders, NPA = mixture of {len(problem.npa_basis.variants)}; "
             f"model-error floor {problem.error_floor_mag:.3g} mag, error scale >= {problem.kappa_min:.3g}")
    return problem, EvidenceResult(
        ln_z_pa=float(ln_z_pa), ln_z_npa=float(ln_z_npa), ln_bayes_factor=float(ln_b), ln_bayes_factor_err=float(err),
        f1_per_d=float(f1), f1_sigma_per_d=float(f1_sigma), f1_npa_per_d=float(r.f1),
        f1_npa_sigma_per_d=float(r.s1), f2_per_d=float(r.f2), f2_sigma_per_d=float(r.s2),
        pa_window_mass=pa_mass, npa_window_mass=float(npa_mass), windows=windows, window_disagreement=disagree,
        npa_pairs=_npa_pairs(npa, problem.span_d), n_evaluations=int(n_eval), route=route,
        f2_admissible_share=float(share), npa_testable=testable, error_floor_mag=problem.error_floor_mag,
        kappa_min=problem.kappa_min, f1_sigma_white_per_d=width.white, f1_red_noise_beta=width.beta,
        f1_sigma_jackknife_per_d=width.jackknife, f1_sigma_method=f1_method, f1_at_daily_edge=daily_edge,
        f1_fine_gain=fine_gain, **diag)
