"""The frequency prior of the evidence, and the one alias rule of the decision.

- ``f1`` (the fundamental light-curve frequency): log-uniform on ``[f_lo, f_hi]``, the same in both
  families (it cancels in the Bayes factor). With nightly zero-points, ``f1`` at k cycles per
  (solar or sidereal) day is excluded in both families (:func:`daily_alias_mask`).
- ``f2`` (the second frequency of the NPA family): log-uniform on the *admissible* set
  ``A(f1) = [MIN_CYCLES/span, f1/2]`` minus the commensurate bands ``|f2 - (p/q) f1| <
  COMMENSURATE_WIDTH/span`` (``q <= 4``), renormalised over ``A(f1)``. A two-period series whose
  periods stand in a small-integer ratio within the resolution is a one-period series of the
  common period: it is not a testable NPA alternative. When ``A(f1)`` is (nearly) empty the data
  cannot test NPA at all, and the decision says so instead of reading the missing alternative as
  evidence for PA (:func:`admissible_f2_share`).
"""

from __future__ import annotations

import math

import numpy as np

from tumble.classify.thresholds import (
    DENSE_ALIAS_K_MAX,
    MIN_CYCLES,
    SIDEREAL_DAY_D,
    SPARSE_ALIAS_K_MAX,
    SPARSE_ALIAS_TOL_PER_D,
)

__all__ = ["COMMENSURATE_WIDTH", "COMMENSURATE_QS", "near_daily_alias", "daily_alias_mask", "daily_alias_reason",
           "modulated_alias_reason", "commensurate_mask",
           "admissible_f2_intervals", "admissible_f2_log_mass", "admissible_f2_share", "f2_log_prior",
           "log_uniform_logpdf", "frequency_limits"]

#: Half-width of a commensurate band, in cycles per span (the period ratio is not resolved by the
#: data within about one cycle over the span, and slow geometry changes shift odd and even
#: harmonics of a PA rotator by about that much).
COMMENSURATE_WIDTH = 1.0
#: Denominators q of the commensurate ratios p/q (q <= 4: the low-order resonances a one-period
#: series with up to a few harmonics reproduces).
COMMENSURATE_QS = (2, 3, 4)
#: Half-width of the f1 exclusion at k cycles/day with nightly zero-points, cycles per span.
DAILY_WIDTH = 0.5


def near_daily_alias(f_per_d, tol_per_d, k_max: int = DENSE_ALIAS_K_MAX):
    """True where a frequency lies within ``tol_per_d`` of k cycles per solar or sidereal day, k = 1..k_max.

    The one alias rule: the evidence's f1 exclusion and the decision's alias guard both use it.
    """
    f = np.asarray(f_per_d, float)
    bad = np.zeros(f.shape, bool)
    for k in range(1, int(k_max) + 1):
        for day in (1.0, 1.0 / SIDEREAL_DAY_D):
            bad |= np.abs(f - k * day) < tol_per_d
    return bad if bad.ndim else bool(bad)


def daily_alias_reason(f1, f2, span_d: float, sparse: bool, sigma1: float = math.nan,
                       sigma2: float = math.nan) -> str:
    """Why a pair of light-curve frequencies (c/d) is a daily alias, or '' when neither is.

    A frequency within ``0.5/span`` (or 3 sigma; sparse data: :data:`SPARSE_ALIAS_TOL_PER_D`) of k
    cycles per solar or sidereal day, k <= 3 (sparse data: k <= :data:`SPARSE_ALIAS_K_MAX`, since nightly
    sparse sampling aliases a slow variation to every k/day), is a calibration or window alias.
    Used by the decision rules and by the screen.
    """
    k_max = SPARSE_ALIAS_K_MAX if sparse else DENSE_ALIAS_K_MAX
    for name, f, sf in (("first", f1, sigma1), ("second", f2, sigma2)):
        tol = max(0.5 / span_d, 3 * (sf if np.isfinite(sf) else 0.0), SPARSE_ALIAS_TOL_PER_D if sparse else 0.0)
        if np.isfinite(f) and near_daily_alias(f, tol, k_max=k_max):
            return f"{name} light-curve period {24.0 / f:.4g} h lies at a 1/day alias"
    return ""


