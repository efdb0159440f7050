"""Every acceptable tumbling solution: a systematic enumeration of (mode, P_psi, P_phi), ranked.

A tumbler's light curve holds only the combinations ``n1 f_phi + n2 f_psi`` (Kaasalainen 2001, A&A
376, 302), and the shape-free evidence finds one *basis* of that lattice, often a sub-lattice, a
daily alias, or a neighbouring lattice that fits a short campaign about as well. Random starts of the
physical model around one mapping of one basis miss the true state in a sizeable share of dense
tumblers (``docs/methods-classify.md`` section 5). This module replaces them by a flat, documented
enumeration (:func:`search_solutions`):

1. **Lattices** (:func:`candidate_lattices`): the evidence's best two-period pairs, the best pair of
   the plain two-period scan, and the evidence pair re-located by series without drift.
2. **Daily aliases** (:func:`aliased_bases`): for nightly data (:func:`daily_aliasing`) each basis
   frequency shifted by whole cycles per day (:data:`F1_ALIAS_SHIFTS`, :data:`F2_ALIAS_SHIFTS`).
3. **Frequency relations**: every basis mapped to ``(f_psi, f_phi)`` through the SAM and LAM
   relations, published and other assignments (:func:`tumble.classify.rotation.npa_candidates`),
   deduplicated within :data:`SAME_PAIR_CYCLES` cycles per span.
4. **Linear screens** (:func:`screen_chi2`, :func:`screened_pairs`): the chi-square of truncated
   two-dimensional Fourier series in the physical frequencies with the nuisance zero-points, one
   screen per NPA mode (:data:`SCREEN_TERM_SETS`: the terms that carry the power of simulated
   tumblers of that mode, the one nearest the evidence's ``f1`` with a linearly drifting
   amplitude); the :data:`N_SCREENED` best pairs of each screen go on.
5. **Physical fit** of each kept pair in each mode whose dynamics can give its period ratio, with a
   fixed budget (:class:`FitBudget`) and deterministic, well-spread starts: stratified shapes
   (:func:`shape_solutions`) x quasi-uniform orientations (:func:`spread_orientations`, shifted per
   pair by :func:`pair_shift`), short and full Levenberg-Marquardt, a wider budget in two attempts
   for the best screened pairs; then shape restarts and fresh fits of the pairs (:func:`refit_pairs`)
   of the best distinct states, and more rounds of restarts for the solutions near the best
   (:func:`polish_solutions`). No random draw: the solutions do not depend on a seed. The fits of
   one stage and mode run as one batch (:func:`fit_pairs`, :func:`restart_optima`): every start is
   advanced by :func:`tumble.classify.rotation.optimise_states`, one model call per iteration for
   all of them, each start taking the steps it would take alone
   (:func:`tumble.classify.rotation.optimise_state`, the reference).
6. **Solutions** (:func:`collect_solutions`): optima with the same mode and periods (within
   :data:`SAME_SOLUTION_CYCLES` cycles per span in ``f_psi`` and ``f_phi``) are one solution;
   ranked by ``BIC = -2 ln L_max + k ln N`` (Schwarz 1978) of a re-fit with the inertia ratios free
   of the shape (:data:`DEFAULT_RANKING`; the state, periods and intervals stay the search
   model's); those within :data:`SOLUTION_DELTA_BIC`
   of the best are listed with relative probabilities ``exp(-Delta/2)`` normalised over the list,
   and 68 % intervals of ``P_psi`` and ``P_phi`` from the Laplace approximation at each solution's
   own optimum (:func:`laplace_approximation`), never from a mixture of separated modes.
   Other ranking rules (:data:`RANKING_RULES`, :func:`rank_solutions`: each solution polished to
   the top of its mode, re-fitted with the inertia free of the shape, with the Student-t likelihood
   or the Lommel-Seeliger + Lambert law, or ranked by the Laplace ln Z) are compared side by side
   by ``benchmarks/bench_solutions.py --ranking``; :data:`DEFAULT_RANKING` is the one used.

Every listed solution is a scientific estimate for research use: the physical model is a triaxial
ellipsoid with homogeneous inertia, so a real body can prefer a wrong lattice.
"""

from __future__ import annotations

import functools
import math
import warnings
from dataclasses import dataclass

import numpy as np

from tumble.classify.noise import MODEL_ERROR_FLOOR_MAG
from tumble.classify.rotation import (
    npa_candidates,
    optimise_state,
    optimise_states,
    thin_lightcurve,
)
from tumble.classify.thresholds import MIN_CYCLES
from tumble.exceptions import TumbleError
from tumble.model import (
    FourierBasis,
    FourierVariant,
    legendre_drift,
    linear_log_evidence,
    nuisance_design,
    prepare_linear,
)

__all__ = [
    "Solution", "SolutionSearch", "FitBudget", "Lattice", "FrequencyPair", "SolutionLaplace",
    "enumerate_solutions", "search_solutions", "candidate_lattices", "aliased_bases", "daily_aliasing",
    "frequency_pairs", "screened_pairs", "screen_orders", "ScreenTerms", "leading_term", "union_by_rank", "polish_solutions", "refine_fully", "screen_chi2", "screen_chi2_reference", "laplace_approximation", "collect_solutions", "cover_other_poles",
    "shape_solutions", "shape_restarts", "constant_ratio_shapes", "pair_shift",
    "spread_orientations", "orientation_shift", "npa_models", "distinct_optima", "fit_pair", "fit_pairs", "PairFit", "pair_starts", "refit_jobs", "restart_optima", "refit_pairs", "restart_optimum", "SOLUTION_DELTA_BIC", "NPA_MODES",
]

#: The NPA modes fitted (the physical model's names).
NPA_MODES = ("SAM", "LAM")
#: Solutions listed: BIC within this of the best. 2 ln B > 10 is "very strong" evidence against
#: (Kass & Raftery 1995, section 3.2); anything closer is a solution a referee could still ask for.
SOLUTION_DELTA_BIC = 10.0
#: The evidence's best two-period pairs used as lattices (it keeps at most four).
N_EVIDENCE_LATTICES = 3
#: Alias shifts of the fundamental basis frequency, cycles per day: the basis can be twice a
#: physical frequency (ellipsoid symmetry), so a one-day alias of that frequency is two on f1.
F1_ALIAS_SHIFTS = (-2.0, -1.0, 0.0, 1.0, 2.0)
#: Alias shifts of the second basis frequency, cycles per day (one-day aliases; common practice).
F2_ALIAS_SHIFTS = (-1.0, 0.0, 1.0)
#: Daily aliases are tried when at least this share of the hours of the day holds no data (48 bins):
#: a light curve seen from one longitude every night cannot tell f from f +- 1 c/d well.
ALIAS_MIN_GAP_SHARE = 0.25
#: Two frequency pairs closer than this (cycles per span, in both frequencies) are one candidate.
SAME_PAIR_CYCLES = 0.05
#: Two optima closer than this (cycles per span, in f_psi and f_phi) with the same mode are one solution.
SAME_SOLUTION_CYCLES = 0.25
#: Terms (n_phi, n_psi) of the SAM screen's two-dimensional Fourier series in the physical
#: frequencies (Kaasalainen 2001): those among the 8 strongest terms in at least a quarter of 48
#: simulated SAM ellipsoids (8 inertia pairs x 2 excitations x 3 angular-momentum directions, noise-free,
#: 40 days; ``benchmarks/bench_screens.py --content``), strongest on average first.
SAM_SCREEN_TERMS = ((1, 0), (2, -2), (2, 0), (1, -2), (0, 2), (1, 2), (3, 0), (3, -2), (4, -4), (4, -2))
#: The same measurement for the LAM screen (48 simulated LAM ellipsoids).
LAM_SCREEN_TERMS = ((1, 0), (2, 2), (2, 0), (1, 2), (0, 2), (4, 4), (4, 2), (3, 0), (3, 2), (4, 0))
#: Legendre degree of the drift of the leading term's coefficients (the term nearest the evidence's
#: strongest frequency): over weeks the aspect and phase angle change, and the strongest term's
#: slowly changing amplitude is what wrong pairs otherwise absorb (Apophis-like SAM: true pair 4th
#: without drift, 2nd with a linear one; a quadratic one ranked it no better in trials).
SCREEN_DRIFT_DEGREE = 1


@dataclass(frozen=True)
class ScreenTerms:
    """One linear screen: the terms of its truncated two-dimensional Fourier series and its drift.

    Attributes
    ----------
    name : str
        The mode whose measured light-curve content the terms are (``"SAM"``, ``"LAM"``), or a label.
    terms : tuple of (int, int)
        ``(n_phi, n_psi)``: a cosine and a sine of ``2 pi (n_phi f_phi + n_psi f_psi) t`` each.
    drift_degree : int
        Legendre degree of the drift of the leading term's coefficients (0: none); the leading term
        is the one nearest the light curve's strongest frequency (:func:`leading_term`).
    """

    name: str
    terms: tuple
    drift_degree: int = 0


