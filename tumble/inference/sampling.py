"""Posterior sampling with emcee, with convergence checked rather than assumed.

:func:`sample_posterior` runs ``n_ensembles`` independent
``emcee.EnsembleSampler`` ensembles (vectorised log-probability), each started
in a small ball around a given starting point (or spread over the prior),
in blocks; after every block it checks

1. the chain after burn-in is at least ``tau_multiple`` (default 50)
   integrated autocorrelation times long (Sokal 1997; the criterion advised in
   the emcee documentation, Foreman-Mackey et al. 2013),
2. the mean acceptance fraction of each ensemble lies in ``acceptance_range``
   (default 0.15-0.7; common practice around the 0.2-0.5 advised by
   Foreman-Mackey et al. 2013, §4),
3. the ensembles agree: split R-hat (Gelman et al. 2013, §11.4) below
   ``rhat_max`` (default 1.05) for every parameter, and
4. all walkers of all ensembles form one cluster (no separated modes),

and extends the run up to ``max_steps`` if any fails. What is returned is a
:class:`Posterior` whose diagnostics state whether the criteria were met and,
if not, why; an unconverged run also issues a
:class:`~tumble.exceptions.ConvergenceWarning`.

Chains can be checkpointed to a ``.npz`` file after every block (written to a
temporary file and renamed) and resumed from it; the resumed run continues
with the stored random state, so an interrupted and resumed run gives the same
samples as an uninterrupted one with the same settings.
"""

from __future__ import annotations

import math
import os
import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable, Mapping, Sequence

import emcee
import numpy as np
from tqdm.auto import tqdm

from tumble._io import atomic_path
from tumble.exceptions import ConvergenceWarning, TumbleError
from tumble.inference import diagnostics as diag
from tumble.inference.logpost import LogPosterior, PooledLogPosterior
from tumble.inference.space import (
    IsotropicLatitude,
    LogUniform,
    Normal,
    ParameterSpace,
    PeriodicUniform,
    Uniform,
    VonMises,
    as_generator,
)

__all__ = [
    "ParameterInterval",
    "SamplerDiagnostics",
    "Posterior",
    "NpzBackend",
    "sample_posterior",
    "initial_ball",
    "default_n_walkers",
    "assess_chains",
    "posterior_from_chains",
]

CHECKPOINT_FORMAT = 1


# ---------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class ParameterInterval:
    """Median and central credible interval of one parameter.

    ``low`` and ``high`` are the ``(1 - level)/2`` and ``(1 + level)/2``
    quantiles, in the parameter's unit. For a periodic parameter the quantiles
    are taken in a frame centred on the circular mean, so ``low`` or ``high``
    may lie outside the support by less than one period; ``median`` is inside.
    """

    name: str
    unit: str
    median: float
    low: float
    high: float
    level: float

    @property
    def minus(self) -> float:
        """``median - low``."""
        return self.median - self.low

    @property
    def plus(self) -> float:
        """``high - median``."""
        return self.high - self.median


