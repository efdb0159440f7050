"""The full classify route on dense tumblers: its time split, and the fast kernels against their slow references.

Per object (default: the calibration library's dense tumbler ``CAL-dense-npa-076``, 1035 points, and
the demo's KRN-007, three files), one run of :func:`tumble.classify.classify` exactly as ``tumble
classify`` runs it (default budget, seed 1), with CPU timers around its parts:

- **evidence**: ``fourier_evidence_with_problem`` (the linear Fourier families and their evidence);
- **enumeration**: ``tumble.classify.solutions.search_solutions`` (every acceptable tumbling solution);
- **sampling**: ``tumble.classify.rotation.sample_solution_mode`` (the top solution's posterior);
- **other**: the rest of the route (period checks, model adequacy, the binary family, the physical PA
  veto fit, the verdict),

with the sampler's convergence (chain length in autocorrelation times, acceptance, split R-hat) and
the peak RSS of the process. Then, side by side in the same process and on the same inputs (the
order alternated, the minimum CPU time over rounds), each fast kernel of the route against the slow
reference kept beside it:

- ``model-design``: :meth:`tumble.model.FourierBasis.design` against ``design_reference`` (the
  evidence's design matrices);
- ``physical-model``: one likelihood call of the physical model at the fitted state for a batch of
  walkers, :meth:`tumble.model.PhysicalModel.shape_magnitudes` against
  ``shape_magnitudes_reference`` (the attitude series and brightness);
- ``period-ratio``: the sampler's implicit chart's function ``ln(P_phi/P_psi)``,
  :meth:`tumble.model.PhysicalModel.log_period_ratio` against ``log_period_ratio_reference``;
- ``optimiser``: the short Levenberg-Marquardt runs of 16 starts near the fitted state, all advanced
  together (:func:`tumble.classify.rotation.optimise_states`, what the solution search runs) against
  one start at a time (``optimise_state``, the reference), with the largest ln L difference and the
  peak traced memory of both;
- ``ensembles``: the sampling tail with the ensembles' likelihood requests batched
  (``tumble.inference.local._run``) against running them one after the other
  (``_run_reference``), with the peak traced memory (``tracemalloc``, a separate untimed run) of both.

Times are CPU times of this process (``time.process_time``); the machine's load average is printed
with them, because absolute times on a shared machine are not performance figures (the ratios are).

Another commit's route (before/after) cannot run in the same process: ``--baseline DIR`` runs the
route of the source tree in ``DIR`` (holding ``tumble/``) and this tree's, each in its own process
(``--no-kernels``; ``PYTHONPATH`` set to the tree), alternated over ``--rounds`` rounds (new-old,
old-new, ...), and prints per object and part the minimum CPU of each and their ratio, the peak RSS
of each process and both verdicts. Snapshot both trees first, so that edits during the run do not
leak into it::

    git archive <old commit> tumble | tar -x -C /tmp/old
    git archive HEAD | tar -x -C /tmp/new
    cd /tmp/new && OPENBLAS_NUM_THREADS=1 nice /path/to/.venv/bin/python benchmarks/bench_route_split.py \
        --cache /path/to/benchmarks/.cache/library-cal-2-20261204 --baseline /tmp/old --rounds 2

Run (with ``nice`` on a shared machine)::

    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_route_split.py
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_route_split.py --quick     # one object, no memory runs
    OPENBLAS_NUM_THREADS=1 nice .venv/bin/python benchmarks/bench_route_split.py --objects CAL-dense-npa-120 KRN-007
"""

from __future__ import annotations

import os

for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMEXPR_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import glob  # noqa: E402
import resource  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
import warnings  # noqa: E402
from dataclasses import dataclass, field  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

#: the library's rendered objects (read only), as bench_classify.library_dir names them
DEFAULT_CACHE = HERE / ".cache" / "library-cal-2-20261204"
DEMO_DIR = HERE.parent / "catalogs_demo"
#: a dense tumbler of the held-out half near the issue's 1000 points, and the demo's tumbler
DEFAULT_OBJECTS = ("CAL-dense-npa-076", "KRN-007")
#: the issue's goal for the whole route on one core (seconds)
TARGET_S = 30.0
#: walkers per model call in the kernel comparison (a red-blue half of two batched ensembles)
KERNEL_BATCH = 36
#: starts of the optimiser comparison (a few pairs' short runs of the search)
OPTIMISER_STARTS = 16
#: interleaved rounds of each side-by-side comparison (the minimum is kept)
ROUNDS = 5
SEED = 1


