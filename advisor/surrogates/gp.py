"""Gaussian-process regression with a Matérn-5/2 ARD kernel, fitted by type-II maximum
likelihood; a FITC sparse predictor for logs larger than the exact limit.

Model (on standardized inputs and outputs, see :class:`~advisor.surrogates.base.ScaledSurrogate`)::

    f ~ GP(0, k),   y_i = f(x_i) + eps_i,   eps_i ~ N(0, sigma_n^2)

    k(x, x') = sigma_f^2 (1 + sqrt(5) r + 5 r^2 / 3) exp(-sqrt(5) r),
    r^2      = sum_k (x_k - x'_k)^2 / l_k^2                       [RW2006, Eq. 4.17]

with one length scale ``l_k`` per input column (automatic relevance determination).
The hyperparameters ``(l_1..l_d, sigma_f^2, sigma_n^2)`` maximize the log marginal
likelihood [RW2006, Eq. 5.8]::

    log p(y | X) = -1/2 y^T K_y^{-1} y - 1/2 log|K_y| - n/2 log(2 pi),   K_y = K + sigma_n^2 I

and its gradient [RW2006, Eq. 5.9] ``1/2 tr((alpha alpha^T - K_y^{-1}) dK_y/dtheta)``,
by L-BFGS-B in log-parameter space from one fixed and several random starts.
Prediction follows [RW2006, Algorithm 2.1].

Why hand-written rather than scikit-learn's ``GaussianProcessRegressor``: the
Matérn gradient there materializes an ``n x n x d`` tensor per evaluation; the ARD
gradient below needs only ``n x n`` matrices and one ``n x n`` by ``n x d`` product,
because ``sum_ij G_ij (x_ik - x_jk)^2 = 2 sum_i x_ik^2 (G 1)_i - 2 x_k^T G x_k`` for a
symmetric ``G``.  ``benchmarks/gp_vs_sklearn.py`` measures the difference and
``tests/test_gp.py`` checks the likelihood and its gradient against scikit-learn.

Hyperparameter bounds (standardized units; our choices, documented in ``BOUNDS``):
length scales in [0.01, 100] (inputs have unit standard deviation, so 100 switches a
column off and 0.01 is far below any spacing a log of a few thousand trials resolves);
signal variance in [0.01, 100] (the outputs have unit variance); noise variance in
[1e-6, 10] (the floor keeps ``K_y`` well conditioned, cond <= n * 100 / 1e-6).

Large logs (``n > max_exact``): the hyperparameters are fitted by exact type-II ML on a
random subset of ``m`` training points, and the same ``m`` points serve as inducing
inputs of the fully independent training conditional (FITC) predictor of Snelson &
Ghahramani (2006), as set out by Quiñonero-Candela & Rasmussen (2005, the FITC
section, §6 from memory), which uses all ``n`` points at ``O(n m^2)`` cost and
``O(m * chunk)`` memory; no
``n x n`` matrix is formed.  The test conditional is kept exact (the covariance of
test points is ``K_** - Q_** + Q_*f (Q_ff + Lambda)^{-1} Q_f*``), so joint draws are
available.  Choosing the inducing inputs as the hyperparameter subset, and fitting the
hyperparameters on it rather than on the FITC likelihood, are our choices.

Sizes (our measurements, one BLAS thread on a shared 2-core machine; ``MAX_EXACT``,
``SUBSET_SIZE``): exact up to 1500 points thorough (a 20-parameter fit then takes
about 5-10 s) and 800 quick; beyond, m = 1000 (thorough) or 600 (quick) points.  On
smooth 3- and 8-parameter test functions FITC's held-out NLL was within 0.005 nats per
point of the exact GP (n = 900-2400, m = 300-1000); a 5000-trial, 20-parameter log
fits in about 5 s.  The random starts run on at most ``restart_size`` = 400 points, the
best is polished on all of them (our choice, see ``MaternGP._optimize``).

References
----------
.. [RW2006] C. E. Rasmussen and C. K. I. Williams, *Gaussian Processes for Machine
   Learning*, MIT Press, 2006.  Algorithm 2.1; Eq. 4.17 (Matérn); Eq. 5.8-5.9
   (marginal likelihood and gradient); §8.3 (approximations for large n).
.. [SG2006] E. Snelson and Z. Ghahramani, "Sparse Gaussian processes using
   pseudo-inputs", NIPS 18, 2006.
.. [QR2005] J. Quiñonero-Candela and C. E. Rasmussen, "A unifying view of sparse
   approximate Gaussian process regression", JMLR 6, 1939-1959, 2005.
"""

