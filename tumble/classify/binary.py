"""The binary family: the primary's one-period light curve plus mutual events at an orbital period.

A binary asteroid's light curve is the primary's rotation plus short attenuations, *mutual events*
(eclipses and occultations), twice per orbit of the satellite (Pravec et al. 2006, Icarus 181, 63).
The family compared here with PA and NPA on one footing is

``m(t) = PA(H, d)(f1; t) + D1 g((f_orb t - phi) mod 1) + D2 g((f_orb t - phi - 1/2) mod 1) + zero-points``

- ``PA(H, d)`` the shape-free one-period series of :mod:`tumble.classify.families` (same variants,
  same coefficient priors, equal-weight mixture over the variants);
- ``g`` a raised-cosine dip of full duration ``w`` in orbital phase, ``g(x) = (1 + cos(2 pi x / w)) / 2``
  for ``|x| < w/2`` and 0 outside (flat between events); the two events are half an orbit apart (a
  circular orbit);
- the depths ``D1, D2`` (mag; positive = fainter) enter linearly with zero-mean Gaussian priors of
  width :data:`EVENT_SIGMA_MAG` times the error scale, like the Fourier coefficients, so that the
  marginal likelihood at fixed ``(f1, f_orb, phi, w)`` is exact (:func:`tumble.model.linear_log_evidence`
  on an :class:`EventBasis`).

Priors of the non-linear parameters (documented in ``docs/methods-classify.md``):

- ``f1``: the evidence's prior (log-uniform with the daily exclusion), the same density as PA and NPA;
- ``f_orb``: log-uniform on ``[MIN_CYCLES/span, f1/2]`` (the range of the NPA family's second
  frequency; an orbit covered at least :data:`MIN_CYCLES` times, slower than the light curve);
- ``phi``: uniform on ``[0, 1/2)`` (the two events are interchangeable);
- ``w``: equal weights on :data:`EVENT_WIDTHS`.

Integration: a box-least-squares scan of the PA residuals (Kovacs, Zucker & Mazeh 2002, A&A 391,
369) finds the strongest ``f_orb`` peaks with their event phase and width; around each, ``phi``,
``f_orb`` and ``f1`` are integrated by :func:`tumble.classify.quadrature.integrate_peak` and combined
by the separable product rule used for the NPA family. Only the peaks are integrated (the rest of the
``f_orb`` range is left out), so ``ln_z_binary`` is a lower bound: it errs toward *not* preferring a
binary. The result is a scientific estimate for research use.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import partial

import numpy as np

from tumble.classify.families import mixture
from tumble.classify.prior import log_uniform_logpdf
from tumble.classify.quadrature import integrate_peak, logsumexp, peak_indices
from tumble.classify.thresholds import MIN_CYCLES
from tumble.model import FourierBasis, fit_linear, linear_log_evidence

__all__ = ["BINARY_COMPARABLE_2LNB", "EVENT_WIDTHS", "EVENT_SIGMA_MAG", "EventBasis", "BinaryResult", "EventIndicator", "event_profile",
           "event_scan", "event_scan_reference", "binary_evidence", "binary_log_density", "event_indicator", "orbit_peaks",
           "screen_event_indicator", "primary_residuals", "OrbitFold", "fold_on_orbit"]

#: Full event durations in orbital phase (mutual events of known binaries last about 0.05-0.15 of the
#: orbit; common practice, from memory; 0.22 for close satellites: a 0.46-size satellite at 2.5 primary
#: radii makes events of about 0.19 of the orbit, and the raised cosine's core is half its full width).
EVENT_WIDTHS = (0.04, 0.07, 0.11, 0.16, 0.22)
#: Prior standard deviation of an event depth, mag (times the error scale): events of 0.03-0.2 mag.
EVENT_SIGMA_MAG = 0.1
#: Orbital-frequency peaks integrated per f1 window: the best by the exact marginal likelihood at the
#: peak (all widths) among :data:`N_SCAN_CANDIDATES` box-scan peaks and the aliases of the best. The
#: box statistic alone ranked a nightly alias above the true orbit on several library binaries.
N_ORB_PEAKS = 4
N_SCAN_CANDIDATES = 12
#: Aliases of the best scan peak also integrated (ratios of f_orb): one event per period (1/2), and the
#: 2/3, 3/2 and 2 aliases that nightly gaps make of events every third or half orbit.
ORBIT_ALIAS_RATIOS = (0.5, 2.0 / 3.0, 1.5, 2.0)
#: Nightly data: daily aliases of the best peak also integrated (offsets of f_orb, c/d): events come
#: twice per orbit, so a one-cycle-per-day alias of the event rate is half a cycle per day in f_orb.
#: Measured on the library's held-out binaries: the box scan's best peak was such an alias on several
#: nightly campaigns (``docs/validation-classify.md``).
ORBIT_ALIAS_OFFSETS_PER_D = (-1.0, -0.5, 0.5, 1.0)
#: Each alias is the best scan peak within this many 1/span of its nominal frequency (an alias of a
#: peak that is itself off the truth by a fraction of the resolution lands off the true peak).
ALIAS_SEARCH_HALF_WIDTH_PER_SPAN = 0.5
#: f1 windows of the evidence (best PA windows first) given the binary integration.
BINARY_MAX_WINDOWS = 3
#: Phase bins of the box scan (even: the second event sits K/2 bins from the first).
SCAN_PHASE_BINS = 100
#: Largest orbital-frequency grid of the scan (the step is widened beyond it).
MAX_ORB_GRID = 60_000
#: Scan step in f_orb: this fraction of the narrowest event width per data span.
SCAN_STEP_FRACTION = 1.0 / 3.0
#: Event indicator: the two-dip model must gain at least this chi-square (a 5-sigma dip pair).
INDICATOR_MIN_CHI2 = 25.0
#: Event indicator: the dips must explain at least this share of the residuals' chi-square about their
#: weighted mean (events leave the residuals flat between them; a tumbler's residual signal is spread
#: over the whole cycle, of which a few narrow boxes take a small share), and at least this fraction
#: of what a smooth two-harmonic series at the same period explains (a sinusoid is explained better by
#: the smooth series; events about as well or better by the boxes). Set on the calibration half of
#: the library (``benchmarks/bench_binary.py``, ``docs/validation-classify.md``).
INDICATOR_MIN_SHARE = 0.35
INDICATOR_MIN_DIP_OVER_SMOOTH = 0.7
#: Screen: orbital frequencies tried on a grid of this many points within +- this many 1/span around
#: each candidate (the screen's second frequency and half of it).
SCREEN_ORBIT_GRID = 15
SCREEN_ORBIT_HALF_WIDTH_PER_SPAN = 0.5
#: Screen: the coarse box scan's step (fraction of the narrowest event width per span: a coarser step
#: than the evidence's, the local grid refines it) and its largest number of frequencies (the budget).
SCREEN_SCAN_STEP_FRACTION = 1.0
SCREEN_MAX_ORB_GRID = 3000
#: Screen: harmonics of the primary's one-period fit removed before the indicator.
SCREEN_PRIMARY_HARMONICS = 4
#: The fold on P_orb (report figure): harmonics of the primary's fit (the richest PA variant of the
#: evidence), its drift degree (slow geometry changes over the nights), the weight left to the points
#: inside the events while the primary is fitted (common practice: the primary's light curve is fitted
#: outside the events), the fold's phase bins for the binned curve, and the fewest points kept outside.
FOLD_PRIMARY_HARMONICS = 6
FOLD_PRIMARY_DRIFT = 1
FOLD_EVENT_WEIGHT = 1e-6
FOLD_BINS = 50
FOLD_MIN_OUTSIDE_FRACTION = 0.5
#: The decision: a binary whose evidence is within this of the NPA family's (``2 ln Z`` units, the
#: lowest Kass & Raftery 1995 band edge) or better is a live alternative to tumbling.
BINARY_COMPARABLE_2LNB = 2.0


def event_profile(x, width: float):
    """Raised-cosine dip of full duration ``width`` at phase offset ``x`` (wrapped to [-1/2, 1/2))."""
    x = (np.asarray(x, float) + 0.5) % 1.0 - 0.5
    return np.where(np.abs(x) < 0.5 * width, 0.5 * (1.0 + np.cos(2 * np.pi * x / width)), 0.0)


@dataclass(frozen=True, eq=False)
class EventBasis:
    """The PA basis plus two event columns: the :class:`tumble.model.FourierBasis` design contract.

    ``design(data, f1, f_orb)`` gives the whitened columns of every PA variant followed by the two
    event profiles at orbital phases ``phase`` and ``phase + 1/2``; ``columns[v]`` are the PA
    variant's columns plus the two event columns, ``sigma`` the prior widths (mag).

    Attributes
    ----------
    pa_basis : tumble.model.FourierBasis
    width : float
        Full event duration, orbital phase.
    phase : float
        Orbital phase of the first event (phase 0 at the data's mid-time), in [0, 1/2).
    """

    pa_basis: FourierBasis
    width: float
    phase: float

    @property
    def variants(self) -> tuple:
        return self.pa_basis.variants

    @property
    def n_columns(self) -> int:
        return self.pa_basis.n_columns + 2

    @property
    def sigma(self) -> np.ndarray:
        return np.r_[self.pa_basis.sigma, EVENT_SIGMA_MAG, EVENT_SIGMA_MAG]

    @property
    def columns(self) -> tuple:
        p = self.pa_basis.n_columns
        return tuple(np.r_[c, p, p + 1].astype(np.intp) for c in self.pa_basis.columns)

    def event_columns(self, data, f_orb) -> np.ndarray:
        """Unwhitened event columns, shape ``(F, n, 2)``."""
        ph = np.atleast_1d(np.asarray(f_orb, float))[:, None] * data.t_d[None, :] - self.phase
        return np.stack([event_profile(ph, self.width), event_profile(ph - 0.5, self.width)], axis=2)

    def design(self, data, f1, f2=None) -> np.ndarray:
        """Whitened design matrices, shape ``(F, n, p + 2)`` (``f2`` is the orbital frequency, c/d)."""
        f1, f_orb = np.broadcast_arrays(np.atleast_1d(np.asarray(f1, float)), np.atleast_1d(np.asarray(f2, float)))
        pa = self.pa_basis.design(data, f1)
        ev = self.event_columns(data, f_orb) * data.sw[None, :, None]
        return np.concatenate([pa, ev], axis=2)


def binary_log_density(problem, f1, f_orb, phase, width: float):
    """``ln Z(f1, f_orb, phi, w) + ln p(f1) + ln p(f_orb | f1) + ln p(phi)`` (mixture over PA variants).

    ``f1``, ``f_orb`` and ``phase`` broadcast; ``-inf`` outside the priors.
    """
    f1, f_orb, phase = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, float)) for v in (f1, f_orb, phase)))
    out = np.full(f1.shape, -np.inf)
    inside = (f_orb >= problem.f2_lo) & (f_orb <= 0.5 * f1)
    wrapped = phase % 0.5
    for ph in np.unique(wrapped[inside]):
        sel = inside & (wrapped == ph)
        basis = EventBasis(problem.pa_basis, float(width), float(ph))
        lz = mixture(linear_log_evidence(problem.data, basis, f1[sel], f_orb[sel]))
        out[sel] = (lz + problem.f1_log_prior(f1[sel]) + log_uniform_logpdf(f_orb[sel], problem.f2_lo, 0.5 * f1[sel])
                    + math.log(2.0))
    return out


@dataclass(frozen=True)
class OrbitPeak:
    """A peak of the event scan: orbital frequency (c/d), first-event phase, width, chi-square gain."""

    f_orb_per_d: float
    phase: float
    width: float
    chi2_gain: float


def _pa_residuals(problem, f1: float) -> tuple:
    """Residuals (mag) of the best PA variant at ``f1`` and the weights ``1/err^2``."""
    data = problem.data
    v = int(np.argmax(linear_log_evidence(data, problem.pa_basis, [f1])[0]))
    fit = fit_linear(data, problem.pa_basis, v, f1)
    return data.y - fit.model_mag, data.sw**2


def _box_sums(sums, m: int):
    """Circular running sums of ``m`` consecutive bins along the last axis."""
    ext = np.concatenate([sums, sums[..., :m]], axis=-1)
    c = np.cumsum(ext, axis=-1)
    c = np.concatenate([np.zeros(c.shape[:-1] + (1,)), c], axis=-1)
    return c[..., m:m + sums.shape[-1]] - c[..., :sums.shape[-1]]


def event_scan(t_d, resid_mag, weight, grid, widths=EVENT_WIDTHS, n_bins: int = SCAN_PHASE_BINS,
               chunk: int = 2000) -> tuple:
    """Box scan for two dips half an orbit apart (Kovacs, Zucker & Mazeh 2002) at each orbital frequency.

    The statistic is the chi-square gain ``S1^2/W1 + S2^2/W2`` of two boxes (dips only: ``S > 0``),
    ``S`` the weighted residual sum and ``W`` the weight in a box, boxes of half the event duration
    (the core of a raised-cosine dip) at every phase bin and width.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray, numpy.ndarray)
        Best gain, first-event phase (centre) and width at each frequency of ``grid``.
    """
    grid = np.asarray(grid, float)
    t = np.asarray(t_d, float)
    wr, w = weight * resid_mag, weight
    best = np.zeros(len(grid))
    best_phase = np.zeros(len(grid))
    best_width = np.full(len(grid), widths[0])
    half = n_bins // 2
    for i in range(0, len(grid), chunk):
        f = grid[i:i + chunk]
        idx = (np.floor(((f[:, None] * t[None, :]) % 1.0) * n_bins).astype(np.intp) % n_bins
               + n_bins * np.arange(len(f))[:, None])
        s = np.bincount(idx.ravel(), np.broadcast_to(wr, idx.shape).ravel(), len(f) * n_bins).reshape(len(f), n_bins)
        ww = np.bincount(idx.ravel(), np.broadcast_to(w, idx.shape).ravel(), len(f) * n_bins).reshape(len(f), n_bins)
        for width in widths:
            m = max(1, int(round(0.5 * width * n_bins)))
            sb, wb = _box_sums(s, m), _box_sums(ww, m)
            with np.errstate(divide="ignore", invalid="ignore"):
                g1 = np.where((wb > 0) & (sb > 0), sb**2 / np.where(wb > 0, wb, 1.0), 0.0)
            gain = g1[:, :half] + g1[:, half:]
            k = np.argmax(gain, axis=1)
            g = gain[np.arange(len(f)), k]
            better = g > best[i:i + chunk]
            best[i:i + chunk] = np.where(better, g, best[i:i + chunk])
            best_phase[i:i + chunk] = np.where(better, ((k + 0.5 * m) / n_bins) % 0.5, best_phase[i:i + chunk])
            best_width[i:i + chunk] = np.where(better, width, best_width[i:i + chunk])
    return best, best_phase, best_width


def _orbit_grid(problem, f1: float):
    lo, hi = problem.f2_lo, 0.5 * f1
    if not hi > lo * 1.01:
        return np.array([]), math.nan
    step = SCAN_STEP_FRACTION * min(EVENT_WIDTHS) / problem.span_d
    n = int((hi - lo) / step) + 1
    if n > MAX_ORB_GRID:
        step = (hi - lo) / MAX_ORB_GRID
        n = MAX_ORB_GRID + 1
    return lo + step * np.arange(n), step


def orbit_peaks(problem, f1: float, n_peaks: int = N_ORB_PEAKS) -> tuple:
    """Orbital peaks to integrate at ``f1``: the :data:`N_SCAN_CANDIDATES` strongest peaks of the event
    scan and the aliases of the best (:data:`ORBIT_ALIAS_RATIOS`; nightly data also
    :data:`ORBIT_ALIAS_OFFSETS_PER_D`), ranked by the binary family's exact log density at the peak
    (best over the event widths); the best ``n_peaks`` are returned."""
    grid, step = _orbit_grid(problem, f1)
    if len(grid) < 3:
        return (), step
    resid, weight = _pa_residuals(problem, f1)
    gain, phase, width = event_scan(problem.data.t_d, resid, weight, grid)
    idx = peak_indices(gain, N_SCAN_CANDIDATES, 3)
    if not idx:
        return (), step
    f0 = float(grid[idx[0]])
    targets = [ratio * f0 for ratio in ORBIT_ALIAS_RATIOS]
    if problem.nightly:
        targets += [f0 + off for off in ORBIT_ALIAS_OFFSETS_PER_D]
    reach = max(3, int(round(ALIAS_SEARCH_HALF_WIDTH_PER_SPAN / problem.span_d / step)))
    for fa in targets:
        if grid[0] <= fa <= grid[-1]:
            j = int(np.argmin(np.abs(grid - fa)))
            lo, hi = max(j - reach, 0), min(j + reach + 1, len(grid))
            j = lo + int(np.argmax(gain[lo:hi]))
            if all(abs(j - i) > 3 for i in idx):
                idx.append(j)
    f = grid[idx]
    score = np.full(len(idx), -np.inf)
    for w in EVENT_WIDTHS:
        score = np.maximum(score, binary_log_density(problem, f1, f, phase[idx], w))
    keep = np.argsort(-score)[:n_peaks]
    peaks = tuple(OrbitPeak(float(grid[idx[k]]), float(phase[idx[k]]), float(width[idx[k]]), float(gain[idx[k]]))
                  for k in keep if np.isfinite(score[k]))
    return peaks, step


@dataclass(frozen=True)
class PeakIntegralSet:
    """The binary family's integral around one orbital peak at one width (internal record)."""

    ln: float
    ln_alt: float
    f1: float
    f_orb: float
    sigma_f_orb: float
    phase: float
    width: float
    n_evaluations: int


