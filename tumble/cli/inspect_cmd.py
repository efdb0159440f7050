"""``tumble inspect FILE...``: read photometry and summarise it (optionally write it normalised)."""

from __future__ import annotations

import argparse

from tumble.cli._common import add_input_options, add_output_options, print_json, printable, read_options


def add_parser(sub) -> None:
    p = sub.add_parser(
        "inspect",
        help="read photometry files and summarise them",
        description="Read one object's photometry (several files merge into one light curve; a table "
                    "with an object column gives one summary per object) and print what was read, "
                    "what was dropped and which reductions were applied.",
    )
    p.add_argument("files", nargs="+", metavar="FILE", help="photometry files (CSV, TSV, text, ECSV, FITS, VOTable, ALCDEF, Parquet; .gz)")
    p.add_argument("--write", metavar="OUT", help="write the normalised light curve (format from the extension)")
    add_input_options(p)
    add_output_options(p)
    p.set_defaults(run=run)


def _has_object_column(path, opts) -> bool:
    from tumble.photometry import _match_columns, read_table

    table = read_table(path, opts.encoding)
    return "object" in _match_columns(table, opts)


def run(args: argparse.Namespace) -> int:
    from tumble.exceptions import PhotometryError
    from tumble.photometry import iter_survey, read_lightcurve, write_lightcurve

    opts = read_options(args)
    if args.write:
        from pathlib import Path

        target = Path(args.write).resolve()
        if any(Path(f).resolve() == target for f in args.files):
            raise PhotometryError(f"{args.write}: --write would overwrite its own input; choose another name")
    survey_like = len(args.files) == 1 and opts.object_id is None and _has_object_column(args.files[0], opts)
    if survey_like:
        items = list(iter_survey(args.files[0], options=opts))
        errors = [(name, e) for name, e in items if isinstance(e, PhotometryError)]
        lcs = [lc for _, lc in items if not isinstance(lc, PhotometryError)]
        if not lcs and errors:
            raise errors[0][1]
    else:
        lcs = [read_lightcurve(args.files, options=opts)]
        errors = []
    if args.write:
        if len(lcs) != 1:
            raise PhotometryError(f"{args.write}: --write takes one object, the input holds {len(lcs)}")
        write_lightcurve(lcs[0], args.write)
    summaries = [lc.summary() for lc in lcs]
    # objects whose distances are unknown: no r, Delta in the file and none from --elements/--orbits
    without = [s["object"] for s in summaries if s["r_au_range"] is None or s["delta_au_range"] is None]
    if args.json:
        out = summaries[0] if len(summaries) == 1 and not errors else {
            "objects": summaries, "errors": [{"object": n, "message": str(e)} for n, e in errors],
            "without_geometry": without}
        print_json(out)
        return 0
    for s in summaries:
        _print_summary(s)
    for name, exc in errors:
        print(f"object {printable(name)}: error: {printable(exc)}")
    if without and (len(summaries) > 1 or opts.orbits is not None):
        shown = ", ".join(without[:20]) + (f", ... ({len(without) - 20} more)" if len(without) > 20 else "")
        where = f"not in {opts.orbits.source}" if opts.orbits is not None else "no r, delta columns; see --orbits"
        print(f"without geometry: {len(without)} of {len(summaries)} objects ({where}): {shown}")
    if args.write:
        print(f"wrote {args.write}")
    return 0


def _fmt_range(r, unit, fmt="{:.3f}"):
    if r is None:
        return "-"
    return f"{fmt.format(r[0])} .. {fmt.format(r[1])} {unit}"


def _print_summary(s: dict) -> None:
    dropped = ", ".join(f"{v} {k}" for k, v in s["dropped"].items()) or "none"
    bands = ", ".join(f"{b} ({n})" for b, n in s["bands"].items())
    print(f"object        {printable(s['object'])}")
    print(f"source        {printable(', '.join(s['sources']))}")
    print(f"points        {s['n_points']} kept of {s['n_read']} read; dropped or merged: {dropped}")
    print(f"sessions      {s['n_sessions']} with own zero-point, {s['n_sparse_points']} sparse points")
    print(f"span          {s['span_d']:.3f} d  (JD {s['t_first_jd_utc']:.5f} .. {s['t_last_jd_utc']:.5f} UTC)")
    print(f"bands         {bands}")
    print(f"magnitude     {_fmt_range(s['mag_range'], 'mag')}  (median error {s['err_median']:.3f} mag)")
    print(f"r             {_fmt_range(s['r_au_range'], 'au')}")
    print(f"delta         {_fmt_range(s['delta_au_range'], 'au')}")
    print(f"phase angle   {_fmt_range(s['phase_deg_range'], 'deg', '{:.2f}')}")
    print(f"time          {s['time_format']} in {s['time_scale'].upper()}; light time {s['light_time']}")
    print(f"reductions    {'; '.join(s['reductions']) or 'none'}")
    print()
