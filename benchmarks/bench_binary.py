"""The binary alternative on the calibration library: binaries against tumblers, held-out half.

Run:  nice .venv/bin/python benchmarks/bench_binary.py run [--quick] [--split heldout] [--limit N] [--shard I/N]
      .venv/bin/python benchmarks/bench_binary.py report [--split heldout]
      .venv/bin/python benchmarks/bench_binary.py figures      # docs/figures/binary-fold-*.png

Objects: the library's binaries (``library.population.BINARY_RECIPES``: dense campaigns, a PA ellipsoid
primary of 2-5 h with a spherical satellite, P_orb 10-40 h, size ratio 0.2-0.5, most orbits near
edge-on) and its dense tumblers (``dense-npa``, read from the cached renders of the library in
``--library-cache``; copy them from the main checkout's cache, nothing is re-rendered for them). Each
object runs ``tumble.classify.classify`` without the physical fit and the NPA detection limit (the
verdict from the evidence, the checks, the calibrated p_npa and the binary family with its rule) and
``tumble.classify.screen``. Objects run in the library's hashed order, binaries and tumblers
interleaved, so that any first N are a random sample of both; every finished object is appended at once
to a JSON-lines table (``benchmarks/.cache/binary-<split>.jsonl``) and a rerun skips what is there.

Printed (``report``): binaries called NPA (target <= 5 %, with the one-sided 95 % Clopper-Pearson upper
limit); binaries whose deepest observed event is >= 3x the noise named as binaries (the binary rule
fires) with P_orb within 1 % (target >= 80 %); tumblers for which the binary rule fires (target
<= 5 %); the screen's binary_candidate on both classes; and the time of the screen's event indicator
against the whole screen, measured side by side on the same objects. Scientific estimates for research
use: simulated objects, not a guarantee for any real one.
"""

from __future__ import annotations

import os

for _v in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_v] = "1"

import argparse  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

from library.population import BINARY_RECIPES, RECIPES, generate_population, order_key  # noqa: E402
from library.render import load_or_render, load_rendered  # noqa: E402
from library.scoring import clopper_pearson  # noqa: E402

warnings.simplefilter("ignore")

HERE = Path(__file__).resolve().parent
CACHE_DIR = HERE / ".cache"
#: The library's render cache (the binaries are rendered into it; the tumblers are read from it).
LIBRARY_CACHE = CACHE_DIR / "library-cal-2-20261204"
#: Tumblers of the library the binary rule is tried on.
TUMBLER_CATEGORY = "dense-npa"
#: Events at least this many times the noise are "detectable" (issue 20's target population).
DETECTABLE_DEPTH_OVER_NOISE = 3.0
#: P_orb counts as recovered within this relative error (issue 20).
P_ORB_REL_TOL = 0.01
#: --quick: this many objects of each class.
QUICK_PER_CLASS = 8
#: Real photometry of the binary (65803) Didymos (ALCDEF; open data of the project) and its published
#: periods (Pravec et al. 2006, Icarus 181, 63): primary rotation and orbit, hours.
DIDYMOS = HERE.parent.parent / "shared" / "external_data" / "alcdef_didymos" / "ALCDEF_65803_Didymos.txt"
DIDYMOS_P1_H, DIDYMOS_P_ORB_H = 2.2593, 11.91
#: Error given to ALCDEF points quoted with error 0 (differential blocks): a typical CCD error (from memory).
ALCDEF_DEFAULT_ERR_MAG = 0.02
FIGURES = HERE.parent / "docs" / "figures"
#: The library binary drawn as the simulated example (a held-out binary with deep, well covered events).
EXAMPLE_BINARY = "CAL-dense-binary-007"


