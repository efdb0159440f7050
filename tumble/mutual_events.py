"""Mutual events of a binary asteroid: disc overlap, eclipses and occultations of two spheres.

A binary of a primary (radius 1) and a spherical satellite (radius ``q = R2/R1``) on a circular orbit
of radius ``a`` (in primary radii) loses light in two kinds of *mutual events* (common practice, e.g.
Pravec et al. 2006, Icarus 181, 63):

- **occultation**: one body hides part of the other from the observer;
- **eclipse**: one body's shadow falls on the other.

:func:`disc_overlap_area` is the textbook area of the lens where two discs overlap (the occulted
area in the observer's projection for bodies of uniform surface brightness).
:func:`mutual_event_fractions` integrates the Lommel-Seeliger brightness (Muinonen & Lumme 2015, A&A
584, A23) over each body's visible disc on a grid, removing the points hidden from the observer or
shadowed from the Sun by the other body (parallel rays: Sun and observer at infinity), so both kinds
of event and their overlap at any phase angle are handled without double counting. At zero phase the
Lommel-Seeliger disc is uniform (``mu0 = mu``), and the loss is the overlap area exactly; the tests
check that against :func:`disc_overlap_area`.

Units: lengths in primary radii, times in days (TDB JD), periods in hours, angles in degrees at the
interface.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from tumble.exceptions import TumbleError

__all__ = ["MutualEventError", "BinaryOrbit", "EventFractions", "disc_overlap_area", "disc_overlap_area_reference",
           "mutual_event_fractions", "binary_flux_loss", "orbit_frame"]

#: Grid points across a disc diameter in the brightness integration (48: about 1e-3 of a body's flux).
DISC_GRID = 48
#: Two bodies whose projected centres are farther apart than this many (R1 + R2) cannot overlap.
OVERLAP_MARGIN = 1.0


class MutualEventError(TumbleError, ValueError):
    """Bad binary-system input (sizes, orbit or directions)."""


def disc_overlap_area(r1, r2, d):
    """Area of the intersection of two discs of radii ``r1``, ``r2`` whose centres are ``d`` apart.

    Textbook geometry (common practice): zero for ``d >= r1 + r2``, ``pi min(r1, r2)^2`` for
    ``d <= |r1 - r2|`` (full containment), otherwise the lens
    ``r1^2 acos((d^2 + r1^2 - r2^2) / (2 d r1)) + r2^2 acos((d^2 + r2^2 - r1^2) / (2 d r2))
    - 1/2 sqrt((-d + r1 + r2)(d + r1 - r2)(d - r1 + r2)(d + r1 + r2))``.
    Broadcasts over its arguments.
    """
    r1, r2, d = np.broadcast_arrays(*(np.asarray(v, float) for v in (r1, r2, d)))
    out = np.zeros(r1.shape)
    inside = d <= np.abs(r1 - r2)
    out[inside] = np.pi * np.minimum(r1, r2)[inside] ** 2
    lens = ~inside & (d < r1 + r2)
    if np.any(lens):
        a, b, s = r1[lens], r2[lens], d[lens]
        c1 = np.clip((s**2 + a**2 - b**2) / (2 * s * a), -1.0, 1.0)
        c2 = np.clip((s**2 + b**2 - a**2) / (2 * s * b), -1.0, 1.0)
        k = np.maximum((-s + a + b) * (s + a - b) * (s - a + b) * (s + a + b), 0.0)
        out[lens] = a**2 * np.arccos(c1) + b**2 * np.arccos(c2) - 0.5 * np.sqrt(k)
    return out if out.ndim else float(out)


def disc_overlap_area_reference(r1: float, r2: float, d: float, n: int = 2001) -> float:
    """Slow reference: the overlap area by counting the cells of an ``n x n`` grid inside both discs."""
    x = np.linspace(-r1, r1, n)
    h = x[1] - x[0]
    xx, yy = np.meshgrid(x, x)
    both = (xx**2 + yy**2 <= r1**2) & ((xx - d) ** 2 + yy**2 <= r2**2)
    return float(both.sum() * h * h)


def _unit_from_lon_lat(lon_deg: float, lat_deg: float) -> np.ndarray:
    lo, la = math.radians(lon_deg), math.radians(lat_deg)
    return np.array([math.cos(la) * math.cos(lo), math.cos(la) * math.sin(lo), math.sin(la)])


def orbit_frame(pole) -> tuple:
    """Orthonormal ``(u, v)`` spanning the orbit plane of the unit ``pole`` (``u`` along the node on the x-y plane)."""
    k = np.asarray(pole, float)
    k = k / np.linalg.norm(k)
    u = np.cross([0.0, 0.0, 1.0], k)
    if np.linalg.norm(u) < 1e-12:
        u = np.array([1.0, 0.0, 0.0])
    u = u / np.linalg.norm(u)
    return u, np.cross(k, u)


@dataclass(frozen=True)
class BinaryOrbit:
    """A spherical satellite on a circular orbit about the primary.

    Attributes
    ----------
    p_orb_h : float
        Orbital period, hours.
    size_ratio : float
        Satellite-to-primary radius ratio ``R2/R1`` (primary radius: that of its equal-volume sphere).
    orbit_radius : float
        Orbit radius in primary radii (``> 1 + size_ratio``: the bodies do not touch).
    pole_lon_deg, pole_lat_deg : float
        Orbit pole, ecliptic J2000 degrees.
    phase0_deg : float
        Orbital longitude of the satellite from the ascending node on the ecliptic at ``epoch_jd``, deg.
    epoch_jd : float
        Epoch of ``phase0_deg``, TDB JD.
    satellite_amplitude_mag : float
        Peak-to-peak amplitude of the satellite's own rotation (a sinusoid at half its period: a
        double-peaked light curve), mag of the satellite's flux; 0 = none.
    satellite_period_h : float
        Satellite rotation period, hours (NaN = synchronous, ``p_orb_h``).
    """

    p_orb_h: float
    size_ratio: float
    orbit_radius: float
    pole_lon_deg: float = 0.0
    pole_lat_deg: float = 90.0
    phase0_deg: float = 0.0
    epoch_jd: float = 2451545.0
    satellite_amplitude_mag: float = 0.0
    satellite_period_h: float = math.nan

    def __post_init__(self):
        for name in ("p_orb_h", "size_ratio", "orbit_radius"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float, np.integer, np.floating)) and math.isfinite(v) and v > 0):
                raise MutualEventError(f"binary: {name} must be a positive number, got {v!r}")
        if self.size_ratio > 1:
            raise MutualEventError(f"binary: size_ratio is satellite/primary and must not exceed 1, got {self.size_ratio}")
        if self.orbit_radius <= 1 + self.size_ratio:
            raise MutualEventError(f"binary: orbit_radius {self.orbit_radius} primary radii puts the satellite in "
                                   f"contact (needs > {1 + self.size_ratio:g})")
        if not (math.isfinite(self.satellite_amplitude_mag) and self.satellite_amplitude_mag >= 0):
            raise MutualEventError("binary: satellite_amplitude_mag must be a non-negative number")
        if not (math.isnan(self.satellite_period_h) or self.satellite_period_h > 0):
            raise MutualEventError("binary: satellite_period_h must be positive (or NaN for synchronous)")

    @property
    def pole(self) -> np.ndarray:
        """Unit vector of the orbit pole, ecliptic J2000."""
        return _unit_from_lon_lat(self.pole_lon_deg, self.pole_lat_deg)

    def satellite_position(self, t_jd) -> np.ndarray:
        """Satellite position relative to the primary, primary radii, ecliptic J2000, shape (n, 3)."""
        t = np.atleast_1d(np.asarray(t_jd, float))
        u, v = orbit_frame(self.pole)
        theta = math.radians(self.phase0_deg) + 2 * np.pi * (t - self.epoch_jd) * 24.0 / self.p_orb_h
        return self.orbit_radius * (np.cos(theta)[:, None] * u + np.sin(theta)[:, None] * v)

    def satellite_modulation(self, t_jd) -> np.ndarray:
        """Flux factor of the satellite's own rotation (mean 1 in magnitude), shape (n,)."""
        t = np.atleast_1d(np.asarray(t_jd, float))
        if self.satellite_amplitude_mag == 0:
            return np.ones(len(t))
        p = self.p_orb_h if math.isnan(self.satellite_period_h) else self.satellite_period_h
        dm = 0.5 * self.satellite_amplitude_mag * np.cos(4 * np.pi * (t - self.epoch_jd) * 24.0 / p)
        return 10.0 ** (-0.4 * dm)

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return {k: float(v) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class EventFractions:
    """The share of each body's Lommel-Seeliger flux that reaches the observer during mutual events.

    Attributes
    ----------
    primary, satellite : numpy.ndarray, shape (n,)
        Flux with events divided by flux without them (1 outside events).
    """

    primary: np.ndarray
    satellite: np.ndarray


def _disc_grid(n: int) -> tuple:
    x = (np.arange(n) + 0.5) / n * 2 - 1
    xx, yy = np.meshgrid(x, x)
    keep = xx**2 + yy**2 < 1
    return xx[keep], yy[keep]


def _ray_hits_sphere(p, direction, centre, radius):
    """Rays from points ``p`` (m, g, 3) along ``direction`` (m, 3) hit the sphere (centre (m, 3), radius)."""
    w = centre[:, None, :] - p
    tc = np.einsum("mgk,mk->mg", w, direction)
    d2 = np.einsum("mgk,mgk->mg", w, w) - tc**2
    return (tc > 0) & (d2 < radius**2)


def _body_fraction(c_body, r_body, c_other, r_other, s, o, n_grid):
    """Fraction of a sphere's LS flux left after occultation and eclipse by the other sphere (rows: times)."""
    x, y = _disc_grid(n_grid)
    e1 = np.cross(o, np.where(np.abs(o[:, 2:3]) < 0.9, [[0.0, 0.0, 1.0]], [[1.0, 0.0, 0.0]]))
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(o, e1)
    z = np.sqrt(np.maximum(1 - x**2 - y**2, 0.0))
    normal = x[None, :, None] * e1[:, None, :] + y[None, :, None] * e2[:, None, :] + z[None, :, None] * o[:, None, :]
    p = c_body[:, None, :] + r_body * normal
    mu0 = np.einsum("mgk,mk->mg", normal, s)
    mu = z[None, :]
    lit = mu0 > 0
    weight = np.where(lit, mu0 / np.where(lit, mu0 + mu, 1.0), 0.0)
    total = weight.sum(axis=1)
    seen = ~_ray_hits_sphere(p, o, c_other, r_other) & ~_ray_hits_sphere(p, s, c_other, r_other)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0, (weight * seen).sum(axis=1) / np.where(total > 0, total, 1.0), 1.0)


