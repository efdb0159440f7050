"""Sampling one solution's mode: a Laplace-scaled start, moves for correlated posteriors, the mode kept.

:func:`sample_local_mode` samples the posterior of one solution (one optimum found by a search)
rather than the whole, multimodal posterior:

1. **Laplace approximation** at the optimum (:func:`laplace_approximation`): the Hessian of the
   log-posterior by central finite differences with steps of a fraction of each parameter's own
   width (found from the diagonal curvature first), regularised to a positive-definite precision
   (eigenvalues floored; directions the data do not constrain get the prior's width). Its inverse
   is the covariance of the Gaussian approximation (Kass & Raftery 1995, JASA 90, 773, eq. 4;
   Bishop 2006, Pattern Recognition and Machine Learning, section 4.4).
2. **The mode region**: the ellipsoid of squared Mahalanobis radius
   ``chi2_d^-1(1 - MODE_REGION_TAIL) * MODE_REGION_SCALE^2`` about the centre in the metric of the
   (adapted) covariance. The sampled target is the posterior restricted to it, so walkers cannot
   wander into another solution's mode (another alias, the mirror pole); how much of the sample lies
   near its edge and how many proposals fell outside are diagnostics (``mode_edge_fraction``,
   ``outside_fraction``): a posterior that fills the region is reported as not contained.
3. **Moves** (emcee, Foreman-Mackey et al. 2013, PASP 125, 306): a mixture (:data:`MOVE_WEIGHTS`)
   of an independence Metropolis-Hastings move with a multivariate Student-t proposal of the mode's
   covariance (:class:`LaplaceIndependenceMove`; Tierney 1994, Ann. Statist. 22, 1701, section
   2.3.3: for a posterior close to its Gaussian approximation successive draws are nearly
   independent), the affine-invariant stretch move (Goodman & Weare 2010, CAMCoS 5, 65) and
   differential evolution (ter Braak 2006, Stat. Comput. 16, 239), which follow the correlations and
   curvature the Gaussian misses. An optional chart (:class:`AttitudeChart`) samples a direction and
   the phase about it as a rotation vector about the optimum, which straightens the attitude's
   curved ridge; in such a space the mixture also turns the whole attitude about the axis the mode
   constrains least (:class:`AttitudeAxisMove`: with nearly fixed Sun and observer directions, their
   bisector), across the chart's cut at ``|w| = pi``.
   Periodic coordinates are sampled in a one-period window centred on the optimum
   (:class:`~tumble.inference.logpost.LogPosterior`), so angles are never cut near the mode.
4. **Pilot and main run**: each of ``n_ensembles`` ensembles starts from independent draws of the
   (slightly widened) proposal; after a pilot of ``pilot_steps`` whose walkers moved (acceptance at
   least :data:`MIN_PILOT_ACCEPTANCE`) the proposal is re-centred and re-scaled on the pilot's
   samples (which are discarded; the mode region stays the optimum's Laplace ellipsoid; a stuck
   pilot changes nothing), then the main run is
   extended in blocks until the criteria of
   :func:`~tumble.inference.sampling.assess_chains` hold (at least ``tau_multiple``
   autocorrelation times after burn-in, acceptance in ``acceptance_range``, split R-hat across the
   ensembles below ``rhat_max``, one walker cluster) and the mode is contained, or the budget ends.
   The ensembles step side by side, their likelihood requests evaluated together in one vectorised
   call (:func:`_run`; the chains are those of running them one after the other).

The returned :class:`~tumble.inference.sampling.Posterior` states in its diagnostics whether every
criterion was met and why not.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass, replace
from typing import Callable

import emcee
import numpy as np
from scipy import stats

from tumble.exceptions import TumbleError
from tumble.inference.diagnostics import acceptance_from_chain as diag_acceptance
from tumble.inference.logpost import LogPosterior
from tumble.inference.sampling import assess_chains, default_n_walkers, posterior_from_chains
from tumble.inference.space import ParameterSpace, as_generator

__all__ = [
    "LaplaceApproximation",
    "laplace_approximation",
    "laplace_approximation_reference",
    "chart_laplace",
    "ModeRegion",
    "LaplaceIndependenceMove",
    "AttitudeChart",
    "ImplicitChart",
    "ChartChain",
    "haar_log_density",
    "AttitudeAxisMove",
    "ATTITUDE_NAMES",
    "ChartLikelihood",
    "FixedCoordinateChart",
    "PolishedMode",
    "polish_mode",
    "direction_phase_matrix",
    "direction_phase_angles",
    "rotation_exp",
    "rotation_log",
    "sample_local_mode",
    "steps_for_budget",
]

#: finite-difference step of the Hessian, in units of each parameter's own width (0.1-0.3 sigma
#: keeps the truncation error of the central difference below a per cent for near-Gaussian peaks
#: while staying above the model's numerical noise)
HESSIAN_STEP_SIGMA = 0.2
#: first trial steps of the curvature search: relative for log-uniform (period-like) parameters,
#: absolute (parameter units) for the rest; refined from the diagonal curvature twice
FIRST_STEP_RELATIVE = 1e-6
FIRST_STEP_ABSOLUTE = 1e-4
#: smallest eigenvalue of the precision relative to its largest (conditioning of the covariance)
MIN_EIGEN_RATIO = 1e-14
#: the mode region: tail probability of the chi-square radius and the widening beyond it (a
#: Gaussian mode has 1e-6 of its mass beyond the radius before widening; the widening by 1.5 lets a
#: mode 1.5 times broader than its approximation in every direction still fit)
MODE_REGION_TAIL = 1e-6
MODE_REGION_SCALE = 1.5
#: a sample is "near the edge" beyond this fraction of the region's radius; more than
#: MODE_EDGE_MAX_FRACTION of the samples there means the posterior is not contained in the mode
MODE_EDGE_RADIUS = 0.8
MODE_EDGE_MAX_FRACTION = 0.01
#: degrees of freedom and widening of the Student-t independence proposal (heavier tails and a
#: larger scale than the target keep the importance ratio bounded; Tierney 1994, section 2.3.3)
PROPOSAL_DF = 6.0
PROPOSAL_SCALE = 1.2
#: the start of every ensemble is drawn wider than the posterior, so that split R-hat can see
#: ensembles that have not forgotten their start (Gelman et al. 2013, BDA3, section 11.4)
START_SCALE = 1.5
#: move mixture (weights by name of :data:`ENSEMBLE_MOVES`, plus "independence" and "attitude_axis"). Measured on a
#: dense SAM (CAL-dense-npa-076, 600-800 steps): in the model's own parameters stretch alone accepted
#: 0.23 (tau ~60), differential evolution 0.05, the independence move almost nothing (a curved
#: ridge); in the model's sampling chart (nearly Gaussian within one Laplace sigma) this mixture
#: accepted 0.16-0.20 with tau 80-90 steps over 1500 steps (the old sampler: 0.18-0.20, tau ~120)
#:
#: Since 2026-12-05 #4 also the attitude-axis move (:class:`AttitudeAxisMove`; left out, and the
#: other weights renormalised by emcee, where the space has no attitude coordinates). Measured on
#: CAL-dense-npa-024 (attitude the slowest coordinate; seed 1): tau 78 -> 41 steps over 1500 steps
#: and 130 -> 57 over 3000 (13 -> 28 and 18 -> 45 tau; 18 -> 32 tau in the benchmark's run, another
#: random stream); on -119 (the shape slowest) 77 -> 86 and on -076 79 -> 82, within the
#: seed-to-seed spread (about +-20 %); on modes that mix tau 5 -> 7-8 steps. The merged mixture is kept as
#: :data:`MERGED_MOVE_WEIGHTS` for the benchmark's side-by-side comparison.
MOVE_WEIGHTS = {"independence": 0.4, "stretch": 0.3, "de": 0.1, "attitude_axis": 0.2}
#: the mixture before 2026-12-05 #4
MERGED_MOVE_WEIGHTS = {"independence": 0.5, "stretch": 0.4, "de": 0.1}
#: acceptance range of this sampler: an independence proposal that matches the target accepts
#: nearly everything (a good sign, not a bad one), so the upper end is higher than the ensemble
#: default; the lower end catches a proposal that misses the target
LOCAL_ACCEPTANCE_RANGE = (0.15, 0.95)
#: default budget: the cap of the adaptive run, steps per ensemble (burn-in and pilots included); the
#: run stops as soon as every criterion holds. Kept at 1500: a cap of 3000 was measured on six
#: held-out dense tumblers (2026-12-05 #4) and converted none (the modes that mix converge within
#: 1500; on the others tau grew with the run, to 130-200 steps) while doubling their sampling time
DEFAULT_MAX_STEPS = 1500
DEFAULT_PILOT_STEPS = 100
#: pilot rounds (each re-fits the proposal to the previous one's samples, so that the proposal of the
#: main run comes from walkers that already mixed under a fitted proposal)
DEFAULT_ADAPT_ROUNDS = 2
FIRST_BLOCK_STEPS = 300
#: smallest number of pilot samples (steps x walkers) from which the covariance is re-estimated
MIN_PILOT_SAMPLES_PER_DIM = 20
#: the pilot's covariance is used only when its walkers moved (mean acceptance at least this): the
#: spread of walkers that stuck is no estimate of the posterior's (measured: a stuck pilot shrank the
#: proposal and the region of a dense SAM until 64 % of the samples sat at the region's edge)
MIN_PILOT_ACCEPTANCE = 0.15


@dataclass(frozen=True)
class LaplaceApproximation:
    """Gaussian approximation of a posterior mode.

    Attributes
    ----------
    centre : ndarray, shape (ndim,)
        The optimum (parameter units, periodic coordinates wrapped).
    covariance : ndarray, shape (ndim, ndim)
        Inverse of the regularised negative Hessian of the log-posterior (parameter units squared).
    log_posterior : float
        Log-prior plus log-likelihood at ``centre``.
    hessian : ndarray, shape (ndim, ndim)
        The finite-difference Hessian of the log-posterior before regularisation.
    steps : ndarray, shape (ndim,)
        Finite-difference steps used (parameter units).
    n_regularised : int
        Eigenvalues of the precision raised to the floor (directions the data do not constrain).
    method : str
        How the Hessian was obtained.
    """

    centre: np.ndarray
    covariance: np.ndarray
    log_posterior: float
    hessian: np.ndarray
    steps: np.ndarray
    n_regularised: int
    method: str

    @property
    def sd(self) -> np.ndarray:
        """Marginal standard deviations, shape ``(ndim,)``."""
        return np.sqrt(np.diag(self.covariance))


def _prior_widths(space: ParameterSpace) -> np.ndarray:
    """Width of each prior's support (its period for angles; the 16-84 % range when unbounded)."""
    lows, highs = space.lows, space.highs
    w = np.where(np.isfinite(highs - lows), highs - lows, space.scales)
    per = space.periods
    return np.where(np.isfinite(per), per, w)


