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

Random slopes (``random_slopes=True``, the default).  Laird & Ware's random effects are
not only intercepts: ``Z_i b_i`` may hold covariates, so a campaign can also have its own
linear trend ``b_c^T x`` with ``b_c ~ N(0, diag(t_1^2..t_d^2))`` (standardized inputs),
which adds ``[c = c'] sum_k t_k^2 x_k x'_k`` to the kernel.  On the moulding log the
best mould temperature moves 4 C from lot to lot (``sample_logs/moulding_warpage.md``);
expanding ``0.00025 (mould - (62 + 4 lot))^2`` gives a per-lot offset plus a per-lot
slope ``-0.002 lot`` mm/C in the mould temperature.  With offsets only, the noise sd
came out 0.020 mm against the sheet's 0.012 (the slopes went into the noise); with the
slopes 0.010 mm, and the fitted slope sd for the mould temperature is 0.0026 mm/C
against the sheet's 0.0022 (sd of 0, 0.002, 0.004, 0.006), the others near 0.  With a
single campaign the effect is not identified and is dropped (see ``fit``).

Hyperparameters: MAP under the length-scale prior of :mod:`advisor.surrogates.gp`
(Hvarfner, Hellsten & Nardi 2024), flat priors on the variances within their bounds;
L-BFGS-B with the exact gradient of the objective (see ``_nlml``).  On pure noise the
flat prior on ``sigma_f^2`` sometimes lets a large signal variance with long length
scales through (4 of 20 seeded 40 x 6 logs more than 0.05 nats above the baseline).  An
exponential prior on ``sigma_f`` (the penalized-complexity prior of Fuglstad, Simpson,
Lindgren & Rue 2019, from memory) fixed that only at rates that cost every sample log,
fermentation leave-one-campaign-out 0.24-0.37 nats (there ``sigma_f^2`` is 40-57 with
long length scales); not adopted (README, "Does every model know more than nothing?").

Large logs (``n > max_exact``, the ``gp``'s ``MAX_EXACT``: 1500 rows, quick 800).  One
evaluation of the objective above costs an ``n x n`` Cholesky, its inverse and a few
``n x n`` products, and with ``2d + 3`` hyperparameters L-BFGS-B needs on the order of a
hundred of them: on a 20-parameter, 5-campaign log one evaluation took 8.4 CPU s at
n = 4000, a quick fit 34 CPU s at n = 1000 and 308 CPU s at n = 2000, so a quick
assessment of 5,000 trials did not finish (our measurements, 2026-12-03, one BLAS thread
on a loaded 2-core machine).  Beyond the limit the hyperparameters are therefore fitted
on a random subset of ``subset_size`` rows (the ``gp``'s ``SUBSET_SIZE``: 1000, quick
600), stratified by campaign -- each campaign in proportion to its rows, largest-
remainder rounding, at least one row each while the size allows -- so that the offsets
and slopes stay identified; then, at those hyperparameters, the posterior is conditioned
exactly on all rows (one Cholesky of the ``n x n`` training covariance, built in blocks of
rows so that only the matrix and its factor are held, about ``16 n^2`` bytes; 0.65 GB of
peak RSS at n = 4000 before the blocking, 0.55 GB after).  Up to ``max_condition`` =
6000 rows (``MAX_CONDITION``); beyond it the posterior is conditioned on a campaign-
stratified random subset of that many rows (subset of data; our choice, keeping the
memory at about 0.6 GB).  ``info_["approximation"]`` says which ran, with ``m`` and
``n_conditioned``.  Unlike the ``gp`` there is no sparse (FITC) predictor: the indicator
kernel and the slopes would need their own inducing variables; the exact posterior on all
rows is cheap enough at these sizes.  Cost at n = 4000, d = 20, quick: fit 18 CPU s (the
subset fit about 13, the build and Cholesky about 5), prediction at 1000 points 1.3 CPU s.
Prediction stays ``O(n^2)`` per point: 1.65 CPU s for 1667 points against 3333 rows, which
the relevance analysis's permutation importance repeats about 300 times (3 folds, 5
repeats, 20 parameters) when this model is the recommended one on a 5,000 x 20 log; a
FITC-style predictor (``O(m^2)`` per point) would remove that cost and is not done yet.
Accuracy against the exact fit (``tests/test_campaign_gp_size.py``, Branin with
campaign offsets and slopes, 10 seeds): held-out NLL 0.008 nats per point worse on average
(largest 0.032) with 200 of 600 rows, 0.005 (largest 0.020) with 300 of 1000; the
predicted means rank the held-out points the same (Spearman >= 0.9999).  The subset can
mislead the optimizer like any small log: on the 20-parameter log above one 600-row
subset (seed 0) ended at a noise sd of 0.0015 in standardized units, the fixed start
stopped by the quick budget of 100 iterations (held-out NLL 0.93); with seed 1 the noise
sd came out 0.17 in y's units (generating 0.1; held-out NLL -0.23); the exact fit on 4000
rows was not affordable to compare.

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

import pandas as pd

from .base import EstimatorMixin, check_fit_inputs
from .gp import (_CHUNK, _LOG_2PI, _SQRT5, MAX_EXACT, SUBSET_SIZE, _cholesky_with_jitter,
                 _sq_dist, length_scale_prior, matern52)

__all__ = ["CampaignGP", "MAX_CONDITION"]

#: Beyond the exact limit (``MAX_EXACT`` of the ``gp``), the posterior is still
#: conditioned exactly on up to this many rows (one ``n x n`` Cholesky at the fitted
#: hyperparameters); beyond it, on a campaign-stratified subset of this many rows.
MAX_CONDITION = 6000
#: The quick budget of L-BFGS-B: at most 100 iterations, and stop once an iteration
#: improves the objective by less than 1e-6 of its size (scipy's ``ftol``, default
#: 2.2e-9): on the 500-trial moulding log (375 training rows, 6 parameters, 4 lots) a
#: quick fit took 2.7 instead of 4.5 CPU s (139 instead of 240 objective evaluations
#: over its two starts), the best objective 0.014 nats higher and the held-out NLL per
#: point -3.0010 against -3.0002 (our measurement, 2026-12-03).  The campaign GP's fits
#: were 39% of that log's quick assessment's CPU.
_QUICK_OPTIONS = {"maxiter": 100, "ftol": 1e-6}
_BLOCK = 1024  # rows of the training covariance built at a time beyond the exact limit


def _same(ga, gb):
    return (np.asarray(ga)[:, None] == np.asarray(gb)[None, :]).astype(float)


def _stratified_subset(groups, m, rng):
    """Sorted indices of ``m`` rows drawn without replacement, every campaign in
    proportion to its rows (largest-remainder rounding) and, while ``m`` allows, at
    least one row each (taken from the largest share)."""
    codes = pd.factorize(pd.Series(np.asarray(groups, dtype=object)), use_na_sentinel=False)[0]
    sizes = np.bincount(codes)
    share = m * sizes / sizes.sum()
    quota = np.floor(share).astype(int)
    rest = m - quota.sum()
    quota[np.argsort(-(share - quota), kind="stable")[:rest]] += 1
    for k in np.flatnonzero(quota == 0):
        big = int(np.argmax(quota))
        if quota[big] <= 1:
            break
        quota[big] -= 1
        quota[k] = 1
    idx = [rng.choice(np.flatnonzero(codes == k), size=q, replace=False)
           for k, q in enumerate(quota) if q > 0]
    return np.sort(np.concatenate(idx))


def _nlml(log_params, X, y, S, jitter, slopes=False, prior=True):
    """Negative log marginal likelihood of the campaign kernel with the constant mean
    integrated out [RW2006, Eqs. 2.30 and 2.45], plus the length-scale log-prior of
    :func:`~advisor.surrogates.gp.length_scale_prior`; value and gradient.

    ``log_params = log(l_1..l_d, sigma_f^2, sigma_n^2, s_c^2[, t_1^2..t_d^2])`` (the
    ``t_k^2`` only with ``slopes``).  With ``K`` the covariance of the training rows,
    ``k1 = K^-1 1``, ``A = 1^T k1`` and ``P = K^-1 - k1 k1^T / A``, the value is
    ``1/2 y^T P y + 1/2 log|K| + 1/2 log A + (n-1)/2 log 2pi`` and its derivative with
    respect to a parameter ``theta`` is ``-1/2 tr((r r^T - P) dK/dtheta)`` with
    ``r = P y`` (differentiating the three terms; the restricted likelihood of Harville
    1974, from memory).  ``tests/test_gp_variants.py`` checks the gradient against finite
    differences.
    """
    n, d = X.shape
    p = np.exp(np.asarray(log_params, dtype=float))
    ls, sf2, sn2, sc2 = p[:d], p[d], p[d + 1], p[d + 2]
    Z = X / ls
    s = _SQRT5 * np.sqrt(_sq_dist(Z, Z))
    e = np.exp(-s)
    Km = sf2 * (1.0 + s + s * s / 3.0) * e
    K = Km + sc2 * S
    if slopes:
        t2 = p[d + 3:]
        K += S * ((X * t2) @ X.T)
    K.flat[:: n + 1] += sn2 + jitter
    L, info = linalg.lapack.dpotrf(K, lower=1, clean=1, overwrite_a=1)
    if info != 0:
        return 1e10, np.zeros(len(p))
    # the inverse from the factor (LAPACK dpotri: about a third of the flops of solving
    # against the identity); it fills the lower triangle, the upper one is zero (clean=1)
    Kinv, info = linalg.lapack.dpotri(L, lower=1)
    if info != 0:
        return 1e10, np.zeros(len(p))
    Kinv += Kinv.T
    Kinv.flat[:: n + 1] *= 0.5
    k1 = Kinv.sum(1)
    A = float(k1.sum())
    if not A > 0:
        return 1e10, np.zeros(len(p))
    r = Kinv @ y - k1 * (float(k1 @ y) / A)          # P y
    value = (0.5 * float(y @ r) + np.log(np.diag(L)).sum() + 0.5 * math.log(A)
             + 0.5 * (n - 1) * _LOG_2PI)
    M = np.outer(r, r)
    M -= Kinv
    M += np.outer(k1, k1) / A                         # r r^T - P
    grad = np.empty(len(p))
    G = M * (sf2 * (5.0 / 3.0) * (1.0 + s) * e)       # dK/dlog l_k = G-weights * D_k
    g = G.sum(1)
    grad[:d] = (Z * Z * g[:, None]).sum(0) - (Z * (G @ Z)).sum(0)
    grad[d] = 0.5 * np.vdot(M, Km)
    grad[d + 1] = 0.5 * sn2 * np.trace(M)
    MS = M * S
    grad[d + 2] = 0.5 * sc2 * MS.sum()
    if slopes:
        grad[d + 3:] = 0.5 * t2 * (X * (MS @ X)).sum(0)
    grad = -grad
    if prior:
        mu, var = length_scale_prior(d)
        z = np.log(ls) - mu
        value += 0.5 * float(z @ z) / var
        grad[:d] += z / var
    return float(value), grad


class CampaignGP(EstimatorMixin):
    """Matérn-5/2 ARD GP plus a campaign random effect (offset and, by default, linear
    slopes); hyperparameters by MAP under the length-scale prior of the ``gp``.

    Parameters
    ----------
    seed : int
        Seeds the restart points.
    quick : bool
        Fewer restarts and the quick exact limit (``MAX_EXACT`` of the ``gp``).
    restarts : int or None
        Number of random restarts besides the default start (None: 1 quick, 3 full).
    jitter : float
        Added to the diagonal.
    random_slopes : bool
        Add a per-campaign linear term ``b_c^T x``, ``b_c ~ N(0, diag(t_1^2..t_d^2))``
        (standardized inputs, centred on the training mean), to the per-campaign
        offset: kernel ``k(x, x') + [c = c'] (s_c^2 + sum_k t_k^2 x_k x'_k)``.
    hyperprior : bool
        ``True``: log-normal length-scale prior (MAP) as in
        :class:`~advisor.surrogates.gp.MaternGP`; ``False`` (default, as there): type-II
        maximum likelihood.
    length_scale, signal_variance, noise_variance, campaign_variance, slope_variance : optional
        Starting values of the optimizer's fixed start, in raw units (encoded inputs,
        ``y``'s units; ``slope_variance`` per input, ``y``'s units squared per input unit
        squared); the first four all or none (default: unit length scales and signal
        variance, 0.1 noise and campaign variance, standardized units).
        :meth:`warm_started` sets them.
    optimize : bool
        ``False``: no optimizer; the hyperparameters are the given starting values
        (all five must be given; :meth:`with_fixed_hyperparameters` sets them).
    max_exact : int, optional
        Largest training set fitted exactly (default ``MAX_EXACT`` of the ``gp``: 1500,
        quick 800).  Beyond it the hyperparameters are fitted on a campaign-stratified
        random subset of ``subset_size`` rows and the posterior is conditioned on all
        rows (module docstring, "Large logs").
    subset_size : int, optional
        Rows of that subset (default ``SUBSET_SIZE`` of the ``gp``: 1000, quick 600;
        at most ``max_exact``).
    max_condition : int, optional
        Beyond the exact limit, the posterior is conditioned on all rows up to this many
        (default ``MAX_CONDITION`` = 6000), beyond it on a campaign-stratified random
        subset of this many.

    Attributes
    ----------
    between_campaign_sd_ : float
        Fitted ``s_c`` in ``y``'s units.
    campaign_slope_sd_ : (d,) array
        Fitted ``t_k`` in ``y``'s units per raw input unit (zeros without slopes).
    noise_std_ : float
        Fitted observation-noise sd in ``y``'s units.
    info_ : dict
        Plain facts for the report, including ``between_campaign_sd`` and
        ``approximation`` ("exact" or the large-log rule's description).
    """

    uses_groups = True

    #: The backtest's scheduled re-optimizations are full fits, not warm starts from
    #: the last fit (``advisor.backtest._pool._warm_in_backtest``: a one-start warm
    #: re-fit stays in the basin of a fit on a handful of trials).
    warm_reoptimize = False

    def __init__(self, seed=0, quick=False, *, restarts=None, jitter=1e-8,
                 random_slopes=True, hyperprior=False, length_scale=None,
                 signal_variance=None, noise_variance=None, campaign_variance=None,
                 slope_variance=None, max_exact=None, subset_size=None,
                 max_condition=None, optimize=True):
        self.optimize = optimize
        self.seed = seed
        self.quick = quick
        self.restarts = restarts
        self.jitter = jitter
        self.random_slopes = random_slopes
        self.hyperprior = hyperprior
        self.length_scale = length_scale
        self.signal_variance = signal_variance
        self.noise_variance = noise_variance
        self.campaign_variance = campaign_variance
        self.slope_variance = slope_variance
        self.max_exact = max_exact
        self.subset_size = subset_size
        self.max_condition = max_condition

    def _limits(self):
        """``(max_exact, subset_size, max_condition)`` with the defaults filled in."""
        q = bool(self.quick)
        max_exact = MAX_EXACT[q] if self.max_exact is None else int(self.max_exact)
        m = SUBSET_SIZE[q] if self.subset_size is None else int(self.subset_size)
        cond = MAX_CONDITION if self.max_condition is None else int(self.max_condition)
        return max_exact, min(m, max_exact), max(cond, max_exact)

    def size_regimes(self):
        """Training-set sizes at which the fitting procedure changes, for the cost
        projection (as :meth:`MaternGP.size_regimes <advisor.surrogates.gp.MaternGP>`)."""
        max_exact, _, cond = self._limits()
        return [("exact", max_exact),
                ("hyperparameters on a subset, exact posterior", cond),
                ("hyperparameters and posterior on subsets", None)]

    def warm_started(self) -> "CampaignGP":
        """An unfitted copy whose optimizer starts from this fit's hyperparameters,
        with no random restarts (optional protocol member).  The relevance intervals
        refit the model on half-samples of the same log (``advisor.planning``); the
        full-data optimum is a good start there, and one start instead of several
        makes each refit a few times cheaper."""
        v = self.y_scale_ ** 2
        return type(self)(**dict(
            self.get_params(), restarts=0, length_scale=self._ls * self.x_scale_,
            signal_variance=self._sf2 * v, noise_variance=self._sn2 * v,
            campaign_variance=self._sc2 * v, slope_variance=self._t2 * v / self.x_scale_ ** 2))

    def with_fixed_hyperparameters(self) -> "CampaignGP":
        """An unfitted copy holding this fit's hyperparameters fixed (raw units;
        optional protocol member, as :meth:`MaternGP.with_fixed_hyperparameters
        <advisor.surrogates.gp.MaternGP.with_fixed_hyperparameters>`): fitting it
        conditions the model on new data with one Cholesky factorization, no optimizer.
        The backtest's cheap updates within a simulated campaign use it; without it the
        campaign GP was kept unchanged between scheduled re-fits (4 of every 5 steps
        on a stale model), and on the moulding sample log's stand-ins its default
        setting did not beat random search after 30 trials (placement test p = 0.12,
        final regret 0.78x random's) where it did once updated every step (p = 0.026,
        0.74x; quick plan, seed 0, 2026-12-03)."""
        return type(self)(**dict(self.warm_started().get_params(), optimize=False))

    def _first_start(self, d, slopes):
        """The optimizer's fixed start in standardized log units."""
        given = [self.length_scale, self.signal_variance, self.noise_variance,
                 self.campaign_variance]
        t0 = np.full(d if slopes else 0, math.log(1e-2))
        if any(v is None for v in given):
            return np.r_[np.zeros(d), 0.0, math.log(0.1), math.log(0.1), t0]
        ls = np.broadcast_to(np.asarray(self.length_scale, dtype=float), (d,))
        v = self.y_scale_ ** 2
        if slopes and self.slope_variance is not None:
            t2 = np.broadcast_to(np.asarray(self.slope_variance, dtype=float), (d,))
            t0 = np.log(np.maximum(t2 * self.x_scale_ ** 2 / v, 1e-300))
        return np.r_[np.log(np.r_[ls / self.x_scale_, self.signal_variance / v,
                                  self.noise_variance / v,
                                  max(self.campaign_variance / v, 1e-300)]), t0]

    def _slope_cov(self, XA, ga, XB, gb):
        """Random-effect covariance ``[c = c'] (s_c^2 + sum_k t_k^2 x_k x'_k)``."""
        C = np.full((len(XA), len(XB)), self._sc2)
        if np.any(self._t2 > 0):
            C = C + (XA * self._t2) @ XB.T
        return C * _same(ga, gb)

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
        max_exact, m, max_cond = self._limits()
        large = n > max_exact
        # With a single campaign the random effect is not identified: its offset adds a
        # constant to K, to which the likelihood with the mean integrated out is
        # invariant (Eq. 2.45 with H = 1^T), and its slopes are a shared linear trend
        # that the Matérn part already models.  s_c^2 is then held at its floor and the
        # slopes dropped: the model is the gp with an integrated constant mean.  (Left
        # free, s_c^2 wandered with the start and entered a new campaign's variance.)
        n_campaigns = len(set(g.tolist()))
        single = n_campaigns < 2
        slopes = bool(self.random_slopes) and not single
        rng = np.random.default_rng(self.seed)
        n_restarts = (1 if self.quick else 3) if self.restarts is None else int(self.restarts)
        bounds = [(math.log(1e-2), math.log(1e2))] * d + [
            (math.log(1e-2), math.log(1e2)), (math.log(1e-6), math.log(2.0)),
            (math.log(1e-6), math.log(2.0))] + [(math.log(1e-6), math.log(2.0))] * (
                d if slopes else 0)
        starts = [self._first_start(d, slopes)]
        for _ in range(n_restarts):
            starts.append(np.array([rng.uniform(lo, hi) for lo, hi in bounds]))
        if self.hyperprior and self.length_scale is None:
            # also from the prior's median length scale (our choice): on 40 rows of pure
            # noise the unit-length-scale start ended in a local optimum (one length
            # scale 1.1, held-out NLL 1.55 against the global optimum's 1.47)
            mid = starts[0].copy()
            mid[:d] = length_scale_prior(d)[0]
            starts.append(mid)
        if single:
            bounds[d + 2] = (math.log(1e-6), math.log(1e-6))
        if large:
            # the hyperparameters on a campaign-stratified random subset (drawn after the
            # starts, so that below the limit the draws are as they were)
            sub = _stratified_subset(g, m, rng)
            Xh, yh, gh = Xs[sub], ys[sub], g[sub]
        else:
            Xh, yh, gh = Xs, ys, g
        S = _same(gh, gh)
        lo, hi = np.array(bounds).T
        best = None
        if not self.optimize:   # hyperparameters held (with_fixed_hyperparameters)
            starts = starts[:1]
        for x0 in (np.clip(x, lo, hi) for x in starts):
            if not self.optimize:
                best = optimize.OptimizeResult(x=x0, fun=np.nan)
                break
            res = optimize.minimize(_nlml, x0, jac=True,
                                    args=(Xh, yh, S, self.jitter, slopes, self.hyperprior),
                                    method="L-BFGS-B", bounds=bounds,
                                    options=_QUICK_OPTIONS if self.quick
                                    else {"maxiter": 200})
            if best is None or res.fun < best.fun:
                best = res
        p = np.exp(best.x)
        self._ls, self._sf2, self._sn2, self._sc2 = p[:d], p[d], p[d + 1], p[d + 2]
        self._t2 = p[d + 3:] if slopes else np.zeros(d)
        del S
        if large:
            if n > max_cond:
                keep = _stratified_subset(g, max_cond, rng)
                Xs, ys, g = Xs[keep], ys[keep], g[keep]
            K = self._train_cov_blocked(Xs, g)
        else:
            K = matern52(Xs, Xs, self._ls, self._sf2) + self._slope_cov(Xs, g, Xs, g)
        n_cond = len(ys)
        K.flat[:: n_cond + 1] += self._sn2
        self.L_, self.jitter_ = _cholesky_with_jitter(K, self.jitter, self._sf2 + self._sn2,
                                                      "the campaign-GP training covariance")
        # generalized least squares intercept [RW2006, Sec. 2.7, Eq. 2.42, H = 1^T]
        del K
        k1 = linalg.cho_solve((self.L_, True), np.ones(n_cond), check_finite=False)
        self._A = float(k1.sum())
        self.intercept_s_ = float(k1 @ ys) / self._A
        self.alpha_ = linalg.cho_solve((self.L_, True), ys - self.intercept_s_,
                                       check_finite=False)
        self.X_train_, self.groups_ = Xs, g
        self.noise_std_ = float(math.sqrt(self._sn2) * self.y_scale_)
        self.between_campaign_sd_ = float(math.sqrt(self._sc2) * self.y_scale_)
        self.campaign_slope_sd_ = np.sqrt(self._t2) * self.y_scale_ / self.x_scale_
        if not large:
            approx = "exact"
        elif n_cond == n:
            # no n in the text: the report lists the distinct texts over the folds
            approx = (f"hyperparameters on a campaign-stratified random subset of {m} "
                      "rows; exact posterior on all rows")
        else:
            approx = (f"hyperparameters on a campaign-stratified random subset of {m} "
                      f"rows; posterior on a campaign-stratified random subset of "
                      f"{n_cond} rows")
        self.info_ = {"approximation": approx, "n_train": n, "max_exact": max_exact,
                      "n_campaigns": int(n_campaigns),
                      "between_campaign_sd": self.between_campaign_sd_,
                      "noise_sd": self.noise_std_}
        if large:
            self.info_.update(m=int(m), n_conditioned=int(n_cond))
        if slopes:
            self.info_["campaign_slope_sd"] = [float(v) for v in self.campaign_slope_sd_]
        return self

    def _train_cov(self, XA, ga, XB, gb):
        return matern52(XA, XB, self._ls, self._sf2) + self._slope_cov(XA, ga, XB, gb)

    def _train_cov_blocked(self, Xs, g):
        """The training covariance (without noise) built ``_BLOCK`` rows at a time, so
        that the temporaries stay small beside the ``n x n`` result."""
        n = len(Xs)
        K = np.empty((n, n))
        for i in range(0, n, _BLOCK):
            K[i:i + _BLOCK] = self._train_cov(Xs[i:i + _BLOCK], g[i:i + _BLOCK], Xs, g)
        return K

    @property
    def length_scales_(self):
        """Fitted ARD length scales of the Matérn part in raw encoded input units (as
        :attr:`MaternGP.length_scales_ <advisor.surrogates.gp.MaternGP>`); the first
        batch's separation guard and the relevance table read them."""
        return self._ls * self.x_scale_

    def predict(self, X, groups=None):
        """Predictive mean and sd of a new observation; a campaign not seen in training
        (or ``groups=None``) gets an unknown offset (and slopes) whose variance
        ``s_c^2 (+ sum_k t_k^2 x_k^2)`` is added."""
        X = np.asarray(X, dtype=float)
        Xs = (X - self.x_mean_) / self.x_scale_
        g = (np.full(len(X), object(), dtype=object) if groups is None
             else np.asarray(groups, dtype=object))
        if len(Xs) <= _CHUNK:
            mean, sd = self._predict_s(Xs, g)
        else:  # bounds the n_train x n_test temporaries
            parts = [self._predict_s(Xs[i:i + _CHUNK], g[i:i + _CHUNK])
                     for i in range(0, len(Xs), _CHUNK)]
            mean, sd = (np.concatenate(v) for v in zip(*parts))
        return self.y_mean_ + self.y_scale_ * mean, self.y_scale_ * sd

    def difference_std(self, X, x_ref):
        """Posterior sd of the latent difference ``f(x) - f(x_ref)`` between settings of
        one *new* campaign (observation noise excluded), ``y``'s units, shape (n,).

        Optional protocol member.  Everything a new campaign's settings share cancels
        from the difference: its unknown offset exactly, and most of the level that the
        logged campaigns leave uncertain (the intercept's error, ``r^2 / A``
        [RW2006, Eq. 2.42], and the part of the Matérn function's level that the data
        cannot tell from the offsets).  With ``v = L^-1 k(X_train, x)``, ``r = 1 -
        1^T K^-1 k(X_train, x)`` and ``d = x - x_ref`` (standardized), from the
        posterior covariance of a new campaign's latent values::

            var = 2 s_f^2 - 2 k(x, x_ref) + d^T diag(t^2) d - |v - v_ref|^2
                  + (r - r_ref)^2 / A

        (``s_c^2`` cancels; ``tests/test_planning_groups.py`` checks it against plain
        Gaussian conditioning with a wide intercept prior).  The first batch of the
        next campaign uses it, with ``x_ref`` the incumbent's setting, as the sd of the
        acquisition (``advisor.planning._proposals``)."""
        X = np.asarray(X, dtype=float)
        Xs = (X - self.x_mean_) / self.x_scale_
        xr = (np.asarray(x_ref, dtype=float).reshape(1, -1) - self.x_mean_) / self.x_scale_
        ones = linalg.solve_triangular(self.L_, np.ones(len(self.alpha_)), lower=True,
                                       check_finite=False)
        v_ref = linalg.solve_triangular(
            self.L_, matern52(self.X_train_, xr, self._ls, self._sf2), lower=True,
            check_finite=False)
        r_ref = 1.0 - float(ones @ v_ref[:, 0])
        out = []
        for i in range(0, len(Xs), _CHUNK):
            Xc = Xs[i:i + _CHUNK]
            # a new campaign shares no offset or slopes with the training rows: only
            # the Matern part of the cross-covariance (as in _predict_s)
            v = linalg.solve_triangular(
                self.L_, matern52(self.X_train_, Xc, self._ls, self._sf2), lower=True,
                check_finite=False)
            r = 1.0 - ones @ v
            d = Xc - xr
            var = (2.0 * self._sf2 - 2.0 * matern52(Xc, xr, self._ls, self._sf2)[:, 0]
                   + (d * d) @ self._t2 - ((v - v_ref) ** 2).sum(0)
                   + (r - r_ref) ** 2 / self._A)
            out.append(np.sqrt(np.maximum(var, 0.0)))
        return (np.concatenate(out) if out else np.zeros(0)) * self.y_scale_

    def _predict_s(self, Xs, g):
        """Predictive mean and sd in standardized units."""
        Ks = (matern52(self.X_train_, Xs, self._ls, self._sf2)
              + self._slope_cov(self.X_train_, self.groups_, Xs, g))
        mean = self.intercept_s_ + Ks.T @ self.alpha_
        v = linalg.solve_triangular(self.L_, Ks, lower=True, check_finite=False)
        # R = h* - H K^-1 K*: the intercept's uncertainty [RW2006, Eq. 2.42]
        r = 1.0 - linalg.solve_triangular(self.L_, np.ones(len(self.alpha_)), lower=True,
                                          check_finite=False) @ v
        prior_var = self._sf2 + self._sc2 + (Xs * Xs) @ self._t2
        var = np.maximum(prior_var - (v * v).sum(0), 1e-12) + r * r / self._A + self._sn2
        return mean, np.sqrt(var)
