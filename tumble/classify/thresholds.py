"""Every threshold of the PA/NPA decision, in one place.

Each constant carries a one-line reason. The decision rules (:mod:`tumble.classify.rules`), the
screen, the report's grade sentences and the documentation read them from here, so that a number
explained in words is the number used.
"""

from __future__ import annotations

from tumble.inference.bayes import KASS_RAFTERY_1995

#: Default prior probability that an object is an NPA rotator (``--prior-npa``); tumblers are a
#: small minority of light curves in the literature (Pravec et al. 2005, Icarus 173, 108; value ours).
DEFAULT_PRIOR_NPA = 0.1
#: A claimed period must be covered by at least this many cycles of the data span (common practice:
#: fewer cycles do not pin a period).
MIN_CYCLES = 1.5
#: Grade names for the Kass & Raftery (1995, J. Am. Statist. Assoc. 90, 773, section 3.2) levels
#: 0..3 of ``2|ln B|`` (the words are ours).
GRADE_NAMES = ("none", "tentative", "sound", "firm")
#: Lower edges of the Kass & Raftery (1995, section 3.2) bands of ``2|ln B|`` for grades 1..3
#: (the scale is defined once, in :mod:`tumble.inference.bayes`).
GRADE_EDGES_2LNB = KASS_RAFTERY_1995.edges
#: ``2|ln B|`` below this: the evidence does not favour either hypothesis (Kass & Raftery 1995's
#: "not worth more than a bare mention").
UNDECIDED_2LNB = GRADE_EDGES_2LNB[0]
#: NPA favoured by ln B but with a posterior probability below this at the prior: not an NPA verdict.
MIN_P_NPA_FOR_NPA = 0.5
#: A window holding at least this share of the combined posterior mass counts when windows disagree.
WINDOW_MASS_COUNTS = 0.1
#: The dominant period window must hold at least this share of its family's mass, or the verdict
#: is undecided (the period posterior is multimodal).
WINDOW_MASS_UNDECIDED = 0.5
#: Below this share the grade is capped at ``tentative`` (the period is not unique).
WINDOW_MASS_CAP = 0.9
#: ``|2 ln B| - 2`` must exceed this many quadrature errors of ``ln B`` (2 sigma of ``2 ln B``).
QUADRATURE_ERRORS_MARGIN = 4.0
#: SAM and LAM whose physical fits differ by less than this many nats of log-likelihood: the mode
#: is not decided (``unknown``).
MODE_MARGIN_NATS = 2.0
#: Sparse data: alias tolerance (cycles/day) around k/day, whose daily window aliases slow variations.
SPARSE_ALIAS_TOL_PER_D = 0.02
#: Sparse data: the 1/day alias guard covers k cycles/day up to this k.
SPARSE_ALIAS_K_MAX = 24
#: Dense data: the 1/day alias guard covers k = 1, 2, 3 cycles/day (nightly zero-points and drifts
#: are degenerate with a variation at those frequencies; common practice).
DENSE_ALIAS_K_MAX = 3
#: Sidereal day (d) for the 1/day alias guard.
SIDEREAL_DAY_D = 0.99726958

# --- significance before periods -------------------------------------------------------------
#: A period is reported only when the false-alarm probability of its periodogram peak is below this
#: (a 0.1 % false-alarm level; common practice in period searches is 0.1-1 %).
PERIOD_FAP_MAX = 1e-3
#: A reported period needs at least this share of its phase (in 20 bins) covered by data.
MIN_PHASE_COVERAGE = 0.6
#: Two periods are resolved only when their frequencies differ by more than this many 1/span.
MIN_RESOLVED_CYCLES = 1.0

# --- model adequacy ---------------------------------------------------------------------------
#: The chosen model's residual periodogram peak is structure when its false-alarm probability is
#: below this (a 0.1 % level, as for a period).
RESIDUAL_FAP_MAX = 1e-3
#: The chosen model needs its errors scaled by more than this (at the quoted errors): it does not
#: describe the data, and the grade is capped at the lowest.
ERROR_SCALE_MAX = 2.0

# --- testability and the detection limit ------------------------------------------------------
#: NPA is not testable when the admissible second frequencies (outside the commensurate bands)
#: hold less than this share of the log-frequency range [1.5/span, f1/2].
MIN_ADMISSIBLE_F2_SHARE = 0.05
#: ``2 ln B`` at which an injected NPA signature counts as detected for the detection limit: the
#: edge of the lowest NPA grade (Kass & Raftery 1995).
DETECTION_2LNB = GRADE_EDGES_2LNB[0]

# --- the geometry-aware PA veto ---------------------------------------------------------------
#: An NPA verdict needs the physical NPA fit to beat the physical PA ellipsoid fit (real Sun and
#: observer directions) by more than this in ``2 Delta ln L - Delta k ln n`` (a BIC difference,
#: Schwarz 1978): a tumbler must not be what changing geometry makes of a PA body.
GEOMETRY_VETO_2LNB = GRADE_EDGES_2LNB[0]

# --- the geometry-aware PA model (tumble.sparse) ----------------------------------------------
#: The geometry-aware PA ellipsoid "describes" the data at a reduced chi-square up to this (the
#: sparse fit's own adequacy limit, tumble.sparse.fit): a sparse NPA claim needs it to fail.
GEOMETRIC_PA_ADEQUATE_CHI2 = 3.0
#: A sidereal period replaces the synodic one only when they agree to this fraction (a larger
#: difference is a different solution - e.g. half or double the period - not the synodic drift).
SIDEREAL_SYNODIC_MAX_REL = 0.01

# --- the screen -------------------------------------------------------------------------------
#: Screen: ``-Delta BIC / 2`` above this flags a tumbling candidate.
SCREEN_CANDIDATE_SCORE = 5.0
#: Screen: ``-Delta BIC / 2`` below this reads as quiet (no second period needed).
SCREEN_QUIET_SCORE = -1.0