#: The screens, each ranking the pairs on its own (the union of their best goes on): one per NPA
#: mode, with the terms that carry the power of simulated tumblers of that mode. The true pair of a
#: tumbler of either mode ranks near the top of its mode's screen (``benchmarks/bench_screens.py``:
#: the Apophis-like SAM 2nd, the library's detected dense tumblers <= 4th; the previous low-order and
#: even-in-psi sets ranked the Apophis-like pair 708th and 44th).
SCREEN_TERM_SETS = (
    ScreenTerms("SAM", SAM_SCREEN_TERMS, SCREEN_DRIFT_DEGREE),
    ScreenTerms("LAM", LAM_SCREEN_TERMS, SCREEN_DRIFT_DEGREE),
)
#: Frequency pairs passed from each screen to the physical fit (the union goes on). With the mode
#: screens the true pair ranks <= 4th in its own mode's screen on the library's detected dense
#: tumblers and 11th on the demo's KRN-007 (``benchmarks/bench_screens.py``), so 12 suffice, and
#: the budget of the 8 pairs per screen no longer fitted pays for the wide fits of ``FitBudget.n_wide``.
N_SCREENED = 12
#: The screen's light curve is thinned evenly to at most this many points (cost linear in points).
SCREEN_MAX_POINTS = 800
#: Pairs whose screen designs are built and solved together (800 points x 24 columns x 64 pairs: 10 MB).
SCREEN_BLOCK_PAIRS = 64
#: A pair whose screen normal matrix has its smallest eigenvalue below this fraction of the largest
#: (singular values 1e-4 apart: the normal equations keep ~8 digits) is solved by plain least squares.
SCREEN_EIGEN_RCOND = 1e-8
#: Shortest rotation period P_psi considered, hours: below the fastest tumbler known, 2008 TC3's
#: P_psi ~ 99 s (Scheirich et al. 2010, MAPS 45, 1804); the lattices themselves bound it in practice.
MIN_P_PSI_H = 0.005
#: Longest P_psi considered, in multiples of span / MIN_CYCLES (a longer one cannot be established).
MAX_P_PSI_SPAN_FACTOR = 3.0
#: State restarts: the best distinct solutions of each mode whose shape is redrawn along the
#: constant-ratio curve (a wrong ellipsoid with the right period ratio is a deep local optimum).
N_RESTART_TOP = 4
#: Shapes along the constant-ratio curve per restart (the fitted one first) and orientations each.
N_RESTART_SHAPES = 6
N_RESTART_ORIENT = 2
#: Restarts refined fully (after the short refinement of all of them).
N_RESTART_LM = 2
#: Fresh wide fits of the pair behind each of those best distinct solutions (:func:`refit_pairs`).
N_REFIT_ATTEMPTS = 2
#: Polishing: every distinct solution within this of the best BIC gets more rounds of shape restarts,
#: so that the ranking near the listing edge is not an accident of one restart (the demo's KRN-007:
#: its true solution sat 8.8 below a wrong one after one round, above it after more).
POLISH_DELTA_BIC = 2.0 * SOLUTION_DELTA_BIC
#: Rounds of shape restarts of each polished solution, and at most this many solutions polished.
POLISH_ROUNDS = 2
N_POLISHED = 6
#: ln of the jitter (mag) of every start: 1 mmag, below any survey's errors (the optimiser sets it at the end).
START_LN_JITTER = math.log(1e-3)
#: Levenberg-Marquardt iterations of a short refinement.
SHORT_LM_ITERATIONS = 12
#: The evidence's pair re-located on a local grid without drift: half-width and step (cycles per span).
REFINE_HALF_WIDTH = 0.6
REFINE_STEP = 0.03
REFINE_VARIANTS = (FourierVariant(4, 0, 2), FourierVariant(4, 0, 3))
#: Central-difference step of the periods' gradient, in units of each parameter's Laplace standard
#: deviation (small against the mode's width, large against the model's rounding).
PERIOD_GRADIENT_STEP_SIGMA = 1e-3
#: A listed solution's Laplace period interval wider than this fraction of the period is not given:
#: the delta method's linearisation has failed (a near-symmetric SAM's P_psi came out 264 h with a
#: 1088 h sigma, an interval into negative periods, while the search fixed the period to 1 %).
MAX_LAPLACE_PERIOD_REL_SIGMA = 0.5
#: Distinct solutions of each mode (the best first) re-fitted or polished by a ranking rule
#: (:func:`rank_solutions`; one LM run or one polish each): the search puts the rest tens of nats
#: below, and they are scored at their own state.
N_RANKED_PER_MODE = 4
#: The ranking rule of :func:`search_solutions` (a name of :data:`RANKING_RULES`): the BIC of a re-fit
#: with the inertia free of the shape, the only cheap rule that fixed a held-out faceted tumbler
#: (10/12 tops right against 9/12, no right top lost on either half; docs/methods-classify.md 5b).
DEFAULT_RANKING = "free-inertia"


@dataclass(frozen=True)
class FitBudget:
    """The fixed budget of the physical fit of one candidate in one mode.

    Attributes
    ----------
    n_screened : int
        Frequency pairs passed from each linear screen to the physical fit (:data:`N_SCREENED`).
    n_shapes : int
        Well-spread ellipsoids (axis ratios and excitation) that give the candidate's period ratio.
    n_orientations : int
        Quasi-uniform spin directions and phases per shape (the best of each shape is kept).
    n_short : int
        Starts (best shapes) refined by a short Levenberg-Marquardt run; the best is kept.
    n_full : int
        Of the short refinements of a pair, the best refined fully (the likelihood after a short run
        says little about the basin, so every screened pair gets its full refinement: with only
        the best short runs of all pairs refined, the demo's KRN-007 lost its true solution).
    n_wide : int
        The best this many pairs of each screen get the wider budget below (the true pair is
        usually among them; its fit, not its screening, was what depended on the seed). Since the
        batched fits every screened pair (``N_SCREENED``; was 10 of 12, and 5 of 20 before): the
        demo's KRN-007 true pair, 11th in the SAM screen, got only a narrow fit, and the wide fit of
        CAL-dense-npa-029's true pair took it from 10/12 to 11/12 tops right on the held-out
        half, at +12 % search CPU (docs/methods-classify.md section 5b).
    n_shapes_wide, n_short_wide, n_full_wide : int
        ``n_shapes``, ``n_short`` and ``n_full`` of those pairs.
    n_attempts_wide : int
        Independent fits of each of those pairs (other Halton points of the shapes, another shift
        of the orientations; the best is kept). One fit of the true pair of the demo's KRN-007 from
        the wide budget reached the true optimum in 10 of 12 start sets (plus its shape restarts),
        so two attempts fail together in about 3 % if the sets are independent.
    """

    n_screened: int = N_SCREENED
    n_shapes: int = 4
    n_orientations: int = 48
    n_short: int = 2
    n_full: int = 1
    n_wide: int = N_SCREENED
    n_shapes_wide: int = 8
    n_short_wide: int = 4
    n_full_wide: int = 2
    n_attempts_wide: int = 2


@dataclass(frozen=True)
class Lattice:
    """A two-period basis ``(f1, f2)`` of the light curve, c/d, and where it came from."""

    f1_per_d: float
    f2_per_d: float
    source: str


@dataclass(frozen=True)
class FrequencyPair:
    """A candidate ``(f_psi, f_phi)``, c/d, with its mapping from the evidence's basis.

    Attributes
    ----------
    f_psi_per_d, f_phi_per_d : float
    candidate : tuple
        ``(mode, f_psi, f_phi, (a_psi, b_psi), (a_phi, b_phi))`` of
        :func:`tumble.classify.rotation.npa_candidates` (``f = a f1 + b f2`` on the aliased basis).
    source : str
        Lattice and alias, e.g. ``"evidence-1 f1+2 c/d"``.
    """

    f_psi_per_d: float
    f_phi_per_d: float
    candidate: tuple
    source: str


@dataclass(frozen=True, eq=False)
class SolutionLaplace:
    """A solution's periods, their errors and ln Z from the shared Laplace approximation of its mode.

    Attributes
    ----------
    p_psi_h, p_phi_h : float
        Periods at the optimum, hours.
    p_psi_sigma_h, p_phi_sigma_h : float
        Their standard deviations, hours: the gradient of each period propagated through the mode's
        covariance (NaN when the approximation failed).
    log_evidence : float
        Laplace ln Z of the mode, nats (:func:`tumble.inference.local.laplace_log_evidence`).
    laplace : tumble.inference.local.LaplaceApproximation or None
        The approximation itself (the same one the sampler of the mode starts from), None when failed.
    """

    p_psi_h: float
    p_phi_h: float
    p_psi_sigma_h: float
    p_phi_sigma_h: float
    log_evidence: float
    laplace: object = None


@dataclass(frozen=True, eq=False)
class Solution:
    """One tumbling solution: a mode, its periods and how good it is.

    Attributes
    ----------
    mode : {'SAM', 'LAM'}
    p_psi_h, p_phi_h : float
        Rotation (P_psi) and precession (P_phi) periods at the optimum, hours.
    p_psi_interval_h, p_phi_interval_h : tuple of float
        68 % intervals (lo, hi), hours, from the Laplace approximation of this solution's own mode;
        ``(nan, nan)`` where it fails (:func:`laplace_period_interval`).
    log_likelihood : float
        Maximum log-likelihood, nats (on the ``n_points`` fitted points).
    criterion : float
        ``BIC = -2 ln L_max + k ln N`` (Schwarz 1978), nats.
    delta : float
        ``criterion - best criterion`` (>= 0).
    relative_probability : float
        ``exp(-delta / 2)`` normalised over the listed solutions.
    log_evidence_laplace : float
        Laplace approximation of ln Z (nats), a cross-check of the ranking.
    n_parameters, n_points : int
        ``k`` and ``N`` of the criterion.
    state : numpy.ndarray, shape (ndim,)
        Optimum in the physical model's parameter space (:attr:`tumble.model.PhysicalModel.space`).
    candidate : tuple
        The frequency mapping that led here (see :class:`FrequencyPair`).
    source : str
        The lattice and alias of that mapping.
    """

    mode: str
    p_psi_h: float
    p_phi_h: float
    p_psi_interval_h: tuple
    p_phi_interval_h: tuple
    log_likelihood: float
    criterion: float
    delta: float
    relative_probability: float
    log_evidence_laplace: float
    n_parameters: int
    n_points: int
    state: np.ndarray
    candidate: tuple
    source: str
    n_poles: int = 1

    def to_dict(self) -> dict:
        """JSON-ready record (the ``solutions`` entries of verdict.json; units in the key names)."""
        return {"mode": self.mode, "p_psi_h": float(self.p_psi_h), "p_psi_h_lo": float(self.p_psi_interval_h[0]),
                "p_psi_h_hi": float(self.p_psi_interval_h[1]), "p_phi_h": float(self.p_phi_h),
                "p_phi_h_lo": float(self.p_phi_interval_h[0]), "p_phi_h_hi": float(self.p_phi_interval_h[1]),
                "log_likelihood": float(self.log_likelihood), "bic": float(self.criterion),
                "delta_bic": float(self.delta), "relative_probability": float(self.relative_probability),
                "n_poles": int(self.n_poles), "source": self.source}


@dataclass(frozen=True, eq=False)
class Optimum:
    """A refined state of one mode and the frequency pair it started from."""

    mode: str
    x: np.ndarray
    log_likelihood: float
    pair: FrequencyPair


@dataclass(frozen=True, eq=False)
class SolutionSearch:
    """What :func:`search_solutions` found.

    Attributes
    ----------
    solutions : tuple of Solution
        Listed solutions (within :data:`SOLUTION_DELTA_BIC` of the best), best first.
    best_by_mode : dict
        Mode -> its best :class:`Solution` (listed or not), for the mode comparison.
    distinct : tuple of Solution
        Every distinct solution found, best first (``relative_probability`` 0 when not listed).
    n_pairs, n_screened, n_fits : int
        Frequency pairs enumerated, passed by the screen, and physical fits made.
    """

    solutions: tuple
    best_by_mode: dict
    distinct: tuple
    n_pairs: int
    n_screened: int
    n_fits: int