@dataclass
class PartTimer:
    """CPU seconds spent inside wrapped functions (re-entrant calls counted once)."""

    seconds: dict = field(default_factory=dict)
    depth: dict = field(default_factory=dict)

    def wrap(self, module, name: str, part: str):
        original = getattr(module, name)
        setattr(module, name, _Timed(self, original, part))
        return original

    def add(self, part: str, dt: float):
        self.seconds[part] = self.seconds.get(part, 0.0) + dt


class _Timed:
    def __init__(self, timer: PartTimer, fn, part: str):
        self.timer, self.fn, self.part = timer, fn, part

    def __call__(self, *args, **kwargs):
        depth = self.timer.depth.get(self.part, 0)
        self.timer.depth[self.part] = depth + 1
        t0 = time.process_time()
        try:
            return self.fn(*args, **kwargs)
        finally:
            self.timer.depth[self.part] = depth
            if depth == 0:
                self.timer.add(self.part, time.process_time() - t0)


def load_object(name: str, cache: Path):
    """``(lc, truth dict)`` of a library object or a demo object (``KRN-*``)."""
    if name.startswith("KRN-"):
        from astropy.table import Table

        from tumble.photometry import read_lightcurve

        lc = read_lightcurve(sorted(glob.glob(str(DEMO_DIR / "campaign" / f"{name}__*"))))
        t = Table.read(DEMO_DIR / "truth.ecsv")
        r = t[list(t["object"]).index(name)]
        return lc, {"mode": str(r["mode"]), "p_psi_h": float(r["p_psi_h"]), "p_phi_h": float(r["p_phi_h"])}
    from library.render import load_rendered

    obj = load_rendered(cache, name)
    if obj is None:
        raise SystemExit(f"{name}: not in the library cache {cache}")
    return obj.lightcurve, {"mode": obj.truth.mode, "p_psi_h": obj.truth.p_psi_h, "p_phi_h": obj.truth.p_phi_h}


def timed_route(lc):
    """One classify run with CPU timers around its parts: ``(Classification, seconds by part, total)``."""
    import tumble.classify as route
    import tumble.classify.rotation as rotation
    import tumble.classify.solutions as solutions

    timer = PartTimer()
    saved = [(route, "fourier_evidence_with_problem", timer.wrap(route, "fourier_evidence_with_problem", "evidence")),
             (solutions, "search_solutions", timer.wrap(solutions, "search_solutions", "enumeration")),
             (rotation, "sample_solution_mode", timer.wrap(rotation, "sample_solution_mode", "sampling"))]
    try:
        t0 = time.process_time()
        result = route.classify(lc, rng=np.random.default_rng(SEED))
        total = time.process_time() - t0
    finally:
        for module, name, fn in saved:
            setattr(module, name, fn)
    parts = dict(timer.seconds)
    parts["other"] = total - sum(parts.values())
    return result, parts, total


def side_by_side(fast, slow, rounds: int = ROUNDS) -> tuple:
    """Minimum CPU seconds of ``fast()`` and ``slow()`` over interleaved rounds (order alternated)."""
    best = {"fast": np.inf, "slow": np.inf}
    for r in range(rounds):
        for kind in (("fast", "slow") if r % 2 == 0 else ("slow", "fast")):
            fn = fast if kind == "fast" else slow
            t0 = time.process_time()
            fn()
            best[kind] = min(best[kind], time.process_time() - t0)
    return best["fast"], best["slow"]


def compare_design(lc, ev):
    """The evidence's NPA design matrices at its frequencies: fast and reference CPU, largest difference."""
    from tumble.classify.families import npa_variants, pa_variants
    from tumble.model import FourierBasis, prepare_linear

    data = prepare_linear(lc)
    basis = FourierBasis.build(npa_variants(pa_variants(lc.span_d)))
    f1 = ev.f1_npa_per_d * (1.0 + np.linspace(-1e-3, 1e-3, 64))
    f2 = np.full(64, ev.f2_per_d)
    diff = float(np.max(np.abs(basis.design(data, f1, f2) - basis.design_reference(data, f1, f2))
                     / data.sw[None, :, None]))
    fast, slow = side_by_side(lambda: basis.design(data, f1, f2), lambda: basis.design_reference(data, f1, f2))
    return fast, slow, diff


