"""Calibration map: from the classifier's decision statistics to P(NPA), fitted on the library.

The map is a logistic regression (Cox 1958, J. R. Statist. Soc. B 20, 215)

    P(NPA) = 1 / (1 + exp(-(b0 + sum_j b_j z_j))),   z_j = (x_j - mean_j) / scale_j,

over the features of :data:`FEATURES` (each a named, documented function of one results row),
fitted by maximum likelihood with a small ridge penalty (``RIDGE``) using ``scipy.optimize.minimize``
(L-BFGS-B). The coefficient of every feature marked ``monotone`` is bounded below by zero, so the
map is non-decreasing in ln B: more evidence for NPA never lowers the probability. Missing features
(e.g. no period found) take the calibration half's median, recorded in the map.

It is fitted on the calibration half of a results table and scored on the held-out half (reliability
table, expected calibration error, Brier score, log loss, false-NPA rate at p > 0.5), side by side
with the classifier's own ``p_npa``. :func:`save_calibration` writes a small JSON that the package
can ship and evaluate with :func:`apply_calibration` (numpy only).
"""

from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass

import numpy as np
from scipy import optimize

from library import scoring

__all__ = ["Feature", "FEATURES", "CalibrationMap", "fit_calibration", "apply_calibration", "fit_and_evaluate",
           "save_calibration", "feature_matrix", "MAP_VERSION"]

#: Version of the map's JSON layout.
MAP_VERSION = 1
#: Ridge penalty on the standardised coefficients (the intercept is free): keeps separable data finite;
#: the same as a Gaussian prior of standard deviation 1/sqrt(2 RIDGE) = 2.2 on each.
RIDGE = 0.1
#: ln B is used through a signed logarithm, sign(x) log(1 + |x|): monotone, and the -1e4 stand-in values
#: of an excluded alternative do not dominate the fit.
LN_B_FEATURE = "signed_log_ln_b"


def _num(v) -> float:
    try:
        return float(v)
    except (TypeError, ValueError):
        return math.nan


#: Tumbling is the map's truth only where its signature (the rms of what one period cannot fit,
#: ``true.signature_over_noise``) is at least the per-point noise: weaker tumbling no light curve of that
#: quality can show (the verdict's NPA detection limit states it), and counting it as NPA truth taught
#: the map that a clear PA light curve says little (docs/validation-classify.md). Such objects are left
#: out of the fit and of the score, and reported apart.
DETECTABLE_SIGNATURE_OVER_NOISE = 1.0
#: What the map's probability is the probability of (written into the map's JSON).
TRUTH_DEFINITION = (f"tumbling with a signature at least {DETECTABLE_SIGNATURE_OVER_NOISE:g} x the per-point noise, "
                    "against PA, flat and binary bodies; weaker tumblers are left out of the fit")


def truth_label(row) -> float:
    """The map's truth: 1 for detectable tumbling, 0 for any other body, NaN for tumbling too weak to show."""
    if row.get("true.truth_class") != "NPA":
        return 0.0
    s = _num(row.get("true.signature_over_noise"))
    if math.isfinite(s) and s < DETECTABLE_SIGNATURE_OVER_NOISE:
        return math.nan
    return 1.0


def _package_features(row) -> np.ndarray:
    """The package's own definition of the map's inputs (tumble.classify.calibration), from a results row."""
    from tumble.classify.calibration import calibration_features

    # clipping and the signed logarithm are the package's (one definition)
    return calibration_features(ln_b=_num(scoring.get(row, "ln_b")), sparse_fraction=_num(row.get("lc.sparse_fraction")))


def feat_ln_b(row) -> float:
    """sign(ln B) log(1 + |ln B|), ln B (NPA:PA) in nats clipped to +-1e4 (-inf: no NPA model admissible)."""
    return float(_package_features(row)[0])


def feat_dense_ln_b(row) -> float:
    """signed_log_ln_b * (1 - sparse_fraction): the evidence's weight on nightly-session data."""
    return float(_package_features(row)[1])


def feat_sparse(row) -> float:
    """Fraction of sparse points (no session zero point)."""
    return float(_package_features(row)[2])


@dataclass(frozen=True)
class Feature:
    """One input of the map.

    Attributes
    ----------
    name : str
    function : callable
        ``function(row) -> float`` (NaN when missing).
    monotone : bool
        Coefficient bounded below by zero.
    """

    name: str
    function: object
    monotone: bool

    @property
    def definition(self) -> str:
        return (self.function.__doc__ or "").strip()