def _log_post(log_likelihood, space, x):
    x = np.atleast_2d(x)
    lp = space.log_prior(space.wrap(x))
    out = np.full(len(x), -np.inf)
    ok = np.isfinite(lp)
    if ok.any():
        out[ok] = lp[ok] + np.asarray(log_likelihood(space.wrap(x[ok])), float)
    return out


def _room(space: ParameterSpace, x0: np.ndarray) -> np.ndarray:
    """Distance from ``x0`` to the nearest end of each bounded support (inf for periodic)."""
    per = space.periods
    lo = np.where(np.isfinite(space.lows), x0 - space.lows, np.inf)
    hi = np.where(np.isfinite(space.highs), space.highs - x0, np.inf)
    return np.where(np.isfinite(per), np.inf, np.minimum(lo, hi))


def _diagonal_curvature(log_likelihood, space, x0, f0, h):
    pts = np.repeat(x0[None], 2 * len(x0), axis=0)
    idx = np.arange(len(x0))
    pts[2 * idx, idx] += h
    pts[2 * idx + 1, idx] -= h
    f = _log_post(log_likelihood, space, pts)
    # stencil points outside the prior (-inf) and a zero step at a bound (h = 0): non-finite, handled by the caller
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        return (f[0::2] - 2 * f0 + f[1::2]) / h**2


def _first_steps(space, x0):
    from tumble.inference.space import LogUniform

    out = np.empty(space.ndim)
    for i, p in enumerate(space.parameters):
        out[i] = FIRST_STEP_RELATIVE * abs(x0[i]) if isinstance(p.prior, LogUniform) else FIRST_STEP_ABSOLUTE
    return np.maximum(out, 1e-12)


def _curvature_steps(log_likelihood, space, x0, f0):
    """Steps of :data:`HESSIAN_STEP_SIGMA` of each parameter's width, from the diagonal curvature."""
    widths = _prior_widths(space)
    room = _room(space, x0)
    h = np.minimum(_first_steps(space, x0), 0.45 * room)
    for _ in range(3):
        d2 = _diagonal_curvature(log_likelihood, space, x0, f0, h)
        with np.errstate(divide="ignore"):  # a flat direction (d2 = 0) falls back to the prior width
            sigma = np.where(np.isfinite(d2) & (d2 < 0), 1.0 / np.sqrt(np.abs(d2)), widths)
        h_new = np.minimum(HESSIAN_STEP_SIGMA * np.minimum(sigma, widths), 0.45 * room)
        if np.allclose(h_new, h, rtol=0.3):
            h = h_new
            break
        h = h_new
    return np.where(h > 0, h, FIRST_STEP_ABSOLUTE * 1e-3)


def _regularised_covariance(hess, widths):
    """Covariance from a negative-definite-ish Hessian: ridge of the prior width, eigenvalues floored."""
    prec = -0.5 * (hess + hess.T)
    prec = np.where(np.isfinite(prec), prec, 0.0)
    prec = prec + np.diag(1.0 / widths**2)
    # scale to unit diagonal before the eigen-decomposition (parameters differ by many decades)
    s = np.sqrt(np.abs(np.diag(prec)))
    s = np.where(s > 0, s, 1.0)
    corr = prec / np.outer(s, s)
    vals, vecs = np.linalg.eigh(corr)
    floor = max(float(vals.max()) * MIN_EIGEN_RATIO, 1e-300)
    floor = max(floor, float(np.min(1.0 / (widths * s) ** 2)))
    # no direction broader than a flat prior over the support (sd = width / sqrt 12) of any parameter
    # it moves: a direction the data do not constrain (or a Hessian that is not negative definite
    # there) is limited by the first prior it meets, with its proportions kept (parameter i's variance
    # from direction k is v_ik^2 / (lambda_k s_i^2))
    direction_floor = np.max(12.0 * vecs**2 / ((widths * s) ** 2)[:, None], axis=0)
    floor = np.maximum(floor, direction_floor)
    n_reg = int(np.sum(vals < floor))
    vals = np.maximum(vals, floor)
    cov_scaled = (vecs / vals) @ vecs.T
    cov = cov_scaled / np.outer(s, s)
    # and no parameter broader than its flat prior from all directions together (a last guard)
    sd = np.sqrt(np.diag(cov))
    shrink = np.minimum(1.0, widths / math.sqrt(12.0) / sd)
    cov = cov * np.outer(shrink, shrink)
    return 0.5 * (cov + cov.T), n_reg


def laplace_approximation(log_likelihood: Callable[[np.ndarray], np.ndarray], space: ParameterSpace, x_opt,
                          ) -> LaplaceApproximation:
    """Gaussian approximation of the posterior mode at ``x_opt`` (fast kernel).

    The full Hessian of ``log prior + log L`` comes from one vectorised call of the likelihood on the
    central-difference stencil (``2 d`` axis points and ``4`` points per pair of parameters), with
    steps of :data:`HESSIAN_STEP_SIGMA` times each parameter's width found from the diagonal
    curvature. :func:`laplace_approximation_reference` computes the same Hessian one entry at a time.

    Parameters
    ----------
    log_likelihood : callable
        ``(K, ndim) -> (K,)`` log-likelihoods.
    space : ParameterSpace
    x_opt : array_like, shape (ndim,)
        The optimum (inside the prior support).

    Returns
    -------
    LaplaceApproximation
    """
    x0 = space.wrap(np.asarray(x_opt, float).reshape(space.ndim))
    f0 = float(_log_post(log_likelihood, space, x0)[0])
    if not np.isfinite(f0):
        raise TumbleError(f"the optimum {dict(zip(space.names, x0.tolist()))} has no finite log-posterior")
    h = _curvature_steps(log_likelihood, space, x0, f0)
    d = space.ndim
    ii, jj = np.triu_indices(d, 1)
    signs = np.array([[1, 1], [1, -1], [-1, 1], [-1, -1]], float)
    pts = [np.repeat(x0[None], 2 * d, axis=0)]
    pts[0][2 * np.arange(d), np.arange(d)] += h
    pts[0][2 * np.arange(d) + 1, np.arange(d)] -= h
    pair = np.repeat(x0[None], 4 * len(ii), axis=0).reshape(len(ii), 4, d)
    for s, (si, sj) in enumerate(signs):
        pair[np.arange(len(ii)), s, ii] += si * h[ii]
        pair[np.arange(len(ii)), s, jj] += sj * h[jj]
    pts.append(pair.reshape(-1, d))
    f = _log_post(log_likelihood, space, np.concatenate(pts))
    fa = f[: 2 * d]
    fp = f[2 * d:].reshape(len(ii), 4)
    hess = np.zeros((d, d))
    # stencil points outside the prior give -inf: non-finite entries are dropped by _regularised_covariance
    with np.errstate(invalid="ignore", over="ignore"):
        hess[np.arange(d), np.arange(d)] = (fa[0::2] - 2 * f0 + fa[1::2]) / h**2
        off = (fp[:, 0] - fp[:, 1] - fp[:, 2] + fp[:, 3]) / (4 * h[ii] * h[jj])
    hess[ii, jj] = off
    hess[jj, ii] = off
    cov, n_reg = _regularised_covariance(hess, _prior_widths(space))
    return LaplaceApproximation(x0, cov, f0, hess, h, n_reg, "central finite differences of the log-posterior")


