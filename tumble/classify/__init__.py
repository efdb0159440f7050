"""The PA/NPA decision: shape-free model evidence, checks, graded verdicts, and the physical rotation state.

Route (``docs/methods-classify.md`` has the full argument)
-----------------------------------------------------------
1. **Evidence** (:mod:`.evidence`): the Bayes factor NPA:PA of two families of shape-free linear
   models (:mod:`.families`), with the frequencies integrated numerically under the priors of
   :mod:`.prior` (second frequency renormalised over its admissible set; no admissible set means
   NPA is not testable) and the error model of :mod:`.noise`.
2. **Checks**: significance, coverage and resolution of the periods (:mod:`.significance`); the
   adequacy of the chosen model (:mod:`.adequacy`); for PA, the NPA detection limit by injection
   (:mod:`.detection`).
3. **Rotation state** (:mod:`.rotation`, :mod:`.solutions`): physical ellipsoid models for SAM and
   LAM (or PA); for NPA every acceptable solution enumerated and ranked, the top one sampled with emcee.
4. **Verdict** (:mod:`.rules`, :mod:`.verdict`): ordered named rules, every threshold in
   :mod:`.thresholds`; ``undecided`` with the reason whenever a rule withholds the verdict.
5. **Screen** (:mod:`.screen`): a flag and a score for survey triage, never a verdict.

The public entry points are :func:`classify`, :func:`screen`, :func:`decide` and :class:`Verdict`.
Verdicts are scientific estimates for research use (``docs/validation-classify.md`` gives their
measured reliability).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

import numpy as np

from tumble.classify.adequacy import ModelAdequacy, model_adequacy
from tumble.classify.binary import BinaryResult, binary_evidence
from tumble.classify.detection import DetectionLimit, npa_detection_limit
from tumble.classify.evidence import (
    ClassifyError,
    EvidenceProblem,
    EvidenceResult,
    build_problem,
    fourier_evidence,
    fourier_evidence_with_problem,
)
from tumble.classify.families import NPA_COMBO_ORDERS, PA_VARIANTS, pa_variants
from tumble.classify.noise import (
    MODEL_ERROR_FLOOR_MAG,
    error_scale_floor,
    geometry_change_deg,
    geometry_error_floor,
    robust_weights,
)
from tumble.classify.rotation import RotationFit, fit_rotation_state, npa_candidates
from tumble.classify.rules import RULES, decide, favoured, grade_from_ln_b
from tumble.classify.screen import ScreenResult, screen
from tumble.classify.significance import PeriodCheck, check_period
from tumble.classify.solutions import Solution, enumerate_solutions
from tumble.classify.thresholds import DEFAULT_PRIOR_NPA, GRADE_NAMES, MIN_CYCLES
from tumble.classify.verdict import Verdict, format_probability, grade_sentence
from tumble.exceptions import TumbleError
from tumble.model import ModelError

__all__ = [
    "ClassifyError", "DEFAULT_PRIOR_NPA", "MIN_CYCLES", "GRADE_NAMES", "MODEL_ERROR_FLOOR_MAG", "grade_from_ln_b",
    "EvidenceResult", "EvidenceProblem", "build_problem", "fourier_evidence", "RotationFit", "fit_rotation_state",
    "npa_candidates", "Verdict", "decide", "RULES", "classify", "Classification", "screen", "ScreenResult",
    "PA_VARIANTS", "pa_variants", "NPA_COMBO_ORDERS", "geometry_change_deg", "geometry_error_floor",
    "error_scale_floor", "robust_weights", "grade_sentence", "format_probability", "PeriodCheck", "ModelAdequacy",
    "DetectionLimit", "is_sparse", "resolve_route", "ROUTE_CHOICES", "Solution", "enumerate_solutions",
]


#: How a light curve is classified: ``auto`` picks ``sparse`` for sparse data (the package's one
#: rule, :func:`tumble.photometry.is_sparse_sessions`) and ``dense`` otherwise.
ROUTE_CHOICES = ("auto", "dense", "sparse")


def is_sparse(lc) -> bool:
    """Most points are sparse (no nightly session): the package's one rule."""
    from tumble.photometry import is_sparse_sessions

    return is_sparse_sessions(lc.session)


def resolve_route(lc, route: str) -> str:
    """``dense`` or ``sparse`` for a light curve and a requested route (:data:`ROUTE_CHOICES`)."""
    if route not in ROUTE_CHOICES:
        raise ClassifyError(f"route must be one of {', '.join(ROUTE_CHOICES)}, not '{route}'")
    if route == "auto":
        return "sparse" if is_sparse(lc) else "dense"
    return route