#: Features of the map (order = coefficient order).
FEATURES = (
    Feature(LN_B_FEATURE, feat_ln_b, True),
    Feature("dense_signed_log_ln_b", feat_dense_ln_b, True),
    Feature("sparse_fraction", feat_sparse, False),
)


@dataclass(frozen=True)
class CalibrationMap:
    """A fitted map.

    Attributes
    ----------
    features : tuple of str
    definitions : tuple of str
    centre, scale, fill : tuple of float
        Standardisation and the value used for a missing feature (raw units).
    coefficients : tuple of float
        One per feature (standardised units).
    intercept : float
    monotone : tuple of bool
    route : str
    n_fit, n_fit_npa : int
        Objects (and NPA objects) of the calibration half used.
    truth : str
        What the probability is the probability of (:data:`TRUTH_DEFINITION`).
    """

    features: tuple
    definitions: tuple
    centre: tuple
    scale: tuple
    fill: tuple
    coefficients: tuple
    intercept: float
    monotone: tuple
    route: str
    n_fit: int
    n_fit_npa: int
    truth: str = TRUTH_DEFINITION

    def to_dict(self) -> dict:
        d = asdict(self)
        d["version"] = MAP_VERSION
        d["model"] = "logistic: P = 1/(1 + exp(-(intercept + sum coefficients_j (x_j - centre_j)/scale_j)))"
        return d


def feature_matrix(rows, features=FEATURES) -> np.ndarray:
    """Raw feature values, shape (n_rows, n_features), NaN where missing."""
    return np.array([[f.function(r) for f in features] for r in rows], float).reshape(len(rows), len(features))


def _standardise(x, centre, scale, fill):
    x = np.where(np.isfinite(x), x, np.asarray(fill)[None, :])
    return (x - np.asarray(centre)[None, :]) / np.asarray(scale)[None, :]


def _neg_log_lik(theta, z, y, ridge):
    eta = theta[0] + z @ theta[1:]
    # log(1 + e^eta) - y eta, stably
    nll = np.sum(np.logaddexp(0.0, eta) - y * eta)
    grad_eta = 1.0 / (1.0 + np.exp(-eta)) - y
    g = np.concatenate([[grad_eta.sum()], z.T @ grad_eta])
    nll += ridge * np.sum(theta[1:] ** 2)
    g[1:] += 2 * ridge * theta[1:]
    return nll, g


def fit_calibration(rows, *, features=FEATURES, ridge: float = RIDGE, split: str | None = "calibration") -> CalibrationMap:
    """Fit the map on the rows of a split (status ok; truth from :func:`truth_label`, undetectable tumblers left out).

    Parameters
    ----------
    rows : list of dict
        A results table (``bench_classify.py run``).
    features : sequence of Feature
    ridge : float
        Penalty on the standardised coefficients.
    split : str or None
        Rows of this ``true.split`` only (None: all rows given).
    """
    use = [r for r in rows if r.get("status", "ok") == "ok" and (split is None or r.get("true.split") == split)
           and math.isfinite(truth_label(r))]
    if len(use) < 10:
        raise ValueError(f"calibration needs at least 10 rows, got {len(use)}")
    x = feature_matrix(use, features)
    y = np.array([truth_label(r) for r in use], float)
    fill = np.array([np.nanmedian(c) if np.isfinite(c).any() else 0.0 for c in x.T])
    xf = np.where(np.isfinite(x), x, fill[None, :])
    centre = xf.mean(axis=0)
    scale = xf.std(axis=0)
    scale = np.where(scale > 0, scale, 1.0)
    z = (xf - centre) / scale
    bounds = [(None, None)] + [((0.0, None) if f.monotone else (None, None)) for f in features]
    res = optimize.minimize(_neg_log_lik, np.zeros(len(features) + 1), args=(z, y, ridge), jac=True,
                            method="L-BFGS-B", bounds=bounds)
    route = ",".join(sorted({str(r.get("route", "?")) for r in use}))
    return CalibrationMap(tuple(f.name for f in features), tuple(f.definition for f in features),
                          tuple(map(float, centre)), tuple(map(float, scale)), tuple(map(float, fill)),
                          tuple(map(float, res.x[1:])), float(res.x[0]), tuple(f.monotone for f in features),
                          route, len(use), int(y.sum()))


