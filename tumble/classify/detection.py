"""The NPA detection limit of a PA verdict, by injection into the object's own data.

Tumblers with a small second-period signature escape detection (Pravec et al. 2005, Icarus 173,
108, discuss how low-amplitude NPA signatures go unnoticed), so a PA verdict says which tumbling it
could have seen. A two-period signature - equal-amplitude terms at ``f2`` and ``f1 +- f2``, the
combination content of a tumbler's light curve - of root-mean-square ``s`` (mag, over the observed
times) is added to the data at a few admissible second frequencies; the evidence of the dominant
f1 window is recomputed for each (the same machinery as the verdict, on the same times, errors and
geometry), and ``s`` is bracketed and bisected in log until ``2 ln B`` reaches the lowest NPA
verdict's threshold. The limit is the median over the trial frequencies.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from tumble.classify.evidence import integrate_pa_window, npa_window
from tumble.classify.prior import admissible_f2_intervals
from tumble.classify.thresholds import DETECTION_2LNB
from tumble.model import prepare_linear

__all__ = ["DetectionLimit", "npa_detection_limit", "injection_signature"]

#: Admissible second frequencies tried (spread evenly in log over the admissible set).
N_TRIAL_F2 = 3
#: Amplitude ladder: factor between successive trials, and the largest number of trials per f2.
LADDER_FACTOR = 2.0
MAX_LADDER_STEPS = 7
#: Bisection steps in log amplitude after bracketing (each halves the bracket's log width).
N_BISECT = 2
#: Seed of the injected phases (the limit is a property of the data, not of a random draw).
PHASE_SEED = 20240
#: Starting amplitude, in units of the median error over sqrt(N / START_DCHI2): a signature that
#: raises chi-square by about START_DCHI2 is near the threshold once the Occam factor is paid.
START_DCHI2 = 30.0


@dataclass(frozen=True)
class DetectionLimit:
    """The NPA detection limit.

    Attributes
    ----------
    rms_mag : float
        Median over the trial frequencies of the smallest detected signature rms, mag (inf when none
        was detected within the ladder; NaN when it could not be computed).
    per_f2 : tuple of (f2_per_d, rms_mag)
    threshold_2lnb : float
        The ``2 ln B`` a detection needs.
    """

    rms_mag: float
    per_f2: tuple
    threshold_2lnb: float


def injection_signature(t_d, f1: float, f2: float, rng) -> np.ndarray:
    """Unit-rms two-period signature: terms at ``f2``, ``f1 - f2`` and ``f1 + f2`` with random phases."""
    t = np.asarray(t_d, float)
    ph = rng.uniform(0, 2 * np.pi, 3)
    s = (np.cos(2 * np.pi * f2 * t + ph[0]) + np.cos(2 * np.pi * (f1 - f2) * t + ph[1])
         + np.cos(2 * np.pi * (f1 + f2) * t + ph[2]))
    rms = float(np.sqrt(np.mean(s * s)))
    return s / rms if rms > 0 else s


def _trial_f2(f1: float, span_d: float, n: int) -> list:
    iv = admissible_f2_intervals(f1, span_d)
    if not iv:
        return []
    logs = [(math.log(a), math.log(b)) for a, b in iv]
    total = sum(b - a for a, b in logs)
    out = []
    for k in range(n):
        target = (k + 0.5) / n * total
        for a, b in logs:
            if target <= b - a:
                out.append(math.exp(a + target))
                break
            target -= b - a
    return out


def _ln_b_injected(problem, lc, f1: float, signature, amp: float, weights) -> float:
    lc_inj = replace(lc, mag=np.asarray(lc.mag, float) + amp * signature)
    data = prepare_linear(lc_inj, weights=weights, error_floor_mag=problem.error_floor_mag,
                          kappa_min=problem.kappa_min)
    p = replace(problem, data=data)
    ln_pa = integrate_pa_window(p, f1).ln_integral
    ln_npa = npa_window(p, f1).ln
    return float(ln_npa - ln_pa)


def _detected(problem, lc, f1, signature, amp, threshold, weights) -> bool:
    return 2.0 * _ln_b_injected(problem, lc, f1, signature, amp, weights) >= threshold


def _smallest_detected(problem, lc, f1, signature, start, threshold, weights) -> float:
    """Smallest detected rms (mag) of one signature: a ladder of factors LADDER_FACTOR from ``start`` until
    the detection changes, then N_BISECT log bisections; inf when none is detected within the ladder."""
    lo, hi, a = None, None, start
    for _ in range(MAX_LADDER_STEPS):
        if _detected(problem, lc, f1, signature, a, threshold, weights):
            hi = a
            if lo is not None:
                break
            a /= LADDER_FACTOR
        else:
            lo = a
            if hi is not None:
                break
            a *= LADDER_FACTOR
    if hi is None or lo is None:
        return math.inf if hi is None else hi
    for _ in range(N_BISECT):
        mid = math.sqrt(lo * hi)
        if _detected(problem, lc, f1, signature, mid, threshold, weights):
            hi = mid
        else:
            lo = mid
    return hi


def npa_detection_limit(problem, lc, f1: float, *, prior_npa: float, weights=None) -> DetectionLimit:
    """The rms (mag) of the smallest two-period signature that would have given an NPA verdict.

    Parameters
    ----------
    problem : EvidenceProblem
        The verdict's evidence problem (same floor and error-scale bound).
    lc : LightCurve
    f1 : float
        The dominant f1 window (c/d).
    prior_npa : float
        The prior: the threshold is the larger of :data:`DETECTION_2LNB` and the ``2 ln B`` at which
        ``p_npa`` reaches one half.
    """
    threshold = max(DETECTION_2LNB, 2.0 * math.log((1.0 - prior_npa) / prior_npa))
    trials = _trial_f2(f1, problem.span_d, N_TRIAL_F2)
    if not trials:
        return DetectionLimit(math.nan, (), threshold)
    rng = np.random.default_rng(PHASE_SEED)
    err = float(np.median(np.hypot(np.asarray(lc.err, float), problem.error_floor_mag)))
    start = err * math.sqrt(START_DCHI2 / lc.n_points)
    t = np.asarray(lc.t, float) - float(np.mean(lc.t))
    per = [(f2, _smallest_detected(problem, lc, f1, injection_signature(t, f1, f2, rng), start, threshold, weights))
           for f2 in trials]
    vals = np.array([v for _, v in per], float)
    return DetectionLimit(float(np.median(vals)), tuple((float(f), float(v)) for f, v in per), threshold)