from __future__ import annotations

import contextlib
import math

import numpy as np
from scipy import linalg
from scipy.optimize import minimize
from threadpoolctl import ThreadpoolController

from .base import ScaledSurrogate, check_fit_inputs

__all__ = ["MaternGP", "matern52", "negative_log_marginal_likelihood", "BOUNDS"]

_SQRT5 = math.sqrt(5.0)
_LOG_2PI = math.log(2.0 * math.pi)

#: Bounds on (length scale, signal variance, noise variance) for standardized data.
BOUNDS = {"length_scale": (1e-2, 1e2), "signal_variance": (1e-2, 1e2),
          "noise_variance": (1e-6, 1e1)}

#: Exact GP up to this many training points (thorough, quick); see module docstring.
MAX_EXACT = {False: 1500, True: 800}
#: Random subset / inducing-point count beyond the exact limit (thorough, quick).
SUBSET_SIZE = {False: 1000, True: 600}
#: Random starts after the fixed one (thorough, quick).
RESTARTS = {False: 3, True: 1}

_CHUNK = 2048  # columns of K_uf built at a time in the sparse path (bounds memory)


# ----------------------------------------------------------------------------------
# kernel and likelihood
# ----------------------------------------------------------------------------------
def _sq_dist(A, B):
    """Squared Euclidean distances between rows, clipped at 0 (rounding)."""
    d2 = A @ B.T
    d2 *= -2.0
    d2 += (A * A).sum(1)[:, None]
    d2 += (B * B).sum(1)[None, :]
    return np.maximum(d2, 0.0, out=d2)


def matern52(A, B, length_scale, signal_variance):
    """Matérn-5/2 ARD covariance matrix [RW2006, Eq. 4.17].

    Parameters
    ----------
    A : (n, d) array
    B : (m, d) array
    length_scale : float or (d,) array
    signal_variance : float

    Returns
    -------
    (n, m) array ``sigma_f^2 (1 + sqrt5 r + 5 r^2/3) exp(-sqrt5 r)``.
    """
    ls = np.asarray(length_scale, dtype=float)
    s = _SQRT5 * np.sqrt(_sq_dist(A / ls, B / ls))
    return signal_variance * (1.0 + s + s * s / 3.0) * np.exp(-s)


def _unpack(log_params, d):
    p = np.exp(np.asarray(log_params, dtype=float))
    return p[:d], p[d], p[d + 1]


