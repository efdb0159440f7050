"""The calibration population: a seeded, reproducible list of small frozen object records.

Every simulated object of the calibration and validation library is an :class:`ObjectSpec`: the plan
(dense campaign, sparse survey photometry, near-Earth close approach), the orbit that sets its
geometry, the body (triaxial ellipsoid or a non-ellipsoidal facet body), the scattering law, the
phase trend, the rotation (PA, SAM, LAM, or none for the flat and pure-noise curves), how the
attitude is computed (closed form or numerically integrated), the noise, the object's own seed and
its split (calibration or held-out, from a hash of the id so that it never depends on the order or
on the number of objects generated).

The population is a registry of :class:`Recipe` entries (:data:`RECIPES`): each says how many
objects of one kind to draw and which drawing functions make its plan and rotation. Nothing here
renders a light curve (see :mod:`library.render`); drawing the whole population takes seconds.

Ranges (issue 14, "the population to calibrate and validate on"):

- dense: 5-20 nights over 5-40 days, 2-8 h a night, cadence 2-10 min, 1-5 % of points lost,
  nightly zero points N(0, 0.02 mag), noise 0.005-0.04 mag;
- sparse: 60-400 points over 1-3 years, 1-4 a night on nights the object is observable (solar
  elongation above a cut), noise 0.02-0.1 mag, no nightly offsets, phase 3-60 deg, at least two
  apparitions;
- close approach: minimum geocentric distance 0.005-0.045 au, phase angle at closest approach
  40-88 deg, relative speed 1-8 km/s (the geometry changes within a night);
- PA periods 2-60 h, and 60-500 h where the span holds at least four rotations; NPA P_psi 5-300 h
  with P_phi 2-1500 h; SAM and LAM from near the separatrix to strong excitation;
- bodies b/a 0.55-0.95, c/b 0.6-0.95; scattering Lommel-Seeliger or LS + Lambert (weight
  0.05-0.5); phase trends linear (0.01-0.04 mag/deg) or H,G (G 0-0.5);
- at least a third with the attitude integrated numerically and the brightness summed over facets;
- the untestable cases: flat curves, pure noise, slow PA rotators over short arcs;
- binaries (issue 20): a PA ellipsoid primary (2-5 h) with a spherical satellite on a circular orbit,
  P_orb 10-40 h, secondary-to-primary size 0.2-0.5, orbit 2.5-4 primary radii, the orbit pole mostly
  within a few degrees of edge-on to the mean Sun and observer directions (mutual events), a fifth
  isotropic (mostly no events); dense campaigns only.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import asdict, dataclass, fields

import numpy as np

__all__ = [
    "GENERATOR_VERSION",
    "DensePlan",
    "SparsePlan",
    "ClosePlan",
    "Orbit",
    "Body",
    "Scattering",
    "Trend",
    "Rotation",
    "ObjectSpec",
    "Recipe",
    "RECIPES",
    "PLAN_TYPES",
    "split_of",
    "order_key",
    "generate_population",
    "spec_from_dict",
    "BinarySpec",
    "BINARY_RECIPES",
]

#: Bumped whenever a drawing rule changes, so that cached renders of an older population are not reused.
GENERATOR_VERSION = "cal-2"
#: Start of the invented observing epoch (TDB JD, 2026 Jan 1); objects start within two years of it.
EPOCH0_JD = 2461041.5
#: Fraction of objects with a numerically integrated attitude and facet brightness (issue: "at least a third").
NUMERIC_FRACTION = 0.42
#: Fraction of the closed-form objects whose body is a non-ellipsoidal facet shape (attitude in closed form).
FACET_BODY_FRACTION = 0.25
#: Excitation position drawn uniformly within these bounds (0 = PA for SAM / separatrix for LAM, 1 = the other end).
SAM_EXCITATION_RANGE = (0.05, 0.985)
LAM_EXCITATION_RANGE = (0.015, 0.95)
#: NPA period ranges (issue 14), hours.
P_PSI_RANGE_H = (5.0, 300.0)
P_PHI_RANGE_H = (2.0, 1500.0)
#: PA period range, and the long-period extension used only when the span holds this many rotations.
PA_PERIOD_RANGE_H = (2.0, 60.0)
PA_LONG_PERIOD_RANGE_H = (60.0, 500.0)
PA_LONG_MIN_ROTATIONS = 4.0
#: Probability that a PA object draws from the long-period extension (when the span allows it).
PA_LONG_FRACTION = 0.15
#: Gap (days) between observed nights that separates two apparitions of a sparse object.
APPARITION_GAP_D = 60.0
#: Largest phase angle kept in sparse photometry (issue: phase 3-60 deg).
SPARSE_MAX_PHASE_DEG = 60.0


# ---------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class Orbit:
    """Heliocentric two-body orbit (ecliptic J2000), as :class:`tumble.geometry.OrbitalElements` takes it.

    Attributes
    ----------
    a_au, e, i_deg, node_deg, peri_deg, mean_anomaly_deg : float
        Osculating elements (au, -, degrees).
    epoch_jd : float
        Epoch of the mean anomaly, TDB JD.
    """

    a_au: float
    e: float
    i_deg: float
    node_deg: float
    peri_deg: float
    mean_anomaly_deg: float
    epoch_jd: float


@dataclass(frozen=True)
class DensePlan:
    """A dense campaign: ``n_nights`` runs on nights drawn within ``span_d`` days.

    Attributes
    ----------
    start_jd : float
        Start of the first night, JD (UTC).
    n_nights : int
    span_d : float
        Days from the first to the last night (nights drawn without replacement in between).
    hours_per_night : float
    cadence_min : float
    loss_fraction : float
        Fraction of points dropped at random (clouds, bad frames).
    zero_point_sigma_mag : float
        Scatter of the nightly zero points, mag.
    opposition_offset_d : float
        Days from the start to the opposition of the invented orbit (negative: before the start).
    a_au, e, i_deg : float
        Orbit of :func:`tumble.simulate.opposition_elements`.
    """

    start_jd: float
    n_nights: int
    span_d: float
    hours_per_night: float
    cadence_min: float
    loss_fraction: float
    zero_point_sigma_mag: float
    opposition_offset_d: float
    a_au: float
    e: float
    i_deg: float
    kind = "dense"


@dataclass(frozen=True)
class SparsePlan:
    """Sparse survey photometry: a few visits on nights the object is observable, over years.

    Attributes
    ----------
    start_jd : float
        Start, JD (UTC).
    span_d : float
    n_points_target : int
        Visits aimed at (the drawn nights times visits per night reach about this number).
    max_points_per_night : int
        Visits per observed night are uniform in 1..this.
    min_elongation_deg : float
        A night is observable when the solar elongation exceeds this and the phase angle is at
        most :data:`SPARSE_MAX_PHASE_DEG`.
    orbit : Orbit
    n_apparitions : int
        Apparitions (groups of observable nights separated by :data:`APPARITION_GAP_D`), from the
        observable-night mask when the spec was drawn.
    """

    start_jd: float
    span_d: float
    n_points_target: int
    max_points_per_night: int
    min_elongation_deg: float
    orbit: Orbit
    n_apparitions: int
    kind = "sparse"


@dataclass(frozen=True)
class ClosePlan:
    """A near-Earth close approach observed densely around closest approach (geocentric observer).

    The orbit is the heliocentric two-body orbit through the state ``Earth + miss u`` with velocity
    ``Earth velocity + v_rel w`` at closest approach (``u`` at ``phase_ca_deg`` from the Sun-Earth
    direction, ``w`` perpendicular to ``u``); the Earth's own attraction is neglected (it bends the
    path of a 1-8 km/s encounter, it does not change what the geometry tests).

    Attributes
    ----------
    start_jd : float
        Start of the first night, JD (UTC).
    n_nights : int
        Consecutive nights.
    hours_per_night, cadence_min, loss_fraction, zero_point_sigma_mag : float
        As for :class:`DensePlan`.
    ca_offset_d : float
        Days from the start to closest approach.
    miss_distance_au : float
    phase_ca_deg : float
        Phase angle at closest approach.
    v_rel_km_s : float
    direction_angle_deg, velocity_angle_deg : float
        Orientation of ``u`` about the Sun-Earth line, and of ``w`` about ``u``.
    """

    start_jd: float
    n_nights: int
    hours_per_night: float
    cadence_min: float
    loss_fraction: float
    zero_point_sigma_mag: float
    ca_offset_d: float
    miss_distance_au: float
    phase_ca_deg: float
    v_rel_km_s: float
    direction_angle_deg: float
    velocity_angle_deg: float
    kind = "close"


#: Plan records by kind (the ``kind`` key of a spec's plan dictionary).
PLAN_TYPES = {cls.kind: cls for cls in (DensePlan, SparsePlan, ClosePlan)}


@dataclass(frozen=True)
class Body:
    """Shape.

    Attributes
    ----------
    kind : {'ellipsoid', 'facets', 'sphere'}
        Triaxial ellipsoid, non-ellipsoidal facet body (an ellipsoid with random low-order radial
        bumps), or a sphere (no rotational signal: the flat and pure-noise cases).
    b_over_a, c_over_b : float
    bump_amplitude : float
        Relative amplitude of the radial bumps of a facet body (0 for the others).
    """

    kind: str
    b_over_a: float
    c_over_b: float
    bump_amplitude: float = 0.0

    @property
    def axes(self) -> tuple:
        """Semi-axes (a, b, c) with c = 1."""
        b = 1.0 / self.c_over_b
        return (b / self.b_over_a, b, 1.0)


@dataclass(frozen=True)
class Scattering:
    """Scattering law of :mod:`tumble.brightness` (``lommel-seeliger`` or ``ls-lambert``) and its Lambert weight."""

    law: str
    lambert_weight: float


@dataclass(frozen=True)
class Trend:
    """Phase trend (:class:`tumble.brightness.PhaseTrend`): ``linear`` (slope mag/deg) or ``hg`` (G)."""

    kind: str
    slope_mag_per_deg: float = 0.0
    g: float = 0.15


@dataclass(frozen=True)
class Rotation:
    """Rotation state to simulate.

    Attributes
    ----------
    mode : {'PA', 'SAM', 'LAM', 'none'}
    p_psi_h : float
        Rotation period (PA) or P_psi (NPA), hours; NaN for 'none'.
    p_phi_h : float
        P_phi (NPA; the rotation period for PA), hours.
    excitation_position : float
        Where I_d lies in its mode's range: SAM ``(I3 - I_d)/(I3 - I2)`` (0 = PA, 1 = separatrix),
        LAM ``(I2 - I_d)/(I2 - I1)`` (0 = separatrix, 1 = rotation about the long axis); NaN for PA.
    l_lon_deg, l_lat_deg, phi0_deg, psi0_deg : float
        Angular-momentum direction and initial Euler angles.
    attitude : {'closed', 'numeric'}
        Closed form (:meth:`tumble.dynamics.RotationState.attitude`) or numerically integrated
        (:func:`tumble.dynamics_reference.integrate_state`) with facet brightness.
    """

    mode: str
    p_psi_h: float
    p_phi_h: float
    excitation_position: float
    l_lon_deg: float
    l_lat_deg: float
    phi0_deg: float
    psi0_deg: float
    attitude: str


@dataclass(frozen=True)
class BinarySpec:
    """A spherical satellite on a circular orbit (:class:`tumble.mutual_events.BinaryOrbit`).

    Attributes
    ----------
    p_orb_h : float
        Orbital period, hours.
    size_ratio : float
        Satellite-to-primary radius ratio.
    orbit_radius : float
        Orbit radius, primary radii.
    pole_lon_deg, pole_lat_deg : float
        Orbit pole, ecliptic J2000.
    phase0_deg : float
        Satellite's orbital longitude from the ascending node at the epoch (the plan's start).
    edge_on : bool
        The pole was drawn near edge-on to the mean Sun and observer directions (events expected).
    """

    p_orb_h: float
    size_ratio: float
    orbit_radius: float
    pole_lon_deg: float
    pole_lat_deg: float
    phase0_deg: float
    edge_on: bool

    def orbit(self, epoch_jd: float):
        """The :class:`tumble.mutual_events.BinaryOrbit` with its epoch."""
        from tumble.mutual_events import BinaryOrbit

        return BinaryOrbit(self.p_orb_h, self.size_ratio, self.orbit_radius, self.pole_lon_deg, self.pole_lat_deg,
                           self.phase0_deg, epoch_jd)


@dataclass(frozen=True)
class ObjectSpec:
    """One object of the library: everything needed to render its light curve reproducibly.

    Attributes
    ----------
    object_id : str
    category : str
        The recipe it came from (e.g. ``dense-npa``, ``sparse-pa``, ``slow-pa-short-arc``).
    truth_class : {'PA', 'NPA', 'none', 'binary'}
        'none' for flat and pure-noise curves (no rotational signal); 'binary' for a PA primary with a
        satellite (issue 20).
    plan : DensePlan, SparsePlan or ClosePlan
    body : Body
    scattering : Scattering
    trend : Trend
    rotation : Rotation
    noise_mag : float
        Gaussian 1-sigma noise (also the quoted error), mag; 0 = noise-free.
    seed : int
        Seed of everything drawn when rendering (times, zero points, noise, bumps).
    split : {'calibration', 'heldout'}
    binary : BinarySpec or None
        The satellite of a binary (None for every other object).
    """

    object_id: str
    category: str
    truth_class: str
    plan: object
    body: Body
    scattering: Scattering
    trend: Trend
    rotation: Rotation
    noise_mag: float
    seed: int
    split: str
    binary: BinarySpec | None = None

    @property
    def plan_kind(self) -> str:
        """'dense', 'sparse' or 'close'."""
        return self.plan.kind

    def to_dict(self) -> dict:
        """JSON-ready description (the plan carries its ``kind``)."""
        out = asdict(self)
        out["plan"] = {"kind": self.plan.kind, **out["plan"]}
        return out


def spec_from_dict(d: dict) -> ObjectSpec:
    """Rebuild an :class:`ObjectSpec` from :meth:`ObjectSpec.to_dict`."""
    d = dict(d)
    plan = dict(d["plan"])
    cls = PLAN_TYPES[plan.pop("kind")]
    if "orbit" in plan:
        plan["orbit"] = Orbit(**plan["orbit"])
    d["plan"] = cls(**plan)
    for name, rec in (("body", Body), ("scattering", Scattering), ("trend", Trend), ("rotation", Rotation)):
        d[name] = rec(**d[name])
    if d.get("binary") is not None:
        d["binary"] = BinarySpec(**d["binary"])
    names = {f.name for f in fields(ObjectSpec)}
    return ObjectSpec(**{k: v for k, v in d.items() if k in names})


def _hash_int(text: str) -> int:
    return int(hashlib.sha256(text.encode()).hexdigest()[:12], 16)


def split_of(object_id: str) -> str:
    """'calibration' or 'heldout' from a hash of the id (independent of order and library size)."""
    return "calibration" if _hash_int("split:" + object_id) % 2 == 0 else "heldout"


def order_key(object_id: str) -> int:
    """Processing order of the runner: a hash, so that any first N objects are a random sample of all kinds."""
    return _hash_int("order:" + object_id)


# ---------------------------------------------------------------------------
# Drawing helpers


def _log_uniform(rng, lo, hi):
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def _direction(rng):
    """Isotropic direction as (longitude, latitude) in degrees."""
    return float(rng.uniform(0.0, 360.0)), float(math.degrees(math.asin(rng.uniform(-1.0, 1.0))))


def draw_dense_plan(rng, *, n_nights=(5, 20), span_d=(5.0, 40.0)) -> DensePlan:
    """A dense campaign within the issue's ranges (nights drawn inside the span)."""
    nn = int(rng.integers(n_nights[0], n_nights[1] + 1))
    span = float(rng.uniform(max(span_d[0], nn - 1.0), max(span_d[1], nn - 1.0)))
    return DensePlan(
        start_jd=float(EPOCH0_JD + rng.uniform(0.0, 700.0)), n_nights=nn, span_d=span,
        hours_per_night=float(rng.uniform(2.0, 8.0)), cadence_min=float(rng.uniform(2.0, 10.0)),
        loss_fraction=float(rng.uniform(0.01, 0.05)), zero_point_sigma_mag=0.02,
        opposition_offset_d=float(rng.uniform(-30.0, 30.0)), a_au=float(rng.uniform(1.3, 3.2)),
        e=float(rng.uniform(0.02, 0.25)), i_deg=float(rng.uniform(0.0, 25.0)))


