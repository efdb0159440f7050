"""The survey screen: a flag and a score from the 1-D and 2-D scans, never a verdict.

``screen_score`` is ``-Delta BIC / 2`` (Schwarz 1978, Annals of Statistics 6, 461; Kass & Raftery
1995, eq. 9) between the best two-period and one-period Fourier fits, with the model-error floor
and error-scale bound of the evidence route. ``screen_flag`` is ``candidate`` (a second period is
wanted and passes the alias rules), ``quiet`` (no second period wanted and a significant first
period) or ``unknown``. A candidate whose second period behaves like mutual events (narrow dips, flat
between: :func:`tumble.classify.binary.screen_event_indicator`) is also a ``binary_candidate``, with
the orbital period tried in ``p_orb_h``. Its own calibration is in ``docs/validation-classify.md``; it is for triage,
and a candidate needs the full route before any claim.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, fields, replace

import numpy as np

from tumble.classify.evidence import ClassifyError
from tumble.classify.noise import error_scale_floor, geometry_error_floor
from tumble.classify.prior import daily_alias_reason, modulated_alias_reason
from tumble.classify.thresholds import (
    MIN_CYCLES,
    MIN_RESOLVED_CYCLES,
    PERIOD_FAP_MAX,
    SCREEN_CANDIDATE_SCORE,
    SCREEN_QUIET_SCORE,
)

__all__ = ["ScreenResult", "screen", "SCREEN_FLAGS"]

#: The screen's flags, in words.
SCREEN_FLAGS = {
    "candidate": "a second period is wanted: a tumbling (or binary) candidate for the full route",
    "quiet": "one significant period explains the data: no sign of a second period",
    "unknown": "the screen cannot tell (no significant period, an alias, or a score in between)",
}


@dataclass(frozen=True)
class ScreenResult:
    """The screen of one object.

    Attributes
    ----------
    object_id : str
    screen_flag : {'candidate', 'quiet', 'unknown'}
    screen_score : float
        ``-Delta BIC / 2`` of the two-period over the one-period fit (nats; > 0 favours two periods).
    p1_h, p2_h : float
        Light-curve periods of the two-period fit (P1 the one of larger amplitude), hours.
    period_h, period_h_err : float
        Rotation period of the one-period scan (double-peaked rule), hours, when significant.
    period_fap : float
        False-alarm probability of the one-period scan's best peak.
    amplitude_mag : float
    route : str
        ``screen``.
    evidence_route : str
    warnings : tuple of str
    n_points, n_sessions : int
    span_d, runtime_s : float
    """

    object_id: str
    screen_flag: str
    screen_score: float
    p1_h: float = math.nan
    p2_h: float = math.nan
    period_h: float = math.nan
    period_h_err: float = math.nan
    period_fap: float = math.nan
    amplitude_mag: float = math.nan
    route: str = "screen"
    evidence_route: str = ""
    warnings: tuple = ()
    n_points: int = 0
    n_sessions: int = 0
    span_d: float = math.nan
    runtime_s: float = math.nan
    prior_npa: float = math.nan
    binary_candidate: bool = False
    p_orb_h: float = math.nan
    p_primary_h: float = math.nan

    # a screen states no rotation and no grade
    rotation = ""
    grade = ""
    mode = ""

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.screen_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.screen_html(self)

    def to_dict(self) -> dict:
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out.update(rotation=self.rotation, grade=self.grade, mode=self.mode)
        out["warnings"] = list(self.warnings)
        return out

    def results_row(self) -> dict:
        """One row of the results catalogue, through the one schema (:func:`tumble.schema.results_row`)."""
        from tumble.schema import results_row

        return results_row(self.to_dict())


def _alias_reason(f1, f2, span_d, sparse) -> str:
    """Why the screen's pair cannot be a tumbling candidate (the decision layer's alias rule, plus
    resolution and coverage of the second period), or ''."""
    reason = daily_alias_reason(f1, f2, span_d, sparse) or (modulated_alias_reason(f1, f2, span_d) if sparse else "")
    if reason:
        return reason
    if np.isfinite(f1) and np.isfinite(f2) and abs(f1 - f2) <= MIN_RESOLVED_CYCLES / span_d:
        return "the two periods are not resolved"
    if np.isfinite(f2) and 24.0 / f2 * MIN_CYCLES > span_d * 24.0:
        return "the second period has fewer than 1.5 cycles in the span"
    return ""


def _component_amplitudes(res) -> tuple:
    """Summed term amplitudes (mag) of the pure f1 harmonics and of the pure f2 harmonics of a two-period fit."""
    from tumble.periodogram.two_period import two_period_basis

    jm, km = two_period_basis(res.order, res.order_1d)
    amp = np.hypot(res.coefficients_mag[:, 0], res.coefficients_mag[:, 1])
    return float(np.sum(amp[np.asarray(km) == 0])), float(np.sum(amp[np.asarray(jm) == 0]))


def screen(lc, *, prior_npa: float = math.nan, order: int = 2) -> ScreenResult:
    """Fast survey triage from the 1-D and 2-D scans alone: a flag and a score, not a verdict.

    Parameters
    ----------
    lc : LightCurve
    prior_npa : float
        Recorded only (the screen's flag does not use a prior).
    order : int
        Fourier order of the scans.
    """
    from tumble.periodogram import PeriodSearchError, fourier_scan, two_period_scan

    t0 = time.perf_counter()
    try:
        scan1 = fourier_scan(lc, order=order)
    except PeriodSearchError as exc:
        raise ClassifyError(str(exc)) from None
    floor = geometry_error_floor(lc, float(scan1.amplitude_mag))
    kmin = error_scale_floor(lc, floor)
    lc_eff = replace(lc, err=np.sqrt(np.asarray(lc.err, float) ** 2 + floor**2))
    try:
        res = two_period_scan(lc_eff, order=order)
    except PeriodSearchError as exc:
        # no second period can be tested on these data (e.g. every P2 commensurate with P1): the
        # screen cannot tell, which is a flag, not an error
        fap = float(scan1.false_alarm_probability)
        out = ScreenResult(
            object_id=lc.object_id, screen_flag="unknown", screen_score=math.nan,
            period_h=float(scan1.rotation_period_h) if fap < PERIOD_FAP_MAX else math.nan,
            period_h_err=float(scan1.rotation_period_h_err) if fap < PERIOD_FAP_MAX else math.nan,
            period_fap=fap, amplitude_mag=float(scan1.amplitude_mag),
            warnings=("screen only: a flag for triage, not a verdict",
                      f"no second period can be tested: {' '.join(str(exc).split())}"),
            n_points=lc.n_points, n_sessions=lc.n_sessions, span_d=float(lc.span_d), prior_npa=float(prior_npa))
        return replace(out, runtime_s=float(time.perf_counter() - t0))
    n = res.n_points

    def loglik(chi2):
        # error scale profiled but bounded below (kappa >= kmin relative to the inflated errors)
        s2 = max(chi2 / n, kmin**2)
        return -0.5 * n * math.log(s2) - 0.5 * chi2 / s2

    dbic = -2.0 * (loglik(res.chi2_2d) - loglik(res.chi2_1d)) + (res.n_params_2d - res.n_params_1d) * math.log(n)
    score = -0.5 * dbic
    fa, fb = res.f1_per_d, res.f2_per_d
    sparse = bool(lc.is_sparse)
    warn = []
    fap = float(scan1.false_alarm_probability)
    significant = fap < PERIOD_FAP_MAX
    reason = _alias_reason(max(fa, fb), min(fa, fb), lc.span_d, sparse)
    if score > SCREEN_CANDIDATE_SCORE and not reason:
        flag = "candidate"
    elif score < SCREEN_QUIET_SCORE and significant:
        flag = "quiet"
    else:
        flag = "unknown"
        if reason:
            warn.append(reason)
        if not significant:
            warn.append(f"no significant period (false-alarm probability {fap:.2g})")
    # P1 is the period of the component with the larger amplitude
    amp_a, amp_b = _component_amplitudes(res)
    p_a, p_b = 24.0 / fa if fa > 0 else math.nan, 24.0 / fb if fb > 0 else math.nan
    if np.isfinite(amp_a) and np.isfinite(amp_b) and amp_b > amp_a:
        p_a, p_b = p_b, p_a
    binary = _binary_indicator(lc, fa, fb, floor) if flag == "candidate" else None
    if binary is not None and binary.event_like:
        warn.append(f"binary candidate: the second period behaves like mutual events (dips half an orbit apart at "
                    f"P_orb = {24.0 / binary.f_orb_per_d:.4g} h, flat between)")
    out = ScreenResult(
        object_id=lc.object_id, screen_flag=flag, screen_score=float(score), p1_h=float(p_a), p2_h=float(p_b),
        period_h=float(scan1.rotation_period_h) if significant else math.nan,
        period_h_err=float(scan1.rotation_period_h_err) if significant else math.nan, period_fap=fap,
        amplitude_mag=float(scan1.amplitude_mag),
        evidence_route=(f"screen: -Delta BIC / 2 between the best order-{order} two-period and one-period Fourier fits "
                        f"(model-error floor {floor:.3g} mag, error scale >= {kmin:.3g})"),
        warnings=tuple(["screen only: a flag for triage, not a verdict"] + warn), n_points=lc.n_points,
        n_sessions=lc.n_sessions, span_d=float(lc.span_d), prior_npa=float(prior_npa),
        binary_candidate=bool(binary is not None and binary.event_like),
        p_orb_h=24.0 / binary.f_orb_per_d if binary is not None and binary.event_like else math.nan,
        p_primary_h=24.0 / binary.f_primary_per_d if binary is not None and binary.event_like else math.nan)
    return replace(out, runtime_s=float(time.perf_counter() - t0))


def _binary_indicator(lc, f_a: float, f_b: float, floor_mag: float):
    """The event indicator (:func:`tumble.classify.binary.screen_event_indicator`) at the two-period fit's frequencies."""
    from tumble.classify.binary import screen_event_indicator

    if not (np.isfinite(f_a) and np.isfinite(f_b)):
        return None
    return screen_event_indicator(lc, f_a, f_b, error_floor_mag=floor_mag)
