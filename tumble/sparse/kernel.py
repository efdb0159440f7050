"""Batched likelihood kernel of the sidereal-period and pole scan (linear bisector model).

For a PA ellipsoid the squared projected area seen along a unit vector ``e`` is
``e^T C e`` with ``C = diag(a^-2, b^-2, c^-2)`` in the body frame (Muinonen &
Lumme 2015, A&A 584, A23). With the spin axis ``p``, a frame ``(e1, e2, p)``
and the rotation angle ``phi = phi0 + 2 pi f t`` (f sidereal), write the
components of ``e`` in that frame as ``(rho cos th, rho sin th, u3)``; then
exactly

``e^T C e = Q + (P - Q) rho^2 + D rho^2 cos(2 (phi - th))``,

with ``P = (a^-2 + b^-2)/2``, ``Q = c^-2`` and ``D = (a^-2 - b^-2)/2``. Taking
``e`` along the phase-angle bisector (the PAB approximation, Harris et al.
1984, Icarus 57, 251; Magnusson et al. 1986) and expanding
``-1.25 log10(e^T C e)`` to second order in the modulation gives a magnitude
model that is **linear** once the pole and the frequency are fixed:

``m = zero-points + phase terms + k1 rho^2 + k2 rho^4
      + Re/Im[ c2 rho^2 e^{2i(2 pi f t - th)} ] + Re/Im[ c4 rho^4 e^{4i(2 pi f t - th)} ]``.

The azimuth ``th`` of the bisector in the pole frame moves with the geometry:
that motion is the difference between the sidereal and the synodic period, so
the scan's ``f`` is sidereal. The scan profiles every linear coefficient and
evaluates the chi-square for a batch of poles over a block of frequencies at
once: the trigonometric sums of the normal equations come from type-1 NUFFTs
(:class:`tumble.periodogram._kernels.UniformNufftEngine`) onto the block, and
the frequency grid is walked block by block, so the memory does not depend on
the span or the grid length (:data:`BLOCK_ELEMENTS`).

The model is only the search statistic; the fit itself uses the closed-form
ellipsoid brightness (:mod:`tumble.sparse.model`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tumble.periodogram import _kernels as K

__all__ = [
    "BLOCK_ELEMENTS",
    "ScanProblem",
    "pole_vectors",
    "pole_frame",
    "fibonacci_poles",
    "scan_problem",
    "pole_design",
    "PoleBatch",
    "prepare_poles",
    "chi2_block",
    "bisector_chi2",
    "bisector_chi2_reference",
]

#: Complex numbers held by the trigonometric sums of one block (poles x columns x frequencies):
#: 4e6 x 16 B = 64 MB, with the solve's temporaries a peak of a few hundred MB at most.
BLOCK_ELEMENTS = 4_000_000
#: Harmonics of the rotation frequency in the trigonometric part (2: the double-peaked
#: ellipsoid term; 4: its second-order term from the logarithm).
HARMONICS = (2, 4)
#: Relative ridge added to the 4x4 trigonometric normal matrix (keeps pole-on poles finite).
RIDGE = 1e-10
#: Requested relative accuracy of the NUFFT sums: the scan only ranks (pole, frequency) pairs,
#: and 1e-9 keeps the chi-square within ~1e-6 of the reference (tests/test_sparse.py).
NUFFT_EPS = 1e-9
#: Blocks of at most this many frequencies are summed directly (no NUFFT set-up).
DIRECT_MAX = 64
#: Columns whose weighted norm falls below this fraction of the largest are dropped (collinear).
COLLINEAR_TOL = 1e-8


def pole_vectors(lon_deg, lat_deg) -> np.ndarray:
    """Unit spin vectors (ecliptic J2000) from longitudes and latitudes in degrees, shape (..., 3)."""
    lon = np.radians(np.asarray(lon_deg, float))
    lat = np.radians(np.asarray(lat_deg, float))
    return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)


def pole_frame(p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit vectors ``e1, e2`` with ``(e1, e2, p)`` right-handed; ``e1`` in the ecliptic plane.

    ``e1 = z x p / |z x p|`` (the ascending node of the equator on the ecliptic);
    at the ecliptic poles ``e1 = x``. Shapes (..., 3).
    """
    p = np.asarray(p, float)
    px, py, pz = p[..., 0], p[..., 1], p[..., 2]
    rho = np.hypot(px, py)
    ok = rho > 1e-9
    r = np.where(ok, rho, 1.0)
    # e1 = z x p / |z x p| = (-py, px, 0) / rho; e2 = p x e1 = (-pz px, -pz py, rho^2) / rho
    e1 = np.stack([np.where(ok, -py / r, 1.0), np.where(ok, px / r, 0.0), np.zeros_like(px)], axis=-1)
    e2 = np.stack([np.where(ok, -pz * px / r, 0.0), np.where(ok, -pz * py / r, np.sign(pz) + (pz == 0)),
                   np.where(ok, rho, 0.0)], axis=-1)
    return e1, e2


