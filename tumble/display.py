"""How numbers are shown to a reader: one place for the precision of every printed value.

The CLI, the HTML report and the figures all format through these helpers, so a value
reads the same everywhere and never carries more digits than it can defend:

- probabilities as ``"< 0.001"`` / ``"> 0.999"`` at the ends (:func:`format_probability`);
- false-alarm probabilities below ``1e-10`` as ``"< 1e-10"`` (:func:`format_fap`);
- damping times to two significant figures with their interval (:func:`format_damping_gyr`);
- a value with its error rounded to the error's two significant figures (:func:`format_value_err`);
- no unit ``"1"`` for ratios (:func:`unit_label`).

Every helper returns ``"-"`` for a missing (None, NaN or infinite) value. Nothing here
computes science; the formatters are registered in :data:`FORMATTERS` by the names that
the results schema (:mod:`tumble.schema`) gives each column.
"""

from __future__ import annotations

import math
import os
import re
from typing import Callable

__all__ = ["MISSING", "PROBABILITY_FLOOR", "FAP_FLOOR", "DAMPING_DIGITS", "FORMATTERS", "as_float", "is_missing",
           "format_sig", "format_probability", "format_fap", "format_value_err", "format_interval",
           "format_damping_gyr", "format_period_h", "unit_label", "format_value", "relative_paths"]

#: What a missing value looks like in every table and text.
MISSING = "-"
#: Probabilities closer than this to 0 or 1 are shown as a bound: the calibration of p(NPA) is no better
#: than a few per cent (docs/validation-classify.md), so more digits would claim what is not known.
PROBABILITY_FLOOR = 1e-3
#: False-alarm probabilities below this are shown as a bound: they rest on the far Gaussian tail, which
#: real photometric errors (outliers, nightly zero-points) do not follow (common practice).
FAP_FLOOR = 1e-10
#: Significant figures of a damping time: the rigidity mu Q behind it is uncertain by an order of magnitude.
DAMPING_DIGITS = 2
#: Significant figures kept of an error when a value is rounded to it (common practice).
ERROR_DIGITS = 2


def as_float(value) -> float:
    """``value`` as a float, NaN when it is missing or not a number (bools are not numbers here)."""
    if value is None or isinstance(value, (bool, str, bytes, list, tuple, dict)):
        if isinstance(value, str):
            try:
                return float(value)
            except ValueError:
                return math.nan
        return math.nan
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def is_missing(value) -> bool:
    """True for None, NaN, infinities and non-numbers."""
    return not math.isfinite(as_float(value))


def format_sig(value, digits: int = 3) -> str:
    """``value`` to ``digits`` significant figures (``'-'`` when missing)."""
    x = as_float(value)
    if not math.isfinite(x):
        return MISSING
    return f"{x:.{int(digits)}g}"


def format_probability(p) -> str:
    """A probability: three decimals, ``'< 0.001'`` / ``'> 0.999'`` beyond :data:`PROBABILITY_FLOOR`."""
    x = as_float(p)
    if not math.isfinite(x):
        return MISSING
    if x < PROBABILITY_FLOOR:
        return f"< {PROBABILITY_FLOOR:g}"
    if x > 1.0 - PROBABILITY_FLOOR:
        return f"> {1.0 - PROBABILITY_FLOOR:g}"
    return f"{x:.3f}"


def format_fap(p) -> str:
    """A false-alarm probability: two significant figures, ``'< 1e-10'`` below :data:`FAP_FLOOR`."""
    x = as_float(p)
    if not math.isfinite(x):
        return MISSING
    if x < FAP_FLOOR:
        return f"< {FAP_FLOOR:.0e}"
    if x >= 0.01:
        return f"{x:.2f}"
    return f"{x:.2g}"


def _decimals_for(err: float, digits: int = ERROR_DIGITS) -> int:
    """Decimal places that keep ``digits`` significant figures of ``err`` (may be negative)."""
    return int(digits - 1 - math.floor(math.log10(abs(err))))


def format_value_err(value, err, *, digits: int = ERROR_DIGITS, fallback_digits: int = 5) -> str:
    """``'8.1534 +- 0.0012'``: the value rounded to the last digit its error keeps (two significant
    figures of the error); without an error ``fallback_digits`` significant figures."""
    x, e = as_float(value), as_float(err)
    if not math.isfinite(x):
        return MISSING
    if not (math.isfinite(e) and e > 0):
        return format_sig(x, fallback_digits)
    dec = _decimals_for(e, digits)
    if dec >= 0:
        return f"{x:.{dec}f} +- {e:.{dec}f}"
    scale = 10.0 ** (-dec)
    return f"{round(x / scale) * scale:.0f} +- {round(e / scale) * scale:.0f}"