@dataclass(frozen=True)
class RankingRule:
    """How the distinct solutions are scored before they are ranked (an entry of :data:`RANKING_RULES`).

    Attributes
    ----------
    name : str
    description : str
        One line for the benchmark's table.
    law : str
        Scattering law of the ranking fit (a name of :data:`tumble.brightness.SCATTERING_LAWS`).
    free_inertia : bool
        The ranking fit has the inertia ratios free of the shape (:class:`tumble.model.PhysicalModel`).
    student_t : bool
        Student-t likelihood in the ranking fit.
    polish : bool
        Each solution is carried to the top of its own mode (:func:`tumble.inference.local.polish_mode`)
        before it is scored.
    evidence : bool
        Ranked by ``-2 ln Z`` of the Laplace approximation of each mode instead of the BIC.
    """

    name: str
    description: str
    law: str = "lommel-seeliger"
    free_inertia: bool = False
    student_t: bool = False
    polish: bool = False
    evidence: bool = False

    @property
    def refits(self) -> bool:
        """The ranking model differs from the search's (each solution is re-fitted by Levenberg-Marquardt)."""
        return self.law != "lommel-seeliger" or self.free_inertia or self.student_t


#: The ranking rules (``benchmarks/bench_solutions.py --ranking`` compares them side by side);
#: :data:`DEFAULT_RANKING` is the one :func:`search_solutions` uses.
RANKING_RULES = {r.name: r for r in (
    RankingRule("bic", "BIC of the search's optima (Schwarz 1978)"),
    RankingRule("polished", "BIC after each solution is polished to the top of its mode", polish=True),
    RankingRule("free-inertia", "BIC of a re-fit with the inertia free of the shape", free_inertia=True),
    RankingRule("free-inertia-polished", "BIC of a re-fit with free inertia, polished", free_inertia=True,
                polish=True),
    RankingRule("student-t", "BIC of a re-fit with the Student-t likelihood, polished", student_t=True, polish=True),
    RankingRule("ls-lambert", "BIC of a re-fit with the Lommel-Seeliger + Lambert law", law="ls-lambert"),
    RankingRule("laplace", "-2 ln Z of each mode's Laplace approximation (Kass & Raftery 1995)", evidence=True),
    RankingRule("laplace-polished", "-2 ln Z (Laplace) after each solution is polished", polish=True,
                evidence=True),
    RankingRule("free-inertia-laplace", "-2 ln Z (Laplace) of a re-fit with free inertia", free_inertia=True,
                evidence=True),
    RankingRule("student-t-laplace", "-2 ln Z (Laplace) of a Student-t re-fit, polished", student_t=True,
                polish=True, evidence=True),
)}


# -- 1-3: lattices, aliases, frequency pairs ---------------------------------------------------------


def refined_pairs(lc, f1, f2) -> list:
    """The evidence's ``(f1, f2)`` re-located by two-period series without drift, ``[(f1', f2'), ...]``.

    The evidence's series carry Legendre drift in their coefficients, and a coefficient whose
    phase drifts linearly is a shifted frequency: with drift the best ``f1`` can sit 0.3-0.4 cycles
    per span from the body's true lattice, outside the basin of the physical fit. Without drift
    the frequencies are pinned (measured on simulated LAM and SAM bodies: 0.03-0.04 c/d offsets
    over 9.3 d fell to < 0.002 c/d). Each variant of :data:`REFINE_VARIANTS` gives its best pair on
    a local grid of +-:data:`REFINE_HALF_WIDTH` cycles per span.
    """
    if not (np.isfinite(f1) and np.isfinite(f2) and f1 > 0 and f2 > 0):
        return []
    span = lc.span_d
    off = np.arange(-REFINE_HALF_WIDTH, REFINE_HALF_WIDTH + 1e-9, REFINE_STEP) / span
    g1, g2 = f1 + off, f2 + off
    g1, g2 = g1[g1 > 0], g2[g2 > 0]
    a1, a2 = np.meshgrid(g1, g2, indexing="ij")
    a1, a2 = a1.ravel(), a2.ravel()
    ok = a2 < a1
    if not ok.any():
        return []
    a1, a2 = a1[ok], a2[ok]
    try:
        data = prepare_linear(lc, error_floor_mag=MODEL_ERROR_FLOOR_MAG)
    except (TumbleError, ValueError, np.linalg.LinAlgError):
        return []
    out = []
    for variant in REFINE_VARIANTS:
        basis = FourierBasis.build([variant])
        lz = linear_log_evidence(data, basis, a1, a2)[:, 0]
        if not np.any(np.isfinite(lz)):
            continue
        k = int(np.nanargmax(lz))
        pair = (float(a1[k]), float(a2[k]))
        if all(abs(pair[0] - p[0]) > 0.1 / span or abs(pair[1] - p[1]) > 0.1 / span for p in out):
            out.append(pair)
    return out


def two_period_pair(lc) -> list:
    """The best order-2 pair of the joint two-period least-squares scan as ``[(f_high, f_low)]`` (c/d).

    With drift terms a wrong lattice can fit a short dense campaign as closely as the true one,
    while the plain two-period scan often hits the true pair; the physical fit tells them apart.
    """
    from tumble.periodogram import two_period_scan

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = two_period_scan(lc, order=2)
    except (TumbleError, ValueError, np.linalg.LinAlgError):
        return []
    fa, fb = res.f1_per_d, res.f2_per_d
    if not (np.isfinite(fa) and np.isfinite(fb) and fa > 0 and fb > 0):
        return []
    return [(float(max(fa, fb)), float(min(fa, fb)))]


def candidate_lattices(lc, evidence) -> list:
    """The two-period bases tried: evidence (best first), plain scan, re-located without drift."""
    f1, f2 = evidence.f1_npa_per_d, evidence.f2_per_d
    found = [Lattice(f1, f2, "evidence")]
    found += [Lattice(a, b, f"evidence-{i + 1}") for i, (a, b) in enumerate(evidence.npa_pairs[:N_EVIDENCE_LATTICES])]
    found += [Lattice(a, b, "scan") for a, b in two_period_pair(lc)]
    found += [Lattice(a, b, "no-drift") for a, b in refined_pairs(lc, f1, f2)]
    out = []
    for lat in found:
        if not (np.isfinite(lat.f1_per_d) and np.isfinite(lat.f2_per_d) and lat.f1_per_d > 0 and lat.f2_per_d > 0):
            continue
        if all(abs(lat.f1_per_d - o.f1_per_d) > 1e-6 or abs(lat.f2_per_d - o.f2_per_d) > 1e-6 for o in out):
            out.append(lat)
    return out


def daily_aliasing(lc) -> bool:
    """Nightly data that leave at least :data:`ALIAS_MIN_GAP_SHARE` of the hours of the day empty."""
    if lc.n_sessions < 2:
        return False
    bins = np.unique(np.floor(np.mod(np.asarray(lc.t, float), 1.0) * 48).astype(int))
    return (1.0 - len(bins) / 48.0) >= ALIAS_MIN_GAP_SHARE


def aliased_bases(lattice: Lattice, aliasing: bool) -> list:
    """``[(g1, g2, sign2, label)]``: the lattice and its daily aliases (``g2 = sign2 (f2 + k2) > 0``)."""
    shifts1 = F1_ALIAS_SHIFTS if aliasing else (0.0,)
    shifts2 = F2_ALIAS_SHIFTS if aliasing else (0.0,)
    out = []
    for k1 in shifts1:
        for k2 in shifts2:
            g1, g2 = lattice.f1_per_d + k1, lattice.f2_per_d + k2
            if g1 <= 0 or g2 == 0:
                continue
            label = lattice.source + (f" f1{k1:+g} c/d" if k1 else "") + (f" f2{k2:+g} c/d" if k2 else "")
            out.append((g1, abs(g2), 1.0 if g2 > 0 else -1.0, label))
    return out


def _in_range(f_psi, span_h) -> bool:
    p_psi = 24.0 / f_psi
    return MIN_P_PSI_H <= p_psi <= span_h / MIN_CYCLES * MAX_P_PSI_SPAN_FACTOR


def frequency_pairs(span_d: float, lattices, aliasing: bool) -> list:
    """Every distinct ``(f_psi, f_phi)`` of the lattices, their aliases and both modes' relations.

    ``span_d`` (days) sets the tolerance of "the same pair" (:data:`SAME_PAIR_CYCLES`) and the
    longest ``P_psi`` considered.
    """
    span_h = span_d * 24.0
    tol = SAME_PAIR_CYCLES / span_d
    out, keys = [], set()
    for lattice in lattices:
        for g1, g2, sign2, label in aliased_bases(lattice, aliasing):
            hi, lo, swap = (g1, g2, False) if g1 >= g2 else (g2, g1, True)
            for cand in npa_candidates(hi, lo, forms="all"):
                mode, fpsi, fphi, cpsi, cphi = cand
                if not _in_range(fpsi, span_h):
                    continue
                key = (round(fpsi / tol), round(fphi / tol))
                if key in keys:
                    continue
                keys.add(key)
                cpsi, cphi = _basis_coefficients(cpsi, swap, sign2), _basis_coefficients(cphi, swap, sign2)
                out.append(FrequencyPair(float(fpsi), float(fphi), (mode, float(fpsi), float(fphi), cpsi, cphi), label))
    return out


def _basis_coefficients(coef, swap, sign2) -> tuple:
    """``(a, b)`` of ``f = a f1 + b f2`` back on the lattice's own (f1, f2) from the aliased, ordered basis."""
    a, b = coef
    if swap:
        a, b = b, a
    return (float(a), float(b * sign2))


# -- 4: the linear screen -----------------------------------------------------------------------------


def _screen_columns(t, f_psi, f_phi, terms):
    """Fourier columns of ``terms`` ((n_phi, n_psi) pairs) at one pair, shape (n, 2 len(terms))."""
    cols = []
    for n_phi, n_psi in terms:
        arg = 2.0 * np.pi * (n_phi * f_phi + n_psi * f_psi) * t
        cols += [np.cos(arg), np.sin(arg)]
    return np.stack(cols, axis=1)


def leading_term(pair, terms, f_lead_per_d: float) -> tuple:
    """The term ``(n_phi, n_psi)`` of ``terms`` whose frequency ``|n_phi f_phi + n_psi f_psi|`` at ``pair``
    is nearest ``f_lead_per_d`` (c/d; the light curve's strongest frequency), the first one on ties."""
    freq = [abs(n_phi * pair.f_phi_per_d + n_psi * pair.f_psi_per_d) for n_phi, n_psi in terms]
    return tuple(terms[int(np.argmin(np.abs(np.asarray(freq) - f_lead_per_d)))])


def _screen_time(lc) -> tuple:
    """``(t, tau)``: times from the mean (days) and ``(t - t_mid) / (span / 2)`` in [-1, 1] (the drift variable)."""
    t_jd = np.asarray(lc.t, float)
    half = max(0.5 * float(np.ptp(t_jd)), 1e-12)
    return t_jd - float(np.mean(t_jd)), (t_jd - 0.5 * (t_jd.min() + t_jd.max())) / half


