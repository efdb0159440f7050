"""Named parameters with units, bounds and priors, and their vector forms.

A :class:`ParameterSpace` is an ordered collection of :class:`Parameter`, each
carrying a name, a unit and a prior. It maps

- ``dict`` of named values  <->  parameter vectors ``(..., ndim)``,
- parameter vectors  <->  the unit hypercube (through each prior's cumulative
  distribution), used to draw from the prior and to start walkers in a ball of
  a given prior-probability size,

and evaluates the log-prior vectorised over any leading axes (walkers).

Periodic parameters (angles) are *wrapped*: the sampler may step outside
``[low, low + period)``, and every evaluation first folds the value back. The
priors are proper (normalised) densities so that evidences are meaningful.

References
----------
- von Mises distribution: Mardia, K. V. & Jupp, P. E. (2000), *Directional
  Statistics*, Wiley, §3.5.4 (density, normalisation by the modified Bessel
  function I0).
- Isotropic direction: the latitude of a point uniform on the sphere has the
  density cos(b)/2 on [-pi/2, pi/2] (Mardia & Jupp 2000, §9.3.1).
- Truncated normal inverse CDF: standard construction through Phi and Phi^-1
  (e.g. Robert, C. P. (1995), Statistics and Computing 5, 121-125).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
from scipy import special, stats

from tumble.exceptions import TumbleError

__all__ = [
    "Prior",
    "Uniform",
    "LogUniform",
    "Normal",
    "VonMises",
    "PeriodicUniform",
    "IsotropicLatitude",
    "Parameter",
    "ParameterSpace",
    "as_generator",
]

_TWO_PI = 2.0 * math.pi


def as_generator(rng: np.random.Generator | int | None) -> np.random.Generator:
    """Return a ``numpy.random.Generator`` from a generator, a seed or ``None``."""
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(rng)


class Prior:
    """Base class of the one-dimensional priors.

    A subclass provides ``low`` and ``high`` (the support; may be infinite),
    ``period`` (``None`` unless the parameter is an angle that wraps) and the
    vectorised methods :meth:`log_pdf`, :meth:`cdf` and :meth:`ppf` (inverse
    CDF). ``log_pdf`` returns ``-inf`` outside the support and is normalised.
    """

    low: float = -math.inf
    high: float = math.inf
    period: float | None = None

    def log_pdf(self, x):  # pragma: no cover - abstract
        raise NotImplementedError

    def cdf(self, x):  # pragma: no cover - abstract
        raise NotImplementedError

    def ppf(self, u):  # pragma: no cover - abstract
        raise NotImplementedError

    def scale(self) -> float:
        """A typical width of the prior (in the parameter's unit), for step sizes."""
        return float(self.ppf(0.84) - self.ppf(0.16))

    def wrap(self, x):
        """Fold a periodic value into ``[low, low + period)``; identity otherwise."""
        if self.period is None:
            return x
        return self.low + np.mod(np.asarray(x, dtype=float) - self.low, self.period)


def _inside(x, low, high):
    return (x >= low) & (x <= high)


@dataclass(frozen=True)
class Uniform(Prior):
    """Uniform density on ``[low, high]``."""

    low: float
    high: float

    def __post_init__(self):
        if not (np.isfinite(self.low) and np.isfinite(self.high) and self.high > self.low):
            raise TumbleError(f"Uniform prior needs finite low < high, got [{self.low}, {self.high}]")

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        return np.where(_inside(x, self.low, self.high), -math.log(self.high - self.low), -np.inf)

    def cdf(self, x):
        return np.clip((np.asarray(x, dtype=float) - self.low) / (self.high - self.low), 0.0, 1.0)

    def ppf(self, u):
        return self.low + np.asarray(u, dtype=float) * (self.high - self.low)


@dataclass(frozen=True)
class LogUniform(Prior):
    """Log-uniform (scale-invariant, "Jeffreys") density ``1 / (x ln(high/low))`` on ``[low, high]``."""

    low: float
    high: float

    def __post_init__(self):
        if not (0 < self.low < self.high < math.inf):
            raise TumbleError(f"LogUniform prior needs 0 < low < high < inf, got [{self.low}, {self.high}]")

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        ok = _inside(x, self.low, self.high)
        with np.errstate(divide="ignore", invalid="ignore"):
            val = -np.log(np.where(ok, x, 1.0)) - math.log(math.log(self.high / self.low))
        return np.where(ok, val, -np.inf)

    def cdf(self, x):
        x = np.clip(np.asarray(x, dtype=float), self.low, self.high)
        return np.log(x / self.low) / math.log(self.high / self.low)

    def ppf(self, u):
        return self.low * (self.high / self.low) ** np.asarray(u, dtype=float)

    def scale(self) -> float:
        return float(self.ppf(0.84) - self.ppf(0.16))


@dataclass(frozen=True)
class Normal(Prior):
    """Normal density with ``mean`` and standard deviation ``sd``, optionally truncated to ``[low, high]``.

    The truncated density is renormalised by ``Phi(b) - Phi(a)``.
    """

    mean: float
    sd: float
    low: float = -math.inf
    high: float = math.inf

    def __post_init__(self):
        if not (self.sd > 0 and np.isfinite(self.mean) and self.high > self.low):
            raise TumbleError(f"Normal prior needs sd > 0 and low < high, got {self}")
        a = float(special.ndtr((self.low - self.mean) / self.sd))
        b = float(special.ndtr((self.high - self.mean) / self.sd))
        # cached constants (the dataclass is frozen; these are derived, not fields)
        object.__setattr__(self, "_mass", (a, b))
        object.__setattr__(self, "_log_norm", -math.log(self.sd) - 0.5 * math.log(_TWO_PI) - math.log(b - a))
        object.__setattr__(self, "_truncated", bool(np.isfinite(self.low) or np.isfinite(self.high)))

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        z = (x - self.mean) / self.sd
        val = -0.5 * z * z + self._log_norm
        if not self._truncated:
            return val
        return np.where(_inside(x, self.low, self.high), val, -np.inf)

    def cdf(self, x):
        a, b = self._mass
        return np.clip((special.ndtr((np.asarray(x, dtype=float) - self.mean) / self.sd) - a) / (b - a), 0, 1)

    def ppf(self, u):
        a, b = self._mass
        return self.mean + self.sd * special.ndtri(a + np.asarray(u, dtype=float) * (b - a))


@dataclass(frozen=True)
class VonMises(Prior):
    """von Mises density on the circle, ``exp(kappa cos(x - mean)) / (2 pi I0(kappa))``.

    Support ``[low, low + 2 pi)`` with wrapping (radians). ``kappa -> 0`` is the
    uniform angle; large ``kappa`` approaches a normal of variance ``1/kappa``
    (Mardia & Jupp 2000, §3.5.4).
    """

    mean: float
    kappa: float
    low: float = -math.pi

    def __post_init__(self):
        if not self.kappa >= 0:
            raise TumbleError(f"VonMises prior needs kappa >= 0, got {self.kappa}")

    @property
    def high(self) -> float:  # type: ignore[override]
        return self.low + _TWO_PI

    @property
    def period(self) -> float:  # type: ignore[override]
        return _TWO_PI

    def log_pdf(self, x):
        x = self.wrap(x)
        # log I0(k) = log(i0e(k)) + k, stable for large kappa.
        log_norm = math.log(_TWO_PI) + math.log(special.i0e(self.kappa)) + self.kappa
        return self.kappa * np.cos(x - self.mean) - log_norm

    def cdf(self, x):
        x = self.wrap(x)
        c0 = stats.vonmises.cdf(self.low, self.kappa, loc=self.mean)
        c = stats.vonmises.cdf(x, self.kappa, loc=self.mean)
        return np.mod(c - c0, 1.0)

    def ppf(self, u):
        c0 = stats.vonmises.cdf(self.low, self.kappa, loc=self.mean)
        target = np.mod(np.asarray(u, dtype=float) + c0, 1.0)
        return self.wrap(stats.vonmises.ppf(target, self.kappa, loc=self.mean))

    def scale(self) -> float:
        # the width of a von Mises is about 1/sqrt(kappa) rad, at most the circle
        return float(min(_TWO_PI, 2.0 / math.sqrt(max(self.kappa, 1e-12))))


@dataclass(frozen=True)
class PeriodicUniform(Prior):
    """Uniform angle on ``[low, low + period)`` with wrapping (e.g. a rotational phase, radians)."""

    low: float = 0.0
    period: float = _TWO_PI  # type: ignore[assignment]

    def __post_init__(self):
        if not self.period > 0:
            raise TumbleError(f"PeriodicUniform needs period > 0, got {self.period}")

    @property
    def high(self) -> float:  # type: ignore[override]
        return self.low + self.period

    def log_pdf(self, x):
        return np.full(np.shape(x), -math.log(self.period))

    def cdf(self, x):
        return (self.wrap(x) - self.low) / self.period

    def ppf(self, u):
        return self.low + np.asarray(u, dtype=float) * self.period


@dataclass(frozen=True)
class IsotropicLatitude(Prior):
    """Latitude of an isotropic direction: density ``cos(b) / 2`` on ``[-pi/2, pi/2]`` (radians).

    Paired with a :class:`PeriodicUniform` longitude this is the uniform prior on
    the sphere for a spin or angular-momentum direction (Mardia & Jupp 2000, §9.3.1).
    """

    low: float = field(default=-math.pi / 2, init=False)
    high: float = field(default=math.pi / 2, init=False)

    def log_pdf(self, x):
        x = np.asarray(x, dtype=float)
        ok = _inside(x, self.low, self.high)
        with np.errstate(divide="ignore"):
            val = np.log(np.cos(np.where(ok, x, 0.0))) - math.log(2.0)
        return np.where(ok, val, -np.inf)

    def cdf(self, x):
        x = np.clip(np.asarray(x, dtype=float), self.low, self.high)
        return 0.5 * (np.sin(x) + 1.0)

    def ppf(self, u):
        return np.arcsin(np.clip(2.0 * np.asarray(u, dtype=float) - 1.0, -1.0, 1.0))


@dataclass(frozen=True)
class Parameter:
    """One named model parameter.

    Parameters
    ----------
    name : str
        Identifier used in dictionaries and results (e.g. ``"period_h"``).
    prior : Prior
        Its prior density (proper, normalised).
    unit : str
        Unit of the value (``"h"``, ``"rad"``, ``"mag"``, ``""`` for dimensionless).
    description : str
        One line for tables and documentation.
    """

    name: str
    prior: Prior
    unit: str = ""
    description: str = ""


@dataclass(frozen=True)
class ParameterSpace:
    """An ordered set of :class:`Parameter`; maps named values to vectors and back.

    Vectors have the parameters along the last axis, in the order given here;
    every method broadcasts over leading axes (walkers, samples).

    Examples
    --------
    >>> space = ParameterSpace([Parameter("period_h", LogUniform(2.0, 50.0), "h"),
    ...                         Parameter("phase_rad", PeriodicUniform(), "rad")])
    >>> x = space.to_vector({"period_h": 6.0, "phase_rad": 1.0})
    >>> float(space.to_dict(x)["period_h"])
    6.0
    """

    parameters: tuple[Parameter, ...]

    def __init__(self, parameters: Sequence[Parameter]):
        params = tuple(parameters)
        if not params:
            raise TumbleError("a parameter space needs at least one parameter")
        names = [p.name for p in params]
        if len(set(names)) != len(names):
            raise TumbleError(f"duplicate parameter names in {names}")
        object.__setattr__(self, "parameters", params)
        object.__setattr__(self, "_plan", _LogPriorPlan(params))
        # the names and their positions, looked up on every likelihood call (the parameters never change)
        object.__setattr__(self, "_names", tuple(names))
        object.__setattr__(self, "_index", {n: i for i, n in enumerate(names)})

    # -- descriptors -------------------------------------------------------
    @property
    def ndim(self) -> int:
        """Number of parameters."""
        return len(self.parameters)

    @property
    def names(self) -> tuple[str, ...]:
        """Parameter names in vector order."""
        return self._names

    @property
    def units(self) -> tuple[str, ...]:
        """Parameter units in vector order."""
        return tuple(p.unit for p in self.parameters)

    @property
    def periods(self) -> np.ndarray:
        """Wrapping period of each parameter, ``nan`` for non-periodic ones, shape ``(ndim,)``."""
        return np.array([np.nan if p.prior.period is None else p.prior.period for p in self.parameters])

    @property
    def lows(self) -> np.ndarray:
        """Lower end of each prior's support, shape ``(ndim,)``."""
        return np.array([p.prior.low for p in self.parameters], dtype=float)

    @property
    def highs(self) -> np.ndarray:
        """Upper end of each prior's support, shape ``(ndim,)``."""
        return np.array([p.prior.high for p in self.parameters], dtype=float)

    @property
    def scales(self) -> np.ndarray:
        """Typical prior width of each parameter (its 16-84 % range), shape ``(ndim,)``."""
        return np.array([p.prior.scale() for p in self.parameters])

    def index(self, name: str) -> int:
        """Position of parameter ``name`` in the vector."""
        try:
            return self._index[name]
        except (KeyError, TypeError):
            raise TumbleError(f"unknown parameter {name!r}; known: {', '.join(self.names)}") from None

    # -- conversions -------------------------------------------------------
    def to_vector(self, values: Mapping[str, object]) -> np.ndarray:
        """Stack named values (scalars or broadcastable arrays) into ``(..., ndim)``."""
        missing = [n for n in self.names if n not in values]
        extra = [k for k in values if k not in self.names]
        if missing or extra:
            raise TumbleError(f"parameter values: missing {missing}, unknown {extra}")
        arrays = np.broadcast_arrays(*[np.asarray(values[n], dtype=float) for n in self.names])
        return np.stack(arrays, axis=-1)

    def to_dict(self, x) -> dict[str, np.ndarray]:
        """Split ``(..., ndim)`` vectors into ``{name: (...) array}``."""
        x = self._check(x)
        return {n: x[..., i] for i, n in enumerate(self.names)}

    def wrap(self, x) -> np.ndarray:
        """Fold periodic coordinates into their support; other coordinates are unchanged.

        Returns a new array when there is a periodic parameter, the input array otherwise.
        """
        x = self._check(x)
        if not any(p.prior.period is not None for p in self.parameters):
            return x
        x = np.array(x, dtype=float, copy=True)
        for i, p in enumerate(self.parameters):
            if p.prior.period is not None:
                x[..., i] = p.prior.wrap(x[..., i])
        return x

    def from_unit_cube(self, u) -> np.ndarray:
        """Map points of the unit hypercube ``(..., ndim)`` to parameters through each prior's inverse CDF."""
        u = self._check(u)
        return np.stack([p.prior.ppf(u[..., i]) for i, p in enumerate(self.parameters)], axis=-1)

    def to_unit_cube(self, x) -> np.ndarray:
        """Map parameters ``(..., ndim)`` to the unit hypercube through each prior's CDF."""
        x = self._check(x)
        return np.stack([p.prior.cdf(x[..., i]) for i, p in enumerate(self.parameters)], axis=-1)

    def log_prior(self, x) -> np.ndarray:
        """Joint log-prior density of ``(..., ndim)`` vectors, shape ``(...)``; ``-inf`` outside the support.

        The priors are independent, so this is the sum of the one-dimensional
        log-densities. Uniform, log-uniform, periodic-uniform and untruncated
        normal priors are evaluated together as array operations; other priors
        one by one. :meth:`log_prior_reference` is the plain sum used to test it.
        """
        return self._plan(self._check(x))

    def log_prior_reference(self, x) -> np.ndarray:
        """Slow reference for :meth:`log_prior`: the sum of each prior's ``log_pdf``."""
        x = self._check(x)
        total = np.zeros(x.shape[:-1])
        for i, p in enumerate(self.parameters):
            total = total + p.prior.log_pdf(x[..., i])
        return total

    def sample_prior(self, n: int, rng: np.random.Generator | int | None = None) -> np.ndarray:
        """``n`` independent draws from the prior, shape ``(n, ndim)`` (inverse-CDF sampling)."""
        rng = as_generator(rng)
        return self.from_unit_cube(rng.uniform(size=(int(n), self.ndim)))

    def _check(self, x) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        if x.ndim == 0 or x.shape[-1] != self.ndim:
            raise TumbleError(f"expected vectors with last axis {self.ndim} ({', '.join(self.names)}), got shape {x.shape}")
        return x


class _LogPriorPlan:
    """Vectorised evaluation of a sum of independent log-priors (see ParameterSpace.log_prior)."""

    def __init__(self, params: Sequence[Parameter]):
        const = 0.0
        bounded, lows, highs, logu, norm_i, norm_mu, norm_sd, other = [], [], [], [], [], [], [], []
        for i, p in enumerate(params):
            pr = p.prior
            if isinstance(pr, Uniform):
                const -= math.log(pr.high - pr.low)
                bounded.append(i), lows.append(pr.low), highs.append(pr.high)
            elif isinstance(pr, LogUniform):
                const -= math.log(math.log(pr.high / pr.low))
                bounded.append(i), lows.append(pr.low), highs.append(pr.high)
                logu.append(i)
            elif isinstance(pr, PeriodicUniform):
                const -= math.log(pr.period)
            elif isinstance(pr, Normal) and not pr._truncated:
                const += pr._log_norm
                norm_i.append(i), norm_mu.append(pr.mean), norm_sd.append(pr.sd)
            else:
                other.append((i, pr))
        self.const = const
        self.bounded = np.array(bounded, dtype=int)
        self.lows = np.array(lows, dtype=float)
        self.highs = np.array(highs, dtype=float)
        self.logu = np.array(logu, dtype=int)
        self.norm_i = np.array(norm_i, dtype=int)
        self.norm_mu = np.array(norm_mu, dtype=float)
        self.norm_sd = np.array(norm_sd, dtype=float)
        self.other = other

    def __call__(self, x: np.ndarray) -> np.ndarray:
        total = np.full(x.shape[:-1], self.const)
        inside = None
        if self.bounded.size:
            xb = x[..., self.bounded]
            inside = np.all((xb >= self.lows) & (xb <= self.highs), axis=-1)
            if self.logu.size:
                with np.errstate(divide="ignore", invalid="ignore"):
                    total = total - np.sum(np.log(np.abs(x[..., self.logu])), axis=-1)
        if self.norm_i.size:
            z = (x[..., self.norm_i] - self.norm_mu) / self.norm_sd
            total = total - 0.5 * np.sum(z * z, axis=-1)
        # a point outside a bounded support may sum +inf and -inf here (NaN); it is set to -inf below
        with np.errstate(invalid="ignore"):
            for i, pr in self.other:
                total = total + pr.log_pdf(x[..., i])
        if inside is not None:
            total = np.where(inside, total, -np.inf)
        return np.asarray(total, dtype=float)
