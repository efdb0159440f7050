"""Optional dependencies: which extra of ``pyproject.toml`` brings which module.

The core install (numpy, scipy, astropy, emcee, matplotlib, ...) stays light;
Parquet, the Dask cluster route and the catalogue route need extras. A feature
asks :func:`require` before importing, and the user gets one line naming the
extra instead of a traceback.
"""

from __future__ import annotations

import importlib.util

from tumble.exceptions import MissingExtraError

__all__ = ["EXTRAS", "require", "available"]

#: Extra name -> the import names it provides (kept in step with [project.optional-dependencies]).
EXTRAS: dict[str, tuple[str, ...]] = {
    "parquet": ("pyarrow",),
    "cluster": ("dask", "distributed"),
    "catalog": ("dask", "pandas", "pyarrow", "nested_pandas"),
}


def available(extra: str) -> bool:
    """True when every module of ``extra`` can be imported."""
    return all(importlib.util.find_spec(m) is not None for m in EXTRAS[extra])


def require(extra: str, what: str, error: type[Exception] = MissingExtraError) -> None:
    """Raise ``error`` (one line naming ``what`` and the extra) unless ``extra`` is installed.

    Parameters
    ----------
    extra : str
        Key of :data:`EXTRAS`.
    what : str
        The feature, as the start of the message (``"x.parquet: writing Parquet"``).
    error : exception type
        The type raised (a :class:`~tumble.exceptions.TumbleError` subclass).
    """
    missing = [m for m in EXTRAS[extra] if importlib.util.find_spec(m) is None]
    if missing:
        raise error(f"{what} needs the optional package{'s' if len(missing) > 1 else ''} "
                    f"{', '.join(repr(m) for m in missing)}: pip install 'tumble[{extra}]'")
