"""Throughput, parallel efficiency, Dask overhead and memory of ``tumble survey --screen``.

Run:  .venv/bin/python benchmarks/bench_survey.py [--sizes 100,1000,5000] [--quick] [--efficiency-size N]

The sample: simulated sparse survey objects of 200 points each (tumble.simulate.SparseSurvey: 100
nights x 2 visits over 365 days, half PA and half SAM, 0.03 mag noise), one CSV file per object, written
once into ``--data-dir`` and reused. Every configuration runs ``run_survey`` in its own subprocess (so
memory is measured from a clean start) through the real path: the parent lists the files, the workers
read and screen them. Measured side by side in one run and printed as ratios:

- throughput of the process pool with ``--workers`` (default 2) at each size: objects/s, objects/s/core,
  and the time per object relative to the smallest size (flat = the per-object cost does not grow);
- parallel efficiency: 1 worker versus 2 workers on the same sample (``--efficiency-size`` objects;
  target >= 1.7x);
- Dask LocalCluster (2 single-threaded workers) versus the process pool (2 workers) on that sample
  (overhead target <= 20 %);
- peak memory (RSS) of the parent and of the largest worker, and of the whole process tree, sampled
  every 0.1 s with psutil, for each size;
- CPU seconds consumed per object by all the processes of a run (psutil): on a shared machine the
  wall-clock ratios depend on the cores other users leave; the CPU ratios do not, and the speed-up
  for free cores derived from them is printed, labelled as derived.

The default sizes (100, 1000, 5000) take hours at ~2-4 s per object on two cores; ``--quick`` runs
10, 20, 40. Numerical threads are pinned to one. The machines these run on are shared: read ratios.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

warnings.simplefilter("ignore")


def make_sample(folder: Path, n: int, seed: int = 20261202) -> list[Path]:
    """n sparse 200-point objects (object k is the same whatever n), as CSV files; existing files are reused."""
    from tumble.dynamics import RotationState
    from tumble.simulate import NoiseModel, SparseSurvey, simulate_lightcurve, write_simulation

    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for k in range(n):
        path = folder / f"bench{k:05d}.csv"
        paths.append(path)
        if path.exists():
            continue
        g = np.random.default_rng([seed, k])
        lon, lat = g.uniform(0, 360), math.degrees(math.asin(g.uniform(-1, 1)))
        axes = (1.5, 1.15, 1.0)
        if k % 2 == 0:
            state = RotationState.principal_axis(float(g.uniform(3.0, 30.0)), lon, lat, float(g.uniform(0, 360)),
                                                 epoch_jd=2460000.5)
        else:
            a2, b2, c2 = np.square(axes)
            i1, i2 = (b2 + c2) / (a2 + b2), (a2 + c2) / (a2 + b2)
            idd = float(i2 + g.uniform(0.2, 0.8) * (1 - i2))
            state = RotationState.excited(i1, i2, idd, float(g.uniform(3.0, 30.0)), lon, lat,
                                          float(g.uniform(0, 360)), float(g.uniform(0, 360)), epoch_jd=2460000.5)
        plan = SparseSurvey(2460000.5, span_d=365.0, n_nights=100, points_per_night=2)
        sim = simulate_lightcurve(state, axes, plan, noise=NoiseModel(0.03), object_id=path.stem,
                                  rng=int(g.integers(1 << 30)))
        tmp = path.with_name("." + path.name)
        write_simulation(sim, tmp, format="csv")
        Path(str(tmp) + ".truth.json").unlink(missing_ok=True)
        os.replace(tmp, path)
    return paths


def _one(args) -> None:
    """Child: one survey run; prints its JSON line (wall time, counts)."""
    from tumble.survey import SurveyConfig, run_survey

    paths = sorted(Path(args.data_dir).glob("bench*.csv"))[: args.n]
    out = Path(tempfile.mkdtemp(prefix="bench_survey_")) / "results.ecsv"
    kw = {"dask_local": args.workers} if args.executor == "dask" else {"workers": args.workers}
    from tumble.survey import journal_path

    jpath = journal_path(out)
    first = {}
    done = threading.Event()

    def watch():  # time of the first finished object (start-up of the executor + one object)
        while not done.is_set():
            if jpath.exists() and jpath.stat().st_size:
                first["t"] = time.perf_counter()
                return
            time.sleep(0.02)

    th = threading.Thread(target=watch, daemon=True)
    t0 = time.perf_counter()
    th.start()
    s = run_survey([str(p) for p in paths], out, SurveyConfig(route="screen", seed=1, object_timeout_s=None),
                   progress=False, **kw)
    wall = time.perf_counter() - t0
    done.set()
    first_s = first.get("t", t0 + wall) - t0
    import tumble

    print(json.dumps({"module": tumble.__file__, "wall_s": wall, "first_s": first_s,
                      "steady_obj_s": (args.n - 1) / (wall - first_s) if wall > first_s and args.n > 1 else math.nan,
                      "status": s.status_counts, "cpu_per_object_s": s.cpu_per_object_s,
                      "rotation": s.rotation_counts, "results": str(out)}))


_ENV = dict(os.environ)


def snapshot_package() -> str:
    """Copy the tumble package to a temporary folder that every configuration imports (PYTHONPATH), so
    that edits made to the working tree while the benchmark runs cannot make the configurations differ."""
    import shutil

    import tumble

    src = Path(tumble.__file__).resolve().parent
    dst = Path(tempfile.mkdtemp(prefix="bench_survey_pkg_"))
    shutil.copytree(src, dst / "tumble", ignore=shutil.ignore_patterns("__pycache__"))
    _ENV["PYTHONPATH"] = str(dst) + (os.pathsep + _ENV["PYTHONPATH"] if _ENV.get("PYTHONPATH") else "")
    try:
        rev = subprocess.run(["git", "-C", str(src), "rev-parse", "--short", "HEAD"], capture_output=True,
                             text=True).stdout.strip()
        dirty = subprocess.run(["git", "-C", str(src), "status", "--porcelain", "--", "."], capture_output=True,
                               text=True).stdout.strip()
        return f"{rev}{' + uncommitted edits in tumble/' if dirty else ''}"
    except OSError:
        return "unknown revision"


def run_config(data_dir: Path, n: int, executor: str, workers: int) -> dict:
    """Run one configuration in a subprocess, sampling the RSS of its process tree."""
    import psutil

    cmd = [sys.executable, __file__, "--_one", "--data-dir", str(data_dir), "--n", str(n), "--executor", executor,
           "--workers", str(workers)]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_ENV)
    peak = {"parent": 0, "worker": 0, "tree": 0}
    cpu = {}  # pid -> last seen user + system CPU time, s (the run's processes, sampled while alive)
    stop = threading.Event()

    def sample():
        try:
            root = psutil.Process(proc.pid)
        except psutil.Error:
            return
        while not stop.is_set():
            try:
                parent = root.memory_info().rss
                t = root.cpu_times()
                cpu[root.pid] = t.user + t.system
                kids = []
                for c in root.children(recursive=True):
                    try:
                        kids.append(c.memory_info().rss)
                        t = c.cpu_times()
                        cpu[c.pid] = t.user + t.system
                    except psutil.Error:
                        pass
                peak["parent"] = max(peak["parent"], parent)
                peak["worker"] = max([peak["worker"], *kids])
                peak["tree"] = max(peak["tree"], parent + sum(kids))
            except psutil.Error:
                pass
            stop.wait(0.1)

    th = threading.Thread(target=sample, daemon=True)
    load0 = os.getloadavg()[0]
    th.start()
    stdout, stderr = proc.communicate()
    stop.set()
    th.join()
    if proc.returncode != 0:
        raise SystemExit(f"configuration {executor} x{workers} on {n} objects failed:\n{stderr[-2000:]}")
    res = json.loads(stdout.strip().splitlines()[-1])
    assert "bench_survey_pkg_" in res["module"], "the configuration did not import the snapshot"
    res.update(n=n, executor=executor, workers=workers, load=(load0, os.getloadavg()[0]),
               cpu_s=sum(cpu.values()), cpu_obj_s=sum(cpu.values()) / n, rss_parent_mb=peak["parent"] / 2**20,
               rss_worker_mb=peak["worker"] / 2**20, rss_tree_mb=peak["tree"] / 2**20)
    return res


def _same_rows(a: str, b: str) -> bool:
    from tumble.results import read_results

    ta, tb = read_results(a), read_results(b)
    cols = [c for c in ta.colnames if c != "runtime_s"]

    def norm(t):
        return [[None if isinstance(v, float) and math.isnan(v) else v for v in row]
                for row in t[cols].as_array().tolist()]

    return norm(ta) == norm(tb)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="100,1000,5000", help="sample sizes (comma-separated)")
    ap.add_argument("--quick", action="store_true", help="sizes 10,20,40")
    ap.add_argument("--efficiency-size", type=int, help="sample for the 1 vs 2 worker and Dask comparisons "
                                                        "(default: the smallest size)")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--data-dir", default=str(Path(tempfile.gettempdir()) / "tumble_bench_survey"))
    ap.add_argument("--_one", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--n", type=int, help=argparse.SUPPRESS)
    ap.add_argument("--executor", default="pool", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args._one:
        _one(args)
        return
    sizes = [10, 20, 40] if args.quick else sorted(int(v) for v in args.sizes.split(","))
    n_eff = args.efficiency_size or sizes[0]
    data = Path(args.data_dir)
    t0 = time.perf_counter()
    make_sample(data, max(sizes + [n_eff]))
    print(f"code: a snapshot of tumble at {snapshot_package()}, imported by every configuration")
    print(f"sample: {max(sizes + [n_eff])} sparse objects of 200 points in {data} "
          f"({time.perf_counter() - t0:.0f} s to make or reuse); cores {os.cpu_count()}, "
          f"load {os.getloadavg()[0]:.2f} (shared machine)")

    # 1 vs 2 workers vs Dask on the same sample, interleaved in one run
    one = run_config(data, n_eff, "pool", 1)
    two = run_config(data, n_eff, "pool", args.workers)
    dask = run_config(data, n_eff, "dask", args.workers)
    print(f"\nsame {n_eff} objects: 1 worker {one['wall_s']:.1f} s, {args.workers} workers {two['wall_s']:.1f} s, "
          f"Dask LocalCluster {args.workers} workers {dask['wall_s']:.1f} s (wall, start-up included)")
    for label, r in (("1 worker", one), (f"{args.workers} workers", two), ("Dask", dask)):
        print(f"  {label:>10s}: first object done after {r['first_s']:.1f} s; then {r['steady_obj_s']:.3f} obj/s; "
              f"load average {r['load'][0]:.1f} -> {r['load'][1]:.1f}")
    # busy fraction: time inside the task function / (wall x workers); what is lost to start-up, scheduling
    # and idle workers, as against per-object compute that is slower (a loaded machine, memory bandwidth)
    for label, r in (("1 worker", one), (f"{args.workers} workers", two), ("Dask", dask)):
        w = 1 if r is one else args.workers
        busy = r["cpu_per_object_s"] * r["n"] / (r["wall_s"] * w)
        print(f"  {label:>10s}: mean time per object inside the task {r['cpu_per_object_s']:.2f} s; "
              f"workers busy {busy:.0%} of the wall time")
    print(f"per-object task time, {args.workers} workers / 1 worker: "
          f"{two['cpu_per_object_s'] / one['cpu_per_object_s']:.2f}; Dask / pool: "
          f"{dask['cpu_per_object_s'] / two['cpu_per_object_s']:.2f} (1.00 on an idle machine)")
    # CPU accounting (psutil, every process of the run, sampled every 0.1 s: the last 0.1 s of a process is
    # missed): on a shared machine the CPU a run consumes per object is what its executor costs; wall-clock
    # speed-up then follows from the cores the machine actually grants
    print(f"CPU seconds per object (all processes of the run): 1 worker {one['cpu_obj_s']:.2f}, "
          f"{args.workers} workers {two['cpu_obj_s']:.2f}, Dask {dask['cpu_obj_s']:.2f}; "
          f"ratios {args.workers} workers / 1 worker {two['cpu_obj_s'] / one['cpu_obj_s']:.2f}, "
          f"Dask / pool {dask['cpu_obj_s'] / two['cpu_obj_s']:.2f}")
    cpu_speedup = args.workers * one["cpu_obj_s"] / two["cpu_obj_s"]
    cpu_dask = dask["cpu_obj_s"] / two["cpu_obj_s"] - 1.0
    print(f"derived for {args.workers} free cores (not measured wall time): speed-up {cpu_speedup:.2f}x "
          f"(target >= 1.7x: {'met' if cpu_speedup >= 1.7 else 'NOT met'}), Dask CPU overhead {cpu_dask:+.1%} "
          f"(target <= 20%: {'met' if cpu_dask <= 0.2 else 'NOT met'}); CPU granted: 1 worker "
          f"{one['cpu_s'] / one['wall_s']:.2f} cores, {args.workers} workers {two['cpu_s'] / two['wall_s']:.2f}, "
          f"Dask {dask['cpu_s'] / dask['wall_s']:.2f} of {os.cpu_count()}")
    steady = two["steady_obj_s"] / one["steady_obj_s"]
    steady_dask = two["steady_obj_s"] / dask["steady_obj_s"] - 1.0
    print(f"after the first object: speed-up {steady:.2f}x, Dask overhead {steady_dask:+.1%}")
    speedup = one["wall_s"] / two["wall_s"]
    overhead = dask["wall_s"] / two["wall_s"] - 1.0
    print(f"parallel speed-up {args.workers} vs 1 workers: {speedup:.2f}x (target >= 1.7x: "
          f"{'met' if speedup >= 1.7 else 'NOT met'}); efficiency {speedup / args.workers:.0%}")
    print(f"Dask overhead vs the process pool: {overhead:+.1%} (target <= 20%: {'met' if overhead <= 0.2 else 'NOT met'})")
    print(f"identical rows (1 worker, {args.workers} workers, Dask): "
          f"{_same_rows(one['results'], two['results']) and _same_rows(one['results'], dask['results'])}")
    print(f"load average now {os.getloadavg()[0]:.2f}")

    # throughput and memory per size
    runs = [two if n == n_eff else run_config(data, n, "pool", args.workers) for n in sizes]
    # fixed start-up against marginal cost: CPU at n_eff and 2 n_eff objects, for the pool and for Dask
    pool2 = next((r for r in runs if r["n"] == 2 * n_eff), None) or run_config(data, 2 * n_eff, "pool", args.workers)
    dask2 = run_config(data, 2 * n_eff, "dask", args.workers)
    print(f"\nmarginal CPU per object (CPU at {2 * n_eff} minus CPU at {n_eff} objects, / {n_eff}):")
    marg = {}
    for label, a, b in (("pool", two, pool2), ("Dask", dask, dask2)):
        m = (b["cpu_s"] - a["cpu_s"]) / n_eff
        marg[label] = m
        print(f"  {label:>5s}: {m:.2f} CPU-s per object; fixed start-up {a['cpu_s'] - n_eff * m:.1f} CPU-s; "
              f"wall {a['wall_s']:.1f} s -> {b['wall_s']:.1f} s")
    print(f"Dask marginal CPU overhead vs the pool: {marg['Dask'] / marg['pool'] - 1:+.1%} (target <= 20%: "
          f"{'met' if marg['Dask'] / marg['pool'] - 1 <= 0.2 else 'NOT met'}; start-up excluded)")
    base = runs[0]["wall_s"] / runs[0]["n"]
    cbase = runs[0]["cpu_obj_s"]
    print(f"\n{'objects':>8s} {'wall s':>8s} {'obj/s':>7s} {'obj/s/core':>10s} {'s/obj':>7s} {'vs first':>8s} "
          f"{'CPU s/obj':>9s} {'vs first':>8s} {'obj/CPU-s':>9s} "
          f"{'RSS parent MB':>13s} {'RSS worker MB':>13s} {'RSS tree MB':>11s}  status")
    for r in runs:
        per = r["wall_s"] / r["n"]
        print(f"{r['n']:8d} {r['wall_s']:8.1f} {r['n'] / r['wall_s']:7.3f} {r['n'] / r['wall_s'] / args.workers:10.3f} "
              f"{per:7.2f} {per / base:8.2f} {r['cpu_obj_s']:9.2f} {r['cpu_obj_s'] / cbase:8.2f} "
              f"{1 / r['cpu_obj_s']:9.3f} {r['rss_parent_mb']:13.0f} {r['rss_worker_mb']:13.0f} "
              f"{r['rss_tree_mb']:11.0f}  {r['status']}")
    for label, r in (("1 worker", one), ("Dask", dask)):
        print(f"{label:>8s} on {r['n']} objects: RSS parent {r['rss_parent_mb']:.0f} MB, largest worker "
              f"{r['rss_worker_mb']:.0f} MB, tree {r['rss_tree_mb']:.0f} MB")
    print(f"\nmean screen time per object (runtime_s): {two['cpu_per_object_s']:.2f} s; "
          f"total benchmark time {time.perf_counter() - t0:.0f} s; load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
