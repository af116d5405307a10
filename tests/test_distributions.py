"""The warped-normal distribution against scipy.stats closed forms and quadrature."""

import numpy as np
from scipy import integrate, stats

from advisor.distributions import OutputWarp, WarpedNormal


def test_log_warp_matches_lognorm():
    mu, s = np.array([0.3, -1.0]), np.array([0.5, 1.2])
    dist = WarpedNormal(mu, s, OutputWarp("log"))
    y = np.array([1.7, 0.2])
    ref = stats.lognorm(s=s, scale=np.exp(mu))
    np.testing.assert_allclose(dist.nll(y), -ref.logpdf(y), rtol=1e-12)
    np.testing.assert_allclose(dist.cdf(y), ref.cdf(y), rtol=1e-12)
    np.testing.assert_allclose(dist.ppf(np.array([0.1, 0.9])), ref.ppf([0.1, 0.9]), rtol=1e-10)


def _crps_by_definition(cdf, y, lower):
    # CRPS = int (F(t) - 1{t >= y})^2 dt [GR2007, Eq. 20], scipy.integrate.quad
    a = integrate.quad(lambda t: cdf(t) ** 2, lower, y, limit=200)[0]
    b = integrate.quad(lambda t: (1 - cdf(t)) ** 2, y, np.inf, limit=200)[0]
    return a + b


def test_crps_quadrature_matches_definition_lognormal_and_yeo_johnson():
    for warp, mu, s, y in [(OutputWarp("log"), 0.2, 0.6, 2.5),
                           (OutputWarp("yeo-johnson", 0.4, 2.0), -0.3, 0.8, -1.0)]:
        dist = WarpedNormal([mu], [s], warp)
        lower = 0.0 if warp.kind == "log" else -np.inf   # support of the distribution
        ref = _crps_by_definition(lambda t: float(dist.cdf(np.array([t]))[0]), y, lower)
        # midpoint rule on 400 nodes: relative error well below 1% here (tails are smooth)
        np.testing.assert_allclose(dist.crps(np.array([y]))[0], ref, rtol=1e-2)


def test_yeo_johnson_inverse_and_jacobian():
    w = OutputWarp("yeo-johnson", 0.4, 2.0)
    y = np.linspace(-5, 5, 11)
    np.testing.assert_allclose(w.inverse(w.forward(y)), y, atol=1e-10)
    h = 1e-6   # central finite difference of the forward transform
    fd = (w.forward(y + h) - w.forward(y - h)) / (2 * h)
    np.testing.assert_allclose(w.log_derivative(y), np.log(fd), atol=1e-6)
    # forward agrees with scipy's Yeo-Johnson on y/scale
    np.testing.assert_allclose(w.forward(y), stats.yeojohnson(y / 2.0, lmbda=0.4))


def test_wide_predictive_distributions_have_finite_moments():
    # A predictive sd of 300 in T's units: the inverse of lambda = 0 (exp on the positive
    # side), lambda = 2 (exp on the negative side) and the log overflowed, and the
    # moments came out inf / NaN (a warped-GP backtest run raised on it, stop 29).
    for warp in (OutputWarp("yeo-johnson", 0.0, 1.0), OutputWarp("yeo-johnson", 2.0, 1.0),
                 OutputWarp("log")):
        dist = WarpedNormal(np.array([0.0, 1.0]), np.array([300.0, 1.0]), warp)
        mean, sd = dist.moments()
        assert np.all(np.isfinite(mean)) and np.all(np.isfinite(sd)), warp.kind
        assert np.all(np.isfinite(dist.crps(np.array([0.5, 0.5]))))
        # the narrow point is untouched by the bound: its moments against quadrature of
        # the untruncated inverse (scipy.integrate.quad over the normal density)
        ref = integrate.quad(lambda x: float(warp.inverse(np.array([1.0 + x]))[0])
                             * stats.norm.pdf(x), -12, 12)[0]
        np.testing.assert_allclose(mean[1], ref, rtol=2e-2)
    # within the bound the inverse is the exact inverse of scipy's forward transform
    w = OutputWarp("yeo-johnson", 0.0, 1.0)
    y = np.array([-1e5, -3.0, 0.0, 3.0, 1e5])
    np.testing.assert_allclose(w.inverse(stats.yeojohnson(y, lmbda=0.0)), y, rtol=1e-9)
