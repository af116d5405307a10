"""The :class:`MaternGP` surrogate of :mod:`advisor.surrogates.gp` (see the package
docstring for the model, the prior, the sparse path and references)."""

from __future__ import annotations

import contextlib
import math

import numpy as np
from scipy import linalg
from scipy.optimize import minimize
from threadpoolctl import ThreadpoolController

from ..base import ScaledSurrogate, check_fit_inputs
from ._kernel import (_LOG_2PI, BOUNDS, _cholesky_with_jitter, _unpack, length_scale_prior,
                      matern52, negative_log_marginal_likelihood, negative_log_posterior)

#: Exact GP up to this many training points (thorough, quick); see module docstring.
MAX_EXACT = {False: 1500, True: 800}
#: Random subset / inducing-point count beyond the exact limit (thorough, quick).
SUBSET_SIZE = {False: 1000, True: 600}
#: Random starts after the fixed one (thorough, quick).
RESTARTS = {False: 3, True: 1}

_CHUNK = 2048  # columns of K_uf built at a time in the sparse path (bounds memory)


# ----------------------------------------------------------------------------------
# the surrogate
# ----------------------------------------------------------------------------------
_CONTROLLER: ThreadpoolController | None = None


def _blas_controller() -> ThreadpoolController:
    """One BLAS controller per process.  ``threadpool_limits(...)`` scans every loaded
    shared library on each call; at one call per fit and predict that scan was 44% of
    a backtest's time (cProfile, 500-trial log).  The numerical libraries are loaded
    at import, before any fit, so one scan sees them."""
    global _CONTROLLER
    if _CONTROLLER is None:
        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER


