"""Geometry-aware PA model: rotating triaxial ellipsoid plus an H,G1,G2-type phase function.

For each point the model magnitude is

``m = H_g + PF(alpha; G) - 2.5 log10( I(s_b, o_b; a, b, c) / I_sphere(alpha) )``

- ``s_b, o_b``: the Sun and observer directions of the point (ecliptic J2000,
  :func:`tumble.model.viewing_geometry`) in the body frame of a principal-axis
  rotator with spin vector ``p`` (ecliptic longitude, latitude) and sidereal
  frequency ``f``: rotation angle ``phi = phi0 + 2 pi f (t - epoch)`` about
  ``p`` (right-handed), the long axis at azimuth ``phi`` in the frame of
  :func:`tumble.sparse.kernel.pole_frame`;
- ``I``: disk-integrated brightness of the ellipsoid under the scattering law
  (:data:`SCATTERING_LAWS`; Lommel-Seeliger in the closed form of Muinonen &
  Lumme 2015, optionally plus a Lambert part, Kaasalainen et al. 2001);
- ``I_sphere(alpha)``: the same law's brightness of the equal-volume sphere at
  the point's phase angle, so that the shape term is zero for a sphere and the
  whole phase curve sits in ``PF``;
- ``PF``: the reduced-magnitude phase function of :data:`PHASE_MODELS`
  (H,G1,G2 or H,G12 of Muinonen et al. 2010; or fixed);
- ``H_g``: one additive zero-point per group (per band for sparse points,
  per session for dense sessions), profiled (weighted mean) at every call.

The non-linear parameters are the vector ``(f_per_d, lon_deg, lat_deg,
phi0_rad, ln_a_over_b, ln_b_over_c, *phase parameters)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tumble.brightness import lambert_ellipsoid, lommel_seeliger_ellipsoid, sphere_ls_phase_function
from tumble.exceptions import TumbleError
from tumble.phase_function import g12_to_g1g2, hg1g2_basis
from tumble.sparse.kernel import pole_frame, pole_vectors

__all__ = [
    "SparseFitError",
    "ScatteringLaw",
    "SCATTERING_LAWS",
    "PhaseModel",
    "PHASE_MODELS",
    "EllipsoidProblem",
    "ellipsoid_problem",
    "model_magnitudes",
    "model_magnitudes_reference",
    "profiled_chi2",
    "N_SHAPE_PARAMS",
]

#: Parameters before the phase-function ones: f_per_d, lon_deg, lat_deg, phi0_rad, ln_a_over_b, ln_b_over_c.
N_SHAPE_PARAMS = 6
#: Weight of the Lambert term of the 'ls-lambert' law (Kaasalainen et al. 2001 use 0.1).
LAMBERT_WEIGHT = 0.1
#: Gauss-Legendre order of the Lambert quadrature in the fit (about 1e-6 relative, brightness.py).
LAMBERT_ORDER = 16
#: G12 used by the 'fixed' phase model (0.5: within the range of the bulk of asteroids,
#: Muinonen et al. 2010; common practice when the phase range cannot constrain it).
FIXED_G12 = 0.5


class SparseFitError(TumbleError, ValueError):
    """The geometry-aware PA fit cannot be run on these data or with these options."""


@dataclass(frozen=True)
class ScatteringLaw:
    """A scattering law: body brightness and the equal-volume sphere's phase curve.

    Contract: ``body(s_b, o_b, axes)`` returns the disk-integrated brightness
    (shape (...)) of an ellipsoid with semi-axes ``axes`` (..., 3) for unit
    body-frame directions (..., 3); ``sphere(alpha_rad)`` returns that of the
    unit sphere (the axes are normalised to abc = 1) at phase angle ``alpha``.
    """

    name: str
    lambert_weight: float

    def body(self, s_b, o_b, axes):
        out = lommel_seeliger_ellipsoid(s_b, o_b, axes)
        if self.lambert_weight:
            out = out + self.lambert_weight * lambert_ellipsoid(s_b, o_b, axes, order=LAMBERT_ORDER)
        return out

    def sphere(self, alpha_rad):
        """Unit-sphere brightness: LS ``pi/2 Phi_LS(alpha)`` plus the Lambert sphere
        ``c (2 pi / 3) (sin a + (pi - a) cos a) / pi`` (Russell 1916; e.g. Lester et al. 1979)."""
        a = np.asarray(alpha_rad, float)
        out = 0.5 * np.pi * sphere_ls_phase_function(np.degrees(a))
        if self.lambert_weight:
            out = out + self.lambert_weight * (2.0 * np.pi / 3.0) * (np.sin(a) + (np.pi - a) * np.cos(a)) / np.pi
        return out


#: Scattering laws of the fit, by name (the names of :data:`tumble.brightness.LAWS`).
SCATTERING_LAWS = {
    "lommel-seeliger": ScatteringLaw("lommel-seeliger", 0.0),
    "ls-lambert": ScatteringLaw("ls-lambert", LAMBERT_WEIGHT),
}


@dataclass(frozen=True)
class PhaseModel:
    """A phase function: names of its parameters, start values, bounds, and (G1, G2) from them."""

    name: str
    parameters: tuple
    start: tuple
    lower: tuple
    upper: tuple

    def g1g2(self, x):
        """(G1, G2) arrays (K,) from the phase parameters x (K, len(parameters))."""
        x = np.atleast_2d(np.asarray(x, float))
        if self.name == "hg1g2":
            return x[:, 0], x[:, 1]
        if self.name == "hg12":
            return g12_to_g1g2(x[:, 0])
        g1, g2 = g12_to_g1g2(FIXED_G12)
        k = x.shape[0]
        return np.full(k, float(g1)), np.full(k, float(g2))


_G1_START, _G2_START = (float(v) for v in g12_to_g1g2(FIXED_G12))

#: Phase functions of the fit (Muinonen et al. 2010): free G1, G2; one G12; or fixed.
PHASE_MODELS = {
    "hg1g2": PhaseModel("hg1g2", ("g1", "g2"), (_G1_START, _G2_START), (0.0, 0.0), (1.0, 1.0)),
    "hg12": PhaseModel("hg12", ("g12",), (FIXED_G12,), (0.0,), (1.0,)),
    "fixed": PhaseModel("fixed", (), (), (), ()),
}


@dataclass(frozen=True, eq=False)
class EllipsoidProblem:
    """Arrays of one light curve for the ellipsoid fit.

    Attributes
    ----------
    t : numpy.ndarray, shape (n,)
        Model times minus ``epoch_jd``, days.
    y : numpy.ndarray, shape (n,)
        Reduced magnitudes, mag.
    w : numpy.ndarray, shape (n,)
        Weights 1/sigma^2, mag^-2.
    sun_dir, obs_dir : numpy.ndarray, shape (n, 3)
        Unit vectors to the Sun and the observer, ecliptic J2000.
    alpha_rad : numpy.ndarray, shape (n,)
        Phase angles, radians.
    phi_basis : numpy.ndarray, shape (3, n)
        H,G1,G2 basis functions at the phase angles.
    group : numpy.ndarray of int, shape (n,)
        Zero-point group of each point (0..G-1).
    group_names : tuple of str
        ``band=r`` or ``session=3`` for each group.
    law : ScatteringLaw
    phase : PhaseModel
    epoch_jd : float
        TDB JD of ``t = 0``.
    """

    t: np.ndarray
    y: np.ndarray
    w: np.ndarray
    sun_dir: np.ndarray
    obs_dir: np.ndarray
    alpha_rad: np.ndarray
    phi_basis: np.ndarray
    group: np.ndarray
    group_names: tuple
    law: ScatteringLaw
    phase: PhaseModel
    epoch_jd: float

    @property
    def n_points(self) -> int:
        return int(self.t.size)

    @property
    def n_groups(self) -> int:
        return len(self.group_names)

    @property
    def n_nonlinear(self) -> int:
        return N_SHAPE_PARAMS + len(self.phase.parameters)


def ellipsoid_problem(t, y, w, sun_dir, obs_dir, phase_deg, group, group_names, law: str, phase_model: str,
                      epoch_jd: float) -> EllipsoidProblem:
    """Validate the law and phase-model names and build an :class:`EllipsoidProblem`."""
    if law not in SCATTERING_LAWS:
        raise SparseFitError(f"unknown scattering law '{law}' (choose from {', '.join(SCATTERING_LAWS)})")
    if phase_model not in PHASE_MODELS:
        raise SparseFitError(f"unknown phase model '{phase_model}' (choose from {', '.join(PHASE_MODELS)})")
    ph = np.clip(np.asarray(phase_deg, float), 0.0, 179.0)
    return EllipsoidProblem(np.asarray(t, float), np.asarray(y, float), np.asarray(w, float),
                            np.asarray(sun_dir, float), np.asarray(obs_dir, float), np.radians(ph),
                            np.array(hg1g2_basis(ph)), np.asarray(group, int), tuple(group_names),
                            SCATTERING_LAWS[law], PHASE_MODELS[phase_model], float(epoch_jd))


def _axes(ln_ab, ln_bc):
    """Semi-axes (K, 3) with abc = 1 from ln(a/b) and ln(b/c)."""
    ab = np.exp(ln_ab)
    bc = np.exp(ln_bc)
    ax = np.stack([ab * bc, bc, np.ones_like(bc)], axis=-1)
    return ax / np.cbrt(np.prod(ax, axis=-1, keepdims=True))


def _phase_magnitudes(problem: EllipsoidProblem, x):
    """``-2.5 log10(G1 Phi1 + G2 Phi2 + (1 - G1 - G2) Phi3)`` (K, n)."""
    g1, g2 = problem.phase.g1g2(x[:, N_SHAPE_PARAMS:])
    p1, p2, p3 = problem.phi_basis
    flux = g1[:, None] * p1 + g2[:, None] * p2 + (1.0 - g1 - g2)[:, None] * p3
    return -2.5 * np.log10(np.maximum(flux, 1e-6))


def model_magnitudes(problem: EllipsoidProblem, x) -> np.ndarray:
    """Model magnitudes without the group zero-points, (K, n), for parameter vectors x (K, d)."""
    x = np.atleast_2d(np.asarray(x, float))
    p = pole_vectors(x[:, 1], x[:, 2])  # (K, 3)
    e1, e2 = pole_frame(p)
    phi = x[:, 3, None] + 2.0 * np.pi * np.mod(x[:, 0, None] * problem.t[None, :], 1.0)  # (K, n)
    c, s = np.cos(phi), np.sin(phi)
    body = []
    for v in (problem.sun_dir, problem.obs_dir):
        v1 = e1 @ v.T  # (K, n)
        v2 = e2 @ v.T
        v3 = p @ v.T
        body.append(np.stack([c * v1 + s * v2, -s * v1 + c * v2, v3], axis=-1))
    axes = _axes(x[:, 4], x[:, 5])[:, None, :]
    flux = problem.law.body(body[0], body[1], axes)
    ref = problem.law.sphere(problem.alpha_rad)[None, :]
    return -2.5 * np.log10(np.maximum(flux / ref, 1e-300)) + _phase_magnitudes(problem, x)


def model_magnitudes_reference(problem: EllipsoidProblem, x1) -> np.ndarray:
    """Slow reference of :func:`model_magnitudes` for one vector: explicit rotation matrices per point.

    The attitude is ``R = [e1 e2 p] Rz(phi)`` (body to ecliptic), the body vectors
    ``R^T v``; brightness from :func:`tumble.brightness.ellipsoid_brightness`.
    """
    from tumble.brightness import ellipsoid_brightness

    x1 = np.asarray(x1, float)
    p = pole_vectors(x1[1], x1[2])
    e1, e2 = pole_frame(p)
    frame = np.column_stack([e1, e2, p])
    ax = _axes(np.array([x1[4]]), np.array([x1[5]]))[0]
    out = np.empty(problem.n_points)
    law = problem.law
    g1, g2 = problem.phase.g1g2(x1[None, N_SHAPE_PARAMS:])
    for i in range(problem.n_points):
        phi = x1[3] + 2.0 * math.pi * x1[0] * problem.t[i]
        rz = np.array([[math.cos(phi), -math.sin(phi), 0.0], [math.sin(phi), math.cos(phi), 0.0], [0, 0, 1.0]])
        r = frame @ rz
        sb, ob = r.T @ problem.sun_dir[i], r.T @ problem.obs_dir[i]
        lname = "ls-lambert" if law.lambert_weight else "lommel-seeliger"
        flux = float(ellipsoid_brightness(sb, ob, ax, law=lname, lambert_weight=law.lambert_weight, order=48))
        a = problem.alpha_rad[i]
        sph = 0.5 * math.pi * float(sphere_ls_phase_function(math.degrees(a)))
        if law.lambert_weight:
            sph += law.lambert_weight * (2.0 / 3.0) * (math.sin(a) + (math.pi - a) * math.cos(a))
        p1, p2, p3 = problem.phi_basis[:, i]
        pf = -2.5 * math.log10(max(g1[0] * p1 + g2[0] * p2 + (1 - g1[0] - g2[0]) * p3, 1e-6))
        out[i] = -2.5 * math.log10(flux / sph) + pf
    return out


def profiled_chi2(problem: EllipsoidProblem, x):
    """Chi-square with the group zero-points profiled, and the zero-points: ((K,), (K, G))."""
    m = model_magnitudes(problem, x)
    r = problem.y[None, :] - m
    g = problem.group
    wsum = np.bincount(g, weights=problem.w, minlength=problem.n_groups)
    zp = np.stack([np.bincount(g, weights=problem.w * row, minlength=problem.n_groups) for row in r]) / wsum
    res = r - zp[:, g]
    return np.sum(problem.w * res * res, axis=1), zp
