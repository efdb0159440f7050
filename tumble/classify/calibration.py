"""The calibrated probability of NPA: a map fitted on the simulated calibration library.

``p_npa`` from Bayes' rule on the shape-free families' ``ln B`` is the probability *under those
models*; measured on a library of simulated objects (``benchmarks/bench_classify.py``, independent
shapes, scattering laws, numerically integrated attitudes, dense, sparse and close-approach plans)
it is over-confident at both ends. The calibration map is a logistic regression (Cox 1958, J. R.
Statist. Soc. B 20, 215) of the truth on a few decision statistics (:data:`FEATURES`), fitted on
the library's calibration half and scored on the held-out half (``docs/validation-classify.md``).
It is shipped as ``tumble/classify/data/calibration.json``.

The map's truth is *detectable* tumbling: a tumbler whose signature (the rms of what one period
cannot fit) is below the per-point noise is left out of the fit, since no light curve of that
quality can show it; the verdict's NPA detection limit states what could have been missed. So
``1 - p_npa`` is the probability of no tumbling above the noise, not of no tumbling at all.

The library has its own share of tumblers ``pi_lib``; a user's prior ``p0`` replaces it by the
usual prior-odds correction, ``logit p = logit p_map - logit pi_lib + logit p0``.

Grades come from the calibrated probability of the stated rotation, with the Kass & Raftery (1995,
section 3.2) bands of ``2 ln B`` (2, 6, 10) read as posterior probabilities at even prior odds
(:data:`GRADE_PROBABILITIES`: 0.731, 0.953, 0.993).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np
from scipy import special

from tumble.classify.thresholds import GRADE_EDGES_2LNB, GRADE_NAMES

__all__ = ["CalibrationMap", "FEATURES", "calibration_features", "load_calibration", "calibrated_p_npa",
           "grade_from_probability", "GRADE_PROBABILITIES"]

#: |ln B| is clipped here before the signed logarithm (an infinite ln B is the extreme).
LN_B_CLIP = 1.0e4
#: The statistics the map reads, in coefficient order (definitions in :func:`calibration_features`).
#: Only what changes the meaning of ln B: the data kind. Statistics of the sample (number of points,
#: span over period, amplitude over noise) were tried and left out: on a library of ~100 objects per
#: half they learned the population's make-up (the demo's clear tumbler dropped to p = 0.63 for having
#: fewer cycles than the library's PA bodies) and did not improve the held-out score.
FEATURES = ("signed_log_ln_b", "dense_signed_log_ln_b", "sparse_fraction")
#: Posterior probability of the stated rotation at the lower edge of each grade: the Kass & Raftery
#: (1995) bands of 2 ln B at even prior odds, p = 1 / (1 + exp(-edge / 2)).
GRADE_PROBABILITIES = tuple(1.0 / (1.0 + math.exp(-e / 2.0)) for e in GRADE_EDGES_2LNB)


def _signed_log(x: float) -> float:
    return math.copysign(math.log1p(abs(x)), x) if not math.isnan(x) else math.nan


def calibration_features(*, ln_b: float, sparse_fraction: float) -> np.ndarray:
    """The map's inputs (NaN where missing), in the order of :data:`FEATURES`.

    - ``signed_log_ln_b``: sign(ln B) log(1 + |ln B|), ln B (nats) clipped to +-1e4;
    - ``dense_signed_log_ln_b``: ``signed_log_ln_b * (1 - sparse_fraction)``, the weight of the
      evidence on nightly-session data of its own: on sparse survey data the shape-free families
      cannot follow the changing geometry and a PA body's ln B reaches +250 (calibration library,
      ``docs/validation-classify.md``), so ln B means less there than in a dense campaign;
    - ``sparse_fraction``: the share of points without a nightly session.
    """
    lb = float(np.clip(ln_b, -LN_B_CLIP, LN_B_CLIP)) if not math.isnan(ln_b) else math.nan
    slb = _signed_log(lb)
    return np.array([slb, slb * (1.0 - float(sparse_fraction)), float(sparse_fraction)], float)


@dataclass(frozen=True)
class CalibrationMap:
    """A fitted logistic map (the JSON written by ``benchmarks/bench_classify.py calibrate``).

    Attributes
    ----------
    features : tuple of str
    centre, scale, fill : numpy.ndarray
        Standardisation and the value of a missing feature (raw units).
    coefficients : numpy.ndarray
    intercept : float
    base_rate : float
        Share of tumblers in the calibration half (``n_fit_npa / n_fit``).
    source : str
        Where the map comes from (library, route, commit).
    """

    features: tuple
    centre: np.ndarray
    scale: np.ndarray
    fill: np.ndarray
    coefficients: np.ndarray
    intercept: float
    base_rate: float
    source: str

    @classmethod
    def from_dict(cls, d: dict) -> "CalibrationMap":
        if tuple(d["features"]) != FEATURES:
            raise ValueError(f"calibration map features {d['features']} differ from {FEATURES}")
        return cls(tuple(d["features"]), np.asarray(d["centre"], float), np.asarray(d["scale"], float),
                   np.asarray(d["fill"], float), np.asarray(d["coefficients"], float), float(d["intercept"]),
                   float(d["n_fit_npa"]) / float(d["n_fit"]),
                   f"{d.get('library', '?')}, route {d.get('route', '?')}, commit {d.get('code_commit', '?')}")

    def probability(self, x: np.ndarray) -> float:
        """The map's P(NPA) at the library's base rate."""
        x = np.where(np.isfinite(x), x, self.fill)
        eta = self.intercept + float(((x - self.centre) / self.scale) @ self.coefficients)
        return float(special.expit(eta))


@lru_cache(maxsize=1)
def load_calibration() -> CalibrationMap | None:
    """The shipped map, or None when the package carries none."""
    try:
        text = resources.files("tumble.classify").joinpath("data/calibration.json").read_text()
    except (FileNotFoundError, ModuleNotFoundError, OSError):
        return None
    return CalibrationMap.from_dict(json.loads(text))


def calibrated_p_npa(cmap: CalibrationMap, x: np.ndarray, prior_npa: float) -> float:
    """P(NPA) from the map with the library's base rate replaced by ``prior_npa``."""
    p = min(max(cmap.probability(x), 1e-15), 1 - 1e-15)
    return float(special.expit(special.logit(p) - special.logit(cmap.base_rate) + special.logit(prior_npa)))


def grade_from_probability(p: float) -> str:
    """Grade of the calibrated probability of the stated rotation (:data:`GRADE_PROBABILITIES`)."""
    if not np.isfinite(p):
        return "none"
    level = sum(p >= edge for edge in GRADE_PROBABILITIES)
    return GRADE_NAMES[level]