def select(split: str, limit: int | None, cache: Path) -> list:
    """Binaries and cached tumblers of one split, interleaved in the library's hashed order."""
    binaries = [s for s in generate_population(recipes=BINARY_RECIPES) if split in ("all", s.split)]
    tumbler_recipes = tuple(r for r in RECIPES if r.category == TUMBLER_CATEGORY)
    tumblers = [s for s in generate_population(recipes=tumbler_recipes) if split in ("all", s.split)
                and (cache / f"{s.object_id}.npz").exists()]
    binaries.sort(key=lambda s: order_key(s.object_id))
    tumblers.sort(key=lambda s: order_key(s.object_id))
    if limit is not None:
        binaries, tumblers = binaries[:limit], tumblers[:limit]
    out = []
    for k in range(max(len(binaries), len(tumblers))):
        out.extend(x[k] for x in (binaries, tumblers) if k < len(x))
    return out


def run_object(spec, cache: Path) -> dict:
    """Classify (evidence route with the binary family) and screen one object."""
    from tumble.classify import classify, screen
    from tumble.classify.binary import screen_event_indicator

    obj = load_or_render(spec, cache) if spec.truth_class == "binary" else load_rendered(cache, spec.object_id)
    lc, truth = obj.lightcurve, obj.truth
    row = {"object_id": spec.object_id, "class": spec.truth_class, "split": spec.split,
           "noise_mag": truth.noise_mag, "n_points": truth.n_points, "span_d": truth.span_d,
           "true_p_orb_h": truth.p_orb_h, "true_event_depth_mag": truth.event_depth_mag,
           "true_depth_over_noise": truth.event_depth_over_noise, "true_signature_over_noise": truth.signature_over_noise,
           "true_period_h": truth.period_h, "edge_on": bool(spec.binary.edge_on) if spec.binary is not None else None}
    t0 = time.perf_counter()
    c = classify(lc, fit_state=False, detection_limit=False, rng=spec.seed)
    t1 = time.perf_counter()
    v = c.verdict
    b = c.binary
    row.update(rotation=v.rotation, grade=v.grade, p_npa=v.p_npa, ln_b=v.ln_bayes_factor,
               binary_named=bool(np.isfinite(v.p_orb_h)), p_orb_found_h=v.p_orb_h,
               event_depth_found_mag=v.event_depth_mag, binary_weighed=b is not None,
               dln_binary_npa=(b.ln_z_binary - c.evidence.ln_z_npa) if b is not None else math.nan,
               binary_family_p_orb_h=b.p_orb_h if b is not None else math.nan,
               reason=v.grade_reason, t_classify_s=t1 - t0)
    t2 = time.perf_counter()
    s = screen(lc)
    t3 = time.perf_counter()
    row.update(screen_flag=s.screen_flag, binary_candidate=bool(s.binary_candidate), screen_p_orb_h=s.p_orb_h,
               t_screen_s=t3 - t2)
    # the indicator alone, on the same object, side by side with the whole screen
    if np.isfinite(s.p1_h) and np.isfinite(s.p2_h):
        t4 = time.perf_counter()
        screen_event_indicator(lc, 24.0 / s.p1_h, 24.0 / s.p2_h)
        row["t_indicator_s"] = time.perf_counter() - t4
    return row


def _rate_text(k: int, n: int) -> str:
    if n == 0:
        return "0/0"
    lo, hi = clopper_pearson(k, n)
    return f"{k}/{n} = {100 * k / n:.0f} % (95 % interval {100 * lo:.0f}-{100 * hi:.0f} %)"


def _upper_text(k: int, n: int) -> str:
    if n == 0:
        return "0/0"
    _, hi = clopper_pearson(k, n, one_sided=True)
    return f"{k}/{n} = {100 * k / n:.1f} % (one-sided 95 % upper limit {100 * hi:.1f} %)"


