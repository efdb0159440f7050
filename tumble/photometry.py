"""Photometry: the ``LightCurve`` contract and the readers that build it.

A ``LightCurve`` is built only through validating constructors
(:meth:`LightCurve.from_arrays`, :func:`read_lightcurve`, :func:`read_survey`),
so every downstream module can rely on sorted, finite, positive-error data with
integer sessions and the time scales sorted out.

Accepted inputs (see ``docs/input-formats.md``): CSV, TSV, semicolon- or
whitespace-separated text with one header line (``#`` lines skipped), ECSV,
FITS binary tables and VOTable, each optionally gzip-compressed, UTF-8 with or
without a byte-order mark.

Errors are :class:`~tumble.exceptions.PhotometryError` with a one-line message
naming the file, the row or column and the problem.
"""

from __future__ import annotations

import contextlib
import csv
import gzip
import hashlib
import io
import os
import re
import warnings
import zlib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Iterator, Mapping, Sequence

import numpy as np

from tumble import geometry
from tumble._io import atomic_path, is_gzip_name, strip_compression
from tumble.exceptions import PhotometryError
from tumble.timeformats import implausible_time

__all__ = [
    "LightCurve",
    "is_sparse_sessions",
    "SPARSE_FRACTION",
    "ReadOptions",
    "CANONICAL_COLUMNS",
    "COLUMN_ALIASES",
    "parse_column_map",
    "read_table",
    "read_lightcurve",
    "read_survey",
    "iter_survey",
    "write_lightcurve",
    "lightcurve_table",
    "FORMATS",
]

#: Canonical column names and the (case-insensitive) aliases recognised for each.
COLUMN_ALIASES: dict[str, tuple[str, ...]] = {
    "time": ("time", "jd", "mjd", "date", "t", "epoch", "jd_utc", "mjd_utc"),
    "mag": ("mag", "magnitude", "m"),
    "err": ("err", "mag_err", "magerr", "sigma", "e_mag", "emag", "mag_error", "error", "sigma_mag"),
    "flux": ("flux",),
    "flux_err": ("flux_err", "fluxerr", "e_flux", "flux_error", "sigma_flux"),
    "session": ("session", "night", "session_id"),
    "band": ("band", "filter", "passband", "filt"),
    "r_au": ("r_au", "r", "rh", "r_helio", "helio_dist"),
    "delta_au": ("delta_au", "delta", "geo_dist", "obs_dist"),
    "phase_deg": ("phase_deg", "phase", "alpha", "phase_angle"),
    "sun_x": ("sun_x",),
    "sun_y": ("sun_y",),
    "sun_z": ("sun_z",),
    "obs_x": ("obs_x",),
    "obs_y": ("obs_y",),
    "obs_z": ("obs_z",),
    "object": ("object", "object_id", "designation", "name", "target"),
}
CANONICAL_COLUMNS = tuple(COLUMN_ALIASES)

#: Output/input formats by name; the reader also sniffs the content.
FORMATS = ("csv", "tsv", "txt", "ecsv", "fits", "votable", "alcdef")
_EXT_FORMAT = {
    ".csv": "csv",
    ".tsv": "tsv",
    ".tab": "tsv",
    ".txt": "txt",
    ".dat": "txt",
    ".ecsv": "ecsv",
    ".fits": "fits",
    ".fit": "fits",
    ".fts": "fits",
    ".vot": "votable",
    ".xml": "votable",
    ".votable": "votable",
    ".alcdef": "alcdef",
}

MAG_RANGE = (-5.0, 35.0)
#: Largest photometry file read, bytes, after decompression (64 MiB, about a million text rows); a gzip
#: bomb stops here. Override with the environment variable TUMBLE_MAX_INPUT_MB (docs/input-formats.md).
MAX_INPUT_BYTES = 64 * 1024 * 1024
#: Text lines allowed per byte of the cap: a Python string per line costs ~60 bytes whatever its length,
#: so a file of tiny lines is limited by its line count (2 million lines at the default cap).
BYTES_PER_LINE_LIMIT = 32
#: Table cells (rows x columns) allowed per byte of the cap: each cell is a Python string of ~140 bytes
#: (measured in benchmarks/bench_reader_memory.py), so 4 million cells, ~0.6 GB, at the default cap.
BYTES_PER_CELL_LIMIT = 16
#: Decompression works in blocks of this many bytes, so no more than the cap is ever expanded.
_INFLATE_BLOCK = 1 << 20
#: Magnitude errors outside this range (mag) are not measurement errors: a subnormal or 1e308 error breaks
#: the weights (1/err^2 over- or underflows) downstream; 1e-10 keeps weights <= 1e20, far from overflow in
#: sums, and still admits near-noiseless test data; real photometric errors lie far inside (common practice).
ERR_RANGE_MAG = (1e-10, 10.0)
#: Times (JD or MJD) beyond this magnitude are not dates astropy can convert (common practice: year < 10000).
MAX_ABS_TIME_D = 1e7
_DUP_TOL_D = 1e-8  # about 1 ms: times closer than this are the same instant
_LT_GIVEN = "input already light-time corrected"
_BULK_TIME_COLUMNS = ("__jd_utc", "__jd_tdb")
_VEC_COLUMNS = ("sun_x", "sun_y", "sun_z", "obs_x", "obs_y", "obs_z")


def parse_column_map(text: str | Mapping[str, str] | None) -> dict[str, str]:
    """Parse ``"time=JD,mag=V,err=sigma"`` into ``{"time": "JD", ...}`` (canonical -> file column).

    Raises
    ------
    PhotometryError
        On an unknown canonical name or a malformed item.
    """
    if text is None:
        return {}
    if isinstance(text, Mapping):
        items = list(text.items())
    else:
        items = []
        for part in str(text).split(","):
            part = part.strip()
            if not part:
                continue
            if "=" not in part:
                raise PhotometryError(f"--columns: '{part}' is not of the form ours=theirs (e.g. time=JD)")
            key, value = part.split("=", 1)
            items.append((key.strip(), value.strip()))
    out = {}
    for key, value in items:
        key_l = key.lower()
        if key_l in out:
            raise PhotometryError(f"--columns: '{key}' is given twice ({out[key_l]} and {value}); give it once")
        if key_l not in COLUMN_ALIASES:
            raise PhotometryError(
                f"--columns: unknown column name '{key}' (known: {', '.join(CANONICAL_COLUMNS)})"
            )
        if not value:
            raise PhotometryError(f"--columns: no file column given for '{key}'")
        out[key_l] = value
    seen: dict[str, str] = {}
    for key, value in out.items():
        if value.lower() in seen:
            raise PhotometryError(f"--columns: file column '{value}' is given as both {seen[value.lower()]} and {key}; "
                                  "one column cannot be two quantities")
        seen[value.lower()] = key
    return out


@dataclass(frozen=True)
class ReadOptions:
    """How to interpret a photometry file.

    Attributes
    ----------
    columns : dict
        Canonical name -> file column name, overriding the aliases.
    time_format : {'jd', 'mjd', 'iso'} or None
        Format of the time column; guessed from the column name and values when None.
    time_scale : {'utc', 'tt', 'tdb'}
        Time scale of the time column (default UTC, as observers record it).
    light_time_corrected : bool
        The times are already emission times; do not subtract Delta/c.
    session_gap_h : float
        Without a session column, a new session starts where the gap within one
        band exceeds this many hours.
    min_session_points : int
        Sessions with fewer points are marked sparse (session = -1): they share
        one zero-point per band instead of getting their own.
    min_points : int
        Fewer usable points than this is an error.
    default_err : float or None
        Magnitude error (mag) for points whose error is missing or non-positive;
        when None such points are an error.
    duplicates : {'merge', 'reject', 'error'}
        Points with the same time and band: weighted mean, keep the first only, or fail.
    flux_zero_point : float
        Zero point for flux columns: mag = zero_point - 2.5 log10(flux).
    band : str or None
        Band to assume when the file has no band column.
    object_id : str or None
        Object name; default the ``object`` column or the file name.
    elements : geometry.OrbitalElements or None
        Orbit from which to compute distances, phase angle and directions when
        the file lacks them.
    observatory : geometry.Observatory or None
        Ground station for topocentric geometry (with ``elements``).
    encoding : str or None
        Text encoding of text files (e.g. ``latin-1``); None reads UTF-8 with or without BOM.
    orbits : tumble.orbits.OrbitCatalogue or None
        Orbital elements of many objects, looked up by object name when ``elements``
        is not given (``--orbits FILE``).
    """

    columns: Mapping[str, str] = field(default_factory=dict)
    time_format: str | None = None
    time_scale: str = "utc"
    light_time_corrected: bool = False
    session_gap_h: float = 6.0
    min_session_points: int = 3
    min_points: int = 10
    default_err: float | None = None
    duplicates: str = "merge"
    flux_zero_point: float = 0.0
    band: str | None = None
    object_id: str | None = None
    elements: geometry.OrbitalElements | None = None
    observatory: geometry.Observatory | None = None
    encoding: str | None = None
    orbits: object | None = None

    def __post_init__(self):
        if self.time_format not in (None, "jd", "mjd", "iso"):
            raise PhotometryError(f"time format must be jd, mjd or iso, not '{self.time_format}'")
        if self.time_scale not in ("utc", "tt", "tdb"):
            raise PhotometryError(f"time scale must be utc, tt or tdb, not '{self.time_scale}'")
        if self.duplicates not in ("merge", "reject", "error"):
            raise PhotometryError(f"duplicates must be merge, reject or error, not '{self.duplicates}'")
        if not self.session_gap_h > 0:
            raise PhotometryError(f"session gap must be positive, got {self.session_gap_h} h")
        if self.default_err is not None and not (np.isfinite(self.default_err) and self.default_err > 0):
            raise PhotometryError(f"default error must be a positive number, got {self.default_err}")
        if int(self.min_points) < 2:
            raise PhotometryError(f"minimum number of points must be at least 2, got {self.min_points}")
        object.__setattr__(self, "columns", parse_column_map(self.columns))
        if self.encoding is not None:
            import codecs

            try:
                codecs.lookup(self.encoding)
            except LookupError:
                raise PhotometryError(f"unknown text encoding '{self.encoding}'") from None