@dataclass(frozen=True)
class SamplerDiagnostics:
    """Convergence diagnostics of a :func:`sample_posterior` run.

    Attributes
    ----------
    converged : bool
        All criteria met (see ``reasons`` when not).
    reasons : tuple of str
        One sentence per failed criterion; empty when converged.
    n_steps : int
        Stored chain length per ensemble, steps (burn-in included).
    n_burn : int
        Steps discarded as burn-in from the start of each ensemble.
    thin : int
        Thinning of the returned samples, steps.
    n_walkers, n_ensembles : int
        Walkers per ensemble and number of independent ensembles.
    autocorr_time_steps : ndarray, shape (n_ensembles, ndim)
        Integrated autocorrelation time after burn-in, steps.
    acceptance_fraction : ndarray, shape (n_ensembles,)
        Mean acceptance fraction of each ensemble after burn-in.
    rhat : ndarray, shape (ndim,)
        Split R-hat across ensembles and chain halves.
    multimodal : bool
        Walkers sit in more than one separated cluster.
    mode_centres : ndarray, shape (n_modes, ndim)
        Mean position of each walker cluster (parameter units).
    mode_fractions : ndarray, shape (n_modes,)
        Fraction of all walkers in each cluster.
    mode_ensembles : tuple of tuple of int
        The ensembles contributing walkers to each cluster.
    n_evaluations : int
        Walker-evaluations of the log-likelihood (this process).
    beta : float
        Inverse temperature sampled (1 for the posterior).
    tau_multiple, acceptance_range, rhat_max : criteria applied.
    method : str
        ``"ensemble"`` (:func:`sample_posterior`) or ``"local-mode"``
        (:func:`tumble.inference.local.sample_local_mode`).
    mode_edge_fraction : float
        Local-mode sampling: fraction of the samples near the edge of the mode region (``nan`` otherwise).
    outside_fraction : float
        Local-mode sampling: fraction of the proposals that fell outside the mode region (``nan`` otherwise).
    pilot_steps : int
        Local-mode sampling: steps per ensemble of the discarded pilot run (0 otherwise).
    polish_gain : float
        Solution-mode sampling (:func:`tumble.classify.rotation.sample_solution_mode`): log-posterior
        gained by polishing the optimum before sampling, nats (``nan`` otherwise).
    polish_note : str
        Why the polish was not used, when it was not.
    """

    converged: bool
    reasons: tuple[str, ...]
    n_steps: int
    n_burn: int
    thin: int
    n_walkers: int
    n_ensembles: int
    autocorr_time_steps: np.ndarray
    acceptance_fraction: np.ndarray
    rhat: np.ndarray
    multimodal: bool
    mode_centres: np.ndarray
    mode_fractions: np.ndarray
    mode_ensembles: tuple[tuple[int, ...], ...]
    n_evaluations: int
    beta: float
    tau_multiple: float
    acceptance_range: tuple[float, float]
    rhat_max: float
    method: str = "ensemble"
    mode_edge_fraction: float = math.nan
    outside_fraction: float = math.nan
    pilot_steps: int = 0
    polish_gain: float = math.nan
    polish_note: str = ""

    @property
    def n_modes(self) -> int:
        """Number of separated walker clusters."""
        return len(self.mode_fractions)

    @property
    def max_autocorr_time_steps(self) -> float:
        """Largest autocorrelation time over parameters and ensembles, steps."""
        return float(np.max(self.autocorr_time_steps))

    @property
    def tau_multiples(self) -> float:
        """Chain length after burn-in in units of the largest autocorrelation time (the criterion's number)."""
        tau = self.max_autocorr_time_steps
        return float((self.n_steps - self.n_burn) / tau) if np.isfinite(tau) and tau > 0 else 0.0


