"""Other directions of the angular momentum of a tumbling solution, and the periods they give.

One apparition rarely fixes the direction of the angular momentum ``L``. Seen from (near) the
ecliptic plane, a body and its mirror image with ``L`` mirrored through that plane give the same
disk-integrated light curve, and the mirror of a pseudo-vector through the ecliptic is
``(lambda + 180 deg, beta)`` (the classic "lambda + 180 deg" ambiguity of pole solutions; Kaasalainen &
Lamberg 2006, Inverse Problems 22, 749); its antipode ``(lambda + 180 deg, -beta)`` and the reflection
``(lambda, -beta)`` differ in the sense of rotation and are told apart only by the slow motion of
the phase-angle bisector. That same motion is why they matter for the periods: the light curve fixes
the *synodic* frequencies, and each direction of ``L`` reads them at precession and rotation
frequencies that differ by a part of the bisector's angular rate (the synodic-sidereal difference of
a PA rotator, for tumblers). Measured on held-out dense tumblers of the calibration library: fits
started at another direction of ``L`` reach a log-likelihood within -9..+4 nats of the search's
optimum, with ``P_phi`` 1-10 Laplace standard deviations away, and the truth nearer the other one on
some of them.

:func:`other_poles` refits a solution from the three symmetric directions of its ``L`` (phases on a
grid); :func:`covering_interval` widens a period's interval to cover every direction that fits as
well by goodness of fit (within :func:`tumble.sparse.fit.pole_fit_spread_chi2`, the threshold the
PA sidereal fit uses for its poles), each with its own Laplace width. The solution's own periods,
state and ranking are unchanged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["N_POLE_PHASES", "PoleFit", "OtherPoles", "symmetric_directions", "pole_starts", "other_poles",
           "covering_interval", "interval_union"]

#: phase starts per direction of L: the Euler angles phi0 and psi0 each on this many equally spaced
#: values (16 starts per direction: one within 45 deg of any optimum's phases in both; on CAL-dense-
#: npa-150 the best of these fits, ln L 504.5, was above a fit of all 16 phase starts at the true
#: L's direction, 499.2)
N_POLE_PHASES = 4
#: starts optimised per direction, the best by their starting log-likelihood (a cost bound: 12
#: optimisations per solution in one batch, 0.3-1.8 s)
N_POLE_OPTIMISED = 4


@dataclass(frozen=True, eq=False)
class PoleFit:
    """The best fit of a solution with ``L`` started at one other direction.

    Attributes
    ----------
    label : str
        'mirror' ``(lambda + 180, beta)``, 'antipode' ``(lambda + 180, -beta)``, 'reflection' ``(lambda, -beta)``.
    state : numpy.ndarray
        Optimum in the model's parameter space.
    delta_log_likelihood : float
        Its log-likelihood minus the solution's, nats (> 0: it fits better).
    p_psi_h, p_phi_h, p_psi_sigma_h, p_phi_sigma_h : float
        Periods at the optimum and their Laplace standard deviations, hours (NaN when failed).
    l_lon_deg, l_lat_deg : float
        Where ``L`` ended, degrees.
    """

    label: str
    state: np.ndarray
    delta_log_likelihood: float
    p_psi_h: float
    p_phi_h: float
    p_psi_sigma_h: float
    p_phi_sigma_h: float
    l_lon_deg: float
    l_lat_deg: float


@dataclass(frozen=True, eq=False)
class OtherPoles:
    """A solution's fits from the other directions of ``L`` and the goodness-of-fit threshold.

    Attributes
    ----------
    fits : tuple of PoleFit
    threshold_nats : float
        A direction fits as well when its log-likelihood is at most this much below the solution's:
        half of :func:`tumble.sparse.fit.pole_fit_spread_chi2` of the fit's degrees of freedom.
    """

    fits: tuple
    threshold_nats: float

    @property
    def as_good(self) -> tuple:
        """The fits within the threshold (or better), best first."""
        ok = [f for f in self.fits if f.delta_log_likelihood >= -self.threshold_nats]
        return tuple(sorted(ok, key=lambda f: -f.delta_log_likelihood))


def symmetric_directions(lon_rad: float, lat_rad: float) -> tuple:
    """``(label, lon_rad, lat_rad)`` of the mirror, antipode and reflection of a direction (module notes)."""
    back = float(np.mod(lon_rad + math.pi, 2.0 * math.pi))
    return (("mirror", back, float(lat_rad)), ("antipode", back, -float(lat_rad)),
            ("reflection", float(np.mod(lon_rad, 2.0 * math.pi)), -float(lat_rad)))


def pole_starts(space, x, lon_rad: float, lat_rad: float, n_phases: int = N_POLE_PHASES) -> np.ndarray:
    """Starts ``(n_phases**2, ndim)``: ``x`` with ``L`` at ``(lon, lat)`` and ``phi0``, ``psi0`` on a grid."""
    grid = np.linspace(0.0, 2.0 * math.pi, int(n_phases), endpoint=False)
    a, b = np.meshgrid(grid, grid, indexing="ij")
    xs = np.repeat(np.asarray(x, float)[None], a.size, axis=0)
    xs[:, space.index("l_lon_rad")] = lon_rad
    xs[:, space.index("l_lat_rad")] = lat_rad
    xs[:, space.index("phi0_rad")] = a.ravel()
    xs[:, space.index("psi0_rad")] = b.ravel()
    return space.wrap(xs)


def other_poles(model, x, *, n_phases: int = N_POLE_PHASES) -> OtherPoles:
    """Refit a tumbling solution at ``x`` from the three other symmetric directions of its ``L``.

    Each direction's starts (:func:`pole_starts`) are scored by the model, the
    :data:`N_POLE_OPTIMISED` best optimised together (:func:`tumble.classify.rotation.optimise_states`), and the
    best optimum kept with its periods' Laplace widths
    (:func:`tumble.classify.solutions.laplace_approximation`).
    """
    from tumble.classify.rotation import optimise_states
    from tumble.classify.solutions import laplace_approximation
    from tumble.sparse.fit import pole_fit_spread_chi2

    sp = model.space
    x = sp.wrap(np.asarray(x, float))
    ll0 = float(np.asarray(model(x[None]), float)[0])
    directions = symmetric_directions(x[sp.index("l_lon_rad")], x[sp.index("l_lat_rad")])
    chosen, owner = [], []
    for j, (_, lon, lat) in enumerate(directions):
        xs = pole_starts(sp, x, lon, lat, n_phases)
        ll = np.asarray(model(xs), float)
        keep = [i for i in np.argsort(-ll)[:N_POLE_OPTIMISED] if np.isfinite(ll[i])]
        chosen += [xs[i] for i in keep]
        owner += [j] * len(keep)
    # every direction's starts in one batched Levenberg-Marquardt (optimise_state one at a time is
    # its reference)
    xo, llo = optimise_states(model, np.array(chosen)) if chosen else (np.empty((0, sp.ndim)), np.empty(0))
    owner = np.asarray(owner, int)
    fits = []
    for j, (label, _, _) in enumerate(directions):
        mine = np.flatnonzero((owner == j) & np.isfinite(llo))
        if not len(mine):
            continue
        k = mine[int(np.argmax(llo[mine]))]
        best_x, best_ll = xo[k], float(llo[k])
        lap = laplace_approximation(model, best_x)
        fits.append(PoleFit(label, best_x, float(best_ll - ll0), lap.p_psi_h, lap.p_phi_h, lap.p_psi_sigma_h,
                            lap.p_phi_sigma_h, math.degrees(float(best_x[sp.index("l_lon_rad")])) % 360.0,
                            math.degrees(float(best_x[sp.index("l_lat_rad")]))))
    dof = int(model.y.size) - sp.ndim
    return OtherPoles(tuple(fits), 0.5 * pole_fit_spread_chi2(dof))


def covering_interval(interval: tuple, period_name: str, poles: OtherPoles) -> tuple:
    """The 68 % interval ``(lo, hi)`` widened to cover every direction of ``L`` that fits as well.

    Each such direction contributes its period +- its own Laplace standard deviation (``period_name``
    'p_psi_h' or 'p_phi_h'); a direction whose width is not finite contributes nothing. An interval
    that is not finite stays so (a withheld interval is not made up from the other poles).
    """
    out = tuple(float(v) for v in interval)
    for f in poles.as_good:
        p, s = getattr(f, period_name), getattr(f, period_name.replace("_h", "_sigma_h"))
        out = interval_union(out, (p - s, p + s))
    return out


def interval_union(a: tuple, b: tuple) -> tuple:
    """The smallest interval holding ``a`` and ``b``; a non-finite end of ``b`` adds nothing and a
    non-finite end of ``a`` stays (a withheld interval is not made up from another one)."""
    lo, hi = (float(v) for v in a)
    if not (np.isfinite(lo) and np.isfinite(hi)):
        return (lo, hi)
    if np.isfinite(b[0]):
        lo = min(lo, float(b[0]))
    if np.isfinite(b[1]):
        hi = max(hi, float(b[1]))
    return (lo, hi)
