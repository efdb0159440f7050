"""Converged NPA posteriors and the time split of the full route: the sampling tail before and after, side by side.

For detected dense tumblers of the calibration library (``benchmarks/library/``; rendered objects
read from a cache folder, see ``docs/calibration-library.md``; by default the read-only library
cache of the main checkout, held-out objects only) the script runs, per object:

1. the evidence (``tumble.classify.fourier_evidence``): "detected" means NPA favoured with
   ``2 ln B >= 2`` on it (objects not detected are skipped and counted);
2. the enumeration of solutions (``fit_rotation_state(..., max_steps=0)``: frequency mappings,
   starts, optimisation);
3. on the same physical model and optimum, **both sampling tails** in one run, alternating which
   goes first, with the same budget (steps per ensemble, walkers, ensembles):

   - ``before``: the local-mode sampler as the route ran it before 2026-12-05 #2
     (``sample_local_mode`` in the model's ``sampling_chart`` at the search's optimum, the jitter
     sampled, one pilot, the mode region the Laplace ellipsoid);
   - ``after``: ``tumble.classify.rotation.sample_solution_mode`` as ``fit_rotation_state`` now runs
     it (the jitter integrated out, the optimum polished to the top of its mode, two pilot rounds,
     the region holding the pilot's spread too, the jitter drawn back per sample);

(both tails run their ensembles with the likelihood requests batched, ``tumble.inference.local._run``,
which gives the chains of the sequential run; ``benchmarks/bench_route_split.py`` times the batching
against the sequential reference and the whole route's split), and prints per object and in total: converged or not, acceptance, chain length in autocorrelation
times, split R-hat, walker clusters, the mode-edge fraction, the periods' 68 % intervals, the time
split (evidence, enumeration, sampling) and the after/before ratios of sampling CPU time,
likelihood evaluations and peak traced memory (``tracemalloc``), plus the peak RSS of the process.
Times are CPU times of this process (``time.process_time``), so other jobs on a shared machine
disturb the ratios less than the wall times; the absolute figures of a busy machine are not
performance figures.

Run (with ``nice`` on a shared machine)::

    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --quick
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --limit 10
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --objects CAL-dense-npa-119

``--quick``: the first 3 detected held-out objects with a 600-step budget.
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

#: ensembles of both tails (sample_local_mode's default)
N_ENSEMBLES = 2
DEFAULT_STEPS = 1500
QUICK_STEPS = 600
QUICK_OBJECTS = 3
#: the library's rendered objects (read only), as bench_classify.library_dir names them
DEFAULT_CACHE = Path(__file__).resolve().parent / ".cache" / "library-cal-2-20261204"


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
    polish_gain: float
    median_log_likelihood: float


def _sample(kind, model, x, steps, seed, span_d):
    from tumble.classify.rotation import sample_solution_mode
    from tumble.inference.local import sample_local_mode

    if kind == "before":
        return sample_local_mode(model, model.space, x, max_steps=steps, chart=model.sampling_chart(x), rng=seed,
                                 n_ensembles=N_ENSEMBLES, adapt_rounds=1, widen_region=False)
    return sample_solution_mode(model, x, span_d=span_d, max_steps=steps, rng=seed)


def _run_sampler(kind, model, x, steps, seed, span_d, memory):
    """One tail on one object: CPU time of a plain run, then (``memory``) the peak traced memory of a second,
    identical run under ``tracemalloc`` (which slows Python code several times, so it is not timed)."""
    t0 = time.process_time()
    post = _sample(kind, model, x, steps, seed, span_d)
    cpu = time.process_time() - t0
    peak = 0
    if memory:
        tracemalloc.start()
        _sample(kind, model, x, steps, seed, span_d)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    d = post.diagnostics
    der = model.derived(post.samples)
    q = lambda v: tuple(float(a) for a in np.percentile(v, [15.865, 50, 84.135]))  # noqa: E731
    return SamplerRun(bool(d.converged), float(np.mean(d.acceptance_fraction)), float(d.tau_multiples),
                      float(np.max(d.rhat)), float(d.mode_edge_fraction), int(d.n_modes), cpu,
                      int(d.n_evaluations), int(peak), q(der["p_psi_h"]), q(der["p_phi_h"]), tuple(d.reasons),
                      float(np.nanmax([d.polish_gain, 0.0])), float(np.median(post.log_likelihood)))


def run_object(obj, steps, seed, order, memory=True):
    """Evidence, search, and both samplers on one object; a dict row (or a skip reason)."""
    from tumble.classify import fourier_evidence
    from tumble.classify.rotation import fit_rotation_state, thin_lightcurve
    from tumble.classify.solutions import npa_models

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
    row["enumeration_s"] = time.process_time() - t0
    row["mode"] = fit.mode
    # the model fit_rotation_state samples (same thinning and prior range)
    sub = thin_lightcurve(lc, fit.n_points_fitted)
    model = npa_models(sub, lc.span_d * 24.0)[fit.mode]
    x = model.space.to_vector(fit.best)
    for kind in order:
        row[kind] = _run_sampler(kind, model, x, steps, seed, lc.span_d, memory).__dict__
    return row


def _fmt_run(r):
    return (f"conv={'yes' if r['converged'] else 'no '} acc={r['acceptance']:.2f} "
            f"tau_mult={r['tau_multiples']:5.1f} rhat={r['rhat_max']:.3f} clusters={r['n_modes']} "
            f"edge={r['edge_fraction']:.2f} cpu={r['cpu_s']:6.1f}s polish=+{r['polish_gain']:.1f} "
            f"lnL_med={r['median_log_likelihood']:.1f}")


def _interval(q):
    return f"{q[1]:.6g} ({q[0]:.6g}-{q[2]:.6g})"


def _covers(q, truth):
    return "yes" if q[0] <= truth <= q[2] else "no"


def summarise(rows):
    done = [r for r in rows if "after" in r]
    print(f"\nobjects: {len(rows)}, detected and sampled: {len(done)}, skipped: {len(rows) - len(done)}")
    if not done:
        return
    for kind in KINDS:
        conv = np.mean([r[kind]["converged"] for r in done])
        acc = np.median([r[kind]["acceptance"] for r in done])
        mult = np.median([r[kind]["tau_multiples"] for r in done])
        rh = np.median([r[kind]["rhat_max"] for r in done])
        print(f"{kind}: converged {100 * conv:.0f} % ({int(round(conv * len(done)))}/{len(done)}), median acceptance "
              f"{acc:.2f}, median chain/tau {mult:.1f} (criterion 50), median max split R-hat {rh:.3f}")
    ratio = lambda key: np.median([r["after"][key] / max(r["before"][key], 1e-12) for r in done])  # noqa: E731
    mem = (f"x{ratio('peak_bytes'):.2f} (median peak {np.median([r['before']['peak_bytes'] for r in done]) / 1e6:.0f} MB "
           f"-> {np.median([r['after']['peak_bytes'] for r in done]) / 1e6:.0f} MB)"
           if all(r["after"]["peak_bytes"] for r in done) else "not measured")
    print(f"after/before (median over objects): sampling CPU time x{ratio('cpu_s'):.2f}, likelihood evaluations "
          f"x{ratio('n_evaluations'):.2f}, peak traced memory {mem}")
    ev = np.median([r["evidence_s"] for r in done])
    se = np.median([r["enumeration_s"] for r in done])
    sa = np.median([r["after"]["cpu_s"] for r in done])
    sb = np.median([r["before"]["cpu_s"] for r in done])
    tot = ev + se + sa
    print(f"time split of the full route (median CPU s, this machine's load): evidence {ev:.1f} ({100 * ev / tot:.0f} %), "
          f"enumeration {se:.1f} ({100 * se / tot:.0f} %), sampling {sa:.1f} ({100 * sa / tot:.0f} %) "
          f"[before: {sb:.1f}]; total {tot:.1f} (target <= 30 s on one quiet core)")
    print(f"peak RSS of this process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


#: the two sampling tails compared
KINDS = ("before", "after")


def main(argv=None) -> int:
    from library.render import load_rendered

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cache", default=str(DEFAULT_CACHE), help="folder of rendered library objects (.npz + .json)")
    p.add_argument("--limit", type=int, default=None, help="at most this many detected objects")
    p.add_argument("--steps", type=int, default=None, help=f"steps per ensemble of each tail (default {DEFAULT_STEPS})")
    p.add_argument("--quick", action="store_true", help=f"{QUICK_OBJECTS} objects, {QUICK_STEPS} steps")
    p.add_argument("--objects", nargs="*", default=None,
                   help="object ids (default: the held-out dense-npa objects in the library's hashed order)")
    p.add_argument("--out", default=None, help="JSON-lines file of the per-object rows")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--no-memory", action="store_true",
                   help="skip the second run of each tail that measures its peak traced memory")
    args = p.parse_args(argv)
    warnings.simplefilter("ignore")
    steps = args.steps or (QUICK_STEPS if args.quick else DEFAULT_STEPS)
    limit = QUICK_OBJECTS if args.quick and args.limit is None else args.limit
    cache = Path(args.cache)
    if args.objects:
        ids = args.objects
    else:
        from library.population import order_key, split_of

        ids = sorted((f.stem for f in cache.glob("CAL-dense-npa-*.npz") if split_of(f.stem) == "heldout"), key=order_key)
    rows, n_detected = [], 0
    out = open(args.out, "a") if args.out else None
    for i, oid in enumerate(ids):
        if limit is not None and n_detected >= limit:
            break
        obj = load_rendered(cache, oid)
        if obj is None:
            continue
        order = KINDS if i % 2 == 0 else KINDS[::-1]
        row = run_object(obj, steps, args.seed, order, memory=not args.no_memory)
        rows.append(row)
        if "after" in row:
            n_detected += 1
            print(f"{oid} {row['mode']:>3} (true {row['true_mode']}) n={row['n_points']} "
                  f"evidence={row['evidence_s']:.1f}s enumeration={row['enumeration_s']:.1f}s", flush=True)
            for kind in KINDS:
                r = row[kind]
                print(f"   {kind:>6}: {_fmt_run(r)}", flush=True)
                print(f"           P_psi {_interval(r['p_psi_h'])} (true {row['true_p_psi_h']:.6g}, covered "
                      f"{_covers(r['p_psi_h'], row['true_p_psi_h'])}), P_phi {_interval(r['p_phi_h'])} (true "
                      f"{row['true_p_phi_h']:.6g}, covered {_covers(r['p_phi_h'], row['true_p_phi_h'])})", flush=True)
                if not r["converged"]:
                    print(f"           not converged: {'; '.join(r['reasons'])}", flush=True)
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
