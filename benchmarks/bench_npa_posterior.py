"""Converged NPA posteriors: the merged sampling tail and the current one (moves, adaptive cap), side by side.

For detected dense tumblers of the calibration library (``benchmarks/library/``; rendered objects
read from a cache folder, see ``docs/calibration-library.md``; by default the read-only library
cache of the main checkout, held-out objects only) the script runs, per object:

1. the evidence (``tumble.classify.fourier_evidence``): "detected" means NPA favoured with
   ``2 ln B >= 2`` on it (objects not detected are skipped and counted);
2. the enumeration of solutions (``fit_rotation_state(..., max_steps=0)``: frequency mappings,
   starts, optimisation);
3. on the same physical model and optimum, for each seed, **both sampling tails** in one run,
   alternating which goes first:

   - ``before``: ``tumble.classify.rotation.sample_solution_mode`` as merged before 2026-12-05 #4:
     the move mixture ``tumble.inference.local.MERGED_MOVE_WEIGHTS`` and a budget of
     ``BEFORE_STEPS`` = 1500 steps per ensemble;
   - ``after``: the same with the current mixture ``MOVE_WEIGHTS`` (the attitude-axis move added)
     and the adaptive run's cap ``tumble.inference.local.DEFAULT_MAX_STEPS`` (the run stops as
     soon as every criterion holds, so a mode that mixes costs no more than it needs);

   same seed, same chart, same optimum;

and prints per object and in total: converged or not, acceptance, chain length in
autocorrelation times, the coordinate with the longest autocorrelation time, split R-hat, walker
clusters, the mode-edge fraction, the periods' 68 % intervals, the time split (evidence,
enumeration, sampling) and the after/before ratios of sampling CPU time, likelihood evaluations and
peak traced memory (``tracemalloc``), plus the peak RSS of the process. Times are CPU times of this
process (``time.process_time``), so other jobs on a shared machine disturb the ratios less than the
wall times; the absolute figures of a busy machine are not performance figures.

Run (with ``nice`` on a shared machine)::

    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --quick
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --limit 10 --no-memory
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_npa_posterior.py --objects CAL-dense-npa-024 --seeds 1 2

``--quick``: the first 3 detected held-out objects, 600 steps for both tails. ``--after-steps 3000``
measures a larger cap (2026-12-05 #4: it converted none of six held-out tumblers, see
``docs/methods-classify.md`` section 5c).
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import re  # noqa: E402
import resource  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
import warnings  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))

#: the budget of the tail merged before 2026-12-05 #4 (steps per ensemble)
BEFORE_STEPS = 1500
#: --quick: budgets of the two tails and objects
QUICK_STEPS = (600, 600)
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
    worst: str
    tau_steps: float


def _sample(kind, model, x, steps, seed, span_d):
    from tumble.classify.rotation import sample_solution_mode
    from tumble.inference.local import MERGED_MOVE_WEIGHTS, MOVE_WEIGHTS

    weights = MERGED_MOVE_WEIGHTS if kind == "before" else MOVE_WEIGHTS
    return sample_solution_mode(model, x, span_d=span_d, max_steps=steps, rng=seed, weights=weights)


def _worst_coordinate(reasons) -> str:
    """The sampled coordinate with the longest autocorrelation time, as named in an unconverged run's reasons."""
    for r in reasons:
        m = re.search(r"steps, for (\w+)\)", r)
        if m:
            return m.group(1)
    return "-"


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
                      float(np.nanmax([d.polish_gain, 0.0])), float(np.median(post.log_likelihood)),
                      _worst_coordinate(d.reasons), float(np.max(d.autocorr_time_steps)))


def run_object(obj, steps, seeds, memory=True, first="before"):
    """Evidence, search, and both tails for every seed on one object; a dict row (or a skip reason)."""
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
    fit = fit_rotation_state(lc, ev, "NPA", rng=seeds[0], max_steps=0)
    row["enumeration_s"] = time.process_time() - t0
    row["mode"] = fit.mode
    # the model fit_rotation_state samples (same thinning and prior range)
    sub = thin_lightcurve(lc, fit.n_points_fitted)
    model = npa_models(sub, lc.span_d * 24.0)[fit.mode]
    x = model.space.to_vector(fit.best)
    order = KINDS if first == "before" else KINDS[::-1]
    row["runs"] = []
    for seed in seeds:
        run = {"seed": int(seed)}
        for kind in order:
            run[kind] = _run_sampler(kind, model, x, steps[kind], seed, lc.span_d, memory).__dict__
        row["runs"].append(run)
    return row


def _fmt_run(r):
    return (f"conv={'yes' if r['converged'] else 'no '} acc={r['acceptance']:.2f} "
            f"tau_mult={r['tau_multiples']:5.1f} tau={r['tau_steps']:.0f} ({r['worst']}) rhat={r['rhat_max']:.3f} "
            f"clusters={r['n_modes']} "
            f"edge={r['edge_fraction']:.2f} cpu={r['cpu_s']:6.1f}s polish=+{r['polish_gain']:.1f} "
            f"lnL_med={r['median_log_likelihood']:.1f}")