#: Data count as sparse when more than this fraction of the points share the per-band sparse
#: zero-point (session -1) instead of a session's own.
SPARSE_FRACTION = 0.5


def is_sparse_sessions(session) -> bool:
    """The one definition of sparse data: more than :data:`SPARSE_FRACTION` of the points have session < 0.

    Parameters
    ----------
    session : array_like of int, shape (n,)
        Session index of each point (-1 for sparse points).
    """
    s = np.asarray(session)
    return bool(s.size and np.mean(s < 0) > SPARSE_FRACTION)


@dataclass(frozen=True, eq=False)
class LightCurve:
    """Photometry of one object, validated, sorted in time, with sessions assigned.

    Build with :meth:`from_arrays`, :func:`read_lightcurve` or :func:`read_survey`.

    Attributes
    ----------
    object_id : str
        Object designation.
    t_obs : numpy.ndarray, shape (n,)
        Observation times, JD in UTC.
    t : numpy.ndarray, shape (n,)
        Model times: JD in TDB, light-time corrected (emission times) when
        ``delta_au`` is known or the input was flagged as corrected; see
        ``meta['light_time']``.
    mag : numpy.ndarray, shape (n,)
        Magnitudes as read (apparent, unless the input was already reduced).
    err : numpy.ndarray, shape (n,)
        1-sigma magnitude errors, mag, all positive.
    session : numpy.ndarray of int, shape (n,)
        Session index (0, 1, ...; one zero-point each), -1 for sparse points that
        share one zero-point per band.
    band : numpy.ndarray of str, shape (n,)
        Photometric band of each point.
    r_au, delta_au : numpy.ndarray, shape (n,), or None
        Heliocentric and observer distances, au.
    phase_deg : numpy.ndarray, shape (n,), or None
        Solar phase angle, degrees.
    sun_dir, obs_dir : numpy.ndarray, shape (n, 3), or None
        Asteroid-centric unit vectors towards the Sun and the observer, ecliptic J2000.
    meta : dict
        Provenance: source files, column map, time format and scale, reductions
        applied, and counts of every point dropped or merged (``meta['dropped']``).
    """

    def __repr__(self) -> str:
        from tumble import _repr

        return _repr.lightcurve_repr(self)

    def _repr_html_(self) -> str:
        from tumble import _repr

        return _repr.lightcurve_html(self)

    object_id: str
    t_obs: np.ndarray
    t: np.ndarray
    mag: np.ndarray
    err: np.ndarray
    session: np.ndarray
    band: np.ndarray
    r_au: np.ndarray | None = None
    delta_au: np.ndarray | None = None
    phase_deg: np.ndarray | None = None
    sun_dir: np.ndarray | None = None
    obs_dir: np.ndarray | None = None
    meta: dict = field(default_factory=dict)

    def __post_init__(self):
        n = len(self.t_obs)
        for name in ("t", "mag", "err", "session", "band"):
            if len(getattr(self, name)) != n:
                raise PhotometryError(f"{self.object_id}: '{name}' has {len(getattr(self, name))} values, expected {n}")
        for name in ("r_au", "delta_au", "phase_deg"):
            value = getattr(self, name)
            if value is not None and np.shape(value) != (n,):
                raise PhotometryError(f"{self.object_id}: '{name}' has shape {np.shape(value)}, expected ({n},)")
        for name in ("sun_dir", "obs_dir"):
            value = getattr(self, name)
            if value is not None and np.shape(value) != (n, 3):
                raise PhotometryError(f"{self.object_id}: '{name}' has shape {np.shape(value)}, expected ({n}, 3)")
        if n and (np.any(np.diff(self.t) < 0)):
            raise PhotometryError(f"{self.object_id}: times are not sorted")
        if not (np.all(np.isfinite(self.mag)) and np.all(self.err > 0)):
            raise PhotometryError(f"{self.object_id}: magnitudes must be finite and errors positive")
        for arr in (self.t_obs, self.t, self.mag, self.err, self.session, self.band,
                    self.r_au, self.delta_au, self.phase_deg, self.sun_dir, self.obs_dir):
            if isinstance(arr, np.ndarray):
                arr.setflags(write=False)

    # ------------------------------------------------------------------ derived
    @property
    def n_points(self) -> int:
        """Number of points."""
        return int(len(self.t))

    @property
    def n_sessions(self) -> int:
        """Number of distinct sessions with their own zero-point (sparse points not counted)."""
        return int(len(np.unique(self.session[self.session >= 0])))

    @property
    def is_sparse(self) -> bool:
        """True when most points are sparse (session -1): the one definition, :func:`is_sparse_sessions`."""
        return is_sparse_sessions(self.session)

    @property
    def span_d(self) -> float:
        """Time span of the data, days."""
        return float(self.t[-1] - self.t[0]) if self.n_points else 0.0

    @property
    def bands(self) -> tuple[str, ...]:
        """Distinct bands, sorted."""
        return tuple(sorted(set(self.band.tolist())))

    @property
    def has_distances(self) -> bool:
        """True when both ``r_au`` and ``delta_au`` are known."""
        return self.r_au is not None and self.delta_au is not None

    @property
    def reduced_mag(self) -> np.ndarray:
        """Magnitude reduced to unit distances, m - 5 log10(r Delta); the input when distances are unknown."""
        if not self.has_distances:
            return np.asarray(self.mag)
        return geometry.reduced_magnitude(self.mag, self.r_au, self.delta_au)

    @property
    def flux(self) -> np.ndarray:
        """Relative flux 10^(-0.4 mag) of the magnitudes as read."""
        return 10.0 ** (-0.4 * np.asarray(self.mag))

    def subset(self, mask) -> "LightCurve":
        """A new light curve holding only the points where ``mask`` is true (or the given indices)."""
        idx = np.arange(self.n_points)[mask]

        def pick(a):
            return None if a is None else np.asarray(a)[idx]

        return replace(
            self,
            t_obs=pick(self.t_obs), t=pick(self.t), mag=pick(self.mag), err=pick(self.err),
            session=pick(self.session), band=pick(self.band), r_au=pick(self.r_au),
            delta_au=pick(self.delta_au), phase_deg=pick(self.phase_deg),
            sun_dir=pick(self.sun_dir), obs_dir=pick(self.obs_dir), meta=dict(self.meta),
        )

    def summary(self) -> dict:
        """A JSON-ready summary (keys documented in ``docs/input-formats.md``)."""

        def rng(a):
            return None if a is None else [float(np.min(a)), float(np.max(a))]

        per_band = {b: int(np.sum(self.band == b)) for b in self.bands}
        return {
            "object": self.object_id,
            "sources": list(self.meta.get("sources", [])),
            "n_points": self.n_points,
            "n_read": int(self.meta.get("n_read", self.n_points)),
            "dropped": dict(self.meta.get("dropped", {})),
            "n_sessions": self.n_sessions,
            "n_sparse_points": int(np.sum(self.session < 0)),
            "span_d": self.span_d,
            "t_first_jd_utc": float(self.t_obs[0]),
            "t_last_jd_utc": float(self.t_obs[-1]),
            "bands": per_band,
            "mag_range": rng(self.mag),
            "err_median": float(np.median(self.err)),
            "r_au_range": rng(self.r_au),
            "delta_au_range": rng(self.delta_au),
            "phase_deg_range": rng(self.phase_deg),
            "has_directions": self.sun_dir is not None and self.obs_dir is not None,
            "time_format": self.meta.get("time_format"),
            "time_scale": self.meta.get("time_scale"),
            "light_time": self.meta.get("light_time"),
            "reductions": list(self.meta.get("reductions", [])),
            "columns": dict(self.meta.get("columns", {})),
        }

    # ------------------------------------------------------------ constructor
    @classmethod
    def from_arrays(cls, time, mag=None, err=None, *, flux=None, flux_err=None, session=None, band=None,
                    r_au=None, delta_au=None, phase_deg=None, sun_dir=None, obs_dir=None,
                    object_id="object", options: ReadOptions | None = None, source="<arrays>",
                    **option_overrides) -> "LightCurve":
        """Validate arrays and build a light curve.

        ``time`` is in the format and scale of ``options`` (default JD, UTC). Give
        ``mag`` and ``err``, or ``flux`` and ``flux_err``. Options may be given as a
        :class:`ReadOptions` or as keyword overrides (``min_points=5``).
        """
        opts = options or ReadOptions()
        if option_overrides:
            opts = replace(opts, **option_overrides)
        from tumble.adapters import has_rich_values

        if has_rich_values(time, mag, err, flux, flux_err, r_au, delta_au, phase_deg):  # Time, Quantity
            given = {"time": time, "mag": mag, "err": err, "flux": flux, "flux_err": flux_err, "session": session,
                     "band": band, "r_au": r_au, "delta_au": delta_au, "phase_deg": phase_deg}
            n = len(time)
            table = {k: (np.broadcast_to(np.asarray(v), (n,)) if np.ndim(v) == 0 else v)
                     for k, v in given.items() if v is not None}
            for prefix, vec in (("sun", sun_dir), ("obs", obs_dir)):
                if vec is not None:
                    for k, axis in enumerate("xyz"):
                        table[f"{prefix}_{axis}"] = np.asarray(vec, dtype=float)[:, k]
            return cls.from_table(table, object_id=object_id, options=replace(opts, columns={}), source=source)
        if opts.time_format is None:
            opts = replace(opts, time_format="jd")
        n = len(np.atleast_1d(time))
        cols: dict[str, np.ndarray] = {"time": np.atleast_1d(np.asarray(time))}
        for name, value in (("mag", mag), ("err", err), ("flux", flux), ("flux_err", flux_err),
                            ("session", session), ("band", band), ("r_au", r_au), ("delta_au", delta_au),
                            ("phase_deg", phase_deg)):
            if value is not None:
                cols[name] = np.broadcast_to(np.asarray(value), (n,)) if np.ndim(value) == 0 else np.asarray(value)
        for prefix, vec in (("sun", sun_dir), ("obs", obs_dir)):
            if vec is not None:
                vec = np.asarray(vec, dtype=float)
                if vec.shape != (n, 3):
                    raise PhotometryError(f"{source}: {prefix}_dir must have shape ({n}, 3), got {vec.shape}")
                for k, axis in enumerate("xyz"):
                    cols[f"{prefix}_{axis}"] = vec[:, k]
        for name, value in cols.items():
            if len(value) != n:
                raise PhotometryError(f"{source}: column '{name}' has {len(value)} values, expected {n}")
        table = _RawTable(source=source, names=list(cols), columns=cols, row_labels=None)
        mapping = {name: name for name in cols}
        piece = _extract(table, mapping, opts)
        return _assemble([piece], opts, object_id=object_id)

    @classmethod
    def from_table(cls, table, columns=None, *, object_id: str | None = None, options: ReadOptions | None = None,
                   source: str | None = None, **option_overrides) -> "LightCurve":
        """Build a light curve from an in-memory table of one object.

        Parameters
        ----------
        table : astropy Table or QTable, pandas DataFrame, pyarrow Table, or mapping of name -> array
            Columns named as in files (aliases, or mapped with ``columns``). An
            astropy ``Time`` column is taken with its scale; Quantities and columns
            with units are converted by physical type (angles to deg, lengths to au).
        columns : str or dict, optional
            Column map, e.g. ``"time=obs_time,mag=V"``.
        object_id : str, optional
            Object name (default: the object column, the table's ``OBJECT`` meta, else ``object``).
        options : ReadOptions, optional
            Reading options; keyword arguments override its fields.
        source : str, optional
            Name used in error messages (default ``<Table>``, ``<DataFrame>``...).

        Raises
        ------
        PhotometryError
            One line naming the column or row and the problem.
        """
        from tumble.adapters import raw_table

        if columns is not None:
            option_overrides["columns"] = columns
        if object_id is not None:
            option_overrides["object_id"] = object_id
        opts = _options(options, option_overrides)
        raw, opts = raw_table(table, opts, source=source)
        return _lightcurve_from_tables([raw], opts, [])


