"""Significance before periods: a period is reported only when the data support it.

A light-curve period is reported when (i) its peak is significant - the false-alarm probability of
the F-test of a Fourier series at that frequency against the nuisance-only model, corrected for the
independent frequencies searched (Schwarzenberg-Czerny 1996, ApJ 460, L107; Horne & Baliunas 1986,
ApJ 302, 757; :func:`tumble.periodogram.scan.false_alarm_probability`) - is below
:data:`~tumble.classify.thresholds.PERIOD_FAP_MAX`; (ii) it is covered: at least ``MIN_CYCLES``
cycles in the span and at least ``MIN_PHASE_COVERAGE`` of the phase bins of its fold hold data;
(iii) it is not at the edge of the searched range; and (iv) for two periods, their frequencies
differ by more than ``MIN_RESOLVED_CYCLES / span``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tumble.classify.thresholds import (
    MIN_CYCLES,
    MIN_PHASE_COVERAGE,
    MIN_RESOLVED_CYCLES,
    PERIOD_FAP_MAX,
)
from tumble.coverage import period_coverage
from tumble.model import FourierBasis, FourierVariant, fit_linear, prepare_linear

__all__ = ["PeriodCheck", "check_period", "SIGNIFICANCE_ORDER_DENSE", "SIGNIFICANCE_ORDER_SPARSE"]

#: Fourier order of the significance test on dense data (the order of the period scan).
SIGNIFICANCE_ORDER_DENSE = 4
#: ... and on sparse data (fewer points per cycle support fewer harmonics).
SIGNIFICANCE_ORDER_SPARSE = 2
#: A frequency within this many grid steps of an end of the searched range is at the edge.
EDGE_STEPS = 1.0


@dataclass(frozen=True)
class PeriodCheck:
    """Whether a light-curve period may be reported.

    Attributes
    ----------
    fap : float
        False-alarm probability of the peak.
    n_cycles : float
        Cycles of the period ``period_h`` in the span.
    phase_coverage : float
        Share of the phase bins of the fold on the longest period holding data
        (:func:`tumble.coverage.period_coverage`).
    at_edge : bool
        The frequency lies at an end of the searched range.
    resolved : bool
        For two periods: ``|f1 - f2| > MIN_RESOLVED_CYCLES / span`` (True for one).
    reasons : tuple of str
        Every check that failed, in words.
    """

    fap: float
    n_cycles: float
    phase_coverage: float
    at_edge: bool
    resolved: bool
    reasons: tuple

    @property
    def significant(self) -> bool:
        return not self.reasons


def _fap_at(lc, f_per_d: float, f_lo: float, f_hi: float, sparse: bool) -> float:
    from tumble.periodogram.scan import false_alarm_probability

    order = SIGNIFICANCE_ORDER_SPARSE if sparse else SIGNIFICANCE_ORDER_DENSE
    data = prepare_linear(lc)
    if data.nu - 2 * order <= 0:
        return 1.0
    fit = fit_linear(data, FourierBasis.build([FourierVariant(order, 0)]), 0, f_per_d)
    chi2 = fit.kappa ** 2 * data.nu
    n_indep = order * (f_hi - f_lo) * data.span_d
    return false_alarm_probability(data.yy, chi2, data.n_points, data.n_nuisance, order, n_indep)


def check_period(lc, f_per_d: float, period_h: float, *, f_lo: float, f_hi: float, step: float,
                 sparse: bool, f2_per_d: float = math.nan, longest_h: float | None = None) -> PeriodCheck:
    """Check the light-curve frequency ``f_per_d`` (and the reported ``period_h``) before reporting it.

    Parameters
    ----------
    lc : LightCurve
    f_per_d : float
        The light-curve fundamental frequency the period comes from, c/d.
    period_h : float
        The period to be reported (for PA the rotation period), hours.
    f_lo, f_hi, step : float
        The searched frequency range and its grid step, c/d.
    sparse : bool
    f2_per_d : float
        The second frequency of an NPA verdict (NaN for one period).
    longest_h : float, optional
        The longest period claimed (default ``period_h``), for the cycle count and phase coverage.
    """
    reasons = []
    if not (np.isfinite(f_per_d) and f_per_d > 0):
        return PeriodCheck(1.0, math.nan, math.nan, False, False, ("no light-curve frequency",))
    fap = _fap_at(lc, f_per_d, f_lo, f_hi, sparse)
    if not fap < PERIOD_FAP_MAX:
        reasons.append(f"the period's false-alarm probability is {fap:.2g} (needs < {PERIOD_FAP_MAX:g})")
    longest = longest_h if longest_h is not None else period_h
    cov = period_coverage(lc.t, longest)  # the one definition of cycles covered and phase coverage
    n_cycles, cover = cov.n_cycles, cov.phase_coverage
    if not n_cycles >= MIN_CYCLES:
        reasons.append(f"the data cover {n_cycles:.2g} cycles of {longest:.4g} h (needs {MIN_CYCLES})")
    if not cover >= MIN_PHASE_COVERAGE:
        reasons.append(f"the fold on {longest:.4g} h covers {100 * cover:.0f} % of the phase "
                       f"(needs {100 * MIN_PHASE_COVERAGE:.0f} %)")
    at_edge = bool(f_per_d - f_lo < EDGE_STEPS * step or f_hi - f_per_d < EDGE_STEPS * step)
    if at_edge:
        reasons.append(f"the light-curve period {24.0 / f_per_d:.4g} h lies at the edge of the searched range")
    resolved = True
    if np.isfinite(f2_per_d):
        resolved = bool(abs(f_per_d - f2_per_d) > MIN_RESOLVED_CYCLES / lc.span_d)
        if not resolved:
            reasons.append("the two periods are not resolved from each other over the span")
    return PeriodCheck(float(fap), float(n_cycles), float(cover), at_edge, resolved, tuple(reasons))
