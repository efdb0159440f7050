"""One-dimensional integration of a log-density over frequency, and a slow reference for it.

``integrate_peak`` integrates ``exp(fun(f))`` over a window around a peak: a trapezoid on an
adaptively refined grid, or a Laplace (Gaussian) integral where the peak is narrower than the grid
(Kass & Raftery 1995, J. Am. Statist. Assoc. 90, 773, eq. 4). The alternative rule is returned
beside the chosen one: their difference is the quadrature error of the evidence.
:func:`dense_trapezoid_reference` is the obviously correct slow version used by the tests.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

__all__ = ["PeakIntegral", "integrate_peak", "dense_trapezoid_reference", "log_trapezoid", "logsumexp",
           "peak_indices"]

#: Initial grid points in a window (the window is +-2 coarse steps: 13 points resolve a peak of
#: one coarse step's width).
N_WINDOW_GRID = 13
#: Refinements of the step around the best point (each divides it by up to 4).
MAX_REFINE = 12


def logsumexp(a) -> float:
    """``ln sum exp(a)``, ``-inf`` for an empty or all-``-inf`` input."""
    a = np.asarray(a, float)
    if a.size == 0 or not np.any(np.isfinite(a)):
        return -np.inf
    return float(special.logsumexp(a))


def log_trapezoid(x, lv) -> float:
    """``ln`` of the trapezoid integral of ``exp(lv)`` over sorted ``x``."""
    if len(x) < 2:
        return -np.inf
    m = np.max(lv)
    if not np.isfinite(m):
        return -np.inf
    return float(m + np.log(np.trapezoid(np.exp(lv - m), x)))


@dataclass(frozen=True)
class PeakIntegral:
    """The integral of one peak.

    Attributes
    ----------
    ln_integral : float
        ``ln`` of the integral by the chosen rule.
    ln_integral_alt : float
        The same by the other rule (trapezoid or Laplace).
    best, best_value : float
        Location (the integration variable's unit) and log-density of the highest point found.
    sigma : float
        Laplace width of the peak (NaN when the curvature is not negative).
    n_evaluations : int
        Calls of the integrand's points.
    """

    ln_integral: float
    ln_integral_alt: float
    best: float
    best_value: float
    sigma: float
    n_evaluations: int


def integrate_peak(fun, centre, half_width, lo, hi, n_grid: int = N_WINDOW_GRID,
                   max_refine: int = MAX_REFINE) -> PeakIntegral:
    """``ln ∫ exp(fun(f)) df`` over ``[centre - half_width, centre + half_width] ∩ [lo, hi]``.

    ``fun`` maps an array of frequencies to log-integrand values (prior included; ``-inf`` where
    the prior excludes a value). A grid of ``n_grid`` points is refined around its best point by
    parabolic steps; where the resulting Laplace width is below half the grid step the Laplace
    integral is the answer, otherwise the trapezoid over all evaluated points.
    """
    a, b = max(lo, centre - half_width), min(hi, centre + half_width)
    if not b > a:
        return PeakIntegral(-np.inf, -np.inf, centre, -np.inf, np.nan, 0)
    xs = list(np.linspace(a, b, n_grid))
    vs = list(np.asarray(fun(np.array(xs)), float))
    n_eval = len(xs)
    h_grid = xs[1] - xs[0]
    i = int(np.argmax(vs))
    best, vbest = xs[i], vs[i]
    h = h_grid
    sigma = np.nan
    for _ in range(max_refine):
        pts = np.clip(np.array([best - h, best + h]), a, b)
        pv = np.asarray(fun(pts), float)
        n_eval += 2
        xs += list(pts)
        vs += list(pv)
        vm, vp = pv
        if not (np.isfinite(vm) and np.isfinite(vp) and np.isfinite(vbest)):
            break
        curv = (vp - 2 * vbest + vm) / h**2
        if not (curv < 0 and np.isfinite(curv)):
            break
        shift = float(np.clip(0.5 * h * (vm - vp) / (vp - 2 * vbest + vm), -h, h))
        sigma = 1.0 / math.sqrt(-curv)
        if abs(shift) > 1e-3 * h:
            nb = float(np.clip(best + shift, a, b))
            nv = float(fun(np.array([nb]))[0])
            n_eval += 1
            xs.append(nb)
            vs.append(nv)
            if nv > vbest:
                best, vbest = nb, nv
        if sigma > 0.7 * h:
            break
        h = max(h / 4.0, 0.7 * sigma)
    order = np.argsort(xs)
    trap = log_trapezoid(np.asarray(xs)[order], np.asarray(vs)[order])
    lap = vbest + math.log(sigma * math.sqrt(2 * math.pi)) if np.isfinite(sigma) else -np.inf
    if np.isfinite(sigma) and sigma < 0.5 * h_grid:
        main, alt = lap, trap
    else:
        main, alt = trap, lap if np.isfinite(lap) else trap
    return PeakIntegral(float(main), float(alt), float(best), float(vbest), float(sigma), n_eval)


def dense_trapezoid_reference(fun, lo, hi, n: int = 200_001) -> float:
    """Slow reference: ``ln ∫ exp(fun(f)) df`` over ``[lo, hi]`` by a trapezoid on ``n`` points."""
    x = np.linspace(lo, hi, n)
    return log_trapezoid(x, np.asarray(fun(x), float))


def peak_indices(values, k, min_sep) -> list:
    """Indices of up to ``k`` highest local maxima at least ``min_sep`` samples apart."""
    v = np.asarray(values, float)
    if len(v) < 3:
        return [int(np.argmax(v))] if len(v) else []
    is_max = np.r_[v[0] >= v[1], (v[1:-1] >= v[:-2]) & (v[1:-1] >= v[2:]), v[-1] >= v[-2]]
    cand = np.flatnonzero(is_max)
    cand = cand[np.argsort(-v[cand])]
    chosen = []
    for c in cand:
        if all(abs(c - o) >= min_sep for o in chosen):
            chosen.append(int(c))
        if len(chosen) >= k:
            break
    return chosen