def _integrate_orbit_peak(problem, f1c: float, peak: OrbitPeak, width: float, step: float) -> PeakIntegralSet:
    """Separable product rule over (phi, f_orb, f1) around a scan peak at one event width."""
    half_f = max(2 * step, 0.5 * width / problem.span_d)
    along_phase = partial(binary_log_density, problem, f1c, peak.f_orb_per_d, width=width)
    ip = integrate_peak(along_phase, peak.phase, width, peak.phase - 0.25, peak.phase + 0.25)
    along_f_orb = partial(binary_log_density, problem, f1c, phase=ip.best, width=width)
    io = integrate_peak(along_f_orb, peak.f_orb_per_d, half_f, problem.f2_lo, 0.5 * f1c)
    along_phase = partial(binary_log_density, problem, f1c, io.best, width=width)
    ip2 = integrate_peak(along_phase, ip.best, 0.5 * width, ip.best - 0.25, ip.best + 0.25)
    along_f1 = partial(binary_log_density, problem, f_orb=io.best, phase=ip2.best, width=width)
    i1 = integrate_peak(along_f1, f1c, 2 * problem.step, problem.f_lo, problem.f_hi)
    vstar = ip2.best_value
    n = ip.n_evaluations + io.n_evaluations + ip2.n_evaluations + i1.n_evaluations
    if not np.isfinite(vstar):
        return PeakIntegralSet(-np.inf, -np.inf, f1c, peak.f_orb_per_d, math.nan, peak.phase, width, n)
    ln = i1.ln_integral + io.ln_integral + ip2.ln_integral - 2 * vstar
    ln_alt = i1.ln_integral_alt + io.ln_integral_alt + ip2.ln_integral_alt - 2 * vstar
    return PeakIntegralSet(float(ln), float(ln_alt), float(i1.best), float(io.best), float(io.sigma),
                           float(ip2.best % 0.5), float(width), n)


