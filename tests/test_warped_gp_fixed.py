"""The warped GP's fixed-hyperparameter refit and warm start (the backtest's cheap
updates and scheduled re-optimizations).

References outside the project: scikit-learn's GaussianProcessRegressor with fixed
kernel hyperparameters for the inner GP's posterior on ``T(y)``, scipy's Yeo-Johnson
transform for ``T``, the log-normal mean ``exp(mu + sigma^2 / 2)`` and Gauss-Hermite
quadrature for the mean of ``T^{-1}`` of a normal.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.polynomial.hermite_e import hermegauss
from scipy import optimize, stats
from sklearn.base import clone
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

from advisor.backtest import plan_for
from advisor.backtest._pool import update_paths
from advisor.distributions import OutputWarp
from advisor.surrogates.warping import WarpedGP


def _f(X):
    return np.sin(3.0 * X[:, 0]) + X[:, 1] ** 2


def _log(kind, n=45, seed=0):
    """``kind="log"``: positive, right-skewed y (the automatic choice is the log);
    ``"yeo-johnson"``: y of both signs."""
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 1, (n, 2))
    if kind == "log":
        y = np.exp(2.0 * _f(X) + rng.normal(0, 0.1, n))
    else:
        y = _f(X) - 0.5 + rng.normal(0, 0.1, n)
    return X, y, rng.uniform(0, 1, (20, 2))


def _warp_tuple(w):
    return (w.kind, w.lmbda, w.scale)


def _transform(w, y):
    """T(y), written with scipy's Yeo-Johnson (or numpy's log), not the project's."""
    if w.kind == "log":
        return np.log(y)
    return stats.yeojohnson(y / w.scale, lmbda=w.lmbda)


def _mean_of_inverse(w, mu, sd):
    """E[T^{-1}(mu + sd Z)], Z standard normal: closed form for the log (log-normal
    mean), else 60-node Gauss-Hermite with T^{-1} by root finding on scipy's T."""
    if w.kind == "log":
        return np.exp(mu + sd ** 2 / 2)
    nodes, weights = hermegauss(60)
    weights = weights / weights.sum()

    def inverse(z):
        return optimize.brentq(lambda v: _transform(w, np.array([v]))[0] - z,
                               -1e3, 1e3, xtol=1e-13)

    return np.array([sum(wt * inverse(m + s * x) for x, wt in zip(nodes, weights))
                     for m, s in zip(mu, sd)])


@pytest.mark.parametrize("kind", ["log", "yeo-johnson"])
def test_fixed_refit_on_the_same_data_reproduces_the_full_fit(kind):
    # The GP posterior is a closed form of the hyperparameters and the data
    # (Rasmussen & Williams 2006, Alg. 2.1), and T is held: the same data give the
    # same predictive distribution.
    X, y, Xt = _log(kind)
    full = WarpedGP(seed=0, quick=True).fit(X[:30], y[:30])
    assert full.warp_.kind == kind
    copy = full.with_fixed_hyperparameters()
    assert not hasattr(copy, "gp_")                       # an unfitted copy
    same = copy.fit(X[:30], y[:30])
    assert same.info_["starts"] == 0                      # no optimizer run
    # 1e-8 relative to y's scale: both are the same solves (rounding only)
    atol = 1e-8 * np.std(y)
    for a, b in zip(full.predict(Xt), same.predict(Xt)):
        np.testing.assert_allclose(a, b, rtol=0, atol=atol)
    # a proper estimator: scikit-learn's clone (which re-checks each constructor
    # argument is stored unchanged) gives a copy that fits to the same model
    twin = clone(full.with_fixed_hyperparameters()).fit(X[:30], y[:30])
    for a, b in zip(same.predict(Xt), twin.predict(Xt)):
        np.testing.assert_allclose(a, b, rtol=0, atol=atol)


