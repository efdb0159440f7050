"""The results catalogue: one row per object, stable column names, units in the header.

The schema is the contract between ``tumble classify``, ``tumble survey``,
``tumble relax --sample`` and ``tumble report`` (see ``docs/outputs.md``).
Rows are plain dicts keyed by column name; missing values are NaN (numbers)
or empty strings (text).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np

from tumble._io import atomic_path, strip_compression
from tumble.exceptions import TumbleError

__all__ = ["Column", "RESULT_COLUMNS", "COLUMN_NAMES", "STATUS_VALUES", "results_table", "write_results",
           "read_results", "empty_row"]


@dataclass(frozen=True)
class Column:
    """One results column: name, kind ('str', 'int' or 'float'), unit (astropy string or ''), meaning."""

    name: str
    kind: str
    unit: str
    description: str


RESULT_COLUMNS: tuple[Column, ...] = (
    Column("object", "str", "", "object designation"),
    Column("status", "str", "", "ok, error or skipped"),
    Column("message", "str", "", "one-line error or warning summary"),
    Column("n_points", "int", "", "points used"),
    Column("n_sessions", "int", "", "sessions with their own zero-point"),
    Column("span_d", "float", "d", "time span of the data"),
    Column("rotation", "str", "", "PA, NPA or undecided"),
    Column("mode", "str", "", "SAM, LAM or none"),
    Column("p_npa", "float", "", "posterior probability of NPA rotation"),
    Column("ln_bayes_factor", "float", "", "natural log of the Bayes factor NPA:PA"),
    Column("grade", "str", "", "confidence grade of the verdict"),
    Column("period_h", "float", "h", "PA rotation period"),
    Column("period_h_err", "float", "h", "1-sigma uncertainty of period_h"),
    Column("p_psi_h", "float", "h", "NPA rotation period P_psi (median)"),
    Column("p_psi_h_lo", "float", "h", "P_psi, lower end of the 68% interval"),
    Column("p_psi_h_hi", "float", "h", "P_psi, upper end of the 68% interval"),
    Column("p_phi_h", "float", "h", "NPA precession period P_phi (median)"),
    Column("p_phi_h_lo", "float", "h", "P_phi, lower end of the 68% interval"),
    Column("p_phi_h_hi", "float", "h", "P_phi, upper end of the 68% interval"),
    Column("p1_h", "float", "h", "strongest light-curve period"),
    Column("p2_h", "float", "h", "second light-curve period (two-period fit)"),
    Column("amplitude_mag", "float", "mag", "peak-to-peak light-curve amplitude"),
    Column("tau_damp_gyr", "float", "Gyr", "damping timescale (median; an order-of-magnitude estimate)"),
    Column("tau_damp_gyr_lo", "float", "Gyr", "damping timescale, lower end of the 68% interval"),
    Column("tau_damp_gyr_hi", "float", "Gyr", "damping timescale, upper end of the 68% interval"),
    Column("runtime_s", "float", "s", "wall time spent on the object"),
)
COLUMN_NAMES = tuple(c.name for c in RESULT_COLUMNS)
STATUS_VALUES = ("ok", "error", "skipped")
_BY_NAME = {c.name: c for c in RESULT_COLUMNS}


def empty_row(object_id: str, status: str = "ok", message: str = "") -> dict:
    """A row with every column present: NaN numbers, empty text, zero counts."""
    if status not in STATUS_VALUES:
        raise TumbleError(f"status must be one of {', '.join(STATUS_VALUES)}, not '{status}'")
    row = {}
    for c in RESULT_COLUMNS:
        row[c.name] = "" if c.kind == "str" else (0 if c.kind == "int" else np.nan)
    row.update(object=str(object_id), status=status, message=" ".join(str(message).split()))
    return row


def _coerce(col: Column, value):
    if col.kind == "str":
        return "" if value is None else str(value)
    if col.kind == "int":
        try:
            return int(value)
        except (TypeError, ValueError):
            return 0
    try:
        return float(value)
    except (TypeError, ValueError):
        return np.nan


def results_table(rows: Iterable[Mapping], extra_columns: Iterable[str] = ()):
    """An astropy Table in the results schema (plus named extra columns, kept as given).

    Unknown keys in the rows are dropped unless listed in ``extra_columns``.
    """
    import astropy.units as u
    from astropy.table import Column as TableColumn
    from astropy.table import Table

    rows = list(rows)
    extra = [c for c in extra_columns if c not in _BY_NAME]
    table = Table()
    for col in RESULT_COLUMNS:
        values = [_coerce(col, r.get(col.name)) for r in rows]
        dtype = {"str": str, "int": np.int64, "float": np.float64}[col.kind]
        data = np.array(values, dtype=dtype) if values else np.array([], dtype=dtype)
        table[col.name] = TableColumn(data, unit=u.Unit(col.unit) if col.unit else None,
                                      description=col.description)
    for name in extra:
        table[name] = [r.get(name, np.nan) for r in rows]
    table.meta["schema"] = "tumble results v1"
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
    if fmt == "parquet":
        from tumble._extras import require

        require("parquet", f"{path}: writing Parquet")
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
    if fmt == "parquet":
        from tumble._extras import require

        require("parquet", f"{path}: reading Parquet")
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
