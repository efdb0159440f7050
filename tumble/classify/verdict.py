"""The verdict record of one object, and the one sentence per grade that the report prints."""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np

from tumble.classify.thresholds import GRADE_EDGES_2LNB, GRADE_NAMES
from tumble.display import format_probability

__all__ = ["Verdict", "MIRROR_NOTE", "UNTESTABLE_REASON", "NO_PERIOD_REASON", "grade_sentence",
           "format_probability"]

MIRROR_NOTE = ("the angular-momentum direction has a mirror solution (lon + 180 deg, the same lat; the mirror "
               "of the scene through the ecliptic) that disk-integrated photometry near the ecliptic cannot "
               "exclude; with a fixed viewing geometry it is relative to that frame")
#: Reason given when the data admit no NPA alternative (wording ours).
UNTESTABLE_REASON = "NPA not testable on this span"
#: Reason given when no period passes the significance, coverage and resolution checks.
NO_PERIOD_REASON = "no significant period"
@dataclass(frozen=True)
class Verdict:
    """The classification of one object.

    Attributes
    ----------
    object_id : str
    rotation : {'PA', 'NPA', 'undecided'}
    mode : {'SAM', 'LAM', 'unknown', ''}
        NPA mode; ``unknown`` when SAM and LAM fit equally well or no physical fit was made;
        empty unless the rotation is NPA.
    p_npa : float
        Probability of NPA rotation at ``prior_npa`` (NaN when NPA could not be tested): calibrated on
        the simulated library when ``calibrated`` (``tumble.classify.calibration``), else Bayes' rule on
        ``ln_bayes_factor``. See ``docs/validation-classify.md`` for how well it is calibrated.
    p_npa_model : float
        Bayes' rule on ``ln_bayes_factor`` and ``prior_npa`` (the shape-free models' own probability).
    calibrated : bool
        ``p_npa`` and the grade come from the calibration map.
    ln_bayes_factor, ln_bayes_factor_err : float
        ln B (NPA:PA) and its estimated error, nats.
    grade : {'none', 'tentative', 'sound', 'firm'}
        Strength of the evidence for the stated rotation (see :data:`GRADE_NAMES`); ``none`` when
        undecided.
    grade_uncapped : str
        The grade the evidence alone would give (before caps by the decision rules).
    grade_reason : str
        Why the grade is below ``grade_uncapped`` (empty when it is not).
    prior_npa : float
        Prior probability of NPA used.
    period_h, period_h_err : float
        PA rotation period and its 1-sigma error, hours (NaN unless PA is favoured and the period
        is significant).
    period_syn_h : float
        The synodic period of the Fourier scan, hours (the same as ``period_h`` until a sidereal
        fit is made).
    period_kind : {'sidereal', 'synodic', ''}
        What ``period_h`` is: sidereal (from the geometry-aware fit) or synodic (its error then
        includes the synodic-sidereal difference the bisector's motion allows); empty without a period.
    period_fap : float
        False-alarm probability of the light-curve period's peak.
    n_cycles : float
        Cycles of the longest reported period in the data span.
    phase_coverage : float
        Share of 20 phase bins of the fold on the reported (longest) period holding data.
    p_psi_h, p_psi_h_lo, p_psi_h_hi, p_phi_h, p_phi_h_lo, p_phi_h_hi : float
        NPA rotation and precession periods with their 68 % intervals, hours (NaN unless NPA).
    p1_h, p2_h : float
        The two light-curve basis periods (fundamental of the strongest series and the
        second), hours; ``p2_h`` NaN for PA.
    excitation, excitation_lo, excitation_hi : float
        E/E0 with its 68 % interval (NaN unless a physical NPA posterior exists).
    a_over_b, b_over_c : tuple of float
        (median, 16th, 84th percentile) of the ellipsoid axis ratios, or NaNs.
    l_lon_deg, l_lat_deg : tuple of float
        (median, 16th, 84th percentile) of the angular-momentum direction, deg, or NaNs.
    amplitude_mag : float
        Peak-to-peak amplitude of the one-period fit's Fourier part over the observed points, mag.
    npa_testable : bool
        The data admit an NPA alternative (see :mod:`tumble.classify.prior`).
    npa_limit_mag : float
        For PA verdicts: rms (mag) of the smallest two-period signature that would have been
        detected at the lowest NPA grade on these times, errors and geometry (NaN otherwise).
    chi2_dof_chosen, chi2_dof_rejected : float
        Reduced chi-square at the quoted errors of the chosen and the rejected shape-free model.
    error_scale_chosen : float
        Error scale the chosen model needs at the quoted errors (``sqrt(chi2/dof)``).
    residual_period_h, residual_fap : float
        Strongest period in the chosen model's residuals and its false-alarm probability.
    p_orb_h, p_orb_h_lo, p_orb_h_hi : float
        Orbital period of the binary family (mutual events) and its 68 % interval, hours (NaN unless the
        binary alternative was weighed and named in the verdict).
    event_depth_mag : float
        Depth of the deeper mutual event of the binary family, mag (NaN unless named).
    event_width_phase : float
        Full event duration of the binary family, orbital phase (NaN unless named).
    event_depth2_mag : float
        Depth of the other event, half an orbit from the deeper one, mag (NaN unless named).
    event_epoch_jd : float
        Mid-time of the deeper event, JD in the light curve's time scale (NaN unless named).
    p_primary_h : float
        The primary's light-curve period under the binary hypothesis, hours (NaN unless named).
    evidence_route : str
        How the Bayes factor was computed.
    route : str
        ``full`` (evidence and physical fit), ``evidence`` (no physical fit) or ``screen``.
    state_converged : bool
        The physical-model posterior met the sampler's convergence criteria.
    mode_margin : float
        ln L(best mode) - ln L(other NPA mode) of the physical fits, nats (NaN if not compared).
    warnings : tuple of str
    solutions : tuple of dict
        NPA with a physical fit: every acceptable tumbling solution, best first
        (:meth:`tumble.classify.solutions.Solution.to_dict`; keys and units in
        :data:`tumble.schema.SOLUTION_FIELDS`); empty otherwise.
    n_points, n_sessions : int
    span_d : float
    runtime_s : float
    """

    object_id: str
    rotation: str
    mode: str
    p_npa: float
    ln_bayes_factor: float
    ln_bayes_factor_err: float
    grade: str
    prior_npa: float
    p_npa_model: float = math.nan
    calibrated: bool = False
    grade_uncapped: str = "none"
    grade_reason: str = ""
    period_h: float = math.nan
    period_h_err: float = math.nan
    period_syn_h: float = math.nan
    period_kind: str = ""
    period_fap: float = math.nan
    n_cycles: float = math.nan
    phase_coverage: float = math.nan
    p_psi_h: float = math.nan
    p_psi_h_lo: float = math.nan
    p_psi_h_hi: float = math.nan
    p_phi_h: float = math.nan
    p_phi_h_lo: float = math.nan
    p_phi_h_hi: float = math.nan
    p1_h: float = math.nan
    p2_h: float = math.nan
    excitation: float = math.nan
    excitation_lo: float = math.nan
    excitation_hi: float = math.nan
    a_over_b: tuple = (math.nan, math.nan, math.nan)
    b_over_c: tuple = (math.nan, math.nan, math.nan)
    l_lon_deg: tuple = (math.nan, math.nan, math.nan)
    l_lat_deg: tuple = (math.nan, math.nan, math.nan)
    amplitude_mag: float = math.nan
    npa_testable: bool = True
    npa_limit_mag: float = math.nan
    chi2_dof_chosen: float = math.nan
    chi2_dof_rejected: float = math.nan
    error_scale_chosen: float = math.nan
    residual_period_h: float = math.nan
    residual_fap: float = math.nan
    p_orb_h: float = math.nan
    p_orb_h_lo: float = math.nan
    p_orb_h_hi: float = math.nan
    event_depth_mag: float = math.nan
    event_width_phase: float = math.nan
    event_depth2_mag: float = math.nan
    event_epoch_jd: float = math.nan
    p_primary_h: float = math.nan
    evidence_route: str = ""
    route: str = "full"
    state_converged: bool = False
    mode_margin: float = math.nan
    warnings: tuple = ()
    solutions: tuple = ()
    n_points: int = 0
    n_sessions: int = 0
    span_d: float = math.nan
    runtime_s: float = math.nan

    def to_dict(self) -> dict:
        """JSON-ready dictionary (tuples of three as ``name``, ``name_lo``, ``name_hi``)."""
        out = {}
        for f in fields(self):
            v = getattr(self, f.name)
            if f.name == "warnings":
                out[f.name] = list(v)
            elif f.name == "solutions":
                out[f.name] = [dict(e) for e in v]
            elif isinstance(v, tuple):
                out[f.name], out[f.name + "_lo"], out[f.name + "_hi"] = (float(x) for x in v)
            elif isinstance(v, (np.floating, float)):
                out[f.name] = float(v)
            elif isinstance(v, (np.bool_, bool)):
                out[f.name] = bool(v)
            else:
                out[f.name] = v
        return out

    def results_row(self) -> dict:
        """One row of the results catalogue, through the one schema (:func:`tumble.schema.results_row`)."""
        from tumble.schema import results_row

        return results_row(self.to_dict())

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.verdict_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.verdict_html(self)

    def grade_sentence(self) -> str:
        """One sentence on the grade that is true of the numbers shown (see :func:`grade_sentence`)."""
        return grade_sentence(self.to_dict())


