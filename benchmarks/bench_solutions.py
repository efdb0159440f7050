"""Benchmark of the tumbling-solution enumeration (``tumble.classify.solutions``) on simulated dense tumblers.

For each held-out dense tumbler of the calibration library (``docs/calibration-library.md``) that the
evidence route detects (verdict NPA), the NPA search of ``fit_rotation_state`` is run (its search
part, ``search_solutions`` on the light curve thinned to 300 points; no sampling) and scored against
the simulated truth:

- top solution with P_psi and P_phi both within 1 %;
- the true solution (mode and both periods within 1 %) among the listed ones;
- mode right (top solution's mode);
- time per object (the search alone, wall clock on this machine, side by side in one run);
- for every failure, whether the search or the model is at fault: the same model started at the
  true periods (shapes along the true period ratio, refined with restarts) reaching a higher
  log-likelihood than the search's top solution, both polished to the tops of their modes, means
  the search missed it (``fault_attribution``);
- the ranking criterion (BIC) against the Laplace approximation of the evidence: does the
  Laplace ln Z pick the same top among the best distinct solutions (listed or not)?

Usage::

    nice .venv/bin/python benchmarks/bench_solutions.py --quick            # 4 detected tumblers + KRN-007
    nice .venv/bin/python benchmarks/bench_solutions.py --limit 40         # the first 40 held-out dense tumblers
    nice .venv/bin/python benchmarks/bench_solutions.py --demo-only        # KRN-007 of the demo
    nice .venv/bin/python benchmarks/bench_solutions.py --demo-seeds 0,1,2,3,4   # KRN-007, shifted start sets

Ranking rules side by side (``--ranking bic,polished,free-inertia,...``; the names of
``tumble.classify.solutions.RANKING_RULES``): the search runs once per object with the plain BIC
ranking, and each rule then re-scores the same distinct solutions (``rank_solutions``: re-fitted
with another model, polished to the top of its mode, or ranked by the Laplace ln Z); every rule's
figures (top right, true listed, mode right, true found, ranking time) are printed in one table.
For every object any rule gets wrong, the truth-started fit is scored by that rule too: "truth
beats top" counts the failures the rule's model itself would resolve if the search found the truth.

    nice .venv/bin/python benchmarks/bench_solutions.py --ids CAL-dense-npa-029,CAL-dense-npa-151 \
        --ranking bic,polished,free-inertia --no-demo --out benchmarks/.cache/ranking-subset.jsonl
    nice .venv/bin/python benchmarks/bench_solutions.py --split calibration --limit 40 --ranking ...
    nice .venv/bin/python benchmarks/bench_solutions.py --tables A.jsonl,B.jsonl   # runs split by --offset

``--wide N`` runs the search with ``FitBudget.n_wide = N`` (the pairs of each screen that get the
wide fit budget; ``N`` = ``N_SCREENED`` gives every screened pair the wide budget), to measure a
budget before it becomes the default; the search's CPU time and its number of physical fits per
object are printed with the figures.

The search of ``tumble classify`` is deterministic (well-spread starts, no random draws); here too.
``--demo-seeds`` reruns KRN-007's search with the orientation sets shifted by each seed (a
Cranley-Patterson shift: every set as well spread, but different) and prints whether the true
solution is the top or listed each time: a check that the result is not an accident of one set.

Rows are appended (flushed) to a JSON-lines table, so a rerun skips what is done. The library is read
from ``--library`` (the rendered cache of ``bench_classify.py generate``); nothing is written there.
Threads: set ``OPENBLAS_NUM_THREADS=1``. Figures are for the simulated library only.
"""

from __future__ import annotations

import argparse
import glob
import json
import math
import os
import sys
import time
import warnings
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

#: Both periods within this relative error count as right (issue 15's target tolerance).
PERIOD_TOLERANCE = 0.01
#: The library cache rendered by bench_classify.py (version and seed of its population).
DEFAULT_LIBRARY = HERE / ".cache" / "library-cal-2-20261204"
DEFAULT_OUT = HERE / ".cache" / "results-solutions.jsonl"
DEMO_DIR = HERE.parent / "catalogs_demo"
#: The demo tumbler with a known truth (catalogs_demo/truth.ecsv).
DEMO_OBJECT = "KRN-007"
#: Objects of --quick.
QUICK_DETECTED = 4
#: Independent truth-started fits (each with shape restarts) of the fault check; the best counts.
TRUTH_TRIALS = 3
#: Distinct solutions (listed or not) whose BIC ranking is compared with the Laplace ln Z.
LAPLACE_COMPARED = 5
#: Seed of the evidence route and of the fault check's truth-started fits (the search itself is
#: deterministic; fixed: the benchmark is reproducible).
SEED = 1


