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

from tumble._io import strip_compression
from tumble.exceptions import PhotometryError

__all__ = ["ExtraFormat", "EXTRA_FORMATS", "find_reader", "decode_text", "missing_extra"]

#: Parquet files begin (and end) with these four bytes (Apache Parquet file format specification).
PARQUET_MAGIC = b"PAR1"


def missing_extra(what: str, extra: str, module: str) -> PhotometryError:
    """The one-line error for a feature whose optional dependency is not installed."""
    return PhotometryError(f"{what} needs the optional package '{module}': pip install 'tumble[{extra}]'")


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
    try:
        import pyarrow  # noqa: F401
    except ImportError:
        raise missing_extra(f"{src}: reading Parquet", "parquet", "pyarrow") from None
    from astropy.table import Table

    from tumble.adapters import raw_table
    from tumble.photometry import ReadOptions

    try:
        table = Table.read(io.BytesIO(data), format="parquet")
    except Exception as exc:
        msg = (str(exc).strip().splitlines() or [type(exc).__name__])[0][:200]
        raise PhotometryError(f"{src}: unreadable Parquet ({msg})") from None
    raw, _ = raw_table(table, ReadOptions(), source=src)
    raw.format = "parquet"
    return raw


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
