"""Convergence diagnostics for ensemble MCMC chains (pure array functions).

Chains are arrays ``(n_steps, n_walkers, ndim)`` as stored by emcee; several
independent ensembles are passed as a sequence of such arrays.

References
----------
- Integrated autocorrelation time and its windowed estimator: Sokal, A. (1997),
  "Monte Carlo methods in statistical mechanics: foundations and new
  algorithms", in *Functional Integration*, Springer, 131-192; as implemented
  in ``emcee.autocorr`` (Foreman-Mackey et al. 2013, PASP 125, 306), which
  averages the autocorrelation function over walkers.
- Potential scale reduction (R-hat) and its split form: Gelman, A. & Rubin,
  D. B. (1992), Statistical Science 7, 457-472; Gelman, A. et al. (2013),
  *Bayesian Data Analysis*, 3rd ed., CRC, §11.4, eqs. 11.2-11.4.
- Acceptance fraction of the affine-invariant ensemble sampler, advised range
  about 0.2-0.5: Foreman-Mackey et al. (2013), §4; we accept 0.15-0.7 as the
  project's criterion (common practice).
- Circular mean: Mardia, K. V. & Jupp, P. E. (2000), *Directional Statistics*, §2.2.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
from emcee import autocorr

__all__ = [
    "integrated_time",
    "acceptance_from_chain",
    "split_rhat",
    "circular_mean",
    "align_periodic",
    "cluster_walkers",
]


def integrated_time(chain: np.ndarray) -> np.ndarray:
    """Integrated autocorrelation time per parameter, in steps, shape ``(ndim,)``.

    Uses :func:`emcee.autocorr.integrated_time` with ``tol=0`` so that an
    estimate is always returned; judging whether the chain is long enough is the
    caller's job. A parameter that never moves gets ``inf``.
    """
    chain = np.asarray(chain, dtype=float)
    if chain.shape[0] < 2:
        return np.full(chain.shape[-1], np.inf)
    with np.errstate(invalid="ignore", divide="ignore"):
        tau = autocorr.integrated_time(chain, c=5, tol=0, quiet=True)
    tau = np.asarray(tau, dtype=float)
    return np.where(np.isfinite(tau) & (tau > 0), tau, np.inf)


def acceptance_from_chain(chain: np.ndarray) -> np.ndarray:
    """Fraction of steps in which each walker moved, shape ``(n_walkers,)``.

    For a Metropolis-type move an accepted proposal changes the position with
    probability one, so counting changes between consecutive stored steps
    measures the acceptance over exactly the stored span.
    """
    chain = np.asarray(chain)
    if chain.shape[0] < 2:
        return np.full(chain.shape[1], np.nan)
    moved = np.any(chain[1:] != chain[:-1], axis=-1)
    return moved.mean(axis=0)


def split_rhat(chains: Sequence[np.ndarray]) -> np.ndarray:
    """Split potential scale reduction factor across ensembles, shape ``(ndim,)``.

    Each ensemble's chain ``(n_steps, n_walkers, ndim)`` is cut into its first
    and second halves in time, and each half (all walkers pooled) is treated as
    one chain of Gelman et al. (2013, eqs. 11.2-11.4):
    ``W`` the mean within-chain variance, ``B/n`` the variance of chain means,
    ``var+ = (n-1)/n W + B/n`` and ``R = sqrt(var+ / W)``. Pooling walkers makes
    the statistic compare *ensembles* (and the two halves of each), which is
    what detects ensembles sitting in different modes or still drifting.
    """
    halves = []
    for c in chains:
        c = np.asarray(c, dtype=float)
        h = c.shape[0] // 2
        if h < 2:
            return np.full(c.shape[-1], np.inf)
        for part in (c[:h], c[c.shape[0] - h:]):
            halves.append(part.reshape(-1, part.shape[-1]))
    n = min(len(p) for p in halves)
    x = np.stack([p[:n] for p in halves])  # (m, n, ndim)
    means = x.mean(axis=1)
    within = x.var(axis=1, ddof=1).mean(axis=0)
    between_over_n = means.var(axis=0, ddof=1)
    var_plus = (n - 1) / n * within + between_over_n
    with np.errstate(divide="ignore", invalid="ignore"):
        rhat = np.sqrt(var_plus / within)
    return np.where(within > 0, rhat, np.where(between_over_n > 0, np.inf, 1.0))


def circular_mean(x: np.ndarray, period: float, axis=None) -> np.ndarray:
    """Circular mean of values with the given period (Mardia & Jupp 2000, §2.2), in ``(-period/2, period/2]``."""
    ang = np.asarray(x, dtype=float) * (2 * np.pi / period)
    return np.arctan2(np.sin(ang).mean(axis=axis), np.cos(ang).mean(axis=axis)) * (period / (2 * np.pi))


def align_periodic(x: np.ndarray, periods: np.ndarray, centre: np.ndarray | None = None) -> np.ndarray:
    """Shift periodic coordinates of ``(..., ndim)`` to within half a period of ``centre``.

    ``centre`` defaults to the circular mean over all leading axes. Non-periodic
    coordinates (``periods`` is ``nan``) are returned unchanged. Used before
    computing diagnostics so that an ensemble straddling the wrap point of an
    angle is not mistaken for two modes.
    """
    x = np.array(x, dtype=float, copy=True)
    periods = np.asarray(periods, dtype=float)
    for i in np.flatnonzero(np.isfinite(periods)):
        p = periods[i]
        flat = x[..., i].reshape(-1)
        c = circular_mean(flat, p) if centre is None else centre[i]
        x[..., i] = c + np.mod(x[..., i] - c + p / 2, p) - p / 2
    return x


def cluster_walkers(
    walker_means: np.ndarray,
    within_sd: np.ndarray,
    periods: np.ndarray | None = None,
    threshold: float = 4.0,
) -> np.ndarray:
    """Group walkers whose time-averaged positions are close, returning integer labels.

    Two walkers are linked when, for every parameter, their mean positions differ
    by less than ``threshold`` within-walker standard deviations (circular
    distance for periodic parameters); clusters are the connected components of
    that graph. In a converged run every walker's mean lies close to the
    posterior mean (spread ~ sd * sqrt(tau / n_steps)), so more than one cluster
    means separated modes that the walkers do not cross.

    Parameters
    ----------
    walker_means : ndarray, shape (n_walkers_total, ndim)
    within_sd : ndarray, shape (ndim,)
        Pooled within-walker standard deviation of each parameter.
    periods : ndarray, shape (ndim,), optional
        Wrapping period per parameter, ``nan`` if not periodic.
    threshold : float
        Link distance in units of ``within_sd``.

    Returns
    -------
    labels : ndarray of int, shape (n_walkers_total,)
        Cluster index per walker, numbered by order of first appearance.
    """
    m = np.asarray(walker_means, dtype=float)
    sd = np.asarray(within_sd, dtype=float)
    sd = np.where(sd > 0, sd, np.finfo(float).tiny)
    diff = np.abs(m[:, None, :] - m[None, :, :])
    if periods is not None:
        periods = np.asarray(periods, dtype=float)
        per = np.where(np.isfinite(periods), periods, np.inf)
        folded = np.mod(diff, np.where(np.isfinite(per), per, 1.0))
        diff = np.where(np.isfinite(per), np.minimum(folded, per - folded), diff)
    linked = np.all(diff / sd < threshold, axis=-1)
    n = len(m)
    labels = np.full(n, -1, dtype=int)
    current = 0
    for i in range(n):  # breadth-first connected components; n is small (walkers)
        if labels[i] >= 0:
            continue
        frontier = [i]
        labels[i] = current
        while frontier:
            j = frontier.pop()
            for k in np.flatnonzero(linked[j] & (labels < 0)):
                labels[k] = current
                frontier.append(k)
        current += 1
    return labels