def periods_match(mode, p_psi_h, p_phi_h, truth, *, check_mode: bool) -> bool:
    """Both periods within :data:`PERIOD_TOLERANCE` (and the mode, when asked)."""
    ok = (abs(p_psi_h / truth["p_psi_h"] - 1.0) <= PERIOD_TOLERANCE
          and abs(p_phi_h / truth["p_phi_h"] - 1.0) <= PERIOD_TOLERANCE)
    return ok and (not check_mode or mode == truth["mode"])


def truth_started_optimum(lc, truth, rng, models=None):
    """The physical model's best optimum started at the true periods (in the true mode), or None."""
    from tumble.classify import solutions as S
    from tumble.classify.rotation import thin_lightcurve

    if models is None:
        models = S.npa_models(thin_lightcurve(lc, 300), lc.span_d * 24.0)
    pair = S.FrequencyPair(24.0 / truth["p_psi_h"], 24.0 / truth["p_phi_h"], ("truth",), "truth")
    best = None
    model = models[truth["mode"]]
    for _ in range(TRUTH_TRIALS):
        opt = S.fit_pair(model, truth["mode"], pair, S.FitBudget(n_shapes=4, n_short=4, n_full=2), rng)
        if opt is not None:
            opt = S.restart_optimum(model, opt, rng)
            if best is None or opt.log_likelihood > best.log_likelihood:
                best = opt
    return best


def fault_attribution(lc, models, top, truth) -> dict:
    """Search or model at fault: the truth-started fit and the top solution compared at the tops of their modes.

    Both are polished (``rank_optimum`` with the 'polished' rule, the step the sampler takes before
    sampling): an optimiser stopped on a mode's ridge can sit tens of nats below the top
    (CAL-dense-npa-119: the truth-started fit 591.9 unpolished, 645.5 polished, against 638.9 for
    the wrong top). A truth-started fit that drifted off the true periods counts as not better.
    """
    from tumble.classify import solutions as S

    rule = S.ranking_rule("polished")
    opt = truth_started_optimum(lc, truth, np.random.default_rng(SEED), models)
    if opt is None:
        return {"truth_ll": -math.inf, "fault": "model"}
    mode = truth["mode"]
    t = S.rank_optimum(opt, models[mode], models[mode], rule, lc.span_d)
    top_opt = S.solution_optimum(top)
    tp = S.rank_optimum(top_opt, models[top.mode], models[top.mode], rule, lc.span_d)
    der = models[mode].derived(t.x[None])
    stayed = periods_match(mode, float(der["p_psi_h"][0]), float(der["p_phi_h"][0]), truth, check_mode=False)
    better = stayed and t.log_likelihood > tp.log_likelihood + 1.0
    return {"truth_ll": t.log_likelihood, "top_ll_polished": tp.log_likelihood, "truth_stayed": stayed,
            "fault": "search" if better else "model"}


def score_listing(sols, distinct, truth) -> dict:
    """Top right, mode right, true listed, true found of one ranking's solutions."""
    if not sols:
        return dict(top_right=False, mode_right=False, true_listed=False, true_found=False, n_listed=0,
                    top_mode="", top_p_psi_h=math.nan, top_p_phi_h=math.nan, top_ll=math.nan, top_criterion=math.nan)
    top = sols[0]
    return dict(top_mode=top.mode, top_p_psi_h=top.p_psi_h, top_p_phi_h=top.p_phi_h, top_ll=top.log_likelihood,
                top_criterion=top.criterion, n_listed=len(sols),
                top_right=periods_match(top.mode, top.p_psi_h, top.p_phi_h, truth, check_mode=False),
                mode_right=top.mode == truth["mode"],
                true_listed=any(periods_match(s.mode, s.p_psi_h, s.p_phi_h, truth, check_mode=True) for s in sols),
                true_found=any(periods_match(s.mode, s.p_psi_h, s.p_phi_h, truth, check_mode=True) for s in distinct))


