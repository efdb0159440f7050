"""Rotational damping: how long internal friction takes to end tumbling.

A body that rotates about any axis other than its axis of maximum moment of
inertia flexes periodically; anelastic dissipation turns rotational energy into
heat while the angular momentum is conserved, so the body drifts towards the
minimum-energy state at fixed angular momentum, principal-axis rotation about
the short axis (E/E0 -> 1). This module estimates the e-folding time of that
relaxation with honest uncertainties, and, for a classified sample, the
rigidity x quality factor (mu Q) that the split between tumblers and
principal-axis rotators implies.

Formulas (registry :data:`FORMULAS`; see ``docs/damping.md``):

- ``"burns-safronov"`` (Burns & Safronov 1973, MNRAS 165, 403):
  ``tau = mu Q / (rho K3^2 R^2 omega^3)``, SI units, ``omega = 2 pi / P``.
- ``"harris"`` (Harris 1994, Icarus 107, 209): ``tau = P^3 / (C^3 D^2)``,
  P in hours, D in km, tau in Gyr, C ~ 17. The constant absorbs mu Q, rho and
  K3^2, so this form carries no rigidity uncertainty.
- ``"sharma-burns-hui"`` (Sharma, Burns & Hui 2005, MNRAS 359, 79):
  ``T_d = D(h) mu Q / (rho a^2 Omega^3)`` for ellipsoids of revolution. The
  published coefficient D(h) ("a few times 10^2", shape dependent) is not
  tabulated here, so the caller must supply it (``shape_coefficient``).

Units: periods in hours, diameters in km, mu Q in Pa, densities in kg m^-3,
times in Gyr (1 Gyr = 10^9 Julian years of 365.25 d).

Nothing here prints; errors are :class:`DampingError` (a
:class:`tumble.exceptions.TumbleError`).
"""

from __future__ import annotations

import dataclasses
import math
import os
import warnings
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np

from tumble.exceptions import ConvergenceWarning, TumbleError

__all__ = [
    "DampingError",
    "SpinPeriod",
    "mean_spin_period_h",
    "mean_spin_period_reference_h",
    "spin_period_for_damping",
    "spin_period_for_verdict",
    "FORMULAS",
    "SECONDS_PER_GYR",
    "HARRIS_C",
    "DEFAULT_AGE_GYR",
    "Prior",
    "DEFAULT_MU_Q_PRIOR",
    "DEFAULT_DENSITY_PRIOR",
    "DEFAULT_K3_SQUARED_PRIOR",
    "DEFAULT_ALBEDO_PRIOR",
    "diameter_from_h",
    "tau_burns_safronov_gyr",
    "tau_harris_gyr",
    "tau_sharma_burns_hui_gyr",
    "damping_timescale",
    "period_for_timescale_h",
    "iso_tau_lines",
    "harris_c_equivalent",
    "DampingEstimate",
    "estimate_damping",
    "damping_for_verdict",
    "RelaxSample",
    "sample_from_table",
    "read_relax_sample",
    "RigidityLikelihood",
    "RigidityConstraint",
    "fit_rigidity",
]


class DampingError(TumbleError, ValueError):
    """Bad input to a damping estimate (non-positive period, missing diameter, bad sample table...)."""


#: Seconds in one Gyr (10^9 Julian years of 365.25 days of 86400 s; IAU Julian year).
SECONDS_PER_GYR = 1.0e9 * 365.25 * 86400.0

#: Harris (1994) constant C in tau[Gyr] = P[h]^3 / (C^3 D[km]^2) (from memory; widely quoted as 17).
HARRIS_C = 17.0

#: Default time since excitation: the age of the Solar System, Gyr.
DEFAULT_AGE_GYR = 4.5

#: mu Q (Pa) that, with rho = 2000 kg m^-3 and K3^2 = 0.03, reproduces Harris's C ~ 17 (C = 17.14).
HARRIS_MU_Q_PA = 5.0e11
HARRIS_DENSITY_KG_M3 = 2000.0
HARRIS_K3_SQUARED = 0.03

_M_PER_KM = 1000.0
_S_PER_H = 3600.0


# --------------------------------------------------------------------------------------------
# Priors
# --------------------------------------------------------------------------------------------

_PRIOR_KINDS = ("fixed", "normal", "lognormal", "loguniform", "uniform", "samples")


