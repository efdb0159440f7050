"""The picklable, vectorised (tempered) log-posterior handed to emcee.

``log p_beta(x) = log prior(x) + beta * log L(x)`` (the "power posterior" of
Friel, N. & Pettitt, A. N. (2008), J. R. Statist. Soc. B 70, 589-607, eq. 2);
``beta = 1`` is the posterior, ``beta = 0`` the prior.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from tumble.exceptions import TumbleError
from tumble.inference.space import ParameterSpace

__all__ = ["LogPosterior", "PooledLogPosterior"]


class LogPosterior:
    """Tempered log-posterior over a :class:`ParameterSpace`, vectorised over walkers.

    Parameters
    ----------
    log_likelihood : callable
        ``log_likelihood(x) -> (K,)`` for parameter vectors ``x`` of shape
        ``(K, ndim)`` in the space's order (periodic coordinates already wrapped
        into their support). Must be picklable (a module-level function or an
        object with picklable state) if the posterior is sent to other processes.
        It is only called on points inside the prior support.
    space : ParameterSpace
    beta : float
        Inverse temperature in ``[0, 1]``; with ``beta = 0`` the likelihood is not evaluated.
    periodic_centre : array_like, shape (ndim,), optional
        Centre of the one-period window in which each periodic coordinate is
        sampled (default: the prior's own support ``[low, low + period)``).

    Notes
    -----
    Periodic parameters: emcee's ensemble moves (e.g. the stretch move,
    ``Y = X_j + z (X_k - X_j)``) are not covariant under shifting one walker by
    a period, so sampling a periodic density on the whole real line (wrapping
    on evaluation only) is not a valid MCMC for the wrapped target and biases
    broad (tempered) angle distributions. The sampled target is therefore the
    periodic density restricted to one period, ``[c - P/2, c + P/2)``: a proper
    density whose integral equals the evidence and whose values are exactly
    the wrapped posterior. Centring the window on the mode (as
    :func:`~tumble.inference.sampling.sample_posterior` does, on the starting
    point) puts the cut where the density is lowest.

    Calling with ``(K, ndim)`` returns ``(K,)``; with one ``(ndim,)`` vector it
    returns a float (convenient for optimisers). Points outside the prior get
    ``-inf``. A likelihood returning ``nan`` or ``+inf`` raises
    :class:`~tumble.exceptions.TumbleError` naming the offending point, rather
    than being silently rejected.
    """

    def __init__(
        self,
        log_likelihood: Callable[[np.ndarray], np.ndarray],
        space: ParameterSpace,
        beta: float = 1.0,
        periodic_centre=None,
    ):
        beta = float(beta)
        if not 0.0 <= beta <= 1.0:
            raise TumbleError(f"inverse temperature beta must lie in [0, 1], got {beta}")
        self.log_likelihood = log_likelihood
        self.space = space
        self.beta = beta
        periods = space.periods
        self._periodic = np.flatnonzero(np.isfinite(periods))
        p = periods[self._periodic]
        if periodic_centre is None:
            self._window_low = space.lows[self._periodic]
        else:
            c = np.asarray(periodic_centre, dtype=float).reshape(space.ndim)[self._periodic]
            self._window_low = c - p / 2
        self._window_high = self._window_low + p
        self.n_evaluations = 0  # walker-evaluations of the likelihood in this process

    @property
    def periodic_centre(self) -> np.ndarray:
        """Centre of the sampled window of every coordinate (``nan`` for non-periodic ones)."""
        out = np.full(self.space.ndim, np.nan)
        out[self._periodic] = (self._window_low + self._window_high) / 2
        return out

    def tempered(self, beta: float) -> "LogPosterior":
        """The same posterior at another inverse temperature (same periodic windows)."""
        return LogPosterior(self.log_likelihood, self.space, beta, self.periodic_centre if self._periodic.size else None)

    def into_window(self, x) -> np.ndarray:
        """Fold periodic coordinates of ``(..., ndim)`` points into the sampled windows."""
        x = np.array(x, dtype=float, copy=True)
        if self._periodic.size:
            p = self._window_high - self._window_low
            x[..., self._periodic] = self._window_low + np.mod(x[..., self._periodic] - self._window_low, p)
        return x

    def log_prior(self, x) -> np.ndarray:
        """Log-prior of the sampled target (``-inf`` outside the periodic windows), shape ``(K,)``."""
        x = np.atleast_2d(np.asarray(x, dtype=float))
        lp = self.space.log_prior(self.space.wrap(x))
        if self._periodic.size:
            xp = x[:, self._periodic]
            inside = np.all((xp >= self._window_low) & (xp < self._window_high), axis=-1)
            lp = np.where(inside, lp, -np.inf)
        return lp

    def log_prior_and_likelihood(self, x) -> tuple[np.ndarray, np.ndarray]:
        """``(log prior, log likelihood)`` of ``(K, ndim)`` points; likelihood is ``-inf`` outside the prior."""
        x = np.atleast_2d(np.asarray(x, dtype=float))
        lp = self.log_prior(x)
        x = self.space.wrap(x)
        ok = lp > -np.inf
        if ok.all():
            ll = self._checked(x, self.log_likelihood(x), len(x))
        else:
            ll = np.full(lp.shape, -np.inf)
            n_ok = int(ok.sum())
            if n_ok:
                ll[ok] = self._checked(x[ok], self.log_likelihood(x[ok]), n_ok)
        return lp, ll

    def _checked(self, x, val, n):
        val = np.asarray(val, dtype=float).reshape(-1)
        if val.shape[0] != n:
            raise TumbleError(f"log-likelihood returned shape {val.shape} for {n} points")
        if not (val < np.inf).all():  # catches nan and +inf in one pass
            j = int(np.argmax(~(val < np.inf)))
            point = dict(zip(self.space.names, x[j].tolist()))
            raise TumbleError(f"log-likelihood returned {val[j]} at {point}")
        self.n_evaluations += n
        return val

    def __call__(self, x):
        x = np.asarray(x, dtype=float)
        single = x.ndim == 1
        x2 = x[None, :] if single else x
        if self.beta == 0.0:
            out = self.log_prior(x2)
        else:
            lp, ll = self.log_prior_and_likelihood(x2)
            out = lp + self.beta * np.where(lp > -np.inf, ll, 0.0)
        return float(out[0]) if single else out


class PooledLogPosterior:
    """Split each vectorised call into chunks evaluated through ``pool.map``.

    emcee ignores its ``pool`` when ``vectorize=True``; this wrapper restores
    process (or dask) parallelism by mapping the picklable :class:`LogPosterior`
    over ``n_chunks`` blocks of walkers. The wrapper itself stays in the calling
    process and is not pickled.
    """

    def __init__(self, log_posterior: LogPosterior, pool, n_chunks: int | None = None):
        self.log_posterior = log_posterior
        self.pool = pool
        n = n_chunks or getattr(pool, "_processes", None) or getattr(pool, "size", None) or 2
        self.n_chunks = max(1, int(n))

    def __call__(self, x):
        x = np.atleast_2d(np.asarray(x, dtype=float))
        chunks = np.array_split(x, min(self.n_chunks, len(x)))
        parts = list(self.pool.map(self.log_posterior, chunks))
        return np.concatenate([np.atleast_1d(p) for p in parts])