def report(rows: list) -> str:
    """The issue's figures from the table's rows."""
    bins = [r for r in rows if r["class"] == "binary"]
    tums = [r for r in rows if r["class"] == "NPA"]
    det = [r for r in bins if (r["true_depth_over_noise"] or 0) >= DETECTABLE_DEPTH_OVER_NOISE]
    good = [r for r in det if r["binary_named"]
            and abs(r["p_orb_found_h"] / r["true_p_orb_h"] - 1) <= P_ORB_REL_TOL]
    named_any = [r for r in det if r["binary_named"]]
    lines = [f"objects: {len(bins)} binaries ({len(det)} with events >= {DETECTABLE_DEPTH_OVER_NOISE:g}x the noise), "
             f"{len(tums)} tumblers",
             f"binaries called NPA: {_upper_text(sum(r['rotation'] == 'NPA' for r in bins), len(bins))}  [target <= 5 %]",
             "  verdicts on binaries: " + ", ".join(f"{k} {sum(r['rotation'] == k for r in bins)}"
                                                     for k in ("PA", "NPA", "undecided")),
             f"  binaries for which NPA was favoured (ln B > 0) and the binary family weighed: "
             f"{sum(r['binary_weighed'] for r in bins)}/{len(bins)}",
             f"binaries with events >= 3x noise named binary with P_orb within 1 %: {_rate_text(len(good), len(det))}"
             f"  [target >= 80 %]",
             f"  named binary at any P_orb: {len(named_any)}/{len(det)}; "
             f"P_orb of the named within 1 % / at half or twice the truth within 1 %: {len(good)} / "
             f"{sum(any(abs(r['p_orb_found_h'] / (m * r['true_p_orb_h']) - 1) <= P_ORB_REL_TOL for m in (0.5, 2.0)) for r in named_any)}",
             f"tumblers for which the binary rule fires: {_upper_text(sum(r['binary_named'] for r in tums), len(tums))}"
             f"  [target <= 5 %]",
             f"  tumblers called NPA: {sum(r['rotation'] == 'NPA' for r in tums)}/{len(tums)}; binary family weighed on "
             f"{sum(r['binary_weighed'] for r in tums)}",
             f"screen binary_candidate: binaries {_rate_text(sum(r['binary_candidate'] for r in bins), len(bins))}, "
             f"with events >= 3x noise {_rate_text(sum(r['binary_candidate'] for r in det), len(det))}; "
             f"tumblers {_upper_text(sum(r['binary_candidate'] for r in tums), len(tums))}",
             f"  screen flag 'candidate' on binaries: {sum(r['screen_flag'] == 'candidate' for r in bins)}/{len(bins)}"]
    ti = [r["t_indicator_s"] / r["t_screen_s"] for r in rows if "t_indicator_s" in r and r["t_screen_s"] > 0]
    if ti:
        ts = [r["t_screen_s"] for r in rows]
        lines.append(f"time: event indicator / whole screen = median {np.median(ti):.2f} (max {np.max(ti):.2f}) over "
                     f"{len(ti)} objects; screen median {np.median(ts):.2f} s per object ({np.median([r['n_points'] for r in rows]):.0f} "
                     "points median; loaded shared machine)")
        tc = [r["t_classify_s"] for r in rows]
        lines.append(f"time: classify (evidence route with the binary family) median {np.median(tc):.0f} s per object")
    return "\n".join(lines)


