"""Random-forest surrogate whose predictive variance follows the law of total variance.

Each tree ``t`` puts a test point ``x`` in one leaf, whose training targets have mean
``mu_t(x)`` and variance ``s2_t(x)``.  Treating the forest as an equal-weight mixture of
the trees' leaf distributions (Hutter, Xu, Hoos & Leyton-Brown 2014, §4.3.2)::

    mean(x) = 1/T sum_t mu_t(x)
    var(x)  = 1/T sum_t (s2_t(x) + mu_t(x)^2) - mean(x)^2

i.e. the mean of the within-leaf variances plus the variance of the leaf means (as in
[HXHL2014, §4.3.2], where each leaf stores the empirical mean and variance of its
training targets and the forest's prediction is read as a mixture).  The within-leaf
variance is ``tree_.impurity`` of the leaf, which for
``criterion="squared_error"`` is the (bootstrap-weighted) mean squared deviation of the
leaf's training targets from the leaf mean (ddof = 0); ``tests/test_forest_baseline.py``
recomputes it from the training data via ``apply``.  ``min_samples_leaf=3`` (our
choice) keeps every leaf with a spread; a floor of ``(1e-3 * std(y))^2`` (our choice)
keeps the variance positive where every tree's leaf is pure.

Out-of-bag calibration (``oob_calibration=True``, the default).  On 40 rows of pure
noise the mixture above was confidently wrong (held-out NLL 1.551 against the training
mean-and-sd baseline's 1.471): the forest's mean follows the noise.  Each training row
has out-of-bag predictions from the trees whose bootstrap sample left it out (Breiman
2001, §3.1, from memory), the same mixture over those trees.  On them two numbers are
fitted: the weighted least-squares slope ``c`` of ``y - mean(y)`` on the out-of-bag
mean minus ``mean(y)`` (weights 1/variance), kept in [0, 1], and the variance scale
``s^2 = (nu_0 + sum z^2) / (nu_0 + m)``, ``z`` the standardized out-of-bag residuals
after shrinking, ``nu_0 = 10``, kept only when above 1 — the conjugate estimate the
network surrogates use (``nets.inner_variance_scale``; Laves et al. 2020, Gelman et al.
2013 §2.6).  Predictions are ``mean(y) + c (forest mean - mean(y))`` with sd ``s`` times
the mixture's.  Shrinking toward the training mean by a slope fitted on held-out
predictions is a linear recalibration (stacking the forest with the constant
predictor; our choice of form).  On pure noise ``c = 0`` (NLL 1.465); on the sample logs
``c`` is near 1 and the held-out NLL moved by at most 0.005.  Out-of-bag predictions
average about a third of the trees, so they are a little noisier than the forest's:
``c`` errs toward shrinking and ``s`` toward widening.  Rows with fewer than 5
out-of-bag trees are skipped; with fewer than 10 such rows nothing is fitted.

Trees are invariant to affine rescaling of inputs and outputs, so the data are not
standardized.  Categorical settings come as ordinal codes (``input_encoding =
"ordinal"``), which axis-aligned splits separate natively.

Our choices, not from the paper: scikit-learn's ``RandomForestRegressor`` with bootstrap
samples, 300 trees (100 quick), ``max_features=1.0``.

References
----------
.. [HXHL2014] F. Hutter, L. Xu, H. H. Hoos and K. Leyton-Brown, "Algorithm runtime
   prediction: Methods & evaluation", Artificial Intelligence 206, 79-111, 2014, §4.3.2.
.. [B2001] L. Breiman, "Random forests", Machine Learning 45, 5-32, 2001 (out-of-bag
   estimates, §3.1 from memory).
"""

from __future__ import annotations

import numpy as np
from sklearn.ensemble import RandomForestRegressor

from .base import EstimatorMixin, check_fit_inputs

__all__ = ["RandomForestSurrogate", "total_variance_moments"]

#: Trees per forest (thorough, quick).
N_TREES = {False: 300, True: 100}
#: Out-of-bag calibration: prior degrees of freedom of the variance scale (as for the
#: network surrogates), fewest out-of-bag trees for a row to count, fewest such rows.
NU0, OOB_MIN_TREES, OOB_MIN_ROWS = 10.0, 5, 10