def _screen_design(t, tau, pair, screen: ScreenTerms, f_lead_per_d: float) -> np.ndarray:
    """The screen's Fourier columns at one pair, then its leading term times ``P_1..P_d(tau)``."""
    cols = _screen_columns(t, pair.f_psi_per_d, pair.f_phi_per_d, screen.terms)
    if screen.drift_degree <= 0 or not np.isfinite(f_lead_per_d):
        return cols
    lead = _screen_columns(t, pair.f_psi_per_d, pair.f_phi_per_d, (leading_term(pair, screen.terms, f_lead_per_d),))
    return np.hstack([cols] + [lead * p[:, None] for p in legendre_drift(tau, screen.drift_degree)])


def _screen_design_batch(t, tau, f_psi, f_phi, screen: ScreenTerms, f_lead_per_d: float) -> np.ndarray:
    """:func:`_screen_design` of many pairs at once (frequencies ``(P,)`` c/d), shape ``(P, n, columns)``."""
    n_phi = np.array([a for a, _ in screen.terms], float)
    n_psi = np.array([b for _, b in screen.terms], float)
    freq = n_phi[None, :] * f_phi[:, None] + n_psi[None, :] * f_psi[:, None]  # (P, T)
    blocks = []
    arg = (2.0 * np.pi) * freq[:, None, :] * t[None, :, None]  # (P, n, T)
    blocks += [np.cos(arg), np.sin(arg)]
    if screen.drift_degree > 0 and np.isfinite(f_lead_per_d):
        # the leading term of each pair (leading_term: the first on ties, as argmin)
        lead = freq[np.arange(len(freq)), np.argmin(np.abs(np.abs(freq) - f_lead_per_d), axis=1)]
        arg1 = (2.0 * np.pi) * lead[:, None] * t[None, :]
        c1, s1 = np.cos(arg1), np.sin(arg1)
        for p in legendre_drift(tau, screen.drift_degree):
            blocks += [(c1 * p[None, :])[..., None], (s1 * p[None, :])[..., None]]
    return np.concatenate(blocks, axis=2)


def screen_chi2(lc, pairs, terms: ScreenTerms = SCREEN_TERM_SETS[0], f_lead_per_d: float = math.nan) -> np.ndarray:
    """Chi-square of a screen's series at each pair (zero-points free), shape (len(pairs),).

    Parameters
    ----------
    lc : LightCurve
    pairs : sequence of FrequencyPair
    terms : ScreenTerms
        The screen (:data:`SCREEN_TERM_SETS`).
    f_lead_per_d : float
        The light curve's strongest frequency, c/d (the evidence's ``f1``): the screen term nearest it
        gets the drift columns (:attr:`ScreenTerms.drift_degree`); NaN: no drift.

    Fast route: the whitened nuisance columns are projected out once (QR); then, for blocks of
    :data:`SCREEN_BLOCK_PAIRS` pairs at once, the normal equations of the projected series are
    solved through their eigen-decomposition and the chi-square is
    that of the residual itself; a pair whose normal matrix is ill-conditioned (below
    :data:`SCREEN_EIGEN_RCOND`) gets the plain least squares. :func:`screen_chi2_reference` is the
    plain least squares per pair with the nuisance columns in the design.
    """
    t, tau = _screen_time(lc)
    w = 1.0 / np.hypot(np.asarray(lc.err, float), MODEL_ERROR_FLOOR_MAG)
    z, _ = nuisance_design(lc)
    zw = z * w[:, None]
    q, _ = np.linalg.qr(zw)
    y = np.asarray(lc.reduced_mag, float) * w
    yp = y - q @ (q.T @ y)
    base = float(yp @ yp)
    f_psi = np.array([p.f_psi_per_d for p in pairs], float)
    f_phi = np.array([p.f_phi_per_d for p in pairs], float)
    out = np.empty(len(pairs))
    for i0 in range(0, len(pairs), SCREEN_BLOCK_PAIRS):
        sl = slice(i0, i0 + SCREEN_BLOCK_PAIRS)
        f = _screen_design_batch(t, tau, f_psi[sl], f_phi[sl], terms, f_lead_per_d) * w[None, :, None]
        fp = f - q[None] @ (q.T[None] @ f)  # (B, n, c)
        fpt = np.swapaxes(fp, 1, 2)
        g = fpt @ fp
        b = (fpt @ yp[None, :, None])[..., 0]
        lam, vec = np.linalg.eigh(g)
        inv = 1.0 / np.where(lam > 0, lam, 1.0)
        coef = (vec @ (inv[..., None] * (np.swapaxes(vec, 1, 2) @ b[..., None])))[..., 0]
        r = yp[None, :] - (fp @ coef[..., None])[..., 0]
        chi2 = np.sum(r * r, axis=1)
        # the normal equations square the condition number: ill-conditioned pairs (terms that nearly
        # coincide, or slow terms the nightly zero-points absorb) get the plain least squares
        for j in np.flatnonzero(~(lam[:, 0] > SCREEN_EIGEN_RCOND * lam[:, -1])):
            coef_j, *_ = np.linalg.lstsq(fp[j], yp, rcond=None)
            rj = yp - fp[j] @ coef_j
            chi2[j] = float(rj @ rj)
        out[sl] = chi2 if np.isfinite(base) else math.nan
    return out


def screen_chi2_reference(lc, pairs, terms: ScreenTerms = SCREEN_TERM_SETS[0],
                          f_lead_per_d: float = math.nan) -> np.ndarray:
    """Slow reference of :func:`screen_chi2`: one least squares of [nuisance, Fourier, drift] per pair.

    The drift columns are built here from numpy's Legendre series, independently of the fast route.
    """
    t_jd = np.asarray(lc.t, float)
    t = t_jd - float(np.mean(t_jd))
    tau = (2.0 * t_jd - t_jd.min() - t_jd.max()) / (t_jd.max() - t_jd.min())
    w = 1.0 / np.hypot(np.asarray(lc.err, float), MODEL_ERROR_FLOOR_MAG)
    z, _ = nuisance_design(lc)
    y = np.asarray(lc.reduced_mag, float)
    drift = terms.drift_degree > 0 and np.isfinite(f_lead_per_d)
    out = np.empty(len(pairs))
    for i, p in enumerate(pairs):
        blocks = [z, _screen_columns(t, p.f_psi_per_d, p.f_phi_per_d, terms.terms)]
        if drift:
            n_phi, n_psi = leading_term(p, terms.terms, f_lead_per_d)
            arg = 2.0 * np.pi * (n_phi * p.f_phi_per_d + n_psi * p.f_psi_per_d) * t
            for d in range(1, terms.drift_degree + 1):
                leg = np.polynomial.legendre.Legendre.basis(d)(tau)
                blocks.append(np.stack([np.cos(arg) * leg, np.sin(arg) * leg], axis=1))
        a = np.hstack(blocks) * w[:, None]
        coef, *_ = np.linalg.lstsq(a, y * w, rcond=None)
        r = y * w - a @ coef
        out[i] = float(r @ r)
    return out


# -- 5: the physical fit --------------------------------------------------------------------------------


@functools.lru_cache(maxsize=4)
def _ratio_table(mode: str) -> tuple:
    """``(a_over_b (S,), b_over_c (S,), u (U,), ratio (S, U))``: ``P_phi/P_psi`` over the grid of
    :func:`constant_ratio_shapes` (NaN where the state is not of ``mode``); it does not depend on the
    ratio sought, so it is computed once per mode (read only)."""
    from tumble.dynamics import periods_unit_momentum
    from tumble.model import _inertia_from_ratios

    ab = np.geomspace(1.05, 3.5, 14)
    bc = np.geomspace(1.02, 2.2, 10)
    a_grid, b_grid = np.meshgrid(ab, bc, indexing="ij")
    a_grid, b_grid = a_grid.ravel(), b_grid.ravel()
    i1, i2 = _inertia_from_ratios(a_grid, b_grid)
    u = np.linspace(0.002, 0.998, 160)
    if mode == "SAM":
        idd = 1.0 - u[None, :] * (1.0 - i2[:, None])
    else:
        idd = i1[:, None] + u[None, :] * (i2 - i1)[:, None]
    ok = (np.abs(idd - i2[:, None]) > 2e-3) & (idd < 1.0)
    idd = np.where(ok, idd, 0.5 * (i1 + i2)[:, None] if mode == "LAM" else 0.5 * (i2 + 1)[:, None])
    pp, pf = periods_unit_momentum(np.broadcast_to(i1[:, None], idd.shape), np.broadcast_to(i2[:, None], idd.shape), idd)
    table = np.where(ok, np.asarray(pf) / np.asarray(pp), np.nan)
    for arr in (a_grid, b_grid, u, table):
        arr.setflags(write=False)
    return a_grid, b_grid, u, table


def constant_ratio_shapes(mode, ratio) -> list:
    """Every ellipsoid of a grid of axis ratios with its excitation ``u`` giving ``P_phi/P_psi = ratio`` in ``mode``.

    Returns ``[(a_over_b, b_over_c, u), ...]`` (one root in ``u`` per shape of a 14 x 10 grid; closed-form
    periods of :func:`tumble.dynamics.periods_unit_momentum`, tabulated once per mode by
    :func:`_ratio_table`); empty when the mode cannot give the ratio.
    """
    a_grid, b_grid, u, table = _ratio_table(str(mode))
    r = table - ratio
    sign = np.sign(r)
    cross = np.isfinite(r[:, :-1]) & np.isfinite(r[:, 1:]) & (sign[:, :-1] * sign[:, 1:] < 0)
    sols = []
    for s in np.flatnonzero(cross.any(axis=1)):
        j = int(np.argmax(cross[s]))  # the first crossing of each shape
        rs = r[s]
        uu = u[j] - rs[j] * (u[j + 1] - u[j]) / (rs[j + 1] - rs[j])
        sols.append((float(a_grid[s]), float(b_grid[s]), float(uu)))
    return sols


