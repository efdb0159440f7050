"""Benchmark of the sparse route: scan memory and time against the span, PA recovery on simulated sparse objects.

Usage::

    python benchmarks/bench_sparse.py            # everything (about 15-25 minutes on one core)
    python benchmarks/bench_sparse.py --quick    # fewer objects, smoke run (a few minutes)
    python benchmarks/bench_sparse.py --part memory   # or: recovery
    python benchmarks/bench_sparse.py --part library --split calibration --diagnose --workers 2
    python benchmarks/bench_sparse.py --part library --category sparse-npa --split heldout
    python benchmarks/bench_sparse.py --part classify --split heldout --workers 2   # resumable
    python benchmarks/bench_sparse.py --part screen --split heldout --limit 5

Threads are pinned to one before numpy is imported. Memory is the peak resident set
(``ru_maxrss``) of a fresh subprocess per case, so the cases do not share allocations.

Part ``memory``: a 200-point sparse PA object over spans of 30, 300, 3000 and 10 000 days;
peak memory and time of the 1-D scan (``fourier_scan``, default grid), the two-period search
(``two_period_scan``, default grid) and the geometry-aware fit (``fit_pa_geometry``, default
grid, no posterior), side by side.

Part ``recovery``: simulated sparse PA objects drawn as in issue 16 (60-400 points over 1-3
years with a 90 deg elongation limit, so two or more apparitions; noise 0.02-0.1 mag; periods
2-60 h log-uniform; isotropic poles; ellipsoids b/a 0.55-0.95, c/b 0.6-0.95, and one object
in three a faceted body with random bumps; Lommel-Seeliger or Lommel-Seeliger + Lambert; an
H,G phase trend with G 0.05-0.4). Printed: fraction with the sidereal period within 1 % among
objects whose rotational amplitude is >= 3x the noise, wrong unique periods, poles within
20 deg (or the mirror) among the recovered, and time per object. Seeds: the population of
``DEVELOPMENT_SEED`` was looked at while the decision rules were written (a first quick run led
to the edge-of-range rule and the look-elsewhere allowance of the alias threshold); the printed
figures come from ``POPULATION_SEED``, which was not used for any choice.

Parts on the calibration library (``docs/calibration-library.md``; rendered objects read from
``benchmarks/.cache/library-cal-2-20261204/``, e.g. copied from another checkout's cache):
``library`` runs ``fit_pa_geometry`` on the sparse PA (or, ``--category sparse-npa``, NPA) objects
of one split and prints the same figures; ``--diagnose`` also refines the full model from the true
period and pole, so that a failure shows whether the search (the truth fits better) or the
model/decision (it does not) is at fault. Choices are made on ``--split calibration``; the
held-out split is for reporting. ``classify`` runs the full sparse route of ``classify`` (false
NPA on sparse PA with its Clopper-Pearson upper limit, NPA recall by signature/noise, time) into a
resumable JSON-lines table; ``screen`` times the survey screen per 200 points.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ[_var] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import resource  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from dataclasses import replace  # noqa: E402

import numpy as np  # noqa: E402

JD0 = 2459000.5
SPANS_D = (30.0, 300.0, 3000.0, 10000.0)
#: Objects of the recovery part (full, quick).
N_OBJECTS = (60, 10)
#: Seed of the population seen during development (kept for reproducing the first quick run).
DEVELOPMENT_SEED = 160_2026
#: Seed of the held-out recovery population (never used for any choice).
POPULATION_SEED = 161_2027


def _memory_object(span_d: float):
    from tumble.dynamics import RotationState
    from tumble.simulate import NoiseModel, SparseSurvey, simulate_lightcurve

    n_nights = int(min(100, span_d - 1))
    per_night = max(2, 200 // n_nights)
    plan = SparseSurvey(start_jd_utc=JD0, span_d=span_d, n_nights=n_nights, points_per_night=per_night)
    state = RotationState.principal_axis(7.3, 40.0, 30.0, 0.0, JD0)
    return simulate_lightcurve(state, (1.5, 1.15, 1.0), plan, noise=NoiseModel(0.03), rng=7).lightcurve


def _run_case(case: str, span_d: float) -> dict:
    """One memory case in this process (called in a subprocess)."""
    lc = _memory_object(span_d)
    t0 = time.perf_counter()
    note = ""
    try:
        if case == "fourier_scan":
            from tumble.periodogram import fourier_scan

            r = fourier_scan(lc)
            note = f"{r.frequency_per_d.size} frequencies"
        elif case == "two_period_scan":
            from tumble.periodogram import two_period_scan

            r = two_period_scan(lc)
            note = f"{r.p2_grid_h.size} P2 frequencies"
        else:
            from tumble.sparse import fit_pa_geometry

            r = fit_pa_geometry(lc, sample=False)
            note = f"{r.scan_frequency_per_d.size} frequencies x 48 poles"
    except Exception as exc:  # noqa: BLE001 - a benchmark reports the error and goes on
        note = f"error: {type(exc).__name__}: {exc}"
    dt = time.perf_counter() - t0
    return {"case": case, "span_d": span_d, "n_points": lc.n_points, "time_s": dt,
            "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0, "note": note}


def part_memory(quick: bool):
    print("\n== Memory and time against the span (200-point sparse object; fresh process per case) ==")
    print(f"{'case':<18}{'span d':>9}{'n':>6}{'time s':>9}{'peak MB':>10}  note")
    cases = ("fourier_scan", "two_period_scan", "fit_pa_geometry")
    for span in SPANS_D:
        for case in cases:
            if quick and case == "two_period_scan" and span > 3000:
                print(f"{case:<18}{span:>9.0f}{'':>6}{'':>9}{'':>10}  (skipped in --quick)")
                continue
            out = subprocess.run([sys.executable, __file__, "--one", case, str(span)], capture_output=True,
                                 text=True, timeout=3600)
            try:
                rec = json.loads(out.stdout.strip().splitlines()[-1])
            except (IndexError, json.JSONDecodeError):
                print(f"{case:<18}{span:>9.0f}  failed: {out.stderr.strip().splitlines()[-1:]}")
                continue
            print(f"{case:<18}{span:>9.0f}{rec['n_points']:>6}{rec['time_s']:>9.1f}{rec['peak_mb']:>10.0f}  "
                  f"{rec['note']}")


# ---------------------------------------------------------------------------
# recovery


def _bumpy_facets(axes, g):
    """An ellipsoid mesh with random smooth radial bumps (a non-ellipsoidal convex-ish body)."""
    from tumble.brightness import FacetShape

    base = FacetShape.ellipsoid(axes, subdivisions=3)
    v = base.vertices
    u = v / np.linalg.norm(v, axis=1)[:, None]
    bump = np.ones(len(v))
    for _ in range(4):
        c = g.normal(size=3)
        c /= np.linalg.norm(c)
        bump += g.uniform(0.04, 0.12) * np.exp(-((1.0 - u @ c) / 0.15) ** 2)
    return FacetShape.from_mesh(v * bump[:, None], base.faces)


def _draw_object(g, k: int):
    from tumble.brightness import PhaseTrend
    from tumble.dynamics import RotationState
    from tumble.simulate import NoiseModel, SparseSurvey, simulate_lightcurve

    n_target = int(g.integers(60, 401))
    span = float(g.uniform(365.0, 3 * 365.0))
    ppn = int(g.integers(1, 5))
    n_nights = int(min(span - 1, max(10, round(2.0 * n_target / ppn))))  # about half lost to the elongation cut
    period = float(math.exp(g.uniform(math.log(2.0), math.log(60.0))))
    lon = float(g.uniform(0.0, 360.0))
    lat = float(math.degrees(math.asin(g.uniform(-1.0, 1.0))))
    ba = float(g.uniform(0.55, 0.95))
    cb = float(g.uniform(0.6, 0.95))
    axes = (1.0, ba, ba * cb)
    law = "ls-lambert" if g.random() < 0.5 else "lommel-seeliger"
    sigma = float(g.uniform(0.02, 0.1))
    trend = PhaseTrend("hg", g=float(g.uniform(0.05, 0.4)), relative_to_sphere=True)
    state = RotationState.principal_axis(period, lon, lat, float(g.uniform(0, 360)), JD0)
    plan = SparseSurvey(start_jd_utc=JD0, span_d=span, n_nights=n_nights, points_per_night=ppn,
                        min_elongation_deg=90.0)
    seed = int(g.integers(2**31))
    sim = simulate_lightcurve(state, axes, plan, noise=NoiseModel(sigma), law=law, trend=trend, rng=seed,
                              object_id=f"sparse-{k:03d}")
    sphere = simulate_lightcurve(state, (1.0, 1.0, 1.0), plan, noise=NoiseModel(sigma), law=law, trend=trend,
                                 rng=seed)
    lc = sim.lightcurve
    shape_term = sim.model_mag - sphere.model_mag
    faceted = k % 3 == 2
    if faceted:
        body = _bumpy_facets(axes, g)
        rot = state.attitude(lc.t)
        sb = np.einsum("nji,nj->ni", rot, lc.sun_dir)
        ob = np.einsum("nji,nj->ni", rot, lc.obs_dir)
        flux = body.brightness(sb, ob, lambert_weight=0.1 if law == "ls-lambert" else 0.0)
        shape_term = -2.5 * np.log10(flux / np.mean(flux))
        mag = sphere.model_mag + shape_term + sim.noise_mag
        lc = replace(lc, mag=np.asarray(mag))
    amp = float(np.ptp(shape_term))
    truth = {"period_h": period, "lon_deg": lon, "lat_deg": lat, "sigma": sigma, "amp_mag": amp,
             "law": law, "faceted": faceted, "n": lc.n_points, "span_d": lc.span_d}
    return lc, truth


def _angle(lon1, lat1, lon2, lat2):
    from tumble.sparse.kernel import pole_vectors

    return math.degrees(math.acos(float(np.clip(pole_vectors(lon1, lat1) @ pole_vectors(lon2, lat2), -1, 1))))


def part_recovery(quick: bool, seed: int = POPULATION_SEED):
    from tumble.sparse import fit_pa_geometry

    n_obj = N_OBJECTS[1] if quick else N_OBJECTS[0]
    g = np.random.default_rng(seed)
    label = "held out" if seed == POPULATION_SEED else "development"
    print(f"\n== PA recovery on {n_obj} simulated sparse objects (population seed {seed}, {label}) ==")
    print(f"{'object':<12}{'n':>5}{'span':>6}{'sig':>6}{'amp':>6}{'P true':>9}{'P fit':>10}{'status':>13}"
          f"{'pole err':>9}{'time s':>8}  body")
    rows = []
    for k in range(n_obj):
        lc, tr = _draw_object(g, k)
        t0 = time.perf_counter()
        try:
            fit = fit_pa_geometry(lc, rng=k, n_steps=150)
        except Exception as exc:  # noqa: BLE001 - reported as an error row
            print(f"{lc.object_id:<12} error: {exc}")
            continue
        dt = time.perf_counter() - t0
        p_ok = abs(fit.best_period_h - tr["period_h"]) < 0.01 * tr["period_h"]
        pole_err = min([min(_angle(p.lon_deg, p.lat_deg, tr["lon_deg"], tr["lat_deg"]),
                            _angle(p.lon_deg, p.lat_deg, tr["lon_deg"] + 180.0, tr["lat_deg"]))
                        for p in fit.poles if p.delta_chi2_scaled <= fit.alias_delta_chi2] or [float("nan")])
        in_family = any(abs(a.period_h - tr["period_h"]) < 0.01 * tr["period_h"] for a in fit.alias_family)
        rows.append({**tr, "status": fit.status, "p_fit": fit.best_period_h, "p_ok": p_ok, "in_family": in_family,
                     "pole_err": pole_err, "time_s": dt})
        print(f"{lc.object_id:<12}{tr['n']:>5}{tr['span_d']:>6.0f}{tr['sigma']:>6.3f}{tr['amp_mag']:>6.2f}"
              f"{tr['period_h']:>9.4f}{fit.best_period_h:>10.4f}{fit.status:>13}{pole_err:>9.1f}{dt:>8.1f}  "
              f"{'facets' if tr['faceted'] else 'ellipsoid'}/{tr['law']}")
    _summary(rows)


def _upper95(k: int, n: int) -> float:
    """One-sided 95 % upper limit of a binomial fraction (Clopper & Pearson 1934)."""
    from scipy import stats

    return 1.0 if k >= n else float(stats.beta.ppf(0.95, k + 1, n - k))


def _summary(rows):
    if not rows:
        print("no objects")
        return
    clear = [r for r in rows if r["amp_mag"] >= 3.0 * r["sigma"]]
    n = len(clear)
    unique_ok = sum(r["status"] == "unique" and r["p_ok"] for r in clear)
    wrong_unique = sum(r["status"] == "unique" and not r["p_ok"] for r in clear)
    undecided_with_truth = sum(r["status"] == "undecided" and r["in_family"] for r in clear)
    rec = [r for r in rows if r["status"] == "unique" and r["p_ok"]]
    pole_ok = sum(r["pole_err"] <= 20.0 for r in rec)
    times = np.array([r["time_s"] for r in rows])
    npts = np.array([r["n"] for r in rows])
    per300 = times / npts * 300.0
    print(f"\nobjects with amplitude >= 3x noise: {n} of {len(rows)}")
    if n:
        print(f"  sidereal period within 1 % (unique): {unique_ok}/{n} = {unique_ok / n:.0%}   (target >= 60 %)")
        print(f"  wrong unique period (outside 1 %, not flagged): {wrong_unique}/{n} = {wrong_unique / n:.0%} "
              f"(95 % upper limit {_upper95(wrong_unique, n):.0%}; target <= 5 %)")
        print(f"  undecided with the truth inside the alias family: {undecided_with_truth}/{n}")
    if rec:
        print(f"pole within 20 deg (or mirror) among recovered periods: {pole_ok}/{len(rec)} = "
              f"{pole_ok / len(rec):.0%}   (target >= 50 %)")
    print(f"time per object: median {np.median(times):.1f} s, max {times.max():.1f} s; scaled to 300 points "
          f"(linear in n): median {np.median(per300):.1f} s   (target <= 60 s)")


# ---------------------------------------------------------------------------
# the calibration library's sparse PA objects (split calibration / held out)

#: Rendered library (``benchmarks/bench_classify.py generate``; copied from another checkout is fine).
LIBRARY_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), ".cache", "library-cal-2-20261204")


def _library_objects(split: str, category: str = "sparse-pa"):
    """Ids of the cached library objects of one category and split (sorted)."""
    import glob

    out = []
    for js in sorted(glob.glob(os.path.join(LIBRARY_DIR, f"CAL-{category}-*.json"))):
        with open(js) as fh:
            meta = json.load(fh)
        if split == "all" or meta["truth"]["split"] == split:
            out.append(meta["truth"]["object_id"])
    return out


def _truth_start_fit(lc, period_h: float, lon_deg: float, lat_deg: float):
    """Chi-square of the full model refined from the true period and pole (and from its mirror)."""
    import tumble.sparse.fit as F
    from tumble.sparse.model import profiled_chi2

    pb = F._build_problem(lc, None, None, "lommel-seeliger", "auto", F.ERROR_FLOOR_MAG)
    f = F.HOURS_PER_DAY / period_h
    best = None
    for lon in (lon_deg, lon_deg + 180.0):
        x0 = F._linear_start(pb, f, lon % 360.0, lat_deg)
        xs = np.vstack([x0, x0 + np.eye(x0.size)[3] * 0.5 * math.pi])
        chi2, _ = profiled_chi2(pb.ellipsoid, xs)
        sol = F._refine(pb, xs[int(np.argmin(chi2))], f)
        if best is None or sol.chi2 < best.chi2:
            best = sol
    return best


def _library_one(object_id: str, diagnose: bool) -> dict:
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from library.render import load_rendered

    from tumble.sparse import fit_pa_geometry

    obj = load_rendered(LIBRARY_DIR, object_id)
    tr = obj.truth
    rot = obj.spec.rotation
    lc = obj.lightcurve
    t0 = time.perf_counter()
    fit = fit_pa_geometry(lc, rng=0, n_steps=150)
    dt = time.perf_counter() - t0
    p_true = tr.period_h
    in_family = any(abs(a.period_h - p_true) < 0.01 * p_true for a in fit.alias_family)
    pole_err = min([min(_angle(p.lon_deg, p.lat_deg, rot.l_lon_deg, rot.l_lat_deg),
                        _angle(p.lon_deg, p.lat_deg, rot.l_lon_deg + 180.0, rot.l_lat_deg))
                    for p in fit.poles if p.delta_chi2_scaled <= fit.alias_delta_chi2] or [float("nan")])
    row = {"id": object_id, "n": lc.n_points, "span_d": lc.span_d, "sigma": tr.noise_mag, "amp_mag": tr.amplitude_mag,
           "period_h": p_true, "p_fit": fit.best_period_h, "status": fit.status,
           "p_ok": abs(fit.best_period_h - p_true) < 0.01 * p_true, "in_family": in_family,
           "family": len(fit.alias_family), "thr": fit.alias_delta_chi2, "pole_err": pole_err, "time_s": dt,
           "signature_over_noise": tr.signature_over_noise,
           "chi2": fit.chi2, "rchi2": fit.reduced_chi2, "faceted": tr.body != "ellipsoid", "law": tr.law,
           "second_dchi2": (fit.alias_family[1].delta_chi2_scaled if len(fit.alias_family) > 1 else float("nan")),
           "alias_family": [[a.period_h, a.delta_chi2_scaled, a.same_rotation] for a in fit.alias_family],
           "message": fit.message}
    if diagnose:
        sol = _truth_start_fit(lc, p_true, rot.l_lon_deg, rot.l_lat_deg)
        row["chi2_truth"] = sol.chi2
        row["p_truth_fit"] = 24.0 / float(sol.x[0])
    return row


def part_library(split: str, diagnose: bool, workers: int, limit: int | None, category: str = "sparse-pa"):
    from concurrent.futures import ProcessPoolExecutor

    ids = _library_objects(split, category)[:limit]
    print(f"\n== PA recovery on the library's sparse PA objects ({split} half: {len(ids)} objects) ==")
    print(f"{'object':<20}{'n':>5}{'sig':>6}{'amp':>6}{'P true':>9}{'P fit':>10}{'status':>13}{'fam':>4}"
          f"{'pole err':>9}{'time s':>8}" + (f"{'chi2 fit':>10}{'chi2 true':>10}{'P(true st)':>11}" if diagnose else ""))
    rows = []
    if category != "sparse-pa":
        diagnose = False  # no PA truth to start from
    with ProcessPoolExecutor(max_workers=workers) as pool:
        for row in pool.map(_library_one, ids, [diagnose] * len(ids)):
            rows.append(row)
            line = (f"{row['id']:<20}{row['n']:>5}{row['sigma']:>6.3f}{row['amp_mag']:>6.2f}{row['period_h']:>9.4f}"
                    f"{row['p_fit']:>10.4f}{row['status']:>13}{row['family']:>4}{row['pole_err']:>9.1f}"
                    f"{row['time_s']:>8.1f}")
            if diagnose:
                line += f"{row['chi2']:>10.1f}{row['chi2_truth']:>10.1f}{row['p_truth_fit']:>11.4f}"
            print(line, flush=True)
    _summary(rows)
    return rows


def _classify_one(object_id: str) -> dict:
    """The full sparse route of ``classify`` on one library object (the NPA detection limit, a figure
    reported beside PA verdicts that no rule reads, is skipped: the verdict is the same)."""
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from library.render import load_rendered

    from tumble.classify import classify

    obj = load_rendered(LIBRARY_DIR, object_id)
    tr = obj.truth
    t0 = time.perf_counter()
    try:
        v = classify(obj.lightcurve, rng=0, detection_limit=False).verdict
    except Exception as exc:  # noqa: BLE001 - an error row, the run goes on
        return {"id": object_id, "truth": tr.truth_class, "error": f"{type(exc).__name__}: {exc}"}
    d = v.to_dict()
    return {"id": object_id, "truth": tr.truth_class, "n": obj.lightcurve.n_points, "route": d.get("route"),
            "rotation": v.rotation, "grade": v.grade, "period_h": d.get("period_h"), "period_true_h": tr.period_h,
            "p_npa": d.get("p_npa"), "signature_over_noise": tr.signature_over_noise,
            "amplitude_over_noise": tr.amplitude_over_noise, "reason": v.grade_reason, "time_s": time.perf_counter() - t0}


def part_classify(split: str, workers: int, limit: int | None, out_path: str | None):
    """False NPA on sparse PA and NPA recall with the full sparse route of ``classify`` (resumable table)."""
    from concurrent.futures import ProcessPoolExecutor

    pa, npa = (_library_objects(split, cat)[:limit] for cat in ("sparse-pa", "sparse-npa"))
    ids = [i for pair in zip(pa, npa) for i in pair] + pa[len(npa):] + npa[len(pa):]  # both classes as it goes
    out_path = out_path or os.path.join(os.path.dirname(LIBRARY_DIR), f"sparse-classify-{split}.jsonl")
    done = {}
    if os.path.exists(out_path):
        with open(out_path) as fh:
            for line in fh:
                row = json.loads(line)
                done[row["id"]] = row
    todo = [i for i in ids if i not in done]
    print(f"\n== Full sparse route of classify on the library's sparse objects ({split}: {len(ids)}, "
          f"{len(done)} already in {out_path}) ==", flush=True)
    with open(out_path, "a") as fh, ProcessPoolExecutor(max_workers=workers) as pool:
        for row in pool.map(_classify_one, todo):
            fh.write(json.dumps(row) + "\n")
            fh.flush()
            done[row["id"]] = row
            print(f"{row['id']:<20}{row['truth']:>5} -> {row.get('rotation', 'error'):>10} "
                  f"{row.get('grade', ''):>9} {row.get('time_s', float('nan')):6.1f} s  "
                  f"{str(row.get('reason', row.get('error', '')))[:90]}", flush=True)
    _classify_summary([done[i] for i in ids if i in done])


def _classify_summary(rows):
    ok = [r for r in rows if "error" not in r]
    pa = [r for r in ok if r["truth"] == "PA"]
    npa = [r for r in ok if r["truth"] == "NPA"]
    print(f"\nobjects: {len(rows)} ({len(rows) - len(ok)} errors); PA {len(pa)}, NPA {len(npa)}")
    k = sum(r["rotation"] == "NPA" for r in pa)
    if pa:
        print(f"false NPA on sparse PA: {k}/{len(pa)} = {k / len(pa):.1%} (one-sided 95 % upper limit "
              f"{_upper95(k, len(pa)):.1%}, Clopper-Pearson; target <= 2 %)")
        right = sum(r["rotation"] == "PA" and r["period_h"] is not None
                    and abs(r["period_h"] - r["period_true_h"]) <= 0.01 * r["period_true_h"] for r in pa)
        wrong = sum(r["rotation"] == "PA" and not (r["period_h"] is not None and abs(
            r["period_h"] - r["period_true_h"]) <= 0.01 * r["period_true_h"]) for r in pa)
        und = sum(r["rotation"] == "undecided" for r in pa)
        print(f"  PA verdicts with the period within 1 %: {right}; PA verdicts with another period or none: {wrong}; "
              f"undecided {und}")
    for lo, hi in ((3.0, math.inf), (1.0, 3.0), (0.0, 1.0)):
        sub = [r for r in npa if lo <= r["signature_over_noise"] < hi]
        if sub:
            hit = sum(r["rotation"] == "NPA" for r in sub)
            print(f"NPA recall, signature/noise in [{lo:g}, {hi:g}): {hit}/{len(sub)}; PA verdicts on them "
                  f"{sum(r['rotation'] == 'PA' for r in sub)}")
    times = np.array([r["time_s"] for r in ok])
    npts = np.array([r["n"] for r in ok])
    if times.size:
        print(f"time per object (shared, loaded machine; one core each): median {np.median(times):.1f} s, max "
              f"{times.max():.1f} s; scaled to 300 points: median {np.median(times / npts * 300):.1f} s (target <= 60 s)")


def part_screen(split: str, limit: int | None):
    """Wall time of the survey screen (``tumble.classify.screen``) on the library's sparse objects, one core."""
    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    from library.render import load_rendered

    from tumble.classify import screen

    ids = [i for cat in ("sparse-pa", "sparse-npa") for i in _library_objects(split, cat)[:limit]]
    per200 = []
    for object_id in ids:
        lc = load_rendered(LIBRARY_DIR, object_id).lightcurve
        t0 = time.perf_counter()
        screen(lc)
        per200.append((time.perf_counter() - t0) / lc.n_points * 200.0)
    per200 = np.array(per200)
    print(f"\n== Screen on {len(ids)} sparse library objects ({split}) ==")
    print(f"time scaled to 200 points: median {np.median(per200):.2f} s, 90th percentile "
          f"{np.percentile(per200, 90):.2f} s, max {per200.max():.2f} s (target <= 0.2 s)")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer objects; no 2-D search at 10 000 d")
    ap.add_argument("--part", choices=("memory", "recovery", "library", "classify", "screen", "all"), default="all")
    ap.add_argument("--split", choices=("calibration", "heldout", "all"), default="heldout",
                    help="library half of part 'library' (default: held out)")
    ap.add_argument("--diagnose", action="store_true",
                    help="part 'library': also refine from the true period and pole (search or model at fault?)")
    ap.add_argument("--category", choices=("sparse-pa", "sparse-npa"), default="sparse-pa",
                    help="part 'library': library category (sparse-npa: the PA fit's reduced chi-square on tumblers)")
    ap.add_argument("--workers", type=int, default=1, help="worker processes of part 'library'")
    ap.add_argument("--limit", type=int, default=None, help="first N objects of part 'library'")
    ap.add_argument("--json", default=None, help="part 'library': write the rows to this JSON file")
    ap.add_argument("--seed", type=int, default=POPULATION_SEED, help="population seed (default: held out)")
    ap.add_argument("--one", nargs=2, metavar=("CASE", "SPAN_D"), help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.one:
        print(json.dumps(_run_case(args.one[0], float(args.one[1]))))
        return 0
    if args.part in ("memory", "all"):
        part_memory(args.quick)
    if args.part in ("recovery", "all"):
        part_recovery(args.quick, args.seed)
    if args.part == "screen":
        part_screen(args.split, args.limit)
    if args.part == "classify":
        part_classify(args.split, args.workers, args.limit, args.json)
    if args.part == "library":
        rows = part_library(args.split, args.diagnose, args.workers, args.limit, args.category)
        if args.json:
            with open(args.json, "w") as fh:
                json.dump(rows, fh)
    return 0


if __name__ == "__main__":
    sys.exit(main())
