"""``tumble survey INPUT...``: classify every object of a survey, in parallel, resumably."""

from __future__ import annotations

import argparse
import math
import sys

from tumble.cli._common import add_input_options, print_json, printable, read_options

#: Exit code when the run finished but every object is an error row (documented in docs/commands.md).
EXIT_ALL_FAILED = 3


def add_parser(sub) -> None:
    p = sub.add_parser(
        "survey",
        help="classify many objects (files, directories, globs or one table with an object column)",
        description="Classify every object of a survey and write one results row per object. Inputs are "
                    "directories, glob patterns or files; files are grouped by object (the name before '__', "
                    "else the file name without extension), and a table with an object column holds many "
                    "objects. A bad object becomes an error row and the run goes on; every finished object is "
                    "journalled beside the output, so a killed run is finished with --resume.",
    )
    p.add_argument("inputs", nargs="*", metavar="INPUT", help="directories, glob patterns or photometry files")
    p.add_argument("--out", metavar="RESULTS",
                   help="results catalogue; format from the extension (.ecsv default, .fits, .parquet, .csv); "
                        "with --inject the completeness table (.ecsv, default completeness.ecsv)")
    p.add_argument("--screen", action="store_true",
                   help="fast triage from the 1-D and 2-D period scans only (no physical fit)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (default: the number of cores)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on an existing dask.distributed scheduler")
    p.add_argument("--dask-local", type=int, metavar="N",
                   help="start a Dask LocalCluster with N workers (needs the 'cluster' extra)")
    p.add_argument("--resume", action="store_true", help="finish an interrupted run from its journal")
    p.add_argument("--force-resume", action="store_true",
                   help="with --resume: go on even if the journal was written with other settings (the results "
                        "metadata then records both configurations)")
    p.add_argument("--catalog", metavar="PATH",
                   help="a partitioned Parquet light-curve catalogue (directory) instead of INPUT; --out is then a "
                        "directory of Parquet result partitions (needs the 'catalog' extra)")
    p.add_argument("--object-timeout", type=float, default=900.0, metavar="S",
                   help="per-object time limit in seconds; past it the object becomes an error row (default: 900)")
    p.add_argument("--keep-objects", metavar="DIR", help="also write each object's verdict JSON into DIR/OBJECT/")
    p.add_argument("--sizes", metavar="TABLE",
                   help="table with object and diameter_km, or h_mag (and albedo), for damping times")
    p.add_argument("--seed", type=int, default=0, help="base random seed (each object's seed follows from it)")
    p.add_argument("--prior-npa", type=float, default=0.1, metavar="P", help="prior probability of NPA (default 0.1)")
    p.add_argument("--max-steps", type=int, default=1500, metavar="S", help="sampler steps of the full route")
    p.add_argument("--walkers", type=int, metavar="W", help="sampler walkers of the full route")
    p.add_argument("--no-binary", dest="binary", action="store_false",
                   help="full route: do not weigh the binary alternative before an NPA verdict (weighed by default)")
    p.add_argument("--shortlist", type=int, default=15, metavar="N", help="NPA candidates to print (default 15)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.add_argument("--report", metavar="DIR",
                   help="when the results are complete, also write the HTML report of the survey into DIR")
    g = p.add_argument_group("completeness (injection-recovery on the survey's own cadences)")
    g.add_argument("--inject", type=int, metavar="N",
                   help="inject N simulated PA and NPA rotators onto the cadences of --plan-from and write the "
                        "completeness table, the per-injection table and a plot")
    g.add_argument("--plan-from", nargs="+", metavar="INPUT",
                   help="survey objects whose times, sessions, errors and geometry are the injection cadences")
    g.add_argument("--period-bins", metavar="EDGES", default="2,4,8,16,32,64",
                   help="period bin edges in hours; periods drawn log-uniform over the range (default 2,4,8,16,32,64)")
    g.add_argument("--amplitude-bins", metavar="EDGES", default="0.05,0.15,0.3,0.5,0.8",
                   help="amplitude bin edges in mag (A = 2.5 log10(a/b), drawn uniform; default 0.05,0.15,0.3,0.5,0.8)")
    g.add_argument("--npa-fraction", type=float, default=0.5, metavar="F",
                   help="fraction of injections that are NPA (default 0.5; half of them LAM)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_input_options(p)
    p.set_defaults(run=run)


def _read_sizes(path):
    import numpy as np
    from astropy.table import Table

    from tumble.survey import SurveyError

    try:
        table = Table.read(path) if not str(path).endswith((".csv", ".txt")) else Table.read(path, format="ascii")
    except FileNotFoundError:
        raise SurveyError(f"{path}: no such file") from None
    except Exception as exc:
        raise SurveyError(f"{path}: unreadable size table ({str(exc).splitlines()[0][:150]})") from None
    cols = {c.lower(): c for c in table.colnames}
    if "object" not in cols or not ({"diameter_km", "h_mag"} & set(cols)):
        raise SurveyError(f"{path}: a size table needs columns object and diameter_km or h_mag (albedo optional)")

    def get(row, name):
        if name not in cols:
            return None
        v = row[cols[name]]
        try:
            v = float(v)
        except (TypeError, ValueError):
            return None
        return v if np.isfinite(v) else None

    out = {}
    for k, row in enumerate(table):
        d, h, a = get(row, "diameter_km"), get(row, "h_mag"), get(row, "albedo")
        name = str(row[cols["object"]]).strip()
        bad = ("diameter_km", d) if d is not None and not d > 0 else (
            ("albedo", a) if a is not None and not 0 < a <= 1.5 else None)
        if bad is not None:  # checked here, before any object is computed
            raise SurveyError(f"{path}: row {k + 1} ({printable(name)}), column '{bad[0]}': {bad[1]:g} is not a "
                              f"valid {'diameter' if bad[0] == 'diameter_km' else 'geometric albedo'}")
        out[name] = (d, None if d is not None else h, None if d is not None else a)
    return out


def _edges(text, option):
    from tumble.survey import SurveyError

    try:
        return tuple(float(v) for v in str(text).split(",") if v.strip())
    except ValueError:
        raise SurveyError(f"{option}: give comma-separated numbers, not '{text}'") from None


def run(args: argparse.Namespace) -> int:
    from tumble.survey import SurveyConfig, SurveyError, run_survey

    if args.inject is None and args.plan_from:
        raise SurveyError("--plan-from needs --inject N")
    if args.inject is not None:
        if not args.plan_from:
            raise SurveyError("--inject needs --plan-from INPUT (the survey objects whose cadences to use)")
        if args.inputs:
            raise SurveyError("with --inject give the cadence objects with --plan-from, not as INPUT")
        if args.report:
            raise SurveyError("--report writes the report of a survey run; it does not go with --inject")
    elif not args.inputs and not args.catalog:
        raise SurveyError("give at least one INPUT (directory, glob pattern or file)")
    elif not args.out:
        raise SurveyError("--out RESULTS is required")
    if args.workers is not None and args.workers < 1:
        raise SurveyError(f"--workers must be at least 1, got {args.workers}")
    if args.scheduler and args.dask_local:
        raise SurveyError("give --scheduler or --dask-local, not both")
    if args.force_resume and not args.resume:
        raise SurveyError("--force-resume goes with --resume")
    if args.out and not args.catalog and str(args.out).lower().endswith(".parquet"):
        from tumble._extras import require

        require("parquet", f"{args.out}: writing Parquet")  # before the run, not after it
    config = SurveyConfig(
        route="screen" if args.screen else "full", seed=args.seed, prior_npa=args.prior_npa,
        read_options=read_options(args), max_steps=args.max_steps, n_walkers=args.walkers,
        object_timeout_s=args.object_timeout, sizes=_read_sizes(args.sizes) if args.sizes else {},
        keep_objects_dir=args.keep_objects, binary=args.binary,
    )
    if args.inject is not None:
        return _run_inject(args, config)
    if args.catalog:
        return _run_catalog(args, config)
    summary = run_survey(args.inputs, args.out, config, workers=args.workers, scheduler=args.scheduler,
                         dask_local=args.dask_local, resume=args.resume, force_resume=args.force_resume,
                         progress=not args.quiet)
    if args.json:
        print_json(summary.to_dict())
    else:
        print_summary(summary, args.shortlist)
    if args.report:
        if not summary.results_path:
            raise SurveyError("--report: the results are not complete yet; finish the run with --resume first")
        index = _write_report(args, summary.results_path)
        if not args.json:
            print(f"report        {index}")
    if summary.all_failed:
        print(f"tumble survey: every one of the {summary.n_objects} objects failed (see the errors above and the "
              f"message column); exit status {EXIT_ALL_FAILED}", file=sys.stderr)
        return EXIT_ALL_FAILED
    return 0


def _run_catalog(args, config) -> int:
    """``--catalog PATH``: the catalogue route (tumble.catalog), one Dask task per partition."""
    from dataclasses import asdict

    from tumble.catalog import run_catalog
    from tumble.survey import SurveyError

    if args.inputs:
        raise SurveyError("give INPUT or --catalog PATH, not both")
    if args.dask_local or args.report:
        raise SurveyError("--catalog runs on --scheduler (threads, processes, sync or an address); "
                          "--dask-local and --report do not go with it")
    summary = run_catalog(args.catalog, args.out, config, scheduler=args.scheduler, workers=args.workers,
                          resume=args.resume, progress=not args.quiet)
    if args.json:
        print_json(asdict(summary))
        return 0
    status = ", ".join(f"{v} {k}" for k, v in sorted(summary.status_counts.items())) or "none"
    print(f"partitions    {summary.n_processed} processed, {summary.n_done_before} done before, "
          f"{summary.n_partitions} in the catalogue")
    print(f"objects       {summary.n_objects} processed ({status})")
    print(f"wall time     {summary.wall_s:.1f} s")
    print(f"results       {summary.out} (Parquet partitions; scientific estimates for research use)")
    return 0


def _write_report(args, results_path):
    """The survey's HTML report through tumble.report (imported here, at call time)."""
    import inspect

    from tumble.survey import SurveyError

    try:
        from tumble.report import write_survey_report
    except ImportError as exc:
        raise SurveyError(f"--report: the report writer is not available ({exc})") from None
    optional = {"data": list(args.inputs), "read_options": read_options(args), "sizes": args.sizes,
                "progress": not args.quiet}
    try:
        accepted = inspect.signature(write_survey_report).parameters
    except (TypeError, ValueError):
        accepted = {}
    kwargs = {k: v for k, v in optional.items() if k in accepted and v is not None}
    return write_survey_report(results_path, args.report, objects_dir=args.keep_objects, **kwargs)


def _run_inject(args, config) -> int:
    from tumble.completeness import InjectionDistributions, run_completeness

    dist = InjectionDistributions(period_bins_h=_edges(args.period_bins, "--period-bins"),
                                  amplitude_bins_mag=_edges(args.amplitude_bins, "--amplitude-bins"),
                                  npa_fraction=args.npa_fraction)
    res = run_completeness(args.plan_from, args.inject, args.out or "completeness.ecsv", config, dist=dist,
                           workers=args.workers, scheduler=args.scheduler, dask_local=args.dask_local,
                           resume=args.resume, progress=not args.quiet)
    if args.json:
        print_json({"table": res.table_path, "injections": res.injections_path, "plot": res.plot_path,
                    "n_plan_objects": res.n_plans, "plan_problems": res.plan_problems,
                    "rows": [dict(zip(res.table.colnames, r)) for r in res.table.as_array().tolist()]})
    else:
        print_completeness(res)
    return 0


def print_completeness(res, file=None) -> None:
    """Short summary of a completeness run: overall rates, then the NPA detection probability per bin."""
    file = file or sys.stdout
    p = lambda *a: print(*a, file=file)  # noqa: E731
    t = res.table
    s = res.survey
    p(f"injections    {int(sum(t['n_injected'][t['scope'] == 'all']))} on the cadences of {res.n_plans} objects"
      + (f" ({len(res.plan_problems)} unusable: {res.plan_problems[0]})" if res.plan_problems else ""))
    p("status        " + ", ".join(f"{k} {v}" for k, v in sorted(s.status_counts.items())))
    for r in t[t["scope"] == "all"]:
        what = "NPA detected " if r["truth"] == "NPA" else "false NPA    "
        p(f"{what} {_f(r['frac_npa'], 3)} [{_f(r['frac_npa_lo'], 3)}, {_f(r['frac_npa_hi'], 3)}] (95%, "
          f"{r['n_npa']}/{r['n_classified']}; {r['n_undecided']} undecided, {r['n_error']} errors) of injected "
          f"{r['truth']}")
    bins = t[(t["scope"] == "bin") & (t["truth"] == "NPA")]
    pe = sorted(set(float(v) for v in bins["period_h_lo"]) | set(float(v) for v in bins["period_h_hi"]))
    ae = sorted(set(float(v) for v in bins["amplitude_mag_lo"]) | set(float(v) for v in bins["amplitude_mag_hi"]))
    p("\nNPA detection probability (NPA/classified) by period [h] (columns) and amplitude [mag] (rows)")
    head = f"{'A (mag)':>11s} " + " ".join(f"{f'{lo:g}-{hi:g}':>12s}" for lo, hi in zip(pe[:-1], pe[1:]))
    p(head)
    for alo, ahi in zip(ae[:-1], ae[1:]):
        cells = []
        for plo in pe[:-1]:
            r = bins[(bins["period_h_lo"] == plo) & (bins["amplitude_mag_lo"] == alo)][0]
            cells.append(f"{_f(r['frac_npa'], 2)} ({r['n_npa']}/{r['n_classified']})" if r["n_classified"] else "-")
        p(f"{f'{alo:g}-{ahi:g}':>11s} " + " ".join(f"{c:>12s}" for c in cells))
    p(f"\ntable         {res.table_path}\ninjections    {res.injections_path}"
      + (f"\nplot          {res.plot_path}" if res.plot_path else ""))
    p("Completeness is a scientific estimate for these cadences and the stated injected distributions, "
      "not a population estimate.")


def _f(x, nd=3):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return "-"
    return "-" if not math.isfinite(x) else f"{x:.{nd}g}"


def print_summary(s, n_short: int = 15, file=None) -> None:
    """The end-of-run summary: counts, errors, times and the NPA shortlist."""
    from tumble.display import format_probability

    file = file or sys.stdout
    p = lambda *a: print(*a, file=file)  # noqa: E731
    p(f"objects       {s.n_objects} ({s.n_done_before} from an earlier run, {s.n_processed} processed now)")
    p("status        " + ", ".join(f"{k} {v}" for k, v in sorted(s.status_counts.items())))
    p("rotation      " + (", ".join(f"{k} {v}" for k, v in sorted(s.rotation_counts.items())) or "-"))
    p("grades        " + (", ".join(f"{k} {v}" for k, v in sorted(s.grade_counts.items())) or "-"))
    if s.error_kinds:
        p("errors        " + "; ".join(f"{printable(k)}: {v}"
                                       for k, v in sorted(s.error_kinds.items(), key=lambda kv: -kv[1])))
    if s.n_malformed_journal_lines:
        p(f"journal       {s.n_malformed_journal_lines} malformed line(s) skipped; their objects were processed again")
    p(f"time          {s.wall_s:.1f} s wall for this run; {_f(s.cpu_per_object_s)} s per object on average")
    if s.results_path:
        p(f"results       {s.results_path}")
    else:
        p(f"results       not written yet (run stopped early); finish with --resume (journal {s.journal_path})")
    if s.shortlist:
        p(f"\nNPA candidates ({len(s.shortlist)}; highest p_npa first)")
        p(f"{'object':14s} {'p_npa':>7s} {'grade':>9s} {'mode':>7s} {'P_psi (h)':>10s} {'P_phi (h)':>10s} "
          f"{'P1 (h)':>9s} {'P2 (h)':>9s}")
        for r in s.shortlist[:n_short]:
            p(f"{printable(r['object']):14s} {format_probability(r['p_npa']):>7s} {str(r['grade']):>9s} {str(r['mode']):>7s} "
              f"{_f(r['p_psi_h'], 5):>10s} {_f(r['p_phi_h'], 5):>10s} {_f(r['p1_h'], 5):>9s} {_f(r['p2_h'], 5):>9s}")
    p("Verdicts are scientific estimates for research use; damping times rest on an assumed rigidity.")
