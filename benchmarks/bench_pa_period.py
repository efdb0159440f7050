"""PA period accuracy and error calibration of ``tumble classify`` on the library's clear dense PA bodies.

Run (from the worktree; ``nice`` on shared machines)::

    nice .venv/bin/python benchmarks/bench_pa_period.py run --cache /work/main/benchmarks/.cache --limit 20
    nice .venv/bin/python benchmarks/bench_pa_period.py run --route sidereal --quick
    .venv/bin/python benchmarks/bench_pa_period.py report benchmarks/.cache/pa-period-evidence.jsonl

The selection is issue 15's target: PA truth, dense plan, amplitude >= 5 noise sigmas, span >= 3
rotations (:data:`library.scoring.CLEAR_PA_AMPLITUDE_OVER_NOISE`, ``CLEAR_PA_ROTATIONS``), in the
library's hashed order, one split or both (``--split``). The library is read from the cache
(``--cache``, as in ``bench_classify.py``; a read-only cache works, the table goes to ``--out``).

``run`` classifies each object (route ``evidence``: no physical fit, synodic period; ``sidereal``: the
same with the geometry-aware PA fit's sidereal period) and appends one JSON line per object at once
(resumable: objects already in the table are skipped). Beside the verdict it records diagnostics of
the period error:

- ``diag.f1_true_per_d``: the light-curve frequency of the true sidereal period at the harmonic the
  route reported (1 or 2 maxima per rotation);
- ``diag.f1_noise_free_per_d``: the PA family's peak on the noise-free model magnitudes of the same
  points (same floor and error-scale bound), i.e. where the method lands without noise: its offset
  from the truth is the systematic part (synodic drift, shape change), its offset from the reported
  frequency the statistical part;
- ``diag.dlnz_true``: ``ln Z(f_reported) - ln Z(f_true)`` of the PA family (nats);
- ``diag.syn_rule_per_d``: the rule-of-thumb synodic-sidereal difference (bisector's ecliptic-longitude
  rate, Harris et al. 1984) in light-curve frequency;
- ``diag.syn_pole_per_d``: the same for the true pole (the azimuth rate of the phase-angle bisector about
  the spin axis, Harris et al. 1984, with the body's pole), signed so that ``f_syn = f_sid + value``;
- ``diag.syn_pole_q<NN>_per_d``: the NN-th percentile (:data:`SYNODIC_QUANTILES`) of ``|value|`` over
  isotropic poles (:func:`tumble.geometry.pole_marginal_bisector_rate_deg_per_d`);
- ``diag.f1_sigma_jackknife_per_d``: the delete-one-night jackknife width of f1.

Each row keeps the benchmark's route as ``bench_route`` (the verdict's own ``route`` is the
classifier's route name).

``report`` prints, per split and for the synodic (evidence) and sidereal periods: within 0.1 %,
half/double/daily-alias counts, the distribution of ``(P - P_true)/sigma`` and the 68 % coverage; for
synodic periods also the coverage each f1-width rule of
:data:`tumble.classify.evidence.FREQUENCY_WIDTH_RULES` would give (the reported period's error
recomputed with that rule's width and the same synodic widening), the per-object diagnostics, and the
coverage with the shipped synodic bound (ecliptic-longitude rate) against the pole-marginal bounds
(``--cache`` recomputes the geometry columns with the current functions).

Results are scientific estimates on simulated data, for research use.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_classify import CACHE_DIR, append_row, library_dir, load_population, read_table  # noqa: E402
from library.population import order_key  # noqa: E402
from library.routes import ROUTES, decision_statistics, lightcurve_statistics  # noqa: E402
from library.scoring import CLEAR_PA_AMPLITUDE_OVER_NOISE, CLEAR_PA_ROTATIONS, SIDEREAL_TOLERANCE  # noqa: E402

#: Objects per split of ``--quick``.
QUICK_PER_SPLIT = 6
#: Relative tolerance of the half/double/daily-alias labels (1 %: far outside any error, far inside the spacing).
ALIAS_TOLERANCE = 0.01
#: Percentiles of the pole-marginal synodic difference compared by ``report`` (the widening's choice).
SYNODIC_QUANTILES = (68, 80, 90)
#: Routes this benchmark runs.
PERIOD_ROUTES = ("evidence", "sidereal")


def clear_dense_pa(cache: Path, split: str) -> list:
    """Object ids and truths of the clear dense PA bodies of a split, in the library's hashed order."""
    out = []
    for spec in load_population(cache):
        if split != "all" and spec.split != split:
            continue
        js = library_dir(cache) / f"{spec.object_id}.json"
        if not js.exists():
            continue
        t = json.loads(js.read_text())["truth"]
        if (t["truth_class"] == "PA" and t["plan_kind"] == "dense"
                and t["amplitude_over_noise"] >= CLEAR_PA_AMPLITUDE_OVER_NOISE
                and t["span_over_period"] >= CLEAR_PA_ROTATIONS):
            out.append(spec)
    out.sort(key=lambda s: order_key(s.object_id))
    return out


