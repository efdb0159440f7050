"""Generic Bayesian machinery: parameter spaces, emcee sampling with checked convergence, evidence.

Sub-modules (one concept each):

- :mod:`~tumble.inference.space` - named parameters, priors, dict <-> vector <-> unit cube;
- :mod:`~tumble.inference.logpost` - the picklable vectorised (tempered) log-posterior;
- :mod:`~tumble.inference.diagnostics` - autocorrelation, acceptance, split R-hat, walker clusters;
- :mod:`~tumble.inference.sampling` - :func:`sample_posterior` and the :class:`Posterior` contract;
- :mod:`~tumble.inference.local` - :func:`sample_local_mode`: one solution's mode from its optimum;
- :mod:`~tumble.inference.marginal` - the physical model's likelihood with the jitter integrated out;
- :mod:`~tumble.inference.evidence` - stepping-stone / thermodynamic evidence, Laplace, BIC;
- :mod:`~tumble.inference.bayes` - Bayes factors, model probabilities, published evidence scales.

The physical light-curve models live elsewhere (``tumble.model``); anything that
maps a ``(K, ndim)`` array of parameter vectors to ``(K,)`` log-likelihoods can be sampled.
"""

from __future__ import annotations

from tumble.inference.bayes import (
    JEFFREYS_1961,
    KASS_RAFTERY_1995,
    BayesFactor,
    EvidenceScale,
    evidence_level,
    jeffreys_level,
    kass_raftery_level,
    ln_bayes_factor,
    posterior_probability,
)
from tumble.inference.evidence import (
    EvidenceEstimate,
    bic,
    bic_log_evidence,
    geometric_ladder,
    laplace_log_evidence,
    log_evidence,
)
from tumble.inference.local import AttitudeChart, ImplicitChart, laplace_approximation, sample_local_mode
from tumble.inference.logpost import LogPosterior
from tumble.inference.sampling import (
    NpzBackend,
    ParameterInterval,
    Posterior,
    SamplerDiagnostics,
    initial_ball,
    sample_posterior,
)
from tumble.inference.space import (
    IsotropicLatitude,
    LogUniform,
    Normal,
    Parameter,
    ParameterSpace,
    PeriodicUniform,
    Prior,
    Uniform,
    VonMises,
)

__all__ = [
    "Parameter", "ParameterSpace", "Prior", "Uniform", "LogUniform", "Normal", "VonMises",
    "PeriodicUniform", "IsotropicLatitude", "LogPosterior", "sample_posterior", "initial_ball",
    "Posterior", "SamplerDiagnostics", "ParameterInterval", "NpzBackend", "log_evidence",
    "geometric_ladder", "laplace_log_evidence", "bic", "bic_log_evidence", "EvidenceEstimate",
    "BayesFactor", "EvidenceScale", "KASS_RAFTERY_1995", "JEFFREYS_1961", "ln_bayes_factor",
    "posterior_probability", "evidence_level", "kass_raftery_level", "jeffreys_level",
    "sample_local_mode", "laplace_approximation", "AttitudeChart", "ImplicitChart",
]
