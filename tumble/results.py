"""The results catalogue: one row per object, stable column names, units in the header.

The columns are defined once in :mod:`tumble.schema`; the schema is the contract between ``tumble classify``, ``tumble survey``,
``tumble relax --sample`` and ``tumble report`` (see ``docs/outputs.md``).
Rows are plain dicts keyed by column name; missing values are NaN (numbers)
or empty strings (text).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np

from tumble._io import atomic_path, strip_compression
from tumble.display import relative_paths
from tumble.exceptions import TumbleError
from tumble.schema import RESULT_FIELDS, STATUS_VALUES, Field, SchemaError, coerce, derive, normalise
from tumble.schema import results_row as schema_results_row

__all__ = ["Column", "RESULT_COLUMNS", "COLUMN_NAMES", "STATUS_VALUES", "results_table", "write_results",
           "read_results", "empty_row", "results_row"]

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


def results_table(rows: Iterable[Mapping], extra_columns: Iterable[str] = ()):
    """An astropy Table in the results schema (plus named extra columns, kept as given).

    Unknown keys in the rows are dropped unless listed in ``extra_columns``.
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


def write_results(rows: Iterable[Mapping], path: str | os.PathLike, extra_columns: Iterable[str] = ()) -> Path:
    """Write the results catalogue atomically; the format follows the extension (ECSV by default)."""
    path = Path(path)
    fmt = _table_format(path)
    # no absolute local path in the catalogue: messages name files relative to its folder
    rows = [{**r, "message": relative_paths(r.get("message") or "", path.parent)} for r in rows]
    table = results_table(rows, extra_columns)
    with atomic_path(path) as tmp:
        table.write(tmp, format=fmt, overwrite=True)
    return path


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
    try:
        table = Table.read(path, format=fmt)
    except TumbleError:
        raise
    except ModuleNotFoundError as exc:
        if fmt != "parquet" or "pandas" not in str(exc):
            raise
        table = _read_parquet_with_pyarrow(path)  # astropy's Parquet reader wants pandas; pyarrow suffices
    except Exception as exc:
        raise TumbleError(f"{path}: unreadable results table ({str(exc).splitlines()[0][:200]})") from None
    missing = [c for c in ("object", "status", "rotation") if c not in table.colnames]
    if missing:
        raise TumbleError(f"{path}: not a results table (missing column {', '.join(missing)})")
    return table
