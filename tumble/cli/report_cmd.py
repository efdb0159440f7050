"""``tumble report RESULTS_OR_DIR --out DIR``: a static HTML report from saved results."""

from __future__ import annotations

import argparse

from tumble.cli._common import add_input_options, read_options


def add_parser(sub) -> None:
    p = sub.add_parser(
        "report",
        help="static HTML report (no server, no network) from a survey's results or a classify folder",
        description="Make a static HTML report. RESULTS_OR_DIR is a results catalogue written by tumble survey "
                    "(survey index with a sortable, filterable table and a page per object) or an output folder of "
                    "tumble classify (one object's page). Give the photometry with --data to draw the light-curve "
                    "figures; the report re-reads it but does not classify again.",
    )
    p.add_argument("source", metavar="RESULTS_OR_DIR", help="results catalogue, or a tumble classify --out folder")
    p.add_argument("--out", required=True, metavar="DIR", help="report folder (index.html is its first page)")
    p.add_argument("--objects", metavar="DIR",
                   help="the survey's --keep-objects folder (per-object verdicts: intervals, warnings, route)")
    p.add_argument("--data", nargs="+", metavar="INPUT",
                   help="photometry for the figures: the survey's inputs, or the object's files for a classify folder")
    p.add_argument("--sizes", metavar="TABLE",
                   help="table with object and diameter_km, or h_mag (and albedo), for the period-diameter diagram")
    p.add_argument("--no-figures", action="store_true", help="tables and text only")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_input_options(p)
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    from tumble.report import write_report

    index = write_report(args.source, args.out, objects_dir=args.objects, data=args.data,
                         read_options=read_options(args), sizes=args.sizes, figures=not args.no_figures,
                         progress=not args.quiet)
    print(f"report written: {index} (open it in a browser; no server needed)")
    return 0
