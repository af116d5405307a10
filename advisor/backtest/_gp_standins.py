"""Gaussian-process stand-ins that carry more than the fitted kernel: opt-in stand-in
classes of :mod:`._standins` (names in ``GP_STANDIN_CLASSES``).

Why.  The past logs usually come from a local optimizer, so the data sit in clusters; a
GP fitted there by type-II maximum likelihood has one set of length scales and its
posterior draws vary little away from the clusters, while the real objective may not
(``benchmarks/nondefault_wins.py``, part ``unit``).  Three constructions (and an
exploratory fourth, ``gp_trend``, see :func:`trend_draws`):

``gp_hyper`` -- hyperparameters marginalized.  Each stand-in is a joint posterior draw of
the project GP (Matérn-5/2 ARD, fitted noise) whose hyperparameters are themselves a
draw from their posterior given the log, as Snoek, Larochelle & Adams (2012, §3.2,
"Practical Bayesian optimization of machine learning algorithms", NeurIPS) integrate
them out for the acquisition.  The posterior of ``theta = log(l_1..l_d, sigma_f^2,
sigma_n^2)`` (standardized units) is ``p(y | X, theta) p(theta)`` with the log marginal
likelihood of [RW2006, Eq. 5.8] (``negative_log_marginal_likelihood``) and a prior flat
in ``theta`` on the GP's bounds (``gp.BOUNDS``), so its mode is the type-II maximum-
likelihood point the product fits (our choice of prior: the same model, its uncertainty
added; the bounds make it proper).  It is sampled by univariate slice sampling with
stepping out and shrinkage, one coordinate after another (Neal 2003, "Slice sampling",
Annals of Statistics 31(3), Figs. 3 and 5; the sampler Snoek et al. use), one chain per
log started at the fitted point: ``HYPER_BURN_IN`` sweeps discarded, then one sample
every ``HYPER_THIN`` sweeps (our choices).

``gp_sum`` -- a short-scale component added.  The fitted kernel plus a Matérn-5/2 of
the same signal variance and ``SUM_SCALE_RATIO`` times the fitted length scales
(``k = k_fit + k_short``, a sum of covariance functions is a covariance function,
[RW2006, §4.2.4], section from memory), conditioned on the log with the fitted noise:
the draws agree with the log where it has data and vary on a shorter scale away from
it.  Ratio and variance are our choices, fixed before any measurement (not tuned on
the benchmark's cases).

``gp_sum_ml`` -- two components, both fitted.  The kernel is a sum of two Matérn-5/2
ARD terms, each with its own variance and length scales, plus white noise
(``s1^2 k(l1) + s2^2 k(l2) + sigma_n^2 [x = x']``), every hyperparameter fitted by type-II
maximum likelihood (scikit-learn's ``GaussianProcessRegressor``, L-BFGS-B, the first term
started at the project GP's fit, the second at ``TWO_COMPONENT_START`` times its length
scales, ``TWO_COMPONENT_RESTARTS`` random restarts; bounds those of ``gp.BOUNDS``), on the
GP's standardized data; the stand-ins are its joint latent posterior draws.  Sums of
kernels fitted by maximum likelihood are how [RW2006, §5.4.3, from memory] compose
structure; with ARD each term can take a different subset of the inputs, a two-term
version of the additive kernels of Duvenaud, Nickisch & Rasmussen (2011, "Additive
Gaussian processes", NeurIPS).  On the benchmark's past logs (4 campaigns x 20 trials of a
local optimizer) the sum raised the log marginal likelihood by 26-76 nats on Levy-3 and
Michalewicz-2 (each term took mostly one input) and by 0.4-1 nat on Branin (our
measurements, 2 logs each), so this is a better model of such logs, not a knob.

The first three need the project ``MaternGP`` (``length_scales_``, ``log_params_``); another
sampler raises ``ValueError`` and the class's share goes to the classes that work.  The
observation noise of the simulated campaigns stays the project GP's fitted noise (the
log's, as for the ``gp`` class).

References
----------
.. [RW2006] C. E. Rasmussen and C. K. I. Williams, *Gaussian Processes for Machine
   Learning*, MIT Press, 2006.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..surrogates.gp import BOUNDS, MaternGP, matern52, negative_log_marginal_likelihood

__all__ = ["GP_STANDIN_CLASSES", "hyperposterior_samples", "slice_sample", "hyper_draws",
           "fit_two_component", "two_component_draws", "trend_draws",
           "sum_kernel_draws", "HYPER_BURN_IN", "HYPER_THIN", "SUM_SCALE_RATIO"]

#: Stand-in class names handled here (``BacktestPlan.sim_classes`` vocabulary).
GP_STANDIN_CLASSES = ("gp_hyper", "gp_sum", "gp_sum_ml", "gp_trend")
#: Slice-sampling sweeps discarded, and sweeps between kept samples (our choices).
HYPER_BURN_IN = 20
HYPER_THIN = 5
#: Initial bracket width of the slice sampler in log units (Neal 2003's ``w``; ours).
SLICE_WIDTH = 1.0
#: Length scales of the short component as a fraction of the fitted ones (ours).
SUM_SCALE_RATIO = 1.0 / 3.0
#: ``gp_sum_ml``: the second component starts at this multiple of the fitted length
#: scales; random restarts of scikit-learn's optimizer (our choices).
TWO_COMPONENT_START = 3.0
TWO_COMPONENT_RESTARTS = 2
#: Most logged rows used in the hyperparameter likelihood (a random subset beyond).
HYPER_MAX_ROWS = 400


def slice_sample(log_density, x0, n_samples, rng, *, burn_in=HYPER_BURN_IN,
                 thin=HYPER_THIN, width=SLICE_WIDTH, max_steps=20):
    """Coordinate-wise slice sampling (Neal 2003, Fig. 3 stepping out, Fig. 5
    shrinkage) of an unnormalized ``log_density`` from ``x0`` (finite density).

    Returns ``(n_samples, len(x0))``: the states after ``burn_in + thin * (i + 1)``
    sweeps, ``i = 0..n_samples-1``.
    """
    x = np.array(x0, dtype=float)
    fx = float(log_density(x))
    if not np.isfinite(fx):
        raise ValueError("slice_sample: the starting point has zero density")
    out = []
    sweeps = int(burn_in) + int(thin) * int(n_samples)
    for sweep in range(1, sweeps + 1):
        for k in range(len(x)):
            level = fx + np.log(rng.random())        # the slice: log u < log p(x)
            lo = x[k] - width * rng.random()
            hi = lo + width
            j = int(rng.integers(max_steps + 1))      # stepping out, at most max_steps
            m = max_steps - j
            z = x.copy()
            while j > 0:
                z[k] = lo
                if not log_density(z) > level:
                    break
                lo -= width
                j -= 1
            while m > 0:
                z[k] = hi
                if not log_density(z) > level:
                    break
                hi += width
                m -= 1
            while True:                               # shrinkage
                z[k] = lo + (hi - lo) * rng.random()
                fz = float(log_density(z))
                if fz > level:
                    x, fx = z, fz
                    break
                if z[k] < x[k]:
                    lo = z[k]
                else:
                    hi = z[k]
                if hi - lo < 1e-12:                   # numerically collapsed: stay
                    break
        if sweep > burn_in and (sweep - burn_in) % thin == 0:
            out.append(x.copy())
    return np.array(out)


def _standardized(model, X, y):
    if not isinstance(model, MaternGP) or getattr(model, "_sparse", True):
        raise ValueError("this stand-in class needs the exact project GP ('gp')")
    Xs = model._scale_x(np.asarray(X, dtype=float))
    ys = (np.asarray(y, dtype=float) - model.y_mean_) / model.y_scale_
    return Xs, ys


def _log_bounds(model, d):
    lo_n, hi_n = model.noise_variance_bounds or BOUNDS["noise_variance"]
    b = [BOUNDS["length_scale"]] * d + [BOUNDS["signal_variance"], (lo_n, hi_n)]
    return np.log(np.array(b, dtype=float))


def hyperposterior_samples(model, X, y, n_samples, rng, *, burn_in=HYPER_BURN_IN,
                           thin=HYPER_THIN):
    """``n_samples`` draws of the fitted ``MaternGP``'s log hyperparameters
    (standardized units, ``log_params_`` layout) from their posterior given ``(X, y)``
    under a prior flat on the bounds (module docstring)."""
    Xs, ys = _standardized(model, X, y)
    if len(ys) > HYPER_MAX_ROWS:
        idx = np.sort(rng.choice(len(ys), size=HYPER_MAX_ROWS, replace=False))
        Xs, ys = Xs[idx], ys[idx]
    bounds = _log_bounds(model, Xs.shape[1])

    def log_density(theta):
        if np.any(theta < bounds[:, 0]) or np.any(theta > bounds[:, 1]):
            return -np.inf
        value, _ = negative_log_marginal_likelihood(theta, Xs, ys)
        return -value if np.isfinite(value) else -np.inf

    x0 = np.clip(np.asarray(model.log_params_, dtype=float), bounds[:, 0], bounds[:, 1])
    return slice_sample(log_density, x0, int(n_samples), rng, burn_in=burn_in, thin=thin)


def hyper_draws(model, X, y, Xc, n, rng, make, seed):
    """``n`` stand-ins on the encoded candidates ``Xc``: one hyperparameter sample each,
    then one joint latent draw of the GP fitted with it held fixed (raw units)."""
    thetas = hyperposterior_samples(model, X, y, n, rng)
    d = np.asarray(X).shape[1]
    out = np.empty((n, len(Xc)))
    for i, theta in enumerate(thetas):
        p = np.exp(theta)
        gp = make("gp", seed=seed, quick=True, optimize=False,
                  length_scale=p[:d] * model.x_scale_,
                  signal_variance=p[d] * model.y_scale_ ** 2,
                  noise_variance=p[d + 1] * model.y_scale_ ** 2)
        gp.fit(X, y)
        out[i] = gp.sample_y(Xc, 1, rng)[0]
    return out


def _conditioned_draws(kernel, Xs, ys, noise_var, Zc, n, rng):
    """``n`` joint latent draws at ``Zc`` of a zero-mean GP with covariance function
    ``kernel(A, B)`` conditioned on ``(Xs, ys)`` with Gaussian noise [RW2006, Eqs.
    2.23-2.24], standardized units."""
    Ky = kernel(Xs, Xs)
    Ky.flat[:: len(ys) + 1] += noise_var + 1e-8 * float(np.mean(np.diag(Ky)))
    L = np.linalg.cholesky(Ky)
    Ks = kernel(Xs, Zc)
    alpha = np.linalg.solve(L.T, np.linalg.solve(L, ys))
    V = np.linalg.solve(L, Ks)
    mean = Ks.T @ alpha
    cov = kernel(Zc, Zc) - V.T @ V
    w, U = np.linalg.eigh(0.5 * (cov + cov.T))
    return mean + (rng.standard_normal((n, len(mean))) * np.sqrt(np.maximum(w, 0.0))) @ U.T


def sum_kernel_draws(model, X, y, Xc, n, rng, ratio=SUM_SCALE_RATIO):
    """``n`` joint latent draws on the encoded candidates ``Xc`` of the GP with kernel
    ``k_fit + k_short`` (module docstring) conditioned on ``(X, y)``, raw units."""
    Xs, ys = _standardized(model, X, y)
    Zc = model._scale_x(np.asarray(Xc, dtype=float))
    d = Xs.shape[1]
    ls, sf2, sn2 = np.exp(model.log_params_[:d]), *np.exp(model.log_params_[d:d + 2])

    def k(A, B):
        return matern52(A, B, ls, sf2) + matern52(A, B, ls * ratio, sf2)

    F = _conditioned_draws(k, Xs, ys, sn2, Zc, n, rng)
    return model.y_mean_ + model.y_scale_ * F


def fit_two_component(model, X, y, seed):
    """Type-II maximum-likelihood fit of the two-component kernel of ``gp_sum_ml``
    (module docstring) by scikit-learn on the GP's standardized data; returns the fitted
    ``GaussianProcessRegressor``."""
    from sklearn.exceptions import ConvergenceWarning
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

    Xs, ys = _standardized(model, X, y)
    d = Xs.shape[1]
    lo, hi = BOUNDS["length_scale"]
    ls = np.clip(np.exp(model.log_params_[:d]), lo, hi)
    sf2, sn2 = np.exp(model.log_params_[d:d + 2])
    nb = model.noise_variance_bounds or BOUNDS["noise_variance"]
    sb = BOUNDS["signal_variance"]
    kernel = (ConstantKernel(np.clip(sf2, *sb), sb) * Matern(ls, (lo, hi), nu=2.5)
              + ConstantKernel(np.clip(sf2, *sb), sb)
              * Matern(np.clip(TWO_COMPONENT_START * ls, lo, hi), (lo, hi), nu=2.5)
              + WhiteKernel(np.clip(sn2, *nb), nb))
    gpr = GaussianProcessRegressor(kernel, normalize_y=False,
                                   n_restarts_optimizer=TWO_COMPONENT_RESTARTS,
                                   random_state=int(seed) % (2 ** 32))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return gpr.fit(Xs, ys)


def two_component_draws(model, X, y, Xc, n, rng, seed):
    """``n`` joint latent draws on the encoded candidates ``Xc`` of the two-component
    GP fitted to ``(X, y)`` by :func:`fit_two_component`, raw units."""
    gpr = fit_two_component(model, X, y, seed)
    Xs, ys = _standardized(model, X, y)
    Zc = model._scale_x(np.asarray(Xc, dtype=float))
    latent = gpr.kernel_.k1                       # the two Matérn terms, no white noise
    F = _conditioned_draws(latent, Xs, ys, float(gpr.kernel_.k2.noise_level), Zc, n, rng)
    return model.y_mean_ + model.y_scale_ * F


def trend_draws(X, y, Xc, n, rng, make, seed):
    """``gp_trend`` (exploratory): a quadratic trend without interactions (1, x_k, x_k^2
    on the standardized inputs) fitted by least squares, plus joint latent draws of the
    project GP fitted to its residuals (explicit basis functions, [RW2006, §2.7], with
    the coefficients fixed at their least-squares values: their uncertainty is left
    out).  Away from a clustered log the draws revert to the trend, not to the trials'
    mean.  Measured (``benchmarks/nondefault_wins.py``, ``unit_gp_trend``): the only
    construction that moved Levy-3's UCB beta=4 clearly (-0.16 +- 0.05 over 10 logs,
    real -0.30), not its other winners nor Branin at noise 0.2; no default."""
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    mu, sd = X.mean(0), X.std(0)
    sd = np.where(sd > 1e-12, sd, 1.0)

    def basis(A):
        Z = (np.asarray(A, dtype=float) - mu) / sd
        return np.hstack([np.ones((len(Z), 1)), Z, Z * Z])

    beta, *_ = np.linalg.lstsq(basis(X), y, rcond=None)
    gp = make("gp", seed=seed, quick=True)
    gp.fit(X, y - basis(X) @ beta)
    return basis(Xc) @ beta + gp.sample_y(Xc, n, rng)
