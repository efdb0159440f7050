"""Model adequacy: does the chosen shape-free model describe the data?

For the chosen and the rejected family (best variant at the best frequencies): the reduced
chi-square at the *quoted* errors and the error scale that needs, and the strongest period left in
the chosen model's residuals with its false-alarm probability (astropy's Lomb-Scargle periodogram,
Baluev 2008, MNRAS 385, 1279 for the false-alarm probability). A model that needs errors scaled by
more than :data:`~tumble.classify.thresholds.ERROR_SCALE_MAX`, or leaves significant periodic
residuals, cannot carry a grade above the lowest (:mod:`tumble.classify.rules`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tumble.classify.families import npa_basis, pa_basis
from tumble.model import fit_linear, linear_log_evidence, prepare_linear

__all__ = ["ModelAdequacy", "model_adequacy", "residual_periodogram_peak"]

#: Frequencies per peak width of the residual periodogram (astropy's default is 5).
RESIDUAL_SAMPLES_PER_PEAK = 5
#: Largest residual-periodogram grid (the sampling per peak is reduced beyond it).
MAX_RESIDUAL_GRID = 200_000


@dataclass(frozen=True)
class ModelAdequacy:
    """Adequacy figures of the chosen and the rejected model.

    Attributes
    ----------
    chi2_dof_chosen, chi2_dof_rejected : float
        Reduced chi-square at the quoted errors (NaN when the model was not fitted).
    error_scale_chosen : float
        Robust error scale of the chosen model's normalised residuals at the quoted errors
        (``MAD_TO_SIGMA * median |r / err|``): a few outliers do not inflate it, a misfit does.
    residual_period_h, residual_fap : float
        Strongest period of the chosen model's residuals (hours) and its false-alarm probability.
    residuals_mag : numpy.ndarray, shape (n,)
        The chosen model's residuals (mag).
    """

    chi2_dof_chosen: float
    chi2_dof_rejected: float
    error_scale_chosen: float
    residual_period_h: float
    residual_fap: float
    residuals_mag: np.ndarray


def residual_periodogram_peak(t_d, resid, err, f_lo: float, f_hi: float):
    """``(period_h, fap)`` of the strongest Lomb-Scargle peak of residuals in ``[f_lo, f_hi]`` c/d."""
    from astropy.timeseries import LombScargle

    t_d = np.asarray(t_d, float)
    span = float(np.ptp(t_d))
    if not (span > 0 and f_hi > f_lo) or len(t_d) < 5:
        return math.nan, math.nan
    spp = RESIDUAL_SAMPLES_PER_PEAK
    n = (f_hi - f_lo) * span * spp
    if n > MAX_RESIDUAL_GRID:
        spp = max(1.0, spp * MAX_RESIDUAL_GRID / n)
    ls = LombScargle(t_d, resid, err)
    freq, power = ls.autopower(minimum_frequency=f_lo, maximum_frequency=f_hi, samples_per_peak=spp)
    if len(power) == 0 or not np.any(np.isfinite(power)):
        return math.nan, math.nan
    k = int(np.nanargmax(power))
    fap = float(ls.false_alarm_probability(power[k], minimum_frequency=f_lo, maximum_frequency=f_hi,
                                           method="baluev"))
    return 24.0 / float(freq[k]), min(max(fap, 0.0), 1.0)


#: MAD to standard deviation for a normal distribution.
MAD_TO_SIGMA = 1.4826


def _normalised_residuals(lc, model_mag):
    return (np.asarray(lc.reduced_mag, float) - model_mag) / np.asarray(lc.err, float)


def _chi2_dof(lc, model_mag, n_params: int) -> float:
    r = _normalised_residuals(lc, model_mag)
    dof = max(len(r) - n_params, 1)
    return float(r @ r / dof)


def model_adequacy(lc, evidence, chosen: str, *, f_lo: float, f_hi: float) -> ModelAdequacy:
    """Adequacy of the chosen (``'PA'`` or ``'NPA'``) family's best variant and of the other one.

    The fits use the evidence's error model (floor-inflated errors) for the coefficients; the
    chi-square is at the quoted errors. Residual periods are searched in ``[f_lo, f_hi]`` c/d with
    the floor-inflated errors.
    """
    span = lc.span_d
    data = prepare_linear(lc, error_floor_mag=evidence.error_floor_mag if np.isfinite(evidence.error_floor_mag) else 0.0)
    fits = {}
    pb = pa_basis(span)
    if np.isfinite(evidence.f1_per_d):
        v = int(np.argmax(linear_log_evidence(data, pb, [evidence.f1_per_d])[0]))
        fits["PA"] = (fit_linear(data, pb, v, evidence.f1_per_d), len(pb.columns[v]) + data.n_nuisance + 1)
    if np.isfinite(evidence.f2_per_d):
        nb = npa_basis(span)
        v = int(np.argmax(linear_log_evidence(data, nb, [evidence.f1_npa_per_d], [evidence.f2_per_d])[0]))
        fits["NPA"] = (fit_linear(data, nb, v, evidence.f1_npa_per_d, evidence.f2_per_d),
                       len(nb.columns[v]) + data.n_nuisance + 2)
    rejected = "PA" if chosen == "NPA" else "NPA"
    chi_c = _chi2_dof(lc, fits[chosen][0].model_mag, fits[chosen][1]) if chosen in fits else math.nan
    chi_r = _chi2_dof(lc, fits[rejected][0].model_mag, fits[rejected][1]) if rejected in fits else math.nan
    if chosen in fits:
        resid = np.asarray(lc.reduced_mag, float) - fits[chosen][0].model_mag
        err = 1.0 / data.sw
        p_res, fap = residual_periodogram_peak(np.asarray(lc.t, float), resid, err, f_lo, f_hi)
    else:
        resid, p_res, fap = np.full(lc.n_points, np.nan), math.nan, math.nan
    scale = (MAD_TO_SIGMA * float(np.median(np.abs(_normalised_residuals(lc, fits[chosen][0].model_mag))))
             if chosen in fits else math.nan)
    return ModelAdequacy(float(chi_c), float(chi_r), scale, float(p_res), float(fap), resid)
