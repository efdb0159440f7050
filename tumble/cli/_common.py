"""Options shared by the sub-commands that read photometry (no science here)."""

from __future__ import annotations

import argparse
import sys

__all__ = ["add_input_options", "read_options", "add_output_options", "print_json", "parse_elements",
           "parse_observatory", "parse_orbits", "OPTION_CHECKS", "check_options", "printable", "output_folder"]


# ---------------------------------------------------------------------------
# Option checks: one table for every sub-command (the first failing check is a one-line error, exit 2).
# Each entry: argparse destination -> (test, what the value must be). Options a command does not have
# are skipped; None (option not given) always passes.
def _finite(x) -> bool:
    import math

    return math.isfinite(x)


OPTION_CHECKS = {
    "seed": (lambda x: x >= 0, "a non-negative integer"),
    "workers": (lambda x: x >= 1, "at least 1"),
    "dask_local": (lambda x: x >= 1, "at least 1"),
    "prior_npa": (lambda x: 0 < x < 1, "strictly between 0 and 1"),
    "object_timeout": (lambda x: _finite(x) and x > 0, "a positive number of seconds"),
    "max_steps": (lambda x: x >= 0, "0 or more"),
    "walkers": (lambda x: x >= 1, "at least 1"),
    "shortlist": (lambda x: x >= 0, "0 or more"),
    "oversample": (lambda x: _finite(x) and x >= 1, "a finite number of at least 1 (frequency grid oversampling)"),
    "session_gap_h": (lambda x: _finite(x) and x > 0, "a positive number of hours"),
    "min_points": (lambda x: x >= 1, "at least 1"),
    "flux_zero_point": (_finite, "a finite magnitude"),
    # H of real minor bodies lies within about -1 .. 35 mag (common practice); 1e308 gave tau = nan
    "h_mag": (lambda x: _finite(x) and -5 <= x <= 40, "a finite absolute magnitude between -5 and 40"),
    "min_period_h": (lambda x: _finite(x) and x > 0, "a positive, finite period in hours"),
    "max_period_h": (lambda x: _finite(x) and x > 0, "a positive, finite period in hours"),
}


def check_options(args: argparse.Namespace) -> None:
    """Check the parsed options against :data:`OPTION_CHECKS` before any work.

    Raises
    ------
    tumble.exceptions.TumbleError
        ``--option: must be ..., got VALUE`` for the first value out of range.
    """
    from tumble.exceptions import TumbleError

    for dest, (test, what) in OPTION_CHECKS.items():
        value = getattr(args, dest, None)
        if value is None or isinstance(value, (str, list, bool)):
            continue
        try:
            ok = bool(test(value))
        except (TypeError, ValueError):
            ok = False
        if not ok:
            raise TumbleError(f"--{dest.replace('_', '-')}: must be {what}, got {value}")


def output_folder(given: str | None, object_id: str, suffix: str):
    """The output folder of a one-object command: ``--out DIR`` as given, else ``<safe name><suffix>``
    in the working folder (the object name comes from data: it never becomes a path as it is). A file
    in the way is bad input (TumbleError), found before any work."""
    from pathlib import Path

    from tumble._io import safe_component
    from tumble.exceptions import TumbleError

    folder = Path(given) if given else Path(f"{safe_component(object_id)}{suffix}")
    if folder.exists() and not folder.is_dir():
        raise TumbleError(f"{folder}: exists and is not a folder; --out names an output folder")
    return folder


def printable(text) -> str:
    """One line of text safe for a terminal: control characters (escape sequences from data) shown
    as ``\\xNN`` escapes, whitespace runs collapsed."""
    out = []
    for ch in " ".join(str(text).split()):
        code = ord(ch)
        out.append(ch if code >= 32 and code != 127 and not 0x80 <= code < 0xA0 else f"\\x{code:02x}")
    return "".join(out)