def format_interval(lo, hi, digits: int = 3, *, level: str = "68%") -> str:
    """``'0.21 .. 0.98 (68%)'`` or ``'-'`` when either end is missing."""
    if is_missing(lo) or is_missing(hi):
        return MISSING
    return f"{format_sig(lo, digits)} .. {format_sig(hi, digits)} ({level})"


def format_damping_gyr(tau, lo=None, hi=None) -> str:
    """A damping time to :data:`DAMPING_DIGITS` significant figures with its 68 % interval, in Gyr."""
    if is_missing(tau):
        return MISSING
    text = f"{format_sig(tau, DAMPING_DIGITS)} Gyr"
    if not (is_missing(lo) or is_missing(hi)):
        text += f" (68%: {format_sig(lo, DAMPING_DIGITS)} .. {format_sig(hi, DAMPING_DIGITS)})"
    return text


def format_period_h(period, err=None, lo=None, hi=None) -> str:
    """A period in hours: rounded to its error when there is one, else to the width of its interval,
    else six significant figures."""
    p = as_float(period)
    if not math.isfinite(p):
        return MISSING
    e = as_float(err)
    if not (math.isfinite(e) and e > 0):
        a, b = as_float(lo), as_float(hi)
        if math.isfinite(a) and math.isfinite(b) and b > a:
            e = 0.5 * (b - a)
    if math.isfinite(e) and e > 0:
        dec = max(_decimals_for(e), 0)
        return f"{p:.{dec}f}"
    return format_sig(p, 6)


def unit_label(unit) -> str:
    """The unit as shown to a reader: empty for dimensionless quantities (never ``'1'``)."""
    text = "" if unit is None else str(unit).strip()
    return "" if text in ("", "1", "dimensionless", "dimensionless_unscaled") else text


def _text(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float) and not math.isfinite(value):
        return ""
    if isinstance(value, bool):
        return "yes" if value else "no"
    return str(value)


def _int(value) -> str:
    x = as_float(value)
    return MISSING if not math.isfinite(x) else str(int(round(x)))


#: Display formats by name (the ``display`` of a :class:`tumble.schema.Field`).
FORMATTERS: dict[str, Callable] = {
    "text": _text,
    "int": _int,
    "probability": format_probability,
    "fap": format_fap,
    "sig2": lambda v: format_sig(v, 2),
    "sig3": lambda v: format_sig(v, 3),
    "sig4": lambda v: format_sig(v, 4),
    "period": format_period_h,
}


def format_value(display: str, value) -> str:
    """Format ``value`` by the display format named ``display`` (a key of :data:`FORMATTERS`)."""
    try:
        fn = FORMATTERS[display]
    except KeyError:
        raise KeyError(f"unknown display format '{display}' (known: {', '.join(FORMATTERS)})") from None
    return fn(value)


#: An absolute POSIX path in running text: a '/' after a space, quote, bracket or start of text, then
#: at least two path components (so '1/2', 'km/s' and '</td>' are left alone).
_ABS_PATH = re.compile(r"(?:(?<=[\s\"'(\[>=,;])|^)/(?:[\w.@+~-]+/)+[\w.@+~-]*")


#: A path is shown relative to the output folder when it climbs at most this many levels above it (the
#: output folder's own tree: report pages sit two levels below the report's root); further away only
#: its file name is shown, since a long '../../..' chain would spell out the user's folders again.
MAX_PARENT_LEVELS = 3


def relative_paths(text: str, base) -> str:
    """``text`` with every absolute local path rewritten relative to the folder ``base``, or to its file
    name when it lies far outside (outputs must not show where the user keeps their files)."""
    base = os.path.abspath(os.fspath(base))

    def rel(m: re.Match) -> str:
        path = m.group(0)
        try:
            out = os.path.relpath(path, base)
        except ValueError:
            return os.path.basename(path)
        ups = out.split(os.sep).count("..")
        return out if ups <= MAX_PARENT_LEVELS else os.path.basename(path.rstrip("/")) or path

    return _ABS_PATH.sub(rel, str(text))
