"""``tumble classify FILE``: PA or NPA? Verdict, periods, rotation state and damping for one object."""

from __future__ import annotations

import argparse
import math

from tumble.cli._common import add_input_options, add_output_options, print_json, read_options

def add_parser(sub) -> None:
    p = sub.add_parser(
        "classify",
        help="decide PA or NPA rotation, with probability, grade, periods and rotation state",
        description="Decide from one object's photometry whether it rotates about its principal axis (PA) "
                    "or tumbles (NPA, SAM or LAM): Bayes factor of shape-free one- and two-period models, "
                    "posterior probability at the given prior, a grade on the Kass & Raftery (1995) scale, "
                    "periods with 68% intervals, and the rotation state from a physical ellipsoid fit. "
                    "Writes verdict.json, results.ecsv and posterior.npz to --out.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="photometry files of one object")
    p.add_argument("--out", metavar="DIR", help="output directory (default: OBJECT-classify)")
    p.add_argument("--screen", action="store_true",
                   help="fast triage from the 1-D and 2-D scans only: a flag (candidate, quiet, unknown) and a "
                        "score (-Delta BIC / 2), not a verdict")
    p.add_argument("--route", choices=("auto", "dense", "sparse"), default="auto",
                   help="auto (default): the sparse route for sparse data (most points without a nightly session), "
                        "else dense; sparse adds the geometry-aware PA fit (sidereal period, pole, phase curve)")
    p.add_argument("--seed", type=int, default=0, metavar="N", help="random seed (default: 0)")
    p.add_argument("--walkers", type=int, metavar="W", help="emcee walkers per ensemble (default: 4 x parameters)")
    p.add_argument("--max-steps", type=int, default=1500, metavar="S",
                   help="emcee step budget per ensemble for the rotation state (default: 1500; 0 = optimise only)")
    p.add_argument("--prior-npa", type=float, default=0.1, metavar="P",
                   help="prior probability of NPA rotation (default: 0.1)")
    p.add_argument("--no-binary", dest="binary", action="store_false",
                   help="do not weigh the binary alternative (primary rotation plus mutual events at an orbital "
                        "period) before an NPA verdict; it is weighed by default")
    p.add_argument("--robust", action="store_true",
                   help="Student-t re-weighting of outliers (evidence) and Student-t likelihood (physical fit)")
    p.add_argument("--min-period-h", type=float, default=0.5, metavar="H",
                   help="shortest light-curve period searched, hours (default: 0.5)")
    p.add_argument("--max-period-h", type=float, default=2000.0, metavar="H",
                   help="longest light-curve period searched, hours (default: 2000; also limited by the span)")
    size = p.add_mutually_exclusive_group()
    size.add_argument("--diameter-km", type=float, metavar="D", help="diameter, km (for the damping time)")
    size.add_argument("--h-mag", type=float, metavar="H", help="absolute magnitude H (for the damping time)")
    p.add_argument("--albedo", type=float, metavar="A", help="geometric albedo with --h-mag")
    p.add_argument("--report", metavar="DIR",
                   help="also write the object's static HTML report (page and figures) into DIR")
    add_input_options(p)
    add_output_options(p)
    p.set_defaults(run=run)


def _damping(verdict, args, rng):
    from tumble.damping import damping_for_classification

    return damping_for_classification(verdict, diameter_km=args.diameter_km, h_mag=args.h_mag, albedo=args.albedo,
                                      rng=rng)


def run(args: argparse.Namespace) -> int:

    import numpy as np

    from tumble._io import atomic_path, atomic_write_text
    from tumble.classify import ClassifyError, classify, screen
    from tumble.photometry import read_lightcurve
    from tumble.cli._common import output_folder
    from tumble.results import make_provenance, plain_record, write_results
    from tumble.schema import dumps_strict, results_row, verdict_record

    if not 0 < args.prior_npa < 1:
        raise ClassifyError(f"--prior-npa must lie strictly between 0 and 1, got {args.prior_npa}")
    if args.albedo is not None and args.h_mag is None:
        raise ClassifyError("--albedo needs --h-mag")
    lc = read_lightcurve(args.files, options=read_options(args))
    # the folder is checked before the work; an object name from data never becomes a path as it is
    out_dir = output_folder(args.out, lc.object_id, "-classify")
    out_dir.mkdir(parents=True, exist_ok=True)
    route = "screen" if args.screen else args.route
    prov = make_provenance(route=route, prior_npa=args.prior_npa, seed=args.seed, max_steps=args.max_steps,
                           n_walkers=args.walkers, robust=bool(args.robust), min_period_h=args.min_period_h,
                           max_period_h=args.max_period_h, binary=bool(args.binary),
                           read_options=plain_record(read_options(args)))
    rng = np.random.default_rng(args.seed)
    fit = None
    if args.screen:
        verdict = screen(lc, prior_npa=args.prior_npa)
        damp = None  # a screen states no rotation, so no damping time
    else:
        result = classify(lc, prior_npa=args.prior_npa, rng=rng, n_walkers=args.walkers,
                          max_steps=args.max_steps, student_t=args.robust, p_min_h=args.min_period_h,
                          p_max_h=args.max_period_h, progress=not args.quiet, route=args.route,
                          binary=args.binary)
        verdict, fit = result.verdict, result.fit
        damp = _damping(verdict, args, np.random.default_rng(args.seed + 1))
    out = verdict_record(verdict.to_dict(), seed=int(args.seed),
                         tau_damp_gyr=damp.tau_gyr if damp else math.nan,
                         tau_damp_gyr_lo=damp.tau_gyr_lo if damp else math.nan,
                         tau_damp_gyr_hi=damp.tau_gyr_hi if damp else math.nan)
    out["provenance"] = prov
    # verdict.json holds no wall-clock time, so the same seed gives the same bytes
    atomic_write_text(out_dir / "verdict.json", dumps_strict(out, indent=2) + "\n")
    write_results([results_row(out)], out_dir / "results.ecsv", provenance=prov)
    arrays = {}
    if fit is not None and fit.posterior is not None:
        post = fit.posterior
        arrays = {"samples": post.samples, "log_prob": post.log_prob, "log_likelihood": post.log_likelihood,
                  "names": np.array(post.names), "units": np.array(post.units),
                  "mode": np.array(fit.mode), "converged": np.array(fit.converged)}
    if arrays:  # no posterior (screen, or no physical fit): no posterior file
        with atomic_path(out_dir / "posterior.npz") as tmp:
            with open(tmp, "wb") as fh:
                np.savez(fh, **arrays)
    index = None
    if args.report:
        from tumble.report import write_object_report

        index = write_object_report(args.report, out, lc=lc, posterior=arrays or None)
    if args.json:
        print_json(out)
        return 0
    if args.screen:
        _print_screen(out)
    else:
        _print_verdict(out, damp)
    written = [out_dir / "verdict.json", out_dir / "results.ecsv"] + ([out_dir / "posterior.npz"] if arrays else [])
    print("wrote " + ", ".join(str(w) for w in written))
    if index is not None:
        print(f"report written: {index}")
    return 0


def _fmt(x, digits=5):
    return "-" if x is None else f"{x:.{digits}g}"


def _print_header(v: dict) -> None:
    print(f"object        {v['object']}  ({v['n_points']} points, {v['n_sessions']} sessions, "
          f"{v['span_d']:.3g} d)")


def _print_screen(v: dict) -> None:
    from tumble.classify.screen import SCREEN_FLAGS
    from tumble.display import format_fap

    _print_header(v)
    print(f"screen        {v['screen_flag']}: {SCREEN_FLAGS[v['screen_flag']]}")
    print(f"score         -Delta BIC / 2 = {_fmt(v['screen_score'], 3)} (two periods over one)")
    if v["period_h"] is not None:
        print(f"period        {_fmt(v['period_h'], 6)} h (one-period scan; false-alarm probability "
              f"{format_fap(v['period_fap'])})")
    for w in v["warnings"]:
        print(f"note          {w}")


def _print_verdict(v: dict, damp) -> None:
    from tumble.classify import format_probability, grade_sentence
    from tumble.display import format_fap

    _print_header(v)
    print(f"rotation      {v['rotation']}" + (f"  (mode {v['mode']})" if v["rotation"] == "NPA" else ""))
    p_text = format_probability(v["p_npa"] if v["p_npa"] is not None else float("nan"))
    print(f"probability   p(NPA) = {p_text} at prior {v['prior_npa']:g};  "
          f"ln B(NPA:PA) = {_fmt(v['ln_bayes_factor'], 4)} +- {_fmt(v['ln_bayes_factor_err'], 2)}")
    print(f"grade         {v['grade']}: {grade_sentence(v)}")
    if v["period_h"] is not None:
        print(f"period        {_fmt(v['period_h'], 8)} +- {_fmt(v['period_h_err'], 2)} h  "
              f"({_fmt(v['n_cycles'], 3)} cycles, {_fmt(100 * v['phase_coverage'], 3)} % of the phase covered, "
              f"false-alarm probability {format_fap(v['period_fap'])})")
    elif v["p1_h"] is not None and v["rotation"] == "undecided":
        print(f"light curve   P1 = {_fmt(v['p1_h'], 7)} h (no rotation verdict)")
    if v.get("p_orb_h") is not None:
        print(f"binary        P_orb = {_fmt(v['p_orb_h'], 6)} h (68%: {_fmt(v['p_orb_h_lo'], 6)} .. "
              f"{_fmt(v['p_orb_h_hi'], 6)}), events {_fmt(v['event_depth_mag'], 2)} mag deep")
    if v["npa_limit_mag"] is not None:
        print(f"NPA limit     tumbling with a second-period signature above {_fmt(v['npa_limit_mag'], 2)} mag rms "
              "would have been detected")
    if v["p_psi_h"] is not None:
        print(f"P_psi         {_fmt(v['p_psi_h'], 7)} h  (68%: {_fmt(v['p_psi_h_lo'], 7)} .. {_fmt(v['p_psi_h_hi'], 7)})")
        print(f"P_phi         {_fmt(v['p_phi_h'], 7)} h  (68%: {_fmt(v['p_phi_h_lo'], 7)} .. {_fmt(v['p_phi_h_hi'], 7)})")
    if v["p2_h"] is not None:
        print(f"light curve   P1 = {_fmt(v['p1_h'], 7)} h, P2 = {_fmt(v['p2_h'], 7)} h")
    if v["excitation"] is not None:
        print(f"E/E0          {_fmt(v['excitation'], 4)}  (68%: {_fmt(v['excitation_lo'], 4)} .. "
              f"{_fmt(v['excitation_hi'], 4)})")
    if damp is not None:
        print(f"damping       tau = {_fmt(damp.tau_gyr, 3)} Gyr (68%: {_fmt(damp.tau_gyr_lo, 3)} .. "
              f"{_fmt(damp.tau_gyr_hi, 3)}); an order-of-magnitude estimate")
    for w in v["warnings"]:
        print(f"warning       {w}")