def score_rankings(lc, search, models, truth, rules, check_model: bool) -> dict:
    """Each ranking rule on the search's distinct solutions: ``{name: scores}`` (see the module notes)."""
    from tumble.classify import solutions as S

    optima = [S.solution_optimum(s) for s in search.distinct]
    out, results = {}, {}
    for name in rules:
        rule = S.ranking_rule(name)
        t0 = time.perf_counter()
        listed, _, distinct = S.rank_solutions(optima, models, lc, rule)
        rec = score_listing(listed, distinct, truth)
        rec["rank_s"] = time.perf_counter() - t0
        out[name], results[name] = rec, listed
    failed = [n for n in rules if not (out[n]["top_right"] and out[n]["mode_right"])]
    if check_model and failed:
        truth_opt = truth_started_optimum(lc, truth, np.random.default_rng(SEED), models)
        for name in failed:
            rule = S.ranking_rule(name)
            if truth_opt is None or not results[name]:
                continue
            targets = S.ranking_models(lc, models, rule)
            mode = truth["mode"]
            opt = S.rank_optimum(truth_opt, models[mode], targets[mode], rule, lc.span_d)
            k, n = len(targets[mode].space.names), int(targets[mode].y.size)
            lap = S.laplace_approximation(targets[mode], opt.x) if rule.evidence else None
            crit = S.solution_criterion(opt.log_likelihood, lap, k, n, rule.evidence)
            der = targets[mode].derived(opt.x[None])
            stayed = periods_match(mode, float(der["p_psi_h"][0]), float(der["p_phi_h"][0]), truth, check_mode=False)
            # a truth-started fit that drifted to other periods says nothing of the truth
            out[name].update(truth_ll=opt.log_likelihood, truth_criterion=crit, truth_stayed=stayed,
                             truth_beats_top=bool(stayed and crit < results[name][0].criterion))
    return out


def score_object(object_id, lc, truth, detected_by, check_model: bool, rules=("bic",), budget=None) -> dict:
    """Run the search on one light curve and score it (a dictionary row); ``budget``: the search's
    :class:`tumble.classify.solutions.FitBudget` (default: the search's own)."""
    from tumble.classify import classify
    from tumble.classify.rotation import thin_lightcurve
    from tumble.classify.solutions import FitBudget, npa_models, search_solutions

    budget = budget or FitBudget()
    row = {"object_id": object_id, "true_mode": truth["mode"], "true_p_psi_h": truth["p_psi_h"],
           "true_p_phi_h": truth["p_phi_h"]}
    t0 = time.perf_counter()
    cls = classify(lc, rng=SEED, fit_state=False, detection_limit=False)
    row["evidence_s"] = time.perf_counter() - t0
    row["rotation"] = cls.verdict.rotation
    row["detected"] = cls.verdict.rotation == "NPA" or detected_by == "always"
    if not row["detected"]:
        return row
    t0 = time.perf_counter()
    # the search part of fit_rotation_state (optimisation only), with every distinct solution kept
    sub = thin_lightcurve(lc, 300)
    models = npa_models(sub, lc.span_d * 24.0)
    c0 = time.process_time()
    search = search_solutions(lc, cls.evidence, models, rng=None, ranking="bic", budget=budget)
    row["search_s"] = time.perf_counter() - t0
    row["search_cpu_s"] = time.process_time() - c0
    row["n_fits"] = search.n_fits
    if tuple(rules) != ("bic",):
        row["rankings"] = score_rankings(lc, search, models, truth, rules, check_model)
    sols = search.solutions
    if not sols:
        row.update(top_right=False, mode_right=False, true_listed=False, true_found=False, laplace_agrees=True,
                   n_listed=0, top_mode="", top_p_psi_h=math.nan, top_p_phi_h=math.nan, top_ll=math.nan)
        return row
    top = sols[0]
    row.update(top_mode=top.mode, top_p_psi_h=top.p_psi_h, top_p_phi_h=top.p_phi_h, top_ll=top.log_likelihood,
               n_listed=len(sols),
               listed=[[s.mode, s.p_psi_h, s.p_phi_h, s.delta, s.relative_probability] for s in sols])
    row["top_right"] = periods_match(top.mode, top.p_psi_h, top.p_phi_h, truth, check_mode=False)
    row["mode_right"] = top.mode == truth["mode"]
    row["true_listed"] = any(periods_match(s.mode, s.p_psi_h, s.p_phi_h, truth, check_mode=True) for s in sols)
    row["true_found"] = any(periods_match(s.mode, s.p_psi_h, s.p_phi_h, truth, check_mode=True)
                            for s in search.distinct)
    # BIC against the Laplace ln Z over the best distinct solutions (listed or not)
    near = search.distinct[:LAPLACE_COMPARED]
    lz = np.array([s.log_evidence_laplace for s in near])
    row["distinct"] = [[s.mode, s.p_psi_h, s.p_phi_h, s.delta, s.log_evidence_laplace] for s in near]
    row["laplace_agrees"] = bool(len(near) < 2 or not np.all(np.isfinite(lz)) or int(np.argmax(lz)) == 0)
    if check_model and "rankings" not in row and not (row["top_right"] and row["mode_right"]):
        row.update(fault_attribution(lc, models, top, truth))
    return row


