"""The fixed (nuisance) part of every period-search model, built from a ``LightCurve``.

Nuisance model (profiled out at every trial frequency):

- one free zero-point (mag) per session (``session >= 0``);
- for sparse points (``session == -1``) one zero-point shared per band;
- optionally, for groups that span a range of solar phase angle, a linear
  phase-angle term per group (mag/deg), so that the phase trend of sparse
  survey data does not masquerade as a long period. The linear term is the
  usual first-order approximation of the phase curve over a limited range of
  phase angles (e.g. Bowell et al. 1989, Asteroids II, the linear part of the
  magnitude-phase relation away from opposition).

With ``sessions=False`` the session column is ignored and every band gets one
zero-point (calibrated photometry).

The data fitted are reduced magnitudes, ``m - 5 log10(r Delta)`` (Bowell et al.
1989), or the magnitudes as read when the distances are unknown; times are the
light-time-corrected TDB times ``LightCurve.t`` relative to a reference epoch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tumble.exceptions import TumbleError
from tumble.periodogram._kernels import NuisanceGroup
from tumble.photometry import is_sparse_sessions

__all__ = ["ScanData", "prepare", "PHASE_TERM_MIN_RANGE_DEG", "PeriodSearchError"]

#: A group gets the automatic linear phase-angle term when its points span at least this range (deg).
PHASE_TERM_MIN_RANGE_DEG = 2.0


class PeriodSearchError(TumbleError, ValueError):
    """The period search cannot run on these data or with these settings."""


@dataclass(frozen=True)
class ScanData:
    """Arrays of one light curve ready for the period search.

    Attributes
    ----------
    t : numpy.ndarray, shape (n,)
        Model times (TDB, light-time corrected) minus ``epoch_jd``, days.
    y : numpy.ndarray, shape (n,)
        Fitted magnitudes (reduced when distances are known), mag.
    w : numpy.ndarray, shape (n,)
        Weights 1/err^2, mag^-2.
    y_res : numpy.ndarray, shape (n,)
        Residuals of the nuisance-only weighted fit, mag.
    z : numpy.ndarray, shape (n, q)
        Nuisance design matrix (zero-point indicators, phase-angle columns).
    nuisance_names : tuple of str
        Name of each column of ``z`` (``zp:session=3``, ``zp:band=r``,
        ``phase:band=r`` in mag/deg).
    groups : tuple of NuisanceGroup
        The nuisance columns group by group, orthonormalised for the kernels.
    epoch_jd : float
        Reference epoch (TDB JD) of ``t``, of the Fourier phases and coefficients.
    span_d : float
        Time span, days.
    sparse : bool
        True when most points are sparse (session -1).
    phase_terms : tuple of str
        Groups that got a linear phase-angle term.
    """

    t: np.ndarray
    y: np.ndarray
    w: np.ndarray
    y_res: np.ndarray
    z: np.ndarray
    nuisance_names: tuple
    groups: tuple
    epoch_jd: float
    span_d: float
    sparse: bool
    phase_terms: tuple

    @property
    def n_points(self) -> int:
        return int(self.t.size)

    @property
    def n_nuisance(self) -> int:
        return int(self.z.shape[1])

    @property
    def chi2_nuisance(self) -> float:
        """Chi-square of the nuisance-only (constant-light-curve) model."""
        return float(np.sum(self.w * self.y_res**2))


def _group_basis(idx, sw, columns, names, tol=1e-10):
    """Orthonormal weighted basis of one group's nuisance columns, dropping dependent ones."""
    zg = np.column_stack(columns)
    a = sw[:, None] * zg
    q, r = np.linalg.qr(a)
    keep = np.abs(np.diag(r)) > tol * max(1.0, np.abs(r).max())
    if not np.all(keep):
        zg = zg[:, keep]
        names = [n for n, k in zip(names, keep) if k]
        q, _ = np.linalg.qr(sw[:, None] * zg)
    return q, zg, names


def prepare(lc, *, sessions: bool = True, phase_term: bool | None = None) -> ScanData:
    """Build the nuisance model and the arrays of the period search from a light curve.

    Parameters
    ----------
    lc : tumble.photometry.LightCurve
        The light curve.
    sessions : bool
        One zero-point per session (sparse points: one per band); False: one per band.
    phase_term : bool or None
        Linear phase-angle term per group: True for every group with a phase
        range, False never, None (default) for groups spanning at least
        ``PHASE_TERM_MIN_RANGE_DEG`` of phase angle. Needs ``lc.phase_deg``.
    """
    n = lc.n_points
    if n < 3:
        raise PeriodSearchError(f"{lc.object_id}: {n} points are too few for a period search")
    t_abs = np.asarray(lc.t, dtype=float)
    epoch = float(np.round(0.5 * (t_abs[0] + t_abs[-1]), 1))
    t = t_abs - epoch
    y = np.asarray(lc.reduced_mag, dtype=float)
    w = 1.0 / np.asarray(lc.err, dtype=float) ** 2
    sw = np.sqrt(w)
    band = np.asarray(lc.band).astype(str)
    session = np.asarray(lc.session, dtype=int)
    phase = None if lc.phase_deg is None else np.asarray(lc.phase_deg, dtype=float)

    keys = []
    if sessions:
        for s in np.unique(session[session >= 0]):
            keys.append((f"session={int(s)}", np.flatnonzero(session == s)))
        for b in sorted(set(band[session < 0].tolist())):
            keys.append((f"band={b}", np.flatnonzero((session < 0) & (band == b))))
    else:
        for b in sorted(set(band.tolist())):
            keys.append((f"band={b}", np.flatnonzero(band == b)))

    groups, zcols, names, phase_groups = [], [], [], []
    y_res = np.array(y)
    for key, idx in keys:
        cols = [np.ones(idx.size)]
        cnames = [f"zp:{key}"]
        if phase is not None and phase_term is not False and idx.size >= 3:
            a = phase[idx]
            rng = float(np.ptp(a))
            if (phase_term is True and rng > 0) or (phase_term is None and rng >= PHASE_TERM_MIN_RANGE_DEG):
                cols.append(a - float(np.mean(a)))
                cnames.append(f"phase:{key}")
        q, zg, cnames = _group_basis(idx, sw[idx], cols, cnames)
        if any(c.startswith("phase:") for c in cnames):
            phase_groups.append(key)
        groups.append(NuisanceGroup(index=idx, v=sw[idx, None] * q))
        full = np.zeros((n, zg.shape[1]))
        full[idx] = zg
        zcols.append(full)
        names.extend(cnames)
        yw = sw[idx] * y[idx]
        y_res[idx] = y[idx] - (q @ (q.T @ yw)) / sw[idx]
    z = np.hstack(zcols)
    sparse = is_sparse_sessions(session)
    return ScanData(t=t, y=y, w=w, y_res=y_res, z=z, nuisance_names=tuple(names), groups=tuple(groups),
                    epoch_jd=epoch, span_d=float(t_abs[-1] - t_abs[0]), sparse=sparse,
                    phase_terms=tuple(phase_groups))