def draw_short_dense_plan(rng) -> DensePlan:
    """A short campaign (2-6 nights over 2-7 days), for slow rotators over short arcs."""
    return draw_dense_plan(rng, n_nights=(2, 6), span_d=(2.0, 7.0))


def observable_nights(plan_start_jd, span_d, orbit: Orbit, min_elongation_deg):
    """Night indices (days from the start) when the object is observable, and the phase angle then."""
    from tumble import geometry
    from tumble.simulate import solar_elongation_deg

    days = np.arange(int(math.floor(span_d)))
    t = plan_start_jd + days + 0.5
    el = geometry.OrbitalElements(**asdict(orbit))
    geo = geometry.observing_geometry(t, el)
    ok = (solar_elongation_deg(geo) >= min_elongation_deg) & (geo.phase_deg <= SPARSE_MAX_PHASE_DEG)
    return days[ok], geo.phase_deg[ok]


def count_apparitions(nights_d) -> int:
    """Groups of nights separated by more than :data:`APPARITION_GAP_D` days."""
    nights_d = np.asarray(nights_d, float)
    if nights_d.size == 0:
        return 0
    return int(1 + np.sum(np.diff(np.sort(nights_d)) > APPARITION_GAP_D))


#: Attempts at drawing a sparse orbit with two apparitions before giving up on a draw.
SPARSE_MAX_TRIES = 40


