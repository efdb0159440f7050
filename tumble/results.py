"""The results catalogue: one row per object, stable column names, units in the header.

The columns are defined once in :mod:`tumble.schema`; the schema is the contract between ``tumble classify``, ``tumble survey``,
``tumble relax --sample`` and ``tumble report`` (see ``docs/outputs.md``).
Rows are plain dicts keyed by column name; missing values are NaN (numbers)
or empty strings (text).
"""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np

from astropy.io.fits.verify import VerifyWarning

from tumble._io import atomic_path, strip_compression
from tumble.display import relative_paths
from tumble.exceptions import TumbleError
from tumble.schema import RESULT_FIELDS, STATUS_VALUES, Field, SchemaError, coerce, derive, normalise
from tumble.schema import results_row as schema_results_row

__all__ = ["Column", "RESULT_COLUMNS", "COLUMN_NAMES", "STATUS_VALUES", "results_table", "write_results",
           "read_results", "empty_row", "results_row",
           "read_provenance", "make_provenance", "plain_record", "PROVENANCE_KEY"]

# The columns are defined once, in tumble.schema; these names stay for the callers that use them.
Column = Field
RESULT_COLUMNS: tuple[Field, ...] = RESULT_FIELDS
COLUMN_NAMES = tuple(c.name for c in RESULT_COLUMNS)
_BY_NAME = {c.name: c for c in RESULT_COLUMNS}
#: Stored dtype of each column kind (booleans as text so that a missing value stays missing).
_DTYPES = {"str": str, "bool": str, "int": np.int64, "float": np.float64}


def empty_row(object_id: str, status: str = "ok", message: str = "") -> dict:
    """A row with every column present: NaN numbers, empty text, zero counts."""
    try:
        return schema_results_row({}, object_id=str(object_id), status=status, message=message)
    except SchemaError as exc:
        raise TumbleError(str(exc)) from None


def results_row(record: Mapping | None = None, **kw) -> dict:
    """A results row from any verdict-like mapping (:func:`tumble.schema.results_row`); missing keys are
    empty cells, a bad status raises :class:`TumbleError`."""
    try:
        return schema_results_row(record, **kw)
    except SchemaError as exc:
        raise TumbleError(str(exc)) from None


#: First characters that make a spreadsheet read a CSV cell as a formula (OWASP "CSV injection");
#: such text cells are written with a leading apostrophe, which read_results removes again.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
#: CSV cells defused with an apostrophe: formulas, '#' (would read as a comment line) and the apostrophe itself.
_CSV_DEFUSE = _FORMULA_START + ("#", "'")
#: Key of the run's provenance (JSON text: version, route, prior, seed, options) in the table metadata.
PROVENANCE_KEY = "provenance"


