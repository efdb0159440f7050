"""Render an :class:`~library.population.ObjectSpec` into a light curve with its truth.

Steps (a flat driver, :func:`render`):

1. observation times of the plan (:data:`TIME_BUILDERS`, one builder per plan kind) and the orbit
   that sets the geometry;
2. :func:`tumble.simulate.simulate_lightcurve` on those times (:class:`tumble.simulate.GivenCadence`)
   gives the geometry, the nightly zero points, the noise and the closed-form ellipsoid model;
3. for numerically integrated attitudes and facet bodies the brightness is replaced by a sum over
   facets (:meth:`tumble.brightness.FacetShape.brightness`) along the attitude path of
   :data:`ATTITUDE_PATHS` (closed form or :func:`tumble.dynamics_reference.integrate_state`), the
   same phase trend and distances added; noise and zero points stay those of step 2;
4. the truth record (:class:`ObjectTruth`): periods, mode, excitation, the NPA signature, the
   amplitude, noise, geometry summary.

NPA signature (documented proxy of "rms mag of the two-period part"): the rms residual of the best
one-period fit to the noise-free light curve (:func:`one_period_misfit_mag`), the fit being the
shape-free one-period family of :mod:`tumble.model` (6 harmonics, linear drift of every
coefficient, the per-night zero points and sparse phase terms of the classifier's nuisance model)
with its frequency refined around every light-curve frequency the truth predicts. For an NPA object
this is what no one-period model can absorb; for a PA object the same statistic (stored as
``one_period_misfit_mag``, ``signature_mag`` = 0) measures what geometry changes leave to a
shape-free PA model.
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from library.population import ObjectSpec, count_apparitions, observable_nights, spec_from_dict

__all__ = ["ObjectTruth", "RenderedObject", "render", "one_period_misfit_mag", "close_approach_elements",
           "TIME_BUILDERS", "ATTITUDE_PATHS", "load_or_render", "cache_paths"]

#: Error given to the noise-free curve when fitting it (any constant; only relative weights matter).
CLEAN_FIT_ERR_MAG = 0.01
#: One-period family of the signature: harmonics and drift degree (the classifier's richest usual PA variant).
SIGNATURE_HARMONICS = 6
SIGNATURE_DRIFT = 1
#: Frequency refinement of the signature fit: half-width in units of 1/span, and grid points.
SIGNATURE_HALF_WIDTH_PER_SPAN = 1.5
SIGNATURE_GRID = 31
#: Percentiles of the amplitude (peak-to-peak of the rotational part, robust to single points).
AMPLITUDE_PERCENTILES = (2.0, 98.0)
#: Integration tolerances of the numerical attitude (rtol, atol): well below any light-curve effect
#: over 10^4 cycles (phase error ~ rtol x cycles x 2 pi).
NUMERIC_RTOL, NUMERIC_ATOL = 1e-10, 1e-12
#: Facet-body tessellation: icosphere subdivisions (1280 facets at 3).
FACET_SUBDIVISIONS = 3
#: Visits of a sparse night: first within this many hours of the night's start, then spaced by
#: 20-60 minutes (common practice of survey cadences).
SPARSE_WINDOW_H = 6.0
SPARSE_VISIT_SPACING_MIN = (20.0, 60.0)
#: Hours of darkness within which a dense night's run starts (start jitter), hours.
NIGHT_START_JITTER_H = 2.0
#: Close approaches: largest phase angle observed (issue 14: "phase angles up to 80-90 deg"), the
#: smallest solar elongation a telescope points at (common practice), and the fewest points kept.
CLOSE_MAX_PHASE_DEG = 90.0
CLOSE_MIN_ELONGATION_DEG = 45.0
CLOSE_MIN_POINTS = 40
#: km/s in au/day (IAU 2012 au).
KM_S_PER_AU_D = 149_597_870.7 / 86400.0


@dataclass(frozen=True)
class ObjectTruth:
    """What made one light curve, and the derived truth the benchmark scores against.

    Attributes
    ----------
    object_id, category, split, plan_kind : str
    truth_class : {'PA', 'NPA', 'none'}
    mode : {'PA', 'SAM', 'LAM', 'none'}
    period_h : float
        PA rotation period, hours (NaN otherwise).
    p_psi_h, p_phi_h : float
        NPA periods, hours (PA: both the rotation period; NaN for 'none').
    excitation_e_over_e0 : float
        E/E0 (1 for PA, NaN for 'none').
    excitation_position : float
        Position of I_d within its mode's range (see :class:`library.population.Rotation`).
    signature_mag : float
        NPA signature (rms of what the best one-period fit leaves of the noise-free curve), mag; 0 for PA.
    one_period_misfit_mag : float
        The same statistic for every object (PA: the part geometry leaves to a shape-free PA model).
    amplitude_mag : float
        2-98 percentile range of the noise-free curve after the nuisance model (zero points, phase terms), mag.
    noise_mag : float
    amplitude_over_noise, signature_over_noise : float
        (noise-free curves: NaN)
    n_points : int
    span_d : float
    span_over_period : float
        Span / the longest true period (P for PA; max(P_psi, P_phi) for NPA).
    n_nights : int
        Distinct nights (JD days) with data.
    n_apparitions : int
    phase_min_deg, phase_max_deg, delta_min_au : float
    attitude, body, law, trend : str
    p_orb_h : float
        Binaries: the orbital period, hours (NaN otherwise).
    event_depth_mag : float
        Binaries: the deepest mutual event on the observed times, noise-free, mag (0 when no event
        was observed; NaN for other objects).
    event_depth_over_noise : float
    """

    object_id: str
    category: str
    split: str
    plan_kind: str
    truth_class: str
    mode: str
    period_h: float
    p_psi_h: float
    p_phi_h: float
    excitation_e_over_e0: float
    excitation_position: float
    signature_mag: float
    one_period_misfit_mag: float
    amplitude_mag: float
    noise_mag: float
    amplitude_over_noise: float
    signature_over_noise: float
    n_points: int
    span_d: float
    span_over_period: float
    n_nights: int
    n_apparitions: int
    phase_min_deg: float
    phase_max_deg: float
    delta_min_au: float
    attitude: str
    body: str
    law: str
    trend: str
    p_orb_h: float = math.nan
    event_depth_mag: float = math.nan
    event_depth_over_noise: float = math.nan

    def to_dict(self) -> dict:
        """JSON-ready dictionary."""
        return {k: (float(v) if isinstance(v, (float, np.floating)) else v) for k, v in asdict(self).items()}


@dataclass(frozen=True, eq=False)
class RenderedObject:
    """A rendered object: the light curve, its noise-free model and the truth.

    Attributes
    ----------
    spec : ObjectSpec
    lightcurve : tumble.photometry.LightCurve
    model_mag : numpy.ndarray, shape (n,)
        Noise-free magnitudes without night offsets, mag.
    truth : ObjectTruth
    """

    spec: ObjectSpec
    lightcurve: object
    model_mag: np.ndarray
    truth: ObjectTruth


@dataclass(frozen=True, eq=False)
class PlanTimes:
    """Times of a plan and the orbit that goes with them.

    Attributes
    ----------
    t_utc_jd : numpy.ndarray (n,)
    session : numpy.ndarray of int (n,)
        Night index (dense, close) or -1 (sparse).
    band : str
    zero_point_sigma_mag : float
    elements : tumble.geometry.OrbitalElements
    """

    t_utc_jd: np.ndarray
    session: np.ndarray
    band: str
    zero_point_sigma_mag: float
    elements: object


# ---------------------------------------------------------------------------
# Times and orbits


def _night_runs(rng, night_starts_jd, hours, cadence_min, loss_fraction):
    """Regular runs (jittered by 10 % of the cadence) on the given nights, with a random loss of points."""
    k = np.arange(int(math.floor(hours * 60.0 / cadence_min)) + 1)
    t = night_starts_jd[:, None] + k[None, :] * cadence_min / 1440.0
    t = t + rng.uniform(-0.1, 0.1, t.shape) * cadence_min / 1440.0
    night = np.repeat(np.arange(len(night_starts_jd)), len(k)).reshape(t.shape)
    keep = rng.random(t.shape) >= loss_fraction
    order = np.argsort(t[keep])
    return t[keep][order], night[keep][order]


def dense_times(spec: ObjectSpec, rng) -> PlanTimes:
    """Nights drawn within the span (first and last always), a run each."""
    from tumble.simulate import opposition_elements

    p = spec.plan
    last = int(math.floor(p.span_d))
    inner = np.arange(1, last)
    pick = rng.choice(inner, size=min(len(inner), max(0, p.n_nights - 2)), replace=False) if len(inner) else []
    nights = np.unique(np.concatenate([[0, last], np.asarray(pick, int)])) if last > 0 else np.array([0])
    starts = p.start_jd + nights + rng.uniform(0.0, NIGHT_START_JITTER_H / 24.0, len(nights))
    t, night = _night_runs(rng, starts, p.hours_per_night, p.cadence_min, p.loss_fraction)
    el = opposition_elements(p.start_jd, a_au=p.a_au, e=p.e, i_deg=p.i_deg, days_before=p.opposition_offset_d)
    return PlanTimes(t, night, "V", p.zero_point_sigma_mag, el)


def sparse_times(spec: ObjectSpec, rng) -> PlanTimes:
    """Observable nights drawn until about the target number of visits, 1..max visits each."""
    from tumble import geometry

    p = spec.plan
    nights, _ = observable_nights(p.start_jd, p.span_d, p.orbit, p.min_elongation_deg)
    per_night = rng.integers(1, p.max_points_per_night + 1, size=len(nights))
    order = rng.permutation(len(nights))
    cum = np.cumsum(per_night[order])
    n_take = int(min(len(nights), np.searchsorted(cum, p.n_points_target) + 1))
    chosen = np.sort(order[:n_take])
    times = []
    for j in chosen:
        first = rng.uniform(0.0, SPARSE_WINDOW_H / 24.0)
        gaps = rng.uniform(*SPARSE_VISIT_SPACING_MIN, size=per_night[j] - 1) / 1440.0
        times.append(p.start_jd + nights[j] + first + np.concatenate([[0.0], np.cumsum(gaps)]))
    t = np.sort(np.concatenate(times))
    el = geometry.OrbitalElements(**asdict(p.orbit))
    return PlanTimes(t, np.full(t.size, -1), "r", 0.0, el)


def close_approach_elements(t_ca_tdb_jd: float, miss_distance_au: float, phase_ca_deg: float, v_rel_km_s: float,
                            direction_angle_deg: float = 0.0, velocity_angle_deg: float = 0.0):
    """Two-body heliocentric orbit through a geocentric close approach with a given phase angle.

    At closest approach the asteroid is at ``E + miss u`` (E the Earth's heliocentric position),
    with ``u`` at ``phase_ca_deg`` from ``E/|E|`` (then the phase angle, the angle Sun-asteroid-
    Earth, is ``phase_ca_deg`` up to the parallax ``miss/|E|``), turned by ``direction_angle_deg``
    about ``E``; its velocity is the Earth's plus ``v_rel`` along ``w`` perpendicular to ``u``
    (closest approach), turned by ``velocity_angle_deg`` about ``u``.

    Returns
    -------
    tumble.geometry.OrbitalElements
    """
    from tumble import geometry

    pos_e, vel_e = geometry.earth_heliocentric_ecliptic(np.array([t_ca_tdb_jd]))
    e_hat = pos_e[0] / np.linalg.norm(pos_e[0])
    ref = np.cross(e_hat, [0.0, 0.0, 1.0])
    ref /= np.linalg.norm(ref)
    ref2 = np.cross(e_hat, ref)
    a = math.radians(direction_angle_deg)
    perp = math.cos(a) * ref + math.sin(a) * ref2
    al = math.radians(phase_ca_deg)
    u = math.cos(al) * e_hat + math.sin(al) * perp
    w1 = np.cross(u, [0.0, 0.0, 1.0])
    w1 /= np.linalg.norm(w1)
    w2 = np.cross(u, w1)
    b = math.radians(velocity_angle_deg)
    w = math.cos(b) * w1 + math.sin(b) * w2
    pos = pos_e[0] + miss_distance_au * u
    vel = vel_e[0] + (v_rel_km_s / KM_S_PER_AU_D) * w
    return geometry.OrbitalElements.from_state(pos, vel, t_ca_tdb_jd)


def close_times(spec: ObjectSpec, rng) -> PlanTimes:
    """Consecutive nights around closest approach, on the close-approach orbit; points beyond
    :data:`CLOSE_MAX_PHASE_DEG` or below :data:`CLOSE_MIN_ELONGATION_DEG` are not observed."""
    from tumble import geometry
    from tumble.simulate import solar_elongation_deg

    p = spec.plan
    starts = p.start_jd + np.arange(p.n_nights) + rng.uniform(0.0, NIGHT_START_JITTER_H / 24.0, p.n_nights)
    t, night = _night_runs(rng, starts, p.hours_per_night, p.cadence_min, p.loss_fraction)
    el = close_approach_elements(p.start_jd + p.ca_offset_d, p.miss_distance_au, p.phase_ca_deg, p.v_rel_km_s,
                                 p.direction_angle_deg, p.velocity_angle_deg)
    geo = geometry.observing_geometry(t, el)
    keep = (geo.phase_deg <= CLOSE_MAX_PHASE_DEG) & (solar_elongation_deg(geo) >= CLOSE_MIN_ELONGATION_DEG)
    if keep.sum() < CLOSE_MIN_POINTS:  # keep the points nearest closest approach rather than none
        keep = np.argsort(np.abs(t - (p.start_jd + p.ca_offset_d)))[:CLOSE_MIN_POINTS]
        keep = np.isin(np.arange(t.size), keep)
    return PlanTimes(t[keep], night[keep], "V", p.zero_point_sigma_mag, el)


#: Time builders by plan kind.
TIME_BUILDERS = {"dense": dense_times, "sparse": sparse_times, "close": close_times}


# ---------------------------------------------------------------------------
# Attitude paths and bodies


def closed_form_attitude(state, t_jd):
    """Body-to-ecliptic matrices from the closed form (:meth:`RotationState.attitude`)."""
    return state.attitude(t_jd)


def numeric_attitude(state, t_jd):
    """Body-to-ecliptic matrices integrated numerically (DOP853, :mod:`tumble.dynamics_reference`)."""
    from tumble.dynamics_reference import integrate_state

    return integrate_state(state, t_jd, rtol=NUMERIC_RTOL, atol=NUMERIC_ATOL).matrices


#: Attitude paths by name (``Rotation.attitude``).
ATTITUDE_PATHS = {"closed": closed_form_attitude, "numeric": numeric_attitude}


def bumpy_facets(axes, amplitude, rng):
    """A non-ellipsoidal facet body: an icosphere scaled to the axes with random low-order radial bumps."""
    from tumble.brightness import FacetShape, icosphere

    verts, faces = icosphere(FACET_SUBDIVISIONS)
    x, y, z = verts.T
    terms = [x * y, y * z, z * x, x * x - y * y, x, y, z, x * y * z]
    r = 1.0 + amplitude * sum(rng.standard_normal() * t for t in terms) / math.sqrt(len(terms))
    return FacetShape.from_mesh(verts * r[:, None] * np.asarray(axes), faces)


def facet_body(spec: ObjectSpec, rng):
    """The facet body of a spec (a tessellated ellipsoid for ellipsoids with a numerical attitude)."""
    from tumble.brightness import FacetShape

    if spec.body.kind == "facets":
        return bumpy_facets(spec.body.axes, spec.body.bump_amplitude, rng)
    return FacetShape.ellipsoid(spec.body.axes, FACET_SUBDIVISIONS)


# ---------------------------------------------------------------------------
# Truth statistics


def _clean_lightcurve(lc, model_mag):
    from tumble.photometry import LightCurve

    return LightCurve.from_arrays(lc.t, model_mag, np.full(lc.n_points, CLEAN_FIT_ERR_MAG), session=lc.session,
                                  band=lc.band, r_au=lc.r_au, delta_au=lc.delta_au, phase_deg=lc.phase_deg,
                                  light_time_corrected=True, time_scale="tdb", object_id=lc.object_id, min_points=2)


def candidate_frequencies_per_d(spec: ObjectSpec) -> list:
    """Fundamental light-curve frequencies (1/d) the truth predicts: each dominant one and its half."""
    if spec.rotation.mode == "PA":
        return [24.0 / spec.rotation.p_psi_h]
    st = rotation_state(spec)
    lf = st.lightcurve_frequencies()
    base = {abs(float(f)) * 24.0 for f in lf.dominant_per_h}
    base |= {24.0 / st.p_psi_h, 24.0 / st.p_phi_h}
    return sorted({f for b in base for f in (b, b / 2.0) if f > 0})


def one_period_misfit_mag(lc_clean, candidates_per_d) -> float:
    """rms residual (mag) of the best one-period fit (H=6, drift 1, nuisance model) near the candidates."""
    from tumble.model import FourierBasis, FourierVariant, fit_linear, prepare_linear

    data = prepare_linear(lc_clean)
    basis = FourierBasis.build([FourierVariant(SIGNATURE_HARMONICS, SIGNATURE_DRIFT)])
    y = np.asarray(lc_clean.reduced_mag, float)
    hw = SIGNATURE_HALF_WIDTH_PER_SPAN / max(data.span_d, 1e-6)
    best = math.inf
    for f0 in candidates_per_d:
        for f in np.linspace(max(f0 - hw, 1e-4), f0 + hw, SIGNATURE_GRID):
            fit = fit_linear(data, basis, 0, float(f))
            best = min(best, float(np.sqrt(np.mean((y - fit.model_mag) ** 2))))
    return best


def rotational_amplitude_mag(lc_clean) -> float:
    """2-98 percentile range of the noise-free curve after its nuisance model (zero points, phase terms)."""
    from tumble.model import prepare_linear

    data = prepare_linear(lc_clean)
    resid = data.y_proj / data.sw
    lo, hi = np.percentile(resid, AMPLITUDE_PERCENTILES)
    return float(hi - lo)


def rotation_state(spec: ObjectSpec, epoch_jd: float = 2451545.0):
    """The :class:`tumble.dynamics.RotationState` of a spec (a 10 h PA spin of the sphere for 'none')."""
    from tumble.brightness import inertia_ratios_from_axes
    from tumble.dynamics import RotationState

    r = spec.rotation
    if r.mode in ("PA", "none"):
        return RotationState.principal_axis(10.0 if r.mode == "none" else r.p_psi_h, r.l_lon_deg, r.l_lat_deg,
                                            r.phi0_deg, epoch_jd)
    i1, i2 = (float(v) for v in inertia_ratios_from_axes(spec.body.axes))
    idd = 1.0 - r.excitation_position * (1.0 - i2) if r.mode == "SAM" else i2 - r.excitation_position * (i2 - i1)
    return RotationState.excited(i1, i2, idd, r.p_psi_h, r.l_lon_deg, r.l_lat_deg, r.phi0_deg, r.psi0_deg, epoch_jd)


# ---------------------------------------------------------------------------
# The driver


def _trend(spec):
    from tumble.brightness import PhaseTrend

    t = spec.trend
    return PhaseTrend(t.kind, slope_mag_per_deg=t.slope_mag_per_deg, g=t.g, relative_to_sphere=True)


def _facet_model(spec, state, lc, model_closed, rng):
    """Magnitudes of the facet body along the spec's attitude path, on the closed model's scale."""
    rot = ATTITUDE_PATHS[spec.rotation.attitude](state, np.asarray(lc.t))
    s_body = np.einsum("nji,nj->ni", rot, lc.sun_dir)
    o_body = np.einsum("nji,nj->ni", rot, lc.obs_dir)
    shape = facet_body(spec, rng)
    lw = spec.scattering.lambert_weight if spec.scattering.law == "ls-lambert" else 0.0
    flux = shape.brightness(s_body, o_body, lambert_weight=lw)
    mag = -2.5 * np.log10(flux) + 5.0 * np.log10(np.asarray(lc.r_au) * np.asarray(lc.delta_au))
    mag = mag + _trend(spec).magnitude(np.asarray(lc.phase_deg))
    return mag - np.mean(mag) + np.mean(model_closed)


def render(spec: ObjectSpec) -> RenderedObject:
    """Simulate one object (deterministic given the spec)."""
    from tumble.photometry import LightCurve
    from tumble.simulate import GivenCadence, NoiseModel, simulate_lightcurve

    rng = np.random.default_rng(spec.seed)
    pt = TIME_BUILDERS[spec.plan_kind](spec, rng)
    state = rotation_state(spec, epoch_jd=float(pt.t_utc_jd[0]))
    axes = (1.0, 1.0, 1.0) if spec.body.kind == "sphere" else spec.body.axes
    plan = GivenCadence(pt.t_utc_jd, pt.session, pt.band, pt.zero_point_sigma_mag)
    orbit = spec.binary.orbit(float(pt.t_utc_jd[0])) if spec.binary is not None else None
    sim = simulate_lightcurve(state, axes, plan, pt.elements, law=spec.scattering.law,
                              lambert_weight=spec.scattering.lambert_weight or 0.1, trend=_trend(spec),
                              noise=NoiseModel(spec.noise_mag), object_id=spec.object_id, rng=rng, binary=orbit)
    lc = sim.lightcurve
    model = np.asarray(sim.model_mag, float)
    depth = observed_event_depth_mag(spec, state, axes, lc, orbit) if orbit is not None else math.nan
    if spec.rotation.attitude == "numeric" or spec.body.kind == "facets":
        new = _facet_model(spec, state, lc, model, rng)
        lc = LightCurve.from_arrays(lc.t, np.asarray(lc.mag) - model + new, lc.err, session=lc.session, band=lc.band,
                                    r_au=lc.r_au, delta_au=lc.delta_au, phase_deg=lc.phase_deg, sun_dir=lc.sun_dir,
                                    obs_dir=lc.obs_dir, light_time_corrected=True, time_scale="tdb",
                                    object_id=spec.object_id, min_points=2)
        model = new
    return RenderedObject(spec, lc, model, make_truth(spec, state, lc, model, event_depth_mag=depth))


def observed_event_depth_mag(spec: ObjectSpec, state, axes, lc, orbit) -> float:
    """Deepest mutual event on the observed times, noise-free, mag: the system's magnitude with the events
    against the same primary and satellite without them (both fluxes as :func:`tumble.simulate.model_magnitudes`
    adds them; 0 when no event falls on a data point)."""
    from tumble import brightness
    from tumble.simulate import binary_event_factors, model_magnitudes

    t, s, o, ph = np.asarray(lc.t), np.asarray(lc.sun_dir), np.asarray(lc.obs_dir), np.asarray(lc.phase_deg)
    rel = model_magnitudes(state, axes, t, s, o, phase_deg=ph, law=spec.scattering.law,
                           lambert_weight=spec.scattering.lambert_weight or 0.1)
    f_p = 10.0 ** (-0.4 * rel)
    share, f_s = binary_event_factors(orbit, t, s, o, ph)
    f_s0 = orbit.size_ratio**2 * brightness.sphere_ls_phase_function(ph) * orbit.satellite_modulation(t)
    depth = -2.5 * np.log10(share * f_p + f_s) + 2.5 * np.log10(f_p + f_s0)
    return float(max(0.0, np.max(depth)))


def make_truth(spec: ObjectSpec, state, lc, model, event_depth_mag: float = math.nan) -> ObjectTruth:
    """The truth record of a rendered object."""
    clean = _clean_lightcurve(lc, model)
    r = spec.rotation
    signal = r.mode != "none"
    misfit = one_period_misfit_mag(clean, candidate_frequencies_per_d(spec)) if signal else 0.0
    amp = rotational_amplitude_mag(clean) if signal else 0.0
    sig = misfit if spec.truth_class == "NPA" else 0.0
    noise = spec.noise_mag
    longest = max(r.p_psi_h, r.p_phi_h) if signal else math.nan
    days = np.floor(np.asarray(lc.t) - 0.5)
    return ObjectTruth(
        object_id=spec.object_id, category=spec.category, split=spec.split, plan_kind=spec.plan_kind,
        truth_class=spec.truth_class, mode=r.mode, period_h=r.p_psi_h if r.mode == "PA" else math.nan,
        p_psi_h=r.p_psi_h, p_phi_h=r.p_phi_h if signal else math.nan,
        excitation_e_over_e0=float(state.excitation) if signal else math.nan,
        excitation_position=r.excitation_position, signature_mag=sig, one_period_misfit_mag=misfit,
        amplitude_mag=amp, noise_mag=noise, amplitude_over_noise=amp / noise if noise > 0 else math.nan,
        signature_over_noise=sig / noise if noise > 0 else math.nan, n_points=int(lc.n_points),
        span_d=float(lc.span_d), span_over_period=float(24.0 * lc.span_d / longest) if signal else math.nan,
        n_nights=int(len(np.unique(days))), n_apparitions=count_apparitions(np.unique(days)),
        phase_min_deg=float(np.min(lc.phase_deg)), phase_max_deg=float(np.max(lc.phase_deg)),
        delta_min_au=float(np.min(lc.delta_au)), attitude=r.attitude, body=spec.body.kind, law=spec.scattering.law,
        trend=spec.trend.kind, p_orb_h=spec.binary.p_orb_h if spec.binary is not None else math.nan,
        event_depth_mag=event_depth_mag,
        event_depth_over_noise=event_depth_mag / noise if noise > 0 and np.isfinite(event_depth_mag) else math.nan)


# ---------------------------------------------------------------------------
# Cache

#: Light-curve columns kept in the cache.
_LC_ARRAYS = ("t", "mag", "err", "session", "band", "r_au", "delta_au", "phase_deg", "sun_dir", "obs_dir")


def cache_paths(cache_dir, object_id: str):
    """(npz of the light curve, json of spec and truth) of one object in a cache folder."""
    d = Path(cache_dir)
    return d / f"{object_id}.npz", d / f"{object_id}.json"


def save_rendered(obj: RenderedObject, cache_dir) -> None:
    """Write an object to the cache atomically (light-curve arrays, noise-free model, spec and truth)."""
    from tumble._io import atomic_path

    npz, js = cache_paths(cache_dir, obj.spec.object_id)
    npz.parent.mkdir(parents=True, exist_ok=True)
    arrays = {k: np.asarray(getattr(obj.lightcurve, k)) for k in _LC_ARRAYS}
    arrays["band"] = arrays["band"].astype(str)
    with atomic_path(npz) as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, model_mag=obj.model_mag, **arrays)
    with atomic_path(js) as tmp:
        Path(tmp).write_text(json.dumps({"spec": obj.spec.to_dict(), "truth": obj.truth.to_dict()}))


def load_rendered(cache_dir, object_id: str) -> RenderedObject | None:
    """An object from the cache, or None when it is not there (or unreadable)."""
    from tumble.photometry import LightCurve

    npz, js = cache_paths(cache_dir, object_id)
    if not (npz.exists() and js.exists()):
        return None
    try:
        meta = json.loads(js.read_text())
        with np.load(npz) as z:
            a = {k: z[k] for k in z.files}
    except (OSError, ValueError, KeyError):
        return None
    lc = LightCurve.from_arrays(a["t"], a["mag"], a["err"], session=a["session"], band=a["band"], r_au=a["r_au"],
                                delta_au=a["delta_au"], phase_deg=a["phase_deg"], sun_dir=a["sun_dir"],
                                obs_dir=a["obs_dir"], light_time_corrected=True, time_scale="tdb",
                                object_id=object_id, min_points=2)
    return RenderedObject(spec_from_dict(meta["spec"]), lc, a["model_mag"], ObjectTruth(**meta["truth"]))


def load_or_render(spec: ObjectSpec, cache_dir=None) -> RenderedObject:
    """The cached render of a spec, rendering (and caching) it when missing."""
    if cache_dir is not None:
        obj = load_rendered(cache_dir, spec.object_id)
        if obj is not None:
            return obj
    obj = render(spec)
    if cache_dir is not None:
        save_rendered(obj, cache_dir)
    return obj
