"""Asteroid phase functions: reduced magnitude as a function of solar phase angle.

Each model is a pure function of the phase angle (degrees) and its parameters,
returning the reduced magnitude V(alpha) = H - 2.5 log10(Phi(alpha)).

References
----------
- IAU H,G system: Bowell, E. et al. (1989), "Application of photometric models
  to asteroids", in Asteroids II, 524-556 (adopted by IAU Commission 20 in 1985).
  Both the two-term approximation (valid to alpha <= 120 deg) and the precise
  form with the low-phase term are given there.
- H,G1,G2 and H,G12: Muinonen, K. et al. (2010), Icarus 209, 542-555; recommended
  by IAU Commission 15 in 2012.
- H,G12*: Penttila, A. et al. (2016), Planetary and Space Science 123, 117-125.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = [
    "hg_two_term",
    "hg_precise",
    "hg1g2",
    "hg12",
    "hg12_star",
    "g12_to_g1g2",
    "g12_star_to_g1g2",
    "hg_basis",
    "hg1g2_basis",
    "HG1G2Fit",
    "fit_hg1g2",
]

# Bowell et al. (1989): constants of the two-term approximation ...
_HG_APPROX_A = (3.33, 1.87)
_HG_APPROX_B = (0.63, 1.22)
# ... and of the precise form.
_HG_PRECISE_A = (3.332, 1.862)
_HG_PRECISE_B = (0.631, 1.218)
_HG_PRECISE_C = (0.986, 0.238)


def _alpha_rad(phase_deg):
    alpha = np.radians(np.asarray(phase_deg, dtype=float))
    if np.any(alpha < 0) or np.any(alpha > np.pi):
        raise ValueError("phase angle must lie in [0, 180] degrees")
    return alpha


def hg_basis(phase_deg, *, precise: bool = False):
    """The two basis functions (Phi1, Phi2) of the IAU H,G system.

    Parameters
    ----------
    phase_deg : array_like
        Solar phase angle, degrees.
    precise : bool
        Use the precise form with the low-phase (opposition) term instead of the
        common two-term exponential approximation (Bowell et al. 1989).
    """
    alpha = _alpha_rad(phase_deg)
    tan_half = np.tan(alpha / 2)
    if not precise:
        return tuple(np.exp(-a * tan_half**b) for a, b in zip(_HG_APPROX_A, _HG_APPROX_B))
    sin_a = np.sin(alpha)
    w = np.exp(-90.56 * tan_half**2)
    out = []
    for a, b, c in zip(_HG_PRECISE_A, _HG_PRECISE_B, _HG_PRECISE_C):
        phi_s = 1 - c * sin_a / (0.119 + 1.341 * sin_a - 0.754 * sin_a**2)
        phi_l = np.exp(-a * tan_half**b)
        out.append(w * phi_s + (1 - w) * phi_l)
    return tuple(out)


def hg_two_term(phase_deg, h_mag, g):
    """IAU H,G reduced magnitude with the two-term approximation (Bowell et al. 1989)."""
    phi1, phi2 = hg_basis(phase_deg, precise=False)
    return h_mag - 2.5 * np.log10((1 - g) * phi1 + g * phi2)


def hg_precise(phase_deg, h_mag, g):
    """IAU H,G reduced magnitude, precise form with the low-phase term (Bowell et al. 1989)."""
    phi1, phi2 = hg_basis(phase_deg, precise=True)
    return h_mag - 2.5 * np.log10((1 - g) * phi1 + g * phi2)


# Muinonen et al. (2010), Table 1: spline nodes (degrees), values and end
# derivatives (per radian) of the basis functions.
_PHI12_NODES_DEG = np.array([7.5, 30.0, 60.0, 90.0, 120.0, 150.0])
_PHI1_VALUES = np.array([0.75, 0.33486016, 0.13410560, 0.051104756, 0.021465687, 0.0036396989])
_PHI1_END_DERIV = (-1.9098593, -0.091328612)
_PHI2_VALUES = np.array([0.925, 0.62884169, 0.31755495, 0.12716367, 0.022373903, 1.6505689e-4])
_PHI2_END_DERIV = (-0.57295780, -8.6573138e-8)
_PHI3_NODES_DEG = np.array([0.0, 0.3, 1.0, 2.0, 4.0, 8.0, 12.0, 20.0, 30.0])
_PHI3_VALUES = np.array(
    [1.0, 0.83381185, 0.57735424, 0.42144772, 0.23174230, 0.10348178, 0.061733473, 0.016107006, 0.0]
)
# End derivative at 0 deg: -0.10630097 per rad, consistent with the tabulated
# node values; at 30 deg the function meets zero with zero slope (Muinonen et al. 2010).
_PHI3_END_DERIV = (-0.10630097, 0.0)


@lru_cache(maxsize=None)
def _splines():
    from scipy.interpolate import CubicSpline

    def clamped(nodes_deg, values, derivs):
        return CubicSpline(np.radians(nodes_deg), values, bc_type=((1, derivs[0]), (1, derivs[1])))

    return (
        clamped(_PHI12_NODES_DEG, _PHI1_VALUES, _PHI1_END_DERIV),
        clamped(_PHI12_NODES_DEG, _PHI2_VALUES, _PHI2_END_DERIV),
        clamped(_PHI3_NODES_DEG, _PHI3_VALUES, _PHI3_END_DERIV),
    )


def hg1g2_basis(phase_deg):
    """The three basis functions (Phi1, Phi2, Phi3) of the H,G1,G2 system (Muinonen et al. 2010).

    Below 7.5 deg Phi1 and Phi2 are linear (1 - 6 alpha/pi and 1 - 9 alpha/(5 pi));
    Phi3 is zero above 30 deg.
    """
    alpha = _alpha_rad(phase_deg)
    s1, s2, s3 = _splines()
    low = alpha < np.radians(7.5)
    phi1 = np.where(low, 1 - 6 * alpha / np.pi, s1(alpha))
    phi2 = np.where(low, 1 - 9 * alpha / (5 * np.pi), s2(alpha))
    phi3 = np.where(alpha < np.radians(30.0), s3(np.minimum(alpha, np.radians(30.0))), 0.0)
    return phi1, phi2, phi3


def hg1g2(phase_deg, h_mag, g1, g2):
    """H,G1,G2 reduced magnitude (Muinonen et al. 2010)."""
    phi1, phi2, phi3 = hg1g2_basis(phase_deg)
    return h_mag - 2.5 * np.log10(g1 * phi1 + g2 * phi2 + (1 - g1 - g2) * phi3)


def g12_to_g1g2(g12):
    """(G1, G2) from G12, the piecewise-linear mapping of Muinonen et al. (2010)."""
    g12 = np.asarray(g12, dtype=float)
    g1 = np.where(g12 < 0.2, 0.7527 * g12 + 0.06164, 0.9529 * g12 + 0.02162)
    g2 = np.where(g12 < 0.2, -0.9612 * g12 + 0.6270, -0.6125 * g12 + 0.5572)
    return g1, g2


def g12_star_to_g1g2(g12_star):
    """(G1, G2) from G12*, the mapping of Penttila et al. (2016)."""
    g = np.asarray(g12_star, dtype=float)
    return 0.84293649 * g, 0.53513350 * (1 - g)


def hg12(phase_deg, h_mag, g12):
    """H,G12 reduced magnitude (Muinonen et al. 2010)."""
    g1, g2 = g12_to_g1g2(g12)
    return hg1g2(phase_deg, h_mag, g1, g2)


def hg12_star(phase_deg, h_mag, g12_star):
    """H,G12* reduced magnitude (Penttila et al. 2016)."""
    g1, g2 = g12_star_to_g1g2(g12_star)
    return hg1g2(phase_deg, h_mag, g1, g2)


@dataclass(frozen=True)
class HG1G2Fit:
    """A fitted H,G1,G2 phase curve (Muinonen et al. 2010).

    Attributes
    ----------
    h_mag : float
        Absolute magnitude H, mag.
    g1, g2 : float
        The two slope parameters (non-negative, G1 + G2 <= 1 by construction of the fit).
    rms_mag : float
        Rms of the residuals, mag.
    n_points : int
    """

    h_mag: float
    g1: float
    g2: float
    rms_mag: float
    n_points: int

    def reduced_mag(self, phase_deg):
        """The fitted curve at ``phase_deg``, mag."""
        return hg1g2(phase_deg, self.h_mag, self.g1, self.g2)


def fit_hg1g2(phase_deg, reduced_mag, err=None) -> HG1G2Fit:
    """Fit H, G1, G2 to reduced magnitudes against phase angle.

    The linear form of Muinonen et al. (2010, Icarus 209, 542, eq. 22): in flux,
    ``10**(-0.4 V) = a1 Phi1 + a2 Phi2 + a3 Phi3`` with non-negative ``a`` (scipy's NNLS), weighted
    by the flux errors; then ``H = -2.5 log10(a1 + a2 + a3)``, ``G1 = a1 / sum``, ``G2 = a2 / sum``.
    """
    from scipy.optimize import nnls

    alpha = np.asarray(phase_deg, float)
    v = np.asarray(reduced_mag, float)
    e = np.full(v.shape, 0.05) if err is None else np.asarray(err, float)
    ok = np.isfinite(alpha) & np.isfinite(v) & np.isfinite(e) & (e > 0)
    if ok.sum() < 3:
        raise ValueError("an H,G1,G2 fit needs at least three points with phase angles")
    alpha, v, e = alpha[ok], v[ok], e[ok]
    flux = 10.0 ** (-0.4 * v)
    sigma = 0.4 * np.log(10.0) * flux * e  # error propagation of m -> flux
    basis = np.column_stack(hg1g2_basis(alpha))
    a, _ = nnls(basis / sigma[:, None], flux / sigma)
    total = float(a.sum())
    if not total > 0:
        raise ValueError("the H,G1,G2 fit found no positive solution")
    fit = HG1G2Fit(h_mag=-2.5 * math.log10(total), g1=float(a[0] / total), g2=float(a[1] / total),
                   rms_mag=math.nan, n_points=int(v.size))
    rms = float(np.sqrt(np.mean((v - fit.reduced_mag(alpha)) ** 2)))
    return HG1G2Fit(fit.h_mag, fit.g1, fit.g2, rms, fit.n_points)