def fibonacci_poles(n: int) -> tuple[np.ndarray, np.ndarray]:
    """``n`` nearly uniform directions over the whole sphere (Fibonacci lattice), (lon_deg, lat_deg).

    Spacing about ``sqrt(41253 / n)`` degrees (the sphere holds 41 253 square degrees).
    """
    i = np.arange(n) + 0.5
    lat = np.degrees(np.arcsin(1.0 - 2.0 * i / n))
    lon = np.mod(np.degrees(np.pi * (3.0 - np.sqrt(5.0)) * i), 360.0)
    return lon, lat


@dataclass(frozen=True, eq=False)
class ScanProblem:
    """Arrays of one light curve for the bisector scan.

    Attributes
    ----------
    t : numpy.ndarray, shape (n,)
        Model times minus ``epoch_jd``, days.
    y : numpy.ndarray, shape (n,)
        Reduced magnitudes, mag.
    w : numpy.ndarray, shape (n,)
        Weights 1/sigma^2, mag^-2.
    z0 : numpy.ndarray, shape (n, q0)
        Pole-independent nuisance columns (zero-points, phase terms).
    bisector : numpy.ndarray, shape (n, 3)
        Unit phase-angle bisectors (ecliptic J2000).
    epoch_jd : float
        Reference epoch (TDB JD).
    """

    t: np.ndarray
    y: np.ndarray
    w: np.ndarray
    z0: np.ndarray
    bisector: np.ndarray
    epoch_jd: float

    @property
    def n_points(self) -> int:
        return int(self.t.size)

    @property
    def n_columns(self) -> int:
        """Linear parameters per (pole, frequency): nuisance, two aspect terms, four trigonometric."""
        return int(self.z0.shape[1]) + 2 + 2 * len(HARMONICS)


def scan_problem(t, y, w, z0, sun_dir, obs_dir, epoch_jd: float) -> ScanProblem:
    """Build a :class:`ScanProblem`; the bisector is ``(s + o)/|s + o|``."""
    s = np.asarray(sun_dir, float)
    o = np.asarray(obs_dir, float)
    b = s + o
    b /= np.linalg.norm(b, axis=1, keepdims=True)
    return ScanProblem(np.asarray(t, float), np.asarray(y, float), np.asarray(w, float),
                       np.asarray(z0, float), b, float(epoch_jd))


def _aspect(problem: ScanProblem, poles: np.ndarray):
    """``rho^2`` (P, n) and ``exp(-i th)`` (P, n) of the bisector in each pole's frame."""
    e1, e2 = pole_frame(poles)
    u1 = e1 @ problem.bisector.T
    u2 = e2 @ problem.bisector.T
    rho2 = u1 * u1 + u2 * u2
    rho = np.sqrt(rho2)
    with np.errstate(invalid="ignore", divide="ignore"):
        eth = np.where(rho > 1e-12, (u1 - 1j * u2) / np.where(rho > 1e-12, rho, 1.0), 1.0)
    return rho2, eth