def figures(cache: Path) -> None:
    """The fold on P_orb of real Didymos at its published periods and of a simulated library binary."""
    from tumble import plots
    from tumble.classify.binary import fold_on_orbit
    from tumble.photometry import ReadOptions, read_lightcurve

    FIGURES.mkdir(parents=True, exist_ok=True)
    dpath = DIDYMOS if DIDYMOS.exists() else Path("/work/shared/external_data/alcdef_didymos/ALCDEF_65803_Didymos.txt")
    lc = read_lightcurve([str(dpath)], options=ReadOptions(default_err=ALCDEF_DEFAULT_ERR_MAG))
    fold = fold_on_orbit(lc, DIDYMOS_P1_H, DIDYMOS_P_ORB_H)
    plots.plot_orbit_fold(fold, object_id="(65803) Didymos, ALCDEF, at the published periods",
                          path=FIGURES / "binary-fold-didymos.png")
    print(f"Didymos: {lc.n_points} points; events {fold.depth_at(0.0, 0.25 * fold.width_phase):.3f} and "
          f"{fold.depth_at(0.5, 0.25 * fold.width_phase):.3f} mag (core medians), epoch JD {fold.epoch_jd:.4f}")
    spec = next(s for s in generate_population(recipes=BINARY_RECIPES) if s.object_id == EXAMPLE_BINARY)
    obj = load_or_render(spec, cache)
    fold = fold_on_orbit(obj.lightcurve, spec.rotation.p_psi_h, spec.binary.p_orb_h)
    plots.plot_orbit_fold(fold, object_id=f"{EXAMPLE_BINARY} (simulated, true periods)",
                          path=FIGURES / "binary-fold-simulated.png")
    print(f"{EXAMPLE_BINARY}: P_orb {spec.binary.p_orb_h:.3f} h, primary {spec.rotation.p_psi_h:.3f} h, "
          f"deepest observed event {obj.truth.event_depth_mag:.3f} mag, noise {obj.truth.noise_mag:.3f} mag")


def _load(path: Path) -> list:
    if not path.exists():
        return []
    rows = []
    for line in path.read_text().splitlines():
        try:
            rows.append(json.loads(line))
        except ValueError:
            continue
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("command", choices=("run", "report", "figures"))
    ap.add_argument("--split", default="heldout", choices=("heldout", "calibration", "all"))
    ap.add_argument("--limit", type=int, help="at most this many objects of each class")
    ap.add_argument("--quick", action="store_true", help=f"{QUICK_PER_CLASS} objects of each class")
    ap.add_argument("--library-cache", default=str(LIBRARY_CACHE),
                    help="the library's render cache (tumblers are read from it, binaries rendered into it)")
    ap.add_argument("--out", help="JSON-lines table (default benchmarks/.cache/binary-<split>.jsonl)")
    ap.add_argument("--shard", default="0/1", metavar="I/N",
                    help="run every N-th object from the I-th (parallel runs write <out>.shardI; report reads all)")
    args = ap.parse_args(argv)
    out = Path(args.out) if args.out else CACHE_DIR / f"binary-{args.split}.jsonl"
    shards = [out] + sorted(out.parent.glob(out.name + ".shard*"))
    if args.command == "report":
        print(report([r for p in shards for r in _load(p) if "error" not in r]))
        return 0
    if args.command == "figures":
        figures(Path(args.library_cache))
        return 0
    cache = Path(args.library_cache)
    cache.mkdir(parents=True, exist_ok=True)
    limit = QUICK_PER_CLASS if args.quick else args.limit
    i_shard, n_shard = (int(x) for x in args.shard.split("/"))
    todo = select(args.split, limit, cache)[i_shard::n_shard]
    done = {r["object_id"] for p in shards for r in _load(p)}
    todo = [s for s in todo if s.object_id not in done]
    if n_shard > 1:
        out = out.parent / f"{out.name}.shard{i_shard}"
    print(f"{len(done)} objects already in {out}; {len(todo)} to run", flush=True)
    out.parent.mkdir(parents=True, exist_ok=True)
    for spec in todo:
        try:
            row = run_object(spec, cache)
        except Exception as exc:  # a failed object is a row, the rest goes on
            row = {"object_id": spec.object_id, "class": spec.truth_class, "error": f"{type(exc).__name__}: {exc}"}
        with open(out, "a") as fh:
            fh.write(json.dumps(row) + "\n")
            fh.flush()
            os.fsync(fh.fileno())
        print(json.dumps({k: row.get(k) for k in ("object_id", "class", "rotation", "binary_named", "p_orb_found_h",
                                                  "true_p_orb_h", "true_depth_over_noise", "binary_candidate",
                                                  "t_classify_s", "error")}), flush=True)
    rows = [r for p in shards for r in _load(p) if "error" not in r]
    print(report(rows))
    return 0


if __name__ == "__main__":
    sys.exit(main())
