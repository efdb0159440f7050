"""Benchmark: one physical-model evaluation (attitude + brightness) for a walker batch.

Measures, side by side in one run and on one core:

- the floor: the special functions and array operations a closed-form NPA
  evaluation cannot avoid when done per point (scipy ``ellipj``, ``elliprf``,
  ``elliprj``, one ``sin``/``cos`` pair, one batched 3x3 rotation of a vector),
  plus the Lommel-Seeliger brightness kernel itself;
- our model evaluation: ``tumble.dynamics.ecliptic_to_body`` (Fourier route)
  for the Sun and observer directions, then
  ``tumble.brightness.lommel_seeliger_ellipsoid``;
- the naive composition: per-point special functions (``method='direct'``),
  full matrices, ``R^T v``, brightness;
- the closed form against the ``solve_ivp`` reference on the same states.

Timings are process CPU time, the minimum over interleaved rounds (the machine
is shared), and the figures that matter are the ratios printed at the end.

Run:  .venv/bin/python benchmarks/bench_model.py [--states 64] [--points 1000]
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS", "VECLIB_MAXIMUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402
from scipy import special  # noqa: E402

from tumble import dynamics  # noqa: E402
from tumble.dynamics import RotationState, attitude_matrices, ecliptic_to_body  # noqa: E402
from tumble.dynamics_reference import integrate_state  # noqa: E402

try:  # the brightness module is developed alongside; the benchmark degrades gracefully
    from tumble.brightness import axes_from_inertia_ratios, lommel_seeliger_ellipsoid
except ImportError:  # pragma: no cover
    lommel_seeliger_ellipsoid = None
    axes_from_inertia_ratios = None

EPOCH = 2460000.5


def random_batch(rng, k):
    """K plausible NPA states, half SAM and half LAM, kept away from the separatrix."""
    i1 = rng.uniform(0.4, 0.75, k)
    i2 = rng.uniform(np.maximum(i1, 1 - i1) + 0.03, 0.98)
    sam = np.arange(k) % 2 == 0
    idd = np.where(sam, rng.uniform(i2 + 0.005, 0.999), rng.uniform(i1 + 0.01, i2 - 0.005))
    return (
        i1,
        i2,
        idd,
        rng.uniform(5.0, 100.0, k),  # p_psi_h
        rng.uniform(0, 360, k),
        np.degrees(np.arcsin(rng.uniform(-1, 1, k))),
        rng.uniform(0, 360, k),
        rng.uniform(0, 360, k),
        np.full(k, EPOCH),
    )


def geometry(rng, n):
    """Times over a 30-day campaign and slowly turning Sun/observer unit vectors (ecliptic)."""
    t = EPOCH + np.sort(rng.uniform(0, 30, n))
    a = 0.3 + 0.01 * (t - EPOCH)
    sun = np.stack([np.cos(a), np.sin(a), 0.05 * np.ones_like(a)], axis=-1)
    obs = np.stack([np.cos(a + 0.35), np.sin(a + 0.35), 0.1 * np.ones_like(a)], axis=-1)
    sun /= np.linalg.norm(sun, axis=-1, keepdims=True)
    obs /= np.linalg.norm(obs, axis=-1, keepdims=True)
    return t, np.stack([sun, obs])[:, None]  # (2, 1, n, 3)


def interleaved_timing(cases, rounds):
    """Minimum CPU time per case over interleaved rounds (each case run once per round).

    Process CPU time (``time.process_time``) rather than wall time: the machine
    is shared, and time spent descheduled is not the code's cost. Threads are
    pinned to one, so CPU time equals the one-core cost.
    """
    best = {name: np.inf for name in cases}
    for _ in range(rounds):
        for name, fn in cases.items():
            t0 = time.process_time()
            fn()
            best[name] = min(best[name], time.process_time() - t0)
    return best


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--states", type=int, default=64)
    ap.add_argument("--points", type=int, default=1000)
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--reference-states", type=int, default=3)
    ap.add_argument("--seed", type=int, default=20261201)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    k, n = args.states, args.points
    batch = random_batch(rng, k)
    t, vecs = geometry(rng, n)
    npts = k * n
    if axes_from_inertia_ratios is not None:
        axes = np.stack([np.asarray(axes_from_inertia_ratios(a, b), dtype=float) for a, b in zip(batch[0], batch[1])])
        axes = axes.reshape(k, 1, 3)
    else:
        axes = np.ones((k, 1, 3))

    # Inputs of the floor operations, same sizes (K x n points).
    const = dynamics._constants(batch[0], batch[1], batch[2])
    u = rng.uniform(-1, 1, (k, n)) * const.kk[:, None]
    m = np.broadcast_to(const.m[:, None], (k, n))
    sn, cn, dn, _ = special.ellipj(u, m)
    cc, dd = cn * cn, dn * dn
    pp = 1.0 - const.n[:, None] * sn * sn
    ang = rng.uniform(0, 6.3, (k, n))
    rmats = attitude_matrices(*batch, t)
    vcol = np.broadcast_to(vecs[0], (k, n, 3))[..., None]
    vb = ecliptic_to_body(*batch, t, vecs)

    def model_fast():
        body = ecliptic_to_body(*batch, t, vecs)
        if lommel_seeliger_ellipsoid is not None:
            return lommel_seeliger_ellipsoid(body[0], body[1], axes)
        return body

    def model_naive():
        r = attitude_matrices(*batch, t, method="direct")
        body = np.einsum("knji,sknj->skni", r, np.broadcast_to(vecs, (2, k, n, 3)))
        if lommel_seeliger_ellipsoid is not None:
            return lommel_seeliger_ellipsoid(body[0], body[1], axes)
        return body

    cases = {
        "ellipj": lambda: special.ellipj(u, m),
        "elliprf": lambda: special.elliprf(cc, dd, 1.0),
        "elliprj": lambda: special.elliprj(cc, dd, 1.0, pp),
        "sin+cos": lambda: (np.sin(ang), np.cos(ang)),
        "3x3 rotation (R^T v)": lambda: np.matmul(np.swapaxes(rmats, -1, -2), vcol),
        "brightness kernel (LS)": (lambda: lommel_seeliger_ellipsoid(vb[0], vb[1], axes))
        if lommel_seeliger_ellipsoid is not None
        else (lambda: None),
        "attitude matrices, Fourier": lambda: attitude_matrices(*batch, t),
        "attitude matrices, direct": lambda: attitude_matrices(*batch, t, method="direct"),
        "body vectors (Sun+obs), Fourier": lambda: ecliptic_to_body(*batch, t, vecs),
        "MODEL attitude+brightness (ours)": model_fast,
        "model, naive per-point route": model_naive,
    }
    for fn in cases.values():  # warm-up
        fn()
    best = interleaved_timing(cases, args.rounds)
    per_pt = {name: 1e6 * v / npts for name, v in best.items()}

    # Agreement of the fast and naive model values (same run).
    fast_val = model_fast()
    naive_val = model_naive()
    rel_dev = float(np.max(np.abs(fast_val - naive_val) / np.maximum(np.abs(naive_val), 1e-300)))

    floor_att = sum(per_pt[name] for name in ("ellipj", "elliprf", "elliprj", "sin+cos", "3x3 rotation (R^T v)"))
    floor_model = floor_att + per_pt["brightness kernel (LS)"]

    print(f"# bench_model: K = {k} states x n = {n} points, one thread, CPU time, min of {args.rounds} interleaved rounds")
    print(f"{'operation':36s} {'us/pt/state':>12s}")
    for name, v in per_pt.items():
        print(f"{name:36s} {v:12.4f}")
    print(f"{'floor (special fns + rotation)':36s} {floor_att:12.4f}")
    print(f"{'floor + brightness kernel':36s} {floor_model:12.4f}")
    ours = per_pt["MODEL attitude+brightness (ours)"]
    print()
    print(f"ratio model(ours) / (floor + brightness)  = {ours / floor_model:8.3f}   (target <= 3)")
    print(f"ratio model(ours) / floor (attitude only) = {ours / floor_att:8.3f}")
    print(f"ratio naive model / model(ours)           = {per_pt['model, naive per-point route'] / ours:8.3f}")
    print(f"ratio attitude direct / Fourier            = {per_pt['attitude matrices, direct'] / per_pt['attitude matrices, Fourier']:8.3f}")
    print(f"model(ours) us per point per state        = {ours:8.4f}   (target < 0.5)")
    print(f"max relative difference fast vs naive model = {rel_dev:.2e}")

    # Closed form versus the solve_ivp reference on the same states and times.
    # The integrator's cost is set by its steps (output comes from dense
    # interpolation), the closed form's by the number of points: compare at n
    # and at 10 n points per state.
    kr = args.reference_states
    states = [RotationState.excited(*(float(a[i]) for a in batch)) for i in range(kr)]
    print()
    for n_out in (n, 10 * n):
        t_ref_total = 0.0
        t_cf_total = 0.0
        worst = 0.0
        for s in states:
            tt = s.epoch_jd + np.linspace(0, 20 * s.p_psi_h / 24, n_out)
            t0 = time.process_time()
            ref = integrate_state(s, tt)
            t_ref_total += time.process_time() - t0
            s.attitude(tt)  # warm-up
            durations = []
            for _ in range(5):
                t0 = time.process_time()
                mats = s.attitude(tt)
                durations.append(time.process_time() - t0)
            t_cf_total += min(durations)
            diff = np.linalg.norm(ref.matrices - mats, axis=-2)
            worst = max(worst, float(np.max(2 * np.arcsin(np.clip(diff / 2, 0, 1)))))
        print(f"[{n_out} points over 20 P_psi, {kr} states]")
        print(f"  solve_ivp reference:                {1e3 * t_ref_total / kr:10.2f} ms per state")
        print(f"  closed form, one state per call:    {1e3 * t_cf_total / kr:10.3f} ms per state")
        print(f"  closed form in a 64-state batch:    {1e3 * best['attitude matrices, Fourier'] / k * n_out / n:10.3f} ms per state (scaled from the batch timing)")
        print(f"  speed-up, one state per call       = {t_ref_total / t_cf_total:10.0f}x")
        print(f"  speed-up, batched                  = {(t_ref_total / kr) / (best['attitude matrices, Fourier'] / k * n_out / n):10.0f}x")
        print(f"  max body-axis angle closed form vs reference = {worst:.2e} rad")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
