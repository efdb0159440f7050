"""Calibration and validation of ``tumble classify`` on the simulated library of issue 14.

Run (from the worktree; ``nice`` on shared machines)::

    nice .venv/bin/python benchmarks/bench_classify.py run --route evidence --workers 2 --limit 200
    .venv/bin/python benchmarks/bench_classify.py report benchmarks/.cache/results-evidence.jsonl
    .venv/bin/python benchmarks/bench_classify.py calibrate benchmarks/.cache/results-evidence.jsonl
    .venv/bin/python benchmarks/bench_classify.py generate          # render and cache the whole library
    .venv/bin/python benchmarks/bench_classify.py timing            # one-core wall time of the routes

Sub-commands
------------
``generate``
    Draws the population (:mod:`library.population`, 630 objects by default: dense, sparse and
    close-approach PA and NPA, slow PA rotators over short arcs, flat and pure-noise curves) and
    renders every object into the cache (``benchmarks/.cache/library-<version>/``, git-ignored).
``summary``
    Counts and ranges of the rendered library per category (points, span, phase, amplitude/noise,
    signature/noise, numerically integrated fraction, split).
``run``
    Runs one route (``--route screen|evidence|full``) on each object in a process pool
    (``--workers``), objects in a fixed hashed order so that any ``--limit N`` first objects are a
    random sample of all kinds; ``--split`` picks the calibration or held-out half. Every finished
    object is appended at once to the JSON-lines table (one row: truth ``true.*``, data ``lc.*``,
    everything the verdict exposes, the evidence's statistics as ``ev.*``), so an interrupted run
    loses nothing and a rerun skips the objects already there. ``--timeout-s`` turns an object that
    runs too long into an error row.
``report``
    Scores a table (:mod:`library.scoring`): false-NPA rate on PA per plan with its 95 % upper limit,
    NPA recall by signature/noise, reliability table and figure of ``p_npa`` with the expected
    calibration error, grade confusion, period accuracy, flat/noise and short-arc behaviour.
``calibrate``
    Fits the calibration map (:func:`library.calibration.fit_calibration`) on the calibration half of
    a table, scores it on the held-out half and writes its coefficients as JSON.
``timing``
    Wall time per object of each route on a few objects of each plan, one core.
``perf``
    Wall time of the default classify (with sampling) on a dense 1000-point light curve, and the
    sampler's overhead: ``sample_posterior`` against the bare model cost of the same number of walker
    evaluations, measured side by side in one run.

Results are scientific estimates for research use; the figures describe the simulated library.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_v, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import signal  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

from library.population import GENERATOR_VERSION, generate_population, order_key, spec_from_dict  # noqa: E402
from library.routes import ROUTES, decision_statistics, lightcurve_statistics  # noqa: E402

#: Local, git-ignored folder of the rendered library and the result tables.
CACHE_DIR = Path(__file__).resolve().parent / ".cache"
#: Master seed of the population.
POPULATION_SEED = 20261204
#: Default per-object time limit of a run, seconds (an object over it becomes an error row).
DEFAULT_TIMEOUT_S = 900
#: Objects per plan kind timed by the ``timing`` sub-command.
TIMING_PER_PLAN = 3


def library_dir(cache: Path) -> Path:
    """Folder of the rendered objects of this generator version."""
    return cache / f"library-{GENERATOR_VERSION}-{POPULATION_SEED}"


def load_population(cache: Path) -> list:
    """The population, from its cached JSON or drawn (and cached)."""
    from tumble._io import atomic_path

    path = library_dir(cache) / "population.json"
    if path.exists():
        return [spec_from_dict(d) for d in json.loads(path.read_text())]
    pop = generate_population(POPULATION_SEED)
    with atomic_path(path) as tmp:
        Path(tmp).write_text(json.dumps([s.to_dict() for s in pop]))
    return pop


def select(pop: list, split: str, limit: int | None, plans=None) -> list:
    """Objects of a split (and of the given plan kinds) in the hashed processing order, the first ``limit`` of them."""
    chosen = [s for s in pop if (split == "all" or s.split == split) and (not plans or s.plan_kind in plans)]
    chosen.sort(key=lambda s: order_key(s.object_id))
    return chosen if limit is None else chosen[:limit]


# ---------------------------------------------------------------------------
# Workers


@dataclass(frozen=True)
class Job:
    """One object to run: its spec, the route, the cache folder and the time limit."""

    spec: object
    route: str
    cache_dir: str
    timeout_s: float


class ObjectTimeout(Exception):
    """An object ran past the per-object time limit."""


def _alarm(signum, frame):
    raise ObjectTimeout


def run_job(job: Job) -> dict:
    """Render (or load) one object and run the route on it; any failure becomes an error row."""
    from library.render import load_or_render

    warnings.simplefilter("ignore")
    row = {"object_id": job.spec.object_id, "route": job.route, "status": "ok", "error": ""}
    t0 = time.perf_counter()
    obj = None
    old = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(int(math.ceil(job.timeout_s)))
    try:
        obj = load_or_render(job.spec, job.cache_dir)
        t1 = time.perf_counter()
        result = ROUTES[job.route].run(obj.lightcurve, job.spec.seed)
        row["route_runtime_s"] = time.perf_counter() - t1
        row.update(decision_statistics(result))
    except ObjectTimeout:
        row.update(status="timeout", error=f"over {job.timeout_s:g} s")
    except Exception as exc:  # a failure is a result of the benchmark too
        row.update(status="error", error=f"{type(exc).__name__}: {exc}"[:300])
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)
    row["wall_s"] = time.perf_counter() - t0
    if obj is not None:
        row.update({f"true.{k}": v for k, v in obj.truth.to_dict().items()})
        row.update(lightcurve_statistics(obj.lightcurve))
    else:
        row.update({"true.category": job.spec.category, "true.split": job.spec.split,
                    "true.truth_class": job.spec.truth_class, "true.plan_kind": job.spec.plan_kind})
    return row


def render_job(job: Job) -> str:
    """Render (or find) one object in the cache; returns a one-line status."""
    from library.render import load_or_render

    warnings.simplefilter("ignore")
    t0 = time.perf_counter()
    try:
        load_or_render(job.spec, job.cache_dir)
        return f"{job.spec.object_id} {time.perf_counter() - t0:.1f} s"
    except Exception as exc:
        return f"{job.spec.object_id} FAILED {type(exc).__name__}: {exc}"


# ---------------------------------------------------------------------------
# The table (JSON lines, appended per object)


def read_table(path: Path) -> list:
    """Rows of a JSON-lines table, one per object and route (a resumed run's later row wins); an unreadable
    (half-written) last line is ignored."""
    rows = {}
    if not path.exists():
        return []
    with open(path, encoding="utf-8") as fh:
        for line in fh:
            line = line.strip()
            if not line:
                continue
            try:
                row = json.loads(line)
            except json.JSONDecodeError:
                continue
            rows[(row.get("object_id", len(rows)), row.get("route"))] = row
    return list(rows.values())


def append_row(fh, row: dict) -> None:
    """Append one row and make it durable (a crash after this loses nothing)."""
    fh.write(json.dumps(row, allow_nan=True) + "\n")
    fh.flush()
    os.fsync(fh.fileno())


def _pool_map(func, jobs, workers):
    if workers <= 1:
        for j in jobs:
            yield func(j)
        return
    import multiprocessing as mp

    with mp.get_context("fork").Pool(workers, maxtasksperchild=50) as pool:
        yield from pool.imap_unordered(func, jobs)


def _short(row) -> str:
    t = row.get("true.truth_class", "?")
    cat = row.get("true.category", "?")
    if row["status"] != "ok":
        return f"{row['object_id']:30s} {cat:18s} {t:4s} -> {row['status']}: {row['error'][:80]}"
    return (f"{row['object_id']:30s} {cat:18s} {t:4s} sig/noise={row.get('true.signature_over_noise', math.nan):6.2f}"
            f" -> {row.get('rotation', '?'):9s} {row.get('grade', ''):9s} lnB={row.get('ln_bayes_factor', math.nan):9.2f}"
            f" p={row.get('p_npa', math.nan):.3g} ({row['wall_s']:.1f} s)")


def cmd_run(args) -> int:
    cache = Path(args.cache)
    pop = load_population(cache)
    jobs_specs = select(pop, args.split, args.limit, args.plan)
    out = Path(args.out) if args.out else cache / f"results-{args.route}.jsonl"
    done = {r["object_id"] for r in read_table(out) if r.get("route") == args.route}
    todo = [s for s in jobs_specs if s.object_id not in done]
    print(f"route {args.route}: {len(jobs_specs)} objects selected ({args.split}), {len(jobs_specs) - len(todo)} "
          f"already in {out}, {len(todo)} to run on {args.workers} worker(s)", flush=True)
    jobs = [Job(s, args.route, str(library_dir(cache)), args.timeout_s) for s in todo]
    out.parent.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    with open(out, "a", encoding="utf-8") as fh:
        for k, row in enumerate(_pool_map(run_job, jobs, args.workers), 1):
            append_row(fh, row)
            el = time.perf_counter() - t0
            print(f"[{k}/{len(jobs)} {el:6.0f} s] {_short(row)}", flush=True)
    print(f"wrote {out} ({time.perf_counter() - t0:.0f} s wall)")
    return 0


def cmd_generate(args) -> int:
    cache = Path(args.cache)
    pop = select(load_population(cache), args.split, args.limit, args.plan)
    jobs = [Job(s, "", str(library_dir(cache)), args.timeout_s) for s in pop]
    t0 = time.perf_counter()
    for k, msg in enumerate(_pool_map(render_job, jobs, args.workers), 1):
        print(f"[{k}/{len(jobs)} {time.perf_counter() - t0:5.0f} s] {msg}", flush=True)
    print(library_summary(cache))
    return 0


def library_summary(cache: Path) -> str:
    """Counts and ranges of the rendered library (from the cached truth records)."""
    import numpy as np

    pop = load_population(cache)
    truths = []
    for s in pop:
        js = library_dir(cache) / f"{s.object_id}.json"
        if js.exists():
            truths.append(json.loads(js.read_text())["truth"])
    lines = [f"library {library_dir(cache).name}: {len(pop)} objects drawn, {len(truths)} rendered"]
    if not truths:
        return lines[0]

    def col(name, sub):
        return np.array([t[name] for t in sub], float)

    warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN medians of the flat curves print as nan

    by = {}
    for t in truths:
        by.setdefault(t["category"], []).append(t)
    lines.append(f"{'category':20s} {'n':>4s} {'calib':>5s} {'numeric':>7s} {'points':>11s} {'span d':>13s} "
                 f"{'phase deg':>11s} {'amp/noise med':>13s} {'sig/noise med':>13s}")
    for cat, sub in sorted(by.items()):
        n_cal = sum(t["split"] == "calibration" for t in sub)
        num = sum(t["attitude"] == "numeric" for t in sub)
        pts, span = col("n_points", sub), col("span_d", sub)
        lines.append(f"{cat:20s} {len(sub):4d} {n_cal:5d} {num:7d} {pts.min():5.0f}-{pts.max():<5.0f} "
                     f"{span.min():6.1f}-{span.max():<6.1f} {col('phase_min_deg', sub).min():5.1f}-"
                     f"{col('phase_max_deg', sub).max():<5.1f} {np.nanmedian(col('amplitude_over_noise', sub)):13.2f} "
                     f"{np.nanmedian(col('signature_over_noise', sub)):13.2f}")
    pa = [t for t in truths if t["truth_class"] == "PA"]
    npa = [t for t in truths if t["truth_class"] == "NPA"]
    num = sum(t["attitude"] == "numeric" for t in truths)
    lines.append(f"PA {len(pa)}, NPA {len(npa)}, none {len(truths) - len(pa) - len(npa)}; numerically integrated "
                 f"attitude with facet brightness {num} ({num / len(truths):.0%}); calibration half "
                 f"{sum(t['split'] == 'calibration' for t in truths)}, held-out {sum(t['split'] == 'heldout' for t in truths)}")
    if npa:
        s2n = col("signature_over_noise", npa)
        edges = (0, 0.5, 1, 3, 10, np.inf)
        lines.append("NPA signature/noise: " + ", ".join(
            f"[{lo:g}, {hi:g}) {int(np.sum((s2n >= lo) & (s2n < hi)))}" for lo, hi in zip(edges[:-1], edges[1:])))
        lines.append(f"NPA P_psi {col('p_psi_h', npa).min():.1f}-{col('p_psi_h', npa).max():.1f} h, P_phi "
                     f"{col('p_phi_h', npa).min():.1f}-{col('p_phi_h', npa).max():.1f} h; E/E0 "
                     f"{np.nanmin(col('excitation_e_over_e0', npa)):.4f}-{np.nanmax(col('excitation_e_over_e0', npa)):.2f}; "
                     f"SAM {sum(t['mode'] == 'SAM' for t in npa)}, LAM {sum(t['mode'] == 'LAM' for t in npa)}")
    if pa:
        lines.append(f"PA periods {col('p_psi_h', pa).min():.2f}-{col('p_psi_h', pa).max():.1f} h; close-approach "
                     f"minimum distance {min(t['delta_min_au'] for t in truths if t['plan_kind'] == 'close'):.3f}-"
                     f"{max(t['delta_min_au'] for t in truths if t['plan_kind'] == 'close'):.3f} au")
    return "\n".join(lines)


def cmd_summary(args) -> int:
    print(library_summary(Path(args.cache)))
    return 0


def cmd_report(args) -> int:
    from library import scoring

    rows = read_table(Path(args.table))
    if not rows:
        print(f"{args.table}: no rows", file=sys.stderr)
        return 2
    fig = Path(args.figure) if args.figure else Path(args.table).with_suffix(".reliability.png")
    print(scoring.report_text(rows, split=args.split, figure_path=fig))
    return 0


def cmd_calibrate(args) -> int:
    from library import calibration

    rows = read_table(Path(args.table))
    if not rows:
        print(f"{args.table}: no rows", file=sys.stderr)
        return 2
    model, text = calibration.fit_and_evaluate(rows, Path(args.figure) if args.figure else None)
    print(text)
    import subprocess

    try:
        commit = subprocess.run(["git", "-C", str(Path(__file__).resolve().parent), "rev-parse", "--short", "HEAD"],
                                capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        commit = "unknown"
    extra = {"library": f"{GENERATOR_VERSION}-{POPULATION_SEED}", "table": Path(args.table).name,
             "code_commit": commit, "fitted_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
             "note": "P(NPA) calibrated on simulated objects (benchmarks/bench_classify.py); a scientific "
                     "estimate for research use, valid for the route it was fitted on"}
    calibration.save_calibration(model, Path(args.out), extra)
    print(f"wrote {args.out}")
    return 0


def cmd_timing(args) -> int:
    from library.render import load_or_render

    cache = Path(args.cache)
    pop = select(load_population(cache), "all", None)
    by_plan = {}
    for s in pop:
        if s.truth_class != "none" and len(by_plan.setdefault(s.plan_kind, [])) < TIMING_PER_PLAN:
            by_plan[s.plan_kind].append(s)
    warnings.simplefilter("ignore")
    print(f"{'plan':8s} {'object':30s} {'n':>5s} " + " ".join(f"{r:>10s}" for r in args.routes))
    for plan, specs in by_plan.items():
        for s in specs:
            obj = load_or_render(s, library_dir(cache))
            times = []
            for r in args.routes:
                t0 = time.perf_counter()
                ROUTES[r].run(obj.lightcurve, s.seed)
                times.append(time.perf_counter() - t0)
            print(f"{plan:8s} {s.object_id:30s} {obj.lightcurve.n_points:5d} " + " ".join(f"{t:9.1f}s" for t in times),
                  flush=True)
    return 0


# ---------------------------------------------------------------------------
# Performance of the default route and of the sampler (kept from the earlier benchmark)


def run_performance():
    """Wall time of the default classify on a dense 1000-point curve; the sampler's overhead beside the bare model."""
    import numpy as np

    from tumble.classify import classify, fourier_evidence
    from tumble.dynamics import RotationState
    from tumble.inference import sample_posterior
    from tumble.model import PhysicalModel
    from tumble.simulate import DenseCampaign, NoiseModel, simulate_lightcurve

    print("\n=== performance (one core) ===")
    rng = np.random.default_rng(5)
    st = RotationState.principal_axis(7.3, 40.0, 50.0)
    plan = DenseCampaign(2460000.5, n_nights=10, hours_per_night=8.0, cadence_min=4.8, zero_point_sigma_mag=0.03)
    lc = simulate_lightcurve(st, (1.6, 1.2, 1.0), plan, noise=NoiseModel(0.01), rng=rng).lightcurve
    print(f"dense light curve: {lc.n_points} points over {lc.span_d:.2f} d")
    t0 = time.perf_counter()
    v, ev, fit = classify(lc, rng=1)
    t1 = time.perf_counter()
    print(f"default classify (max-steps 1500): {t1 - t0:.1f} s wall; verdict {v.rotation} {v.grade}, "
          f"period {v.period_h:.6f} h; state converged: {v.state_converged}")
    t0 = time.perf_counter()
    ev = fourier_evidence(lc)
    t_ev = time.perf_counter() - t0
    print(f"   of which the evidence (quadrature): {t_ev:.1f} s, {ev.n_evaluations} frequency evaluations")
    # sampler overhead: sample_posterior against the bare model cost of the same walker evaluations
    from tumble.classify import _thin

    sub = _thin(lc, 300)
    model = PhysicalModel(sub, "PA", period_range_h=(3.0, 30.0))
    x0 = np.array([fit.best[n] for n in model.space.names])
    class Timed:
        """The model, with the time spent inside its calls accumulated (same calls, same batches)."""

        def __init__(self, m):
            self.m, self.t, self.calls, self.points = m, 0.0, 0, 0

        def __call__(self, x):
            t = time.perf_counter()
            out = self.m(x)
            self.t += time.perf_counter() - t
            self.calls += 1
            self.points += len(np.atleast_2d(x))
            return out

    timed = Timed(model)
    t0 = time.perf_counter()
    post = sample_posterior(timed, model.space, start=x0, n_ensembles=2, max_steps=600, first_block=600,
                            rng=2, warn=False, start_scale=1e-3)
    t_s = time.perf_counter() - t0
    n_eval = post.diagnostics.n_evaluations
    t_m = timed.t
    print(f"sampler: {t_s:.2f} s for {n_eval} walker-evaluations in {timed.calls} model calls "
          f"(mean batch {timed.points / max(1, timed.calls):.1f}); time inside the model {t_m:.2f} s; "
          f"overhead {100 * (t_s - t_m) / t_m:.1f} % (target <= 25 %)")
    # the same count of evaluations in batches of the whole ensemble, for comparison (emcee's stretch
    # move evaluates half the ensemble per call, so its batches are half this size)
    nw = post.diagnostics.n_walkers
    xs = model.space.sample_prior(nw, 3)
    calls = max(1, n_eval // nw)
    t0 = time.perf_counter()
    for _ in range(calls):
        model(xs)
    t_b = time.perf_counter() - t0
    print(f"   bare model in whole-ensemble batches: {t_b:.2f} s (half-ensemble batches cost "
          f"{t_m / max(t_b, 1e-9):.2f}x that)")


def cmd_perf(args) -> int:
    warnings.simplefilter("ignore")
    run_performance()
    return 0


def build_parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = ap.add_subparsers(dest="command", required=True)
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--cache", default=str(CACHE_DIR), help="cache folder (rendered library, tables)")
    common.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    common.add_argument("--limit", type=int, default=None, help="first N objects of the hashed order")
    common.add_argument("--split", choices=("calibration", "heldout", "all"), default="all")
    common.add_argument("--plan", nargs="+", choices=("dense", "sparse", "close"), default=None,
                        help="only objects of these plan kinds (default all)")
    common.add_argument("--timeout-s", type=float, default=DEFAULT_TIMEOUT_S, help="per-object time limit, s")
    p = sub.add_parser("run", parents=[common], help="run a route on the library")
    p.add_argument("--route", choices=sorted(ROUTES), default="evidence")
    p.add_argument("--out", default=None, help="JSON-lines table (default <cache>/results-<route>.jsonl)")
    p.add_argument("--quick", action="store_true", help="the first 40 objects only")
    sub.add_parser("generate", parents=[common], help="render the library into the cache")
    sub.add_parser("summary", parents=[common], help="counts and ranges of the rendered library")
    p = sub.add_parser("report", help="score a results table")
    p.add_argument("table")
    p.add_argument("--split", choices=("calibration", "heldout", "all"), default="all")
    p.add_argument("--figure", default=None, help="reliability diagram PNG (default beside the table)")
    p = sub.add_parser("calibrate", help="fit the calibration map on a results table")
    p.add_argument("table")
    p.add_argument("--out", default=str(CACHE_DIR / "calibration.json"), help="JSON of the fitted map")
    p.add_argument("--figure", default=None, help="held-out reliability diagram PNG")
    p = sub.add_parser("timing", parents=[common], help="wall time per object of the routes, one core")
    p.add_argument("--routes", nargs="+", choices=sorted(ROUTES), default=["screen", "evidence"])
    sub.add_parser("perf", help="wall time of the default classify and the sampler's overhead, one core")
    return ap


#: Sub-command drivers by name.
COMMANDS = {"run": cmd_run, "generate": cmd_generate, "summary": cmd_summary, "report": cmd_report, "calibrate": cmd_calibrate,
            "timing": cmd_timing, "perf": cmd_perf}


def main(argv=None) -> int:
    args = build_parser().parse_args(argv)
    if getattr(args, "quick", False) and args.limit is None:
        args.limit = 40
    return COMMANDS[args.command](args)


if __name__ == "__main__":
    sys.exit(main())