def plain_record(value):
    """A JSON-safe, order-stable rendering of an options record (dataclasses, mappings, numbers)."""
    import dataclasses

    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: plain_record(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): plain_record(v) for k, v in sorted(value.items(), key=lambda kv: str(kv[0]))}
    if isinstance(value, (list, tuple)):
        return [plain_record(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return str(value)
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return str(value)


def make_provenance(*, route: str, prior_npa: float, seed: int | None, **options) -> dict:
    """What produced a result, so that ``p_npa`` can be interpreted and the run repeated: the tumble
    version, the route, the prior, the seed and the options that change results (JSON-safe values).
    The one definition used by the survey journal, the results metadata and saved verdicts."""
    from tumble import __version__

    return {"tumble_version": __version__, "route": str(route), "prior_npa": float(prior_npa),
            "seed": None if seed is None else int(seed), **options}


def results_table(rows: Iterable[Mapping], extra_columns: Iterable[str] = (), provenance: Mapping | None = None):
    """An astropy Table in the results schema (plus named extra columns, kept as given).

    Unknown keys in the rows are dropped unless listed in ``extra_columns``. ``provenance``
    (what produced the rows: version, route, prior, seed, options) goes into the metadata as
    JSON text under ``provenance``.
    """
    import astropy.units as u
    from astropy.table import Column as TableColumn
    from astropy.table import Table

    rows = [derive(normalise(r)) for r in rows]
    extra = [c for c in extra_columns if c not in _BY_NAME]
    table = Table()
    for col in RESULT_COLUMNS:
        values = [coerce(col, r.get(col.name)) for r in rows]
        dtype = _DTYPES[col.kind]
        data = np.array(values, dtype=dtype) if values else np.array([], dtype=dtype)
        table[col.name] = TableColumn(data, unit=u.Unit(col.unit) if col.unit else None,
                                      description=col.description)
    for name in extra:
        table[name] = [r.get(name, np.nan) for r in rows]
    table.meta["schema"] = "tumble results v2"
    if provenance:
        table.meta[PROVENANCE_KEY] = json.dumps(dict(provenance), sort_keys=True, default=str)
    table.meta["caution"] = ("Scientific estimates for research use, not operational advice; damping "
                             "timescales rest on an assumed rigidity and quality factor.")
    return table


_FORMATS = {".ecsv": "ascii.ecsv", ".fits": "fits", ".fit": "fits", ".csv": "ascii.csv", ".parquet": "parquet"}


def _table_format(path: Path) -> str:
    ext = Path(strip_compression(path)).suffix.lower()
    if ext not in _FORMATS:
        raise TumbleError(f"{path}: results format from extension '{ext}' unknown "
                          f"(use one of {', '.join(sorted(_FORMATS))})")
    return _FORMATS[ext]


def _portable(table, fmt: str):
    """The table as the format can hold it: UTF-8 bytes for text in FITS (ASCII-only otherwise),
    formula-looking text cells defused in CSV."""
    if fmt not in ("fits", "ascii.csv"):
        return table
    table = table.copy(copy_data=True)
    for name in table.colnames:
        col = table[name]
        if col.dtype.kind != "U":
            continue
        if fmt == "fits":
            table[name] = np.char.encode(np.asarray(col, dtype=str), "utf-8")
            table[name].description = col.description
        else:
            table[name] = [("'" + v) if v.startswith(_CSV_DEFUSE) else v for v in (str(x) for x in col)]
            table[name].description = col.description
    if fmt == "fits":
        table.meta["textenc"] = "UTF-8"
    if fmt == "ascii.csv" and PROVENANCE_KEY in table.meta:  # CSV keeps metadata only as comment lines
        table.meta["comments"] = [f"{PROVENANCE_KEY}: {table.meta[PROVENANCE_KEY]}"]
    return table


def write_results(rows: Iterable[Mapping], path: str | os.PathLike, extra_columns: Iterable[str] = (), *,
                  provenance: Mapping | None = None) -> Path:
    """Write the results catalogue atomically; the format follows the extension (ECSV by default).

    Text is kept whole in every format: FITS text columns are UTF-8 bytes, and CSV cells that a
    spreadsheet would run as a formula (``=``, ``+``, ``-``, ``@``) get a leading apostrophe;
    :func:`read_results` undoes both.
    """
    path = Path(path)
    fmt = _table_format(path)
    if fmt == "parquet":
        from tumble._extras import require

        require("parquet", f"{path}: writing Parquet")
    # no absolute local path in the catalogue: messages name files relative to its folder
    rows = [{**r, "message": relative_paths(r.get("message") or "", path.parent)} for r in rows]
    table = _portable(results_table(rows, extra_columns, provenance), fmt)
    with atomic_path(path) as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore", VerifyWarning)  # the long 'provenance' key becomes a HIERARCH card
        table.write(tmp, format=fmt, overwrite=True, **({"comment": "# "} if fmt == "ascii.csv" else {}))
    return path


def read_provenance(table) -> dict:
    """The provenance recorded in a results table's metadata ({} when there is none)."""
    text = table.meta.get(PROVENANCE_KEY) or table.meta.get(PROVENANCE_KEY.upper())
    for line in table.meta.get("comments", []) if not text else []:
        if str(line).startswith(f"{PROVENANCE_KEY}: "):
            text = str(line)[len(PROVENANCE_KEY) + 2:]
    if not text:
        return {}
    try:
        value = json.loads(text) if isinstance(text, str) else dict(text)
    except (TypeError, ValueError):
        return {}
    return value if isinstance(value, dict) else {}


def _leading_comments(path: Path) -> list[str]:
    import gzip

    opener = gzip.open if str(path).lower().endswith(".gz") else open
    out = []
    with opener(path, "rt", encoding="utf-8", errors="replace") as fh:
        for line in fh:
            if not line.startswith("#"):
                break
            out.append(line[1:].strip())
    return out


def _restore_text(table, fmt: str):
    for name in table.colnames:
        col = table[name]
        if col.dtype.kind == "S":
            table[name] = np.char.decode(np.asarray(col), "utf-8", errors="replace")
            table[name].description = col.description
        elif fmt == "ascii.csv" and col.dtype.kind == "U":
            values = [str(v) for v in col]
            if any(v.startswith("'") and v[1:].startswith(_CSV_DEFUSE) for v in values):
                table[name] = [v[1:] if v.startswith("'") and v[1:].startswith(_CSV_DEFUSE) else v for v in values]
                table[name].description = col.description
    return table


def _read_parquet_with_pyarrow(path: Path):
    """Read a Parquet table written by astropy with pyarrow alone, units and descriptions from
    astropy's own header (the ``table_meta_yaml`` schema metadata)."""
    from astropy.table import Column as TableColumn
    from astropy.table import Table
    from astropy.table import meta as table_meta

    try:
        import pyarrow.parquet as pq

        pt = pq.read_table(path)
    except Exception as exc:
        raise TumbleError(f"{path}: unreadable Parquet table ({str(exc).splitlines()[0][:200]})") from None
    md = {k.decode("utf-8"): v.decode("utf-8") for k, v in (pt.schema.metadata or {}).items()}
    header = table_meta.get_header_from_yaml(md["table_meta_yaml"].split("\n")) if "table_meta_yaml" in md else {}
    info = {c["name"]: c for c in header.get("datatype", [])}
    table = Table(meta=header.get("meta", {}))
    for name in pt.column_names:
        data = pt.column(name).to_numpy(zero_copy_only=False)
        if data.dtype == object:
            data = data.astype(str)
        c = info.get(name, {})
        table[name] = TableColumn(data, unit=c.get("unit"), description=c.get("description"))
    return table


def read_results(path: str | os.PathLike):
    """Read a results catalogue written by :func:`write_results` (checks the required columns)."""
    from astropy.table import Table

    path = Path(path)
    if not path.exists():
        raise TumbleError(f"{path}: no such file")
    fmt = _table_format(path)
    if fmt == "parquet":
        from tumble._extras import require

        require("parquet", f"{path}: reading Parquet")
    try:
        table = Table.read(path, format=fmt, **({"comment": "#"} if fmt == "ascii.csv" else {}))
    except TumbleError:
        raise
    except ModuleNotFoundError as exc:
        if fmt != "parquet" or "pandas" not in str(exc):
            raise
        table = _read_parquet_with_pyarrow(path)  # astropy's Parquet reader wants pandas; pyarrow suffices
    except Exception as exc:
        raise TumbleError(f"{path}: unreadable results table ({str(exc).splitlines()[0][:200]})") from None
    table = _restore_text(table, fmt)
    if fmt == "ascii.csv" and "comments" not in table.meta:  # the CSV reader drops the comment lines
        table.meta["comments"] = _leading_comments(path)
    missing = [c for c in ("object", "status", "rotation") if c not in table.colnames]
    if missing:
        raise TumbleError(f"{path}: not a results table (missing column {', '.join(missing)})")
    return table