def modulated_alias_reason(f1, f2, span_d: float) -> str:
    """Sparse data: why ``f1 -+ f2`` sits within ``MIN_CYCLES/span`` of 1, 2 or 3 c/d, or ''.

    The second period then only modulates a daily alias of the first, as the slow change of a PA light
    curve with geometry does through nightly sampling.
    """
    for label, c in (("f1 - f2", f1 - f2), ("f1 + f2", f1 + f2)):
        if np.isfinite(c) and near_daily_alias(c, MIN_CYCLES / span_d, k_max=DENSE_ALIAS_K_MAX):
            return (f"{label} = {c:.5f} c/d lies within {MIN_CYCLES}/span of a 1, 2 or 3 c/d alias: the second "
                    "period only modulates a daily alias of the first, as a PA light curve changing with geometry "
                    "does in sparse nightly data")
    return ""


def daily_alias_mask(f_per_d, span_d: float, nightly: bool):
    """f1 values excluded from both families: k cycles/day (k <= 3) within ``DAILY_WIDTH/span``, nightly data only.

    With a free zero-point per night, a "light curve" at k cycles/day is degenerate with the nightly
    offsets and drifts (common practice).
    """
    f = np.asarray(f_per_d, float)
    if not nightly:
        return np.zeros(f.shape, bool)
    return np.asarray(near_daily_alias(f, DAILY_WIDTH / span_d), bool)


def commensurate_mask(f1, f2, span_d: float):
    """True where ``f2`` is within ``COMMENSURATE_WIDTH/span`` of ``(p/q) f1`` (q in COMMENSURATE_QS)."""
    f1 = np.asarray(f1, float)
    f2 = np.asarray(f2, float)
    bad = np.zeros(np.broadcast(f1, f2).shape, bool)
    for q in COMMENSURATE_QS:
        for p in range(1, q):
            bad |= np.abs(f2 - f1 * p / q) < COMMENSURATE_WIDTH / span_d
    return bad


def admissible_f2_intervals(f1: float, span_d: float) -> list:
    """The admissible second frequencies at ``f1`` as a sorted list of disjoint ``(lo, hi)`` intervals (c/d)."""
    lo, hi = MIN_CYCLES / span_d, 0.5 * float(f1)
    if not hi > lo:
        return []
    w = COMMENSURATE_WIDTH / span_d
    bands = sorted((f1 * p / q - w, f1 * p / q + w) for q in COMMENSURATE_QS for p in range(1, q))
    out, start = [], lo
    for a, b in bands:
        if b <= start:
            continue
        if a >= hi:
            break
        if a > start:
            out.append((start, min(a, hi)))
        start = max(start, b)
        if start >= hi:
            break
    if start < hi:
        out.append((start, hi))
    return [(a, b) for a, b in out if b > a]


def admissible_f2_log_mass(f1: float, span_d: float) -> float:
    """``∫_A(f1) df2 / f2``: the log-frequency measure of the admissible set (0 when empty)."""
    return float(sum(math.log(b / a) for a, b in admissible_f2_intervals(f1, span_d)))


def admissible_f2_share(f1: float, span_d: float) -> float:
    """Share of ``[MIN_CYCLES/span, f1/2]`` (in log frequency) that is admissible; 0 when the range is empty."""
    lo, hi = MIN_CYCLES / span_d, 0.5 * float(f1)
    if not hi > lo:
        return 0.0
    return admissible_f2_log_mass(f1, span_d) / math.log(hi / lo)


def f2_log_prior(f1, f2, span_d: float):
    """Log density of the renormalised log-uniform prior of ``f2`` given ``f1`` (``-inf`` outside ``A(f1)``).

    Broadcasts over ``f1`` and ``f2``.
    """
    f1 = np.asarray(f1, float)
    f2 = np.asarray(f2, float)
    f1b, f2b = np.broadcast_arrays(f1, f2)
    uniq, inv = np.unique(f1b.ravel(), return_inverse=True)
    mass = np.array([admissible_f2_log_mass(u, span_d) for u in uniq])[inv].reshape(f1b.shape)
    inside = (f2b >= MIN_CYCLES / span_d) & (f2b <= 0.5 * f1b) & ~commensurate_mask(f1b, f2b, span_d) & (mass > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(inside, -np.log(f2b) - np.log(np.where(mass > 0, mass, 1.0)), -np.inf)
    return out if out.ndim else float(out)


def log_uniform_logpdf(f, lo, hi):
    """Log density of a log-uniform prior on ``[lo, hi]`` (not checked for range)."""
    return -np.log(f) - np.log(np.log(np.asarray(hi, float) / lo))


def frequency_limits(span_d: float, p_min_h: float, p_max_h: float):
    """``(f_lo, f_hi)`` of the f1 prior, c/d, or None when no period of the range has MIN_CYCLES cycles in the span."""
    f_lo = max(MIN_CYCLES / span_d, 24.0 / p_max_h)
    f_hi = 24.0 / p_min_h
    return (f_lo, f_hi) if f_hi > f_lo else None
