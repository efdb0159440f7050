"""Converged NPA posteriors and the time split of the full route, old sampler against new, side by side.

For detected dense tumblers of the calibration library (``benchmarks/library/``; rendered objects
read from a cache folder, see ``docs/calibration-library.md``) the script runs, per object:

1. the evidence (``tumble.classify.fourier_evidence``): "detected" means NPA favoured with
   ``2 ln B >= 2`` on it (objects not detected are skipped and counted);
2. the search (``fit_rotation_state(..., max_steps=0)``: frequency mappings, starts, optimisation);
3. on the same physical model and optimum, **both samplers** in one run, alternating which goes
   first: the old one (``sample_posterior``: 2 ensembles, start ball 1e-3, 1500 steps, the settings
   ``fit_rotation_state`` used before) and the new one (``sample_local_mode`` in the model's
   ``sampling_chart``, with the same number of likelihood evaluations, as ``fit_rotation_state``
   now runs it);

and prints per object and in total: converged or not, acceptance, chain length in autocorrelation
times, split R-hat, the mode-edge fraction, the time split (evidence, search, sampling) and the
new/old ratios of sampling time, likelihood evaluations and peak traced memory (``tracemalloc``),
plus the peak RSS of the process. Times are CPU times of this process (``time.process_time``), so
other jobs on a shared machine disturb the ratios less than the wall times; the absolute figures of
a busy machine are not performance figures.

Run (with ``nice`` on a shared machine)::

    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --quick
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --cache DIR --limit 20

``--quick``: the first 3 detected objects with a 600-step budget per sampler.
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
import warnings  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

#: the settings fit_rotation_state used before the local-mode sampler (its old sampling tail)
OLD_SAMPLER = {"n_ensembles": 2, "first_block": 500, "start_scale": 1e-3}
DEFAULT_STEPS = 1500
QUICK_STEPS = 600
QUICK_OBJECTS = 3
#: the library's rendered dense tumblers (read only; copy them to a cache of your own to run)
DEFAULT_CACHE = Path(__file__).resolve().parent / ".cache" / "npa-posterior"


@dataclass(frozen=True)
class SamplerRun:
    """One sampler on one object: its diagnostics and costs."""

    converged: bool
    acceptance: float
    tau_multiples: float
    rhat_max: float
    edge_fraction: float
    n_modes: int
    cpu_s: float
    n_evaluations: int
    peak_bytes: int
    p_psi_h: tuple
    p_phi_h: tuple
    reasons: tuple


def _run_sampler(kind, model, x, steps, seed):
    from tumble.inference import sample_posterior
    from tumble.inference.local import sample_local_mode
    from tumble.inference.sampling import default_n_walkers

    tracemalloc.start()
    t0 = time.process_time()
    if kind == "old":
        post = sample_posterior(model, model.space, start=x, max_steps=steps, rng=seed, warn=False,
                                n_ensembles=OLD_SAMPLER["n_ensembles"],
                                first_block=min(OLD_SAMPLER["first_block"], steps),
                                start_scale=OLD_SAMPLER["start_scale"])
    else:
        # the same budget of likelihood evaluations as the old sampler (same walkers, steps, ensembles)
        budget = steps * OLD_SAMPLER["n_ensembles"] * default_n_walkers(model.space.ndim)
        post = sample_local_mode(model, model.space, x, max_evaluations=budget, chart=model.sampling_chart(x),
                                 rng=seed)
    cpu = time.process_time() - t0
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    d = post.diagnostics
    der = model.derived(post.samples)
    q = lambda v: tuple(float(a) for a in np.percentile(v, [15.865, 50, 84.135]))  # noqa: E731
    return SamplerRun(bool(d.converged), float(np.mean(d.acceptance_fraction)), float(d.tau_multiples),
                      float(np.max(d.rhat)), float(d.mode_edge_fraction), int(d.n_modes), cpu,
                      int(d.n_evaluations), int(peak), q(der["p_psi_h"]), q(der["p_phi_h"]), tuple(d.reasons))


def run_object(obj, steps, seed, order):
    """Evidence, search, and both samplers on one object; a dict row (or a skip reason)."""
    from tumble.classify import fourier_evidence
    from tumble.classify.rotation import fit_rotation_state, thin_lightcurve
    from tumble.model import PhysicalModel

    lc = obj.lightcurve
    row = {"object_id": obj.spec.object_id, "n_points": int(lc.n_points), "true_mode": obj.truth.mode,
           "true_p_psi_h": obj.truth.p_psi_h, "true_p_phi_h": obj.truth.p_phi_h}
    t0 = time.process_time()
    ev = fourier_evidence(lc)
    row["evidence_s"] = time.process_time() - t0
    if not (np.isfinite(ev.ln_bayes_factor) and 2 * ev.ln_bayes_factor >= 2 and np.isfinite(ev.f2_per_d)):
        row["skipped"] = f"not detected (2 ln B = {2 * ev.ln_bayes_factor:.3g})"
        return row
    t0 = time.process_time()
    fit = fit_rotation_state(lc, ev, "NPA", rng=seed, max_steps=0)
    row["search_s"] = time.process_time() - t0
    row["mode"] = fit.mode
    # the model fit_rotation_state samples (same thinning and prior range)
    sub = thin_lightcurve(lc, fit.n_points_fitted)
    model = PhysicalModel(sub, fit.mode, p_psi_range_h=(0.2, max(10.0, 4 * lc.span_d * 24.0)))
    x = model.space.to_vector(fit.best)
    for kind in order:
        row[kind] = _run_sampler(kind, model, x, steps, seed).__dict__
    return row


def _fmt_run(r):
    return (f"conv={'yes' if r['converged'] else 'no '} acc={r['acceptance']:.2f} "
            f"tau_mult={r['tau_multiples']:5.1f} rhat={r['rhat_max']:.3f} modes={r['n_modes']} "
            f"edge={r['edge_fraction']:.2f} cpu={r['cpu_s']:6.1f}s")


def summarise(rows):
    done = [r for r in rows if "new" in r]
    print(f"\nobjects: {len(rows)}, detected and sampled: {len(done)}, skipped: {len(rows) - len(done)}")
    if not done:
        return
    for kind in ("old", "new"):
        conv = np.mean([r[kind]["converged"] for r in done])
        acc = np.median([r[kind]["acceptance"] for r in done])
        mult = np.median([r[kind]["tau_multiples"] for r in done])
        rh = np.median([r[kind]["rhat_max"] for r in done])
        print(f"{kind}: converged {100 * conv:.0f} % ({int(round(conv * len(done)))}/{len(done)}), median acceptance "
              f"{acc:.2f}, median chain/tau {mult:.1f} (criterion 50), median max split R-hat {rh:.3f}")
    ratio = lambda key: np.median([r["new"][key] / max(r["old"][key], 1e-12) for r in done])  # noqa: E731
    print(f"new/old (median over objects): sampling CPU time x{ratio('cpu_s'):.2f}, likelihood evaluations "
          f"x{ratio('n_evaluations'):.2f}, peak traced memory x{ratio('peak_bytes'):.2f}")
    ev = np.median([r["evidence_s"] for r in done])
    se = np.median([r["search_s"] for r in done])
    sn = np.median([r["new"]["cpu_s"] for r in done])
    so = np.median([r["old"]["cpu_s"] for r in done])
    tot = ev + se + sn
    print(f"time split (median CPU s, this machine's load): evidence {ev:.1f} ({100 * ev / tot:.0f} %), search "
          f"{se:.1f} ({100 * se / tot:.0f} %), sampling new {sn:.1f} ({100 * sn / tot:.0f} %) [old {so:.1f}]")
    print(f"peak RSS of this process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


def main(argv=None) -> int:
    from library.render import load_rendered

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cache", default=str(DEFAULT_CACHE), help="folder of rendered library objects (.npz + .json)")
    p.add_argument("--limit", type=int, default=None, help="at most this many detected objects")
    p.add_argument("--steps", type=int, default=None, help=f"steps per ensemble of each sampler (default {DEFAULT_STEPS})")
    p.add_argument("--quick", action="store_true", help=f"{QUICK_OBJECTS} objects, {QUICK_STEPS} steps")
    p.add_argument("--objects", nargs="*", default=None, help="object ids (default: every dense-npa object)")
    p.add_argument("--out", default=None, help="JSON-lines file of the per-object rows")
    p.add_argument("--seed", type=int, default=1)
    args = p.parse_args(argv)
    warnings.simplefilter("ignore")
    steps = args.steps or (QUICK_STEPS if args.quick else DEFAULT_STEPS)
    limit = QUICK_OBJECTS if args.quick and args.limit is None else args.limit
    cache = Path(args.cache)
    ids = args.objects or sorted(f.stem for f in cache.glob("CAL-dense-npa-*.npz"))
    rows, n_detected = [], 0
    out = open(args.out, "a") if args.out else None
    for i, oid in enumerate(ids):
        if limit is not None and n_detected >= limit:
            break
        obj = load_rendered(cache, oid)
        if obj is None:
            continue
        order = ("old", "new") if i % 2 == 0 else ("new", "old")
        row = run_object(obj, steps, args.seed, order)
        rows.append(row)
        if "new" in row:
            n_detected += 1
            print(f"{oid} {row['mode']:>3} (true {row['true_mode']}) n={row['n_points']} ev={row['evidence_s']:.1f}s "
                  f"search={row['search_s']:.1f}s", flush=True)
            for kind in ("old", "new"):
                print(f"   {kind}: {_fmt_run(row[kind])}  P_psi {row[kind]['p_psi_h'][1]:.4g} "
                      f"P_phi {row[kind]['p_phi_h'][1]:.4g} (true {row['true_p_psi_h']:.4g}, "
                      f"{row['true_p_phi_h']:.4g})", flush=True)
        else:
            print(f"{oid}: skipped, {row['skipped']}", flush=True)
        if out is not None:
            out.write(json.dumps(row, default=str) + "\n")
            out.flush()
    if out is not None:
        out.close()
    summarise(rows)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
