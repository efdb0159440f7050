"""Static HTML reports: one page per object, and a survey index with a sortable, filterable table.

The pages need no server, no network and no external fonts or scripts: the
CSS and the few lines of plain JavaScript (table sorting and filtering) are
inline, figures are PNG files beside the pages (:mod:`tumble.plots`), and every
text taken from the data is escaped (:func:`html.escape`).

Public functions
----------------
- :func:`write_object_report` - one object's page from its verdict (and, when
  given, its light curve and posterior samples for the figures).
- :func:`write_survey_report` - the survey index and a page per object from a
  results catalogue (``tumble survey --out``), the per-object verdicts of
  ``--keep-objects`` and, optionally, the photometry for the figures.
- :func:`write_report` - what ``tumble report`` calls: a classify output folder
  or a results catalogue.

The verdicts are scientific estimates for research use, not operational
decisions; every page says so.
"""

from __future__ import annotations

import html
import json
import math
from collections import Counter
from pathlib import Path
from typing import Iterable, Mapping

import numpy as np

from tumble._io import atomic_write_text
from tumble.display import (DAMPING_DIGITS, format_interval, format_period_h, format_probability, format_sig,
                            format_value_err, relative_paths, unit_label)
from tumble.exceptions import TumbleError
from tumble.schema import FIELD_BY_NAME, REPORT_FIELDS, derive, display, normalise, pravec2005_code

__all__ = ["ReportError", "CAUTIONS", "grade_in_words", "object_figures", "object_tables", "binary_section",
           "write_object_report",
           "write_survey_report", "write_report", "page_name"]


class ReportError(TumbleError, ValueError):
    """A report cannot be made from these inputs."""


#: The assumptions and cautions printed on every page.
CAUTIONS = (
    "These results are scientific estimates for research use, not operational decisions. They are "
    "probabilities and intervals under stated models and priors, and can be wrong.",
    "The PA/NPA probability p(NPA) depends on the prior probability of tumbling given to the "
    "classifier; the Bayes factor does not.",
    "The evidence compares shape-free Fourier models (one period with slowly drifting coefficients "
    "against the two-period series); the rotation state (P_psi, P_phi, axis ratios, angular-momentum "
    "direction) comes from a physical triaxial-ellipsoid model with Lommel-Seeliger scattering, a "
    "simplification of real shapes and surfaces.",
    "Each session (night, observer, instrument) has its own free zero-point, so absolute calibration "
    "between nights carries no information here; periods near 24 h and its fractions are prone to "
    "daily aliasing.",
    "Damping timescales are order-of-magnitude estimates that rest on an assumed rigidity times "
    "quality factor (mu Q), density and shape factor; a diameter from H assumes an albedo.",
    "Figures show a linear Fourier model at the reported light-curve periods, not the physical model.",
)

def _f(v) -> float:
    if isinstance(v, (list, tuple)):
        return math.nan
    try:
        v = float(v)
    except (TypeError, ValueError):
        return math.nan
    return v


def _fin(v) -> bool:
    return math.isfinite(_f(v))


def _fmt(v, digits: int = 5) -> str:
    x = _f(v)
    return f"{x:.{digits}g}" if math.isfinite(x) else "-"


def _e(text) -> str:
    return html.escape("" if text is None else str(text), quote=True)


def grade_in_words(verdict: Mapping) -> str:
    """One paragraph on the verdict's grade, always true of the numbers shown (capped grades included).

    The sentence comes from :func:`tumble.classify.grade_sentence`, which reads the thresholds of
    :mod:`tumble.classify.thresholds`.
    """
    from tumble.classify.verdict import grade_sentence

    return grade_sentence(verdict) + " The bands are those of Kass & Raftery (1995, J. Am. Statist. Assoc. 90, 773); the names are ours."


def page_name(object_id: str, taken: set | None = None) -> str:
    """A file-system-safe page stem for an object (:func:`tumble._io.safe_component`; unique
    within ``taken``, which is updated)."""
    from tumble._io import safe_component

    stem = safe_component(object_id)
    if taken is not None:
        base, k = stem, 2
        while stem.lower() in taken:
            stem, k = f"{base}_{k}", k + 1
        taken.add(stem.lower())
    return stem


