"""Matérn-5/2 kernel, marginal likelihood, length-scale prior and jittered Cholesky of
:mod:`advisor.surrogates.gp` (see the package docstring for the model and references)."""

from __future__ import annotations

import math

import numpy as np
from scipy import linalg

_SQRT5 = math.sqrt(5.0)
_LOG_2PI = math.log(2.0 * math.pi)

#: Bounds on (length scale, signal variance, noise variance) for standardized data.
BOUNDS = {"length_scale": (1e-2, 1e2), "signal_variance": (1e-2, 1e2),
          "noise_variance": (1e-6, 1e1)}

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


#: Variance of the log-normal length-scale prior [HHN2024] (see module docstring).
LENGTH_SCALE_PRIOR_VAR = 3.0


def length_scale_prior(d):
    """Location and variance of the log-normal prior on each standardized length scale.

    ``log l_k ~ N(sqrt(2) + log(d)/2 + log(sqrt(12)), 3)``: the dimension-scaled prior of
    [HHN2024] for unit-cube inputs (from memory), moved to unit-sd inputs by the sd
    ``1/sqrt(12)`` of a uniform column (our conversion).
    """
    return (math.sqrt(2.0) + 0.5 * math.log(max(int(d), 1)) + 0.5 * math.log(12.0),
            LENGTH_SCALE_PRIOR_VAR)


def negative_log_posterior(log_params, X, y, jitter=1e-8):
    """``negative_log_marginal_likelihood`` plus the negative log length-scale prior
    (up to a constant): ``sum_k (log l_k - mu_d)^2 / (2 * 3)``; value and gradient
    with respect to ``log_params``.  Its minimum is the MAP estimate."""
    value, grad = negative_log_marginal_likelihood(log_params, X, y, jitter)
    if not np.isfinite(value):
        return value, grad
    d = X.shape[1]
    mu, var = length_scale_prior(d)
    z = np.asarray(log_params[:d], dtype=float) - mu
    grad = grad.copy()
    grad[:d] += z / var
    return value + 0.5 * float(z @ z) / var, grad


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