class MaternGP(ScaledSurrogate):
    """Gaussian process with a Matérn-5/2 ARD kernel and fitted Gaussian noise.

    Defaults follow [RW2006] (Alg. 2.1) with the hyperparameters by MAP under the
    length-scale prior of [HHN2024] (module docstring); the starting point (unit length
    scales, unit signal variance, noise variance 0.1, standardized units), the random
    start box and the restart counts are our choices.

    Parameters
    ----------
    seed : int
        Seeds the random restarts and the subset drawn for large logs.
    quick : bool
        Quick budget: fewer restarts (``RESTARTS``), smaller exact limit (``MAX_EXACT``).
    restarts : int, optional
        Random starts of the optimizer after the fixed start (default by budget).
    max_exact : int, optional
        Largest training set handled exactly; beyond it FITC on ``subset_size`` points.
    subset_size : int, optional
        Points used for hyperparameters and as inducing inputs beyond ``max_exact``.
    optimize : bool
        ``False`` keeps the given hyperparameters fixed (all three must then be given).
    length_scale, signal_variance, noise_variance : optional
        In raw units (encoded inputs, ``y``'s units); starting values when
        ``optimize=True``, fixed values otherwise.
    normalize : bool
        Standardize inputs and outputs (the prior mean is then the training mean);
        ``False`` uses the raw data with a zero prior mean.
    noise_variance_bounds : (float, float), optional
        Bounds on the noise variance in standardized units (default ``BOUNDS``).
    jitter : float
        Diagonal jitter in standardized units, raised automatically on failure.
    maxiter : int
        L-BFGS-B iterations per start.
    restart_size : int
        Beyond this many points the starts run on a random subset of this size and the
        best is polished on all points.
    hyperprior : bool
        ``False`` (default): plain type-II maximum likelihood; ``True``: MAP under the
        log-normal length-scale prior [HHN2024] (off by default: it cost regret in real
        next campaigns, see the package docstring).
    blas_threads : int or None
        BLAS threads while fitting and predicting (``None``: the library default).  One by
        default: folds usually run in parallel processes, and spinning BLAS threads on
        busy cores slowed a 400-point fit by two orders of magnitude in our measurements.

    Attributes
    ----------
    length_scales_ : (d,) array
        Fitted length scales in raw encoded input units.
    signal_variance_, noise_std_ : float
        In ``y``'s units.
    log_marginal_likelihood_ : float
        Of the fitted model on the (exact-path) training data, in ``y``'s units.
    info_ : dict
        ``approximation`` ("exact" or the FITC description), sizes, restarts.
    """

    input_encoding = "onehot"

    #: The backtest's scheduled re-optimizations are full fits, not warm starts from
    #: the last fit (``advisor.backtest._pool._warm_in_backtest``: a one-start warm
    #: re-fit stays in the basin of a fit on a handful of trials).
    warm_reoptimize = False

    def __init__(self, seed=0, quick=False, *, restarts=None, max_exact=None,
                 subset_size=None, optimize=True, length_scale=None, signal_variance=None,
                 noise_variance=None, normalize=True, noise_variance_bounds=None,
                 jitter=1e-8, maxiter=200, restart_size=400, blas_threads=1,
                 hyperprior=False):
        super().__init__(seed=seed, quick=quick)
        self.restarts = restarts
        self.max_exact = max_exact
        self.subset_size = subset_size
        self.optimize = optimize
        self.length_scale = length_scale
        self.signal_variance = signal_variance
        self.noise_variance = noise_variance
        self.normalize = normalize
        self.noise_variance_bounds = noise_variance_bounds
        self.jitter = jitter
        self.maxiter = maxiter
        self.restart_size = restart_size
        self.blas_threads = blas_threads
        self.hyperprior = hyperprior

    def size_regimes(self):
        """Training-set sizes at which the fitting procedure changes, for cost models
        (``planning.cost_projection`` fits one power law per regime): a list of
        ``(name, largest n in the regime or None for no limit)`` in increasing order.
        Exact GP with every start on all points up to ``restart_size``; exact GP with
        the starts on a subset and one polish up to the exact limit; FITC beyond it."""
        max_exact = (MAX_EXACT[bool(self.quick)] if self.max_exact is None
                     else int(self.max_exact))
        regimes = []
        if self.optimize and int(self.restart_size) < max_exact:
            regimes += [("exact", int(self.restart_size)),
                        ("exact, starts on a subset", max_exact)]
        else:
            regimes.append(("exact", max_exact))
        return regimes + [("FITC", None)]

    # -- scaling ------------------------------------------------------------------
    def _scale_fit(self, X, y):
        if self.normalize:
            return super()._scale_fit(X, y)
        X, y = check_fit_inputs(X, y)
        self.x_mean_ = np.zeros(X.shape[1])
        self.x_scale_ = np.ones(X.shape[1])
        self.y_mean_, self.y_scale_ = 0.0, 1.0
        return X, y

    # -- hyperparameters ----------------------------------------------------------
    def _log_bounds(self, d):
        lo_n, hi_n = self.noise_variance_bounds or BOUNDS["noise_variance"]
        b = ([BOUNDS["length_scale"]] * d + [BOUNDS["signal_variance"], (lo_n, hi_n)])
        return np.log(np.array(b, dtype=float))

    def _given_log_params(self, d):
        """User-given hyperparameters, converted to standardized units (None if absent)."""
        vals = [self.length_scale, self.signal_variance, self.noise_variance]
        if any(v is None for v in vals):
            if not self.optimize:
                raise ValueError("optimize=False needs length_scale, signal_variance and "
                                 "noise_variance; give all three or set optimize=True")
            return None
        ls = np.broadcast_to(np.asarray(self.length_scale, dtype=float), (d,))
        if np.any(ls <= 0) or self.signal_variance <= 0 or self.noise_variance <= 0:
            raise ValueError("length_scale, signal_variance and noise_variance must be > 0")
        return np.log(np.concatenate([ls / self.x_scale_,
                                      [self.signal_variance / self.y_scale_ ** 2,
                                       self.noise_variance / self.y_scale_ ** 2]]))

    def _starts(self, d, rng, n_restarts):
        """The fixed start (given values, or unit length scales, unit signal, 0.1 noise),
        random log-uniform starts in a central box, the last of which, under the prior,
        is replaced by the fixed start with every length scale at the prior's median
        (our choices).

        The last one: on 20 seeded 40-row pure-noise logs in 6 inputs the fixed and
        random starts ended in a local optimum with one or two short length scales in 5
        cases (held-out NLL up to 0.66 above the baseline's); from the prior's median
        they reach the better optimum (long length scales, NLL within 0.002 of the
        baseline's).  With it in place of the last random start 2 of the 20 logs stay
        more than 0.05 above the baseline (1 as an extra start, at 25-45% more fit time).
        """
        given = self._given_log_params(d)
        first = given if given is not None else np.log(np.r_[np.ones(d), 1.0, 0.1])
        starts = [first]
        # the prior's-median start takes the place of the last random one (same cost)
        n_random = n_restarts - 1 if self.hyperprior and n_restarts > 0 else n_restarts
        for _ in range(n_random):
            starts.append(np.log(np.r_[np.exp(rng.uniform(np.log(0.2), np.log(20.0), d)),
                                       np.exp(rng.uniform(np.log(0.3), np.log(3.0))),
                                       np.exp(rng.uniform(np.log(1e-4), np.log(0.5)))]))
        if n_random < n_restarts:
            mid = np.array(first, dtype=float)
            mid[:d] = length_scale_prior(d)[0]
            starts.append(mid)
        return starts

    def _run_lbfgs(self, x0, Xs, ys, bounds):
        x0 = np.clip(x0, bounds[:, 0], bounds[:, 1])
        objective = (negative_log_posterior if self.hyperprior
                     else negative_log_marginal_likelihood)
        return minimize(objective, x0, args=(Xs, ys, self.jitter),
                        jac=True, method="L-BFGS-B", bounds=bounds,
                        options={"maxiter": self.maxiter})

    def _optimize(self, Xs, ys, rng):
        """MAP (or type-II ML, ``hyperprior=False``) from the fixed and the random
        starts; returns the best log-parameters.

        Beyond ``restart_size`` points the starts are run on a random subset of that
        size and only the best result is polished on all points (our choice: one
        evaluation costs O(n^3), so this keeps several starts affordable at n ~ 1000).
        """
        n, d = Xs.shape
        bounds = self._log_bounds(d)
        n_restarts = RESTARTS[bool(self.quick)] if self.restarts is None else int(self.restarts)
        starts = self._starts(d, rng, n_restarts)
        polish = n > self.restart_size
        if polish:
            idx = rng.choice(n, size=self.restart_size, replace=False)
            Xr, yr = Xs[idx], ys[idx]
        else:
            Xr, yr = Xs, ys
        best, best_val, n_ok = None, np.inf, 0
        for x0 in starts:
            res = self._run_lbfgs(x0, Xr, yr, bounds)
            if np.isfinite(res.fun):
                n_ok += 1
                if res.fun < best_val:
                    best, best_val = res.x, res.fun
        if best is not None and polish:
            res = self._run_lbfgs(best, Xs, ys, bounds)
            best = res.x if np.isfinite(res.fun) else None
        if best is None:
            raise ValueError("the marginal likelihood could not be evaluated at any start "
                             "(covariance not positive definite); raise the noise floor "
                             "with noise_variance_bounds=(1e-4, 10)")
        return best, len(starts), n_ok

    # -- fitting ------------------------------------------------------------------
    def _blas(self):
        if self.blas_threads is None:
            return contextlib.nullcontext()
        return _blas_controller().limit(limits=int(self.blas_threads), user_api="blas")

    def fit(self, X, y):
        with self._blas():
            return super().fit(X, y)

    def predict(self, X):
        with self._blas():
            return super().predict(X)

    def _fit(self, Xs, ys):
        n, d = Xs.shape
        rng = np.random.default_rng(self.seed)
        max_exact = MAX_EXACT[bool(self.quick)] if self.max_exact is None else int(self.max_exact)
        sparse = n > max_exact
        if sparse:
            m = (SUBSET_SIZE[bool(self.quick)] if self.subset_size is None
                 else int(self.subset_size))
            m = min(m, max_exact, n)
            idx = np.sort(rng.choice(n, size=m, replace=False))
            Xh, yh = Xs[idx], ys[idx]
        else:
            Xh, yh = Xs, ys
        if self.optimize:
            log_params, n_starts, n_ok = self._optimize(Xh, yh, rng)
        else:
            log_params, n_starts, n_ok = self._given_log_params(d), 0, 0
        self.log_params_ = log_params
        ls, sf2, sn2 = _unpack(log_params, d)
        self._ls, self._sf2, self._sn2 = ls, sf2, sn2
        self._noise_std_s = math.sqrt(sn2)
        if sparse:
            self._fit_fitc(Xs, ys, Xh)
            self.info_ = {"approximation": f"FITC, m={len(Xh)} inducing points drawn from "
                                           "the data; hyperparameters fitted on them",
                          "n_train": n, "m": len(Xh), "max_exact": max_exact,
                          "starts": n_starts, "starts_converged": n_ok}
        else:
            self._fit_exact(Xs, ys)
            self.info_ = {"approximation": "exact", "n_train": n, "max_exact": max_exact,
                          "starts": n_starts, "starts_converged": n_ok}
        return self

    def _fit_exact(self, Xs, ys):
        """Algorithm 2.1 of [RW2006], lines 2-3 and 7."""
        n = len(ys)
        Ky = matern52(Xs, Xs, self._ls, self._sf2)
        Ky.flat[:: n + 1] += self._sn2
        self.L_, self.jitter_ = _cholesky_with_jitter(Ky, self.jitter, self._sf2 + self._sn2,
                                                      "the training covariance K + noise*I")
        self.alpha_ = linalg.cho_solve((self.L_, True), ys, check_finite=False)
        self.X_train_ = Xs
        lml_s = (-0.5 * ys @ self.alpha_ - np.log(np.diag(self.L_)).sum() - 0.5 * n * _LOG_2PI)
        # density of y in raw units: divide by y_scale per point
        self.log_marginal_likelihood_ = float(lml_s - n * math.log(self.y_scale_))
        self._sparse = False

    def _fit_fitc(self, Xs, ys, Xu):
        """FITC posterior [SG2006; QR2005] with inducing inputs ``Xu``, by chunks.

        ``Luu Luu^T = K_uu``, ``V = Luu^{-1} K_uf``, ``Lambda = diag(K_ff - V^T V) + sigma_n^2``,
        ``B = I + V Lambda^{-1} V^T``, ``w = B^{-1} V Lambda^{-1} y``.
        """
        m = len(Xu)
        Kuu = matern52(Xu, Xu, self._ls, self._sf2)
        Luu, self.jitter_ = _cholesky_with_jitter(Kuu, self.jitter, self._sf2,
                                                  "the inducing-point covariance K_uu")
        B = np.eye(m)
        b = np.zeros(m)
        for start in range(0, len(ys), _CHUNK):
            sl = slice(start, start + _CHUNK)
            V = linalg.solve_triangular(Luu, matern52(Xu, Xs[sl], self._ls, self._sf2),
                                        lower=True, check_finite=False)
            lam = np.maximum(self._sf2 - (V * V).sum(0), 0.0) + self._sn2
            Vl = V / lam
            B += Vl @ V.T
            b += Vl @ ys[sl]
        LB, _ = _cholesky_with_jitter(B, 0.0, 1.0, "the FITC matrix I + V Lambda^-1 V^T")
        self.Luu_, self.LB_ = Luu, LB
        self.w_ = linalg.cho_solve((LB, True), b, check_finite=False)
        self.X_inducing_ = Xu
        self.log_marginal_likelihood_ = None
        self._sparse = True

    # -- prediction ---------------------------------------------------------------
    def _latent_s(self, Xs, full_cov=False):
        """Latent mean and variance (or covariance) on standardized scales."""
        if self._sparse:
            Vs = linalg.solve_triangular(self.Luu_, matern52(self.X_inducing_, Xs, self._ls,
                                                             self._sf2),
                                         lower=True, check_finite=False)
            mean = Vs.T @ self.w_
            Ws = linalg.solve_triangular(self.LB_, Vs, lower=True, check_finite=False)
            if full_cov:
                cov = matern52(Xs, Xs, self._ls, self._sf2) - Vs.T @ Vs + Ws.T @ Ws
                return mean, cov
            var = self._sf2 - (Vs * Vs).sum(0) + (Ws * Ws).sum(0)
        else:
            Ks = matern52(self.X_train_, Xs, self._ls, self._sf2)
            mean = Ks.T @ self.alpha_                       # Alg. 2.1, line 4
            v = linalg.solve_triangular(self.L_, Ks, lower=True, check_finite=False)  # line 5
            if full_cov:
                return mean, matern52(Xs, Xs, self._ls, self._sf2) - v.T @ v
            var = self._sf2 - (v * v).sum(0)                # line 6
        return mean, np.maximum(var, 1e-12 * self._sf2)

    def _predict(self, Xs):
        mean, var = self._latent_s(Xs)
        return mean, np.sqrt(var + self._sn2)

    def latent_predict(self, X):
        """Posterior mean and standard deviation of the latent ``f`` (no noise), raw units."""
        with self._blas():
            mean, var = self._latent_s(self._scale_x(X))
        return self.y_mean_ + self.y_scale_ * mean, self.y_scale_ * np.sqrt(var)

    def latent_cov(self, X):
        """Posterior mean and covariance matrix of the latent ``f`` at ``X``, raw units."""
        with self._blas():
            mean, cov = self._latent_s(self._scale_x(X), full_cov=True)
        return self.y_mean_ + self.y_scale_ * mean, self.y_scale_ ** 2 * cov

    def _sample_latent(self, Xs, n_samples, rng):
        mean, cov = self._latent_s(Xs, full_cov=True)
        cov = 0.5 * (cov + cov.T)
        try:
            L, _ = _cholesky_with_jitter(cov, 1e-10 * self._sf2, self._sf2,
                                         "the posterior covariance at the sample points")
        except ValueError:
            # many near-duplicate points: fall back to a clipped eigendecomposition
            w, U = np.linalg.eigh(cov)
            L = U * np.sqrt(np.maximum(w, 0.0))
        return mean + rng.standard_normal((n_samples, len(mean))) @ L.T

    def sample_y(self, X, n_samples=1, rng=None):
        """Joint draws of the latent function at ``X`` (no noise), raw units.

        Parameters
        ----------
        X : (k, d) array
        n_samples : int
        rng : numpy Generator or int, optional
            Defaults to a generator seeded with ``seed``.

        Returns
        -------
        (n_samples, k) array.
        """
        rng = np.random.default_rng(self.seed if rng is None else rng)
        with self._blas():
            f = self._sample_latent(self._scale_x(X), int(n_samples), rng)
        return self.y_mean_ + self.y_scale_ * f

    def with_fixed_hyperparameters(self) -> "MaternGP":
        """An unfitted copy holding this fit's hyperparameters fixed (raw units).

        Fitting the copy conditions the GP on new data without type-II ML: one Cholesky
        factorization instead of several optimizer runs.  The backtest uses it for cheap
        updates within a simulated campaign (optional protocol member; a model without
        it is refitted in full).  The raw-unit values make the kernel the same whatever
        the new data's standardization.
        """
        return type(self)(seed=self.seed, quick=self.quick, restarts=self.restarts,
                          max_exact=self.max_exact, subset_size=self.subset_size,
                          optimize=False, length_scale=self.length_scales_,
                          signal_variance=self.signal_variance_,
                          noise_variance=self.noise_std_ ** 2, normalize=self.normalize,
                          noise_variance_bounds=self.noise_variance_bounds,
                          jitter=self.jitter, maxiter=self.maxiter,
                          restart_size=self.restart_size, blas_threads=self.blas_threads,
                          hyperprior=self.hyperprior)

    def warm_started(self) -> "MaternGP":
        """An unfitted copy whose optimizer starts from this fit's hyperparameters
        (raw units), with no random restarts (optional protocol member; the relevance
        intervals' half-sample refits use it)."""
        return type(self)(**dict(self.get_params(), restarts=0, optimize=True,
                                 length_scale=self.length_scales_,
                                 signal_variance=self.signal_variance_,
                                 noise_variance=self.noise_std_ ** 2))

    # -- fitted hyperparameters in raw units --------------------------------------
    @property
    def length_scales_(self):
        return self._ls * self.x_scale_

    @property
    def signal_variance_(self):
        return float(self._sf2 * self.y_scale_ ** 2)
