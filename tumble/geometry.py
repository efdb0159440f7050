"""Observing geometry: light time, reduced magnitude, phase angle, Sun/observer directions.

Units: distances in au, times in days (JD), angles in degrees at the interface and
radians inside, directions as unit vectors in the ecliptic J2000 frame. No
astropy Quantities cross this module's kernels.

References
----------
- Light time: IAU 2012 astronomical unit (149 597 870.7 km, Resolution B2) and
  c = 299 792.458 km/s, giving 499.004784 s (0.0057755183 d) per au.
- Reduced magnitude H(alpha) = m - 5 log10(r Delta), r and Delta in au
  (e.g. Bowell et al. 1989, Asteroids II).
- Two-body motion and Kepler's equation: e.g. Murray & Dermott (1999), Solar
  System Dynamics, ch. 2.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tumble.exceptions import GeometryError

__all__ = [
    "AU_KM",
    "C_KM_S",
    "LIGHT_TIME_DAYS_PER_AU",
    "GM_SUN_AU3_D2",
    "OBLIQUITY_J2000_DEG",
    "light_time_days",
    "reduced_magnitude",
    "phase_angle_deg",
    "phase_angle_bisector",
    "bisector_longitude_rate_deg_per_d",
    "synodic_sidereal_difference_h",
    "bisector_azimuth_rate_deg_per_d",
    "pole_marginal_bisector_rate_deg_per_d",
    "pole_lattice",
    "SYNODIC_BOUND_QUANTILE",
    "solve_kepler",
    "OrbitalElements",
    "Observatory",
    "ObservingGeometry",
    "earth_heliocentric_ecliptic",
    "observer_heliocentric_ecliptic",
    "observing_geometry",
    "equatorial_to_ecliptic",
]

#: IAU 2012 Resolution B2: the astronomical unit in km (exact).
AU_KM = 149_597_870.7
#: Speed of light in km/s (exact, SI).
C_KM_S = 299_792.458
#: Light travel time across one au, in days (499.004784 s).
LIGHT_TIME_DAYS_PER_AU = AU_KM / C_KM_S / 86400.0
#: Heliocentric gravitational constant in au^3/day^2 from the Gaussian constant
#: k = 0.01720209895 (IAU 1976 system of constants).
GM_SUN_AU3_D2 = 0.01720209895**2
#: Obliquity of the ecliptic at J2000.0, IAU 2006 (84381.406 arcsec).
OBLIQUITY_J2000_DEG = 84381.406 / 3600.0


def light_time_days(delta_au):
    """One-way light travel time in days for an observer distance ``delta_au`` (au)."""
    return np.asarray(delta_au, dtype=float) * LIGHT_TIME_DAYS_PER_AU


def reduced_magnitude(mag, r_au, delta_au):
    """Magnitude reduced to unit distances, ``m - 5 log10(r Delta)``.

    Parameters
    ----------
    mag : array_like
        Apparent magnitude.
    r_au, delta_au : array_like
        Heliocentric and observer distances in au (positive).
    """
    r = np.asarray(r_au, dtype=float)
    d = np.asarray(delta_au, dtype=float)
    if np.any(~(r > 0)) or np.any(~(d > 0)):
        raise GeometryError("distances r_au and delta_au must be positive and finite")
    return np.asarray(mag, dtype=float) - 5.0 * np.log10(r * d)


def _unit(v):
    v = np.asarray(v, dtype=float)
    norm = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(~(norm > 0)):
        raise GeometryError("direction vectors must be non-zero and finite")
    return v / norm


def phase_angle_deg(sun_dir, obs_dir):
    """Solar phase angle (degrees) between the asteroid-to-Sun and asteroid-to-observer directions.

    Uses ``atan2(|s x o|, s . o)``, accurate at all angles (arccos loses precision near 0 and 180 deg).
    """
    s = _unit(sun_dir)
    o = _unit(obs_dir)
    cross = np.linalg.norm(np.cross(s, o), axis=-1)
    dot = np.sum(s * o, axis=-1)
    return np.degrees(np.arctan2(cross, dot))


def phase_angle_bisector(sun_dir, obs_dir):
    """Unit phase-angle bisector, the normalised sum of the Sun and observer unit vectors."""
    return _unit(_unit(sun_dir) + _unit(obs_dir))


def bisector_longitude_rate_deg_per_d(t_d, sun_dir, obs_dir) -> float:
    """Mean rate of the phase-angle bisector's ecliptic longitude over the data, deg/day (signed).

    The net change of the unwrapped longitude of :func:`phase_angle_bisector` between the first and
    the last point, divided by the span. NaN for fewer than two points or a zero span.
    """
    t = np.asarray(t_d, float)
    if t.size < 2 or not np.ptp(t) > 0:
        return float("nan")
    order = np.argsort(t)
    b = phase_angle_bisector(np.asarray(sun_dir, float)[order], np.asarray(obs_dir, float)[order])
    lon = np.unwrap(np.arctan2(b[:, 1], b[:, 0]))
    return float(np.degrees(lon[-1] - lon[0]) / (t[order][-1] - t[order][0]))


def synodic_sidereal_difference_h(period_h: float, rate_deg_per_d: float) -> float:
    """Expected ``|P_syn - P_sid|`` of a rotation period from the bisector's motion, hours.

    The phase-angle-bisector rule of thumb (Harris et al. 1984, Icarus 57, 251; in this form
    ``P_syn - P_sid = omega_PAB P^2`` in Pravec et al. 2005, Icarus 173, 108, from memory): the
    synodic frequency differs from the sidereal one by the bisector's angular rate in cycles per
    day, ``|f_syn - f_sid| = |rate| / 360``, so ``|Delta P| = P^2 |rate| / 360 / 24`` (P in
    hours). The rate is the ecliptic-longitude rate: exact for a pole at the ecliptic pole, an
    approximation for others.
    """
    return float(period_h) ** 2 * abs(float(rate_deg_per_d)) / 360.0 / 24.0


def solve_kepler(mean_anomaly, eccentricity, *, tol=1e-15, max_iter=60):
    """Eccentric anomaly E from Kepler's equation ``M = E - e sin E`` (elliptic, 0 <= e < 1).

    Vectorised safeguarded Newton iteration: each step is kept inside a bracket
    that always contains the root, so it converges for every e < 1 including
    e -> 1 near perihelion, where plain Newton can overshoot.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly in radians (any real value).
    eccentricity : float or array_like
        Eccentricity, 0 <= e < 1.

    Returns
    -------
    numpy.ndarray
        Eccentric anomaly in radians, in the same 2*pi branch as ``mean_anomaly``.
    """
    m = np.asarray(mean_anomaly, dtype=float)
    e = np.broadcast_to(np.asarray(eccentricity, dtype=float), m.shape)
    if np.any(~((e >= 0) & (e < 1))):
        raise GeometryError("eccentricity must satisfy 0 <= e < 1 for elliptic orbits")
    turns = np.round(m / (2 * np.pi))
    mr = m - 2 * np.pi * turns  # in [-pi, pi]
    sign = np.where(mr < 0, -1.0, 1.0)
    ma = np.abs(mr)  # solve on [0, pi]; E(-M) = -E(M)
    lo = ma.copy()  # E >= M for M in [0, pi]
    hi = np.minimum(ma + e, np.pi)
    # starting guess (Danby 1987): E0 = M + 0.85 e sign(sin M)
    ecc = np.clip(ma + 0.85 * e, lo, hi)
    for _ in range(max_iter):
        f = ecc - e * np.sin(ecc) - ma
        lo = np.where(f < 0, ecc, lo)
        hi = np.where(f > 0, ecc, hi)
        fp = 1.0 - e * np.cos(ecc)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = f / fp
        new = ecc - step
        outside = ~((new > lo) & (new < hi)) | ~np.isfinite(new)
        new = np.where(outside, 0.5 * (lo + hi), new)
        done = np.abs(new - ecc) <= tol * np.maximum(1.0, np.abs(ecc))
        ecc = new
        if np.all(done):
            break
    return sign * ecc + 2 * np.pi * turns


def _rotation_orbit_to_ecliptic(i, node, peri):
    """Matrix (3, 3) from the perifocal frame to the ecliptic frame: Rz(node) Rx(i) Rz(peri)."""
    ci, si = np.cos(i), np.sin(i)
    cn, sn = np.cos(node), np.sin(node)
    cw, sw = np.cos(peri), np.sin(peri)
    return np.array(
        [
            [cn * cw - sn * sw * ci, -cn * sw - sn * cw * ci, sn * si],
            [sn * cw + cn * sw * ci, -sn * sw + cn * cw * ci, -cn * si],
            [sw * si, cw * si, ci],
        ]
    )


@dataclass(frozen=True)
class OrbitalElements:
    """Osculating heliocentric elliptic elements, ecliptic and mean equinox J2000.

    Attributes
    ----------
    a_au : float
        Semi-major axis, au.
    e : float
        Eccentricity, 0 <= e < 1.
    i_deg : float
        Inclination, degrees.
    node_deg : float
        Longitude of the ascending node, degrees.
    peri_deg : float
        Argument of perihelion, degrees.
    mean_anomaly_deg : float
        Mean anomaly at ``epoch_jd``, degrees.
    epoch_jd : float
        Epoch of the elements, JD (TDB).
    gm_au3_d2 : float
        Gravitational parameter, au^3/day^2 (default: the Sun's, Gaussian constant).
    """

    a_au: float
    e: float
    i_deg: float
    node_deg: float
    peri_deg: float
    mean_anomaly_deg: float
    epoch_jd: float
    gm_au3_d2: float = GM_SUN_AU3_D2

    def __post_init__(self):
        values = [self.a_au, self.e, self.i_deg, self.node_deg, self.peri_deg, self.mean_anomaly_deg, self.epoch_jd]
        if not all(np.isfinite(v) for v in values):
            raise GeometryError("orbital elements must all be finite numbers")
        if not self.a_au > 0:
            raise GeometryError(f"semi-major axis must be positive, got a={self.a_au} au")
        if not 0 <= self.e < 1:
            raise GeometryError(f"eccentricity must satisfy 0 <= e < 1, got e={self.e}")

    @property
    def mean_motion_rad_d(self) -> float:
        """Mean motion n = sqrt(GM / a^3), radians per day."""
        return float(np.sqrt(self.gm_au3_d2 / self.a_au**3))

    def position_velocity(self, t_jd):
        """Heliocentric ecliptic position (au) and velocity (au/day) at TDB times ``t_jd``.

        Returns
        -------
        pos, vel : numpy.ndarray
            Arrays of shape ``(n, 3)`` (or ``(3,)`` for a scalar time).
        """
        t = np.asarray(t_jd, dtype=float)
        m = np.radians(self.mean_anomaly_deg) + self.mean_motion_rad_d * (t - self.epoch_jd)
        ecc = solve_kepler(m, self.e)
        a, e = self.a_au, self.e
        cos_e, sin_e = np.cos(ecc), np.sin(ecc)
        b = a * np.sqrt(1 - e * e)
        x = a * (cos_e - e)
        y = b * sin_e
        edot = self.mean_motion_rad_d / (1 - e * cos_e)
        vx = -a * sin_e * edot
        vy = b * cos_e * edot
        rot = _rotation_orbit_to_ecliptic(
            np.radians(self.i_deg), np.radians(self.node_deg), np.radians(self.peri_deg)
        )
        pf = np.stack([x, y, np.zeros_like(x)], axis=-1)
        vf = np.stack([vx, vy, np.zeros_like(x)], axis=-1)
        return pf @ rot.T, vf @ rot.T

    def position(self, t_jd):
        """Heliocentric ecliptic position in au at TDB times ``t_jd``, shape ``(n, 3)``."""
        return self.position_velocity(t_jd)[0]

    @classmethod
    def from_state(cls, pos_au, vel_au_d, epoch_jd, gm_au3_d2=GM_SUN_AU3_D2):
        """Osculating elements from a heliocentric ecliptic state vector (position au, velocity au/day)."""
        r = np.asarray(pos_au, dtype=float)
        v = np.asarray(vel_au_d, dtype=float)
        rn = np.linalg.norm(r)
        h = np.cross(r, v)
        hn = np.linalg.norm(h)
        evec = np.cross(v, h) / gm_au3_d2 - r / rn
        e = float(np.linalg.norm(evec))
        energy = 0.5 * v @ v - gm_au3_d2 / rn
        if not energy < 0:
            raise GeometryError("state vector is not on a bound (elliptic) orbit")
        a = -gm_au3_d2 / (2 * energy)
        inc = np.arccos(np.clip(h[2] / hn, -1, 1))
        node_vec = np.array([-h[1], h[0], 0.0])
        nn = np.linalg.norm(node_vec)
        node = np.arctan2(h[0], -h[1]) if nn > 0 else 0.0
        if e > 1e-12:
            if nn > 0:
                peri = np.arctan2(evec @ np.cross(h / hn, node_vec / nn), evec @ (node_vec / nn))
            else:
                peri = np.arctan2(evec[1], evec[0])
            cos_nu = np.clip(evec @ r / (e * rn), -1, 1)
            nu = np.arccos(cos_nu)
            if r @ v < 0:
                nu = 2 * np.pi - nu
            ecc_anom = 2 * np.arctan2(np.sqrt(1 - e) * np.sin(nu / 2), np.sqrt(1 + e) * np.cos(nu / 2))
        else:
            peri = 0.0
            ref = node_vec / nn if nn > 0 else np.array([1.0, 0.0, 0.0])
            ecc_anom = np.arctan2(r @ np.cross(h / hn, ref), r @ ref)
        mean = ecc_anom - e * np.sin(ecc_anom)
        return cls(
            a_au=float(a),
            e=e,
            i_deg=float(np.degrees(inc)),
            node_deg=float(np.degrees(node) % 360),
            peri_deg=float(np.degrees(peri) % 360),
            mean_anomaly_deg=float(np.degrees(mean) % 360),
            epoch_jd=float(epoch_jd),
            gm_au3_d2=gm_au3_d2,
        )


@dataclass(frozen=True)
class Observatory:
    """A ground station: geodetic longitude (deg, east positive), latitude (deg), height (m)."""

    lon_deg: float
    lat_deg: float
    height_m: float = 0.0
    name: str = ""

    def __post_init__(self):
        if not (-90 <= self.lat_deg <= 90) or not np.isfinite(self.lon_deg) or not np.isfinite(self.height_m):
            raise GeometryError(
                f"observatory coordinates out of range: lon={self.lon_deg}, lat={self.lat_deg}, h={self.height_m} m"
            )


def equatorial_to_ecliptic(xyz):
    """Rotate ICRS/equatorial vectors (..., 3) into the J2000 ecliptic frame (rotation by the obliquity about x).

    The frame bias between ICRS and the dynamical J2000 equator (about 20 mas) is
    neglected; it is far below anything a light curve can see.
    """
    eps = np.radians(OBLIQUITY_J2000_DEG)
    c, s = np.cos(eps), np.sin(eps)
    rot = np.array([[1.0, 0.0, 0.0], [0.0, c, s], [0.0, -s, c]])
    return np.asarray(xyz, dtype=float) @ rot.T


def earth_heliocentric_ecliptic(t_tdb_jd):
    """Heliocentric ecliptic position (au) and velocity (au/day) of the Earth's centre.

    Uses astropy's built-in analytic ephemeris (ERFA ``epv00``, offline, accurate
    to a few km), so no ephemeris file is downloaded.

    Returns
    -------
    pos, vel : numpy.ndarray
        Shape ``(n, 3)``.
    """
    from astropy.coordinates import get_body_barycentric_posvel
    from astropy.time import Time

    t = Time(np.atleast_1d(np.asarray(t_tdb_jd, dtype=float)), format="jd", scale="tdb")
    pe, ve = get_body_barycentric_posvel("earth", t, ephemeris="builtin")
    ps, vs = get_body_barycentric_posvel("sun", t, ephemeris="builtin")
    pos = (pe - ps).xyz.to_value("au").T
    vel = (ve - vs).xyz.to_value("au/d").T
    return equatorial_to_ecliptic(pos), equatorial_to_ecliptic(vel)


def observer_heliocentric_ecliptic(t_tdb_jd, observatory: Observatory | None = None):
    """Heliocentric ecliptic position (au) of the observer: the geocentre, or a ground station.

    For a station, its geocentric position comes from astropy (``EarthLocation.get_gcrs``)
    with the bundled Earth-orientation tables; automatic downloads are switched off,
    so dates beyond the bundled tables fall back to predicted values with a warning.
    """
    pos, _ = earth_heliocentric_ecliptic(t_tdb_jd)
    if observatory is None:
        return pos
    import astropy.units as u
    from astropy.coordinates import EarthLocation
    from astropy.time import Time
    from astropy.utils import iers

    loc = EarthLocation.from_geodetic(
        observatory.lon_deg * u.deg, observatory.lat_deg * u.deg, observatory.height_m * u.m
    )
    with iers.conf.set_temp("auto_download", False), iers.conf.set_temp("iers_degraded_accuracy", "warn"):
        t = Time(np.atleast_1d(np.asarray(t_tdb_jd, dtype=float)), format="jd", scale="tdb")
        gcrs = loc.get_gcrs(t)
        station = gcrs.cartesian.xyz.to_value("au").T
    return pos + equatorial_to_ecliptic(station)


@dataclass(frozen=True)
class ObservingGeometry:
    """Sun-asteroid-observer geometry at a set of observation times.

    Attributes
    ----------
    r_au, delta_au : numpy.ndarray, shape (n,)
        Heliocentric and observer distances of the asteroid, au.
    phase_deg : numpy.ndarray, shape (n,)
        Solar phase angle, degrees.
    sun_dir, obs_dir : numpy.ndarray, shape (n, 3)
        Unit vectors from the asteroid to the Sun and to the observer, ecliptic J2000.
    light_time_d : numpy.ndarray, shape (n,)
        Light time, days (emission time = observation time - light time).
    """

    r_au: np.ndarray
    delta_au: np.ndarray
    phase_deg: np.ndarray
    sun_dir: np.ndarray
    obs_dir: np.ndarray
    light_time_d: np.ndarray


def observing_geometry(t_obs_tdb_jd, elements: OrbitalElements, observatory: Observatory | None = None,
                       *, iterations: int = 3) -> ObservingGeometry:
    """Geometry of an asteroid on a two-body orbit seen from the Earth (or a station).

    The asteroid's position is taken at the emission time ``t - Delta/c``
    (iterated ``iterations`` times, which converges to far below a millisecond);
    the observer's at the observation time.

    Parameters
    ----------
    t_obs_tdb_jd : array_like
        Observation times, JD (TDB).
    elements : OrbitalElements
        The asteroid's heliocentric osculating elements.
    observatory : Observatory, optional
        Ground station; geocentric when omitted.
    """
    t = np.atleast_1d(np.asarray(t_obs_tdb_jd, dtype=float))
    observer = observer_heliocentric_ecliptic(t, observatory)
    lt = np.zeros_like(t)
    for _ in range(max(1, iterations)):
        ast = elements.position(t - lt)
        rel = observer - ast
        delta = np.linalg.norm(rel, axis=-1)
        lt = light_time_days(delta)
    ast = elements.position(t - lt)
    rel = observer - ast
    delta = np.linalg.norm(rel, axis=-1)
    r = np.linalg.norm(ast, axis=-1)
    sun_dir = -ast / r[:, None]
    obs_dir = rel / delta[:, None]
    return ObservingGeometry(
        r_au=r,
        delta_au=delta,
        phase_deg=phase_angle_deg(sun_dir, obs_dir),
        sun_dir=sun_dir,
        obs_dir=obs_dir,
        light_time_d=light_time_days(delta),
    )


#: Quantile of the pole-marginal synodic difference used as the synodic period's systematic error:
#: chosen on the calibration half of the validation library (0.68 covered 53 %, 0.80 68 %, 0.90 84 %
#: of the clear dense PA periods; the bisector rule is first order and the realised difference of a
#: real shape and scattering law exceeds the true pole's prediction by up to about 1.7x).
SYNODIC_BOUND_QUANTILE = 0.80
#: Poles of the pole-marginal synodic difference: a Fibonacci lattice on the sphere (deterministic,
#: near-uniform; 2000 points fix the 68th percentile to about 1 %).
N_POLE_LATTICE = 2000


def pole_lattice(n: int = N_POLE_LATTICE) -> np.ndarray:
    """``n`` near-uniform unit vectors on the sphere (Fibonacci lattice; Gonzalez 2010, Math. Geosci. 42, 49)."""
    k = np.arange(n) + 0.5
    z = 1.0 - 2.0 * k / n
    lon = np.pi * (1.0 + 5.0**0.5) * k
    rho = np.sqrt(1.0 - z**2)
    return np.column_stack([rho * np.cos(lon), rho * np.sin(lon), z])


def bisector_azimuth_rate_deg_per_d(t_d, sun_dir, obs_dir, poles) -> np.ndarray:
    """Rate of the phase-angle bisector's azimuth about each spin axis over the data, deg/day.

    The synodic rotation phase of a PA rotator is the sidereal one minus the azimuth of the
    phase-angle bisector about the spin axis (Harris et al. 1984, Icarus 57, 251), so
    ``f_syn = f_sid - rate / 360`` (c/d) for a spin about ``pole`` in the right-handed sense. The
    rate is the least-squares slope of the unwrapped azimuth against time over the data points (the
    linear phase drift a frequency fit absorbs). For a pole at the ecliptic pole it is the
    bisector's ecliptic-longitude rate of :func:`bisector_longitude_rate_deg_per_d`; for other poles
    it can be several times larger (the azimuth turns fast when the bisector passes near the pole).

    Parameters
    ----------
    t_d : array_like (n,)
        Times, days.
    sun_dir, obs_dir : array_like (n, 3)
        Unit vectors from the asteroid to the Sun and to the observer (ecliptic frame).
    poles : array_like (k, 3) or (3,)
        Spin-axis unit vectors in the same frame.

    Returns
    -------
    numpy.ndarray, shape (k,)
        Rates, deg/day (NaN for fewer than two points or a zero span).
    """
    poles = np.atleast_2d(np.asarray(poles, float))
    t = np.asarray(t_d, float)
    if t.size < 2 or not np.ptp(t) > 0:
        return np.full(len(poles), np.nan)
    order = np.argsort(t)
    t = t[order]
    b = phase_angle_bisector(np.asarray(sun_dir, float)[order], np.asarray(obs_dir, float)[order])
    ref = np.where(np.abs(poles[:, 2:3]) < 0.9, np.array([[0.0, 0.0, 1.0]]), np.array([[1.0, 0.0, 0.0]]))
    e1 = np.cross(poles, ref)
    e1 /= np.linalg.norm(e1, axis=1, keepdims=True)
    e2 = np.cross(poles, e1)
    az = np.unwrap(np.arctan2(b @ e2.T, b @ e1.T), axis=0)  # (n, k)
    tc = t - t.mean()
    slope = (tc @ (az - az.mean(axis=0))) / (tc @ tc)
    return np.degrees(slope)


def pole_marginal_bisector_rate_deg_per_d(t_d, sun_dir, obs_dir, quantile: float = SYNODIC_BOUND_QUANTILE) -> float:
    """The ``quantile`` of ``|azimuth rate|`` of the bisector over spin axes uniform on the sphere, deg/day.

    Without a known pole this bounds the synodic-sidereal difference of a PA period at the given
    probability (a uniform prior on the pole): ``|f_syn - f_sid| <= value / 360`` c/d, i.e.
    ``|P_syn - P_sid| <= synodic_sidereal_difference_h(P, value)``. NaN without geometry. The
    default quantile is the one that calibrates the synodic period's 68 % interval (in quadrature
    with the fit's width) on the calibration half of the validation library
    (docs/methods-classify.md, "PA period errors").
    """
    rates = bisector_azimuth_rate_deg_per_d(t_d, sun_dir, obs_dir, pole_lattice())
    if not np.all(np.isfinite(rates)):
        return float("nan")
    return float(np.quantile(np.abs(rates), quantile))