def demo_seed_check(seeds) -> list:
    """KRN-007's search with the orientation sets shifted by each seed: ``[(seed, top_right, listed, s, top)]``."""
    from tumble.classify import classify
    from tumble.classify.rotation import thin_lightcurve
    from tumble.classify.solutions import npa_models, search_solutions

    _, lc, truth = demo_object()
    ev = classify(lc, rng=SEED, fit_state=False, detection_limit=False).evidence
    models = npa_models(thin_lightcurve(lc, 300), lc.span_d * 24.0)
    out = []
    for seed in seeds:
        t0 = time.perf_counter()
        sols = search_solutions(lc, ev, models, rng=np.random.default_rng(seed)).solutions
        dt = time.perf_counter() - t0
        top = sols[0] if sols else None
        top_right = top is not None and periods_match(top.mode, top.p_psi_h, top.p_phi_h, truth, check_mode=True)
        listed = any(periods_match(s.mode, s.p_psi_h, s.p_phi_h, truth, check_mode=True) for s in sols)
        out.append((seed, top_right, listed, dt, top))
        desc = f"{top.mode} {top.p_psi_h:.2f}/{top.p_phi_h:.3f} h" if top is not None else "none"
        print(f"{DEMO_OBJECT} shift seed {seed}: top {desc}, top right {top_right}, true listed {listed}, "
              f"{len(sols)} listed, {dt:.0f} s", flush=True)
    return out


def library_objects(library: Path, limit: int | None, offset: int = 0, split: str = "heldout", only=None):
    """Dense tumblers of one half of the library, in the library's hashed order: (id, lc, truth).

    ``only``: these ids (of that half or not), in the same order.
    """
    from library.population import order_key, split_of
    from library.render import load_rendered

    ids = sorted((Path(p).stem for p in glob.glob(str(library / "CAL-dense-npa-*.json"))), key=order_key)
    ids = [i for i in ids if i in only] if only else [i for i in ids if split_of(i) == split]
    for oid in ids[offset:][:limit]:
        obj = load_rendered(library, oid)
        if obj is not None:
            yield oid, obj.lightcurve, obj.truth.to_dict()


def demo_object():
    """KRN-007 of the demo campaign and its truth (catalogs_demo/truth.ecsv)."""
    from astropy.table import Table

    from tumble.photometry import read_lightcurve

    lc = read_lightcurve(sorted(glob.glob(str(DEMO_DIR / "campaign" / f"{DEMO_OBJECT}__*"))))
    t = Table.read(DEMO_DIR / "truth.ecsv")
    r = t[list(t["object"]).index(DEMO_OBJECT)]
    return DEMO_OBJECT, lc, {"mode": str(r["mode"]), "p_psi_h": float(r["p_psi_h"]), "p_phi_h": float(r["p_phi_h"])}


def done_ids(path: Path) -> set:
    if not path.exists():
        return set()
    return {json.loads(line)["object_id"] for line in path.read_text().splitlines() if line.strip()}