def fitted_model(lc, fit):
    """The physical model fit_rotation_state sampled, and the fitted state."""
    from tumble.classify.rotation import thin_lightcurve
    from tumble.classify.solutions import npa_models

    sub = thin_lightcurve(lc, fit.n_points_fitted)
    model = npa_models(sub, lc.span_d * 24.0)[fit.mode]
    return model, model.space.to_vector(fit.best)


def compare_model(model, x):
    """One model call for KERNEL_BATCH walkers near ``x``: fast and reference CPU, largest magnitude difference."""
    rng = np.random.default_rng(SEED)
    xs = model.space.wrap(x[None] + 1e-3 * rng.standard_normal((KERNEL_BATCH, len(x))) * model.space.scales[None])
    diff = float(np.nanmax(np.abs(model.shape_magnitudes(xs) - model.shape_magnitudes_reference(xs))))
    fast, slow = side_by_side(lambda: model.shape_magnitudes(xs), lambda: model.shape_magnitudes_reference(xs))
    return fast, slow, diff


def compare_period_ratio(model, x):
    """The implicit chart's function at 2 KERNEL_BATCH states near ``x`` (value and forward-difference
    neighbour, as its Newton step calls it): fast and reference CPU, largest difference."""
    rng = np.random.default_rng(SEED)
    xs = model.space.wrap(x[None] + 1e-3 * rng.standard_normal((2 * KERNEL_BATCH, len(x))) * model.space.scales[None])
    diff = float(np.nanmax(np.abs(model.log_period_ratio(xs) - model.log_period_ratio_reference(xs))))
    fast, slow = side_by_side(lambda: model.log_period_ratio(xs), lambda: model.log_period_ratio_reference(xs),
                              rounds=4 * ROUNDS)
    return fast, slow, diff


def _sampling(model, x, span_d, reference: bool):
    import tumble.inference.local as local
    from tumble.classify.rotation import sample_solution_mode

    fast_run = local._run
    if reference:
        local._run = local._run_reference
    try:
        t0 = time.process_time()
        post = sample_solution_mode(model, x, span_d=span_d, rng=SEED)
        return post, time.process_time() - t0
    finally:
        local._run = fast_run


def _peak_traced(fn) -> int:
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def compare_ensembles(model, x, span_d, memory: bool):
    """The sampling tail with batched and with sequential ensembles: CPU, samples' agreement, peak memory."""
    first_ref = _sampling(model, x, span_d, reference=True)
    first_fast = _sampling(model, x, span_d, reference=False)
    second_fast = _sampling(model, x, span_d, reference=False)
    second_ref = _sampling(model, x, span_d, reference=True)
    fast_post = first_fast[0]
    same = bool(np.allclose(fast_post.samples, first_ref[0].samples, rtol=1e-9, atol=1e-12))
    out = {"fast_s": min(first_fast[1], second_fast[1]), "slow_s": min(first_ref[1], second_ref[1]),
           "same_samples": same, "evaluations": int(fast_post.diagnostics.n_evaluations)}
    if memory:
        out["fast_peak"] = _peak_traced(lambda: _sampling(model, x, span_d, reference=False))
        out["slow_peak"] = _peak_traced(lambda: _sampling(model, x, span_d, reference=True))
    return out


def compare_optimiser(model, x, memory: bool):
    """The search's short Levenberg-Marquardt runs of :data:`OPTIMISER_STARTS` starts near ``x``: all advanced
    together (``optimise_states``) against one at a time (``optimise_state``, the reference): CPU,
    largest log-likelihood difference, peak traced memory."""
    from tumble.classify.rotation import optimise_state, optimise_states
    from tumble.classify.solutions import SHORT_LM_ITERATIONS

    rng = np.random.default_rng(SEED)
    xs = model.space.wrap(x[None] + 0.02 * rng.standard_normal((OPTIMISER_STARTS, len(x))) * model.space.scales[None])

    def fast():
        return optimise_states(model, xs, n_iter=SHORT_LM_ITERATIONS)[1]

    def slow():
        return np.array([optimise_state(model, x0, n_iter=SHORT_LM_ITERATIONS)[1] for x0 in xs])

    diff = float(np.max(np.abs(fast() - slow())))
    t_fast, t_slow = side_by_side(fast, slow, rounds=2)
    out = {"fast_s": t_fast, "slow_s": t_slow, "diff": diff}
    if memory:
        out["fast_peak"], out["slow_peak"] = _peak_traced(fast), _peak_traced(slow)
    return out