def _band_text(level: int) -> str:
    edges = (0.0,) + tuple(GRADE_EDGES_2LNB)
    if level >= len(edges) - 1:
        return f"at least {edges[-1]:g}"
    return f"between {edges[level]:g} and {edges[level + 1]:g}"


def grade_sentence(v: dict) -> str:
    """The report's sentence about a verdict's grade, always true of the numbers shown.

    Reads the rotation, ``ln_bayes_factor``, ``grade``, ``grade_uncapped`` and ``grade_reason`` of
    a verdict dictionary (:meth:`Verdict.to_dict` or a verdict.json); the bands are the Kass &
    Raftery (1995, section 3.2) edges of :data:`tumble.classify.thresholds.GRADE_EDGES_2LNB`.
    """
    rotation = str(v.get("rotation") or "undecided")
    grade = str(v.get("grade") or "none")
    uncapped = str(v.get("grade_uncapped") or grade)
    reason = str(v.get("grade_reason") or "")
    ln_b = v.get("ln_bayes_factor")
    if ln_b is None or not np.isfinite(float(ln_b)):
        return ("No Bayes factor could be computed on these data, so no grade is given"
                + (f": {reason}." if reason else "."))
    two = abs(2.0 * float(ln_b))
    favoured = "NPA" if float(ln_b) > 0 else "PA"
    level = GRADE_NAMES.index(uncapped) if uncapped in GRADE_NAMES else 0
    p_npa = v.get("p_npa")
    if v.get("calibrated") and p_npa is not None and np.isfinite(float(p_npa)):
        from tumble.classify.calibration import GRADE_PROBABILITIES

        p_fav = float(p_npa) if favoured == "NPA" else 1.0 - float(p_npa)
        edges = (0.0,) + tuple(GRADE_PROBABILITIES)
        band = (f"at least {edges[-1]:.3f}" if level >= len(edges) - 1
                else f"between {edges[level]:.3f} and {edges[level + 1]:.3f}")
        what = "PA (no tumbling above the per-point noise)" if favoured == "PA" else "NPA"
        evidence = (f"2 ln B = {2.0 * float(ln_b):.1f} favours {favoured}, and the calibrated probability of "
                    f"{what}, {format_probability(p_fav)}, lies {band}, which alone would be graded "
                    f"'{uncapped}' (Kass & Raftery 1995 bands as probabilities at even odds)")
    else:
        evidence = (f"2|ln B| = {two:.1f} favours {favoured} and lies {_band_text(level)}, "
                    f"which alone would be graded '{uncapped}' (Kass & Raftery 1995 bands)")
    if rotation == "undecided":
        return f"Undecided, so no grade: {evidence}, but " + (reason or "a decision rule withheld the verdict") + "."
    if grade == uncapped:
        return f"Graded '{grade}': {evidence}."
    return f"Graded '{grade}', capped: {evidence}; capped because {reason or 'a decision rule capped it'}."
