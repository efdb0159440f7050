"""``tumble relax``: rotational damping time of one body, or the rigidity constraint of a sample."""

from __future__ import annotations

import argparse

from tumble.cli._common import add_output_options, print_json

CAUTION = ("Caution: mu Q is uncertain by orders of magnitude, so tau is an order-of-magnitude "
           "scientific estimate, not a measurement and not operational advice.")
SAMPLE_CAUTION = ("Caution: mu Q is uncertain by orders of magnitude, and this constraint rests on the assumed "
                  "excitation age, density, shape factor and a simple boundary model; it is an "
                  "order-of-magnitude scientific estimate, not a measurement and not operational advice.")


def add_parser(sub) -> None:
    p = sub.add_parser(
        "relax",
        help="rotational damping time from period and size, or a sample-level mu Q constraint",
        description="Estimate how long internal friction takes to damp tumbling (non-principal-axis "
                    "rotation) for a body of given period and diameter (or H and albedo), with Monte "
                    "Carlo uncertainties; or, with --sample, constrain the rigidity x quality factor "
                    "mu Q from where tumblers and principal-axis rotators of a classified sample sit "
                    "relative to the lines of constant damping time.",
    )
    one = p.add_argument_group("one body")
    one.add_argument("--period-h", type=float, metavar="P", help="rotation period, hours")
    one.add_argument("--period-h-err", type=float, metavar="E", help="1-sigma period uncertainty, hours")
    one.add_argument("--diameter-km", type=float, metavar="D", help="diameter, km")
    one.add_argument("--diameter-km-err", type=float, metavar="E", help="1-sigma diameter uncertainty, km")
    one.add_argument("--h-mag", type=float, metavar="H", help="absolute magnitude H (instead of --diameter-km)")
    one.add_argument("--h-mag-err", type=float, default=0.0, metavar="E",
                     help="1-sigma uncertainty of H, mag (default: 0)")
    one.add_argument("--albedo", type=float, metavar="A",
                     help="geometric albedo p_V with --h-mag (default: log-normal prior, median 0.14, 0.25 dex)")
    one.add_argument("--formula", choices=["burns-safronov", "harris", "sharma-burns-hui"],
                     default="burns-safronov",
                     help="damping-time formula (default: burns-safronov, with priors on mu Q, density, K3^2)")
    one.add_argument("--mu-q", type=float, metavar="PA",
                     help="fix mu Q, Pa (default: log-normal prior, median 5e11 Pa, 1 dex)")
    one.add_argument("--k3-squared", type=float, metavar="K",
                     help="fix the Burns & Safronov shape factor K3^2 (default: log-uniform 0.01 .. 0.1)")
    one.add_argument("--shape-coefficient", type=float, metavar="DH",
                     help="D(h) of Sharma, Burns & Hui (2005), required with --formula sharma-burns-hui")
    one.add_argument("--harris-c", type=float, default=17.0, metavar="C",
                     help="Harris constant C (default: 17)")
    one.add_argument("--samples", type=int, default=20000, metavar="N",
                     help="Monte Carlo draws (default: 20000)")
    smp = p.add_argument_group("sample")
    smp.add_argument("--sample", metavar="RESULTS",
                     help="results catalog (ECSV) with PA/NPA verdicts, periods (period_h for PA; mode, "
                          "p_psi_h, p_phi_h for tumblers, whose spin period is 2 pi/<|omega|>) and "
                          "diameter_km (or h_mag and albedo): fit mu Q")
    smp.add_argument("--walkers", type=int, default=24, metavar="N", help="emcee walkers (default: 24)")
    smp.add_argument("--steps", type=int, default=3000, metavar="N", help="emcee steps (default: 3000)")
    smp.add_argument("--misclassification", type=float, default=0.02, metavar="EPS",
                     help="fixed floor on P(NPA) far below the line (default: 0.02)")
    both = p.add_argument_group("both")
    both.add_argument("--density", type=float, metavar="KG_M3",
                      help="bulk density, kg m^-3 (default: uniform 1000 .. 3000 for one body; 2000 for --sample)")
    both.add_argument("--age-gyr", type=float, default=4.5, metavar="T",
                      help="time since the excitation, Gyr (default: 4.5, the age of the Solar System)")
    both.add_argument("--seed", type=int, default=0, metavar="N",
                      help="random seed (default: 0, so runs repeat exactly)")
    add_output_options(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from tumble.damping import DampingError

    if args.sample:
        if args.period_h is not None:
            raise DampingError("give either --sample or --period-h, not both")
        return _run_sample(args)
    if args.period_h is None:
        raise DampingError("give --period-h (with --diameter-km or --h-mag) or --sample RESULTS.ecsv")
    return _run_one(args)


def _run_one(args: argparse.Namespace) -> int:
    from tumble.damping import DampingError, estimate_damping

    if args.diameter_km is None and args.h_mag is None:
        raise DampingError("give --diameter-km D or --h-mag H (with an optional --albedo)")
    if args.albedo is not None and args.h_mag is None:
        raise DampingError("--albedo goes with --h-mag")
    est = estimate_damping(
        args.period_h, args.diameter_km, period_h_err=args.period_h_err, diameter_km_err=args.diameter_km_err,
        h_mag=args.h_mag, h_mag_err=args.h_mag_err, albedo=args.albedo, formula=args.formula,
        mu_q_pa=args.mu_q, density_kg_m3=args.density, k3_squared=args.k3_squared,
        shape_coefficient=args.shape_coefficient, harris_c=args.harris_c, age_gyr=args.age_gyr,
        n_samples=args.samples, rng=args.seed)
    import math

    if not all(math.isfinite(x) for x in (est.tau_gyr, est.tau_gyr_lo, est.tau_gyr_hi)):
        raise DampingError(f"no finite damping time for these inputs (period {args.period_h:g} h, diameter "
                           f"{est.diameter_km:.3g} km); check the size and period")
    if args.json:
        out = est.to_dict()
        out["caution"] = CAUTION
        out["seed"] = args.seed
        print_json(out)
        return 0
    from tumble.display import DAMPING_DIGITS, format_probability, format_sig

    def g(x):
        return format_sig(x, DAMPING_DIGITS)

    print(f"damping time   tau = {g(est.tau_gyr)} Gyr  (68%: {g(est.tau_gyr_lo)} .. {g(est.tau_gyr_hi)}; "
          f"95%: {g(est.tau_gyr_lo95)} .. {g(est.tau_gyr_hi95)})")
    print(f"P(tau > {est.age_gyr:.3g} Gyr)  {format_probability(est.p_tau_exceeds_age)}")
    print(f"formula        {est.formula_text}")
    print(f"period         {est.period_h:.6g} h")
    if est.diameter_source == "given":
        print(f"diameter       {est.diameter_km:.5g} km (given)")
    else:
        print(f"diameter       {est.diameter_km:.4g} km (68%: {est.diameter_km_lo:.4g} .. "
              f"{est.diameter_km_hi:.4g}; from H and albedo)")
    print("inputs")
    for name, prior in est.priors:
        print(f"  {name:<18s}{prior.describe()}")
    print("assumptions")
    for a in est.assumptions:
        print(f"  - {a}")
    print(f"implication    {est.implication()}")
    print(CAUTION)
    return 0


def _run_sample(args: argparse.Namespace) -> int:
    from tumble.damping import DampingError, fit_rigidity, read_relax_sample

    for name in ("diameter_km", "h_mag", "albedo", "mu_q", "period_h_err"):
        if getattr(args, name) is not None:
            raise DampingError(f"--{name.replace('_', '-')} is for one body, not --sample")
    sample = read_relax_sample(args.sample)
    res = fit_rigidity(sample, age_gyr=args.age_gyr,
                       density_kg_m3=2000.0 if args.density is None else args.density,
                       k3_squared=0.03 if args.k3_squared is None else args.k3_squared,
                       eps=args.misclassification, n_walkers=args.walkers, n_steps=args.steps,
                       progress=not (args.quiet or args.json), rng=args.seed)
    if args.json:
        out = res.to_dict()
        out["sample"] = args.sample
        out["caution"] = SAMPLE_CAUTION
        out["seed"] = args.seed
        print_json(out)
        return 0
    skipped = ", ".join(f"{c} {why}" for why, c in res.n_skipped) or "none"
    print(f"sample         {args.sample}: {res.n_npa} tumblers (NPA), {res.n_pa} PA rotators; skipped: {skipped}")
    print(f"mu Q           10^{res.log10_mu_q_pa:.2f} Pa = {10**res.log10_mu_q_pa:.2g} Pa  "
          f"(68%: {10**res.log10_mu_q_pa_lo:.2g} .. {10**res.log10_mu_q_pa_hi:.2g}; "
          f"95%: {10**res.log10_mu_q_pa_lo95:.2g} .. {10**res.log10_mu_q_pa_hi95:.2g} Pa)")
    print(f"               for T = {res.age_gyr:g} Gyr since excitation, density {res.density_kg_m3:g} kg m^-3, "
          f"K3^2 = {res.k3_squared:g}")
    print(f"mu Q / T       10^{res.log10_mu_q_over_t:.2f} Pa/Gyr  (68%: 10^{res.log10_mu_q_over_t_lo:.2f} .. "
          f"10^{res.log10_mu_q_over_t_hi:.2f})")
    print(f"Harris C equiv {res.harris_c_equivalent:.3g}  (68%: {res.harris_c_equivalent_lo:.3g} .. "
          f"{res.harris_c_equivalent_hi:.3g}; C = 17 is Harris 1994)")
    print(f"boundary       softness {res.softness_dex:.2g} dex (68%: {res.softness_dex_lo:.2g} .. "
          f"{res.softness_dex_hi:.2g}); fraction tumbling far above the line {res.npa_fraction_slow:.2f} "
          f"(68%: {res.npa_fraction_slow_lo:.2f} .. {res.npa_fraction_slow_hi:.2f})")
    print(f"sampler        emcee, {res.n_walkers} walkers x {res.n_steps} steps ({res.n_burn} burn-in), "
          f"acceptance {res.acceptance_fraction:.2f}, autocorrelation "
          f"{', '.join(f'{a:.0f}' for a in res.autocorr_steps)} steps")
    print("assumptions")
    for a in res.assumptions:
        print(f"  - {a}")
    print(SAMPLE_CAUTION)
    return 0