def draw_sparse_plan(rng) -> SparsePlan:
    """Sparse photometry over 1-3 years with at least two apparitions (orbits redrawn until they have)."""
    from tumble.simulate import opposition_elements

    for _ in range(SPARSE_MAX_TRIES):
        start = float(EPOCH0_JD + rng.uniform(0.0, 400.0))
        span = float(rng.uniform(365.0, 3 * 365.25))
        near = rng.random() < 0.35  # inner (NEA-like) orbits reach the larger phase angles
        a = float(rng.uniform(1.25, 1.9) if near else rng.uniform(2.1, 3.3))
        e = float(rng.uniform(0.1, 0.35) if near else rng.uniform(0.02, 0.2))
        el = opposition_elements(start, a_au=a, e=e, i_deg=float(rng.uniform(0.0, 25.0)),
                                 node_deg=float(rng.uniform(0, 360)), peri_deg=float(rng.uniform(0, 360)),
                                 days_before=float(rng.uniform(-60.0, 150.0)))
        orbit = Orbit(el.a_au, el.e, el.i_deg, el.node_deg, el.peri_deg, el.mean_anomaly_deg, el.epoch_jd)
        min_el = float(rng.uniform(60.0, 100.0))
        nights, phase = observable_nights(start, span, orbit, min_el)
        n_app = count_apparitions(nights)
        n_target = int(rng.integers(60, 401))
        if n_app >= 2 and len(nights) * 2.5 >= n_target and np.ptp(phase) >= 3.0:
            return SparsePlan(start_jd=start, span_d=span, n_points_target=n_target,
                              max_points_per_night=int(rng.integers(1, 5)), min_elongation_deg=min_el,
                              orbit=orbit, n_apparitions=n_app)
    raise RuntimeError("could not draw a sparse orbit with two apparitions")