def mutual_event_fractions(sat_pos, sun_dir, obs_dir, size_ratio: float, *, n_grid: int = DISC_GRID) -> EventFractions:
    """Share of each body's Lommel-Seeliger flux seen during mutual events (occultations and eclipses).

    Parameters
    ----------
    sat_pos : array_like (n, 3)
        Satellite position relative to the primary, primary radii.
    sun_dir, obs_dir : array_like (n, 3)
        Unit vectors from the system towards the Sun and the observer.
    size_ratio : float
        ``R2/R1``.
    n_grid : int
        Grid points across a disc diameter.

    Returns
    -------
    EventFractions
    """
    r = np.atleast_2d(np.asarray(sat_pos, float))
    s = np.atleast_2d(np.asarray(sun_dir, float))
    o = np.atleast_2d(np.asarray(obs_dir, float))
    s, o = np.broadcast_to(s, r.shape), np.broadcast_to(o, r.shape)
    if not (np.all(np.isfinite(r)) and np.all(np.isfinite(s)) and np.all(np.isfinite(o))):
        raise MutualEventError("mutual events: positions and directions must be finite")
    s = s / np.linalg.norm(s, axis=1, keepdims=True)
    o = o / np.linalg.norm(o, axis=1, keepdims=True)
    q = float(size_ratio)
    fp, fs = np.ones(len(r)), np.ones(len(r))
    reach = OVERLAP_MARGIN * (1 + q)
    d_obs = np.linalg.norm(r - np.sum(r * o, axis=1, keepdims=True) * o, axis=1)
    d_sun = np.linalg.norm(r - np.sum(r * s, axis=1, keepdims=True) * s, axis=1)
    near = np.flatnonzero((d_obs < reach) | (d_sun < reach))
    zero = np.zeros((len(near), 3))
    for start in range(0, len(near), 256):
        idx = near[start:start + 256]
        fp[idx] = _body_fraction(zero[: len(idx)], 1.0, r[idx], q, s[idx], o[idx], n_grid)
        fs[idx] = _body_fraction(r[idx], q, zero[: len(idx)], 1.0, s[idx], o[idx], n_grid)
    return EventFractions(fp, fs)


def binary_flux_loss(sat_pos, sun_dir, obs_dir, size_ratio: float, *, n_grid: int = DISC_GRID) -> np.ndarray:
    """Fractional loss of the system's flux in mutual events, two Lommel-Seeliger spheres (shape (n,)).

    ``1 - (f_p F_p + f_s F_s) / (F_p + F_s)`` with each sphere's flux ``F`` proportional to its
    radius squared (the same phase function for both), ``f`` from :func:`mutual_event_fractions`.
    """
    ev = mutual_event_fractions(sat_pos, sun_dir, obs_dir, size_ratio, n_grid=n_grid)
    q2 = float(size_ratio) ** 2
    return 1.0 - (ev.primary + q2 * ev.satellite) / (1.0 + q2)