# ---------------------------------------------------------------------------
# page frame
# ---------------------------------------------------------------------------
_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif;margin:0;
color:#1a202c;background:#f7fafc;line-height:1.45;font-size:16px}
header{background:#1a365d;color:#fff;padding:14px 28px}
header h1{margin:0;font-size:1.5em} header p{margin:4px 0 0 0;color:#cbd5e0}
header a{color:#bee3f8}
main{padding:10px 28px 40px 28px;max-width:1500px}
h2{border-bottom:2px solid #cbd5e0;padding-bottom:3px;margin-top:1.6em}
table{border-collapse:collapse;background:#fff;margin:8px 0}
th,td{border:1px solid #cbd5e0;padding:4px 9px;text-align:left;vertical-align:top}
th{background:#edf2f7} td.num{text-align:right;font-variant-numeric:tabular-nums}
table.sortable th{cursor:pointer;user-select:none} table.sortable th:hover{background:#e2e8f0}
th[aria-sort=ascending]::after{content:" \\25B2"} th[aria-sort=descending]::after{content:" \\25BC"}
.verdict{display:inline-block;padding:10px 16px;border-radius:6px;background:#fff;border:2px solid #2b6cb0;
font-size:1.25em;margin:6px 0}
.v-PA{border-color:#2b6cb0}.v-NPA{border-color:#c53030}.v-undecided{border-color:#718096}
.caution{background:#fffaf0;border-left:5px solid #dd6b20;padding:8px 16px}
.warn{color:#9c4221}
figure{margin:14px 0;background:#fff;padding:8px;border:1px solid #e2e8f0;display:inline-block;max-width:100%}
figure img{max-width:100%;height:auto} figcaption{color:#4a5568;font-size:.95em;max-width:1000px}
.counts span{display:inline-block;margin:0 14px 6px 0;padding:4px 10px;background:#fff;border:1px solid #cbd5e0;
border-radius:4px}
#filter{font-size:1em;padding:5px 8px;width:24em}
.note{color:#4a5568}
#objects td:first-child{white-space:nowrap} #objects td.msg{min-width:14em;max-width:26em;font-size:.9em}
.scroll{overflow-x:auto;max-width:100%}
.counts{display:inline-block;vertical-align:top;margin-right:2.5em}
"""

_JS = """
(function(){
  var table=document.getElementById('objects'); if(!table) return;
  var body=table.tBodies[0], heads=table.tHead.rows[0].cells;
  function key(cell){var v=cell.getAttribute('data-sort'); if(v===null) v=cell.textContent;
    var n=parseFloat(v); return (v!==''&&!isNaN(n))?{n:n}:{s:v.toLowerCase()};}
  function cmp(a,b){ if(a.n!==undefined&&b.n!==undefined) return a.n-b.n;
    if(a.n!==undefined) return -1; if(b.n!==undefined) return 1;
    if(a.s===''&&b.s!=='') return 1; if(b.s===''&&a.s!=='') return -1; return a.s<b.s?-1:(a.s>b.s?1:0);}
  Array.prototype.forEach.call(heads,function(th,col){
    th.addEventListener('click',function(){
      var asc=th.getAttribute('aria-sort')!=='ascending';
      Array.prototype.forEach.call(heads,function(h){h.removeAttribute('aria-sort');});
      th.setAttribute('aria-sort',asc?'ascending':'descending');
      var rows=Array.prototype.slice.call(body.rows);
      rows.sort(function(r1,r2){var c=cmp(key(r1.cells[col]),key(r2.cells[col])); return asc?c:-c;});
      rows.forEach(function(r){body.appendChild(r);});
    });
  });
  var box=document.getElementById('filter'), shown=document.getElementById('shown');
  function filter(){var q=box.value.toLowerCase(), n=0;
    Array.prototype.forEach.call(body.rows,function(r){var ok=r.textContent.toLowerCase().indexOf(q)>=0;
      r.style.display=ok?'':'none'; if(ok) n++;});
    shown.textContent=n+' of '+body.rows.length+' objects shown';}
  if(box){box.addEventListener('input',filter); filter();}
})();
"""


def _page(title: str, subtitle: str, body: str, *, script: bool = False) -> str:
    from tumble import __version__

    js = f"<script>{_JS}</script>" if script else ""
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        "<link rel=\"icon\" href=\"data:,\">\n"
        f"<title>{_e(title)}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        f"<header><h1>{_e(title)}</h1><p>{subtitle}</p></header>\n<main>\n{body}\n"
        f"<p class=\"note\">Made by tumble {_e(__version__)}. Static page: no server, no network.</p>\n"
        f"</main>\n{js}\n</body>\n</html>\n"
    )


def _write_page(path: Path, text: str) -> None:
    """Write a page atomically, every absolute local path in it made relative to the page's folder."""
    atomic_write_text(path, relative_paths(text, Path(path).parent))


def _cautions_html() -> str:
    items = "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS)
    return f"<h2 id=\"cautions\">Assumptions and cautions</h2>\n<div class=\"caution\"><ul>{items}</ul></div>"


# ---------------------------------------------------------------------------
# one object
# ---------------------------------------------------------------------------
def _periods_rows(v: Mapping) -> list[tuple[str, str, str, str, str]]:
    """(quantity, value, interval, unit, meaning) rows for the quantities present, at the precision of
    :mod:`tumble.display` (periods to the digit their error keeps, ratios without a unit)."""
    rows = []

    def period(name, label, meaning):
        lo, hi = v.get(f"{name}_lo"), v.get(f"{name}_hi")
        if _fin(v.get(name)):
            value = format_period_h(v.get(name), lo=lo, hi=hi)
            iv = (f"{format_period_h(lo, lo=lo, hi=hi)} .. {format_period_h(hi, lo=lo, hi=hi)} (68%)"
                  if _fin(lo) and _fin(hi) else "-")
            rows.append((label, value, iv, "h", meaning))

    def interval(name, label, unit, meaning, digits=3):
        if _fin(v.get(name)):
            rows.append((label, format_sig(v.get(name), digits),
                         format_interval(v.get(f"{name}_lo"), v.get(f"{name}_hi"), digits), unit_label(unit),
                         meaning))

    if _fin(v.get("period_h")):
        err = v.get("period_h_err")
        text = format_value_err(v.get("period_h"), err)
        value, _, err_text = text.partition(" +- ")
        rows.append(("rotation period P", value, f"&plusmn; {_e(err_text)} (1 sigma)" if err_text else "-", "h",
                     "PA rotation period (twice the light-curve period for a double-peaked curve)"))
    period("p_psi_h", "P_psi", "NPA rotation period (median of the posterior)")
    period("p_phi_h", "P_phi", "NPA precession period (median of the posterior)")
    if _fin(v.get("p1_h")):
        rows.append(("P1", format_period_h(v.get("p1_h")), "-", "h", FIELD_BY_NAME["p1_h"].description))
    if _fin(v.get("p2_h")):
        rows.append(("P2", format_period_h(v.get("p2_h")), "-", "h", FIELD_BY_NAME["p2_h"].description))
    if _fin(v.get("period_syn_h")):
        rows.append(("P_syn", format_period_h(v.get("period_syn_h")), "-", "h",
                     FIELD_BY_NAME["period_syn_h"].description))
    for name, label in (("n_cycles", "cycles covered"), ("phase_coverage", "phase coverage")):
        if _fin(v.get(name)):
            rows.append((label, display(name, v.get(name)), "-", "", FIELD_BY_NAME[name].description))
    if _fin(v.get("amplitude_mag")):
        rows.append(("amplitude", format_sig(v.get("amplitude_mag"), 2), "-", "mag",
                     FIELD_BY_NAME["amplitude_mag"].description))
    if _fin(v.get("npa_limit_mag")):
        rows.append(("NPA detection limit", format_sig(v.get("npa_limit_mag"), 2), "-", "mag",
                     "tumbling with a second-period signature above this rms would have been detected"))
    interval("excitation", "E/E0", "", "rotational energy over the PA energy at the same angular momentum")
    interval("a_over_b", "a/b", "", "long/intermediate axis ratio")
    interval("b_over_c", "b/c", "", "intermediate/short axis ratio")
    mirror = "; the mirror solution (lon + 180 deg, the same lat) is not excluded by disk-integrated photometry"
    interval("l_lon_deg", "L longitude", "deg", "angular momentum, ecliptic J2000" + mirror)
    interval("l_lat_deg", "L latitude", "deg", "angular momentum, ecliptic J2000" + mirror)
    period("p_orb_h", "P_orb", "orbital period of the binary hypothesis" if not _is_true(v.get("binary_candidate"))
           else "orbital period at which the screen found event-like dips (a binary candidate, not fitted)")
    dv = derive(dict(v))  # the event duration is derived from the width and P_orb when not stored
    for name, label, unit, meaning in _BINARY_ROWS:
        if _fin(dv.get(name)):
            rows.append((label, display(name, dv.get(name)), "-", unit, meaning))
    if _fin(v.get("tau_damp_gyr")):
        rows.append(("damping time tau", format_sig(v.get("tau_damp_gyr"), DAMPING_DIGITS),
                     format_interval(v.get("tau_damp_gyr_lo"), v.get("tau_damp_gyr_hi"), DAMPING_DIGITS), "Gyr",
                     "order-of-magnitude estimate; rests on an assumed mu Q"))
    return rows


def _load_posterior(path: Path):
    """Posterior samples from ``posterior.npz``; None when absent or empty. A corrupt file raises
    ReportError (callers turn it into a note and draw the rest)."""
    if not path.exists():
        return None
    try:
        with np.load(path, allow_pickle=False) as z:
            if "samples" not in z.files:
                return None
            post = {"samples": np.array(z["samples"]), "names": [str(x) for x in z["names"]],
                    "units": [str(x) for x in z["units"]]}
    except Exception as exc:  # zipfile, pickle refusal, missing key, bad shape: all "unreadable"
        raise ReportError(f"{path}: unreadable posterior ({type(exc).__name__}: {' '.join(str(exc).split())[:120]})"
                          ) from None
    if post["samples"].ndim != 2 or post["samples"].shape[1] != len(post["names"]):
        raise ReportError(f"{path}: unreadable posterior (samples of shape {post['samples'].shape} for "
                          f"{len(post['names'])} names)")
    return post


def _make_dir(path: Path) -> None:
    """Create a report folder; a file in the way or no permission is a one-line ReportError."""
    if path.exists() and not path.is_dir():
        raise ReportError(f"{path}: exists and is not a folder; the report needs a folder")
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"{path}: cannot create the report folder ({exc.strerror or exc})") from None


def _kept_verdict_path(objects_dir: Path | None, name: str) -> Path | None:
    """An object's ``verdict.json`` in a ``--keep-objects`` folder (same safe name as the writer)."""
    if objects_dir is None:
        return None
    from tumble.survey import object_folder

    return object_folder(objects_dir, name) / "verdict.json"


def _read_kept_verdict(path: Path | None) -> tuple[dict, str]:
    """(verdict, note): the kept verdict, or {} and a note saying why it was skipped."""
    if path is None or not path.exists():
        return {}, ""
    try:
        value = json.loads(path.read_text(encoding="utf-8"))
        if not isinstance(value, dict):
            raise ValueError("not a JSON object")
    except (OSError, ValueError) as exc:
        return {}, f"The saved verdict {path.name} of this object could not be read and was skipped ({exc})."
    return value, ""


def _provenance_html(prov: Mapping) -> str:
    """What produced the results: version, route, prior, seed and options (from the results metadata)."""
    if not prov:
        return ("<h2>Provenance</h2><p class=\"note\">The results file records no provenance (written by an "
                "older version); the prior and seed behind p(NPA) are not known here.</p>")
    items = "".join(f"<tr><th>{_e(k)}</th><td>{_e(json.dumps(v, sort_keys=True))}</td></tr>"
                    for k, v in sorted(prov.items()))
    return ("<h2>Provenance</h2><p class=\"note\">What produced these results: p(NPA) holds at the prior shown; "
            "the same version, route, seed and options repeat the run.</p>"
            f"<div class=\"scroll\"><table>{items}</table></div>")


def object_figures(out_dir, verdict: Mapping, lc=None, *, posterior: Mapping | None = None, two_d: bool = True,
                   prefix: str = "") -> tuple[list[tuple[str, str]], list[str]]:
    """Draw one object's figures into ``out_dir``.

    Parameters
    ----------
    out_dir : path
        Folder for the PNG files.
    verdict : mapping
        The verdict (``verdict.json`` keys or a results row).
    lc : LightCurve or None
        The photometry (without it only the posterior can be drawn).
    posterior : mapping or None
        ``samples`` (n, k), ``names`` and ``units`` of the posterior.
    two_d : bool
        Draw the (P1, P2) map when the verdict has two light-curve periods.
    prefix : str
        Prefix of the PNG file names.

    Returns
    -------
    figures : list of (file name, caption)
    notes : list of str
        Figures that could not be drawn, and why.
    """
    from tumble import plots

    out_dir = Path(out_dir)
    figs: list[tuple[str, str]] = []
    notes: list[str] = []
    name = str(verdict.get("object") or verdict.get("object_id") or "")

    def draw(stem, caption, fn):
        try:
            fn(out_dir / f"{prefix}{stem}.png")
            figs.append((f"{prefix}{stem}.png", caption))
        except TumbleError as exc:
            notes.append(f"{stem}: {' '.join(str(exc).split())}")
        except (ValueError, np.linalg.LinAlgError) as exc:
            notes.append(f"{stem}: could not be drawn ({type(exc).__name__}: {' '.join(str(exc).split())[:200]})")

    if lc is not None:
        from tumble.periodogram import fourier_scan

        p1 = _f(verdict.get("p1_h"))
        chosen = p1 if math.isfinite(p1) else None
        draw("scan", "1-D period scan: Delta chi-square of the multi-harmonic Fourier fit (per-session zero-points) "
             "from the deepest minimum, in units of its reduced chi-square, against trial period (the same "
             "convention as tumble scan --plot); the red line is the reported light-curve period P1, a "
             "dash-dotted line the deepest minimum when it differs, dashed lines the other ranked minima "
             "with their alias relation.",
             lambda p: plots.plot_scan(fourier_scan(lc), chosen_period_h=chosen, path=p))
        model = None
        try:
            model = plots.model_from_verdict(lc, verdict)
        except TumbleError as exc:
            notes.append(f"model: {' '.join(str(exc).split())}")
        p2 = _f(verdict.get("p2_h"))
        if two_d and math.isfinite(p1) and math.isfinite(p2):
            draw("map2d", "Two-period scan: Delta chi-square of the two-period Fourier series (Pravec et al. "
                 "2005) over a (P1, P2) grid around the reported pair, symmetric-log colour scale, with the "
                 "68.3, 95.4 and 99.7 % confidence contours of two parameters; + marks the reported pair "
                 "(the values in the table), a circle the grid minimum when it differs.",
                 lambda p: plots.plot_two_period_map(plots.two_period_zoom(lc, p1, p2), reported_pair_h=(p1, p2),
                                                     path=p))
        if model is not None:
            draw("lightcurve", "Light curve per session (blue, with errors) and the Fourier model at the reported "
                 "periods with each session's zero-point (red).",
                 lambda p: plots.plot_lightcurve(lc, model, path=p))
            fold_caption = ("Folded light curve with the zero-points removed, on the rotation period." if
                            model.kind == "PA" else
                            "Two-period view: the data folded on P1 after subtracting the fitted P2 component "
                            "(and combination terms), and on P2 after subtracting the P1 component.")
            draw("folded", fold_caption, lambda p: plots.plot_folded(lc, model, path=p))
            draw("residuals", "Residuals of the model against time (colour by session) and their distribution "
                 "in units of the quoted errors.", lambda p: plots.plot_residuals(lc, model, path=p))
            draw("composite", "Composite light curve: the data minus their zero-points folded on the best single "
                 "period, coloured by session; a session that does not line up with the others shows at once.",
                 lambda p: plots.plot_composite_fold(lc, model, path=p))
            p_one = p1 if math.isfinite(p1) else model.rotation_period_h
            draw("residual_periodogram", "Periodogram (Lomb-Scargle) of the residuals after removing the P1 "
                 "series and the zero-points: a tumbler's second period stands out here; a principal-axis "
                 "rotator's residuals are flat.",
                 lambda p: plots.plot_residual_periodogram(lc, p_one, p2_h=p2 if math.isfinite(p2) else None,
                                                           path=p))
            if lc.phase_deg is not None and lc.has_distances and np.any(np.asarray(lc.session) < 0):
                draw("phase_curve", "Phase curve: reduced magnitude (rotation removed) against solar phase angle "
                     "with the fitted H,G1,G2 curve (Muinonen et al. 2010).",
                     lambda p: plots.plot_phase_curve(lc, model, path=p))
    if posterior is not None and np.asarray(posterior.get("samples", [])).ndim == 2 \
            and np.asarray(posterior["samples"]).shape[0] > 1:
        draw("posterior", "Posterior samples of the main parameters of the physical rotation-state fit "
             "(diagonal: histograms; below: pairs).",
             lambda p: plots.plot_posterior_pairs(posterior["samples"], posterior["names"], posterior.get("units"),
                                                  object_id=name, path=p))
    return figs, notes


#: The binary's fields shown beside P_orb: (column, label, unit, meaning).
_BINARY_ROWS = (
    ("event_depth_mag", "deeper event depth", "mag", "depth of the deeper mutual event (positive = fainter)"),
    ("event_depth2_mag", "other event depth", "mag", "depth of the event half an orbit from the deeper one"),
    ("event_duration_h", "event duration", "h", "full duration of a mutual event (width in orbital phase x P_orb)"),
    ("p_primary_h", "primary light-curve period", "h", "the primary's light-curve period under the binary hypothesis"),
)


def _is_true(value) -> bool:
    return value is True or str(value).strip().lower() == "true"


def binary_section(out_dir, verdict: Mapping, lc=None, *, prefix: str = "") -> list[tuple[str, str, str]]:
    """The page's section on the binary alternative: (element id, heading, HTML), or [] when there is none.

    Shown for a verdict that names the binary alternative (``p_orb_h`` filled by the classifier) and for
    a screen's binary candidate (``binary_candidate``): the binary's figures in words and, with the
    photometry, the light curve after removing the primary's rotation folded on P_orb (the standard
    view of mutual events, :func:`tumble.plots.plot_orbit_fold`), drawn into ``out_dir``.
    """
    from tumble import plots
    from tumble.classify.binary import fold_on_orbit

    v = derive(_normalise(verdict))
    candidate = _is_true(v.get("binary_candidate"))
    if not _fin(v.get("p_orb_h")) or str(v.get("status", "ok") or "ok") != "ok":
        return []
    p_orb = _f(v.get("p_orb_h"))
    if candidate:
        p_primary = _f(v.get("p_primary_h")) if _fin(v.get("p_primary_h")) else _f(v.get("p1_h"))
        text = ("<p>The screen flags a <b>binary candidate</b>: after removing the primary's light curve "
                f"(period {_e(format_period_h(p_primary))} h), the other period behaves like mutual events "
                f"(narrow dips half an orbit apart, flat between) at P_orb = {_e(format_period_h(p_orb))} h. "
                "This is triage, not a verdict: run the full classifier, which weighs the binary family against "
                "PA and NPA.</p>")
    else:
        dur = v.get("event_duration_h")
        text = ("<p>A <b>binary</b> with mutual events explains these data as well as tumbling or better, so no "
                f"NPA verdict is given: P_orb = {_e(format_period_h(p_orb))} h, events "
                f"{_e(display('event_depth_mag', v.get('event_depth_mag')))} and "
                f"{_e(display('event_depth2_mag', v.get('event_depth2_mag')))} mag deep, lasting "
                f"{_e(display('event_duration_h', dur))} h. A hypothesis as good as tumbling on these data, not a "
                "detection of a satellite; a scientific estimate for research use.</p>")
        p_primary = _f(v.get("p_primary_h"))
        if not math.isfinite(p_primary):
            p_primary = _f(v.get("p1_h"))
    parts = [text]
    if lc is None:
        parts.append("<p class=\"note\">No photometry given, so no fold on P_orb.</p>")
        return [("binary", "Binary alternative: mutual events", "".join(parts))]
    fname = f"{prefix}orbit_fold.png"
    depths = (_f(v.get("event_depth_mag")), _f(v.get("event_depth2_mag")))
    try:
        fold = fold_on_orbit(lc, p_primary, p_orb, epoch_jd=_f(v.get("event_epoch_jd")),
                             width_phase=_f(v.get("event_width_phase")))
        plots.plot_orbit_fold(fold, object_id=str(v.get("object") or ""), depths_mag=None if candidate else depths,
                              path=Path(out_dir) / fname)
    except (TumbleError, ValueError, np.linalg.LinAlgError) as exc:
        parts.append(f"<p class=\"note\">Not drawn: orbit fold: {_e(' '.join(str(exc).split())[:200])}</p>")
        return [("binary", "Binary alternative: mutual events", "".join(parts))]
    caption = (f"The light curve after removing the primary's rotation (its {format_period_h(p_primary)} h "
               "one-period Fourier series, fitted " + ("outside the events" if fold.masked_events else "to all points")
               + ", and each session's zero-point), folded on P_orb with the deeper event at phase 0 and the other "
               "at 0.5 (shaded: the event width); red: the median per phase bin"
               + ("; dashed: the fitted event depths" if not candidate else "") + ". Magnitudes: fainter is down. "
               + ("The epoch was found from the data by a box scan." if fold.epoch_from_data else ""))
    parts.append(f"<figure><img src=\"{_e(fname)}\" alt=\"{_e(caption)}\"><figcaption>{_e(caption)}"
                 "</figcaption></figure>")
    return [("binary", "Binary alternative: mutual events", "".join(parts))]


def _longest_session_h(lc) -> float:
    """Duration of the longest dense session, hours (inf for sparse data only)."""
    s = np.asarray(lc.session, int)
    t = np.asarray(lc.t, float)
    spans = [np.ptp(t[s == k]) * 24.0 for k in np.unique(s[s >= 0])]
    return max(spans) if spans else math.inf


def object_tables(verdict: Mapping, lc=None) -> list[tuple[str, str, str]]:
    """The diagnostic tables of an object page: (element id, heading, HTML table).

    Cycles covered and phase coverage of each reported period (:func:`tumble.coverage.period_coverage`),
    the frequency combinations ``j f1 + k f2`` that carry the signal with their amplitudes, and the
    per-session zero-points (with the photometry only).
    """
    from tumble.coverage import period_coverage

    v = _normalise(verdict)
    out = []
    if lc is None:
        return out
    t = np.asarray(lc.t, float)
    rows = []
    for name, label in (("period_h", "P"), ("p_psi_h", "P_psi"), ("p_phi_h", "P_phi"), ("p1_h", "P1"),
                        ("p2_h", "P2")):
        if _fin(v.get(name)):
            c = period_coverage(t, _f(v.get(name)))
            rows.append(f"<tr><td>{_e(label)}</td><td class=\"num\">{_e(format_period_h(c.period_h))}</td>"
                        f"<td class=\"num\">{_e(format_sig(c.n_cycles, 3))}</td>"
                        f"<td class=\"num\">{_e(format_sig(c.phase_coverage, 2))}</td></tr>")
    if rows:
        out.append(("coverage", "Cycles covered and phase coverage",
                    "<table id=\"coverage\"><thead><tr><th>period</th><th>value (h)</th><th>cycles in the span</th>"
                    "<th>phase coverage (fraction of 20 bins)</th></tr></thead><tbody>" + "".join(rows)
                    + "</tbody></table>"))
    try:
        from tumble import plots

        model = plots.model_from_verdict(lc, v)
    except (TumbleError, ValueError, np.linalg.LinAlgError):
        return out
    terms = plots.frequency_combinations(model)
    night_h = _longest_session_h(lc)
    body = "".join(f"<tr><td class=\"num\">{t_.j}</td><td class=\"num\">{t_.k}</td>"
                   f"<td class=\"num\">{_e(format_sig(t_.frequency_per_d, 6))}</td>"
                   f"<td class=\"num\">{_e(format_sig(t_.period_h, 6))}"
                   f"{' *' if t_.period_h > night_h else ''}</td>"
                   f"<td class=\"num\">{_e(format_sig(t_.amplitude_mag, 2))}</td></tr>" for t_ in terms)
    long_note = ""
    if any(t_.period_h > night_h for t_ in terms):
        long_note = (f"<p class=\"note\">* a period longer than the longest session ({format_sig(night_h, 3)} h): "
                     "such a term trades against the per-session zero-points, so no single night constrains "
                     "its amplitude; a large amplitude here with widely spread zero-points means the drawn "
                     "model is degenerate, not that the body varies by that much.</p>")
    out.append(("combinations", "Frequency combinations that carry the signal",
                "<table id=\"combinations\"><thead><tr><th>j</th><th>k</th><th>j f1 + k f2 (1/d)</th>"
                "<th>period (h)</th><th>semi-amplitude (mag)</th></tr></thead><tbody>" + body + "</tbody></table>"
                + long_note))
    zps = plots.session_zero_points(lc, model)
    body = "".join(f"<tr><td>{_e(z.title.replace(chr(10), ', '))}</td>"
                   f"<td class=\"num\">{_e(format_sig(z.zero_point_mag, 4))}</td></tr>" for z in zps)
    out.append(("zero-points", "Per-session zero-points",
                "<table id=\"zero-points\"><thead><tr><th>session</th><th>zero-point (mag)</th></tr></thead>"
                "<tbody>" + body + "</tbody></table>"))
    return out


def _p2005_row(v: Mapping) -> str:
    """The verdict on the NPA reliability scale of Pravec et al. (2005), when it applies."""
    code = str(v.get("npa_code_p2005") or pravec2005_code(v))
    if not code:
        return ""
    return (f"<tr><th>Pravec et al. (2005) code</th><td>{_e(code)}</td><td>our verdict on the NPA reliability "
            "scale of Pravec et al. (2005, Icarus 173, 108), for observers who report to it; our grades stay "
            "our own</td></tr>")


def _object_body(v: Mapping, figures, notes, *, back_link: str | None = None, data_note: str = "",
                 tables=()) -> str:
    rotation = str(v.get("rotation", "") or "")
    status = str(v.get("status", "ok") or "ok")
    parts = []
    if back_link:
        parts.append(f"<p><a href=\"{_e(back_link)}\">&larr; back to the survey table</a></p>")
    if status != "ok":
        parts.append(f"<h2>Status: {_e(status)}</h2><p class=\"warn\">{_e(v.get('message', ''))}</p>")
        parts.append("<p>No verdict was made for this object.</p>")
        parts.append(_cautions_html())
        return "\n".join(parts)
    mode = str(v.get("mode", "") or "")
    label = rotation + (f" ({mode})" if rotation == "NPA" and mode else "")
    cls = rotation if rotation in ("PA", "NPA", "undecided") else "undecided"
    prior = v.get("prior_npa")
    prior_txt = f" at a prior of {_fmt(prior, 3)}" if _fin(prior) else ""
    ln_err = v.get("ln_bayes_factor_err")
    parts.append("<h2>Verdict</h2>")
    parts.append(f"<div class=\"verdict v-{_e(cls)}\" id=\"verdict\">{_e(label or '-')} &mdash; grade "
                 f"<b>{_e(v.get('grade', '') or 'none')}</b></div>")
    parts.append("<table><tbody>"
                 f"<tr><th>p(NPA)</th><td class=\"num\">{_e(format_probability(v.get('p_npa')))}</td>"
                 f"<td>posterior probability of tumbling{_e(prior_txt)}</td></tr>"
                 f"<tr><th>ln B(NPA:PA)</th><td class=\"num\">{display('ln_bayes_factor', v.get('ln_bayes_factor'))}"
                 + (f" &plusmn; {display('ln_bayes_factor_err', ln_err)}" if _fin(ln_err) and _f(ln_err) > 0 else "") +
                 "</td><td>natural log of the Bayes factor (positive favours NPA)</td></tr>"
                 + _p2005_row(v) + "</tbody></table>")
    parts.append(f"<p id=\"grade-words\">{_e(grade_in_words(v))}</p>")
    parts.append("<h2>Periods and derived quantities</h2>")
    rows = _periods_rows(v)
    if rows:
        body = "".join(f"<tr><td>{_e(q)}</td><td class=\"num\">{_e(val)}</td><td>{iv}</td><td>{_e(u)}</td>"
                       f"<td>{_e(m)}</td></tr>" for q, val, iv, u, m in rows)
        parts.append("<table id=\"periods\"><thead><tr><th>quantity</th><th>value</th><th>interval</th>"
                     f"<th>unit</th><th>meaning</th></tr></thead><tbody>{body}</tbody></table>")
    else:
        parts.append("<p>No period was claimed.</p>")
    parts.append(solutions_table_html(v))
    parts.append("<h2>Data</h2><table><tbody>"
                 f"<tr><th>points</th><td class=\"num\">{_e(v.get('n_points', '-'))}</td></tr>"
                 f"<tr><th>sessions</th><td class=\"num\">{_e(v.get('n_sessions', '-'))}</td></tr>"
                 f"<tr><th>span</th><td class=\"num\">{_fmt(v.get('span_d'), 4)} d</td></tr>"
                 "</tbody></table>")
    route = v.get("evidence_route")
    if route:
        parts.append(f"<p class=\"note\">Evidence route: {_e(route)}</p>")
    warnings = v.get("warnings")
    if isinstance(warnings, str):
        warnings = [w for w in warnings.split("; ") if w]
    if not warnings and v.get("message"):
        warnings = [w for w in str(v.get("message")).split("; ") if w]
    if warnings:
        parts.append("<h2>Warnings</h2><ul>" + "".join(f"<li class=\"warn\">{_e(w)}</li>" for w in warnings)
                     + "</ul>")
    for ident, heading, table in tables:
        parts.append(f"<h2 id=\"h-{_e(ident)}\">{_e(heading)}</h2>{table}")
    parts.append("<h2>Figures</h2>")
    if data_note:
        parts.append(f"<p class=\"note\">{_e(data_note)}</p>")
    for fname, caption in figures:
        parts.append(f"<figure><img src=\"{_e(fname)}\" alt=\"{_e(caption)}\"><figcaption>{_e(caption)}"
                     "</figcaption></figure>")
    if not figures:
        parts.append("<p class=\"note\">No figures (no photometry or posterior samples were given).</p>")
    for n in notes:
        parts.append(f"<p class=\"note\">Not drawn: {_e(n)}</p>")
    parts.append(_cautions_html())
    return "\n".join(parts)


def solutions_table_html(v: Mapping) -> str:
    """The "Tumbling solutions" table of an object page ('' when the verdict lists none).

    One row per listed solution (``solutions`` of verdict.json, best first): mode, P_psi and P_phi with
    their 68 % intervals from that solution's own optimum, Delta BIC and relative probability; the
    columns and units come from :data:`tumble.schema.SOLUTION_FIELDS`.
    """
    from tumble.classify.solutions import SOLUTION_DELTA_BIC
    from tumble.display import format_value
    from tumble.schema import SOLUTION_FIELDS

    sols = v.get("solutions") or []
    if not sols:
        return ""
    by_name = {f.name: f for f in SOLUTION_FIELDS}
    rows = []
    for i, sol in enumerate(sols, 1):
        cells = [f"<td class=\"num\">{i}</td>", f"<td>{_e(sol.get('mode') or '-')}</td>"]
        for name in ("p_psi_h", "p_phi_h"):
            lo, hi = sol.get(f"{name}_lo"), sol.get(f"{name}_hi")
            iv = (f"{_e(format_value(by_name[name].display, lo))} &ndash; {_e(format_value(by_name[name].display, hi))}"
                  if _fin(lo) and _fin(hi) else "-")
            cells.append(f"<td class=\"num\">{_e(format_value(by_name[name].display, sol.get(name)))}</td><td>{iv}</td>")
        for name in ("delta_bic", "relative_probability", "n_poles"):
            cells.append(f"<td class=\"num\">{_e(format_value(by_name[name].display, sol.get(name)))}</td>")
        cells.append(f"<td>{_e(sol.get('source') or '')}</td>")
        rows.append("<tr>" + "".join(cells) + "</tr>")
    head = ("<tr><th>#</th><th>mode</th><th>P_psi (h)</th><th>68 % interval (h)</th><th>P_phi (h)</th>"
            "<th>68 % interval (h)</th><th>&Delta;BIC</th><th>relative probability</th><th>L poles</th>"
            "<th>found from</th></tr>")
    note = (f"<p class=\"note\">Every tumbling solution whose BIC (-2 ln L + k ln N of the physical ellipsoid "
            f"model re-fitted with its inertia free of the shape) lies within {SOLUTION_DELTA_BIC:g} of the best, best "
            "first; intervals from each solution's own optimum (Laplace approximation), not from a mixture of "
            "solutions, widened to cover the other directions of the angular momentum L that fit as well ('L poles' "
            "counts them: one apparition rarely fixes L, and each direction reads the light curve at slightly other "
            "periods); '-' where that approximation does not constrain the period. The first is the state reported "
            "above. Scientific estimates for research use: a real body can prefer another lattice than the "
            "ellipsoid model does.</p>")
    return (f"<h2 id=\"h-solutions\">Tumbling solutions</h2><table id=\"solutions\"><thead>{head}</thead>"
            f"<tbody>{''.join(rows)}</tbody></table>{note}")


def _normalise(verdict: Mapping) -> dict:
    """The schema's keys (``object``, ``_lo``/``_hi`` intervals, mode '' / 'unknown')."""
    v = normalise(verdict)
    if "object" not in v and "object_id" in v:
        v["object"] = v["object_id"]
    return v


def write_object_report(out_dir, verdict: Mapping, *, lc=None, posterior: Mapping | None = None,
                        two_d: bool = True, page: str = "index.html", back_link: str | None = None,
                        figure_prefix: str = "", data_note: str = "") -> Path:
    """Write one object's HTML page (and its figures) into ``out_dir``; returns the page's path.

    Parameters
    ----------
    out_dir : path
        Folder of the page and its PNG figures (created).
    verdict : mapping
        The verdict: the keys of ``verdict.json`` (``tumble classify``), of
        ``Verdict.to_dict()`` or of a results row.
    lc : LightCurve or None
        The photometry, for the scan, light-curve, folded, residual and two-period figures.
    posterior : mapping or None
        ``samples`` (n, k), ``names``, ``units`` (as in ``posterior.npz``), for the pair plot.
    two_d : bool
        Draw the (P1, P2) map when two light-curve periods are reported.
    page : str
        File name of the page.
    back_link : str or None
        Link back to a survey index.
    figure_prefix : str
        Prefix of the figure file names.
    """
    out_dir = Path(out_dir)
    _make_dir(out_dir)
    v = _normalise(verdict)
    name = str(v.get("object", "") or "object")
    figures, notes = ([], []) if str(v.get("status", "ok") or "ok") != "ok" else object_figures(
        out_dir, v, lc, posterior=posterior, two_d=two_d, prefix=figure_prefix)
    tables = object_tables(v, lc) if str(v.get("status", "ok") or "ok") == "ok" else []
    tables = binary_section(out_dir, v, lc, prefix=figure_prefix) + tables
    body = _object_body(v, figures, notes, back_link=back_link, data_note=data_note, tables=tables)
    if isinstance(v.get("provenance"), Mapping):
        body += _provenance_html(v["provenance"])
    path = out_dir / page
    _write_page(path, _page(f"{name}: tumble report", "One object: rotation verdict, periods and figures. "
                                  "Scientific estimates for research use, not operational decisions.", body))
    return path


# ---------------------------------------------------------------------------
# a survey
# ---------------------------------------------------------------------------
#: Columns of the survey table, from the one schema (:data:`tumble.schema.REPORT_FIELDS`).
SURVEY_COLUMNS = REPORT_FIELDS


def _row_dict(table, i) -> dict:
    out = {}
    for c in table.colnames:
        v = table[c][i]
        if v is np.ma.masked:
            v = "" if table[c].dtype.kind in "USO" else math.nan
        if isinstance(v, np.generic):
            v = v.item()
        if isinstance(v, bytes):
            v = v.decode("utf-8", "replace")
        out[c] = v
    return out


def _read_sizes(path) -> dict:
    """Object -> diameter (km) from a table with ``object`` and ``diameter_km``, or ``h_mag`` (and ``albedo``)."""
    from astropy.table import Table

    from tumble.damping import diameter_from_h

    path = Path(path)
    if not path.exists():
        raise ReportError(f"{path}: no such file")
    try:
        table = Table.read(path, format="ascii") if path.suffix.lower() in (".csv", ".txt") else Table.read(path)
    except Exception as exc:
        raise ReportError(f"{path}: unreadable size table ({str(exc).splitlines()[0][:150]})") from None
    cols = {c.lower(): c for c in table.colnames}
    if "object" not in cols or not ({"diameter_km", "h_mag"} & set(cols)):
        raise ReportError(f"{path}: a size table needs columns object and diameter_km or h_mag (albedo optional)")
    out = {}
    for row in table:
        d = _f(row[cols["diameter_km"]]) if "diameter_km" in cols else math.nan
        if not math.isfinite(d) and "h_mag" in cols:
            h = _f(row[cols["h_mag"]])
            a = _f(row[cols["albedo"]]) if "albedo" in cols else 0.14
            if math.isfinite(h):
                d = float(diameter_from_h(h, a if math.isfinite(a) and a > 0 else 0.14))
        out[str(row[cols["object"]]).strip()] = d
    return out


def _cell(row: Mapping, field, link: str | None) -> str:
    """One cell of the survey table: shown by the schema's display format, sorted by the raw value."""
    col = field.name
    v = row.get(col)
    if field.kind in ("str", "bool"):
        text = display(col, v) if field.kind == "bool" else ("" if v is None else str(v))
        if link is not None:
            return f"<td data-sort=\"{_e(text)}\"><a href=\"{_e(link)}\">{_e(text)}</a></td>"
        if col == "message" and len(text) > 120:
            return f"<td class=\"msg\" title=\"{_e(text)}\">{_e(text[:117])}...</td>"
        cls = " class=\"msg\"" if col == "message" else ""
        return f"<td{cls}>{_e(text)}</td>"
    x = _f(v)
    if not math.isfinite(x):
        return "<td class=\"num\" data-sort=\"\">-</td>"
    return f"<td class=\"num\" data-sort=\"{x!r}\">{_e(display(col, x))}</td>"


def _lightcurves(data, read_options):
    """Object -> (LightCurve or None, error text or None) from the survey's inputs."""
    from tumble.photometry import read_lightcurve
    from tumble.survey import collect_objects

    out = {}
    for task in collect_objects(list(data), read_options=read_options):
        if task.error is not None:
            out[task.object_id] = (None, task.error)
        elif task.lightcurve is not None:
            out[task.object_id] = (task.lightcurve, None)
        else:
            out[task.object_id] = (list(task.paths), None)
    return out, read_lightcurve


def write_survey_report(results_path, out_dir, objects_dir=None, *, data: Iterable | None = None,
                        read_options=None, sizes=None, figures: bool = True, title: str | None = None,
                        progress: bool = False) -> Path:
    """Write the HTML report of a survey; returns the path of its index page.

    Parameters
    ----------
    results_path : path
        The results catalogue (``tumble survey --out``; ECSV, FITS, CSV or Parquet).
    out_dir : path
        Report folder (created): ``index.html``, ``sample_*.png`` and one folder per object,
        ``objects/NAME/index.html`` with its figures beside it.
    objects_dir : path or None
        The ``--keep-objects`` folder of the survey: ``OBJECT/verdict.json`` files add the
        intervals, warnings and evidence route to each object's page.
    data : iterable of path or None
        The survey's inputs (directories, globs, files or survey tables); with them each
        object's page gets its figures (the photometry is re-read, not re-classified).
    read_options : tumble.photometry.ReadOptions or None
        How to read ``data``.
    sizes : path, mapping or None
        Diameters for the period-diameter diagram: a table with ``object`` and
        ``diameter_km`` or ``h_mag`` (and ``albedo``), or a mapping object -> km. A
        ``diameter_km`` column in the results is used too.
    figures : bool
        Draw figures (False: tables and text only).
    title : str or None
        Page title (default from the results file name).
    progress : bool
        tqdm bar over the objects.
    """
    from tumble import plots
    from tumble.results import read_results

    results_path = Path(results_path)
    table = read_results(results_path)
    out_dir = Path(out_dir)
    _make_dir(out_dir)
    _make_dir(out_dir / "objects")
    rows = [_row_dict(table, i) for i in range(len(table))]
    objects_dir = Path(objects_dir) if objects_dir is not None else None
    if objects_dir is not None and not objects_dir.is_dir():
        raise ReportError(f"{objects_dir}: no such folder (the survey's --keep-objects folder)")
    lcs, reader = ({}, None)
    if data and figures:
        lcs, reader = _lightcurves(data, read_options)
    title = title or f"Survey report: {results_path.name}"

    taken: set = set()
    links = {}
    side_notes: list[str] = []
    iterator = rows
    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(rows, unit="object", desc="report", leave=False)
        iterator = bar
    for row in iterator:
        name = str(row.get("object", ""))
        stem = page_name(name, taken)
        links[name] = f"objects/{stem}/index.html"
        v = dict(row)
        vj = _kept_verdict_path(objects_dir, name)
        extra, skipped = _read_kept_verdict(vj)
        if skipped:
            side_notes.append(skipped)
        if extra:
            for k, val in extra.items():
                # the damping time is the survey's (it knows the sizes); the rest is the richer verdict
                if k != "object_id" and not k.startswith("tau_damp"):
                    v[k] = val
        lc, note = None, "No photometry given to the report (tumble report --data), so no light-curve figures."
        if name in lcs:
            item, err = lcs[name]
            if err is not None:
                note = f"Photometry could not be read: {err}"
            elif isinstance(item, list):
                try:
                    lc = reader(item, options=read_options, object_id=name)
                    note = ""
                except TumbleError as exc:
                    note = f"Photometry could not be read: {' '.join(str(exc).split())}"
            else:
                lc, note = item, ""
        elif data:
            note = "This object is not among the photometry inputs given to the report."
        if not figures:
            note = "Figures were switched off."
        note += (" The survey keeps no posterior samples, so there is no posterior figure here "
                 "(tumble classify --report draws it).") if str(row.get("status")) == "ok" else ""
        if skipped:
            note = f"{note} {skipped}"
        write_object_report(out_dir / "objects" / stem, v, lc=lc, page="index.html", back_link="../../index.html",
                            data_note=note.strip())
    if bar is not None:
        bar.close()

    # the sample figures
    sample_figs, sample_notes = [], []
    diam = {}
    if "diameter_km" in table.colnames:
        diam.update({str(r["object"]): _f(r.get("diameter_km")) for r in rows})
    if isinstance(sizes, Mapping):
        diam.update({str(k): _f(x) for k, x in sizes.items()})
    elif sizes is not None:
        diam.update(_read_sizes(sizes))
    if figures:
        d = [diam.get(str(r["object"]), math.nan) for r in rows]
        if any(math.isfinite(x) for x in d):
            plots.plot_period_diameter(rows, d, title=results_path.stem, path=out_dir / "sample_period_diameter.png")
            sample_figs.append(("sample_period_diameter.png",
                                "Rotation period (PA: P; NPA: P_psi) against diameter of the classified objects, "
                                "with lines of constant damping time (Burns & Safronov 1973 form with mu Q = 5e11 "
                                "Pa, density 2000 kg/m^3 and K3^2 = 0.03, the values behind Harris 1994's "
                                "constant); symbols: blue circle PA, red up-triangle NPA SAM, orange down-triangle "
                                "NPA LAM, purple diamond NPA with the mode unknown. Objects without a rotation "
                                "period (undecided, screen verdicts, NPA without P_psi) are not plotted."))
        else:
            sample_notes.append("No diameters are known (give the report a size table), so no period-diameter "
                                "diagram.")
    sample_notes.extend(side_notes)
    from tumble.results import read_provenance

    body = _survey_body(rows, links, sample_figs, sample_notes, results_path) + _provenance_html(
        read_provenance(table))
    index = out_dir / "index.html"
    _write_page(index, _page(title, f"{len(rows)} objects from {_e(results_path.name)}. Scientific "
                                   "estimates for research use, not operational decisions.", body, script=True))
    return index


def _counts_html(label: str, counts: Counter) -> str:
    items = "".join(f"<span>{_e(k or '-')}: <b>{v}</b></span>" for k, v in sorted(counts.items()))
    return f"<p class=\"counts\"><b>{_e(label)}</b><br>{items or '-'}</p>"


def _survey_body(rows, links, sample_figs, sample_notes, results_path) -> str:
    ok = [r for r in rows if str(r.get("status")) == "ok"]
    parts = ["<h2>Summary</h2>",
             _counts_html("status", Counter(str(r.get("status", "")) for r in rows)),
             _counts_html("rotation (objects with status ok)", Counter(
                 str(r.get("rotation", "")) + (f" {r.get('mode')}" if str(r.get("rotation")) == "NPA"
                                               and str(r.get("mode") or "") not in ("", "none") else "")
                for r in ok)),
             _counts_html("grade (objects with status ok)", Counter(str(r.get("grade", "")) for r in ok))]
    parts.append("<h2>Objects</h2>")
    parts.append("<p><label for=\"filter\">Filter rows: </label><input id=\"filter\" type=\"search\" "
                 "placeholder=\"text in any column, e.g. NPA or KRN-00\"> <span id=\"shown\" class=\"note\"></span>"
                 "</p><p class=\"note\">Click a column header to sort by it (again to reverse). Periods in hours; "
                 "'-' where a value does not apply.</p>")
    head = "".join(f"<th data-col=\"{_e(f.name)}\" title=\"{_e(f.name)}: {_e(f.description)}\">{_e(f.header)}"
                   f"{(' (' + _e(unit_label(f.unit)) + ')') if unit_label(f.unit) else ''}</th>"
                   for f in SURVEY_COLUMNS)
    body = []
    for r in rows:
        name = str(r.get("object", ""))
        cells = "".join(_cell(r, f, links.get(name) if f.name == "object" else None) for f in SURVEY_COLUMNS)
        body.append(f"<tr>{cells}</tr>")
    parts.append(f"<div class=\"scroll\"><table id=\"objects\" class=\"sortable\"><thead><tr>{head}</tr></thead>"
                 "<tbody>" + "\n".join(body) + "</tbody></table></div>")
    parts.append("<h2>Sample figures</h2>")
    for fname, caption in sample_figs:
        parts.append(f"<figure><img src=\"{_e(fname)}\" alt=\"{_e(caption)}\"><figcaption>{_e(caption)}"
                     "</figcaption></figure>")
    for n in sample_notes:
        parts.append(f"<p class=\"note\">{_e(n)}</p>")
    parts.append(_cautions_html())
    return "\n".join(parts)


# ---------------------------------------------------------------------------
# what `tumble report` calls
# ---------------------------------------------------------------------------
def write_report(source, out_dir, *, objects_dir=None, data=None, read_options=None, sizes=None,
                 figures: bool = True, progress: bool = False) -> Path:
    """Report from ``source``: a ``tumble classify`` output folder (``verdict.json``, optional
    ``posterior.npz``) or a results catalogue (a survey). Returns the index page's path.

    For a classify folder, ``data`` are the object's photometry files (for the figures).
    """
    source = Path(source)
    if source.is_dir():
        vpath = source / "verdict.json"
        if vpath.exists():
            try:
                verdict = json.loads(vpath.read_text(encoding="utf-8"))
                if not isinstance(verdict, dict):
                    raise ValueError("not a JSON object")
            except (OSError, ValueError) as exc:
                raise ReportError(f"{vpath}: unreadable verdict ({exc})") from None
            lc = None
            note = "No photometry given to the report (tumble report --data FILE...), so no light-curve figures."
            if data and figures:
                from tumble.photometry import read_lightcurve

                lc = read_lightcurve([str(p) for p in data], options=read_options)
                note = ""
            try:
                post = _load_posterior(source / "posterior.npz") if figures else None
            except ReportError as exc:  # the verdict stands; only the pair plot is lost
                post = None
                note = f"{note} The posterior samples were skipped: {exc}".strip()
            return write_object_report(out_dir, verdict, lc=lc, posterior=post, data_note=note)
        results = source / "results.ecsv"
        if results.exists():
            return write_survey_report(results, out_dir, objects_dir, data=data, read_options=read_options,
                                       sizes=sizes, figures=figures, progress=progress)
        raise ReportError(f"{source}: neither a classify output folder (verdict.json) nor one with results.ecsv")
    if not source.exists():
        raise ReportError(f"{source}: no such file or folder")
    return write_survey_report(source, out_dir, objects_dir, data=data, read_options=read_options, sizes=sizes,
                               figures=figures, progress=progress)