#: finite-difference step of a chart's Jacobian, in units of each model parameter's Laplace width
CHART_JACOBIAN_STEP_SIGMA = 1e-3


def chart_laplace(log_likelihood, space: ParameterSpace, x_opt, chart) -> LaplaceApproximation:
    """The Laplace approximation of the model's mode expressed in a chart's coordinates.

    The Hessian is taken in the model's own parameters (:func:`laplace_approximation`) and carried
    into the chart by the Jacobian ``dy/dx`` of ``chart.from_model`` at the optimum (central
    differences of :data:`CHART_JACOBIAN_STEP_SIGMA` of each parameter's width):
    ``cov_y = J cov_x J^T`` (at an optimum the gradient vanishes, so the map's second derivatives do
    not enter). Differencing the likelihood through a chart whose inverse is solved iteratively
    (:class:`ImplicitChart`) would add the solver's tolerance to the tiny steps of a sharp mode
    (measured: a spurious negative eigenvalue on a dense SAM).
    """
    lap = laplace_approximation(log_likelihood, space, x_opt)
    x0 = lap.centre
    y0 = chart.from_model(x0[None])[0]
    h = CHART_JACOBIAN_STEP_SIGMA * lap.sd
    d = space.ndim
    pts = np.repeat(x0[None], 2 * d, axis=0)
    pts[2 * np.arange(d), np.arange(d)] += h
    pts[2 * np.arange(d) + 1, np.arange(d)] -= h
    y = chart.from_model(pts)
    per = chart.space.periods
    dy = y[0::2] - y[1::2]
    if np.any(np.isfinite(per)):
        p = np.where(np.isfinite(per), per, 1.0)
        dy = np.where(np.isfinite(per), dy - p * np.round(dy / p), dy)
    jac = (dy / (2 * h[:, None])).T  # (d_y, d_x)
    cov = jac @ lap.covariance @ jac.T
    cov = 0.5 * (cov + cov.T)
    try:
        hess = -np.linalg.inv(cov)
    except np.linalg.LinAlgError:
        hess = np.full((d, d), np.nan)
    return LaplaceApproximation(y0, cov, lap.log_posterior, hess, h, lap.n_regularised,
                                "model-space Hessian carried into the chart by its Jacobian")


def laplace_approximation_reference(log_likelihood, space: ParameterSpace, x_opt, steps) -> np.ndarray:
    """Slow reference: the Hessian of the log-posterior one entry at a time with given ``steps``.

    Returns the Hessian ``(ndim, ndim)`` (not regularised), for comparing with the stencil of
    :func:`laplace_approximation`.
    """
    x0 = space.wrap(np.asarray(x_opt, float).reshape(space.ndim))
    d = space.ndim

    def f(x):
        return float(_log_post(log_likelihood, space, x[None])[0])

    f0 = f(x0)
    hess = np.empty((d, d))
    for i in range(d):
        for j in range(d):
            ei = np.zeros(d)
            ei[i] = steps[i]
            if i == j:
                hess[i, i] = (f(x0 + ei) - 2 * f0 + f(x0 - ei)) / steps[i] ** 2
                continue
            ej = np.zeros(d)
            ej[j] = steps[j]
            hess[i, j] = (f(x0 + ei + ej) - f(x0 + ei - ej) - f(x0 - ei + ej) + f(x0 - ei - ej)) / (4 * steps[i] * steps[j])
    return hess


class ModeRegion:
    """The log-likelihood restricted to an ellipsoid about a mode (``-inf`` outside); picklable.

    Parameters
    ----------
    log_likelihood : callable
        ``(K, ndim) -> (K,)``.
    centre : ndarray, shape (ndim,)
    covariance : ndarray, shape (ndim, ndim)
        Metric of the region.
    radius2 : float
        Largest squared Mahalanobis distance inside the region.
    periods : ndarray, shape (ndim,)
        Wrapping period per coordinate (``nan`` if not periodic): distances along periodic
        coordinates are taken to the nearest copy of the centre.

    ``n_calls`` and ``n_outside`` count the points offered and those outside.
    """

    def __init__(self, log_likelihood, centre, covariance, radius2: float, periods):
        self.log_likelihood = log_likelihood
        self.centre = np.asarray(centre, float)
        self.chol = np.linalg.cholesky(np.asarray(covariance, float))
        self.radius2 = float(radius2)
        self.periods = np.asarray(periods, float)
        self.n_calls = 0
        self.n_outside = 0

    def distance2(self, x) -> np.ndarray:
        """Squared Mahalanobis distance of ``(K, ndim)`` points from the centre, shape ``(K,)``."""
        dx = np.atleast_2d(np.asarray(x, float)) - self.centre
        per = self.periods
        periodic = np.isfinite(per)
        if periodic.any():
            p = np.where(periodic, per, 1.0)
            dx = np.where(periodic, dx - p * np.round(dx / p), dx)
        z = np.linalg.solve(self.chol, dx.T)
        return np.sum(z * z, axis=0)

    def __call__(self, x):
        x = np.atleast_2d(np.asarray(x, float))
        inside = self.distance2(x) <= self.radius2
        self.n_calls += len(x)
        self.n_outside += int(np.sum(~inside))
        out = np.full(len(x), -np.inf)
        if inside.any():
            out[inside] = np.asarray(self.log_likelihood(x[inside]), float)
        return out


class LaplaceIndependenceMove(emcee.moves.MHMove):
    """Independence Metropolis-Hastings move with a multivariate Student-t proposal.

    Every walker proposes a fresh draw of ``t_df(mean, scale^2 covariance)`` regardless of where it
    is; the Hastings factor ``ln q(x) - ln q(x')`` makes the move leave the target invariant
    (Tierney 1994, Ann. Statist. 22, 1701, section 2.3.3). Draws are not folded: a periodic
    coordinate drawn outside the sampled one-period window is rejected by the target
    (:class:`~tumble.inference.logpost.LogPosterior`), which keeps the proposal density exact.
    """

    def __init__(self, mean, covariance, *, df: float = PROPOSAL_DF, scale: float = PROPOSAL_SCALE):
        self.mean = np.asarray(mean, float)
        self.chol = np.linalg.cholesky(np.asarray(covariance, float) * scale**2)
        self.df = float(df)
        super().__init__(self._propose, ndim=len(self.mean))

    def log_density(self, x) -> np.ndarray:
        """Log proposal density up to a constant, shape ``(K,)``."""
        z = np.linalg.solve(self.chol, (np.atleast_2d(x) - self.mean).T)
        r2 = np.sum(z * z, axis=0)
        return -0.5 * (self.df + len(self.mean)) * np.log1p(r2 / self.df)

    def draw(self, n: int, random) -> np.ndarray:
        """``n`` draws of the proposal (``random``: a numpy RandomState or Generator)."""
        z = random.standard_normal((n, len(self.mean)))
        w = np.sqrt(self.df / random.chisquare(self.df, size=n))
        return self.mean + (z @ self.chol.T) * w[:, None]

    def _propose(self, x0, random):
        new = self.draw(len(x0), random)
        return new, self.log_density(x0) - self.log_density(new)


#: the attitude-axis move draws its angle uniformly on the circle with this probability, else from a
#: normal of the mode's width along the axis (a symmetric mixture: the uniform part crosses the
#: whole circle, the normal part keeps a useful acceptance inside a peaked mode)
AXIS_UNIFORM_FRACTION = 0.5


