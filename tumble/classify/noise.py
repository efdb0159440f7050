"""The noise model of the evidence: model-error floors and the error-scale bound, robust weights."""

from __future__ import annotations

import math

import numpy as np

from tumble.model import FourierBasis, fit_linear, prepare_linear

__all__ = ["MODEL_ERROR_FLOOR_MAG", "GEOMETRY_FLOOR_PER_AMPLITUDE", "GEOMETRY_FLOOR_SCALE_DEG",
           "GEOMETRY_RATE_UNKNOWN_DEG_PER_D", "QUOTED_ERROR_SCALE_MIN", "geometry_change_deg",
           "geometry_error_floor", "error_scale_floor", "robust_weights"]

#: Model-error floor (mag) added in quadrature to the errors for the evidence: neither shape-free
#: family describes a real body better than about this (common practice for the accuracy of
#: Fourier-series light-curve fits).
MODEL_ERROR_FLOOR_MAG = 0.01
#: Model-error floor per unit light-curve amplitude at a geometry change of
#: :data:`GEOMETRY_FLOOR_SCALE_DEG` or more (see :func:`geometry_error_floor`).
GEOMETRY_FLOOR_PER_AMPLITUDE = 0.08
#: Geometry change (deg) at which the amplitude-relative floor reaches its full value.
GEOMETRY_FLOOR_SCALE_DEG = 20.0
#: Geometry change per day assumed when the data carry no Sun/observer directions (deg/day).
GEOMETRY_RATE_UNKNOWN_DEG_PER_D = 0.25
#: The quoted errors are trusted down to this factor (they may be over-stated, but not by more).
QUOTED_ERROR_SCALE_MIN = 0.7
#: Student-t degrees of freedom of the robust weights (Lange, Little & Taylor 1989 use 4 as a default).
ROBUST_NU = 4.0
#: MAD to standard deviation for a normal distribution.
MAD_TO_SIGMA = 1.4826


def geometry_change_deg(lc) -> float:
    """How much the viewing and illumination geometry change over the data, degrees.

    The larger of the phase-angle range and the largest angle between the phase-angle
    bisector at any time and its mean direction (the aspect and synodic drivers of light-curve
    changes; Harris et al. 1984, Icarus 57, 251). Without Sun/observer directions, the span times
    :data:`GEOMETRY_RATE_UNKNOWN_DEG_PER_D` (capped at 30 deg).
    """
    if lc.sun_dir is not None and lc.obs_dir is not None:
        s = np.asarray(lc.sun_dir, float)
        o = np.asarray(lc.obs_dir, float)
        alpha = np.degrees(np.arccos(np.clip(np.sum(s * o, axis=1), -1, 1)))
        b = s + o
        b /= np.maximum(np.linalg.norm(b, axis=1), 1e-12)[:, None]
        m = b.mean(axis=0)
        m /= max(np.linalg.norm(m), 1e-12)
        spread = float(np.degrees(np.arccos(np.clip(b @ m, -1, 1))).max())
        return max(float(np.ptp(alpha)), 2.0 * spread)
    if lc.phase_deg is not None and np.ptp(lc.phase_deg) > 0:
        return max(float(np.ptp(lc.phase_deg)), min(30.0, lc.span_d * GEOMETRY_RATE_UNKNOWN_DEG_PER_D))
    return min(30.0, lc.span_d * GEOMETRY_RATE_UNKNOWN_DEG_PER_D)


def geometry_error_floor(lc, amplitude_mag: float) -> float:
    """Model-error floor of the shape-free families for this light curve, mag.

    ``max(MODEL_ERROR_FLOOR_MAG, GEOMETRY_FLOOR_PER_AMPLITUDE * A * min(1, G / GEOMETRY_FLOOR_SCALE_DEG))``
    with ``A`` the peak-to-peak amplitude of a one-period fit and ``G`` the geometry change
    (:func:`geometry_change_deg`). A real body's light curve changes shape with aspect and phase
    angle by a fraction of its amplitude (amplitudes grow by a few per cent per degree of phase angle, the amplitude-phase
    relation of Zappala et al. 1990, A&A 231, 548; slope values from memory), and the one-period family with drifting coefficients follows
    that only approximately; left as white noise, the residual shape change would be taken as evidence
    for the richer two-period family on precise, long-span data.
    """
    g = geometry_change_deg(lc)
    return max(MODEL_ERROR_FLOOR_MAG, GEOMETRY_FLOOR_PER_AMPLITUDE * float(amplitude_mag) * min(1.0, g / GEOMETRY_FLOOR_SCALE_DEG))


def error_scale_floor(lc, floor_mag: float) -> float:
    """Lower bound ``kappa_min`` of the error scale of the floor-inflated errors.

    The noise is ``kappa_q^2 err^2 + floor^2`` with the quoted-error factor ``kappa_q >=``
    :data:`QUOTED_ERROR_SCALE_MIN` and the model-error floor irreducible, so relative to the
    inflated errors ``sqrt(err^2 + floor^2)`` (median error) the scale is at least
    ``sqrt((k0^2 err^2 + floor^2) / (err^2 + floor^2))``. No family is then credited for fitting
    the data more closely than that: without the bound, a model-error residual of a PA body under
    changing geometry, absorbed by the richer two-period family, would count as evidence in
    proportion to the number of points, however precise the photometry.
    """
    e2 = float(np.median(np.asarray(lc.err, float))) ** 2
    f2 = float(floor_mag) ** 2
    k0 = QUOTED_ERROR_SCALE_MIN
    return math.sqrt((k0 * k0 * e2 + f2) / (e2 + f2))


def robust_weights(lc, *, nu: float = ROBUST_NU, p_min_h: float = 0.5, p_max_h: float = 2000.0):
    """Student-t (``nu`` degrees of freedom) weights of the points about the best two-period fit.

    One iteratively-reweighted step: ``w = (nu + 1) / (nu + (r / (kappa err))^2)``, scaled so
    that the largest is 1 (Lange, Little & Taylor 1989, J. Am. Statist. Assoc. 84, 881).
    The two-period fit is used because it is the richer model: a tumbler's signal is not
    mistaken for outliers of a one-period fit.

    Returns
    -------
    weights : numpy.ndarray, shape (n,)
    n_down : int
        Points with weight below one half.
    """
    from tumble.classify.evidence import fourier_evidence
    from tumble.classify.families import PA_VARIANTS, npa_variants

    ev = fourier_evidence(lc, p_min_h=p_min_h, p_max_h=p_max_h, n_windows=2)
    data = prepare_linear(lc)
    if np.isfinite(ev.f2_per_d):
        variants = npa_variants(PA_VARIANTS)
        basis = FourierBasis.build(variants)
        fitr = fit_linear(data, basis, len(variants) - 1, ev.f1_npa_per_d, ev.f2_per_d)
    else:
        basis = FourierBasis.build(PA_VARIANTS)
        fitr = fit_linear(data, basis, len(PA_VARIANTS) - 1, ev.f1_per_d)  # H=6+drift3: the richest fixed variant
    r = (data.y - fitr.model_mag) / np.asarray(lc.err)
    kappa = max(MAD_TO_SIGMA * float(np.median(np.abs(r))), 1e-12)
    w = (nu + 1.0) / (nu + (r / kappa) ** 2)
    w = w / w.max()
    return w, int(np.sum(w < 0.5))