def draw_close_plan(rng) -> ClosePlan:
    """A close approach: 2-8 nights around closest approach, Delta < 0.05 au for most of the run."""
    nn = int(rng.integers(2, 9))
    miss = float(rng.uniform(0.005, 0.045))
    # keep the run within about 0.06 au: speed bounded by the distance travelled over half the run
    v_max = min(8.0, 0.05 / max(nn / 2.0, 1.0) * 1731.46)  # 1 au/d = 1731.46 km/s
    return ClosePlan(
        start_jd=float(EPOCH0_JD + rng.uniform(0.0, 700.0)), n_nights=nn,
        hours_per_night=float(rng.uniform(2.0, 8.0)), cadence_min=float(rng.uniform(2.0, 10.0)),
        loss_fraction=float(rng.uniform(0.01, 0.05)), zero_point_sigma_mag=0.02,
        ca_offset_d=float(nn / 2.0 + rng.uniform(-0.5, 0.5)), miss_distance_au=miss,
        phase_ca_deg=float(rng.uniform(40.0, 88.0)), v_rel_km_s=float(rng.uniform(1.0, max(1.5, v_max))),
        direction_angle_deg=float(rng.uniform(0, 360)), velocity_angle_deg=float(rng.uniform(0, 360)))


def plan_span_h(plan) -> float:
    """Approximate span of a plan, hours (for the period ranges a span allows)."""
    if plan.kind == "dense":
        return 24.0 * plan.span_d + plan.hours_per_night
    if plan.kind == "sparse":
        return 24.0 * plan.span_d
    return 24.0 * (plan.n_nights - 1) + plan.hours_per_night