def negative_log_marginal_likelihood(log_params, X, y, jitter=1e-8):
    """Negative log marginal likelihood and its gradient [RW2006, Eq. 5.8, 5.9].

    Parameters
    ----------
    log_params : (d + 2,) array
        ``log`` of ``(l_1, ..., l_d, sigma_f^2, sigma_n^2)``.
    X : (n, d) array
    y : (n,) array
    jitter : float
        Added to the diagonal besides the noise variance.

    Returns
    -------
    value : float
        ``-log p(y | X, theta)``; ``inf`` when ``K_y`` is not positive definite.
    grad : (d + 2,) array
        Derivative with respect to ``log_params``.

    Notes
    -----
    With ``W = alpha alpha^T - K_y^{-1}`` and ``D_k = (x_ik - x_jk)^2 / l_k^2``,
    ``dK/dlog l_k = sigma_f^2 (5/3) (1 + sqrt5 r) exp(-sqrt5 r) * D_k``,
    ``dK/dlog sigma_f^2 = K`` and ``dK/dlog sigma_n^2 = sigma_n^2 I``.
    """
    n, d = X.shape
    ls, sf2, sn2 = _unpack(log_params, d)
    Z = X / ls
    # in-place arithmetic: at a few hundred points the n x n elementwise passes, not
    # the Cholesky, dominate an evaluation
    s = _sq_dist(Z, Z)
    np.sqrt(s, out=s)
    s *= _SQRT5
    e = np.negative(s)
    np.exp(e, out=e)
    K = s * s
    K *= 1.0 / 3.0
    K += s
    K += 1.0
    K *= e
    K *= sf2
    Ky = K.copy()
    Ky.flat[:: n + 1] += sn2 + jitter
    L, info = linalg.lapack.dpotrf(Ky, lower=1, clean=1, overwrite_a=1)
    if info != 0:
        return np.inf, np.zeros(d + 2)
    alpha = linalg.cho_solve((L, True), y, check_finite=False)
    value = 0.5 * y @ alpha + np.log(np.diag(L)).sum() + 0.5 * n * _LOG_2PI
    Kinv, info = linalg.lapack.dpotri(L, lower=1, overwrite_c=1)
    if info != 0:
        return np.inf, np.zeros(d + 2)
    # dpotri fills the lower triangle; the upper one is zero (clean=1 above)
    W = np.outer(alpha, alpha)
    W -= Kinv
    W -= Kinv.T
    W.flat[:: n + 1] += np.diag(Kinv)
    grad = np.empty(d + 2)
    grad[d] = 0.5 * np.vdot(W, K)
    grad[d + 1] = 0.5 * sn2 * np.trace(W)
    G = s                       # reuse the buffer: G = W * sf2 (5/3) (1 + s) exp(-s)
    G += 1.0
    G *= e
    G *= W
    G *= sf2 * (5.0 / 3.0)
    g = G.sum(1)
    grad[:d] = (Z * Z * g[:, None]).sum(0) - (Z * (G @ Z)).sum(0)
    return float(value), -grad


def _cholesky_with_jitter(A, jitter, scale, what):
    """Cholesky of ``A + j I``, raising ``j`` from ``jitter`` up to ``1e-4 * scale``."""
    j = jitter
    while True:
        B = A.copy()
        B.flat[:: A.shape[0] + 1] += j
        L, info = linalg.lapack.dpotrf(B, lower=1, clean=1, overwrite_a=1)
        if info == 0:
            return L, j
        if j >= 1e-4 * scale:
            raise ValueError(
                f"{what} is not positive definite even with jitter {j:.1e}; "
                "remove duplicate rows with conflicting settings, or raise the noise floor "
                "with noise_variance_bounds=(1e-4, 10)")
        j = max(10.0 * j, 1e-10 * scale)


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

    Defaults follow [RW2006] (type-II ML, Alg. 2.1); the starting point (unit length
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

    def __init__(self, seed=0, quick=False, *, restarts=None, max_exact=None,
                 subset_size=None, optimize=True, length_scale=None, signal_variance=None,
                 noise_variance=None, normalize=True, noise_variance_bounds=None,
                 jitter=1e-8, maxiter=200, restart_size=400, blas_threads=1):
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
        """The fixed start (given values, or unit length scales, unit signal, 0.1 noise)
        and random log-uniform starts in a central box (our choices)."""
        given = self._given_log_params(d)
        first = given if given is not None else np.log(np.r_[np.ones(d), 1.0, 0.1])
        starts = [first]
        for _ in range(n_restarts):
            starts.append(np.log(np.r_[np.exp(rng.uniform(np.log(0.2), np.log(20.0), d)),
                                       np.exp(rng.uniform(np.log(0.3), np.log(3.0))),
                                       np.exp(rng.uniform(np.log(1e-4), np.log(0.5)))]))
        return starts

    def _run_lbfgs(self, x0, Xs, ys, bounds):
        x0 = np.clip(x0, bounds[:, 0], bounds[:, 1])
        return minimize(negative_log_marginal_likelihood, x0, args=(Xs, ys, self.jitter),
                        jac=True, method="L-BFGS-B", bounds=bounds,
                        options={"maxiter": self.maxiter})

    def _optimize(self, Xs, ys, rng):
        """Type-II ML from the fixed and the random starts; returns the best log-parameters.

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
                                           "the data; hyperparameters by type-II ML on them",
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
                          restart_size=self.restart_size, blas_threads=self.blas_threads)

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
