"""Model evidence: stepping-stone sampling over an emcee temperature ladder, and cheap approximations.

The evidence ``Z = ∫ L(x) π(x) dx`` is estimated by sampling the power
posteriors ``p_β ∝ L^β π`` on a ladder ``0 = β_0 < β_1 < ... < β_R = 1``
(Friel & Pettitt 2008) with ``emcee``, and combining the rungs in two ways:

- **stepping-stone** (Xie, W. et al. 2011, Systematic Biology 60, 150-160, eq. 8),
  the reported value: ``ln Z = Σ_k ln r_k`` with
  ``r_k = mean over samples of p_{β_k} of exp((β_{k+1} - β_k) ln L)``;
- **thermodynamic integration** with the corrected trapezoid rule of
  Friel, N., Hurn, M. & Wyse, J. (2014), Statistics and Computing 24, 709-723, eq. 12:
  ``ln Z ≈ Σ_k Δβ_k (E_k + E_{k+1}) / 2 - Δβ_k² (V_{k+1} - V_k) / 12``,
  with ``E_k``, ``V_k`` the mean and variance of ``ln L`` under ``p_{β_k}``.

The reported one-sigma error combines (in quadrature) the Monte Carlo error of
the stepping-stone sum (per-rung delta-method variance of the mean weight, with
the effective sample size from the weights' integrated autocorrelation time)
and a ladder (discretisation) error, the difference between the two
quadratures of the same rungs.

Ladder
------
The default ladder is *adaptive*: rung 0 is ``β = 0``, sampled exactly by
independent draws from the prior; each next ``β`` is the largest step for which
the importance weights ``exp(Δβ ln L)`` of the current rung's samples keep an
effective sample size of ``ess_fraction`` (default one half) of the sample —
the adaptive tempering rule of sequential Monte Carlo samplers (Jasra, A. et
al. 2011, Scandinavian J. Statistics 38, 1-22). Each rung's ensemble is
started from walkers resampled with those weights from the previous rung
(Del Moral, P., Doucet, A. & Jasra, A. 2006, J. R. Statist. Soc. B 68, 411-436),
so little burn-in is needed and separated modes keep their relative weights.
A fixed ladder may be passed instead, e.g. :func:`geometric_ladder`
(``β`` geometric from 1e-4 to 1 in 16 rungs plus ``β = 0``), which is
adequate when the likelihood is not much narrower than the prior.

Approximations for screening
----------------------------
- :func:`laplace_log_evidence`: Gaussian (Laplace) approximation at the
  posterior mode, ``ln Z ≈ ln L(x̂) + ln π(x̂) + (d/2) ln 2π - ½ ln det H``
  (Kass, R. E. & Raftery, A. E. 1995, J. Am. Statist. Assoc. 90, 773-795, eq. 4;
  Tierney, L. & Kadane, J. B. 1986, JASA 81, 82-86).
- :func:`bic` and :func:`bic_log_evidence`: Schwarz, G. (1978), Annals of
  Statistics 6, 461-464; ``ln Z ≈ -BIC / 2`` (Kass & Raftery 1995, eq. 9).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Callable, Sequence

import emcee
import numpy as np
from scipy import optimize, special
from tqdm.auto import tqdm

from tumble.exceptions import ConvergenceWarning, TumbleError
from tumble.inference import diagnostics as diag
from tumble.inference.logpost import LogPosterior, PooledLogPosterior
from tumble.inference.sampling import default_n_walkers
from tumble.inference.space import ParameterSpace, as_generator

__all__ = [
    "EvidenceEstimate",
    "log_evidence",
    "geometric_ladder",
    "next_beta",
    "stepping_stone",
    "thermodynamic_integral",
    "laplace_log_evidence",
    "bic",
    "bic_log_evidence",
]


@dataclass(frozen=True)
class EvidenceEstimate:
    """A natural-log evidence estimate with its error and the ladder that produced it.

    Attributes
    ----------
    ln_z : float
        ``ln Z`` (nats), the stepping-stone estimate (or the approximation named by ``method``).
    ln_z_err : float
        One-sigma error of ``ln_z`` (nats): ``hypot(ln_z_err_mc, ln_z_err_ladder)``;
        ``nan`` for the approximations, which carry no error estimate.
    method : str
        ``"stepping-stone"``, ``"laplace"`` or ``"bic"``.
    betas : ndarray, shape (n_rungs,)
        Inverse temperatures, from 0 to 1.
    mean_log_likelihood, var_log_likelihood : ndarray, shape (n_rungs,)
        Mean and variance of ``ln L`` under each power posterior.
    ln_ratio, ln_ratio_err : ndarray, shape (n_rungs - 1,)
        Stepping-stone increments ``ln r_k`` and their Monte Carlo errors.
    n_effective : ndarray, shape (n_rungs,)
        Effective number of independent ``ln L`` samples per rung.
    autocorr_time_steps : ndarray, shape (n_rungs,)
        Integrated autocorrelation time of ``ln L`` per rung, steps (1 for the prior rung).
    acceptance_fraction : ndarray, shape (n_rungs,)
        Mean acceptance per rung (1 for the prior rung, sampled exactly).
    ln_z_thermodynamic : float
        The corrected-trapezoid thermodynamic integral over the same rungs.
    ln_z_err_mc, ln_z_err_ladder : float
        Monte Carlo and ladder parts of the error.
    reliable : bool
        Every rung met its checks (see ``reasons``).
    reasons : tuple of str
        Why the estimate is not reliable; empty otherwise.
    n_evaluations : int
        Walker-evaluations of the log-likelihood.
    replica_ln_z : ndarray, shape (n_replicas,)
        ``ln Z`` of each independent ladder (empty for the approximations).
    ln_z_err_scatter : float
        Standard error of the mean of ``replica_ln_z``.
    """

    ln_z: float
    ln_z_err: float
    method: str
    betas: np.ndarray
    mean_log_likelihood: np.ndarray
    var_log_likelihood: np.ndarray
    ln_ratio: np.ndarray
    ln_ratio_err: np.ndarray
    n_effective: np.ndarray
    autocorr_time_steps: np.ndarray
    acceptance_fraction: np.ndarray
    ln_z_thermodynamic: float
    ln_z_err_mc: float
    ln_z_err_ladder: float
    reliable: bool
    reasons: tuple[str, ...]
    n_evaluations: int
    replica_ln_z: np.ndarray = field(default_factory=lambda: np.array([]))
    ln_z_err_scatter: float = math.nan

    @property
    def n_rungs(self) -> int:
        return int(len(self.betas))


def geometric_ladder(n_rungs: int = 16, beta_min: float = 1e-4) -> np.ndarray:
    """``[0]`` followed by ``n_rungs`` inverse temperatures geometric from ``beta_min`` to 1."""
    if n_rungs < 1 or not 0 < beta_min < 1:
        raise TumbleError("geometric ladder needs n_rungs >= 1 and 0 < beta_min < 1")
    return np.concatenate([[0.0], np.geomspace(beta_min, 1.0, int(n_rungs))])


def _ess_fraction(log_likelihood: np.ndarray, delta: float) -> float:
    lw = delta * (log_likelihood - np.max(log_likelihood))
    w = np.exp(lw)
    return float(w.sum() ** 2 / (w * w).sum() / w.size)


def next_beta(log_likelihood: np.ndarray, beta: float, ess_fraction: float = 0.5) -> float:
    """Next inverse temperature of the adaptive ladder.

    The largest ``β' ≤ 1`` for which the weights ``exp((β' - β) ln L)`` of the
    current samples keep an effective sample size ``(Σw)² / Σw²`` of at least
    ``ess_fraction`` of their number (Jasra et al. 2011), found by bisection in
    ``log Δβ``.
    """
    ll = np.asarray(log_likelihood, dtype=float).reshape(-1)
    room = 1.0 - beta
    if room <= 0:
        return 1.0
    if _ess_fraction(ll, room) >= ess_fraction:
        return 1.0
    lo, hi = math.log(room * 1e-12), math.log(room)
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        if _ess_fraction(ll, math.exp(mid)) >= ess_fraction:
            lo = mid
        else:
            hi = mid
    return beta + math.exp(lo)


def stepping_stone(betas, log_likelihoods: Sequence[np.ndarray], n_effective=None) -> tuple[np.ndarray, np.ndarray]:
    """Stepping-stone increments ``ln r_k`` and their delta-method errors (Xie et al. 2011, eq. 8).

    Parameters
    ----------
    betas : array_like, shape (R + 1,)
    log_likelihoods : sequence of R (or R + 1) arrays
        ``ln L`` samples under ``p_{β_k}``, for k = 0..R-1 (a last rung is ignored).
    n_effective : array_like, shape (>= R,), optional
        Effective sample size per rung (default: the number of samples, i.e. independent draws).

    Returns
    -------
    ln_ratio, ln_ratio_err : ndarray, shape (R,)
    """
    betas = np.asarray(betas, dtype=float)
    r = len(betas) - 1
    ln_ratio = np.empty(r)
    err = np.empty(r)
    for k in range(r):
        ll = np.asarray(log_likelihoods[k], dtype=float).reshape(-1)
        lw = (betas[k + 1] - betas[k]) * ll
        ln_ratio[k] = special.logsumexp(lw) - math.log(ll.size)
        rel = np.exp(lw - ln_ratio[k])  # weights relative to their mean
        neff = ll.size if n_effective is None else float(n_effective[k])
        err[k] = math.sqrt(max(float(np.var(rel, ddof=1)), 0.0) / max(neff, 1.0))
    return ln_ratio, err


def thermodynamic_integral(betas, mean_log_likelihood, var_log_likelihood, *, log_spacing: bool = True) -> float:
    """Thermodynamic integral ``ln Z = ∫_0^1 E_β[ln L] dβ`` by the corrected trapezoid rule.

    The corrected (Euler-Maclaurin, end-point derivative) trapezoid of Friel et al.
    (2014, eq. 12) uses ``dE/dβ = V_β = var_β(ln L)`` (Friel & Pettitt 2008):
    ``∫ ≈ Σ Δβ (E_k + E_{k+1})/2 - Δβ² (V_{k+1} - V_k)/12``.

    With ``log_spacing`` (default) the segments between positive ``β`` are
    integrated in ``s = ln β`` instead, of ``g(s) = β E`` with ``dg/ds = β E + β² V``;
    on the roughly geometric ladders used here ``β E`` is much smoother in ``s``
    than ``E`` is in ``β`` (``E ≈ E_1 - d / (2β)`` for a Gaussian posterior in
    ``d`` dimensions), so the rule is far more accurate. The first segment
    from ``β = 0`` is always integrated in ``β``.
    """
    b = np.asarray(betas, dtype=float)
    e = np.asarray(mean_log_likelihood, dtype=float)
    v = np.asarray(var_log_likelihood, dtype=float)
    if not log_spacing:
        db = np.diff(b)
        return float(np.sum(db * (e[1:] + e[:-1]) / 2 - db**2 * (v[1:] - v[:-1]) / 12))
    total = 0.0
    first = 0
    if b[0] == 0.0:
        db = b[1] - b[0]
        total += db * (e[0] + e[1]) / 2 - db**2 * (v[1] - v[0]) / 12
        first = 1
    s = np.log(b[first:])
    g = b[first:] * e[first:]
    dg = b[first:] * e[first:] + b[first:] ** 2 * v[first:]
    ds = np.diff(s)
    total += float(np.sum(ds * (g[1:] + g[:-1]) / 2 - ds**2 * (dg[1:] - dg[:-1]) / 12))
    return float(total)


def _systematic_resample(log_w: np.ndarray, n: int, rng: np.random.Generator) -> np.ndarray:
    """Indices of ``n`` draws by systematic resampling with weights ``exp(log_w)`` (Kitagawa 1996, JCGS 5, 1-25)."""
    w = np.exp(log_w - np.max(log_w))
    c = np.cumsum(w)
    c /= c[-1]
    u = (rng.uniform() + np.arange(n)) / n
    return np.minimum(np.searchsorted(c, u), len(w) - 1)


def _single_ladder(
    log_likelihood: Callable[[np.ndarray], np.ndarray],
    space: ParameterSpace,
    *,
    betas: Sequence[float] | None = None,
    ess_fraction: float = 0.5,
    n_walkers: int | None = None,
    steps_per_rung: int = 400,
    burn_fraction: float = 0.25,
    n_prior_samples: int | None = None,
    max_rungs: int = 200,
    min_tau_multiple: float = 10.0,
    acceptance_range: tuple[float, float] = (0.15, 1.0),
    ti_tolerance: float = 1.0,
    moves=None,
    pool=None,
    rng: np.random.Generator | int | None = None,
    progress: bool = False,
    warn: bool = True,
) -> EvidenceEstimate:
    """One adaptive (or fixed) ladder: the body of :func:`log_evidence` for a single replica."""
    ndim = space.ndim
    steps_per_rung = int(steps_per_rung)
    n_burn = int(burn_fraction * steps_per_rung)
    if steps_per_rung - n_burn < 10:
        raise TumbleError("steps_per_rung too small: fewer than 10 steps kept per rung")
    n_keep = (steps_per_rung - n_burn) * n_walkers
    n0 = int(n_prior_samples) if n_prior_samples is not None else n_keep
    ladder = None
    if betas is not None:
        ladder = np.asarray(betas, dtype=float)
        if ladder[0] != 0.0:
            ladder = np.concatenate([[0.0], ladder])
        if ladder[-1] != 1.0 or np.any(np.diff(ladder) <= 0):
            raise TumbleError("a fixed ladder must increase strictly and end at beta = 1")

    log_post = LogPosterior(log_likelihood, space, 1.0)

    # rung 0: the prior, sampled exactly
    x = space.sample_prior(n0, rng)  # inside the default periodic windows [low, low + period)
    _, ll = log_post.log_prior_and_likelihood(x)
    if not np.all(np.isfinite(ll)):
        raise TumbleError("log-likelihood is -inf on part of the prior support; stepping-stone needs it finite")
    rung_beta = [0.0]
    rung_ll = [ll]
    rung_x = [x]
    tau = [1.0]
    neff = [float(n0)]
    acc = [1.0]
    w_neff = [float(n0)]
    reasons: list[str] = []

    beta = 0.0
    with tqdm(total=None if ladder is None else len(ladder) - 1, disable=not progress, desc="evidence", unit="rung") as bar:
        while beta < 1.0:
            k = len(rung_beta) - 1
            if ladder is not None:
                new_beta = float(ladder[k + 1])
            else:
                if k >= max_rungs:
                    reasons.append(f"adaptive ladder stopped at the cap of {max_rungs} rungs (beta = {beta:.3g})")
                    break
                new_beta = next_beta(rung_ll[-1], beta, ess_fraction)
            lw = (new_beta - beta) * rung_ll[-1].reshape(-1)
            # effective size of the weights, from their autocorrelation across steps
            if k > 0:
                lw_chain = lw.reshape(-1, n_walkers)
                wrel = np.exp(lw_chain - lw_chain.max())
                tau_w = float(diag.integrated_time(wrel[:, :, None])[0])
                w_neff[k] = rung_ll[-1].size / tau_w if np.isfinite(tau_w) else 1.0
            # start the next rung from walkers resampled with the incremental weights
            flat_x = rung_x[-1].reshape(-1, ndim)
            order = np.arange(flat_x.shape[0]).reshape(-1, n_walkers).T.reshape(-1) if k > 0 else np.arange(flat_x.shape[0])
            idx = order[_systematic_resample(lw[order], n_walkers, rng)]
            x0 = flat_x[idx] + 0.0
            sampler_fn = log_post.tempered(new_beta)
            fn = PooledLogPosterior(sampler_fn, pool) if pool is not None else sampler_fn
            sampler = emcee.EnsembleSampler(n_walkers, ndim, fn, moves=moves, vectorize=True)
            seed = int(rng.integers(0, 2**32))
            state = emcee.State(x0, random_state=np.random.RandomState(seed).get_state())
            sampler.run_mcmc(state, steps_per_rung, skip_initial_state_check=True)
            log_post.n_evaluations += sampler_fn.n_evaluations
            chain = sampler.get_chain(discard=n_burn)  # (n, K, d)
            logp = sampler.get_log_prob(discard=n_burn)  # (n, K)
            ll_chain = (logp - log_post.log_prior(chain.reshape(-1, ndim)).reshape(logp.shape)) / new_beta
            t = float(diag.integrated_time(ll_chain[:, :, None])[0])
            a = float(np.mean(diag.acceptance_from_chain(chain)))
            n_kept = chain.shape[0]
            if not (np.isfinite(t) and n_kept >= min_tau_multiple * t):
                reasons.append(
                    f"rung beta = {new_beta:.3g}: {n_kept} kept steps are fewer than {min_tau_multiple:g} "
                    f"autocorrelation times of ln L ({t:.1f})"
                )
            if not acceptance_range[0] <= a <= acceptance_range[1]:
                reasons.append(f"rung beta = {new_beta:.3g}: acceptance {a:.3f} outside {acceptance_range}")
            rung_beta.append(new_beta)
            rung_ll.append(ll_chain)
            rung_x.append(chain)
            tau.append(t)
            neff.append(ll_chain.size / t if np.isfinite(t) else 1.0)
            w_neff.append(neff[-1])
            acc.append(a)
            beta = new_beta
            bar.update(1)

    b = np.array(rung_beta)
    mean_ll = np.array([np.mean(v) for v in rung_ll])
    var_ll = np.array([np.var(v, ddof=1) for v in rung_ll])
    ln_ratio, ln_ratio_err = stepping_stone(b, rung_ll, w_neff)
    ln_z = float(np.sum(ln_ratio))
    err_mc = float(np.sqrt(np.sum(ln_ratio_err**2)))
    # the log of a mean of weights is biased low by ~ var(w/mean)/(2 n_eff) per rung
    # (second-order delta method); this grows with the rung spacing
    err_ladder = float(np.sum(0.5 * ln_ratio_err**2))
    if b[-1] == 1.0:
        ln_z_ti = thermodynamic_integral(b, mean_ll, var_ll)
        if abs(ln_z_ti - ln_z) > ti_tolerance:
            reasons.append(
                f"stepping-stone ({ln_z:.2f}) and thermodynamic integration ({ln_z_ti:.2f}) over the same "
                f"rungs differ by more than {ti_tolerance:g} nats: the ladder is too coarse"
            )
    else:
        ln_z_ti = math.nan
        err_ladder = math.inf
    est = EvidenceEstimate(
        ln_z=ln_z,
        ln_z_err=float(math.hypot(err_mc, err_ladder)),
        method="stepping-stone",
        betas=b,
        mean_log_likelihood=mean_ll,
        var_log_likelihood=var_ll,
        ln_ratio=ln_ratio,
        ln_ratio_err=ln_ratio_err,
        n_effective=np.array(neff),
        autocorr_time_steps=np.array(tau),
        acceptance_fraction=np.array(acc),
        ln_z_thermodynamic=ln_z_ti,
        ln_z_err_mc=err_mc,
        ln_z_err_ladder=float(err_ladder),
        reliable=not reasons,
        reasons=tuple(reasons),
        n_evaluations=int(log_post.n_evaluations),
    )
    return est


def log_evidence(
    log_likelihood: Callable[[np.ndarray], np.ndarray],
    space: ParameterSpace,
    *,
    n_replicas: int = 4,
    betas: Sequence[float] | None = None,
    ess_fraction: float = 0.5,
    n_walkers: int | None = None,
    steps_per_rung: int = 200,
    burn_fraction: float = 0.25,
    n_prior_samples: int | None = None,
    max_rungs: int = 200,
    min_tau_multiple: float = 10.0,
    acceptance_range: tuple[float, float] = (0.15, 1.0),
    ti_tolerance: float = 1.0,
    moves=None,
    pool=None,
    rng: np.random.Generator | int | None = None,
    progress: bool = False,
    warn: bool = True,
) -> EvidenceEstimate:
    """Estimate ``ln Z`` by stepping-stone sampling over temperature ladders run with emcee.

    ``n_replicas`` independent ladders are run (each with its own prior draws,
    adaptive rungs and ensembles); the estimate is the mean of their ``ln Z``.
    Its error is the larger of the replica scatter (standard error of the mean)
    and the pooled per-rung Monte Carlo error, combined in quadrature with the
    estimated finite-sample bias of the stepping-stone sum. The replica scatter
    captures what the within-rung error cannot: a walker population too small
    to represent a multimodal tempered posterior.

    Parameters
    ----------
    log_likelihood : callable
        Vectorised ``(K, ndim) -> (K,)`` log-likelihood.
    space : ParameterSpace
        Priors (proper, so the evidence is defined).
    n_replicas : int
        Independent ladders (at least 2 for the scatter term; default 4).
    betas : sequence of float, optional
        A fixed ladder from 0 to 1 (0 is prepended if missing). Default: adaptive (see module notes).
    ess_fraction : float
        Adaptive-ladder target effective sample fraction of the incremental weights.
    n_walkers : int, optional
        Walkers per rung (default :func:`~tumble.inference.sampling.default_n_walkers`).
    steps_per_rung : int
        emcee steps per tempered rung (the first ``burn_fraction`` are discarded).
    burn_fraction : float
        Fraction of each rung discarded as burn-in.
    n_prior_samples : int, optional
        Independent prior draws for the ``β = 0`` rung (default: as many as a rung keeps).
    max_rungs : int
        Safety cap on the number of adaptive rungs.
    min_tau_multiple : float
        A rung is flagged when its kept chain is shorter than this many autocorrelation times of ``ln L``.
    acceptance_range : (float, float)
        A rung is flagged when its mean acceptance falls outside. Only the
        lower bound matters by default: near the prior, and in one or two
        dimensions, the stretch move accepts more than 70 % without harm.
    ti_tolerance : float
        Flag a ladder whose thermodynamic integral differs from its
        stepping-stone value by more than this (nats).
    moves, pool :
        As in :func:`~tumble.inference.sampling.sample_posterior`.
    rng : numpy.random.Generator, int or None
    progress : bool
        tqdm progress bar over rungs.
    warn : bool
        Issue :class:`~tumble.exceptions.ConvergenceWarning` when a check fails.

    Returns
    -------
    EvidenceEstimate
        Ladder details (``betas``, per-rung arrays) are those of the first replica;
        ``replica_ln_z`` holds every replica's estimate.
    """
    rng = as_generator(rng)
    n_walkers = default_n_walkers(space.ndim) if n_walkers is None else int(n_walkers)
    n_replicas = max(1, int(n_replicas))
    kwargs = dict(
        betas=betas, ess_fraction=ess_fraction, n_walkers=n_walkers, steps_per_rung=steps_per_rung,
        burn_fraction=burn_fraction, n_prior_samples=n_prior_samples, max_rungs=max_rungs,
        min_tau_multiple=min_tau_multiple, acceptance_range=acceptance_range, ti_tolerance=ti_tolerance,
        moves=moves, pool=pool, progress=progress,
    )
    runs = [_single_ladder(log_likelihood, space, rng=child, **kwargs) for child in rng.spawn(n_replicas)]
    lnz = np.array([r.ln_z for r in runs])
    ti = np.array([r.ln_z_thermodynamic for r in runs])
    err_mc = float(np.sqrt(np.mean([r.ln_z_err_mc**2 for r in runs]) / n_replicas))
    err_scatter = float(np.std(lnz, ddof=1) / math.sqrt(n_replicas)) if n_replicas > 1 else 0.0
    err_ladder = float(np.mean([r.ln_z_err_ladder for r in runs]))
    reasons = [f"replica {i}: {m}" for i, r in enumerate(runs) for m in r.reasons]
    first = runs[0]
    est = EvidenceEstimate(
        ln_z=float(np.mean(lnz)),
        ln_z_err=float(math.hypot(max(err_mc, err_scatter), err_ladder)),
        method="stepping-stone",
        betas=first.betas,
        mean_log_likelihood=first.mean_log_likelihood,
        var_log_likelihood=first.var_log_likelihood,
        ln_ratio=first.ln_ratio,
        ln_ratio_err=first.ln_ratio_err,
        n_effective=first.n_effective,
        autocorr_time_steps=first.autocorr_time_steps,
        acceptance_fraction=first.acceptance_fraction,
        ln_z_thermodynamic=float(np.mean(ti)),
        ln_z_err_mc=err_mc,
        ln_z_err_ladder=err_ladder,
        reliable=not reasons,
        reasons=tuple(reasons),
        n_evaluations=int(sum(r.n_evaluations for r in runs)),
        replica_ln_z=lnz,
        ln_z_err_scatter=err_scatter,
    )
    if warn and reasons:
        warnings.warn("evidence estimate unreliable: " + "; ".join(reasons), ConvergenceWarning, stacklevel=2)
    return est


# ---------------------------------------------------------------------------
# approximations
# ---------------------------------------------------------------------------
def _hessian(f: Callable[[np.ndarray], np.ndarray], x0: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Central-difference Hessian of a vectorised scalar function, all stencil points in one call."""
    d = len(x0)
    e = np.eye(d) * h
    pts = [x0]
    for i in range(d):
        pts += [x0 + e[i], x0 - e[i]]
    for i in range(d):
        for j in range(i + 1, d):
            pts += [x0 + e[i] + e[j], x0 + e[i] - e[j], x0 - e[i] + e[j], x0 - e[i] - e[j]]
    v = np.asarray(f(np.array(pts)), dtype=float)
    f0 = v[0]
    hess = np.empty((d, d))
    for i in range(d):
        hess[i, i] = (v[1 + 2 * i] - 2 * f0 + v[2 + 2 * i]) / h[i] ** 2
    n = 1 + 2 * d
    for i in range(d):
        for j in range(i + 1, d):
            pp, pm, mp, mm = v[n : n + 4]
            hess[i, j] = hess[j, i] = (pp - pm - mp + mm) / (4 * h[i] * h[j])
            n += 4
    return hess


