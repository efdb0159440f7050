"""Light-curve models for the PA/NPA decision: shape-free Fourier models and physical ellipsoid models.

Two families live here (the decision logic is in :mod:`tumble.classify`):

1. **Shape-free linear models** (the evidence route). A principal-axis (PA)
   rotator of any convex or non-convex shape under slowly changing geometry
   produces a light curve that is periodic in one frequency ``f1`` with a
   harmonic content that drifts slowly; a non-principal-axis (NPA) rotator's
   light curve is two-periodic, its spectrum holding only ``n1 f_phi + n2 f_psi``
   (Kaasalainen 2001, A&A 376, 302). So

   - ``PA(H, d)``: harmonics ``j = 1..H`` of ``f1``; with ``d = 1`` every
     coefficient may drift across the data span as a polynomial of degree
     ``d`` in time (Legendre polynomials of the scaled time), to absorb the
     slow change of viewing and illumination geometry over a long campaign;
   - ``NPA(H, d, m)``: ``PA(H, d)`` plus the terms ``j f1 + k f2`` with
     ``k = 1..m`` and ``0 < |j| <= m`` of the two-dimensional Fourier series of
     Pravec et al. (2005, Icarus 173, 108); with ``pure_f2`` also the pure
     second-frequency terms ``k f2`` (``j = 0``), which complete the series. A
     real tumbler needs them whenever the basis pair is not (f_phi, f_psi)
     itself: Toutatis's light curve holds ``f_phi, 2 f_phi, 2 (f_phi + f_psi)``
     (Mueller et al. 2000; Hudson & Ostro 1995), which on the lattice basis
     ``f1 = f_phi + f_psi``, ``f2 = f_phi`` (``f2 < f1 / 2``, the admissible set
     of the evidence) are ``f2, 2 f2, 2 f1``. They are optional because with
     them a signal at ``f2`` alone (a slow trend, a blended star, or the
     dominant series itself) fits for any ``f1``, which the decision rules that
     test ``f1`` as the light-curve period must allow for first.

   Every Fourier coefficient has a zero-mean Gaussian prior whose width is
   ``kappa * sigma`` (``sigma`` shrinking with harmonic order), session
   zero-points and per-band phase-angle slopes have flat priors (the same in
   every model), and the common error scale ``kappa`` (the factor by which the
   quoted errors are wrong) has the scale-invariant prior ``p(kappa^2) ~ 1/kappa^2``.
   All of these enter linearly or as a scale, so the marginal likelihood at
   fixed frequencies is exact and closed form (conjugate normal-inverse-gamma
   linear regression; e.g. O'Hagan & Forster 2004, Kendall's Advanced Theory
   of Statistics 2B, section 11; Bishop 2006, Pattern Recognition and Machine
   Learning, section 3.5):

   ``ln p(y | f) = -1/2 ln|Sigma_F| - 1/2 ln|A| + ln Gamma(nu/2) - (nu/2) ln(pi Q)``

   with whitened data ``y/err``, the nuisance columns projected out,
   ``A = X^T X + Sigma_F^-1``, ``Q = y^T y - b^T A^-1 b``, ``b = X^T y`` and
   ``nu = n - q`` (``q`` nuisance columns). Constants common to all models are
   dropped. :func:`linear_log_evidence` is the fast batched kernel,
   :func:`linear_log_evidence_reference` a slow direct Gaussian integral
   used by the tests.

2. **Physical models** (the rotation state). :class:`PhysicalModel` maps the
   parameters of a PA, SAM or LAM rotator with a homogeneous triaxial
   ellipsoid shape (inertia tied to the shape, Landau & Lifshitz,
   *Mechanics*, section 32, or free of it as an option) and a scattering law
   from the registry :data:`tumble.brightness.SCATTERING_LAWS` (default
   Lommel-Seeliger, Muinonen & Lumme 2015, A&A 584, A23) to magnitudes,
   through the closed-form free rotation of
   :mod:`tumble.dynamics`. Session zero-points and per-band phase slopes are
   marginalised analytically per walker (flat priors: weighted least squares
   plus the log-determinant term); a jitter added in quadrature to the errors
   is sampled. A Student-t likelihood is optional (zero-points are then
   profiled at the Gaussian weighted-least-squares solution).

Units: times in days (TDB Julian dates), periods in hours, frequencies in
cycles per day inside the Fourier kernels, angles in degrees at the interface,
magnitudes in mag.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from tumble.exceptions import TumbleError

__all__ = [
    "ModelError",
    "DEFAULT_PHASE_DEG",
    "PHASE_SLOPE_MIN_RANGE_DEG",
    "ViewingGeometry",
    "viewing_geometry",
    "nuisance_design",
    "LinearData",
    "prepare_linear",
    "FourierBasis",
    "FourierVariant",
    "linear_log_evidence",
    "linear_log_evidence_reference",
    "fit_linear",
    "PhysicalModel",
]

#: Phase angle (deg) assumed for the fixed viewing geometry when the data give none.
DEFAULT_PHASE_DEG = 20.0
#: A band's sparse points get a linear phase-angle term when they span at least this range (deg).
PHASE_SLOPE_MIN_RANGE_DEG = 2.0
#: Box of the free inertia ratios I1/I3, I2/I3 (the triangle inequality cuts I1 + I2 < 1 out of it).
FREE_INERTIA_RANGE = (0.05, 1.0)
#: Smallest gap kept between I1 and I2 and between I2 and I3 (the closed form needs distinct moments).
FREE_INERTIA_GAP = 1e-3
#: Prior width (mag, times the error scale) of the first-harmonic Fourier coefficients.
COEFFICIENT_SIGMA_MAG = 0.2

HOURS_PER_DAY = 24.0


class ModelError(TumbleError, ValueError):
    """A light-curve model cannot be built or evaluated for these data or parameters."""


# ---------------------------------------------------------------------------
# viewing geometry and nuisance design
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ViewingGeometry:
    """Sun and observer directions used by the physical models.

    Attributes
    ----------
    sun_dir, obs_dir : numpy.ndarray, shape (n, 3)
        Unit vectors from the body towards the Sun and the observer, ecliptic J2000
        (or the fixed frame described in ``note``).
    phase_deg : numpy.ndarray, shape (n,)
        Solar phase angle, degrees.
    fixed : bool
        True when the directions were not in the data and a fixed geometry is assumed.
    note : str
        How the geometry was obtained.
    """

    sun_dir: np.ndarray
    obs_dir: np.ndarray
    phase_deg: np.ndarray
    fixed: bool
    note: str


def viewing_geometry(lc) -> ViewingGeometry:
    """Directions for the physical models: from the light curve, or a fixed stand-in.

    Without ``sun_dir``/``obs_dir`` the observer is put along +x and the Sun in
    the x-y plane at the median phase angle of the data (or
    :data:`DEFAULT_PHASE_DEG` when unknown), for every point. The spin
    direction fitted is then relative to that frame, not ecliptic.
    """
    n = lc.n_points
    if lc.sun_dir is not None and lc.obs_dir is not None:
        s = np.asarray(lc.sun_dir, float)
        o = np.asarray(lc.obs_dir, float)
        ph = np.degrees(np.arccos(np.clip(np.sum(s * o, axis=1), -1, 1)))
        return ViewingGeometry(s, o, ph, False, "Sun and observer directions from the data (ecliptic J2000)")
    if lc.phase_deg is not None:
        alpha = float(np.median(lc.phase_deg))
        note = (f"no Sun/observer directions in the data: fixed geometry, observer along +x, Sun at the "
                f"median phase angle {alpha:.1f} deg; spin direction is relative to that frame")
    else:
        alpha = DEFAULT_PHASE_DEG
        note = (f"no Sun/observer directions or phase angles in the data: fixed geometry, observer along +x, "
                f"Sun at an assumed phase angle of {alpha:.0f} deg; spin direction is relative to that frame")
    a = math.radians(alpha)
    obs = np.tile([1.0, 0.0, 0.0], (n, 1))
    sun = np.tile([math.cos(a), math.sin(a), 0.0], (n, 1))
    return ViewingGeometry(sun, obs, np.full(n, alpha), True, note)


def nuisance_design(lc, *, phase_slope: bool | None = None) -> tuple[np.ndarray, tuple[str, ...]]:
    """Columns of the linear nuisance model: zero-points and optional phase-angle slopes.

    - one zero-point per session (``session >= 0``);
    - one zero-point per band shared by the sparse points (``session == -1``);
    - with ``phase_slope`` (default: automatic), a linear phase-angle term
      (mag/deg, centred) per band for sparse points spanning at least
      :data:`PHASE_SLOPE_MIN_RANGE_DEG`, the linear part of the magnitude-phase
      relation (Bowell et al. 1989, Asteroids II, 524), and a curvature term
      (the part of ``-2.5 log10 Phi1(alpha)`` of the H,G system not linear in
      alpha), so that the non-linear phase curve of wide phase ranges is not
      left to the rotation models.

    Returns
    -------
    z : numpy.ndarray, shape (n, q)
    names : tuple of str
    """
    n = lc.n_points
    cols, names = [], []
    for s in np.unique(lc.session[lc.session >= 0]):
        cols.append((lc.session == s).astype(float))
        names.append(f"zp:session={int(s)}")
    sparse = lc.session < 0
    for b in sorted(set(lc.band[sparse].tolist())):
        m = sparse & (lc.band == b)
        cols.append(m.astype(float))
        names.append(f"zp:band={b}")
        if lc.phase_deg is not None and phase_slope is not False:
            ph = np.asarray(lc.phase_deg, float)[m]
            if phase_slope or np.ptp(ph) >= PHASE_SLOPE_MIN_RANGE_DEG:
                c = np.zeros(n)
                c[m] = ph - ph.mean()
                cols.append(c)
                names.append(f"phase:band={b}")
                # curvature of the phase curve: the magnitude of the H,G basis function Phi1
                # (Bowell et al. 1989); with the slope it spans the usual non-linear phase curves
                from tumble.phase_function import hg_basis

                c2 = np.zeros(n)
                g1 = -2.5 * np.log10(hg_basis(ph)[0])
                g1 = g1 - g1.mean()
                resid = g1 - np.polyval(np.polyfit(ph - ph.mean(), g1, 1), ph - ph.mean())
                if np.ptp(resid) > 1e-3:
                    c2[m] = resid
                    cols.append(c2)
                    names.append(f"phase-curvature:band={b}")
    if not cols:
        raise ModelError(f"{lc.object_id}: no points to model")
    return np.stack(cols, axis=1), tuple(names)


# ---------------------------------------------------------------------------
# linear (Fourier) models
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LinearData:
    """Whitened data with the nuisance columns projected out (input to the Fourier kernels).

    Attributes
    ----------
    t_d : numpy.ndarray, shape (n,)
        Times relative to the mid-time of the data, days.
    tau : numpy.ndarray, shape (n,)
        ``(t - t_mid) / (span/2)``, in [-1, 1]: the drift variable.
    sw : numpy.ndarray, shape (n,)
        Square-root weights ``1/err`` (times optional robust weights), mag^-1.
    qz : numpy.ndarray, shape (n, q)
        Orthonormal basis of the whitened nuisance columns.
    y_proj : numpy.ndarray, shape (n,)
        Whitened magnitudes with the nuisance fit removed.
    yy : float
        ``y_proj @ y_proj`` (chi-square of the nuisance-only model).
    n_points, n_nuisance : int
    t_mid_jd : float
        Reference epoch (TDB JD).
    span_d : float
        Time span, days.
    nuisance_names : tuple of str
    y, z : numpy.ndarray
        Magnitudes (reduced when distances are known) and raw nuisance columns.
    kappa_min : float
        Lower bound of the error scale ``kappa`` (0 = none); see :func:`prepare_linear`.
    """

    t_d: np.ndarray
    tau: np.ndarray
    sw: np.ndarray
    qz: np.ndarray
    y_proj: np.ndarray
    yy: float
    n_points: int
    n_nuisance: int
    t_mid_jd: float
    span_d: float
    nuisance_names: tuple
    y: np.ndarray
    z: np.ndarray
    kappa_min: float = 0.0

    @property
    def nu(self) -> int:
        """Degrees of freedom left after the nuisance fit, ``n - q``."""
        return self.n_points - self.n_nuisance


def prepare_linear(lc, *, weights=None, phase_slope: bool | None = None, error_floor_mag: float = 0.0,
                   kappa_min: float = 0.0) -> LinearData:
    """Whiten a light curve and project out its nuisance model (see :func:`nuisance_design`).

    Parameters
    ----------
    lc : LightCurve
    weights : array_like (n,), optional
        Extra multiplicative weights on ``1/err^2`` (e.g. robust weights), in (0, 1].
    error_floor_mag : float
        Model-error floor added in quadrature to the errors, mag (the shape-free models
        describe a real light curve only to about this level).
    kappa_min : float
        Lower bound of the error scale: the scale-invariant prior of ``kappa`` is truncated to
        ``kappa >= kappa_min``, so that no model is credited for fitting the data more closely than
        the (floor-inflated) errors allow. The marginal likelihood stays closed form (a regularised
        incomplete gamma function, see :func:`_log_scale_integral`). 0 = no bound.
    """
    y = np.asarray(lc.reduced_mag, float)
    z, names = nuisance_design(lc, phase_slope=phase_slope)
    sw = 1.0 / np.sqrt(np.asarray(lc.err, float) ** 2 + float(error_floor_mag) ** 2)
    if weights is not None:
        sw = sw * np.sqrt(np.asarray(weights, float))
    zw = z * sw[:, None]
    qz, r = np.linalg.qr(zw)
    keep = np.abs(np.diag(r)) > 1e-10 * max(1.0, np.abs(np.diag(r)).max())
    qz = qz[:, keep]
    yw = y * sw
    yp = yw - qz @ (qz.T @ yw)
    t = np.asarray(lc.t, float)
    t_mid = 0.5 * (t[0] + t[-1])
    span = float(t[-1] - t[0])
    if not span > 0:
        raise ModelError(f"{lc.object_id}: zero time span")
    nu = len(y) - qz.shape[1]
    if nu < 3:
        raise ModelError(f"{lc.object_id}: {len(y)} points leave {nu} degrees of freedom after the zero-points")
    return LinearData(t - t_mid, (t - t_mid) / (0.5 * span), sw, qz, yp, float(yp @ yp), len(y), int(qz.shape[1]),
                      float(t_mid), span, names, y, z, float(kappa_min))


@dataclass(frozen=True)
class FourierVariant:
    """One shape-free model: PA(H, d) or NPA(H, d, m).

    Attributes
    ----------
    n_harmonics : int
        Harmonics ``j = 1..H`` of ``f1``.
    drift : int
        Degree of the polynomial drift (in the scaled time ``tau``, Legendre
        polynomials ``P_1..P_d``) of every ``f1`` harmonic coefficient; 0 = none.
        ``True``/``False`` mean 1/0.
    combo_order : int
        ``m`` of the two-dimensional series (``0`` for PA): terms ``j f1 + k f2``,
        ``k = 1..m``, ``0 < |j| <= m``.
    pure_f2 : bool
        Also the pure second-frequency terms ``k f2`` (``j = 0``, ``k = 1..m``) of the series
        of Pravec et al. (2005), which a tumbler needs when the basis pair is not
        (f_phi, f_psi) itself (Toutatis, see the module notes). Off by default: with them the
        family fits a signal at ``f2`` alone for any ``f1``, so the decision rules that test
        ``f1`` as the light-curve period must first allow for that.
    """

    n_harmonics: int
    drift: int
    combo_order: int = 0
    pure_f2: bool = False

    def __post_init__(self):
        object.__setattr__(self, "drift", int(self.drift))
        object.__setattr__(self, "pure_f2", bool(self.pure_f2) and self.combo_order > 0)

    @property
    def label(self) -> str:
        base = f"H={self.n_harmonics}{f'+drift{self.drift}' if self.drift else ''}"
        if self.combo_order == 0:
            return base
        return f"{base}, 2-D order {self.combo_order}{' with k f2' if self.pure_f2 else ''}"


@dataclass(frozen=True, eq=False)
class FourierBasis:
    """The column layout shared by a family of nested Fourier variants.

    Columns (all of unit-free trigonometric functions, coefficients in mag):
    for ``j = 1..H_max``: ``cos, sin`` of ``2 pi j f1 t``, then (if any variant
    drifts) ``P_d(tau) cos, P_d(tau) sin`` for ``d = 1..max drift``; then the combination terms ordered by
    ``r = max(|j|, k)`` so that a combination order ``m`` selects a prefix.

    Attributes
    ----------
    max_harmonics : int
    drift : int
        Largest drift degree of the variants.
    max_combo : int
    variants : tuple of FourierVariant
    combos : numpy.ndarray of int, shape (n_combo, 2)
        ``(j, k)`` of each combination frequency.
    sigma : numpy.ndarray, shape (p,)
        Prior standard deviation of each coefficient (mag, times the error scale).
    columns : tuple of numpy.ndarray
        Column indices used by each variant.
    """

    max_harmonics: int
    drift: int
    max_combo: int
    variants: tuple
    combos: np.ndarray
    sigma: np.ndarray
    columns: tuple

    @classmethod
    def build(cls, variants, sigma_mag: float = COEFFICIENT_SIGMA_MAG) -> "FourierBasis":
        variants = tuple(variants)
        hmax = max(v.n_harmonics for v in variants)
        drift = max(v.drift for v in variants)
        mmax = max(v.combo_order for v in variants)
        any_pure = any(v.pure_f2 for v in variants)
        sig = []
        harm_cols = {}
        col = 0
        for j in range(1, hmax + 1):
            idx = [col, col + 1]
            sig += [sigma_mag / j] * 2
            col += 2
            didx = []
            for d in range(1, drift + 1):
                didx.append([col, col + 1])
                # degrees above 3 (long, geometry-changing spans) get a prior shrinking as 3/d
                sig += [0.5 * sigma_mag / j * min(1.0, 3.0 / d)] * 2
                col += 2
            harm_cols[j] = (idx, didx)
        combos = []
        for r in range(1, mmax + 1):
            for k in range(1, r + 1):
                for j in range(-r, r + 1):
                    if max(abs(j), k) == r and (j != 0 or any_pure):
                        combos.append((j, k))
        combo_start = col
        for j, k in combos:
            sig += [sigma_mag / (abs(j) + k)] * 2
        columns = []
        for v in variants:
            idx = []
            for j in range(1, v.n_harmonics + 1):
                idx += harm_cols[j][0]
                for dcols in harm_cols[j][1][:v.drift]:
                    idx += dcols
            for i, (j, k) in enumerate(combos):
                if max(abs(j), k) <= v.combo_order and (j != 0 or v.pure_f2):
                    idx += [combo_start + 2 * i, combo_start + 2 * i + 1]
            columns.append(np.array(idx, dtype=np.intp))
        return cls(hmax, drift, mmax, variants, np.array(combos, dtype=np.intp).reshape(-1, 2),
                   np.array(sig), tuple(columns))

    @property
    def n_columns(self) -> int:
        return int(len(self.sigma))

    def design(self, data: LinearData, f1, f2=None) -> np.ndarray:
        """Whitened design matrices for frequencies (cycles/day), shape ``(F, n, p)``.

        ``f1`` and ``f2`` broadcast to shape ``(F,)``; ``f2`` is needed when the
        basis has combination terms. The result is a transposed view of column-major storage
        (each column written contiguously: writing the columns of a row-major array strided was
        most of the design's time); :meth:`design_reference` is the slow reference.
        """
        f1 = np.atleast_1d(np.asarray(f1, float))
        if self.max_combo:
            if f2 is None:
                raise ModelError("a two-period basis needs f2")
            f1, f2 = np.broadcast_arrays(f1, np.atleast_1d(np.asarray(f2, float)))
        n_f = len(f1)
        t = data.t_d
        out = np.empty((n_f, self.n_columns, data.n_points))
        ph1 = 2 * np.pi * f1[:, None] * t[None, :]
        col = 0
        c1, s1 = np.cos(ph1), np.sin(ph1)
        # cos(j x), sin(j x) of f1 by the angle-addition recurrence, for the harmonics and the combinations
        n1 = max([self.max_harmonics] + [abs(int(j)) for j in self.combos[:, 0]])
        h1 = _harmonic_table(c1, s1, n1)
        legendre = legendre_drift(data.tau, self.drift)
        for j in range(1, self.max_harmonics + 1):
            cj, sj = h1[0][j], h1[1][j]
            out[:, col] = cj
            out[:, col + 1] = sj
            col += 2
            for poly in legendre:
                out[:, col] = cj * poly
                out[:, col + 1] = sj * poly
                col += 2
        if len(self.combos):
            # combinations by angle addition from the harmonics of f1 and f2 (each by the same
            # recurrence): no trigonometric call per combination column (was about half of the evidence)
            ph2 = 2 * np.pi * f2[:, None] * t[None, :]
            h2 = _harmonic_table(np.cos(ph2), np.sin(ph2), int(np.max(self.combos[:, 1])))
            for j, k in self.combos:
                cj, sj = h1[0][abs(j)], h1[1][abs(j)]
                ck, sk = h2[0][k], h2[1][k]
                if j >= 0:
                    np.subtract(cj * ck, sj * sk, out=out[:, col])
                    np.add(sj * ck, cj * sk, out=out[:, col + 1])
                else:  # cos(-x) = cos x, sin(-x) = -sin x
                    np.add(cj * ck, sj * sk, out=out[:, col])
                    np.subtract(cj * sk, sj * ck, out=out[:, col + 1])
                col += 2
        out *= data.sw[None, None, :]
        return out.transpose(0, 2, 1)

    def design_reference(self, data: LinearData, f1, f2=None) -> np.ndarray:
        """Slow reference of :meth:`design`: ``np.cos``/``np.sin`` of every column's own phase."""
        f1 = np.atleast_1d(np.asarray(f1, float))
        if self.max_combo:
            f1, f2 = np.broadcast_arrays(f1, np.atleast_1d(np.asarray(f2, float)))
        t = data.t_d
        legendre = legendre_drift(data.tau, self.drift)
        cols = []
        for j in range(1, self.max_harmonics + 1):
            ph = 2 * np.pi * j * f1[:, None] * t[None, :]
            c, s = np.cos(ph), np.sin(ph)
            cols += [c, s]
            for poly in legendre:
                cols += [c * poly, s * poly]
        for j, k in self.combos:
            ph = 2 * np.pi * (j * f1 + k * f2)[:, None] * t[None, :]
            cols += [np.cos(ph), np.sin(ph)]
        return np.stack(cols, axis=-1) * data.sw[None, :, None]


def _harmonic_table(c1, s1, n: int) -> tuple:
    """``cos(j x)``, ``sin(j x)`` for ``j = 0..n`` from ``cos x``, ``sin x`` (angle-addition recurrence)."""
    cos_j, sin_j = [np.ones_like(c1), c1], [np.zeros_like(s1), s1]
    for _ in range(2, n + 1):
        cos_j.append(cos_j[-1] * c1 - sin_j[-1] * s1)
        sin_j.append(sin_j[-1] * c1 + cos_j[-2] * s1)
    return cos_j[: n + 1], sin_j[: n + 1]


#: Largest Legendre degree of the coefficient drift.
MAX_DRIFT_DEGREE = 12


def legendre_drift(tau, degree: int) -> list:
    """Legendre polynomials ``P_1..P_degree`` of the scaled time ``tau`` (Bonnet's recurrence)."""
    if degree > MAX_DRIFT_DEGREE:
        raise ModelError(f"drift degree above {MAX_DRIFT_DEGREE} is not supported")
    out = []
    p_prev, p = np.ones_like(tau), tau
    for d in range(1, degree + 1):
        out.append(p)
        p_prev, p = p, ((2 * d + 1) * tau * p - d * p_prev) / (d + 1)
    return out


def _gram(data: LinearData, x: np.ndarray):
    """Projected Gram matrices and moments: ``G = X^T M X``, ``b = X^T M y`` (M projects out nuisance)."""
    g = np.matmul(np.swapaxes(x, 1, 2), x)
    zx = np.matmul(data.qz.T[None], x)  # (F, q, p)
    g -= np.matmul(np.swapaxes(zx, 1, 2), zx)
    b = np.matmul(np.swapaxes(x, 1, 2), data.y_proj[None, :, None])[..., 0]
    return g, b


def _log_lower_gamma_regularised(a: float, x):
    """``ln P(a, x)``, the log of the regularised lower incomplete gamma function, without underflow.

    ``scipy.special.gammainc`` where it is above 1e-280; below, the series
    ``P(a, x) = x^a e^-x / Gamma(a + 1) * sum_k x^k / ((a + 1) ... (a + k))``
    (Abramowitz & Stegun 1964, 6.5.29), which converges fast there (``x < a``).
    """
    x = np.asarray(x, float)
    p = special.gammainc(a, x)
    out = np.log(np.maximum(p, 1e-300))
    small = p < 1e-280
    if np.any(small):
        xs = x[small]
        term = np.ones_like(xs)
        total = np.ones_like(xs)
        for k in range(1, 400):
            term = term * xs / (a + k)
            total += term
            if np.all(term < 1e-17 * total):
                break
        out[small] = a * np.log(xs) - xs - special.gammaln(a + 1.0) + np.log(total)
    return out


def _log_scale_integral(q, nu, kappa_min: float):
    """``ln`` of the integral over the error scale: ``int (2 pi kappa^2)^(-nu/2) exp(-q / 2 kappa^2) 2 dkappa/kappa``.

    Over ``kappa > 0`` it is ``Gamma(nu/2) (pi q)^(-nu/2)``; truncated to ``kappa >= kappa_min`` it is
    that times ``P(nu/2, q / (2 kappa_min^2))`` (substitute ``s = q / 2 kappa^2``).
    """
    q = np.asarray(q, float)
    val = special.gammaln(0.5 * nu) - 0.5 * nu * np.log(np.pi * q)
    if kappa_min > 0:
        val = val + _log_lower_gamma_regularised(0.5 * nu, q / (2.0 * kappa_min**2))
    return val


def _evidence_from_gram(g, b, yy, nu, sigma, kappa_min: float = 0.0):
    """Closed-form marginal likelihood from projected moments (see the module notes), shape (F,)."""
    a = g + np.diag(1.0 / sigma**2)[None]
    try:
        chol = np.linalg.cholesky(a)
    except np.linalg.LinAlgError:
        jitter = 1e-9 * np.trace(a, axis1=1, axis2=2)[:, None, None] * np.eye(a.shape[1])[None]
        chol = np.linalg.cholesky(a + jitter)
    u = np.linalg.solve(chol, b[..., None])[..., 0]
    q = np.maximum(yy - np.sum(u * u, axis=1), 1e-300 * max(yy, 1.0))
    logdet = 2.0 * np.sum(np.log(np.diagonal(chol, axis1=1, axis2=2)), axis=1)
    return (-np.sum(np.log(sigma)) - 0.5 * logdet + _log_scale_integral(q, nu, kappa_min)), q


def linear_log_evidence(data: LinearData, basis: FourierBasis, f1, f2=None, *, chunk_elements: int = 4_000_000):
    """Exact log marginal likelihood of every variant of ``basis`` at each frequency (pair).

    Parameters
    ----------
    data : LinearData
    basis : FourierBasis
    f1, f2 : array_like, shape (F,)
        Frequencies, cycles per day.
    chunk_elements : int
        Bound on the size of the design batch held in memory.

    Returns
    -------
    numpy.ndarray, shape (F, n_variants)
        ``ln p(y | f1, f2, variant)`` up to a constant common to all variants
        and frequencies of the same data.
    """
    f1 = np.atleast_1d(np.asarray(f1, float))
    if f2 is not None:
        f1, f2 = np.broadcast_arrays(f1, np.atleast_1d(np.asarray(f2, float)))
    n_f = len(f1)
    out = np.empty((n_f, len(basis.variants)))
    step = max(1, chunk_elements // max(1, data.n_points * basis.n_columns))
    for i in range(0, n_f, step):
        sl = slice(i, i + step)
        x = basis.design(data, f1[sl], None if f2 is None else f2[sl])
        g, b = _gram(data, x)
        for v, cols in enumerate(basis.columns):
            if len(cols) == 0:
                out[sl, v] = _log_scale_integral(data.yy, data.nu, data.kappa_min)
                continue
            out[sl, v], _ = _evidence_from_gram(g[:, cols][:, :, cols], b[:, cols], data.yy, data.nu,
                                                basis.sigma[cols], data.kappa_min)
    return out


def linear_log_evidence_reference(y, err, z, x, sigma, n_kappa: int = 4000, kappa_min: float = 0.0) -> float:
    """Slow reference: the same marginal likelihood by brute force, for tests.

    Integrates the Gaussian likelihood over the coefficients by the textbook
    Gaussian-integral identity without any projection trick (the nuisance
    columns get a very wide Gaussian prior whose normalisation is removed), and
    over the error scale ``kappa`` by numerical quadrature on a log grid
    (``p(kappa^2) ~ 1/kappa^2``, i.e. uniform in ``ln kappa``). Includes the same
    constants as :func:`linear_log_evidence` (relative to the same data).

    Parameters
    ----------
    y, err : array_like (n,)
    z : array_like (n, q)
        Nuisance columns (flat prior).
    x : array_like (n, p)
        Unwhitened Fourier columns.
    sigma : array_like (p,)
        Prior standard deviations of the Fourier coefficients.
    kappa_min : float
        Lower end of the ``kappa`` quadrature (the truncated scale prior of :func:`prepare_linear`).
    """
    from scipy import integrate

    y = np.asarray(y, float)
    err = np.asarray(err, float)
    z = np.asarray(z, float)
    x = np.asarray(x, float)
    n, q = z.shape
    wide = 1e3  # wide enough for coefficients of order 1 mag; wider loses precision in the dense covariance
    full = np.hstack([z, x])
    s2 = np.concatenate([np.full(q, wide**2), np.asarray(sigma, float) ** 2])
    yw = y / err
    fw = full / err[:, None]

    def log_given_kappa(lk):
        k2 = np.exp(2 * lk)
        cov = k2 * (np.eye(n) + fw @ np.diag(s2) @ fw.T)
        sign, ld = np.linalg.slogdet(cov)
        quad = yw @ np.linalg.solve(cov, yw)
        val = -0.5 * (n * np.log(2 * np.pi) + ld + quad)
        # remove the wide-prior normalisation of the q flat columns: N(0, k^2 wide^2) -> flat in mag
        return val + q * np.log(wide * np.sqrt(2 * np.pi)) + q * lk

    grid = np.linspace(math.log(kappa_min) if kappa_min > 0 else -6.0, 6.0, n_kappa)
    vals = np.array([log_given_kappa(g) for g in grid])
    m = vals.max()
    # d(kappa^2)/kappa^2 = 2 d ln kappa
    integral = integrate.trapezoid(np.exp(vals - m), grid) * 2.0
    # the fast kernel drops the constant -1/2 ln det(Z^T W Z) (common to all models of the same data)
    zw = z / err[:, None]
    _, ldz = np.linalg.slogdet(zw.T @ zw)
    return float(m + np.log(integral) + 0.5 * ldz)


@dataclass(frozen=True, eq=False)
class LinearFit:
    """Posterior-mean fit of one Fourier variant at fixed frequencies.

    Attributes
    ----------
    model_mag : numpy.ndarray, shape (n,)
        Fourier part plus nuisance fit, mag (reduced magnitudes when distances are known).
    fourier_mag : numpy.ndarray, shape (n,)
        Fourier part alone, mag.
    kappa : float
        Posterior estimate of the error scale, ``sqrt(Q / nu)``.
    coefficients : numpy.ndarray, shape (p_v,)
        Posterior-mean Fourier coefficients, mag.
    """

    model_mag: np.ndarray
    fourier_mag: np.ndarray
    kappa: float
    coefficients: np.ndarray


def fit_linear(data: LinearData, basis: FourierBasis, variant_index: int, f1: float, f2: float | None = None) -> LinearFit:
    """Posterior-mean coefficients and fitted curve of one variant at fixed frequencies."""
    x = basis.design(data, [f1], None if f2 is None else [f2])[0]
    cols = basis.columns[variant_index]
    xs = x[:, cols]
    xp = xs - data.qz @ (data.qz.T @ xs)
    a = xp.T @ xp + np.diag(1.0 / basis.sigma[cols] ** 2)
    beta = np.linalg.solve(a, xp.T @ data.y_proj)
    resid = data.y_proj - xp @ beta
    q = float(resid @ resid + np.sum((beta / basis.sigma[cols]) ** 2))
    fourier_w = xs @ beta
    yw = data.y * data.sw
    nuis_w = data.qz @ (data.qz.T @ (yw - fourier_w))
    return LinearFit((fourier_w + nuis_w) / data.sw, fourier_w / data.sw, math.sqrt(q / data.nu), beta)


# ---------------------------------------------------------------------------
# physical models
# ---------------------------------------------------------------------------
def _ellipsoid_axes(ab, bc):
    """Axes (a, b, c) with c = 1 from the ratios a/b >= 1 and b/c >= 1."""
    b = np.asarray(bc, float)
    return np.stack([np.asarray(ab, float) * b, b, np.ones_like(b)], axis=-1)


def _inertia_from_ratios(ab, bc):
    """I1/I3, I2/I3 of the homogeneous ellipsoid (Landau & Lifshitz, Mechanics, section 32)."""
    ax = _ellipsoid_axes(ab, bc)
    a2, b2, c2 = ax[..., 0] ** 2, ax[..., 1] ** 2, ax[..., 2] ** 2
    return (b2 + c2) / (a2 + b2), (a2 + c2) / (a2 + b2)


def _space_class():
    """ParameterSpace whose ``log_prior`` also accepts a single (ndim,) vector.

    (Work-around: at the time of writing the inference module's vectorised prior
    assumed a leading walker axis.)
    """
    from tumble.inference import ParameterSpace

    class _Space(ParameterSpace):
        def log_prior(self, x):
            x = np.asarray(x, float)
            if x.ndim == 1:
                return np.asarray(super().log_prior(x[None]))[0]
            return super().log_prior(x)

    return _Space


class PhysicalModel:
    """Ellipsoid light-curve model of a PA, SAM or LAM rotator, vectorised over walkers.

    Parameters (vector order = :attr:`space` order; units in the names)
    ------------------------------------------------------------------
    PA:
        ``period_h`` (rotation period, h; log-uniform prior over ``period_range_h``),
        ``l_lon_rad`` (uniform, periodic), ``l_lat_rad`` (isotropic, cos b / 2),
        ``phase0_rad`` (uniform, periodic), ``a_over_b`` and ``b_over_c``
        (log-uniform 1-4 and 1-2.5), ``ln_jitter_mag`` (uniform in
        ln(1e-4)..ln(0.5) mag).
    SAM / LAM:
        ``p_psi_h`` (log-uniform over ``p_psi_range_h``), ``excitation_u``
        (uniform 0-1; I_d/I3 = 1 - u (1 - I2/I3) for SAM, I_d/I3 = I1/I3 + u (I2/I3 - I1/I3)
        for LAM; the separatrix and PA ends are cut by 1e-3), ``l_lon_rad``,
        ``l_lat_rad``, ``phi0_rad``, ``psi0_rad`` (uniform, periodic), ``a_over_b``,
        ``b_over_c``, ``ln_jitter_mag``. Inertia ratios are tied to the
        ellipsoid (homogeneous body); with ``free_inertia`` they are the two
        extra parameters ``i1_i3``, ``i2_i3`` (flat over
        :data:`FREE_INERTIA_RANGE`, cut to ``I1 < I2 < I3`` and
        ``I1 + I2 >= I3``), and the shape only sets the brightness (a body of
        non-uniform density, or one whose shape is not its dynamically
        equivalent ellipsoid). ``P_phi`` follows from the state
        (closed form of :func:`tumble.dynamics.periods_unit_momentum`).

    Other options: ``law`` (a name of :data:`tumble.brightness.SCATTERING_LAWS` or a
    :class:`tumble.brightness.ScatteringLaw`; default ``lommel-seeliger``, closed form) and
    ``lambert_weight`` (the ``c`` of ``ls-lambert``). A law with a Lambert part is evaluated
    by quadrature (24 x 24 nodes per point) and makes each likelihood call about 20 times
    slower than the closed form (32 walkers x 300 points: 0.63 s against 0.028 s, measured
    side by side on a shared 2-core machine).

    The likelihood marginalises the nuisance zero-points and phase slopes
    (flat priors) for each walker: Gaussian with ``sigma^2 = err^2 + jitter^2``,
    or Student-t with ``nu_t`` degrees of freedom when ``student_t`` is set.

    Calling the model with ``(K, ndim)`` parameter vectors returns ``(K,)``
    log-likelihoods (as :func:`tumble.inference.sample_posterior` needs).
    """

    def __init__(self, lc, mode: str, *, period_range_h=(0.5, 2000.0), p_psi_range_h=None,
                 student_t: bool = False, nu_t: float = 4.0, geometry: ViewingGeometry | None = None,
                 epoch_jd: float | None = None, law="lommel-seeliger", lambert_weight: float | None = None,
                 free_inertia: bool = False):
        from tumble.brightness import scattering_law
        from tumble.inference import IsotropicLatitude, LogUniform, Parameter, PeriodicUniform, Uniform

        mode = str(mode).upper()
        if mode not in ("PA", "SAM", "LAM"):
            raise ModelError(f"mode must be PA, SAM or LAM, not {mode!r}")
        self.mode = mode
        try:
            self.law = scattering_law(law, lambert_weight)
        except TumbleError as exc:
            raise ModelError(str(exc)) from None
        self.free_inertia = bool(free_inertia) and mode != "PA"
        self.geometry = geometry or viewing_geometry(lc)
        self.t = np.asarray(lc.t, float)
        self.epoch_jd = float(epoch_jd if epoch_jd is not None else 0.5 * (self.t[0] + self.t[-1]))
        self.y = np.asarray(lc.reduced_mag, float)
        self.err = np.asarray(lc.err, float)
        self.z, self.nuisance_names = nuisance_design(lc)
        # every point in exactly one zero-point column and nothing else: the nuisance fit is diagonal
        self._indicator_nuisance = bool(np.all((self.z == 0.0) | (self.z == 1.0)) and np.all(self.z.sum(axis=1) == 1.0))
        self.student_t = bool(student_t)
        self.nu_t = float(nu_t)
        self._vectors = np.stack([self.geometry.sun_dir, self.geometry.obs_dir])[:, None]  # (2, 1, n, 3)
        lo, hi = period_range_h
        common_tail = [
            Parameter("a_over_b", LogUniform(1.0, 4.0), "", "long/intermediate axis ratio"),
            Parameter("b_over_c", LogUniform(1.0, 2.5), "", "intermediate/short axis ratio"),
            Parameter("ln_jitter_mag", Uniform(math.log(1e-4), math.log(0.5)), "ln mag", "extra scatter"),
        ]
        if mode == "PA":
            params = [
                Parameter("period_h", LogUniform(lo, hi), "h", "rotation period"),
                Parameter("l_lon_rad", PeriodicUniform(), "rad", "spin longitude"),
                Parameter("l_lat_rad", IsotropicLatitude(), "rad", "spin latitude"),
                Parameter("phase0_rad", PeriodicUniform(), "rad", "rotation phase at the epoch"),
            ]
        else:
            plo, phi = p_psi_range_h or period_range_h
            params = [
                Parameter("p_psi_h", LogUniform(plo, phi), "h", "rotation period P_psi"),
                Parameter("excitation_u", Uniform(1e-3, 1.0 - 1e-3), "", "position of I_d between its limits"),
                Parameter("l_lon_rad", PeriodicUniform(), "rad", "angular-momentum longitude"),
                Parameter("l_lat_rad", IsotropicLatitude(), "rad", "angular-momentum latitude"),
                Parameter("phi0_rad", PeriodicUniform(), "rad", "Euler angle phi at the epoch"),
                Parameter("psi0_rad", PeriodicUniform(), "rad", "Euler angle psi at the epoch"),
            ]
            if self.free_inertia:
                params += [
                    Parameter("i1_i3", Uniform(*FREE_INERTIA_RANGE), "", "inertia ratio I1/I3 (free of the shape)"),
                    Parameter("i2_i3", Uniform(*FREE_INERTIA_RANGE), "", "inertia ratio I2/I3 (free of the shape)"),
                ]
        self.space = _space_class()(params + common_tail)

    # -- parameters -> state arrays --------------------------------------------

    @property
    def attitude_parameters(self) -> tuple:
        """Names of the spin (PA) or angular-momentum (NPA) longitude, latitude and the phase about it.

        Together they are one rotation of the body (sampled as such by
        :class:`tumble.inference.local.AttitudeChart`).
        """
        return ("l_lon_rad", "l_lat_rad", "phase0_rad" if self.mode == "PA" else "phi0_rad")

    def log_period_ratio(self, x) -> np.ndarray:
        """``ln(P_phi / P_psi)`` of ``(K, ndim)`` vectors, shape ``(K,)`` (0 for PA); ``nan`` for an invalid state.

        Fast kernel (:func:`tumble.dynamics.period_ratio_unit_momentum` on the admissible rows; the
        sampler's implicit chart calls it several times per likelihood call);
        :meth:`log_period_ratio_reference` is the validated slow route.
        """
        from tumble.dynamics import period_ratio_unit_momentum

        x = np.atleast_2d(np.asarray(x, float))
        if self.mode == "PA":
            return np.zeros(len(x))
        i1, i2, idd = self._inertia(x)
        ok = self._ratio_admissible(i1, i2, idd)
        out = np.full(len(x), np.nan)
        if ok.all():
            return np.log(period_ratio_unit_momentum(i1, i2, idd))
        if ok.any():
            out[ok] = np.log(period_ratio_unit_momentum(i1[ok], i2[ok], idd[ok]))
        return out

    def log_period_ratio_reference(self, x) -> np.ndarray:
        """Slow reference of :meth:`log_period_ratio`: the validated periods of
        :func:`tumble.dynamics.periods_unit_momentum` from the full state arrays."""
        from tumble.dynamics import periods_unit_momentum

        x = np.atleast_2d(np.asarray(x, float))
        if self.mode == "PA":
            return np.zeros(len(x))
        args, _ = self.state_arrays(x)
        i1, i2, idd = (np.asarray(a, float) for a in args[:3])
        ok = self._ratio_admissible(i1, i2, idd)
        out = np.full(len(x), np.nan)
        if ok.any():
            try:
                pp, pf = periods_unit_momentum(i1[ok], i2[ok], idd[ok])
            except TumbleError:
                return out
            out[ok] = np.log(np.asarray(pf) / np.asarray(pp))
        return out

    @staticmethod
    def _ratio_admissible(i1, i2, idd) -> np.ndarray:
        """NPA states whose period ratio is defined: a rigid body's inertia (``I1 + I2 >= I3``, which only a
        free-inertia state can miss) away from the separatrix by more than round-off. Row by row: one
        inadmissible walker does not void its batch."""
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(i1 + i2 + idd) & (i1 > 0) & (i1 <= i2) & (i2 < 1.0) & (idd < 1.0) & (idd > i1)
            ok &= (np.abs(idd - i2) > 1e-9) & (i1 + i2 >= 1.0 - 1e-12)
        return ok

    def _inertia(self, x):
        """``(I1/I3, I2/I3, I_d/I3)`` of ``(K, ndim)`` NPA vectors (the inertia part of :meth:`state_arrays`)."""
        sp = self.space
        if self.free_inertia:
            i1, i2 = x[:, sp.index("i1_i3")], x[:, sp.index("i2_i3")]
        else:
            i1, i2 = _inertia_from_ratios(x[:, sp.index("a_over_b")], x[:, sp.index("b_over_c")])
        u = x[:, sp.index("excitation_u")]
        idd = 1.0 - u * (1.0 - i2) if self.mode == "SAM" else i1 + u * (i2 - i1)
        return i1, i2, idd

    def sampling_chart(self, x_opt):
        """Coordinates in which the posterior of the mode at ``x_opt`` is nearly Gaussian.

        The attitude (spin or angular-momentum direction with the phase about it) as a rotation
        vector about the optimum's (:class:`tumble.inference.local.AttitudeChart`); for SAM and LAM
        also ``ln(P_phi/P_psi)`` in place of ``excitation_u``
        (:class:`tumble.inference.local.ImplicitChart`): the data pin both periods, and the ratio is
        a curved function of the excitation and the shape. Measured on a dense SAM of the
        calibration library: a draw one Laplace sigma from the optimum lost 113 nats of
        log-likelihood against 4 expected in the model's own parameters, 28 with the attitude chart,
        5.3 with both.
        """
        from tumble.inference.local import AttitudeChart, ChartChain, ImplicitChart

        if self.mode == "PA":
            return AttitudeChart(self.space, x_opt, *self.attitude_parameters)
        ratio = ImplicitChart(self.space, x_opt, "excitation_u", self.log_period_ratio, "ln_period_ratio", "",
                              "ln(P_phi/P_psi)")
        z_opt = ratio.from_model(np.asarray(x_opt, float)[None])[0]
        return ChartChain([ratio, AttitudeChart(ratio.space, z_opt, *self.attitude_parameters)])

    def state_arrays(self, x):
        """Arguments of :func:`tumble.dynamics.ecliptic_to_body` and the axes for ``(K, ndim)`` vectors."""
        x = np.atleast_2d(np.asarray(x, float))
        sp = self.space
        axes = _ellipsoid_axes(x[:, sp.index("a_over_b")], x[:, sp.index("b_over_c")])
        lon = np.degrees(x[:, sp.index("l_lon_rad")])
        lat = np.degrees(x[:, sp.index("l_lat_rad")])
        if self.mode == "PA":
            k = len(x)
            args = (np.ones(k), np.ones(k), np.ones(k), x[:, sp.index("period_h")], lon, lat,
                    np.degrees(x[:, sp.index("phase0_rad")]), np.zeros(k), self.epoch_jd)
        else:
            i1, i2, idd = self._inertia(x)
            args = (i1, i2, idd, x[:, sp.index("p_psi_h")], lon, lat, np.degrees(x[:, sp.index("phi0_rad")]),
                    np.degrees(x[:, sp.index("psi0_rad")]), self.epoch_jd)
        return args, axes

    def rotation_states(self, x):
        """:class:`tumble.dynamics.RotationState` of each parameter vector."""
        from tumble.dynamics import RotationState

        args, _ = self.state_arrays(x)
        k = len(np.atleast_2d(x))
        out = []
        for i in range(k):
            vals = [float(np.broadcast_to(a, (k,))[i]) for a in args]
            out.append(RotationState(*vals))
        return out

    def inertia_admissible(self, x) -> np.ndarray:
        """Free inertia: ``I1 <= I2 <= I3`` and the triangle inequality ``I1 + I2 >= I3`` (a real body), shape (K,).

        With the free-inertia option the ratios are drawn from a box and these conditions
        cut it (flat prior on the admissible region); tied to the shape they always hold.
        The mode's own range of the dynamic inertia follows from ``excitation_u``.
        """
        x = np.atleast_2d(np.asarray(x, float))
        if not self.free_inertia:
            return np.ones(len(x), bool)
        i1, i2 = x[:, self.space.index("i1_i3")], x[:, self.space.index("i2_i3")]
        return (i1 + FREE_INERTIA_GAP <= i2) & (i2 <= 1.0 - FREE_INERTIA_GAP) & (i1 + i2 >= 1.0)

    def shape_magnitudes(self, x, t=None, vectors=None, invalid: str = "raise"):
        """Model magnitudes without nuisance terms, ``-2.5 log10 I``, shape ``(K, n)``; ``I`` from :attr:`law`.

        ``invalid`` as in :func:`tumble.dynamics.ecliptic_to_body`: ``"raise"`` for a batch holding a
        state the closed form refuses (e.g. within its tolerance of the separatrix), ``"nan"`` for
        ``nan`` magnitudes on that state's row only (the sampler's likelihood: one walker, or one
        ensemble of a shared call, does not void the others).
        """
        from tumble.dynamics import ecliptic_to_body

        args, axes = self.state_arrays(x)
        t = self.t if t is None else t
        v = self._vectors if vectors is None else vectors
        body = ecliptic_to_body(*args, t, v, invalid=invalid)  # (2, K, n, 3)
        with np.errstate(divide="ignore", invalid="ignore"):
            flux = self.law.brightness(body[0], body[1], axes[:, None, :])
            return -2.5 * np.log10(np.maximum(flux, 1e-300))

    def shape_magnitudes_reference(self, x):
        """Slow reference of :meth:`shape_magnitudes`: the attitude by special functions at every point
        (``method="direct"`` of :func:`tumble.dynamics.ecliptic_to_body`) instead of its Fourier series."""
        from tumble.dynamics import ecliptic_to_body

        args, axes = self.state_arrays(x)
        body = ecliptic_to_body(*args, self.t, self._vectors, method="direct")
        flux = self.law.brightness(body[0], body[1], axes[:, None, :])
        with np.errstate(divide="ignore"):
            return -2.5 * np.log10(np.maximum(flux, 1e-300))

    def _profiled(self, x, invalid: str = "raise"):
        """Residuals after the weighted least-squares nuisance fit, per walker (fast kernel).

        Returns ``(resid (K, n), var (K, n), a (K, q, q), m (K, n), coef (K, q))``, ``a`` the
        weighted normal matrix ``Z^T W Z``. When every point belongs to exactly one zero-point
        column and there are no other nuisance columns (dense sessions), ``a`` is diagonal and
        the fit is a weighted mean per session (two matrix products); otherwise batched matrix
        products. :meth:`_profiled_reference` is the plain per-walker computation. ``invalid`` as
        in :meth:`shape_magnitudes` (``"nan"``: a state the closed form refuses gets NaN rows only).
        """
        m = self.shape_magnitudes(x, invalid=invalid)
        return self._profile_magnitudes(m, np.exp(x[:, self.space.index("ln_jitter_mag")]))

    def _profile_magnitudes(self, m, jit):
        """:meth:`_profiled` from the shape magnitudes ``m`` (K, n) and the jitters ``jit`` (K,), mag."""
        var = self.err[None, :] ** 2 + jit[:, None] ** 2
        w = 1.0 / var
        r = self.y[None, :] - m
        if self._indicator_nuisance:
            diag = w @ self.z  # (K, q)
            coef = ((w * r) @ self.z) / diag
            a = diag[:, :, None] * np.eye(self.z.shape[1])[None]
        else:
            zt_w = self.z.T[None, :, :] * w[:, None, :]  # (K, q, n)
            a = zt_w @ self.z
            rhs = (zt_w @ r[..., None])[..., 0]
            try:
                coef = np.linalg.solve(a, rhs[..., None])[..., 0]
            except np.linalg.LinAlgError:
                coef = np.linalg.lstsq(a[0], rhs[0], rcond=None)[0][None].repeat(len(a), 0)
        resid = r - coef @ self.z.T
        return resid, var, a, m, coef

    def _profiled_reference(self, x):
        """Slow reference of :meth:`_profiled`: one weighted least-squares solve per walker."""
        m = self.shape_magnitudes(x)
        jit = np.exp(x[:, self.space.index("ln_jitter_mag")])
        var = self.err[None, :] ** 2 + jit[:, None] ** 2
        r = self.y[None, :] - m
        resid, a_all, coef_all = np.empty_like(r), [], []
        for k in range(len(x)):
            zw = self.z / var[k][:, None]
            a = self.z.T @ zw
            coef = np.linalg.solve(a, zw.T @ r[k])
            resid[k] = r[k] - self.z @ coef
            a_all.append(a)
            coef_all.append(coef)
        return resid, var, np.array(a_all), m, np.array(coef_all)

    def __call__(self, x):
        x = np.atleast_2d(np.asarray(x, float))
        good = self.inertia_admissible(x)
        if not np.all(good):
            out = np.full(len(x), -np.inf)
            if np.any(good):
                out[good] = self(x[good])
            return out
        try:
            resid, var, a, _, _ = self._profiled(x)
        except TumbleError:
            return np.full(len(x), -np.inf)
        return self._log_likelihood_profiled(resid, var, a)

    def _log_likelihood_profiled(self, resid, var, a) -> np.ndarray:
        """The marginal log-likelihood (K,) from :meth:`_profiled`'s residuals, variances and normal matrices."""
        if self.student_t:
            nu = self.nu_t
            ll = (special.gammaln(0.5 * (nu + 1)) - special.gammaln(0.5 * nu) - 0.5 * np.log(nu * np.pi * var)
                  - 0.5 * (nu + 1) * np.log1p(resid**2 / (nu * var))).sum(axis=1)
            return np.where(np.isfinite(ll), ll, -np.inf)
        chi2 = np.sum(resid**2 / var, axis=1)
        if self._indicator_nuisance:
            logdet_a = np.sum(np.log(np.diagonal(a, axis1=1, axis2=2)), axis=1)
        else:
            _, logdet_a = np.linalg.slogdet(a)
        q = self.z.shape[1]
        ll = -0.5 * chi2 - 0.5 * np.sum(np.log(2 * np.pi * var), axis=1) - 0.5 * logdet_a + 0.5 * q * np.log(2 * np.pi)
        return np.where(np.isfinite(ll), ll, -np.inf)

    def jitter_log_likelihood(self, x, ln_jitter_mag) -> np.ndarray:
        """Log-likelihood of each state ``x`` (K, ndim) at each jitter of ``ln_jitter_mag`` (G,), shape (K, G).

        The shape magnitudes do not depend on the jitter, so they are computed once per state and only
        the nuisance fit and the likelihood are repeated per jitter (the optimiser's final jitter grid;
        a G-fold cheaper model call). A state the closed form refuses gets ``-inf`` on its row only.
        :meth:`jitter_log_likelihood_reference` calls the model on every (state, jitter) vector.
        """
        x = np.atleast_2d(np.asarray(x, float))
        grid = np.asarray(ln_jitter_mag, float).ravel()
        out = np.full((len(x), len(grid)), -np.inf)
        good = self.inertia_admissible(x)
        if not np.any(good):
            return out
        m = self.shape_magnitudes(x[good], invalid="nan")
        k, g = len(m), len(grid)
        resid, var, a, _, _ = self._profile_magnitudes(np.repeat(m, g, axis=0), np.tile(np.exp(grid), k))
        with np.errstate(invalid="ignore"):
            ll = self._log_likelihood_profiled(resid, var, a).reshape(k, g)
        out[good] = np.where(np.isfinite(ll), ll, -np.inf)
        return out

    def jitter_log_likelihood_reference(self, x, ln_jitter_mag) -> np.ndarray:
        """Slow reference of :meth:`jitter_log_likelihood`: one model call per state on its jitter grid."""
        x = np.atleast_2d(np.asarray(x, float))
        grid = np.asarray(ln_jitter_mag, float).ravel()
        k = self.space.index("ln_jitter_mag")
        out = np.empty((len(x), len(grid)))
        for i, xi in enumerate(x):
            xs = np.repeat(xi[None], len(grid), axis=0)
            xs[:, k] = grid
            out[i] = self(xs)
        return out

    def predict(self, x):
        """Best-fit magnitudes (shape part plus the fitted nuisance terms), shape ``(K, n)``."""
        x = np.atleast_2d(np.asarray(x, float))
        _, _, _, m, coef = self._profiled(x)
        return m + coef @ self.z.T

    def derived(self, x) -> dict:
        """Derived quantities per vector: ``p_psi_h``, ``p_phi_h``, ``excitation`` (E/E0), ``i1_i3``, ``i2_i3``."""
        from tumble.dynamics import periods_unit_momentum

        args, _ = self.state_arrays(x)
        i1, i2, idd, p_psi = (np.asarray(a, float) for a in args[:4])
        if self.mode == "PA":
            return {"p_psi_h": p_psi, "p_phi_h": p_psi, "excitation": np.ones_like(p_psi),
                    "i1_i3": i1, "i2_i3": i2}
        pp, pf = periods_unit_momentum(i1, i2, idd)
        return {"p_psi_h": p_psi, "p_phi_h": p_psi * np.asarray(pf) / np.asarray(pp), "excitation": 1.0 / idd,
                "i1_i3": i1, "i2_i3": i2}