def _ratio(fast, slow) -> str:
    return f"x{fast / slow:.2f} (fast {fast * 1e3:.1f} ms, reference {slow * 1e3:.1f} ms)"


def run_object(name: str, cache: Path, *, kernels: bool, memory: bool):
    lc, truth = load_object(name, cache)
    load = os.getloadavg()[0]
    result, parts, total = timed_route(lc)
    v, fit = result.verdict, result.fit
    print(f"\n{name}: {lc.n_points} points, {lc.span_d:.1f} d; truth {truth['mode']} P_psi {truth['p_psi_h']:.4g} h "
          f"P_phi {truth['p_phi_h']:.4g} h; load average at start {load:.2f} (2 cores)")
    print(f"  verdict {v.rotation}/{v.mode} grade {v.grade}; "
          + (f"fit {fit.mode} P_psi {fit.derived['p_psi_h'][0]:.5g} h P_phi {fit.derived['p_phi_h'][0]:.5g} h"
             if fit is not None else "no physical fit"))
    split = ", ".join(f"{k} {parts.get(k, 0.0):.1f} s ({100 * parts.get(k, 0.0) / total:.0f} %)"
                      for k in ("evidence", "enumeration", "sampling", "other"))
    print(f"  full route CPU {total:.1f} s (target {TARGET_S:.0f} s on one quiet core): {split}")
    row = {"object": name, "total_s": total, "load": load, **{f"{k}_s": v for k, v in parts.items()},
           "verdict": f"{v.rotation}/{v.mode} " + (f"P_psi {fit.derived['p_psi_h'][0]:.5g} h P_phi "
                                                   f"{fit.derived['p_phi_h'][0]:.5g} h" if fit is not None else "")}
    if fit is not None and fit.posterior is not None:
        d = fit.posterior.diagnostics
        row.update(converged=bool(d.converged), tau_multiples=float(d.tau_multiples),
                   acceptance=float(np.mean(d.acceptance_fraction)), rhat=float(np.max(d.rhat)))
        print(f"  sampling: converged {'yes' if d.converged else 'no'}, chain/tau {d.tau_multiples:.1f} (criterion 50), "
              f"acceptance {np.mean(d.acceptance_fraction):.2f}, max split R-hat {np.max(d.rhat):.3f}, "
              f"{d.n_evaluations} likelihood evaluations" + ("" if d.converged else f"; {'; '.join(d.reasons)}"))
    if kernels:
        fast, slow, diff = compare_design(lc, result.evidence)
        print(f"  model-design   {_ratio(fast, slow)}; max |difference| {diff:.1e}")
        row["design_ratio"] = fast / slow
        if fit is not None and fit.mode in ("SAM", "LAM"):
            model, x = fitted_model(lc, fit)
            fast, slow, diff = compare_model(model, x)
            print(f"  physical-model {_ratio(fast, slow)} per call of {KERNEL_BATCH} walkers x {model.y.size} points; "
                  f"max |difference| {diff:.1e} mag")
            row["model_ratio"] = fast / slow
            fast, slow, diff = compare_period_ratio(model, x)
            print(f"  period-ratio   {_ratio(fast, slow)} per call of {2 * KERNEL_BATCH} states; max |difference| "
                  f"{diff:.1e}")
            row["ratio_kernel"] = fast / slow
            opt = compare_optimiser(model, x, memory)
            mem = (f"; peak traced memory {opt['fast_peak'] / 1e6:.0f} MB vs {opt['slow_peak'] / 1e6:.0f} MB"
                   if memory else "")
            print(f"  optimiser      {_ratio(opt['fast_s'], opt['slow_s'])} for {OPTIMISER_STARTS} starts' short runs; "
                  f"max |ln L difference| {opt['diff']:.1e}{mem}")
            row["optimiser_ratio"] = opt["fast_s"] / opt["slow_s"]
            ens = compare_ensembles(model, x, lc.span_d, memory)
            mem = (f"; peak traced memory {ens['fast_peak'] / 1e6:.0f} MB vs {ens['slow_peak'] / 1e6:.0f} MB"
                   if memory else "")
            print(f"  ensembles      x{ens['fast_s'] / ens['slow_s']:.2f} (batched {ens['fast_s']:.1f} s, sequential "
                  f"{ens['slow_s']:.1f} s); same samples {'yes' if ens['same_samples'] else 'no'}{mem}")
            row["ensembles_ratio"] = ens["fast_s"] / ens["slow_s"]
    row["peak_rss_mb"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"  peak RSS of this process so far: {row['peak_rss_mb']:.0f} MB", flush=True)
    return row


