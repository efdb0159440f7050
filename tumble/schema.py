"""The one definition of every per-object output column.

Each :class:`Field` names a column once: its kind, unit, description, JSON key (the
column name itself), whether it goes into the results catalogue and into
``verdict.json``, its header in the report's survey table and its display format
(:mod:`tumble.display`). Everything that writes or shows a verdict reads this module:

- the results catalogue (:mod:`tumble.results`: :data:`RESULT_FIELDS`, :func:`results_row`);
- ``verdict.json`` of ``tumble classify`` and of ``tumble survey --keep-objects``
  (:func:`verdict_record`, :func:`dumps_strict`);
- the report's survey table and object page (:data:`REPORT_FIELDS`, :func:`display`);
- the table in ``docs/outputs.md`` (:func:`docs_table`; a test compares them).

The writers tolerate missing keys (an empty cell, ``null`` in JSON), accept the
``Verdict.to_dict()`` spelling of a few keys (:data:`KEY_ALIASES`) and split a
``[median, lo, hi]`` list into ``name``, ``name_lo``, ``name_hi``: intervals are always
``_lo`` / ``_hi`` keys in what we write.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Callable, Iterable, Mapping

__all__ = ["Field", "FIELDS", "FIELD_BY_NAME", "RESULT_FIELDS", "VERDICT_FIELDS", "REPORT_FIELDS", "KEY_ALIASES",
           "STATUS_VALUES", "ROUTE_VALUES", "MODE_VALUES", "SCREEN_FLAG_VALUES", "DERIVED", "SchemaError",
           "empty_value", "coerce", "normalise", "derive", "results_row", "verdict_record", "json_safe", "dumps_strict", "loads_strict",
           "display", "docs_table", "pravec2005_code", "SOLUTION_FIELDS", "solutions_record"]


class SchemaError(ValueError):
    """A value does not fit its column (e.g. an unknown status)."""


#: Allowed statuses of a results row.
STATUS_VALUES = ("ok", "error", "skipped")
#: How a verdict was reached: the full evidence and physical fit, the fast screen, the sparse route.
ROUTE_VALUES = ("full", "evidence", "screen", "sparse", "")
#: NPA mode: SAM, LAM, 'unknown' (NPA but the mode is not decided), empty for PA and undecided.
MODE_VALUES = ("SAM", "LAM", "unknown", "")
#: The screen's flag (the screen never states PA or NPA with a grade).
SCREEN_FLAG_VALUES = ("candidate", "quiet", "unknown", "")


@dataclass(frozen=True)
class Field:
    """One per-object output column.

    Attributes
    ----------
    name : str
        Column name and JSON key.
    kind : {'str', 'int', 'float', 'bool'}
        Stored type. Booleans are JSON ``true``/``false``/``null`` and the text ``true``/``false``/
        empty in tables (so a missing value stays missing in every table format).
    unit : str
        astropy unit string, '' for none.
    description : str
        One line for the docs, the table header and the report.
    results : bool
        A column of the results catalogue.
    verdict : bool
        A key of ``verdict.json``.
    header : str
        Header in the report's survey table ('' = not shown there).
    display : str
        Display format, a key of :data:`tumble.display.FORMATTERS`.
    values : tuple of str
        Allowed values of a text column (empty: free text).
    """

    name: str
    kind: str
    unit: str
    description: str
    results: bool = True
    verdict: bool = True
    header: str = ""
    display: str = "sig4"
    values: tuple = ()


def _f(name, unit, description, header="", display="sig4", **kw):
    return Field(name, "float", unit, description, header=header, display=display, **kw)


def _interval(name, unit, what, header="", display="sig4", **kw):
    """A median with its 68 % interval: three fields."""
    return (_f(name, unit, f"{what} (median)", header, display, **kw),
            _f(f"{name}_lo", unit, f"{what}, lower end of the 68% interval", display=display, **kw),
            _f(f"{name}_hi", unit, f"{what}, upper end of the 68% interval", display=display, **kw))


FIELDS: tuple[Field, ...] = (
    # identity and how the row came about
    Field("object", "str", "", "object designation", header="object", display="text"),
    Field("status", "str", "", "ok, error or skipped", verdict=False, header="status", display="text",
          values=STATUS_VALUES),
    Field("message", "str", "", "one-line error, or the verdict's warnings joined by '; '", verdict=False,
          header="message", display="text"),
    Field("route", "str", "", "how the verdict was reached: full, screen or sparse", header="route",
          display="text", values=ROUTE_VALUES),
    # the data
    Field("n_points", "int", "", "points used", header="points", display="int"),
    Field("n_sessions", "int", "", "sessions with their own zero-point", display="int"),
    _f("span_d", "d", "time span of the data", display="sig3"),
    # the verdict
    Field("rotation", "str", "", "PA, NPA or undecided", header="rotation", display="text",
          values=("PA", "NPA", "undecided", "")),
    Field("mode", "str", "", "NPA mode: SAM, LAM or unknown; empty for PA and undecided", header="mode",
          display="text", values=MODE_VALUES),
    _f("p_npa", "", "posterior probability of NPA rotation at the prior prior_npa (calibrated: of tumbling above "
       "the per-point noise)", "p(NPA)", "probability"),
    _f("prior_npa", "", "prior probability of NPA rotation used for p_npa", "prior", "sig3"),
    _f("ln_bayes_factor", "", "natural log of the Bayes factor NPA:PA (positive favours NPA)", "ln B", "sig3"),
    _f("ln_bayes_factor_err", "", "estimated error of ln_bayes_factor", "ln B err", "sig2"),
    _f("p_npa_model", "", "Bayes' rule on ln_bayes_factor at prior_npa (the shape-free models' own probability, "
       "before calibration)", display="probability"),
    Field("calibrated", "bool", "", "p_npa and the grade come from the calibration map fitted on the simulated "
          "library", display="text"),
    Field("npa_testable", "bool", "", "the data admit an NPA alternative (false: 'NPA not testable on this span')",
          display="text"),
    Field("grade", "str", "", "strength of the evidence for the stated rotation: firm, sound, tentative or none",
          header="grade", display="text", values=("firm", "sound", "tentative", "none", "")),
    Field("grade_uncapped", "str", "", "the grade the evidence alone would give, before caps by the decision rules",
          display="text", values=("firm", "sound", "tentative", "none", "")),
    Field("grade_reason", "str", "", "why the grade is capped or the verdict withheld", results=False,
          display="text"),
    Field("converged", "bool", "", "the physical-model posterior met the sampler's convergence criteria",
          header="converged", display="text"),
    _f("mode_margin", "", "ln L(best NPA mode) - ln L(other NPA mode) of the physical fits", "mode margin",
       "sig2"),
    _f("npa_limit_mag", "mag", "smallest NPA signature (rms of the two-period part) that would have been "
       "detected on these data", "NPA limit", "sig2"),
    Field("screen_flag", "str", "", "the screen's flag: candidate, quiet or unknown (screen route only)",
          header="screen", display="text", values=SCREEN_FLAG_VALUES),
    _f("screen_score", "", "the screen's score (larger: more like a two-period light curve)", "screen score",
       "sig3"),
    Field("npa_code_p2005", "str", "", "our verdict on the NPA reliability scale of Pravec et al. (2005, "
          "Icarus 173, 108): NPA3, NPA2, NPA1 or PAR; empty where the scale does not apply",
          header="P2005 code", display="text", values=("NPA3", "NPA2", "NPA1", "PAR", "")),
    # periods
    _f("period_h", "h", "PA rotation period", "P", "period"),
    _f("period_h_err", "h", "1-sigma uncertainty of period_h", display="sig2"),
    *_interval("p_psi_h", "h", "NPA rotation period P_psi", "P_psi", "period"),
    *_interval("p_phi_h", "h", "NPA precession period P_phi", "P_phi", "period"),
    _f("p1_h", "h", "light-curve period of the component with the larger amplitude", "P1", "period"),
    _f("p2_h", "h", "light-curve period of the second component (two-period fit)", "P2", "period"),
    _f("period_syn_h", "h", "synodic light-curve period as observed (before any sidereal correction)",
       "P_syn", "period"),
    Field("period_kind", "str", "", "what period_h is: sidereal (geometry-aware fit) or synodic (its error "
          "includes the synodic-sidereal difference the phase-angle bisector's motion allows)",
          header="P kind", display="text", values=("sidereal", "synodic", "")),
    _f("period_fap", "", "false-alarm probability of the light-curve period's peak", display="fap"),
    _f("n_cycles", "", "cycles of the longest claimed period covered by the data span", "cycles", "sig3"),
    _f("phase_coverage", "", "fraction of the fold of the longest claimed period covered by data", "coverage",
       "sig2"),
    _f("amplitude_mag", "mag", "peak-to-peak amplitude of the chosen model over the observed phases",
       "amplitude", "sig2"),
    # adequacy of the chosen model
    _f("chi2_dof_chosen", "", "reduced chi-square of the chosen shape-free model at the quoted errors",
       results=False, display="sig3"),
    _f("chi2_dof_rejected", "", "reduced chi-square of the rejected shape-free model at the quoted errors",
       results=False, display="sig3"),
    _f("error_scale_chosen", "", "robust error scale the chosen model needs at the quoted errors", display="sig2"),
    _f("residual_period_h", "h", "strongest period in the chosen model's residuals", results=False,
       display="period"),
    _f("residual_fap", "", "false-alarm probability of the strongest residual period", display="fap"),
    # rotation state
    *_interval("excitation", "", "excitation E/E0 of the NPA state", display="sig3"),
    *_interval("a_over_b", "", "ellipsoid axis ratio a/b", display="sig3"),
    *_interval("b_over_c", "", "ellipsoid axis ratio b/c", display="sig3"),
    *_interval("l_lon_deg", "deg", "ecliptic longitude of the angular momentum", display="sig3"),
    *_interval("l_lat_deg", "deg", "ecliptic latitude of the angular momentum", display="sig3"),
    # the binary hypothesis (eclipses or occultations of a satellite)
    *_interval("p_orb_h", "h", "orbital period of the binary hypothesis", "P_orb", "period"),
    _f("event_depth_mag", "mag", "depth of the deeper mutual event of the binary hypothesis", display="sig2"),
    _f("event_depth2_mag", "mag", "depth of the other mutual event, half an orbit from the deeper one",
       display="sig2"),
    _f("event_width_phase", "", "width of the mutual events, fraction of the orbital period", display="sig2"),
    _f("event_duration_h", "h", "full duration of a mutual event (event_width_phase x p_orb_h)", display="sig2"),
    _f("event_epoch_jd", "d", "time of mid-event of the deeper mutual event, JD in the light curve's time scale",
       display="text"),
    _f("p_primary_h", "h", "light-curve period of the primary under the binary hypothesis (the fundamental "
       "removed before the events are folded on p_orb_h)", display="period"),
    Field("binary_candidate", "bool", "", "the screen's second period behaves like mutual events (narrow dips half "
          "an orbit apart, flat between): a binary candidate for the full route (screen route only; its orbital "
          "period in p_orb_h)", header="binary?", display="text"),
    # damping
    *_interval("tau_damp_gyr", "Gyr", "damping timescale (an order-of-magnitude estimate)", "tau", "sig2"),
    # provenance
    Field("evidence_route", "str", "", "how the Bayes factor was computed, in words", results=False,
          display="text"),
    Field("seed", "int", "", "random seed of the run", results=False, display="int"),
    _f("runtime_s", "s", "wall time spent on the object", verdict=False, display="sig2"),
)

FIELD_BY_NAME: dict[str, Field] = {f.name: f for f in FIELDS}
RESULT_FIELDS: tuple[Field, ...] = tuple(f for f in FIELDS if f.results)
VERDICT_FIELDS: tuple[Field, ...] = tuple(f for f in FIELDS if f.verdict)
REPORT_FIELDS: tuple[Field, ...] = tuple(f for f in FIELDS if f.header)

#: The entries of the ``solutions`` list of ``verdict.json`` (every acceptable tumbling solution,
#: best first; :class:`tumble.classify.solutions.Solution`); not results columns.
SOLUTION_FIELDS: tuple[Field, ...] = (
    Field("mode", "str", "", "NPA mode of the solution: SAM or LAM", display="text", values=("SAM", "LAM")),
    _f("p_psi_h", "h", "rotation period P_psi at the solution's optimum", "P_psi", "period"),
    _f("p_psi_h_lo", "h", "P_psi, lower end of the 68% interval (Laplace approximation at this solution, widened to cover the other directions of L that fit as well; empty where its sigma exceeds half the period)",
       display="period"),
    _f("p_psi_h_hi", "h", "P_psi, upper end of the 68% interval (Laplace approximation at this solution, widened to cover the other directions of L that fit as well; empty where its sigma exceeds half the period)",
       display="period"),
    _f("p_phi_h", "h", "precession period P_phi at the solution's optimum", "P_phi", "period"),
    _f("p_phi_h_lo", "h", "P_phi, lower end of the 68% interval (Laplace approximation at this solution, widened to cover the other directions of L that fit as well; empty where its sigma exceeds half the period)",
       display="period"),
    _f("p_phi_h_hi", "h", "P_phi, upper end of the 68% interval (Laplace approximation at this solution, widened to cover the other directions of L that fit as well; empty where its sigma exceeds half the period)",
       display="period"),
    _f("log_likelihood", "", "maximum log-likelihood of the ranking fit (the physical model with the inertia free of the shape), nats", "ln L", "sig4"),
    _f("bic", "", "ranking criterion -2 ln L + k ln N of the ranking fit (Schwarz 1978), nats", "BIC", "sig4"),
    _f("delta_bic", "", "bic minus the best solution's bic (solutions within 10 are listed)", "Delta BIC",
       "sig3"),
    _f("relative_probability", "", "exp(-delta_bic/2) normalised over the listed solutions", "rel. prob.",
       "probability"),
    Field("n_poles", "int", "", "directions of the angular momentum L that fit as well (its own included); the intervals cover them all",
          header="L poles", display="int"),
    Field("source", "str", "", "the lattice and daily alias the solution was found from", header="found from",
          display="text"),
)


def solutions_record(solutions) -> list:
    """The ``solutions`` list of ``verdict.json``: each entry's :data:`SOLUTION_FIELDS` keys in order,
    strict-JSON values (``null`` when missing)."""
    out = []
    for entry in solutions or ():
        out.append({f.name: _json_value(f, coerce(f, entry.get(f.name)) if f.kind == "str" else entry.get(f.name))
                    for f in SOLUTION_FIELDS})
    return out


#: Keys of ``Verdict.to_dict()`` (and older verdict.json files) spelled otherwise than the columns.
KEY_ALIASES = {"object_id": "object", "state_converged": "converged"}
#: Old ``mode`` spellings: 'none' meant both 'not applicable' and 'unknown'.
_MODE_ALIASES = {"none": "", "None": "", "NONE": ""}


def empty_value(field: Field):
    """The stored 'missing' value of a column: '' for text and booleans, NaN for floats, 0 for counts."""
    return {"str": "", "bool": "", "int": 0, "float": math.nan}[field.kind]


def coerce(field: Field, value):
    """``value`` stored as ``field``'s kind (missing or unparseable -> :func:`empty_value`)."""
    if value is None:
        return empty_value(field)
    if field.kind == "str":
        if isinstance(value, float) and not math.isfinite(value):
            return ""
        return str(value)
    if field.kind == "bool":
        if isinstance(value, str):
            v = value.strip().lower()
            return "true" if v in ("true", "1", "yes") else "false" if v in ("false", "0", "no") else ""
        if isinstance(value, float) and not math.isfinite(value):
            return ""
        return "true" if bool(value) else "false"
    if field.kind == "int":
        try:
            return int(value)
        except (TypeError, ValueError, OverflowError):
            return 0
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def normalise(record: Mapping) -> dict:
    """A verdict or row mapping with the schema's keys: aliases renamed, ``[median, lo, hi]`` lists split
    into ``name``, ``name_lo``, ``name_hi``, numpy scalars made plain, old ``mode`` 'none' -> ''.

    Keys that are not columns are kept as they are (``warnings``, for one).
    """
    out: dict = {}
    for key, value in dict(record).items():
        key = KEY_ALIASES.get(key, key)
        if hasattr(value, "item") and getattr(value, "ndim", 1) == 0:
            value = value.item()
        if isinstance(value, (list, tuple)) and key in FIELD_BY_NAME and f"{key}_lo" in FIELD_BY_NAME:
            vals = list(value) + [None] * 3
            out.setdefault(key, vals[0])
            out.setdefault(f"{key}_lo", vals[1])
            out.setdefault(f"{key}_hi", vals[2])
            continue
        out[key] = value
    if "mode" in out and (out["mode"] is None or isinstance(out["mode"], str)):
        mode = _MODE_ALIASES.get(out["mode"] or "", out["mode"] or "")
        if str(out.get("rotation") or "") == "NPA":
            mode = mode or "unknown"  # NPA without a decided mode
        elif mode == "unknown" or str(out.get("rotation") or "") in ("PA", "undecided"):
            mode = ""  # the mode does not apply
        out["mode"] = mode
    return out


