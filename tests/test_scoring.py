"""Scores against scipy and against published closed-form values."""

import numpy as np
import pytest
from scipy import integrate, stats

from advisor.scoring import (calibration_error, gaussian_crps, gaussian_nll,
                             interval_coverage, score_predictions, best_region_scores)


def test_nll_matches_scipy_logpdf():
    rng = np.random.default_rng(0)
    y, m, s = rng.normal(size=50), rng.normal(size=50), rng.uniform(0.1, 3, 50)
    np.testing.assert_allclose(gaussian_nll(y, m, s), -stats.norm.logpdf(y, m, s), rtol=1e-12)


@pytest.mark.parametrize("y, expected", [
    # Closed form, Gneiting et al. 2005 Eq. 5: CRPS(N(0,1), 0) = (sqrt(2) - 1)/sqrt(pi).
    (0.0, (np.sqrt(2) - 1) / np.sqrt(np.pi)),
    (0.0, 0.2336949772551),
    # Same closed form at y = 1 (value given in the issue, recomputed here by the
    # integral test below).
    (1.0, 0.6024413576276),
])
def test_crps_check_values(y, expected):
    assert gaussian_crps([y], [0.0], [1.0])[0] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("y, mu, sigma", [(0.3, 0.0, 1.0), (-2.0, 1.0, 0.5), (5.0, 4.0, 2.5)])
def test_crps_matches_integral_definition(y, mu, sigma):
    # CRPS(F, y) = ∫ (F(x) - 1{x >= y})² dx (Gneiting & Raftery 2007, Eq. 20).
    F = stats.norm(mu, sigma).cdf
    lo, hi = mu - 12 * sigma, mu + 12 * sigma
    left, _ = integrate.quad(lambda x: F(x) ** 2, lo, y, limit=200)
    right, _ = integrate.quad(lambda x: (F(x) - 1) ** 2, y, hi, limit=200)
    assert gaussian_crps([y], [mu], [sigma])[0] == pytest.approx(left + right, rel=1e-7)


def test_coverage_counts_points_inside_interval():
    # N(0,1) central 90% interval is ±1.6448536; points at 1.6 are in, at 1.7 out.
    y = np.array([0.0, 1.6, -1.6, 1.7, -1.7])
    assert interval_coverage(y, np.zeros(5), np.ones(5), 0.9) == pytest.approx(3 / 5)


def test_coverage_of_true_distribution_is_nominal():
    rng = np.random.default_rng(1)
    y = rng.normal(2.0, 3.0, 200_000)
    m, s = np.full_like(y, 2.0), np.full_like(y, 3.0)
    for level in (0.5, 0.9, 0.95):
        # binomial standard error at n = 2e5 is < 0.0012; 0.005 is > 4 of them.
        assert interval_coverage(y, m, s, level) == pytest.approx(level, abs=0.005)
    assert calibration_error(y, m, s) < 1e-4


def test_calibration_error_of_overconfident_model_is_large():
    rng = np.random.default_rng(2)
    y = rng.normal(size=5000)
    assert calibration_error(y, np.zeros_like(y), np.full_like(y, 0.3)) > 0.02


def test_rank_correlations_match_scipy():
    rng = np.random.default_rng(3)
    y = rng.normal(size=40)
    m = y + rng.normal(scale=0.5, size=40)
    out = score_predictions(y, m, np.ones(40))
    assert out["spearman"] == pytest.approx(stats.spearmanr(m, y).statistic, rel=1e-12)
    assert out["kendall"] == pytest.approx(stats.kendalltau(m, y).statistic, rel=1e-12)


def test_best_region_scores():
    y = np.arange(12.0)
    perfect = best_region_scores(y, y)
    assert perfect["top_quarter_spearman"] == pytest.approx(1.0)
    assert perfect["top_hit_rate"] == 1.0
    reversed_ = best_region_scores(y, -y)
    assert reversed_["top_hit_rate"] == 0.0


def test_score_keys_and_bad_input():
    out = score_predictions([1.0, 2.0, 3.0, 4.0], [1.0, 2.0, 3.0, 4.5], [1.0] * 4)
    for key in ("nll", "crps", "coverage_50", "coverage_90", "coverage_95",
                "calibration_error", "sharpness", "spearman", "kendall"):
        assert key in out
    assert out["sharpness"] == pytest.approx(1.0)
    with pytest.raises(ValueError, match="positive"):
        score_predictions([1.0], [1.0], [0.0])


def test_rank_metrics_are_within_fold_averages_on_a_hand_made_example():
    from advisor.scoring import score_predictions
    # Fold 0: mean orders y perfectly (rho = tau = 1, predicted best is the true best);
    # fold 1: exactly reversed (rho = tau = -1, predicted best is the true worst of 4,
    # not among the 3 best).  Pooled, the level shift between folds would give a
    # positive correlation; within folds the average is 0 and the top-hit rate 1/2.
    y = np.array([1., 2., 3., 4., 11., 12., 13., 14.])
    mean = np.array([1., 2., 3., 4., 24., 23., 22., 21.])
    folds = np.repeat([0, 1], 4)
    s = score_predictions(y, mean, np.ones(8), folds=folds)
    assert s["spearman"] == pytest.approx(0.0)
    assert s["kendall"] == pytest.approx(0.0)
    assert s["top_hit_rate"] == pytest.approx(0.5)
    assert s["spearman_fold_sd"] == pytest.approx(np.std([1, -1], ddof=1))
    assert s["spearman_folds"] == 2
    # pooled value for contrast, from scipy directly
    from scipy import stats
    assert stats.spearmanr(mean, y).statistic > 0.5