class AttitudeAxisMove(emcee.moves.MHMove):
    """Metropolis-Hastings move that turns the attitude about one fixed axis by a random angle.

    The attitude is the rotation ``M = exp([w]x) M_opt`` of an :class:`AttitudeChart` (coordinates
    ``idx`` of the sampled vector). The move proposes ``M' = R_axis(delta) M``, i.e.
    ``w' = log(exp([delta axis]x) exp([w]x))``, with ``delta`` from a symmetric density (uniform on
    ``(-pi, pi]`` with probability ``uniform_fraction``, else normal with sd ``scale_rad``).
    Left multiplication by a rotation preserves the Haar measure, so the proposal is symmetric with
    respect to it, and in exponential coordinates the Hastings factor is the ratio of the Haar
    densities, ``ln h(w) - ln h(w')`` (:func:`haar_log_density`; e.g. Chirikjian 2012, vol. 2,
    section 10.2; Tierney 1994, Ann. Statist. 22, 1701, for the Metropolis-Hastings ratio).

    Why: a light curve with nearly fixed Sun and observer directions hardly constrains a rotation of
    the whole body about their bisector (exactly none at zero phase angle, where the projected,
    lit shape is invariant under it). Measured on dense tumblers of the calibration library
    (CAL-dense-npa-119, -076): the attitude's posterior is a long line in ``w`` along the
    phase-angle bisector (the three ``w`` correlated 0.99-0.999), reaching ``|w| = pi`` where the
    chart cuts the circle, with the longest autocorrelation times; the ensemble moves must walk the
    whole line and cannot cross the cut. The axis is the direction of largest variance of the
    attitude block of the mode's covariance (it agreed with the sampled line and the bisector to
    within a few degrees on both objects).

    Parameters
    ----------
    idx : sequence of 3 int
        Columns of the rotation vector ``w`` in the sampled vector.
    axis : array_like, shape (3,)
        The axis (normalised here).
    scale_rad : float
        Sd of the normal part of the angle, rad.
    uniform_fraction : float
        Probability of a uniform angle.
    """

    def __init__(self, idx, axis, scale_rad: float, uniform_fraction: float = AXIS_UNIFORM_FRACTION):
        self.idx = np.asarray(idx, int)
        a = np.asarray(axis, float)
        self.axis = a / np.linalg.norm(a)
        self.scale_rad = float(scale_rad)
        self.uniform_fraction = float(uniform_fraction)
        super().__init__(self._propose)

    @classmethod
    def from_covariance(cls, space: ParameterSpace, covariance, **kwargs):
        """The move for the attitude coordinates of ``space`` (``None`` if it has none), axis and scale from ``covariance``."""
        if not all(n in space.names for n in ATTITUDE_NAMES):
            return None
        idx = [space.index(n) for n in ATTITUDE_NAMES]
        vals, vecs = np.linalg.eigh(np.asarray(covariance, float)[np.ix_(idx, idx)])
        return cls(idx, vecs[:, -1], math.sqrt(max(float(vals[-1]), 0.0)), **kwargs)

    def angles(self, n: int, random) -> np.ndarray:
        """``n`` draws of the turning angle (rad)."""
        uniform = random.uniform(-math.pi, math.pi, n)
        normal = random.normal(0.0, self.scale_rad, n)
        return np.where(random.uniform(size=n) < self.uniform_fraction, uniform, normal)

    def turn(self, w, delta) -> np.ndarray:
        """Rotation vectors of ``R_axis(delta) exp([w]x)``, shape ``(K, 3)``."""
        return rotation_log(rotation_exp(np.asarray(delta, float)[:, None] * self.axis) @ rotation_exp(w))

    def _propose(self, x0, random):
        x0 = np.atleast_2d(x0)
        w = x0[:, self.idx]
        w_new = self.turn(w, self.angles(len(x0), random))
        new = x0.copy()
        new[:, self.idx] = w_new
        return new, haar_log_density(w) - haar_log_density(w_new)


# ---------------------------------------------------------------------------
# the attitude chart: exponential coordinates of a rotation about the optimum
# ---------------------------------------------------------------------------
def _rz(a):
    c, s = np.cos(a), np.sin(a)
    o, z = np.ones_like(a), np.zeros_like(a)
    return np.stack([np.stack([c, -s, z], -1), np.stack([s, c, z], -1), np.stack([z, z, o], -1)], -2)


def _ry(a):
    c, s = np.cos(a), np.sin(a)
    o, z = np.ones_like(a), np.zeros_like(a)
    return np.stack([np.stack([c, z, s], -1), np.stack([z, o, z], -1), np.stack([-s, z, c], -1)], -2)


def direction_phase_matrix(lon_rad, lat_rad, phase_rad):
    """Rotation ``Rz(lon) Ry(pi/2 - lat) Rz(phase)``, shape ``(..., 3, 3)``.

    Its third column is the unit vector at (lon, lat) (the spin or angular-momentum direction) and
    ``phase`` turns about it: the z-y-z Euler angles ``(lon, pi/2 - lat, phase)``, whose Haar measure is
    ``cos(lat) dlon dlat dphase`` (Miles 1965, Biometrika 52, 636), i.e. the isotropic direction
    with a uniform phase of :class:`~tumble.inference.space.IsotropicLatitude` and
    :class:`~tumble.inference.space.PeriodicUniform`.
    """
    return _rz(np.asarray(lon_rad, float)) @ _ry(np.pi / 2 - np.asarray(lat_rad, float)) @ _rz(np.asarray(phase_rad, float))


def direction_phase_angles(m):
    """Inverse of :func:`direction_phase_matrix`: ``(lon, lat, phase)`` of ``(..., 3, 3)`` rotations (radians)."""
    m = np.asarray(m, float)
    lat = np.arcsin(np.clip(m[..., 2, 2], -1.0, 1.0))
    lon = np.arctan2(m[..., 1, 2], m[..., 0, 2])
    phase = np.arctan2(m[..., 2, 1], -m[..., 2, 0])
    return lon, lat, phase


def rotation_exp(w):
    """Rotation matrices ``exp([w]x)`` of rotation vectors ``(..., 3)`` (Rodrigues' formula)."""
    w = np.asarray(w, float)
    th = np.linalg.norm(w, axis=-1)[..., None, None]
    k = np.zeros(w.shape[:-1] + (3, 3))
    k[..., 0, 1], k[..., 0, 2], k[..., 1, 2] = -w[..., 2], w[..., 1], -w[..., 0]
    k[..., 1, 0], k[..., 2, 0], k[..., 2, 1] = w[..., 2], -w[..., 1], w[..., 0]
    small = th < 1e-6
    safe = np.where(small, 1.0, th)
    a = np.where(small, 1.0 - th**2 / 6.0, np.sin(safe) / safe)
    b = np.where(small, 0.5 - th**2 / 24.0, (1.0 - np.cos(safe)) / safe**2)
    return np.eye(3) + a * k + b * (k @ k)


def rotation_log(m):
    """Rotation vectors ``(..., 3)`` of rotations ``(..., 3, 3)`` (angle below pi)."""
    m = np.asarray(m, float)
    cos_t = np.clip((np.trace(m, axis1=-2, axis2=-1) - 1.0) / 2.0, -1.0, 1.0)
    th = np.arccos(cos_t)
    v = np.stack([m[..., 2, 1] - m[..., 1, 2], m[..., 0, 2] - m[..., 2, 0], m[..., 1, 0] - m[..., 0, 1]], -1)
    small = th < 1e-6
    f = np.where(small, 0.5 + th**2 / 12.0, th / (2.0 * np.sin(np.where(small, 1.0, th))))
    return v * f[..., None]


#: sampled rotation vectors have length below this (the exponential chart is one-to-one there)
CHART_MAX_ANGLE_RAD = math.pi
#: names of the attitude's rotation-vector coordinates in an :class:`AttitudeChart`'s space
ATTITUDE_NAMES = ("attitude_w1", "attitude_w2", "attitude_w3")


def haar_log_density(w) -> np.ndarray:
    """``ln[2 (1 - cos|w|) / |w|^2]``: the Haar density of rotation vectors ``(K, 3)`` relative to ``d^3 w / (8 pi^2)``.

    The density of the rotation group's invariant measure in exponential coordinates (Miles 1965,
    Biometrika 52, 636; Chirikjian 2012, Stochastic Models, Information Theory, and Lie Groups,
    vol. 2, section 10.2); one at ``w = 0``, ``-inf`` at ``|w| = 2 pi``. Shape ``(K,)``.
    """
    th = np.linalg.norm(np.atleast_2d(np.asarray(w, float)), axis=1)
    small = th < 1e-6
    safe = np.where(small, 1.0, th)
    haar = np.where(small, 1.0 - th**2 / 12.0, 2.0 * (1.0 - np.cos(safe)) / safe**2)
    with np.errstate(divide="ignore"):
        return np.log(haar)


class AttitudeChart:
    """Sampling coordinates in which a direction and a phase about it become a small rotation vector.

    A spin (or angular-momentum) direction ``(lon, lat)`` and the rotation phase about it are
    together one rotation of the body, ``M = direction_phase_matrix(lon, lat, phase)``. Near a
    well-determined attitude the posterior in ``(lon, lat, phase)`` is a curved ridge (changing
    the direction is compensated by the phase in a non-linear way); in the exponential coordinates
    ``w`` of ``M = exp([w]x) M_opt`` it is nearly Gaussian. The chart replaces the three by ``w``
    (named ``attitude_w1..3``, rad) and keeps the other coordinates.

    Prior: the isotropic direction with a uniform phase is the Haar measure of the rotation group,
    whose density in exponential coordinates is ``2 (1 - cos|w|) / |w|^2 / (8 pi^2)`` (Miles 1965,
    Biometrika 52, 636; e.g. Chirikjian 2012, Stochastic Models, Information Theory, and Lie
    Groups, vol. 2, section 10.2). The sampled space gives each ``w_i`` a flat prior on
    ``[-pi, pi]``; :meth:`log_correction` adds the rest (``-inf`` for ``|w| >= pi``).

    Parameters
    ----------
    space : ParameterSpace
        The model's space.
    x_opt : array_like, shape (ndim,)
        The optimum (the chart's origin).
    lon, lat, phase : str
        Names of the longitude (periodic), the latitude (isotropic) and the phase (periodic), radians.
    """

    def __init__(self, space: ParameterSpace, x_opt, lon: str, lat: str, phase: str):
        from tumble.inference.space import Parameter, Uniform

        self.model_space = space
        self.idx = np.array([space.index(lon), space.index(lat), space.index(phase)])
        x0 = space.wrap(np.asarray(x_opt, float).reshape(space.ndim))
        self.m0 = direction_phase_matrix(*x0[self.idx])
        params = list(space.parameters)
        for k, i in enumerate(self.idx):
            params[i] = Parameter(ATTITUDE_NAMES[k], Uniform(-math.pi, math.pi), "rad",
                                  "rotation vector of the attitude about the optimum")
        self.space = ParameterSpace(params)
        self._log_const = 3.0 * math.log(2.0 * math.pi) - math.log(8.0 * math.pi**2)

    def to_model(self, y) -> np.ndarray:
        """Model parameters ``(K, ndim)`` of chart coordinates ``(K, ndim)``."""
        y = np.atleast_2d(np.asarray(y, float))
        x = y.copy()
        lon, lat, phase = direction_phase_angles(rotation_exp(y[:, self.idx]) @ self.m0)
        x[:, self.idx[0]], x[:, self.idx[1]], x[:, self.idx[2]] = lon, lat, phase
        return self.model_space.wrap(x)

    def from_model(self, x) -> np.ndarray:
        """Chart coordinates of model parameters ``(K, ndim)``."""
        x = np.atleast_2d(np.asarray(x, float))
        y = x.copy()
        m = direction_phase_matrix(*(x[:, i] for i in self.idx))
        y[:, self.idx] = rotation_log(m @ np.swapaxes(self.m0, -1, -2))
        return y

    def log_correction(self, y) -> np.ndarray:
        """``ln`` of the model prior in chart coordinates over the chart space's flat prior, shape ``(K,)``.

        Both priors of the other coordinates are the same and cancel; what is left is the Haar
        density in exponential coordinates over the flat ``(2 pi)^-3``.
        """
        y = np.atleast_2d(np.asarray(y, float))
        th = np.linalg.norm(y[:, self.idx], axis=1)
        out = haar_log_density(y[:, self.idx]) + self._log_const
        return np.where(th < CHART_MAX_ANGLE_RAD, out, -np.inf)