def summary(rows) -> str:
    det = [r for r in rows if r.get("detected") and "top_right" in r]
    lines = [f"objects run {len(rows)}, detected tumblers scored {len(det)}"]
    if not det:
        return "\n".join(lines)

    def frac(key):
        k = sum(bool(r.get(key)) for r in det)
        return f"{k}/{len(det)} = {k / len(det):.0%}"

    lines += [f"top solution both periods within {PERIOD_TOLERANCE:.0%}: {frac('top_right')}  (target >= 90 %)",
              f"true solution listed:                    {frac('true_listed')}  (target >= 97 %)",
              f"mode right:                              {frac('mode_right')}  (target >= 95 %)",
              f"true solution found (listed or not):     {frac('true_found')}",
              f"Laplace ln Z picks the BIC's top of the best {LAPLACE_COMPARED} distinct: {frac('laplace_agrees')}",
              f"search time per object: median {np.median([r['search_s'] for r in det]):.0f} s, "
              f"max {np.max([r['search_s'] for r in det]):.0f} s (wall clock, shared machine)"]
    cpu = [r["search_cpu_s"] for r in det if "search_cpu_s" in r]
    if cpu:
        lines.append(f"search CPU per object: median {np.median(cpu):.0f} s, max {np.max(cpu):.0f} s, "
                     f"total {np.sum(cpu):.0f} s; physical fits per object median "
                     f"{np.median([r['n_fits'] for r in det if 'n_fits' in r]):.0f}")
    # the rules every scored row has (tables of runs with other --ranking lists can be summarised together)
    ranked = [r for r in det if r.get("rankings")]
    names = [n for n in (ranked[0]["rankings"] if ranked else {}) if all(n in r["rankings"] for r in ranked)]
    if names and ranked:
        lines.append(f"\nranking rules side by side on the same {len(ranked)} searches:")
        lines.append(f"{'rule':24s} {'top right':>10s} {'listed':>8s} {'mode':>8s} {'found':>8s} "
                     f"{'truth beats top':>16s} {'rank s (median)':>16s}")
        for name in names:
            recs = [r["rankings"][name] for r in ranked]

            def cnt(key):
                return f"{sum(bool(x.get(key)) for x in recs)}/{len(recs)}"

            beats = [x["truth_beats_top"] for x in recs if "truth_beats_top" in x]
            lines.append(f"{name:24s} {cnt('top_right'):>10s} {cnt('true_listed'):>8s} {cnt('mode_right'):>8s} "
                         f"{cnt('true_found'):>8s} {f'{sum(beats)}/{len(beats)}':>16s} "
                         f"{np.median([x['rank_s'] for x in recs]):16.1f}")
    faults = [r.get("fault") for r in det if r.get("fault")]
    if faults:
        lines.append(f"failures: {faults.count('search')} search (truth-started fit better), "
                     f"{faults.count('model')} model (truth-started fit not better)")
    return "\n".join(lines)