def _geometric_pa(lc, period_hint_h, rng, warnings_out: list):
    """The geometry-aware PA fit (:func:`tumble.sparse.fit_pa_geometry`), or None with a warning when it cannot run."""
    from tumble.sparse import fit_pa_geometry
    from tumble.sparse.fit import SparseFitError

    try:
        return fit_pa_geometry(lc, period_hint_h=period_hint_h, rng=rng)
    except (SparseFitError, TumbleError, ValueError, np.linalg.LinAlgError) as exc:
        warnings_out.append(f"geometry-aware PA fit not made: {' '.join(str(exc).split())}")
        return None


@dataclass(frozen=True)
class Classification:
    """Everything :func:`classify` found for one light curve.

    Attributes
    ----------
    verdict : Verdict
    evidence : EvidenceResult
    fit : RotationFit or None
        The physical fit (None when not run: undecided on the evidence, or ``fit_state=False``).
    period_check : PeriodCheck
    adequacy : ModelAdequacy or None
    detection_limit : DetectionLimit or None
        For PA verdicts (None otherwise).
    """

    verdict: Verdict
    evidence: EvidenceResult
    fit: RotationFit | None
    period_check: PeriodCheck | None
    adequacy: ModelAdequacy | None
    detection_limit: DetectionLimit | None
    binary: BinaryResult | None = None

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.classification_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.classification_html(self)

    def __iter__(self):
        """Unpacking as ``verdict, evidence, fit`` (the return value of earlier versions)."""
        return iter((self.verdict, self.evidence, self.fit))

    def to_dict(self) -> dict:
        """The verdict as a JSON-ready dictionary."""
        return self.verdict.to_dict()

    def to_table(self):
        """The verdict as a one-row :class:`astropy.table.Table` with the results columns."""
        from astropy.table import Table

        row = self.verdict.results_row()
        return Table(rows=[row], names=list(row))


def _check_periods(lc, ev: EvidenceResult, problem: EvidenceProblem, favour: str, sparse: bool) -> PeriodCheck:
    if favour == "PA" or not np.isfinite(ev.f2_per_d):
        mult = 1.0 if ev.second_harmonic_dominates else 2.0
        period = 24.0 / ev.f1_per_d * mult
        return check_period(lc, ev.f1_per_d, period, f_lo=problem.f_lo, f_hi=problem.f_hi, step=problem.step,
                            sparse=sparse)
    p1, p2 = 24.0 / ev.f1_npa_per_d, 24.0 / ev.f2_per_d
    return check_period(lc, ev.f1_npa_per_d, p1, f_lo=problem.f_lo, f_hi=problem.f_hi, step=problem.step,
                        sparse=sparse, f2_per_d=ev.f2_per_d, longest_h=max(p1, p2))


def _features(lc, ev: EvidenceResult) -> np.ndarray:
    """The calibration map's inputs for this light curve and evidence."""
    from tumble.classify.calibration import calibration_features

    return calibration_features(ln_b=ev.ln_bayes_factor, sparse_fraction=float(np.mean(np.asarray(lc.session) < 0)))


def _bisector_rate(lc) -> float:
    """The phase-angle bisector's azimuth rate about a spin axis, deg/day, that 80 % of poles uniform on the
    sphere stay below (NaN without observing geometry): it bounds a synodic PA period's difference from
    the sidereal one."""
    from tumble.geometry import pole_marginal_bisector_rate_deg_per_d

    if lc.sun_dir is None or lc.obs_dir is None:
        return math.nan
    return pole_marginal_bisector_rate_deg_per_d(lc.t, lc.sun_dir, lc.obs_dir)


