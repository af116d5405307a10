"""A GP with a per-campaign random offset: ``k(x, x') + s_c^2 [c = c']``.

Lot-to-lot (campaign-to-campaign) shifts that a plain GP cannot explain by the inputs
end up in its noise variance.  Adding a random effect -- an offset per campaign drawn
from ``N(0, s_c^2)`` -- to the kernel [RW2006, Sec. 2.7 and Eq. 2.41 for sums of
kernels; the random-intercept model of Laird & Ware 1982] gives the shift its own
variance.  For a campaign absent from training the offset is unknown and ``s_c^2``
enters the predictive variance; once a campaign has training rows, the GP posterior
learns its offset from them (no special code: the indicator kernel does it).

The model has an explicit constant mean with a vague prior, integrated out [RW2006,
Sec. 2.7, Eqs. 2.42 and 2.45 with ``h(x) = 1``]: a generalized-least-squares intercept,
its variance in the prediction and the matching marginal likelihood.  Without it the
level of the data can sit in the campaign offsets instead of the shared part (a ridge
of equal likelihood when ``s_c^2`` is large), and a new campaign, whose offset is
unknown, is then predicted off by that level: on the moulding log's leave-one-lot-out
folds the offsets ran to the bound and the held-out lots were predicted 0.18-0.20 mm
off (objective sd 0.11 mm); it is the fixed intercept of the mixed model of Laird &
Ware (1982).

References
----------
[RW2006] Rasmussen, C. E. & Williams, C. K. I. (2006). Gaussian Processes for Machine
    Learning. MIT Press.
Laird, N. M. & Ware, J. H. (1982). Random-effects models for longitudinal data.
    Biometrics 38, 963-974.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import linalg, optimize

from .base import EstimatorMixin, check_fit_inputs
from .gp import _LOG_2PI, _SQRT5, _cholesky_with_jitter, _sq_dist, matern52

__all__ = ["CampaignGP"]


def _same(ga, gb):
    return (np.asarray(ga)[:, None] == np.asarray(gb)[None, :]).astype(float)


def _nlml(log_params, X, y, S, jitter):
    """Negative log marginal likelihood [RW2006, Eq. 2.30] of the campaign kernel.

    ``log_params = log(l_1..l_d, sigma_f^2, sigma_n^2, s_c^2)``.  The value alone; the
    optimizer uses :func:`_nlml_and_grad`, which returns the same value.
    """
    return _nlml_and_grad(log_params, X, y, S, jitter)[0]


def _nlml_and_grad(log_params, X, y, S, jitter):
    """Negative log marginal likelihood of the campaign kernel and its gradient in
    ``log_params``.

    With ``K = K_f + s_c^2 S + (sigma_n^2 + jitter) I``, ``A = 1^T K^-1 1`` and the
    constant mean integrated out [RW2006, Eq. 2.45, H = 1^T]::

        nlml = 1/2 y^T P y + 1/2 log|K| + 1/2 log A + (n-1)/2 log 2pi,
        P    = K^-1 - K^-1 1 1^T K^-1 / A,

    and ``d nlml / d theta = -1/2 tr((beta beta^T - P) dK/dtheta)``, ``beta = P y``
    (the restricted-likelihood gradient: ``dP = -P dK P`` and ``d(log|K| + log A) =
    tr(P dK)``; [RW2006, Eq. 5.9] with ``P`` in place of ``K^-1``).  The kernel
    derivatives are those of :func:`advisor.surrogates.gp.negative_log_marginal_likelihood`
    plus ``dK/dlog s_c^2 = s_c^2 S``.  An analytic gradient makes an optimizer step
    one evaluation instead of the d + 4 of finite differences (the campaign GP was the
    most expensive model of the quick 500-trial assessment); the test checks it
    against finite differences (``scipy.optimize.check_grad``).
    """
    n, d = X.shape
    p = np.exp(np.asarray(log_params, dtype=float))
    ls, sf2, sn2, sc2 = p[:d], p[d], p[d + 1], p[d + 2]
    Z = X / ls
    s = _SQRT5 * np.sqrt(_sq_dist(Z, Z))
    e = np.exp(-s)
    Kf = sf2 * (1.0 + s + s * s / 3.0) * e
    K = Kf + sc2 * S
    K.flat[:: n + 1] += sn2 + jitter
    L, info = linalg.lapack.dpotrf(K, lower=1, clean=1, overwrite_a=1)
    if info != 0:
        return 1e10, np.zeros(d + 3)
    a = linalg.cho_solve((L, True), y, check_finite=False)
    k1 = linalg.cho_solve((L, True), np.ones(n), check_finite=False)
    A = float(k1.sum())
    if not A > 0:
        return 1e10, np.zeros(d + 3)
    k1y = float(k1 @ y)
    value = float(0.5 * y @ a - 0.5 * k1y ** 2 / A + np.log(np.diag(L)).sum()
                  + 0.5 * math.log(A) + 0.5 * (n - 1) * _LOG_2PI)
    Kinv, info = linalg.lapack.dpotri(L, lower=1)
    if info != 0:
        return 1e10, np.zeros(d + 3)
    Kinv = Kinv + np.tril(Kinv, -1).T          # dpotri fills the lower triangle only
    beta = a - k1 * (k1y / A)                  # P y
    W = np.outer(beta, beta)
    W -= Kinv
    W += np.outer(k1, k1 / A)                  # W = beta beta^T - P
    grad = np.empty(d + 3)
    grad[d] = 0.5 * np.vdot(W, Kf)
    grad[d + 1] = 0.5 * sn2 * np.trace(W)
    grad[d + 2] = 0.5 * sc2 * np.vdot(W, S)
    G = W * (sf2 * (5.0 / 3.0)) * (1.0 + s) * e
    g = G.sum(1)
    grad[:d] = (Z * Z * g[:, None]).sum(0) - (Z * (G @ Z)).sum(0)
    return value, -grad


class CampaignGP(EstimatorMixin):
    """Matérn-5/2 ARD GP plus a campaign random effect, type-II ML hyperparameters.

    Parameters
    ----------
    seed : int
        Seeds the restart points.
    quick : bool
        Fewer restarts.
    restarts : int or None
        Number of random restarts besides the default start (None: 1 quick, 3 full).
    jitter : float
        Added to the diagonal.
    length_scale, signal_variance, noise_variance, campaign_variance : optional
        Starting values of the optimizer's fixed start, in raw units (encoded inputs,
        ``y``'s units); all four or none (default: unit length scales and signal
        variance, 0.1 noise and campaign variance, standardized units).
        :meth:`warm_started` sets them.

    Attributes
    ----------
    between_campaign_sd_ : float
        Fitted ``s_c`` in ``y``'s units.
    noise_std_ : float
        Fitted observation-noise sd in ``y``'s units.
    info_ : dict
        Plain facts for the report, including ``between_campaign_sd``.
    """

    uses_groups = True

    def __init__(self, seed=0, quick=False, *, restarts=None, jitter=1e-8,
                 length_scale=None, signal_variance=None, noise_variance=None,
                 campaign_variance=None):
        self.seed = seed
        self.quick = quick
        self.restarts = restarts
        self.jitter = jitter
        self.length_scale = length_scale
        self.signal_variance = signal_variance
        self.noise_variance = noise_variance
        self.campaign_variance = campaign_variance

    def warm_started(self) -> "CampaignGP":
        """An unfitted copy whose optimizer starts from this fit's hyperparameters,
        with no random restarts (optional protocol member).  The relevance intervals
        refit the model on half-samples of the same log (``advisor.planning``); the
        full-data optimum is a good start there, and one start instead of several
        makes each refit a few times cheaper."""
        return type(self)(seed=self.seed, quick=self.quick, restarts=0, jitter=self.jitter,
                          length_scale=self._ls * self.x_scale_,
                          signal_variance=self._sf2 * self.y_scale_ ** 2,
                          noise_variance=self._sn2 * self.y_scale_ ** 2,
                          campaign_variance=self._sc2 * self.y_scale_ ** 2)

    def _first_start(self, d):
        given = [self.length_scale, self.signal_variance, self.noise_variance,
                 self.campaign_variance]
        if any(v is None for v in given):
            return np.r_[np.zeros(d), 0.0, math.log(0.1), math.log(0.1)]
        ls = np.broadcast_to(np.asarray(self.length_scale, dtype=float), (d,))
        v = self.y_scale_ ** 2
        return np.log(np.r_[ls / self.x_scale_, self.signal_variance / v,
                            self.noise_variance / v, self.campaign_variance / v])

    def fit(self, X, y, groups=None):
        X, y = check_fit_inputs(X, y)
        n, d = X.shape
        g = np.zeros(n, dtype=object) if groups is None else np.asarray(groups, dtype=object)
        self.x_mean_ = X.mean(0)
        sx = X.std(0)
        self.x_scale_ = np.where(sx > 0, sx, 1.0)
        self.y_mean_ = float(y.mean())
        self.y_scale_ = float(y.std()) or 1.0
        Xs = (X - self.x_mean_) / self.x_scale_
        ys = (y - self.y_mean_) / self.y_scale_
        S = _same(g, g)
        rng = np.random.default_rng(self.seed)
        n_restarts = (1 if self.quick else 3) if self.restarts is None else int(self.restarts)
        bounds = [(math.log(1e-2), math.log(1e2))] * d + [
            (math.log(1e-2), math.log(1e2)), (math.log(1e-6), math.log(2.0)),
            (math.log(1e-6), math.log(2.0))]
        lo, hi = np.array(bounds).T
        starts = [np.clip(self._first_start(d), lo, hi)]
        for _ in range(n_restarts):
            starts.append(np.array([rng.uniform(lo, hi) for lo, hi in bounds]))
        best = None
        for x0 in starts:
            res = optimize.minimize(_nlml_and_grad, x0, args=(Xs, ys, S, self.jitter),
                                    jac=True, method="L-BFGS-B", bounds=bounds,
                                    options={"maxiter": 100 if self.quick else 200})
            if best is None or res.fun < best.fun:
                best = res
        p = np.exp(best.x)
        self._ls, self._sf2, self._sn2, self._sc2 = p[:d], p[d], p[d + 1], p[d + 2]
        K = matern52(Xs, Xs, self._ls, self._sf2) + self._sc2 * S
        K.flat[:: n + 1] += self._sn2
        self.L_, self.jitter_ = _cholesky_with_jitter(K, self.jitter, self._sf2 + self._sn2,
                                                      "the campaign-GP training covariance")
        # generalized least squares intercept [RW2006, Sec. 2.7, Eq. 2.42, H = 1^T]
        k1 = linalg.cho_solve((self.L_, True), np.ones(n), check_finite=False)
        self._A = float(k1.sum())
        self.intercept_s_ = float(k1 @ ys) / self._A
        self.alpha_ = linalg.cho_solve((self.L_, True), ys - self.intercept_s_,
                                       check_finite=False)
        self.X_train_, self.groups_ = Xs, g
        self.noise_std_ = float(math.sqrt(self._sn2) * self.y_scale_)
        self.between_campaign_sd_ = float(math.sqrt(self._sc2) * self.y_scale_)
        self.info_ = {"approximation": "exact", "n_train": n,
                      "n_campaigns": int(len(set(g.tolist()))),
                      "between_campaign_sd": self.between_campaign_sd_,
                      "noise_sd": self.noise_std_}
        return self

    def predict(self, X, groups=None):
        """Predictive mean and sd of a new observation; a campaign not seen in training
        (or ``groups=None``) gets an unknown offset whose variance ``s_c^2`` is added."""
        X = np.asarray(X, dtype=float)
        Xs = (X - self.x_mean_) / self.x_scale_
        g = (np.full(len(X), object(), dtype=object) if groups is None
             else np.asarray(groups, dtype=object))
        Ks = matern52(self.X_train_, Xs, self._ls, self._sf2) + self._sc2 * _same(self.groups_, g)
        mean = self.intercept_s_ + Ks.T @ self.alpha_
        v = linalg.solve_triangular(self.L_, Ks, lower=True, check_finite=False)
        # R = h* - H K^-1 K*: the intercept's uncertainty [RW2006, Eq. 2.42]
        r = 1.0 - linalg.solve_triangular(self.L_, np.ones(len(self.alpha_)), lower=True,
                                          check_finite=False) @ v
        var = (np.maximum(self._sf2 + self._sc2 - (v * v).sum(0), 1e-12) + r * r / self._A
               + self._sn2)
        return self.y_mean_ + self.y_scale_ * mean, self.y_scale_ * np.sqrt(var)
