"""Small file helpers shared by the readers and writers (no science here)."""

from __future__ import annotations

import contextlib
import gzip
import hashlib
import os
import re
import tempfile
import unicodedata
from pathlib import Path
from typing import Iterator

__all__ = ["atomic_path", "atomic_write_text", "strip_compression", "is_gzip_name", "safe_component",
           "write_all", "SAFE_STEM_CHARS"]

#: Longest readable stem of a name built from data, characters; with the hash and any suffix the
#: component stays far below the 255-byte limit of common file systems (common practice).
SAFE_STEM_CHARS = 64
#: Hex digits of the SHA-256 of the original name appended when the name had to be changed
#: (32 bits: two distinct unsafe names of one survey collide with odds ~1e-9 per pair).
SAFE_HASH_CHARS = 8
#: Characters kept as they are: portable on POSIX, Windows and macOS file systems (common practice).
_UNSAFE = re.compile(r"[^A-Za-z0-9._-]+")
#: Names Windows reserves whatever the extension (common practice).
_RESERVED = frozenset({"con", "prn", "aux", "nul"} | {f"com{i}" for i in range(10)} | {f"lpt{i}" for i in range(10)})


def safe_component(name) -> str:
    """A file-system-safe path component for a name that comes from data (an object name).

    A name made only of ``A-Z a-z 0-9 . _ -`` that does not start with ``.`` or
    ``-``, is at most :data:`SAFE_STEM_CHARS` long and is not a reserved device name
    is returned unchanged (``KRN-003`` stays ``KRN-003``). Any other name becomes
    its portable stem plus ``-`` and a short hash of the original text
    (``../../x`` -> ``x-1b2f...``), so it holds no separator, is never ``.``
    or ``..``, is bounded in length and still tells distinct names apart.
    Writers and readers both call this, so a folder written for an object is
    found again by the same name.

    Parameters
    ----------
    name : str
        Any text (object names from files, headers or tables).

    Returns
    -------
    str
        One path component, at most ``SAFE_STEM_CHARS + SAFE_HASH_CHARS + 1`` ASCII characters.
    """
    text = str(name)
    folded = unicodedata.normalize("NFKD", text).encode("ascii", "ignore").decode("ascii")
    stem = _UNSAFE.sub("_", folded).strip("._-")[:SAFE_STEM_CHARS].rstrip("._-")
    if stem and stem == text and stem.lower().split(".")[0] not in _RESERVED:
        return stem
    digest = hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:SAFE_HASH_CHARS]
    return f"{stem or 'object'}-{digest}"


def write_all(fd: int, data: bytes) -> None:
    """``os.write`` until every byte is written (a short write on a full disk raises OSError)."""
    view = memoryview(data)
    while view:
        n = os.write(fd, view)
        if n <= 0:
            raise OSError(f"short write: {n} of {len(view)} bytes written")
        view = view[n:]


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
