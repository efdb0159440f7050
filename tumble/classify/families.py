"""The two shape-free model families compared by the evidence.

PA: a one-period Fourier series with slowly drifting coefficients; NPA: the same plus the
combination terms of a second period, the two-dimensional Fourier series of Pravec et al.
(2005, Icarus 173, 108). Each family is an equal-weight mixture over its harmonic and drift
orders (:func:`mixture`). The bases themselves live in :mod:`tumble.model`.
"""

from __future__ import annotations

import math

from scipy import special

from tumble.model import FourierBasis, FourierVariant

__all__ = ["PA_VARIANTS", "NPA_COMBO_ORDERS", "NPA_MAX_BASE_HARMONICS", "LONG_DRIFT_SCALE_D",
           "LONG_DRIFT_MAX_DEGREE", "pa_variants", "npa_variants", "pa_basis", "npa_basis", "mixture"]

#: The PA family: (harmonics, drift degree) pairs, equal prior weight.
PA_VARIANTS = tuple(FourierVariant(h, d) for h in (1, 2, 4, 6) for d in (0, 1, 3))
#: Long spans: one extra degree of coefficient drift per this many days of data (the geometry of a
#: sparse survey season changes the light-curve shape more than a cubic drift can follow).
LONG_DRIFT_SCALE_D = 12.0
#: Largest drift degree of the long-span variants.
LONG_DRIFT_MAX_DEGREE = 9
#: Orders m of the two-dimensional combination terms in the NPA family.
NPA_COMBO_ORDERS = (1, 2, 3)
#: The NPA family: each PA base with at most this many harmonics, plus each combination order.
NPA_MAX_BASE_HARMONICS = 4


def pa_variants(span_d: float) -> tuple:
    """The PA family for a data span: :data:`PA_VARIANTS`, plus high-degree drift variants on long spans.

    Over a season the viewing and illumination geometry change the shape of a PA light curve
    (amplitude-phase effect, aspect, and the non-uniform synodic phase drift); a cubic drift of the
    coefficients cannot follow that over months, and a two-period series then absorbs it. A span of
    ``T`` days gets Legendre drift of degree ``min(T / LONG_DRIFT_SCALE_D, LONG_DRIFT_MAX_DEGREE)``
    (when above 3) for H = 2, 4 and 6: a coefficient can change on time scales of about two weeks,
    but not within a night or a few days, where a second period of a tumbler lives.
    """
    d = min(int(span_d / LONG_DRIFT_SCALE_D), LONG_DRIFT_MAX_DEGREE)
    if d <= 3:
        return PA_VARIANTS
    return PA_VARIANTS + tuple(FourierVariant(h, d) for h in (2, 4, 6))


def npa_variants(pa_vars) -> tuple:
    """The NPA family built on a PA family: each base with at most NPA_MAX_BASE_HARMONICS, times each combination order."""
    return tuple(FourierVariant(v.n_harmonics, v.drift, m) for v in pa_vars
                 if v.n_harmonics <= NPA_MAX_BASE_HARMONICS for m in NPA_COMBO_ORDERS)


def pa_basis(span_d: float) -> FourierBasis:
    """The PA family's basis for a span."""
    return FourierBasis.build(pa_variants(span_d))


def npa_basis(span_d: float) -> FourierBasis:
    """The NPA family's basis for a span."""
    return FourierBasis.build(npa_variants(pa_variants(span_d)))


def mixture(lnz):
    """Equal-weight mixture over variants (last axis) of log evidences."""
    return special.logsumexp(lnz, axis=-1) - math.log(lnz.shape[-1])