@dataclass(frozen=True)
class Posterior:
    """Posterior samples with their diagnostics (the ``Posterior`` contract of DESIGN.md).

    Attributes
    ----------
    samples : ndarray, shape (n_samples, ndim)
        Burn-in removed, thinned, all ensembles pooled; parameter units, periodic
        parameters wrapped into their support.
    log_prob : ndarray, shape (n_samples,)
        ``log prior + beta log L`` at each sample.
    log_likelihood : ndarray, shape (n_samples,)
        ``log L`` at each sample (``nan`` when ``beta = 0``).
    names, units : tuple of str
        Parameter names and units in column order.
    periods : ndarray, shape (ndim,)
        Wrapping period of each parameter, ``nan`` if not periodic.
    lows : ndarray, shape (ndim,)
        Lower end of each prior's support (parameter units).
    diagnostics : SamplerDiagnostics
    log_evidence, log_evidence_err : float
        Natural-log evidence ``ln Z`` and its one-sigma error, ``nan`` unless computed
        (see :func:`tumble.inference.evidence.log_evidence`).
    evidence_method : str
        How ``log_evidence`` was obtained (``"none"`` if not).
    """

    samples: np.ndarray
    log_prob: np.ndarray
    log_likelihood: np.ndarray
    names: tuple[str, ...]
    units: tuple[str, ...]
    periods: np.ndarray
    lows: np.ndarray
    diagnostics: SamplerDiagnostics
    log_evidence: float = math.nan
    log_evidence_err: float = math.nan
    evidence_method: str = "none"

    @property
    def converged(self) -> bool:
        """Whether the sampler's convergence criteria were met."""
        return bool(self.diagnostics.converged)

    @property
    def n_samples(self) -> int:
        return int(self.samples.shape[0])

    def __getitem__(self, name: str) -> np.ndarray:
        """Samples of one parameter by name, shape ``(n_samples,)``."""
        try:
            return self.samples[:, self.names.index(name)]
        except ValueError:
            raise TumbleError(f"unknown parameter {name!r}; known: {', '.join(self.names)}") from None

    def _aligned(self) -> tuple[np.ndarray, np.ndarray]:
        centre = np.array(
            [diag.circular_mean(self.samples[:, i], p) if np.isfinite(p) else 0.0 for i, p in enumerate(self.periods)]
        )
        return diag.align_periodic(self.samples, self.periods, centre), centre

    def quantiles(self, q) -> np.ndarray:
        """Quantiles ``q`` (in [0, 1]) of every parameter, shape ``(len(q), ndim)``.

        Periodic parameters use the frame centred on their circular mean.
        """
        x, _ = self._aligned()
        return np.quantile(x, np.atleast_1d(q), axis=0)

    def interval(self, name: str, level: float = 0.68) -> ParameterInterval:
        """Median and central ``level`` credible interval of parameter ``name`` (68 % by default)."""
        if name not in self.names:
            raise TumbleError(f"unknown parameter {name!r}; known: {', '.join(self.names)}")
        i = self.names.index(name)
        lo, med, hi = self.quantiles([(1 - level) / 2, 0.5, (1 + level) / 2])[:, i]
        p = self.periods[i]
        if np.isfinite(p):
            shift = p * np.floor((med - self.lows[i]) / p)  # bring the median into the support
            lo, med, hi = lo - shift, med - shift, hi - shift
        return ParameterInterval(name, self.units[i], float(med), float(lo), float(hi), float(level))

    def intervals(self, level: float = 0.68) -> tuple[ParameterInterval, ...]:
        """:meth:`interval` of every parameter, in column order."""
        return tuple(self.interval(n, level) for n in self.names)

    def sample_dict(self) -> dict[str, np.ndarray]:
        """Samples as ``{name: (n_samples,) array}``."""
        return {n: self.samples[:, i] for i, n in enumerate(self.names)}

    def with_evidence(self, log_evidence: float, log_evidence_err: float, method: str) -> "Posterior":
        """A copy carrying an evidence estimate."""
        return replace(self, log_evidence=float(log_evidence), log_evidence_err=float(log_evidence_err), evidence_method=method)


# ---------------------------------------------------------------------------
# storage: emcee's in-memory backend plus an atomic .npz save / load
# ---------------------------------------------------------------------------
class NpzBackend(emcee.backends.Backend):
    """emcee's in-memory backend that can be written to and restored from arrays.

    emcee's own file backend needs h5py, which tumble does not depend on; this
    keeps the chain in memory (as :class:`emcee.backends.Backend`) and
    serialises chain, log-probabilities, acceptance counts and the random state
    so that a run can continue exactly where it stopped.
    """

    def to_arrays(self, prefix: str) -> dict[str, np.ndarray]:
        it = int(self.iteration)
        out = {
            f"{prefix}chain": np.asarray(self.chain[:it]),
            f"{prefix}log_prob": np.asarray(self.log_prob[:it]),
            f"{prefix}accepted": np.asarray(self.accepted),
            f"{prefix}iteration": np.array(it),
        }
        if self.random_state is not None:
            name, keys, pos, has_gauss, cached = self.random_state
            out[f"{prefix}rs_keys"] = np.asarray(keys, dtype=np.uint32)
            out[f"{prefix}rs_ints"] = np.array([pos, has_gauss], dtype=np.int64)
            out[f"{prefix}rs_gauss"] = np.array(cached, dtype=float)
        return out

    @classmethod
    def from_arrays(cls, arrays: Mapping[str, np.ndarray], prefix: str) -> "NpzBackend":
        chain = np.asarray(arrays[f"{prefix}chain"], dtype=float)
        backend = cls()
        backend.reset(chain.shape[1], chain.shape[2])
        backend.chain = chain.copy()
        backend.log_prob = np.asarray(arrays[f"{prefix}log_prob"], dtype=float).copy()
        backend.accepted = np.asarray(arrays[f"{prefix}accepted"], dtype=float).copy()
        backend.iteration = int(arrays[f"{prefix}iteration"])
        if f"{prefix}rs_keys" in arrays:
            pos, has_gauss = (int(v) for v in arrays[f"{prefix}rs_ints"])
            backend.random_state = (
                "MT19937",
                np.asarray(arrays[f"{prefix}rs_keys"], dtype=np.uint32),
                pos,
                has_gauss,
                float(arrays[f"{prefix}rs_gauss"]),
            )
        return backend