def shape_solutions(mode, ratio, n_pick=4, start=0) -> list:
    """``n_pick`` ellipsoids ``(a_over_b, b_over_c, u)`` with ``P_phi/P_psi = ratio`` in ``mode``, stratified.

    Points ``start + 1 .. start + n_pick`` of the two-dimensional Halton sequence (Halton 1960,
    Numer. Math. 2, 84; :class:`scipy.stats.qmc.Halton`, unscrambled) are laid over the box of
    ``(ln a/b, ln b/c)`` of the shapes of :func:`constant_ratio_shapes`, and each takes the nearest
    shape not yet taken: deterministic, and every prefix covers the set evenly (random picks left
    whole regions untried, and extremes-first orders waste a small budget on the corners). Empty
    when the mode cannot give the ratio.
    """
    from scipy.stats import qmc

    sols = constant_ratio_shapes(mode, ratio)
    if not sols:
        return []
    z = np.array([(math.log(a), math.log(b)) for a, b, _ in sols])
    lo, hi = z.min(axis=0), z.max(axis=0)
    z = (z - lo) / np.where(hi > lo, hi - lo, 1.0)
    seq = qmc.Halton(d=2, scramble=False)
    seq.fast_forward(1 + int(start))  # the first Halton point is the origin (a corner): skipped
    taken = []
    free = np.ones(len(sols), bool)
    for q in seq.random(min(n_pick, len(sols))):
        d2 = np.where(free, np.sum((z - q[None]) ** 2, axis=1), np.inf)
        k = int(np.argmin(d2))
        free[k] = False
        taken.append(sols[k])
    return taken


def pair_shift(index: int, n_dim: int) -> np.ndarray:
    """A deterministic Cranley-Patterson shift for the ``index``-th fit: ``frac(index * alpha)``.

    ``alpha`` holds the inverse powers of the generalised golden ratio (the root of
    ``x^(d+1) = x + 1``; an additive-recurrence low-discrepancy sequence, e.g. Niederreiter 1992,
    Random Number Generation and Quasi-Monte Carlo Methods, ch. 5), so neighbouring candidates
    (near-duplicate frequency pairs of one lattice) get different, evenly offset start sets and
    one unlucky set cannot fail them all.
    """
    g = 2.0
    for _ in range(60):
        g = (1.0 + g) ** (1.0 / (n_dim + 1))
    alpha = (1.0 / g) ** np.arange(1, n_dim + 1)
    return np.mod(int(index) * alpha, 1.0)


def orientation_shift(rng, n_dim: int) -> np.ndarray:
    """The Cranley-Patterson shift of the orientation set: zeros without ``rng``, else uniform draws."""
    return np.zeros(n_dim) if rng is None else rng.uniform(size=n_dim)


def spread_orientations(space, base: dict, n: int, *, skip: int = 0, shift=None) -> np.ndarray:
    """``(n, ndim)`` states with ``base`` fixed and the other parameters (the attitude) quasi-uniform.

    The free parameters take the points ``skip + 1 .. skip + n`` of the Halton sequence (Halton
    1960, Numer. Math. 2, 84; :class:`scipy.stats.qmc.Halton`, unscrambled), shifted modulo 1 by
    ``shift`` (Cranley & Patterson 1976, SIAM J. Numer. Anal. 13, 904: any shift keeps the set's
    spread), through each prior's inverse CDF. For the angular-momentum direction that map
    (longitude uniform, sine of the latitude uniform) is equal-area, so the directions cover the
    sphere evenly and the phases their circles; independent random draws leave gaps and clusters
    at the sizes used here (48 starts in four dimensions), which made the fit of the true pair
    depend on the seed.
    """
    from scipy.stats import qmc

    names = space.names
    free = [j for j, name in enumerate(names) if name not in base]
    seq = qmc.Halton(d=max(len(free), 1), scramble=False)
    seq.fast_forward(1 + int(skip))  # the first Halton point is the origin (a pole): skipped
    q = seq.random(n)
    if shift is not None:
        q = np.mod(q + np.asarray(shift, float)[None, :len(free)], 1.0)
    q = np.clip(q, 1e-9, 1.0 - 1e-9)
    x = np.empty((n, len(names)))
    for j, name in enumerate(names):
        if name in base:
            x[:, j] = base[name]
    for k, j in enumerate(free):
        x[:, j] = space.parameters[j].prior.ppf(q[:, k])
    return x


def _attitude_dim(space, base: dict) -> int:
    """Parameters not fixed by ``base`` (the attitude: direction and phases), i.e. the Halton dimension."""
    return sum(name not in base for name in space.names)


def shape_restarts(model, mode, x_best, rng=None, round_index: int = 0, index: int = 0) -> list:
    """Starts that keep the frequencies of a fitted state and take other shapes and orientations.

    The frequencies of an NPA state (``P_psi`` and the period ratio) are found well by the
    frequency mappings, but the fit then stalls in the shape: a wrong ellipsoid with the right
    period ratio is a deep local optimum, while from the right shape almost every orientation
    converges (measured on simulated SAM and LAM bodies; ``docs/methods-classify.md``). Returns
    ``N_RESTART_SHAPES x N_RESTART_ORIENT`` starts: the fitted shape and the next well-spread shapes
    of the constant-ratio set (:func:`shape_solutions`; round ``r`` takes the shapes after those of
    the rounds before), each with quasi-uniform orientations (:func:`spread_orientations`, also
    advanced by the round, shifted by :func:`pair_shift` of ``index``; ``rng`` only adds a shift).
    """
    from tumble.dynamics import periods_unit_momentum

    sp = model.space
    d = dict(zip(sp.names, x_best))
    args, _ = model.state_arrays(x_best[None])
    pp, pf = periods_unit_momentum(args[0], args[1], args[2])
    ratio = float(np.asarray(pf).ravel()[0] / np.asarray(pp).ravel()[0])
    n_new = N_RESTART_SHAPES - 1
    shapes = [(d["a_over_b"], d["b_over_c"], d["excitation_u"])]
    shapes += shape_solutions(mode, ratio, n_pick=n_new, start=round_index * n_new)
    xs = []
    for s, (ab, bc, u) in enumerate(shapes):
        base = {"p_psi_h": d["p_psi_h"], "excitation_u": u, "a_over_b": ab, "b_over_c": bc,
                "ln_jitter_mag": d["ln_jitter_mag"]}
        n_att = _attitude_dim(sp, base)
        shift = np.mod(pair_shift(index, n_att) + orientation_shift(rng, n_att), 1.0)
        xs.extend(spread_orientations(sp, base, N_RESTART_ORIENT,
                                      skip=(round_index * N_RESTART_SHAPES + s) * N_RESTART_ORIENT, shift=shift))
    return xs


def npa_models(sub, span_h: float, *, student_t: bool = False) -> dict:
    """The physical SAM and LAM models on the (thinned) light curve, by mode."""
    from tumble.model import PhysicalModel

    return {mode: PhysicalModel(sub, mode, p_psi_range_h=(MIN_P_PSI_H, max(10.0, 4 * span_h)), student_t=student_t)
            for mode in NPA_MODES}


@dataclass(frozen=True)
class PairFit:
    """One physical fit of the search: a frequency pair, its budget tier and its start set.

    Attributes
    ----------
    pair : FrequencyPair
    wide : bool
        The wider budget of the best screened pairs (:class:`FitBudget`).
    index : int
        The fit's place in the search: offsets the shapes' Halton points and shifts the orientation
        set (:func:`pair_shift`), so near-duplicate pairs and repeated attempts get other starts.
    """

    pair: FrequencyPair
    wide: bool = False
    index: int = 0


def pair_starts(model, mode: str, job: PairFit, budget: FitBudget, rng=None) -> list:
    """The starts of one fit (:func:`fit_pair`): the best orientation of each well-spread shape, best
    ``n_short`` of them first, as ``(ndim,)`` vectors; empty when the mode cannot give the period ratio."""
    pair = job.pair
    n_shapes = budget.n_shapes_wide if job.wide else budget.n_shapes
    n_short = budget.n_short_wide if job.wide else budget.n_short
    shapes = shape_solutions(mode, pair.f_psi_per_d / pair.f_phi_per_d, n_pick=n_shapes, start=job.index * n_shapes)
    if not shapes:
        return []
    blocks = []
    for ab, bc, u in shapes:
        base = {"p_psi_h": 24.0 / pair.f_psi_per_d, "excitation_u": u, "a_over_b": ab, "b_over_c": bc,
                "ln_jitter_mag": START_LN_JITTER}
        n_att = _attitude_dim(model.space, base)
        blocks.append(spread_orientations(model.space, base, budget.n_orientations,
                                          shift=np.mod(pair_shift(job.index, n_att) + orientation_shift(rng, n_att), 1.0)))
    # every shape's orientations in one model call (per row: one refused state voids only itself)
    ll = model.jitter_log_likelihood(np.concatenate(blocks), [START_LN_JITTER])[:, 0].reshape(len(blocks), -1)
    starts = []
    for xs, lls in zip(blocks, ll):
        j = int(np.argmax(lls))
        starts.append((float(lls[j]), xs[j]))
    starts.sort(key=lambda e: -e[0])
    return [x0 for _, x0 in starts[:n_short]]


def fit_pairs(model, mode: str, jobs, budget: FitBudget, rng=None) -> list:
    """The physical fits of many frequency pairs in one mode, batched: one :class:`Optimum` (or None) per job.

    Each job is :func:`fit_pair`'s procedure: ``n_shapes`` well-spread ellipsoids with the pair's
    period ratio (:func:`shape_solutions`) x ``n_orientations`` quasi-uniform orientations
    (:func:`spread_orientations`); the best start of each of the ``n_short`` best shapes gets a
    short Levenberg-Marquardt run, the best ``n_full`` of those a full one, and the best result is
    returned (None when the mode cannot give the period ratio; ``job.wide``: the wider budget).
    The short runs of all jobs are one batched optimisation
    (:func:`tumble.classify.rotation.optimise_states`, every start advanced with its own damping),
    and the full runs another, so the model's fixed cost per call is shared; each start takes the
    same steps as it would alone (:func:`tumble.classify.rotation.optimise_state`, the reference).
    """
    jobs = list(jobs)
    starts = [pair_starts(model, mode, job, budget, rng) for job in jobs]
    owner = np.concatenate([np.full(len(st), j, int) for j, st in enumerate(starts)] + [np.empty(0, int)])
    if owner.size == 0:
        return [None] * len(jobs)
    xs, lls = optimise_states(model, np.concatenate([np.asarray(st, float).reshape(-1, model.space.ndim)
                                                    for st in starts if st]), n_iter=SHORT_LM_ITERATIONS)
    # per job: its short runs, best first (stable, as a sort of the reference's list), the best n_full go on
    chosen = []
    for j, job in enumerate(jobs):
        rows = np.flatnonzero(owner == j)
        rows = rows[np.argsort(-lls[rows], kind="stable")]
        n_full = budget.n_full_wide if job.wide else budget.n_full
        chosen.append((rows[:max(n_full, 1)], n_full > 0))
    full_rows = np.concatenate([r for r, full in chosen if full] + [np.empty(0, int)])
    fx, fl = optimise_states(model, xs[full_rows]) if full_rows.size else (np.empty((0, model.space.ndim)), np.empty(0))
    refined = {int(r): (fx[i], float(fl[i])) for i, r in enumerate(full_rows)}
    out = []
    for job, (rows, full) in zip(jobs, chosen):
        best = None
        for r in rows:
            opt = Optimum(mode, xs[r], float(lls[r]), job.pair)
            if full and refined[int(r)][1] > opt.log_likelihood:
                opt = Optimum(mode, refined[int(r)][0], refined[int(r)][1], job.pair)
            if best is None or opt.log_likelihood > best.log_likelihood:
                best = opt
        out.append(best)
    return out


