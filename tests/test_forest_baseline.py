"""Tests of the random-forest and mean-baseline surrogates."""

from __future__ import annotations

import numpy as np
import pytest

from advisor.surrogates import make_surrogate
from advisor.surrogates.baseline import MeanBaseline
from advisor.surrogates.forest import RandomForestSurrogate, total_variance_moments


def _data(n, d=3, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, d))
    X[:, -1] = rng.integers(0, 4, size=n)          # an ordinal-coded categorical column
    y = np.sin(4 * X[:, 0]) + X[:, 1] + 0.5 * (X[:, -1] == 2) + 0.1 * rng.standard_normal(n)
    return X, y


# -- the mixture formula ------------------------------------------------------------
def test_total_variance_moments_match_monte_carlo_of_the_mixture():
    rng = np.random.default_rng(1)
    T, k, N = 6, 3, 400_000
    means = rng.normal(size=(T, k))
    vars_ = rng.uniform(0.05, 1.0, size=(T, k))
    mean, var = total_variance_moments(means, vars_)
    # sample the equal-weight mixture: a tree uniformly, then its leaf's Gaussian
    pick = rng.integers(0, T, size=(N, k))
    cols = np.arange(k)
    draws = means[pick, cols] + np.sqrt(vars_[pick, cols]) * rng.standard_normal((N, k))
    # Monte Carlo: sd of the sample mean is sqrt(var/N); of the sample variance about
    # sqrt((m4 - var^2)/N), bounded here by sqrt(2 * 3 var^2 / N) for these mixtures of
    # bounded kurtosis (< 6, common practice).  Five standard errors.
    np.testing.assert_array_less(np.abs(draws.mean(0) - mean), 5 * np.sqrt(var / N))
    np.testing.assert_array_less(np.abs(draws.var(0) - var), 5 * np.sqrt(6 * var ** 2 / N))


def test_total_variance_moments_single_tree_and_shape_check():
    m, v = total_variance_moments([[1.0, 2.0]], [[0.5, 0.0]])
    # one component: the mixture is that component (closed form)
    np.testing.assert_allclose(m, [1.0, 2.0], rtol=0, atol=0)
    np.testing.assert_allclose(v, [0.5, 0.0], rtol=0, atol=0)
    with pytest.raises(ValueError, match="equal"):
        total_variance_moments(np.zeros((2, 3)), np.zeros((3, 2)))


# -- the fitted forest --------------------------------------------------------------
def _leaf_stats_from_training_data(model, X, y):
    """Per tree, the mean and (ddof=0) variance of the bootstrap targets in each leaf,
    recomputed from scikit-learn's ``apply`` and ``estimators_samples_``."""
    stats = []
    for tree, sample in zip(model.forest_.estimators_, model.forest_.estimators_samples_):
        leaves = tree.apply(X[sample])                  # repeats = bootstrap multiplicity
        table = {}
        for leaf in np.unique(leaves):
            t = y[sample][leaves == leaf]
            table[leaf] = (t.mean(), t.var())
        stats.append(table)
    return stats