def derive(row: dict) -> dict:
    """Fill the :data:`DERIVED` columns that ``row`` (an ok row or a verdict) leaves empty; returns ``row``."""
    if str(row.get("status") or "ok") != "ok":
        return row
    for name, fn in DERIVED.items():
        if row.get(name) in (None, ""):
            row[name] = fn(row)
    return row


def results_row(record: Mapping | None = None, *, object_id: str | None = None, status: str | None = None,
                message: str | None = None) -> dict:
    """One row of the results catalogue from any verdict-like mapping; missing keys become empty cells.

    Parameters
    ----------
    record : mapping or None
        ``Verdict.to_dict()``, a ``verdict.json`` dict, or a partial row.
    object_id, status, message : str or None
        Override the record's values; ``message`` defaults to the record's warnings joined by '; '.
    """
    rec = normalise(record or {})
    if object_id is not None:
        rec["object"] = object_id
    if status is not None:
        rec["status"] = status
    if message is not None:
        rec["message"] = message
    elif not rec.get("message") and rec.get("warnings"):
        rec["message"] = "; ".join(str(w) for w in rec["warnings"])
    rec.setdefault("status", "ok")
    if rec["status"] not in STATUS_VALUES:
        raise SchemaError(f"status must be one of {', '.join(STATUS_VALUES)}, not '{rec['status']}'")
    rec["message"] = " ".join(str(rec.get("message") or "").split())
    if rec["status"] == "ok":
        derive(rec)
    return {f.name: coerce(f, rec.get(f.name)) for f in RESULT_FIELDS}