def fit_pair(model, mode: str, pair: FrequencyPair, budget: FitBudget, rng=None, *, wide: bool = False,
             index: int = 0) -> Optimum | None:
    """The physical fit of one frequency pair in one mode under a fixed budget (:func:`fit_pairs` of one job).

    ``budget.n_shapes`` well-spread ellipsoids with the pair's period ratio (:func:`shape_solutions`)
    x ``budget.n_orientations`` quasi-uniform orientations (:func:`spread_orientations`); the best
    start of each of the ``budget.n_short`` best shapes gets a short Levenberg-Marquardt run, the
    best ``budget.n_full`` of those a full one, and the best result is returned (None when the mode
    cannot give the period ratio). ``wide``: the larger budget of the best screened pairs
    (``budget.n_shapes_wide``, ``budget.n_short_wide``, ``budget.n_full_wide``). ``index`` (the
    pair's place in the search) offsets the shapes' Halton points and shifts the orientation set
    (:func:`pair_shift`), so near-duplicate pairs do not all get the same starts. ``rng`` (optional)
    only adds a random shift (:func:`orientation_shift`); without it the fit is deterministic.
    """
    return fit_pairs(model, mode, [PairFit(pair, wide, index)], budget, rng)[0]


def refit_jobs(tops, *, first_index: int = 0) -> list:
    """The fresh wide fits (:class:`PairFit`) of the pairs behind the best distinct solutions of a mode.

    A solution near the top of its mode may sit in a poor optimum of the right pair (its fit drifted
    in shape or attitude; measured on the demo's KRN-007: the true pair's single fit reached ln L 754
    against 806 from other start sets, and shape restarts from that state did not recover). Each
    pair gets :data:`N_REFIT_ATTEMPTS` more fits with the wide budget from start sets not used
    before (indices from ``first_index`` on).
    """
    return [PairFit(opt.pair, True, first_index + j * N_REFIT_ATTEMPTS + k)
            for j, opt in enumerate(tops) for k in range(N_REFIT_ATTEMPTS)]


def refit_pairs(model, mode: str, tops, budget: FitBudget, rng=None, *, first_index: int = 0) -> list:
    """Fresh wide fits of the frequency pairs that led to the best distinct solutions of a mode
    (:func:`refit_jobs`, fitted together by :func:`fit_pairs`); the fits that exist."""
    return [o for o in fit_pairs(model, mode, refit_jobs(tops, first_index=first_index), budget, rng) if o is not None]


def refine_fully(model, opt: Optimum) -> Optimum:
    """A full Levenberg-Marquardt refinement of an optimum."""
    x, v = optimise_state(model, opt.x)
    return Optimum(opt.mode, x, float(v), opt.pair) if v > opt.log_likelihood else opt


def restart_optima(model, opts, rng=None, round_index: int = 0, indices=None) -> list:
    """:func:`restart_optimum` of several fitted states of one model, their restarts optimised together.

    ``indices``: each state's start-set index (default ``0, 1, ...``). The short runs of all restarts
    are one batched optimisation (:func:`tumble.classify.rotation.optimise_states`), the full runs of
    the best :data:`N_RESTART_LM` of each state another. Returns one optimum per state (the state
    itself when no restart beats it).
    """
    opts = list(opts)
    if not opts:
        return []
    indices = list(range(len(opts))) if indices is None else list(indices)
    starts = [shape_restarts(model, o.mode, o.x, rng, round_index, i) for o, i in zip(opts, indices)]
    owner = np.concatenate([np.full(len(st), j, int) for j, st in enumerate(starts)])
    xs, lls = optimise_states(model, np.concatenate([np.asarray(st, float) for st in starts]),
                              n_iter=SHORT_LM_ITERATIONS)
    best_rows = []
    for j in range(len(opts)):
        rows = np.flatnonzero(owner == j)
        best_rows.append(rows[np.argsort(-lls[rows], kind="stable")][:N_RESTART_LM])
    fx, fl = optimise_states(model, xs[np.concatenate(best_rows)])
    out, at = [], 0
    for opt, rows in zip(opts, best_rows):
        best = opt
        for i in range(at, at + len(rows)):
            if fl[i] > best.log_likelihood:
                best = Optimum(opt.mode, fx[i], float(fl[i]), opt.pair)
        at += len(rows)
        out.append(best)
    return out


def restart_optimum(model, opt: Optimum, rng=None, round_index: int = 0, index: int = 0) -> Optimum:
    """The best of the shape restarts (:func:`shape_restarts`, round ``round_index``) of a fitted state, or the state.

    The restarts get a short Levenberg-Marquardt run each, the best :data:`N_RESTART_LM` a full one
    (:func:`restart_optima` of one state).
    """
    return restart_optima(model, [opt], rng, round_index, [index])[0]


# -- 6: solutions ---------------------------------------------------------------------------------


def laplace_approximation(model, x) -> SolutionLaplace:
    """Periods, their standard deviations and ln Z of the mode at ``x`` from the shared Laplace approximation.

    The approximation is :func:`tumble.inference.local.laplace_approximation` (the full
    central-difference Hessian of the log-posterior, every parameter including the jitter,
    regularised where the data do not constrain a direction), the same definition the sampler of a
    solution's mode starts from (``docs/methods-classify.md`` section 5c); ln Z is
    :func:`tumble.inference.local.laplace_log_evidence`. The periods are functions of the state
    (:meth:`tumble.model.PhysicalModel.derived`); their variances are ``g^T Sigma g`` with ``g`` the
    gradient by central differences of :data:`PERIOD_GRADIENT_STEP_SIGMA` of each parameter's
    Laplace standard deviation, kept inside the prior's support (the delta method; e.g. MacKay 2003, Information Theory, Inference
    and Learning Algorithms, ch. 27). About 230 model evaluations (0.1 s on 300 points).
    """
    from tumble.inference.local import laplace_approximation as mode_laplace
    from tumble.inference.local import laplace_log_evidence

    sp = model.space
    x = sp.wrap(np.asarray(x, float))
    der0 = model.derived(x[None])
    p_psi, p_phi = float(der0["p_psi_h"][0]), float(der0["p_phi_h"][0])
    try:
        # a parameter at its prior's edge (the jitter at its floor) has no room for a step: the
        # curvature search divides by a zero step there and the prior's width takes over (intended)
        with np.errstate(divide="ignore", invalid="ignore"):
            lap = mode_laplace(model, sp, x)
    except (TumbleError, np.linalg.LinAlgError):
        return SolutionLaplace(p_psi, p_phi, math.nan, math.nan, math.nan)
    d = sp.ndim
    c = lap.centre
    h = PERIOD_GRADIENT_STEP_SIGMA * lap.sd
    # steps kept inside the prior's support (an axis ratio at 1 puts I2/I3 at 1: a step beyond is
    # no rigid body); one-sided where there is room on one side only, no step where there is none
    per = np.isfinite(sp.periods)
    up = np.where(per | ~np.isfinite(sp.highs), h, np.minimum(h, 0.9 * (sp.highs - c)))
    down = np.where(per | ~np.isfinite(sp.lows), h, np.minimum(h, 0.9 * (c - sp.lows)))
    up, down = np.maximum(up, 0.0), np.maximum(down, 0.0)
    pts = np.repeat(c[None], 2 * d, axis=0)
    pts[2 * np.arange(d), np.arange(d)] += up
    pts[2 * np.arange(d) + 1, np.arange(d)] -= down
    try:
        der = model.derived(pts)
    except TumbleError:
        return SolutionLaplace(p_psi, p_phi, math.nan, math.nan, laplace_log_evidence(lap), lap)
    width = up + down
    sig = []
    for name in ("p_psi_h", "p_phi_h"):
        v = np.asarray(der[name], float)
        g = np.where(width > 0, (v[0::2] - v[1::2]) / np.where(width > 0, width, 1.0), 0.0)
        var = float(g @ lap.covariance @ g)
        sig.append(math.sqrt(var) if np.isfinite(var) and var >= 0 else math.nan)
    return SolutionLaplace(p_psi, p_phi, sig[0], sig[1], laplace_log_evidence(lap), lap)


def _frequencies(model, x) -> tuple:
    """``(f_psi, f_phi)`` of a state, c/d."""
    der = model.derived(np.asarray(x, float)[None])
    return 24.0 / float(der["p_psi_h"][0]), 24.0 / float(der["p_phi_h"][0])


def _same_solution(a: Optimum, b: Optimum, models, span_d: float) -> bool:
    """The same mode, and ``f_psi`` and ``f_phi`` within :data:`SAME_SOLUTION_CYCLES` per span."""
    if a.mode != b.mode:
        return False
    fa, fb = _frequencies(models[a.mode], a.x), _frequencies(models[b.mode], b.x)
    tol = SAME_SOLUTION_CYCLES / span_d
    return abs(fa[0] - fb[0]) < tol and abs(fa[1] - fb[1]) < tol


def distinct_optima(optima, models, span_d: float) -> list:
    """The best optimum of each distinct solution (:func:`_same_solution`), best first."""
    distinct = []
    for opt in sorted(optima, key=lambda o: -o.log_likelihood):
        if not any(_same_solution(opt, d, models, span_d) for d in distinct):
            distinct.append(opt)
    return distinct


def laplace_period_interval(p_h: float, sigma_h: float) -> tuple:
    """The 68 % interval ``p +- sigma`` of a period from the delta method, or ``(nan, nan)`` when ``sigma``
    exceeds :data:`MAX_LAPLACE_PERIOD_REL_SIGMA` of the period (the linearisation has failed: an
    interval reaching down to zero or below is no statement about the period)."""
    if not (np.isfinite(p_h) and np.isfinite(sigma_h)) or sigma_h > MAX_LAPLACE_PERIOD_REL_SIGMA * p_h:
        return (math.nan, math.nan)
    return (p_h - sigma_h, p_h + sigma_h)