def pole_design(problem: ScanProblem, pole: np.ndarray, frequency_per_d: float) -> np.ndarray:
    """Full design matrix (n, q0 + 6) at one pole and one frequency (the reference's columns)."""
    rho2, eth = _aspect(problem, np.asarray(pole, float)[None])
    rho2, eth = rho2[0], eth[0]
    cols = [problem.z0, rho2[:, None], (rho2 * rho2)[:, None]]
    for k in HARMONICS:
        amp = rho2 ** (k // 2)
        ph = 2.0 * np.pi * np.mod(k * frequency_per_d * problem.t, 1.0)
        c = amp * np.exp(1j * ph) * eth**k
        cols += [c.real[:, None], c.imag[:, None]]
    return np.hstack(cols)


def _orthonormal_nuisance(problem: ScanProblem, rho2: np.ndarray):
    """Weighted orthonormal basis of [z0, rho^2, rho^4] per pole, (P, n, q), and y residuals (P, n).

    Collinear columns become zero columns so that every pole has the same q.
    """
    sw = np.sqrt(problem.w)
    n_pole = rho2.shape[0]
    q0 = problem.z0.shape[1]
    q = q0 + 2
    a = np.empty((n_pole, problem.n_points, q))
    a[:, :, :q0] = (sw[:, None] * problem.z0)[None]
    a[:, :, q0] = sw * rho2
    a[:, :, q0 + 1] = sw * rho2 * rho2
    u, sv, _ = np.linalg.svd(a, full_matrices=False)
    keep = sv > COLLINEAR_TOL * sv[:, :1]
    basis = u * keep[:, None, :]
    yw = sw * problem.y
    res = yw[None] - np.einsum("pnq,pq->pn", basis, np.einsum("pnq,n->pq", basis, yw))
    return basis, res  # res is sqrt(w) * (y - projection)


@dataclass(frozen=True, eq=False)
class PoleBatch:
    """Per-pole arrays of :func:`bisector_chi2`, built once for a batch of poles (:func:`prepare_poles`).

    Attributes
    ----------
    t : numpy.ndarray, shape (n,)
        Times relative to the epoch, days.
    rows : dict
        Strengths of the trigonometric sums by multiple of t: ``{2: (P, q+2, n), 4: (P, q+2, n),
        6: (P, 1, n), 8: (P, 1, n)}`` (complex).
    s22, s44 : numpy.ndarray, shape (P,)
        Frequency-free sums ``sum w |A_k|^2``.
    chi2_0 : numpy.ndarray, shape (P,)
        Chi-square of the nuisance-plus-aspect fit (no rotation terms).
    q : int
        Nuisance-plus-aspect columns.
    """

    t: np.ndarray
    rows: dict
    s22: np.ndarray
    s44: np.ndarray
    chi2_0: np.ndarray
    q: int

    @property
    def n_poles(self) -> int:
        return int(self.chi2_0.size)

    def block_length(self) -> int:
        """Frequencies per block so that the complex sums held at once stay near :data:`BLOCK_ELEMENTS`."""
        return max(64, int(BLOCK_ELEMENTS // (self.n_poles * (2 * self.q + 6))))


def prepare_poles(problem: ScanProblem, poles: np.ndarray) -> PoleBatch:
    """Aspect terms, nuisance projection and sum strengths for a batch of unit spin vectors (P, 3)."""
    poles = np.atleast_2d(np.asarray(poles, float))
    rho2, eth = _aspect(problem, poles)
    basis, res = _orthonormal_nuisance(problem, rho2)  # (P, n, q), (P, n)
    q = basis.shape[2]
    sw = np.sqrt(problem.w)
    a2 = rho2 * eth**2  # (P, n): rho^2 e^{-2 i th}
    a4 = rho2 * rho2 * eth**4
    sb = (sw[None, :, None] * basis).transpose(0, 2, 1)  # (P, q, n)
    rows = {
        2: np.concatenate([(sw * res * a2)[:, None], sb * a2[:, None, :], (problem.w * np.conj(a2) * a4)[:, None]],
                          axis=1),
        4: np.concatenate([(sw * res * a4)[:, None], sb * a4[:, None, :], (problem.w * a2 * a2)[:, None]], axis=1),
        6: (problem.w * a2 * a4)[:, None],
        8: (problem.w * a4 * a4)[:, None],
    }
    return PoleBatch(t=problem.t, rows=rows, s22=np.sum(problem.w * np.abs(a2) ** 2, axis=1),
                     s44=np.sum(problem.w * np.abs(a4) ** 2, axis=1), chi2_0=np.sum(res * res, axis=1), q=q)


def chi2_block(batch: PoleBatch, f0: float, df: float, n_freq: int) -> np.ndarray:
    """Chi-square (P, n_freq) of one block of frequencies ``f0 + k df`` (no blocking inside)."""
    freqs = f0 + df * np.arange(n_freq)
    if n_freq > DIRECT_MAX:
        engine = K.UniformNufftEngine(f0, df, n_freq, eps=NUFFT_EPS)
    else:
        engine = K.DirectEngine(freqs)
    t = batch.t
    sums = {}
    for k, rows in batch.rows.items():
        sums[k] = engine(k * t, rows.reshape(-1, t.size)).reshape(batch.n_poles, rows.shape[1], n_freq)
    return _solve_block(sums, batch.s22, batch.s44, batch.chi2_0, batch.q)


def bisector_chi2(problem: ScanProblem, poles: np.ndarray, f0: float, df: float, n_freq: int) -> np.ndarray:
    """Chi-square of the linear bisector model for every pole and frequency ``f0 + k df``.

    Parameters
    ----------
    problem : ScanProblem
    poles : numpy.ndarray, shape (P, 3)
        Unit spin vectors.
    f0, df : float
        First frequency and step of the uniform grid, cycles/day (sidereal).
    n_freq : int
        Number of frequencies.

    Returns
    -------
    numpy.ndarray, shape (P, n_freq)
        Weighted chi-square of the best linear fit.

    Notes
    -----
    Memory: the frequencies are processed in blocks of
    ``BLOCK_ELEMENTS / (P (2 q + 6))`` so that the complex sums held at once
    stay near :data:`BLOCK_ELEMENTS`, whatever the span and the grid length;
    only the (P, n_freq) output grows with the grid (the scan driver keeps
    just the best pole per frequency).
    """
    batch = prepare_poles(problem, poles)
    block = batch.block_length()
    out = np.empty((batch.n_poles, n_freq))
    for lo in range(0, n_freq, block):
        nb = min(block, n_freq - lo)
        out[:, lo:lo + nb] = chi2_block(batch, f0 + lo * df, df, nb)
    return out


def _solve_block(sums, s22, s44, chi2_0, q):
    """Assemble the 4x4 trigonometric systems of one block and return the chi-square (P, F).

    With ``P_k = A_k E_k`` the rotation columns are ``Re P2, Im P2, Re P4, Im P4``;
    their products come from ``Re(a)Re(b) = (Re(ab) + Re(a conj b))/2``,
    ``Im(a)Im(b) = (Re(a conj b) - Re(ab))/2`` and ``Re(a)Im(b) = (Im(ab) - Im(a conj b))/2``.
    The nuisance part is removed by the Schur complement ``G - H^T H`` and the
    gain ``b^T (G - H^T H)^-1 b`` comes from an element-wise 4x4 Cholesky
    factorisation over the whole block (pivots at the ridge count as zero).
    """
    r2 = sums[2][:, 0]  # sum sqrt(w) res P2      (P, F)
    r4 = sums[4][:, 0]
    h2 = sums[2][:, 1:q + 1]  # sum sqrt(w) basis_m P2  (P, q, F)
    h4 = sums[4][:, 1:q + 1]
    m24 = np.conj(sums[2][:, q + 1])  # sum w P2 conj(P4)   (the sum holds conj(A2) A4 E2)
    p22 = sums[4][:, q + 1]  # sum w P2 P2
    p24 = sums[6][:, 0]  # sum w P2 P4
    p44 = sums[8][:, 0]
    s22 = s22[:, None]
    s44 = s44[:, None]
    h = (h2.real, h2.imag, h4.real, h4.imag)
    g = {
        (0, 0): 0.5 * (p22.real + s22), (1, 1): 0.5 * (s22 - p22.real), (1, 0): 0.5 * p22.imag,
        (2, 2): 0.5 * (p44.real + s44), (3, 3): 0.5 * (s44 - p44.real), (3, 2): 0.5 * p44.imag,
        (2, 0): 0.5 * (p24.real + m24.real), (3, 1): 0.5 * (m24.real - p24.real),
        (3, 0): 0.5 * (p24.imag - m24.imag), (2, 1): 0.5 * (p24.imag + m24.imag),
    }
    for (i, j) in g:
        g[i, j] = g[i, j] - np.sum(h[i] * h[j], axis=1)
    b = (r2.real, r2.imag, r4.real, r4.imag)
    scale = g[0, 0] + g[1, 1] + g[2, 2] + g[3, 3]
    tiny = RIDGE * np.maximum(scale, 1e-300)
    lower = {}
    y = []
    gain = np.zeros_like(scale)
    for i in range(4):
        for j in range(i):
            v = g[i, j] - sum(lower[i, k] * lower[j, k] for k in range(j))
            lower[i, j] = v / lower[j, j]
        d = g[i, i] + tiny - sum(lower[i, k] ** 2 for k in range(i))
        ok = d > tiny
        lower[i, i] = np.sqrt(np.where(ok, d, 1.0))
        for j in range(i):  # a degenerate pivot: that direction carries nothing
            lower[i, j] = np.where(ok, lower[i, j], 0.0)
        yi = (b[i] - sum(lower[i, k] * y[k] for k in range(i))) / lower[i, i]
        yi = np.where(ok, yi, 0.0)
        y.append(yi)
        gain += yi * yi
    return np.maximum(chi2_0[:, None] - gain, 0.0)


def bisector_chi2_reference(problem: ScanProblem, poles: np.ndarray, frequencies_per_d) -> np.ndarray:
    """Slow reference of :func:`bisector_chi2`: one weighted ``numpy.linalg.lstsq`` per pole and frequency."""
    poles = np.atleast_2d(np.asarray(poles, float))
    freqs = np.atleast_1d(np.asarray(frequencies_per_d, float))
    sw = np.sqrt(problem.w)
    out = np.empty((poles.shape[0], freqs.size))
    for i, p in enumerate(poles):
        for j, f in enumerate(freqs):
            x = pole_design(problem, p, f) * sw[:, None]
            coef, *_ = np.linalg.lstsq(x, sw * problem.y, rcond=None)
            r = sw * problem.y - x @ coef
            out[i, j] = float(r @ r)
    return out
