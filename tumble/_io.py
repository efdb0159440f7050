"""Small file helpers shared by the readers and writers (no science here)."""

from __future__ import annotations

import contextlib
import gzip
import os
import tempfile
from pathlib import Path
from typing import Iterator

__all__ = ["atomic_path", "atomic_write_text", "strip_compression", "is_gzip_name"]


def is_gzip_name(path: str | os.PathLike) -> bool:
    """True when the file name ends in ``.gz``."""
    return str(path).lower().endswith(".gz")


def strip_compression(path: str | os.PathLike) -> str:
    """File name without a trailing ``.gz`` (``a.csv.gz`` -> ``a.csv``)."""
    name = Path(path).name
    return name[:-3] if name.lower().endswith(".gz") else name


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success.

    Nothing is left half-written: if the body raises, the temporary file is
    removed and ``path`` is untouched. The temporary name keeps the final
    suffixes so that writers which choose the format by extension still work.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    suffix = "".join(path.suffixes[-2:]) if path.suffixes else ""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".tmp" + suffix, dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        tmp_path.unlink()  # writers that refuse to overwrite get a free name
        yield tmp_path
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def atomic_write_text(path: str | os.PathLike, text: str, *, compress: bool | None = None) -> None:
    """Write ``text`` (UTF-8) to ``path`` atomically, gzip-compressed if asked or if the name ends in .gz."""
    if compress is None:
        compress = is_gzip_name(path)
    data = text.encode("utf-8")
    if compress:
        data = gzip.compress(data, mtime=0)
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