def _save_checkpoint(path, backends, space, beta, n_evaluations):
    arrays = {
        "format": np.array(CHECKPOINT_FORMAT),
        "names": np.array(space.names),
        "beta": np.array(beta),
        "n_ensembles": np.array(len(backends)),
        "n_evaluations": np.array(n_evaluations),
    }
    for e, b in enumerate(backends):
        arrays.update(b.to_arrays(f"e{e}_"))
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            np.savez(fh, **arrays)
            fh.flush()
            os.fsync(fh.fileno())


def _load_checkpoint(path, space, beta, n_ensembles, n_walkers):
    with np.load(path, allow_pickle=False) as f:
        arrays = {k: f[k] for k in f.files}
    if int(arrays.get("format", -1)) != CHECKPOINT_FORMAT:
        raise TumbleError(f"{path}: not a tumble sampler checkpoint (format {arrays.get('format')})")
    names = tuple(str(n) for n in arrays["names"])
    if names != space.names:
        raise TumbleError(f"{path}: checkpoint parameters {names} differ from {space.names}")
    if float(arrays["beta"]) != float(beta) or int(arrays["n_ensembles"]) != n_ensembles:
        raise TumbleError(f"{path}: checkpoint beta/ensembles differ from this run")
    backends = [NpzBackend.from_arrays(arrays, f"e{e}_") for e in range(n_ensembles)]
    if any(b.nwalkers != n_walkers for b in backends):
        raise TumbleError(f"{path}: checkpoint has {backends[0].nwalkers} walkers, this run {n_walkers}")
    return backends, int(arrays["n_evaluations"])


# ---------------------------------------------------------------------------
# starting positions
# ---------------------------------------------------------------------------
def default_n_walkers(ndim: int) -> int:
    """Default ensemble size: at least 32 and at least ``4 ndim`` (emcee needs ``> 2 ndim``), even."""
    n = max(32, 4 * ndim)
    return n + (n % 2)


def _local_scale(prior, x0: float) -> float:
    """Natural step size of a prior at ``x0`` (relative scale for log-uniform)."""
    if isinstance(prior, LogUniform):
        return abs(x0) * math.log(prior.high / prior.low)
    if isinstance(prior, Normal):
        width = prior.high - prior.low
        return min(prior.sd, width) if np.isfinite(width) else prior.sd
    if isinstance(prior, VonMises):
        return prior.scale()
    if isinstance(prior, (Uniform, PeriodicUniform, IsotropicLatitude)):
        return prior.high - prior.low
    return prior.scale()