def test_predict_equals_mixture_of_independently_recomputed_leaf_moments():
    X, y = _data(150, seed=2)
    Xt, _ = _data(25, seed=3)
    model = RandomForestSurrogate(seed=4, n_estimators=20, oob_calibration=False).fit(X, y)
    stats = _leaf_stats_from_training_data(model, X, y)
    mus = np.empty((20, len(Xt)))
    s2s = np.empty((20, len(Xt)))
    for t, tree in enumerate(model.forest_.estimators_):
        for j, leaf in enumerate(tree.apply(Xt)):
            mus[t, j], s2s[t, j] = stats[t][leaf]
    lm, lv = model.leaf_moments(Xt)
    # tolerance: the same sums in a different order (rounding only)
    np.testing.assert_allclose(lm, mus, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(lv, s2s, rtol=1e-8, atol=1e-12)
    mean, std = model.predict(Xt)
    # law of total variance written out directly (Hutter et al. 2014, §4.3.2)
    ref_mean = mus.mean(0)
    ref_var = (s2s + mus ** 2).mean(0) - ref_mean ** 2
    np.testing.assert_allclose(mean, ref_mean, rtol=1e-10)
    np.testing.assert_allclose(std ** 2, ref_var + model._floor, rtol=1e-8, atol=1e-12)
    # the forest mean is scikit-learn's own prediction (average of tree predictions)
    np.testing.assert_allclose(mean, model.forest_.predict(Xt), rtol=1e-10)
    # min_samples_leaf=3 and noisy targets: every leaf has a spread
    assert np.all(lv > 0)


def test_forest_budget_encoding_importances_and_reproducibility():
    X, y = _data(80, seed=5)
    quick = make_surrogate("forest", seed=1, quick=True).fit(X, y)
    full = make_surrogate("forest", seed=1, quick=False).fit(X, y)
    assert len(quick.forest_.estimators_) == 100 and len(full.forest_.estimators_) == 300
    assert quick.input_encoding == "ordinal"
    np.testing.assert_array_equal(quick.feature_importances_,
                                  quick.forest_.feature_importances_)
    assert quick.feature_importances_.shape == (3,)
    again = make_surrogate("forest", seed=1, quick=True).fit(X, y)
    m1, s1 = quick.predict(X[:9])
    m2, s2 = again.predict(X[:9])
    np.testing.assert_array_equal(m1, m2)
    np.testing.assert_array_equal(s1, s2)
    m, s = quick.predict(X[:1])
    assert m.shape == s.shape == (1,) and s[0] > 0


def test_forest_std_has_a_floor_on_constant_leaves():
    # 20 points per level, so every bootstrap sample has >= 3 on each side of the step
    X = np.arange(40, dtype=float)[:, None]
    y = np.repeat([1.0, 5.0], 20)
    model = RandomForestSurrogate(seed=0, n_estimators=10, var_floor=1e-6,
                                  oob_calibration=False).fit(X, y)
    _, std = model.predict(np.array([[0.0], [39.0]]))
    # far from the split every leaf is pure; the floor is 1e-6 * var(y), var(y) = 4
    np.testing.assert_allclose(std, np.sqrt(1e-6 * 4.0), rtol=1e-6)


# -- the baseline -------------------------------------------------------------------
def test_baseline_equals_numpy_mean_and_sample_std():
    X, y = _data(30, seed=6)
    model = make_surrogate("baseline").fit(X, y)
    mean, std = model.predict(X[:4])
    # reference: numpy's mean and std with ddof=1; exact up to rounding
    np.testing.assert_allclose(mean, np.full(4, np.mean(y)), rtol=1e-14)
    np.testing.assert_allclose(std, np.full(4, np.std(y, ddof=1)), rtol=1e-14)
    assert model.noise_std_ == pytest.approx(np.std(y, ddof=1), rel=1e-14)
    m, s = model.predict(X[:1])
    assert m.shape == s.shape == (1,)


def test_baseline_constant_targets_keep_positive_std():
    model = MeanBaseline().fit(np.zeros((3, 1)), np.full(3, 2.0))
    _, std = model.predict(np.zeros((2, 1)))
    assert np.all(std > 0)


# -- Thompson draws ------------------------------------------------------------------
def test_forest_thompson_draw_is_one_whole_tree():
    X, y = _data(40, seed=8)
    model = RandomForestSurrogate(seed=0, n_estimators=7, oob_calibration=False).fit(X, y)
    Xq = X[:9] + 0.01
    draws = model.sample_y(Xq, 7, np.random.default_rng(1))
    # reference: scikit-learn's own per-tree predictions; each draw is exactly one tree,
    # and with as many draws as trees each tree is used once
    trees = np.array([t.predict(Xq) for t in model.forest_.estimators_])
    match = [int(np.flatnonzero(np.all(np.isclose(trees, d, rtol=1e-12), axis=1))[0])
             for d in draws]
    assert sorted(match) == list(range(7))
    # the draws average to scikit-learn's forest prediction (mean of the trees)
    np.testing.assert_allclose(draws.mean(0), model.forest_.predict(Xq), rtol=1e-10)
    assert model.sample_y(Xq, 15, 2).shape == (15, 9)
    assert model.info_["thompson_draws"].startswith("joint")
    # with the out-of-bag calibration a draw is the tree shrunk toward mean(y) by the
    # fitted factor, so the draws still average to predict's mean
    cal = RandomForestSurrogate(seed=0, n_estimators=7).fit(X, y)
    np.testing.assert_allclose(cal.sample_y(Xq, 7, np.random.default_rng(1)).mean(0),
                               cal.predict(Xq)[0], rtol=1e-10)


# -- out-of-bag calibration ------------------------------------------------------------
def test_oob_mean_is_scikit_learns_oob_prediction():
    from sklearn.ensemble import RandomForestRegressor
    X, y = _data(60, seed=11)
    model = RandomForestSurrogate(seed=5, n_estimators=40).fit(X, y)
    ref = RandomForestRegressor(n_estimators=40, min_samples_leaf=3, max_features=1.0,
                                random_state=5, oob_score=True).fit(X, y)
    mean, var, count = model.oob_moments(X)
    assert np.all(count > 0) and np.all(var > 0)
    # same trees (same seed), and scikit-learn's own out-of-bag average
    np.testing.assert_allclose(mean, ref.oob_prediction_, rtol=1e-10)


def test_oob_calibration_falls_back_on_noise_and_keeps_signal():
    # pure noise: the out-of-bag slope of y on the forest's prediction is about 0 (clipped
    # at 0 here), so the forest predicts the training mean; with a strong signal the
    # slope stays near 1.  Seeded; the thresholds are our choice.
    rng = np.random.default_rng(3)
    X = rng.uniform(size=(40, 6))
    noise = RandomForestSurrogate(seed=0, quick=True).fit(X, rng.standard_normal(40))
    assert noise.shrink_ < 0.2
    Xs, ys = _data(80, seed=12)
    signal = RandomForestSurrogate(seed=0, quick=True).fit(Xs, ys)
    assert signal.shrink_ > 0.9 and signal.variance_scale_ >= 1.0


def test_forest_thompson_is_labelled_joint_by_the_acquisition():
    from advisor.acquisition import thompson_draw
    X, y = _data(30, seed=9)
    model = RandomForestSurrogate(seed=0, n_estimators=5).fit(X, y)
    _, kind = thompson_draw(model, X[:6], np.random.default_rng(0))
    assert kind == "joint"