def _solution(opt: Optimum, log_likelihood: float, lap: SolutionLaplace, criterion: float, best: float, k: int,
              n: int, weight: float) -> Solution:
    return Solution(mode=opt.mode, p_psi_h=lap.p_psi_h, p_phi_h=lap.p_phi_h,
                    p_psi_interval_h=laplace_period_interval(lap.p_psi_h, lap.p_psi_sigma_h),
                    p_phi_interval_h=laplace_period_interval(lap.p_phi_h, lap.p_phi_sigma_h),
                    log_likelihood=float(log_likelihood), criterion=float(criterion), delta=float(criterion - best),
                    relative_probability=float(weight), log_evidence_laplace=lap.log_evidence, n_parameters=k,
                    n_points=n, state=opt.x, candidate=opt.pair.candidate, source=opt.pair.source)


def bic(log_likelihood: float, n_parameters: int, n_points: int) -> float:
    """The Bayesian information criterion ``-2 ln L_max + k ln N`` (Schwarz 1978, Ann. Stat. 6, 461), nats."""
    return -2.0 * float(log_likelihood) + int(n_parameters) * math.log(int(n_points))


def solution_criterion(log_likelihood: float, lap: SolutionLaplace, n_parameters: int, n_points: int,
                       evidence: bool = False) -> float:
    """The ranking criterion of one solution (lower is better), on the BIC's scale.

    ``evidence=False``: :func:`bic`. ``evidence=True``: ``-2 ln Z`` of the mode's Laplace
    approximation (Kass & Raftery 1995, JASA 90, 773, eq. 4; the BIC is its large-``N``
    approximation, their eq. 9), so that ``exp(-Delta/2)`` is a ratio of evidences either way;
    ``+inf`` when the approximation failed (the solution goes last).
    """
    if not evidence:
        return bic(log_likelihood, n_parameters, n_points)
    z = lap.log_evidence
    return -2.0 * float(z) if np.isfinite(z) else math.inf


def collect_solutions(optima, models, span_d: float, *, evidence: bool = False, rescored=None,
                      rescore_models=None) -> tuple:
    """Distinct solutions of the optima ranked by BIC: ``(listed, best_by_mode, distinct)``.

    ``listed`` holds the solutions within :data:`SOLUTION_DELTA_BIC` of the best (best first, with
    relative probabilities ``exp(-Delta/2)`` normalised over them); ``best_by_mode`` maps each mode
    to its best solution, listed or not (the mode comparison of the decision rules needs it);
    ``distinct`` holds every distinct solution found, best first (listed or not). ``evidence``:
    ranked by ``-2 ln Z`` of the Laplace approximation instead (:func:`solution_criterion`).
    ``rescored`` (optimum -> its re-fit in ``rescore_models``, by mode; :func:`rank_solutions`): the
    criterion, ``ln L`` and parameter count are the re-fit's, while each solution's state, periods
    and intervals stay those of the search's model (the one its mode is sampled in).
    """
    distinct = distinct_optima(optima, models, span_d)
    if not distinct:
        return (), {}, ()
    n = int(models[distinct[0].mode].y.size)
    laps = [laplace_approximation(models[o.mode], o.x) for o in distinct]
    if rescored is None:
        lls = [o.log_likelihood for o in distinct]
        ks = [len(models[o.mode].space.names) for o in distinct]
        evid = laps
    else:
        lls = [rescored[o].log_likelihood for o in distinct]
        ks = [len(rescore_models[o.mode].space.names) for o in distinct]
        evid = [laplace_approximation(rescore_models[o.mode], rescored[o].x) if evidence else None for o in distinct]
    crits = [solution_criterion(ll, lap, k, n, evidence) for ll, lap, k in zip(lls, evid, ks)]
    best = min(crits)
    if not np.isfinite(best):  # no Laplace approximation at all: the BIC is the only criterion left
        crits = [bic(ll, k, n) for ll, k in zip(lls, ks)]
        best = min(crits)
    listed_idx = [i for i, c in enumerate(crits) if c - best <= SOLUTION_DELTA_BIC]
    weights = np.array([math.exp(-0.5 * (crits[i] - best)) for i in listed_idx])
    weight_of = dict(zip(listed_idx, weights / weights.sum()))
    order = sorted(range(len(distinct)), key=lambda i: crits[i])
    first_of_mode = {}
    for i in order:
        first_of_mode.setdefault(distinct[i].mode, i)
    made = [_solution(o, ll, lap, c, best, k, n, weight_of.get(i, 0.0))
            for i, (o, ll, lap, c, k) in enumerate(zip(distinct, lls, laps, crits, ks))]
    listed = tuple(sorted((made[i] for i in listed_idx), key=lambda s: s.criterion))
    return listed, {mode: made[i] for mode, i in first_of_mode.items()}, tuple(sorted(made, key=lambda s: s.criterion))


def solution_optimum(solution: Solution) -> Optimum:
    """The :class:`Optimum` behind a :class:`Solution` (its state, ln L and frequency pair)."""
    pair = FrequencyPair(24.0 / solution.p_psi_h, 24.0 / solution.p_phi_h, solution.candidate, solution.source)
    return Optimum(solution.mode, np.asarray(solution.state, float), float(solution.log_likelihood), pair)


def transfer_state(x, source, target) -> np.ndarray:
    """A state of model ``source`` in the parameters of model ``target`` (the same rotation state).

    Parameters of both are copied; the inertia ratios ``i1_i3``, ``i2_i3`` of a free-inertia target
    take the source's (tied to its shape, or free); a target tied to the shape drops them.
    """
    x = np.asarray(x, float)
    have = dict(zip(source.space.names, x))
    if "i1_i3" not in have:
        args, _ = source.state_arrays(x[None])
        have["i1_i3"], have["i2_i3"] = float(np.ravel(args[0])[0]), float(np.ravel(args[1])[0])
    return target.space.wrap(np.array([have[name] for name in target.space.names], float))


def ranking_models(lc, models: dict, rule: RankingRule) -> dict:
    """The models a ranking rule scores with, by mode: the search's own, or the same data and priors
    with the rule's law, inertia and likelihood (:class:`tumble.model.PhysicalModel`).

    ``lc`` is the full light curve; it is thinned the way the search's models were
    (:func:`tumble.classify.rotation.thin_lightcurve` to their number of points). A search with the
    Student-t likelihood keeps it under every rule.
    """
    from tumble.model import PhysicalModel

    if not rule.refits:
        return models
    out = {}
    for mode, model in models.items():
        sub = thin_lightcurve(lc, int(model.y.size))
        if sub.n_points != model.y.size or not np.array_equal(np.asarray(sub.t, float), model.t):
            raise TumbleError("the ranking models need the light curve the search's models were built on")
        sp = model.space
        k = sp.index("p_psi_h")
        out[mode] = PhysicalModel(sub, mode, p_psi_range_h=(float(sp.lows[k]), float(sp.highs[k])),
                                  student_t=rule.student_t or model.student_t, law=rule.law,
                                  free_inertia=rule.free_inertia, nu_t=model.nu_t,
                                  geometry=model.geometry, epoch_jd=model.epoch_jd)
    return out


def _frequency_shift_cycles(model, x0, x1, span_d: float) -> float:
    """Largest change of ``f_psi`` or ``f_phi`` between two states, cycles per span."""
    f0, f1 = _frequencies(model, x0), _frequencies(model, x1)
    return max(abs(f1[0] - f0[0]), abs(f1[1] - f0[1])) * span_d


def rank_optimum(opt: Optimum, source, target, rule: RankingRule, span_d: float, refitted=None) -> Optimum:
    """One solution scored under a ranking rule: re-fitted in ``target`` and/or polished, never worse.

    The state moves to ``target``'s parameters (:func:`transfer_state`); where the rule's model
    differs from the search's, a full Levenberg-Marquardt run refits it (``refitted``: that run's
    result, already computed with the other solutions' by
    :func:`tumble.classify.rotation.optimise_states`); with ``rule.polish`` the
    state is carried to the top of its own mode (:func:`tumble.inference.local.polish_mode` in the
    model's sampling chart, the step the sampler takes before sampling). A step is kept only if it
    raises ``ln L`` and leaves ``f_psi`` and ``f_phi`` within :data:`SAME_SOLUTION_CYCLES` per span
    (a larger move is another solution, found or not by the search).
    """
    x = transfer_state(opt.x, source, target)
    ll = float(target(x[None])[0]) if target is not source else opt.log_likelihood
    if not np.isfinite(ll):
        return Optimum(opt.mode, x, ll, opt.pair)
    if rule.refits:
        if refitted is None:
            x, ll = _ranking_step(target, _refit_proposal, x, ll, span_d)
        else:
            x, ll = _accept_step(target, x, ll, np.asarray(refitted, float), span_d)
    if rule.polish:
        x, ll = _ranking_step(target, _polish_proposal, x, ll, span_d)
    return Optimum(opt.mode, x, ll, opt.pair)


def _refit_proposal(model, x) -> np.ndarray:
    """A full Levenberg-Marquardt run from ``x``."""
    return optimise_state(model, x)[0]


def _polish_proposal(model, x) -> np.ndarray:
    """``x`` carried to the top of its own mode (:func:`tumble.inference.local.polish_mode`)."""
    from tumble.inference.local import polish_mode

    return polish_mode(model, model.space, x, model.sampling_chart(x)).x


def _ranking_step(model, propose, x, ll: float, span_d: float) -> tuple:
    """``(x, ln L)`` after one step of :func:`rank_optimum`, or the input when the proposal fails,
    lowers ``ln L`` or moves the frequencies to another solution (beyond :data:`SAME_SOLUTION_CYCLES`)."""
    try:
        with np.errstate(all="ignore"):
            x1 = np.asarray(propose(model, x), float)
    except (TumbleError, np.linalg.LinAlgError, ValueError):
        return x, ll
    return _accept_step(model, x, ll, x1, span_d)


def _accept_step(model, x, ll: float, x1, span_d: float) -> tuple:
    """``(x1, ln L(x1))`` when the proposed ``x1`` raises ``ln L`` and stays the same solution, else ``(x, ll)``."""
    try:
        with np.errstate(all="ignore"):
            x1 = model.space.wrap(np.asarray(x1, float))
        v1 = float(model(x1[None])[0])
    except (TumbleError, np.linalg.LinAlgError, ValueError):
        return x, ll
    if np.isfinite(v1) and v1 > ll and _frequency_shift_cycles(model, x, x1, span_d) <= SAME_SOLUTION_CYCLES:
        return x1, v1
    return x, ll


def batched_refits(chosen, models: dict, targets: dict) -> dict:
    """The ranking re-fits of the ``chosen`` optima, one batched Levenberg-Marquardt per mode
    (:func:`tumble.classify.rotation.optimise_states` from each state moved to its target model by
    :func:`transfer_state`): optimum -> refitted state in the target's parameters."""
    out = {}
    for mode in dict.fromkeys(o.mode for o in chosen):
        group = [o for o in chosen if o.mode == mode]
        xs = np.array([transfer_state(o.x, models[mode], targets[mode]) for o in group])
        with np.errstate(all="ignore"):
            fitted, _ = optimise_states(targets[mode], xs)
        out.update(zip(group, fitted))
    return out