def classify(lc, *, prior_npa: float = DEFAULT_PRIOR_NPA, rng=None, n_walkers: int | None = None,
             max_steps: int = 1500, fit_state: bool = True, student_t: bool = False, p_min_h: float = 0.5,
             p_max_h: float = 2000.0, progress: bool = False, detection_limit: bool = True,
             route: str = "auto", sidereal: bool = True, binary: bool = True) -> Classification:
    """Classify one light curve: evidence, checks, verdict, physical rotation state.

    Parameters
    ----------
    lc : LightCurve
    prior_npa : float
        Prior probability of NPA rotation (default :data:`DEFAULT_PRIOR_NPA`).
    rng : numpy.random.Generator, int or None
        Random source of the physical fit (the evidence is deterministic).
    n_walkers, max_steps : int
        emcee settings of the physical fit (``max_steps = 0``: optimisation only).
    fit_state : bool
        Run the physical fit (otherwise the verdict rests on the evidence alone).
    student_t : bool
        Robust likelihood: Student-t re-weighting of the points for the evidence
        (:func:`robust_weights`) and a Student-t likelihood for the physical fit.
    p_min_h, p_max_h : float
        Period range of the fundamental light-curve period, hours.
    progress : bool
        tqdm progress bar during sampling.
    detection_limit : bool
        Compute the NPA detection limit of a PA verdict (a few evidence evaluations by injection).
    route : {'auto', 'dense', 'sparse'}
        ``sparse`` adds the geometry-aware PA fit (:mod:`tumble.sparse`): the sidereal period, the
        NPA veto and the "no observing geometry" rule; the physical tumbling fit is not made.
    sidereal : bool
        Dense route: replace a PA verdict's synodic period by the geometry-aware fit's sidereal one
        (kept as ``period_syn_h``) when that fit is unique and agrees within 1 %.
    binary : bool
        Before an NPA verdict, weigh the binary family (mutual events, :mod:`.binary`).

    Returns
    -------
    Classification
        Unpacks as ``verdict, evidence, fit``.
    """
    if not 0 < prior_npa < 1:
        raise ClassifyError(f"prior_npa must lie strictly between 0 and 1, got {prior_npa}")
    t0 = time.perf_counter()
    extra, weights = [], None
    try:
        if student_t:
            weights, n_down = robust_weights(lc, p_min_h=p_min_h, p_max_h=p_max_h)
            extra.append(f"robust re-weighting: {n_down} points down-weighted below one half")
        problem, ev = fourier_evidence_with_problem(lc, p_min_h=p_min_h, p_max_h=p_max_h, weights=weights)
    except ModelError as exc:
        raise ClassifyError(str(exc)) from None
    sparse = is_sparse(lc)
    resolved = resolve_route(lc, route)
    testable, favour = favoured(ev)
    period_check = _check_periods(lc, ev, problem, favour, sparse)
    geometric = None
    if resolved == "sparse":
        geometric = _geometric_pa(lc, None, rng, extra)
        period_check = None  # the sparse period comes from the geometry-aware fit and its alias family
    adequacy = model_adequacy(lc, ev, favour, f_lo=problem.f_lo, f_hi=problem.f_hi)
    fit = None
    worth_fitting = (testable and resolved == "dense" and period_check.significant
                     and abs(2 * ev.ln_bayes_factor) >= 2 and not (favour == "NPA" and not np.isfinite(ev.f2_per_d)))
    if fit_state and worth_fitting:
        fit = fit_rotation_state(lc, ev, favour, rng=rng, n_walkers=n_walkers, max_steps=max_steps,
                                 progress=progress, student_t=student_t)
    binary_result = binary_evidence(problem, ev) if binary and favour == "NPA" else None
    pa_geometry = None
    if fit is not None and favour == "NPA" and fit.mode in ("SAM", "LAM"):
        # the veto: the physical PA ellipsoid with the real geometry must also fail (optimisation only)
        pa_geometry = fit_rotation_state(lc, ev, "PA", rng=rng, max_steps=0, student_t=student_t)
    if resolved == "dense" and sidereal and favour == "PA" and period_check.significant:
        mult = 1.0 if ev.second_harmonic_dominates else 2.0
        geometric = _geometric_pa(lc, 24.0 / ev.f1_per_d * mult, rng, extra)
    limit = None
    if detection_limit and testable and favour == "PA" and (period_check is None or period_check.significant):
        limit = npa_detection_limit(problem, lc, ev.f1_per_d, prior_npa=prior_npa, weights=weights)
    verdict = decide(ev, span_d=lc.span_d, prior_npa=prior_npa, fit=fit, object_id=lc.object_id,
                     n_points=lc.n_points, n_sessions=lc.n_sessions, extra_warnings=extra, sparse=sparse,
                     period_check=period_check, adequacy=adequacy,
                     route_name="sparse" if resolved == "sparse" else "full" if fit_state else "evidence",
                     geometric_pa=geometric,
                     npa_limit_mag=limit.rms_mag if limit is not None else math.nan, pa_geometry_fit=pa_geometry,
                     calibration_features=_features(lc, ev), binary=binary_result,
                     synodic_rate_deg_per_d=_bisector_rate(lc))
    if fit is not None and fit.solutions and verdict.rotation == "NPA":
        verdict = replace(verdict, solutions=tuple(s.to_dict() for s in fit.solutions))
    verdict = replace(verdict, runtime_s=float(time.perf_counter() - t0))
    return Classification(verdict, ev, fit, period_check, adequacy, limit, binary_result)
