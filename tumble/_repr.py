"""Short text and HTML summaries of tumble's result objects (for ``repr`` and notebooks).

One function per object kind, each reading only public attributes, so that a
class attaches them with two one-line methods::

    def __repr__(self):
        return _repr.verdict_repr(self)

    def _repr_html_(self):
        return _repr.verdict_html(self)

A repr is one line (under about 200 characters); the HTML is a small table of the
same facts. Numbers are rounded for reading; the objects keep full precision.
The numbers are scientific estimates for research use.
"""

from __future__ import annotations

import html
import math

__all__ = ["lightcurve_repr", "lightcurve_html", "scan_repr", "scan_html", "two_period_repr",
           "two_period_html", "verdict_repr", "verdict_html", "classification_repr", "classification_html"]


def _num(x, fmt: str = ".4g", unit: str = "") -> str:
    try:
        x = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(x):
        return "n/a"
    return f"{x:{fmt}}{(' ' + unit) if unit else ''}"


def _pm(x, err, fmt: str = ".5g", unit: str = "h") -> str:
    if err is None or not math.isfinite(float(err)):
        return _num(x, fmt, unit)
    return f"{_num(x, fmt)} ± {_num(err, '.2g')} {unit}"


def _table(title: str, rows: list[tuple[str, str]]) -> str:
    body = "".join(f"<tr><th style='text-align:left'>{html.escape(k)}</th><td style='text-align:left'>"
                   f"{html.escape(v)}</td></tr>" for k, v in rows)
    return f"<table><caption style='text-align:left'><b>{html.escape(title)}</b></caption>{body}</table>"


def _line(kind: str, rows: list[tuple[str, str]]) -> str:
    return f"<{kind} " + ", ".join(f"{k}={v}" for k, v in rows) + ">"


# --------------------------------------------------------------- light curve
def _lightcurve_rows(lc) -> list[tuple[str, str]]:
    geo = "r, Δ, phase" if lc.has_distances and lc.phase_deg is not None else (
        "phase only" if lc.phase_deg is not None else "none")
    return [
        ("object", repr(lc.object_id)),
        ("points", str(lc.n_points)),
        ("sessions", str(lc.n_sessions)),
        ("span", _num(lc.span_d, ".3g", "d")),
        ("bands", "/".join(lc.bands)),
        ("geometry", geo),
    ]


def lightcurve_repr(lc) -> str:
    """``<LightCurve object='X', points=412, sessions=6, span=31.2 d, bands=R, geometry=none>``."""
    return _line("LightCurve", _lightcurve_rows(lc))


def lightcurve_html(lc) -> str:
    """A small HTML table of :func:`lightcurve_repr`'s facts and the first/last times (JD UTC)."""
    rows = _lightcurve_rows(lc)
    if lc.n_points:
        rows.append(("first, last (JD UTC)", f"{lc.t_obs[0]:.5f}, {lc.t_obs[-1]:.5f}"))
    rows.append(("light time", str(lc.meta.get("light_time", "n/a"))))
    return _table("LightCurve", rows)


# --------------------------------------------------------------------- scans
def _scan_rows(scan) -> list[tuple[str, str]]:
    return [
        ("object", repr(scan.object_id)),
        ("order", str(scan.order)),
        ("best period", _pm(scan.best_period_h, scan.best_period_h_err)),
        ("amplitude", _num(scan.amplitude_mag, ".3f", "mag")),
        ("range", f"{_num(scan.min_period_h, '.3g')}..{_num(scan.max_period_h, '.4g')} h"),
        ("frequencies", str(len(scan.frequency_per_d))),
        ("peaks", str(len(scan.peaks))),
    ]


def scan_repr(scan) -> str:
    """``<ScanResult object='X', order=4, best period=5.231 ± 0.002 h, ...>``."""
    return _line("ScanResult", _scan_rows(scan))


def scan_html(scan) -> str:
    """HTML: the scan facts and its first peaks (period, Δχ², alias label, false-alarm probability)."""
    rows = _scan_rows(scan)
    for k, p in enumerate(scan.peaks[:5]):
        rows.append((f"peak {k + 1}", f"{_pm(p.period_h, p.period_h_err)}, Δχ²={_num(p.delta_chi2, '.4g')}, "
                                      f"{p.alias}, FAP={_num(p.false_alarm_probability, '.2g')}"))
    return _table("ScanResult", rows)


