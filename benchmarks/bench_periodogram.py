"""Benchmark of the period search, with every comparison measured side by side in one run.

Usage::

    python benchmarks/bench_periodogram.py            # everything (several minutes)
    python benchmarks/bench_periodogram.py --quick    # smaller grids, for a smoke run
    python benchmarks/bench_periodogram.py --part 1d  # or 2d, 2d-sessions, scaling, 2d-search

Threads are pinned to one before numpy is imported (OPENBLAS/OMP/MKL), and
nifty-ls and FINUFFT are called with nthreads=1. The figures are recorded in
docs/performance-period-search.md.

Set-up (from the issue): N = 1000 points over 30 nights, 10^5 trial frequencies,
order 4; tumble with one free zero-point per night, nifty-ls ``finufft_chi2``
(nterms=4) and astropy ``fastchi2`` without offsets. 2-D: N = 1000, order 2, a
1000 x 1000 (P1, P2) grid against one ``lstsq`` per pair, timed on a random
subset of pairs and extrapolated. The two-period search (``two_period_scan``, order 2, as the survey
screen calls it) is timed on invented sparse light curves (200 points over 120 days) and on the Gault
ZTF file, side by side with the same search on a 2.5x denser P2 grid and with the 1-D scan.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

JD0 = 2460500.5


def campaign(n_points: int, n_nights: int = 30, seed: int = 1, sessions: bool = True):
    """An invented 30-night campaign: nightly runs of 3-8 h, a double-peaked 6.4-h rotator."""
    from tumble.photometry import LightCurve

    rng = np.random.default_rng(seed)
    nights = np.sort(rng.choice(45, n_nights, replace=False)).astype(float)
    per = np.full(n_nights, n_points // n_nights)
    per[: n_points - per.sum()] += 1
    t = np.concatenate([JD0 + n + 0.05 + np.sort(rng.uniform(0, rng.uniform(3, 8) / 24, k))
                        for n, k in zip(nights, per)])
    sess = np.repeat(np.arange(n_nights), per)
    ph = 2 * np.pi * (t - JD0) * 24 / 6.4
    err = rng.uniform(0.01, 0.03, t.size)
    y = (15 + 0.25 * np.cos(2 * ph) + 0.05 * np.cos(ph + 1) + 0.03 * np.cos(3 * ph) + 0.02 * np.sin(4 * ph)
         + rng.normal(0, err) + (rng.normal(0, 0.1, n_nights)[sess] if sessions else 0.0))
    return LightCurve.from_arrays(t, y, err, session=sess, band="R", object_id="2044 BK3")


def timed(fn, repeat=3):
    best = np.inf
    out = None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def nifty_chi2(lc, data, fmin, df, nf, nterms=4):
    import nifty_ls

    t = np.asarray(lc.t) - data.epoch_jd
    res = nifty_ls.lombscargle(t, np.asarray(lc.mag), np.asarray(lc.err), fmin=fmin, fmax=fmin + df * (nf - 1),
                               Nf=nf, nterms=nterms, backend="finufft_chi2", nthreads=1,
                               normalization="standard")
    power = np.asarray(res.power)
    return power


def part_1d(quick: bool) -> dict:
    from astropy.timeseries import LombScargle

    from tumble.periodogram import fourier_chi2, fourier_chi2_reference, prepare

    n_freq = 20_000 if quick else 100_000
    lc = campaign(1000)
    data = prepare(lc, sessions=True)
    data0 = prepare(lc, sessions=False)
    fmin, fmax = 0.05, 48.0
    df = (fmax - fmin) / (n_freq - 1)
    freqs = fmin + df * np.arange(n_freq)
    out = {"n_points": lc.n_points, "n_sessions": lc.n_sessions, "n_freq": n_freq, "order": 4}

    t_ours, chi2 = timed(lambda: fourier_chi2(lc, freqs, order=4, sessions=True))
    t_ours0, chi2_0 = timed(lambda: fourier_chi2(lc, freqs, order=4, sessions=False))
    t_nifty, power = timed(lambda: nifty_chi2(lc, data0, fmin, df, n_freq))
    out.update(t_tumble_offsets_s=t_ours, t_tumble_no_offsets_s=t_ours0, t_nifty_s=t_nifty)

    # astropy fastchi2 (nterms=4, no offsets): a Python loop per frequency; timed on a subset
    n_ast = 5_000 if quick else 20_000
    t = np.asarray(lc.t) - data.epoch_jd
    ls = LombScargle(t, np.asarray(lc.mag), np.asarray(lc.err), nterms=4)
    t_ast_sub, _ = timed(lambda: ls.power(freqs[:n_ast], method="fastchi2", normalization="psd"), repeat=1)
    t_ast = t_ast_sub * n_freq / n_ast
    out.update(t_astropy_fastchi2_s=t_ast, astropy_timed_on=n_ast)

    # accuracy against the exact chi-square (one lstsq per frequency) on a subset
    # that includes the 1/day and 2/day aliases and the longest periods
    rng = np.random.default_rng(5)
    near = np.flatnonzero((np.abs(freqs - 1.0) < 0.03) | (np.abs(freqs - 2.0) < 0.02) | (freqs < 0.15))
    sub = np.unique(np.concatenate([near, rng.choice(n_freq, 1500, replace=False)]))
    exact = fourier_chi2_reference(lc, freqs[sub], order=4, sessions=True)
    exact0 = fourier_chi2_reference(lc, freqs[sub], order=4, sessions=False)
    rel = np.abs(chi2[sub] - exact) / exact
    rel0 = np.abs(chi2_0[sub] - exact0) / exact0
    chi2_nifty = data0.chi2_nuisance * (1.0 - power[sub])
    rel_nifty = np.abs(chi2_nifty - exact0) / exact0
    out.update(n_checked=int(sub.size), n_checked_alias=int(near.size),
               max_rel_err_tumble_offsets=float(rel.max()), max_rel_err_tumble_no_offsets=float(rel0.max()),
               max_rel_err_nifty=float(rel_nifty.max()),
               freq_of_max_nifty_err=float(freqs[sub][np.argmax(rel_nifty)]))
    return out


def part_scaling(quick: bool) -> dict:
    from tumble.periodogram import fourier_chi2, prepare

    n_freq = 20_000 if quick else 100_000
    rows = []
    for n in (300, 1000, 10000):
        lc = campaign(n)
        data0 = prepare(lc, sessions=False)
        fmin, fmax = 0.05, 48.0
        df = (fmax - fmin) / (n_freq - 1)
        freqs = fmin + df * np.arange(n_freq)
        t_ours, _ = timed(lambda: fourier_chi2(lc, freqs, order=4, sessions=True), repeat=2)
        t_ours0, _ = timed(lambda: fourier_chi2(lc, freqs, order=4, sessions=False), repeat=2)
        t_nifty, _ = timed(lambda: nifty_chi2(lc, data0, fmin, df, n_freq), repeat=2)
        rows.append({"n_points": n, "t_tumble_offsets_s": t_ours, "t_tumble_no_offsets_s": t_ours0,
                     "t_nifty_s": t_nifty})
    return {"n_freq": n_freq, "rows": rows}


def part_2d(quick: bool, sessions: bool) -> dict:
    from tumble.periodogram import two_period_chi2, two_period_chi2_reference

    # with nightly zero-points the grid is timed on 200 P1 rows and extrapolated (the cost is linear in rows)
    n1_full = 100 if quick else 1000
    n1 = min(n1_full, 200) if sessions else n1_full
    n2 = 1000
    lc = campaign(1000, sessions=sessions)
    p1 = 24.0 / np.linspace(24 / 8.0, 24 / 5.0, n1_full)[:n1]
    p2 = 24.0 / np.linspace(24 / 200.0, 24 / 2.0, n2)
    t0 = time.perf_counter()
    chi2 = two_period_chi2(lc, p1, p2, order=2, sessions=sessions)
    t_fast = time.perf_counter() - t0
    rng = np.random.default_rng(7)
    n_ref = 100
    r = rng.integers(0, n1, n_ref)
    c = rng.integers(0, n2, n_ref)
    t0 = time.perf_counter()
    ref = np.array([two_period_chi2_reference(lc, [p1[i]], [p2[j]], order=2, sessions=sessions)[0, 0]
                    for i, j in zip(r, c)])
    t_ref_pair = (time.perf_counter() - t0) / n_ref
    rel = np.abs(chi2[r, c] - ref) / ref
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    return {"grid": [n1_full, n2], "rows_timed": n1, "sessions": sessions,
            "n_sessions": lc.n_sessions if sessions else 0,
            "t_tumble_s": t_fast * n1_full / n1, "t_lstsq_per_pair_ms": 1e3 * t_ref_pair,
            "t_lstsq_grid_extrapolated_s": t_ref_pair * n1_full * n2, "max_rel_err_on_subset": float(rel.max()),
            "peak_rss_mb": peak_mb}


def sparse_object(seed: int = 3, tumbler: bool = False):
    """An invented sparse survey object: 200 points over 120 days in two bands (session -1), a phase-angle
    range of 5-17 deg, a 7.7-h double-peaked rotator (plus a 31-h second period when ``tumbler``)."""
    from tumble.photometry import LightCurve

    rng = np.random.default_rng(seed)
    n = 200
    t = np.sort(JD0 + rng.uniform(0, 120, n))
    band = rng.choice(["g", "r"], n)
    phase = 5 + 12 * np.abs(np.sin((t - JD0) / 50))
    ph = 2 * np.pi * (t - JD0) * 24 / 7.7
    y = 17 + 0.03 * phase + 0.4 * (band == "g") + 0.2 * np.cos(2 * ph) + 0.05 * np.cos(ph + 1) + rng.normal(0, 0.03, n)
    if tumbler:
        y = y + 0.1 * np.cos(2 * np.pi * (t - JD0) * 24 / 31.0 + 0.3)
    return LightCurve.from_arrays(t, y, np.full(n, 0.03), band=band, phase_deg=phase, object_id="2044 QS9")


GAULT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "shared", "external_data", "gault_ztf",
                     "Gault_ZTF.csv")


def part_2d_search(quick: bool) -> dict:
    """two_period_scan (the survey screen's call, order 2, automatic grids) on sparse light curves,
    side by side with the same search on the previous, 2.5x denser P2 grid (p2_oversample=5) and with
    the 1-D fourier_scan of the same object."""
    from tumble.periodogram import fourier_scan, two_period_scan
    from tumble.photometry import read_lightcurve

    cases = [("sparse 200 pts / 120 d, PA", sparse_object(3)), ("sparse 200 pts / 120 d, tumbler",
                                                                 sparse_object(4, tumbler=True))]
    if os.path.exists(GAULT):
        cases.append(("Gault ZTF, 65 pts / 451 d", read_lightcurve(GAULT)))
    rows = []
    repeat = 1 if quick else 3
    for label, lc in cases:
        t_new, new = timed(lambda: two_period_scan(lc, order=2), repeat=repeat)
        t_dense, dense = timed(lambda: two_period_scan(lc, order=2, p2_oversample=5.0), repeat=repeat)
        t_1d, _ = timed(lambda: fourier_scan(lc, order=2), repeat=repeat)
        rows.append({"case": label, "n_points": lc.n_points, "span_d": lc.span_d,
                     "t_two_period_s": t_new, "t_two_period_dense_p2_s": t_dense, "t_fourier_scan_s": t_1d,
                     "n_p2": int(new.p2_grid_h.size), "n_p2_dense": int(dense.p2_grid_h.size),
                     "p1_h": new.p1_h, "p2_h": new.p2_h, "chi2_2d": new.chi2_2d,
                     "p1_h_dense": dense.p1_h, "p2_h_dense": dense.p2_h, "chi2_2d_dense": dense.chi2_2d})
    return {"rows": rows}


def _child(part, quick, extra=()):
    """Run one part in a fresh process (so its peak memory is its own) and return its JSON."""
    cmd = [sys.executable, __file__, "--part", part, "--json"] + (["--quick"] if quick else []) + list(extra)
    out = subprocess.run(cmd, check=True, capture_output=True, text=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--part", choices=["all", "1d", "scaling", "2d", "2d-sessions", "2d-search"], default="all")
    ap.add_argument("--json", action="store_true", help="print one JSON line (used for the child runs)")
    args = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    if args.part != "all":
        fn = {"1d": lambda: part_1d(args.quick), "scaling": lambda: part_scaling(args.quick),
              "2d": lambda: part_2d(args.quick, False), "2d-sessions": lambda: part_2d(args.quick, True),
              "2d-search": lambda: part_2d_search(args.quick)}
        res = fn[args.part]()
        print(json.dumps(res) if args.json else json.dumps(res, indent=2))
        return 0

    import finufft
    import nifty_ls

    print(f"# tumble period-search benchmark (one thread; numpy {np.__version__}, nifty-ls "
          f"{nifty_ls.__version__}, finufft {finufft.__version__})")
    one = _child("1d", args.quick)
    print(f"\n## 1-D scan: N = {one['n_points']} over {one['n_sessions']} nights, {one['n_freq']} frequencies, "
          f"order {one['order']}")
    print(f"{'method':<52}{'time (s)':>10}")
    print(f"{'tumble fourier_chi2, per-night zero-points':<52}{one['t_tumble_offsets_s']:>10.3f}")
    print(f"{'tumble fourier_chi2, one zero-point':<52}{one['t_tumble_no_offsets_s']:>10.3f}")
    print(f"{'nifty-ls finufft_chi2 nterms=4 (no offsets)':<52}{one['t_nifty_s']:>10.3f}")
    print(f"{'astropy fastchi2 nterms=4 (extrapolated from ' + str(one['astropy_timed_on']) + ')':<52}"
          f"{one['t_astropy_fastchi2_s']:>10.3f}")
    r_nifty = one["t_tumble_offsets_s"] / one["t_nifty_s"]
    r_ast = one["t_astropy_fastchi2_s"] / one["t_tumble_offsets_s"]
    print(f"ratio tumble (offsets) / nifty-ls (no offsets): {r_nifty:.2f}   (target <= 2)")
    print(f"ratio astropy fastchi2 / tumble (offsets):      {r_ast:.1f}   (target >= 50)")
    print(f"accuracy vs exact lstsq on {one['n_checked']} frequencies ({one['n_checked_alias']} at the 1/day, "
          f"2/day aliases and long periods):")
    print(f"  tumble with offsets   max relative error {one['max_rel_err_tumble_offsets']:.2e}   (target 1e-8)")
    print(f"  tumble one zero-point max relative error {one['max_rel_err_tumble_no_offsets']:.2e}")
    print(f"  nifty-ls              max relative error {one['max_rel_err_nifty']:.2e} "
          f"(at {one['freq_of_max_nifty_err']:.4f} c/d)")

    sc = _child("scaling", args.quick)
    print(f"\n## growth with N ({sc['n_freq']} frequencies, order 4)")
    print(f"{'N':>7}{'tumble offsets (s)':>22}{'tumble 1 zp (s)':>18}{'nifty-ls (s)':>15}{'ratio':>8}")
    for row in sc["rows"]:
        print(f"{row['n_points']:>7}{row['t_tumble_offsets_s']:>22.3f}{row['t_tumble_no_offsets_s']:>18.3f}"
              f"{row['t_nifty_s']:>15.3f}{row['t_tumble_offsets_s'] / row['t_nifty_s']:>8.2f}")

    for part in ("2d", "2d-sessions"):
        two = _child(part, args.quick)
        n1, n2 = two["grid"]
        label = f"with {two['n_sessions']} nightly zero-points" if two["sessions"] else "one zero-point"
        print(f"\n## 2-D scan: N = 1000, order 2, {n1} x {n2} (P1, P2) grid, {label}")
        note = "" if two["rows_timed"] == n1 else f" (timed on {two['rows_timed']} rows, extrapolated)"
        print(f"tumble two_period_chi2:          {two['t_tumble_s']:.2f} s{note}   (target < 15 s for 1000 x 1000)")
        print(f"lstsq per pair:                  {two['t_lstsq_per_pair_ms']:.2f} ms "
              f"-> {two['t_lstsq_grid_extrapolated_s']:.0f} s for the grid (extrapolated)")
        print(f"ratio lstsq / tumble:            {two['t_lstsq_grid_extrapolated_s'] / two['t_tumble_s']:.0f}"
              f"   (target >= 100)")
        print(f"max relative error on 100 pairs: {two['max_rel_err_on_subset']:.2e}")
        print(f"peak memory (process RSS):       {two['peak_rss_mb']:.0f} MB   (target < 2048 MB)")

    srch = _child("2d-search", args.quick)
    print("\n## two_period_scan (order 2, automatic grids: the survey screen's call)")
    print(f"{'case':<34}{'2-D search (s)':>15}{'dense P2 (s)':>14}{'ratio':>7}{'1-D scan (s)':>14}"
          f"{'P2 points':>16}  best (P1, P2) h, chi2 [dense P2 grid]")
    for r in srch["rows"]:
        print(f"{r['case']:<34}{r['t_two_period_s']:>15.3f}{r['t_two_period_dense_p2_s']:>14.3f}"
              f"{r['t_two_period_dense_p2_s'] / r['t_two_period_s']:>7.2f}{r['t_fourier_scan_s']:>14.3f}"
              f"{str(r['n_p2']) + ' / ' + str(r['n_p2_dense']):>16}  ({r['p1_h']:.4f}, {r['p2_h']:.4f}) "
              f"{r['chi2_2d']:.3f} [({r['p1_h_dense']:.4f}, {r['p2_h_dense']:.4f}) {r['chi2_2d_dense']:.3f}]")
    print("targets: <= 0.3 s for the 200-point sparse light curves, <= 3 s on the Gault file")
    return 0


if __name__ == "__main__":
    sys.exit(main())