@dataclass(frozen=True)
class Prior:
    """A one-dimensional distribution for a positive physical input.

    Build with the class methods (:meth:`fixed`, :meth:`normal`, :meth:`lognormal`,
    :meth:`loguniform`, :meth:`uniform`, :meth:`from_samples`) rather than directly.

    Attributes
    ----------
    kind : str
        One of ``fixed``, ``normal`` (truncated to positive values), ``lognormal``,
        ``loguniform``, ``uniform``, ``samples`` (resampled with replacement).
    a, b : float
        Parameters: value / (mean, sigma) / (median, sigma in dex) / (low, high) /
        (low, high) / unused, by kind.
    unit : str
        Unit of the quantity (``"h"``, ``"km"``, ``"Pa"``, ``"kg m^-3"``, ``""``).
    note : str
        Where the prior comes from (user value, default and its source).
    samples : numpy.ndarray or None
        The draws for ``kind == "samples"``, shape (n,).
    """

    kind: str
    a: float = math.nan
    b: float = math.nan
    unit: str = ""
    note: str = ""
    samples: np.ndarray | None = field(default=None, repr=False, compare=False)

    def __post_init__(self):
        if self.kind not in _PRIOR_KINDS:
            raise DampingError(f"unknown prior kind {self.kind!r}; expected one of {', '.join(_PRIOR_KINDS)}")

    # -- constructors -------------------------------------------------------------------------
    @classmethod
    def fixed(cls, value: float, unit: str = "", note: str = "user value") -> "Prior":
        """A point mass at ``value`` (> 0)."""
        value = _positive(value, "fixed value")
        return cls("fixed", value, math.nan, unit, note)

    @classmethod
    def normal(cls, mean: float, sigma: float, unit: str = "", note: str = "user value") -> "Prior":
        """Normal(mean, sigma) truncated to positive values (mean > 0, sigma >= 0)."""
        mean = _positive(mean, "mean")
        sigma = float(sigma)
        if not np.isfinite(sigma) or sigma < 0:
            raise DampingError(f"normal prior: sigma must be finite and >= 0, got {sigma}")
        if sigma == 0:
            return cls.fixed(mean, unit, note)
        if mean < 0.5 * sigma:
            raise DampingError(f"normal prior: mean {mean} is below half its sigma {sigma}; "
                               "give the uncertainty as samples or a log-normal instead")
        return cls("normal", mean, sigma, unit, note)

    @classmethod
    def lognormal(cls, median: float, sigma_dex: float, unit: str = "", note: str = "") -> "Prior":
        """log10(x) ~ Normal(log10(median), sigma_dex)."""
        median = _positive(median, "median")
        sigma_dex = float(sigma_dex)
        if not np.isfinite(sigma_dex) or sigma_dex < 0:
            raise DampingError(f"log-normal prior: sigma_dex must be finite and >= 0, got {sigma_dex}")
        if sigma_dex == 0:
            return cls.fixed(median, unit, note)
        return cls("lognormal", median, sigma_dex, unit, note)

    @classmethod
    def loguniform(cls, low: float, high: float, unit: str = "", note: str = "") -> "Prior":
        """log10(x) uniform between log10(low) and log10(high)."""
        low, high = _positive(low, "low"), _positive(high, "high")
        if not high > low:
            raise DampingError(f"log-uniform prior: need high > low, got {low}, {high}")
        return cls("loguniform", low, high, unit, note)

    @classmethod
    def uniform(cls, low: float, high: float, unit: str = "", note: str = "") -> "Prior":
        """x uniform between low and high (0 < low < high)."""
        low, high = _positive(low, "low"), _positive(high, "high")
        if not high > low:
            raise DampingError(f"uniform prior: need high > low, got {low}, {high}")
        return cls("uniform", low, high, unit, note)

    @classmethod
    def from_samples(cls, samples, unit: str = "", note: str = "posterior samples") -> "Prior":
        """Resample (with replacement) from given positive draws, e.g. a period posterior."""
        s = np.asarray(samples, dtype=float).ravel()
        if s.size == 0:
            raise DampingError("no samples given")
        if not np.all(np.isfinite(s)) or np.any(s <= 0):
            raise DampingError("samples must be finite and positive")
        if s.size == 1:
            return cls.fixed(float(s[0]), unit, note)
        s = s.copy()
        s.setflags(write=False)
        return cls("samples", float(np.median(s)), math.nan, unit, note, s)

    # -- use ----------------------------------------------------------------------------------
    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` independent draws, shape (n,)."""
        k = self.kind
        if k == "fixed":
            return np.full(n, self.a)
        if k == "lognormal":
            return self.a * 10.0 ** (self.b * rng.standard_normal(n))
        if k == "loguniform":
            return 10.0 ** rng.uniform(math.log10(self.a), math.log10(self.b), n)
        if k == "uniform":
            return rng.uniform(self.a, self.b, n)
        if k == "samples":
            return rng.choice(self.samples, size=n, replace=True)
        # truncated normal: redraw the non-positive ones (mean >= sigma/2, so >= 69% are kept per round)
        x = self.a + self.b * rng.standard_normal(n)
        bad = x <= 0
        while np.any(bad):
            x[bad] = self.a + self.b * rng.standard_normal(int(bad.sum()))
            bad = x <= 0
        return x

    @property
    def central(self) -> float:
        """A representative value: the value, mean, median, geometric or arithmetic midpoint."""
        if self.kind == "loguniform":
            return math.sqrt(self.a * self.b)
        if self.kind == "uniform":
            return 0.5 * (self.a + self.b)
        return self.a

    def describe(self) -> str:
        """One line, e.g. ``log-normal, median 5e+11 Pa, sigma 1 dex (default: ...)``."""
        u = f" {self.unit}" if self.unit else ""
        k = self.kind
        if k == "fixed":
            text = f"fixed at {self.a:.6g}{u}"
        elif k == "normal":
            text = f"normal {self.a:.6g} +/- {self.b:.3g}{u} (truncated at 0)"
        elif k == "lognormal":
            text = f"log-normal, median {self.a:.3g}{u}, sigma {self.b:.3g} dex"
        elif k == "loguniform":
            text = f"log-uniform {self.a:.3g} .. {self.b:.3g}{u}"
        elif k == "uniform":
            text = f"uniform {self.a:.4g} .. {self.b:.4g}{u}"
        else:
            n = self.samples.size
            lo, hi = np.percentile(self.samples, [15.865, 84.135])
            text = f"{n} samples, median {self.a:.6g}{u}, 68% {lo:.6g} .. {hi:.6g}{u}"
        return f"{text} ({self.note})" if self.note else text

    def to_dict(self) -> dict:
        """JSON-ready description (samples are summarised, not listed)."""
        out = {"kind": self.kind, "unit": self.unit, "note": self.note, "description": self.describe()}
        if self.kind == "fixed":
            out["value"] = self.a
        elif self.kind == "normal":
            out.update(mean=self.a, sigma=self.b)
        elif self.kind == "lognormal":
            out.update(median=self.a, sigma_dex=self.b)
        elif self.kind in ("loguniform", "uniform"):
            out.update(low=self.a, high=self.b)
        else:
            out.update(n_samples=int(self.samples.size), median=self.a)
        return out


def _positive(value, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise DampingError(f"{what}: {value!r} is not a number") from None
    if not np.isfinite(v) or v <= 0:
        raise DampingError(f"{what} must be finite and positive, got {value!r}")
    return v


#: Default mu Q prior: log-normal centred on the value implied by Harris's C ~ 17 (5e11 Pa with
#: rho = 2000 kg m^-3 and K3^2 = 0.03; Harris 1994, constants from memory), 1 dex wide, so the 95%
#: range 5e9 .. 5e13 Pa reaches down towards the ~4e9 Pa fitted for rubble piles in recent work.
DEFAULT_MU_Q_PRIOR = Prior.lognormal(
    HARRIS_MU_Q_PA, 1.0, "Pa",
    "default: centred on the Harris (1994) calibration, 1 dex wide; mu Q is uncertain by orders of magnitude")

#: Default bulk density prior: uniform 1000 .. 3000 kg m^-3 (common practice for small asteroids).
DEFAULT_DENSITY_PRIOR = Prior.uniform(1000.0, 3000.0, "kg m^-3", "default: typical small-asteroid bulk densities")

#: Default K3^2 prior: log-uniform over the range quoted for Burns & Safronov (1973),
#: ~0.01 (nearly spherical) to ~0.1 (very elongated) (from memory).
DEFAULT_K3_SQUARED_PRIOR = Prior.loguniform(
    0.01, 0.1, "", "default: Burns & Safronov (1973) range, 0.01 near-spherical to 0.1 elongated")

#: Default geometric albedo prior: log-normal, median 0.14 (a typical near-Earth-asteroid mean,
#: from memory), 0.25 dex, so the 95% range 0.044 .. 0.44 spans dark C-like to bright E-like surfaces.
DEFAULT_ALBEDO_PRIOR = Prior.lognormal(0.14, 0.25, "", "default: typical NEA albedo, 0.25 dex")


def _as_prior(value, default: Prior | None, unit: str, what: str) -> Prior:
    """None -> default; Prior -> as is; scalar -> fixed; array of > 1 -> samples."""
    if value is None:
        if default is None:
            raise DampingError(f"{what} is required")
        return default
    if isinstance(value, Prior):
        return value
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise DampingError(f"{what}: {value!r} is not a number or an array of numbers") from None
    if arr.ndim == 0 or arr.size == 1:
        return Prior.fixed(float(arr.ravel()[0]), unit, "user value")
    return Prior.from_samples(arr, unit, "user samples")


# --------------------------------------------------------------------------------------------
# Kernels
# --------------------------------------------------------------------------------------------

def diameter_from_h(h_mag, albedo) -> np.ndarray:
    """Diameter (km) from absolute magnitude H and geometric albedo p_V.

    ``D = 1329 km / sqrt(p_V) * 10^(-H/5)`` (Pravec & Harris 2007, Icarus 190, 250, Appendix A).

    Parameters
    ----------
    h_mag : float or array_like
        Absolute magnitude H (V band), mag.
    albedo : float or array_like
        Geometric albedo p_V, dimensionless, > 0.

    Returns
    -------
    numpy.ndarray
        Diameter in km, broadcast shape of the inputs.
    """
    h = np.asarray(h_mag, dtype=float)
    p = np.asarray(albedo, dtype=float)
    if np.any(~(p > 0)):
        raise DampingError("albedo must be positive")
    return 1329.0 / np.sqrt(p) * 10.0 ** (-h / 5.0)


def tau_burns_safronov_gyr(period_h, diameter_km, mu_q_pa, density_kg_m3, k3_squared) -> np.ndarray:
    """Burns & Safronov (1973) damping time, Gyr.

    ``tau = mu Q / (rho K3^2 R^2 omega^3)`` with ``R = D/2`` and ``omega = 2 pi / P``
    (Burns & Safronov 1973, MNRAS 165, 403; the form as given by Pravec, Harris &
    Michalowski 2002, Asteroids III).

    Parameters
    ----------
    period_h : array_like
        Rotation period, hours.
    diameter_km : array_like
        Mean diameter, km.
    mu_q_pa : array_like
        Rigidity times quality factor, Pa.
    density_kg_m3 : array_like
        Bulk density, kg m^-3.
    k3_squared : array_like
        Shape factor K3^2, dimensionless (~0.01 near-spherical to ~0.1 elongated).

    Returns
    -------
    numpy.ndarray
        Damping time in Gyr, broadcast shape of the inputs.
    """
    p_s = np.asarray(period_h, dtype=float) * _S_PER_H
    r_m = 0.5 * _M_PER_KM * np.asarray(diameter_km, dtype=float)
    omega = 2.0 * np.pi / p_s
    tau_s = np.asarray(mu_q_pa, dtype=float) / (
        np.asarray(density_kg_m3, dtype=float) * np.asarray(k3_squared, dtype=float) * r_m**2 * omega**3)
    return tau_s / SECONDS_PER_GYR


def tau_harris_gyr(period_h, diameter_km, c: float = HARRIS_C) -> np.ndarray:
    """Harris (1994) damping time, Gyr: ``tau = P^3 / (C^3 D^2)``, P in h, D in km, C ~ 17.

    Harris (1994, Icarus 107, 209); C = 17 is the widely quoted value (from memory).
    The constant absorbs mu Q ~ 5e11 Pa, rho ~ 2000 kg m^-3 and K3^2 ~ 0.03.
    """
    p = np.asarray(period_h, dtype=float)
    d = np.asarray(diameter_km, dtype=float)
    return p**3 / (float(c) ** 3 * d**2)


def tau_sharma_burns_hui_gyr(period_h, diameter_km, mu_q_pa, density_kg_m3, shape_coefficient) -> np.ndarray:
    """Sharma, Burns & Hui (2005) damping time for ellipsoids of revolution, Gyr.

    ``T_d = D(h) mu Q / (rho a^2 Omega^3)`` (Sharma, Burns & Hui 2005, MNRAS 359, 79,
    abstract), with ``a = D/2`` and ``Omega = 2 pi / P``. ``D(h)`` is a dimensionless,
    shape-dependent coefficient "of the order of a few times 10^2"; its dependence on the
    aspect ratio h is not reproduced here, so the caller supplies it.
    """
    # Same dimensional form as Burns & Safronov with K3^2 -> 1 / D(h).
    return tau_burns_safronov_gyr(period_h, diameter_km, mu_q_pa, density_kg_m3,
                                  1.0 / np.asarray(shape_coefficient, dtype=float))


@dataclass(frozen=True)
class _Formula:
    name: str
    citation: str
    text: str
    params: tuple[str, ...]
    kernel: Callable[..., np.ndarray]


#: Registry of damping-time formulas: name -> (citation, formula text, parameter names, kernel).
FORMULAS: dict[str, _Formula] = {
    "burns-safronov": _Formula(
        "burns-safronov", "Burns & Safronov (1973)", "tau = mu Q / (rho K3^2 R^2 omega^3)",
        ("mu_q_pa", "density_kg_m3", "k3_squared"), tau_burns_safronov_gyr),
    "harris": _Formula(
        "harris", "Harris (1994)", "tau[Gyr] = P[h]^3 / (C^3 D[km]^2)", ("c",), tau_harris_gyr),
    "sharma-burns-hui": _Formula(
        "sharma-burns-hui", "Sharma, Burns & Hui (2005)", "T_d = D(h) mu Q / (rho a^2 Omega^3)",
        ("mu_q_pa", "density_kg_m3", "shape_coefficient"), tau_sharma_burns_hui_gyr),
}


def _formula(name: str) -> _Formula:
    try:
        return FORMULAS[name]
    except KeyError:
        raise DampingError(f"unknown formula {name!r}; expected one of {', '.join(FORMULAS)}") from None


def damping_timescale(period_h, diameter_km, formula: str = "burns-safronov", *,
                      mu_q_pa=HARRIS_MU_Q_PA, density_kg_m3=HARRIS_DENSITY_KG_M3,
                      k3_squared=HARRIS_K3_SQUARED, c: float = HARRIS_C,
                      shape_coefficient=None) -> np.ndarray:
    """Damping time (Gyr) by the named formula, vectorised over every input.

    Parameters
    ----------
    period_h, diameter_km : array_like
        Rotation period (h) and diameter (km).
    formula : {"burns-safronov", "harris", "sharma-burns-hui"}
        See :data:`FORMULAS`.
    mu_q_pa, density_kg_m3, k3_squared : array_like
        Physical parameters (Pa, kg m^-3, dimensionless) of the Burns & Safronov and
        Sharma et al. forms; defaults are the Harris calibration (5e11 Pa, 2000, 0.03).
    c : float
        Harris constant (default 17).
    shape_coefficient : array_like
        D(h) of Sharma, Burns & Hui (2005); required for that formula.

    Returns
    -------
    numpy.ndarray
        Damping time, Gyr.
    """
    f = _formula(formula)
    if f.name == "sharma-burns-hui" and shape_coefficient is None:
        raise DampingError("the sharma-burns-hui formula needs its shape coefficient D(h) "
                           "(a few times 10^2; not tabulated here)")
    given = dict(mu_q_pa=mu_q_pa, density_kg_m3=density_kg_m3, k3_squared=k3_squared, c=c,
                 shape_coefficient=shape_coefficient)
    return f.kernel(period_h, diameter_km, *(given[name] for name in f.params))


def _reference_timescale_gyr(period_h: float, diameter_km: float, formula: str, *,
                             mu_q_pa: float = HARRIS_MU_Q_PA, density_kg_m3: float = HARRIS_DENSITY_KG_M3,
                             k3_squared: float = HARRIS_K3_SQUARED, c: float = HARRIS_C,
                             shape_coefficient: float | None = None) -> float:
    """Slow scalar reference for :func:`damping_timescale` (plain ``math``; used by the tests)."""
    if formula == "harris":
        return period_h * period_h * period_h / (c * c * c * diameter_km * diameter_km)
    if formula == "sharma-burns-hui":
        k3_squared = 1.0 / shape_coefficient
    seconds = period_h * 60.0 * 60.0
    omega = 2.0 * math.pi / seconds
    radius_m = diameter_km * 1000.0 / 2.0
    tau_seconds = mu_q_pa / (density_kg_m3 * k3_squared * radius_m * radius_m * omega * omega * omega)
    seconds_per_year = 365.25 * 24.0 * 60.0 * 60.0
    return tau_seconds / seconds_per_year / 1.0e9


def harris_c_equivalent(mu_q_pa=HARRIS_MU_Q_PA, density_kg_m3=HARRIS_DENSITY_KG_M3,
                        k3_squared=HARRIS_K3_SQUARED) -> np.ndarray:
    """The Harris constant C that makes ``P^3/(C^3 D^2)`` equal Burns & Safronov for given constants.

    From ``tau = mu Q P^3 / (2 pi^3 rho K3^2 D^2)`` (Burns & Safronov 1973 with R = D/2,
    omega = 2 pi/P) converted to h, km and Gyr. 5e11 Pa, 2000 kg m^-3, 0.03 give C = 17.14.
    """
    c3 = (2.0 * np.pi**3 * np.asarray(density_kg_m3, float) * np.asarray(k3_squared, float)
          * _M_PER_KM**2 * SECONDS_PER_GYR / (np.asarray(mu_q_pa, float) * _S_PER_H**3))
    return np.cbrt(c3)


def period_for_timescale_h(tau_gyr, diameter_km, formula: str = "burns-safronov", **params) -> np.ndarray:
    """Rotation period (h) at which the damping time equals ``tau_gyr`` for a body of ``diameter_km``.

    Every formula here has ``tau ∝ P^3``, so ``P = P_ref (tau / tau_ref)^(1/3)`` exactly,
    with ``tau_ref`` the time at ``P_ref = 1 h``. Keyword parameters as in :func:`damping_timescale`.
    """
    tau = np.asarray(tau_gyr, dtype=float)
    if np.any(~(tau > 0)):
        raise DampingError("tau_gyr must be positive")
    tau_at_1h = damping_timescale(1.0, diameter_km, formula, **params)
    return np.cbrt(tau / tau_at_1h)


def iso_tau_lines(tau_gyr, diameter_km=None, formula: str = "burns-safronov", **params):
    """Lines of constant damping time in the period-diameter plane, for plotting.

    Above a line (longer periods at a given diameter) damping takes longer than that
    line's time; a tumbler there need not have been excited recently.

    Parameters
    ----------
    tau_gyr : float or array_like, shape (k,)
        Damping times of the lines, Gyr (e.g. ``[0.0045, 0.045, 0.45, 4.5]``).
    diameter_km : array_like, shape (n,), optional
        Diameters at which to evaluate (default 200 log-spaced values, 0.01 .. 100 km).
    formula, **params
        As in :func:`damping_timescale`.

    Returns
    -------
    diameter_km : numpy.ndarray, shape (n,)
    period_h : numpy.ndarray, shape (k, n)
        ``period_h[j, i]`` is the period at which ``tau(P, D_i) = tau_gyr[j]``.
    """
    d = np.logspace(-2, 2, 200) if diameter_km is None else np.asarray(diameter_km, dtype=float).ravel()
    if np.any(~(d > 0)):
        raise DampingError("diameters must be positive")
    tau = np.atleast_1d(np.asarray(tau_gyr, dtype=float)).ravel()
    return d, period_for_timescale_h(tau[:, None], d[None, :], formula, **params)


# --------------------------------------------------------------------------------------------
# Monte Carlo estimate for one body
# --------------------------------------------------------------------------------------------

def _rng(rng) -> np.random.Generator:
    return rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)


def _q(x: np.ndarray, *pct: float) -> list[float]:
    return [float(v) for v in np.percentile(x, pct)]


@dataclass(frozen=True)
class DampingEstimate:
    """Damping time of one body, with its uncertainty propagated by Monte Carlo.

    Attributes
    ----------
    formula : str
        Key of :data:`FORMULAS` used.
    formula_text : str
        The formula and its citation.
    tau_gyr : float
        Median damping time, Gyr.
    tau_gyr_lo, tau_gyr_hi : float
        Central 68% interval (15.9th and 84.1th percentiles), Gyr.
    tau_gyr_lo95, tau_gyr_hi95 : float
        Central 95% interval (2.5th and 97.5th percentiles), Gyr.
    age_gyr : float
        Assumed time since the excitation, Gyr.
    p_tau_exceeds_age : float
        Monte Carlo probability that the damping time exceeds ``age_gyr``.
    period_h : float
        Median of the period draws, h.
    diameter_km, diameter_km_lo, diameter_km_hi : float
        Median and 68% interval of the diameter draws, km.
    diameter_source : str
        ``"given"`` or ``"H and albedo"``.
    priors : tuple of (str, Prior)
        Every input and the distribution it was drawn from, in order.
    assumptions : tuple of str
        Plain-language statements of what the estimate assumes.
    n_samples : int
        Number of Monte Carlo draws.
    tau_gyr_samples : numpy.ndarray, shape (n_samples,)
        The draws of the damping time, Gyr.
    """

    formula: str
    formula_text: str
    tau_gyr: float
    tau_gyr_lo: float
    tau_gyr_hi: float
    tau_gyr_lo95: float
    tau_gyr_hi95: float
    age_gyr: float
    p_tau_exceeds_age: float
    period_h: float
    diameter_km: float
    diameter_km_lo: float
    diameter_km_hi: float
    diameter_source: str
    priors: tuple[tuple[str, Prior], ...]
    assumptions: tuple[str, ...]
    n_samples: int
    tau_gyr_samples: np.ndarray = field(repr=False, compare=False)

    def prior(self, name: str) -> Prior | None:
        """The prior used for input ``name`` (e.g. ``"mu_q_pa"``), or None."""
        for k, p in self.priors:
            if k == name:
                return p
        return None

    def implication(self) -> str:
        """One sentence on what the estimate says about a tumbler (or a PA rotator)."""
        p = self.p_tau_exceeds_age
        t = f"{self.age_gyr:.3g} Gyr"
        how = "; Harris calibration, mu Q fixed" if self.formula == "harris" else ""
        if p >= 0.9:
            return (f"Damping very likely takes longer than {t} (P(tau > age) = {p:.2f}{how}): tumbling, "
                    f"if seen, can be primordial or old; a principal-axis state then suggests the body has "
                    f"not been excited since it formed or was last reshaped.")
        if p <= 0.1:
            return (f"Damping very likely ends within {t} (P(tau > age) = {p:.2f}{how}): tumbling, if "
                    f"seen, points to an excitation within the last few damping times (tau ~ "
                    f"{self.tau_gyr:.2g} Gyr; collision, planetary encounter or YORP spin-down).")
        parts = [] if self.formula == "harris" else ["rigidity (mu Q)"]
        if self.diameter_km_hi > self.diameter_km_lo:
            parts.append("size")
        if self.prior("period_h") is not None and self.prior("period_h").kind != "fixed":
            parts.append("period")
        if len(parts) > 1:
            why = ", ".join(parts[:-1]) + " and " + parts[-1] + " uncertainties leave"
        else:
            why = (parts[0] if parts else "input") + " uncertainty leaves"
        if p >= 0.5:
            return (f"Damping more likely than not takes longer than {t} (P(tau > age) = {p:.2f}{how}), but "
                    f"the {why} a recent excitation possible.")
        return (f"Damping more likely than not ends within {t} (P(tau > age) = {p:.2f}{how}), but the "
                f"{why} an old, undamped tumbling state possible.")

    def to_dict(self) -> dict:
        """JSON-ready summary (the Monte Carlo draws are left out)."""
        return {
            "tau_gyr": self.tau_gyr,
            "tau_gyr_lo": self.tau_gyr_lo,
            "tau_gyr_hi": self.tau_gyr_hi,
            "tau_gyr_lo95": self.tau_gyr_lo95,
            "tau_gyr_hi95": self.tau_gyr_hi95,
            "age_gyr": self.age_gyr,
            "p_tau_exceeds_age": self.p_tau_exceeds_age,
            "period_h": self.period_h,
            "diameter_km": self.diameter_km,
            "diameter_km_lo": self.diameter_km_lo,
            "diameter_km_hi": self.diameter_km_hi,
            "diameter_source": self.diameter_source,
            "formula": self.formula,
            "formula_text": self.formula_text,
            "priors": {k: p.to_dict() for k, p in self.priors},
            "assumptions": list(self.assumptions),
            "implication": self.implication(),
            "n_samples": self.n_samples,
        }


def estimate_damping(period_h, diameter_km=None, *, period_h_err: float | None = None,
                     diameter_km_err: float | None = None, h_mag=None, h_mag_err: float = 0.0,
                     albedo=None, formula: str = "burns-safronov", mu_q_pa=None, density_kg_m3=None,
                     k3_squared=None, shape_coefficient=None, harris_c: float = HARRIS_C,
                     age_gyr: float = DEFAULT_AGE_GYR, n_samples: int = 20000,
                     rng: np.random.Generator | int | None = None) -> DampingEstimate:
    """Monte Carlo damping-time estimate for one body.

    Every input may be a number (held fixed), an array of posterior samples (resampled),
    or a :class:`Prior`; the period also takes ``period_h_err`` (truncated normal), the
    diameter ``diameter_km_err`` (truncated normal), and H ``h_mag_err`` (normal, mag).
    The draws are independent; the damping time of each draw is computed with the chosen
    formula and summarised by its median, 68% and 95% central intervals and the fraction
    exceeding ``age_gyr``.

    Parameters
    ----------
    period_h : float, array_like or Prior
        Rotation period, h (for a tumbler, the period the caller judges closest to the
        spin rate, e.g. the dominant light-curve period).
    diameter_km : float, array_like or Prior, optional
        Diameter, km. Give this or ``h_mag``.
    period_h_err, diameter_km_err : float, optional
        1-sigma uncertainties (h, km) for scalar inputs.
    h_mag : float, array_like or Prior, optional
        Absolute magnitude H, mag; D follows from Pravec & Harris (2007).
    h_mag_err : float
        1-sigma uncertainty of H (mag, normal), default 0.
    albedo : float, array_like or Prior, optional
        Geometric albedo; default :data:`DEFAULT_ALBEDO_PRIOR`.
    formula : {"burns-safronov", "harris", "sharma-burns-hui"}
        Default ``"burns-safronov"`` with the default priors below.
    mu_q_pa : float, array_like or Prior, optional
        mu Q, Pa; default :data:`DEFAULT_MU_Q_PRIOR` (not used by ``harris``).
    density_kg_m3 : float, array_like or Prior, optional
        Bulk density, kg m^-3; default :data:`DEFAULT_DENSITY_PRIOR` (not used by ``harris``).
    k3_squared : float, array_like or Prior, optional
        Burns & Safronov shape factor; default :data:`DEFAULT_K3_SQUARED_PRIOR`.
    shape_coefficient : float, array_like or Prior, optional
        D(h) of Sharma, Burns & Hui (2005); required for that formula.
    harris_c : float
        Harris constant, default 17.
    age_gyr : float
        Time since excitation to compare with, Gyr (default 4.5, the Solar System's age).
    n_samples : int
        Monte Carlo draws (default 20000).
    rng : numpy.random.Generator, int or None
        Random generator or seed.

    Returns
    -------
    DampingEstimate
    """
    f = _formula(formula)
    gen = _rng(rng)
    n = int(n_samples)
    if n < 100:
        raise DampingError(f"n_samples must be at least 100, got {n_samples}")
    age_gyr = _positive(age_gyr, "age_gyr")

    priors: list[tuple[str, Prior]] = []
    assumptions: list[str] = []

    for name, value, err in (("period_h", period_h, period_h_err), ("diameter_km", diameter_km, diameter_km_err)):
        if err and (isinstance(value, Prior) or np.ndim(value) > 0):
            raise DampingError(f"{name}_err goes with a single {name} value, not with samples or a prior")

    # period
    if isinstance(period_h, Prior):
        p_prior = period_h
    elif np.ndim(period_h) == 0 and period_h_err:
        p_prior = Prior.normal(_positive(period_h, "period_h"), period_h_err, "h", "user value")
    else:
        if np.ndim(period_h) == 0:
            _positive(period_h, "period_h")
        p_prior = _as_prior(period_h, None, "h", "period_h")
    priors.append(("period_h", p_prior))

    # diameter
    if diameter_km is not None and h_mag is not None:
        raise DampingError("give either the diameter or H (with an albedo), not both")
    if albedo is not None and h_mag is None:
        raise DampingError("an albedo goes with H, not with a given diameter")
    if diameter_km is not None:
        if isinstance(diameter_km, Prior):
            d_prior = diameter_km
        elif np.ndim(diameter_km) == 0 and diameter_km_err:
            d_prior = Prior.normal(_positive(diameter_km, "diameter_km"), diameter_km_err, "km", "user value")
        else:
            if np.ndim(diameter_km) == 0:
                _positive(diameter_km, "diameter_km")
            d_prior = _as_prior(diameter_km, None, "km", "diameter_km")
        priors.append(("diameter_km", d_prior))
        d_draws = d_prior.draw(gen, n)
        source = "given"
    elif h_mag is not None:
        if isinstance(h_mag, Prior):
            raise DampingError("give H as a number or samples, with h_mag_err for its uncertainty")
        h_arr = np.asarray(h_mag, dtype=float)
        if not np.all(np.isfinite(h_arr)):
            raise DampingError(f"h_mag must be finite, got {h_mag!r}")
        a_prior = _as_prior(albedo, DEFAULT_ALBEDO_PRIOR, "", "albedo")
        if h_arr.size > 1:
            if h_mag_err:
                raise DampingError("h_mag_err goes with a single H value, not with samples")
            h_draws = gen.choice(h_arr.ravel(), size=n, replace=True)
            h_desc = Prior("samples", float(np.median(h_arr)), math.nan, "mag", "user samples",
                           np.asarray(h_arr, float).ravel())
        else:
            h0 = float(h_arr.ravel()[0])
            err = float(h_mag_err or 0.0)
            if not np.isfinite(err) or err < 0:
                raise DampingError(f"h_mag_err must be >= 0, got {h_mag_err!r}")
            h_draws = h0 + err * gen.standard_normal(n)
            # H is a magnitude and may be negative, so describe it without the positive-value checks
            h_desc = Prior("normal" if err > 0 else "fixed", h0, err if err > 0 else math.nan, "mag",
                           "user value")
        priors.append(("h_mag", h_desc))
        priors.append(("albedo", a_prior))
        d_draws = diameter_from_h(h_draws, a_prior.draw(gen, n))
        source = "H and albedo"
        assumptions.append("diameter from H and geometric albedo, D = 1329 km / sqrt(p_V) 10^(-H/5) "
                           "(Pravec & Harris 2007)")
    else:
        raise DampingError("a diameter (km) or an absolute magnitude H is required")

    p_draws = p_prior.draw(gen, n)

    if f.name == "harris":
        for name, val in (("mu_q_pa", mu_q_pa), ("density_kg_m3", density_kg_m3), ("k3_squared", k3_squared),
                          ("shape_coefficient", shape_coefficient)):
            if val is not None:
                raise DampingError(f"the Harris form has no {name} parameter (its constant C absorbs it); "
                                   "use the burns-safronov formula to vary it")
        c = _positive(harris_c, "harris_c")
        priors.append(("c", Prior.fixed(c, "", "Harris (1994) constant" if c == HARRIS_C else "user value")))
        tau = tau_harris_gyr(p_draws, d_draws, c)
        assumptions.append(f"Harris (1994) form with C = {c:g}: mu Q, density and shape are fixed at its "
                           "calibration, so the interval reflects only the period and size uncertainties, "
                           "not the orders-of-magnitude uncertainty of mu Q")
    else:
        mq = _as_prior(mu_q_pa, DEFAULT_MU_Q_PRIOR, "Pa", "mu_q_pa")
        rho = _as_prior(density_kg_m3, DEFAULT_DENSITY_PRIOR, "kg m^-3", "density_kg_m3")
        priors += [("mu_q_pa", mq), ("density_kg_m3", rho)]
        mq_draws, rho_draws = mq.draw(gen, n), rho.draw(gen, n)
        if f.name == "burns-safronov":
            if shape_coefficient is not None:
                raise DampingError("shape_coefficient belongs to the sharma-burns-hui formula")
            k3 = _as_prior(k3_squared, DEFAULT_K3_SQUARED_PRIOR, "", "k3_squared")
            priors.append(("k3_squared", k3))
            tau = tau_burns_safronov_gyr(p_draws, d_draws, mq_draws, rho_draws, k3.draw(gen, n))
        else:
            if k3_squared is not None:
                raise DampingError("k3_squared belongs to the burns-safronov formula")
            if shape_coefficient is None:
                raise DampingError("the sharma-burns-hui formula needs its shape coefficient D(h) "
                                   "(a few times 10^2 by their abstract; not tabulated here)")
            sc = _as_prior(shape_coefficient, None, "", "shape_coefficient")
            priors.append(("shape_coefficient", sc))
            tau = tau_sharma_burns_hui_gyr(p_draws, d_draws, mq_draws, rho_draws, sc.draw(gen, n))
        assumptions.append("homogeneous body with a constant Q (frequency-independent anelastic "
                           "dissipation); R = D/2 and omega = 2 pi / P")
        assumptions.append(f"mu Q: {mq.describe()}")
    assumptions.append("all inputs drawn independently")
    assumptions.append("the damping time is an e-folding time of the excitation; near-separatrix states "
                       "and small nutation angles can relax more slowly (Efroimsky 2001; Efroimsky & "
                       "Lazarian 2000)")

    lo95, lo, med, hi, hi95 = _q(tau, 2.5, 15.865, 50.0, 84.135, 97.5)
    dlo, dmed, dhi = _q(d_draws, 15.865, 50.0, 84.135)
    tau = np.asarray(tau, dtype=float)
    tau.setflags(write=False)
    return DampingEstimate(
        formula=f.name,
        formula_text=f"{f.text} ({f.citation})",
        tau_gyr=med, tau_gyr_lo=lo, tau_gyr_hi=hi, tau_gyr_lo95=lo95, tau_gyr_hi95=hi95,
        age_gyr=age_gyr, p_tau_exceeds_age=float(np.mean(tau > age_gyr)),
        period_h=float(np.median(p_draws)),
        diameter_km=dmed, diameter_km_lo=dlo, diameter_km_hi=dhi, diameter_source=source,
        priors=tuple(priors), assumptions=tuple(assumptions), n_samples=n, tau_gyr_samples=tau,
    )


def damping_for_verdict(period_h_samples, diameter_km=None, h_mag=None, albedo=None, *,
                        formula: str = "burns-safronov", age_gyr: float = DEFAULT_AGE_GYR,
                        n_samples: int = 20000, rng: np.random.Generator | int | None = None,
                        **kwargs) -> DampingEstimate:
    """Damping estimate from a verdict's period posterior (for ``tumble classify``).

    Parameters
    ----------
    period_h_samples : array_like, shape (m,)
        Posterior draws of the period, h (for NPA, the caller's choice of period closest
        to the spin rate, e.g. the dominant light-curve period).
    diameter_km, h_mag, albedo
        Size: a diameter (km) or H with an optional albedo (default prior otherwise).
    formula, age_gyr, n_samples, rng, **kwargs
        Passed to :func:`estimate_damping`.

    Returns
    -------
    DampingEstimate
    """
    return estimate_damping(period_h_samples, diameter_km, h_mag=h_mag, albedo=albedo, formula=formula,
                            age_gyr=age_gyr, n_samples=n_samples, rng=rng, **kwargs)


# --------------------------------------------------------------------------------------------
# Sample level: the rigidity constraint from where tumblers and PA rotators sit
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class RelaxSample:
    """Classified objects usable for the rigidity fit.

    Attributes
    ----------
    object_id : numpy.ndarray of str, shape (n,)
    period_h : numpy.ndarray, shape (n,)
        Period used for the spin rate, h.
    diameter_km : numpy.ndarray, shape (n,)
    is_npa : numpy.ndarray of bool, shape (n,)
        True for tumblers, False for PA rotators.
    n_skipped : tuple of (str, int)
        Rows left out, by reason.
    notes : tuple of str
        How periods and diameters were chosen.
    """

    object_id: np.ndarray
    period_h: np.ndarray
    diameter_km: np.ndarray
    is_npa: np.ndarray
    n_skipped: tuple[tuple[str, int], ...] = ()
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        n = len(self.object_id)
        for name in ("period_h", "diameter_km", "is_npa"):
            if len(getattr(self, name)) != n:
                raise DampingError(f"RelaxSample: {name} has {len(getattr(self, name))} rows, expected {n}")

    @property
    def n_npa(self) -> int:
        return int(np.sum(self.is_npa))

    @property
    def n_pa(self) -> int:
        return int(np.sum(~np.asarray(self.is_npa)))


#: Seed of the shape-prior draws of :func:`sample_from_table` (the point values are reproducible).
TABLE_SPIN_SEED = 20261204
#: Shape draws per tumbler without inertia columns in a catalogue (only the median is used there).
TABLE_SHAPE_DRAWS = 64


def _column(table, name: str) -> np.ndarray | None:
    names = {c.lower(): c for c in table.colnames}
    if name not in names:
        return None
    col = table[names[name]]
    if hasattr(col, "filled"):
        try:
            col = col.filled(np.nan)
        except (TypeError, ValueError):
            col = col.filled("")
    return np.asarray(col)


def _float_column(table, name: str, source: str) -> np.ndarray | None:
    col = _column(table, name)
    if col is None:
        return None
    try:
        return np.asarray(col, dtype=float)
    except (TypeError, ValueError):
        raise DampingError(f"{source}: column '{name}' is not numeric") from None


def sample_from_table(table, *, source: str = "table", albedo_default: float = 0.14) -> RelaxSample:
    """Pick the rows of a results catalog that can constrain mu Q.

    The table follows the results-catalog columns (``object``, ``status``, ``rotation``,
    ``period_h``, ``p_psi_h``, ``p_phi_h``, ...) plus a size: ``diameter_km``, or ``h_mag``
    with ``albedo`` (missing albedos take ``albedo_default``; D from Pravec & Harris 2007).
    The period is the spin period of :func:`spin_period_for_damping` (median of its draws):
    ``period_h`` (else ``period_syn_h``) for PA; ``2 pi / <|omega|>`` from ``mode``,
    ``p_psi_h`` and ``p_phi_h`` for tumblers, with the inertia from ``i1_i3``/``i2_i3`` or
    ``a_over_b``/``b_over_c`` and ``excitation`` columns when present, else over the shape
    prior. A light-curve basis period (``p1_h``) is never used.
    Rows with ``status`` other than ``ok``, an undecided rotation, or no usable period or
    size are skipped and counted.

    Parameters
    ----------
    table : astropy.table.Table
    source : str
        Name used in error messages.
    albedo_default : float
        Albedo for rows with H but no albedo (default 0.14).

    Returns
    -------
    RelaxSample
    """
    n = len(table)
    rotation = _column(table, "rotation")
    if rotation is None:
        raise DampingError(f"{source}: no 'rotation' column (expected PA / NPA verdicts)")
    rotation = np.char.upper(np.char.strip(np.asarray(rotation, dtype=str)))
    status = _column(table, "status")
    ok = np.ones(n, bool) if status is None else np.char.lower(np.char.strip(np.asarray(status, str))) == "ok"
    obj = _column(table, "object")
    obj = np.array([f"row {i + 1}" for i in range(n)]) if obj is None else np.asarray(obj, dtype=str)

    is_npa = rotation == "NPA"
    period, n_prior = _table_spin_periods(table, rotation, source)
    notes = ["spin period for damping: the PA rotation period (period_h, else period_syn_h); for tumblers "
             "2 pi/<|omega|> of the state with the catalogued P_psi, P_phi and mode"
             + (f" ({n_prior} tumblers without inertia columns: median over the shape prior)" if n_prior else "")]
    diam = _float_column(table, "diameter_km", source)
    if diam is None:
        diam = np.full(n, np.nan)
    h = _float_column(table, "h_mag", source)
    if h is not None:
        alb = _float_column(table, "albedo", source)
        alb = np.full(n, np.nan) if alb is None else alb
        n_default = int(np.sum(~(np.isfinite(diam) & (diam > 0)) & np.isfinite(h) & ~(alb > 0)))
        alb = np.where(alb > 0, alb, albedo_default)
        from_h = diameter_from_h(np.where(np.isfinite(h), h, np.nan), alb)
        use_h = ~(np.isfinite(diam) & (diam > 0))
        diam = np.where(use_h, from_h, diam)
        notes.append("diameter from diameter_km, else from h_mag and albedo (Pravec & Harris 2007)"
                     + (f"; {n_default} rows without albedo took p_V = {albedo_default:g}" if n_default else ""))
    elif not np.any(np.isfinite(diam)):
        raise DampingError(f"{source}: no size column ('diameter_km', or 'h_mag' with 'albedo')")

    reasons = []
    keep = np.ones(n, bool)
    for why, bad in (("status not ok", ~ok),
                     ("rotation not PA/NPA", ~np.isin(rotation, ["PA", "NPA"])),
                     ("no usable period", ~(np.isfinite(period) & (period > 0))),
                     ("no usable size", ~(np.isfinite(diam) & (diam > 0)))):
        count = int(np.sum(keep & bad))
        if count:
            reasons.append((why, count))
        keep &= ~bad
    return RelaxSample(object_id=obj[keep], period_h=period[keep], diameter_km=diam[keep],
                       is_npa=is_npa[keep], n_skipped=tuple(reasons), notes=tuple(notes))


def _table_spin_periods(table, rotation, source: str):
    """Spin period of every row (NaN when unusable) and the number of tumblers done over the shape prior."""
    n = len(table)
    cols = {}
    for name in ("period_h", "period_h_err", "period_syn_h", "p_psi_h", "p_phi_h", "p_phi_h_lo", "p_phi_h_hi",
                 "i1_i3", "i2_i3", "a_over_b", "b_over_c", "excitation"):
        col = _float_column(table, name, source)
        cols[name] = np.full(n, np.nan) if col is None else col
    mode = _column(table, "mode")
    mode = np.full(n, "") if mode is None else np.char.upper(np.char.strip(np.asarray(mode, dtype=str)))
    gen = np.random.default_rng(TABLE_SPIN_SEED)
    out = np.full(n, np.nan)
    n_prior = 0
    for i in range(n):
        if rotation[i] not in ("PA", "NPA"):
            continue
        i1, i2 = cols["i1_i3"][i], cols["i2_i3"][i]
        ab, bc = cols["a_over_b"][i], cols["b_over_c"][i]
        if not (_ok(i1) and _ok(i2)) and _ok(ab) and _ok(bc) and ab >= 1 and bc >= 1:
            a2, b2 = (ab * bc) ** 2, bc**2
            i1, i2 = (b2 + 1.0) / (a2 + b2), (a2 + 1.0) / (a2 + b2)
        try:
            spin = spin_period_for_damping(
                rotation[i], period_h=cols["period_h"][i], period_h_err=cols["period_h_err"][i],
                period_syn_h=cols["period_syn_h"][i], mode=mode[i], p_psi_h=cols["p_psi_h"][i],
                p_phi_h=cols["p_phi_h"][i], p_phi_h_err=0.5 * (cols["p_phi_h_hi"][i] - cols["p_phi_h_lo"][i]),
                i1_i3=i1, i2_i3=i2, excitation=cols["excitation"][i], n_samples=256,
                n_shape_draws=TABLE_SHAPE_DRAWS, rng=gen)
        except DampingError:
            continue
        out[i] = spin.period_h
        n_prior += spin.source == "shape-prior"
    return out, n_prior


def read_relax_sample(path: str | os.PathLike, **kwargs) -> RelaxSample:
    """Read a results catalog (:func:`tumble.results.read_results`) and call :func:`sample_from_table`.

    Besides the catalog columns the table needs a size: ``diameter_km``, or ``h_mag``
    (with ``albedo`` where known).
    """
    from tumble.results import read_results

    table = read_results(path)
    return sample_from_table(table, source=os.fspath(path), **kwargs)


#: Parameter names of the boundary model, in vector order.
RIGIDITY_PARAMS = ("log10_mu_q_pa", "log10_softness_dex", "npa_fraction_slow")


@dataclass(frozen=True)
class RigidityLikelihood:
    """Picklable log-posterior of the probabilistic boundary model (vectorised over walkers).

    For object i, with ``x_i = log10(tau_i(mu Q) / T)`` (Burns & Safronov 1973 with fixed
    density and K3^2, T the assumed time since excitation),

    ``P(NPA_i) = eps + (f - eps) / (1 + exp(-x_i / s))``,

    a logistic step in log damping time with softness ``s`` (dex): well below the line
    (tau << T) bodies are PA except for a misclassification floor ``eps``; well above it a
    fraction ``f`` of them still tumble (the rest were never excited). Bernoulli
    likelihood over the verdicts; flat priors on log10 mu Q, log10 s and f within bounds.

    Attributes
    ----------
    log10_tau_unit : numpy.ndarray, shape (n,)
        log10 of each body's damping time (Gyr) for mu Q = 1 Pa.
    is_npa : numpy.ndarray of bool, shape (n,)
    log10_age_gyr : float
    eps : float
        Misclassification floor (fixed).
    bounds : tuple of (low, high) per parameter of :data:`RIGIDITY_PARAMS`.
    """

    log10_tau_unit: np.ndarray
    is_npa: np.ndarray
    log10_age_gyr: float
    eps: float = 0.02
    bounds: tuple[tuple[float, float], ...] = ((5.0, 17.0), (-1.5, 0.5), (0.05, 1.0))

    def p_npa(self, theta: np.ndarray) -> np.ndarray:
        """Model probabilities, shape (..., n) for theta of shape (..., 3)."""
        theta = np.asarray(theta, dtype=float)
        lmq, ls, frac = theta[..., 0:1], theta[..., 1:2], theta[..., 2:3]
        x = (self.log10_tau_unit + lmq - self.log10_age_gyr) / 10.0**ls
        return self.eps + (frac - self.eps) * _expit(x)

    def __call__(self, theta: np.ndarray) -> np.ndarray:
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        inside = np.ones(theta.shape[0], bool)
        for j, (lo, hi) in enumerate(self.bounds):
            inside &= (theta[:, j] > lo) & (theta[:, j] < hi)
        inside &= theta[:, 2] > self.eps
        out = np.full(theta.shape[0], -np.inf)
        if np.any(inside):
            p = self.p_npa(theta[inside])
            y = np.asarray(self.is_npa, bool)
            out[inside] = np.sum(np.where(y, np.log(p), np.log1p(-p)), axis=-1)
        return out


def _expit(x):
    return 0.5 * (1.0 + np.tanh(0.5 * x))


def _reference_log_posterior(lik: RigidityLikelihood, theta: Sequence[float]) -> float:
    """Slow one-walker, one-object-at-a-time reference for :class:`RigidityLikelihood` (tests)."""
    lmq, ls, frac = (float(v) for v in theta)
    for (lo, hi), v in zip(lik.bounds, (lmq, ls, frac)):
        if not lo < v < hi:
            return -math.inf
    if frac <= lik.eps:
        return -math.inf
    total = 0.0
    for lt, y in zip(lik.log10_tau_unit, lik.is_npa):
        x = (lt + lmq - lik.log10_age_gyr) / 10.0**ls
        p = lik.eps + (frac - lik.eps) / (1.0 + math.exp(-x))
        total += math.log(p) if y else math.log(1.0 - p)
    return total


@dataclass(frozen=True)
class RigidityConstraint:
    """mu Q (and mu Q / T) constrained by a classified sample.

    Attributes
    ----------
    log10_mu_q_pa, log10_mu_q_pa_lo, log10_mu_q_pa_hi, log10_mu_q_pa_lo95, log10_mu_q_pa_hi95 : float
        Posterior median and 68% / 95% central intervals of log10(mu Q / Pa), for the
        assumed ``age_gyr``, ``density_kg_m3`` and ``k3_squared``.
    log10_mu_q_over_t, log10_mu_q_over_t_lo, log10_mu_q_over_t_hi : float
        The same for log10(mu Q / T) with T in Gyr (Pa per Gyr): the combination the data
        constrain, whatever T is.
    harris_c_equivalent, harris_c_equivalent_lo, harris_c_equivalent_hi : float
        The Harris constant equivalent to the fitted mu Q (median, 68%).
    softness_dex, softness_dex_lo, softness_dex_hi : float
        Width of the boundary in log10 tau (median, 68%).
    npa_fraction_slow, npa_fraction_slow_lo, npa_fraction_slow_hi : float
        Fraction of bodies still tumbling far above the line (median, 68%).
    age_gyr, density_kg_m3, k3_squared, eps : float
        Fixed assumptions.
    n_npa, n_pa : int
        Objects used.
    n_skipped : tuple of (str, int)
    n_walkers, n_steps, n_burn : int
    acceptance_fraction : float
    autocorr_steps : numpy.ndarray, shape (3,)
        Integrated autocorrelation time per parameter (steps; tol=0 estimate).
    assumptions : tuple of str
    samples : numpy.ndarray, shape (m, 3)
        Flattened post-burn-in chain in :data:`RIGIDITY_PARAMS` order.
    """

    log10_mu_q_pa: float
    log10_mu_q_pa_lo: float
    log10_mu_q_pa_hi: float
    log10_mu_q_pa_lo95: float
    log10_mu_q_pa_hi95: float
    log10_mu_q_over_t: float
    log10_mu_q_over_t_lo: float
    log10_mu_q_over_t_hi: float
    harris_c_equivalent: float
    harris_c_equivalent_lo: float
    harris_c_equivalent_hi: float
    softness_dex: float
    softness_dex_lo: float
    softness_dex_hi: float
    npa_fraction_slow: float
    npa_fraction_slow_lo: float
    npa_fraction_slow_hi: float
    age_gyr: float
    density_kg_m3: float
    k3_squared: float
    eps: float
    n_npa: int
    n_pa: int
    n_skipped: tuple[tuple[str, int], ...]
    n_walkers: int
    n_steps: int
    n_burn: int
    acceptance_fraction: float
    autocorr_steps: np.ndarray = field(repr=False)
    assumptions: tuple[str, ...] = ()
    samples: np.ndarray = field(default=None, repr=False, compare=False)

    def to_dict(self) -> dict:
        """JSON-ready summary (the chain is left out)."""
        out = {}
        for name in self.__dataclass_fields__:
            if name in ("samples",):
                continue
            v = getattr(self, name)
            if name == "n_skipped":
                v = {k: c for k, c in v}
            elif name == "assumptions":
                v = list(v)
            out[name] = v
        out["mu_q_pa"] = 10.0 ** self.log10_mu_q_pa
        out["mu_q_pa_lo"] = 10.0 ** self.log10_mu_q_pa_lo
        out["mu_q_pa_hi"] = 10.0 ** self.log10_mu_q_pa_hi
        out["mu_q_pa_lo95"] = 10.0 ** self.log10_mu_q_pa_lo95
        out["mu_q_pa_hi95"] = 10.0 ** self.log10_mu_q_pa_hi95
        return out


def fit_rigidity(sample: RelaxSample, *, age_gyr: float = DEFAULT_AGE_GYR,
                 density_kg_m3: float = HARRIS_DENSITY_KG_M3, k3_squared: float = HARRIS_K3_SQUARED,
                 eps: float = 0.02, n_walkers: int = 24, n_steps: int = 3000, n_burn: int | None = None,
                 progress: bool = False, rng: np.random.Generator | int | None = None) -> RigidityConstraint:
    """Fit mu Q from where tumblers and PA rotators sit relative to the iso-tau lines.

    The boundary model is :class:`RigidityLikelihood` (a logistic in log10(tau/T) with a
    softness, an NPA fraction far above the line and a misclassification floor), sampled
    with emcee (Foreman-Mackey et al. 2013). This turns the qualitative comparison of
    Pravec et al. (2005, Icarus 173, 108) into a posterior on mu Q / T.

    Parameters
    ----------
    sample : RelaxSample
        Needs both tumblers and PA rotators.
    age_gyr : float
        Assumed time since excitation T, Gyr (default 4.5). Only mu Q / T is constrained.
    density_kg_m3, k3_squared : float
        Fixed Burns & Safronov constants (default 2000, 0.03: the Harris calibration). Only
        mu Q / (rho K3^2) is constrained, so mu Q scales with whatever is assumed here.
    eps : float
        Misclassification floor (default 0.02).
    n_walkers, n_steps, n_burn : int
        emcee ensemble size, chain length and burn-in (default a third of the chain).
    progress : bool
        Show emcee's progress bar.
    rng : numpy.random.Generator, int or None
        Seeds the initial ensemble and emcee's internal generator.

    Returns
    -------
    RigidityConstraint
    """
    import emcee

    age_gyr = _positive(age_gyr, "age_gyr")
    density_kg_m3 = _positive(density_kg_m3, "density_kg_m3")
    k3_squared = _positive(k3_squared, "k3_squared")
    if not 0 <= eps < 0.5:
        raise DampingError(f"eps must be in [0, 0.5), got {eps}")
    if sample.n_npa == 0 or sample.n_pa == 0:
        raise DampingError(f"the sample needs both tumblers and PA rotators "
                           f"(has {sample.n_npa} NPA, {sample.n_pa} PA)")
    n_walkers, n_steps = int(n_walkers), int(n_steps)
    if n_walkers < 8 or n_walkers % 2:
        raise DampingError("n_walkers must be even and at least 8")
    n_burn = n_steps // 3 if n_burn is None else int(n_burn)
    if not 0 <= n_burn < n_steps:
        raise DampingError("need 0 <= n_burn < n_steps")
    gen = _rng(rng)

    tau_unit = tau_burns_safronov_gyr(sample.period_h, sample.diameter_km, 1.0, density_kg_m3, k3_squared)
    lik = RigidityLikelihood(np.log10(tau_unit), np.asarray(sample.is_npa, bool), math.log10(age_gyr), eps)

    # start: best log10 mu Q on a grid at a moderate softness, then a small ball
    grid = np.linspace(lik.bounds[0][0] + 0.25, lik.bounds[0][1] - 0.25, 241)
    frac0 = min(0.95, max(0.2, 1.5 * sample.n_npa / (sample.n_npa + sample.n_pa)))
    trial = np.column_stack([grid, np.full_like(grid, -0.5), np.full_like(grid, frac0)])
    start = trial[int(np.argmax(lik(trial)))]
    p0 = start + np.array([0.1, 0.05, 0.02]) * gen.standard_normal((n_walkers, 3))
    p0[:, 2] = np.clip(p0[:, 2], eps + 0.01, 0.99)

    sampler = emcee.EnsembleSampler(n_walkers, 3, lik, vectorize=True)
    sampler.random_state = np.random.RandomState(int(gen.integers(2**31 - 1))).get_state()
    sampler.run_mcmc(p0, n_steps, progress=progress)
    chain = sampler.get_chain(discard=n_burn, flat=True)
    acor = np.asarray(sampler.get_autocorr_time(discard=n_burn, tol=0), dtype=float)
    if np.any(~np.isfinite(acor)) or (n_steps - n_burn) < 30 * np.nanmax(acor):
        warnings.warn(f"rigidity fit: chain of {n_steps - n_burn} kept steps is short for autocorrelation "
                      f"times {np.round(acor, 1).tolist()} (want >= 30x); the interval may be rough",
                      ConvergenceWarning, stacklevel=2)

    lmq = chain[:, 0]
    q = lambda x: _q(x, 2.5, 15.865, 50.0, 84.135, 97.5)  # noqa: E731
    m95, m16, m50, m84, m97 = q(lmq)
    t16, t50, t84 = _q(lmq - math.log10(age_gyr), 15.865, 50.0, 84.135)
    c = harris_c_equivalent(10.0 ** lmq, density_kg_m3, k3_squared)
    c16, c50, c84 = _q(c, 15.865, 50.0, 84.135)
    s16, s50, s84 = _q(10.0 ** chain[:, 1], 15.865, 50.0, 84.135)
    f16, f50, f84 = _q(chain[:, 2], 15.865, 50.0, 84.135)
    assumptions = (
        f"damping time from Burns & Safronov (1973) with density {density_kg_m3:g} kg m^-3 and "
        f"K3^2 = {k3_squared:g} held fixed: only mu Q / (rho K3^2 T) is constrained",
        f"time since excitation T = {age_gyr:g} Gyr, the same for every body",
        "P(NPA) is a logistic step in log10(tau / T) with a fitted softness (dex), a fitted fraction "
        f"of bodies still tumbling far above the line and a fixed misclassification floor {eps:g}",
        "verdicts taken as given (PA / NPA); sizes and periods as point values (their scatter is "
        "absorbed by the softness); bodies independent",
        "flat priors: log10 mu Q in [{:g}, {:g}], log10 softness in [{:g}, {:g}], fraction in [{:g}, {:g}]"
        .format(*lik.bounds[0], *lik.bounds[1], *lik.bounds[2]),
    ) + tuple(sample.notes)
    chain = np.asarray(chain)
    chain.setflags(write=False)
    return RigidityConstraint(
        log10_mu_q_pa=m50, log10_mu_q_pa_lo=m16, log10_mu_q_pa_hi=m84,
        log10_mu_q_pa_lo95=m95, log10_mu_q_pa_hi95=m97,
        log10_mu_q_over_t=t50, log10_mu_q_over_t_lo=t16, log10_mu_q_over_t_hi=t84,
        harris_c_equivalent=c50, harris_c_equivalent_lo=c16, harris_c_equivalent_hi=c84,
        softness_dex=s50, softness_dex_lo=s16, softness_dex_hi=s84,
        npa_fraction_slow=f50, npa_fraction_slow_lo=f16, npa_fraction_slow_hi=f84,
        age_gyr=age_gyr, density_kg_m3=density_kg_m3, k3_squared=k3_squared, eps=float(eps),
        n_npa=sample.n_npa, n_pa=sample.n_pa, n_skipped=tuple(sample.n_skipped),
        n_walkers=n_walkers, n_steps=n_steps, n_burn=n_burn,
        acceptance_fraction=float(np.mean(sampler.acceptance_fraction)),
        autocorr_steps=acor, assumptions=assumptions, samples=chain,
    )


def damping_for_classification(verdict, *, diameter_km=None, h_mag=None, albedo=None,
                               rng: np.random.Generator | int | None = None, n_samples: int = 4000):
    """Damping estimate for a :class:`tumble.classify.Verdict`, or None when it has no usable period or size.

    The spin period is :func:`spin_period_for_damping` of the verdict: the sidereal (else
    synodic) rotation period for PA, ``2 pi / <|omega|>`` of the fitted state for a tumbler.
    Its draws (period errors, and the shape prior when the inertia is unknown) are the
    period input of the Monte Carlo.
    """
    if diameter_km is None and h_mag is None:
        return None
    g = np.random.default_rng(rng)
    spin = spin_period_for_verdict(verdict, n_samples=n_samples, rng=g)
    if spin is None:
        return None
    est = damping_for_verdict(spin.period_h_samples, diameter_km=diameter_km, h_mag=h_mag, albedo=albedo, rng=g)
    return dataclasses.replace(est, assumptions=est.assumptions + (spin.note,))


def spin_period_for_verdict(verdict, *, n_samples: int = 4000, rng=None):
    """:func:`spin_period_for_damping` with the fields of a :class:`tumble.classify.Verdict` (None if unusable)."""
    ab = _first(getattr(verdict, "a_over_b", math.nan))
    bc = _first(getattr(verdict, "b_over_c", math.nan))
    i1 = i2 = math.nan
    if math.isfinite(ab) and math.isfinite(bc) and ab >= 1 and bc >= 1:
        from tumble.brightness import inertia_ratios_from_axes

        r1, r2 = inertia_ratios_from_axes([ab * bc, bc, 1.0])
        i1, i2 = float(r1), float(r2)
    try:
        return spin_period_for_damping(
            verdict.rotation, period_h=verdict.period_h, period_h_err=verdict.period_h_err,
            period_syn_h=getattr(verdict, "period_syn_h", math.nan), mode=verdict.mode,
            p_psi_h=verdict.p_psi_h, p_phi_h=verdict.p_phi_h,
            p_phi_h_err=0.5 * (verdict.p_phi_h_hi - verdict.p_phi_h_lo),
            i1_i3=i1, i2_i3=i2, excitation=verdict.excitation, n_samples=n_samples, rng=rng)
    except DampingError:
        return None


def _first(x) -> float:
    """The median of a (median, lo, hi) tuple, or the number itself."""
    if isinstance(x, (tuple, list, np.ndarray)):
        x = x[0] if len(x) else math.nan
    try:
        return float(x)
    except (TypeError, ValueError):
        return math.nan


# --------------------------------------------------------------------------------------------
# One spin rate for damping: 2 pi / <|omega|>
# --------------------------------------------------------------------------------------------

#: Points per P_psi cycle of the time average of |omega|: the integrand is smooth and periodic, so
#: the uniform (trapezoid) rule converges geometrically; 256 is at 1e-10 away from the separatrix.
SPIN_AVERAGE_POINTS = 256
#: Shape-prior draws used for a tumbler whose inertia is not known (enough for a 68 % interval).
SPIN_SHAPE_DRAWS = 256
#: Nodes of the dynamic-inertia grid on which each shape draw's period ratio is solved.
SPIN_ROOT_GRID = 96
#: Shape prior of those draws: log-uniform a/b and b/c ranges of the physical model
#: (:class:`tumble.model.PhysicalModel`), homogeneous ellipsoid inertia.
SPIN_SHAPE_A_OVER_B = (1.0, 4.0)
SPIN_SHAPE_B_OVER_C = (1.0, 2.5)
#: Relative period error assumed when none is given (a point value; only the draws' spread).
SPIN_DEFAULT_REL_ERR = 1e-3


@dataclass(frozen=True)
class SpinPeriod:
    """The spin period that the damping formulas use, with its draws.

    Attributes
    ----------
    period_h : float
        Central value, h: the spin period at the given periods (over the shape prior: its median).
    period_h_samples : numpy.ndarray, shape (n,)
        Draws of the spin period, h (period errors and, without a fitted inertia, the shape prior).
    source : str
        ``sidereal``, ``synodic`` (PA), ``state`` (tumbler with fitted inertia and excitation) or
        ``shape-prior`` (tumbler, inertia marginalised over the shape prior).
    note : str
        One sentence for the estimate's assumptions.
    """

    period_h: float
    period_h_samples: np.ndarray = field(repr=False, compare=False)
    source: str = ""
    note: str = ""


def mean_spin_period_h(state) -> float:
    """``2 pi / <|omega|>`` of a :class:`tumble.dynamics.RotationState`, hours.

    ``<|omega|>`` is the time average of the angular speed over one rotation cycle P_psi of
    the torque-free motion (the body-frame components are periodic with P_psi, Landau &
    Lifshitz 1976, *Mechanics*, section 37), from the closed form
    :func:`tumble.dynamics.angular_velocity_body` on a uniform grid. For PA it is the
    rotation period itself. This is the spin rate ``Omega`` of the damping formulas
    (Burns & Safronov 1973 write them for a body spinning at ``Omega``; for a tumbler the
    mean angular speed is the rate at which the body's material is strained).
    """
    from tumble.dynamics import angular_velocity_body

    if state.mode == "PA":
        return float(state.p_psi_h)
    t = state.epoch_jd + np.arange(SPIN_AVERAGE_POINTS) / SPIN_AVERAGE_POINTS * state.p_psi_h / 24.0
    w = angular_velocity_body(state, t)
    return float(2.0 * math.pi / np.mean(np.linalg.norm(w, axis=1)))


def mean_spin_period_reference_h(state, n_cycles: float = 10.3, n_points: int = 20001) -> float:
    """Slow reference of :func:`mean_spin_period_h`: ``|omega|`` numerically integrated and averaged.

    Euler's equations are integrated (:func:`tumble.dynamics_reference.integrate_state`, DOP853) over
    ``n_cycles`` P_psi (not a whole number, so the average does not lean on periodicity) and
    ``|omega|`` is averaged by the trapezoid rule.
    """
    from scipy import integrate

    from tumble.dynamics_reference import integrate_state

    t_jd = state.epoch_jd + np.linspace(0.0, n_cycles * state.p_psi_h / 24.0, n_points)
    sol = integrate_state(state, t_jd)
    speed = np.linalg.norm(sol.omega_body_rad_h, axis=1)
    mean = integrate.trapezoid(speed, sol.t_h) / (sol.t_h[-1] - sol.t_h[0])
    return float(2.0 * math.pi / mean)


def _spin_ratio_draws(mode: str, p_psi_h: float, p_phi_h: float, n: int, gen) -> np.ndarray:
    """``(2 pi/<|omega|>) / P_phi`` over the shape prior for a tumbler of unknown inertia.

    For each shape draw the dynamic inertia with ``P_phi/P_psi`` equal to the observed ratio is
    found on a grid of ``I_d`` (vectorised :func:`tumble.dynamics.periods_unit_momentum`, root
    by linear interpolation between the bracketing nodes, clustered towards both ends of the
    mode's range); draws whose mode cannot produce the ratio are dropped.
    """
    from tumble.dynamics import SEPARATRIX_TOLERANCE, RotationState, RotationStateError, periods_unit_momentum

    modes = (mode,) if mode in ("SAM", "LAM") else ("SAM", "LAM")
    k = 2 * n
    ab = np.exp(gen.uniform(*np.log(SPIN_SHAPE_A_OVER_B), k))
    bc = np.exp(gen.uniform(*np.log(SPIN_SHAPE_B_OVER_C), k))
    a2, b2 = (ab * bc) ** 2, bc**2
    i1, i2 = (b2 + 1.0) / (a2 + b2), (a2 + 1.0) / (a2 + b2)
    which = np.array(modes)[gen.integers(len(modes), size=k)]
    s = 0.5 * (1.0 - np.cos(np.pi * np.linspace(0.0, 1.0, SPIN_ROOT_GRID)))
    target = p_phi_h / p_psi_h
    out = []
    for m in modes:
        sel = np.flatnonzero((which == m) & (i2 - i1 > 4 * SEPARATRIX_TOLERANCE))
        if m == "SAM":
            lo, hi = i2[sel] + 2 * SEPARATRIX_TOLERANCE, np.full(len(sel), 1.0 - 1e-9)
        else:
            lo, hi = i1[sel] + 1e-9, i2[sel] - 2 * SEPARATRIX_TOLERANCE
        ok = lo < hi
        sel, lo, hi = sel[ok], lo[ok], hi[ok]
        if len(sel) == 0:
            continue
        idd = lo[:, None] + s[None, :] * (hi - lo)[:, None]
        pp, pf = periods_unit_momentum(i1[sel, None], i2[sel, None], idd)
        g = pf / pp - target
        cross = np.signbit(g[:, :-1]) != np.signbit(g[:, 1:])
        for r in np.flatnonzero(cross.any(axis=1)):
            c = int(np.argmax(cross[r]))
            w = g[r, c] / (g[r, c] - g[r, c + 1])
            root = idd[r, c] + w * (idd[r, c + 1] - idd[r, c])
            try:
                st = RotationState(i1[sel[r]], i2[sel[r]], root, p_psi_h, 0.0, 90.0)
            except RotationStateError:
                continue
            out.append(mean_spin_period_h(st) / st.p_phi_h)
    return np.array(out[:n]) if len(out) > n else np.array(out)


def spin_period_for_damping(rotation: str, *, period_h: float = math.nan, period_h_err: float = math.nan,
                            period_syn_h: float = math.nan, mode: str = "", p_psi_h: float = math.nan,
                            p_phi_h: float = math.nan, p_phi_h_err: float = math.nan, i1_i3: float = math.nan,
                            i2_i3: float = math.nan, excitation: float = math.nan, n_samples: int = 4000,
                            n_shape_draws: int = SPIN_SHAPE_DRAWS,
                            rng: np.random.Generator | int | None = None) -> SpinPeriod:
    """The one spin period used for damping, for PA rotators and tumblers alike.

    - **PA**: the sidereal rotation period ``period_h`` (the verdict's PA period), else the
      synodic ``period_syn_h``; draws normal with ``period_h_err``.
    - **NPA**: ``2 pi / <|omega|>`` (:func:`mean_spin_period_h`) of the state with the fitted
      P_psi, P_phi and mode: with the inertia ratios (``i1_i3``, ``i2_i3``, from the fitted
      ellipsoid) the dynamic inertia follows from the period ratio
      (:meth:`tumble.dynamics.RotationState.from_periods`), else from ``excitation``
      (E/E0 = I3/I_d); without inertia the ratio ``(2 pi / <|omega|>) / P_phi`` is
      marginalised over the physical model's shape prior (log-uniform a/b in 1-4, b/c in
      1-2.5, homogeneous ellipsoid; both modes if the mode is unknown; ``n_shape_draws``
      shapes). The draws scale with
      P_phi's error. A light-curve basis period (``p1_h``) is never used.

    Raises
    ------
    DampingError
        No usable period for this rotation.
    """
    from tumble.dynamics import RotationState, RotationStateError

    gen = _rng(rng)
    rotation = str(rotation).upper()
    mode = str(mode).upper()
    if rotation == "PA":
        if _ok(period_h):
            p, src = float(period_h), "sidereal"
        elif _ok(period_syn_h):
            p, src = float(period_syn_h), "synodic"
        else:
            raise DampingError("PA rotator without a rotation period")
        e = period_h_err if (_ok(period_h_err) and src == "sidereal") else SPIN_DEFAULT_REL_ERR * p
        draws = np.abs(p + e * gen.standard_normal(n_samples))
        return SpinPeriod(p, draws, src, f"spin period: the {src} PA rotation period {p:.6g} h")
    if rotation != "NPA":
        raise DampingError(f"no spin period for rotation {rotation!r}")
    if not (_ok(p_psi_h) and _ok(p_phi_h)):
        raise DampingError("tumbler without both P_psi and P_phi")
    e = p_phi_h_err if _ok(p_phi_h_err) else SPIN_DEFAULT_REL_ERR * p_phi_h
    p_phi = np.abs(p_phi_h + e * gen.standard_normal(n_samples))
    state = None
    if _ok(i1_i3) and _ok(i2_i3) and mode in ("SAM", "LAM"):
        try:
            state = RotationState.from_periods(i1_i3, i2_i3, p_psi_h, p_phi_h, mode)
        except RotationStateError:
            state = None
        if state is None and _ok(excitation):
            try:
                state = RotationState.excited(i1_i3, i2_i3, 1.0 / excitation, p_psi_h, 0.0, 90.0)
            except RotationStateError:
                state = None
    if state is not None:
        ratio = mean_spin_period_h(state) / state.p_phi_h
        draws = ratio * p_phi
        central = ratio * p_phi_h
        src = "state"
        note = (f"spin period 2 pi/<|omega|> = {ratio * p_phi_h:.6g} h of the fitted {state.mode} state "
                f"(P_psi {p_psi_h:.6g} h, P_phi {p_phi_h:.6g} h, E/E0 {state.excitation:.4g})")
    else:
        ratios = _spin_ratio_draws(mode, p_psi_h, p_phi_h, int(n_shape_draws), gen)
        if len(ratios) == 0:
            raise DampingError(f"no {mode or 'SAM/LAM'} state of the shape prior has P_psi {p_psi_h:.6g} h "
                               f"and P_phi {p_phi_h:.6g} h")
        draws = ratios[gen.integers(len(ratios), size=n_samples)] * p_phi
        central = float(np.median(ratios)) * p_phi_h
        src = "shape-prior"
        note = (f"spin period 2 pi/<|omega|> from P_psi {p_psi_h:.6g} h and P_phi {p_phi_h:.6g} h with the "
                f"inertia unknown: marginalised over the shape prior (median {central:.6g} h)")
    return SpinPeriod(float(central), draws, src, note)


def _ok(x) -> bool:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return False
    return math.isfinite(x) and x > 0