@pytest.mark.parametrize("kind", ["log", "yeo-johnson"])
def test_fixed_refit_on_more_data_holds_the_transform_and_matches_sklearn(kind):
    X, y, Xt = _log(kind)
    full = WarpedGP(seed=0, quick=True).fit(X[:30], y[:30])
    more = full.with_fixed_hyperparameters().fit(X, y)
    # the transform is the full fit's, not one chosen from the 45 rows ...
    assert _warp_tuple(more.warp_) == _warp_tuple(full.warp_)
    if kind == "yeo-johnson":   # ... which would differ here (the test can fail)
        assert abs(OutputWarp.choose(y).lmbda - full.warp_.lmbda) > 0.02
    # the inner GP's hyperparameters are the full fit's (raw units of T(y))
    np.testing.assert_allclose(more.gp_.length_scales_, full.gp_.length_scales_,
                               rtol=1e-12)
    assert more.gp_.signal_variance_ == pytest.approx(full.gp_.signal_variance_, rel=1e-12)
    assert more.gp_.noise_std_ == pytest.approx(full.gp_.noise_std_, rel=1e-12)

    # The inner posterior on z = T(y), independently: MaternGP standardizes z (mean,
    # ddof-0 sd) and holds its hyperparameters in z's raw units, so scikit-learn's
    # normalize_y (the same standardization) gets the amplitudes divided by var(z); the
    # jitter MaternGP adds to the diagonal (standardized units) is sklearn's alpha.
    z = _transform(full.warp_, y)
    v = z.std() ** 2
    kernel = (ConstantKernel(more.gp_.signal_variance_ / v, "fixed")
              * Matern(more.gp_.length_scales_, length_scale_bounds="fixed", nu=2.5)
              + WhiteKernel(more.gp_.noise_std_ ** 2 / v, "fixed"))
    ref = GaussianProcessRegressor(kernel, alpha=more.gp_.jitter_, optimizer=None,
                                   normalize_y=True).fit(X, z)
    ref_mu, ref_sd = ref.predict(Xt, return_std=True)   # WhiteKernel: noise included
    dist = more.predict_dist(Xt)
    # 1e-8 relative to z's scale: the same linear solves done by two libraries
    np.testing.assert_allclose(dist.mu, ref_mu, rtol=0, atol=1e-8 * z.std())
    np.testing.assert_allclose(dist.sigma, ref_sd, rtol=0, atol=1e-8 * z.std())
    # the predictive mean in y's units is E[T^{-1}(mu + sigma Z)]; moments() takes it by
    # the midpoint rule on 400 quantile nodes (advisor.distributions), which cuts the
    # tails beyond u = 1/800: 1e-3 relative bounds that for sigma of T(y)'s order here
    mean, _ = more.predict(Xt)
    np.testing.assert_allclose(mean, _mean_of_inverse(full.warp_, ref_mu, ref_sd),
                               rtol=1e-3, atol=1e-3 * np.std(y))
    assert not np.allclose(mean, full.predict(Xt)[0])     # the new rows moved it


def test_a_held_log_that_cannot_take_the_new_data_gives_a_full_fit():
    X, y, Xt = _log("log")
    full = WarpedGP(seed=0, quick=True).fit(X[:30], y[:30])
    y_new = y.copy()
    y_new[40] = -1.0                                       # log(y) undefined
    held = full.with_fixed_hyperparameters().fit(X, y_new)
    assert held.warp_.kind == "yeo-johnson"
    assert held.info_["held_transform"].startswith("dropped")
    fresh = WarpedGP(seed=0, quick=True).fit(X, y_new)
    for a, b in zip(held.predict(Xt), fresh.predict(Xt)):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-8 * np.std(y_new))


def test_the_backtest_updates_the_warped_gp_every_step_and_refits_it_in_full():
    # held updates between the scheduled re-optimizations; those are full fits with the
    # model's own starts, not warm starts (warm_reoptimize = False, as for every GP:
    # benchmarks/warm_refits.py), although the model offers warm_started()
    paths = update_paths(WarpedGP(quick=True), plan_for(True))
    assert paths["between_refits"] == "fixed_hyperparameters"
    assert paths["scheduled_refit"] == "full"
    assert callable(getattr(WarpedGP(quick=True), "warm_started", None))


@pytest.mark.parametrize("kind", ["log", "yeo-johnson"])
def test_warm_start_ends_no_worse_with_fewer_starts(kind):
    X, y, Xt = _log(kind)
    full = WarpedGP(seed=0, quick=True).fit(X[:30], y[:30])
    warm = full.warm_started().fit(X[:30], y[:30])
    # the transform is re-chosen from the data: on the same data, the same one
    assert _warp_tuple(warm.warp_) == _warp_tuple(full.warp_)
    # L-BFGS-B started at the optimum does not leave it for a worse point; the
    # likelihood is of T(y) under the same T, so the values compare
    assert (-warm.gp_.log_marginal_likelihood_
            <= -full.gp_.log_marginal_likelihood_ + 1e-6)
    assert warm.info_["starts"] == 1 < full.info_["starts"]
    # on more data the transform is chosen afresh (documented in warm_started)
    grown = full.warm_started().fit(X, y)
    assert _warp_tuple(grown.warp_) == _warp_tuple(OutputWarp.choose(y))


def test_warm_start_carries_the_hyperparameters_over_in_standardized_units():
    # A fit under the log, a warm refit on data only Yeo-Johnson can take: the start
    # is the old optimum relative to the spread of T(y) (MaternGP standardizes T(y) by
    # its ddof-0 sd), the length scales (input units) as they were.
    X, y, _ = _log("log")
    full = WarpedGP(seed=0, quick=True).fit(X[:30], y[:30])
    y_new = y.copy()
    y_new[40] = -1.0
    warm = clone(full.warm_started())      # a proper estimator: clone keeps the start
    warm.fit(X, y_new)
    assert (full.warp_.kind, warm.warp_.kind) == ("log", "yeo-johnson")
    start = warm.gp_.get_params()          # the values the optimizer started from
    var_new = _transform(warm.warp_, y_new).var()
    var_old = np.log(y[:30]).var()
    for name, fitted in (("signal_variance", full.gp_.signal_variance_),
                         ("noise_variance", full.gp_.noise_std_ ** 2)):
        assert start[name] / var_new == pytest.approx(fitted / var_old, rel=1e-10)
    np.testing.assert_allclose(start["length_scale"], full.gp_.length_scales_, rtol=1e-12)
    assert warm.info_["starts"] == 1
