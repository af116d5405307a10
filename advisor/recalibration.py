"""Recalibration of predictive distributions, fitted away from the points it is scored on.

Two maps, after Kuleshov, Fenner & Ermon (2018), "Accurate uncertainties for deep
learning using calibrated regression" (ICML):

* an **isotonic map** R from the predicted CDF value p = F(y) to the observed frequency
  of {F(y) <= p} (their Algorithm 1, with scikit-learn's IsotonicRegression), and
* a single **variance scale** s: std → s·std, the value that minimizes the Gaussian NLL
  on the calibration points, which has the closed form s² = mean(z²), z = (y-μ)/σ.

Both are *cross-fitted*: the map used to score the held-out points of fold j is fitted
on the held-out predictions of the other folds only, never on fold j itself.  (Kuleshov
et al. use a separate calibration set; cross-fitting over the outer folds gives every
point a calibration set of its own without refitting every surrogate on nested folds —
our choice, for cost.)
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from sklearn.isotonic import IsotonicRegression

from .scoring import CALIBRATION_LEVELS, COVERAGE_LEVELS, gaussian_crps, gaussian_nll

__all__ = ["variance_scale", "fit_isotonic", "cross_fitted_recalibration"]


def variance_scale(y, mean, std) -> float:
    """The factor s that minimizes mean Gaussian NLL of N(mean, (s·std)²): sqrt(mean(z²))."""
    z = (np.asarray(y, float) - np.asarray(mean, float)) / np.asarray(std, float)
    return float(np.sqrt(np.mean(z**2)))


def fit_isotonic(pit) -> IsotonicRegression:
    """Isotonic map from predicted CDF values to their empirical frequencies."""
    pit = np.sort(np.asarray(pit, float))
    freq = np.arange(1, len(pit) + 1) / len(pit)
    return IsotonicRegression(y_min=0.0, y_max=1.0, out_of_bounds="clip").fit(pit, freq)


def cross_fitted_recalibration(y, mean, std, folds, *, forward: bool = False) -> dict:
    """Scores before and after recalibration, each fold scored with maps from the others.

    Parameters
    ----------
    y, mean, std : arrays (n,)
        Pooled held-out predictions.
    folds : array (n,) of int
        Which fold each prediction was held out in.
    forward : bool
        Forward chaining: fold j's maps are fitted on the earlier folds only (never on
        later trials); the first fold, with nothing before it, is left unchanged.

    Returns
    -------
    dict
        ``scale`` (fitted on all points, for the recommendation), ``scale_by_fold``,
        ``scale_by_point`` (each point's cross-fitted scale, for scoring),
        ``before`` / ``after_scale`` / ``after_isotonic`` score dicts with ``nll``,
        ``crps``, ``coverage_*`` and ``calibration_error`` (NLL and CRPS are not
        defined for the isotonic map's non-Gaussian distribution and are omitted there).
    """
    y, mean, std = (np.asarray(a, float) for a in (y, mean, std))
    folds = np.asarray(folds)
    fold_ids = np.unique(folds)
    scaled_std = np.array(std)
    pit_iso = np.empty_like(y)
    pit_raw = stats.norm.cdf((y - mean) / std)
    scales = {}
    for f in fold_ids:
        here = folds == f
        other = (folds < f) if forward else ~here
        if other.sum() < 5:  # a single fold: nothing else to fit on, leave unchanged
            s, iso_pit = 1.0, pit_raw[here]
        else:
            s = variance_scale(y[other], mean[other], std[other])
            iso_pit = fit_isotonic(pit_raw[other]).predict(pit_raw[here])
        scales[str(f)] = s
        scaled_std[here] = s * std[here]
        pit_iso[here] = iso_pit
    return {
        "scale": variance_scale(y, mean, std),
        "scale_by_fold": scales,
        "scale_by_point": scaled_std / std,
        "fitted_on": "earlier folds" if forward else "other folds",
        "before": _pit_scores(pit_raw) | _gauss_scores(y, mean, std),
        "after_scale": _pit_scores(stats.norm.cdf((y - mean) / scaled_std))
        | _gauss_scores(y, mean, scaled_std),
        "after_isotonic": _pit_scores(pit_iso),
    }


def _gauss_scores(y, mean, std):
    return {"nll": float(np.mean(gaussian_nll(y, mean, std))),
            "crps": float(np.mean(gaussian_crps(y, mean, std)))}


def _pit_scores(pit):
    """Coverage and calibration error from probability-integral-transform values."""
    out = {}
    for level in COVERAGE_LEVELS:
        lo, hi = 0.5 - level / 2, 0.5 + level / 2
        out[f"coverage_{int(round(level * 100))}"] = float(np.mean((pit >= lo) & (pit <= hi)))
    observed = np.mean(pit[None, :] <= CALIBRATION_LEVELS[:, None], axis=1)
    out["calibration_error"] = float(np.mean((CALIBRATION_LEVELS - observed) ** 2))
    return out