# ---------------------------------------------------------------------------
# Diagnostics


def _unit_from_lon_lat(lon_deg, lat_deg) -> np.ndarray:
    lon, lat = np.radians(lon_deg), np.radians(lat_deg)
    return np.array([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)])


def geometry_diagnostics(obj, harmonic: float) -> dict:
    """The synodic-difference columns ``diag.syn_*`` (light-curve frequency, c/d) of one object."""
    from tumble.geometry import (
        bisector_azimuth_rate_deg_per_d,
        bisector_longitude_rate_deg_per_d,
        pole_marginal_bisector_rate_deg_per_d,
    )

    lc = obj.lightcurve
    if lc.sun_dir is None or lc.obs_dir is None:
        return {}
    r = obj.spec.rotation
    pole = _unit_from_lon_lat(r.l_lon_deg, r.l_lat_deg)
    return {"diag.syn_rule_per_d": harmonic * abs(bisector_longitude_rate_deg_per_d(lc.t, lc.sun_dir, lc.obs_dir)) / 360.0,
            "diag.syn_pole_per_d": float(-harmonic * bisector_azimuth_rate_deg_per_d(lc.t, lc.sun_dir, lc.obs_dir, pole)[0]
                                         / 360.0),
            **{f"diag.syn_pole_q{q}_per_d": harmonic * pole_marginal_bisector_rate_deg_per_d(
                lc.t, lc.sun_dir, lc.obs_dir, quantile=q / 100.0) / 360.0 for q in SYNODIC_QUANTILES}}


def period_diagnostics(obj, ev, harmonic: float) -> dict:
    """The ``diag.*`` columns of one object (module notes)."""
    from tumble.classify.evidence import build_problem, integrate_pa_window, session_jackknife_f1
    from tumble.photometry import LightCurve

    lc = obj.lightcurve
    f_true = harmonic * 24.0 / obj.truth.period_h
    out = {"diag.harmonic": harmonic, "diag.f1_true_per_d": f_true}
    problem = build_problem(lc, p_min_h=0.5, p_max_h=2000.0, oversample=3.0, weights=None, max_coarse=100_000,
                            error_floor_mag=ev.error_floor_mag)
    pa = problem.pa_log_density(np.array([ev.f1_per_d, f_true]))
    out["diag.dlnz_true"] = float(pa[0] - pa[1])
    out["diag.f1_sigma_jackknife_per_d"] = session_jackknife_f1(problem, lc, ev.f1_per_d)[0]
    nf = LightCurve.from_arrays(lc.t, obj.model_mag, lc.err, session=lc.session, band=lc.band, r_au=lc.r_au,
                                delta_au=lc.delta_au, phase_deg=lc.phase_deg, sun_dir=lc.sun_dir, obs_dir=lc.obs_dir,
                                light_time_corrected=True, time_scale="tdb", object_id=lc.object_id, min_points=2)
    p_nf = build_problem(nf, p_min_h=0.5, p_max_h=2000.0, oversample=3.0, weights=None, max_coarse=100_000,
                         error_floor_mag=ev.error_floor_mag)
    out["diag.f1_noise_free_per_d"] = float(integrate_pa_window(p_nf, ev.f1_per_d).best)
    out.update(geometry_diagnostics(obj, harmonic))
    return out


def run_one(spec, route: str, cache: Path) -> dict:
    """Classify one object by the route and add truths, data statistics and diagnostics; failures become error rows."""
    from library.render import load_rendered

    warnings.simplefilter("ignore")
    row = {"object_id": spec.object_id, "bench_route": route, "status": "ok", "error": ""}
    t0 = time.perf_counter()
    obj = load_rendered(library_dir(cache), spec.object_id)
    try:
        if obj is None:
            raise FileNotFoundError(f"{spec.object_id} not rendered in {library_dir(cache)}")
        res = ROUTES[route].run(obj.lightcurve, spec.seed)
        row["route_runtime_s"] = time.perf_counter() - t0
        row.update(decision_statistics(res))
        ev = res.evidence
        harmonic = 1.0 if ev.second_harmonic_dominates else 2.0
        row.update(period_diagnostics(obj, ev, harmonic))
    except Exception as exc:  # a failure is a result of the benchmark too
        row.update(status="error", error=f"{type(exc).__name__}: {exc}"[:300])
    row["wall_s"] = time.perf_counter() - t0
    if obj is not None:
        row.update({f"true.{k}": v for k, v in obj.truth.to_dict().items()})
        row.update(lightcurve_statistics(obj.lightcurve))
    return row


