"""In-memory tables to raw photometry columns: astropy Table/QTable, pandas DataFrame, mappings.

The readers in :mod:`tumble.photometry` interpret raw columns (names -> arrays).
This module turns the objects a notebook user holds into those columns,
so that :func:`tumble.photometry.read_lightcurve` and
:meth:`~tumble.photometry.LightCurve.from_table` accept them like files:

- an astropy ``Time`` column is taken with its own scale (UTC, TT, TDB; other
  scales are converted to TDB by astropy) and becomes JD numbers;
- a ``Quantity`` or a column with a unit is converted by its physical type:
  angles to degrees, lengths to au, times to days, magnitudes stay magnitudes
  (so a phase angle in radians is read as radians);
- pandas ``datetime64`` columns become times in the read options' scale
  (timezone-aware ones are converted to UTC first);
- masked and missing cells become NaN (numbers) or empty strings (text).

Units are stripped here, at the boundary; nothing downstream sees a Quantity.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, replace

import numpy as np

from tumble.exceptions import PhotometryError

__all__ = ["is_table_like", "raw_table", "has_rich_values", "UNIT_TARGETS"]


@dataclass(frozen=True)
class UnitTarget:
    """Where a column with a unit of one physical type is converted to.

    Attributes
    ----------
    physical_type : str
        astropy physical type (``'angle'``, ``'length'``, ``'time'``).
    unit : str
        Unit the values are converted to (ours: deg, au, d).
    canonical : tuple of str
        Our column names that may hold this physical type.
    """

    physical_type: str
    unit: str
    canonical: tuple[str, ...]


#: Physical type -> target unit and the canonical columns that may carry it (units policy of DEVELOPERS.md).
UNIT_TARGETS: dict[str, UnitTarget] = {
    "angle": UnitTarget("angle", "deg", ("phase_deg",)),
    "length": UnitTarget("length", "au", ("r_au", "delta_au")),
    "time": UnitTarget("time", "d", ("time",)),
}
#: Canonical columns in magnitudes: a unit other than mag (or none) there is an error.
_MAG_COLUMNS = ("mag", "err")


def _module(obj) -> str:
    return type(obj).__module__.split(".")[0]


def is_table_like(obj) -> bool:
    """True for an in-memory table this module reads (not a path or a list of paths)."""
    if _module(obj) in ("astropy", "pandas", "pyarrow"):
        return hasattr(obj, "columns") or hasattr(obj, "colnames") or hasattr(obj, "column_names")
    if isinstance(obj, Mapping):
        return True
    return isinstance(obj, np.ndarray) and obj.dtype.names is not None


def has_rich_values(*values) -> bool:
    """True when any value is an astropy Time or Quantity (needs this module's conversion)."""
    return any(_module(v) == "astropy" for v in values if v is not None)


def _source_name(obj) -> str:
    kind = type(obj).__name__
    return f"<{kind}>"


def _columns_of(obj) -> dict:
    """Name -> column object (Series, Column, Quantity, Time, array) of any accepted table."""
    if _module(obj) == "pyarrow":
        return {name: obj.column(name).to_numpy() for name in obj.column_names}
    if hasattr(obj, "colnames"):  # astropy Table / QTable
        return {name: obj[name] for name in obj.colnames}
    if _module(obj) == "pandas":
        return {str(name): obj[name] for name in obj.columns}
    if isinstance(obj, np.ndarray):
        return {name: obj[name] for name in obj.dtype.names}
    return {str(k): v for k, v in obj.items()}


def _time_scale_jd(col) -> tuple[np.ndarray, str]:
    """JD numbers of an astropy Time in its own scale (UTC, TT, TDB) or converted to TDB."""
    t = col if col.scale in ("utc", "tt", "tdb") else col.tdb
    return np.asarray(t.jd1 + t.jd2, dtype=float), t.scale


def _unit_values(src: str, name: str, col) -> tuple[np.ndarray, str | None]:
    """Values of a column with a unit converted by its physical type, and that type (None for mag)."""
    import astropy.units as u

    unit = u.Unit(col.unit)
    values = np.array(getattr(col, "value", col), dtype=float)
    if hasattr(col, "mask"):
        values[np.ma.getmaskarray(col)] = np.nan
    if unit == u.dimensionless_unscaled or unit.physical_type == "dimensionless":
        return values, None
    if str(unit) == "mag" or isinstance(unit, u.MagUnit):
        return values, None
    ptype = str(unit.physical_type)
    if ptype == "unknown":  # unrecognised or unnamed units (e.g. 'JD', 'adu'): the values as given
        return values, None
    target = UNIT_TARGETS.get(ptype)
    if target is None:  # fluxes and everything else: values as given (flux units cancel in ratios)
        return values, ptype
    try:
        return np.asarray(unit.to(target.unit, values), dtype=float), ptype
    except u.UnitsError as exc:  # pragma: no cover - guarded by the physical type
        raise PhotometryError(f"{src}: column '{name}': {exc}") from None


def _plain(src: str, name: str, col, opts) -> tuple[np.ndarray, str | None, str | None]:
    """One column -> (plain array, physical type or None, time scale or None)."""
    mod = _module(col)
    if mod == "astropy":
        from astropy.time import Time

        if isinstance(col, Time):
            jd, scale = _time_scale_jd(col)
            return jd, "timestamp", scale
        if getattr(col, "unit", None) is not None:
            arr, ptype = _unit_values(src, name, col)
            return arr, ptype, None
        mask = np.ma.getmaskarray(col) if hasattr(col, "mask") else None
        arr = _array(np.ma.getdata(col))
        if mask is not None and mask.any():
            arr[mask] = np.nan if arr.dtype.kind == "f" else ""
        return arr, None, None
    if mod == "pandas":
        import pandas as pd

        dtype = col.dtype
        if pd.api.types.is_datetime64_any_dtype(dtype):
            from astropy.time import Time

            if getattr(dtype, "tz", None) is not None:
                col = col.dt.tz_convert("UTC").dt.tz_localize(None)
                scale = "utc"
            else:
                scale = opts.time_scale
            values = col.to_numpy(dtype="datetime64[ns]")
            if np.isnat(values).any():
                i = int(np.flatnonzero(np.isnat(values))[0])
                raise PhotometryError(f"{src}: row {i + 1}, column '{name}': empty time")
            jd, scale = _time_scale_jd(Time(values, format="datetime64", scale=scale))
            return jd, "timestamp", scale
        if pd.api.types.is_bool_dtype(dtype) or pd.api.types.is_numeric_dtype(dtype):
            return col.to_numpy(dtype=float, na_value=np.nan), None, None
        return _array(col.astype(object).where(col.notna(), "").to_numpy()), None, None
    return _array(col), None, None


def _array(values) -> np.ndarray:
    arr = np.asarray(values)
    if arr.dtype.kind in "fiub":
        return arr.astype(float)
    if arr.dtype.kind == "M":  # numpy datetime64: UTC by convention (numpy has no scale)
        from astropy.time import Time

        t = Time(arr, format="datetime64", scale="utc")
        return np.asarray(t.jd1 + t.jd2, dtype=float)
    return np.array(["" if v is None else (v.decode() if isinstance(v, bytes) else str(v)) for v in arr.ravel()],
                    dtype=object)


def raw_table(obj, opts, *, source: str | None = None):
    """An in-memory table as raw photometry columns, with the read options it implies.

    Parameters
    ----------
    obj : astropy Table or QTable, pandas DataFrame, pyarrow Table, mapping of arrays or structured array
        One or several objects' photometry; column names as for files (aliases,
        ``options.columns``).
    opts : tumble.photometry.ReadOptions
        Reading options. A time column held as an astropy ``Time`` or pandas
        ``datetime64`` sets the time format (JD) and scale (the column's own).
    source : str, optional
        Name used in messages (default ``<Table>``, ``<DataFrame>``, ...).

    Returns
    -------
    (raw table, ReadOptions)
        The columns as :func:`tumble.photometry.read_table` would give them for a
        file, and the options with the time format and scale the table implies.

    Raises
    ------
    PhotometryError
        On a column whose unit cannot be the quantity it is mapped to (a length as
        phase angle), a 2-D column mapped to one of ours, or a table without rows.
    """
    from tumble.photometry import _match_columns, _RawTable

    src = source or _source_name(obj)
    try:
        cols_in = _columns_of(obj)
    except Exception as exc:
        raise PhotometryError(f"{src}: cannot read the table's columns ({type(exc).__name__}: {exc})") from None
    if not cols_in:
        raise PhotometryError(f"{src}: table has no columns")
    columns: dict[str, np.ndarray] = {}
    types: dict[str, str | None] = {}
    scales: dict[str, str] = {}
    for name, col in cols_in.items():
        if np.ndim(col) == 0:
            continue  # a scalar in a mapping is not a column
        arr, ptype, scale = _plain(src, name, col, opts)
        if arr.ndim != 1:
            continue  # multidimensional columns are not photometry (as for files)
        columns[name] = arr
        types[name] = ptype
        if scale is not None:
            scales[name] = scale
    if not columns:
        raise PhotometryError(f"{src}: table has no one-dimensional columns")
    lengths = {len(v) for v in columns.values()}
    if len(lengths) != 1:
        raise PhotometryError(f"{src}: columns have different lengths ({', '.join(str(n) for n in sorted(lengths))})")
    if lengths.pop() == 0:
        raise PhotometryError(f"{src}: table has no rows")
    meta = dict(getattr(obj, "meta", None) or {}) if _module(obj) == "astropy" else {}
    raw = _RawTable(source=src, names=list(columns), columns=columns, row_labels=None, meta=meta,
                    format=type(obj).__name__)
    mapping = _match_columns(raw, opts)
    if "time" not in mapping and len(scales) == 1:  # the one Time column is the time
        mapping["time"] = next(iter(scales))
        opts = replace(opts, columns=dict(opts.columns, time=mapping["time"]))
    for canon, name in mapping.items():
        ptype = types.get(name)
        if ptype is None or ptype == "timestamp":
            continue
        target = UNIT_TARGETS.get(ptype)
        allowed = target.canonical if target is not None else ("flux", "flux_err")
        if canon not in allowed:
            raise PhotometryError(f"{src}: column '{name}': a unit of {ptype} cannot be our '{canon}' column "
                                  f"({'mag or no unit' if canon in _MAG_COLUMNS else 'wrong kind of quantity'})")
    tname = mapping.get("time")
    if tname in scales:
        if opts.time_format not in (None, "jd"):
            raise PhotometryError(f"{src}: column '{tname}' holds dates with their own format; "
                                  f"do not give the time format {opts.time_format}")
        opts = replace(opts, time_format="jd", time_scale=scales[tname])
        raw.meta["time_input"] = f"astropy/pandas time objects, scale {scales[tname]}"
    return raw, opts
