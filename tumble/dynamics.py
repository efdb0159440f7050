"""Torque-free rigid-body rotation in closed form: PA, SAM and LAM.

Conventions (see ``docs/methods-rotation.md``)
----------------------------------------------
- Body principal axes: **1 = long axis** (smallest moment I1), **2 =
  intermediate**, **3 = short axis** (largest moment I3). Inertia enters only
  through the ratios ``i1_i3 = I1/I3 <= i2_i3 = I2/I3 <= 1``.
- Dynamic inertia ``I_d = L**2 / (2 E)`` with ``I1 <= I_d <= I3``; the
  excitation is ``E/E0 = I3/I_d`` (E0 = energy of principal-axis rotation with
  the same angular momentum).
- Modes: **PA** when ``id_i3 == 1`` (uniform spin about axis 3); **SAM**
  (short-axis mode) when ``I2 < I_d < I3``; **LAM** (long-axis mode) when
  ``I1 < I_d < I2``. The separatrix ``I_d = I2`` is refused
  (:class:`SeparatrixError`) closer than :data:`SEPARATRIX_TOLERANCE`.
- Inertial "L frame": Z along the angular momentum L. 3-1-3 Euler angles,
  ``R_L = Rz(phi) Rx(theta) Rz(psi) P`` maps body coordinates to the L frame;
  ``P = I`` for SAM (reference axis 3) and
  ``P = [[0,1,0],[0,0,1],[1,0,0]]`` for LAM (reference axis 1), the
  short-axis / long-axis referral of Kaasalainen (2001, A&A 376, 302).
- L frame to ecliptic J2000: ``Q = Rz(lon_L) Ry(90 deg - lat_L)``, so that
  ``Q e_z`` is the angular-momentum direction and ``Q e_x`` lies in the plane
  through L and the ecliptic pole, pointing away from the pole. The full
  body-to-ecliptic matrix is ``R = Q R_L``: a body vector maps to the ecliptic
  as ``R @ v_body``, an ecliptic vector to the body as ``R.T @ v``.
- Times are TDB Julian dates (days); periods are in hours at the interface.
- ``phi0_deg`` and ``psi0_deg`` are the Euler angles phi and psi at
  ``epoch_jd``. For PA, ``phi0_deg`` is the rotation phase at the epoch and
  ``psi0_deg`` is ignored.

Closed forms
------------
Angular velocity with Jacobi elliptic functions (Landau & Lifshitz 1976,
Mechanics, section 37), written with I_d; Euler angles and the precession
angle through the incomplete elliptic integral of the third kind
(Kaasalainen 2001; Samarasinha & A'Hearn 1991, Icarus 93, 194), the latter
evaluated with Carlson's symmetric integrals R_F and R_J (Carlson 1995, Numer.
Algorithms 10, 13; DLMF 19.25). scipy's ``ellipj`` and ``elliprf``/``elliprj``
are the library functions.

Two evaluation routes share these formulas:

- ``method="direct"``: special functions at every point (the reference for the
  fast route).
- ``method="fourier"``: the attitude is ``R(t) = Q Rz(phi_mean(t)) B(x)``
  where ``phi_mean`` is linear in time and ``B`` is a rotation matrix that is
  periodic in the psi phase ``x = 2 pi (t - t0)/P_psi``. ``B`` is analytic in
  the strip ``|Im x| < pi K'/(2K)`` (Euler's equations are linear in R with
  coefficients whose nearest poles lie at ``u = i K'``), so its Fourier
  coefficients fall like ``q**(j/2)`` with the nome ``q = exp(-pi K'/K)``.
  The coefficients are obtained per state from ``H + 1`` direct samples over
  half a period (the other half follows by symmetry) and one FFT; evaluating
  them per point costs one cos/sin pair, a Chebyshev recurrence in ``cos 2x``
  and one small matrix product instead of per-point elliptic functions. States
  whose nome needs more than :data:`MAX_HARMONICS` harmonics fall back to the
  direct route.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from tumble.exceptions import TumbleError

__all__ = [
    "SEPARATRIX_TOLERANCE",
    "MAX_HARMONICS",
    "RotationStateError",
    "SeparatrixError",
    "RotationState",
    "LightcurveFrequencies",
    "periods_unit_momentum",
    "period_ratio_unit_momentum",
    "dynamic_inertia_from_periods",
    "batch_arguments",
    "attitude_matrices",
    "ecliptic_to_body",
    "angular_velocity_body",
    "momentum_to_ecliptic_matrix",
    "carlson_pi_incomplete",
    "carlson_pi_complete",
]

#: Closest approach of I_d/I3 to I2/I3 that is accepted (absolute, in units of I3).
SEPARATRIX_TOLERANCE = 1e-6
#: Largest number of Fourier harmonics used by the fast route before falling back.
MAX_HARMONICS = 96
#: Target size of the neglected Fourier tail (relative to the unit matrix entries).
_FOURIER_TAIL = 1e-15

_MODE_PA, _MODE_SAM, _MODE_LAM = 0, 1, 2
_MODE_NAMES = {_MODE_PA: "PA", _MODE_SAM: "SAM", _MODE_LAM: "LAM"}
_TWO_PI = 2.0 * math.pi
_HOURS_PER_DAY = 24.0


class RotationStateError(TumbleError, ValueError):
    """Rotation-state parameters that describe no physical free rotation."""


class SeparatrixError(RotationStateError):
    """I_d is within :data:`SEPARATRIX_TOLERANCE` of I2 (the SAM/LAM separatrix).

    There the elliptic parameter tends to 1, the periods diverge and the closed
    form loses accuracy; the state is refused rather than evaluated badly.
    """


# ---------------------------------------------------------------------------
# Carlson forms of the elliptic integral of the third kind
# ---------------------------------------------------------------------------


def carlson_pi_complete(n, m):
    """Complete elliptic integral of the third kind via Carlson's R_F and R_J.

    ``Pi(n|m) = R_F(0, 1-m, 1) + (n/3) R_J(0, 1-m, 1, 1-n)``
    (Carlson 1995, Numer. Algorithms 10, 13; DLMF 19.25.2), with the convention
    ``Pi(n|m) = int_0^{pi/2} dt / ((1 - n sin^2 t) sqrt(1 - m sin^2 t))``.

    Parameters
    ----------
    n : array_like
        Characteristic, ``n < 1`` (here always ``n <= 0``).
    m : array_like
        Parameter ``m = k**2``, ``0 <= m < 1``.
    """
    n = np.asarray(n, dtype=float)
    m = np.asarray(m, dtype=float)
    zero = np.zeros(np.broadcast(n, m).shape)
    return special.elliprf(zero, 1.0 - m, 1.0) + n / 3.0 * special.elliprj(zero, 1.0 - m, 1.0, 1.0 - n)


def carlson_pi_incomplete(n, amplitude, m):
    """Incomplete elliptic integral of the third kind ``Pi(n; amplitude|m)``.

    For ``|amplitude| <= pi/2``, with ``s = sin``, ``c = cos`` of the amplitude,
    ``Pi = s R_F(c^2, 1 - m s^2, 1) + (n/3) s^3 R_J(c^2, 1 - m s^2, 1, 1 - n s^2)``
    (DLMF 19.25.14); larger amplitudes use
    ``Pi(n; a + j pi|m) = Pi(n; a|m) + 2 j Pi(n|m)`` with ``j = round(a/pi)``.

    Parameters
    ----------
    n : array_like
        Characteristic, ``n <= 0``.
    amplitude : array_like
        Amplitude in radians, any real value.
    m : array_like
        Parameter ``m = k**2``, ``0 <= m < 1``.
    """
    n, amplitude, m = np.broadcast_arrays(
        np.asarray(n, dtype=float), np.asarray(amplitude, dtype=float), np.asarray(m, dtype=float)
    )
    j = np.round(amplitude / math.pi)
    a = amplitude - j * math.pi
    s = np.sin(a)
    c = np.cos(a)
    d2 = 1.0 - m * s * s
    part = s * special.elliprf(c * c, d2, 1.0) + n / 3.0 * s**3 * special.elliprj(c * c, d2, 1.0, 1.0 - n * s * s)
    if np.any(j != 0):
        part = part + 2.0 * j * carlson_pi_complete(n, m)
    return part


# ---------------------------------------------------------------------------
# Per-state constants (vectorised over a batch of states)
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Constants:
    """Per-state constants of the closed form, arrays of shape (K,).

    Units: I3 = 1 and L = 1 ("unit momentum"), so time is in units of I3/L;
    ``scale_h`` converts that unit to hours for the actual state.
    """

    mode: np.ndarray  # int codes _MODE_*
    m: np.ndarray  # elliptic parameter
    kk: np.ndarray  # K(m)
    lam: np.ndarray  # lambda at unit momentum
    n: np.ndarray  # characteristic of Pi
    pi_c: np.ndarray  # Pi(n|m)
    c_phi: np.ndarray  # coefficient of Pi in phi(t)
    amp: np.ndarray  # (K, 3) amplitudes of I_i omega_i / L (of cn/sn/dn per mode)
    p_psi_unit: np.ndarray  # P_psi at unit momentum
    p_phi_unit: np.ndarray  # mean P_phi at unit momentum
    nome: np.ndarray  # q = exp(-pi K'/K)


def _mode_codes(i1, i2, idd):
    mode = np.where(idd >= 1.0, _MODE_PA, np.where(idd > i2, _MODE_SAM, _MODE_LAM))
    return mode.astype(np.int8)


def _check_inertia(i1, i2, idd):
    """Raise for unphysical or unsupported inertia; arrays of equal shape."""
    finite = np.isfinite(i1) & np.isfinite(i2) & np.isfinite(idd)
    if not np.all(finite):
        raise RotationStateError("inertia ratios must be finite numbers")
    if np.any(i1 <= 0) or np.any(i1 > i2) or np.any(i2 > 1.0):
        raise RotationStateError("inertia ratios must satisfy 0 < I1/I3 <= I2/I3 <= 1")
    # Triangle inequality of principal moments, I1 + I2 >= I3 (any rigid body).
    if np.any(i1 + i2 < 1.0 - 1e-12):
        raise RotationStateError("principal moments violate I1 + I2 >= I3 (no rigid body has them)")
    if np.any(idd > 1.0) or np.any((idd < 1.0) & (idd <= i1)):
        raise RotationStateError(
            "dynamic inertia must satisfy I1/I3 < Id/I3 <= 1 (Id = I1 would be a spin about the long axis, not supported)"
        )
    npa = idd < 1.0
    near = npa & (np.abs(idd - i2) < SEPARATRIX_TOLERANCE)
    if np.any(near):
        bad = np.flatnonzero(np.ravel(near))[0]
        raise SeparatrixError(
            f"Id/I3 = {np.ravel(idd)[bad]!r} is within {SEPARATRIX_TOLERANCE:g} of I2/I3 = {np.ravel(i2)[bad]!r}: "
            "too close to the SAM/LAM separatrix for the closed form"
        )
    sam_impossible = npa & (idd > i2) & (i2 >= 1.0)
    lam_impossible = npa & (idd < i2) & (i1 >= i2)
    if np.any(sam_impossible | lam_impossible):
        raise RotationStateError("degenerate inertia: that mode does not exist for I2 = I3 (SAM) or I1 = I2 (LAM)")


def _placeholders(i1, i2, idd):
    """Mode codes and the inertia with benign placeholders for PA entries (the NPA formulas stay finite there)."""
    i1 = np.asarray(i1, dtype=float)
    i2 = np.asarray(i2, dtype=float)
    idd = np.asarray(idd, dtype=float)
    mode = _mode_codes(i1, i2, idd)
    pa = mode == _MODE_PA
    if np.any(pa):
        i1 = np.where(pa, 0.5, i1)
        i2 = np.where(pa, 0.8, i2)
        idd = np.where(pa, 0.9, idd)
    return mode, i1, i2, idd


def _period_parts(mode, i1, i2, idd):
    """``(m, K(m), lambda, n, Pi(n|m), P_psi, P_phi)`` at unit momentum (I3 = 1, L = 1), arrays (K,).

    The one definition of the periods (Landau & Lifshitz 1976, section 37; Kaasalainen 2001):
    ``P_psi = 4K/lambda`` and the mean precession period through ``Pi(n|m)``. ``i1, i2, idd`` carry
    the placeholders of :func:`_placeholders` for PA entries.
    """
    i3 = 1.0
    lam_ = mode == _MODE_LAM
    with np.errstate(divide="ignore", invalid="ignore"):
        m = np.where(lam_, (i3 - i2) * (idd - i1) / ((i2 - i1) * (i3 - idd)),
                     (i2 - i1) * (i3 - idd) / ((i3 - i2) * (idd - i1)))
        lam = np.sqrt(np.where(lam_, (i2 - i1) * (i3 - idd), (i3 - i2) * (idd - i1)) / (i1 * i2 * i3 * idd))
        n = np.where(lam_, -i1 * (i3 - i2) / (i3 * (i2 - i1)), -i3 * (i2 - i1) / (i1 * (i3 - i2)))
    # Degenerate inertia (n = 0 or m = 0) is fine; clean NaN from 0/0 placeholders.
    if not np.all(np.isfinite(m)):  # (the check is cheaper than nan_to_num on every call)
        m = np.nan_to_num(m, nan=0.0)
    if not np.all(np.isfinite(n)):
        n = np.nan_to_num(n, nan=0.0, neginf=-1e300)
    kk = special.ellipk(m)
    pi_c = carlson_pi_complete(n, m)
    p_psi = 4.0 * kk / lam
    # Mean precession period (Kaasalainen 2001; closed form via Pi(n|m)).
    p_phi = _TWO_PI * i1 * i3 * kk / np.where(lam_, i3 * kk - (i3 - i1) * pi_c, i1 * kk + (i3 - i1) * pi_c)
    return m, kk, lam, n, pi_c, p_psi, p_phi


def _constants(i1, i2, idd):
    """Closed-form constants at unit momentum (I3 = 1, L = 1) for arrays (K,).

    Formulas of Landau & Lifshitz (1976, section 37) written with I_d;
    periods as in Kaasalainen (2001) with P_psi = 4K/lambda and the mean
    precession period through the complete integral of the third kind
    (:func:`_period_parts`). PA entries get harmless placeholder values (they
    are never used as NPA).
    """
    mode, i1, i2, idd = _placeholders(i1, i2, idd)
    lam_ = mode == _MODE_LAM
    i3 = 1.0
    m, kk, lam, n, pi_c, p_psi, p_phi = _period_parts(mode, i1, i2, idd)
    with np.errstate(divide="ignore", invalid="ignore"):
        # Amplitudes of I_i omega_i / L. SAM: (cn, sn, dn); LAM: (dn, sn, cn).
        amp = np.empty(np.shape(i1) + (3,))
        amp[..., 0] = np.sqrt(i1 * (i3 - idd) / (idd * (i3 - i1)))
        amp[..., 1] = np.sqrt(np.where(lam_, i2 * (idd - i1) / (idd * (i2 - i1)), i2 * (i3 - idd) / (idd * (i3 - i2))))
        amp[..., 2] = np.sqrt(i3 * (idd - i1) / (idd * (i3 - i1)))
    coef = (i3 - i1) / (i1 * i3 * lam)
    c_phi = np.where(lam_, -coef, coef)
    kprime = special.ellipk(1.0 - m)
    nome = np.exp(-math.pi * kprime / kk)
    return _Constants(
        mode=mode,
        m=m,
        kk=kk,
        lam=lam,
        n=n,
        pi_c=pi_c,
        c_phi=c_phi,
        amp=amp,
        p_psi_unit=p_psi,
        p_phi_unit=p_phi,
        nome=nome,
    )


def period_ratio_unit_momentum(i1_i3, i2_i3, id_i3) -> np.ndarray:
    """``P_phi / P_psi`` of NPA states, arrays (K,), without validation (fast kernel).

    The periods of :func:`periods_unit_momentum` (its slow reference, which validates the inertia
    and builds every constant of the closed form) and nothing else: the function the sampler's
    implicit chart solves for the excitation, several times per likelihood call. The caller passes
    admissible NPA states only; others give meaningless numbers or ``nan``.
    """
    mode, i1, i2, idd = _placeholders(i1_i3, i2_i3, id_i3)
    parts = _period_parts(mode, i1, i2, idd)
    return parts[6] / parts[5]


def periods_unit_momentum(i1_i3, i2_i3, id_i3):
    """Rotation and mean precession periods for unit angular momentum.

    Returns ``(P_psi, P_phi)`` in units of ``I3/L`` (so with L = 1 and I3 = 1,
    plain numbers): ``P_psi = 4 K(m)/lambda`` and
    ``P_phi = 2 pi I1 I3 K / (L [I1 K + (I3 - I1) Pi(n|m)])`` (SAM) or
    ``2 pi I1 I3 K / (L [I3 K - (I3 - I1) Pi(n|m)])`` (LAM); Kaasalainen (2001,
    A&A 376, 302), Landau & Lifshitz (1976, section 37). For PA both are
    ``2 pi I3/L``.

    Parameters
    ----------
    i1_i3, i2_i3, id_i3 : array_like
        Inertia ratios I1/I3, I2/I3 and dynamic inertia I_d/I3.
    """
    i1, i2, idd = np.broadcast_arrays(
        np.asarray(i1_i3, dtype=float), np.asarray(i2_i3, dtype=float), np.asarray(id_i3, dtype=float)
    )
    _check_inertia(i1, i2, idd)
    c = _constants(i1, i2, idd)
    pa = c.mode == _MODE_PA
    p_psi = np.where(pa, _TWO_PI, c.p_psi_unit)
    p_phi = np.where(pa, _TWO_PI, c.p_phi_unit)
    if p_psi.ndim == 0:
        return float(p_psi), float(p_phi)
    return p_psi, p_phi


def _period_ratio(i1, i2, idd):
    """P_phi/P_psi for NPA arrays (no validation)."""
    c = _constants(i1, i2, idd)
    return c.p_phi_unit / c.p_psi_unit


def dynamic_inertia_from_periods(i1_i3, i2_i3, p_psi_h, p_phi_h, mode, errors="raise"):
    """Vectorised inverse mapping (I1/I3, I2/I3, P_psi, P_phi, mode) -> I_d/I3.

    ``P_phi/P_psi`` depends only on the inertia ratios and I_d/I3 and is
    monotonic in I_d within each mode (checked numerically; it tends to 0 at
    the separatrix), so I_d is found by a bracketed Illinois (modified regula
    falsi) iteration on that ratio in ``(I2 + 1e-6, 1)`` for SAM or
    ``(I1, I2 - 1e-6)`` for LAM, for all states at once (Kaasalainen 2001;
    the scalar version is :meth:`RotationState.from_periods`).

    Parameters
    ----------
    i1_i3, i2_i3 : array_like (K,)
        Inertia ratios.
    p_psi_h, p_phi_h : array_like (K,)
        Periods in hours (any common unit).
    mode : str or array_like of str (K,)
        'SAM' or 'LAM' per state.
    errors : {'raise', 'nan'}
        For a ratio no state of that mode can produce: raise
        :class:`RotationStateError`, or return NaN there (convenient inside a
        log-probability).

    Returns
    -------
    ndarray (K,)
        I_d/I3.
    """
    i1, i2, p_psi, p_phi, modes = np.broadcast_arrays(
        np.atleast_1d(np.asarray(i1_i3, dtype=float)),
        np.atleast_1d(np.asarray(i2_i3, dtype=float)),
        np.atleast_1d(np.asarray(p_psi_h, dtype=float)),
        np.atleast_1d(np.asarray(p_phi_h, dtype=float)),
        np.atleast_1d(np.asarray(mode)),
    )
    modes = np.char.upper(modes.astype(str))
    if not np.all((modes == "SAM") | (modes == "LAM")):
        raise RotationStateError("mode must be 'SAM' or 'LAM' for every state")
    _check_inertia(i1, i2, np.ones_like(i1))
    if np.any(~(p_psi > 0)) or np.any(~(p_phi > 0)):
        raise RotationStateError("periods must be positive")
    sam = modes == "SAM"
    tol = SEPARATRIX_TOLERANCE
    lo = np.where(sam, i2 + tol, i1 + 1e-13)
    hi = np.where(sam, 1.0 - 1e-13, i2 - tol)
    exists = lo < hi
    lo = np.where(exists, lo, 0.5 * (i1 + 1.0))
    hi = np.where(exists, hi, np.nextafter(lo, 2.0))
    target = p_phi / p_psi
    f_lo = _period_ratio(i1, i2, lo) - target
    f_hi = _period_ratio(i1, i2, hi) - target
    ok = exists & (f_lo * f_hi <= 0)
    if errors == "raise" and not np.all(ok):
        bad = int(np.flatnonzero(~ok)[0])
        raise RotationStateError(
            f"state {bad}: P_phi/P_psi = {target[bad]:.6g} cannot be produced by a {modes[bad]} "
            f"with I1/I3 = {i1[bad]}, I2/I3 = {i2[bad]}"
        )
    side = np.zeros(lo.shape, dtype=np.int8)  # +1: hi kept last step, -1: lo kept
    for _ in range(100):
        active = ok & (np.abs(hi - lo) > 4e-16 * np.abs(hi)) & (f_lo != 0) & (f_hi != 0)
        if not np.any(active):
            break
        with np.errstate(divide="ignore", invalid="ignore"):
            x = (lo * f_hi - hi * f_lo) / (f_hi - f_lo)
        bisect = ~np.isfinite(x) | (x <= np.minimum(lo, hi)) | (x >= np.maximum(lo, hi))
        x = np.where(bisect, 0.5 * (lo + hi), x)
        x = np.where(active, x, lo)
        f_x = _period_ratio(i1, i2, x) - target
        left = active & (f_x * f_lo > 0)  # root between x and hi: move lo, keep hi
        right = active & ~left  # move hi, keep lo
        # Illinois: halve the kept end's value when the same end is kept twice running.
        f_hi = np.where(left & (side == 1), 0.5 * f_hi, f_hi)
        f_lo = np.where(right & (side == -1), 0.5 * f_lo, f_lo)
        lo = np.where(left, x, lo)
        f_lo = np.where(left, f_x, f_lo)
        hi = np.where(right, x, hi)
        f_hi = np.where(right, f_x, f_hi)
        side = np.where(left, 1, np.where(right, -1, side)).astype(np.int8)
    idd = np.where(np.abs(f_lo) <= np.abs(f_hi), lo, hi)
    return np.where(ok, idd, np.nan)


# ---------------------------------------------------------------------------
# Direct evaluation of the periodic factor B(x)
# ---------------------------------------------------------------------------


def _direct_parts(c, sel, x, euler_columns=False):
    """Periodic attitude factor B and the periodic part of phi at psi phases x.

    Parameters
    ----------
    c : _Constants
        Constants of all states.
    sel : ndarray of int, shape (K,)
        Indices of the NPA states to evaluate.
    x : ndarray, shape (K, n)
        Psi phase ``pi u / (2 K)`` in radians (any real value).

    Returns
    -------
    b : ndarray, shape (K, n, 3, 3)
        ``B = Rz(phi_per) Rx(theta) Rz(psi) P`` (body to the L frame rotating
        with the mean precession).
    phi_per : ndarray, shape (K, n)
        ``c_phi [Pi(n; am u|m) - (Pi(n|m)/K) u]``, radians, period ``pi`` in x.
    ell : ndarray, shape (K, n, 3)
        Body components of the unit angular momentum ``I_i omega_i / L``.
    """
    sn, cn, dn, phi_per = _elliptic_parts(c, sel, x)
    lam_mode = (c.mode[sel] == _MODE_LAM)[:, None]
    a = c.amp[sel]
    a1, a2, a3 = a[:, 0:1], a[:, 1:2], a[:, 2:3]
    # Body components of L/|L|: SAM (a1 cn, a2 sn, a3 dn); LAM (a1 dn, a2 sn, a3 cn).
    l1 = a1 * np.where(lam_mode, dn, cn)
    l2 = a2 * sn
    l3 = a3 * np.where(lam_mode, cn, dn)
    ell = np.stack([l1, l2, l3], axis=-1)
    # Euler-frame components (x, y, z): SAM (l1, l2, l3); LAM (l2, l3, l1).
    lx = np.where(lam_mode, l2, l1)
    ly = np.where(lam_mode, l3, l2)
    lz = np.where(lam_mode, l1, l3)
    st = np.hypot(lx, ly)
    ct = lz
    sp_ = lx / st
    cp_ = ly / st
    cph = np.cos(phi_per)
    sph = np.sin(phi_per)
    # A = Rx(theta) Rz(psi), rows in the Euler frame (filled in place: no stacking of temporaries).
    a_rows = np.empty(st.shape + (3, 3))
    a_rows[..., 0, 0] = cp_
    a_rows[..., 0, 1] = -sp_
    a_rows[..., 0, 2] = 0.0
    a_rows[..., 1, 0] = ct * sp_
    a_rows[..., 1, 1] = ct * cp_
    a_rows[..., 1, 2] = -st
    a_rows[..., 2, 0] = st * sp_
    a_rows[..., 2, 1] = st * cp_
    a_rows[..., 2, 2] = ct
    # Column permutation P (body axis -> Euler axis): LAM body 1,2,3 = Euler z,x,y.
    if euler_columns or not lam_mode.any():
        ap = a_rows
    else:
        perm = np.where(lam_mode[:, 0:1], np.array([2, 0, 1]), np.array([0, 1, 2]))  # (K, 3)
        ap = np.take_along_axis(a_rows, perm[:, None, None, :], axis=-1)
    b = np.empty_like(ap)
    b[..., 0, :] = cph[..., None] * ap[..., 0, :] - sph[..., None] * ap[..., 1, :]
    b[..., 1, :] = sph[..., None] * ap[..., 0, :] + cph[..., None] * ap[..., 1, :]
    b[..., 2, :] = ap[..., 2, :]
    return b, phi_per, ell


def _elliptic_parts(c, sel, x):
    """Signed ``sn, cn, dn`` over the whole period and the periodic part of phi at psi phases x (K, n).

    ``u = 2 K x / pi`` is reduced to ``|u| <= K`` (amplitude within [-pi/2, pi/2], where the Carlson
    form of ``Pi(n; am u|m)`` holds), and the signs restored from ``u -> u + 2K``;
    ``phi_per = c_phi [Pi(n; am u|m) - (Pi(n|m)/K) u]`` (period ``pi`` in x).
    """
    kk = c.kk[sel][:, None]
    m = c.m[sel][:, None]
    n = c.n[sel][:, None]
    u = x * (2.0 * kk / math.pi)
    j = np.round(u / (2.0 * kk))
    ur = u - 2.0 * kk * j  # |ur| <= K, amplitude within [-pi/2, pi/2]
    sign = 1.0 - 2.0 * np.mod(j, 2.0)
    sn_r, cn_r, dn_r, _ = special.ellipj(ur, np.broadcast_to(m, ur.shape))
    cn_r = np.maximum(cn_r, 0.0)
    s2 = sn_r * sn_r
    pi_inc = sn_r * special.elliprf(cn_r * cn_r, dn_r * dn_r, 1.0) + n / 3.0 * sn_r * s2 * special.elliprj(
        cn_r * cn_r, dn_r * dn_r, 1.0, 1.0 - n * s2
    )
    phi_per = c.c_phi[sel][:, None] * (pi_inc - c.pi_c[sel][:, None] / kk * ur)
    return sign * sn_r, sign * cn_r, dn_r, phi_per


def _initial_phase(c, sel, psi0):
    """Psi phase x0 (radians) at which the Euler angle psi equals psi0.

    SAM: ``psi = atan2(a1 cn, a2 sn)``; LAM: ``psi = atan2(a2 sn, a3 cn)``
    (the ratio of body components of L in the Euler x, y axes). Inverting for
    the amplitude ``am0`` and taking ``u0 = F(am0|m)`` (incomplete first-kind
    integral, scipy ``ellipkinc``) gives ``x0 = pi u0 / (2K)``.
    """
    a = c.amp[sel]
    lam_mode = c.mode[sel] == _MODE_LAM
    cps = np.cos(psi0)
    sps = np.sin(psi0)
    # SAM: sn ~ cos(psi)/a2, cn ~ sin(psi)/a1.  LAM: sn ~ sin(psi)/a2, cn ~ cos(psi)/a3.
    sn_dir = np.where(lam_mode, sps / a[:, 1], cps / a[:, 1])
    cn_dir = np.where(lam_mode, cps / a[:, 2], sps / a[:, 0])
    am0 = np.arctan2(sn_dir, cn_dir)
    kk = c.kk[sel]
    j = np.round(am0 / math.pi)
    u0 = special.ellipkinc(am0 - j * math.pi, c.m[sel]) + 2.0 * j * kk
    return u0 * math.pi / (2.0 * kk)


# ---------------------------------------------------------------------------
# Fourier route
# ---------------------------------------------------------------------------


def _harmonics_needed(nome):
    """Harmonics H so that the neglected tail ~ q**(H/2) is below the target.

    The q**(j/2) decay of the coefficients of B was confirmed numerically for
    m from 0.003 to 0.92 (tests compare the route with the direct one).
    """
    q = np.clip(nome, 1e-300, 1.0 - 1e-16)
    h = np.ceil(2.0 * math.log(_FOURIER_TAIL) / np.log(q)) + 2
    return np.maximum(h, 4).astype(int)


@dataclass(frozen=True)
class _Series:
    """Fourier series of B (Euler-column order) on the common basis cos(2 i x).

    Symmetries of the closed form fix the structure (u -> -u: sn odd, cn and dn
    even, phi_per odd; u -> u + 2K: sn and cn change sign, dn does not):
    Euler columns x and y hold only odd harmonics of x, column z only even
    ones, and every entry is a pure cosine or a pure sine series. Call "A" the
    column whose rows are (sin, cos, cos) series and "B" the column
    (cos, sin, sin): SAM has x = A, y = B; LAM has x = B, y = A; column z is
    (sin, cos, cos) with even harmonics in both modes.

    Each such series is rewritten exactly as a prefactor times a cosine
    series in 2x, using
    ``sin((2j+1)x) = sin x [1 + 2 sum_{i=1..j} cos 2ix]``,
    ``cos((2j+1)x) = cos x (-1)^j [1 + 2 sum_{i=1..j} (-1)^i cos 2ix]`` and
    ``sin(2jx) = sin 2x U_{j-1}(cos 2x)`` (Chebyshev polynomial of the second
    kind, itself a sum of cos 2kx), so one recurrence serves all nine entries.

    coef : (K, 9, n_basis)
        Entries in the order (A0, A1, A2, B0, B1, B2, z0, z1, z2) with
        prefactors (sin x, cos x, cos x, cos x, sin x, sin x, sin 2x, 1, 1).
    """

    coef: np.ndarray


#: Prefactor kind of each entry of _Series.coef: 0 -> 1, 1 -> sin x, 2 -> cos x, 3 -> sin 2x.
_PREFACTOR = (1, 2, 2, 2, 1, 1, 3, 0, 0)


@functools.lru_cache(maxsize=64)
def _basis_maps(n_odd, n_even, n_basis):
    """Matrices taking natural-basis coefficients to the cos(2 i x) basis (see _Series)."""
    t_sin_odd = np.zeros((n_odd, n_basis))
    t_cos_odd = np.zeros((n_odd, n_basis))
    for j in range(n_odd):
        t_sin_odd[j, 0] = 1.0
        t_sin_odd[j, 1 : j + 1] = 2.0
        t_cos_odd[j, 0] = (-1.0) ** j
        t_cos_odd[j, 1 : j + 1] = 2.0 * (-1.0) ** (j + np.arange(1, j + 1))
    t_sin_even = np.zeros((max(n_even - 1, 0), n_basis))  # rows: sin 2x, sin 4x, ...
    for j in range(1, n_even):
        nu = j - 1
        if nu % 2 == 0:
            t_sin_even[j - 1, 0] = 1.0
            t_sin_even[j - 1, 2 : nu + 1 : 2] = 2.0
        else:
            t_sin_even[j - 1, 1 : nu + 1 : 2] = 2.0
    t_cos_even = np.eye(n_even, n_basis)
    return t_sin_odd, t_cos_odd, t_sin_even, t_cos_even


#: Signs of B(pi - x) against B(x), entry by entry in Euler columns (u -> -u: sn and phi_per odd, cn and
#: dn even, so each entry is a pure sine or cosine series; then u -> u + 2K negates columns x and y).
_REFLECTION_SIGNS = {_MODE_SAM: np.array([[1.0, -1.0, -1.0], [-1.0, 1.0, 1.0], [-1.0, 1.0, 1.0]]),
                     _MODE_LAM: np.array([[-1.0, 1.0, -1.0], [1.0, -1.0, 1.0], [1.0, -1.0, 1.0]])}


def _fourier_coefficients(c, sel, harmonics, symmetric=True):
    """Fourier series of B(x) up to ``harmonics`` per state, from 2H+2 samples (FFT).

    Only the first half period is needed: ``B(x + pi) = B(x) diag(-1, -1, 1)`` in Euler columns
    (u -> u + 2K). With ``symmetric`` (the fast kernel) only its first half is computed by special
    functions and the rest follows from ``B(pi - x) = S * B(x)`` (:data:`_REFLECTION_SIGNS`), which
    halves the elliptic-function calls; ``symmetric=False`` (the slow reference) computes every sample
    of the half period. The two agree to round-off.
    """
    h = int(harmonics)
    msamp = 2 * h + 2
    half = msamp // 2
    n_direct = half // 2 + 1 if symmetric else half
    xs = np.arange(n_direct) * (_TWO_PI / msamp)
    bh, _, _ = _direct_parts(c, sel, np.broadcast_to(xs, (len(sel), n_direct)), euler_columns=True)
    if n_direct < half:
        lam = (c.mode[sel] == _MODE_LAM)[:, None, None, None]
        signs = np.where(lam, _REFLECTION_SIGNS[_MODE_LAM], _REFLECTION_SIGNS[_MODE_SAM])
        mirror = half - np.arange(n_direct, half)  # sample j = half - k is pi - x_k
        bh = np.concatenate([bh, bh[:, mirror] * signs], axis=1)
    b = np.concatenate([bh, bh * np.array([-1.0, -1.0, 1.0])], axis=1)
    spec = np.fft.rfft(b, axis=1) / msamp  # (K, h+2, 3, 3)
    h_odd = h if h % 2 else h - 1
    h_even = h if h % 2 == 0 else h - 1
    n_odd = (h_odd + 1) // 2
    n_even = h_even // 2 + 1
    n_basis = max(n_odd, n_even)
    so = spec[:, 1 : h_odd + 1 : 2]  # (K, n_odd, 3, 3)
    se = spec[:, 0 : h_even + 1 : 2, :, 2]  # (K, n_even, 3)
    lam_mode = (c.mode[sel] == _MODE_LAM)[:, None, None]
    col_a = np.where(lam_mode, so[..., 1], so[..., 0])  # (K, n_odd, 3 rows)
    col_b = np.where(lam_mode, so[..., 0], so[..., 1])
    t_so, t_co, t_se, t_ce = _basis_maps(n_odd, n_even, n_basis)
    cos_even = 2.0 * se.real
    cos_even[:, 0] *= 0.5
    sin_even = -2.0 * se[:, 1:].imag
    coef = np.empty((len(sel), 9, n_basis))
    coef[:, 0] = (-2.0 * col_a[..., 0].imag) @ t_so
    coef[:, 1] = (2.0 * col_a[..., 1].real) @ t_co
    coef[:, 2] = (2.0 * col_a[..., 2].real) @ t_co
    coef[:, 3] = (2.0 * col_b[..., 0].real) @ t_co
    coef[:, 4] = (-2.0 * col_b[..., 1].imag) @ t_so
    coef[:, 5] = (-2.0 * col_b[..., 2].imag) @ t_so
    coef[:, 6] = sin_even[..., 0] @ t_se if n_even > 1 else 0.0
    coef[:, 7] = cos_even[..., 1] @ t_ce
    coef[:, 8] = cos_even[..., 2] @ t_ce
    return _Series(coef=coef)


def _unique_coefficients(c, sel, harmonics):
    """:func:`_fourier_coefficients` of the states ``sel``, computed once per distinct inertia.

    B(x) depends on the inertia alone (not on the period, the direction or the phases), and a batch
    often repeats it: the optimiser's Jacobian (5 of 8 columns move only the period or the attitude),
    the search's starts (many orientations per shape). Rows are identical to the per-state
    computation (the series of each state is computed independently).
    """
    m = c.m[sel]
    _, first, inverse = np.unique(m, return_index=True, return_inverse=True)
    if len(first) == len(sel):
        return _fourier_coefficients(c, sel, harmonics)
    inverse = np.ravel(inverse)
    rep = sel[first][inverse]
    same = ((c.n[sel] == c.n[rep]) & (c.c_phi[sel] == c.c_phi[rep]) & (c.mode[sel] == c.mode[rep])
            & np.all(c.amp[sel] == c.amp[rep], axis=1) & (c.kk[sel] == c.kk[rep]) & (c.pi_c[sel] == c.pi_c[rep]))
    if not np.all(same):
        return _fourier_coefficients(c, sel, harmonics)
    return _Series(coef=_fourier_coefficients(c, sel[first], harmonics).coef[inverse])


#: Basis rows per block of the Fourier evaluation are kept to about this many floats (cache size).
_BLOCK_FLOATS = 1 << 17


def _fourier_eval(series, sel, x, lam_mode, out, work=None):
    """Evaluate B(x) from its series into ``out[sel]`` (body-column order).

    Parameters
    ----------
    series : _Series
        Coefficients of the states ``sel``; all basis functions given are used.
    sel : ndarray (k,)
        Rows of ``out`` to fill.
    x : ndarray (k, n)
        Psi phases.
    lam_mode : bool
        All states of this call are LAM (else all SAM).
    out : ndarray (K, 3, 3, n)
    work : ndarray (flat), optional
        Scratch space reused across calls (fresh large allocations cost page
        faults that would dominate the run time).

    ``cos(2 i x)`` comes from the Chebyshev recurrence
    ``c_{i+1} = 2 cos(2x) c_i - c_{i-1}``; the nine sums are one small matrix
    product per block of states and points (sized to stay in cache), then
    each entry is multiplied by its prefactor (1, sin x, cos x or sin 2x).
    """
    k, npt = x.shape
    nb = series.coef.shape[2]
    # Body columns of Euler columns A, B, z (P: SAM identity; LAM body 1,2,3 = Euler z,x,y).
    col_a, col_b, col_z = (2, 1, 0) if lam_mode else (0, 1, 2)
    dest = ((0, col_a), (1, col_a), (2, col_a), (0, col_b), (1, col_b), (2, col_b), (0, col_z), (1, col_z), (2, col_z))
    pchunk = max(64, _BLOCK_FLOATS // (nb + 12))
    kb = max(1, pchunk // max(npt, 1))
    pchunk = min(pchunk, npt)
    for k0 in range(0, k, kb):
        k1 = min(k, k0 + kb)
        rows_out = sel[k0:k1]
        for p0 in range(0, npt, pchunk):
            p1 = min(npt, p0 + pchunk)
            xx = x[k0:k1, p0:p1]
            shp = xx.shape
            size = shp[0] * shp[1]
            need = (nb + 1) * size
            if work is None or work.size < need:
                work = np.empty(need)
            ce = work[: nb * size].reshape((nb,) + shp)
            tmp = work[nb * size : (nb + 1) * size].reshape(shp)
            c1 = np.cos(xx)
            s1 = np.sin(xx)
            pre = (None, s1, c1, 2.0 * s1 * c1)
            ce[0] = 1.0
            if nb > 1:
                np.multiply(c1, c1, out=ce[1])
                np.multiply(s1, s1, out=tmp)
                ce[1] -= tmp
                two_c2 = 2.0 * ce[1]
            for i in range(2, nb):
                np.multiply(two_c2, ce[i - 1], out=tmp)
                np.subtract(tmp, ce[i - 2], out=ce[i])
            sums = np.matmul(series.coef[k0:k1], ce.transpose(1, 0, 2))  # (kb, 9, p)
            dst = out[:, :, :, p0:p1] if (p0, p1) != (0, npt) else out
            for e, (r, col) in enumerate(dest):
                f = pre[_PREFACTOR[e]]
                dst[rows_out, r, col] = sums[:, e] if f is None else sums[:, e] * f


def _fourier_route(c, npa_idx, x, out):
    """Fill ``out[npa_idx]`` (K, 3, 3, n) with B(x) by the Fourier route; return the rest.

    States are sorted by the harmonics they need; coefficients come from one
    FFT per tier of sample counts and mode, and each small group of states is
    evaluated with its own truncation. Returns the indices (into ``npa_idx``)
    of states that need more than :data:`MAX_HARMONICS` harmonics.
    """
    npt = x.shape[1]
    need = _harmonics_needed(c.nome[npa_idx])
    work = np.empty(2 * _BLOCK_FLOATS + 16 * max(npt, 64))
    todo = np.flatnonzero(need <= MAX_HARMONICS)
    for tier_lo, tier_hi in ((0, 24), (24, 48), (48, MAX_HARMONICS)):
        members = todo[(need[todo] > tier_lo) & (need[todo] <= tier_hi)]
        if members.size == 0:
            continue
        # Sort by mode, then by harmonics needed (one FFT for the tier, both modes).
        members = members[np.lexsort((need[members], c.mode[npa_idx[members]]))]
        series = _unique_coefficients(c, npa_idx[members], int(need[members].max()))
        modes = c.mode[npa_idx[members]]
        start = 0
        while start < len(members):
            h = int(need[members[start]])
            per_group = max(1, _BLOCK_FLOATS // ((h // 2 + 13) * max(npt, 1)))
            stop = start + 1
            while stop < len(members) and stop - start < per_group and modes[stop] == modes[start]:
                stop += 1
            h = int(need[members[start:stop]].max())
            nb = max((h + 1) // 2, h // 2 + 1)
            part = _Series(coef=series.coef[start:stop, :, :nb])
            grp = members[start:stop]
            _fourier_eval(part, npa_idx[grp], x[grp], modes[start] == _MODE_LAM, out, work)
            start = stop
    return np.flatnonzero(need > MAX_HARMONICS)


# ---------------------------------------------------------------------------
# Batched kernels
# ---------------------------------------------------------------------------


def momentum_to_ecliptic_matrix(l_lon_deg, l_lat_deg):
    """Matrix Q (..., 3, 3) from the L frame to ecliptic J2000.

    ``Q = Rz(lon) Ry(90 deg - lat)``: the third column is the unit angular
    momentum, the first points away from the ecliptic pole in the meridian
    plane of L.
    """
    lon = np.deg2rad(np.asarray(l_lon_deg, dtype=float))
    lat = np.deg2rad(np.asarray(l_lat_deg, dtype=float))
    cl, sl = np.cos(lon), np.sin(lon)
    cb, sb = np.cos(lat), np.sin(lat)
    q = np.empty(np.broadcast(lon, lat).shape + (3, 3))
    # Columns: Rz(lon) applied to Ry(90-lat) columns (sin b, 0, -cos b), (0,1,0), (cos b, 0, sin b).
    q[..., 0, 0] = cl * sb
    q[..., 1, 0] = sl * sb
    q[..., 2, 0] = -cb
    q[..., 0, 1] = -sl
    q[..., 1, 1] = cl
    q[..., 2, 1] = 0.0
    q[..., 0, 2] = cl * cb
    q[..., 1, 2] = sl * cb
    q[..., 2, 2] = sb
    return q


@dataclass(frozen=True)
class _Batch:
    """Validated, broadcast batch of states (arrays of shape (K,)) and times (K, n)."""

    i1: np.ndarray
    i2: np.ndarray
    idd: np.ndarray
    p_psi_h: np.ndarray
    q_ecl: np.ndarray  # (K, 3, 3)
    phi0: np.ndarray  # radians
    psi0: np.ndarray  # radians
    dt_h: np.ndarray  # (K, n) hours since epoch
    const: _Constants
    invalid: np.ndarray  # (K,) bool, states replaced by placeholders (invalid="nan")


def _invalid_states(i1, i2, idd, p_psi, lon, lat, phi0, psi0, epoch):
    """Boolean mask (K,) of states :func:`_check_inertia` and the period/direction checks would refuse."""
    finite = np.isfinite(i1) & np.isfinite(i2) & np.isfinite(idd) & np.isfinite(p_psi)
    finite &= np.isfinite(lon) & np.isfinite(lat) & np.isfinite(phi0) & np.isfinite(psi0) & np.isfinite(epoch)
    with np.errstate(invalid="ignore"):
        npa = idd < 1.0
        bad = (i1 <= 0) | (i1 > i2) | (i2 > 1.0) | (i1 + i2 < 1.0 - 1e-12) | (idd > 1.0) | (npa & (idd <= i1))
        bad |= npa & (np.abs(idd - i2) < SEPARATRIX_TOLERANCE)
        bad |= npa & (((idd > i2) & (i2 >= 1.0)) | ((idd < i2) & (i1 >= i2)))
        bad |= (p_psi <= 0) | (np.abs(lat) > 90.0)
    return ~finite | bad


def _prepare(i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd, t_jd, invalid="raise"):
    params = [np.atleast_1d(np.asarray(v, dtype=float))
              for v in (i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd)]
    if len({a.shape for a in params[:-1]}) == 1 and params[-1].shape == (1,) and params[0].ndim == 1:
        # a model's walkers: eight arrays of one shape and one epoch (np.broadcast_arrays costs more)
        params[-1] = np.full(params[0].shape, params[-1][0])
    else:
        params = np.broadcast_arrays(*params)
    if params[0].ndim != 1:
        raise RotationStateError("state parameters must be scalars or 1-D arrays over states")
    i1, i2, idd, p_psi, lon, lat, phi0, psi0, epoch = params
    if invalid == "nan":
        bad = _invalid_states(*params)
        if np.any(bad):
            # Placeholder PA states; their outputs are overwritten with NaN.
            i1, i2, idd, p_psi, lon, lat, phi0, psi0 = (
                np.where(bad, fill, v) for v, fill in zip((i1, i2, idd, p_psi, lon, lat, phi0, psi0), (1, 1, 1, 1, 0, 0, 0, 0))
            )
            epoch = np.where(bad & ~np.isfinite(epoch), 0.0, epoch)
    elif invalid == "raise":
        bad = np.zeros(i1.shape, dtype=bool)
        _check_inertia(i1, i2, idd)
        if np.any(~np.isfinite(p_psi)) or np.any(p_psi <= 0):
            raise RotationStateError("p_psi_h must be positive and finite")
        if np.any(np.abs(lat) > 90.0) or not np.all(np.isfinite(lon)):
            raise RotationStateError("angular-momentum direction: need finite longitude and |latitude| <= 90 deg")
    else:
        raise RotationStateError(f"invalid must be 'raise' or 'nan', got {invalid!r}")
    t = np.asarray(t_jd, dtype=float)
    if t.ndim == 0:
        t = t[None]
    if t.ndim == 1:
        t = np.broadcast_to(t, (len(i1), t.shape[0]))
    if t.ndim != 2 or t.shape[0] != len(i1):
        raise RotationStateError("t_jd must be 1-D (shared times) or 2-D (K, n) matching the states")
    dt_h = (t - epoch[:, None]) * _HOURS_PER_DAY
    return _Batch(
        i1=i1,
        i2=i2,
        idd=idd,
        p_psi_h=p_psi,
        q_ecl=momentum_to_ecliptic_matrix(lon, lat),
        phi0=np.deg2rad(phi0),
        psi0=np.deg2rad(psi0),
        dt_h=dt_h,
        const=_constants(i1, i2, idd),
        invalid=bad,
    )


def _attitude_parts(batch, method):
    """Mean precession angle phi_mean (K, n) and the periodic factor B (K, 3, 3, n)."""
    c = batch.const
    k, npt = batch.dt_h.shape
    pa = c.mode == _MODE_PA
    npa_idx = np.flatnonzero(~pa)
    pa_idx = np.flatnonzero(pa)
    phi_mean = np.empty((k, npt))
    b = np.empty((k, 3, 3, npt))
    if method not in ("fourier", "direct"):
        raise RotationStateError(f"unknown method {method!r}; use 'fourier' or 'direct'")
    if pa_idx.size:
        phi_mean[pa_idx] = batch.phi0[pa_idx, None] + _TWO_PI * batch.dt_h[pa_idx] / batch.p_psi_h[pa_idx, None]
        b[pa_idx] = np.eye(3)[None, :, :, None]
    if npa_idx.size == 0:
        return phi_mean, b
    p_phi_h = c.p_phi_unit[npa_idx] * (batch.p_psi_h[npa_idx] / c.p_psi_unit[npa_idx])
    x0 = _initial_phase(c, npa_idx, batch.psi0[npa_idx])
    phi_per0 = _elliptic_parts(c, npa_idx, x0[:, None])[3]
    dth = batch.dt_h[npa_idx]
    cycles = dth / batch.p_psi_h[npa_idx, None]
    cycles -= np.floor(cycles)
    cycles *= _TWO_PI
    x = cycles
    x += x0[:, None]
    phi_mean[npa_idx] = (batch.phi0[npa_idx] - phi_per0[:, 0])[:, None] + dth * (_TWO_PI / p_phi_h)[:, None]
    rest = np.arange(len(npa_idx)) if method == "direct" else _fourier_route(c, npa_idx, x, b)
    if rest.size:
        sub = npa_idx[rest]
        bd, _, _ = _direct_parts(c, sub, x[rest])
        b[sub] = np.moveaxis(bd, 1, 3)
    return phi_mean, b


def batch_arguments(states):
    """Stack :class:`RotationState` objects into the array arguments of the kernels.

    Returns the nine 1-D arrays ``(i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg,
    l_lat_deg, phi0_deg, psi0_deg, epoch_jd)`` for :func:`attitude_matrices`
    and :func:`ecliptic_to_body`.
    """
    rows = [s.kernel_arguments() for s in states]
    if not rows:
        raise RotationStateError("need at least one state")
    return tuple(np.array(col, dtype=float) for col in zip(*rows))


def attitude_matrices(
    i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd, t_jd, method="fourier", invalid="raise"
):
    """Body-to-ecliptic rotation matrices for a batch of K states at n times.

    ``R = Q Rz(phi) Rx(theta) Rz(psi) P`` (3-1-3 Euler angles in the frame of
    the angular momentum, ``Q`` to ecliptic J2000); the angles follow the
    closed-form free rigid-body motion of Landau & Lifshitz (1976, section 37)
    and Kaasalainen (2001, A&A 376, 302). PA states (``id_i3 == 1``) spin
    uniformly about body axis 3 with period ``p_psi_h``. A batch may mix PA,
    SAM and LAM states.

    Parameters
    ----------
    i1_i3, i2_i3, id_i3 : float or array_like (K,)
        Inertia ratios I1/I3 <= I2/I3 <= 1 and dynamic inertia I_d/I3.
    p_psi_h : float or array_like (K,)
        Rotation period P_psi in hours (the rotation period for PA).
    l_lon_deg, l_lat_deg : float or array_like (K,)
        Ecliptic J2000 longitude and latitude of the angular momentum, degrees.
    phi0_deg, psi0_deg : float or array_like (K,)
        Euler angles phi and psi at the epoch, degrees (psi ignored for PA).
    epoch_jd : float or array_like (K,)
        Epoch (TDB Julian date, days).
    t_jd : array_like (n,) or (K, n)
        Times (TDB Julian dates, days).
    method : {'fourier', 'direct'}
        Fast periodic-series route (default) or per-point special functions.
    invalid : {'raise', 'nan'}
        What to do with a state that is unphysical or too close to the
        separatrix: raise (default), or return NaN for that state only (so
        that one walker of an ensemble cannot spoil the whole batch).

    Returns
    -------
    ndarray, shape (K, n, 3, 3)
        ``R[k, i] @ v_body`` gives ecliptic coordinates.

    Raises
    ------
    SeparatrixError
        If a state's I_d is within :data:`SEPARATRIX_TOLERANCE` of I2.
    RotationStateError
        For unphysical parameters.
    """
    batch = _prepare(i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd, t_jd, invalid)
    phi_mean, b = _attitude_parts(batch, method)
    k, npt = phi_mean.shape
    q = batch.q_ecl
    out = np.empty((k, npt, 3, 3))
    for ks, ps in _blocks(k, npt):
        cph = np.cos(phi_mean[ks, ps])
        sph = np.sin(phi_mean[ks, ps])
        qb = q[ks]
        for j in range(3):
            b0, b1, z = b[ks, 0, j, ps], b[ks, 1, j, ps], b[ks, 2, j, ps]
            u = cph * b0 - sph * b1  # rows of Rz(phi_mean) B
            w = sph * b0 + cph * b1
            for i in range(3):
                out[ks, ps, i, j] = qb[:, i, 0, None] * u + qb[:, i, 1, None] * w + qb[:, i, 2, None] * z
    if np.any(batch.invalid):
        out[batch.invalid] = np.nan
    return out


#: Elements per block of the element-wise compositions (small temporaries stay
#: in cache and in the allocator's heap instead of fresh, page-faulting mappings).
_COMPOSE_BLOCK = 8192


def _blocks(k, npt):
    """(state slice, point slice) pairs covering a (k, npt) array in cache-sized blocks."""
    if npt >= _COMPOSE_BLOCK:
        for k0 in range(k):
            for p0 in range(0, npt, _COMPOSE_BLOCK):
                yield slice(k0, k0 + 1), slice(p0, min(npt, p0 + _COMPOSE_BLOCK))
    else:
        kb = max(1, _COMPOSE_BLOCK // max(npt, 1))
        for k0 in range(0, k, kb):
            yield slice(k0, min(k, k0 + kb)), slice(0, npt)


def ecliptic_to_body(
    i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd, t_jd, vectors, method="fourier",
    invalid="raise",
):
    """Body-frame components ``R.T @ v`` of ecliptic vectors, without forming R.

    Same state parameters as :func:`attitude_matrices`. ``vectors`` has shape
    ``(..., n, 3)`` (ecliptic J2000); its leading axes broadcast against the
    state axis (K,): ``(n, 3)`` is shared by all states, ``(K, n, 3)`` is per
    state, ``(S, 1, n, 3)`` or ``(S, K, n, 3)`` holds S sets (e.g. the Sun and
    the observer directions). The result has shape
    ``broadcast(leading, (K,)) + (n, 3)`` (a view of component-first storage,
    so ``np.moveaxis(out, -1, 0)`` is contiguous). This is the cheap path for
    brightness models: ``v_body = B^T Rz(-phi_mean) Q^T v``. ``method`` and
    ``invalid`` as in :func:`attitude_matrices` (NaN along the state axis).
    """
    batch = _prepare(i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd, t_jd, invalid)
    k, npt = batch.dt_h.shape
    v = np.asarray(vectors, dtype=float)
    if v.ndim < 2 or v.shape[-1] != 3 or v.shape[-2] != npt:
        raise RotationStateError("vectors must have shape (..., n, 3) with n matching t_jd")
    lead = np.broadcast_shapes(v.shape[:-2], (k,))
    phi_mean, b = _attitude_parts(batch, method)
    q = batch.q_ecl  # (K, 3, 3)
    # Component-first storage (contiguous rows for the arithmetic and for
    # consumers that go component-first, like the brightness kernels); the
    # returned array is a (..., n, 3) view of it.
    buf = np.empty((3,) + lead + (npt,))
    vlead = v.shape[:-2]
    shared = len(vlead) == 0 or vlead[-1] == 1
    if shared:
        # Vectors common to all states: L-frame components for every state in one
        # BLAS product, (K, 3, 3)^T @ (3, S n) -> (K, 3, S, n).
        sets = v.reshape((-1, npt, 3))
        n_sets = sets.shape[0]
        vt = np.ascontiguousarray(np.moveaxis(sets, 2, 0).reshape(3, n_sets * npt))
        lfr = np.matmul(np.swapaxes(q, 1, 2), vt).reshape(k, 3, n_sets, npt)
        buf_sets = buf.reshape((3, n_sets, k, npt))
    else:
        v = np.broadcast_to(v, lead + (npt, 3))
    for ks, ps in _blocks(k, npt):
        cph = np.cos(phi_mean[ks, ps])
        sph = np.sin(phi_mean[ks, ps])
        bb = b[ks, :, :, ps]  # (kb, 3, 3, p)
        if shared:
            parts = [(lfr[ks, 0, si, ps], lfr[ks, 1, si, ps], lfr[ks, 2, si, ps], buf_sets[:, si, ks, ps]) for si in range(n_sets)]
        else:
            qb = q[ks]
            vv = v[..., ks, ps, :]
            v0, v1, v2 = vv[..., 0], vv[..., 1], vv[..., 2]
            # L-frame components (Q^T v)_i = sum_j Q_ji v_j.
            l0 = qb[:, 0, 0, None] * v0 + qb[:, 1, 0, None] * v1 + qb[:, 2, 0, None] * v2
            l1 = qb[:, 0, 1, None] * v0 + qb[:, 1, 1, None] * v1 + qb[:, 2, 1, None] * v2
            x3 = qb[:, 0, 2, None] * v0 + qb[:, 1, 2, None] * v1 + qb[:, 2, 2, None] * v2
            parts = [(l0, l1, x3, buf[..., ks, ps])]
        for l0, l1, x3, dst in parts:
            # Rotate by -phi_mean about the L axis, then apply B^T.
            x1 = cph * l0
            x1 += sph * l1
            x2 = cph * l1
            x2 -= sph * l0
            tmp = np.empty(x1.shape)
            for j in range(3):
                acc = dst[j]
                np.multiply(bb[:, 0, j], x1, out=acc)
                np.multiply(bb[:, 1, j], x2, out=tmp)
                acc += tmp
                np.multiply(bb[:, 2, j], x3, out=tmp)
                acc += tmp
    out = np.moveaxis(buf, 0, -1)
    if np.any(batch.invalid):
        out[..., batch.invalid, :, :] = np.nan
    return out


def angular_velocity_body(state, t_jd):
    """Body-frame angular velocity (n, 3) in rad/h of a :class:`RotationState`.

    ``omega_i = (L / I_i) * ell_i`` with the closed-form components
    ``ell_i = I_i omega_i / L`` of Landau & Lifshitz (1976, section 37).
    For PA: ``(0, 0, 2 pi / P)``.
    """
    t = np.atleast_1d(np.asarray(t_jd, dtype=float))
    if state.mode == "PA":
        out = np.zeros((t.size, 3))
        out[:, 2] = _TWO_PI / state.p_psi_h
        return out
    c = _constants(np.array([state.i1_i3]), np.array([state.i2_i3]), np.array([state.id_i3]))
    sel = np.array([0])
    x0 = _initial_phase(c, sel, np.deg2rad([state.psi0_deg]))
    cycles = (t - state.epoch_jd) * _HOURS_PER_DAY / state.p_psi_h
    x = _TWO_PI * (cycles - np.floor(cycles)) + x0[0]
    _, _, ell = _direct_parts(c, sel, x[None, :])
    l_mom = c.p_psi_unit[0] / state.p_psi_h  # |L| in units of I3 rad/h
    inertia = np.array([state.i1_i3, state.i2_i3, 1.0])
    return ell[0] * l_mom / inertia


# ---------------------------------------------------------------------------
# The public state object
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class LightcurveFrequencies:
    """Dominant light-curve frequencies of a rotation state, in cycles per hour.

    The light curve of a free rotator is two-periodic: its spectrum holds only
    ``n1 f_phi + n2 f_psi`` (Kaasalainen 2001, A&A 376, 302). The dominant
    combinations (Pravec et al. 2005, Icarus 173, 108) are

    - PA: ``f_phi`` and, for a double-peaked curve, ``2 f_phi`` (f_phi = 1/P);
    - SAM: ``f_phi - f_psi`` and ``2 (f_phi - f_psi)``;
    - LAM: ``f_phi``, ``2 f_phi``, ``f_phi + f_psi`` and ``2 (f_phi + f_psi)``.

    Attributes
    ----------
    f_phi_per_h, f_psi_per_h : float
        1/P_phi and 1/P_psi in cycles per hour (equal for PA).
    labels : tuple of str
        Names of the dominant combinations.
    dominant_per_h : tuple of float
        Their frequencies in cycles per hour (same order as ``labels``).
    """

    f_phi_per_h: float
    f_psi_per_h: float
    labels: tuple
    dominant_per_h: tuple

    @property
    def dominant_periods_h(self):
        """Periods (hours) of the dominant combinations."""
        return tuple(1.0 / f for f in self.dominant_per_h)


@dataclass(frozen=True)
class RotationState:
    """Free (torque-free) rotation state of a rigid body.

    Attributes
    ----------
    i1_i3, i2_i3 : float
        Principal-moment ratios I1/I3 <= I2/I3 <= 1 (axis 1 long, 3 short).
    id_i3 : float
        Dynamic inertia I_d/I3 = L^2/(2 E I3); 1.0 for PA.
    p_psi_h : float
        Rotation period P_psi in hours (4K/lambda); for PA the rotation period.
    l_lon_deg, l_lat_deg : float
        Angular-momentum direction, ecliptic J2000 longitude/latitude, degrees.
    phi0_deg, psi0_deg : float
        Euler angles phi and psi at ``epoch_jd``, degrees. For PA ``phi0_deg``
        is the rotation phase and ``psi0_deg`` is ignored.
    epoch_jd : float
        Epoch, TDB Julian date (days).

    Notes
    -----
    Each NPA state has a mirror solution with the opposite sense of rotation
    about the reference axis, ``(w1, w2, w3) -> (-w1, w2, -w3)`` and
    ``theta -> 180 deg - theta``. It is this same motion with the body axes
    turned 180 degrees about axis 2 (``R -> R diag(-1, 1, -1)``, same L), a
    symmetry of a triaxial ellipsoid, so it is not parametrised separately.
    """

    i1_i3: float
    i2_i3: float
    id_i3: float
    p_psi_h: float
    l_lon_deg: float
    l_lat_deg: float
    phi0_deg: float = 0.0
    psi0_deg: float = 0.0
    epoch_jd: float = 2451545.0

    def __post_init__(self):
        for name in ("i1_i3", "i2_i3", "id_i3", "p_psi_h", "l_lon_deg", "l_lat_deg", "phi0_deg", "psi0_deg", "epoch_jd"):
            value = getattr(self, name)
            try:
                value = float(value)
            except (TypeError, ValueError):
                raise RotationStateError(f"{name} must be a number, got {value!r}") from None
            if not math.isfinite(value):
                raise RotationStateError(f"{name} must be finite, got {value!r}")
            object.__setattr__(self, name, value)
        _check_inertia(np.array([self.i1_i3]), np.array([self.i2_i3]), np.array([self.id_i3]))
        if self.p_psi_h <= 0:
            raise RotationStateError(f"p_psi_h must be positive, got {self.p_psi_h!r}")
        if abs(self.l_lat_deg) > 90.0:
            raise RotationStateError(f"l_lat_deg must lie in [-90, 90], got {self.l_lat_deg!r}")

    # -- constructors -------------------------------------------------------

    @classmethod
    def principal_axis(cls, period_h, l_lon_deg, l_lat_deg, phase0_deg=0.0, epoch_jd=2451545.0, i1_i3=1.0, i2_i3=1.0):
        """PA rotation: uniform spin about body axis 3 (maximum moment).

        Parameters
        ----------
        period_h : float
            Rotation period, hours.
        l_lon_deg, l_lat_deg : float
            Spin-axis (= angular momentum) direction, ecliptic J2000, degrees.
        phase0_deg : float
            Rotation angle phi at ``epoch_jd``, degrees.
        epoch_jd : float
            Epoch, TDB Julian date.
        i1_i3, i2_i3 : float
            Inertia ratios (irrelevant to the PA attitude; kept for models that
            tie inertia to shape).
        """
        return cls(i1_i3, i2_i3, 1.0, period_h, l_lon_deg, l_lat_deg, phase0_deg, 0.0, epoch_jd)

    @classmethod
    def excited(cls, i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg=0.0, psi0_deg=0.0, epoch_jd=2451545.0):
        """NPA (or PA if ``id_i3 == 1``) state; SAM if Id > I2, LAM if Id < I2."""
        return cls(i1_i3, i2_i3, id_i3, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd)

    @classmethod
    def from_periods(
        cls, i1_i3, i2_i3, p_psi_h, p_phi_h, mode, l_lon_deg=0.0, l_lat_deg=90.0, phi0_deg=0.0, psi0_deg=0.0, epoch_jd=2451545.0
    ):
        """State with given inertia ratios, P_psi, P_phi (hours) and mode.

        ``P_phi/P_psi`` depends only on the inertia ratios and I_d/I3 (both
        periods scale as 1/L), so I_d is root-found (Brent) on that ratio in
        ``(I2, I3)`` for SAM or ``(I1, I2)`` for LAM, as in Kaasalainen (2001).
        For ``mode='PA'`` the periods must agree and ``p_psi_h`` is the
        rotation period.

        Raises
        ------
        RotationStateError
            If the period ratio cannot be produced by that mode and inertia.
        """
        mode = str(mode).upper()
        if mode == "PA":
            if not math.isclose(p_psi_h, p_phi_h, rel_tol=1e-9):
                raise RotationStateError("PA state: P_psi and P_phi must be equal (the rotation period)")
            return cls.principal_axis(p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, epoch_jd, i1_i3, i2_i3)
        if mode not in ("SAM", "LAM"):
            raise RotationStateError(f"mode must be 'PA', 'SAM' or 'LAM', got {mode!r}")
        if not (p_psi_h > 0 and p_phi_h > 0):
            raise RotationStateError("periods must be positive")
        i1, i2 = float(i1_i3), float(i2_i3)
        _check_inertia(np.array([i1]), np.array([i2]), np.array([1.0]))
        target = p_phi_h / p_psi_h
        tol = SEPARATRIX_TOLERANCE
        if mode == "SAM":
            lo, hi = i2 + tol, 1.0 - 1e-13
        else:
            lo, hi = i1 + 1e-13, i2 - tol
        if not lo < hi:
            raise RotationStateError(f"{mode} does not exist for inertia ratios {i1}, {i2}")

        def ratio(idd):
            p_psi, p_phi = periods_unit_momentum(i1, i2, idd)
            return p_phi / p_psi - target

        f_lo, f_hi = ratio(lo), ratio(hi)
        if f_lo * f_hi > 0:
            r_lo, r_hi = f_lo + target, f_hi + target
            raise RotationStateError(
                f"P_phi/P_psi = {target:.6g} is outside the range {min(r_lo, r_hi):.6g}..{max(r_lo, r_hi):.6g} "
                f"that a {mode} with I1/I3 = {i1}, I2/I3 = {i2} can produce"
            )
        idd = optimize.brentq(ratio, lo, hi, xtol=1e-15, rtol=4 * np.finfo(float).eps, maxiter=200)
        return cls(i1, i2, idd, p_psi_h, l_lon_deg, l_lat_deg, phi0_deg, psi0_deg, epoch_jd)

    # -- derived quantities -----------------------------------------------------

    def _const(self):
        return _constants(np.array([self.i1_i3]), np.array([self.i2_i3]), np.array([self.id_i3]))

    @property
    def mode(self):
        """'PA' (Id = I3), 'SAM' (I2 < Id < I3) or 'LAM' (I1 < Id < I2)."""
        return _MODE_NAMES[int(_mode_codes(np.array(self.i1_i3), np.array(self.i2_i3), np.array(self.id_i3)))]

    @property
    def p_phi_h(self):
        """Mean precession period P_phi in hours (closed form via Pi(n|m)); PA: the rotation period."""
        if self.mode == "PA":
            return self.p_psi_h
        c = self._const()
        return float(c.p_phi_unit[0] / c.p_psi_unit[0] * self.p_psi_h)

    @property
    def excitation(self):
        """E/E0 = I3/I_d (1 for PA)."""
        return 1.0 / self.id_i3

    @property
    def elliptic_parameter(self):
        """Elliptic parameter m = k^2 of the closed form (0 for PA)."""
        return 0.0 if self.mode == "PA" else float(self._const().m[0])

    @property
    def angular_momentum_i3_rad_h(self):
        """|L| / I3 in rad/h (the PA spin rate for PA)."""
        if self.mode == "PA":
            return _TWO_PI / self.p_psi_h
        return float(self._const().p_psi_unit[0] / self.p_psi_h)

    @property
    def theta_range_deg(self):
        """(min, max) of the nutation angle theta in degrees.

        theta runs between ``arccos(c0)`` and ``arccos(c0 sqrt(1-m))``, with
        ``c0`` the dn-amplitude of cos theta (Kaasalainen 2001); (0, 0) for PA.
        """
        if self.mode == "PA":
            return (0.0, 0.0)
        c = self._const()
        c0 = c.amp[0, 2] if self.mode == "SAM" else c.amp[0, 0]
        a = math.degrees(math.acos(min(1.0, c0)))
        b = math.degrees(math.acos(min(1.0, c0 * math.sqrt(1.0 - c.m[0]))))
        return (min(a, b), max(a, b))

    def lightcurve_frequencies(self):
        """Dominant light-curve frequencies (cycles per hour); see :class:`LightcurveFrequencies`."""
        f_psi = 1.0 / self.p_psi_h
        f_phi = 1.0 / self.p_phi_h
        if self.mode == "PA":
            labels = ("f_phi", "2 f_phi")
            dom = (f_phi, 2 * f_phi)
        elif self.mode == "SAM":
            labels = ("f_phi - f_psi", "2 (f_phi - f_psi)")
            dom = (f_phi - f_psi, 2 * (f_phi - f_psi))
        else:
            labels = ("f_phi", "2 f_phi", "f_phi + f_psi", "2 (f_phi + f_psi)")
            dom = (f_phi, 2 * f_phi, f_phi + f_psi, 2 * (f_phi + f_psi))
        return LightcurveFrequencies(f_phi, f_psi, labels, tuple(float(v) for v in dom))

    def kernel_arguments(self):
        """The state as the positional arguments of :func:`attitude_matrices` (before ``t_jd``)."""
        return (
            self.i1_i3,
            self.i2_i3,
            self.id_i3,
            self.p_psi_h,
            self.l_lon_deg,
            self.l_lat_deg,
            self.phi0_deg,
            self.psi0_deg,
            self.epoch_jd,
        )

    def attitude(self, t_jd, method="fourier"):
        """Body-to-ecliptic matrices, shape (n, 3, 3), at TDB Julian dates ``t_jd``.

        ``R @ v_body`` gives ecliptic J2000 coordinates, ``R.T @ v`` body ones.
        """
        t = np.atleast_1d(np.asarray(t_jd, dtype=float))
        return attitude_matrices(*self.kernel_arguments(), t, method=method)[0]

    def to_body(self, t_jd, vectors, method="fourier"):
        """Body components (n, 3) of ecliptic vectors (n, 3) at times ``t_jd``."""
        t = np.atleast_1d(np.asarray(t_jd, dtype=float))
        return ecliptic_to_body(*self.kernel_arguments(), t, np.asarray(vectors, dtype=float), method=method)