def _json_value(field: Field | None, value):
    """A strict-JSON value: NaN/inf -> None, numpy -> Python, '' booleans -> None."""
    if hasattr(value, "item") and getattr(value, "ndim", 1) == 0:
        value = value.item()
    if isinstance(value, (list, tuple)):
        return [_json_value(None, v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if field is not None and field.kind == "bool":
        if value in (None, ""):
            return None
        return coerce(field, value) == "true"
    if field is not None and field.kind == "float" and value is not None:
        x = coerce(field, value)
        return None if not math.isfinite(x) else x
    return value


def verdict_record(record: Mapping, **extra) -> dict:
    """The ``verdict.json`` dictionary: every key of :data:`VERDICT_FIELDS` in order (``null`` when
    missing), then ``warnings`` (a list) and, for a tumbler with a physical fit, ``solutions`` (a list of
    :data:`SOLUTION_FIELDS` records), strict-JSON values only.

    ``extra`` keys override the record (e.g. ``seed=``, ``tau_damp_gyr=``).
    """
    rec = normalise({**dict(record), **extra})
    derive(rec)
    out = {}
    for f in VERDICT_FIELDS:
        v = rec.get(f.name)
        if f.kind in ("str",) and v is not None:
            v = coerce(f, v)
        out[f.name] = _json_value(f, v)
    warnings = rec.get("warnings") or []
    if isinstance(warnings, str):
        warnings = [w for w in warnings.split("; ") if w]
    out["warnings"] = [str(w) for w in warnings]
    if rec.get("solutions"):
        out["solutions"] = solutions_record(rec["solutions"])
    return out


def json_safe(obj):
    """``obj`` made strict-JSON ready: NaN and infinities -> None, numpy scalars and arrays -> Python,
    tuples -> lists, mapping keys -> str; anything else unknown -> its text."""
    if isinstance(obj, Mapping):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if hasattr(obj, "tolist"):  # numpy scalar or array
        return json_safe(obj.tolist())
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if obj is None or isinstance(obj, (bool, int, str)):
        return obj
    return str(obj)


def dumps_strict(obj, **kw) -> str:
    """Strict JSON text of ``obj`` (:func:`json_safe` first; NaN and infinities are not JSON)."""
    return json.dumps(json_safe(obj), allow_nan=False, **kw)


def _refuse_constant(name):
    raise ValueError(f"not strict JSON: bare {name}")


def loads_strict(text: str):
    """``json.loads`` that refuses the non-standard constants NaN, Infinity and -Infinity."""
    return json.loads(text, parse_constant=_refuse_constant)


def display(name: str, value) -> str:
    """``value`` of column ``name`` as shown to a reader (:mod:`tumble.display`)."""
    from tumble.display import format_value

    field = FIELD_BY_NAME.get(name)
    return format_value(field.display if field is not None else "sig4", value)


def docs_table(fields: Iterable[Field] = RESULT_FIELDS) -> str:
    """The Markdown table of the columns (what ``docs/outputs.md`` shows between its markers)."""
    lines = ["| column | unit | JSON | report | meaning |", "| --- | --- | --- | --- | --- |"]
    for f in fields:
        lines.append(f"| `{f.name}` | {f.unit} | {'yes' if f.verdict else 'no'} | {f.header} | {f.description} |")
    return "\n".join(lines)


# ---------------------------------------------------------------------------
# derived columns
# ---------------------------------------------------------------------------
def _finite(v) -> bool:
    try:
        return math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def pravec2005_code(row: Mapping) -> str:
    """Our verdict on the NPA rotation reliability scale of Pravec et al. (2005, Icarus 173, 108).

    The scale (from memory of the paper's definitions): NPA3, NPA reliably detected with both
    periods resolved; NPA2, NPA reliably detected, the second period not resolved; NPA1, NPA
    possibly detected; PAR, principal-axis rotation (no NPA detected). Our mapping: NPA graded
    sound or firm with both light-curve periods -> NPA3, without the second -> NPA2; NPA graded
    tentative or none -> NPA1; PA graded sound or firm -> PAR; everything else (undecided, a weak
    PA, the screen) -> empty. Our grades stay our own; this is a convenience for observers who
    report to that scale.
    """
    rotation, grade = str(row.get("rotation") or ""), str(row.get("grade") or "")
    if str(row.get("route") or "") == "screen":
        return ""
    if rotation == "NPA":
        if grade in ("sound", "firm"):
            both = (_finite(row.get("p_psi_h")) and _finite(row.get("p_phi_h"))) or (
                _finite(row.get("p1_h")) and _finite(row.get("p2_h")))
            return "NPA3" if both else "NPA2"
        return "NPA1"
    if rotation == "PA" and grade in ("sound", "firm"):
        return "PAR"
    return ""


#: Columns computed from the others when a record does not carry them.
def event_duration_h(row: Mapping) -> float:
    """Full duration of a mutual event, hours: ``event_width_phase x p_orb_h`` (NaN without both)."""
    w, p = row.get("event_width_phase"), row.get("p_orb_h")
    return float(w) * float(p) if _finite(w) and _finite(p) else math.nan


DERIVED: dict[str, Callable[[Mapping], object]] = {"npa_code_p2005": pravec2005_code,
                                                   "event_duration_h": event_duration_h}