def draw_body(rng, *, numeric: bool) -> Body:
    """Ellipsoid or facet body (b/a 0.55-0.95, c/b 0.6-0.95)."""
    ba, cb = float(rng.uniform(0.55, 0.95)), float(rng.uniform(0.6, 0.95))
    facets = rng.random() < (0.5 if numeric else FACET_BODY_FRACTION)
    if facets:
        return Body("facets", ba, cb, float(rng.uniform(0.04, 0.15)))
    return Body("ellipsoid", ba, cb)


def draw_scattering(rng) -> Scattering:
    """Lommel-Seeliger, or LS + Lambert with weight 0.05-0.5."""
    if rng.random() < 0.5:
        return Scattering("lommel-seeliger", 0.0)
    return Scattering("ls-lambert", float(rng.uniform(0.05, 0.5)))


def draw_trend(rng) -> Trend:
    """Linear (0.01-0.04 mag/deg) or H,G (G 0-0.5) phase trend."""
    if rng.random() < 0.5:
        return Trend("linear", slope_mag_per_deg=float(rng.uniform(0.01, 0.04)))
    return Trend("hg", g=float(rng.uniform(0.0, 0.5)))


def draw_pa_rotation(rng, span_h: float, attitude: str, *, slow_short: bool = False) -> Rotation:
    """A PA spin: 2-60 h (or 60-500 h where the span holds four rotations); slow over short arcs on request."""
    lon, lat = _direction(rng)
    if slow_short:
        # at most about 2.5 rotations in the span: NPA cannot be tested on these data
        p = _log_uniform(rng, max(24.0, span_h / 2.5), max(48.0, 3.0 * span_h))
    elif rng.random() < PA_LONG_FRACTION and span_h / PA_LONG_MIN_ROTATIONS > PA_LONG_PERIOD_RANGE_H[0]:
        p = _log_uniform(rng, PA_LONG_PERIOD_RANGE_H[0], min(PA_LONG_PERIOD_RANGE_H[1], span_h / PA_LONG_MIN_ROTATIONS))
    else:
        p = _log_uniform(rng, *PA_PERIOD_RANGE_H)
    return Rotation("PA", p, p, math.nan, lon, lat, float(rng.uniform(0, 360)), 0.0, attitude)