def cmd_run(args) -> int:
    cache = Path(args.cache)
    specs = []
    for split in (("calibration", "heldout") if args.split == "all" else (args.split,)):
        chosen = clear_dense_pa(cache, split)
        n = QUICK_PER_SPLIT if args.quick else args.limit
        specs += chosen if n is None else chosen[:n]
    out = Path(args.out) if args.out else CACHE_DIR / f"pa-period-{args.route}.jsonl"
    done = {r["object_id"] for r in read_table(out) if r.get("bench_route") == args.route}
    todo = [s for s in specs if s.object_id not in done]
    print(f"route {args.route}: {len(specs)} clear dense PA objects selected ({args.split}), "
          f"{len(specs) - len(todo)} already in {out}, {len(todo)} to run", flush=True)
    out.parent.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    with open(out, "a", encoding="utf-8") as fh:
        for k, spec in enumerate(todo, 1):
            row = run_one(spec, args.route, cache)
            append_row(fh, row)
            p, e, pt = row.get("period_h", math.nan), row.get("period_h_err", math.nan), row.get("true.period_h", math.nan)
            print(f"[{k}/{len(todo)} {time.perf_counter() - t0:6.0f} s] {spec.object_id} {spec.split[:3]} "
                  f"{row.get('rotation', row['status'])} P={p:.6g} +- {e:.3g} h (true {pt:.6g}) "
                  f"{row.get('period_kind', '')} ({row['wall_s']:.0f} s)", flush=True)
    return 0


# ---------------------------------------------------------------------------
# Scoring


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def alias_label(p_h: float, true_h: float, span_d: float) -> str:
    """'right' (0.1 %), 'double', 'half', 'daily alias' (1/P off by 1 or 2 c/d), 'cycle-count alias' (off by
    0.5-1.5 cycles over the span), 'same peak, > 0.1 %' (less than half a cycle), or 'wrong'."""
    if not np.isfinite(p_h):
        return "none"
    if abs(p_h / true_h - 1) <= SIDEREAL_TOLERANCE:
        return "right"
    for m, name in ((2.0, "double"), (0.5, "half")):
        if abs(p_h / (m * true_h) - 1) <= ALIAS_TOLERANCE:
            return name
    df = abs(24.0 / p_h - 24.0 / true_h)
    for k in (1.0, 2.0):
        if abs(df - k) <= ALIAS_TOLERANCE * 24.0 / true_h:
            return "daily alias"
    if np.isfinite(span_d) and df <= 0.5 / span_d:
        return "same peak, > 0.1 %"
    if np.isfinite(span_d) and df <= 1.5 / span_d:
        return "cycle-count alias"
    return "wrong"


def period_error_for_rule(row, sigma_f: float) -> float:
    """The reported period's error (h) when the f1 width is ``sigma_f`` (c/d), with the same synodic widening."""
    f1 = _num(row.get("ev.f1_per_d"))
    p = _num(row.get("period_h"))
    mult = 1.0 if row.get("ev.second_harmonic_dominates") else 2.0
    e_fit = 24.0 * sigma_f / f1**2 * mult
    e_rep, e_old = _num(row.get("period_h_err")), 24.0 * _num(row.get("ev.f1_sigma_per_d")) / f1**2 * mult
    if row.get("period_kind") == "synodic" and np.isfinite(e_rep) and e_rep > e_old:
        drift = math.sqrt(max(e_rep**2 - e_old**2, 0.0))
        return math.hypot(e_fit, drift)
    return e_fit if np.isfinite(p) else math.nan


def _jack(row) -> float:
    j = _num(row.get("ev.f1_sigma_jackknife_per_d"))
    return j if np.isfinite(j) else _num(row.get("diag.f1_sigma_jackknife_per_d"))


def synodic_widened_error(row, drift_lc_per_d: float) -> float:
    """Period error (h): the reported f1 width and a synodic-sidereal bound (light-curve c/d) in quadrature."""
    f1 = _num(row.get("ev.f1_per_d"))
    mult = 1.0 if row.get("ev.second_harmonic_dominates") else 2.0
    return 24.0 * mult * math.hypot(_num(row.get("ev.f1_sigma_per_d")), drift_lc_per_d) / f1**2