#: Newton iterations and tolerance of the implicit chart's solve (in the chart coordinate's units)
IMPLICIT_MAX_ITER = 30
IMPLICIT_TOL = 1e-12
#: relative finite-difference step of the implicit chart's derivative (of the replaced parameter's width)
IMPLICIT_STEP = 1e-7


class ImplicitChart:
    """Sampling coordinates in which one parameter is replaced by a well-measured function of the state.

    When the data pin a non-linear function ``g(x)`` of several parameters (for a tumbler, the period
    ratio ``ln(P_phi/P_psi)``, a function of the excitation and of the shape), the posterior is a
    narrow curved ridge along ``g(x) = const``. Replacing the parameter ``x_k`` by ``g`` itself makes
    that ridge a coordinate plane. ``x_k`` is recovered from ``g`` and the other coordinates by Newton
    iterations started at the optimum's value, on the branch where ``dg/dx_k`` has the optimum's
    sign (the chart is one-to-one there; points off that branch, or without a solution inside the
    support of ``x_k``, are outside the chart and get ``-inf``).

    Prior: the model's prior density of ``x_k`` times ``|dx_k/dg|`` (change of variables) over the
    chart space's flat prior of ``g`` on ``[g_opt - half_width, g_opt + half_width]``.

    Parameters
    ----------
    space : ParameterSpace
        The model's space (or the space of the chart applied before this one).
    x_opt : array_like, shape (ndim,)
    parameter : str
        The parameter replaced (a bounded prior).
    function : callable
        ``g((K, ndim)) -> (K,)`` in the model's parameters.
    name, unit, description : str
        Of the new coordinate.
    half_width : float
        Half-width of its flat prior about ``g(x_opt)``.
    """

    def __init__(self, space: ParameterSpace, x_opt, parameter: str, function, name: str, unit: str = "",
                 description: str = "", half_width: float = 1.0):
        from tumble.inference.space import Parameter, Uniform

        self.model_space = space
        self.k = space.index(parameter)
        self.prior = space.parameters[self.k].prior
        self.function = function
        x0 = space.wrap(np.asarray(x_opt, float).reshape(space.ndim))
        self.x_k0 = float(x0[self.k])
        self.g0 = float(np.asarray(function(x0[None]), float)[0])
        self.h = IMPLICIT_STEP * float(self.prior.high - self.prior.low)
        self.sign = float(np.sign(self._derivative(x0[None])[0]))
        if not np.isfinite(self.g0) or self.sign == 0:
            raise TumbleError(f"the chart's function is not finite or not monotone in {parameter} at the optimum")
        # the function's gradient at the optimum: Newton starts from the linear prediction of x_k
        # (one iteration fewer than from the optimum's x_k on a sampled mode)
        self.x0 = x0
        steps = IMPLICIT_STEP * _prior_widths(space)
        pts = np.repeat(x0[None], space.ndim, axis=0)
        pts[np.arange(space.ndim), np.arange(space.ndim)] += steps
        with np.errstate(invalid="ignore"):
            grad = (np.asarray(function(pts), float) - self.g0) / steps
        self.grad = np.where(np.isfinite(grad), grad, 0.0)
        params = list(space.parameters)
        params[self.k] = Parameter(name, Uniform(self.g0 - half_width, self.g0 + half_width), unit, description)
        self.space = ParameterSpace(params)
        self._log_flat = -math.log(2.0 * half_width)

    def _derivative(self, x):
        x2 = np.concatenate([x, x])
        x2[len(x):, self.k] += self.h
        g = np.asarray(self.function(x2), float)
        return (g[len(x):] - g[: len(x)]) / self.h

    def _solve(self, y):
        """``(x, dg/dx_k, ok)`` for chart points ``y (K, ndim)``.

        Newton iterations on the rows not yet converged only (each iteration one call of the
        function on the value and its forward-difference neighbour); a row whose derivative leaves the
        optimum's sign, or that has not converged after :data:`IMPLICIT_MAX_ITER`, is outside.
        """
        lo, hi = self.prior.low + self.h, self.prior.high - 2 * self.h
        x = np.array(y, float, copy=True)
        target = y[:, self.k]
        dx = y - self.x0
        per = self.model_space.periods
        if np.any(np.isfinite(per)):
            p = np.where(np.isfinite(per), per, 1.0)
            dx = np.where(np.isfinite(per), dx - p * np.round(dx / p), dx)
        dx[:, self.k] = 0.0
        start = self.x_k0 + (target - self.g0 - dx @ self.grad) / self.grad[self.k]
        x[:, self.k] = np.clip(np.where(np.isfinite(start), start, self.x_k0), lo, hi)
        n = len(y)
        deriv = np.full(n, np.nan)
        ok = np.zeros(n, bool)
        active = np.ones(n, bool)
        for _ in range(IMPLICIT_MAX_ITER):
            idx = np.flatnonzero(active)
            if idx.size == 0:
                break
            xa = x[idx]
            x2 = np.concatenate([xa, xa])
            x2[idx.size:, self.k] += self.h
            g = np.asarray(self.function(x2), float)
            d = (g[idx.size:] - g[: idx.size]) / self.h
            resid = g[: idx.size] - target[idx]
            deriv[idx] = d
            bad = ~np.isfinite(resid) | ~np.isfinite(d) | (d * self.sign <= 0)
            done = ~bad & (np.abs(resid) < IMPLICIT_TOL)
            ok[idx[done]] = True
            active[idx[done | bad]] = False
            go = ~(done | bad)
            if go.any():
                rows = idx[go]
                x[rows, self.k] = np.clip(x[rows, self.k] - resid[go] / d[go], lo, hi)
        return x, deriv, ok

    def to_model(self, y) -> np.ndarray:
        """Parameters of the space before this chart for chart points ``(K, ndim)`` (``nan`` rows outside)."""
        x, _, ok = self._solve(np.atleast_2d(np.asarray(y, float)))
        x[~ok] = np.nan
        return x

    def from_model(self, x) -> np.ndarray:
        """Chart coordinates of ``(K, ndim)`` points."""
        x = np.atleast_2d(np.asarray(x, float))
        y = x.copy()
        y[:, self.k] = np.asarray(self.function(x), float)
        return y

    def to_model_with_correction(self, y):
        """``(x, log_correction)`` in one solve (the correction ``-inf`` outside the chart)."""
        x, deriv, ok = self._solve(np.atleast_2d(np.asarray(y, float)))
        with np.errstate(divide="ignore", invalid="ignore"):
            corr = np.asarray(self.prior.log_pdf(x[:, self.k]), float) - np.log(np.abs(deriv)) - self._log_flat
        corr = np.where(ok & np.isfinite(corr), corr, -np.inf)
        x[~ok] = np.nan
        return x, corr

    def log_correction(self, y) -> np.ndarray:
        """``ln`` of (model prior of the replaced parameter x |dx_k/dg|) over the flat prior of ``g``."""
        return self.to_model_with_correction(y)[1]


