"""Disk-integrated brightness of a triaxial ellipsoid, facet models, phase trends, inertia.

Conventions
-----------
Body axes 1, 2, 3 are the long, intermediate and short axes; the ellipsoid
semi-axes ``a >= b >= c`` lie along them and are passed as the last axis of an
array ``axes[..., 0:3] = (a, b, c)``. Sun and observer directions are *unit*
vectors from the body towards the Sun and the observer, in body coordinates,
with shape ``(..., 3)``; everything broadcasts over the leading axes (states,
walkers, points). Lengths are in any consistent unit; brightness integrals come
out in that unit squared. Angles are degrees at the interface.

Scattering laws
---------------
- ``'lommel-seeliger'``: the scattering law ``S = mu mu0 / (mu + mu0)``
  integrated over the lit and visible surface, in the closed form of Muinonen &
  Lumme (2015, A&A 584, A23) for a triaxial ellipsoid
  (:func:`lommel_seeliger_ellipsoid`).
- ``'ls-lambert'``: ``S = mu mu0 / (mu + mu0) + c mu mu0`` with ``c = 0.1`` by
  default, the combination used for convex inversion by Kaasalainen, Torppa &
  Muinonen (2001, Icarus 153, 37). The Lambert part has no closed form on an
  ellipsoid; it is integrated by Gauss-Legendre quadrature in surface
  parameters aligned with the lit-and-visible region
  (:func:`ellipsoid_quadrature`), or summed over a triangulated surface
  (:class:`FacetShape`).
- ``'lambert'``: ``S = mu mu0`` alone, by the same quadrature.

All three are entries of the registry :data:`SCATTERING_LAWS` (records
:class:`ScatteringLaw`, looked up with :func:`scattering_law`; defined in the
numpy-free :mod:`tumble.laws` and re-exported here); the simulator,
the physical model (:class:`tumble.model.PhysicalModel`) and the CLI choices
read it.

The phase-angle dependence of the scattering (the ``f(alpha)`` of Kaasalainen et
al. 2001) is left to a separate, simple :class:`PhaseTrend`: linear in phase
angle, or the IAU H,G curve of Bowell et al. (1989).

Homogeneous ellipsoid moments of inertia (e.g. Landau & Lifshitz, *Mechanics*,
section 32): ``I1 = M (b^2 + c^2)/5``, ``I2 = M (a^2 + c^2)/5``,
``I3 = M (a^2 + b^2)/5``; the inverse ("dynamically equivalent ellipsoid") is
``a^2 : b^2 : c^2 = (I2 + I3 - I1) : (I1 + I3 - I2) : (I1 + I2 - I3)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from tumble.exceptions import GeometryError
from tumble.laws import DEFAULT_LAMBERT_WEIGHT, LAMBERT_ORDER, LAWS, SCATTERING_LAWS, ScatteringLaw, scattering_law

__all__ = [
    "LAWS",
    "ScatteringLaw",
    "SCATTERING_LAWS",
    "DEFAULT_LAMBERT_WEIGHT",
    "scattering_law",
    "lommel_seeliger_ellipsoid",
    "lommel_seeliger_ellipsoid_reference",
    "ellipsoid_quadrature",
    "lambert_ellipsoid",
    "ellipsoid_brightness",
    "ellipsoid_magnitude",
    "zero_phase_sphere_brightness",
    "projected_area",
    "sphere_ls_phase_function",
    "FacetShape",
    "icosphere",
    "PhaseTrend",
    "inertia_ratios_from_axes",
    "axes_from_inertia_ratios",
]


_TINY = 1e-300


def _axes(axes) -> np.ndarray:
    """Validate ``axes`` (..., 3): positive and finite."""
    ax = np.asarray(axes, dtype=float)
    if ax.shape[-1:] != (3,):
        raise GeometryError(f"ellipsoid axes must have a last dimension of 3 (a, b, c), got shape {ax.shape}")
    if not np.all(np.isfinite(ax) & (ax > 0)):
        raise GeometryError("ellipsoid semi-axes must be positive and finite")
    return ax


def _dot(x, y):
    return np.einsum("...i,...i->...", x, y)


# ---------------------------------------------------------------------------
# Lommel-Seeliger ellipsoid, closed form


def lommel_seeliger_ellipsoid(sun_dir, obs_dir, axes):
    """Lommel-Seeliger brightness integral of a triaxial ellipsoid, closed form.

    Computes ``I_LS = integral of mu mu0/(mu + mu0) dA`` over the part of the
    surface that is both lit (mu0 > 0) and visible (mu > 0), in the closed form of
    Muinonen & Lumme (2015, A&A 584, A23):

    ``I_LS = (pi/2) a b c (S_sun S_obs / S) [cos(lambda' - alpha') + cos lambda'
    + sin lambda' sin(lambda' - alpha') ln(cot(lambda'/2) cot((alpha' - lambda')/2))]``

    with ``C = diag(a^-2, b^-2, c^-2)``, ``S_sun = sqrt(e_sun^T C e_sun)``,
    ``S_obs = sqrt(e_obs^T C e_obs)``, ``cos alpha' = e_sun^T C e_obs/(S_sun S_obs)``,
    ``S^2 = S_sun^2 + S_obs^2 + 2 S_sun S_obs cos alpha'``,
    ``cos lambda' = (S_sun + S_obs cos alpha')/S`` and
    ``sin lambda' = S_obs sin alpha'/S``.

    Implementation. Write ``p = S_sun``, ``q = S_obs``, ``r = S``, ``g = e_sun^T C e_obs``
    and ``X^2 = p^2 q^2 - g^2`` (so ``X = p q sin alpha'``). Then
    ``cot(lambda'/2) = (p r + p^2 + g)/X`` and
    ``cot((alpha' - lambda')/2) = (q r + q^2 + g)/X``, and the closed form becomes,
    without any trigonometric function,

    ``I_LS = (pi/2) a b c [ (q (p^2 + g) + p (q^2 + g))/r^2
    - (X^2/r^3) ln( (p r + p^2 + g)(q r + q^2 + g)/X^2 ) ]``.

    Where ``p^2 + g < 0`` (lambda' > 90 deg, possible only at large phase) the
    factor ``p r + p^2 + g`` is evaluated as ``X^2/(p r - p^2 - g)`` to avoid
    cancellation (likewise for q). ``X^2 ln(1/X^2)`` tends to 0 as alpha' -> 0 and
    is made exactly 0 there (the alpha' = 0 limit, ``I_LS = A_proj/2``); at
    alpha' -> 180 deg the result tends to 0 and stays finite.

    Parameters
    ----------
    sun_dir, obs_dir : array_like, shape (..., 3)
        Unit vectors from the body to the Sun and to the observer, body frame
        (not normalised here).
    axes : array_like, shape (..., 3)
        Semi-axes (a, b, c) along body axes 1, 2, 3.

    Returns
    -------
    numpy.ndarray, shape (...)
        ``I_LS`` in units of the axes squared (the disk-integrated brightness is
        proportional to it; the proportionality holds the albedo, the phase
        function and the incident flux).
    """
    ax = _axes(axes)
    es = np.asarray(sun_dir, dtype=float)
    eo = np.asarray(obs_dir, dtype=float)
    shape = np.broadcast_shapes(es.shape, eo.shape, ax.shape)[:-1]
    m = math.prod(shape)
    # one component-first copy of the inputs: the kernel then runs contiguous
    # element-wise passes over cache-sized chunks (no large temporaries)
    work = np.empty((9, m))
    work[0:3] = np.moveaxis(np.broadcast_to(es, shape + (3,)), -1, 0).reshape(3, m)
    work[3:6] = np.moveaxis(np.broadcast_to(eo, shape + (3,)), -1, 0).reshape(3, m)
    work[6:9] = np.moveaxis(np.broadcast_to(1.0 / ax, shape + (3,)), -1, 0).reshape(3, m)
    abc = np.broadcast_to(ax[..., 0] * ax[..., 1] * ax[..., 2], shape).reshape(m)
    out = np.empty(m)
    for i in range(0, m, _CHUNK):
        j = min(m, i + _CHUNK)
        out[i:j], near_opposition = _ls_kernel(*work[:, i:j])
        if near_opposition is not None:
            # u nearly opposite to v with |u| ~ |v| (true phase within a degree or
            # so of 180): the closed form's terms cancel there and lose accuracy,
            # the surface quadrature does not
            k = i + np.flatnonzero(near_opposition)
            out[k] = ellipsoid_quadrature(work[0:3, k].T, work[3:6, k].T, 1.0 / work[6:9, k].T, order=16)
            out[k] /= (0.5 * np.pi) * abc[k]
    out *= (0.5 * np.pi) * abc
    return out.reshape(shape)


#: Elements per chunk in the element-wise kernels: large enough to amortise the
#: per-call overhead of numpy, small enough for the dozen live arrays to stay
#: in the CPU cache (measured best of 1k..64k on the development machine).
_CHUNK = 16384


def _ls_kernel(s0, s1, s2, o0, o1, o2, c0, c1, c2):
    """Bracketed part of the Muinonen & Lumme (2015) closed form, 1-D arrays (see the caller).

    ``c`` holds the inverse semi-axes, so that ``u = c * e_sun`` and ``v = c * e_obs``.
    """
    u0 = s0 * c0
    u1 = s1 * c1
    u2 = s2 * c2
    v0 = o0 * c0
    v1 = o1 * c1
    v2 = o2 * c2
    # w = u + v, so that u.w and v.w come without cancellation when u is
    # nearly opposite to v
    w0 = u0 + v0
    w1 = u1 + v1
    w2 = u2 + v2
    gl = u0 * w0
    t = u1 * w1
    gl += t
    np.multiply(u2, w2, out=t)
    gl += t  # u.w = p^2 + g
    gm = v0 * w0
    np.multiply(v1, w1, out=t)
    gm += t
    np.multiply(v2, w2, out=t)
    gm += t  # v.w = q^2 + g
    pp = np.multiply(u0, u0, out=w0)
    np.multiply(u1, u1, out=t)
    pp += t
    np.multiply(u2, u2, out=t)
    pp += t  # p^2
    qq = np.multiply(v0, v0, out=w1)
    np.multiply(v1, v1, out=t)
    qq += t
    np.multiply(v2, v2, out=t)
    qq += t  # q^2
    # X^2 = p^2 q^2 - g^2 (Lagrange's identity); its absolute rounding error
    # matters only where r -> 0, which is handed to the quadrature below
    x = np.subtract(gl, pp, out=w2)  # g = u.v
    x *= x
    np.multiply(pp, qq, out=t)
    np.subtract(t, x, out=x)
    np.maximum(x, 0.0, out=x)  # X^2
    rr = gl + gm  # r^2 = |w|^2
    np.maximum(rr, 0.0, out=rr)
    np.add(pp, qq, out=t)
    t *= 9e-4
    near = rr < t  # r < 0.03 sqrt(p^2 + q^2): true phase within about 2-3 deg of 180
    near = near if near.any() else None
    p = np.sqrt(pp, out=pp)
    q = np.sqrt(qq, out=qq)
    r = np.sqrt(rr)
    al = p * r
    al += gl
    am = q * r
    am += gm
    neg = gl < 0
    if neg.any():
        al[neg] = x[neg] / np.maximum(p[neg] * r[neg] - gl[neg], _TINY)
    neg = gm < 0
    if neg.any():
        am[neg] = x[neg] / np.maximum(q[neg] * r[neg] - gm[neg], _TINY)
    out = q * gl
    out += p * gm
    np.maximum(rr, _TINY, out=t)
    out /= t  # (q (p^2 + g) + p (q^2 + g)) / r^2
    al *= am
    np.maximum(al, _TINY, out=al)
    np.maximum(x, _TINY, out=am)
    al /= am
    np.log(al, out=al)
    al *= x
    t *= r
    np.maximum(t, _TINY, out=t)
    al /= t  # (X^2/r^3) ln(cot cot)
    out -= al
    np.maximum(out, 0.0, out=out)
    return out, near


def lommel_seeliger_ellipsoid_reference(sun_dir, obs_dir, axes) -> float:
    """Slow, literal transcription of the Muinonen & Lumme (2015) closed form, one geometry.

    Uses the published variables (S_sun, S_obs, alpha', S, lambda') and inverse
    trigonometric functions, scalar ``math`` only; for tests of the vectorised
    :func:`lommel_seeliger_ellipsoid`. Not valid at alpha' = 0 exactly (the
    logarithm's limit is not taken) nor at alpha' = 180 deg.
    """
    a, b, c = (float(x) for x in axes)
    es = [float(x) for x in sun_dir]
    eo = [float(x) for x in obs_dir]
    cdiag = (a**-2, b**-2, c**-2)
    s_sun = math.sqrt(sum(ci * x * x for ci, x in zip(cdiag, es)))
    s_obs = math.sqrt(sum(ci * x * x for ci, x in zip(cdiag, eo)))
    cos_ap = sum(ci * x * y for ci, x, y in zip(cdiag, es, eo)) / (s_sun * s_obs)
    alpha_p = math.acos(max(-1.0, min(1.0, cos_ap)))
    s = math.sqrt(s_sun**2 + s_obs**2 + 2 * s_sun * s_obs * math.cos(alpha_p))
    lam = math.atan2(s_obs * math.sin(alpha_p) / s, (s_sun + s_obs * math.cos(alpha_p)) / s)
    cot = lambda x: math.cos(x) / math.sin(x)  # noqa: E731
    bracket = (math.cos(lam - alpha_p) + math.cos(lam)
               + math.sin(lam) * math.sin(lam - alpha_p) * math.log(cot(lam / 2) * cot((alpha_p - lam) / 2)))
    return 0.5 * math.pi * a * b * c * (s_sun * s_obs / s) * bracket


# ---------------------------------------------------------------------------
# Quadrature in surface parameters (LS and Lambert)


def _quadrature_inputs(sun_dir, obs_dir, axes, order):
    """Broadcast directions and axes to flat (m, 3) arrays for the quadrature routines; check the order."""
    ax = _axes(axes)
    es = np.asarray(sun_dir, dtype=float)
    eo = np.asarray(obs_dir, dtype=float)
    shape = np.broadcast_shapes(es.shape, eo.shape, ax.shape)
    es, eo, ax = (np.broadcast_to(x, shape).reshape(-1, 3) for x in (es, eo, ax))
    order = int(order)
    if order < 2:
        raise GeometryError(f"quadrature order must be at least 2, got {order}")
    return es, eo, ax, shape, order


@lru_cache(maxsize=16)
def _gauss_legendre(n: int):
    x, w = np.polynomial.legendre.leggauss(n)
    return x, w


def ellipsoid_quadrature(sun_dir, obs_dir, axes, *, lambert_weight: float = 0.0, order: int = 48,
                         ls_weight: float = 1.0):
    """Integral of ``mu mu0/(mu + mu0) + c mu mu0`` over the lit and visible surface, by quadrature.

    The surface is parametrised as ``x = A s`` with ``A = diag(a, b, c)`` and ``s``
    on the unit sphere in spherical coordinates (theta, phi) whose pole is along
    ``u x v`` (``u = A^-1 e_sun``, ``v = A^-1 e_obs``). The outward normal of the
    ellipsoid at ``A s`` is along ``A^-1 s``, so ``mu0 > 0`` exactly where
    ``s . u > 0`` and ``mu > 0`` where ``s . v > 0``: the lit-and-visible region is
    the rectangle theta in [0, pi], phi in [alpha' - pi/2, pi/2] of these
    coordinates, and the integrand is smooth on it. The area element and the
    normal are computed from the parametrisation itself (cross product of the
    tangent vectors ``A ds/dtheta`` and ``A ds/dphi``), mu and mu0 from the true
    unit vectors. The rule is Gauss-Legendre with ``order`` nodes in theta and
    ``order`` nodes in phi; for the Lommel-Seeliger term the phi nodes are
    graded towards the two ends, next to which the integrand has poles (see the
    code), so that the rule converges exponentially for any alpha' (about 1e-12
    relative at order 48 for axis ratios up to 3; the tests use order 64 for
    ratios up to 25). Slow: a reference, not a production kernel.

    With ``lambert_weight = 0`` this is an independent numerical check of the
    Muinonen & Lumme (2015) closed form; with ``c = 0.1`` it evaluates the
    Lommel-Seeliger plus Lambert law of Kaasalainen et al. (2001) on the exact
    ellipsoid (no facet discretisation).

    Parameters
    ----------
    sun_dir, obs_dir : array_like, shape (..., 3)
        Unit vectors to the Sun and the observer, body frame.
    axes : array_like, shape (..., 3)
        Semi-axes (a, b, c).
    lambert_weight : float
        Weight ``c`` of the Lambert term.
    order : int
        Gauss-Legendre nodes per surface coordinate.
    ls_weight : float
        Weight of the Lommel-Seeliger term (0 integrates the Lambert term alone).

    Returns
    -------
    numpy.ndarray, shape (...)
        The integral, in units of the axes squared.
    """
    es, eo, ax, shape, order = _quadrature_inputs(sun_dir, obs_dir, axes, order)
    out = np.empty(len(es))
    step = max(1, 65536 // (order * order))  # bound the (geometries, nodes, nodes, 3) temporaries
    for i in range(0, len(es), step):
        j = i + step
        out[i:j] = _quadrature_block(es[i:j], eo[i:j], ax[i:j], ls_weight, lambert_weight, order)
    return out.reshape(shape[:-1])


def _lune_frame(u, v):
    """Orthonormal frame (e1 along u, e3 along u x v) and alpha' for rows of u, v (g, 3)."""
    nu = np.linalg.norm(u, axis=1)
    e1 = u / nu[:, None]
    e3 = np.cross(u, v)
    n3 = np.linalg.norm(e3, axis=1)
    # alpha' = 0 (u parallel to v): any axis perpendicular to u will do
    small = n3 <= 1e-15 * nu * np.linalg.norm(v, axis=1)
    if np.any(small):
        trial = np.where(np.abs(e1[:, :1]) < 0.9, np.array([[1.0, 0.0, 0.0]]), np.array([[0.0, 1.0, 0.0]]))
        alt = np.cross(e1, trial)
        e3 = np.where(small[:, None], alt, e3)
    e3 = e3 - _dot(e3, e1)[:, None] * e1  # exactly perpendicular to u despite rounding
    e3 = e3 / np.linalg.norm(e3, axis=1)[:, None]
    e2 = np.cross(e3, e1)
    alpha_p = np.arctan2(_dot(np.cross(u, v), e3), _dot(u, v))  # in [0, pi]
    return e1, e2, e3, np.clip(alpha_p, 0.0, np.pi)


def _quadrature_block(es, eo, ax, ls_weight, lambert_weight, order):
    """:func:`ellipsoid_quadrature` for 2-D arrays (g, 3) of geometries."""
    u = es / ax
    v = eo / ax
    e1, e2, e3, alpha_p = _lune_frame(u, v)

    x, wts = _gauss_legendre(order)
    theta = 0.5 * np.pi * (x + 1.0)  # (q,)
    w_theta = 0.5 * np.pi * wts
    # phi runs over [alpha' - pi/2, pi/2]. The LS integrand has poles at
    # phi = lambda' +- pi/2, at distances alpha' - lambda' and lambda' outside the
    # two ends (lambda' from Muinonen & Lumme 2015); each half of the interval is
    # integrated in tau with end distance eps = d (e^tau - 1), which moves the
    # near pole to tau -> -infinity and keeps Gauss-Legendre exponentially
    # convergent however small alpha' is.
    nu_ = np.linalg.norm(u, axis=1)
    nv_ = np.linalg.norm(v, axis=1)
    lam = np.arctan2(nv_ * np.sin(alpha_p), nu_ + nv_ * np.cos(alpha_p))  # lambda'
    half_len = 0.5 * (np.pi - alpha_p)
    xh, wh = _gauss_legendre(max(2, order // 2))
    phis, wphis = [], []
    for d, start, sign in ((alpha_p - lam, alpha_p - 0.5 * np.pi, 1.0), (lam, np.full_like(lam, 0.5 * np.pi), -1.0)):
        # below 1e-6 the pole's residue (about d sin alpha') is negligible:
        # a huge d makes the map linear (plain Gauss-Legendre)
        # (the Lambert term alone has no pole: plain Gauss-Legendre as well)
        d = np.where((d < 1e-6) | (ls_weight == 0), 1e6, d)
        tau_end = np.log1p(half_len / d)
        tau = 0.5 * tau_end[:, None] * (xh[None, :] + 1.0)
        eps = d[:, None] * np.expm1(tau)
        phis.append(start[:, None] + sign * eps)
        wphis.append(0.5 * tau_end[:, None] * wh[None, :] * d[:, None] * np.exp(tau))
    phi = np.concatenate(phis, axis=1)  # (g, q)
    w_phi = np.concatenate(wphis, axis=1)
    st, ct = np.sin(theta), np.cos(theta)
    sp, cp = np.sin(phi), np.cos(phi)
    # s(theta, phi) = sin t (cos p e1 + sin p e2) + cos t e3, shapes (g, qt, qp, 3)
    horiz = cp[:, :, None] * e1[:, None, :] + sp[:, :, None] * e2[:, None, :]  # (g, qp, 3)
    dhoriz = -sp[:, :, None] * e1[:, None, :] + cp[:, :, None] * e2[:, None, :]
    ds_dt = ct[None, :, None, None] * horiz[:, None, :, :] - st[None, :, None, None] * e3[:, None, None, :]
    ds_dp = st[None, :, None, None] * dhoriz[:, None, :, :]
    axb = ax[:, None, None, :]
    normal = np.cross(axb * ds_dt, axb * ds_dp)  # area-weighted normal (g, qt, qp, 3)
    darea = np.linalg.norm(normal, axis=-1)
    # orient outward: the outward normal points along +A^-1 s, i.e. N . (A^-1 s) > 0
    s_vec = st[None, :, None, None] * horiz[:, None, :, :] + ct[None, :, None, None] * e3[:, None, None, :]
    sign = np.sign(_dot(normal, s_vec / axb))
    nhat = normal * (sign / np.where(darea > 0, darea, 1.0))[..., None]
    mu0 = _dot(nhat, es[:, None, None, :])
    mu = _dot(nhat, eo[:, None, None, :])
    mu0 = np.maximum(mu0, 0.0)
    mu = np.maximum(mu, 0.0)
    tot = mu + mu0
    f = np.zeros_like(tot)
    if ls_weight:
        f = ls_weight * np.where(tot > 0, mu * mu0 / np.where(tot > 0, tot, 1.0), 0.0)
    if lambert_weight:
        f = f + lambert_weight * mu * mu0
    return np.einsum("gtp,t,gp->g", f * darea, w_theta, w_phi)


def lambert_ellipsoid(sun_dir, obs_dir, axes, *, order: int = 24):
    """Lambert brightness integral ``integral of mu mu0 dA`` of a triaxial ellipsoid, by quadrature.

    In the surface parameters of :func:`ellipsoid_quadrature` (``x = A s``, pole
    of s along ``u x v``) the integrand reduces exactly to
    ``a b c |u| |v| sin^3(theta) cos(phi) cos(phi - alpha') / sqrt(s^T C s)``
    on the rectangle theta in [0, pi], phi in [alpha' - pi/2, pi/2]
    (``u = A^-1 e_sun``, ``v = A^-1 e_obs``, ``C = A^-2``), integrated by a
    tensor Gauss-Legendre rule. The factor ``1/sqrt(s^T C s)`` has complex
    singularities at a distance set by the axis ratio, which limits the
    convergence: order 24 gives about 1e-6 relative for a/c = 2.5, order 48
    about 1e-12 (tested against :func:`ellipsoid_quadrature`, which builds the
    normals from the parametrisation itself). The Lambert part of the law of
    Kaasalainen et al. (2001).

    Parameters
    ----------
    sun_dir, obs_dir : array_like, shape (..., 3)
        Unit vectors, body frame.
    axes : array_like, shape (..., 3)
        Semi-axes (a, b, c).
    order : int
        Gauss-Legendre nodes per coordinate.

    Returns
    -------
    numpy.ndarray, shape (...)
        Units of the axes squared.
    """
    es, eo, ax, shape, order = _quadrature_inputs(sun_dir, obs_dir, axes, order)
    x, wts = _gauss_legendre(order)
    theta = 0.5 * np.pi * (x + 1.0)
    w_theta = 0.5 * np.pi * wts
    st, ct = np.sin(theta), np.cos(theta)
    wst3 = w_theta * st**3
    out = np.empty(len(es))
    step = max(1, 262144 // (order * order))
    for i in range(0, len(es), step):
        j = i + step
        u = es[i:j] / ax[i:j]
        v = eo[i:j] / ax[i:j]
        e1, e2, e3, alpha_p = _lune_frame(u, v)
        half = 0.5 * (np.pi - alpha_p)
        phi = (0.5 * alpha_p)[:, None] + half[:, None] * x[None, :]  # (g, p)
        w_phi = half[:, None] * wts[None, :] * np.cos(phi) * np.cos(phi - alpha_p[:, None])
        cp, sp = np.cos(phi), np.sin(phi)
        cinv = 1.0 / ax[i:j] ** 2
        q = np.zeros((len(u), order, order))
        for k in range(3):
            h = cp * e1[:, k, None] + sp * e2[:, k, None]  # (g, p)
            sk = st[None, :, None] * h[:, None, :] + ct[None, :, None] * e3[:, k, None, None]
            sk *= sk
            sk *= cinv[:, k, None, None]
            q += sk
        np.sqrt(q, out=q)
        f = np.einsum("t,gp,gtp->g", wst3, w_phi, 1.0 / q)
        out[i:j] = f * np.prod(ax[i:j], axis=1) * np.linalg.norm(u, axis=1) * np.linalg.norm(v, axis=1)
    return out.reshape(shape[:-1])


# ---------------------------------------------------------------------------
# Convenience: laws, normalisation, magnitudes


def zero_phase_sphere_brightness(axes, *, law="lommel-seeliger", lambert_weight: float = DEFAULT_LAMBERT_WEIGHT):
    """Brightness integral of the equal-volume sphere at zero phase (:meth:`ScatteringLaw.sphere_zero_phase`)."""
    return scattering_law(law, lambert_weight).sphere_zero_phase(axes)


def ellipsoid_brightness(sun_dir, obs_dir, axes, *, law="lommel-seeliger",
                         lambert_weight: float = DEFAULT_LAMBERT_WEIGHT, order: int = LAMBERT_ORDER):
    """Disk-integrated brightness integral of an ellipsoid under a law of :data:`SCATTERING_LAWS`.

    ``'lommel-seeliger'`` uses the closed form (:func:`lommel_seeliger_ellipsoid`);
    ``'ls-lambert'`` (Kaasalainen et al. 2001) adds ``c`` times the Lambert
    integral (:func:`lambert_ellipsoid`, ``order`` nodes per coordinate; order 24
    gives about 1e-6 of the Lambert term, 1e-7 of the total for c = 0.1);
    ``'lambert'`` is that integral alone. Units: axes squared.
    """
    return scattering_law(law, lambert_weight).brightness(sun_dir, obs_dir, axes, order=order)


def ellipsoid_magnitude(sun_dir, obs_dir, axes, *, law="lommel-seeliger",
                        lambert_weight: float = DEFAULT_LAMBERT_WEIGHT,
                        phase_deg=None, trend: "PhaseTrend | None" = None, order: int = LAMBERT_ORDER):
    """Magnitude of the ellipsoid relative to its equal-volume sphere seen at zero phase.

    ``m = -2.5 log10(I / I_sphere(0)) + trend(phase)``: 0 mag for a sphere at
    zero phase; add ``5 log10(r Delta)`` and an absolute-magnitude offset for an
    apparent magnitude. The trend needs ``phase_deg`` (the true solar phase angle,
    degrees); without it, or with ``trend=None``, no trend is added.
    """
    obj = scattering_law(law, lambert_weight)
    flux = obj.brightness(sun_dir, obs_dir, axes, order=order)
    ref = obj.sphere_zero_phase(axes)
    with np.errstate(divide="ignore"):
        mag = -2.5 * np.log10(flux / ref)
    if trend is not None and phase_deg is not None:
        mag = mag + trend.magnitude(phase_deg)
    return mag


def projected_area(direction, axes):
    """Projected area of an ellipsoid seen along unit vector ``direction``: ``pi a b c sqrt(e^T C e)``.

    (Muinonen & Lumme 2015; any text on ellipsoid projections.) Shapes broadcast
    as in :func:`lommel_seeliger_ellipsoid`.
    """
    ax = _axes(axes)
    q = np.asarray(direction, dtype=float) / ax
    return np.pi * ax[..., 0] * ax[..., 1] * ax[..., 2] * np.sqrt(_dot(q, q))


def sphere_ls_phase_function(phase_deg):
    """Normalised disk-integrated Lommel-Seeliger phase function of a sphere.

    ``Phi(alpha) = 1 - sin(alpha/2) tan(alpha/2) ln cot(alpha/4)``, equal to 1 at
    zero phase (the a = b = c limit of Muinonen & Lumme 2015; e.g. also
    Lumme & Bowell 1981, AJ 86, 1694). Defined for 0 <= alpha < 180 deg.
    """
    alpha = np.radians(np.asarray(phase_deg, dtype=float))
    if np.any(~((alpha >= 0) & (alpha < np.pi))):
        raise GeometryError("phase angle must lie in [0, 180) degrees")
    half = 0.5 * alpha
    q = 0.25 * alpha
    with np.errstate(divide="ignore", invalid="ignore"):
        term = np.sin(half) * np.tan(half) * np.log(np.cos(q) / np.sin(q))
    return 1.0 - np.where(alpha > 0, term, 0.0)


# ---------------------------------------------------------------------------
# Facet model


def icosphere(subdivisions: int):
    """Unit-sphere triangulation: an icosahedron with each face split into ``4**subdivisions``.

    Returns
    -------
    vertices : numpy.ndarray, shape (n_vertices, 3)
        Unit vectors.
    faces : numpy.ndarray of int, shape (20 * 4**subdivisions, 3)
        Vertex indices, counter-clockwise seen from outside.
    """
    if not 0 <= int(subdivisions) <= 8:
        raise GeometryError(f"icosphere subdivisions must be 0..8, got {subdivisions}")
    t = (1.0 + 5.0**0.5) / 2.0
    verts = np.array([[-1, t, 0], [1, t, 0], [-1, -t, 0], [1, -t, 0], [0, -1, t], [0, 1, t],
                      [0, -1, -t], [0, 1, -t], [t, 0, -1], [t, 0, 1], [-t, 0, -1], [-t, 0, 1]], dtype=float)
    faces = np.array([[0, 11, 5], [0, 5, 1], [0, 1, 7], [0, 7, 10], [0, 10, 11], [1, 5, 9], [5, 11, 4],
                      [11, 10, 2], [10, 7, 6], [7, 1, 8], [3, 9, 4], [3, 4, 2], [3, 2, 6], [3, 6, 8],
                      [3, 8, 9], [4, 9, 5], [2, 4, 11], [6, 2, 10], [8, 6, 7], [9, 8, 1]], dtype=np.int64)
    verts /= np.linalg.norm(verts, axis=1, keepdims=True)
    for _ in range(int(subdivisions)):
        edges = np.concatenate([faces[:, [0, 1]], faces[:, [1, 2]], faces[:, [2, 0]]])
        edges.sort(axis=1)
        uniq, inverse = np.unique(edges, axis=0, return_inverse=True)
        inverse = inverse.reshape(-1)
        mids = verts[uniq[:, 0]] + verts[uniq[:, 1]]
        mids /= np.linalg.norm(mids, axis=1, keepdims=True)
        nf = len(faces)
        m01 = inverse[:nf] + len(verts)
        m12 = inverse[nf:2 * nf] + len(verts)
        m20 = inverse[2 * nf:] + len(verts)
        verts = np.concatenate([verts, mids])
        a, b, c = faces[:, 0], faces[:, 1], faces[:, 2]
        faces = np.concatenate([np.stack([a, m01, m20], 1), np.stack([b, m12, m01], 1),
                                np.stack([c, m20, m12], 1), np.stack([m01, m12, m20], 1)])
    return verts, faces


@dataclass(frozen=True, eq=False)
class FacetShape:
    """A convex polyhedron given by its facets, for disk-integrated brightness sums.

    Attributes
    ----------
    vertices : numpy.ndarray, shape (n_vertices, 3)
        Vertex positions, body frame (length unit of the model).
    faces : numpy.ndarray of int, shape (n_facets, 3)
        Vertex indices of each triangle, counter-clockwise seen from outside.
    normals : numpy.ndarray, shape (n_facets, 3)
        Outward unit normals.
    areas : numpy.ndarray, shape (n_facets,)
        Facet areas (length unit squared).
    """

    vertices: np.ndarray
    faces: np.ndarray
    normals: np.ndarray
    areas: np.ndarray

    @classmethod
    def from_mesh(cls, vertices, faces) -> "FacetShape":
        """Facet normals and areas from a triangle mesh (normals oriented away from the centroid)."""
        vertices = np.asarray(vertices, dtype=float)
        faces = np.asarray(faces, dtype=np.int64)
        p0, p1, p2 = vertices[faces[:, 0]], vertices[faces[:, 1]], vertices[faces[:, 2]]
        n = 0.5 * np.cross(p1 - p0, p2 - p0)
        area = np.linalg.norm(n, axis=1)
        if np.any(~(area > 0)):
            raise GeometryError("facet mesh has degenerate (zero-area) triangles")
        outward = np.sign(np.einsum("ij,ij->i", n, (p0 + p1 + p2) / 3.0 - vertices.mean(axis=0)))
        normals = n * (outward / area)[:, None]
        return cls(vertices=vertices, faces=faces, normals=normals, areas=area)

    @classmethod
    def ellipsoid(cls, axes, subdivisions: int = 5) -> "FacetShape":
        """Triangulated ellipsoid: an icosphere (20 * 4**subdivisions facets) scaled by (a, b, c).

        ``subdivisions = 5`` gives 20,480 facets; each extra level multiplies by 4
        and divides the discretisation error by about 4.
        """
        ax = _axes(axes)
        if ax.shape != (3,):
            raise GeometryError("FacetShape.ellipsoid takes one set of axes (a, b, c)")
        verts, faces = icosphere(subdivisions)
        return cls.from_mesh(verts * ax, faces)

    @property
    def n_facets(self) -> int:
        """Number of facets."""
        return int(len(self.areas))

    def brightness(self, sun_dir, obs_dir, *, lambert_weight: float = 0.1, chunk: int = 2_000_000):
        """Sum over facets of ``A (mu mu0/(mu + mu0) + c mu mu0)`` where lit and visible.

        The Lommel-Seeliger plus Lambert law of Kaasalainen et al. (2001) with
        ``c = lambert_weight`` (0 for pure Lommel-Seeliger). Shadowing is absent
        on a convex body. Geometries are processed in chunks of about ``chunk``
        facet-geometry pairs to bound memory.

        Parameters
        ----------
        sun_dir, obs_dir : array_like, shape (..., 3)
            Unit vectors, body frame.

        Returns
        -------
        numpy.ndarray, shape (...)
        """
        es = np.asarray(sun_dir, dtype=float)
        eo = np.asarray(obs_dir, dtype=float)
        shape = np.broadcast_shapes(es.shape, eo.shape)
        es = np.broadcast_to(es, shape).reshape(-1, 3)
        eo = np.broadcast_to(eo, shape).reshape(-1, 3)
        out = np.empty(len(es))
        step = max(1, chunk // max(1, self.n_facets))
        nt = self.normals.T
        for i in range(0, len(es), step):
            mu0 = np.maximum(es[i:i + step] @ nt, 0.0)
            mu = np.maximum(eo[i:i + step] @ nt, 0.0)
            tot = mu + mu0
            s = np.divide(mu * mu0, tot, out=np.zeros_like(tot), where=tot > 0)
            if lambert_weight:
                s += lambert_weight * mu * mu0
            out[i:i + step] = s @ self.areas
        return out.reshape(shape[:-1])

    def projected_area(self, direction):
        """Projected area along unit vector(s) ``direction`` (..., 3): sum of A max(n . e, 0)."""
        e = np.asarray(direction, dtype=float)
        return np.maximum(e @ self.normals.T, 0.0) @ self.areas


# ---------------------------------------------------------------------------
# Phase trend


@dataclass(frozen=True)
class PhaseTrend:
    """A simple magnitude-phase trend added on top of the disk-integrated scattering law.

    Attributes
    ----------
    kind : {'none', 'linear', 'hg'}
        ``'linear'``: ``slope_mag_per_deg * alpha``; ``'hg'``: the IAU H,G curve
        ``-2.5 log10[(1 - G) Phi1 + G Phi2]`` (Bowell et al. 1989, two-term form,
        alpha <= 120 deg), zero at zero phase.
    slope_mag_per_deg : float
        Linear phase coefficient, mag per degree (used when ``kind='linear'``).
    g : float
        Slope parameter G (used when ``kind='hg'``).
    relative_to_sphere : bool
        Subtract the Lommel-Seeliger sphere's own phase curve,
        ``-2.5 log10 Phi_LS(alpha)``, so that an equal-volume sphere under the
        Lommel-Seeliger law follows the trend exactly (the ellipsoid then adds
        only its shape-dependent departures). Default False: the trend is
        simply added.
    """

    kind: str = "none"
    slope_mag_per_deg: float = 0.0
    g: float = 0.15
    relative_to_sphere: bool = False

    def __post_init__(self):
        if self.kind not in ("none", "linear", "hg"):
            raise GeometryError(f"phase trend kind must be none, linear or hg, not '{self.kind}'")
        if not (np.isfinite(self.slope_mag_per_deg) and np.isfinite(self.g)):
            raise GeometryError("phase trend parameters must be finite")

    def magnitude(self, phase_deg):
        """Magnitude offset (mag) at solar phase angle(s) ``phase_deg`` (degrees)."""
        from tumble import phase_function

        alpha = np.asarray(phase_deg, dtype=float)
        if self.kind == "none":
            mag = np.zeros_like(alpha)
        elif self.kind == "linear":
            mag = self.slope_mag_per_deg * alpha
        else:
            mag = phase_function.hg_two_term(alpha, 0.0, self.g)
        if self.relative_to_sphere:
            mag = mag + 2.5 * np.log10(sphere_ls_phase_function(alpha))
        return mag

    def to_dict(self) -> dict:
        """JSON-ready description."""
        return {"kind": self.kind, "slope_mag_per_deg": self.slope_mag_per_deg, "g": self.g,
                "relative_to_sphere": self.relative_to_sphere}


# ---------------------------------------------------------------------------
# Inertia of a homogeneous ellipsoid


def inertia_ratios_from_axes(axes):
    """Moment-of-inertia ratios (I1/I3, I2/I3) of a homogeneous ellipsoid a >= b >= c.

    ``I1 = M (b^2 + c^2)/5``, ``I2 = M (a^2 + c^2)/5``, ``I3 = M (a^2 + b^2)/5``
    (homogeneous ellipsoid; e.g. Landau & Lifshitz, *Mechanics*, section 32).

    Parameters
    ----------
    axes : array_like, shape (..., 3)
        Semi-axes (a, b, c), or axis ratios; only ratios matter.

    Returns
    -------
    i1_i3, i2_i3 : numpy.ndarray, shape (...)
    """
    ax = _axes(axes)
    a2, b2, c2 = ax[..., 0] ** 2, ax[..., 1] ** 2, ax[..., 2] ** 2
    if np.any(ax[..., 0] < ax[..., 1]) or np.any(ax[..., 1] < ax[..., 2]):
        raise GeometryError("ellipsoid axes must satisfy a >= b >= c (body axes 1, 2, 3 = long, intermediate, short)")
    i3 = a2 + b2
    return (b2 + c2) / i3, (a2 + c2) / i3


def axes_from_inertia_ratios(i1_i3, i2_i3):
    """Axes of the dynamically equivalent homogeneous ellipsoid, normalised to c = 1.

    ``a^2 : b^2 : c^2 = (I2 + I3 - I1) : (I1 + I3 - I2) : (I1 + I2 - I3)`` (the
    inverse of :func:`inertia_ratios_from_axes`). Requires
    ``I1 <= I2 <= I3`` and the triangle inequality ``I1 + I2 > I3``, without
    which no ellipsoid has these moments.

    Returns
    -------
    numpy.ndarray, shape (..., 3)
        (a/c, b/c, 1).
    """
    i1 = np.asarray(i1_i3, dtype=float)
    i2 = np.asarray(i2_i3, dtype=float)
    if np.any(~(np.isfinite(i1) & np.isfinite(i2))) or np.any(~((0 < i1) & (i1 <= i2) & (i2 <= 1))):
        raise GeometryError("inertia ratios must satisfy 0 < I1/I3 <= I2/I3 <= 1")
    c2 = i1 + i2 - 1.0
    if np.any(~(c2 > 0)):
        raise GeometryError("I1 + I2 must exceed I3 (triangle inequality) for an equivalent ellipsoid to exist")
    a2 = i2 + 1.0 - i1
    b2 = i1 + 1.0 - i2
    return np.stack([np.sqrt(a2 / c2), np.sqrt(b2 / c2), np.ones_like(c2)], axis=-1)
