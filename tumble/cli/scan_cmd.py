"""``tumble scan FILE``: period search (1-D Fourier scan; optionally the two-period scan)."""

from __future__ import annotations

import argparse
import sys

from tumble.cli._common import add_input_options, add_output_options, print_json, read_options


def add_parser(sub) -> None:
    p = sub.add_parser(
        "scan",
        help="period search: ranked periods, rotation period, optional two-period fit",
        description="Scan trial periods with an m-th order Fourier series and one free zero-point per "
                    "session (sparse points: one per band, with a linear phase-angle term when they span "
                    "a range of phase angles). Prints the ranked periods with uncertainties, alias labels "
                    "and delta chi-square, the dominant light-curve period and the adopted rotation period; "
                    "with --two-period, also the best two-period (P1, P2) fit and the evidence for it.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="photometry file(s) of one object")
    p.add_argument("--order", type=int, default=None, metavar="M",
                   help="Fourier order (default: 4 for dense data, 2 for sparse data)")
    p.add_argument("--two-period", action="store_true", help="also run the two-period (2-D Fourier) scan")
    p.add_argument("--two-period-order", type=int, default=2, metavar="M",
                   help="order of the two-period series (default: 2)")
    p.add_argument("--min-period-h", type=float, metavar="X", help="shortest trial period, hours")
    p.add_argument("--max-period-h", type=float, metavar="Y", help="longest trial period, hours")
    p.add_argument("--oversample", type=float, default=5.0, metavar="Q",
                   help="grid oversampling factor (default: 5)")
    p.add_argument("--no-sessions", action="store_true",
                   help="ignore the sessions: one zero-point per band (calibrated photometry)")
    p.add_argument("--phase-term", choices=["auto", "on", "off"], default="auto",
                   help="linear phase-angle term per zero-point group (default: auto, for groups "
                        "spanning at least 2 deg of phase angle)")
    p.add_argument("--peaks", type=int, default=10, metavar="N", help="number of ranked periods (default: 10)")
    p.add_argument("--plot", metavar="OUT.png", help="write a figure of the scan")
    p.add_argument("--out", metavar="SCAN.ecsv", help="write the scan (period, frequency, chi2) as a table; the "
                                                     "format follows the ending (.ecsv, .csv, .fits, .vot, .parquet)")
    add_input_options(p)
    add_output_options(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from tumble.periodogram import fourier_scan, two_period_scan
    from tumble.photometry import read_lightcurve

    lc = read_lightcurve(args.files, options=read_options(args))
    phase_term = {"auto": None, "on": True, "off": False}[args.phase_term]
    sessions = not args.no_sessions
    progress = not args.quiet
    scan = fourier_scan(lc, order=args.order, min_period_h=args.min_period_h, max_period_h=args.max_period_h,
                        sessions=sessions, phase_term=phase_term, oversample=args.oversample,
                        max_peaks=args.peaks, progress=progress)
    two = None
    if args.two_period:
        two = two_period_scan(lc, order=args.two_period_order, min_period_h=args.min_period_h,
                              max_period_h=args.max_period_h, sessions=sessions, phase_term=phase_term,
                              oversample=args.oversample, progress=progress)
    if args.out:
        _write_table(scan, two, args.out)
    if args.plot:
        _plot(scan, two, args.plot)
    if args.json:
        out = scan.to_dict()
        if two is not None:
            out.update({
                "p1_h": two.p1_h, "p1_h_err": two.p1_h_err, "p2_h": two.p2_h, "p2_h_err": two.p2_h_err,
                "delta_bic": two.delta_bic, "f_test_p_value": two.f_test_p_value,
                "two_period": two.to_dict(),
            })
        print_json(out)
        return 0
    _print_table(scan, two, args)
    return 0


def _fmt_period(p, err):
    return f"{p:.6g} +- {err:.2g} h"


def _print_table(scan, two, args) -> None:
    from tumble.display import format_fap

    out = sys.stdout
    print(f"object            {scan.object_id}", file=out)
    print(f"points            {scan.n_points}; {len(scan.nuisance_names)} zero-point/phase terms "
          f"({'per session' if scan.sessions else 'per band'})"
          + (f"; phase-angle term for {', '.join(scan.phase_terms)}" if scan.phase_terms else ""), file=out)
    print(f"grid              {scan.frequency_per_d.size} trial periods, {scan.min_period_h:.4g} to "
          f"{scan.max_period_h:.4g} h, Fourier order {scan.order}", file=out)
    print(f"dominant period   {_fmt_period(scan.best_period_h, scan.best_period_h_err)}"
          f"  (harmonic {scan.dominant_harmonic} of the best fit at {scan.fit_period_h:.6g} h)", file=out)
    print(f"rotation period   {_fmt_period(scan.rotation_period_h, scan.rotation_period_h_err)}", file=out)
    print(f"  rule            {scan.rotation_rule}", file=out)
    cands = ", ".join(f"{c:.6g} h" for c in scan.rotation_candidates_h)
    print(f"  candidates      {cands}", file=out)
    print(f"amplitude         {scan.amplitude_mag:.3f} mag peak to peak", file=out)
    verdict = "confident" if scan.confident else "NOT confident"
    print(f"significance      false-alarm probability {format_fap(scan.false_alarm_probability)} "
          f"({verdict}; threshold {scan.fap_threshold:g}); reduced chi2 {scan.reduced_chi2:.3f}", file=out)
    print("", file=out)
    print(f"{'rank':>4}  {'period (h)':>14}  {'error (h)':>10}  {'freq (1/d)':>12}  {'delta chi2':>11}  "
          f"{'FAP':>9}  alias", file=out)
    for i, p in enumerate(scan.peaks, 1):
        print(f"{i:>4}  {p.period_h:>14.7g}  {p.period_h_err:>10.2g}  {p.frequency_per_d:>12.6f}  "
              f"{p.delta_chi2:>11.2f}  {format_fap(p.false_alarm_probability):>9}  {p.alias}", file=out)
    if two is not None:
        print("", file=out)
        print(f"two-period fit    order {two.order} ({two.mode})", file=out)
        print(f"  P1              {_fmt_period(two.p1_h, two.p1_h_err)}", file=out)
        print(f"  P2              {_fmt_period(two.p2_h, two.p2_h_err)}", file=out)
        print(f"  chi2 1-D / 2-D  {two.chi2_1d:.2f} ({two.n_params_1d} parameters) / {two.chi2_2d:.2f} "
              f"({two.n_params_2d} parameters)", file=out)
        print(f"  F-test          p = {two.f_test_p_value:.3g}", file=out)
        print(f"  delta BIC       {two.delta_bic:.2f} (BIC 1-D - BIC 2-D; positive favours two periods)",
              file=out)
    if args.out:
        print(f"wrote {args.out}", file=out)
    if args.plot:
        print(f"wrote {args.plot}", file=out)


#: ``--out`` formats by file ending (astropy writers); the metadata of a flat format goes in as JSON text.
SCAN_FORMATS = {".ecsv": "ascii.ecsv", ".csv": "ascii.csv", ".fits": "fits", ".fit": "fits", ".vot": "votable",
                ".xml": "votable", ".parquet": "parquet"}


def _write_table(scan, two, path) -> None:
    import json
    import warnings
    from pathlib import Path

    from tumble._io import atomic_path
    from tumble.exceptions import TumbleError
    from tumble.schema import json_safe

    suffix = Path(path).suffix.lower()
    fmt = SCAN_FORMATS.get(suffix)
    if fmt is None:
        raise TumbleError(f"{path}: --out must end in one of {', '.join(sorted(SCAN_FORMATS))} (the table format)")
    if fmt == "parquet":
        from tumble._extras import require

        require("parquet", f"{path}: writing Parquet")
    tab = scan.to_table()
    if two is not None:
        tab.meta["two_period"] = two.to_dict()
    if fmt != "ascii.ecsv":  # flat formats keep scalar metadata only: the rest as JSON text
        tab.meta = {k: (v if isinstance(v, (str, int, float)) else json.dumps(json_safe(v))) for k, v in tab.meta.items()}
    with atomic_path(path) as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")  # FITS: long keys become HIERARCH cards
        tab.write(str(tmp), format=fmt, overwrite=True)


def _plot(scan, two, path) -> None:
    from tumble.plots import plot_scan_summary

    plot_scan_summary(scan, two, path=path)
