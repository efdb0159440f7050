"""File formats read beside the core text/ECSV/FITS/VOTable readers: ALCDEF and Parquet.

A small registry: each entry says how to recognise its files (by content
first, then by name) and how to turn the bytes into raw columns.
:func:`tumble.photometry.read_table` asks :func:`find_reader` before its own
sniffing, so that adding a format touches only this module.
"""

from __future__ import annotations

import io
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from tumble._io import strip_compression
from tumble.exceptions import PhotometryError

__all__ = ["ExtraFormat", "EXTRA_FORMATS", "find_reader", "decode_text"]

#: Parquet files begin (and end) with these four bytes (Apache Parquet file format specification).
PARQUET_MAGIC = b"PAR1"


def decode_text(src: str, data: bytes, encoding: str | None) -> str:
    """Bytes of a text file as str: UTF-8 (with or without BOM) unless ``encoding`` is given."""
    enc = encoding or "utf-8-sig"
    try:
        return data.decode(enc)
    except UnicodeDecodeError as exc:
        name = "UTF-8" if encoding is None else encoding
        hint = "; binary file? or give --encoding (e.g. latin-1)" if encoding is None else ""
        raise PhotometryError(f"{src}: not {name} text (undecodable byte at offset {exc.start}){hint}") from None


def _sniff_alcdef(path: Path, data: bytes) -> bool:
    head = data[:4096].lstrip(b"\xef\xbb\xbf")
    from tumble.alcdef import looks_like_alcdef

    return looks_like_alcdef(head.decode("latin-1"))


def _read_alcdef(src: str, data: bytes, encoding: str | None):
    from tumble.alcdef import read_alcdef

    return read_alcdef(decode_text(src, data, encoding), src)


def _sniff_parquet(path: Path, data: bytes) -> bool:
    return data[:4] == PARQUET_MAGIC


def _read_parquet(src: str, data: bytes, encoding: str | None):
    from tumble._extras import require

    require("parquet", f"{src}: reading Parquet", PhotometryError)
    import pyarrow.parquet as pq

    from tumble.adapters import raw_table
    from tumble.photometry import ReadOptions

    try:
        table = pq.read_table(io.BytesIO(data))
    except Exception as exc:
        msg = (str(exc).strip().splitlines() or [type(exc).__name__])[0][:200]
        raise PhotometryError(f"{src}: unreadable Parquet ({msg})") from None
    raw, _ = raw_table(_with_astropy_units(table), ReadOptions(), source=src)
    raw.format = "parquet"
    return raw


def _with_astropy_units(pt):
    """A pyarrow table as an astropy Table, with the units astropy's writer stored (``table_meta_yaml``).

    astropy's own Parquet reader needs pandas; pyarrow alone suffices here.
    """
    from astropy.table import Column, Table
    from astropy.table import meta as table_meta

    md = {k.decode("utf-8"): v.decode("utf-8") for k, v in (pt.schema.metadata or {}).items()}
    try:
        header = (table_meta.get_header_from_yaml(md["table_meta_yaml"].split("\n"))
                  if "table_meta_yaml" in md else {})
    except Exception:  # a foreign or damaged header: columns without units
        header = {}
    info = {c["name"]: c for c in header.get("datatype", [])}
    table = Table(meta=header.get("meta", {}))
    for name in pt.column_names:
        values = pt.column(name).to_numpy(zero_copy_only=False)
        if values.dtype == object:
            values = np.array(["" if v is None else str(v) for v in values], dtype=object)
        table[name] = Column(values, unit=info.get(name, {}).get("unit"))
    return table


@dataclass(frozen=True)
class ExtraFormat:
    """A file format read by this module.

    Attributes
    ----------
    name : str
    extensions : tuple of str
        File name endings (lower case, compression stripped) that select it when the content is unclear.
    sniff : callable (path, bytes) -> bool
        True when the content is of this format.
    read : callable (source, bytes, encoding) -> raw table
    """

    name: str
    extensions: tuple[str, ...]
    sniff: Callable[[Path, bytes], bool]
    read: Callable


#: Registry of the extra formats, tried in order.
EXTRA_FORMATS: dict[str, ExtraFormat] = {
    "parquet": ExtraFormat("parquet", (".parquet", ".parq", ".pq"), _sniff_parquet, _read_parquet),
    "alcdef": ExtraFormat("alcdef", (".alcdef",), _sniff_alcdef, _read_alcdef),
}


def find_reader(path: Path, data: bytes) -> ExtraFormat | None:
    """The extra format of a file's content (or, failing that, of its name), or None."""
    for fmt in EXTRA_FORMATS.values():
        if fmt.sniff(path, data):
            return fmt
    ext = Path(strip_compression(path)).suffix.lower()
    for fmt in EXTRA_FORMATS.values():
        if ext in fmt.extensions:
            return fmt
    return None