#: Attempts at an NPA state with both periods in range before giving up on a draw.
NPA_MAX_TRIES = 200


def draw_npa_rotation(rng, body: Body, attitude: str) -> Rotation:
    """SAM or LAM with P_psi 5-300 h, P_phi 2-1500 h, excitation from near the separatrix to strong."""
    from tumble.brightness import inertia_ratios_from_axes
    from tumble.dynamics import RotationState, RotationStateError

    i1, i2 = (float(v) for v in inertia_ratios_from_axes(body.axes))
    for _ in range(NPA_MAX_TRIES):
        mode = "SAM" if rng.random() < 0.5 else "LAM"
        if mode == "SAM":
            u = float(rng.uniform(*SAM_EXCITATION_RANGE))
            idd = 1.0 - u * (1.0 - i2)
        else:
            u = float(rng.uniform(*LAM_EXCITATION_RANGE))
            idd = i2 - u * (i2 - i1)
        p_psi = _log_uniform(rng, *P_PSI_RANGE_H)
        lon, lat = _direction(rng)
        try:
            st = RotationState.excited(i1, i2, idd, p_psi, lon, lat)
            p_phi = float(st.p_phi_h)
        except RotationStateError:
            continue
        if P_PHI_RANGE_H[0] <= p_phi <= P_PHI_RANGE_H[1]:
            return Rotation(mode, p_psi, p_phi, u, lon, lat, float(rng.uniform(0, 360)), float(rng.uniform(0, 360)),
                            attitude)
    raise RuntimeError("could not draw an NPA state with periods in range")


def null_rotation() -> Rotation:
    """No rotational signal (sphere)."""
    return Rotation("none", math.nan, math.nan, math.nan, 0.0, 90.0, 0.0, 0.0, "closed")


# ---------------------------------------------------------------------------
# Recipes


@dataclass(frozen=True)
class Recipe:
    """How many objects of one kind, drawn how.

    Attributes
    ----------
    category : str
    count : int
    plan : str
        Key of :data:`PLAN_DRAWERS`.
    rotation : {'PA', 'NPA', 'slow-PA', 'flat', 'noise'}
        Key of :data:`ROTATION_DRAWERS`.
    noise_range_mag : (float, float)
        Noise drawn log-uniform within (0 means noise-free: 'flat').
    """

    category: str
    count: int
    plan: str
    rotation: str
    noise_range_mag: tuple


#: Plan drawing functions by name.
PLAN_DRAWERS = {"dense": draw_dense_plan, "dense-short": draw_short_dense_plan, "sparse": draw_sparse_plan,
                "close": draw_close_plan}

DENSE_NOISE = (0.005, 0.04)
SPARSE_NOISE = (0.02, 0.1)

