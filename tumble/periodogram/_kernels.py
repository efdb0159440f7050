"""Pure array kernels of the period search: trigonometric sums and batched solves.

Nothing here knows about light curves. The scan kernel evaluates, at every
frequency ``f`` of a grid, the weighted least-squares chi-square of a model made
of

- a fixed *nuisance* part (zero-points, phase-angle slopes, fixed harmonics)
  that is profiled out group by group, and
- a *scanned* part: the real and imaginary parts of complex exponentials
  ``exp(2 pi i (alpha_a + k_a f) t)`` with fixed offsets ``alpha_a`` (cycles/day)
  and integer multipliers ``k_a >= 1``.

For a 1-D Fourier scan of order m the scanned basis is ``alpha_a = 0``,
``k_a = 1..m``; for the second-period scan of the 2-D series at fixed ``f1`` it
is ``alpha = j f1``, ``k = 1..m`` (j = -m..m).

Method (see ``docs/methods-period-search.md``): the normal equations are built
from trigonometric sums, never from a per-frequency design matrix.

* Products of two basis functions are sums and differences of frequencies:
  ``cos a cos b = [cos(a-b) + cos(a+b)] / 2`` etc., so the Gram matrix needs
  ``T(nu) = sum_i w_i exp(2 pi i nu t_i)`` at ``nu = (alpha_a +- alpha_b) +
  (k_a +- k_b) f``.
* The nuisance part is removed by the Schur complement
  ``A = X'WX - sum_c (V_c'X)' (V_c'X)``, where the columns ``V_c`` span the
  weighted nuisance space group by group. The correction needs the products
  of per-group sums; for small groups these are written as sums over *pairs*
  of points of the group, ``sum_{i,i'} K_ii' exp(2 pi i f (k_a t_i +- k_b t_i'))``,
  which are again trigonometric sums (over pair "times").
* Every such sum, for all frequencies of a uniform grid at once, is one type-1
  non-uniform FFT (Greengard & Lee 2004; the FINUFFT library, Barnett et al.
  2019); for an arbitrary grid a type-3 NUFFT; a plain matrix product is the
  small-problem engine.
* The small systems are solved in batches by a vectorised Cholesky
  factorisation of the augmented, Jacobi-scaled matrix ``[[A, b], [b', chi2_0]]``
  whose last pivot is the chi-square ``chi2_0 - b'A^-1 b``; the smallest pivot
  of the scaled ``A`` flags ill-conditioned frequencies, which the caller
  recomputes with the exact reference (QR least squares).
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

__all__ = [
    "single_thread_blas",
    "NuisanceGroup",
    "SumEngine",
    "UniformNufftEngine",
    "Type3NufftEngine",
    "DirectEngine",
    "make_engine",
    "scan_basis_chi2",
    "augmented_cholesky_chi2",
    "reference_basis_chi2",
    "is_uniform",
    "ExactChi2",
    "exact_evaluator",
    "projected_qr_chi2",
]

TWO_PI = 2.0 * np.pi

#: Requested relative accuracy of the NUFFT sums (FINUFFT ``eps``) with upsampling factor 2.
NUFFT_EPS = float(__import__("os").environ.get("TUMBLE_NUFFT_EPS", 1e-13))
#: FINUFFT upsampling factor (2 allows the high accuracy; 1.25 is faster but limited to ~1e-11).
NUFFT_UPSAMPFAC = float(__import__("os").environ.get("TUMBLE_NUFFT_UPSAMPFAC", 2.0))
_FFTW_ESTIMATE = 64  # FFTW planner flag: no measuring, plan at once


@dataclass(frozen=True)
class NuisanceGroup:
    """One group of points with its own nuisance columns, profiled out of every fit.

    Attributes
    ----------
    index : numpy.ndarray of int, shape (n_g,)
        Positions of the group's points in the light curve.
    v : numpy.ndarray, shape (n_g, q_g)
        ``W^(1/2) Q`` where ``Q`` (orthonormal columns) spans ``W^(1/2) Z_g``
        for the group's nuisance design ``Z_g`` (e.g. a column of ones for a
        zero-point, plus a phase-angle column). ``sum_c v[:, c] v[:, c]'`` is
        the weighted projector onto the nuisance space.
    """

    index: np.ndarray
    v: np.ndarray


def single_thread_blas():
    """Context manager limiting BLAS/OpenMP to one thread (threadpoolctl), or a no-op without it.

    The period search makes many small LAPACK calls (QR, least squares); with
    BLAS threads on a shared machine each of them slows down several-fold.
    """
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # pragma: no cover - optional
        import contextlib

        return contextlib.nullcontext()
    return threadpool_limits(limits=1, user_api="blas")


# ---------------------------------------------------------------------------
# Trigonometric-sum engines: out[r, n] = sum_j c[r, j] exp(2 pi i f_n tau_j).


class SumEngine:
    """Computes ``sum_j c_j exp(2 pi i f_n tau_j)`` for every grid frequency ``f_n``.

    ``risk_scale`` multiplies the ill-conditioning test of the callers: engines
    with less accurate sums send more frequencies to the exact QR solve.
    """

    frequencies: np.ndarray
    risk_scale: float = 1.0

    def __call__(self, tau: np.ndarray, c: np.ndarray) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError


def _phase(freq: float, tau: np.ndarray) -> np.ndarray:
    """``exp(2 pi i freq tau)`` with the cycle count reduced before multiplying by 2 pi."""
    cycles = np.mod(freq * tau, 1.0)
    return np.exp(1j * TWO_PI * cycles)


_PLANS = threading.local()
#: Largest total size of the fine grids held by cached FINUFFT plans (per thread).
_PLAN_CACHE_BYTES = 128e6


def _plan(n_modes: int, n_trans: int, eps: float, upsampfac: float):
    """A FINUFFT type-1 plan, cached per thread: a plan's set-up (kernel transform, fine-grid
    allocation) costs about as much as one execution, and a scan reuses a few shapes. At most
    16 plans and ``_PLAN_CACHE_BYTES`` of fine grids are kept."""
    import finufft

    cache = getattr(_PLANS, "plans", None)
    if cache is None:
        cache = _PLANS.plans = {}
    key = (n_modes, n_trans, eps, upsampfac)
    plan = cache.get(key)
    if plan is None:
        # bounded: each plan holds its fine grid (~ upsampfac n_modes n_trans complex numbers)
        held = sum(16.0 * k[0] * k[1] * k[3] for k in cache)
        if len(cache) >= 16 or held + 16.0 * n_modes * n_trans * upsampfac > _PLAN_CACHE_BYTES:
            cache.clear()
        plan = finufft.Plan(1, (n_modes,), n_trans=n_trans, eps=eps, isign=1, nthreads=1,
                            upsampfac=upsampfac, modeord=0, fftw=_FFTW_ESTIMATE)
        cache[key] = plan
    return plan


class UniformNufftEngine(SumEngine):
    """Type-1 NUFFT onto the uniform grid ``f_n = f0 + n df``, n = 0..F-1 (FINUFFT).

    ``exp(2 pi i f_n tau) = exp(2 pi i f0 tau) exp(i n x)`` with ``x = 2 pi df tau``
    reduced to [-pi, pi); the type-1 transform returns modes k = -F//2 .. F-F//2-1,
    so the strengths are multiplied by ``exp(i (F//2) x)`` to shift k to n.
    """

    def __init__(self, f0: float, df: float, n: int, eps: float = NUFFT_EPS, upsampfac: float = NUFFT_UPSAMPFAC):
        import finufft  # noqa: F401  (fail early if missing)

        self.upsampfac = float(upsampfac)
        self.f0 = float(f0)
        self.df = float(df)
        self.n = int(n)
        self.eps = float(eps)
        self.frequencies = self.f0 + self.df * np.arange(self.n)

    @property
    def centre_frequency(self) -> float:
        """``f0 + (F//2) df``: the strengths are multiplied by ``exp(2 pi i centre tau)``."""
        return self.f0 + (self.n // 2) * self.df

    def shift_table(self, t: np.ndarray, kmax: int) -> dict:
        """``{k: exp(2 pi i k centre t)}`` for |k| <= kmax, so that shifts of ``tau = k t`` or
        ``tau = k t_i + k' t_i'`` are products instead of exponentials."""
        fc = self.centre_frequency
        return {k: np.exp((1j * TWO_PI) * np.mod(k * fc * t, 1.0)) for k in range(-kmax, kmax + 1)}

    def __call__(self, tau, c, shift=None):
        import finufft

        tau = np.ascontiguousarray(tau, dtype=float)
        c = np.atleast_2d(c)
        if tau.size == 0:
            return np.zeros((c.shape[0], self.n), dtype=complex)
        x = self.df * tau
        if np.max(np.abs(x)) >= 0.5:  # reduce to [-pi, pi) (not needed for short spans)
            x = np.mod(x, 1.0)
            x[x >= 0.5] -= 1.0
        x *= TWO_PI
        # exp(2 pi i f0 tau) exp(i (F//2) x) = exp(2 pi i (f0 + (F//2) df) tau): one exponential
        if shift is None:
            shift = np.exp((1j * TWO_PI) * np.mod(tau * self.centre_frequency, 1.0))
        strengths = c * shift[None, :]
        n_trans = strengths.shape[0]
        plan = _plan(self.n, n_trans, self.eps, self.upsampfac)
        plan.setpts(x)
        if n_trans == 1:
            strengths = strengths[0]
        out = plan.execute(strengths)
        return np.asarray(out).reshape(n_trans, self.n)


class Type3NufftEngine(SumEngine):
    """Type-3 NUFFT (arbitrary times to arbitrary frequencies), for non-uniform grids.

    Its sums are about 50 times less accurate than the type-1 ones here, so the
    ill-conditioning test is 5 times stricter (``risk_scale``; measured in
    tests/test_periodogram.py against the lstsq reference).
    """

    risk_scale = 5.0

    def __init__(self, frequencies: np.ndarray, eps: float = NUFFT_EPS):
        import finufft  # noqa: F401

        self.frequencies = np.asarray(frequencies, dtype=float)
        self.eps = float(eps)

    def __call__(self, tau, c):
        import finufft

        c = np.atleast_2d(c)
        if np.size(tau) == 0:
            return np.zeros((c.shape[0], self.frequencies.size), dtype=complex)
        # centre times and frequencies so that the transform works on small numbers
        t_mid = 0.5 * (np.min(tau) + np.max(tau))
        f_mid = 0.5 * (self.frequencies.min() + self.frequencies.max())
        x = TWO_PI * (np.asarray(tau, float) - t_mid)
        s = self.frequencies - f_mid
        strengths = np.ascontiguousarray(c * _phase(f_mid, np.asarray(tau, float))[None, :], dtype=complex)
        out = np.empty((c.shape[0], s.size), dtype=complex)
        for r in range(c.shape[0]):
            out[r] = finufft.nufft1d3(x, strengths[r], s, eps=self.eps, isign=1, nthreads=1, upsampfac=2.0)
        # restore the exp(2 pi i (f - f_mid) t_mid) factor removed by centring the times
        return out * _phase_array(self.frequencies - f_mid, t_mid)[None, :]


def _phase_array(freqs: np.ndarray, tau: float) -> np.ndarray:
    return np.exp(1j * TWO_PI * np.mod(freqs * tau, 1.0))


class DirectEngine(SumEngine):
    """Plain summation, ``exp(2 pi i f tau) @ c``, in blocks (small problems, tests)."""

    def __init__(self, frequencies: np.ndarray, block: int = 2048):
        self.frequencies = np.asarray(frequencies, dtype=float)
        self.block = int(block)

    def __call__(self, tau, c):
        c = np.atleast_2d(c)
        tau = np.asarray(tau, dtype=float)
        out = np.empty((c.shape[0], self.frequencies.size), dtype=complex)
        for lo in range(0, self.frequencies.size, self.block):
            f = self.frequencies[lo:lo + self.block]
            e = np.exp(1j * TWO_PI * np.mod(np.outer(f, tau), 1.0))
            out[:, lo:lo + self.block] = (e @ c.T).T
        return out


def is_uniform(frequencies: np.ndarray, rtol: float = 1e-9) -> bool:
    """True when the grid is uniformly spaced (to ``rtol`` of its step) with at least 2 points."""
    f = np.asarray(frequencies, dtype=float)
    if f.size < 2:
        return False
    d = np.diff(f)
    return bool(d[0] > 0 and np.all(np.abs(d - d[0]) <= rtol * abs(d[0]) + 1e-12 * np.abs(f[1:])))


def make_engine(frequencies: np.ndarray, method: str = "auto") -> SumEngine:
    """Choose a sum engine: 'nufft' (type 1 on uniform grids, else type 3), 'direct', or 'auto'."""
    f = np.asarray(frequencies, dtype=float)
    if method == "direct":
        return DirectEngine(f)
    if method == "auto" and f.size <= 64:
        return DirectEngine(f)
    if is_uniform(f):
        df = (f[-1] - f[0]) / (f.size - 1)
        return UniformNufftEngine(f[0], df, f.size)
    return Type3NufftEngine(f)


# ---------------------------------------------------------------------------
# The scan kernel.


def _pair_arrays(groups, t):
    """Indices of the points of each pair (i, i') inside each paired group, and K_ii'."""
    pi, pj, kij = [], [], []
    for g in groups:
        idx = g.index
        k = g.v @ g.v.T
        a, b = np.meshgrid(idx, idx, indexing="ij")
        pi.append(a.ravel())
        pj.append(b.ravel())
        kij.append(k.ravel())
    if not pi:
        e = np.zeros(0, dtype=int)
        return e, e, np.zeros(0)
    return np.concatenate(pi), np.concatenate(pj), np.concatenate(kij)


def split_groups(groups, n_freq: int, n_basis: int):
    """Split nuisance groups into those handled by pair sums and those handled explicitly.

    Pair sums cost about ``2 n_b^2 n_g^2`` kernel spreadings; the explicit route
    costs ``q_g n_b`` extra transforms plus ``q_g n_b^2`` products per frequency.
    """
    paired, explicit = [], []
    for g in groups:
        n_g, q_g = g.v.shape
        cost_pairs = 2.0 * n_basis * n_basis * n_g * n_g * 16.0
        cost_explicit = q_g * n_basis * (40.0 * n_freq + 16.0 * n_g) + q_g * n_basis * n_basis * 8.0 * n_freq
        (paired if cost_pairs <= cost_explicit else explicit).append(g)
    return paired, explicit


def _is_constant_group(g: NuisanceGroup, w: np.ndarray) -> bool:
    """True for a single zero-point column over every point (``v`` proportional to the weights)."""
    if g.v.shape[1] != 1 or g.index.size != w.size:
        return False
    ratio = g.v[:, 0] / w[g.index]
    return bool(np.all(np.abs(ratio - ratio[0]) <= 1e-12 * np.abs(ratio[0])))


class _Phases:
    """``exp(2 pi i j f1 t)`` for integers j and each row's f1, computed once."""

    def __init__(self, f1, t, jmax):
        self.f1 = None if f1 is None else np.atleast_1d(np.asarray(f1, dtype=float))
        self.rows = 1 if self.f1 is None else self.f1.size
        self.jmax = int(jmax)
        if self.f1 is not None and self.jmax > 0:
            j = np.arange(-self.jmax, self.jmax + 1)
            cycles = np.mod(self.f1[:, None, None] * j[None, :, None] * t[None, None, :], 1.0)
            self.table = np.exp(1j * TWO_PI * cycles)  # (R, 2 jmax + 1, n)
        else:
            self.table = None

    def get(self, j: int, index=None):
        """Array (R, len) of exp(2 pi i j f1 t[index]); None when it is identically 1."""
        if self.table is None or j == 0:
            return None
        row = self.table[:, j + self.jmax]
        return row if index is None else row[:, index]


def _times_strength(rows, base, phase):
    """Broadcast a real base strength (len,) against optional phases (R, len) -> (R, len) complex."""
    if phase is None:
        return np.broadcast_to(base.astype(complex), (rows, base.size))
    return base[None, :] * phase


def _canonical(jj: int, kk: int):
    """Key of T(jj f1 + kk f) in the table of distinct sums, and whether it is the conjugate."""
    return ((jj, kk), False) if (kk > 0 or (kk == 0 and jj >= 0)) else ((-jj, -kk), True)


def _direct_sums(engine, t, w, ph, jm, km, ab, s_plus, s_minus, rows, n_freq, extra=()):
    """Fill S+(a,b) = T(nu_a + nu_b)/2 and S-(a,b) = T(nu_a - nu_b)/2 from distinct sums T(J f1 + K f).

    ``extra`` lists further (J, K) whose half-sums are wanted; the table of
    distinct half-sums ``{(J, K): T/2}`` is returned.
    """
    need = {}
    for jj, kk in extra:
        need[_canonical(int(jj), int(kk))[0]] = None
    for a, b in ab:
        for sign in (+1, -1):
            jj, kk = int(jm[a] + sign * jm[b]), int(km[a] + sign * km[b])
            key = (jj, kk) if (kk > 0 or (kk == 0 and jj >= 0)) else (-jj, -kk)
            need[key] = None
    by_k: dict = {}
    for jj, kk in need:
        by_k.setdefault(kk, []).append(jj)
    for kk, js in by_k.items():
        strengths = np.stack([_times_strength(rows, 0.5 * w, ph.get(jj)) for jj in js])
        flat = strengths.reshape(len(js) * rows, t.size)
        out = np.repeat(flat.sum(axis=1)[:, None], n_freq, axis=1) if kk == 0 else engine(kk * t, flat)
        out = out.reshape(len(js), rows, n_freq)
        for r, jj in enumerate(js):
            need[(jj, kk)] = out[r]
    for a, b in ab:
        for sign, target in ((+1, s_plus), (-1, s_minus)):
            jj, kk = int(jm[a] + sign * jm[b]), int(km[a] + sign * km[b])
            if kk > 0 or (kk == 0 and jj >= 0):
                target[(a, b)] = need[(jj, kk)]
            else:
                target[(a, b)] = np.conj(need[(-jj, -kk)])
    return need


def _real_transforms(engine, jobs, target, rows, n_freq):
    """Transforms whose results are known to be real, two per complex transform.

    ``sum_j (c_j + i d_j) e^(2 pi i f tau_j) = C(f) + i D(f)`` when C and D are
    real; two jobs with different times are packed by concatenating the times.
    """
    single = []
    for tau, c, key, _shift in jobs:  # c: (rows, P)
        n = c.shape[0]
        if not np.any(tau):
            target[key] = np.repeat(c.sum(axis=1).real[:, None], n_freq, axis=1).astype(complex)
            continue
        if n >= 2:
            pairs = n // 2
            packed = c[0:2 * pairs:2] + 1j * c[1:2 * pairs:2]
            out = engine(tau, packed)
            res = np.empty((n, n_freq), dtype=complex)
            res[0:2 * pairs:2] = out.real
            res[1:2 * pairs:2] = out.imag
            if n % 2:
                res[n - 1] = engine(tau, c[n - 1:n])[0].real
            target[key] = res
        else:
            single.append((tau, c[0], key, _shift))
    for i in range(0, len(single) - 1, 2):
        (ta, ca, ka, sa), (tb, cb, kb, sb) = single[i], single[i + 1]
        tab, cab = np.concatenate([ta, tb]), np.concatenate([ca, 1j * cb])[None, :]
        out = (engine(tab, cab) if sa is None or sb is None
               else engine(tab, cab, shift=np.concatenate([sa, sb])))[0]
        target[ka] = out.real.astype(complex)[None, :]
        target[kb] = out.imag.astype(complex)[None, :]
    if len(single) % 2:
        ta, ca, ka, _sa = single[-1]
        target[ka] = engine(ta, ca[None, :]).real.astype(complex)


def scan_basis_chi2(t, w, y_res, groups, jmult, kmult, engine: SumEngine, *, f1=None, paired=None,
                    explicit=None):
    """Chi-square of nuisance + scanned-basis model at every frequency of ``engine``.

    The scanned basis holds the real and imaginary parts of
    ``exp(2 pi i (j_a f1 + k_a f) t)``, a = 1..n_b, for each row's fixed ``f1``
    and each grid frequency ``f``.

    Parameters
    ----------
    t : numpy.ndarray, shape (n,)
        Times, days, relative to a reference epoch.
    w : numpy.ndarray, shape (n,)
        Weights 1/sigma^2, mag^-2.
    y_res : numpy.ndarray, shape (n,)
        Data with the nuisance fit removed (weighted residuals of the
        nuisance-only model), mag.
    groups : sequence of NuisanceGroup
        Nuisance columns (all mutually orthonormal in the weighted space);
        ignored when ``paired``/``explicit`` are given.
    jmult, kmult : sequence of int, length n_b
        Integer multipliers of ``f1`` and of the scanned frequency (k_a >= 0;
        k_a = 0 terms are fixed per row, e.g. the harmonics of ``f1``).
    engine : SumEngine
        Grid and trigonometric-sum engine.
    f1 : numpy.ndarray, shape (R,), or None
        Fixed frequency of each row, cycles/day (None: no ``j`` terms, one row).

    Returns
    -------
    chi2 : numpy.ndarray, shape (R, F)
        Chi-square at each (row, frequency) (nan where the factorisation failed).
    min_pivot : numpy.ndarray, shape (R, F)
        Smallest pivot of the Jacobi-scaled normal matrix (1 = orthogonal basis;
        small = ill-conditioned).
    """
    t = np.asarray(t, dtype=float)
    w = np.asarray(w, dtype=float)
    y_res = np.asarray(y_res, dtype=float)
    jm = np.asarray(jmult, dtype=int)
    km = np.asarray(kmult, dtype=int)
    n_b = km.size
    n_freq = engine.frequencies.size
    if paired is None or explicit is None:
        paired, explicit = split_groups(groups, n_freq, n_b)
    # a lone zero-point over all points (no pair sums) joins the basis as a real column: its
    # Gram entries T(nu_a) are among the distinct sums, so no per-group transforms or products
    const_group = None
    if not paired:
        const_group = next((g for g in explicit if _is_constant_group(g, w)), None)
        if const_group is not None:
            explicit = [g for g in explicit if g is not const_group]
    ph = _Phases(f1, t, 2 * int(np.max(np.abs(jm))) if n_b else 0)
    rows = ph.rows
    chi2_0 = float(np.sum(w * y_res**2))

    pi, pj, pk = _pair_arrays(paired, t)
    ab = [(a, b) for a in range(n_b) for b in range(a, n_b)]
    s_plus: dict = {}
    s_minus: dict = {}
    by_mult: dict = {}
    for a, b in ab:
        by_mult.setdefault((int(km[a]), int(km[b])), []).append((a, b))
    if pi.size == 0:
        # no pair sums: S+-(a, b) = T(nu_a +- nu_b) / 2 depends only on (j_a +- j_b, k_a +- k_b);
        # compute each distinct sum once (T(-nu) = conj T(nu)), batched by the multiplier of f
        extra = [(int(jm[a]), int(km[a])) for a in range(n_b)] if const_group is not None else ()
        need = _direct_sums(engine, t, w, ph, jm, km, ab, s_plus, s_minus, rows, n_freq, extra)
    else:
        real_jobs = []  # diagonal "minus" sums are real: pack two per complex transform
        kmax_all = 2 * int(np.max(km)) if n_b else 0
        table = engine.shift_table(t, kmax_all) if hasattr(engine, "shift_table") else None
        # the pair points' times and phase tables, gathered once (each transform combines them)
        t_pi, t_pj = t[pi], t[pj]
        tab_pi, tab_pj = {}, {}

        def gathered(cache, k, index):
            if k not in cache:
                cache[k] = table[k][index]
            return cache[k]

        for (ka, kb), combos in by_mult.items():
            for sign in (+1, -1):
                tau = np.empty(t.size + pi.size)
                np.multiply(t, ka + sign * kb, out=tau[: t.size])
                np.multiply(t_pi, ka, out=tau[t.size:])
                tau[t.size:] += (sign * kb) * t_pj
                shift = None
                if table is not None:
                    shift = np.empty(tau.size, dtype=complex)
                    shift[: t.size] = table[ka + sign * kb]
                    np.multiply(gathered(tab_pi, ka, pi), gathered(tab_pj, sign * kb, pj), out=shift[t.size:])
                strengths = np.empty((len(combos), rows, tau.size), dtype=complex)
                for r, (a, b) in enumerate(combos):
                    strengths[r, :, : t.size] = _times_strength(rows, 0.5 * w, ph.get(int(jm[a] + sign * jm[b])))
                    if pi.size:
                        pa, pb = ph.get(int(jm[a]), pi), ph.get(int(sign * jm[b]), pj)
                        phase = pa if pb is None else (pb if pa is None else pa * pb)
                        strengths[r, :, t.size:] = _times_strength(rows, -0.5 * pk, phase)
                target = s_plus if sign > 0 else s_minus
                if sign < 0:
                    diag = [r for r, (a, b) in enumerate(combos) if a == b]
                    for r in diag:
                        real_jobs.append((tau, strengths[r], combos[r], shift))
                    keep = [r for r in range(len(combos)) if r not in diag]
                else:
                    keep = list(range(len(combos)))
                if not keep:
                    continue
                flat = strengths[keep].reshape(len(keep) * rows, tau.size)
                if not np.any(tau):
                    out = np.repeat(flat.sum(axis=1)[:, None], n_freq, axis=1)
                else:
                    out = engine(tau, flat) if shift is None else engine(tau, flat, shift=shift)
                out = out.reshape(len(keep), rows, n_freq)
                for r, q in enumerate(keep):
                    target[combos[q]] = out[r]
        _real_transforms(engine, real_jobs, s_minus, rows, n_freq)
    if explicit:
        idx = np.concatenate([g.index for g in explicit])
        ncol = sum(g.v.shape[1] for g in explicit)
        vmat = np.zeros((ncol, idx.size))
        r0 = c0 = 0
        for g in explicit:
            n_g, q_g = g.v.shape
            vmat[c0:c0 + q_g, r0:r0 + n_g] = g.v.T
            r0 += n_g
            c0 += q_g
        te = t[idx]
        u = {}
        for k in np.unique(km):
            sel = np.flatnonzero(km == k)
            blocks = []
            for a in sel:
                phase = ph.get(int(jm[a]), idx)
                blocks.append(np.broadcast_to(vmat.astype(complex), (rows, ncol, idx.size)) if phase is None
                              else vmat[None, :, :] * phase[:, None, :])
            strengths = np.stack(blocks).reshape(sel.size * rows * ncol, idx.size)
            if k == 0:
                out = np.repeat(strengths.sum(axis=1)[:, None], n_freq, axis=1)
            else:
                out = engine(k * te, strengths)
            out = out.reshape(sel.size, rows, ncol, n_freq)
            for r, a in enumerate(sel):
                u[a] = out[r]
        for a, b in ab:
            s_plus[(a, b)] = s_plus[(a, b)] - 0.5 * np.sum(u[a] * u[b], axis=1)
            s_minus[(a, b)] = s_minus[(a, b)] - 0.5 * np.sum(u[a] * np.conj(u[b]), axis=1)
    y_sum = {}
    for k in np.unique(km):
        sel = np.flatnonzero(km == k)
        strengths = np.stack([_times_strength(rows, w * y_res, ph.get(int(jm[a]))) for a in sel])
        flat = strengths.reshape(sel.size * rows, t.size)
        out = np.repeat(flat.sum(axis=1)[:, None], n_freq, axis=1) if k == 0 else engine(k * t, flat)
        out = out.reshape(sel.size, rows, n_freq)
        for r, a in enumerate(sel):
            y_sum[a] = out[r]

    o = 0 if const_group is None else 1  # the constant column, if folded in, comes first
    p = 2 * n_b + o
    n_sys = rows * n_freq
    sum_w, sum_wy = float(np.sum(w)), float(np.sum(w * y_res))
    const_sums = []
    if o:
        for a in range(n_b):
            key, conj = _canonical(int(jm[a]), int(km[a]))
            const_sums.append((need[key].reshape(-1), -2.0 if conj else 2.0))
    flat_plus = {ab_: s_plus[ab_].reshape(-1) for ab_ in ab}
    flat_minus = {ab_: s_minus[ab_].reshape(-1) for ab_ in ab}
    flat_y = [y_sum[a].reshape(-1) for a in range(n_b)]
    chi2 = np.empty(n_sys)
    min_pivot = np.empty(n_sys)
    # assemble and factorise in cache-sized blocks of systems (one buffer, reused)
    block = min(n_sys, max(4096, int(6e6 // (8 * (p + 1) ** 2))))
    buf = np.empty((p + 1, p + 1, block))
    for lo in range(0, n_sys, block):
        hi = min(lo + block, n_sys)
        m = buf[:, :, : hi - lo]
        # lower triangle only (the factorisation reads nothing else)
        if o:
            # <1, 1>, <cos nu_a, 1>, <sin nu_a, 1> (= Re, Im T(nu_a)) and <y_res, 1>
            m[0, 0] = sum_w
            for a, (half, two) in enumerate(const_sums):
                np.multiply(half[lo:hi].real, 2.0, out=m[o + 2 * a, 0])
                np.multiply(half[lo:hi].imag, two, out=m[o + 2 * a + 1, 0])
            m[p, 0] = sum_wy
        for a, b in ab:
            sp, sm = flat_plus[(a, b)][lo:hi], flat_minus[(a, b)][lo:hi]
            ra, ia, rb, ib = o + 2 * a, o + 2 * a + 1, o + 2 * b, o + 2 * b + 1
            np.add(sm.real, sp.real, out=m[rb, ra])
            np.subtract(sm.real, sp.real, out=m[ib, ia])
            if a == b:
                np.add(sp.imag, sm.imag, out=m[ia, ra])
            else:
                np.subtract(sp.imag, sm.imag, out=m[ib, ra])
                np.add(sp.imag, sm.imag, out=m[rb, ia])
        for a in range(n_b):
            ys = flat_y[a][lo:hi]
            m[p, o + 2 * a] = ys.real
            m[p, o + 2 * a + 1] = ys.imag
        m[p, p] = chi2_0
        chi2[lo:hi], min_pivot[lo:hi] = augmented_cholesky_chi2(m, skip=o)
    return chi2.reshape(rows, n_freq), min_pivot.reshape(rows, n_freq)



def augmented_cholesky_chi2(m: np.ndarray, skip: int = 0):
    """Last pivot and smallest scaled pivot of a batch of augmented normal matrices.

    Parameters
    ----------
    m : numpy.ndarray, shape (p + 1, p + 1, B)
        ``[[A, b], [b', chi2_0]]`` for each of B systems; only the lower
        triangle is read (it is overwritten).
    skip : int
        The first ``skip`` unknowns (e.g. a folded-in zero-point) are eliminated
        first and left out of ``min_pivot``, which then describes their Schur
        complement, as if they had been projected out beforehand.

    Returns
    -------
    chi2 : numpy.ndarray, shape (B,)
        ``chi2_0 - b' A^-1 b`` (nan where A is not numerically positive definite).
    min_pivot : numpy.ndarray, shape (B,)
        Smallest pivot of the Jacobi-scaled A (a cheap inverse-condition indicator).

    Notes
    -----
    Outer-product Cholesky with loops over the small axis only; the pivots of
    the unit-diagonal (Jacobi-scaled) matrix are the pivots divided by the
    diagonal of A, since the factorisation commutes with diagonal scaling.
    The last pivot of the augmented matrix is the Schur complement
    ``chi2_0 - b' A^-1 b`` (e.g. Golub & Van Loan 2013, sec. 4.2).
    """
    p = m.shape[0] - 1
    # cache-sized blocks of systems (about 6 MB each; measured ~1.6x faster for 10^5 9x9 systems)
    block = max(4096, int(6e6 // (8 * (p + 1) ** 2)))
    if m.shape[2] > block:
        chi2 = np.empty(m.shape[2])
        min_pivot = np.empty(m.shape[2])
        for lo in range(0, m.shape[2], block):
            chi2[lo:lo + block], min_pivot[lo:lo + block] = augmented_cholesky_chi2(m[:, :, lo:lo + block], skip)
        return chi2, min_pivot
    bad = np.any(~(np.einsum("iib->ib", m[:p, :p]) > 0), axis=0)
    min_pivot = np.full(m.shape[2], np.inf)
    tmp = np.empty((p, m.shape[2]))
    diag = None
    with np.errstate(invalid="ignore", divide="ignore"):
        for j in range(p):
            if j == skip:
                diag = np.einsum("iib->ib", m[skip:p, skip:p]).copy()
            d = m[j, j]
            # the pivot of the Jacobi-scaled matrix is d / A_jj (Cholesky commutes with diagonal scaling)
            if j >= skip:
                np.minimum(min_pivot, d / diag[j - skip], out=min_pivot)
            bad |= ~(d > 0)
            d[~(d > 0)] = np.nan
            col = m[j + 1:, j]
            col /= np.sqrt(d)
            for i in range(j + 1, p + 1):
                # lower triangle only: row i, columns j+1..i (no temporaries)
                t = tmp[: i - j]
                np.multiply(col[: i - j], col[i - j - 1], out=t)
                np.subtract(m[i, j + 1:i + 1], t, out=m[i, j + 1:i + 1])
    chi2 = m[p, p].copy()
    chi2[bad] = np.nan
    min_pivot[bad] = 0.0
    return chi2, min_pivot


# ---------------------------------------------------------------------------
# Slow, obviously correct reference: one least-squares solve per frequency.


def design_matrix(t, freq, jmult, kmult, f1=0.0):
    """Columns cos/sin(2 pi (j_a f1 + k_a f) t) in the kernel's order (Re_a, Im_a, ...)."""
    nu = np.asarray(jmult, float) * float(f1) + np.asarray(kmult, float) * float(freq)
    ph = TWO_PI * np.mod(np.outer(t, nu), 1.0)
    x = np.empty((t.size, 2 * nu.size))
    x[:, 0::2] = np.cos(ph)
    x[:, 1::2] = np.sin(ph)
    return x


def reference_basis_chi2(t, y, w, z, jmult, kmult, frequencies, f1=0.0) -> np.ndarray:
    """Chi-square of ``[Z | X(f)]`` fitted by ``numpy.linalg.lstsq`` at each frequency.

    The slow reference for :func:`scan_basis_chi2`: build the weighted design at
    each frequency and solve the least-squares problem from scratch (SVD).

    Parameters
    ----------
    t, y, w : numpy.ndarray, shape (n,)
        Times (days), magnitudes (mag) and weights (mag^-2).
    z : numpy.ndarray, shape (n, q)
        Nuisance design (zero-point indicators, phase-angle columns).
    jmult, kmult : sequence of int
        Scanned exponentials, as in :func:`scan_basis_chi2`.
    frequencies : numpy.ndarray, shape (F,)
        Trial frequencies, cycles/day.
    f1 : float
        The fixed frequency of the ``j`` terms, cycles/day.
    """
    sw = np.sqrt(np.asarray(w, float))
    yw = sw * np.asarray(y, float)
    out = np.empty(np.size(frequencies))
    for n, f in enumerate(np.atleast_1d(frequencies)):
        x = np.hstack([z, design_matrix(t, f, jmult, kmult, f1)]) * sw[:, None]
        coef, *_ = np.linalg.lstsq(x, yw, rcond=None)
        r = yw - x @ coef
        out[n] = float(r @ r)
    return out


class ExactChi2:
    """Exact chi-square by Householder QR after projecting out the nuisance columns.

    Built once per light curve and basis (the dense orthonormal nuisance matrix and the weighted
    data are kept), then called for any number of frequencies; used for the frequencies the fast
    kernel flags as ill-conditioned and for every refinement, where one frequency at a time is
    evaluated (a lean path without batching overhead).

    The weighted design ``W^1/2 X(f)`` minus its projection on the (orthonormal) nuisance columns
    is factorised by QR (numerically stable; no normal equations): for ``[X | y] = QR`` the
    residual norm of the fit of y on X is ``|R[p, p]|`` (e.g. Golub & Van Loan 2013, sec. 5.3).
    Rank-deficient designs (coinciding frequencies) fall back to SVD least squares.
    """

    def __init__(self, t, w, y_res, groups, jmult, kmult):
        self.t = np.asarray(t, float)
        self.sw = np.sqrt(np.asarray(w, float))
        self.yw = self.sw * np.asarray(y_res, float)
        ncol = sum(g.v.shape[1] for g in groups)
        self.qdense = None
        if ncol:
            # all nuisance columns as one dense orthonormal matrix (weighted space)
            self.qdense = np.zeros((self.t.size, ncol))
            c0 = 0
            for g in groups:
                q_g = g.v.shape[1]
                self.qdense[g.index, c0:c0 + q_g] = g.v / self.sw[g.index, None]
                c0 += q_g
        self.jm = np.asarray(jmult, int)
        self.km = np.asarray(kmult, int)
        self.jmax = int(np.max(np.abs(self.jm))) if self.jm.size else 0
        self.kmax = int(np.max(self.km)) if self.km.size else 0
        self.p = 2 * self.km.size

    def _columns(self, e1, e2, out):
        """Fill out[..., 2a, :], out[..., 2a + 1, :] with the weighted Re, Im of e1^j_a e2^k_a.

        ``e1``, ``e2``: exp(2 pi i f1 t), exp(2 pi i f t), shape (..., n) (``e1`` None when no j != 0).
        """
        shape = e2.shape
        # powers 0..kmax of e2 (and 0..jmax of e1) by repeated products, stacked on a new axis
        pow2 = np.empty(shape[:-1] + (self.kmax + 1, shape[-1]), dtype=complex)
        pow2[..., 0, :] = 1.0
        for k in range(1, self.kmax + 1):
            np.multiply(pow2[..., k - 1, :], e2, out=pow2[..., k, :])
        z = pow2[..., self.km, :]
        if self.jmax and e1 is not None:
            pow1 = np.empty(shape[:-1] + (2 * self.jmax + 1, shape[-1]), dtype=complex)
            c = self.jmax
            pow1[..., c, :] = 1.0
            for j in range(1, self.jmax + 1):
                np.multiply(pow1[..., c + j - 1, :], e1, out=pow1[..., c + j, :])
            pow1[..., :c, :] = np.conj(pow1[..., c + 1:, :][..., ::-1, :])
            z *= pow1[..., c + self.jm, :]
        np.multiply(z.real, self.sw, out=out[..., 0:self.p:2, :])
        np.multiply(z.imag, self.sw, out=out[..., 1:self.p:2, :])

    def scalar(self, f: float, f1: float = 0.0) -> float:
        """Chi-square at one frequency ``f`` (and one ``f1``), cycles/day."""
        from scipy.linalg import lapack

        t, p = self.t, self.p
        e1 = np.exp((1j * TWO_PI) * np.mod(float(f1) * t, 1.0)) if self.jmax else None
        e2 = np.exp((1j * TWO_PI) * np.mod(float(f) * t, 1.0))
        xt = np.empty((p + 1, t.size))  # rows = columns of [X | y]: xt.T is Fortran-ordered
        self._columns(e1, e2, xt)
        xt[p] = self.yw
        if self.qdense is not None:
            # y_res is already orthogonal to the nuisance columns: project the design only
            xt[:p] -= (xt[:p] @ self.qdense) @ self.qdense.T
        qr, _tau, _work, info = lapack.dgeqrf(xt.T, overwrite_a=0)
        rd = np.abs(np.diag(qr[:p, :p]))
        if info != 0 or rd.size and np.min(rd) <= 1e-9 * np.max(rd):
            x = xt[:p].T
            coef, *_ = np.linalg.lstsq(x, self.yw, rcond=1e-10)
            res = self.yw - x @ coef
            return float(res @ res)
        return float(qr[p, p] ** 2)

    def __call__(self, frequencies, f1=0.0, block: int = 64) -> np.ndarray:
        """Chi-square at each frequency; ``f1`` is one fixed frequency for all or one per frequency."""
        t = self.t
        freqs = np.atleast_1d(np.asarray(frequencies, float))
        f1s = np.broadcast_to(np.asarray(f1, float), freqs.shape)  # one f1 for all, or one per frequency
        out = np.empty(freqs.size)
        p = self.p
        for lo in range(0, freqs.size, block):
            f = freqs[lo:lo + block]
            # exp(2 pi i (j f1 + k f) t) = e1^j e2^k: two exponentials per point, the rest products
            e1 = np.exp((1j * TWO_PI) * np.mod(f1s[lo:lo + block, None] * t[None, :], 1.0)) if self.jmax else None
            e2 = np.exp((1j * TWO_PI) * np.mod(f[:, None] * t[None, :], 1.0))
            # the weighted design and the data, one row per column ([X | y]'; each matrix Fortran-ordered)
            xt = np.empty((f.size, p + 1, t.size))
            self._columns(e1, e2, xt)
            xt[:, p] = self.yw
            if self.qdense is not None:
                # the groups' columns are mutually orthonormal: one projection removes them all
                # (y_res is already orthogonal to them: its row is left as it is)
                coef = np.matmul(xt, self.qdense)
                coef[:, p] = 0.0
                xt -= np.matmul(coef, self.qdense.T)
            rx = np.linalg.qr(xt.transpose(0, 2, 1), mode="r")
            out[lo:lo + block] = rx[:, p, p] ** 2
            # rank-deficient designs (coinciding frequencies): QR is not safe, use SVD least squares
            rd = np.abs(np.einsum("bii->bi", rx[:, :p, :p]))
            deficient = np.flatnonzero(np.min(rd, axis=1) <= 1e-9 * np.max(rd, axis=1))
            for b in deficient:
                x = xt[b, :p].T
                coef_b, *_ = np.linalg.lstsq(x, self.yw, rcond=1e-10)
                res = self.yw - x @ coef_b
                out[lo + b] = float(res @ res)
        return out


_EXACT = threading.local()


def exact_evaluator(data, jmult, kmult) -> ExactChi2:
    """The :class:`ExactChi2` of a light curve's prepared arrays (``data.t, w, y_res, groups``) and a
    basis, cached per thread for the few most recent (data, basis) pairs (a scan refines many peaks)."""
    key = (tuple(int(j) for j in jmult), tuple(int(k) for k in kmult))
    cache = getattr(_EXACT, "entries", None)
    if cache is None:
        cache = _EXACT.entries = []
    for d, k, ev in cache:
        if d is data and k == key:
            return ev
    ev = ExactChi2(data.t, data.w, data.y_res, data.groups, jmult, kmult)
    cache.append((data, key, ev))
    del cache[:-8]
    return ev


def projected_qr_chi2(t, w, y_res, groups, jmult, kmult, frequencies, f1=0.0, block: int = 64):
    """Exact chi-square by Householder QR after projecting out the nuisance columns (:class:`ExactChi2`).

    ``f1`` is one fixed frequency for all ``frequencies`` or one per frequency.
    """
    return ExactChi2(t, w, y_res, groups, jmult, kmult)(frequencies, f1=f1, block=block)
