"""Geometry-aware principal-axis fit for sparse (and dense) photometry.

Public API
----------
- :func:`fit_pa_geometry` -> :class:`GeometricPAFit`: sidereal period (with its
  68 % interval and alias family), spin axis with the mirror ambiguity, axis
  ratios and the H,G1,G2 (or H,G12) phase curve of a rotating triaxial
  ellipsoid seen with each point's Sun and observer directions.
- :func:`fit_phase_curve` -> :class:`PhaseCurveFit`: H,G1,G2 or H,G12 alone.
- :func:`bisector_chi2` and :func:`bisector_chi2_reference`: the batched scan
  kernel and its slow reference.

Method and limits: ``docs/methods-sparse.md``. Results are scientific estimates
for research use.
"""

from tumble.sparse.fit import (
    ALIAS_DELTA_CHI2,
    DEFAULT_PERIOD_RANGE_H,
    DETECTION_DELTA_BIC,
    MAX_FREQUENCIES,
    AliasMember,
    GeometricPAFit,
    PoleSolution,
    PosteriorSummary,
    fit_pa_geometry,
)
from tumble.sparse.kernel import bisector_chi2, bisector_chi2_reference
from tumble.sparse.model import PHASE_MODELS, SCATTERING_LAWS, SparseFitError
from tumble.sparse.phase_curve import PhaseCurveFit, fit_phase_curve

__all__ = [
    "fit_pa_geometry",
    "GeometricPAFit",
    "PoleSolution",
    "AliasMember",
    "PosteriorSummary",
    "fit_phase_curve",
    "PhaseCurveFit",
    "bisector_chi2",
    "bisector_chi2_reference",
    "SparseFitError",
    "SCATTERING_LAWS",
    "PHASE_MODELS",
    "DEFAULT_PERIOD_RANGE_H",
    "MAX_FREQUENCIES",
    "ALIAS_DELTA_CHI2",
    "DETECTION_DELTA_BIC",
]
