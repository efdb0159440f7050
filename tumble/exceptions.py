"""Exception and warning types of tumble.

The library raises these; only the command line turns them into one-line
messages and exit codes (0 success, 2 bad input, 1 internal error).
"""

from __future__ import annotations

__all__ = [
    "TumbleError",
    "PhotometryError",
    "GeometryError",
    "TumbleWarning",
    "DataWarning",
    "ConvergenceWarning",
    "MissingExtraError",
]


class TumbleError(Exception):
    """Base class of every error tumble raises on purpose."""


class PhotometryError(TumbleError, ValueError):
    """Bad photometry input.

    The message names the file, the row or column, and the problem, in one line,
    e.g. ``lc.csv: row 17, column 'mag': 'abc' is not a number``.
    """


class GeometryError(TumbleError, ValueError):
    """Bad or inconsistent observing geometry or orbital elements."""


class TumbleWarning(UserWarning):
    """Base class of tumble's warnings."""


class DataWarning(TumbleWarning):
    """Input data were altered in a way the user should know about."""


class ConvergenceWarning(TumbleWarning):
    """A numerical method (solver, sampler) did not meet its convergence criteria."""


class MissingExtraError(TumbleError):
    """A feature needs an optional dependency that is not installed.

    The message names the feature and the extra to install, in one line, e.g.
    ``writing Parquet needs the optional package 'pyarrow': pip install 'tumble[parquet]'``.
    """
