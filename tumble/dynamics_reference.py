"""Numerical reference for free rigid-body rotation (slow, obviously correct).

Integrates Euler's equations for the body angular velocity together with the
attitude quaternion using scipy's ``solve_ivp`` (DOP853, Dormand & Prince
8(5,3); Hairer, Norsett & Wanner 1993, Solving ODEs I) at ``rtol = 1e-11``.
Used by the tests to check the closed form of :mod:`tumble.dynamics`, and
available to users who want an independent check.

Equations (Euler's equations, Landau & Lifshitz 1976, Mechanics, section 36
(section number from memory))::

    I1 w1' = (I2 - I3) w2 w3
    I2 w2' = (I3 - I1) w3 w1
    I3 w3' = (I1 - I2) w1 w2
    q' = 1/2 q (x) (0, w)          (q maps body to inertial: v = q v_b q*)

Units: moments in units of I3, angular velocity in rad/h, time in hours
internally; the state-level entry point takes TDB Julian dates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp

from tumble.exceptions import TumbleError

__all__ = [
    "ReferenceSolution",
    "quaternion_to_matrix",
    "matrix_to_quaternion",
    "integrate_free_rotation",
    "integrate_state",
]


@dataclass(frozen=True)
class ReferenceSolution:
    """Numerically integrated free rotation.

    Attributes
    ----------
    t_h : ndarray (n,)
        Times in hours from the start.
    matrices : ndarray (n, 3, 3)
        Body-to-inertial rotation matrices (from the normalised quaternion).
    omega_body_rad_h : ndarray (n, 3)
        Body-frame angular velocity, rad/h.
    energy_rel_drift : float
        max |2E(t)/2E(0) - 1| with ``2E = sum I_i w_i^2``.
    momentum_rel_drift : float
        max ||L(t)|/|L(0)| - 1| with ``|L|^2 = sum (I_i w_i)^2``.
    momentum_direction_drift_rad : float
        Largest angle between the inertial angular momentum ``R I w`` at any
        time and at the start, radians.
    n_rhs : int
        Number of right-hand-side evaluations.
    """

    t_h: np.ndarray
    matrices: np.ndarray
    omega_body_rad_h: np.ndarray
    energy_rel_drift: float
    momentum_rel_drift: float
    momentum_direction_drift_rad: float
    n_rhs: int


def quaternion_to_matrix(q):
    """Rotation matrices (..., 3, 3) from quaternions (..., 4) = (w, x, y, z), normalised first."""
    q = np.asarray(q, dtype=float)
    q = q / np.linalg.norm(q, axis=-1, keepdims=True)
    w, x, y, z = q[..., 0], q[..., 1], q[..., 2], q[..., 3]
    r = np.empty(q.shape[:-1] + (3, 3))
    r[..., 0, 0] = 1 - 2 * (y * y + z * z)
    r[..., 0, 1] = 2 * (x * y - w * z)
    r[..., 0, 2] = 2 * (x * z + w * y)
    r[..., 1, 0] = 2 * (x * y + w * z)
    r[..., 1, 1] = 1 - 2 * (x * x + z * z)
    r[..., 1, 2] = 2 * (y * z - w * x)
    r[..., 2, 0] = 2 * (x * z - w * y)
    r[..., 2, 1] = 2 * (y * z + w * x)
    r[..., 2, 2] = 1 - 2 * (x * x + y * y)
    return r


def matrix_to_quaternion(r):
    """Unit quaternion (w, x, y, z) of a single rotation matrix (Shepperd's method)."""
    r = np.asarray(r, dtype=float)
    tr = np.trace(r)
    cands = np.array([tr, r[0, 0], r[1, 1], r[2, 2]])
    i = int(np.argmax(cands))
    if i == 0:
        w = 0.5 * np.sqrt(1 + tr)
        q = [w, (r[2, 1] - r[1, 2]) / (4 * w), (r[0, 2] - r[2, 0]) / (4 * w), (r[1, 0] - r[0, 1]) / (4 * w)]
    elif i == 1:
        x = 0.5 * np.sqrt(1 + 2 * r[0, 0] - tr)
        q = [(r[2, 1] - r[1, 2]) / (4 * x), x, (r[0, 1] + r[1, 0]) / (4 * x), (r[0, 2] + r[2, 0]) / (4 * x)]
    elif i == 2:
        y = 0.5 * np.sqrt(1 + 2 * r[1, 1] - tr)
        q = [(r[0, 2] - r[2, 0]) / (4 * y), (r[0, 1] + r[1, 0]) / (4 * y), y, (r[1, 2] + r[2, 1]) / (4 * y)]
    else:
        z = 0.5 * np.sqrt(1 + 2 * r[2, 2] - tr)
        q = [(r[1, 0] - r[0, 1]) / (4 * z), (r[0, 2] + r[2, 0]) / (4 * z), (r[1, 2] + r[2, 1]) / (4 * z), z]
    q = np.array(q)
    return q / np.linalg.norm(q)


def _rhs(inertia):
    i1, i2, i3 = inertia

    def f(_t, y):
        w1, w2, w3, qw, qx, qy, qz = y
        dw1 = (i2 - i3) * w2 * w3 / i1
        dw2 = (i3 - i1) * w3 * w1 / i2
        dw3 = (i1 - i2) * w1 * w2 / i3
        # q' = 1/2 q (x) (0, w1, w2, w3)
        dqw = 0.5 * (-qx * w1 - qy * w2 - qz * w3)
        dqx = 0.5 * (qw * w1 + qy * w3 - qz * w2)
        dqy = 0.5 * (qw * w2 + qz * w1 - qx * w3)
        dqz = 0.5 * (qw * w3 + qx * w2 - qy * w1)
        return [dw1, dw2, dw3, dqw, dqx, dqy, dqz]

    return f


def integrate_free_rotation(inertia, omega0_rad_h, r0, t_h, rtol=1e-11, atol=1e-13):
    """Integrate Euler's equations and the attitude quaternion.

    Parameters
    ----------
    inertia : sequence of 3 floats
        Principal moments (I1, I2, I3), any common unit.
    omega0_rad_h : sequence of 3 floats
        Body-frame angular velocity at ``t_h[0]``, rad/h.
    r0 : array (3, 3)
        Body-to-inertial matrix at ``t_h[0]``.
    t_h : array (n,)
        Increasing output times in hours; the integration starts at ``t_h[0]``.
    rtol, atol : float
        Tolerances of DOP853. ``atol`` applies to angular velocity (rad/h)
        and quaternion components alike.

    Returns
    -------
    ReferenceSolution

    Raises
    ------
    TumbleError
        If the integrator fails.
    """
    inertia = np.asarray(inertia, dtype=float)
    w0 = np.asarray(omega0_rad_h, dtype=float)
    t_h = np.asarray(t_h, dtype=float)
    if t_h.ndim != 1 or t_h.size < 1 or np.any(np.diff(t_h) <= 0):
        raise TumbleError("t_h must be a strictly increasing 1-D array")
    y0 = np.concatenate([w0, matrix_to_quaternion(r0)])
    if t_h.size == 1:
        ys = y0[:, None]
        nfev = 0
    else:
        sol = solve_ivp(
            _rhs(inertia), (t_h[0], t_h[-1]), y0, method="DOP853", t_eval=t_h, rtol=rtol, atol=atol, dense_output=False
        )
        if not sol.success:
            raise TumbleError(f"reference integration failed: {sol.message}")
        ys = sol.y
        nfev = int(sol.nfev)
    w = ys[:3].T
    mats = quaternion_to_matrix(ys[3:].T)
    two_e = np.sum(inertia * w * w, axis=1)
    lvec_b = inertia * w
    lmag = np.linalg.norm(lvec_b, axis=1)
    l_in = np.einsum("nij,nj->ni", mats, lvec_b) / lmag[:, None]
    dir_drift = float(np.max(2 * np.arcsin(np.clip(np.linalg.norm(l_in - l_in[0], axis=1) / 2, 0, 1))))
    return ReferenceSolution(
        t_h=t_h,
        matrices=mats,
        omega_body_rad_h=w,
        energy_rel_drift=float(np.max(np.abs(two_e / two_e[0] - 1.0))),
        momentum_rel_drift=float(np.max(np.abs(lmag / lmag[0] - 1.0))),
        momentum_direction_drift_rad=dir_drift,
        n_rhs=nfev,
    )


def integrate_state(state, t_jd, rtol=1e-11, atol=1e-13):
    """Integrate a :class:`tumble.dynamics.RotationState` numerically.

    The initial attitude and angular velocity at ``t_jd[0]`` come from the
    closed form; from there on the motion is integrated independently.
    Matrices are body-to-ecliptic, like ``state.attitude``.

    Parameters
    ----------
    state : RotationState
    t_jd : array (n,)
        Strictly increasing TDB Julian dates.
    rtol, atol : float
        DOP853 tolerances (``atol`` in rad/h and quaternion units).
    """
    from tumble.dynamics import angular_velocity_body

    t_jd = np.asarray(t_jd, dtype=float)
    r0 = state.attitude(t_jd[:1], method="direct")[0]
    w0 = angular_velocity_body(state, t_jd[:1])[0]
    t_h = (t_jd - t_jd[0]) * 24.0
    return integrate_free_rotation((state.i1_i3, state.i2_i3, 1.0), w0, r0, t_h, rtol=rtol, atol=atol)
