"""Period search: multi-harmonic 1-D scans and 2-D two-period scans.

Public API
----------
- :func:`fourier_scan` -> :class:`ScanResult`: chi-square of an m-th order
  Fourier series with per-session zero-points over a frequency grid, ranked
  distinct minima with alias labels, period uncertainties, false-alarm
  probabilities and the principal-axis rotation period.
- :func:`two_period_scan` -> :class:`TwoPeriodResult`: the two-period Fourier
  series of Pravec et al. (2005, Icarus 173, 108) for tumblers, searched as
  practitioners do (P1 from the 1-D scan, a P2 scan, joint refinement) or over
  a full (P1, P2) grid; F-test and Delta BIC against the best 1-D fit.
- :func:`fourier_chi2`, :func:`fourier_chi2_reference`: the statistic alone
  (fast, and the slow one-lstsq-per-frequency reference).

The fast path builds the normal equations from trigonometric sums computed for
all frequencies at once by non-uniform FFTs and solves the small systems in
batches (``docs/methods-period-search.md``).
"""

from tumble.periodogram._design import PeriodSearchError, prepare
from tumble.periodogram.scan import (
    FAP_THRESHOLD,
    OVERSAMPLE,
    SIDEREAL_DAY_PER_D,
    FourierFit,
    Peak,
    ScanResult,
    alias_label,
    default_period_range_h,
    false_alarm_probability,
    fourier_chi2,
    fourier_chi2_reference,
    fourier_fit,
    fourier_scan,
    frequency_grid,
)

__all__ = [
    "fourier_scan",
    "fourier_fit",
    "fourier_chi2",
    "fourier_chi2_reference",
    "ScanResult",
    "Peak",
    "FourierFit",
    "frequency_grid",
    "default_period_range_h",
    "alias_label",
    "false_alarm_probability",
    "PeriodSearchError",
    "prepare",
    "FAP_THRESHOLD",
    "OVERSAMPLE",
    "SIDEREAL_DAY_PER_D",
]
from tumble.periodogram.two_period import (  # noqa: E402
    TwoPeriodResult,
    two_period_basis,
    two_period_chi2,
    two_period_chi2_reference,
    two_period_scan,
)

__all__ += ["two_period_scan", "TwoPeriodResult", "two_period_basis", "two_period_chi2",
            "two_period_chi2_reference"]