@dataclass(frozen=True)
class BinaryResult:
    """The binary family's evidence and its best orbit.

    Attributes
    ----------
    ln_z_binary : float
        Log evidence (nats) on the footing of ``EvidenceResult.ln_z_pa`` / ``ln_z_npa`` (same data
        preparation, same f1 prior density); a lower bound (module notes). ``-inf`` when no orbit
        is admissible.
    ln_z_binary_err : float
        Difference between the two quadrature rules on the dominant peak, nats.
    p_orb_h, p_orb_h_lo, p_orb_h_hi : float
        Orbital period and its 68 % interval (Laplace width of the f_orb peak), hours.
    event_depth_mag : tuple of float
        Posterior-mean depths of the first and second event (positive = fainter), mag.
    event_width_phase : float
        Full event duration of the dominant width, orbital phase.
    event_phase : float
        Orbital phase of the first event (phase 0 at the data's mid-time).
    p1_h : float
        The primary's light-curve fundamental period ``24/f1``, hours.
    event_epoch_jd : float
        Mid-time of the deeper event, JD (the data's time scale): the events fall at
        ``event_epoch_jd + (k / 2) p_orb_h / 24``, the deeper one at even ``k``.
    f1_per_d, f_orb_per_d : float
    width_mass : float
        Posterior share of the dominant event width at the dominant peak.
    n_evaluations : int
    route : str
    """

    ln_z_binary: float
    ln_z_binary_err: float
    p_orb_h: float
    p_orb_h_lo: float
    p_orb_h_hi: float
    event_depth_mag: tuple
    event_width_phase: float
    event_phase: float
    p1_h: float
    f1_per_d: float
    f_orb_per_d: float
    width_mass: float
    n_evaluations: int
    route: str
    event_epoch_jd: float = math.nan


