"""The physical rotation state: free-rigid-body ellipsoid fits started from the evidence's frequencies.

Physical ellipsoid models (:class:`tumble.model.PhysicalModel`) for SAM and LAM (or PA), started at
the evidence's frequency pairs mapped through the light-curve frequency relations (SAM: dominant
``f_phi - f_psi``; LAM: ``f_phi`` and ``f_phi + f_psi``; Kaasalainen 2001, A&A 376, 302; Pravec et
al. 2005, Icarus 173, 108) with many spin directions and phases, refined by optimisation, and the
better mode sampled with emcee (:func:`tumble.inference.sample_posterior`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np

from tumble.classify.evidence import ClassifyError, EvidenceResult
from tumble.classify.noise import MODEL_ERROR_FLOOR_MAG
from tumble.classify.thresholds import MIN_CYCLES
from tumble.exceptions import ConvergenceWarning, TumbleError
from tumble.model import FourierBasis, FourierVariant, linear_log_evidence, prepare_linear

__all__ = ["npa_candidates", "RotationFit", "fit_rotation_state", "optimise_state", "thin_lightcurve"]


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


def _shape_solutions(mode, ratio, rng, n_pick=4):
    """Ellipsoid axis ratios and excitation ``u`` that give ``P_phi/P_psi = ratio`` in ``mode``."""
    from tumble.dynamics import periods_unit_momentum

    ab = np.geomspace(1.05, 3.5, 14)
    bc = np.geomspace(1.02, 2.2, 10)
    A, B = np.meshgrid(ab, bc, indexing="ij")
    A, B = A.ravel(), B.ravel()
    from tumble.model import _inertia_from_ratios

    i1, i2 = _inertia_from_ratios(A, B)
    u = np.linspace(0.002, 0.998, 160)
    if mode == "SAM":
        idd = 1.0 - u[None, :] * (1.0 - i2[:, None])
    else:
        idd = i1[:, None] + u[None, :] * (i2 - i1)[:, None]
    ok = (np.abs(idd - i2[:, None]) > 2e-3) & (idd < 1.0)
    idd = np.where(ok, idd, 0.5 * (i1 + i2)[:, None] if mode == "LAM" else 0.5 * (i2 + 1)[:, None])
    pp, pf = periods_unit_momentum(np.broadcast_to(i1[:, None], idd.shape), np.broadcast_to(i2[:, None], idd.shape), idd)
    r = np.where(ok, np.asarray(pf) / np.asarray(pp), np.nan) - ratio
    sols = []
    for s in range(len(A)):
        rs = r[s]
        sign = np.sign(rs)
        idx = np.flatnonzero(np.isfinite(rs[:-1]) & np.isfinite(rs[1:]) & (sign[:-1] * sign[1:] < 0))
        for j in idx[:1]:
            uu = u[j] - rs[j] * (u[j + 1] - u[j]) / (rs[j + 1] - rs[j])
            sols.append((A[s], B[s], float(uu)))
    if not sols:
        return []
    pick = rng.choice(len(sols), size=min(n_pick, len(sols)), replace=False)
    return [sols[i] for i in sorted(pick)]


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


def thin_lightcurve(lc, max_points):
    """The light curve thinned evenly to at most ``max_points`` points."""
    if lc.n_points <= max_points:
        return lc
    idx = np.unique(np.round(np.linspace(0, lc.n_points - 1, max_points)).astype(int))
    return lc.subset(idx)


def optimise_state(model, x0, n_iter: int = 40):
    """Levenberg-Marquardt on the whitened residuals (zero-points profiled), batched over trial steps.

    The jitter is held fixed during the iterations and set to its best value at the end.
    Each iteration evaluates the forward-difference Jacobian and five damping factors in two
    vectorised model calls (Marquardt 1963, J. SIAM 11, 431). Returns ``(x, log_likelihood)``.
    """
    sp = model.space
    names = sp.names
    ij = names.index("ln_jitter_mag")
    free = [i for i in range(len(names)) if i != ij]
    x = sp.wrap(np.asarray(x0, float).copy())
    steps = np.array([1e-6 * abs(x[i]) if names[i] in ("p_psi_h", "period_h") else 1e-5 for i in free])
    for i, name in zip(range(len(free)), [names[k] for k in free]):
        if name in ("a_over_b", "b_over_c"):
            steps[i] = 1e-5 * x[free[i]]

    def residuals(xs):
        xs = sp.wrap(np.atleast_2d(xs))
        ok = np.isfinite(sp.log_prior(xs))
        r = np.full((len(xs), model.y.size), 1e3)
        if ok.any():
            try:
                res, var, _, _, _ = model._profiled(xs[ok])
                r[ok] = res / np.sqrt(var)
            except TumbleError:
                pass
        return r

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
        lams = lam * np.array([0.01, 0.1, 1.0, 10.0, 100.0])
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
    grid = np.linspace(lo, hi, 24)
    xs = np.repeat(x[None], len(grid), axis=0)
    xs[:, ij] = grid
    ll = model(xs)
    x = xs[int(np.argmax(ll))]
    return x, float(np.max(ll))


def _random_orientations(space, base: dict, n, rng):
    names = space.names
    x = np.empty((n, len(names)))
    for j, name in enumerate(names):
        if name in base:
            x[:, j] = base[name]
        else:
            x[:, j] = space.parameters[j].prior.ppf(rng.uniform(size=n))
    return x


#: starts refined per mode by a short Levenberg-Marquardt run, at most this many per frequency mapping
N_SHORT_STARTS = 30
N_STARTS_PER_MAPPING = 4
#: of those, the best are refined fully
N_FULL_STARTS = 4
#: the same for the other basis assignments of the lattices (``npa_candidates(forms="other")``)
N_SHORT_STARTS_OTHER = 16
N_STARTS_PER_MAPPING_OTHER = 2
N_FULL_STARTS_OTHER = 2
#: shape restarts: for each of the best N_RESTART_TOP fitted states, N_RESTART_SHAPES shapes with
#: the same period ratio (the fitted one first) x N_RESTART_ORIENT random orientations each get a
#: short refinement; the N_RESTART_LM best are refined fully
N_RESTART_TOP = 4
N_RESTART_SHAPES = 6
N_RESTART_ORIENT = 2
N_RESTART_LM = 2


def _shape_restarts(model, mode, x_best, rng):
    """Starts that keep the frequencies of a fitted state and redraw its shape and orientation.

    The frequencies of an NPA state (``P_psi`` and the period ratio) are found well by the
    frequency mappings, but the fit then stalls in the shape: a wrong ellipsoid with the right
    period ratio is a deep local optimum, while from the right shape almost every random
    orientation converges (measured on simulated SAM and LAM bodies; `docs/methods-classify.md`).
    The likelihood of an unrefined start says little about its basin, so the starts are not ranked
    here: returns ``N_RESTART_SHAPES x N_RESTART_ORIENT`` starts - the fitted shape and shapes
    drawn along the constant-ratio curve of :func:`_shape_solutions`, each with random
    orientations.
    """
    from tumble.dynamics import periods_unit_momentum

    sp = model.space
    d = dict(zip(sp.names, x_best))
    args, _ = model.state_arrays(x_best[None])
    pp, pf = periods_unit_momentum(args[0], args[1], args[2])
    ratio = float(np.asarray(pf).ravel()[0] / np.asarray(pp).ravel()[0])
    shapes = [(d["a_over_b"], d["b_over_c"], d["excitation_u"])]
    shapes += _shape_solutions(mode, ratio, rng, n_pick=N_RESTART_SHAPES - 1)
    xs = []
    for ab, bc, u in shapes:
        base = {"p_psi_h": d["p_psi_h"], "excitation_u": u, "a_over_b": ab, "b_over_c": bc,
                "ln_jitter_mag": d["ln_jitter_mag"]}
        xs.extend(_random_orientations(sp, base, N_RESTART_ORIENT, rng))
    return xs


#: local no-drift refinement of the evidence's lattice basis: grid half-width and step (cycles per span)
REFINE_HALF_WIDTH = 0.6
REFINE_STEP = 0.03
REFINE_VARIANTS = (FourierVariant(4, 0, 2), FourierVariant(4, 0, 3))


def _refined_pairs(lc, f1, f2):
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


def _two_period_pair(lc):
    """The best order-2 pair of the joint two-period least-squares scan as ``[(f_high, f_low)]`` (c/d).

    The shape-free evidence ranks lattices by marginal likelihood, and with drift terms a wrong
    lattice can fit a short dense campaign as closely as the true one (a clear LAM test case:
    kappa 0.95 for the wrong basis, 1.02 for the true one), while the plain two-period scan often
    hits the true pair (there 2 (f_phi + f_psi) and f_phi). Its pair is added to the frequency
    mappings the physical fit tries, which can tell the lattices apart.
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


