"""Numeric time formats and the range of values each can plausibly hold.

A light curve's times are days in a named format (JD or MJD). A number that
cannot be a date of asteroid photometry in that format (an MJD read as a JD
lands in 4500 BC) is refused with a one-line message instead of being
converted into a wrong epoch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["NumericTimeFormat", "NUMERIC_TIME_FORMATS", "implausible_time"]

#: JD of 1800-01-01 (astropy: Time("1800-01-01").jd): no asteroid was observed before 1801.
JD_EARLIEST = 2_378_496.5
#: JD of 2200-01-01: a generous end for planned surveys and simulated futures.
JD_LATEST = 2_524_593.5
#: MJD = JD - 2400000.5 (the IAU definition of the Modified Julian Date, common practice).
MJD_OFFSET_D = 2_400_000.5


@dataclass(frozen=True)
class NumericTimeFormat:
    """A numeric time format: name, offset from JD, and the plausible range of its values.

    Attributes
    ----------
    name : str
        Format name as used by ``--time-format`` and astropy (``jd``, ``mjd``).
    jd_offset_d : float
        JD = value + ``jd_offset_d``, days.
    """

    name: str
    jd_offset_d: float

    @property
    def lowest(self) -> float:
        """Smallest plausible value, days in this format (1800-01-01)."""
        return JD_EARLIEST - self.jd_offset_d

    @property
    def highest(self) -> float:
        """Largest plausible value, days in this format (2200-01-01)."""
        return JD_LATEST - self.jd_offset_d


#: Registry of the numeric time formats (``iso`` strings are checked by astropy instead).
NUMERIC_TIME_FORMATS: dict[str, NumericTimeFormat] = {
    "jd": NumericTimeFormat("jd", 0.0),
    "mjd": NumericTimeFormat("mjd", MJD_OFFSET_D),
}


def _year(jd: float) -> str:
    # Julian years from J2000.0 (JD 2451545.0, 365.25 d): good to a year, enough for a message.
    return f"{2000.0 + (jd - 2_451_545.0) / 365.25:.0f}"


def implausible_time(values, fmt: str) -> tuple[int, str] | None:
    """The first value that cannot be a time of asteroid photometry in ``fmt``, with the reason.

    Parameters
    ----------
    values : array_like of float
        Times in the format ``fmt``, days; NaN values are skipped.
    fmt : str
        Format name; formats not in :data:`NUMERIC_TIME_FORMATS` are not checked.

    Returns
    -------
    (int, str) or None
        Index of the first value outside the plausible range and a one-line reason
        (naming the other format when the value fits it), or None when every value fits.
    """
    spec = NUMERIC_TIME_FORMATS.get(fmt)
    if spec is None:
        return None
    v = np.asarray(values, dtype=float)
    bad = np.flatnonzero(np.isfinite(v) & ((v < spec.lowest) | (v > spec.highest)))
    if bad.size == 0:
        return None
    i = int(bad[0])
    x = float(v[i])
    others = [o.name for o in NUMERIC_TIME_FORMATS.values() if o.name != fmt and o.lowest <= x <= o.highest]
    hint = f"; is it {others[0].upper()}? give the time format {others[0]}" if others else ""
    n = int(bad.size)
    return i, (f"{x:.6f} is not a plausible {fmt.upper()} (year {_year(x + spec.jd_offset_d)}; "
               f"expected {spec.lowest:.0f}..{spec.highest:.0f} for 1800..2200){hint}"
               f" ({n} value{'s' if n != 1 else ''} like this)")
