"""Classifier routes run by the benchmark, and the generic reading of what they return.

A route is a small record (:class:`Route`) in :data:`ROUTES`: a function of a light curve and a seed
that returns whatever the classifier returns (a ``Verdict``, a tuple ``(Verdict, EvidenceResult,
fit)``, or a record with ``to_dict``). :func:`decision_statistics` flattens that into one flat
dictionary without naming any field, so that fields the classifier gains later flow into the
benchmark's table unchanged. The verdict's own keys stay at the top level; the evidence's keys get
the prefix ``ev.``; nested dictionaries are joined with dots.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields, is_dataclass

import numpy as np

__all__ = ["Route", "ROUTES", "decision_statistics", "flatten", "lightcurve_statistics"]


def run_screen(lc, seed):
    """The survey screen (1-D and 2-D scans, -Delta BIC / 2)."""
    from tumble.classify import screen

    return screen(lc)


def run_evidence(lc, seed):
    """The frequency-integrated evidence and the decision rules, no physical fit."""
    from tumble.classify import classify

    # the detection limit is not a decision statistic, nor is the dense route's sidereal refit of a PA
    # period (it replaces the period, never the verdict): both skipped to cut the cost per object
    # several-fold (the sparse route's geometry-aware fit is part of its decision and stays)
    return classify(lc, rng=seed, fit_state=False, detection_limit=False, sidereal=False)


def run_sidereal(lc, seed):
    """The evidence route with the dense route's sidereal refit of a PA period (issue 15 item 1)."""
    from tumble.classify import classify

    return classify(lc, rng=seed, fit_state=False, detection_limit=False, sidereal=True)


def run_full(lc, seed):
    """The default route: evidence, decision and the physical fit with sampling."""
    from tumble.classify import classify

    return classify(lc, rng=seed)


@dataclass(frozen=True)
class Route:
    """One way of running the classifier.

    Attributes
    ----------
    name : str
    run : callable
        ``run(lc, seed) -> result``.
    description : str
    """

    name: str
    run: object
    description: str


#: Routes by name (the runner's ``--route`` choices).
ROUTES = {r.name: r for r in (
    Route("screen", run_screen, "tumble.classify.screen"),
    Route("evidence", run_evidence, "tumble.classify.classify(fit_state=False)"),
    Route("sidereal", run_sidereal, "tumble.classify.classify(fit_state=False), sidereal PA refit"),
    Route("full", run_full, "tumble.classify.classify (physical fit sampled)"),
)}


def _scalar(v):
    """A JSON-ready value: numbers, strings, booleans, None; small numeric lists kept; the rest as text."""
    if v is None or isinstance(v, (bool, str)):
        return v
    if isinstance(v, (int, np.integer)):
        return int(v)
    if isinstance(v, (float, np.floating)):
        return float(v)
    if isinstance(v, np.bool_):
        return bool(v)
    if isinstance(v, (list, tuple, np.ndarray)):
        vals = list(v)
        if all(isinstance(x, (int, float, np.integer, np.floating, str, bool)) for x in vals) and len(vals) <= 16:
            return [_scalar(x) for x in vals]
        return None
    return str(v)


def flatten(d: dict, prefix: str = "") -> dict:
    """Flatten nested dictionaries (keys joined with dots); values made JSON-ready (:func:`_scalar`)."""
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(flatten(v, key + "."))
        else:
            s = _scalar(v)
            if s is not None or v is None:
                out[key] = s
    return out


def _as_dict(obj) -> dict:
    if hasattr(obj, "to_dict"):
        return obj.to_dict()
    if is_dataclass(obj):
        return {f.name: getattr(obj, f.name) for f in fields(obj)}
    if isinstance(obj, dict):
        return obj
    return {}


def decision_statistics(result) -> dict:
    """Every statistic a route's result exposes, flat.

    - a tuple ``(verdict, evidence, fit)``: the verdict's keys, the evidence's keys as ``ev.<key>``
      (the fit is not read: its posterior is not a decision statistic);
    - a record whose ``to_dict()`` holds a ``verdict`` dictionary: its keys at the top level, the other
      parts with their names as prefixes;
    - anything else with ``to_dict()`` or dataclass fields: its keys.
    """
    if hasattr(result, "verdict") and hasattr(result, "evidence"):  # tumble.classify.Classification
        out = flatten(_as_dict(result.verdict))
        out.update(flatten(_as_dict(result.evidence), "ev."))
        return out
    if isinstance(result, tuple):
        out = flatten(_as_dict(result[0]))
        if len(result) > 1 and result[1] is not None:
            out.update(flatten(_as_dict(result[1]), "ev."))
        return out
    d = _as_dict(result)
    if isinstance(d.get("verdict"), dict):
        out = flatten(d["verdict"])
        out.update(flatten({k: v for k, v in d.items() if k != "verdict"}))
        return out
    return flatten(d)


def lightcurve_statistics(lc) -> dict:
    """What the data alone say (known to any user): points, span, nights, median error, sparse fraction."""
    t = np.asarray(lc.t, float)
    err = np.asarray(lc.err, float)
    return {"lc.n_points": int(lc.n_points), "lc.span_d": float(lc.span_d),
            "lc.n_nights": int(len(np.unique(np.floor(t - 0.5)))), "lc.median_err_mag": float(np.median(err)),
            "lc.sparse_fraction": float(np.mean(np.asarray(lc.session) < 0)),
            "lc.phase_range_deg": float(np.ptp(lc.phase_deg)) if lc.phase_deg is not None else math.nan}