def _empty_result(route: str) -> BinaryResult:
    nan = math.nan
    return BinaryResult(-math.inf, nan, nan, nan, nan, (nan, nan), nan, nan, nan, nan, nan, nan, 0, route)


def _window_centres(evidence, n_windows: int) -> list:
    wins = sorted(evidence.windows, key=lambda w: -w["ln_pa"])
    return [float(w["f1_per_d"]) for w in wins[:n_windows]]


def binary_evidence(problem, evidence, *, n_windows: int = BINARY_MAX_WINDOWS, f1_centres=None) -> BinaryResult:
    """The binary family's marginal likelihood on the evidence's frozen problem (module notes).

    Parameters
    ----------
    problem : tumble.classify.evidence.EvidenceProblem
        From :func:`tumble.classify.evidence.build_problem` (the same data, floor and error-scale
        bound as ``evidence``).
    evidence : tumble.classify.evidence.EvidenceResult or None
        Its PA windows give the f1 centres (None when ``f1_centres`` is given).
    n_windows : int
        f1 windows integrated (best PA windows first).
    f1_centres : sequence of float, optional
        f1 window centres (c/d) to use instead of the evidence's (e.g. a known primary period).
    """
    parts = []
    n_eval = 0
    centres = _window_centres(evidence, n_windows) if f1_centres is None else [float(f) for f in f1_centres]
    for f1c in centres:
        peaks, step = orbit_peaks(problem, f1c)
        n_eval += int(len(_orbit_grid(problem, f1c)[0]))
        for peak in peaks:
            per_width = [_integrate_orbit_peak(problem, f1c, peak, w, step) for w in EVENT_WIDTHS]
            n_eval += sum(r.n_evaluations for r in per_width)
            parts.append(per_width)
    route = (f"binary family: PA mixture ({len(problem.pa_basis.variants)} orders) plus two raised-cosine events "
             f"half an orbit apart (depth prior {EVENT_SIGMA_MAG:g} mag, widths {', '.join(map(str, EVENT_WIDTHS))} "
             "of the orbit); f_orb log-uniform on [1.5/span, f1/2], integrated around the box-scan peaks only "
             "(a lower bound)")
    if not parts:
        return _empty_result(route)
    lnw = math.log(len(EVENT_WIDTHS))
    per_peak = [logsumexp([r.ln for r in pw]) - lnw for pw in parts]
    ln_z = logsumexp(per_peak)
    if not np.isfinite(ln_z):
        return _empty_result(route)
    k = int(np.argmax(per_peak))
    best_w = max(parts[k], key=lambda r: r.ln)
    width_mass = float(np.exp(best_w.ln - lnw - per_peak[k]))
    alt = logsumexp([r.ln_alt for r in parts[k]]) - lnw
    err = abs(alt - per_peak[k]) if np.isfinite(alt) else math.nan
    basis = EventBasis(problem.pa_basis, best_w.width, best_w.phase)
    v = int(np.argmax(linear_log_evidence(problem.data, basis, [best_w.f1], [best_w.f_orb])[0]))
    depths = fit_linear(problem.data, basis, v, best_w.f1, best_w.f_orb).coefficients[-2:]
    f, s = best_w.f_orb, best_w.sigma_f_orb if np.isfinite(best_w.sigma_f_orb) else 0.0
    # the first event is centred where f_orb t_d = phase (t_d from the data's mid-time); the deeper one
    # is either it or the one half an orbit later
    epoch = problem.data.t_mid_jd + (best_w.phase + (0.5 if depths[1] > depths[0] else 0.0)) / f
    return BinaryResult(
        ln_z_binary=float(ln_z), ln_z_binary_err=float(err), p_orb_h=24.0 / f, p_orb_h_lo=24.0 / (f + s),
        p_orb_h_hi=24.0 / (f - s) if f > s else math.inf, event_depth_mag=(float(depths[0]), float(depths[1])),
        event_width_phase=best_w.width, event_phase=best_w.phase, p1_h=24.0 / best_w.f1, f1_per_d=best_w.f1,
        f_orb_per_d=f, width_mass=width_mass, n_evaluations=int(n_eval), route=route, event_epoch_jd=float(epoch))