def _interval(q):
    return f"{q[1]:.6g} ({q[0]:.6g}-{q[2]:.6g})"


def _covers(q, truth):
    return "yes" if q[0] <= truth <= q[2] else "no"


def summarise(rows):
    done = [r for r in rows if "runs" in r]
    runs = [run for r in done for run in r["runs"]]
    print(f"\nobjects: {len(rows)}, detected and sampled: {len(done)} ({len(runs)} object-seed runs), "
          f"skipped: {len(rows) - len(done)}")
    if not done:
        return
    for kind in KINDS:
        conv = np.mean([run[kind]["converged"] for run in runs])
        acc = np.median([run[kind]["acceptance"] for run in runs])
        mult = np.median([run[kind]["tau_multiples"] for run in runs])
        rh = np.median([run[kind]["rhat_max"] for run in runs])
        cpu = np.median([run[kind]["cpu_s"] for run in runs])
        print(f"{kind}: converged {100 * conv:.0f} % ({int(round(conv * len(runs)))}/{len(runs)} runs), median acceptance "
              f"{acc:.2f}, median chain/tau {mult:.1f} (criterion 50), median max split R-hat {rh:.3f}, "
              f"median sampling CPU {cpu:.1f} s")
    first = [r["runs"][0] for r in done]
    for kind in KINDS:
        conv = np.mean([run[kind]["converged"] for run in first])
        print(f"{kind}, first seed only: converged {int(round(conv * len(first)))}/{len(first)} objects")
    ratio = lambda key: np.median([run["after"][key] / max(run["before"][key], 1e-12) for run in runs])  # noqa: E731
    mem = (f"x{ratio('peak_bytes'):.2f} (median peak {np.median([run['before']['peak_bytes'] for run in runs]) / 1e6:.0f} MB "
           f"-> {np.median([run['after']['peak_bytes'] for run in runs]) / 1e6:.0f} MB)"
           if all(run["after"]["peak_bytes"] for run in runs) else "not measured")
    print(f"after/before (median over runs): sampling CPU time x{ratio('cpu_s'):.2f}, likelihood evaluations "
          f"x{ratio('n_evaluations'):.2f}, peak traced memory {mem}")
    ev = np.median([r["evidence_s"] for r in done])
    se = np.median([r["enumeration_s"] for r in done])
    sa = np.median([run["after"]["cpu_s"] for run in runs])
    sb = np.median([run["before"]["cpu_s"] for run in runs])
    tot = ev + se + sa
    print(f"time split of the full route (median CPU s, this machine's load): evidence {ev:.1f} ({100 * ev / tot:.0f} %), "
          f"enumeration {se:.1f} ({100 * se / tot:.0f} %), sampling {sa:.1f} ({100 * sa / tot:.0f} %) "
          f"[before: {sb:.1f}]; total {tot:.1f} (target <= 30 s on one quiet core)")
    print(f"peak RSS of this process: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")


#: the two sampling tails compared
KINDS = ("before", "after")


def main(argv=None) -> int:
    from library.render import load_rendered

    from tumble.inference.local import DEFAULT_MAX_STEPS

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cache", default=str(DEFAULT_CACHE), help="folder of rendered library objects (.npz + .json)")
    p.add_argument("--limit", type=int, default=None, help="at most this many detected objects")
    p.add_argument("--before-steps", type=int, default=None, help=f"budget of the before tail (default {BEFORE_STEPS})")
    p.add_argument("--after-steps", type=int, default=None,
                   help=f"cap of the after tail (default DEFAULT_MAX_STEPS = {DEFAULT_MAX_STEPS})")
    p.add_argument("--quick", action="store_true", help=f"{QUICK_OBJECTS} objects, {QUICK_STEPS[0]} / {QUICK_STEPS[1]} steps")
    p.add_argument("--objects", nargs="*", default=None,
                   help="object ids (default: the held-out dense-npa objects in the library's hashed order)")
    p.add_argument("--out", default=None, help="JSON-lines file of the per-object rows")
    p.add_argument("--seeds", type=int, nargs="+", default=[1], help="sampler seeds (each runs both tails)")
    p.add_argument("--no-memory", action="store_true",
                   help="skip the second run of each tail that measures its peak traced memory")
    args = p.parse_args(argv)
    warnings.simplefilter("ignore")
    steps = {"before": args.before_steps or (QUICK_STEPS[0] if args.quick else BEFORE_STEPS),
             "after": args.after_steps or (QUICK_STEPS[1] if args.quick else DEFAULT_MAX_STEPS)}
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
        row = run_object(obj, steps, args.seeds, memory=not args.no_memory, first=KINDS[i % 2])
        rows.append(row)
        if "runs" in row:
            n_detected += 1
            print(f"{oid} {row['mode']:>3} (true {row['true_mode']}) n={row['n_points']} "
                  f"evidence={row['evidence_s']:.1f}s enumeration={row['enumeration_s']:.1f}s", flush=True)
            for run in row["runs"]:
                for kind in KINDS:
                    r = run[kind]
                    print(f"   seed {run['seed']} {kind:>6} ({steps[kind]} steps): {_fmt_run(r)}", flush=True)
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