#: The library (issue 14: at least 600 objects, at least 200 PA; all of the population).
RECIPES = (
    Recipe("dense-pa", 140, "dense", "PA", DENSE_NOISE),
    Recipe("dense-npa", 170, "dense", "NPA", DENSE_NOISE),
    Recipe("sparse-pa", 90, "sparse", "PA", SPARSE_NOISE),
    Recipe("sparse-npa", 90, "sparse", "NPA", SPARSE_NOISE),
    Recipe("close-pa", 45, "close", "PA", DENSE_NOISE),
    Recipe("close-npa", 25, "close", "NPA", DENSE_NOISE),
    Recipe("slow-pa-short-arc", 30, "dense-short", "slow-PA", DENSE_NOISE),
    Recipe("flat-dense", 6, "dense", "flat", (0.0, 0.0)),
    Recipe("noise-dense", 14, "dense", "noise", DENSE_NOISE),
    Recipe("flat-sparse", 6, "sparse", "flat", (0.0, 0.0)),
    Recipe("noise-sparse", 14, "sparse", "noise", SPARSE_NOISE),
    # issue 20: binaries, a class of their own with new ids (the objects above keep their ids, seeds and
    # parameters: each object's seed is a hash of its own id)
    Recipe("dense-binary", 80, "dense", "binary", DENSE_NOISE),
)
#: The binaries' recipes (``benchmarks/bench_binary.py`` draws these alone).
BINARY_RECIPES = tuple(r for r in RECIPES if r.rotation == "binary")


def _rotation_pa(rng, plan, body, attitude):
    return draw_pa_rotation(rng, plan_span_h(plan), attitude)


def _rotation_slow_pa(rng, plan, body, attitude):
    return draw_pa_rotation(rng, plan_span_h(plan), attitude, slow_short=True)


def _rotation_npa(rng, plan, body, attitude):
    return draw_npa_rotation(rng, body, attitude)


def _rotation_none(rng, plan, body, attitude):
    return null_rotation()


def _rotation_binary_primary(rng, plan, body, attitude):
    """The primary of a binary: a fast PA spin (2-5 h, the usual primaries of small binaries; Pravec et al.
    2006, Icarus 181, 63, from memory)."""
    lon, lat = _direction(rng)
    p = _log_uniform(rng, *BINARY_PRIMARY_PERIOD_RANGE_H)
    return Rotation("PA", p, p, math.nan, lon, lat, float(rng.uniform(0, 360)), 0.0, attitude)


#: Binary ranges (issue 20): orbital period (h), satellite-to-primary size, orbit radius (primary radii),
#: primary period (h), the share of orbits drawn near edge-on and how far from edge-on (deg).
BINARY_P_ORB_RANGE_H = (10.0, 40.0)
BINARY_SIZE_RATIO_RANGE = (0.2, 0.5)
BINARY_ORBIT_RADIUS_RANGE = (2.5, 4.0)
BINARY_PRIMARY_PERIOD_RANGE_H = (2.0, 5.0)
BINARY_EDGE_ON_FRACTION = 0.8
BINARY_EDGE_ON_TOLERANCE_DEG = 8.0


def _mean_view_normal(plan) -> np.ndarray:
    """Unit normal of the mean Sun and observer directions of a dense plan (an orbit pole along it is edge-on)."""
    from tumble import geometry
    from tumble.simulate import opposition_elements

    el = opposition_elements(plan.start_jd, a_au=plan.a_au, e=plan.e, i_deg=plan.i_deg,
                             days_before=plan.opposition_offset_d)
    t = plan.start_jd + np.linspace(0.0, plan.span_d, 5)
    geo = geometry.observing_geometry(t, el)
    n = np.cross(np.mean(geo.obs_dir, axis=0), np.mean(geo.sun_dir, axis=0))
    if np.linalg.norm(n) < 1e-9:  # Sun and observer aligned (opposition): any perpendicular
        n = np.cross(np.mean(geo.obs_dir, axis=0), [0.0, 0.0, 1.0])
    return n / np.linalg.norm(n)


