"""The physical rotation state: free-rigid-body ellipsoid fits started from the evidence's frequencies.

Physical ellipsoid models (:class:`tumble.model.PhysicalModel`) for SAM and LAM (or PA), started at
the evidence's frequency pairs mapped through the light-curve frequency relations (SAM: dominant
``f_phi - f_psi``; LAM: ``f_phi`` and ``f_phi + f_psi``; Kaasalainen 2001, A&A 376, 302; Pravec et
al. 2005, Icarus 173, 108). For NPA every acceptable solution is enumerated and ranked by
:mod:`tumble.classify.solutions`; the top solution's mode is sampled by :func:`sample_solution_mode`
(the jitter integrated out, the optimum polished to its mode's top,
:func:`tumble.inference.local.sample_local_mode` confined to that mode).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tumble.classify.evidence import ClassifyError, EvidenceResult
from tumble.exceptions import TumbleError

__all__ = ["npa_candidates", "RotationFit", "fit_rotation_state", "optimise_state", "optimise_states",
           "batched_whitened_residuals", "thin_lightcurve",
           "whitened_residuals", "random_orientations", "sample_solution_mode", "sampling_chart"]


def npa_candidates(f1_per_d: float, f2_per_d: float, *, forms: str = "published") -> list:
    """Rotation/precession frequency pairs consistent with a light-curve lattice basis (f1, f2).

    The light curve of a free rotator holds only ``n1 f_phi + n2 f_psi``
    (Kaasalainen 2001, A&A 376, 302); its dominant terms are ``f_phi - f_psi``
    (SAM) and ``f_phi``, ``f_phi + f_psi`` (LAM) (Pravec et al. 2005, Icarus
    173, 108). With ``f1`` the fundamental and ``f2`` the reduced second basis
    frequency, ``f_psi`` is one of ``f2``, ``f1 - f2``, ``f1 + f2`` (and halves and doubles) and

    - ``forms="published"``: SAM ``f_phi = f1 + f_psi`` (``f1`` = the dominant ``f_phi - f_psi``);
      LAM ``f_phi = f1``, or ``f_phi + f_psi = f1``;
    - ``forms="other"``: the remaining assignments of ``f1`` to ``f_phi - f_psi``, ``f_phi`` or
      ``f_phi + f_psi`` in each mode (SAM ``f_phi = f1`` or ``f_phi + f_psi = f1``; LAM
      ``f_phi - f_psi = f1``). The evidence's basis is only one basis of the lattice, and
      its ``f1`` is the strongest term of the fitted series, which for a real body need not
      be the published dominant one;
    - ``forms="all"``: both, published first.

    Returns
    -------
    list of (mode, f_psi_per_d, f_phi_per_d, (a_psi, b_psi), (a_phi, b_phi))
        The last two items give ``f = a f1 + b f2`` for error propagation.
    """
    if forms not in ("published", "other", "all"):
        raise ValueError(f"forms must be 'published', 'other' or 'all', not {forms!r}")
    out = []
    seen = set()

    def add(mode, fpsi, fphi, cpsi, cphi):
        key = (mode, round(fpsi, 9), round(fphi, 9))
        if fpsi > 0 and fphi > 0 and key not in seen:
            seen.add(key)
            out.append((mode, fpsi, fphi, cpsi, cphi))

    # which of f_phi - f_psi ("diff"), f_phi ("phi"), f_phi + f_psi ("sum") the f1 basis is
    published = {"SAM": ("diff",), "LAM": ("phi", "sum")}
    other = {"SAM": ("phi", "sum"), "LAM": ("diff",)}
    chosen = [published] if forms == "published" else [other] if forms == "other" else [published, other]
    for table in chosen:
        # a light curve of a body with the ellipsoid's symmetry holds only even combinations, so the
        # basis may be twice the physical frequencies: allow halves of f1 and of the f_psi options
        for d1 in (1, 2):
            g1 = f1_per_d / d1
            for a in (0, 1, 2):
                for b in (-2, -1, 1, 2):
                    for d2 in (1, 2):
                        fpsi = (a * f1_per_d + b * f2_per_d) / d2
                        if not fpsi > 0:
                            continue
                        cpsi = (a / d2, b / d2)
                        for mode in ("SAM", "LAM"):
                            for form in table[mode]:
                                if form == "diff":
                                    add(mode, fpsi, g1 + fpsi, cpsi, (1 / d1 + cpsi[0], cpsi[1]))
                                elif g1 > fpsi and form == "phi":
                                    add(mode, fpsi, g1, cpsi, (1 / d1, 0.0))
                                elif g1 > fpsi and form == "sum":
                                    add(mode, fpsi, g1 - fpsi, cpsi, (1 / d1 - cpsi[0], -cpsi[1]))
    return out


@dataclass(frozen=True)
class RotationFit:
    """Physical-model fit of the rotation state.

    Attributes
    ----------
    mode : str
        'PA', 'SAM' or 'LAM' (the best-fitting mode), or 'none' when SAM and LAM fit
        indistinguishably.
    max_log_likelihood : dict
        Best log-likelihood (nats, on the fitted points) reached by each mode tried.
    best : dict
        Best parameter values of the chosen mode (sampled-space names and units).
    candidate : tuple
        The frequency mapping (see :func:`npa_candidates`) of the best start, or () for PA.
    posterior : tumble.inference.Posterior or None
        emcee posterior of the chosen mode (None when sampling was skipped).
    derived : dict
        Name -> (median, 16th, 84th percentile) of ``p_psi_h``, ``p_phi_h``,
        ``excitation`` (E/E0), ``a_over_b``, ``b_over_c``, ``l_lon_deg``, ``l_lat_deg``.
    converged : bool
        The posterior met its convergence criteria and is unimodal.
    reasons : tuple of str
        Why not, when not.
    n_points_fitted : int
        Points used (the light curve is thinned evenly to at most ``max_points``).
    geometry_note : str
    solutions : tuple of tumble.classify.solutions.Solution
        NPA: every acceptable (mode, P_psi, P_phi) solution, best first (the first is the state
        above); empty for PA.
    """

    mode: str
    max_log_likelihood: dict
    best: dict
    candidate: tuple
    posterior: object
    derived: dict
    converged: bool
    reasons: tuple
    n_points_fitted: int
    geometry_note: str
    solutions: tuple = ()


def thin_lightcurve(lc, max_points):
    """The light curve thinned evenly to at most ``max_points`` points."""
    if lc.n_points <= max_points:
        return lc
    idx = np.unique(np.round(np.linspace(0, lc.n_points - 1, max_points)).astype(int))
    return lc.subset(idx)


#: Whitened residual given to states outside the prior (a large constant: the optimiser steps back).
OUT_OF_PRIOR_RESIDUAL = 1e3


def whitened_residuals(model, xs, invalid: str = "raise") -> np.ndarray:
    """Residuals over their standard deviation (zero-points profiled) of ``(K, ndim)`` states, shape ``(K, n)``.

    States outside the prior get :data:`OUT_OF_PRIOR_RESIDUAL` everywhere. ``invalid="raise"`` (the
    reference optimiser's call): a state the closed form refuses (at the separatrix) gives every row
    of the batch that residual; ``"nan"`` (the batched optimiser, whose batch holds many independent
    starts): only that state's row.
    """
    sp = model.space
    xs = sp.wrap(np.atleast_2d(xs))
    ok = np.isfinite(sp.log_prior(xs))
    r = np.full((len(xs), model.y.size), OUT_OF_PRIOR_RESIDUAL)
    if ok.any():
        try:
            with np.errstate(invalid="ignore"):
                res, var, _, _, _ = model._profiled(xs[ok], invalid=invalid)
                w = res / np.sqrt(var)
            r[ok] = np.where(np.all(np.isfinite(w), axis=1)[:, None], w, OUT_OF_PRIOR_RESIDUAL)
        except TumbleError:
            pass
    return r


#: Forward-difference steps of the physical model's Jacobian: relative for periods and axis ratios
#: (their scales differ by decades between bodies), absolute for angles and the excitation.
JACOBIAN_REL_STEP_PERIOD = 1e-6
JACOBIAN_REL_STEP_RATIO = 1e-5
JACOBIAN_ABS_STEP = 1e-5


def jacobian_free_steps(space, x) -> tuple:
    """The parameters differentiated (all but the jitter) and their forward-difference steps.

    Returns ``(free, steps)``: indices into ``space.names`` and the steps in parameter units;
    used by :func:`optimise_state` (the solutions' Laplace approximation is the sampler's, in :mod:`tumble.inference.local`).
    """
    names = space.names
    free = [i for i, n in enumerate(names) if n != "ln_jitter_mag"]
    steps = np.array([JACOBIAN_REL_STEP_PERIOD * abs(x[i]) if names[i] in ("p_psi_h", "period_h")
                      else JACOBIAN_REL_STEP_RATIO * x[i] if names[i] in ("a_over_b", "b_over_c")
                      else JACOBIAN_ABS_STEP for i in free])
    return free, steps


#: Points of the final jitter grid of the optimisers (ln jitter uniform over its prior).
JITTER_GRID_POINTS = 24


def optimise_state(model, x0, n_iter: int = 40):
    """Levenberg-Marquardt on the whitened residuals (zero-points profiled), batched over trial steps.

    The jitter is held fixed during the iterations and set to its best value at the end.
    Each iteration evaluates the forward-difference Jacobian and five damping factors in two
    vectorised model calls (Marquardt 1963, J. SIAM 11, 431). Returns ``(x, log_likelihood)``.
    """
    sp = model.space
    names = sp.names
    ij = names.index("ln_jitter_mag")
    x = sp.wrap(np.asarray(x0, float).copy())
    free, steps = jacobian_free_steps(sp, x)

    def residuals(xs):
        return whitened_residuals(model, xs)

    r0 = residuals(x[None])[0]
    c0 = float(r0 @ r0)
    lam = 1e-2
    for _ in range(n_iter):
        pts = np.repeat(x[None], len(free), axis=0)
        pts[np.arange(len(free)), free] += steps
        rj = residuals(pts)
        jac = (rj - r0[None]).T / steps[None, :]  # (n, d)
        h = jac.T @ jac
        g = jac.T @ r0
        dh = np.diag(h).copy()
        dh[dh <= 0] = 1.0
        lams = lam * np.array(LM_DAMPING_TRIALS)
        trial = []
        for lm in lams:
            try:
                trial.append(np.linalg.solve(h + lm * np.diag(dh), -g))
            except np.linalg.LinAlgError:
                trial.append(np.zeros(len(free)))
        tx = np.repeat(x[None], len(lams), axis=0)
        tx[:, free] += np.array(trial)
        rt = residuals(tx)
        ct = np.sum(rt * rt, axis=1)
        k = int(np.argmin(ct))
        if ct[k] < c0:
            improvement = c0 - ct[k]
            x, r0, c0, lam = sp.wrap(tx[k]), rt[k], float(ct[k]), max(lams[k], 1e-8)
            if improvement < 1e-6 * max(c0, 1.0):
                break
        else:
            lam *= 100.0
            if lam > 1e8:
                break
    # best jitter on a small grid, then the full likelihood
    lo, hi = sp.lows[ij], sp.highs[ij]
    grid = np.linspace(lo, hi, JITTER_GRID_POINTS)
    xs = np.repeat(x[None], len(grid), axis=0)
    xs[:, ij] = grid
    ll = model(xs)
    x = xs[int(np.argmax(ll))]
    return x, float(np.max(ll))


#: The damping factors tried at each Levenberg-Marquardt iteration, times the current one (shared by
#: :func:`optimise_state` and :func:`optimise_states`, so both take the same steps).
LM_DAMPING_TRIALS = (0.01, 0.1, 1.0, 10.0, 100.0)
#: Model rows (states) per call of the batched optimiser: above ~50 rows the cost per row is flat
#: (0.11 ms on 300 points, against 1.2 ms for a single row), and the call's arrays (~100 kB a row)
#: stay within tens of MB.
OPTIMISER_ROWS_PER_CALL = 256


def batched_whitened_residuals(model, xs) -> np.ndarray:
    """:func:`whitened_residuals` of many independent states, per row (``invalid="nan"``), in calls of at
    most :data:`OPTIMISER_ROWS_PER_CALL` rows; shape ``(K, n)``."""
    xs = np.atleast_2d(xs)
    if len(xs) <= OPTIMISER_ROWS_PER_CALL:
        return whitened_residuals(model, xs, invalid="nan")
    return np.concatenate([whitened_residuals(model, xs[i:i + OPTIMISER_ROWS_PER_CALL], invalid="nan")
                           for i in range(0, len(xs), OPTIMISER_ROWS_PER_CALL)])


def _damped_steps(h, g, lams) -> np.ndarray:
    """Levenberg-Marquardt steps ``-(H + lam diag(H))^-1 g`` for ``H`` (A, d, d), ``g`` (A, d) and the damping
    factors ``lams`` (A, L): shape (A, L, d); a singular system gives a zero step (as in :func:`optimise_state`)."""
    dh = np.diagonal(h, axis1=1, axis2=2).copy()
    dh[dh <= 0] = 1.0
    a, n_l, d = len(h), lams.shape[1], h.shape[1]
    mats = h[:, None] + lams[:, :, None, None] * (dh[:, None, :, None] * np.eye(d)[None, None])
    rhs = np.broadcast_to(-g[:, None, :, None], (a, n_l, d, 1))
    try:
        return np.linalg.solve(mats, rhs)[..., 0]
    except np.linalg.LinAlgError:
        out = np.zeros((a, n_l, d))
        for i in range(a):
            for j in range(n_l):
                try:
                    out[i, j] = np.linalg.solve(mats[i, j], rhs[i, j, :, 0])
                except np.linalg.LinAlgError:
                    pass
        return out


def optimise_states(model, x0, n_iter: int = 40) -> tuple:
    """:func:`optimise_state` of many independent starts ``x0`` (S, ndim), all advanced together.

    Each start keeps its own damping, its own forward-difference steps and its own stopping rule,
    exactly as in :func:`optimise_state` (the slow reference, one start at a time): per iteration
    the Jacobians of all active starts are one batched model evaluation and their damped trial
    steps (:data:`LM_DAMPING_TRIALS`) another, so the model's fixed cost per call is paid once per
    iteration instead of once per start (Marquardt 1963, J. SIAM 11, 431). A start leaves the batch
    when it stops. The jitter is set at the end on the same grid, with the shape magnitudes computed
    once per start (:meth:`tumble.model.PhysicalModel.jitter_log_likelihood`). Returns
    ``(x (S, ndim), log_likelihood (S,))``.
    """
    sp = model.space
    names = sp.names
    ij = names.index("ln_jitter_mag")
    x0 = np.asarray(x0, float)
    if x0.size == 0:
        return np.empty((0, sp.ndim)), np.empty(0)
    x = sp.wrap(np.atleast_2d(x0).copy())
    n_s = len(x)
    free, _ = jacobian_free_steps(sp, x[0])
    free = np.asarray(free)
    d = len(free)
    steps = np.array([jacobian_free_steps(sp, xi)[1] for xi in x])  # (S, d), fixed at the start
    r0 = batched_whitened_residuals(model, x)
    c0 = np.sum(r0 * r0, axis=1)
    lam = np.full(n_s, 1e-2)
    active = np.ones(n_s, bool)
    factors = np.asarray(LM_DAMPING_TRIALS)
    n_l = len(factors)
    for _ in range(n_iter):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        a = idx.size
        pts = np.repeat(x[idx], d, axis=0).reshape(a, d, -1)
        pts[:, np.arange(d), free] += steps[idx]
        rj = batched_whitened_residuals(model, pts.reshape(a * d, -1)).reshape(a, d, -1)
        jt = (rj - r0[idx, None, :]) / steps[idx, :, None]  # (A, d, n): the Jacobian transposed
        h = jt @ np.swapaxes(jt, 1, 2)
        g = (jt @ r0[idx, :, None])[..., 0]
        lams = lam[idx, None] * factors[None, :]
        trial = _damped_steps(h, g, lams)  # (A, L, d)
        tx = np.repeat(x[idx], n_l, axis=0).reshape(a, n_l, -1)
        tx[:, :, free] += trial
        rt = batched_whitened_residuals(model, tx.reshape(a * n_l, -1)).reshape(a, n_l, -1)
        ct = np.sum(rt * rt, axis=2)
        k = np.argmin(ct, axis=1)
        ck = ct[np.arange(a), k]
        better = ck < c0[idx]
        for j in np.flatnonzero(better):
            i = idx[j]
            improvement = c0[i] - ck[j]
            x[i] = sp.wrap(tx[j, k[j]][None])[0]
            r0[i], c0[i], lam[i] = rt[j, k[j]], ck[j], max(lams[j, k[j]], 1e-8)
            if improvement < 1e-6 * max(c0[i], 1.0):
                active[i] = False
        for j in np.flatnonzero(~better):
            i = idx[j]
            lam[i] *= 100.0
            if lam[i] > 1e8:
                active[i] = False
    # best jitter on the reference's grid, then the full likelihood
    grid = np.linspace(sp.lows[ij], sp.highs[ij], JITTER_GRID_POINTS)
    ll = model.jitter_log_likelihood(x, grid)
    best = np.argmax(ll, axis=1)
    x[:, ij] = grid[best]
    return x, ll[np.arange(n_s), best]


def random_orientations(space, base: dict, n, rng) -> np.ndarray:
    """``(n, ndim)`` states with the parameters of ``base`` fixed and the others drawn from their priors."""
    names = space.names
    x = np.empty((n, len(names)))
    for j, name in enumerate(names):
        if name in base:
            x[:, j] = base[name]
        else:
            x[:, j] = space.parameters[j].prior.ppf(rng.uniform(size=n))
    return x


def sampling_chart(model, x_opt, marginal_jitter: bool):
    """The model's sampling chart at ``x_opt``, without the jitter coordinate when it is integrated out."""
    from tumble.inference.local import ChartChain, FixedCoordinateChart
    from tumble.inference.marginal import JITTER_PARAMETER

    chart = model.sampling_chart(x_opt)
    if not marginal_jitter:
        return chart
    charts = list(chart.charts) if isinstance(chart, ChartChain) else [chart]
    k = model.space.index(JITTER_PARAMETER)
    charts.append(FixedCoordinateChart(charts[-1].space, JITTER_PARAMETER, float(np.asarray(x_opt)[k])))
    return ChartChain(charts)


def sample_solution_mode(model, x_opt, *, span_d: float, max_steps: int | None = None, n_walkers: int | None = None,
                         rng=None, progress: bool = False, marginal_jitter: bool = True, polish: bool = True,
                         weights: dict | None = None):
    """Posterior of one solution's mode of the physical model (the sampling tail of :func:`fit_rotation_state`).

    1. The jitter is integrated out of the likelihood (Gaussian likelihood only;
       :class:`tumble.inference.marginal.JitterMarginalLikelihood`): one dimension fewer, and not the
       jitter's plateau against its lower bound.
    2. The optimum is polished to the top of its mode in the model's chart
       (:func:`tumble.inference.local.polish_mode`); a polish that would move ``f_psi`` or ``f_phi``
       by more than ``SAME_SOLUTION_CYCLES`` per span (another solution) is not used.
    3. The mode is sampled in the chart at the polished optimum (attitude as a rotation vector, the
       period ratio in place of the excitation; :func:`tumble.inference.local.sample_local_mode`).
    4. The jitter of every sample is drawn from its conditional posterior.

    ``max_steps`` is the cap of the adaptive run (steps per ensemble; default
    :data:`tumble.inference.local.DEFAULT_MAX_STEPS`): the run stops as soon as it has converged.
    ``weights``: the move mixture (default :data:`tumble.inference.local.MOVE_WEIGHTS`).

    Returns the :class:`tumble.inference.Posterior` in the model's parameters; its diagnostics add
    ``polish_gain`` (nats of log-posterior gained by the polish) to the local-mode ones.
    """
    from dataclasses import replace

    from tumble.classify.solutions import SAME_SOLUTION_CYCLES
    from tumble.inference.local import DEFAULT_MAX_STEPS, polish_mode, sample_local_mode
    from tumble.inference.marginal import JITTER_PARAMETER, JitterMarginalLikelihood
    from tumble.inference.space import as_generator

    rng = as_generator(rng)
    max_steps = DEFAULT_MAX_STEPS if max_steps is None else int(max_steps)
    marginal_jitter = bool(marginal_jitter) and not model.student_t
    likelihood = JitterMarginalLikelihood(model) if marginal_jitter else model
    x = model.space.wrap(np.asarray(x_opt, float))
    gain = 0.0
    notes = []
    if polish:
        pol = polish_mode(likelihood, model.space, x, sampling_chart(model, x, marginal_jitter))
        before, after = model.derived(x[None]), model.derived(pol.x[None])
        shift = max(abs(24.0 / after[k][0] - 24.0 / before[k][0]) * span_d for k in ("p_psi_h", "p_phi_h"))
        if shift <= SAME_SOLUTION_CYCLES:
            x, gain = pol.x, pol.log_posterior_gain
        else:
            notes.append(f"the optimum's polish moved the frequencies by {shift:.2f} cycles per span (another "
                         f"solution) and was not used")
    post = sample_local_mode(likelihood, model.space, x, max_steps=max_steps, n_walkers=n_walkers,
                             chart=sampling_chart(model, x, marginal_jitter), rng=rng, progress=progress,
                             weights=weights)
    if marginal_jitter:
        s, ll = likelihood.draw_jitter(post.samples, rng)
        samples = post.samples.copy()
        samples[:, model.space.index(JITTER_PARAMETER)] = s
        post = replace(post, samples=samples, log_likelihood=ll, log_prob=model.space.log_prior(samples) + ll)
    diag = replace(post.diagnostics, polish_gain=float(gain), polish_note="; ".join(notes))
    return replace(post, diagnostics=diag)


def fit_rotation_state(lc, evidence: EvidenceResult, hypothesis: str, *, rng=None, n_walkers: int | None = None,
                       max_steps: int | None = None, max_points: int = 300, n_orientations: int = 48,
                       progress: bool = False, student_t: bool = False) -> RotationFit:
    """Fit the physical ellipsoid model to obtain the rotation state (see the module notes).

    Parameters
    ----------
    lc : LightCurve
    evidence : EvidenceResult
        Starting frequencies.
    hypothesis : {'PA', 'NPA'}
        Which physical family to fit.
    rng : numpy.random.Generator, int or None
    n_walkers, max_steps : int
        emcee ensemble size (default from the dimension) and the cap of the adaptive sampling run,
        steps per ensemble (default :data:`tumble.inference.local.DEFAULT_MAX_STEPS`);
        ``max_steps = 0`` skips sampling (optimisation only).
    max_points : int
        The light curve is thinned evenly to at most this many points for the physical fit.
    n_orientations : int
        Spin directions and phases tried per starting shape (random for PA; quasi-uniform for NPA,
        whose solution search, :func:`tumble.classify.solutions.search_solutions`, is deterministic).
    progress : bool
        tqdm progress bar for the sampling.
    student_t : bool
        Student-t likelihood.
    """
    from tumble.inference.space import as_generator
    from tumble.model import PhysicalModel

    rng = as_generator(rng)
    sub = thin_lightcurve(lc, max_points)
    span_h = lc.span_d * 24.0
    results = {}
    if hypothesis == "PA":
        f1 = evidence.f1_per_d
        periods = [24.0 / f1 * (1.0 if evidence.second_harmonic_dominates else 2.0)]
        periods.append(periods[0] * (2.0 if evidence.second_harmonic_dominates else 0.5))
        model = PhysicalModel(sub, "PA", period_range_h=(0.5 * min(periods), 2.0 * max(periods)), student_t=student_t)
        starts = []
        for p in periods:
            for ab, bc in ((1.3, 1.1), (1.8, 1.2), (2.5, 1.3)):
                starts.append(random_orientations(model.space, {"period_h": p, "a_over_b": ab, "b_over_c": bc,
                                                                 "ln_jitter_mag": math.log(1e-3)}, n_orientations, rng))
        xs = np.concatenate(starts)
        ll = model(xs)
        top = np.argsort(-ll)[:3]
        # the three best starts refined together (optimise_states: each as optimise_state alone)
        fitted, values = optimise_states(model, xs[top])
        best_x, best_ll = None, -np.inf
        for x, v in zip(fitted, values):
            if v > best_ll:
                best_x, best_ll = x, float(v)
        results["PA"] = (best_ll, best_x, model, ())
        chosen = "PA"
        solutions = ()
    else:
        # every acceptable solution, enumerated systematically (tumble.classify.solutions); the top
        # one is the fitted state, the best of each mode feeds the mode comparison
        from tumble.classify.solutions import FitBudget, npa_models, search_solutions

        models = npa_models(sub, span_h, student_t=student_t)
        # rng=None: the search is deterministic (quasi-uniform starts), the seed moves only the sampling
        search = search_solutions(lc, evidence, models, rng=None, budget=FitBudget(n_orientations=n_orientations))
        if not search.solutions:
            raise ClassifyError(f"{lc.object_id}: no SAM or LAM state reproduces the frequencies "
                                f"{evidence.f1_npa_per_d:.6g} and {evidence.f2_per_d:.6g} per day")
        for mode, sol in search.best_by_mode.items():
            results[mode] = (sol.log_likelihood, sol.state, models[mode], sol.candidate)
        solutions = search.solutions
        chosen = solutions[0].mode
    best_ll, best_x, model, cand = results[chosen]
    max_ll = {k: float(v[0]) for k, v in results.items()}
    posterior = None
    reasons = []
    converged = False
    if max_steps is None or max_steps > 0:
        # the chosen solution's own mode, started from its optimum (tumble.inference.local): the
        # interval is never a mixture of separated modes, and leaving the mode is a diagnostic
        posterior = sample_solution_mode(model, best_x, span_d=lc.span_d, max_steps=max_steps, n_walkers=n_walkers,
                                         rng=rng, progress=progress)
        converged = posterior.converged
        reasons = list(posterior.diagnostics.reasons)
        samples = posterior.samples
    else:
        reasons = ["sampling skipped (max_steps = 0); state from optimisation only"]
        samples = best_x[None, :]
    der = model.derived(samples)
    sd = model.space.to_dict(samples)
    table = {"p_psi_h": der["p_psi_h"], "p_phi_h": der["p_phi_h"], "excitation": der["excitation"],
             "a_over_b": sd["a_over_b"], "b_over_c": sd["b_over_c"],
             "l_lon_deg": np.degrees(sd["l_lon_rad"]) % 360.0, "l_lat_deg": np.degrees(sd["l_lat_rad"])}
    derived = {k: tuple(float(q) for q in np.percentile(np.asarray(v, float), [50, 15.865, 84.135]))
               for k, v in table.items()}
    return RotationFit(mode=chosen, max_log_likelihood=max_ll, best=dict(zip(model.space.names, map(float, best_x))),
                       candidate=tuple(cand), posterior=posterior, derived=derived, converged=bool(converged),
                       reasons=tuple(reasons), n_points_fitted=sub.n_points, geometry_note=model.geometry.note,
                       solutions=solutions)
