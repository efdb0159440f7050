"""Bayes factors, posterior model probabilities and the published evidence scales.

References
----------
- Kass, R. E. & Raftery, A. E. (1995), "Bayes factors", Journal of the American
  Statistical Association 90, 773-795, §3.2: on ``2 ln B10``, 0-2 "not worth more
  than a bare mention", 2-6 "positive", 6-10 "strong", > 10 "very strong".
- Jeffreys, H. (1961), *Theory of Probability*, 3rd ed., Oxford, Appendix B:
  on ``log10 B``, 0-0.5, 0.5-1, 1-1.5, 1.5-2, > 2.
- Posterior odds = Bayes factor x prior odds (Kass & Raftery 1995, eq. 1).

The level functions return ordinal numbers only; the words attached to them
belong to the caller.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import special

from tumble.exceptions import TumbleError

__all__ = [
    "BayesFactor",
    "EvidenceScale",
    "KASS_RAFTERY_1995",
    "JEFFREYS_1961",
    "ln_bayes_factor",
    "posterior_probability",
    "evidence_level",
    "kass_raftery_level",
    "jeffreys_level",
]


@dataclass(frozen=True)
class BayesFactor:
    """Natural-log Bayes factor ``ln B10 = ln Z1 - ln Z0`` with its one-sigma error (nats)."""

    ln_b: float
    ln_b_err: float

    @property
    def two_ln_b(self) -> float:
        """``2 ln B10``, the quantity of the Kass & Raftery (1995) scale."""
        return 2.0 * self.ln_b


@dataclass(frozen=True)
class EvidenceScale:
    """An ordinal scale of evidence strength.

    Attributes
    ----------
    name : str
        Short identifier.
    quantity : str
        What the edges apply to: ``"2 ln B"`` or ``"log10 B"``.
    edges : tuple of float
        Lower edges of levels 1, 2, ...; level 0 lies below the first edge.
        A value equal to an edge belongs to the higher level.
    source : str
        The publication.
    """

    name: str
    quantity: str
    edges: tuple[float, ...]
    source: str

    @property
    def n_levels(self) -> int:
        return len(self.edges) + 1

    def to_quantity(self, ln_b):
        """Convert natural-log Bayes factors to this scale's quantity."""
        ln_b = np.asarray(ln_b, dtype=float)
        if self.quantity == "2 ln B":
            return 2.0 * ln_b
        if self.quantity == "log10 B":
            return ln_b / math.log(10.0)
        raise TumbleError(f"unknown scale quantity {self.quantity!r}")


#: Kass & Raftery (1995), §3.2, on 2 ln B: levels 0 (0-2), 1 (2-6), 2 (6-10), 3 (> 10).
KASS_RAFTERY_1995 = EvidenceScale(
    "kass-raftery-1995", "2 ln B", (2.0, 6.0, 10.0),
    "Kass, R. E. & Raftery, A. E. (1995), J. Am. Statist. Assoc. 90, 773-795, section 3.2",
)

#: Jeffreys (1961), Appendix B, on log10 B: levels 0 (0-0.5), 1 (0.5-1), 2 (1-1.5), 3 (1.5-2), 4 (> 2).
JEFFREYS_1961 = EvidenceScale(
    "jeffreys-1961", "log10 B", (0.5, 1.0, 1.5, 2.0),
    "Jeffreys, H. (1961), Theory of Probability, 3rd ed., Oxford University Press, Appendix B",
)


def ln_bayes_factor(ln_z1, ln_z0, ln_z1_err: float = 0.0, ln_z0_err: float = 0.0) -> BayesFactor:
    """``ln B10 = ln Z1 - ln Z0`` with errors added in quadrature (independent estimates).

    ``ln_z1`` and ``ln_z0`` may be floats or objects with ``ln_z`` and
    ``ln_z_err`` attributes (:class:`~tumble.inference.evidence.EvidenceEstimate`),
    whose errors are then used.
    """
    if hasattr(ln_z1, "ln_z"):
        ln_z1, ln_z1_err = ln_z1.ln_z, ln_z1.ln_z_err
    if hasattr(ln_z0, "ln_z"):
        ln_z0, ln_z0_err = ln_z0.ln_z, ln_z0.ln_z_err
    return BayesFactor(float(ln_z1) - float(ln_z0), float(math.hypot(ln_z1_err, ln_z0_err)))


def posterior_probability(ln_b, prior_probability):
    """Posterior probability of hypothesis 1 from ``ln B10`` and its prior probability.

    ``p(H1 | D) = 1 / (1 + (1 - p1) / p1 * exp(-ln B10))``, i.e. posterior odds =
    Bayes factor x prior odds (Kass & Raftery 1995, eq. 1), evaluated as
    ``expit(ln B10 + logit p1)`` so that large ``|ln B|`` neither overflows nor
    loses precision. Vectorised.
    """
    p = np.asarray(prior_probability, dtype=float)
    if np.any((p <= 0) | (p >= 1)):
        raise TumbleError(f"prior probability must lie strictly between 0 and 1, got {prior_probability}")
    out = special.expit(np.asarray(ln_b, dtype=float) + special.logit(p))
    return float(out) if np.ndim(out) == 0 else out


def evidence_level(ln_b, scale: EvidenceScale = KASS_RAFTERY_1995):
    """Ordinal strength level of ``|ln B|`` on a published scale (0 = weakest).

    The level measures strength regardless of direction: it is computed from
    ``|ln B|``; the sign of ``ln B`` says which hypothesis is favoured.
    Vectorised; returns int or an int array.
    """
    q = scale.to_quantity(np.abs(np.asarray(ln_b, dtype=float)))
    if np.any(np.isnan(q)):
        raise TumbleError("Bayes factor is nan")
    lvl = np.searchsorted(np.asarray(scale.edges), q, side="right")
    return int(lvl) if np.ndim(lvl) == 0 else lvl.astype(int)


def kass_raftery_level(ln_b):
    """Level 0..3 of ``2|ln B|`` on the Kass & Raftery (1995) scale: [0, 2), [2, 6), [6, 10), >= 10."""
    return evidence_level(ln_b, KASS_RAFTERY_1995)


def jeffreys_level(ln_b):
    """Level 0..4 of ``|log10 B|`` on the Jeffreys (1961) scale: [0, .5), [.5, 1), [1, 1.5), [1.5, 2), >= 2."""
    return evidence_level(ln_b, JEFFREYS_1961)