def draw_binary(rng, plan) -> BinarySpec:
    """A satellite within the issue's ranges; the pole near edge-on for :data:`BINARY_EDGE_ON_FRACTION`."""
    edge_on = bool(rng.random() < BINARY_EDGE_ON_FRACTION)
    if edge_on:
        n = _mean_view_normal(plan)
        u = np.cross(n, [0.0, 0.0, 1.0]) if abs(n[2]) < 0.9 else np.cross(n, [1.0, 0.0, 0.0])
        u /= np.linalg.norm(u)
        v = np.cross(n, u)
        tilt = math.radians(rng.uniform(0.0, BINARY_EDGE_ON_TOLERANCE_DEG))
        az = rng.uniform(0.0, 2 * math.pi)
        pole = math.cos(tilt) * n + math.sin(tilt) * (math.cos(az) * u + math.sin(az) * v)
        if rng.random() < 0.5:
            pole = -pole
        lon, lat = math.degrees(math.atan2(pole[1], pole[0])) % 360.0, math.degrees(math.asin(np.clip(pole[2], -1, 1)))
    else:
        lon, lat = _direction(rng)
    return BinarySpec(p_orb_h=_log_uniform(rng, *BINARY_P_ORB_RANGE_H),
                      size_ratio=float(rng.uniform(*BINARY_SIZE_RATIO_RANGE)),
                      orbit_radius=float(rng.uniform(*BINARY_ORBIT_RADIUS_RANGE)), pole_lon_deg=float(lon),
                      pole_lat_deg=float(lat), phase0_deg=float(rng.uniform(0.0, 360.0)), edge_on=edge_on)


#: Rotation drawing functions by recipe kind: ``f(rng, plan, body, attitude) -> Rotation``.
#: Binaries (issue 20): the primary's PA spin here, the satellite from :func:`draw_binary`; rendering
#: adds the mutual events (:func:`library.render.render`).
ROTATION_DRAWERS = {"PA": _rotation_pa, "slow-PA": _rotation_slow_pa, "NPA": _rotation_npa,
                    "flat": _rotation_none, "noise": _rotation_none, "binary": _rotation_binary_primary}

#: Truth class of each rotation kind.
TRUTH_CLASS = {"PA": "PA", "slow-PA": "PA", "NPA": "NPA", "flat": "none", "noise": "none", "binary": "binary"}
#: Kinds whose light curve carries a rotational signal (the others are a sphere).
SIGNAL_KINDS = ("PA", "slow-PA", "NPA", "binary")


def draw_object(recipe: Recipe, index: int, object_id: str, seed: int) -> ObjectSpec:
    """Draw one object of a recipe from its own seed."""
    rng = np.random.default_rng(seed)
    plan = PLAN_DRAWERS[recipe.plan](rng)
    rot_kind = recipe.rotation
    signal = rot_kind in SIGNAL_KINDS
    if rot_kind == "binary":
        # the primary: a triaxial ellipsoid in closed form (the events multiply its closed-form flux)
        attitude = "closed"
        body = Body("ellipsoid", float(rng.uniform(0.55, 0.95)), float(rng.uniform(0.6, 0.95)))
    else:
        attitude = "numeric" if (signal and rng.random() < NUMERIC_FRACTION) else "closed"
        body = draw_body(rng, numeric=attitude == "numeric") if signal else Body("sphere", 1.0, 1.0)
    rotation = ROTATION_DRAWERS[rot_kind](rng, plan, body, attitude)
    binary = draw_binary(rng, plan) if rot_kind == "binary" else None
    lo, hi = recipe.noise_range_mag
    noise = 0.0 if hi == 0 else _log_uniform(rng, lo, hi)
    return ObjectSpec(object_id=object_id, category=recipe.category, truth_class=TRUTH_CLASS[rot_kind], plan=plan,
                      body=body, scattering=draw_scattering(rng), trend=draw_trend(rng), rotation=rotation,
                      noise_mag=noise, seed=int(rng.integers(0, 2**31 - 1)), split=split_of(object_id),
                      binary=binary)


def generate_population(seed: int = 20261204, recipes=RECIPES, scale: float = 1.0) -> list:
    """The library's object records, in recipe order (ids ``CAL-<category>-<n>``).

    Parameters
    ----------
    seed : int
        Master seed; each object's own seed is a hash of it and the object's id, so one object's
        draw depends on no other (adding a recipe or changing a count leaves the others as they were).
    recipes : sequence of Recipe
    scale : float
        Multiplies every recipe's count (at least one object each): a smaller library for tests.

    Returns
    -------
    list of ObjectSpec
    """
    out = []
    for recipe in recipes:
        n = max(1, int(round(recipe.count * scale)))
        for k in range(n):
            object_id = f"CAL-{recipe.category}-{k:03d}"
            out.append(draw_object(recipe, k, object_id, _hash_int(f"seed:{seed}:{object_id}") % (2**31 - 1)))
    return out