def fit_rotation_state(lc, evidence: EvidenceResult, hypothesis: str, *, rng=None, n_walkers: int | None = None,
                       max_steps: int = 1500, max_points: int = 300, n_orientations: int = 48,
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
        emcee ensemble size (default from the dimension) and step budget per ensemble;
        ``max_steps = 0`` skips sampling (optimisation only).
    max_points : int
        The light curve is thinned evenly to at most this many points for the physical fit.
    n_orientations : int
        Random spin directions and phases tried per starting shape.
    progress : bool
        tqdm progress bar for the sampling.
    student_t : bool
        Student-t likelihood.
    """
    from tumble.inference import sample_posterior
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
                starts.append(_random_orientations(model.space, {"period_h": p, "a_over_b": ab, "b_over_c": bc,
                                                                 "ln_jitter_mag": math.log(1e-3)}, n_orientations, rng))
        xs = np.concatenate(starts)
        ll = model(xs)
        top = np.argsort(-ll)[:3]
        best_x, best_ll = None, -np.inf
        for i in top:
            x, v = optimise_state(model, xs[i])
            if v > best_ll:
                best_x, best_ll = x, v
        results["PA"] = (best_ll, best_x, model, ())
        chosen = "PA"
    else:
        f1, f2 = evidence.f1_npa_per_d, evidence.f2_per_d
        pairs = [(f1, f2)] + [p for p in evidence.npa_pairs if p != (f1, f2)]
        pairs = pairs[:3] + _two_period_pair(lc) + _refined_pairs(lc, f1, f2)
        # published mappings first, then the other basis assignments of the same lattices; each
        # group has its own quota of refined starts, so the second cannot crowd out the first
        cands, seen_c = [], set()
        for group, forms in ((0, "published"), (1, "other")):
            for pf1, pf2 in pairs:
                for c in npa_candidates(pf1, pf2, forms=forms):
                    key = (c[0], round(c[1], 6), round(c[2], 6))
                    if key not in seen_c:
                        seen_c.add(key)
                        cands.append((group, c))
        per_mode = {"SAM": [], "LAM": []}
        models = {}
        for group, cand in cands:
            mode, fpsi, fphi = cand[:3]
            p_psi = 24.0 / fpsi
            if p_psi > span_h / MIN_CYCLES * 3 or p_psi < 0.2:
                continue
            if mode not in models:
                models[mode] = PhysicalModel(sub, mode, p_psi_range_h=(0.2, max(10.0, 4 * span_h)), student_t=student_t)
            model = models[mode]
            for ab, bc, u in _shape_solutions(mode, fpsi / fphi, rng, n_pick=3):
                base = {"p_psi_h": p_psi, "excitation_u": u, "a_over_b": ab, "b_over_c": bc,
                        "ln_jitter_mag": math.log(1e-3)}
                xs = _random_orientations(model.space, base, n_orientations, rng)
                ll = model(xs)
                j = int(np.argmax(ll))
                per_mode[mode].append((float(ll[j]), xs[j], cand, group))
        for mode, lst in per_mode.items():
            if not lst:
                continue
            lst.sort(key=lambda e: -e[0])
            # short refinement of the N_SHORT_STARTS best starts (at most N_STARTS_PER_MAPPING per
            # frequency mapping: different mappings have different basins), a full one of the best
            # N_FULL_STARTS, then shape and orientation restarts around the best fitted frequencies
            tops = []
            for group, (n_short, per_map, n_full) in enumerate(
                    ((N_SHORT_STARTS, N_STARTS_PER_MAPPING, N_FULL_STARTS),
                     (N_SHORT_STARTS_OTHER, N_STARTS_PER_MAPPING_OTHER, N_FULL_STARTS_OTHER))):
                firsts, seen_c = [], {}
                for v0, x0, cand, g in lst:
                    if g != group:
                        continue
                    key = (round(cand[1], 9), round(cand[2], 9))
                    if seen_c.get(key, 0) < per_map:
                        seen_c[key] = seen_c.get(key, 0) + 1
                        firsts.append((x0, cand))
                    if len(firsts) >= n_short:
                        break
                short = []
                for x0, cand in firsts:
                    x, v = optimise_state(models[mode], x0, n_iter=12)
                    short.append((v, x, cand))
                short.sort(key=lambda e: -e[0])
                tops += short[:n_full]
            best_x, best_ll, best_c = None, -np.inf, ()
            fulls = []
            for v0, x0, cand in tops:
                x, v = optimise_state(models[mode], x0)
                fulls.append((v, x, cand))
                if v > best_ll:
                    best_x, best_ll, best_c = x, v, cand
            if N_RESTART_TOP > 0:
                fulls.sort(key=lambda e: -e[0])
                for v0, x0, cand in fulls[:N_RESTART_TOP]:
                    rs = [optimise_state(models[mode], x1, n_iter=12) for x1 in _shape_restarts(models[mode], mode, x0, rng)]
                    rs.sort(key=lambda e: -e[1])
                    for x1, _ in rs[:N_RESTART_LM]:
                        x, v = optimise_state(models[mode], x1)
                        if v > best_ll:
                            best_x, best_ll, best_c = x, v, cand
            results[mode] = (best_ll, best_x, models[mode], best_c)
        if not results:
            raise ClassifyError(f"{lc.object_id}: no SAM or LAM state reproduces the frequencies "
                                f"{f1:.6g} and {f2:.6g} per day")
        chosen = max(results, key=lambda k: results[k][0])
    best_ll, best_x, model, cand = results[chosen]
    max_ll = {k: float(v[0]) for k, v in results.items()}
    posterior = None
    reasons = []
    converged = False
    if max_steps > 0:
        from tumble.inference.local import sample_local_mode

        # the chosen solution's own mode, started from its optimum (tumble.inference.local): the
        # interval is never a mixture of separated modes, and leaving the mode is a diagnostic; it is
        # sampled in the model's chart (attitude as a rotation about the optimum's, the period ratio
        # in place of the excitation), where the mode is nearly Gaussian instead of a curved ridge
        posterior = sample_local_mode(model, model.space, best_x, max_steps=max_steps, n_walkers=n_walkers,
                                      chart=model.sampling_chart(best_x), rng=rng, progress=progress)
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
                       reasons=tuple(reasons), n_points_fitted=sub.n_points, geometry_note=model.geometry.note)