def total_variance_moments(leaf_means, leaf_vars):
    """Mean and variance of an equal-weight mixture of per-tree leaf distributions.

    Parameters
    ----------
    leaf_means, leaf_vars : (T, k) arrays
        Leaf mean and within-leaf variance of each of ``T`` trees at ``k`` points.

    Returns
    -------
    mean, var : (k,) arrays
        ``mean = 1/T sum_t mu_t`` and ``var = 1/T sum_t (s2_t + mu_t^2) - mean^2``
        (law of total variance), clipped at 0 against rounding.
    """
    leaf_means = np.asarray(leaf_means, dtype=float)
    leaf_vars = np.asarray(leaf_vars, dtype=float)
    if leaf_means.shape != leaf_vars.shape or leaf_means.ndim != 2:
        raise ValueError(f"leaf_means and leaf_vars must be equal (T, k) arrays, got "
                         f"{leaf_means.shape} and {leaf_vars.shape}")
    mean = leaf_means.mean(0)
    # written as within + between, which loses less to cancellation than E[m^2] - E[m]^2
    var = leaf_vars.mean(0) + ((leaf_means - mean) ** 2).mean(0)
    return mean, np.maximum(var, 0.0)


class RandomForestSurrogate(EstimatorMixin):
    """Random forest with mixture (law of total variance) predictive uncertainty.

    Parameters
    ----------
    seed : int
        Seeds the bootstrap samples and feature draws.
    quick : bool
        Fewer trees (``N_TREES``).
    n_estimators : int, optional
        Overrides the budget's tree count.
    min_samples_leaf : int
        Smallest leaf (default 3, so leaves have a spread).
    max_features : float, int or str
        Passed to scikit-learn.
    var_floor : float
        Variance floor as a fraction of the training variance.

    Attributes
    ----------
    forest_ : RandomForestRegressor
    leaf_mean_, leaf_var_ : list of (n_nodes,) arrays
        Per tree, the training-target mean and variance at each node (used at leaves).
    feature_importances_ : (d,) array
        Impurity-based importances from scikit-learn.
    info_ : dict
    """

    input_encoding = "ordinal"
    #: How ``sample_y`` draws a function (reported with Thompson results).
    thompson_draws = "joint: one tree (a bootstrap refit) per draw"

    def __init__(self, seed=0, quick=False, *, n_estimators=None, min_samples_leaf=3,
                 max_features=1.0, var_floor=1e-6, oob_calibration=True):
        self.seed = seed
        self.quick = quick
        self.n_estimators = n_estimators
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.var_floor = var_floor
        self.oob_calibration = oob_calibration

    def fit(self, X, y):
        X, y = check_fit_inputs(X, y)
        n_trees = (N_TREES[bool(self.quick)] if self.n_estimators is None
                   else int(self.n_estimators))
        self.forest_ = RandomForestRegressor(
            n_estimators=n_trees, criterion="squared_error",
            min_samples_leaf=self.min_samples_leaf, max_features=self.max_features,
            bootstrap=True, random_state=self.seed, n_jobs=1).fit(X, y)
        # node value = weighted mean of the node's bootstrap targets; impurity = their
        # weighted mean squared deviation (squared_error criterion)
        self.leaf_mean_ = [t.tree_.value[:, 0, 0].copy() for t in self.forest_.estimators_]
        self.leaf_var_ = [t.tree_.impurity.copy() for t in self.forest_.estimators_]
        self._floor = self.var_floor * max(float(y.var()), 1e-300)
        self.y_mean_ = float(y.mean())
        self.shrink_, self.variance_scale_ = 1.0, 1.0
        if self.oob_calibration:
            self._calibrate_oob(X, y)
        self.info_ = {"n_trees": n_trees, "min_samples_leaf": self.min_samples_leaf,
                      "variance": "law of total variance over trees",
                      "thompson_draws": self.thompson_draws}
        if self.oob_calibration:
            self.info_.update(shrink=self.shrink_, variance_scale=self.variance_scale_)
        return self

    def oob_moments(self, X):
        """Out-of-bag mixture moments at the training rows ``X`` (the rows the forest was
        fitted on, in the same order): for each row the law-of-total-variance mean and
        variance over the trees whose bootstrap sample left it out, and their count.
        Three (n,) arrays; mean and variance are 0 where the count is 0."""
        X32 = np.ascontiguousarray(X, dtype=np.float32)
        n = len(X32)
        m1, m2, w = np.zeros(n), np.zeros(n), np.zeros(n)
        for t, sample, mu, s2 in zip(self.forest_.estimators_, self.forest_.estimators_samples_,
                                     self.leaf_mean_, self.leaf_var_):
            oob = np.ones(n, dtype=bool)
            oob[sample] = False
            leaf = t.tree_.apply(X32[oob])
            m1[oob] += mu[leaf]
            m2[oob] += s2[leaf] + mu[leaf] ** 2
            w[oob] += 1
        c = np.maximum(w, 1)
        mean = m1 / c
        return mean, np.maximum(m2 / c - mean ** 2, 0.0), w

    def _calibrate_oob(self, X, y):
        """Shrinkage of the mean toward the training mean and a variance scale, both
        fitted on the out-of-bag predictions (see the module docstring)."""
        mean, var, w = self.oob_moments(X)
        ok = w >= OOB_MIN_TREES
        if ok.sum() < OOB_MIN_ROWS:
            return
        var = var[ok] + self._floor
        dm, dy = mean[ok] - self.y_mean_, y[ok] - self.y_mean_
        # weighted least squares slope of y on the OOB prediction through the training
        # mean, kept in [0, 1]: 1 keeps the forest's mean, 0 falls back to the training mean
        den = float(np.sum(dm * dm / var))
        c = float(np.clip(np.sum(dm * dy / var) / den, 0.0, 1.0)) if den > 0 else 0.0
        z2 = (dy - c * dm) ** 2 / var
        s2 = (NU0 + float(z2.sum())) / (NU0 + len(z2))
        self.shrink_ = c
        self.variance_scale_ = float(np.sqrt(max(s2, 1.0)))

    def leaf_moments(self, X):
        """Per-tree leaf means and variances at ``X``: two (T, k) arrays."""
        X = np.asarray(X, dtype=float)
        if X.ndim != 2:
            raise ValueError(f"X must be 2-D, got shape {X.shape}")
        # each tree's leaf ids directly: RandomForestRegressor.apply dispatches one joblib
        # call per tree, whose overhead was 43% of a backtest that refits and predicts
        # a forest at every step (cProfile); same float32 input, same leaves
        X32 = np.ascontiguousarray(X, dtype=np.float32)
        trees = self.forest_.estimators_
        means = np.array([m[t.tree_.apply(X32)] for t, m in zip(trees, self.leaf_mean_)])
        vars_ = np.array([v[t.tree_.apply(X32)] for t, v in zip(trees, self.leaf_var_)])
        return means, vars_

    def sample_y(self, X, n_samples: int, rng=None):
        """Joint draws of the latent function at ``X``: one tree per draw.

        Each draw is the leaf-mean function of one tree of the forest, picked uniformly
        at random (cycling through a random permutation of the trees when more draws
        than trees are asked).  A tree is a fit to a bootstrap resample of the data, so
        a draw is a whole function, evaluated jointly at every point of ``X`` — the
        bootstrap reading of Thompson sampling ("bootstrap Thompson", a refit on a
        resample; Eckles & Kaptein 2014, from memory) — not independent noise per
        point.  With the out-of-bag shrinkage ``c`` (see ``fit``) a draw is
        ``mean(y) + c (tree - mean(y))``, so the draws average to ``predict``'s mean.
        Shape ``(n_samples, len(X))``.
        """
        rng = np.random.default_rng(rng)
        means, _ = self.leaf_moments(X)
        t = means.shape[0]
        order = np.concatenate([rng.permutation(t) for _ in range(-(-int(n_samples) // t))])
        return self.y_mean_ + self.shrink_ * (means[order[:int(n_samples)]] - self.y_mean_)

    def predict(self, X):
        mean, var = total_variance_moments(*self.leaf_moments(X))
        mean = self.y_mean_ + self.shrink_ * (mean - self.y_mean_)
        return mean, self.variance_scale_ * np.sqrt(var + self._floor)

    @property
    def feature_importances_(self):
        return self.forest_.feature_importances_
