"""Throughput of the catalogue route (``tumble survey --catalog``) beside ``tumble survey`` on the same objects.

Run:  .venv/bin/python benchmarks/bench_catalog.py [--objects 40] [--partitions 4] [--workers 2] [--quick]

The sample: the simulated sparse survey objects of ``bench_survey.py`` (200 points each, 100 nights x 2
visits over 365 days, half PA and half SAM, 0.03 mag noise), written once as CSV files, then
- one survey table (CSV with an object column) read by ``run_survey`` (process pool, ``--workers``), and
- a partitioned Parquet catalogue of ``--partitions`` flat partitions read by ``run_catalog`` (Dask's
  local process scheduler, ``--workers`` processes, one task per partition),
both on the screen route. Printed side by side from one run: wall time, objects/s, the catalogue/survey
ratio, the CPU time per object (the rows' runtime_s), the fraction of a partition task spent outside the
per-object work (reading, building light curves, writing), and the projection to five million objects
with its assumptions. ``--quick``: 8 objects in 2 partitions. Numerical threads pinned to one.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import argparse  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_survey import make_sample  # noqa: E402

#: The projection's target: the next decade's main-belt survey, about five million objects (issue 18).
N_PROJECTED = 5_000_000


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--objects", type=int, default=40)
    ap.add_argument("--partitions", type=int, default=4)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--data-dir", default=str(Path(tempfile.gettempdir()) / "tumble_bench_survey"))
    args = ap.parse_args()
    if args.quick:
        args.objects, args.partitions = 8, 2
    import pandas as pd

    from tumble.catalog import read_catalog_results, run_catalog
    from tumble.photometry import read_lightcurve
    from tumble.results import read_results
    from tumble.survey import SurveyConfig, run_survey

    paths = make_sample(Path(args.data_dir), args.objects)
    work = Path(tempfile.mkdtemp(prefix="tumble_bench_catalog_"))
    frames = []
    for p in paths:
        lc = read_lightcurve(p)
        frames.append(pd.DataFrame({"object": lc.object_id, "time": np.asarray(lc.t_obs), "mag": np.asarray(lc.mag),
                                    "err": np.asarray(lc.err), "band": np.asarray(lc.band).astype(str)}))
    table = pd.concat(frames)
    with open(work / "survey.csv", "w") as fh:
        fh.write("object,time,mag,err,band\n")
        for r in table.itertuples(index=False):
            fh.write(f"{r.object},{r.time!r},{r.mag!r},{r.err!r},{r.band}\n")
    cat = work / "catalogue"
    cat.mkdir()
    for k, chunk in enumerate(np.array_split(np.arange(len(frames)), args.partitions)):
        pd.concat([frames[i] for i in chunk]).to_parquet(cat / f"part{k}.parquet")
    config = SurveyConfig(route="screen", seed=1)

    t0 = time.perf_counter()
    run_survey([work / "survey.csv"], work / "survey.parquet", config, workers=args.workers, progress=False)
    wall_survey = time.perf_counter() - t0
    t0 = time.perf_counter()
    summary = run_catalog(cat, work / "results", config, scheduler="processes", workers=args.workers)
    wall_cat = time.perf_counter() - t0

    rows_s = read_results(work / "survey.parquet")
    rows_c = read_catalog_results(work / "results")
    cpu_obj = float(np.mean(rows_c["runtime_s"]))
    task_s = sum(p.wall_s for p in summary.partitions)
    outside = 1.0 - float(np.sum(rows_c["runtime_s"])) / task_s
    n = args.objects
    print(f"objects {n}, partitions {args.partitions}, workers {args.workers}, screen route, 200 points each")
    print(f"tumble survey (table)     : {wall_survey:8.1f} s  {n / wall_survey:7.2f} objects/s")
    print(f"tumble survey --catalog   : {wall_cat:8.1f} s  {n / wall_cat:7.2f} objects/s")
    print(f"ratio catalogue / survey  : {wall_cat / wall_survey:8.2f} (wall time, same objects, same machine)")
    print(f"rows identical (ok rows)  : {sorted(rows_s['object']) == sorted(rows_c['object'])}")
    print(f"CPU per object (runtime_s): {cpu_obj:8.3f} s (catalogue), {float(np.mean(rows_s['runtime_s'])):.3f} s (survey)")
    print(f"partition overhead        : {100 * outside:8.1f} % of task time outside the per-object work")
    for cores in (2, 100, 1000):
        hours = N_PROJECTED * cpu_obj / (1 - outside) / cores / 3600.0
        print(f"projection {N_PROJECTED:,} objects on {cores:5d} cores: {hours:10.1f} h "
              "(assumes: screen route, ~200 points/object, per-object cost as measured here and flat in N, "
              "perfect scaling across partitions)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