def baseline_rounds(objects, cache: str, baseline: str, rounds: int) -> int:
    """The route of this tree and of ``baseline`` (a source tree holding ``tumble/``) alternated, each run in
    its own process (``--no-kernels``): per object and part, the minimum CPU over rounds and the ratio."""
    import json
    import subprocess
    import tempfile

    trees = {"new": str(HERE.parent), "old": str(Path(baseline).resolve())}
    best = {}
    for obj in objects:
        for r in range(rounds):
            for kind in (("new", "old") if r % 2 == 0 else ("old", "new")):
                with tempfile.NamedTemporaryFile(suffix=".json") as fh:
                    env = dict(os.environ, PYTHONPATH=trees[kind])
                    cmd = [sys.executable, __file__, "--objects", obj, "--cache", cache, "--no-kernels",
                           "--json-out", fh.name]
                    done = subprocess.run(cmd, env=env, capture_output=True, text=True)
                    if done.returncode != 0:
                        print(done.stdout + done.stderr)
                        return 1
                    row = json.loads(Path(fh.name).read_text())[0]
                print(f"{obj} round {r + 1} {kind}: total {row['total_s']:.1f} s (enumeration "
                      f"{row.get('enumeration_s', 0):.1f} s), peak RSS {row['peak_rss_mb']:.0f} MB, load {row['load']:.1f}",
                      flush=True)
                key = (obj, kind)
                best[key] = {k: min(v, best.get(key, {}).get(k, np.inf)) for k, v in row.items()
                             if isinstance(v, float)}
                best[key]["verdict"] = row.get("verdict", "")
    print(f"\nold ({trees['old']}) against new ({trees['new']}), minimum CPU over {rounds} alternated round(s):")
    for obj in objects:
        o, n = best[(obj, "old")], best[(obj, "new")]
        parts = ", ".join(f"{k} {o.get(k + '_s', 0):.1f} -> {n.get(k + '_s', 0):.1f} s (x{n.get(k + '_s', 0) / max(o.get(k + '_s', 0), 1e-9):.2f})"
                          for k in ("total", "evidence", "enumeration", "sampling", "other"))
        print(f"  {obj}: {parts}; peak RSS {o['peak_rss_mb']:.0f} -> {n['peak_rss_mb']:.0f} MB")
        print(f"    old: {o['verdict']}\n    new: {n['verdict']}")
    return 0


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--objects", nargs="*", default=list(DEFAULT_OBJECTS),
                   help="library object ids or demo objects (KRN-...)")
    p.add_argument("--cache", default=str(DEFAULT_CACHE), help="folder of rendered library objects (.npz + .json)")
    p.add_argument("--quick", action="store_true", help="the first object only, no memory runs")
    p.add_argument("--no-kernels", action="store_true", help="the route's time split only")
    p.add_argument("--no-memory", action="store_true", help="skip the traced-memory runs of the sampling tail")
    p.add_argument("--baseline", default=None, metavar="DIR",
                   help="a source tree of another commit (holding tumble/): its route and this tree's alternated, "
                        "each in its own process, and their ratios printed")
    p.add_argument("--rounds", type=int, default=2, help="alternated rounds of --baseline (the minimum is kept)")
    p.add_argument("--json-out", default=None, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    warnings.simplefilter("ignore")
    objects = args.objects[:1] if args.quick else args.objects
    if args.baseline:
        return baseline_rounds(objects, args.cache, args.baseline, args.rounds)
    rows = [run_object(o, Path(args.cache), kernels=not args.no_kernels, memory=not (args.no_memory or args.quick))
            for o in objects]
    if args.json_out:
        import json

        Path(args.json_out).write_text(json.dumps(rows))
    print("\nsummary (CPU s; load averages " + ", ".join(f"{r['load']:.1f}" for r in rows) + " on 2 cores):")
    for r in rows:
        print(f"  {r['object']:>18}: total {r['total_s']:.1f} = evidence {r.get('evidence_s', 0):.1f} + enumeration "
              f"{r.get('enumeration_s', 0):.1f} + sampling {r.get('sampling_s', 0):.1f} + other {r.get('other_s', 0):.1f}"
              + (f"; converged {'yes' if r['converged'] else 'no'} ({r['tau_multiples']:.0f} tau)" if "converged" in r else ""))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
