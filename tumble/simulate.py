"""Forward model and simulator: synthetic light curves of a rotating scattering ellipsoid.

A simulated light curve combines

- a rotation state (:class:`tumble.dynamics.RotationState`: PA, SAM or LAM),
- a shape (triaxial ellipsoid, semi-axes a >= b >= c along body axes 1, 2, 3),
- an observing plan (:class:`DenseCampaign` or :class:`SparseSurvey`),
- the Sun-asteroid-observer geometry from two-body orbital elements
  (:func:`tumble.geometry.observing_geometry`),
- a scattering law (:mod:`tumble.brightness`) and a phase trend,
- a noise model (:class:`NoiseModel`).

Magnitudes are

``m = H - 2.5 log10(I / I_sphere(0)) + 5 log10(r Delta) + trend(alpha) + night offset + noise``,

where ``I`` is the disk-integrated brightness integral of the ellipsoid at the
emission time ``t_obs(TDB) - Delta/c`` (light time; IAU 2012 au and c) and
``I_sphere(0)`` that of the equal-volume sphere at zero phase, so that ``H`` is
the magnitude of that sphere at unit distances and zero phase.

Times: plans produce observation times in JD (UTC), as observers record them;
they are converted to TDB with astropy, exactly as :func:`tumble.photometry.read_lightcurve`
does on reading, so a written and re-read light curve has the model times the
simulator used.

Randomness is explicit: every function that draws takes ``rng``
(``numpy.random.Generator``, an int seed or None).
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field, fields
from pathlib import Path

import numpy as np

from tumble import brightness, geometry
from tumble.exceptions import TumbleError

__all__ = [
    "SimulationError",
    "DenseCampaign",
    "SparseSurvey",
    "GivenCadence",
    "NoiseModel",
    "ObservingTimes",
    "SimulatedLightCurve",
    "utc_to_tdb",
    "opposition_elements",
    "solar_elongation_deg",
    "plan_from_dict",
    "model_magnitudes",
    "simulate_lightcurve",
    "write_simulation",
    "read_truth",
    "binary_event_factors",
    "state_to_dict",
    "state_from_dict",
]


class SimulationError(TumbleError, ValueError):
    """Bad simulator input (plan, shape, noise model or state description)."""


def _rng(rng) -> np.random.Generator:
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(rng)


def _positive(name, value):
    if not (isinstance(value, (int, float, np.integer, np.floating)) and math.isfinite(value) and value > 0):
        raise SimulationError(f"{name} must be a positive number, got {value!r}")


def _non_negative(name, value):
    if not (isinstance(value, (int, float, np.integer, np.floating)) and math.isfinite(value) and value >= 0):
        raise SimulationError(f"{name} must be a non-negative number, got {value!r}")


# ---------------------------------------------------------------------------
# Observing plans


@dataclass(frozen=True)
class ObservingTimes:
    """Observation times of a plan.

    Attributes
    ----------
    t_utc_jd : numpy.ndarray, shape (n,)
        Observation times, JD (UTC), sorted.
    night : numpy.ndarray of int, shape (n,)
        Index of the night (or zero-point group) of each point (0, 1, ...);
        -1 for points without a zero point of their own.
    session : numpy.ndarray of int, shape (n,)
        Session of each point: the night for a dense campaign (one zero-point
        each), -1 (sparse) for a survey.
    """

    t_utc_jd: np.ndarray
    night: np.ndarray
    session: np.ndarray


@dataclass(frozen=True)
class DenseCampaign:
    """A dense photometric campaign: consecutive nights of continuous coverage.

    Attributes
    ----------
    start_jd_utc : float
        Start of the first night, JD (UTC).
    n_nights : int
        Number of nights.
    hours_per_night : float
        Length of each night's run, hours.
    cadence_min : float
        Time between exposures, minutes.
    night_spacing_d : float
        Days between the starts of successive nights (1 = every night).
    zero_point_sigma_mag : float
        Standard deviation of the per-night zero-point offsets, mag (each night
        has its own calibration; the offsets are drawn once per night).
    band : str
        Band label written with the data.
    jitter_fraction : float
        Each exposure time is shifted by a uniform random amount within
        +-``jitter_fraction`` of the cadence (default 0.1; 0 gives an exactly
        regular grid, which makes every period scan's cadence aliases exact).
    """

    start_jd_utc: float
    n_nights: int = 5
    hours_per_night: float = 6.0
    cadence_min: float = 5.0
    night_spacing_d: float = 1.0
    zero_point_sigma_mag: float = 0.0
    band: str = "V"
    jitter_fraction: float = 0.1

    def __post_init__(self):
        if not (isinstance(self.n_nights, (int, np.integer)) and self.n_nights >= 1):
            raise SimulationError(f"dense plan: n_nights must be a positive integer, got {self.n_nights!r}")
        _positive("dense plan: hours_per_night", self.hours_per_night)
        _positive("dense plan: cadence_min", self.cadence_min)
        _positive("dense plan: night_spacing_d", self.night_spacing_d)
        _non_negative("dense plan: zero_point_sigma_mag", self.zero_point_sigma_mag)
        if not math.isfinite(self.start_jd_utc):
            raise SimulationError("dense plan: start_jd_utc must be finite")
        if self.hours_per_night / 24.0 >= self.night_spacing_d:
            raise SimulationError("dense plan: a night's run must be shorter than the spacing between nights")
        if not (0.0 <= self.jitter_fraction < 0.5):
            raise SimulationError(f"dense plan: jitter_fraction must lie in [0, 0.5), got {self.jitter_fraction!r}")

    @property
    def points_per_night(self) -> int:
        """Exposures per night: ``floor(hours * 60 / cadence) + 1`` (both ends included)."""
        return int(math.floor(self.hours_per_night * 60.0 / self.cadence_min + 1e-9)) + 1

    @property
    def n_points(self) -> int:
        """Total number of points."""
        return self.n_nights * self.points_per_night

    def times(self, rng=None) -> ObservingTimes:
        """The plan's observation times (the jitter is drawn from ``rng``)."""
        k = np.arange(self.points_per_night)
        nights = np.arange(self.n_nights)
        t = (self.start_jd_utc + nights[:, None] * self.night_spacing_d
             + k[None, :] * (self.cadence_min / 1440.0)).reshape(-1)
        if self.jitter_fraction > 0:
            g = _rng(rng)
            t = t + g.uniform(-self.jitter_fraction, self.jitter_fraction, t.size) * (self.cadence_min / 1440.0)
        night = np.repeat(nights, self.points_per_night)
        return ObservingTimes(t_utc_jd=t, night=night, session=night.copy())

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return {"plan": "dense", **asdict(self)}


@dataclass(frozen=True)
class SparseSurvey:
    """A sparse survey cadence: a few points on randomly chosen nights over months to years.

    Attributes
    ----------
    start_jd_utc : float
        Start of the survey, JD (UTC).
    span_d : float
        Length of the survey, days; ``floor(span_d)`` candidate nights.
    n_nights : int
        Nights with observations, drawn at random without replacement from the
        candidate nights (the random gaps of a survey's cadence).
    points_per_night : int
        Visits per observed night.
    visit_spacing_min : float
        Mean time between visits within a night, minutes (each gap is drawn
        uniformly within +-50 % of it).
    window_h : float
        The first visit falls at a uniformly random time within the first
        ``window_h`` hours of the night.
    band : str
        Band label written with the data.
    min_elongation_deg : float
        Visits at a solar elongation (Sun-observer-asteroid angle) below this
        are dropped when the light curve is simulated, as a survey cannot
        point near the Sun (default 0: no cut). The number dropped is in the
        truth (``n_dropped_elongation``).
    """

    start_jd_utc: float
    span_d: float = 365.0
    n_nights: int = 60
    points_per_night: int = 2
    visit_spacing_min: float = 30.0
    window_h: float = 6.0
    band: str = "r"
    min_elongation_deg: float = 0.0

    def __post_init__(self):
        _positive("sparse plan: span_d", self.span_d)
        for name in ("n_nights", "points_per_night"):
            v = getattr(self, name)
            if not (isinstance(v, (int, np.integer)) and v >= 1):
                raise SimulationError(f"sparse plan: {name} must be a positive integer, got {v!r}")
        _positive("sparse plan: visit_spacing_min", self.visit_spacing_min)
        _positive("sparse plan: window_h", self.window_h)
        if self.n_nights > int(math.floor(self.span_d)):
            raise SimulationError(f"sparse plan: {self.n_nights} nights do not fit in a span of {self.span_d:g} days")
        night_length_h = self.window_h + 1.5 * self.visit_spacing_min * (self.points_per_night - 1) / 60.0
        if night_length_h >= 24.0:
            raise SimulationError("sparse plan: a night's visits must fit within a day")
        if not math.isfinite(self.start_jd_utc):
            raise SimulationError("sparse plan: start_jd_utc must be finite")
        if not (0.0 <= self.min_elongation_deg < 180.0):
            raise SimulationError(f"sparse plan: min_elongation_deg must lie in [0, 180), got {self.min_elongation_deg!r}")

    @property
    def n_points(self) -> int:
        """Total number of points."""
        return self.n_nights * self.points_per_night

    def times(self, rng=None) -> ObservingTimes:
        """Draw the survey's observation times."""
        g = _rng(rng)
        nights = np.sort(g.choice(int(math.floor(self.span_d)), size=self.n_nights, replace=False))
        first = g.uniform(0.0, self.window_h / 24.0, size=self.n_nights)
        gaps = self.visit_spacing_min / 1440.0 * g.uniform(0.5, 1.5, size=(self.n_nights, self.points_per_night - 1))
        offsets = np.concatenate([np.zeros((self.n_nights, 1)), np.cumsum(gaps, axis=1)], axis=1)
        t = (self.start_jd_utc + nights[:, None] + first[:, None] + offsets).reshape(-1)
        night = np.repeat(np.arange(self.n_nights), self.points_per_night)
        return ObservingTimes(t_utc_jd=t, night=night, session=np.full(t.size, -1))

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return {"plan": "sparse", **asdict(self)}


@dataclass(frozen=True, eq=False)
class GivenCadence:
    """Observation times taken as given: e.g. the cadence of a real light curve, for injection-recovery.

    Attributes
    ----------
    t_utc_jd : numpy.ndarray, shape (n,)
        Observation times, JD (UTC), strictly increasing.
    session : numpy.ndarray of int, shape (n,), or None
        Session of each point (>= 0: its own zero point, drawn from
        N(0, ``zero_point_sigma_mag``) per session; -1: sparse). Default: all -1.
    band : str or numpy.ndarray of str
        Band label, one for all points or one per point.
    zero_point_sigma_mag : float
        Scatter of the per-session zero points, mag.
    """

    t_utc_jd: np.ndarray
    session: np.ndarray | None = None
    band: object = "V"
    zero_point_sigma_mag: float = 0.0

    def __post_init__(self):
        t = np.atleast_1d(np.asarray(self.t_utc_jd, dtype=float))
        if t.ndim != 1 or t.size < 2 or not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
            raise SimulationError("given cadence: need at least two finite, strictly increasing times")
        object.__setattr__(self, "t_utc_jd", t)
        sess = np.full(t.size, -1) if self.session is None else np.asarray(self.session)
        if sess.shape != t.shape:
            raise SimulationError(f"given cadence: {sess.size} sessions for {t.size} times")
        try:
            sess = sess.astype(int)
        except (TypeError, ValueError):
            raise SimulationError("given cadence: sessions must be integers (-1 for sparse points)") from None
        # renumber the sessions 0, 1, ... in order of first appearance; negatives stay sparse
        labels = [int(v) for v in dict.fromkeys(sess[sess >= 0].tolist())]
        index = {v: i for i, v in enumerate(labels)}
        object.__setattr__(self, "session", np.array([index.get(int(v), -1) for v in sess], dtype=int))
        band = np.asarray(self.band)
        if band.ndim not in (0, 1) or (band.ndim == 1 and band.shape != t.shape):
            raise SimulationError("given cadence: band must be one label or one per point")
        _non_negative("given cadence: zero_point_sigma_mag", self.zero_point_sigma_mag)

    @classmethod
    def from_lightcurve(cls, lc, zero_point_sigma_mag: float = 0.0) -> "GivenCadence":
        """The cadence, sessions and bands of a :class:`tumble.photometry.LightCurve`."""
        return cls(np.asarray(lc.t_obs), np.asarray(lc.session), np.asarray(lc.band).astype(str),
                   zero_point_sigma_mag)

    @property
    def n_points(self) -> int:
        """Number of points."""
        return int(self.t_utc_jd.size)

    def times(self, rng=None) -> ObservingTimes:
        """The given times (nothing is drawn)."""
        return ObservingTimes(t_utc_jd=self.t_utc_jd.copy(), night=self.session.copy(), session=self.session.copy())

    def to_dict(self) -> dict:
        """JSON-ready description (the times in full)."""
        band = np.asarray(self.band)
        return {"plan": "given", "t_utc_jd": [float(v) for v in self.t_utc_jd],
                "session": [int(v) for v in self.session],
                "band": str(band) if band.ndim == 0 else [str(b) for b in band],
                "zero_point_sigma_mag": float(self.zero_point_sigma_mag)}


def plan_from_dict(d: dict):
    """Rebuild a plan from the ``to_dict`` of :class:`DenseCampaign`, :class:`SparseSurvey` or :class:`GivenCadence`."""
    d = dict(d)
    kind = d.pop("plan", None)
    cls = {"dense": DenseCampaign, "sparse": SparseSurvey, "given": GivenCadence}.get(kind)
    if cls is None:
        raise SimulationError(f"unknown plan '{kind}' (dense, sparse or given)")
    names = {f.name for f in fields(cls)}
    unknown = set(d) - names
    if unknown:
        raise SimulationError(f"{kind} plan: unknown field(s) {', '.join(sorted(unknown))}")
    return cls(**d)


# ---------------------------------------------------------------------------
# Noise


@dataclass(frozen=True)
class NoiseModel:
    """Photometric noise: Gaussian errors with optional outliers.

    Attributes
    ----------
    sigma_mag : float
        1-sigma Gaussian error, mag; also the error written with each point.
        Zero gives noise-free magnitudes (written with an error of
        ``floor_err_mag``).
    outlier_fraction : float
        Probability that a point is an outlier, in [0, 1).
    outlier_sigma_mag : float
        Standard deviation of the extra Gaussian scatter of an outlier, mag.
    floor_err_mag : float
        Error written for noise-free points (errors must be positive).
    """

    sigma_mag: float = 0.01
    outlier_fraction: float = 0.0
    outlier_sigma_mag: float = 0.3
    floor_err_mag: float = 0.001

    def __post_init__(self):
        _non_negative("noise: sigma_mag", self.sigma_mag)
        _non_negative("noise: outlier_sigma_mag", self.outlier_sigma_mag)
        _positive("noise: floor_err_mag", self.floor_err_mag)
        if not (0.0 <= self.outlier_fraction < 1.0):
            raise SimulationError(f"noise: outlier_fraction must lie in [0, 1), got {self.outlier_fraction!r}")

    @property
    def err_mag(self) -> float:
        """Error written with each point, mag."""
        return self.sigma_mag if self.sigma_mag > 0 else self.floor_err_mag

    def draw(self, n: int, rng=None):
        """Noise (mag, shape (n,)) and the outlier mask."""
        g = _rng(rng)
        noise = self.sigma_mag * g.standard_normal(n) if self.sigma_mag > 0 else np.zeros(n)
        outlier = np.zeros(n, dtype=bool)
        if self.outlier_fraction > 0:
            outlier = g.random(n) < self.outlier_fraction
            noise = noise + np.where(outlier, self.outlier_sigma_mag * g.standard_normal(n), 0.0)
        return noise, outlier

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return asdict(self)


# ---------------------------------------------------------------------------
# Geometry helpers


def utc_to_tdb(t_utc_jd) -> np.ndarray:
    """UTC Julian dates to TDB Julian dates (astropy; same arithmetic as the photometry reader)."""
    from astropy.time import Time

    t = Time(np.atleast_1d(np.asarray(t_utc_jd, dtype=float)), format="jd", scale="utc")
    utc = t.utc
    tdb = t.tdb
    return utc.jd1 + utc.jd2, tdb.jd1 + tdb.jd2


def opposition_elements(t_tdb_jd: float, *, a_au: float = 2.4, e: float = 0.1, i_deg: float = 6.0,
                        node_deg: float = 40.0, peri_deg: float = 110.0, days_before: float = 0.0
                        ) -> geometry.OrbitalElements:
    """An invented orbit that puts the asteroid at opposition ``days_before`` days after ``t_tdb_jd``.

    The mean anomaly at the epoch is solved (a few Newton steps on the
    heliocentric ecliptic longitude) so that the asteroid's longitude equals
    the Earth's at ``t_tdb_jd + days_before``; convenient default geometry for
    simulations (small phase angles at the start of a campaign).
    """
    t_opp = float(t_tdb_jd) + float(days_before)
    earth, _ = geometry.earth_heliocentric_ecliptic(t_opp)
    target = math.atan2(earth[0, 1], earth[0, 0])
    m = 0.0
    for _ in range(30):
        el = geometry.OrbitalElements(a_au, e, i_deg, node_deg, peri_deg, math.degrees(m) % 360.0, t_opp)
        pos = el.position(np.array([t_opp]))[0]
        lon = math.atan2(pos[1], pos[0])
        diff = (target - lon + math.pi) % (2 * math.pi) - math.pi
        if abs(diff) < 1e-12:
            break
        m += diff  # dlon/dM is about 1 for a low-eccentricity orbit
    return geometry.OrbitalElements(a_au, e, i_deg, node_deg, peri_deg, math.degrees(m) % 360.0, t_opp)


def solar_elongation_deg(geo: geometry.ObservingGeometry) -> np.ndarray:
    """Solar elongation (angle Sun-observer-asteroid, degrees) from an ObservingGeometry.

    The observer-to-Sun vector is ``r e_sun - Delta e_obs`` and the
    observer-to-asteroid direction ``-e_obs`` (e: asteroid-centric unit vectors).
    """
    to_sun = geo.r_au[:, None] * geo.sun_dir - geo.delta_au[:, None] * geo.obs_dir
    return geometry.phase_angle_deg(to_sun, -geo.obs_dir)


# ---------------------------------------------------------------------------
# The forward model


def _axes_tuple(axes) -> np.ndarray:
    ax = np.asarray(axes, dtype=float)
    if ax.shape != (3,) or not np.all(np.isfinite(ax) & (ax > 0)):
        raise SimulationError(f"shape: need three positive semi-axes a >= b >= c, got {axes!r}")
    if not (ax[0] >= ax[1] >= ax[2]):
        raise SimulationError(f"shape: semi-axes must satisfy a >= b >= c (long, intermediate, short), got {axes!r}")
    return ax


def model_magnitudes(state, axes, t_tdb_jd, sun_dir, obs_dir, *, r_au=None, delta_au=None, phase_deg=None,
                     h_mag: float = 0.0, law: str = "lommel-seeliger", lambert_weight: float = 0.1,
                     trend: brightness.PhaseTrend | None = None, order: int = 24, binary=None) -> np.ndarray:
    """Noise-free model magnitudes of a rotating ellipsoid (no per-night offsets).

    ``m = H - 2.5 log10(I / I_sphere(0)) + 5 log10(r Delta) + trend(alpha)``;
    the distance term is added when both distances are given, the trend when
    ``phase_deg`` (or the directions) are given.

    Parameters
    ----------
    state : tumble.dynamics.RotationState
        Rotation state; ``state.attitude(t)`` gives body-to-ecliptic matrices.
    axes : array_like (3,)
        Semi-axes a >= b >= c (only ratios matter for the magnitudes).
    t_tdb_jd : array_like (n,)
        Model times, TDB JD, light-time corrected (emission times).
    sun_dir, obs_dir : array_like (n, 3)
        Asteroid-to-Sun and asteroid-to-observer unit vectors, ecliptic J2000.
    r_au, delta_au : array_like (n,), optional
        Distances, au.
    phase_deg : array_like (n,), optional
        Solar phase angle, degrees (computed from the directions if omitted).
    h_mag : float
        Magnitude of the equal-volume sphere at unit distances and zero phase.
    law, lambert_weight, order
        Scattering law (see :func:`tumble.brightness.ellipsoid_brightness`).
    trend : tumble.brightness.PhaseTrend, optional
        Phase-angle trend.
    binary : tumble.mutual_events.BinaryOrbit, optional
        A spherical satellite: its flux (``size_ratio^2`` times the Lommel-Seeliger sphere phase
        function, times its own rotation) is added to the primary's, and both lose light in mutual
        eclipses and occultations computed for two spheres (the primary as its equal-volume sphere;
        :func:`binary_event_factors`). ``H`` stays the primary's.

    Returns
    -------
    numpy.ndarray, shape (n,)
        Magnitudes.
    """
    ax = _axes_tuple(axes)
    t = np.atleast_1d(np.asarray(t_tdb_jd, dtype=float))
    s = np.asarray(sun_dir, dtype=float).reshape(-1, 3)
    o = np.asarray(obs_dir, dtype=float).reshape(-1, 3)
    if len(s) != len(t) or len(o) != len(t):
        raise SimulationError("model: times, Sun and observer directions must have the same length")
    rot = state.attitude(t)  # (n, 3, 3) body -> ecliptic
    s_body = np.einsum("nji,nj->ni", rot, s)  # R^T s
    o_body = np.einsum("nji,nj->ni", rot, o)
    if phase_deg is None:
        phase_deg = geometry.phase_angle_deg(s, o)
    rel = brightness.ellipsoid_magnitude(s_body, o_body, ax, law=law, lambert_weight=lambert_weight, order=order)
    if binary is not None:
        f_primary, f_satellite = binary_event_factors(binary, t, s, o, phase_deg)
        rel = -2.5 * np.log10(f_primary * 10.0 ** (-0.4 * rel) + f_satellite)
    mag = h_mag + rel + (trend.magnitude(phase_deg) if trend is not None else 0.0)
    if r_au is not None and delta_au is not None:
        mag = mag + 5.0 * np.log10(np.asarray(r_au, dtype=float) * np.asarray(delta_au, dtype=float))
    return mag


def binary_event_factors(binary, t_tdb_jd, sun_dir, obs_dir, phase_deg) -> tuple:
    """Mutual-event factors of a binary: ``(f_p, F_s)`` with the system flux ``F = f_p F_primary + F_s``.

    ``f_p`` is the share of the primary's flux left by the events and ``F_s`` the satellite's flux in
    units of the primary's equal-volume sphere at zero phase (``size_ratio^2`` times the
    Lommel-Seeliger sphere phase function, Muinonen & Lumme 2015, times its own rotation and its
    event share); the events of two spheres come from :func:`tumble.mutual_events.mutual_event_fractions`.
    """
    from tumble.mutual_events import mutual_event_fractions

    t = np.atleast_1d(np.asarray(t_tdb_jd, float))
    ev = mutual_event_fractions(binary.satellite_position(t), sun_dir, obs_dir, binary.size_ratio)
    sat = binary.size_ratio**2 * brightness.sphere_ls_phase_function(phase_deg) * binary.satellite_modulation(t)
    return ev.primary, sat * ev.satellite


@dataclass(frozen=True, eq=False)
class SimulatedLightCurve:
    """A simulated light curve with its truth.

    Attributes
    ----------
    lightcurve : tumble.photometry.LightCurve
        The observed light curve (noise and night offsets included).
    model_mag : numpy.ndarray, shape (n,)
        Noise-free model magnitudes without night offsets, mag.
    night_offset_mag : numpy.ndarray, shape (n,)
        Per-night zero-point offset added to each point, mag.
    noise_mag : numpy.ndarray, shape (n,)
        Noise added to each point (outliers included), mag.
    outlier : numpy.ndarray of bool, shape (n,)
        Points drawn as outliers.
    truth : dict
        JSON-ready description of everything that made the light curve (state,
        shape, law, trend, plan, orbit, noise, seed, night offsets).
    """

    lightcurve: object
    model_mag: np.ndarray
    night_offset_mag: np.ndarray
    noise_mag: np.ndarray
    outlier: np.ndarray
    truth: dict = field(default_factory=dict)


def state_to_dict(state) -> dict:
    """JSON-ready description of a RotationState (its fields plus mode and periods)."""
    out = {f.name: float(getattr(state, f.name)) for f in fields(state)}
    out.update(mode=state.mode, p_phi_h=float(state.p_phi_h), excitation_e_over_e0=float(state.excitation))
    return out


def state_from_dict(d: dict):
    """A RotationState from :func:`state_to_dict` output or a hand-written JSON state.

    Accepted: the RotationState fields (``i1_i3, i2_i3, id_i3, p_psi_h,
    l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd``), or ``mode`` ('PA',
    'SAM', 'LAM') with ``p_psi_h`` and ``p_phi_h`` (NPA, through
    ``RotationState.from_periods``) or ``period_h`` (PA). Extra keys written by
    :func:`state_to_dict` (``p_phi_h``, ``excitation_e_over_e0``) are checked
    for consistency, not used.
    """
    from tumble.dynamics import RotationState

    d = dict(d)
    names = [f.name for f in fields(RotationState)]
    common = {k: float(d[k]) for k in ("l_lon_deg", "l_lat_deg", "phi0_deg", "psi0_deg", "epoch_jd") if k in d}
    try:
        if "id_i3" in d:
            state = RotationState(**{k: float(d[k]) for k in names if k in d})
        else:
            mode = str(d.get("mode", "")).upper()
            if mode == "PA":
                period = float(d.get("period_h", d.get("p_psi_h", float("nan"))))
                state = RotationState.principal_axis(period, common.get("l_lon_deg", 0.0),
                                                     common.get("l_lat_deg", 90.0), common.get("phi0_deg", 0.0),
                                                     common.get("epoch_jd", 2451545.0))
            elif mode in ("SAM", "LAM"):
                state = RotationState.from_periods(float(d["i1_i3"]), float(d["i2_i3"]), float(d["p_psi_h"]),
                                                   float(d["p_phi_h"]), mode, **common)
            else:
                raise SimulationError("state: give the RotationState fields (with id_i3), or mode with its periods")
    except KeyError as exc:
        raise SimulationError(f"state: missing field {exc.args[0]!r}") from None
    except (TypeError, ValueError) as exc:
        if isinstance(exc, TumbleError):
            raise
        raise SimulationError(f"state: {exc}") from None
    if "p_phi_h" in d and "id_i3" in d and not math.isclose(float(d["p_phi_h"]), state.p_phi_h, rel_tol=1e-6):
        raise SimulationError(f"state: p_phi_h {d['p_phi_h']} disagrees with the other fields ({state.p_phi_h:.9g})")
    return state


def simulate_lightcurve(state, axes, plan, elements: geometry.OrbitalElements | None = None, *,
                        observatory: geometry.Observatory | None = None, h_mag: float = 15.0,
                        law: str = "lommel-seeliger", lambert_weight: float = 0.1,
                        trend: brightness.PhaseTrend | None = None, noise: NoiseModel | None = None,
                        object_id: str = "sim", rng=None, binary=None) -> SimulatedLightCurve:
    """Simulate the light curve of a rotating ellipsoid under an observing plan.

    Parameters
    ----------
    state : tumble.dynamics.RotationState
        Rotation state (its epoch is a TDB JD).
    axes : array_like (3,)
        Semi-axes a >= b >= c (any unit; only ratios matter).
    plan : DenseCampaign, SparseSurvey or GivenCadence
        Observing plan; times in UTC.
    elements : tumble.geometry.OrbitalElements, optional
        Heliocentric orbit; default :func:`opposition_elements` for the plan's
        start (an invented orbit at opposition then).
    observatory : tumble.geometry.Observatory, optional
        Ground station (geocentric when omitted).
    h_mag : float
        Magnitude of the equal-volume sphere at unit distances, zero phase.
    law, lambert_weight
        Scattering law (:data:`tumble.brightness.LAWS`).
    trend : tumble.brightness.PhaseTrend, optional
        Phase trend added on top (default none).
    noise : NoiseModel, optional
        Default ``NoiseModel()`` (0.01 mag Gaussian).
    object_id : str
        Designation written with the data.
    rng : numpy.random.Generator, int or None
        Random source (night choice of a sparse plan, zero points, noise).
    binary : tumble.mutual_events.BinaryOrbit, optional
        A spherical satellite with mutual eclipses and occultations (see :func:`model_magnitudes`);
        its description goes into the truth under ``binary``.

    Returns
    -------
    SimulatedLightCurve
    """
    from tumble.photometry import LightCurve

    g = _rng(rng)
    seed_used = rng if isinstance(rng, (int, np.integer)) else None
    ax = _axes_tuple(axes)
    try:
        law_obj = brightness.scattering_law(law, lambert_weight)
    except TumbleError as exc:
        raise SimulationError(str(exc)) from None
    noise = NoiseModel() if noise is None else noise
    trend = brightness.PhaseTrend() if trend is None else trend
    times = plan.times(g)
    t_utc, t_tdb = utc_to_tdb(times.t_utc_jd)
    if elements is None:
        elements = opposition_elements(float(t_tdb[0]))
    geo = geometry.observing_geometry(t_tdb, elements, observatory)
    n_dropped = 0
    min_elong = getattr(plan, "min_elongation_deg", 0.0)
    if min_elong > 0:
        keep = solar_elongation_deg(geo) >= min_elong
        n_dropped = int(np.sum(~keep))
        if not keep.any():
            raise SimulationError(f"no visit of the plan is at a solar elongation of {min_elong:g} deg or more")
        geo = geometry.ObservingGeometry(**{f.name: getattr(geo, f.name)[keep] for f in fields(geo)})
        t_utc, t_tdb = t_utc[keep], t_tdb[keep]
        times = ObservingTimes(t_utc_jd=times.t_utc_jd[keep], night=times.night[keep], session=times.session[keep])
    t_model = t_tdb - geo.light_time_d  # emission times (light time)
    model = model_magnitudes(state, ax, t_model, geo.sun_dir, geo.obs_dir, r_au=geo.r_au, delta_au=geo.delta_au,
                             phase_deg=geo.phase_deg, h_mag=h_mag, law=law, lambert_weight=lambert_weight,
                             trend=trend, binary=binary)
    zp_sigma = getattr(plan, "zero_point_sigma_mag", 0.0)
    n_zp = int(times.night.max()) + 1 if times.night.size else 0
    night_zp = zp_sigma * g.standard_normal(n_zp) if zp_sigma > 0 else np.zeros(n_zp)
    if isinstance(plan, GivenCadence):  # nights as JD days (noon to noon UTC)
        n_nights_observed = int(len(np.unique(np.floor(times.t_utc_jd))))
    else:
        n_nights_observed = int(len(np.unique(times.night)))
    offset = np.where(times.night >= 0, night_zp[np.maximum(times.night, 0)], 0.0) if n_zp else np.zeros(len(model))
    noise_mag, outlier = noise.draw(len(model), g)
    mag = model + offset + noise_mag
    sparse = isinstance(plan, SparseSurvey)
    overrides = {"min_points": 2}
    if sparse:
        overrides["min_session_points"] = len(mag) + 1  # every point stays sparse (session -1)
    band = np.asarray(plan.band).astype(str)
    band = np.full(len(mag), str(band)) if band.ndim == 0 else band
    lc = LightCurve.from_arrays(
        t_utc, mag, np.full(len(mag), noise.err_mag), session=times.session, band=band,
        r_au=geo.r_au, delta_au=geo.delta_au, phase_deg=geo.phase_deg, sun_dir=geo.sun_dir, obs_dir=geo.obs_dir,
        object_id=object_id, source="<simulation>", **overrides,
    )
    if lc.n_points != len(mag) or np.any(np.abs(lc.t - t_model) > 1e-9):
        # the plans never produce duplicate or reordered times
        raise RuntimeError("simulated points were merged or reordered by the LightCurve constructor")
    i1, i2 = brightness.inertia_ratios_from_axes(ax)
    truth = {
        "generator": "tumble.simulate",
        "object": object_id,
        "state": state_to_dict(state),
        "shape": {"axes": [float(v) for v in ax], "a_over_b": float(ax[0] / ax[1]), "b_over_c": float(ax[1] / ax[2]),
                  "i1_i3_homogeneous": float(i1), "i2_i3_homogeneous": float(i2)},
        "h_mag": float(h_mag),
        "law": law_obj.name,
        "lambert_weight": float(law_obj.lambert_weight),
        "trend": trend.to_dict(),
        "plan": plan.to_dict(),
        "elements": {k: float(v) for k, v in asdict(elements).items()},
        "observatory": None if observatory is None else asdict(observatory),
        "noise": noise.to_dict(),
        "seed": None if seed_used is None else int(seed_used),
        "night_zero_points_mag": [float(v) for v in night_zp],
        "n_points": int(len(mag)),
        "n_nights": n_nights_observed,
        "n_dropped_elongation": n_dropped,
        "n_outliers": int(outlier.sum()),
        "binary": None if binary is None else binary.to_dict(),
        "magnitude_model": "m = H - 2.5 log10(I/I_sphere(0)) + 5 log10(r Delta) + trend(alpha) + night offset + noise",
    }
    return SimulatedLightCurve(lightcurve=lc, model_mag=model, night_offset_mag=offset, noise_mag=noise_mag,
                               outlier=outlier, truth=truth)


# ---------------------------------------------------------------------------
# Files


def _truth_path(path: Path) -> Path:
    return path.with_name(path.name + ".truth.json")


def write_simulation(sim: SimulatedLightCurve, path, *, format: str | None = None, sidecar: bool = True) -> list[Path]:
    """Write a simulated light curve (any format the reader reads) and its truth.

    The truth goes into the table metadata (key ``truth``) for ECSV, and into a
    sidecar ``<file>.truth.json`` unless ``sidecar=False`` (always for the
    formats whose headers cannot hold nested metadata, so ``sidecar=False``
    is refused for them).

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from tumble._io import atomic_write_text, strip_compression
    from tumble.photometry import write_lightcurve
    from tumble.schema import dumps_strict

    path = Path(path)
    fmt = format or ("ecsv" if strip_compression(path).lower().endswith(".ecsv") else None)
    written = []
    if fmt == "ecsv":
        written.append(write_lightcurve(sim.lightcurve, path, format=fmt, extra_meta={"truth": sim.truth}))
    else:
        if not sidecar:
            raise SimulationError(f"{path}: only ECSV holds the truth in the file itself; keep the sidecar JSON")
        written.append(write_lightcurve(sim.lightcurve, path, format=fmt))
    if sidecar:
        side = _truth_path(path)
        atomic_write_text(side, dumps_strict(sim.truth, indent=2, sort_keys=True) + "\n", compress=False)
        written.append(side)
    return written


def read_truth(path) -> dict:
    """The truth of a simulated file: its sidecar JSON, else the ECSV metadata."""
    path = Path(path)
    side = _truth_path(path)
    if side.exists():
        return json.loads(side.read_text())
    from tumble.photometry import read_table

    meta = read_table(path).meta
    if "truth" in meta:
        return dict(meta["truth"])
    raise SimulationError(f"{path}: no truth found (no {side.name} and no 'truth' metadata)")