def event_scan_reference(t_d, resid_mag, weight, f_orb: float, width: float, n_bins: int = SCAN_PHASE_BINS) -> float:
    """Slow reference of :func:`event_scan` at one frequency and width: every box pair by direct masks."""
    ph = np.floor(((f_orb * np.asarray(t_d, float)) % 1.0) * n_bins).astype(int) % n_bins
    m = max(1, int(round(0.5 * width * n_bins)))
    best = 0.0
    for k in range(n_bins // 2):
        gain = 0.0
        for start in (k, k + n_bins // 2):
            inside = np.isin(ph, [(start + j) % n_bins for j in range(m)])
            s, w = float(np.sum(weight[inside] * resid_mag[inside])), float(np.sum(weight[inside]))
            if w > 0 and s > 0:
                gain += s * s / w
        best = max(best, gain)
    return best


@dataclass(frozen=True)
class EventIndicator:
    """Do the residuals at an orbital period look like mutual events or like a smooth second period?

    Attributes
    ----------
    dip_chi2 : float
        Chi-square gain of the best pair of box dips half an orbit apart (:func:`event_scan`).
    smooth_chi2 : float
        Chi-square gain of a two-harmonic Fourier series at the same period (4 coefficients and a constant).
    score : float
        ``(dip_chi2 - smooth_chi2) / 2``, nats: positive when narrow dips that are flat between explain
        more than the smooth series with more coefficients.
    share : float
        ``dip_chi2`` over the residuals' chi-square about their weighted mean.
    event_like : bool
        ``dip_chi2 >= INDICATOR_MIN_CHI2``, ``share >= INDICATOR_MIN_SHARE`` and ``dip_chi2 >=
        INDICATOR_MIN_DIP_OVER_SMOOTH x smooth_chi2``: a binary candidate for the full route.
    f_orb_per_d : float
        The orbital frequency tested, c/d.
    f_primary_per_d : float
        The primary's light-curve frequency removed before the test, c/d (NaN when not recorded).
    """

    dip_chi2: float
    smooth_chi2: float
    score: float
    share: float
    event_like: bool
    f_orb_per_d: float
    f_primary_per_d: float = math.nan


def event_indicator(t_d, resid_mag, weight, f_orb_per_d: float) -> EventIndicator:
    """Cheap screen: narrow dips, flat between (events) versus a smooth two-period signal.

    Parameters
    ----------
    t_d : array_like (n,)
        Times, days.
    resid_mag : array_like (n,)
        Residuals after the primary's one-period fit (and zero-points), mag.
    weight : array_like (n,)
        ``1 / err^2``, mag^-2.
    f_orb_per_d : float
        Candidate orbital frequency, c/d (e.g. a second period of the two-period scan, or twice it).
    """
    t = np.asarray(t_d, float)
    r = np.asarray(resid_mag, float)
    w = np.asarray(weight, float)
    dip = float(event_scan(t, r, w, [f_orb_per_d])[0][0])
    x = 2 * np.pi * f_orb_per_d * t
    design = np.stack([np.ones_like(t), np.cos(x), np.sin(x), np.cos(2 * x), np.sin(2 * x)], axis=1)
    sw = np.sqrt(w)
    coef, *_ = np.linalg.lstsq(design * sw[:, None], r * sw, rcond=None)
    base = float(np.sum(w * (r - np.sum(w * r) / np.sum(w)) ** 2))
    smooth = float(base - np.sum(w * (r - design @ coef) ** 2))
    score = 0.5 * (dip - smooth)
    share = dip / base if base > 0 else 0.0
    like = dip >= INDICATOR_MIN_CHI2 and share >= INDICATOR_MIN_SHARE and dip >= INDICATOR_MIN_DIP_OVER_SMOOTH * smooth
    return EventIndicator(dip, smooth, float(score), float(share), bool(like), float(f_orb_per_d))


def primary_residuals(lc, f1_per_d: float, harmonics: int = SCREEN_PRIMARY_HARMONICS,
                      error_floor_mag: float = 0.0) -> tuple:
    """The primary's rotation removed: times (days from the data's mid-time), residuals (mag) of a
    one-period Fourier fit at ``f1_per_d`` with the nuisance model (per-session zero-points, sparse phase
    terms), and the weights ``1/(err^2 + floor^2)``."""
    from tumble.model import FourierVariant, prepare_linear

    data = prepare_linear(lc, error_floor_mag=error_floor_mag)
    basis = FourierBasis.build([FourierVariant(int(harmonics), 0)])
    fit = fit_linear(data, basis, 0, float(f1_per_d))
    return data.t_d, data.y - fit.model_mag, data.sw**2


def _best_indicator(t, r, w, grid, current):
    """The indicator at the strongest box-scan frequency of ``grid``, if better than ``current``."""
    grid = np.asarray(grid, float)
    grid = grid[grid > 0]
    if grid.size == 0:
        return current
    gain = event_scan(t, r, w, grid)[0]
    ind = event_indicator(t, r, w, float(grid[int(np.argmax(gain))]))
    if current is None or (ind.event_like, ind.share) > (current.event_like, current.share):
        return ind
    return current


def screen_event_indicator(lc, f_a_per_d: float, f_b_per_d: float, *, error_floor_mag: float = 0.0) -> EventIndicator:
    """The screen's binary indicator: :func:`event_indicator` at the best orbital frequency found cheaply.

    Either frequency of the screen's two-period fit may be the primary's (deep events can carry the
    larger amplitude), so both are tried. With one removed (:func:`primary_residuals`), orbital
    frequencies are tried near the other and near half of it (events twice per orbit put a smooth
    fit's period at ``P_orb / 2``; unequal events at ``P_orb``), :data:`SCREEN_ORBIT_GRID` each, and
    on a coarse box scan of ``[1.5/span, f_primary/2]`` (step :data:`SCREEN_SCAN_STEP_FRACTION` of the
    narrowest event width per span, at most :data:`SCREEN_MAX_ORB_GRID` frequencies); the best by
    (event-like, share) is returned.
    """
    span = float(lc.span_d)
    hw = SCREEN_ORBIT_HALF_WIDTH_PER_SPAN / span
    best = None
    for primary, other in ((f_a_per_d, f_b_per_d), (f_b_per_d, f_a_per_d)):
        if not (np.isfinite(primary) and np.isfinite(other) and primary > 0 and other > 0):
            continue
        t, r, w = primary_residuals(lc, primary, error_floor_mag=error_floor_mag)
        before = best
        for fc in (0.5 * other, other):
            best = _best_indicator(t, r, w, fc + np.linspace(-hw, hw, SCREEN_ORBIT_GRID), best)
        lo, hi = MIN_CYCLES / span, 0.5 * primary
        if hi > lo:
            step = max(SCREEN_SCAN_STEP_FRACTION * min(EVENT_WIDTHS) / span, (hi - lo) / SCREEN_MAX_ORB_GRID)
            coarse = lo + step * np.arange(int((hi - lo) / step) + 1)
            gain = event_scan(t, r, w, coarse)[0]
            k = int(np.argmax(gain))
            best = _best_indicator(t, r, w, coarse[k] + step * np.linspace(-1.0, 1.0, SCREEN_ORBIT_GRID), best)
        if best is not before:  # found with this primary removed
            best = replace(best, f_primary_per_d=float(primary))
    if best is None:
        return EventIndicator(0.0, 0.0, 0.0, 0.0, False, math.nan)
    return best


@dataclass(frozen=True, eq=False)
class OrbitFold:
    """The light curve after removing the primary's rotation, folded on the orbital period.

    Attributes
    ----------
    phase : numpy.ndarray (n,)
        Orbital phase of each point in [-0.25, 0.75): 0 at the deeper event, 0.5 at the other.
    residual_mag : numpy.ndarray (n,)
        Data minus the primary's one-period series and the zero-points, mag (positive = fainter).
    err_mag : numpy.ndarray (n,)
    session : numpy.ndarray of int (n,)
    bin_phase, bin_median_mag : numpy.ndarray (FOLD_BINS,)
        Bin centres and the median residual per bin (NaN for an empty bin).
    p_orb_h, p_primary_h : float
        Folding period and the primary's light-curve period removed, hours.
    epoch_jd : float
        Time of phase 0 (mid-time of the deeper event), JD in the data's time scale.
    width_phase : float
        Full event duration, orbital phase (NaN when not known).
    epoch_from_data : bool
        The epoch was found here by the box scan (not given).
    masked_events : bool
        The primary was fitted with the points inside the events left out.
    """

    phase: np.ndarray
    residual_mag: np.ndarray
    err_mag: np.ndarray
    session: np.ndarray
    bin_phase: np.ndarray
    bin_median_mag: np.ndarray
    p_orb_h: float
    p_primary_h: float
    epoch_jd: float
    width_phase: float
    epoch_from_data: bool
    masked_events: bool

    def depth_at(self, phase: float, half_width: float) -> float:
        """Median residual within ``half_width`` of ``phase`` minus the median outside both events, mag."""
        d0 = np.abs((self.phase - phase + 0.5) % 1.0 - 0.5)
        inside = d0 <= half_width
        w = self.width_phase if np.isfinite(self.width_phase) else 2 * half_width
        out = (np.abs((self.phase + 0.5) % 1.0 - 0.5) > w) & (np.abs(self.phase % 1.0 - 0.5) > w)
        if not inside.any() or not out.any():
            return math.nan
        return float(np.median(self.residual_mag[inside]) - np.median(self.residual_mag[out]))


def _event_mask(t_d_from_epoch, f_orb: float, width: float) -> np.ndarray:
    ph = (t_d_from_epoch * f_orb) % 0.5
    return np.minimum(ph, 0.5 - ph) < 0.5 * width


def fold_on_orbit(lc, p_primary_h: float, p_orb_h: float, *, epoch_jd: float = math.nan,
                  width_phase: float = math.nan) -> OrbitFold:
    """Remove the primary's rotation and fold on the orbital period (the standard view of mutual events).

    The primary is the one-period Fourier series (:data:`FOLD_PRIMARY_HARMONICS` harmonics of
    ``24 / p_primary_h``, drift of degree :data:`FOLD_PRIMARY_DRIFT`) with the per-session zero-points,
    fitted with the points inside the events given almost no weight when the events are known (epoch
    and width), so that the events do not pull the primary's curve; it is then subtracted from every
    point. Without an epoch the deeper dip of the box scan (:func:`event_scan`) at ``p_orb_h`` sets it
    (and the primary is refitted outside the events found).

    Parameters
    ----------
    lc : LightCurve
    p_primary_h : float
        The primary's light-curve period (the fundamental removed), hours.
    p_orb_h : float
        Orbital period, hours.
    epoch_jd : float
        Mid-time of the deeper event, JD (NaN: found from the data).
    width_phase : float
        Full event duration, orbital phase (NaN: found from the data).

    Returns
    -------
    OrbitFold
    """
    from tumble.exceptions import TumbleError
    from tumble.model import FourierVariant, prepare_linear

    if not (np.isfinite(p_primary_h) and p_primary_h > 0 and np.isfinite(p_orb_h) and p_orb_h > 0):
        raise TumbleError(f"fold on P_orb: periods must be positive (P_primary {p_primary_h}, P_orb {p_orb_h} h)")
    f1, f_orb = 24.0 / float(p_primary_h), 24.0 / float(p_orb_h)
    basis = FourierBasis.build([FourierVariant(FOLD_PRIMARY_HARMONICS, FOLD_PRIMARY_DRIFT)])
    t = np.asarray(lc.t, float)

    def residuals(weights):
        data = prepare_linear(lc, weights=weights)
        fit = fit_linear(data, basis, 0, f1)
        return data, data.y - fit.model_mag

    data, resid = residuals(None)
    from_data = not np.isfinite(epoch_jd)
    if from_data or not np.isfinite(width_phase):
        gain, phase, width = event_scan(data.t_d, resid, data.sw**2, [f_orb])
        if not np.isfinite(width_phase):
            width_phase = float(width[0])
        if from_data:
            # the first of the two boxes is centred at f_orb t_d = phase; keep the deeper of the two
            e0 = data.t_mid_jd + float(phase[0]) / f_orb
            ph0 = (t - e0) * f_orb % 1.0
            d = [float(np.median(resid[sel])) if sel.any() else -math.inf
                 for sel in (np.minimum(ph0, 1.0 - ph0) < 0.5 * width_phase, np.abs(ph0 - 0.5) < 0.5 * width_phase)]
            epoch_jd = e0 + (0.5 / f_orb if d[1] > d[0] else 0.0)
    inside = _event_mask(t - epoch_jd, f_orb, width_phase)
    masked = bool(inside.any() and np.mean(~inside) >= FOLD_MIN_OUTSIDE_FRACTION)
    if masked:
        _, resid = residuals(np.where(inside, FOLD_EVENT_WEIGHT, 1.0))
    phase = ((t - epoch_jd) * f_orb + 0.25) % 1.0 - 0.25
    if from_data:  # with the primary refitted outside the events, keep the deeper one (its core) at phase 0
        d = [float(np.median(resid[sel])) if sel.any() else -math.inf
             for sel in (np.abs(phase) < 0.25 * width_phase, np.abs(phase - 0.5) < 0.25 * width_phase)]
        if d[1] > d[0]:
            epoch_jd = epoch_jd + 0.5 / f_orb
            phase = ((t - epoch_jd) * f_orb + 0.25) % 1.0 - 0.25
    edges = np.linspace(-0.25, 0.75, FOLD_BINS + 1)
    idx = np.clip(np.searchsorted(edges, phase, side="right") - 1, 0, FOLD_BINS - 1)
    med = np.array([np.median(resid[idx == k]) if np.any(idx == k) else math.nan for k in range(FOLD_BINS)])
    return OrbitFold(phase=phase, residual_mag=resid, err_mag=np.asarray(lc.err, float),
                     session=np.asarray(lc.session, int), bin_phase=0.5 * (edges[1:] + edges[:-1]), bin_median_mag=med,
                     p_orb_h=float(p_orb_h), p_primary_h=float(p_primary_h), epoch_jd=float(epoch_jd),
                     width_phase=float(width_phase), epoch_from_data=bool(from_data), masked_events=masked)