def apply_calibration(cmap: CalibrationMap | dict, rows, features=FEATURES) -> np.ndarray:
    """Calibrated P(NPA) of each row."""
    d = cmap.to_dict() if isinstance(cmap, CalibrationMap) else cmap
    names = tuple(d["features"])
    feats = [f for f in features if f.name in names]
    feats.sort(key=lambda f: names.index(f.name))
    x = feature_matrix(rows, feats)
    z = _standardise(x, d["centre"], d["scale"], d["fill"])
    eta = d["intercept"] + z @ np.asarray(d["coefficients"])
    return 1.0 / (1.0 + np.exp(-eta))


def save_calibration(cmap: CalibrationMap, path, extra: dict | None = None) -> None:
    """Write the map as JSON atomically."""
    from pathlib import Path

    from tumble._io import atomic_path

    d = cmap.to_dict()
    if extra:
        d.update(extra)
    with atomic_path(Path(path)) as tmp:
        Path(tmp).write_text(json.dumps(d, indent=2) + "\n")


def _scores(p, y) -> dict:
    p = np.clip(np.asarray(p, float), 1e-12, 1 - 1e-12)
    y = np.asarray(y, float)
    return {"n": int(len(y)), "ece": scoring.expected_calibration_error(p, y), "brier": float(np.mean((p - y) ** 2)),
            "log_loss": float(-np.mean(y * np.log(p) + (1 - y) * np.log(1 - p)))}


def fit_and_evaluate(rows, figure_path=None) -> tuple:
    """Fit on the calibration half, score on the held-out half; (map, printed text).

    With ``figure_path``, the held-out reliability diagram of the classifier's ``p_npa`` and of the
    calibrated probability is written there (PNG).
    """
    cmap = fit_calibration(rows)
    held_all = [r for r in rows if r.get("status") == "ok" and r.get("true.split") == "heldout"]
    held = [r for r in held_all if math.isfinite(truth_label(r))]
    weak = [r for r in held_all if not math.isfinite(truth_label(r))]
    lines = [f"calibration map fitted on {cmap.n_fit} objects ({cmap.n_fit_npa} NPA) of the calibration half, "
             f"route {cmap.route}"]
    for name, c, m in zip(cmap.features, cmap.coefficients, cmap.monotone):
        lines.append(f"   {name:28s} {c:+.3f}{'  (bounded >= 0)' if m else ''}")
    lines.append(f"   intercept {cmap.intercept:+.3f}")
    if not held:
        lines.append("no held-out rows to score")
        return cmap, "\n".join(lines)
    y = np.array([truth_label(r) for r in held], float)
    p_cal = apply_calibration(cmap, held)
    p_raw = np.array([_num(scoring.get(r, "p_npa")) for r in held])
    p_raw_f = np.where(np.isfinite(p_raw), p_raw, 0.5)
    lines.append(f"truth: {cmap.truth}")
    lines.append(f"held-out half: {len(held)} objects ({int(y.sum())} NPA)")
    for label, p in (("classifier p_npa", p_raw_f), ("calibrated", p_cal)):
        s = _scores(p, y)
        pa = y == 0
        k = int(np.sum((p > 0.5) & pa))
        lo, hi = scoring.clopper_pearson(k, int(pa.sum()), one_sided=True)
        rec = int(np.sum((p > 0.5) & ~pa))
        lines.append(f"   {label:17s} ECE {s['ece']:.3f}  Brier {s['brier']:.3f}  log loss {s['log_loss']:.3f}  "
                     f"p>0.5 on non-NPA {k}/{int(pa.sum())} (95 % upper {hi:.3f})  on NPA {rec}/{int((~pa).sum())}")
    if weak:
        p_weak = apply_calibration(cmap, weak)
        lines.append(f"   tumblers below the detection threshold (left out above): {len(weak)}, calibrated p "
                     f"median {np.median(p_weak):.3f}, > 0.5 for {int(np.sum(p_weak > 0.5))}")
    if figure_path is not None:
        scoring.plot_reliability({"classifier p_npa": scoring.reliability_table(p_raw_f, y),
                                  "calibrated": scoring.reliability_table(p_cal, y)}, figure_path,
                                 f"held-out reliability, route {cmap.route}")
        lines.append(f"   figure: {figure_path}")
    lines.append("   reliability of the calibrated probability (held-out):")
    for b in scoring.reliability_table(p_cal, y):
        lines.append(f"      [{b.lo:.1f}, {b.hi:.1f}) n={b.n:4d} mean p {b.mean_p:.3f} observed {b.observed:.3f} "
                     f"[{b.observed_lo:.3f}, {b.observed_hi:.3f}]")
    return cmap, "\n".join(lines)