def laplace_log_evidence(
    log_likelihood: Callable[[np.ndarray], np.ndarray],
    space: ParameterSpace,
    start,
    *,
    optimise: bool = True,
    relative_step: float = 0.05,
) -> EvidenceEstimate:
    """Laplace approximation to ``ln Z`` at the posterior mode (Kass & Raftery 1995, eq. 4).

    ``ln Z ≈ ln L(x̂) + ln π(x̂) + (d/2) ln 2π - ½ ln det H`` with ``H`` the
    Hessian of ``-ln(L π)`` at the mode ``x̂``. Exact for a Gaussian likelihood
    linear in the parameters with a normal prior; an approximation otherwise
    (poor near prior bounds, for multimodal or strongly non-Gaussian posteriors).

    Parameters
    ----------
    log_likelihood : callable
        Vectorised ``(K, ndim) -> (K,)``.
    space : ParameterSpace
    start : mapping or (ndim,) array
        Starting point of the mode search (or the mode itself with ``optimise=False``).
    optimise : bool
        Refine ``start`` with a bounded quasi-Newton search (L-BFGS-B) first.
    relative_step : float
        Finite-difference step as a fraction of the posterior width, which is
        itself found from a first pass of diagonal curvatures.

    Returns
    -------
    EvidenceEstimate
        ``method = "laplace"``, no error estimate (``ln_z_err = nan``); ``reliable``
        is False with a reason when the Hessian is not positive definite.
    """
    lp = LogPosterior(log_likelihood, space, 1.0)
    x0 = space.to_vector(start) if isinstance(start, dict) else np.asarray(start, dtype=float)
    x0 = space.wrap(x0.reshape(space.ndim))
    scales = space.scales
    reasons: list[str] = []
    if optimise:
        bounds = [
            (None, None) if p.prior.period is not None else (
                None if not np.isfinite(p.prior.low) else p.prior.low,
                None if not np.isfinite(p.prior.high) else p.prior.high,
            )
            for p in space.parameters
        ]
        res = optimize.minimize(lambda z: -lp(z * scales) / 1.0, x0 / scales, method="L-BFGS-B",
                                bounds=[(None if lo is None else lo / s, None if hi is None else hi / s)
                                        for (lo, hi), s in zip(bounds, scales)])
        x0 = space.wrap(res.x * scales)
        if not res.success:
            reasons.append(f"mode search: {res.message}")
    neg = lambda z: -lp(z)  # noqa: E731 - vectorised over stencil points
    # first pass: diagonal curvature with a prior-scale step, then a step of relative_step posterior widths
    h = 1e-3 * scales
    for _ in range(3):
        diag_curv = np.diag(_hessian(neg, x0, h))
        width = np.where(diag_curv > 0, 1.0 / np.sqrt(np.abs(diag_curv)), scales)
        h = relative_step * width
    hess = _hessian(neg, x0, h)
    sign, logdet = np.linalg.slogdet(hess)
    if sign <= 0:
        reasons.append("Hessian at the mode is not positive definite")
    ln_post = float(lp(x0))
    ln_z = ln_post + 0.5 * space.ndim * math.log(2 * math.pi) - 0.5 * logdet
    nan = np.array([math.nan])
    return EvidenceEstimate(
        ln_z=float(ln_z), ln_z_err=math.nan, method="laplace", betas=np.array([1.0]),
        mean_log_likelihood=nan, var_log_likelihood=nan, ln_ratio=np.array([]), ln_ratio_err=np.array([]),
        n_effective=nan, autocorr_time_steps=nan, acceptance_fraction=nan, ln_z_thermodynamic=math.nan,
        ln_z_err_mc=math.nan, ln_z_err_ladder=math.nan, reliable=not reasons, reasons=tuple(reasons),
        n_evaluations=int(lp.n_evaluations),
    )


def bic(max_log_likelihood: float, n_parameters: int, n_data: int) -> float:
    """Bayesian information criterion ``k ln n - 2 ln L̂`` (Schwarz 1978)."""
    if n_data <= 0:
        raise TumbleError("BIC needs at least one data point")
    return float(n_parameters * math.log(n_data) - 2.0 * max_log_likelihood)


def bic_log_evidence(max_log_likelihood: float, n_parameters: int, n_data: int) -> float:
    """``ln Z ≈ -BIC / 2`` (Schwarz 1978; Kass & Raftery 1995, eq. 9); differences give ``ln B ≈ -ΔBIC / 2``."""
    return -0.5 * bic(max_log_likelihood, n_parameters, n_data)