def refresh_geometry(rows, cache: Path) -> None:
    """Recompute the ``diag.syn_*`` columns from the cached light curves (the current geometry functions)."""
    from library.render import load_rendered

    for r in rows:
        if r.get("status") != "ok" or "diag.harmonic" not in r:
            continue
        obj = load_rendered(library_dir(cache), r["object_id"])
        if obj is not None:
            r.update(geometry_diagnostics(obj, _num(r["diag.harmonic"])))


def _pulls_line(pulls) -> str:
    a = np.abs(np.asarray([x for x in pulls if np.isfinite(x)]))
    if not a.size:
        return "no finite pulls"
    q = np.percentile(a, [50, 68, 90])
    return (f"|pull| median {q[0]:.2f}, 68th pct {q[1]:.2f}, 90th pct {q[2]:.2f}; "
            f"within 1: {np.sum(a <= 1)}/{a.size} ({100 * np.mean(a <= 1):.0f} %), within 2: {np.sum(a <= 2)}/{a.size}")


def report_rows(rows, split: str) -> str:
    """The printed report of one split (module notes)."""
    from tumble.classify.evidence import FREQUENCY_WIDTH_RULES, FrequencyWidth

    lines = []
    w = lines.append
    sel = [r for r in rows if r.get("status") == "ok" and (split == "all" or r.get("true.split") == split)]
    bad = [r for r in rows if r.get("status") != "ok" and (split == "all" or r.get("true.split") == split)]
    w(f"=== split {split}: {len(sel)} clear dense PA objects ({len(bad)} error rows) ===")
    for route in sorted({r.get("bench_route") for r in sel}):
        rr = [r for r in sel if r.get("bench_route") == route]
        pa = [r for r in rr if r.get("rotation") == "PA" and np.isfinite(_num(r.get("period_h")))]
        w(f"-- route {route}: {len(rr)} objects, {len(pa)} PA verdicts with a period "
          f"(others: {', '.join(sorted({str(r.get('rotation')) for r in rr if r not in pa})) or 'none'})")
        labels = {}
        for r in pa:
            lab = alias_label(_num(r["period_h"]), _num(r["true.period_h"]), _num(r.get("true.span_d")))
            labels[lab] = labels.get(lab, 0) + 1
        w("   period labels: " + ", ".join(f"{k} {v}" for k, v in sorted(labels.items())))
        for kind in ("synodic", "sidereal"):
            sub = [r for r in pa if r.get("period_kind") == kind]
            if not sub:
                continue
            right = [r for r in sub if alias_label(_num(r["period_h"]), _num(r["true.period_h"]), _num(r.get("true.span_d"))) == "right"]
            pulls = [(_num(r["period_h"]) - _num(r["true.period_h"])) / _num(r["period_h_err"]) for r in right]
            cov = sum(abs(p) <= 1 for p in pulls)
            cov_all = sum(abs(_num(r["period_h"]) - _num(r["true.period_h"])) <= _num(r["period_h_err"]) for r in sub)
            w(f"   {kind} periods: {len(sub)}; within 0.1 %: {len(right)}/{len(sub)}; 68 % interval covers the truth: "
              f"{cov_all}/{len(sub)} ({100 * cov_all / len(sub):.0f} %; {cov}/{len(right)} of those within 0.1 %)")
            w(f"   (P - P_true)/sigma of those within 0.1 %: {_pulls_line(pulls)}")
        syn = [r for r in pa if r.get("period_kind") == "synodic"]
        if syn and "ev.f1_sigma_white_per_d" in syn[0]:
            right = [r for r in syn if alias_label(_num(r["period_h"]), _num(r["true.period_h"]), _num(r.get("true.span_d"))) == "right"]
            w(f"   coverage by f1-width rule (same synodic widening), all {len(syn)} synodic PA periods / {len(right)} within 0.1 %:")
            for name, rule in FREQUENCY_WIDTH_RULES.items():
                cov, cov_r, pulls = 0, 0, []
                for r in syn:
                    width = FrequencyWidth(_num(r["ev.f1_sigma_white_per_d"]), _num(r["ev.f1_red_noise_beta"]), _jack(r), 0)
                    e = period_error_for_rule(r, rule(width))
                    d = abs(_num(r["period_h"]) - _num(r["true.period_h"]))
                    cov += d <= e
                    if r in right:
                        cov_r += d <= e
                        pulls.append(d / e)
                w(f"     {name:10s} covers {cov}/{len(syn)} ({100 * cov / len(syn):.0f} %), {cov_r}/{len(right)}; "
                  f"{_pulls_line(pulls)}")
            w("   diagnostics of those within 0.1 % (light-curve frequency, units of the white Laplace width):")
            for r in right:
                s = _num(r["ev.f1_sigma_white_per_d"])
                f, ft, fnf = _num(r["ev.f1_per_d"]), _num(r["diag.f1_true_per_d"]), _num(r["diag.f1_noise_free_per_d"])
                w(f"     {r['object_id']:18s} P={_num(r['true.period_h']):8.3f} h nights {r.get('n_sessions')}: "
                  f"(f-f_true)/s={(f - ft) / s:+7.2f}  stat (f-f_nf)/s={(f - fnf) / s:+6.2f}  "
                  f"sys (f_nf-f_true)/s={(fnf - ft) / s:+7.2f}  syn pole {_num(r.get('diag.syn_pole_per_d')) / s:+7.2f} "
                  f"rule {_num(r.get('diag.syn_rule_per_d')) / s:6.2f} q68 {_num(r.get('diag.syn_pole_q68_per_d')) / s:6.2f}  "
                  f"beta {_num(r['ev.f1_red_noise_beta']):.2f} jack/s {_jack(r) / s:.2f} fine {_num(r.get('ev.f1_fine_gain')):.1f} "
                  f"dlnZ_true {_num(r.get('diag.dlnz_true')):.1f}")
        if syn and "diag.syn_pole_q68_per_d" in syn[0]:
            w("   synodic widening (the fit's Laplace width in quadrature with the synodic-sidereal bound):")
            for name, col in (("ecliptic-longitude rate (shipped)", "diag.syn_rule_per_d"),
                              *((f"pole-marginal {q} %", f"diag.syn_pole_q{q}_per_d") for q in SYNODIC_QUANTILES)):
                cov, pulls = 0, []
                for r in syn:
                    e = synodic_widened_error(r, _num(r.get(col)))
                    d = abs(_num(r["period_h"]) - _num(r["true.period_h"]))
                    cov += d <= e
                    pulls.append(d / e)
                w(f"     {name:34s} covers {cov}/{len(syn)} ({100 * cov / len(syn):.0f} %); {_pulls_line(pulls)}")
        wrong = [r for r in pa if alias_label(_num(r["period_h"]), _num(r["true.period_h"]), _num(r.get("true.span_d"))) != "right"]
        for r in wrong:
            w(f"   not within 0.1 %: {r['object_id']} {_num(r['period_h']):.5g} +- {_num(r['period_h_err']):.2g} h for "
              f"{_num(r['true.period_h']):.5g} h "
              f"({alias_label(_num(r['period_h']), _num(r['true.period_h']), _num(r.get('true.span_d')))}); "
              f"dlnZ(reported - true) {_num(r.get('diag.dlnz_true')):.1f} nats; warnings: "
              + "; ".join(str(x) for x in (r.get("warnings") or []))[:300])
    return "\n".join(lines)


