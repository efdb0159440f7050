"""The decision rules: evidence (and physical fit, significance, adequacy) to a :class:`Verdict`.

Each rule is a small named function of the frozen :class:`DecisionInputs` returning the findings it
makes: ``undecided`` (the verdict is withheld, with the reason) or ``cap`` (the grade is capped at
``tentative``, with the reason). :data:`RULES` runs them in order; every threshold is a named
constant of :mod:`tumble.classify.thresholds`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tumble.classify import thresholds as th
from tumble.classify.prior import daily_alias_reason, modulated_alias_reason
from tumble.classify.verdict import MIRROR_NOTE, NO_PERIOD_REASON, UNTESTABLE_REASON, Verdict

__all__ = ["Finding", "DecisionInputs", "RULES", "decide", "grade_from_ln_b"]


def grade_from_ln_b(ln_b: float) -> str:
    """Grade of ``|2 ln B|`` on the Kass & Raftery (1995, section 3.2) scale, in our words.

    ``[0, 2)`` none, ``[2, 6)`` tentative, ``[6, 10)`` sound, ``>= 10`` firm; the
    scale is applied to whichever hypothesis ``ln B`` favours.
    """
    from tumble.inference import kass_raftery_level

    if not np.isfinite(ln_b):
        return "none"
    return th.GRADE_NAMES[int(kass_raftery_level(ln_b))]


@dataclass(frozen=True)
class Finding:
    """What one rule found: ``effect`` is ``'undecided'``, ``'cap'`` or ``'mode_unknown'``."""

    effect: str
    reason: str


@dataclass(frozen=True)
class DecisionInputs:
    """Everything the rules look at (frozen).

    Attributes
    ----------
    evidence : EvidenceResult
    span_d : float
    sparse : bool
    prior_npa, p_npa : float
    favour : {'PA', 'NPA'}
        The hypothesis ``ln B`` favours (PA when it is undefined).
    fit : RotationFit or None
    period_check : PeriodCheck or None
        None when the significance could not be checked (a verdict from statistics alone).
    adequacy : ModelAdequacy or None
    longest_h : float
        The longest period the verdict would claim, hours.
    pa_geometry_fit : RotationFit or None
        The physical PA ellipsoid fit with the real geometry (made before an NPA verdict).
    geometric_pa : tumble.sparse.GeometricPAFit or None
        The geometry-aware PA fit (ellipsoid + phase curve, sidereal period): on the sparse route
        always, on dense PA verdicts for the sidereal period.
    sparse_route : bool
        The verdict is made on the sparse route.
    """

    evidence: object
    span_d: float
    sparse: bool
    prior_npa: float
    p_npa: float
    favour: str
    fit: object
    period_check: object
    adequacy: object
    longest_h: float
    pa_geometry_fit: object = None
    geometric_pa: object = None
    sparse_route: bool = False
    binary: object = None


def _undecided(reason):
    return [Finding("undecided", reason)]


def rule_evidence_defined(d: DecisionInputs) -> list:
    """A NaN ln B from a defect upstream must never read as a verdict."""
    if d.evidence.npa_testable and np.isnan(d.evidence.ln_bayes_factor):
        return _undecided("the evidence could not be evaluated (ln B is undefined)")
    return []


def rule_npa_testable(d: DecisionInputs) -> list:
    """No admissible second frequency (or too few): PA cannot be preferred to an untested alternative."""
    share = d.evidence.f2_admissible_share
    # the share is that of the dominant PA window: when NPA wins in another window it was tested there
    pa_untested = d.favour == "PA" and np.isfinite(share) and share < th.MIN_ADMISSIBLE_F2_SHARE
    if not d.evidence.npa_testable or pa_untested:
        return _undecided(f"{UNTESTABLE_REASON}: every second period the span could resolve is commensurate with "
                          f"the first (admissible share {100 * (share if np.isfinite(share) else 0):.0f} % of the "
                          f"second-frequency range)")
    return []


def rule_significant_period(d: DecisionInputs) -> list:
    """A verdict needs a significant, covered, resolved light-curve period."""
    if d.period_check is not None and not d.period_check.significant:
        return _undecided(f"{NO_PERIOD_REASON}: " + "; ".join(d.period_check.reasons))
    return []


def rule_calibration_agrees(d: DecisionInputs) -> list:
    """ln B favours PA but the calibrated probability of NPA exceeds one half: no verdict."""
    if d.favour == "PA" and np.isfinite(d.p_npa) and d.p_npa > th.MIN_P_NPA_FOR_NPA:
        return _undecided(f"ln B favours PA but the calibrated probability of NPA is {d.p_npa:.2f}")
    return []


def rule_weak_evidence(d: DecisionInputs) -> list:
    ln_b = d.evidence.ln_bayes_factor
    if np.isfinite(ln_b) and abs(2 * ln_b) < th.UNDECIDED_2LNB:
        return _undecided(f"weak evidence: |2 ln B| = {abs(2 * ln_b):.2f} < {th.UNDECIDED_2LNB:g}")
    return []


def rule_npa_probability(d: DecisionInputs) -> list:
    if d.favour == "NPA" and d.p_npa < th.MIN_P_NPA_FOR_NPA:
        return _undecided(f"NPA favoured (2 ln B = {2 * d.evidence.ln_bayes_factor:.2f}) but p_npa = {d.p_npa:.2f} "
                          f"< {th.MIN_P_NPA_FOR_NPA:g} at prior {d.prior_npa:g}")
    return []


def rule_window_disagreement(d: DecisionInputs) -> list:
    if d.evidence.window_disagreement:
        return _undecided("period windows with comparable posterior mass favour different hypotheses")
    return []


def rule_window_mass(d: DecisionInputs) -> list:
    mass = d.evidence.npa_window_mass if d.favour == "NPA" else d.evidence.pa_window_mass
    if mass < th.WINDOW_MASS_UNDECIDED:
        return _undecided(f"period posterior is multimodal: the dominant window holds only {100 * mass:.0f} % of its mass")
    if mass < th.WINDOW_MASS_CAP:
        return [Finding("cap", f"the period posterior is multimodal (the dominant window holds {100 * mass:.0f} % of "
                               "its mass)")]
    return []


def rule_quadrature_error(d: DecisionInputs) -> list:
    ln_b, err = d.evidence.ln_bayes_factor, d.evidence.ln_bayes_factor_err
    if np.isfinite(ln_b) and abs(2 * ln_b) - th.UNDECIDED_2LNB < th.QUADRATURE_ERRORS_MARGIN * err:
        return _undecided(f"ln B = {ln_b:.2f} has a quadrature error of {err:.2f} nats, too large for this margin")
    return []


def rule_daily_alias(d: DecisionInputs) -> list:
    """NPA with a light-curve basis frequency at k cycles/day: a calibration or window alias of a slow variation."""
    if d.favour != "NPA":
        return []
    ev = d.evidence
    reason = daily_alias_reason(ev.f1_npa_per_d, ev.f2_per_d, d.span_d, d.sparse, ev.f1_npa_sigma_per_d,
                                ev.f2_sigma_per_d)
    return _undecided(reason) if reason else []


def rule_sparse_modulated_alias(d: DecisionInputs) -> list:
    """Sparse NPA whose f1 -+ f2 sits at 1-3 c/d: the second period only modulates a daily alias of the first."""
    if d.favour != "NPA" or not d.sparse:
        return []
    reason = modulated_alias_reason(d.evidence.f1_npa_per_d, d.evidence.f2_per_d, d.span_d)
    return _undecided(reason) if reason else []


def rule_coverage(d: DecisionInputs) -> list:
    if np.isfinite(d.longest_h) and d.span_d * 24.0 < th.MIN_CYCLES * d.longest_h:
        return _undecided(f"the data span ({d.span_d:.3g} d) covers fewer than {th.MIN_CYCLES} cycles of the longest "
                          f"claimed period ({d.longest_h:.4g} h)")
    return []


def rule_state_posterior(d: DecisionInputs) -> list:
    if d.favour == "NPA" and d.fit is not None and not d.fit.converged:
        return [Finding("cap", "the physical-model posterior did not converge or is multimodal")]
    return []


def favoured(evidence) -> tuple:
    """``(testable, favour)``: whether the evidence tested NPA at all, and the hypothesis ln B favours
    ('PA' when NPA was not testable)."""
    testable = bool(evidence.npa_testable) and bool(np.isfinite(evidence.ln_bayes_factor))
    return testable, ("NPA" if testable and evidence.ln_bayes_factor > 0 else "PA")


def mode_margin(fit) -> float:
    """ln L(best NPA mode) - ln L(the other mode) of the physical fits, nats (NaN when not compared)."""
    if fit is None or fit.mode not in ("SAM", "LAM"):
        return math.nan
    others = [v for k, v in fit.max_log_likelihood.items() if k != fit.mode]
    return fit.max_log_likelihood[fit.mode] - max(others) if others else math.nan


def rule_mode_margin(d: DecisionInputs) -> list:
    fit = d.fit
    if d.favour != "NPA":
        return []
    if fit is None or fit.mode not in ("SAM", "LAM"):
        return [Finding("mode_unknown", "no physical fit: the mode is unknown")]
    margin = mode_margin(fit)
    if np.isfinite(margin) and margin < th.MODE_MARGIN_NATS:
        return [Finding("mode_unknown", f"SAM and LAM fit almost equally well (margin {margin:.2f} nats): mode not decided")]
    return []


def rule_adequacy(d: DecisionInputs) -> list:
    """A chosen model that needs inflated errors or leaves periodic residuals gets the lowest grade."""
    a = d.adequacy
    if a is None:
        return []
    out = []
    if np.isfinite(a.error_scale_chosen) and a.error_scale_chosen > th.ERROR_SCALE_MAX:
        out.append(Finding("cap", f"the {d.favour} model needs the quoted errors scaled by {a.error_scale_chosen:.2g} "
                                  f"(limit {th.ERROR_SCALE_MAX:g})"))
    if np.isfinite(a.residual_fap) and a.residual_fap < th.RESIDUAL_FAP_MAX:
        out.append(Finding("cap", f"the {d.favour} model leaves a periodic residual at {a.residual_period_h:.4g} h "
                                  f"(false-alarm probability {a.residual_fap:.2g})"))
    return out


def geometry_veto_statistic(npa_fit, pa_fit) -> float:
    """``2 (ln L_NPA - ln L_PA) - (k_NPA - k_PA) ln n`` of the two physical fits (BIC difference, Schwarz 1978)."""
    ll_npa = max(v for k, v in npa_fit.max_log_likelihood.items() if k in ("SAM", "LAM"))
    ll_pa = pa_fit.max_log_likelihood["PA"]
    dk = len(npa_fit.best) - len(pa_fit.best)
    return 2.0 * (ll_npa - ll_pa) - dk * math.log(max(npa_fit.n_points_fitted, 2))


def rule_geometry_aware_pa(d: DecisionInputs) -> list:
    """Before an NPA verdict the PA ellipsoid seen with the real geometry must also fail."""
    if d.favour != "NPA" or d.pa_geometry_fit is None or d.fit is None or d.fit.mode not in ("SAM", "LAM"):
        return []
    stat = geometry_veto_statistic(d.fit, d.pa_geometry_fit)
    if not stat > th.GEOMETRY_VETO_2LNB:
        return _undecided(f"a PA ellipsoid seen with the real Sun and observer directions fits as well as the tumbling "
                          f"state (2 Delta ln L - Delta k ln n = {stat:.1f}, needs > {th.GEOMETRY_VETO_2LNB:g})")
    return []


def rule_observing_geometry(d: DecisionInputs) -> list:
    """Sparse data need the observing geometry: without it aspect changes are indistinguishable from tumbling."""
    g = d.geometric_pa
    if d.sparse_route and g is not None and g.geometry_fixed:
        return _undecided("no observing geometry: sparse data without Sun and observer directions cannot tell a "
                          "period from aspect changes (give --elements, --orbits or geometry columns)")
    return []


def rule_sparse_geometric_pa(d: DecisionInputs) -> list:
    """Sparse route: NPA needs the geometry-aware PA fit to fail; PA needs its period to be unique."""
    g = d.geometric_pa
    if d.sparse_route and g is None:
        return _undecided("the geometry-aware PA fit could not be made, so the sparse data cannot be judged")
    if not d.sparse_route or g.geometry_fixed:
        return []
    if d.favour == "NPA" and np.isfinite(g.reduced_chi2) and g.reduced_chi2 <= th.GEOMETRIC_PA_ADEQUATE_CHI2:
        return _undecided(f"a PA ellipsoid with the real geometry and a phase curve fits the sparse data "
                          f"(reduced chi-square {g.reduced_chi2:.2f} <= {th.GEOMETRIC_PA_ADEQUATE_CHI2:g})")
    if d.favour == "PA" and g.status == "no rotation detected":
        return _undecided(f"{NO_PERIOD_REASON}: {g.message}")
    if d.favour == "PA" and g.status != "unique":
        # members that are the best period (listed first) seen with a pole of the other sense are not
        # other periods
        others = [m for i, m in enumerate(g.alias_family) if i == 0 or not getattr(m, "same_rotation", False)]
        family = ", ".join(f"{m.period_h:.5g}" for m in others[:5])
        return _undecided(f"undecided period: {len(others)} sidereal periods fit within "
                          f"delta chi2 {g.alias_delta_chi2:.3g} of the best ({family} h)")
    return []


def rule_binary_alternative(d: DecisionInputs) -> list:
    """NPA favoured over PA, but a binary with mutual events explains the data as well or better."""
    from tumble.classify.binary import BINARY_COMPARABLE_2LNB

    b, ev = d.binary, d.evidence
    if d.favour != "NPA" or b is None or not (np.isfinite(b.ln_z_binary) and np.isfinite(ev.ln_z_npa)):
        return []
    two = 2.0 * (b.ln_z_binary - ev.ln_z_npa)
    if two < -BINARY_COMPARABLE_2LNB:
        return []
    return _undecided(f"a binary with mutual events at P_orb = {b.p_orb_h:.4g} h (event depths "
                      f"{max(b.event_depth_mag):.2g} mag) explains the data as well as tumbling or better "
                      f"(2 ln Z_binary - 2 ln Z_NPA = {two:.1f})")


#: The rules, in the order they are applied (all run; every finding is reported).
RULES = (rule_evidence_defined, rule_observing_geometry, rule_npa_testable, rule_significant_period, rule_weak_evidence, rule_npa_probability,
         rule_calibration_agrees,
         rule_window_disagreement, rule_window_mass, rule_quadrature_error, rule_daily_alias,
         rule_sparse_modulated_alias, rule_coverage, rule_geometry_aware_pa, rule_sparse_geometric_pa, rule_state_posterior, rule_mode_margin,
         rule_adequacy, rule_binary_alternative)


def _period_from_frequency(f, sf):
    """Period (h) and its 1-sigma error from a frequency (1/d) and its standard deviation."""
    p = 24.0 / f
    return p, (24.0 * sf / f**2 if np.isfinite(sf) else math.nan)


def _pa_periods(ev) -> dict:
    p1, e1 = _period_from_frequency(ev.f1_per_d, ev.f1_sigma_per_d)
    mult = 1.0 if ev.second_harmonic_dominates else 2.0
    return dict(period_h=p1 * mult, period_h_err=e1 * mult, period_syn_h=p1 * mult, p1_h=p1)


def _npa_periods(ev, fit) -> dict:
    p1, _ = _period_from_frequency(ev.f1_npa_per_d, ev.f1_npa_sigma_per_d)
    p2, _ = _period_from_frequency(ev.f2_per_d, ev.f2_sigma_per_d)
    v = dict(p1_h=p1, p2_h=p2)
    if fit is None or fit.mode not in ("SAM", "LAM") or not fit.candidate:
        return v
    # periods from the physical fit (posterior median and 68 % interval when sampled); the
    # truncated two-period Fourier series locates the lattice but can bias f2 by a few per cent.
    # Without samples the interval is the Fourier frequency error propagated through the mapping.
    _, _, _, (ap, bp), (af, bf) = fit.candidate
    s1 = ev.f1_npa_sigma_per_d if np.isfinite(ev.f1_npa_sigma_per_d) else 0.0
    s2 = ev.f2_sigma_per_d if np.isfinite(ev.f2_sigma_per_d) else 0.0
    ppsi, pphi = fit.derived["p_psi_h"][0], fit.derived["p_phi_h"][0]
    if fit.posterior is not None:
        ppsi_lo, ppsi_hi = fit.derived["p_psi_h"][1:]
        pphi_lo, pphi_hi = fit.derived["p_phi_h"][1:]
    else:
        eppsi = 24.0 * math.hypot(ap * s1, bp * s2) / (24.0 / ppsi) ** 2
        epphi = 24.0 * math.hypot(af * s1, bf * s2) / (24.0 / pphi) ** 2
        ppsi_lo, ppsi_hi, pphi_lo, pphi_hi = ppsi - eppsi, ppsi + eppsi, pphi - epphi, pphi + epphi
    # the other directions of L that fit as well read the light curve at other periods: the intervals
    # cover the top solution's, which cover them (tumble.classify.poles)
    top = _top_solution(fit)
    if top is not None and top.n_poles > 1:
        from tumble.classify.poles import interval_union

        ppsi_lo, ppsi_hi = interval_union((ppsi_lo, ppsi_hi), top.p_psi_interval_h)
        pphi_lo, pphi_hi = interval_union((pphi_lo, pphi_hi), top.p_phi_interval_h)
    ex = fit.derived["excitation"]
    v.update(p_psi_h=ppsi, p_psi_h_lo=ppsi_lo, p_psi_h_hi=ppsi_hi, p_phi_h=pphi, p_phi_h_lo=pphi_lo,
             p_phi_h_hi=pphi_hi, excitation=ex[0], excitation_lo=ex[1], excitation_hi=ex[2])
    return v


def _top_solution(fit):
    """The listed solution the fitted state is (the first), or None (also without a fit)."""
    if fit is None or not fit.solutions:
        return None
    return fit.solutions[0] if fit.solutions[0].mode == fit.mode else None


def _npa_pole_note(fit, warn: list) -> None:
    """Say when other directions of the angular momentum fit as well and the period intervals cover them."""
    top = _top_solution(fit)
    if top is not None and top.n_poles > 1:
        warn.append(f"{top.n_poles} directions of the angular momentum fit as well (one apparition rarely fixes it) "
                    "and read the light curve at slightly different periods: the P_psi and P_phi intervals cover "
                    "them all")


def _sidereal_period(g, values: dict, warn: list, sparse_route: bool) -> dict:
    """The sidereal period of the geometry-aware fit in place of the synodic one, when it may stand there."""
    if g.geometry_fixed or g.status != "unique" or not np.isfinite(g.period_h):
        if not sparse_route:
            warn.append("the period is synodic: the geometry-aware fit could not give a unique sidereal period"
                        + (" (no observing geometry)" if g.geometry_fixed else ""))
        return {}
    syn = values.get("period_syn_h", math.nan)
    if not sparse_route and not (np.isfinite(syn) and abs(g.period_h - syn) <= th.SIDEREAL_SYNODIC_MAX_REL * syn):
        warn.append(f"the geometry-aware fit's period {g.period_h:.6g} h differs from the synodic {syn:.6g} h by "
                    "more than a synodic drift: the period given is synodic")
        return {}
    n_poles = sum(1 for q in g.poles if q.delta_chi2_scaled <= g.pole_delta_chi2)
    warn.append("sidereal period from the geometry-aware PA ellipsoid fit"
                + (f"; {n_poles} poles fit as well and the period's interval covers them (one apparition rarely "
                   "fixes the pole)" if n_poles > 1 else " (the pole has a mirror solution)"))
    return dict(period_h=float(g.period_h), period_h_err=0.5 * float(g.period_h_hi - g.period_h_lo),
                period_syn_h=float(syn) if np.isfinite(syn) else float(g.period_h), period_kind="sidereal")


def _synodic_period(values: dict, rate_deg_per_d: float, warn: list) -> dict:
    """A synodic period's error widened by the synodic-sidereal difference the bisector's motion allows.

    The error becomes ``hypot(fit error, |P_syn - P_sid|)`` with the difference from
    :func:`tumble.geometry.synodic_sidereal_difference_h` at ``rate_deg_per_d``, the phase-angle
    bisector's azimuth rate about the unknown spin axis that 80 % of poles stay below
    (:func:`tumble.geometry.pole_marginal_bisector_rate_deg_per_d`); without observing geometry it
    cannot be bounded, and the warning says so.
    """
    p, err = values.get("period_h", math.nan), values.get("period_h_err", math.nan)
    if not np.isfinite(p):
        return {}
    if not np.isfinite(rate_deg_per_d):
        warn.append("the period is synodic; without observing geometry its difference from the sidereal "
                    "period cannot be bounded")
        return dict(period_kind="synodic")
    from tumble.geometry import SYNODIC_BOUND_QUANTILE, synodic_sidereal_difference_h

    drift = synodic_sidereal_difference_h(p, rate_deg_per_d)
    warn.append(f"the period is synodic: its error includes up to {drift:.2g} h of synodic-sidereal difference "
                f"(the phase-angle bisector turns at up to {abs(rate_deg_per_d):.2g} deg/day about the unknown "
                f"spin axis for {100 * SYNODIC_BOUND_QUANTILE:.0f} % of poles)")
    return dict(period_h_err=float(math.hypot(err if np.isfinite(err) else 0.0, drift)), period_kind="synodic")


def _pa_period_notes(ev, values: dict, warn: list) -> None:
    """What the light curve cannot tell about a PA period: a daily-alias edge, one maximum per cycle."""
    if ev.f1_at_daily_edge:
        warn.append("the period lies at the edge of the daily-alias exclusion: a period nearer 24/k h cannot be "
                    "told apart with nightly zero-points; the error spans the excluded band")
    p1 = values.get("p1_h", math.nan)
    if not ev.second_harmonic_dominates and np.isfinite(p1):
        warn.append(f"one maximum per light-curve cycle of {p1:.4g} h: the period assumes two per rotation "
                    f"(common practice); a body with one dominant maximum would rotate in {p1:.4g} h, which "
                    "photometry alone cannot tell")


#: Period fields emptied when no significant period exists.
PERIOD_FIELDS = ("period_h", "period_h_err", "period_syn_h", "p_psi_h", "p_psi_h_lo", "p_psi_h_hi", "p_phi_h",
                 "p_phi_h_lo", "p_phi_h_hi", "p1_h", "p2_h", "excitation", "excitation_lo", "excitation_hi")


def decide(evidence, *, span_d: float, prior_npa: float = th.DEFAULT_PRIOR_NPA, fit=None, object_id: str = "object",
           n_points: int = 0, n_sessions: int = 0, extra_warnings=(), route: str | None = None, sparse: bool = False,
           period_check=None, adequacy=None, route_name: str = "full", npa_limit_mag: float = math.nan,
           pa_geometry_fit=None, calibration_features=None, geometric_pa=None, binary=None,
           synodic_rate_deg_per_d: float = math.nan) -> Verdict:
    """Turn the evidence (and the physical fit, significance and adequacy, if any) into a :class:`Verdict`.

    Every rule of :data:`RULES` runs; an ``undecided`` finding withholds the verdict (grade
    ``none``, no mode), a ``cap`` finding caps the grade at ``tentative`` and says why. The grade
    before caps is kept as ``grade_uncapped`` so that the report can state both.

    With ``calibration_features`` (:func:`tumble.classify.calibration.calibration_features`) and the
    shipped calibration map, ``p_npa`` is the calibrated probability at ``prior_npa`` and the grade
    comes from it; otherwise ``p_npa`` is Bayes' rule on ``ln B`` and the grade from ``2 |ln B|``.

    A PA period is sidereal when the geometry-aware fit ``geometric_pa`` gives it; otherwise it is
    synodic and its error is widened by the synodic-sidereal difference that the phase-angle
    bisector's ecliptic-longitude rate ``synodic_rate_deg_per_d`` allows (NaN: no geometry).
    """
    from tumble.classify.calibration import calibrated_p_npa, grade_from_probability, load_calibration
    from tumble.inference import posterior_probability

    ev = evidence
    ln_b = ev.ln_bayes_factor
    testable, favour = favoured(ev)
    p_model = float(posterior_probability(np.clip(ln_b, -700, 700), prior_npa)) if testable else math.nan
    cmap = load_calibration() if calibration_features is not None else None
    calibrated = bool(testable and cmap is not None)
    p_npa = calibrated_p_npa(cmap, calibration_features, prior_npa) if calibrated else p_model
    values = _pa_periods(ev) if favour == "PA" else _npa_periods(ev, fit)
    claimed = [values.get(k, math.nan) for k in ("period_h", "p1_h", "p2_h", "p_psi_h", "p_phi_h")]
    claimed = [p for p in claimed if np.isfinite(p)]
    longest = max(claimed) if claimed else math.nan
    sparse_route = route_name == "sparse"
    inputs = DecisionInputs(ev, span_d, sparse, prior_npa, p_npa, favour, fit, period_check, adequacy, longest,
                            pa_geometry_fit, geometric_pa, sparse_route, binary)
    findings = [f for rule in RULES for f in rule(inputs)]
    warn = list(extra_warnings) + [f.reason for f in findings]
    undecided = any(f.effect == "undecided" for f in findings)
    if not testable:
        uncapped = "none"
    elif calibrated:
        uncapped = grade_from_probability(p_npa if favour == "NPA" else 1.0 - p_npa)
    else:
        uncapped = grade_from_ln_b(ln_b)
    if testable and uncapped == "none" and not any(f.effect == "undecided" for f in findings):
        # a stated rotation needs at least the lowest grade: a calibrated probability below it is no verdict
        p_fav = p_npa if favour == "NPA" else 1.0 - p_npa
        findings.append(Finding("undecided", f"the probability of {favour} ({p_fav:.2f}) is below the lowest grade"))
        warn.append(findings[-1].reason)
        undecided = True
    caps = [f.reason for f in findings if f.effect == "cap"]
    grade, grade_reason = uncapped, ""
    if caps and th.GRADE_NAMES.index(uncapped) > th.GRADE_NAMES.index("tentative"):
        grade, grade_reason = "tentative", "; ".join(caps)
    if undecided:
        grade = "none"
        grade_reason = "; ".join(f.reason for f in findings if f.effect == "undecided")
    rotation = "undecided" if undecided else favour
    mode = ""
    if rotation == "NPA":
        mode = "unknown" if any(f.effect == "mode_unknown" for f in findings) else fit.mode
    if period_check is not None and not period_check.significant:
        values = {k: v for k, v in values.items() if k not in PERIOD_FIELDS}
    if rotation == "PA":
        sidereal = _sidereal_period(geometric_pa, values, warn, sparse_route) if geometric_pa is not None else {}
        values.update(sidereal or _synodic_period(values, synodic_rate_deg_per_d, warn))
        _pa_period_notes(evidence, values, warn)
    if rotation == "NPA":
        _npa_pole_note(fit, warn)
    if rotation != "PA":
        values.pop("period_h", None)
        values.pop("period_h_err", None)
    margin = math.nan
    extra = {}
    if fit is not None:
        for k in ("a_over_b", "b_over_c", "l_lon_deg", "l_lat_deg"):
            extra[k] = fit.derived[k]
        if fit.geometry_note.startswith("no Sun"):
            warn.append(fit.geometry_note)
        if favour == "NPA" and fit.mode in ("SAM", "LAM"):
            margin = mode_margin(fit)
            top = _top_solution(fit)
            if top is None or top.n_poles <= 1:  # else the note of the directions that fit as well says more
                warn.append(MIRROR_NOTE)
        if not fit.converged:
            warn.append("physical-model posterior not converged or multimodal: " + "; ".join(fit.reasons))
    if binary is not None and rule_binary_alternative(inputs):  # the binary was named: its figures go out
        extra.update(p_orb_h=binary.p_orb_h, p_orb_h_lo=binary.p_orb_h_lo, p_orb_h_hi=binary.p_orb_h_hi,
                     event_depth_mag=float(max(binary.event_depth_mag)), event_width_phase=binary.event_width_phase,
                     event_depth2_mag=float(min(binary.event_depth_mag)), event_epoch_jd=binary.event_epoch_jd,
                     p_primary_h=binary.p1_h)
    pc = period_check
    ad = adequacy
    return Verdict(
        object_id=object_id, rotation=rotation, mode=mode, p_npa=p_npa, p_npa_model=p_model, calibrated=calibrated,
        ln_bayes_factor=float(ln_b),
        ln_bayes_factor_err=float(ev.ln_bayes_factor_err), grade=grade, prior_npa=float(prior_npa),
        grade_uncapped=uncapped, grade_reason=grade_reason, amplitude_mag=float(ev.amplitude_mag),
        period_fap=float(pc.fap) if pc is not None else math.nan,
        n_cycles=float(pc.n_cycles) if pc is not None else math.nan,
        phase_coverage=float(pc.phase_coverage) if pc is not None else math.nan,
        npa_testable=bool(testable), npa_limit_mag=float(npa_limit_mag) if rotation == "PA" else math.nan,
        chi2_dof_chosen=ad.chi2_dof_chosen if ad is not None else math.nan,
        chi2_dof_rejected=ad.chi2_dof_rejected if ad is not None else math.nan,
        error_scale_chosen=ad.error_scale_chosen if ad is not None else math.nan,
        residual_period_h=ad.residual_period_h if ad is not None else math.nan,
        residual_fap=ad.residual_fap if ad is not None else math.nan,
        evidence_route=route or ev.route, route=route_name, state_converged=bool(fit.converged) if fit else False,
        mode_margin=float(margin), warnings=tuple(dict.fromkeys(warn)), n_points=int(n_points),
        n_sessions=int(n_sessions), span_d=float(span_d), **values, **extra)