def add_input_options(parser: argparse.ArgumentParser) -> None:
    """The reading options common to every command that takes photometry files."""
    g = parser.add_argument_group("input")
    g.add_argument("--columns", metavar="MAP",
                   help="map the file's columns to ours, e.g. time=JD,mag=V,err=sigma,session=night")
    g.add_argument("--time-format", choices=["jd", "mjd", "iso"],
                   help="format of the time column (default: guessed from its name and values)")
    g.add_argument("--time-scale", choices=["utc", "tt", "tdb"], default="utc",
                   help="time scale of the time column (default: utc)")
    g.add_argument("--light-time-corrected", action="store_true",
                   help="times are already light-time corrected (emission times)")
    g.add_argument("--session-gap-h", type=float, default=6.0, metavar="H",
                   help="without a session column, start a new session after a gap of H hours (default: 6)")
    g.add_argument("--min-points", type=int, default=10, metavar="N",
                   help="fewer usable points than N is an error (default: 10)")
    g.add_argument("--default-err", type=float, metavar="MAG",
                   help="error (mag) for points whose error is missing or non-positive (default: such points are an error)")
    g.add_argument("--duplicates", choices=["merge", "reject", "error"], default="merge",
                   help="points at the same time in the same band: weighted mean, keep the first, or fail (default: merge)")
    g.add_argument("--band", metavar="NAME", help="band to assume when the file has no band column")
    g.add_argument("--object", dest="object_id", metavar="NAME",
                   help="object name (default: the object column, else the file name)")
    g.add_argument("--flux-zero-point", type=float, default=0.0, metavar="MAG",
                   help="zero point for flux columns: mag = ZP - 2.5 log10(flux) (default: 0)")
    g.add_argument("--elements", metavar="A,E,I,NODE,PERI,M,EPOCH",
                   help="osculating heliocentric ecliptic J2000 elements (au, deg, JD TDB) to compute the geometry")
    g.add_argument("--observatory", metavar="LON,LAT,HEIGHT_M",
                   help="ground station (deg east, deg, m) for topocentric geometry with --elements")
    g.add_argument("--orbits", metavar="FILE",
                   help="orbital elements of many objects (MPC export format or a table), matched by object name, "
                        "to compute each object's geometry")
    g.add_argument("--encoding", metavar="NAME",
                   help="text encoding of text files, e.g. latin-1 (default: UTF-8, with or without BOM)")


def _floats(text: str, n: int, what: str) -> list[float]:
    from tumble.exceptions import GeometryError

    parts = [p.strip() for p in text.split(",")]
    if len(parts) != n:
        raise GeometryError(f"--{what}: expected {n} comma-separated numbers, got {len(parts)}")
    try:
        return [float(p) for p in parts]
    except ValueError:
        raise GeometryError(f"--{what}: '{text}' holds something that is not a number") from None


def parse_elements(text: str | None):
    """``--elements a,e,i,node,peri,M,epoch`` -> OrbitalElements (or None)."""
    if not text:
        return None
    from tumble.geometry import OrbitalElements

    a, e, i, node, peri, m, epoch = _floats(text, 7, "elements")
    return OrbitalElements(a, e, i, node, peri, m, epoch)


def parse_observatory(text: str | None):
    """``--observatory lon,lat,height_m`` -> Observatory (or None)."""
    if not text:
        return None
    from tumble.geometry import Observatory

    lon, lat, h = _floats(text, 3, "observatory")
    return Observatory(lon, lat, h)


def parse_orbits(path: str | None, elements: str | None):
    """``--orbits FILE`` -> OrbitCatalogue (or None); giving ``--elements`` too is an error."""
    if not path:
        return None
    from tumble.exceptions import GeometryError
    from tumble.orbits import read_orbits

    if elements:
        raise GeometryError("--orbits and --elements: give one (--elements applies one orbit to every object)")
    return read_orbits(path)


def read_options(args: argparse.Namespace):
    """A ReadOptions from the parsed input options."""
    from tumble.photometry import ReadOptions

    return ReadOptions(
        columns=args.columns or {},
        time_format=args.time_format,
        time_scale=args.time_scale,
        light_time_corrected=args.light_time_corrected,
        session_gap_h=args.session_gap_h,
        min_points=args.min_points,
        default_err=args.default_err,
        duplicates=args.duplicates,
        band=args.band,
        object_id=args.object_id,
        flux_zero_point=args.flux_zero_point,
        elements=parse_elements(args.elements),
        observatory=parse_observatory(args.observatory),
        encoding=args.encoding,
        orbits=parse_orbits(args.orbits, args.elements),
    )


def add_output_options(parser: argparse.ArgumentParser) -> None:
    """``--json`` and ``--quiet``."""
    parser.add_argument("--json", action="store_true", help="print the result as JSON on stdout")
    parser.add_argument("--quiet", action="store_true", help="no progress bars")


def print_json(obj) -> None:
    """Print ``obj`` as indented strict JSON (numpy converted; NaN and infinities as null)."""
    from tumble.schema import dumps_strict

    sys.stdout.write(dumps_strict(obj, indent=2))
    sys.stdout.write("\n")
