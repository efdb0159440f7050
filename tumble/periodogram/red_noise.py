"""Time-correlated ("red") residuals: the time-averaging factor beta, and a slow reference for it.

A fit's parameter errors assume independent residuals. When the residuals are correlated over
tens of minutes (a light-curve shape the model absorbs imperfectly, changing with phase angle),
averages over such times scatter more than ``1/sqrt(N)`` predicts, and the errors must be inflated.
The "time-averaging" method of Pont, Zucker & Queloz (2006, MNRAS 373, 231, section 3) and Winn
et al. (2008, AJ 135, 1201, section 3): average the residuals in bins of ``N`` points, compare their
scatter ``sigma_N`` with the white-noise expectation ``sigma_1 / sqrt(N) * sqrt(M / (M - 1))`` and
call the ratio ``beta``; the errors are multiplied by ``beta``, averaged over a range of bin times
near the time scale that sets the parameter.

Here the residuals are whitened (divided by their errors) and binned by time *within each session*
(a night with its own zero-point), so that bins never straddle a gap or a zero-point. Each session's
mean is removed (the fit's zero-point did the same), and the white-noise expectation of a bin of
``n_b`` points in a session of ``N_s`` is ``sigma_1^2 (1 - n_b / N_s) / n_b``: the exact form of
Winn's ``M / (M - 1)`` correction for unequal bins. Nothing here knows about light curves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["RedNoiseFactor", "red_noise_factor", "red_noise_factor_reference", "DEFAULT_BIN_MINUTES"]

#: Bin durations (minutes) over which beta is averaged: from a few exposures to a large part of a
#: night, the time scales on which a shape-free model's misfit of a rotating body is correlated.
DEFAULT_BIN_MINUTES = (15.0, 30.0, 60.0, 120.0)
#: A bin duration counts only when it leaves at least this many bins with two or more points.
MIN_BINS = 8


@dataclass(frozen=True)
class RedNoiseFactor:
    """The time-averaging factor of a set of residuals.

    Attributes
    ----------
    beta : float
        Mean of ``beta_per_bin`` over the usable bin durations, floored at 1 (white noise gives
        about 1; NaN when no bin duration is usable).
    beta_per_bin : tuple of float
        ``sigma_N / sigma_N,white`` for each bin duration of ``bin_minutes`` (NaN: too few bins).
    bin_minutes : tuple of float
        The bin durations, minutes.
    n_bins : tuple of int
        Bins of two or more points per duration.
    """

    beta: float
    beta_per_bin: tuple
    bin_minutes: tuple
    n_bins: tuple


def _bin_ratio(t_d, z, session, width_d):
    """``(sum n_b zbar_b^2, sum (1 - n_b/N_s), number of bins)`` over bins of ``width_d`` within sessions."""
    num, den, nb = 0.0, 0.0, 0
    for s in np.unique(session):
        m = session == s
        ts, zs = t_d[m], z[m] - z[m].mean()
        n_s = len(zs)
        if n_s < 4:
            continue
        idx = np.floor((ts - ts.min()) / width_d).astype(int)
        counts = np.bincount(idx)
        sums = np.bincount(idx, weights=zs)
        ok = counts >= 2
        if not np.any(ok):
            continue
        num += float(np.sum(sums[ok] ** 2 / counts[ok]))
        den += float(np.sum(1.0 - counts[ok] / n_s))
        nb += int(ok.sum())
    return num, den, nb


def red_noise_factor(t_d, resid, err, session, *, bin_minutes=DEFAULT_BIN_MINUTES, n_params: int = 0) -> RedNoiseFactor:
    """The time-averaging factor ``beta`` of residuals (module notes; Winn et al. 2008, section 3).

    Parameters
    ----------
    t_d : array_like (n,)
        Times, days.
    resid : array_like (n,)
        Residuals of the fit, mag.
    err : array_like (n,)
        Their 1-sigma errors as the fit used them, mag.
    session : array_like (n,) of int
        Session (night) of each point; bins never cross sessions.
    bin_minutes : sequence of float
        Bin durations, minutes.
    n_params : int
        Parameters of the fit, for the unbinned variance ``sum z^2 / (n - n_params)``.

    Returns
    -------
    RedNoiseFactor
    """
    t = np.asarray(t_d, float)
    z = np.asarray(resid, float) / np.asarray(err, float)
    sess = np.asarray(session)
    n = len(z)
    # the unbinned variance of the whitened residuals, each session's mean removed
    zc = z.copy()
    for s in np.unique(sess):
        m = sess == s
        zc[m] -= zc[m].mean()
    dof = n - len(np.unique(sess)) - max(int(n_params), 0)
    if dof <= 0:
        return RedNoiseFactor(math.nan, tuple(math.nan for _ in bin_minutes), tuple(bin_minutes),
                              tuple(0 for _ in bin_minutes))
    var1 = float(np.sum(zc**2) / dof)
    betas, counts = [], []
    for w in bin_minutes:
        num, den, nb = _bin_ratio(t, zc, sess, w / 1440.0)
        counts.append(nb)
        betas.append(math.sqrt(num / (den * var1)) if nb >= MIN_BINS and den > 0 and var1 > 0 else math.nan)
    good = [b for b in betas if np.isfinite(b)]
    beta = max(1.0, float(np.mean(good))) if good else math.nan
    return RedNoiseFactor(beta, tuple(betas), tuple(float(b) for b in bin_minutes), tuple(counts))


def red_noise_factor_reference(t_d, resid, err, session, width_minutes: float, n_params: int = 0) -> float:
    """Slow reference of one ``beta_per_bin`` value: explicit loops over sessions and bins."""
    t = [float(x) for x in t_d]
    z = [float(r) / float(e) for r, e in zip(resid, err)]
    sess = [int(s) for s in session]
    groups = {}
    for ti, zi, si in zip(t, z, sess):
        groups.setdefault(si, []).append((ti, zi))
    total_sq, n_tot = 0.0, 0
    centred = {}
    for s, pts in groups.items():
        mean = sum(p[1] for p in pts) / len(pts)
        centred[s] = [(p[0], p[1] - mean) for p in pts]
        total_sq += sum((p[1] - mean) ** 2 for p in pts)
        n_tot += len(pts)
    var1 = total_sq / (n_tot - len(groups) - n_params)
    width = width_minutes / 1440.0
    num = den = 0.0
    nb = 0
    for s, pts in centred.items():
        if len(pts) < 4:
            continue
        t0 = min(p[0] for p in pts)
        bins = {}
        for ti, zi in pts:
            bins.setdefault(int(math.floor((ti - t0) / width)), []).append(zi)
        for vals in bins.values():
            if len(vals) < 2:
                continue
            mean = sum(vals) / len(vals)
            num += len(vals) * mean * mean
            den += 1.0 - len(vals) / len(pts)
            nb += 1
    if nb < MIN_BINS:
        return math.nan
    return math.sqrt(num / (den * var1))
