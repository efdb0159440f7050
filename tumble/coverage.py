"""How well the data cover a period: cycles in the span and the fraction of the fold that holds data.

A period is believable only when the data span several of its cycles and sample its whole fold
(common practice; Harris et al. 1989, Icarus 77, 171, on phase coverage of composite light curves).
One definition, used by the report's coverage table and meant for the verdict's ``n_cycles`` and
``phase_coverage`` columns.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["PHASE_BINS", "Coverage", "period_coverage"]

#: Bins of the fold for the phase coverage: 20 bins of 0.05 cycles, finer than a light-curve feature
#: at the harmonic orders we fit (4 harmonics; common practice).
PHASE_BINS = 20


@dataclass(frozen=True)
class Coverage:
    """Coverage of one period.

    Attributes
    ----------
    period_h : float
        The period, hours.
    n_cycles : float
        Data span over the period (cycles covered).
    phase_coverage : float
        Fraction of :data:`PHASE_BINS` equal bins of the fold that hold at least one point, 0 to 1.
    """

    period_h: float
    n_cycles: float
    phase_coverage: float


def period_coverage(t_jd, period_h: float, n_bins: int = PHASE_BINS) -> Coverage:
    """Cycles covered and phase coverage of ``period_h`` (hours) by the times ``t_jd`` (days).

    A missing or non-positive period gives NaNs.
    """
    t = np.asarray(t_jd, float)
    t = t[np.isfinite(t)]
    p = float(period_h) if period_h is not None else math.nan
    if not (math.isfinite(p) and p > 0) or t.size == 0:
        return Coverage(p, math.nan, math.nan)
    p_d = p / 24.0
    n_cycles = float(np.ptp(t) / p_d)
    phase = np.mod((t - t.min()) / p_d, 1.0)
    filled = np.unique(np.minimum((phase * n_bins).astype(int), n_bins - 1)).size
    return Coverage(p, n_cycles, filled / n_bins)
