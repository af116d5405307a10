"""The opt-in GP stand-in classes (advisor/backtest/_gp_standins.py): the slice sampler
against scipy's distributions, the hyperparameter posterior against quadrature, the
conditioned draws against scikit-learn's GP posterior."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from threadpoolctl import threadpool_limits

from advisor.backtest._gp_standins import (_conditioned_draws, hyperposterior_samples,
                                           slice_sample)
from advisor.surrogates import make_surrogate
from advisor.surrogates.gp import BOUNDS, matern52, negative_log_marginal_likelihood


@pytest.fixture(autouse=True)
def _one_blas_thread():
    with threadpool_limits(limits=1):
        yield


def test_slice_sampler_draws_a_truncated_normal_and_a_correlated_pair():
    rng = np.random.default_rng(0)
    # standard normal truncated to x > 0 (a bound the density states as -inf), against
    # scipy.stats.truncnorm; the KS test assumes independent draws, thinning by 3
    # sweeps makes the chain close to that (common practice)
    trunc = slice_sample(lambda x: -0.5 * x[0] ** 2 if x[0] > 0 else -np.inf, [1.0],
                         1000, rng, burn_in=10, thin=3)[:, 0]
    assert trunc.min() > 0
    assert stats.kstest(trunc, stats.truncnorm(0, np.inf).cdf).pvalue > 0.01
    # a correlated bivariate normal (rho = 0.6), coordinate by coordinate: the sample
    # correlation's Monte-Carlo sd at ~1000 effective draws is (1 - rho^2) / sqrt(1000)
    # = 0.02 (Fisher's approximation); 0.08 is 4 of them
    cov = np.array([[1.0, 0.6], [0.6, 1.0]])
    prec = np.linalg.inv(cov)
    pair = slice_sample(lambda x: -0.5 * x @ prec @ x, [0.0, 0.0], 1000, rng,
                        burn_in=10, thin=3)
    assert np.corrcoef(pair.T)[0, 1] == pytest.approx(0.6, abs=0.08)
    assert np.abs(pair.mean(0)).max() < 0.15      # mean sd ~ 1/sqrt(1000/(1+rho)) ~ 0.04


def test_hyperparameter_samples_follow_the_posterior_by_quadrature():
    # 30 noisy points of a sine: a compact posterior over log(l, sf2, sn2)
    rng = np.random.default_rng(3)
    X = np.sort(rng.uniform(0, 4, 30))[:, None]
    y = np.sin(2 * X[:, 0]) + 0.3 * rng.standard_normal(30)
    gp = make_surrogate("gp", seed=0, quick=True).fit(X, y)
    Xs = (X - gp.x_mean_) / gp.x_scale_
    ys = (y - gp.y_mean_) / gp.y_scale_
    # the likelihood is the project's, checked against scikit-learn here at one point
    # (and in tests/test_gp.py); scikit-learn's theta is log(sf2, l, sn2)
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    sk = GaussianProcessRegressor(ConstantKernel() * Matern(nu=2.5) + WhiteKernel(),
                                  optimizer=None).fit(Xs, ys)
    t = np.log([0.7, 1.3, 0.05])
    assert -negative_log_marginal_likelihood(t, Xs, ys)[0] == pytest.approx(
        sk.log_marginal_likelihood(np.array([t[1], t[0], t[2]])), rel=1e-6)  # jitters differ
    # posterior means of the log hyperparameters (flat prior on the bounds) by
    # quadrature on a 20^3 grid of +-2.5 log units around the fitted point (the signal
    # variance's long upper tail up to its bound, 100), whose faces other than that
    # bound must hold less than 1e-3 of the mass
    c = gp.log_params_
    axes = [np.linspace(c[0] - 2.5, c[0] + 2.5, 20),
            np.linspace(c[1] - 2.5, math.log(BOUNDS["signal_variance"][1]), 20),
            np.linspace(c[2] - 2.5, c[2] + 2.5, 20)]
    G = np.stack(np.meshgrid(*axes, indexing="ij"), -1)
    logp = np.array([-negative_log_marginal_likelihood(g, Xs, ys)[0]
                     for g in G.reshape(-1, 3)]).reshape(G.shape[:3])
    w = np.exp(logp - logp.max())
    faces = sum(np.take(w, i, axis=k).sum() for k in range(3) for i in (0, -1)
                if (k, i) != (1, -1))
    assert faces < 1e-3 * w.sum()
    exact = (w[..., None] * G).reshape(-1, 3).sum(0) / w.sum()
    draws = hyperposterior_samples(gp, X, y, 400, np.random.default_rng(1), burn_in=20,
                                   thin=1)
    # Monte-Carlo se by batch means (20 batches of 20 successive draws), plus the
    # grid's own error (a quarter of a cell, 0.05 log units: our bound)
    se = draws.reshape(20, 20, 3).mean(1).std(0, ddof=1) / math.sqrt(20)
    assert np.all(np.abs(draws.mean(0) - exact) < 4 * se + 0.05), (draws.mean(0), exact, se)


def test_conditioned_draws_match_scikit_learns_posterior():
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    rng = np.random.default_rng(5)
    X = rng.uniform(-1, 1, (15, 2))
    y = np.cos(3 * X[:, 0]) + X[:, 1] + 0.1 * rng.standard_normal(15)
    Z = rng.uniform(-1, 1, (4, 2))
    ls1, ls2, sn2 = np.array([0.8, 1.5]), np.array([0.2, 0.4]), 0.01
    # the sum of two Matérn-5/2 terms, conditioned as [RW2006, Eqs. 2.23-2.24]
    F = _conditioned_draws(lambda A, B: matern52(A, B, ls1, 1.0) + matern52(A, B, ls2, 0.5),
                           X, y, sn2, Z, 4000, np.random.default_rng(2))
    kernel = (ConstantKernel(1.0) * Matern(ls1, nu=2.5) + ConstantKernel(0.5)
              * Matern(ls2, nu=2.5) + WhiteKernel(sn2))
    sk = GaussianProcessRegressor(kernel, optimizer=None).fit(X, y)
    mean, cov = sk.predict(Z, return_cov=True)
    cov -= sn2 * np.eye(len(Z))        # scikit-learn's test covariance includes the noise
    sd = np.sqrt(np.diag(cov))
    # the mean of 4000 draws has se sd/63; 5 se.  Variances: sd of a sample variance is
    # var * sqrt(2/4000) = 2.2%; 10% is 4.5 of them
    assert np.all(np.abs(F.mean(0) - mean) < 5 * sd / math.sqrt(4000))
    assert np.allclose(F.var(0), np.diag(cov), rtol=0.10)
    assert np.corrcoef(F.T)[0, 1] == pytest.approx(cov[0, 1] / sd[0] / sd[1], abs=0.05)


@pytest.fixture(scope="module")
def trials(tmp_path_factory):
    """2 campaigns x 15 trials of Branin (Surjanovic & Bingham 2013) with small noise."""
    from advisor.logs import load_trials

    rng = np.random.default_rng(11)
    rows = []
    for c in range(2):
        for run in range(1, 16):
            x1, x2 = rng.uniform(-5, 10), rng.uniform(0, 15)
            y = ((x2 - 5.1 / (4 * math.pi ** 2) * x1 ** 2 + 5 / math.pi * x1 - 6) ** 2
                 + 10 * (1 - 1 / (8 * math.pi)) * math.cos(x1) + 10
                 + rng.standard_normal())
            rows.append({"c": c, "run": run, "x1": x1, "x2": x2, "y": y})
    path = tmp_path_factory.mktemp("logs") / "branin.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    return load_trials(path, objective="y", campaign="c", order="run")


@pytest.mark.parametrize("cls", ["gp_hyper", "gp_sum", "gp_sum_ml", "gp_trend"])
def test_gp_variant_classes_draw_joint_functions_with_the_logs_noise(trials, cls):
    # integration through mixed_standins (the draws' law is checked above against
    # scipy / scikit-learn / quadrature)
    from advisor.backtest import mixed_standins
    from advisor.execution import task_seed

    st = mixed_standins(trials, n_functions=3, n_extra=40, seed=2, quick=True,
                        classes=(cls, "forest"))
    assert st.classes == [cls] * 2 + ["forest"] and not st.failed
    assert st.values.shape == (3, 40) and np.all(np.isfinite(st.values))
    # two draws of one class differ (joint draws, not the posterior mean twice)
    assert np.abs(st.values[0] - st.values[1]).max() > 1e-6
    # the observation noise is the project GP's fitted noise (the log's), as for 'gp'
    gp = make_surrogate("gp", seed=task_seed(2, "standin-model", cls), quick=True)
    gp.fit(trials.space.encode(trials.used[trials.params], "onehot"), trials.y)
    assert st.noise_std == pytest.approx(gp.noise_std_, rel=1e-9)


def test_trend_draws_extrapolate_a_quadratic_log_by_its_closed_form():
    from advisor.backtest._gp_standins import trend_draws

    # a noise-free separable quadratic: the least-squares trend is the function itself,
    # so away from the data (up to a unit outside the logged box) the draws follow the
    # closed form; the residual GP adds at most its floor variance (0.01 standardized)
    rng = np.random.default_rng(4)
    X = rng.uniform(0, 1, (25, 2))

    def q(A):
        return 3 + 2 * A[:, 0] - A[:, 1] + 5 * A[:, 0] ** 2 + 4 * A[:, 1] ** 2

    Z = rng.uniform(-1, 2, (6, 2))
    F = trend_draws(X, q(X), Z, 50, np.random.default_rng(1), make_surrogate, 0)
    assert F.shape == (50, 6)
    assert np.abs(F.mean(0) - q(Z)).max() < 0.5      # values span about 3-40 here