def initial_ball(
    space: ParameterSpace,
    centre,
    n_walkers: int,
    start_scale: float | Mapping[str, float] | np.ndarray = 1e-4,
    rng: np.random.Generator | int | None = None,
) -> np.ndarray:
    """Walker positions in a small Gaussian ball around ``centre``, shape ``(n_walkers, ndim)``.

    Parameters
    ----------
    space : ParameterSpace
    centre : mapping or array_like, shape (ndim,)
    n_walkers : int
    start_scale : float, mapping or array
        A float is the ball's standard deviation relative to each prior's natural
        width (its full range; ``x ln(high/low)`` for log-uniform; ``sd`` for
        normal); a mapping ``{name: sd}`` or an ``(ndim,)`` array gives absolute
        standard deviations in parameter units.
    rng : numpy.random.Generator, int or None

    Notes
    -----
    Points falling outside a bounded prior are redrawn (up to 100 times) and
    then reflected inside; periodic coordinates are wrapped.
    """
    rng = as_generator(rng)
    c = space.to_vector(centre) if isinstance(centre, Mapping) else np.asarray(centre, dtype=float)
    c = space.wrap(c.reshape(space.ndim))
    if not np.isfinite(space.log_prior(c)):
        raise TumbleError(f"starting point {dict(zip(space.names, c.tolist()))} lies outside the prior support")
    if isinstance(start_scale, Mapping):
        sd = np.array([float(start_scale[n]) for n in space.names])
    elif np.ndim(start_scale) == 0:
        sd = float(start_scale) * np.array([_local_scale(p.prior, c[i]) for i, p in enumerate(space.parameters)])
    else:
        sd = np.asarray(start_scale, dtype=float).reshape(space.ndim)
    x = c + sd * rng.standard_normal((n_walkers, space.ndim))
    for _ in range(100):
        bad = ~np.isfinite(space.log_prior(x))
        if not bad.any():
            break
        x[bad] = c + sd * rng.standard_normal((int(bad.sum()), space.ndim))
    lo, hi = space.lows, space.highs
    periodic = np.isfinite(space.periods)
    x = np.where(periodic, x, np.clip(x, np.where(np.isfinite(lo), lo, -np.inf), hi))
    return space.wrap(x)


def _as_starts(space: ParameterSpace, start) -> np.ndarray | None:
    """Normalise ``start`` to ``(n_modes, ndim)`` or ``None`` (prior start)."""
    if start is None:
        return None
    if isinstance(start, Mapping):
        return space.to_vector(start).reshape(1, space.ndim)
    if isinstance(start, (list, tuple)) and start and isinstance(start[0], Mapping):
        return np.stack([space.to_vector(s).reshape(space.ndim) for s in start])
    arr = np.asarray(start, dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] != space.ndim:
        raise TumbleError(f"start must be a dict, an (ndim,) vector or (n_modes, ndim) array; got shape {arr.shape}")
    return arr


# ---------------------------------------------------------------------------
# convergence assessment
# ---------------------------------------------------------------------------
@dataclass(frozen=True)
class _Assessment:
    burn: int
    thin: int
    taus: np.ndarray
    tau_max: float
    acceptance: np.ndarray
    rhat: np.ndarray
    labels: np.ndarray
    walker_means: np.ndarray
    reasons: tuple[str, ...] = field(default_factory=tuple)
    long_enough: bool = False


