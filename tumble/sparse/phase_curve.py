"""H,G1,G2 and H,G12 fits of a phase curve (Muinonen et al. 2010, Icarus 209, 542).

In flux the H,G1,G2 model is linear, ``10^(-0.4 V) = a1 Phi1 + a2 Phi2 + a3 Phi3``,
with ``H = -2.5 log10(a1 + a2 + a3)``, ``G1 = a1 / (a1 + a2 + a3)`` and
``G2 = a2 / (a1 + a2 + a3)`` (Muinonen et al. 2010, section 3): weighted linear
least squares in flux (errors ``0.4 ln 10 F sigma_mag``) gives the parameters
without iteration. H,G12 is a one-parameter search over G12 with H linear.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import optimize

from tumble.phase_function import g12_to_g1g2, hg1g2_basis
from tumble.sparse.model import SparseFitError

__all__ = ["PhaseCurveFit", "fit_phase_curve"]

#: Factor from magnitude errors to relative flux errors: d F / F = 0.4 ln(10) d m.
MAG_TO_FLUX = 0.4 * math.log(10.0)


@dataclass(frozen=True)
class PhaseCurveFit:
    """Result of :func:`fit_phase_curve`.

    Attributes
    ----------
    model : str
        'hg1g2' or 'hg12'.
    h_mag : float
        Absolute magnitude H, mag.
    g1, g2 : float
        Phase parameters (for 'hg12' from G12 by the Muinonen et al. 2010 mapping).
    g12 : float
        G12 ('hg12' only; nan otherwise).
    chi2 : float
        Chi-square in magnitudes at the quoted errors.
    n_points : int
    """

    model: str
    h_mag: float
    g1: float
    g2: float
    g12: float
    chi2: float
    n_points: int


def _check(phase_deg, mag, err):
    a = np.asarray(phase_deg, float)
    m = np.asarray(mag, float)
    e = np.ones_like(m) * 0.01 if err is None else np.broadcast_to(np.asarray(err, float), m.shape)
    if a.shape != m.shape or a.ndim != 1:
        raise SparseFitError("phase curve: phase_deg and mag must be 1-D arrays of the same length")
    if a.size < 3:
        raise SparseFitError(f"phase curve: {a.size} points are too few (need 3)")
    if not (np.all(np.isfinite(a)) and np.all(np.isfinite(m)) and np.all(e > 0)):
        raise SparseFitError("phase curve: phase angles and magnitudes must be finite and errors positive")
    if np.any(a < 0) or np.any(a > 150):
        raise SparseFitError("phase curve: phase angles must lie in [0, 150] degrees (the basis' range)")
    return a, m, e


def _mag_chi2(a, m, e, h, g1, g2):
    p1, p2, p3 = hg1g2_basis(a)
    model = h - 2.5 * np.log10(np.maximum(g1 * p1 + g2 * p2 + (1 - g1 - g2) * p3, 1e-12))
    return float(np.sum(((m - model) / e) ** 2))


def fit_phase_curve(phase_deg, mag, err=None, *, model: str = "hg1g2") -> PhaseCurveFit:
    """Fit H,G1,G2 (linear in flux) or H,G12 to reduced magnitudes.

    Parameters
    ----------
    phase_deg : array_like, shape (n,)
        Solar phase angles, degrees.
    mag : array_like, shape (n,)
        Reduced magnitudes (unit distances), mag.
    err : array_like or None
        1-sigma errors, mag (default 0.01 for all).
    model : {'hg1g2', 'hg12'}

    Returns
    -------
    PhaseCurveFit
    """
    a, m, e = _check(phase_deg, mag, err)
    p1, p2, p3 = hg1g2_basis(a)
    f = 10.0 ** (-0.4 * m)
    sf = MAG_TO_FLUX * f * e
    if model == "hg1g2":
        x = np.column_stack([p1, p2, p3]) / sf[:, None]
        coef, *_ = np.linalg.lstsq(x, f / sf, rcond=None)
        total = float(np.sum(coef))
        if not total > 0:
            raise SparseFitError("phase curve: the fitted total flux is not positive; the data do not define H")
        g1, g2 = float(coef[0] / total), float(coef[1] / total)
        h = -2.5 * math.log10(total)
        return PhaseCurveFit("hg1g2", h, g1, g2, float("nan"), _mag_chi2(a, m, e, h, g1, g2), int(a.size))
    if model == "hg12":
        def h_and_chi2(g12):
            g1, g2 = (float(v) for v in g12_to_g1g2(g12))
            phi = g1 * p1 + g2 * p2 + (1 - g1 - g2) * p3
            col = phi / sf
            amp = float(np.sum(col * f / sf) / np.sum(col * col))
            return amp, float(np.sum((f / sf - amp * col) ** 2)), g1, g2

        res = optimize.minimize_scalar(lambda g: h_and_chi2(g)[1], bounds=(-0.5, 1.5), method="bounded",
                                       options={"xatol": 1e-9})
        g12 = float(res.x)
        amp, _, g1, g2 = h_and_chi2(g12)
        if not amp > 0:
            raise SparseFitError("phase curve: the fitted flux is not positive; the data do not define H")
        h = -2.5 * math.log10(amp)
        return PhaseCurveFit("hg12", h, g1, g2, g12, _mag_chi2(a, m, e, h, g1, g2), int(a.size))
    raise SparseFitError(f"phase curve: unknown model '{model}' (choose from hg1g2, hg12)")