# ---------------------------------------------------------------------------
# Raw tables: what a file holds before we interpret it.


@dataclass
class _RawTable:
    """Columns of one file as read, before interpretation.

    ``row_labels[i]`` names data row i in messages ("line 12" for text, "row 3" for tables).
    """

    source: str
    names: list[str]
    columns: dict[str, np.ndarray]
    row_labels: list[str] | None
    meta: dict = field(default_factory=dict)
    format: str = "arrays"
    digest: str = ""  # SHA-256 of the (decompressed) bytes, to catch the same data given twice

    def label(self, i: int) -> str:
        if self.row_labels is None:
            return f"row {i + 1}"
        return self.row_labels[i]

    @property
    def n_rows(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0


def _is_negative_int(text: str) -> bool:
    try:
        return int(float(text)) < 0
    except (TypeError, ValueError):
        return False


def _rows(n: int) -> str:
    return f"{n} row" if n == 1 else f"{n} rows"


def _fail(source, where, problem) -> PhotometryError:
    where = f" {where}:" if where else ""
    return PhotometryError(f"{source}:{where} {problem}")


def max_input_bytes() -> int:
    """The largest photometry file read, bytes after decompression (:data:`MAX_INPUT_BYTES`, or
    the environment variable ``TUMBLE_MAX_INPUT_MB`` when set to a positive number)."""
    text = os.environ.get("TUMBLE_MAX_INPUT_MB", "").strip()
    if text:
        try:
            mb = float(text)
        except ValueError:
            raise PhotometryError(f"TUMBLE_MAX_INPUT_MB: '{text}' is not a number of megabytes") from None
        if not mb > 0 or not np.isfinite(mb):
            raise PhotometryError(f"TUMBLE_MAX_INPUT_MB: must be a positive number of megabytes, got '{text}'")
        return int(mb * 1024 * 1024)
    return MAX_INPUT_BYTES


def _too_big(src: str, cap: int, what: str) -> PhotometryError:
    return _fail(src, "", f"{what} more than {cap / 1048576:g} MiB, the largest input read "
                          "(split the file, or raise TUMBLE_MAX_INPUT_MB)")


def inflate_capped(data: bytes, cap: int, src: str = "<bytes>") -> bytes:
    """Decompress gzip ``data`` (one or more members) block by block, refusing to expand past ``cap`` bytes.

    Raises
    ------
    PhotometryError
        Corrupt or truncated data, or more than ``cap`` bytes once expanded (a gzip bomb stops at
        the cap: memory never exceeds about ``cap`` plus one block).
    """
    out = bytearray()
    rest = data
    try:
        while rest:
            d = zlib.decompressobj(wbits=31)
            chunk = rest
            while True:
                piece = d.decompress(chunk, _INFLATE_BLOCK)
                out += piece
                if len(out) > cap:
                    raise _too_big(src, cap, "expands to")
                chunk = d.unconsumed_tail
                if d.eof or (not chunk and not piece):
                    break
            if not d.eof:
                raise EOFError
            rest = d.unused_data
            if rest.strip(b"\x00") == b"":  # trailing padding after the last member
                break
    except (EOFError, zlib.error):
        raise _fail(src, "", "truncated or corrupt gzip data") from None
    return bytes(out)


def _load_bytes(path: Path) -> bytes:
    src = str(path)
    if not path.exists():
        raise _fail(src, "", "no such file")
    if path.is_dir():
        raise _fail(src, "", "is a directory, not a photometry file")
    cap = max_input_bytes()
    try:
        if path.stat().st_size > cap:
            raise _too_big(src, cap, "holds")
        data = path.read_bytes()
    except OSError as exc:
        raise _fail(src, "", f"cannot be read ({exc.strerror or exc})") from None
    if data[:2] == b"\x1f\x8b":
        data = inflate_capped(data, cap, src)
    elif is_gzip_name(path) and data:
        raise _fail(src, "", "name ends in .gz but the content is not gzip-compressed")
    return data


def _sniff_format(path: Path, data: bytes) -> str:
    head = data[:2880]
    stripped = head.lstrip(b"\xef\xbb\xbf").lstrip()
    if head.startswith(b"SIMPLE  ="):
        return "fits"
    if stripped.startswith(b"<?xml") or stripped[:200].lower().find(b"<votable") >= 0:
        return "votable"
    if stripped.startswith(b"# %ECSV"):
        return "ecsv"
    ext = Path(strip_compression(path)).suffix.lower()
    fmt = _EXT_FORMAT.get(ext, "txt")
    if fmt in ("fits", "votable", "ecsv"):
        return "txt"  # name says so, content does not: read as text and let the checks speak
    return fmt


def read_table(path: str | os.PathLike, encoding: str | None = None) -> _RawTable:
    """Read one file into raw columns (strings for text tables), sniffing its format.

    ``encoding`` names the text encoding of text files (default UTF-8, BOM allowed).
    """
    path = Path(path)
    data = _load_bytes(path)
    src = str(path)
    table = _parse_bytes(path, src, data, encoding)
    table.digest = hashlib.sha256(data).hexdigest()
    return table


def _parse_bytes(path: Path, src: str, data: bytes, encoding: str | None = None) -> _RawTable:
    from tumble.readers import decode_text, find_reader

    if not data.strip(b"\xef\xbb\xbf \t\r\n"):
        raise _fail(src, "", "file is empty")
    extra_format = find_reader(path, data)
    if extra_format is not None:  # ALCDEF, Parquet (tumble/readers.py)
        return extra_format.read(src, data, encoding)
    fmt = _sniff_format(path, data)
    if fmt == "fits":
        return _read_fits(src, data)
    if fmt == "votable":
        return _read_votable(src, data)
    if b"\x00" in data[:65536] and not (encoding or "").lower().startswith("utf-16"):
        raise _fail(src, "", "binary data, not a text table (NUL bytes found)")
    text = decode_text(src, data, encoding)
    if fmt == "ecsv":
        return _read_ecsv(src, text)
    return _read_text(src, text)


def _read_text(src: str, text: str) -> _RawTable:
    cap = max_input_bytes()
    if text.count("\n") > cap // BYTES_PER_LINE_LIMIT:  # counted before splitting: lines cost memory
        raise _fail(src, "", f"more than {cap // BYTES_PER_LINE_LIMIT} lines, the most read from one file "
                             "(split the file, or raise TUMBLE_MAX_INPUT_MB)")
    max_cells = cap // BYTES_PER_CELL_LIMIT
    lines = text.splitlines()
    header_idx = None
    last_comment = None
    for i, line in enumerate(lines):
        s = line.strip()
        if not s:
            continue
        if s.startswith("#"):
            last_comment = (i, s.lstrip("#").strip())
            continue
        header_idx = i
        break
    if header_idx is None:
        raise _fail(src, "", "no header line and no data (only comments or blank lines)")
    header_line = lines[header_idx]
    delim = _guess_delimiter(header_line)
    header = _split(header_line, delim, src)
    data_start = header_idx + 1
    if _looks_numeric(header[0]):
        # no header line: accept the last comment line as the header if it has the same width
        if last_comment is not None and len(_split(last_comment[1], delim, src)) == len(header):
            header = _split(last_comment[1], delim, src)
            data_start = header_idx
        else:
            raise _fail(src, f"line {header_idx + 1}", "no header line (the first line holds numbers, not column names)")
    header = [h.strip().strip('"').strip() for h in header]
    if len(set(h.lower() for h in header)) != len(header):
        dup = [h for h in header if [x.lower() for x in header].count(h.lower()) > 1][0]
        raise _fail(src, f"line {header_idx + 1}", f"column name '{dup}' appears twice in the header")
    rows, labels = [], []
    for i, fields in _records(src, lines, data_start, delim):
        if (len(rows) + 1) * len(header) > max_cells:
            raise _fail(src, f"line {i + 1}", f"more than {max_cells} table cells, the most read from one file "
                                              "(split the file, or raise TUMBLE_MAX_INPUT_MB)")
        if len(fields) != len(header):
            hint = ""
            if len(fields) == 1 and len(header) > 1:
                hint = " (wrong delimiter?)"
            raise _fail(src, f"line {i + 1}",
                        f"expected {len(header)} fields as in the header, found {len(fields)}{hint}")
        rows.append(fields)
        labels.append(f"line {i + 1}")
    if not rows:
        raise _fail(src, "", "header only, no data rows")
    cols = {name: np.array([r[k].strip() for r in rows], dtype=object) for k, name in enumerate(header)}
    fmt = {",": "csv", "\t": "tsv", ";": "csv", None: "txt"}[delim]
    meta = {}
    for line in lines[:data_start]:
        body = line.strip().lstrip("#").strip()
        if line.strip().startswith("#") and ":" in body:
            key, value = body.split(":", 1)
            if key.strip() and " " not in key.strip():
                meta[key.strip()] = value.strip()
    return _RawTable(source=src, names=header, columns=cols, row_labels=labels, meta=meta, format=fmt)


def _records(src: str, lines: list[str], start: int, delim) -> Iterator[tuple[int, list[str]]]:
    """Data records as (0-based line index, fields), skipping blank and ``#`` lines. A quoted field
    may hold the delimiter or line breaks (RFC 4180); such a record spans several lines."""
    if delim is None or not any('"' in line for line in lines[start:]):
        for i in range(start, len(lines)):
            s = lines[i].strip()
            if s and not s.startswith("#"):
                yield i, _split(lines[i], delim, src)
        return
    reader = csv.reader(io.StringIO("\n".join(lines[start:])), delimiter=delim)
    first = start
    try:
        for fields in reader:
            i, first = first, start + reader.line_num
            if not fields or (not "".join(fields).strip()) or fields[0].lstrip().startswith("#"):
                continue
            yield i, fields
    except csv.Error as exc:
        raise _fail(src, f"line {first + 1}", f"malformed quoted field ({exc})") from None


def _guess_delimiter(header_line: str):
    for d in (",", "\t", ";"):
        if d in header_line:
            return d
    return None


def _split(line: str, delim, src: str = "<text>"):
    if delim is None:
        return line.split()
    try:
        return next(csv.reader([line], delimiter=delim), [])
    except csv.Error as exc:
        raise _fail(src, "", f"malformed field in {line[:40]!r} ({exc})") from None


def _looks_numeric(s: str) -> bool:
    try:
        float(s)
        return True
    except ValueError:
        return False


def _table_to_raw(src: str, table, fmt: str) -> _RawTable:
    names = list(table.colnames)
    if not names or len(table) == 0:
        raise _fail(src, "", "header only, no data rows" if names else "table has no columns")
    cols = {}
    for name in names:
        col = table[name]
        if getattr(col, "ndim", 1) != 1:
            continue  # multidimensional columns are not photometry
        mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else np.zeros(len(col), bool)
        values = np.asarray(col.filled() if hasattr(col, "filled") else col)
        if values.dtype.kind in "fiub":
            arr = values.astype(float)
            arr[mask] = np.nan
            if getattr(col, "unit", None) is not None:  # a phase in rad is rad (tumble/adapters.py)
                from tumble.adapters import _unit_values

                arr = _unit_values(src, name, col)[0]
        else:
            arr = np.array([v.decode() if isinstance(v, bytes) else str(v) for v in values], dtype=object)
            arr[mask] = ""
        cols[name] = arr
    meta = dict(table.meta) if table.meta else {}
    return _RawTable(source=src, names=list(cols), columns=cols, row_labels=None, meta=meta, format=fmt)


def _read_ecsv(src: str, text: str) -> _RawTable:
    from astropy.table import Table

    try:
        table = Table.read(text, format="ascii.ecsv")
    except Exception as exc:  # astropy raises many types for malformed ECSV
        msg = _first_line(exc)
        hit = re.search(r"column '([^']+)' failed to convert: could not convert string to \w+: '([^']*)'", msg)
        if hit:  # name the line of the first bad cell
            for i, line in enumerate(text.splitlines()):
                if not line.startswith("#") and hit.group(2) in line.split():
                    raise _fail(src, f"line {i + 1}, column '{hit.group(1)}'",
                                f"'{hit.group(2)}' is not a number") from None
        raise _fail(src, "", f"malformed ECSV ({msg})") from None
    return _table_to_raw(src, table, "ecsv")


def _read_fits(src: str, data: bytes) -> _RawTable:
    from astropy.io import fits
    from astropy.table import Table

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            with fits.open(io.BytesIO(data), memmap=False) as hdul:
                hdul.verify("silentfix")
                table_hdus = [h for h in hdul if isinstance(h, (fits.BinTableHDU, fits.TableHDU))]
                if not table_hdus:
                    raise _fail(src, "", "FITS file has no table extension")
                table = Table(table_hdus[0].data)
                for k, name in enumerate(table.colnames, start=1):  # TUNITn: units kept for conversion
                    unit = table_hdus[0].header.get(f"TUNIT{k}")
                    if unit:
                        import astropy.units as u

                        table[name].unit = u.Unit(unit, parse_strict="silent")
                table.meta.update({k: v for k, v in table_hdus[0].header.items() if k not in ("COMMENT", "HISTORY")})
    except PhotometryError:
        raise
    except Exception as exc:
        raise _fail(src, "", f"unreadable FITS ({_first_line(exc)})") from None
    return _table_to_raw(src, table, "fits")


def _read_votable(src: str, data: bytes) -> _RawTable:
    from astropy.io.votable import parse

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            vot = parse(io.BytesIO(data))
            vtable = vot.get_first_table()
            table = vtable.to_table(use_names_over_ids=True)
            for param in vtable.params:
                value = param.value
                table.meta[param.name] = value.decode() if isinstance(value, bytes) else str(value)
            for info in vtable.infos:
                table.meta[info.name] = str(info.value)
    except Exception as exc:
        raise _fail(src, "", f"unreadable VOTable ({_first_line(exc)})") from None
    return _table_to_raw(src, table, "votable")


def _first_line(exc: BaseException) -> str:
    msg = str(exc).strip().splitlines()
    return (msg[0] if msg else type(exc).__name__)[:200]


# ---------------------------------------------------------------------------
# Interpretation: map columns, convert to numbers, check.


def _match_columns(table: _RawTable, opts: ReadOptions) -> dict[str, str]:
    """Canonical name -> file column name, from the user's map first, then the aliases."""
    lower = {name.lower().strip(): name for name in table.names}
    mapping: dict[str, str] = {}
    for canon, theirs in opts.columns.items():
        hit = lower.get(theirs.lower())
        if hit is None:
            raise _fail(table.source, f"column '{theirs}'",
                        f"given as {canon}={theirs} but not in the file (columns: {', '.join(table.names)})")
        mapping[canon] = hit
    taken = set(mapping.values())
    for canon, theirs in opts.columns.items():
        # a mapped column whose own name is another quantity's alias: e.g. err=mag takes the file's 'mag'
        owner = next((c for c, aliases in COLUMN_ALIASES.items() if mapping[canon].lower() in aliases), None)
        if owner is not None and owner != canon and owner not in opts.columns:
            raise _fail(table.source, f"column '{mapping[canon]}'",
                        f"given as {canon} but its name says {owner}; map {owner} too (--columns {owner}=NAME)")
    for canon, aliases in COLUMN_ALIASES.items():
        if canon in mapping:
            continue
        hits = [lower[a] for a in aliases if a in lower and lower[a] not in taken]
        if len(hits) > 1:
            raise _fail(table.source, "", f"columns {', '.join(repr(h) for h in hits)} could each be the {canon}; "
                                          f"choose one with --columns {canon}=NAME")
        if hits:
            mapping[canon] = hits[0]
            taken.add(hits[0])
    return mapping


def _numeric(table: _RawTable, name: str, *, allow_missing: bool) -> np.ndarray:
    """Column as float; empty cells are NaN when allowed; text that is not a number is an error."""
    values = table.columns[name]
    if values.dtype != object:
        return np.asarray(values, dtype=float)
    out = np.empty(len(values))
    for i, v in enumerate(values):
        s = v.strip() if isinstance(v, str) else v
        if s in ("", None) or (isinstance(s, str) and s.lower() in ("nan", "na", "null", "none", "--")):
            if not allow_missing and s in ("", None):
                raise _fail(table.source, f"{table.label(i)}, column '{name}'", "empty cell")
            out[i] = np.nan
            continue
        try:
            out[i] = float(s)
        except (TypeError, ValueError):
            raise _fail(table.source, f"{table.label(i)}, column '{name}'", f"'{str(v)[:40]}' is not a number") from None
    return out


@dataclass
class _Piece:
    """Numbers from one file, before merging and time conversion."""

    source: str
    table: _RawTable
    columns: dict[str, str]
    time: np.ndarray  # numbers or ISO strings
    time_format: str
    mag: np.ndarray
    err: np.ndarray
    session: np.ndarray | None
    band: np.ndarray
    extra: dict[str, np.ndarray]
    dropped: dict[str, int]
    reductions: list[str]
    labels: list[str]
    object_col: np.ndarray | None = None
    meta: dict = field(default_factory=dict)


def _guess_time_format(table: _RawTable, name: str, values: np.ndarray, opts: ReadOptions) -> str:
    if opts.time_format:
        return opts.time_format
    lname = name.lower()
    if lname.startswith("mjd"):
        return "mjd"
    if lname.startswith("jd"):
        return "jd"
    sample = [v for v in values[:50] if str(v).strip()]
    if sample and not all(_looks_numeric(str(v)) for v in sample):
        return "iso"
    nums = np.array([float(v) for v in sample]) if sample else np.array([])
    if nums.size and np.all(nums > 2_000_000):
        return "jd"
    if nums.size and np.all((nums > 10_000) & (nums < 100_000)):
        return "mjd"
    raise _fail(table.source, f"column '{name}'",
                "cannot tell whether times are JD or MJD; give --time-format {jd,mjd,iso}")


def _extract(table: _RawTable, mapping: dict[str, str], opts: ReadOptions) -> _Piece:
    src = table.source
    if "time" not in mapping:
        raise _fail(src, "", f"no time column (looked for {', '.join(COLUMN_ALIASES['time'])}; "
                             f"found {', '.join(table.names)}; map one with --columns time=NAME)")
    have_mag = "mag" in mapping
    have_flux = "flux" in mapping
    if not have_mag and not have_flux:
        raise _fail(src, "", f"no magnitude or flux column (found {', '.join(table.names)}; "
                             f"map one with --columns mag=NAME or flux=NAME)")
    n = table.n_rows
    labels = [table.label(i) for i in range(n)]
    dropped: dict[str, int] = {}
    reductions: list[str] = []

    # --- time
    tname = mapping["time"]
    tfmt = _guess_time_format(table, tname, table.columns[tname], opts)
    if tfmt == "iso":
        time = np.array([str(v).strip() for v in table.columns[tname]], dtype=object)
        bad = [i for i, v in enumerate(time) if not v]
        if bad:
            raise _fail(src, f"{labels[bad[0]]}, column '{tname}'", "empty time")
    else:
        time = _numeric(table, tname, allow_missing=True)
        bad = np.flatnonzero(~np.isfinite(time))
        if bad.size:
            raise _fail(src, f"{labels[bad[0]]}, column '{tname}'",
                        f"time is {'NaN' if np.isnan(time[bad[0]]) else 'infinite'} ({_rows(bad.size)} like this)")
        bad = np.flatnonzero(np.abs(time) > MAX_ABS_TIME_D)
        if bad.size:
            raise _fail(src, f"{labels[bad[0]]}, column '{tname}'",
                        f"time {time[bad[0]]:g} is not a {tfmt.upper()} date (beyond +-{MAX_ABS_TIME_D:g} d; "
                        f"{_rows(bad.size)} like this)")
        implausible = implausible_time(time, tfmt)
        if implausible is not None:
            raise _fail(src, f"{labels[implausible[0]]}, column '{tname}'", implausible[1])

    # --- magnitudes (or fluxes)
    if have_mag and not (have_flux and "mag" not in opts.columns and "flux" in opts.columns):
        mname = mapping["mag"]
        mag = _numeric(table, mname, allow_missing=True)
        finite = mag[np.isfinite(mag)]
        out_of_range = np.flatnonzero(np.isfinite(mag) & ((mag < MAG_RANGE[0]) | (mag > MAG_RANGE[1])))
        if out_of_range.size:
            i = out_of_range[0]
            raise _fail(src, f"{labels[i]}, column '{mname}'",
                        f"magnitude {mag[i]:g} outside {MAG_RANGE[0]:g}..{MAG_RANGE[1]:g} "
                        f"({_rows(out_of_range.size)} like this); fluxes given as magnitudes? map them with --columns flux=NAME")
        if finite.size == 0:
            raise _fail(src, f"column '{mname}'", "no finite magnitudes")
        if "err" in mapping:
            err = _numeric(table, mapping["err"], allow_missing=True)
        elif opts.default_err is not None:
            err = np.full(n, np.nan)
        else:
            raise _fail(src, "", f"no magnitude-error column (looked for {', '.join(COLUMN_ALIASES['err'])}; "
                                 f"map one with --columns err=NAME or give --default-err MAG)")
        err_name = mapping.get("err", "err")
    else:
        fname = mapping["flux"]
        flux = _numeric(table, fname, allow_missing=True)
        if "flux_err" not in mapping and opts.default_err is None:
            raise _fail(src, "", "no flux-error column (map one with --columns flux_err=NAME)")
        ferr = _numeric(table, mapping["flux_err"], allow_missing=True) if "flux_err" in mapping else None
        nonpos = np.isfinite(flux) & (flux <= 0)
        if nonpos.any():
            dropped["non-positive flux"] = int(nonpos.sum())
        good = np.isfinite(flux) & (flux > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            mag = np.where(good, opts.flux_zero_point - 2.5 * np.log10(np.where(good, flux, 1.0)), np.nan)
            if ferr is not None:
                err = 2.5 / np.log(10) * ferr / np.where(good, flux, np.nan)
            else:
                err = np.full(n, np.nan)
        reductions.append(f"flux to magnitude: mag = {opts.flux_zero_point:g} - 2.5 log10(flux), "
                          f"err = 1.0857 flux_err/flux")
        err_name = mapping.get("flux_err", "flux_err")

    # --- errors
    bad_err = np.isfinite(mag) & ~(np.isfinite(err) & (err > 0))
    if bad_err.any():
        if opts.default_err is None:
            i = int(np.flatnonzero(bad_err)[0])
            what = "missing" if not np.isfinite(err[i]) else f"non-positive ({err[i]:g})"
            raise _fail(src, f"{labels[i]}, column '{err_name}'",
                        f"magnitude error is {what} ({_rows(int(bad_err.sum()))} like this); fix them or give --default-err MAG")
        err = np.where(bad_err, opts.default_err, err)
        reductions.append(f"{int(bad_err.sum())} missing or non-positive errors set to {opts.default_err:g} mag")
    extreme = np.flatnonzero(np.isfinite(mag) & ((err < ERR_RANGE_MAG[0]) | (err > ERR_RANGE_MAG[1])))
    if extreme.size:
        i = int(extreme[0])
        raise _fail(src, f"{labels[i]}, column '{err_name}'",
                    f"magnitude error {err[i]:g} outside {ERR_RANGE_MAG[0]:g}..{ERR_RANGE_MAG[1]:g} mag "
                    f"({_rows(extreme.size)} like this)")
    # rows with no usable magnitude are dropped and counted
    nan_mag = ~np.isfinite(mag)
    flux_dropped = dropped.get("non-positive flux", 0)
    if nan_mag.sum() - flux_dropped > 0:
        dropped["missing magnitude"] = int(nan_mag.sum() - flux_dropped)

    # --- session and band
    session = None
    if "session" in mapping:
        raw = table.columns[mapping["session"]]
        session = np.array([str(v).strip() for v in raw], dtype=object)
        session = np.where(session == "nan", "", session)
    if "band" in mapping:
        band = np.array([str(v).strip() or (opts.band or "unknown") for v in table.columns[mapping["band"]]], dtype=object)
    else:
        band = np.full(n, opts.band or "unknown", dtype=object)

    # --- geometry columns
    extra = {}
    for name in ("r_au", "delta_au", "phase_deg") + _VEC_COLUMNS:
        if name in mapping:
            extra[name] = _numeric(table, mapping[name], allow_missing=True)
    for name in ("r_au", "delta_au"):
        if name in extra:
            bad = np.flatnonzero(np.isfinite(mag) & ~(extra[name] > 0))
            if bad.size:
                raise _fail(src, f"{labels[bad[0]]}, column '{mapping[name]}'",
                            f"distance must be a positive number of au, got {extra[name][bad[0]]:g}")
    if "phase_deg" in extra:
        ph = extra["phase_deg"]
        bad = np.flatnonzero(np.isfinite(mag) & ~((ph >= 0) & (ph <= 180)))
        if bad.size:
            raise _fail(src, f"{labels[bad[0]]}, column '{mapping['phase_deg']}'",
                        f"phase angle must lie in 0..180 deg, got {ph[bad[0]]:g}")
    for name in _BULK_TIME_COLUMNS:  # times converted once for a whole survey table
        if name in table.columns:
            extra[name] = np.asarray(table.columns[name], dtype=float)
    object_col = None
    if "object" in mapping:
        object_col = np.array([str(v).strip() for v in table.columns[mapping["object"]]], dtype=object)

    keep = np.isfinite(mag)
    piece = _Piece(
        source=src, table=table, columns=dict(mapping), time=time, time_format=tfmt, mag=mag, err=err,
        session=session, band=band, extra=extra, dropped=dropped, reductions=reductions, labels=labels,
        object_col=object_col, meta=dict(table.meta),
    )
    return _select_piece(piece, keep)


def _select_piece(piece: _Piece, keep: np.ndarray) -> _Piece:
    idx = np.flatnonzero(keep)
    return replace(
        piece,
        time=piece.time[idx], mag=piece.mag[idx], err=piece.err[idx],
        session=None if piece.session is None else piece.session[idx],
        band=piece.band[idx], extra={k: v[idx] for k, v in piece.extra.items()},
        labels=[piece.labels[i] for i in idx],
        object_col=None if piece.object_col is None else piece.object_col[idx],
    )


def _bulk_times(table: _RawTable, mapping: dict[str, str], opts: ReadOptions):
    """Convert a whole table's time column at once (JD UTC, JD TDB), or None if any cell is bad.

    Survey tables hold thousands of objects; one astropy conversion for all of
    them replaces one per object. Bad cells are left to the per-object path,
    which reports them with their line.
    """
    from astropy.time import Time

    if "time" not in mapping:
        return None
    name = mapping["time"]
    try:
        with _quiet_erfa_block():
            return _bulk_times_loud(table, name, opts, Time)
    except Exception:
        return None


def _bulk_times_loud(table: _RawTable, name: str, opts: ReadOptions, Time):
    fmt = _guess_time_format(table, name, table.columns[name], opts)
    if fmt == "iso":
        values = [str(v).strip() for v in table.columns[name]]
        t = Time(values, format="isot" if "T" in values[0] else "iso", scale=opts.time_scale)
    else:
        values = _numeric(table, name, allow_missing=False)
        if not np.all(np.isfinite(values)):
            return None
        t = Time(values, format=fmt, scale=opts.time_scale)
    utc, tdb = t.utc, t.tdb
    return utc.jd1 + utc.jd2, tdb.jd1 + tdb.jd2


@contextlib.contextmanager
def _quiet_erfa_block():
    """Silence ERFA's 'dubious year' warnings: UTC dates past the leap-second table (a few years
    ahead) are converted assuming no new leap second, at most a second or so off, which the
    light-curve analysis does not resolve; the raw warning would break the one-line stderr promise."""
    with warnings.catch_warnings():
        try:
            from erfa import ErfaWarning

            warnings.simplefilter("ignore", ErfaWarning)
        except ImportError:  # pragma: no cover - erfa comes with astropy
            pass
        yield


def _to_jd_utc_tdb(piece: _Piece, opts: ReadOptions):
    with _quiet_erfa_block():
        return _to_jd_utc_tdb_loud(piece, opts)


def _to_jd_utc_tdb_loud(piece: _Piece, opts: ReadOptions):
    from astropy.time import Time

    if all(name in piece.extra for name in _BULK_TIME_COLUMNS):
        return piece.extra["__jd_utc"], piece.extra["__jd_tdb"]

    try:
        if piece.time_format == "iso":
            t = Time(list(piece.time), format="isot" if "T" in str(piece.time[0]) else "iso", scale=opts.time_scale)
        else:
            t = Time(np.asarray(piece.time, dtype=float), format=piece.time_format, scale=opts.time_scale)
    except Exception:
        # find the first bad cell for a precise message
        for i, v in enumerate(piece.time):
            try:
                Time(v if piece.time_format == "iso" else float(v),
                     format=piece.time_format if piece.time_format != "iso" else None, scale=opts.time_scale)
            except Exception:
                raise _fail(piece.source, f"{piece.labels[i]}, column '{piece.columns['time']}'",
                            f"'{v}' is not a valid {piece.time_format} time") from None
        raise _fail(piece.source, f"column '{piece.columns['time']}'", "times could not be converted") from None
    utc = t.utc
    tdb = t.tdb
    return utc.jd1 + utc.jd2, tdb.jd1 + tdb.jd2


def _assemble(pieces: Sequence[_Piece], opts: ReadOptions, object_id: str) -> LightCurve:
    """Merge pieces (files) of one object into a validated LightCurve."""
    sources = [p.source for p in pieces]
    where = sources[0] if len(sources) == 1 else f"{object_id} ({len(sources)} files)"
    n_read = sum(len(p.table.columns[p.columns['time']]) for p in pieces)
    dropped: dict[str, int] = {}
    reductions: list[str] = []
    for p in pieces:
        for k, v in p.dropped.items():
            dropped[k] = dropped.get(k, 0) + v
        reductions.extend(r for r in p.reductions if r not in reductions)

    t_utc_parts, t_tdb_parts, sess_parts = [], [], []
    session_offset = 0
    for k, p in enumerate(pieces):
        if len(p.mag) == 0:
            continue
        utc, tdb = _to_jd_utc_tdb(p, opts)
        t_utc_parts.append(utc)
        t_tdb_parts.append(tdb)
        if p.session is not None:
            empty = np.array([not s for s in p.session])
            sparse = np.array([_is_negative_int(s) for s in p.session])
            named = [s for s, e, sp in zip(p.session, empty, sparse) if not (e or sp)]
            uniq = {lab: i for i, lab in enumerate(dict.fromkeys(named))}
            ids = np.array([uniq.get(s, -1) for s in p.session], dtype=int)
            ids[empty] = -2  # no session given for this row: split by gaps below
            ids[sparse] = -3  # a negative session means "sparse" (the convention of our writer)
            sess_parts.append(np.where(ids >= 0, ids + session_offset, ids))
            session_offset += len(uniq)
        else:
            sess_parts.append(np.full(len(p.mag), -2, dtype=int))
        # each file gets its own automatic sessions: mark with a file tag
        sess_parts[-1] = np.where(sess_parts[-1] == -2, -(10 + k), sess_parts[-1])
    if not t_utc_parts:
        why = ", ".join(f"{v} {k}" for k, v in dropped.items()) or "every magnitude is missing"
        raise _fail(where, "", f"no usable points ({why})")
    t_utc = np.concatenate(t_utc_parts)
    t_tdb = np.concatenate(t_tdb_parts)
    sess_raw = np.concatenate(sess_parts)
    mag = np.concatenate([p.mag for p in pieces])
    err = np.concatenate([p.err for p in pieces])
    band = np.concatenate([p.band for p in pieces]).astype(str)
    labels = [f"{p.source}: {lab}" if len(pieces) > 1 else lab for p in pieces for lab in p.labels]
    extra_names = set.intersection(*[set(p.extra) for p in pieces]) if pieces else set()
    extra = {name: np.concatenate([p.extra[name] for p in pieces]) for name in extra_names}

    # --- sort (stable, so ties keep file order)
    order = np.lexsort((np.arange(len(t_tdb)), t_tdb))
    t_utc, t_tdb, sess_raw, mag, err, band = (a[order] for a in (t_utc, t_tdb, sess_raw, mag, err, band))
    labels = [labels[i] for i in order]
    extra = {k: v[order] for k, v in extra.items()}
    if np.any(np.diff(order) < 0):
        reductions.append("rows sorted by time")

    # --- duplicates: same instant, same band
    same = (np.abs(np.diff(t_utc)) < _DUP_TOL_D) & (band[1:] == band[:-1])
    if same.any():
        n_dup = int(same.sum())
        if opts.duplicates == "error":
            i = int(np.flatnonzero(same)[0]) + 1
            raise _fail(where, labels[i], f"duplicate time {t_utc[i]:.8f} JD in band '{band[i]}' "
                                          f"({n_dup} duplicates; use --duplicates merge or reject)")
        group = np.concatenate([[0], np.cumsum(~same)])
        if opts.duplicates == "merge":
            w = 1.0 / err**2
            wsum = np.bincount(group, weights=w)
            mag_g = np.bincount(group, weights=w * mag) / wsum
            err_g = 1.0 / np.sqrt(wsum)
            first = np.concatenate([[True], ~same])
            t_utc, t_tdb, sess_raw, band = t_utc[first], t_tdb[first], sess_raw[first], band[first]
            labels = [lab for lab, f in zip(labels, first) if f]
            extra = {k: v[first] for k, v in extra.items()}
            mag, err = mag_g, err_g
            dropped["duplicates merged"] = n_dup
            reductions.append(f"{n_dup} duplicate-time points merged by weighted mean")
        else:
            first = np.concatenate([[True], ~same])
            t_utc, t_tdb, sess_raw, mag, err, band = (a[first] for a in (t_utc, t_tdb, sess_raw, mag, err, band))
            labels = [lab for lab, f in zip(labels, first) if f]
            extra = {k: v[first] for k, v in extra.items()}
            dropped["duplicates rejected"] = n_dup

    n = len(mag)
    if n < opts.min_points:
        lost = sum(dropped.values())
        tail = f" after dropping {lost}" if lost else ""
        raise _fail(where, "", f"only {n} usable point{'s' if n != 1 else ''}{tail}; at least {opts.min_points} needed")
    if not np.ptp(t_utc) > 0:
        raise _fail(where, "", "zero time span (all points at the same time)")

    # --- sessions
    session = _assign_sessions(t_tdb, band, sess_raw, opts)

    # --- geometry
    r_au = extra.get("r_au")
    delta_au = extra.get("delta_au")
    phase = extra.get("phase_deg")
    sun_dir = obs_dir = None
    if all(c in extra for c in _VEC_COLUMNS):
        sun_dir = np.stack([extra["sun_x"], extra["sun_y"], extra["sun_z"]], axis=1)
        obs_dir = np.stack([extra["obs_x"], extra["obs_y"], extra["obs_z"]], axis=1)
        norms = np.concatenate([np.linalg.norm(sun_dir, axis=1), np.linalg.norm(obs_dir, axis=1)])
        if not np.all(np.isfinite(norms) & (norms > 0)):
            raise _fail(where, "columns sun_x..obs_z", "direction vectors must be finite and non-zero")
        sun_dir = sun_dir / np.linalg.norm(sun_dir, axis=1, keepdims=True)
        obs_dir = obs_dir / np.linalg.norm(obs_dir, axis=1, keepdims=True)
    for name, arr in (("r_au", r_au), ("delta_au", delta_au), ("phase_deg", phase)):
        if arr is not None and not np.all(np.isfinite(arr)):
            i = int(np.flatnonzero(~np.isfinite(arr))[0])
            raise _fail(where, f"{labels[i]}", f"missing {name} value")
    elements = opts.elements
    if elements is None and opts.orbits is not None:  # --orbits: this object's elements, if in the file
        elements = opts.orbits.lookup(object_id)
    if elements is not None and (sun_dir is None or r_au is None or delta_au is None):
        geo = geometry.observing_geometry(t_tdb, elements, opts.observatory)
        r_au = geo.r_au if r_au is None else r_au
        delta_au = geo.delta_au if delta_au is None else delta_au
        sun_dir = geo.sun_dir if sun_dir is None else sun_dir
        obs_dir = geo.obs_dir if obs_dir is None else obs_dir
        reductions.append("distances and directions computed from orbital elements "
                          f"({'topocentric' if opts.observatory else 'geocentric'}, two-body"
                          f"{'' if opts.elements is not None else ', from ' + str(opts.orbits.source)})")
    if phase is None and sun_dir is not None:
        phase = geometry.phase_angle_deg(sun_dir, obs_dir)
        reductions.append("phase angle computed from the Sun and observer directions")

    # --- light time
    flagged = any(_truthy(_meta_value(p.meta, "ltcorr")) for p in pieces)
    if opts.light_time_corrected or flagged:
        t_model = t_tdb
        light = _LT_GIVEN
    elif delta_au is not None:
        t_model = t_tdb - geometry.light_time_days(delta_au)
        light = "corrected: t = t_obs(TDB) - delta_au/c"
        reductions.append("light-time correction from delta_au")
    else:
        t_model = t_tdb
        light = "not corrected (no delta_au)"
    if np.any(np.diff(t_model) < 0):  # light time can reorder points a fraction of a second apart
        order = np.argsort(t_model, kind="stable")
        t_utc, t_model, mag, err, session, band = (a[order] for a in (t_utc, t_model, mag, err, session, band))
        r_au, delta_au, phase, sun_dir, obs_dir = (None if a is None else a[order]
                                                   for a in (r_au, delta_au, phase, sun_dir, obs_dir))

    file_meta = {}
    for p in pieces:
        file_meta.update({str(k): v for k, v in p.meta.items()})
    meta = {
        "sources": sources,
        "columns": pieces[0].columns,
        "formats": [p.table.format for p in pieces],
        "time_format": pieces[0].time_format,
        "time_scale": opts.time_scale,
        "light_time": light,
        "session_rule": ("from column" if any(p.session is not None for p in pieces)
                         else f"gap > {opts.session_gap_h:g} h per band"),
        "n_read": int(n_read),
        "dropped": dropped,
        "reductions": reductions,
        "file_meta": file_meta,
    }
    return LightCurve(
        object_id=str(object_id), t_obs=t_utc, t=t_model, mag=mag, err=err, session=session,
        band=band, r_au=r_au, delta_au=delta_au, phase_deg=phase, sun_dir=sun_dir, obs_dir=obs_dir,
        meta=meta,
    )


def _assign_sessions(t: np.ndarray, band: np.ndarray, sess_raw: np.ndarray, opts: ReadOptions) -> np.ndarray:
    """Final session indices: given ones kept, the rest split by gaps per band and file; small ones sparse."""
    key = np.full(len(t), None, dtype=object)
    gap_d = opts.session_gap_h / 24.0
    given = sess_raw >= 0
    for i in np.flatnonzero(given):
        key[i] = ("given", int(sess_raw[i]))
    auto = (sess_raw < 0) & (sess_raw != -3)  # -3: given as sparse, stays sparse
    for tag in np.unique(sess_raw[auto]):
        for b in np.unique(band[auto & (sess_raw == tag)]):
            idx = np.flatnonzero(auto & (sess_raw == tag) & (band == b))
            splits = np.concatenate([[0], np.cumsum(np.diff(t[idx]) > gap_d)])
            for j, s in zip(idx, splits):
                key[j] = ("auto", int(tag), str(b), int(s))
    # order sessions by their first time; small automatic ones become sparse (-1). A session the data
    # give (a column, an ALCDEF block) stays its own calibration however few its points: merging
    # differential blocks of different nights under one zero-point would invent a variation.
    first: dict = {}
    count: dict = {}
    for i, k in enumerate(key):
        first.setdefault(k, t[i])
        count[k] = count.get(k, 0) + 1
    ordered = sorted((k for k in first if k is not None and (count[k] >= opts.min_session_points or k[0] == "given")),
                     key=lambda k: (first[k], str(k)))
    index = {k: i for i, k in enumerate(ordered)}
    return np.array([index.get(k, -1) for k in key], dtype=int)


# ---------------------------------------------------------------------------
# Public readers


def _as_paths(path_or_paths) -> list[Path]:
    if isinstance(path_or_paths, (str, os.PathLike)):
        return [Path(path_or_paths)]
    paths = [Path(p) for p in path_or_paths]
    if not paths:
        raise PhotometryError("no input files given")
    return paths


def _object_name_from_path(path: Path) -> str:
    name = strip_compression(path)
    return Path(name).stem if "." in name else name


def _options(options: ReadOptions | None, overrides: dict) -> ReadOptions:
    opts = options or ReadOptions()
    if overrides:
        if "columns" in overrides:
            overrides = dict(overrides, columns=parse_column_map(overrides["columns"]))
        opts = replace(opts, **overrides)
    return opts


def read_lightcurve(path_or_paths, columns=None, *, options: ReadOptions | None = None, **overrides) -> LightCurve:
    """Read one object's photometry from one or several files into a :class:`LightCurve`.

    Parameters
    ----------
    path_or_paths : path, sequence of paths, or table
        Files of one object; several files are merged, each keeping its own sessions.
        Or an in-memory table: astropy Table/QTable, pandas DataFrame, pyarrow Table,
        a mapping of column name -> array (see :mod:`tumble.adapters`: Time columns
        keep their scale, Quantities are converted by their units).
    columns : str or dict, optional
        Column map, e.g. ``"time=JD,mag=V,err=sigma"``.
    options : ReadOptions, optional
        Reading options; keyword arguments override its fields
        (``time_format='mjd'``, ``min_points=5``, ...).

    Raises
    ------
    PhotometryError
        With a one-line message naming the file, row or column, and the problem.
    """
    if columns is not None:
        overrides["columns"] = columns
    opts = _options(options, overrides)
    tables, opts, paths = _read_inputs(path_or_paths, opts)
    return _lightcurve_from_tables(tables, opts, paths)


def _lightcurve_from_tables(tables: list[_RawTable], opts: ReadOptions, paths: list[Path]) -> LightCurve:
    """One object's light curve from raw tables (files or one in-memory table)."""
    pieces = [_extract(table, _match_columns(table, opts), opts) for table in tables]
    object_id = opts.object_id
    if object_id is None:
        names = set()
        for p in pieces:
            if p.object_col is not None:
                names.update(set(p.object_col.tolist()))
        if len(names) > 1:
            raise _fail(pieces[0].source, f"column '{pieces[0].columns['object']}'",
                        f"holds {len(names)} objects; read it with read_survey (tumble survey)")
        if names:
            object_id = names.pop()
        else:
            object_id = (_meta_value(pieces[0].meta, "object")
                         or (_object_name_from_path(paths[0]) if paths else "object"))
            if _truthy(_meta_value(pieces[0].meta, "objquote")):  # a non-ASCII name in a FITS header
                from urllib.parse import unquote

                object_id = unquote(str(object_id))
    return _assemble(pieces, opts, object_id=object_id)


def _read_inputs(path_or_paths, opts: ReadOptions):
    """(raw tables, options, paths) of files or of one in-memory table (paths empty then)."""
    from tumble.adapters import is_table_like, raw_table

    if isinstance(path_or_paths, _RawTable):  # already converted (tumble.catalog names its partition)
        return [path_or_paths], opts, []
    if is_table_like(path_or_paths):
        table, opts = raw_table(path_or_paths, opts)
        return [table], opts, []
    paths = _as_paths(path_or_paths)
    tables = []
    seen: dict[str, str] = {}
    for path in paths:
        table = read_table(path, opts.encoding)
        if table.digest and table.digest in seen:  # e.g. A.csv and A.csv.gz: merging would count every point twice
            raise _fail(str(path), "", f"holds the same data as {seen[table.digest]}; give each file once")
        seen[table.digest] = str(path)
        tables.append(table)
    return tables, opts, paths


def _meta_value(meta: Mapping, key: str):
    """A file-metadata value by case-insensitive key, or None."""
    for k, v in meta.items():
        if str(k).lower() == key.lower():
            return v
    return None


def _truthy(value) -> bool:
    return str(value).strip().lower() in ("true", "t", "1", "yes")


def iter_survey(path_or_paths, columns=None, *, options: ReadOptions | None = None,
                **overrides) -> Iterator[tuple[str, LightCurve | PhotometryError]]:
    """Yield ``(object, LightCurve or PhotometryError)`` for every object in survey tables.

    Each file must have an ``object`` column (or alias, or a ``--columns object=NAME``
    mapping); a file without one is one object named after the file. A bad object
    is yielded as its error so that batch work can go on; an unreadable file raises.
    """
    if columns is not None:
        overrides["columns"] = columns
    opts = _options(options, overrides)
    tables, opts, paths = _read_inputs(path_or_paths, opts)
    for k, table in enumerate(tables):
        mapping = _match_columns(table, opts)
        if "object" not in mapping:
            name = (opts.object_id or _meta_value(table.meta, "object")
                    or (_object_name_from_path(paths[k]) if paths else "object"))
            try:
                yield name, _assemble([_extract(table, mapping, opts)], opts, object_id=name)
            except PhotometryError as exc:
                yield name, exc
            continue
        objects = np.array([str(v).strip() for v in table.columns[mapping["object"]]], dtype=object)
        columns = dict(table.columns)
        bulk = _bulk_times(table, mapping, opts)
        if bulk is not None:
            columns["__jd_utc"], columns["__jd_tdb"] = bulk
        names, first, inverse = np.unique(objects, return_index=True, return_inverse=True)
        order = np.argsort(inverse, kind="stable")
        bounds = np.concatenate([[0], np.cumsum(np.bincount(inverse, minlength=len(names)))])
        for g in np.argsort(first):  # objects in order of first appearance
            name = names[g]
            rows = order[bounds[g]:bounds[g + 1]]
            sub = _RawTable(
                source=f"{table.source} [object {name}]",
                names=table.names,
                columns={k: v[rows] for k, v in columns.items()},
                row_labels=[table.label(i) for i in rows],
                meta=table.meta,
                format=table.format,
            )
            try:
                piece = _extract(sub, mapping, opts)
                yield name, _assemble([piece], opts, object_id=name or "unnamed")
            except PhotometryError as exc:
                yield name, exc


def read_survey(path_or_paths, columns=None, *, options: ReadOptions | None = None, **overrides) -> list[LightCurve]:
    """Read survey tables (one ``object`` column) into one :class:`LightCurve` per object.

    Raises the first object's error; use :func:`iter_survey` to collect errors instead.
    """
    out = []
    for _, item in iter_survey(path_or_paths, columns, options=options, **overrides):
        if isinstance(item, PhotometryError):
            raise item
        out.append(item)
    return out


# ---------------------------------------------------------------------------
# Writer


def _format_from_name(path: Path, fmt: str | None) -> str:
    if fmt is not None:
        if fmt not in FORMATS:
            raise PhotometryError(f"{path}: unknown format '{fmt}' (choose from {', '.join(FORMATS)})")
        return fmt
    ext = Path(strip_compression(path)).suffix.lower()
    if ext not in _EXT_FORMAT:
        raise PhotometryError(f"{path}: cannot tell the output format from the extension '{ext}'")
    return _EXT_FORMAT[ext]


def lightcurve_table(lc: LightCurve, *, object_column: bool = False):
    """The light curve as an astropy Table with canonical column names and units.

    The time column is ``time`` (JD, UTC, as observed); model times can be
    recomputed on reading. Sessions are written so that reading back keeps them.
    """
    import astropy.units as u
    from astropy.table import Table

    t = Table()
    if object_column:
        t["object"] = np.full(lc.n_points, lc.object_id)
    t["time"] = np.asarray(lc.t_obs)
    t["time"].unit = u.day
    t["time"].description = "observation time, JD (UTC)"
    t["mag"] = np.asarray(lc.mag)
    t["mag"].unit = u.mag
    t["err"] = np.asarray(lc.err)
    t["err"].unit = u.mag
    t["session"] = np.asarray(lc.session)
    t["band"] = np.asarray(lc.band).astype(str)
    for name, unit in (("r_au", u.au), ("delta_au", u.au), ("phase_deg", u.deg)):
        arr = getattr(lc, name)
        if arr is not None:
            t[name] = np.asarray(arr)
            t[name].unit = unit
    for prefix in ("sun", "obs"):
        vec = getattr(lc, f"{prefix}_dir")
        if vec is not None:
            for k, axis in enumerate("xyz"):
                t[f"{prefix}_{axis}"] = np.asarray(vec)[:, k]
    # short keys, valid as FITS header keywords too
    t.meta["OBJECT"] = lc.object_id
    t.meta["TIMESYS"] = "UTC"
    t.meta["LTCORR"] = bool(lc.meta.get("light_time") == _LT_GIVEN)
    return t


def write_lightcurve(lc: LightCurve, path: str | os.PathLike, *, format: str | None = None,
                     extra_meta: Mapping | None = None) -> Path:
    """Write a light curve in any format the reader reads (atomically; gzip if the name ends in .gz).

    The ``session`` column is written as-is, so that a file read back keeps its
    sessions (sparse points, -1, stay sparse).
    """
    path = Path(path)
    fmt = _format_from_name(path, format)
    table = lightcurve_table(lc)
    if extra_meta:
        table.meta.update(extra_meta)
    compress = is_gzip_name(path)
    buf = io.BytesIO()
    if fmt in ("csv", "tsv", "txt"):
        delim = {"csv": ",", "tsv": "\t", "txt": " "}[fmt]
        lines = [f"# {k}: {v}" for k, v in table.meta.items() if isinstance(v, (str, int, float, bool))]
        lines.append(delim.join(table.colnames))
        cols = [table[c] for c in table.colnames]
        for row in zip(*cols):
            lines.append(delim.join(repr(float(v)) if isinstance(v, (float, np.floating)) else str(v) for v in row))
        buf.write(("\n".join(lines) + "\n").encode())
    elif fmt == "alcdef":  # the exchange standard (tumble/alcdef.py): one block per session
        from tumble.alcdef import format_alcdef

        buf.write(format_alcdef(lc).encode())
    elif fmt == "ecsv":
        sio = io.StringIO()
        table.write(sio, format="ascii.ecsv")
        buf.write(sio.getvalue().encode())
    elif fmt == "fits":
        from astropy.io import fits

        name = str(table.meta.get("OBJECT", ""))
        if not name.isascii():  # FITS headers hold ASCII only: percent-encode the UTF-8 name and say so
            from urllib.parse import quote

            table.meta["OBJECT"] = quote(name, safe="")
            table.meta["OBJQUOTE"] = True
        hdu = fits.table_to_hdu(table)
        fits.HDUList([fits.PrimaryHDU(), hdu]).writeto(buf)
    elif fmt == "votable":
        from astropy.io.votable import from_table, writeto

        from astropy.io.votable.tree import Info

        vt = from_table(table)
        vtable = vt.get_first_table()
        # the metadata as INFO elements: astropy escapes a char PARAM's value twice ('&' -> '&amp;amp;')
        for key, value in table.meta.items():
            vtable.infos.append(Info(name=str(key), value=str(value)))
        writeto(vt, buf)
    data = buf.getvalue()
    if compress:
        data = gzip.compress(data, mtime=0)
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
    return path