def assess_chains(
    chains: Sequence[np.ndarray],
    space: ParameterSpace,
    tau_multiple: float,
    acceptance_range: tuple[float, float],
    rhat_max: float,
    burn_factor: float,
    cluster_threshold: float,
) -> _Assessment:
    """Burn-in, thinning and the convergence criteria of ``(n_steps, n_walkers, ndim)`` chains.

    Used by :func:`sample_posterior` and :func:`tumble.inference.local.sample_local_mode`: the
    autocorrelation time (after a burn-in of ``burn_factor`` times its estimate on the second
    half), each ensemble's acceptance, split R-hat across ensembles and walker clusters; the
    reasons list every criterion not met.
    """
    periods = space.periods
    stacked = np.stack(chains)  # (E, n, K, d)
    aligned = diag.align_periodic(stacked, periods)
    n = stacked.shape[1]
    tau0 = max(float(np.max(diag.integrated_time(c[n // 2:]))) for c in aligned)
    burn = n // 2 if not np.isfinite(tau0) else int(min(n // 2, math.ceil(burn_factor * tau0)))
    post = aligned[:, burn:]
    taus = np.stack([diag.integrated_time(c) for c in post])
    tau_max = float(np.max(taus))
    acceptance = np.array([np.nanmean(diag.acceptance_from_chain(c)) for c in post])
    rhat = diag.split_rhat(list(post))
    walker_means = post.mean(axis=1).reshape(-1, space.ndim)  # (E*K, d)
    within_sd = np.sqrt(post.var(axis=1).reshape(-1, space.ndim).mean(axis=0))
    labels = diag.cluster_walkers(walker_means, within_sd, periods, cluster_threshold)

    reasons = []
    n_post = n - burn
    long_enough = bool(np.isfinite(tau_max) and n_post >= tau_multiple * tau_max)
    if not long_enough:
        worst = space.names[int(np.argmax(np.max(taus, axis=0)))]
        reasons.append(
            f"chain of {n_post} steps after a burn-in of {burn} is shorter than {tau_multiple:g} "
            f"autocorrelation times (tau = {tau_max:.1f} steps, for {worst})"
        )
    lo, hi = acceptance_range
    for e, a in enumerate(acceptance):
        if not (lo <= a <= hi):
            reasons.append(f"ensemble {e}: acceptance fraction {a:.3f} outside [{lo:g}, {hi:g}]")
    bad = [space.names[i] for i in np.flatnonzero(~(rhat < rhat_max))]
    if bad:
        reasons.append(f"split R-hat above {rhat_max:g} (max {np.max(rhat):.3f}) for {', '.join(bad)}")
    n_modes = int(labels.max()) + 1
    if n_modes > 1:
        reasons.append(f"walkers occupy {n_modes} separated modes; the ensembles do not agree on one posterior")
    thin = max(1, int(tau_max // 2)) if np.isfinite(tau_max) else 1
    return _Assessment(burn, thin, taus, tau_max, acceptance, rhat, labels, walker_means, tuple(reasons), long_enough)


# ---------------------------------------------------------------------------
# the sampler driver
# ---------------------------------------------------------------------------
def sample_posterior(
    log_likelihood: Callable[[np.ndarray], np.ndarray],
    space: ParameterSpace,
    start=None,
    *,
    n_walkers: int | None = None,
    n_ensembles: int = 2,
    max_steps: int = 20000,
    first_block: int = 1000,
    tau_multiple: float = 50.0,
    acceptance_range: tuple[float, float] = (0.15, 0.7),
    rhat_max: float = 1.05,
    burn_factor: float = 5.0,
    cluster_threshold: float = 4.0,
    start_scale: float | Mapping[str, float] | np.ndarray = 1e-4,
    beta: float = 1.0,
    moves=None,
    pool=None,
    checkpoint: str | os.PathLike | None = None,
    resume: bool = False,
    rng: np.random.Generator | int | None = None,
    progress: bool = False,
    warn: bool = True,
) -> Posterior:
    """Sample the (tempered) posterior with emcee until convergence or budget.

    Parameters
    ----------
    log_likelihood : callable
        ``log_likelihood(x) -> (K,)`` for ``(K, ndim)`` parameter vectors
        (vectorised over walkers; see :class:`~tumble.inference.logpost.LogPosterior`).
    space : ParameterSpace
        Parameter names, units and priors.
    start : None, mapping, (ndim,) or (n_modes, ndim) array, or list of mappings
        Starting point(s). Ensemble ``e`` starts in a small ball (``start_scale``)
        around starting point ``e % n_modes``; if there are more starting points
        than ``n_ensembles``, one ensemble is run per starting point. ``None``
        starts each ensemble from independent draws of the prior (overdispersed).
    n_walkers : int, optional
        Walkers per ensemble (default :func:`default_n_walkers`).
    n_ensembles : int
        Independent ensembles (at least 1; 2 or more to compare ensembles).
    max_steps : int
        Budget: the most steps per ensemble (burn-in included).
    first_block : int
        Steps per ensemble before the first convergence check; later blocks are
        sized from the autocorrelation time (at most doubling the chain).
    tau_multiple : float
        Required chain length after burn-in, in autocorrelation times.
    acceptance_range : (float, float)
        Allowed mean acceptance fraction per ensemble.
    rhat_max : float
        Largest allowed split R-hat.
    burn_factor : float
        Burn-in in autocorrelation times (estimated on the second half).
    cluster_threshold : float
        Walker clustering link distance, in within-walker standard deviations.
    start_scale : float, mapping or array
        Size of the starting ball (see :func:`initial_ball`).
    beta : float
        Inverse temperature (1 samples the posterior).
    moves : emcee move(s), optional
        Passed to ``emcee.EnsembleSampler`` (default: its stretch move).
    pool : object with ``map``, optional
        Evaluate walker chunks in parallel through ``pool.map`` (the
        log-likelihood must then be picklable).
    checkpoint : path, optional
        ``.npz`` file written atomically after every block.
    resume : bool
        Continue from ``checkpoint`` if it exists (same space, beta, ensembles, walkers).
    rng : numpy.random.Generator, int or None
        Source of every random number used (starting balls and emcee's generators).
    progress : bool
        Show a tqdm progress bar.
    warn : bool
        Issue :class:`~tumble.exceptions.ConvergenceWarning` when not converged.

    Returns
    -------
    Posterior
        Pooled, burned-in and thinned samples of all ensembles with diagnostics.
        When the run is unconverged or multimodal, ``diagnostics.converged`` is
        False and ``diagnostics.reasons`` says why; the samples are still returned.
    """
    rng = as_generator(rng)
    ndim = space.ndim
    n_walkers = default_n_walkers(ndim) if n_walkers is None else int(n_walkers)
    if n_walkers < 2 * ndim or n_walkers % 2:
        raise TumbleError(f"n_walkers must be even and at least 2 * ndim = {2 * ndim}, got {n_walkers}")
    starts = _as_starts(space, start)
    n_ensembles = max(int(n_ensembles), 1 if starts is None else len(starts))
    max_steps = int(max_steps)
    first_block = max(2, min(int(first_block), max_steps))
    # each ensemble samples periodic coordinates in a one-period window centred on its start
    log_posts = [
        LogPosterior(log_likelihood, space, beta, None if starts is None else space.wrap(starts[e % len(starts)]))
        for e in range(n_ensembles)
    ]
    fns = [PooledLogPosterior(lp, pool) if pool is not None else lp for lp in log_posts]

    backends: list[NpzBackend]
    n_eval_before = 0
    if checkpoint is not None and resume and Path(checkpoint).exists():
        backends, n_eval_before = _load_checkpoint(checkpoint, space, beta, n_ensembles, n_walkers)
        samplers = [emcee.EnsembleSampler(n_walkers, ndim, f, moves=moves, backend=b, vectorize=True)
                    for f, b in zip(fns, backends)]
        states = [None] * n_ensembles
    else:
        backends = [NpzBackend() for _ in range(n_ensembles)]
        samplers = [emcee.EnsembleSampler(n_walkers, ndim, f, moves=moves, backend=b, vectorize=True)
                    for f, b in zip(fns, backends)]
        seeds = rng.integers(0, 2**32, size=n_ensembles)
        states = []
        for e in range(n_ensembles):
            if starts is None:
                def draw(n):
                    return space.sample_prior(n, rng)
            else:
                def draw(n, centre=starts[e % len(starts)], lp=log_posts[e]):
                    return lp.into_window(initial_ball(space, centre, n, start_scale, rng))
            x0 = _finite_start(fns[e], draw, n_walkers, e)
            states.append(emcee.State(x0, random_state=np.random.RandomState(int(seeds[e])).get_state()))

    done = backends[0].iteration
    target = max(done, first_block) if done == 0 else done
    with tqdm(total=target * n_ensembles, disable=not progress, desc="sampling", unit="step") as bar:
        bar.update(done * n_ensembles)
        while True:
            inc = target - done
            if inc > 0:
                for e, sampler in enumerate(samplers):
                    state = states[e] if states[e] is not None else sampler.backend.get_last_sample()
                    for _ in sampler.sample(state, iterations=inc, store=True, skip_initial_state_check=done > 0):
                        bar.update(1)
                    states[e] = None
                done = target
                if checkpoint is not None:
                    _save_checkpoint(checkpoint, backends, space, beta,
                                     n_eval_before + sum(lp.n_evaluations for lp in log_posts))
            chains = [b.get_chain() for b in backends]
            a = assess_chains(chains, space, tau_multiple, acceptance_range, rhat_max, burn_factor, cluster_threshold)
            if not a.reasons or done >= max_steps:
                break
            n_modes = int(a.labels.max()) + 1
            if n_modes > 1 and a.long_enough:
                break  # separated modes, each well sampled: more steps will not join them
            if np.isfinite(a.tau_max):
                needed = int(math.ceil(1.1 * (burn_factor + tau_multiple) * a.tau_max))
            else:
                needed = 2 * done
            step = int(np.clip(needed - done, max(done // 4, 50), done))
            target = min(max_steps, done + step)
            bar.total = target * n_ensembles
            bar.refresh()

    n_eval = n_eval_before + sum(lp.n_evaluations for lp in log_posts)
    post = posterior_from_chains(backends, space, a, beta, n_eval, tau_multiple, acceptance_range, rhat_max)
    if warn and not post.diagnostics.converged:
        warnings.warn(
            "posterior sampling did not converge: " + "; ".join(post.diagnostics.reasons), ConvergenceWarning, stacklevel=2
        )
    return post


def _finite_start(fn, draw, n_walkers, e):
    """Draw starting walkers, redrawing those whose log-posterior is -inf (up to 100 times)."""
    x0 = draw(n_walkers)
    for _ in range(100):
        bad = ~np.isfinite(np.asarray(fn(x0)))
        if not bad.any():
            return x0
        x0[bad] = draw(int(bad.sum()))
    raise TumbleError(f"could not find starting positions with finite log-posterior for ensemble {e}")


def posterior_from_chains(backends, space, a, beta, n_evaluations, tau_multiple, acceptance_range, rhat_max):
    """The :class:`Posterior` of emcee backends after :func:`assess_chains` (burn-in removed, thinned, pooled)."""
    periods = space.periods
    chains = np.stack([b.get_chain() for b in backends])  # (E, n, K, d)
    logp = np.stack([b.get_log_prob() for b in backends])  # (E, n, K)
    n_ens, n_steps, n_walkers, ndim = chains.shape
    sel = slice(a.burn, None, a.thin)
    samples = space.wrap(chains[:, sel].reshape(-1, ndim))
    log_prob = logp[:, sel].reshape(-1)
    if beta > 0:
        log_like = (log_prob - space.log_prior(samples)) / beta
    else:
        log_like = np.full(log_prob.shape, np.nan)

    labels = a.labels
    n_modes = int(labels.max()) + 1
    centres = np.stack([_cluster_centre(a.walker_means[labels == m], periods) for m in range(n_modes)])
    centres = space.wrap(centres)
    fractions = np.array([np.mean(labels == m) for m in range(n_modes)])
    ens_of_walker = np.repeat(np.arange(n_ens), n_walkers)
    mode_ens = tuple(tuple(int(v) for v in np.unique(ens_of_walker[labels == m])) for m in range(n_modes))
    d = SamplerDiagnostics(
        converged=not a.reasons,
        reasons=a.reasons,
        n_steps=int(n_steps),
        n_burn=int(a.burn),
        thin=int(a.thin),
        n_walkers=int(n_walkers),
        n_ensembles=int(n_ens),
        autocorr_time_steps=a.taus,
        acceptance_fraction=a.acceptance,
        rhat=a.rhat,
        multimodal=n_modes > 1,
        mode_centres=centres,
        mode_fractions=fractions,
        mode_ensembles=mode_ens,
        n_evaluations=int(n_evaluations),
        beta=float(beta),
        tau_multiple=float(tau_multiple),
        acceptance_range=tuple(float(v) for v in acceptance_range),
        rhat_max=float(rhat_max),
    )
    return Posterior(
        samples=samples,
        log_prob=log_prob,
        log_likelihood=log_like,
        names=space.names,
        units=space.units,
        periods=periods,
        lows=space.lows,
        diagnostics=d,
    )


def _cluster_centre(means: np.ndarray, periods: np.ndarray) -> np.ndarray:
    out = means.mean(axis=0)
    for i in np.flatnonzero(np.isfinite(periods)):
        out[i] = diag.circular_mean(means[:, i], periods[i])
    return out
