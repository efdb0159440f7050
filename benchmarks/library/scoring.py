"""Scores of a results table (one row per object, as written by ``bench_classify.py run``).

- False-NPA rate on PA bodies per plan (dense, sparse, close approach), with the one-sided 95 %
  Clopper-Pearson upper limit (Clopper & Pearson 1934, Biometrika 26, 404; via ``scipy.stats.beta``).
- NPA recall in bins of signature/noise per plan, with two-sided 95 % Clopper-Pearson intervals.
- Reliability of ``p_npa``: binned mean prediction against the observed NPA fraction, and the
  expected calibration error ``ECE = sum_b (n_b / N) |mean p_b - observed_b|`` (Naeini, Cooper &
  Hauskrecht 2015, AAAI, 2901), with a figure.
- Grade confusion (truth class against verdict and grade), period accuracy (within 1 % and 2 %) of
  PA verdicts on PA bodies and of NPA verdicts on tumblers, and what flat, pure-noise and
  slow short-arc objects receive.

Verdict fields are read through :data:`FIELD_ALIASES`, so a renamed field needs one line here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["clopper_pearson", "expected_calibration_error", "reliability_table", "false_npa_table",
           "recall_table", "period_accuracy", "report_text", "get", "FIELD_ALIASES", "plot_reliability"]

#: Where each statistic is found in a row, first match wins (the verdict's names may change).
FIELD_ALIASES = {
    "rotation": ("rotation", "verdict", "verdict.rotation"),
    "grade": ("grade", "verdict.grade"),
    "p_npa": ("p_npa", "verdict.p_npa"),
    "ln_b": ("ln_bayes_factor", "ln_b", "verdict.ln_bayes_factor"),
    "ln_b_err": ("ln_bayes_factor_err", "ln_b_err"),
    "period_h": ("period_h",),
    "p_psi_h": ("p_psi_h",),
    "p_phi_h": ("p_phi_h",),
    "p1_h": ("p1_h",),
    "amplitude_mag": ("amplitude_mag",),
    "mode": ("mode",),
    "untestable": ("untestable", "npa_untestable"),
    "screen_flag": ("screen_flag",),
}
#: Confidence of the limits printed.
CONFIDENCE = 0.95
#: Edges of the signature/noise bins of the recall table.
RECALL_EDGES = (0.0, 0.5, 1.0, 3.0, 10.0, math.inf)
#: Bins of the reliability table and of the ECE (equal width in p).
N_RELIABILITY_BINS = 10
#: Relative tolerances of the period-accuracy figures (issue 14: within 1 % and 2 %).
PERIOD_TOLERANCES = (0.01, 0.02)
#: ln B at or below minus this is the classifier's stand-in weight for an excluded alternative (issue 14), counted apart.
LN_B_STAND_IN = 1000.0
#: Plans reported separately.
PLANS = ("dense", "sparse", "close")


def get(row: dict, name: str, default=math.nan):
    """A statistic of a row through :data:`FIELD_ALIASES`."""
    for key in FIELD_ALIASES.get(name, (name,)):
        if key in row and row[key] is not None:
            return row[key]
    return default


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


@dataclass(frozen=True)
class Rate:
    """k successes of n with a confidence interval (lo, hi)."""

    k: int
    n: int
    lo: float
    hi: float

    @property
    def value(self) -> float:
        return self.k / self.n if self.n else math.nan

    def text(self) -> str:
        if not self.n:
            return "0/0"
        return f"{self.k}/{self.n} = {self.value:.3f} [{self.lo:.3f}, {self.hi:.3f}]"


def clopper_pearson(k: int, n: int, confidence: float = CONFIDENCE, *, one_sided: bool = False) -> tuple:
    """Exact binomial interval (Clopper & Pearson 1934) from beta quantiles.

    Two-sided: ``(B(a/2; k, n-k+1), B(1-a/2; k+1, n-k))``; one-sided upper limit: ``(0, B(1-a; k+1, n-k))``
    (with the conventions 0 at k = 0 and 1 at k = n).
    """
    if n <= 0:
        return (0.0, 1.0)
    a = 1.0 - confidence
    if one_sided:
        hi = 1.0 if k >= n else float(stats.beta.ppf(1.0 - a, k + 1, n - k))
        return (0.0, hi)
    lo = 0.0 if k <= 0 else float(stats.beta.ppf(a / 2.0, k, n - k + 1))
    hi = 1.0 if k >= n else float(stats.beta.ppf(1.0 - a / 2.0, k + 1, n - k))
    return (lo, hi)


def _rate(k, n, one_sided=False) -> Rate:
    lo, hi = clopper_pearson(k, n, one_sided=one_sided)
    return Rate(int(k), int(n), lo, hi)


def ok_rows(rows, split="all"):
    """Rows that ran (status ok) in a split."""
    return [r for r in rows if r.get("status") == "ok" and (split == "all" or r.get("true.split") == split)]


def is_npa_verdict(row) -> bool:
    return str(get(row, "rotation", "")).upper() == "NPA"


# ---------------------------------------------------------------------------
# Calibration of a probability


@dataclass(frozen=True)
class ReliabilityBin:
    """One bin of a reliability table: edges, count, mean prediction, observed fraction and its interval."""

    lo: float
    hi: float
    n: int
    mean_p: float
    observed: float
    observed_lo: float
    observed_hi: float


def reliability_table(p, y, n_bins: int = N_RELIABILITY_BINS) -> list:
    """Equal-width bins of predicted probability ``p`` against outcomes ``y`` (0/1); empty bins omitted."""
    p = np.asarray(p, float)
    y = np.asarray(y, float)
    keep = np.isfinite(p)
    p, y = np.clip(p[keep], 0.0, 1.0), y[keep]
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    idx = np.clip(np.digitize(p, edges[1:-1]), 0, n_bins - 1)
    out = []
    for b in range(n_bins):
        m = idx == b
        n = int(m.sum())
        if n:
            k = int(y[m].sum())
            lo, hi = clopper_pearson(k, n)
            out.append(ReliabilityBin(float(edges[b]), float(edges[b + 1]), n, float(p[m].mean()), k / n, lo, hi))
    return out


def expected_calibration_error(p, y, n_bins: int = N_RELIABILITY_BINS) -> float:
    """ECE: count-weighted mean |mean prediction - observed fraction| over equal-width bins."""
    table = reliability_table(p, y, n_bins)
    n = sum(b.n for b in table)
    return float(sum(b.n * abs(b.mean_p - b.observed) for b in table) / n) if n else math.nan


def plot_reliability(tables: dict, path, title: str = "reliability of p_npa") -> None:
    """Reliability diagram (one curve per table, with counts) written as a PNG atomically."""
    from matplotlib.figure import Figure

    from tumble._io import atomic_path

    fig = Figure(figsize=(5.2, 5.0))
    ax = fig.add_subplot(111)
    ax.plot([0, 1], [0, 1], color="0.6", lw=1, ls="--", label="perfect calibration")
    for (label, table), marker in zip(tables.items(), "osD^v"):
        if not table:
            continue
        x = [b.mean_p for b in table]
        yv = [b.observed for b in table]
        err = [[b.observed - b.observed_lo for b in table], [b.observed_hi - b.observed for b in table]]
        ax.errorbar(x, yv, yerr=err, marker=marker, ms=5, capsize=2, lw=1, label=label)
        for b in table:
            ax.annotate(str(b.n), (b.mean_p, b.observed), textcoords="offset points", xytext=(4, -10), fontsize=7)
    ax.set_xlim(-0.02, 1.02)
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("predicted P(NPA) (bin mean)")
    ax.set_ylabel("observed NPA fraction (95 % interval)")
    ax.set_title(title, fontsize=10)
    ax.legend(fontsize=8, loc="lower right")
    with atomic_path(path) as tmp:
        fig.savefig(tmp, dpi=110, format="png")


# ---------------------------------------------------------------------------
# Tables


def false_npa_table(rows) -> dict:
    """False-NPA rate on PA bodies per plan and overall (one-sided 95 % upper limit)."""
    out = {}
    pa = [r for r in rows if r.get("true.truth_class") == "PA"]
    for plan in PLANS + ("all",):
        sub = [r for r in pa if plan == "all" or r.get("true.plan_kind") == plan]
        out[plan] = _rate(sum(is_npa_verdict(r) for r in sub), len(sub), one_sided=True)
    return out


def recall_table(rows, edges=RECALL_EDGES) -> dict:
    """NPA recall per plan and signature/noise bin: {(plan, lo, hi): Rate}."""
    out = {}
    npa = [r for r in rows if r.get("true.truth_class") == "NPA"]
    for plan in PLANS:
        sub = [r for r in npa if r.get("true.plan_kind") == plan]
        for lo, hi in zip(edges[:-1], edges[1:]):
            b = [r for r in sub if lo <= _num(r.get("true.signature_over_noise")) < hi]
            out[(plan, lo, hi)] = _rate(sum(is_npa_verdict(r) for r in b), len(b))
    return out


def _within(found, true, tol) -> bool:
    f, t = _num(found), _num(true)
    return bool(np.isfinite(f) and np.isfinite(t) and t > 0 and abs(f / t - 1.0) <= tol)


#: Largest |n1|, |n2| of the combinations n1 f_phi + n2 f_psi that an NPA light-curve period may match.
NPA_COMBINATION_ORDER = 2


def npa_lightcurve_match(row, tol) -> bool:
    """Both light-curve periods found (p1_h, p2_h) are within ``tol`` of combinations n1 f_phi + n2 f_psi
    (|n| <= 2) of the true periods: the frequencies of a tumbler's light curve (Kaasalainen 2001), the
    check for routes that report light-curve periods but not P_psi, P_phi."""
    fp, fs = 1.0 / _num(row.get("true.p_phi_h")), 1.0 / _num(row.get("true.p_psi_h"))
    k = NPA_COMBINATION_ORDER
    combos = [abs(a * fp + b * fs) for a in range(-k, k + 1) for b in range(-k, k + 1) if (a or b)]
    found = [1.0 / _num(get(row, "p1_h")), 1.0 / _num(get(row, "p2_h"))]
    if not all(np.isfinite(found)) or not all(np.isfinite([fp, fs])):
        return False
    return all(any(c > 0 and abs(f / c - 1.0) <= tol for c in combos) for f in found)


def period_accuracy(rows) -> dict:
    """Fractions of PA verdicts on PA bodies with the period, and NPA verdicts on tumblers with both periods, within tolerance."""
    out = {}
    pa = [r for r in rows if r.get("true.truth_class") == "PA" and str(get(r, "rotation", "")).upper() == "PA"]
    npa = [r for r in rows if r.get("true.truth_class") == "NPA" and is_npa_verdict(r)]
    for tol in PERIOD_TOLERANCES:
        for plan in PLANS + ("all",):
            sp = [r for r in pa if plan == "all" or r.get("true.plan_kind") == plan]
            k = sum(_within(get(r, "period_h"), r.get("true.period_h"), tol) for r in sp)
            out[("PA", plan, tol)] = _rate(k, len(sp))
            k = sum(any(_within(get(r, "period_h"), _num(r.get("true.period_h")) * m, tol) for m in (0.5, 1.0, 2.0))
                    for r in sp)
            out[("PA-alias", plan, tol)] = _rate(k, len(sp))
            sn = [r for r in npa if plan == "all" or r.get("true.plan_kind") == plan]
            k = sum(_within(get(r, "p_psi_h"), r.get("true.p_psi_h"), tol)
                    and _within(get(r, "p_phi_h"), r.get("true.p_phi_h"), tol) for r in sn)
            out[("NPA", plan, tol)] = _rate(k, len(sn))
            out[("NPA-lc", plan, tol)] = _rate(sum(npa_lightcurve_match(r, tol) for r in sn), len(sn))
    return out


#: Clear dense PA (issue 15's sidereal target): amplitude at least this many noise sigmas ...
CLEAR_PA_AMPLITUDE_OVER_NOISE = 5.0
#: ... and a span of at least this many rotations.
CLEAR_PA_ROTATIONS = 3.0
#: The sidereal-period tolerance of the target (0.1 %).
SIDEREAL_TOLERANCE = 0.001


def sidereal_accuracy(rows) -> dict:
    """PA verdicts on clear dense PA bodies: period within 0.1 % and the 1-sigma interval covering the truth.

    Returns ``{kind: (within Rate, covered Rate)}`` for ``kind`` in 'all', 'sidereal', 'synodic'
    (``period_kind`` of the verdict).
    """
    sel = [r for r in rows if r.get("true.truth_class") == "PA" and r.get("true.plan_kind") == "dense"
           and str(get(r, "rotation", "")).upper() == "PA"
           and _num(r.get("true.amplitude_over_noise")) >= CLEAR_PA_AMPLITUDE_OVER_NOISE
           and _num(r.get("true.span_over_period")) >= CLEAR_PA_ROTATIONS
           and np.isfinite(_num(get(r, "period_h")))]
    out = {}
    for kind in ("all", "sidereal", "synodic"):
        sub = [r for r in sel if kind == "all" or r.get("period_kind") == kind]
        within = sum(_within(get(r, "period_h"), r.get("true.period_h"), SIDEREAL_TOLERANCE) for r in sub)
        covered = sum(abs(_num(get(r, "period_h")) - _num(r.get("true.period_h"))) <= _num(r.get("period_h_err"))
                      for r in sub)
        out[kind] = (_rate(within, len(sub)), _rate(covered, len(sub)))
    return out


def grade_confusion(rows) -> dict:
    """Counts of (truth class, verdict rotation, grade)."""
    out = {}
    for r in rows:
        key = (r.get("true.truth_class", "?"), str(get(r, "rotation", "?")), str(get(r, "grade", "?")))
        out[key] = out.get(key, 0) + 1
    return dict(sorted(out.items()))


def _has_period(row) -> bool:
    return any(np.isfinite(_num(get(row, k))) for k in ("period_h", "p_psi_h", "p_phi_h"))


# ---------------------------------------------------------------------------
# The report


def report_text(rows, *, split: str = "all", figure_path=None, p_field: str = "p_npa") -> str:
    """The benchmark's printed report of one table (and the reliability figure when a path is given)."""
    lines = []
    w = lines.append
    all_rows = [r for r in rows if split == "all" or r.get("true.split") == split]
    good = ok_rows(rows, split)
    routes = sorted({r.get("route", "?") for r in all_rows})
    w(f"=== route(s) {', '.join(routes)}; split {split}: {len(good)} objects scored, "
      f"{len(all_rows) - len(good)} error/timeout rows ===")
    bad = [r for r in all_rows if r.get("status") != "ok"]
    for r in bad[:10]:
        w(f"   {r['object_id']}: {r.get('status')} {r.get('error', '')[:100]}")
    cats = {}
    for r in good:
        cats[r.get("true.category", "?")] = cats.get(r.get("true.category", "?"), 0) + 1
    w("objects per category: " + ", ".join(f"{k} {v}" for k, v in sorted(cats.items())))
    wall = [_num(r.get("route_runtime_s")) for r in good]
    if wall:
        w(f"route wall time per object: median {np.nanmedian(wall):.1f} s, 90th percentile {np.nanpercentile(wall, 90):.1f} s")

    w("\nFalse NPA on PA bodies (verdict NPA), one-sided 95 % Clopper-Pearson upper limit (targets: dense <= 1 %, "
      "sparse <= 2 %, close approach 0):")
    for plan, rate in false_npa_table(good).items():
        w(f"   {plan:7s} {rate.k:4d}/{rate.n:<4d} = {rate.value:6.3f}   95 % upper limit {rate.hi:.3f}")

    for cls in ("none", "binary"):  # flat/noise curves; binaries when the library holds them (issue 20)
        sub = [r for r in good if r.get("true.truth_class") == cls]
        if sub:
            w(f"   truth class {cls}: {_rate(sum(is_npa_verdict(r) for r in sub), len(sub), one_sided=True).text()} called NPA")

    w("\nNPA recall (verdict NPA) by signature/noise, two-sided 95 % intervals (target dense >= 0.90 at >= 3):")
    for (plan, lo, hi), rate in recall_table(good).items():
        if rate.n:
            w(f"   {plan:7s} sig/noise [{lo:g}, {hi:g}): {rate.text()}")

    y = np.array([r.get("true.truth_class") == "NPA" for r in good], float)
    p = np.array([_num(get(r, p_field)) for r in good])
    w(f"\nReliability of {p_field} (equal-width bins; all objects with a finite value, truth NPA = 1):")
    w(f"   {'bin':>13s} {'n':>5s} {'mean p':>8s} {'observed':>9s} {'95 % interval':>17s}")
    table = reliability_table(p, y)
    for b in table:
        w(f"   [{b.lo:.1f}, {b.hi:.1f}) {b.n:5d} {b.mean_p:8.3f} {b.observed:9.3f}   [{b.observed_lo:.3f}, {b.observed_hi:.3f}]")
    w(f"   expected calibration error: {expected_calibration_error(p, y):.3f} (target <= 0.05); "
      f"{int(np.sum(~np.isfinite(p)))} objects without a value")
    tables = {"all": table}
    for plan in PLANS:
        m = np.array([r.get("true.plan_kind") == plan for r in good])
        if m.any():
            tables[plan] = reliability_table(p[m], y[m])
            w(f"   ECE {plan}: {expected_calibration_error(p[m], y[m]):.3f} ({int(m.sum())} objects)")
    if figure_path is not None and len(table):
        plot_reliability(tables, figure_path, f"reliability of {p_field} ({', '.join(routes)}; {split})")
        w(f"   figure: {figure_path}")

    w("\nGrade confusion (truth class | verdict | grade: count):")
    for (t, v, g), n in grade_confusion(good).items():
        w(f"   {t:5s} {v:10s} {g:10s} {n:5d}")

    w("\nPeriods within 1 % / 2 % of the truth:")
    acc = period_accuracy(good)
    for kind, label in (("PA", "PA verdicts on PA bodies, period"),
                        ("PA-alias", "PA verdicts on PA bodies, period or its half or double"), ("NPA", "NPA verdicts on tumblers, P_psi and P_phi"),
                        ("NPA-lc", "NPA verdicts on tumblers, both light-curve periods at n1 f_phi + n2 f_psi")):
        for plan in PLANS + ("all",):
            r1, r2 = acc[(kind, plan, 0.01)], acc[(kind, plan, 0.02)]
            if r1.n:
                w(f"   {label} ({plan}): {r1.k}/{r1.n} = {r1.value:.3f} within 1 %, {r2.k}/{r2.n} = {r2.value:.3f} within 2 %")

    sid = sidereal_accuracy(good)
    if sid["all"][0].n:
        w("\nClear dense PA (amplitude >= 5 noise, >= 3 rotations), PA verdicts: period within 0.1 % (target >= 95 %); "
          "1-sigma interval covers the truth (target 60-76 %):")
        for kind, (within, covered) in sid.items():
            if within.n:
                w(f"   {kind:9s} {within.k}/{within.n} = {within.value:.3f} within 0.1 %, "
                  f"{covered.k}/{covered.n} = {covered.value:.3f} covered")

    big = [r for r in good if _num(get(r, "ln_b")) <= -LN_B_STAND_IN]
    if big:
        per = {}
        for r in big:
            per[r.get("true.category", "?")] = per.get(r.get("true.category", "?"), 0) + 1
        w(f"\nln B <= -{LN_B_STAND_IN:g} (the stand-in exclusion weight or -inf, not evidence) on {len(big)} objects: "
          + ", ".join(f"{k} {v}" for k, v in sorted(per.items())))

    w("\nCases the data cannot decide (targets: no period and no grade on flat/noise; no PA grade above the lowest "
      "where NPA is not testable):")
    for cat_prefix in ("flat", "noise", "slow-pa-short-arc"):
        sub = [r for r in good if str(r.get("true.category", "")).startswith(cat_prefix)]
        if not sub:
            continue
        with_period = sum(_has_period(r) for r in sub)
        graded = {}
        for r in sub:
            key = f"{get(r, 'rotation', '?')}/{get(r, 'grade', '?')}"
            graded[key] = graded.get(key, 0) + 1
        w(f"   {cat_prefix:18s} {len(sub):4d} objects: {with_period} with a period; verdicts "
          + ", ".join(f"{k} {v}" for k, v in sorted(graded.items())))
    return "\n".join(lines)