def format_row(r) -> str:
    if not r.get("detected"):
        return f"{r['object_id']:20s} not detected ({r.get('rotation')})"
    fault = f" fault={r['fault']} (truth ll {r['truth_ll']:.1f})" if r.get("fault") else ""
    for name, x in (r.get("rankings") or {}).items():
        truth = f" truth ll {x['truth_ll']:.1f} beats={x['truth_beats_top']}" if "truth_ll" in x else ""
        fault += (f"\n    {name:22s} top {x['top_mode']} {x['top_p_psi_h']:.4g}/{x['top_p_phi_h']:.4g} h "
                  f"(ll {x['top_ll']:.1f}) right={x['top_right']} listed={x['true_listed']} "
                  f"mode={x['mode_right']} {x['rank_s']:.0f} s{truth}")
    return (f"{r['object_id']:20s} truth {r['true_mode']} {r['true_p_psi_h']:.4g}/{r['true_p_phi_h']:.4g} h  "
            f"top {r['top_mode']} {r['top_p_psi_h']:.4g}/{r['top_p_phi_h']:.4g} h (ll {r['top_ll']:.1f})  "
            f"listed {r['n_listed']}  top_right={r['top_right']} listed={r['true_listed']} found={r.get('true_found')} "
            f"mode={r['mode_right']}  {r['search_s']:.0f} s{fault}")


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--library", default=str(DEFAULT_LIBRARY), help="rendered library cache (read only)")
    p.add_argument("--out", default=str(DEFAULT_OUT), help="JSON-lines table of rows (appended, resumable)")
    p.add_argument("--limit", type=int, default=None, help="held-out dense tumblers to run (detected or not)")
    p.add_argument("--offset", type=int, default=0, help="skip this many held-out dense tumblers first "
                   "(to share the library between runs writing to different tables)")
    p.add_argument("--quick", action="store_true", help=f"stop after {QUICK_DETECTED} detected tumblers")
    p.add_argument("--demo-only", action="store_true", help=f"only {DEMO_OBJECT} of the demo")
    p.add_argument("--no-demo", action="store_true", help=f"skip {DEMO_OBJECT}")
    p.add_argument("--no-fault-check", action="store_true", help="skip the truth-started fit of failures")
    p.add_argument("--demo-seeds", default=None, metavar="S1,S2,...",
                   help=f"only {DEMO_OBJECT}: its search with the orientation sets shifted by each seed")
    p.add_argument("--split", default="heldout", choices=("heldout", "calibration"),
                   help="half of the library (the targets are for the held-out half)")
    p.add_argument("--ids", default=None, metavar="ID1,ID2,...", help="only these library objects")
    p.add_argument("--ranking", default="bic", metavar="RULE1,RULE2,...",
                   help="ranking rules compared side by side on the same searches (tumble.classify.solutions."
                        "RANKING_RULES; the first listed is not special)")
    p.add_argument("--wide", type=int, default=None, metavar="N",
                   help="the search's FitBudget.n_wide (pairs of each screen with the wide fit budget; "
                        "default: the search's own)")
    p.add_argument("--tables", default=None, metavar="T1,T2,...",
                   help="only summarise these JSON-lines tables together (runs split by --offset)")
    args = p.parse_args(argv)
    from dataclasses import replace

    from tumble.classify.solutions import FitBudget, ranking_rule

    rules = tuple(v.strip() for v in args.ranking.split(",") if v.strip())
    for name in rules:
        try:
            ranking_rule(name)
        except Exception as exc:  # noqa: BLE001 - a benchmark's option error, one line
            p.error(str(exc))
    budget = FitBudget() if args.wide is None else replace(FitBudget(), n_wide=args.wide)
    print(f"search budget: {budget}", flush=True)
    warnings.simplefilter("ignore")
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    if args.demo_seeds:
        res = demo_seed_check([int(v) for v in args.demo_seeds.split(",")])
        print(f"{DEMO_OBJECT}: true solution top {sum(r[1] for r in res)}/{len(res)}, "
              f"listed {sum(r[2] for r in res)}/{len(res)}")
        return 0
    if args.tables:
        rows = [json.loads(line) for t in args.tables.split(",") for line in Path(t).read_text().splitlines()
                if line.strip()]
        print(f"{args.split} dense tumblers of the library ({args.tables}):\n"
              + summary([r for r in rows if r["object_id"] != DEMO_OBJECT]))
        return 0
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    done = done_ids(out)
    rows = [json.loads(line) for line in out.read_text().splitlines() if line.strip()] if out.exists() else []
    sources = []
    if not args.no_demo:
        sources.append(("always", [demo_object()]))
    if not args.demo_only:
        only = set(args.ids.split(",")) if args.ids else None
        sources.append(("verdict", library_objects(Path(args.library), args.limit, args.offset, args.split, only)))
    n_detected = 0
    with out.open("a") as fh:
        for detected_by, objects in sources:
            for oid, lc, truth in objects:
                if oid in done:
                    continue
                row = score_object(oid, lc, truth, detected_by, not args.no_fault_check, rules, budget)
                fh.write(json.dumps(row) + "\n")
                fh.flush()
                rows.append(row)
                print(format_row(row), flush=True)
                n_detected += bool(row.get("detected")) and detected_by == "verdict"
                if args.quick and n_detected >= QUICK_DETECTED:
                    break
    lib_rows = [r for r in rows if r["object_id"] != DEMO_OBJECT]
    print(f"\n{args.split} dense tumblers of the library:\n" + summary(lib_rows))
    demo = [r for r in rows if r["object_id"] == DEMO_OBJECT]
    if demo:
        print(f"\ndemo: {format_row(demo[-1])}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