def ranking_rule(name: str) -> RankingRule:
    """The rule ``name`` of :data:`RANKING_RULES` (:class:`tumble.exceptions.TumbleError` if unknown)."""
    try:
        return RANKING_RULES[str(name)]
    except KeyError:
        raise TumbleError(f"unknown ranking rule {name!r} (choose from {', '.join(RANKING_RULES)})") from None


def rank_solutions(optima, models: dict, lc, rule: RankingRule = RANKING_RULES[DEFAULT_RANKING]) -> tuple:
    """The distinct solutions of ``optima`` scored and ranked by ``rule``: ``(listed, best_by_mode, distinct)``.

    The plain rule ranks the search's optima as they are (:func:`collect_solutions`). A rule that
    re-fits or polishes scores the best :data:`N_RANKED_PER_MODE` distinct solutions of each mode
    (:func:`rank_optimum`). A polish in the search's model replaces the optimum (the others are
    ranked as they are); a re-fit in another model gives only the criterion, each solution keeping
    the search model's state, and the solutions not re-fitted are scored by that model at their own
    state (:func:`transfer_state`; a lower bound of their re-fit, exact for a tied state in the
    free-inertia model, which contains it), so that none is dropped from the list.
    """
    span_d = lc.span_d
    if not (rule.refits or rule.polish):
        return collect_solutions(optima, models, span_d, evidence=rule.evidence)
    distinct = distinct_optima(optima, models, span_d)
    targets = ranking_models(lc, models, rule)
    seen, chosen, rest = {}, [], []
    for opt in distinct:
        seen[opt.mode] = seen.get(opt.mode, 0) + 1
        (chosen if seen[opt.mode] <= N_RANKED_PER_MODE else rest).append(opt)
    refits = batched_refits(chosen, models, targets) if rule.refits else {}
    scored = {opt: rank_optimum(opt, models[opt.mode], targets[opt.mode], rule, span_d, refits.get(opt))
              for opt in chosen}
    scored = {o: r for o, r in scored.items() if np.isfinite(r.log_likelihood)}
    if not rule.refits:
        return collect_solutions(list(scored.values()) + rest, models, span_d, evidence=rule.evidence)
    for opt in rest:
        x = transfer_state(opt.x, models[opt.mode], targets[opt.mode])
        ll = float(targets[opt.mode](x[None])[0])
        if np.isfinite(ll):
            scored[opt] = Optimum(opt.mode, x, ll, opt.pair)
    return collect_solutions(list(scored), models, span_d, evidence=rule.evidence, rescored=scored,
                             rescore_models=targets)


__all__ += ["RankingRule", "RANKING_RULES", "DEFAULT_RANKING", "N_RANKED_PER_MODE", "bic", "solution_criterion",
            "solution_optimum", "transfer_state", "ranking_models", "rank_optimum", "batched_refits", "ranking_rule", "rank_solutions"]


def polish_solutions(optima, models, span_d: float, rng=None) -> list:
    """More shape restarts (:data:`POLISH_ROUNDS`) of the distinct solutions within :data:`POLISH_DELTA_BIC`.

    Round ``r`` of a solution takes the next well-spread shapes and orientations after those of the
    rounds before (:func:`shape_restarts`), so the rounds never repeat a start.
    """
    distinct = distinct_optima(optima, models, span_d)
    if not distinct:
        return []
    best_ll = distinct[0].log_likelihood
    near = [o for o in distinct if 2.0 * (best_ll - o.log_likelihood) <= POLISH_DELTA_BIC][:N_POLISHED]
    for r in range(POLISH_ROUNDS):
        # the solutions of one mode restart together (:func:`restart_optima`); solution i keeps its index
        for mode in dict.fromkeys(o.mode for o in near):
            idx = [i for i, o in enumerate(near) if o.mode == mode]
            for i, o in zip(idx, restart_optima(models[mode], [near[i] for i in idx], rng, 1 + r, idx)):
                near[i] = o
    return near


def screen_orders(lc, pairs, n_per_screen: int, f_lead_per_d: float = math.nan) -> list:
    """For each screen of :data:`SCREEN_TERM_SETS`, the indices of its best ``n_per_screen`` pairs, best first.

    ``f_lead_per_d``: the light curve's strongest frequency (c/d), see :func:`screen_chi2`.
    """
    orders = []
    for terms in SCREEN_TERM_SETS:
        chi2 = screen_chi2(lc, pairs, terms, f_lead_per_d)
        orders.append(np.argsort(np.where(np.isfinite(chi2), chi2, np.inf), kind="stable")[:n_per_screen])
    return orders


def union_by_rank(orders, n_per_screen: int) -> list:
    """The union of the first ``n_per_screen`` indices of each order, by rank (screens interleaved).

    Rank 0 of each screen, then rank 1, ...; so the union for a smaller ``n`` is a prefix of this one.
    """
    kept, seen = [], set()
    for rank in range(n_per_screen):
        for order in orders:
            if rank < len(order) and int(order[rank]) not in seen:
                seen.add(int(order[rank]))
                kept.append(int(order[rank]))
    return kept


def screened_pairs(lc, pairs, n_per_screen: int, f_lead_per_d: float = math.nan) -> list:
    """The union of the best ``n_per_screen`` pairs of each screen, by rank (:func:`union_by_rank`)."""
    return [pairs[i] for i in union_by_rank(screen_orders(lc, pairs, n_per_screen, f_lead_per_d), n_per_screen)]


def cover_other_poles(solutions, models: dict) -> tuple:
    """Each solution's 68 % intervals widened to cover the other directions of ``L`` that fit as well.

    One apparition rarely fixes the direction of the angular momentum, and another direction reads
    the same light curve at other periods (:mod:`tumble.classify.poles`): each solution is refitted
    from the three symmetric directions of its ``L`` (:func:`tumble.classify.poles.other_poles`) and
    its intervals cover every one within the goodness-of-fit threshold, each with its own Laplace
    width (:func:`tumble.classify.poles.covering_interval`); ``n_poles`` counts the directions that
    fit as well, its own included. Periods, state and ranking are unchanged.
    """
    from dataclasses import replace

    from tumble.classify.poles import covering_interval, other_poles

    out = []
    for s in solutions:
        poles = other_poles(models[s.mode], s.state)
        out.append(replace(s, p_psi_interval_h=covering_interval(s.p_psi_interval_h, "p_psi_h", poles),
                           p_phi_interval_h=covering_interval(s.p_phi_interval_h, "p_phi_h", poles),
                           n_poles=1 + len(poles.as_good)))
    return tuple(out)


def search_solutions(lc, evidence, models: dict, *, rng=None, budget: FitBudget = FitBudget(),
                     ranking: str = DEFAULT_RANKING) -> SolutionSearch:
    """The enumeration (module notes) on a light curve with physical models already built (by mode).

    Parameters
    ----------
    lc : LightCurve
        The full light curve (lattices and screen); the models hold the thinned one.
    evidence : EvidenceResult
    models : dict
        Mode -> :class:`tumble.model.PhysicalModel` (see :func:`npa_models`).
    rng : numpy.random.Generator or None
        Only shifts the quasi-uniform orientation sets (:func:`orientation_shift`); None: the search
        is deterministic. The shapes and the starts' structure never depend on it.
    budget : FitBudget
    ranking : str
        The ranking rule (a name of :data:`RANKING_RULES`; :func:`rank_solutions`).
    """
    lattices = candidate_lattices(lc, evidence)
    pairs = frequency_pairs(lc.span_d, lattices, daily_aliasing(lc))
    if not pairs:
        return SolutionSearch((), {}, (), 0, 0, 0)
    thin = thin_lightcurve(lc, SCREEN_MAX_POINTS)
    # the evidence's f1 is the light curve's strongest frequency: the screens' leading term drifts
    orders = screen_orders(thin, pairs, budget.n_screened, evidence.f1_npa_per_d)
    kept = [pairs[i] for i in union_by_rank(orders, budget.n_screened)]
    # the best budget.n_wide of each screen (a prefix of kept) get the wider fit
    n_wide = len(union_by_rank(orders, min(budget.n_wide, budget.n_screened)))
    # every fit of one mode in one batch (fit_pairs); attempt k of pair i starts from other points:
    # index i + k len(kept) is no other pair's
    jobs = [PairFit(pair, i < n_wide, i + k * len(kept))
            for i, pair in enumerate(kept) for k in range(budget.n_attempts_wide if i < n_wide else 1)]
    fitted = {mode: fit_pairs(model, mode, jobs, budget, rng) for mode, model in models.items()}
    optima = []
    for i in range(len(kept)):
        for mode in models:
            tries = [o for job, o in zip(jobs, fitted[mode]) if job.pair is kept[i] and o is not None]
            if tries:
                optima.append(max(tries, key=lambda o: o.log_likelihood))
    n_fits = len(optima)
    for mode, model in models.items():
        tops = distinct_optima([o for o in optima if o.mode == mode], models, lc.span_d)[:N_RESTART_TOP]
        optima += restart_optima(model, tops, rng)
        optima += refit_pairs(model, mode, tops, budget, rng, first_index=budget.n_attempts_wide * len(kept))
    optima += polish_solutions(optima, models, lc.span_d, rng)
    listed, best_by_mode, distinct = rank_solutions(optima, models, lc, ranking_rule(ranking))
    listed = cover_other_poles(listed, models)
    return SolutionSearch(listed, best_by_mode, distinct, len(pairs), len(kept), n_fits)


def enumerate_solutions(lc, evidence, *, max_points: int = 300, budget: FitBudget = FitBudget(),
                        student_t: bool = False, rng=None) -> tuple:
    """Every acceptable (mode, P_psi, P_phi) solution of a tumbler's light curve, best first.

    Parameters
    ----------
    lc : LightCurve
    evidence : EvidenceResult
        The shape-free evidence (its two-period pairs seed the lattices).
    max_points : int
        The physical fit uses the light curve thinned evenly to at most this many points.
    budget : FitBudget
        Physical-fit budget per candidate and mode.
    student_t : bool
        Student-t likelihood in the physical model.
    rng : numpy.random.Generator, int or None

    Returns
    -------
    tuple of Solution
        Solutions within :data:`SOLUTION_DELTA_BIC` of the best, ranked by BIC.
    """
    from tumble.inference.space import as_generator

    sub = thin_lightcurve(lc, max_points)
    models = npa_models(sub, lc.span_d * 24.0, student_t=student_t)
    return search_solutions(lc, evidence, models, rng=as_generator(rng), budget=budget).solutions