class FixedCoordinateChart:
    """Sampling coordinates without one parameter, which is held at a value; picklable.

    For a parameter the likelihood has integrated out (the physical model's jitter,
    :class:`~tumble.inference.marginal.JitterMarginalLikelihood`): the chart's space lacks it, and
    the model vector gets ``value`` in its place (ignored by such a likelihood). The prior of the
    removed parameter integrates to one in the marginal likelihood, so the prior correction is zero.
    """

    def __init__(self, space: ParameterSpace, parameter: str, value: float):
        self.model_space = space
        self.k = space.index(parameter)
        self.value = float(value)
        self.space = ParameterSpace([p for i, p in enumerate(space.parameters) if i != self.k])

    def to_model(self, y) -> np.ndarray:
        y = np.atleast_2d(np.asarray(y, float))
        return np.insert(y, self.k, self.value, axis=1)

    def from_model(self, x) -> np.ndarray:
        return np.delete(np.atleast_2d(np.asarray(x, float)), self.k, axis=1)

    def log_correction(self, y) -> np.ndarray:
        return np.zeros(len(np.atleast_2d(y)))


class ChartChain:
    """Charts applied one after the other: ``charts[0]`` on the model's space, each next on the previous one's."""

    def __init__(self, charts):
        self.charts = tuple(charts)
        self.model_space = self.charts[0].model_space
        self.space = self.charts[-1].space

    def to_model_with_correction(self, y):
        """``(x, log_correction)``: model parameters and the summed prior correction of every chart."""
        z = np.atleast_2d(np.asarray(y, float))
        total = np.zeros(len(z))
        for chart in reversed(self.charts):
            if hasattr(chart, "to_model_with_correction"):
                z_new, corr = chart.to_model_with_correction(z)
            else:
                corr = chart.log_correction(z)
                z_new = chart.to_model(z)
            total = total + corr
            z = z_new
        return z, total

    def to_model(self, y) -> np.ndarray:
        return self.to_model_with_correction(y)[0]

    def from_model(self, x) -> np.ndarray:
        z = np.atleast_2d(np.asarray(x, float))
        for chart in self.charts:
            z = chart.from_model(z)
        return z

    def log_correction(self, y) -> np.ndarray:
        return self.to_model_with_correction(y)[1]


class ChartLikelihood:
    """The log-likelihood seen in chart coordinates, plus the chart's prior correction; picklable."""

    def __init__(self, log_likelihood, chart):
        self.log_likelihood = log_likelihood
        self.chart = chart

    def __call__(self, y):
        y = np.atleast_2d(np.asarray(y, float))
        if hasattr(self.chart, "to_model_with_correction"):
            x, corr = self.chart.to_model_with_correction(y)
        else:
            x, corr = self.chart.to_model(y), self.chart.log_correction(y)
        out = np.full(len(y), -np.inf)
        ok = np.isfinite(corr)
        if ok.any():
            xs = self.chart.model_space.wrap(x[ok])
            inside = np.isfinite(self.chart.model_space.log_prior(xs))
            idx = np.flatnonzero(ok)[inside]
            if idx.size:
                out[idx] = np.asarray(self.log_likelihood(xs[inside]), float) + corr[idx]
        return out


#: the optimum's polish: BFGS iterations at most, the central-difference step of the gradient (in
#: units of the Laplace widths at the start) and the gain (nats) below which the start is kept
POLISH_MAX_ITER = 200
POLISH_GRADIENT_STEP = 1e-3
POLISH_MIN_GAIN = 1e-3
#: the objective given to BFGS where the log-posterior is not finite (outside the prior or the chart)
POLISH_OUTSIDE = 1e12


@dataclass(frozen=True)
class PolishedMode:
    """An optimum carried to the top of its mode (:func:`polish_mode`).

    Attributes
    ----------
    x : ndarray, shape (ndim,)
        The polished optimum (the model's parameters).
    log_posterior_gain : float
        Log-posterior at ``x`` minus at the start (nats, >= 0).
    n_evaluations : int
        Likelihood evaluations spent.
    """

    x: np.ndarray
    log_posterior_gain: float
    n_evaluations: int


class _ChartObjective:
    """The model's log-posterior (no chart correction) at chart points, counting evaluations."""

    def __init__(self, log_likelihood, space, chart):
        self.log_likelihood, self.space, self.chart = log_likelihood, space, chart
        self.n = 0

    def __call__(self, y):
        y = np.atleast_2d(y)
        x = self.chart.to_model(y) if self.chart is not None else y
        out = np.full(len(y), -np.inf)
        ok = np.all(np.isfinite(x), axis=1)
        if ok.any():
            out[ok] = _log_post(self.log_likelihood, self.space, x[ok])
        self.n += len(y)
        return out


def polish_mode(log_likelihood, space: ParameterSpace, x_opt, chart=None, *,
                max_iter: int = POLISH_MAX_ITER) -> PolishedMode:
    """Carry an optimum to the top of its mode: BFGS on the log-posterior in the chart, whitened.

    A search's optimiser may stop on the mode's curved ridge well below its top (measured on a
    dense SAM of the calibration library, CAL-dense-npa-119: 59 nats below it, the posterior's mass
    7 Laplace widths away, so that 92 % of the samples piled against the mode region's edge). In the
    chart the mode is nearly Gaussian; the search runs there in coordinates whitened by the Laplace
    covariance at the start (:func:`chart_laplace`), with a central-difference gradient of all
    coordinates in one vectorised call (Nocedal & Wright 2006, Numerical Optimization, ch. 6 and
    8.1). The objective is the model's log-posterior, not the chart's density: the top of the mode
    does not depend on the coordinates.

    Parameters
    ----------
    log_likelihood : callable
        ``(K, ndim) -> (K,)`` in the model's parameters.
    space : ParameterSpace
        The model's space.
    x_opt : array_like, shape (ndim,)
    chart : optional
        As for :func:`sample_local_mode`.

    Returns
    -------
    PolishedMode
        The start itself when no gain above :data:`POLISH_MIN_GAIN` was found.
    """
    from scipy import optimize

    x0 = space.wrap(np.asarray(x_opt, float).reshape(space.ndim))
    if chart is not None:
        lap = chart_laplace(log_likelihood, space, x0, chart)
    else:
        lap = laplace_approximation(log_likelihood, space, x0)
    fn = _ChartObjective(log_likelihood, space, chart)
    y0 = lap.centre
    f0 = float(fn(y0[None])[0])
    chol = np.linalg.cholesky(lap.covariance)
    d = len(y0)

    def value(z):
        v = float(fn((y0 + chol @ z)[None])[0])
        return -v if np.isfinite(v) else POLISH_OUTSIDE

    def gradient(z):
        h = POLISH_GRADIENT_STEP
        pts = np.repeat(z[None], 2 * d, axis=0)
        pts[2 * np.arange(d), np.arange(d)] += h
        pts[2 * np.arange(d) + 1, np.arange(d)] -= h
        f = fn(y0[None] + pts @ chol.T)
        if not np.all(np.isfinite(f)):
            return np.zeros(d)  # at the edge of the prior or the chart: BFGS stops there
        return -(f[0::2] - f[1::2]) / (2 * h)

    res = optimize.minimize(value, np.zeros(d), jac=gradient, method="BFGS",
                            options={"maxiter": int(max_iter), "gtol": 1e-4})
    y = y0 + chol @ res.x
    f1 = float(fn(y[None])[0])
    if not (np.isfinite(f1) and f1 > f0 + POLISH_MIN_GAIN):
        return PolishedMode(x0, 0.0, fn.n)
    x = chart.to_model(y[None])[0] if chart is not None else y
    return PolishedMode(space.wrap(x), f1 - f0, fn.n)


#: the ensemble moves of emcee the mixture may use, by name
ENSEMBLE_MOVES = {"de": emcee.moves.DEMove, "snooker": emcee.moves.DESnookerMove, "stretch": emcee.moves.StretchMove}