def cmd_report(args) -> int:
    rows = read_table(Path(args.table))
    for r in rows:  # rows written before the table kept its own route key: the table's route
        r.setdefault("bench_route", "sidereal" if "sidereal" in Path(args.table).name else "evidence")
    if args.cache:
        refresh_geometry(rows, Path(args.cache))
    for split in (("calibration", "heldout") if args.split == "all" else (args.split,)):
        print(report_rows(rows, split))
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = ap.add_subparsers(dest="cmd", required=True)
    p = sub.add_parser("run", help="classify the clear dense PA objects and append rows")
    p.add_argument("--cache", default=str(CACHE_DIR), help="cache folder holding the rendered library")
    p.add_argument("--route", choices=PERIOD_ROUTES, default="evidence")
    p.add_argument("--split", choices=("calibration", "heldout", "all"), default="all")
    p.add_argument("--limit", type=int, default=None, help="first N objects of each split in the hashed order")
    p.add_argument("--quick", action="store_true", help=f"the first {QUICK_PER_SPLIT} objects of each split")
    p.add_argument("--workers", type=int, default=1, help="objects run one at a time (kept for symmetry; only 1)")
    p.add_argument("--out", default=None, help="JSON-lines table (default benchmarks/.cache/pa-period-<route>.jsonl)")
    p = sub.add_parser("report", help="score a table")
    p.add_argument("table")
    p.add_argument("--split", choices=("calibration", "heldout", "all"), default="all")
    p.add_argument("--cache", default=None, help="recompute the synodic diagnostics from this library cache")
    args = ap.parse_args(argv)
    return cmd_run(args) if args.cmd == "run" else cmd_report(args)


if __name__ == "__main__":
    sys.exit(main())