def _two_period_rows(res) -> list[tuple[str, str]]:
    return [
        ("object", repr(res.object_id)),
        ("P1", _pm(res.p1_h, res.p1_h_err)),
        ("P2", _pm(res.p2_h, res.p2_h_err)),
        ("ΔBIC", _num(res.delta_bic, ".4g")),
        ("mode", res.mode),
    ]


def two_period_repr(res) -> str:
    """``<TwoPeriodResult object='X', P1=..., P2=..., ΔBIC=..., mode=refine>``."""
    return _line("TwoPeriodResult", _two_period_rows(res))


def two_period_html(res) -> str:
    """HTML table of :func:`two_period_repr`'s facts."""
    return _table("TwoPeriodResult", _two_period_rows(res))


# ------------------------------------------------------------------- verdict
def _verdict_rows(v) -> list[tuple[str, str]]:
    rows = [("object", repr(v.object_id)), ("rotation", str(v.rotation))]
    if str(v.rotation) == "NPA":
        rows.append(("mode", str(v.mode)))
    rows += [("grade", str(v.grade)), ("P(NPA)", _num(v.p_npa, ".3f")),
             ("ln B", _pm(v.ln_bayes_factor, getattr(v, "ln_bayes_factor_err", None), ".3g", "nats"))]
    if math.isfinite(float(getattr(v, "period_h", math.nan))):
        rows.append(("P", _pm(v.period_h, v.period_h_err)))
    if math.isfinite(float(getattr(v, "p_psi_h", math.nan))):
        rows.append(("P_psi", f"{_num(v.p_psi_h, '.5g')} h [{_num(v.p_psi_h_lo, '.5g')}, {_num(v.p_psi_h_hi, '.5g')}]"))
        rows.append(("P_phi", f"{_num(v.p_phi_h, '.5g')} h [{_num(v.p_phi_h_lo, '.5g')}, {_num(v.p_phi_h_hi, '.5g')}]"))
    return rows


def verdict_repr(v) -> str:
    """``<Verdict object='X', rotation=PA, grade=sound, P(NPA)=0.012, ln B=-4.4 ± 0.3 nats, P=5.2310 ± 0.0021 h>``."""
    return _line("Verdict", _verdict_rows(v))


def verdict_html(v) -> str:
    """HTML table of the verdict's facts, its warnings, and the research-use note."""
    rows = _verdict_rows(v)
    rows += [("points, sessions, span", f"{v.n_points}, {v.n_sessions}, {_num(v.span_d, '.3g', 'd')}")]
    for w in getattr(v, "warnings", ())[:5]:
        rows.append(("warning", str(w)))
    rows.append(("note", "a scientific estimate for research use"))
    return _table("Verdict", rows)


def _screen_rows(s) -> list[tuple[str, str]]:
    rows = [("object", repr(s.object_id)), ("flag", str(s.screen_flag)), ("score", _num(s.screen_score, ".3g"))]
    if math.isfinite(float(getattr(s, "period_h", math.nan))):
        rows.append(("P", _pm(s.period_h, s.period_h_err)))
    return rows


def screen_repr(s) -> str:
    """``<ScreenResult object='X', flag=quiet, score=-40.6, P=...>``: a flag and a score, never a verdict."""
    return _line("ScreenResult", _screen_rows(s))


def screen_html(s) -> str:
    """HTML table of the screen's flag, score and notes."""
    rows = _screen_rows(s) + [("note", str(w)) for w in getattr(s, "warnings", ())[:5]]
    rows.append(("note", "a flag for triage, not a verdict; a scientific estimate for research use"))
    return _table("ScreenResult", rows)


def classification_repr(c) -> str:
    """A ``Classification`` record (verdict, scan, evidence, fit): its verdict's line, named so."""
    return verdict_repr(c.verdict).replace("<Verdict ", "<Classification ", 1)


def classification_html(c) -> str:
    """HTML of the classification's verdict."""
    return verdict_html(c.verdict).replace("<b>Verdict</b>", "<b>Classification</b>", 1)