def steps_for_budget(max_evaluations: int, n_walkers: int, n_ensembles: int) -> int:
    """Steps per ensemble that spend at most ``max_evaluations`` likelihood evaluations."""
    return max(1, int(max_evaluations) // (int(n_walkers) * int(n_ensembles)))


def _moves(independence: LaplaceIndependenceMove, weights, space: ParameterSpace, cov):
    """``(move, weight)`` pairs of the mixture ``weights``: "independence", "attitude_axis" (left out
    when ``space`` has no attitude coordinates) or a name of :data:`ENSEMBLE_MOVES`."""
    out = []
    for name, w in weights.items():
        if w <= 0:
            continue
        if name == "independence":
            move = independence
        elif name == "attitude_axis":
            move = AttitudeAxisMove.from_covariance(space, cov)
        else:
            move = ENSEMBLE_MOVES[name]()
        if move is not None:
            out.append((move, float(w)))
    return out


def _region_radius2(ndim: int) -> float:
    return float(stats.chi2.ppf(1.0 - MODE_REGION_TAIL, ndim)) * MODE_REGION_SCALE**2


def _draw_inside(move, fn, region, n, random, lp):
    """``n`` proposal draws (scaled by START_SCALE) with finite log-posterior inside the region."""
    out = np.empty((n, len(move.mean)))
    got = 0
    wide = LaplaceIndependenceMove(move.mean, move.chol @ move.chol.T * (START_SCALE / PROPOSAL_SCALE) ** 2,
                                   df=move.df, scale=1.0)
    for _ in range(200):
        x = lp.into_window(wide.draw(4 * n, random))
        x = x[region.distance2(x) <= region.radius2]
        if len(x):
            ok = np.isfinite(fn(x))
            x = x[ok][: n - got]
            out[got:got + len(x)] = x
            got += len(x)
        if got >= n:
            return out
    raise TumbleError("could not draw starting walkers with a finite log-posterior inside the mode region")


def _pilot_covariance(chains, lp, fallback_mean, fallback_cov, periods):
    """Mean and covariance of the pilot's second half (periodic coordinates unwrapped about the mean)."""
    x = np.concatenate([c[c.shape[0] // 2:].reshape(-1, c.shape[-1]) for c in chains])
    if len(x) < MIN_PILOT_SAMPLES_PER_DIM * x.shape[1]:
        return fallback_mean, fallback_cov
    from tumble.inference import diagnostics as diag

    x = diag.align_periodic(x, periods, fallback_mean)
    mean = x.mean(axis=0)
    cov = np.cov(x, rowvar=False)
    try:
        np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        return fallback_mean, fallback_cov
    return lp.into_window(mean[None])[0], cov


@dataclass(frozen=True)
class _Ensembles:
    """The emcee samplers of one run, their mode regions and pending starting states (None once run)."""

    samplers: list
    regions: list
    states: list


def _start_ensembles(log_likelihood, space, centre, cov, n_walkers, n_ensembles, rng, states=None, weights=None,
                     region_cov=None, region_centre=None):
    """emcee samplers on the region-restricted posterior, with their starting states.

    ``cov`` scales the independence proposal and the starting draws; ``region_cov`` (default ``cov``)
    is the metric of the mode region.
    """
    radius2 = _region_radius2(space.ndim)
    samplers, regions, out_states = [], [], []
    seeds = rng.integers(0, 2**32, size=n_ensembles)
    for e in range(n_ensembles):
        region = ModeRegion(log_likelihood, centre if region_centre is None else region_centre,
                            cov if region_cov is None else region_cov, radius2, space.periods)
        lp = LogPosterior(region, space, 1.0, centre)
        independence = LaplaceIndependenceMove(centre, cov)
        sampler = emcee.EnsembleSampler(n_walkers, space.ndim, lp, moves=_moves(independence, weights or MOVE_WEIGHTS, space, cov),
                                        vectorize=True)
        random = np.random.RandomState(int(seeds[e]))
        if states is None:
            x0 = _draw_inside(independence, lp, region, n_walkers, random, lp)
        else:
            x0 = lp.into_window(states[e])
            outside = region.distance2(x0) > radius2
            outside |= ~np.isfinite(lp(x0))
            if outside.any():
                x0[outside] = _draw_inside(independence, lp, region, int(outside.sum()), random, lp)
        samplers.append(sampler)
        regions.append(region)
        out_states.append(emcee.State(x0, random_state=random.get_state()))
    return _Ensembles(samplers, regions, out_states)


def _run_one(ens: _Ensembles, e: int, steps: int, progress_bar=None):
    """Advance ensemble ``e`` by ``steps`` (emcee's own loop; from its pending state or its chain's last)."""
    sampler = ens.samplers[e]
    state = ens.states[e] if ens.states[e] is not None else sampler.backend.get_last_sample()
    for _ in sampler.sample(state, iterations=steps, store=True, skip_initial_state_check=True):
        if progress_bar is not None:
            progress_bar.update(1)
    ens.states[e] = None


def _run_reference(ens: _Ensembles, steps: int, progress_bar=None):
    """Slow reference of :func:`_run`: the ensembles one after the other, one likelihood call per request."""
    for e in range(len(ens.samplers)):
        _run_one(ens, e, steps, progress_bar)


class _Rendezvous:
    """Where the ensembles' likelihood requests meet: one vectorised call for the pending requests of all.

    Each ensemble runs emcee's unchanged loop in its own thread; its mode region's likelihood is a
    :class:`_Member` that hands the points here and waits. When every ensemble still running has a
    request pending, the last to arrive evaluates all of them in one call of ``log_likelihood``
    (rows in ensemble order) and wakes the others. The likelihood is vectorised over rows and each
    row's value does not depend on the others (to round-off), so the chains are those of
    :func:`_run_reference`; only the number of calls (and their fixed Python and per-call costs)
    halves with two ensembles. Only one thread computes at a time.
    """

    def __init__(self, log_likelihood, n_members: int):
        self.log_likelihood = log_likelihood
        self.live = int(n_members)
        self.pending = {}
        self.results = {}
        self.error = None
        self.n_batches = 0
        self.cond = threading.Condition()

    def submit(self, e: int, x: np.ndarray) -> np.ndarray:
        with self.cond:
            self.pending[e] = x
            self._flush_when_complete()
            while e not in self.results and self.error is None:
                self.cond.wait()
            if e in self.results:
                return self.results.pop(e)
            raise self.error

    def abort(self, exc: BaseException):
        """Wake every waiting ensemble with ``exc`` (the caller's thread was interrupted)."""
        with self.cond:
            if self.error is None:
                self.error = exc
            self.cond.notify_all()

    def leave(self):
        """An ensemble finished (or failed): the others no longer wait for its requests."""
        with self.cond:
            self.live -= 1
            self._flush_when_complete()

    def _flush_when_complete(self):
        if not self.pending or len(self.pending) < self.live:
            return
        keys = sorted(self.pending)
        parts = [np.atleast_2d(np.asarray(self.pending.pop(k), float)) for k in keys]
        try:
            values = np.asarray(self.log_likelihood(np.concatenate(parts)), float)
        except Exception as exc:  # raised in every waiting ensemble's thread, then by _run in the caller's
            self.error = exc
        else:
            self.n_batches += 1
            for k, v in zip(keys, np.split(values, np.cumsum([len(p) for p in parts])[:-1])):
                self.results[k] = v
        self.cond.notify_all()


class _Member:
    """One ensemble's view of a :class:`_Rendezvous`: called like the likelihood it stands for."""

    def __init__(self, rendezvous: _Rendezvous, e: int):
        self.rendezvous = rendezvous
        self.e = e

    def __call__(self, x):
        return self.rendezvous.submit(self.e, x)


def _run_member(ens: _Ensembles, e: int, steps: int, gate: _Rendezvous, progress_bar, errors: list):
    try:
        _run_one(ens, e, steps, progress_bar)
    except Exception as exc:  # re-raised by _run in the caller's thread
        errors.append(exc)
    finally:
        gate.leave()


def _run(ens: _Ensembles, steps: int, progress_bar=None):
    """Advance every ensemble by ``steps``, their likelihood requests batched into shared calls.

    Same chains as :func:`_run_reference` (to the likelihood's round-off); the likelihood is called
    about half as often with two ensembles (:class:`_Rendezvous`).
    """
    shared = [r.log_likelihood for r in ens.regions]
    if len(ens.samplers) < 2 or any(fn is not shared[0] for fn in shared):
        return _run_reference(ens, steps, progress_bar)
    gate = _Rendezvous(shared[0], len(ens.samplers))
    for e, region in enumerate(ens.regions):
        region.log_likelihood = _Member(gate, e)
    errors: list = []
    threads = [threading.Thread(target=_run_member, args=(ens, e, steps, gate, progress_bar, errors), daemon=True)
               for e in range(len(ens.samplers))]
    try:
        for th in threads:
            th.start()
        for th in threads:
            th.join()
    except BaseException:  # e.g. KeyboardInterrupt in the caller: the ensembles stop at their next request
        gate.abort(TumbleError("sampling interrupted"))
        raise
    finally:
        for region, fn in zip(ens.regions, shared):
            region.log_likelihood = fn
    if errors:
        raise errors[0]


def _edge_fraction(samples, region: ModeRegion) -> float:
    d2 = region.distance2(samples)
    return float(np.mean(d2 > (MODE_EDGE_RADIUS**2) * region.radius2))


def sample_local_mode(log_likelihood: Callable[[np.ndarray], np.ndarray], space: ParameterSpace, x_opt, *,
                      max_steps: int = DEFAULT_MAX_STEPS, max_evaluations: int | None = None,
                      pilot_steps: int = DEFAULT_PILOT_STEPS,
                      n_walkers: int | None = None, n_ensembles: int = 2, tau_multiple: float = 50.0,
                      acceptance_range: tuple = LOCAL_ACCEPTANCE_RANGE, rhat_max: float = 1.05,
                      burn_factor: float = 5.0, cluster_threshold: float = 4.0,
                      laplace: LaplaceApproximation | None = None, chart=None,
                      adapt_rounds: int = DEFAULT_ADAPT_ROUNDS, widen_region: bool = True,
                      weights: dict | None = None,
                      rng=None, progress: bool = False):
    """Sample the posterior of one solution's mode, starting from its optimum (see the module notes).

    Parameters
    ----------
    log_likelihood : callable
        ``(K, ndim) -> (K,)`` log-likelihoods (vectorised over walkers).
    space : ParameterSpace
        Names, units and priors.
    x_opt : array_like, shape (ndim,)
        The solution's optimum.
    max_steps : int
        Budget: steps per ensemble, pilot included.
    max_evaluations : int, optional
        Budget in likelihood evaluations instead (all ensembles; overrides ``max_steps``).
    pilot_steps : int
        Steps per ensemble of the pilot that re-scales the proposal (discarded).
    n_walkers : int, optional
        Walkers per ensemble (default :func:`~tumble.inference.sampling.default_n_walkers`; half as
        many gave a tau twice as long on a dense SAM, so the default is the same as the ensemble
        sampler's).
    n_ensembles : int
        Independent ensembles (at least 2 for split R-hat across ensembles).
    tau_multiple, acceptance_range, rhat_max, burn_factor, cluster_threshold
        Convergence criteria, as in :func:`~tumble.inference.sampling.sample_posterior`
        (``acceptance_range`` defaults to :data:`LOCAL_ACCEPTANCE_RANGE`).
    laplace : LaplaceApproximation, optional
        A precomputed approximation at ``x_opt`` (in the chart's coordinates when ``chart`` is given).
    chart : AttitudeChart, ImplicitChart or ChartChain, optional
        Sample in these coordinates (a direction and phase as a rotation vector about the optimum; a
        well-measured function of the state in place of one parameter); the samples are returned in
        the model's parameters. The convergence diagnostics refer to the
        sampled coordinates.
    adapt_rounds : int
        Pilot rounds of ``pilot_steps`` each (discarded); each re-fits the independence proposal to
        the previous round's samples when its walkers moved.
    widen_region : bool
        After a pilot round the mode region's metric becomes the Laplace covariance plus the pilot's
        (the region stays centred on the optimum); False keeps the Laplace ellipsoid (the behaviour
        before 2026-12-05, kept for the benchmark's side-by-side comparison).
    weights : dict, optional
        Move mixture (default :data:`MOVE_WEIGHTS`).
    rng : numpy.random.Generator, int or None
    progress : bool
        tqdm progress bar.

    Returns
    -------
    Posterior
        Samples of the main run after burn-in, all ensembles pooled. ``diagnostics`` holds the
        usual criteria plus ``method``, ``mode_edge_fraction`` (samples beyond
        :data:`MODE_EDGE_RADIUS` of the region's radius), ``outside_fraction`` (proposals outside the
        region) and ``pilot_steps``; a posterior that reaches the region's edge is reported as not
        converged ("not contained in the mode").
    """
    from tqdm.auto import tqdm

    rng = as_generator(rng)
    ndim = space.ndim
    n_walkers = default_n_walkers(ndim) if n_walkers is None else int(n_walkers)
    if n_walkers < 2 * ndim or n_walkers % 2:
        raise TumbleError(f"n_walkers must be even and at least 2 * ndim = {2 * ndim}, got {n_walkers}")
    if max_evaluations is not None:
        max_steps = steps_for_budget(max_evaluations, n_walkers, n_ensembles)
    if n_ensembles < 2:
        raise TumbleError("sample_local_mode needs at least 2 ensembles (split R-hat across ensembles)")
    max_steps = int(max_steps)
    pilot_steps = int(min(pilot_steps, max_steps // (4 * max(1, int(adapt_rounds)))))
    model_space, model_likelihood = space, log_likelihood
    if chart is not None:
        if laplace is None:
            laplace = chart_laplace(model_likelihood, model_space, x_opt, chart)
        log_likelihood, space = ChartLikelihood(log_likelihood, chart), chart.space
        x_opt = chart.from_model(np.asarray(x_opt, float)[None])[0]
        ndim = space.ndim  # a chart may drop a coordinate integrated out of the likelihood
    lap = laplace if laplace is not None else laplace_approximation(log_likelihood, space, x_opt)
    centre, cov = lap.centre, lap.covariance
    n_eval = 0
    with tqdm(total=max_steps * n_ensembles, disable=not progress, desc="sampling", unit="step") as bar:
        last, region_cov = None, cov
        n_rounds = max(0, int(adapt_rounds)) if pilot_steps > 0 else 0
        for _ in range(n_rounds):
            pilot = _start_ensembles(log_likelihood, space, centre, cov, n_walkers, n_ensembles, rng, states=last,
                                     region_cov=region_cov, region_centre=lap.centre, weights=weights)
            _run(pilot, pilot_steps, bar)
            chains = [s.get_chain() for s in pilot.samplers]
            lp0 = LogPosterior(log_likelihood, space, 1.0, centre)
            pilot_acceptance = float(np.nanmean([np.nanmean(diag_acceptance(c)) for c in chains]))
            if pilot_acceptance >= MIN_PILOT_ACCEPTANCE:
                p_centre, p_cov = _pilot_covariance(chains, lp0, centre, cov, space.periods)
                # the proposal follows the pilot; the region stays centred on the optimum (the
                # solution's top) and holds both the Laplace ellipsoid and the pilot's spread (a
                # mode broader than its Laplace approximation, e.g. against a prior bound, is not cut;
                # a region widened by the pilot alone and re-centred let walkers of
                # CAL-dense-npa-096 reach another P_phi)
                if widen_region:
                    region_cov = lap.covariance + p_cov
                centre, cov = space.wrap(p_centre), p_cov
            last = [c[-1] for c in chains]
            n_eval += sum(r.n_calls for r in pilot.regions)
        ens = _start_ensembles(log_likelihood, space, centre, cov, n_walkers, n_ensembles, rng, states=last,
                               region_cov=region_cov, region_centre=lap.centre, weights=weights)
        budget = max_steps - n_rounds * pilot_steps
        done, target = 0, min(budget, FIRST_BLOCK_STEPS)
        while True:
            _run(ens, target - done, bar)
            done = target
            chains = [s.get_chain() for s in ens.samplers]
            a = assess_chains(chains, space, tau_multiple, acceptance_range, rhat_max, burn_factor, cluster_threshold)
            if not a.reasons or done >= budget:
                break
            if np.isfinite(a.tau_max):
                needed = int(math.ceil(1.1 * (burn_factor + tau_multiple) * a.tau_max))
            else:
                needed = 2 * done
            target = min(budget, done + int(np.clip(needed - done, max(done // 4, 50), done)))
    n_eval += sum(r.n_calls for r in ens.regions)
    # periodic coordinates of the chains live in windows centred on ``centre``; the posterior record
    # wraps them into the prior's support
    post = posterior_from_chains([s.backend for s in ens.samplers], space, a, 1.0, n_eval, tau_multiple,
                                 acceptance_range, rhat_max)
    region = ens.regions[0]
    edge = _edge_fraction(np.concatenate([c[a.burn:].reshape(-1, ndim) for c in chains]), region)
    outside = sum(r.n_outside for r in ens.regions) / max(1, sum(r.n_calls for r in ens.regions))
    reasons = list(post.diagnostics.reasons)
    if edge > MODE_EDGE_MAX_FRACTION:
        reasons.append(f"the posterior is not contained in the mode: {100 * edge:.1f} % of the samples lie beyond "
                       f"{MODE_EDGE_RADIUS:g} of the mode region's radius")
    diag = replace(post.diagnostics, converged=not reasons, reasons=tuple(reasons), method="local-mode",
                   mode_edge_fraction=edge, outside_fraction=float(outside), pilot_steps=int(n_rounds * pilot_steps))
    post = replace(post, diagnostics=diag)
    return post if chart is None else _to_model_coordinates(post, chart, model_space)


def _to_model_coordinates(post, chart, space: ParameterSpace):
    """A posterior sampled in chart coordinates, expressed in the model's parameters."""
    x, corr = ChartChain([chart]).to_model_with_correction(post.samples)
    x = space.wrap(x)
    log_like = post.log_likelihood - corr
    centres = chart.to_model(post.diagnostics.mode_centres)
    diag = replace(post.diagnostics, mode_centres=centres)
    return replace(post, samples=x, log_prob=space.log_prior(x) + log_like, log_likelihood=log_like,
                   names=space.names, units=space.units, periods=space.periods, lows=space.lows, diagnostics=diag)


def laplace_log_evidence(lap: LaplaceApproximation) -> float:
    """ln Z of one mode under its Laplace approximation (:func:`laplace_approximation`), nats.

    ``ln Z = ln p(x*) + ln L(x*) + d/2 ln 2 pi + 1/2 ln det Sigma`` with ``Sigma`` the approximation's
    (regularised) covariance in the space's own parameters (Kass & Raftery 1995, JASA 90, 773,
    eq. 4; the prior density is that of the parameters as sampled, so ``Sigma`` and the prior are in
    the same units). The one definition used wherever a mode's evidence is compared (the tumbling
    solutions of :mod:`tumble.classify.solutions`). NaN when ``Sigma`` is not positive definite.
    """
    sign, logdet = np.linalg.slogdet(np.asarray(lap.covariance, float))
    if sign <= 0 or not np.isfinite(logdet) or not np.isfinite(lap.log_posterior):
        return math.nan
    d = len(lap.centre)
    return float(lap.log_posterior + 0.5 * d * math.log(2.0 * math.pi) + 0.5 * logdet)


__all__.append("laplace_log_evidence")
