"""Recalibration: closed-form scale and the coverage repair the issue asks for."""

import numpy as np
import pytest
from scipy import optimize, stats

from advisor.recalibration import cross_fitted_recalibration, variance_scale
from advisor.scoring import gaussian_nll, interval_coverage


def test_variance_scale_minimizes_nll():
    rng = np.random.default_rng(0)
    y = rng.normal(0, 2.0, 500)
    m, s = np.zeros(500), np.ones(500)
    best = optimize.minimize_scalar(lambda c: gaussian_nll(y, m, c * s).mean(),
                                    bounds=(0.1, 10), method="bounded").x
    assert variance_scale(y, m, s) == pytest.approx(best, rel=1e-4)


def test_overconfident_model_is_repaired_to_nominal_coverage():
    # Kuleshov et al. 2018 §3: recalibration restores coverage of a miscalibrated model.
    rng = np.random.default_rng(1)
    n = 2000
    mu = rng.normal(size=n)
    y = mu + rng.normal(0, 1.0, n)
    std = np.full(n, 0.4)          # truth is 1.0: badly overconfident
    folds = np.arange(n) % 5
    assert interval_coverage(y, mu, std, 0.9) < 0.6
    out = cross_fitted_recalibration(y, mu, std, folds)
    assert out["after_scale"]["coverage_90"] == pytest.approx(0.9, abs=0.05)
    assert out["after_isotonic"]["coverage_90"] == pytest.approx(0.9, abs=0.05)
    assert out["after_scale"]["calibration_error"] < out["before"]["calibration_error"]
    assert out["scale"] == pytest.approx(2.5, rel=0.1)


def test_each_fold_uses_maps_fitted_elsewhere():
    # If fold 0 were used to fit its own scale, a wild fold 0 would be scaled perfectly.
    rng = np.random.default_rng(2)
    y = rng.normal(size=300)
    std = np.ones(300)
    y[:60] *= 10  # fold 0 has ten times the spread of the others
    folds = np.repeat(np.arange(5), 60)
    out = cross_fitted_recalibration(y, np.zeros(300), std, folds)
    assert out["scale_by_fold"]["0"] < 2.0
    assert out["scale_by_fold"]["1"] > 3.0


def test_forward_chaining_fits_each_fold_on_earlier_folds_only():
    # Variance scale closed form s = sqrt(mean z^2) (Kuleshov et al. 2018 NLL optimum):
    # fold 2's scale must be that of folds 0-1 alone; fold 0 has nothing before it.
    rng = np.random.default_rng(0)
    y = rng.normal(size=60)
    folds = np.repeat([0, 1, 2], 20)
    std = np.where(folds == 2, 0.1, 1.0)          # fold 2 badly overconfident
    out = cross_fitted_recalibration(y, np.zeros(60), std, folds, forward=True)
    z = y[folds < 2]
    assert out["scale_by_fold"]["2"] == pytest.approx(np.sqrt(np.mean(z**2)))
    assert out["scale_by_fold"]["0"] == 1.0
    assert out["fitted_on"] == "earlier folds"
