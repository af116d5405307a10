"""DNGO: a neural network's last hidden layer as basis functions for Bayesian linear
regression (Snoek et al. 2015).

The network is trained as a point estimate; its last hidden layer (plus a constant)
gives features ``phi(x)``; a Bayesian linear regression on those features, with prior
precision ``alpha`` and noise precision ``beta`` chosen by maximizing the evidence,
gives the predictive distribution.
"""

from __future__ import annotations

import math

import numpy as np
import torch

from .base import ScaledSurrogate
from .nets import (LatentSamplerMixin, NewCampaignMixin, StackedMLP, WarmStartMixin,
                   as_tensor, campaign_offset_variance, epochs_for, holdout_split,
                   inner_variance_scale, torch_generator, torch_threads,
                   train_with_early_stopping)

__all__ = ["DNGO", "blr_log_evidence", "blr_posterior"]


# -- Bayesian linear regression ---------------------------------------------------------
def _spectrum(Phi, y):
    """Eigen-decomposition of Phi^T Phi and the projected targets, reused per (alpha, beta)."""
    Phi = np.asarray(Phi, dtype=float)
    y = np.asarray(y, dtype=float).ravel()
    # torch's LAPACK obeys torch_threads(); numpy's multithreaded BLAS can spin for
    # 100 ms on a loaded machine for this 51 x 51 problem.
    torch_threads()
    lam, U = (t.numpy() for t in torch.linalg.eigh(torch.from_numpy(Phi.T @ Phi)))
    lam = np.clip(lam, 0.0, None)  # round-off can make tiny eigenvalues negative
    return {"lam": lam, "U": U, "z": U.T @ (Phi.T @ y), "yy": float(y @ y),
            "n": Phi.shape[0], "m": Phi.shape[1]}


def _log_evidence_spectral(sp, alpha, beta):
    # Bishop (2006) Eq. 3.86 written in the eigenbasis of Phi^T Phi:
    # A = alpha I + beta Phi^T Phi has eigenvalues d = alpha + beta lam, and
    # m_N = beta A^-1 Phi^T y has coordinates beta z / d.
    lam, z = sp["lam"], sp["z"]
    d = alpha + beta * lam
    mt = beta * z / d
    resid2 = max(sp["yy"] - 2.0 * mt @ z + (lam * mt) @ mt, 0.0)
    e_mn = 0.5 * beta * resid2 + 0.5 * alpha * (mt @ mt)  # Eq. 3.82
    return (0.5 * sp["m"] * math.log(alpha) + 0.5 * sp["n"] * math.log(beta) - e_mn
            - 0.5 * np.sum(np.log(d)) - 0.5 * sp["n"] * math.log(2.0 * math.pi))


def blr_log_evidence(Phi, y, alpha: float, beta: float) -> float:
    """Log marginal likelihood of Bayesian linear regression.

    For ``y = Phi w + e`` with ``w ~ N(0, I/alpha)`` and ``e ~ N(0, I/beta)``
    (Bishop 2006, Eq. 3.86):

    .. math::

        \\ln p(y\\mid\\alpha,\\beta) = \\tfrac{M}{2}\\ln\\alpha + \\tfrac{N}{2}\\ln\\beta
        - E(m_N) - \\tfrac12\\ln|A| - \\tfrac{N}{2}\\ln 2\\pi,

    with ``A = alpha I + beta Phi^T Phi``, ``m_N = beta A^{-1} Phi^T y`` and
    ``E(m_N) = beta/2 ||y - Phi m_N||^2 + alpha/2 m_N^T m_N``.  It equals the log
    density of ``N(y | 0, Phi Phi^T/alpha + I/beta)``.

    Parameters
    ----------
    Phi : array_like, shape (N, M)
        Design matrix (basis functions at the training inputs).
    y : array_like, shape (N,)
    alpha, beta : float
        Prior precision of the weights and noise precision, both > 0.

    References
    ----------
    Bishop, C. M. (2006). Pattern Recognition and Machine Learning, Sec. 3.5.1.
    """
    if alpha <= 0 or beta <= 0:
        raise ValueError(f"alpha={alpha} and beta={beta} must both be positive")
    return float(_log_evidence_spectral(_spectrum(Phi, y), float(alpha), float(beta)))


def _maximize_evidence(sp, max_iter: int = 500, tol: float = 1e-8):
    """(alpha, beta, log evidence) at a stationary point of the evidence.

    Fixed-point iteration of Bishop (2006) Eqs. 3.91-3.92 and 3.95:
    ``gamma = sum_i beta lam_i / (alpha + beta lam_i)``, ``alpha = gamma / m_N^T m_N``,
    ``1/beta = ||y - Phi m_N||^2 / (N - gamma)``.  Each step costs O(M) in the
    eigenbasis, far less than a general-purpose optimizer's overhead.  Both precisions
    are clipped to [1e-6, 1e8] (our choice) so a degenerate basis cannot send them to
    zero or infinity.
    """
    lam, z, n = sp["lam"], sp["z"], sp["n"]
    alpha, beta = 1.0, 10.0
    for _ in range(max_iter):
        d = alpha + beta * lam
        mt = beta * z / d
        gamma = float(np.sum(beta * lam / d))
        resid2 = max(sp["yy"] - 2.0 * mt @ z + (lam * mt) @ mt, 1e-12)
        new_alpha = float(np.clip(gamma / max(mt @ mt, 1e-300), 1e-6, 1e8))
        new_beta = float(np.clip(max(n - gamma, 1e-6) / resid2, 1e-6, 1e8))
        done = (abs(math.log(new_alpha / alpha)) < tol and abs(math.log(new_beta / beta)) < tol)
        alpha, beta = new_alpha, new_beta
        if done:
            break
    return alpha, beta, float(_log_evidence_spectral(sp, alpha, beta))


def blr_posterior(Phi, y, alpha: float, beta: float):
    """Posterior mean ``m_N`` and covariance ``S_N`` of the weights (Bishop Eq. 3.53-3.54)."""
    sp = _spectrum(Phi, y)
    d = alpha + beta * sp["lam"]
    m_n = sp["U"] @ (beta * sp["z"] / d)
    s_n = (sp["U"] / d) @ sp["U"].T
    return m_n, s_n


# -- the surrogate ---------------------------------------------------------------------
#: A warm-started fit's Adam steps, a fraction of the preset's (our choice; as the deep
#: ensemble's).
_WARM_FRACTION = 0.1

_PRESETS = {
    # target_steps: optimizer steps aimed for; epochs are derived from it (nets.epochs_for)
    True: dict(target_steps=400, min_epochs=20, max_epochs=300, patience=12, batch_size=128),
    False: dict(target_steps=3000, min_epochs=50, max_epochs=2000, patience=50, batch_size=64),
}


class DNGO(WarmStartMixin, NewCampaignMixin, LatentSamplerMixin, ScaledSurrogate):
    """Deep networks for global optimization (adaptive basis regression).

    A tanh network ``d -> 50 -> 50 -> 50 -> 1`` is fitted by mean squared error with
    Adam; the last hidden layer plus a constant, ``phi(x)`` (51 features), feeds a
    Bayesian linear regression ``y = w^T phi(x) + e``, ``w ~ N(0, I/alpha)``,
    ``e ~ N(0, 1/beta)``.  The predictive distribution of a new observation is

    .. math::

        \\mu(x) = m_N^T\\phi(x), \\qquad
        \\sigma^2(x) = \\phi(x)^T S_N \\phi(x) + 1/\\beta,

    with ``S_N = (alpha I + beta Phi^T Phi)^{-1}`` and ``m_N = beta S_N Phi^T y``
    (Bishop 2006, Eqs. 3.53-3.54, 3.58-3.59).

    Parameters
    ----------
    seed : int
    quick : bool
        Quick budget: about 400 Adam steps in batches of 128, patience 12 epochs;
        otherwise about 3000 steps in batches of 64, patience 50.
    hidden : tuple of int, default (50, 50, 50)
    activation : {"tanh", "relu"}, default "tanh"
    batch_size : int, optional
        Mini-batch size; default 128 (quick) or 64.
    lr : float, default 3e-3
    holdout : float, default 0.15
        Fraction of rows held out for early stopping of the network.

    Notes
    -----
    Follows Snoek et al. (2015): three hidden layers of 50 units, tanh units feeding
    the basis (their Sec. 3: from memory, they found tanh on the last layer works
    well), a network trained as a point estimate, then Bayesian linear regression on
    the last hidden layer with a constant basis function.

    Our choices: the paper integrates out ``alpha, beta`` by slice sampling under a
    prior; we set them to the evidence maximum (type-II maximum likelihood, Bishop
    2006 Sec. 3.5), found by the fixed-point iteration of Bishop's Eqs. 3.92/3.95.  The network is early-stopped on
    a held-out slice and the regression then uses *all* rows.  Weight decay 1e-4 in
    Adam, a step budget instead of a fixed epoch count.  ``sample_y`` draws ``w`` from
    its Gaussian posterior, giving joint draws of ``w^T phi(x)``.

    **Graceful degradation.**  With uninformative features the evidence drives
    ``alpha`` up and the prediction to the training mean and spread (the BLR's own
    prior fallback).  Where the network's features are overfitted the evidence cannot
    see it (they were fitted to the same rows), so the regression is refitted on the
    training slice alone, its predictions on the held-out slice give a variance scale
    ``s^2 >= 1`` (:func:`advisor.surrogates.nets.inner_variance_scale`: sigma scaling,
    Laves et al. 2020, with a conjugate prior), and the final predictive variance (and
    the posterior of ``w``, so ``sample_y`` agrees) is multiplied by it;
    ``info_["variance_scale"]``.  The held-out slice also chose the early-stopping
    epoch, so the scale is slightly optimistic (our choice, to keep one split).
    With campaign labels (``fit(X, y, groups)``, two or more campaigns) rows of a
    campaign absent from training get a between-campaign offset variance added
    (:func:`advisor.surrogates.nets.campaign_offset_variance`, a random campaign
    effect with a weak prior, wide when there are few campaigns), estimated from the
    held-out rows of each campaign predicted by the regression on the *other*
    campaigns' training rows; ``predict(X, groups)`` applies it and
    ``info_["between_campaign_sd"]`` reports it in the objective's units — a
    lot-to-lot shift the network cannot see is then in the variance.  Without labels
    (or with one campaign) nothing is added.

    References
    ----------
    Snoek, J., Rippel, O., Swersky, K., Kiros, R., Satish, N., Sundaram, N., Patwary,
    M., Prabhat, M. & Adams, R. P. (2015). Scalable Bayesian optimization using deep
    neural networks. ICML.
    Bishop, C. M. (2006). Pattern Recognition and Machine Learning, Secs. 3.3, 3.5.
    """

    input_encoding = "onehot"

    def __init__(self, seed: int = 0, quick: bool = False, hidden=(50, 50, 50),
                 activation: str = "tanh", batch_size: int | None = None, lr: float = 3e-3,
                 holdout: float = 0.15):
        super().__init__(seed=seed, quick=quick)
        self.hidden = hidden
        self.activation = activation
        self.batch_size = batch_size
        self.lr = lr
        self.holdout = holdout

    def warm_started(self) -> "DNGO":
        """An unfitted copy whose network continues training from this fit's weights
        for a tenth of the preset's Adam steps (at least 5 epochs), then takes the
        Bayesian linear regression afresh (optional protocol member; the backtest's
        scheduled re-fits within a run use it).  As the deep ensemble's
        (:meth:`advisor.surrogates.ensemble.DeepEnsemble.warm_started`): only a training
        set that extends this fit's is warm-started, with this fit's standardization
        and held-out rows; any other gets a full fit; ``info_["warm_start"]``."""
        return WarmStartMixin.warm_started(self)

    def _warm_state(self) -> dict:
        return {"state": self.net_.state_copy(), "val": self._val_idx.copy()}

    def _fit(self, Xs, ys):
        torch_threads()
        preset = _PRESETS[bool(self.quick)]
        rng = np.random.default_rng(self.seed)
        gen = torch_generator(rng)
        X, y = as_tensor(Xs), as_tensor(ys)
        warm = getattr(self, "_warm_now", None)
        if warm is None:
            train, val = holdout_split(len(ys), self.holdout, rng)
            steps, min_epochs = preset["target_steps"], preset["min_epochs"]
        else:
            train, val = self._warm_split(len(ys), self.holdout, rng)
            steps, min_epochs = int(math.ceil(_WARM_FRACTION * preset["target_steps"])), 5
        bs = min(self.batch_size or preset["batch_size"], len(train))
        epochs = epochs_for(len(train), bs, steps, min_epochs, preset["max_epochs"])
        self.net_ = StackedMLP(Xs.shape[1], 1, self.hidden, 1, self.activation, gen)
        if warm is not None:
            self.net_.load_members(warm["state"], torch.ones(1, dtype=torch.bool))
        self._val_idx = np.asarray(val, dtype=int)

        def mse(out, target):
            return ((out[..., 0] - target) ** 2).mean(dim=-1)

        train_info = train_with_early_stopping(
            self.net_, mse, X, y, train, val, batch_size=bs, epochs=epochs,
            patience=preset["patience"], lr=self.lr, generator=gen, weight_decay=1e-4)
        Phi = self._features(Xs)
        self.variance_scale_ = 1.0
        if len(val):
            # the regression on the training rows only, checked on the held-out rows
            self._blr(Phi[train], ys[train])
            mv, sv = self._predict(Xs[val])
            self.variance_scale_ = inner_variance_scale(ys[val], mv, sv)
        self.campaign_offset_var_ = self._campaign_offset_var(Phi, ys, train, val)
        alpha, beta, evidence = self._blr(Phi, ys)
        self._noise_std_s = math.sqrt(self.variance_scale_ / beta)
        self.info_ = {"epochs_run": train_info["epochs_run"],
                      "early_stopping_epoch": train_info["best_epoch"][0],
                      "held_out_rows": int(len(val)),
                      "alpha": alpha, "beta": beta, "log_evidence": evidence,
                      "n_basis": int(Phi.shape[1]),
                      "variance_scale": float(self.variance_scale_),
                      "warm_start": warm is not None, **self._campaign_info()}

    def _campaign_offset_var(self, Phi, ys, train, val):
        """Between-campaign offset variance (nets.campaign_offset_variance) from the
        held-out rows of each campaign, predicted by the regression on the training rows
        of the *other* campaigns with the row scale applied; 0 with fewer than two."""
        g = getattr(self, "_train_groups", None)
        if g is None or len(self.groups_seen_) < 2 or not len(val):
            return 0.0
        yv, mv, sv, gv = [], [], [], []
        for c in dict.fromkeys(g[val].tolist()):
            others = train[g[train] != c]
            rows = val[g[val] == c]
            if len(others) < 2:
                continue
            self._blr(Phi[others], ys[others])
            proj = Phi[rows] @ self._U
            yv.append(ys[rows])
            mv.append(Phi[rows] @ self.w_mean_)
            sv.append(np.sqrt(((proj ** 2) @ (1.0 / self._d) + 1.0 / self.beta_)
                              * self.variance_scale_))
            gv.append(g[rows])
        if not yv:
            return 0.0
        return campaign_offset_variance(*(np.concatenate(a) for a in (yv, mv, sv, gv)))

    def _blr(self, Phi, ys):
        """Evidence-maximizing Bayesian linear regression on ``Phi``; sets the posterior."""
        sp = _spectrum(Phi, ys)
        alpha, beta, evidence = _maximize_evidence(sp)
        d = alpha + beta * sp["lam"]
        self.alpha_, self.beta_ = alpha, beta
        self._U, self._d = sp["U"], d
        self.w_mean_ = sp["U"] @ (beta * sp["z"] / d)
        return alpha, beta, evidence

    def _features(self, Xs):
        torch_threads()
        with torch.no_grad():
            h = self.net_.features(as_tensor(Xs))[0].double().numpy()
        return np.hstack([h, np.ones((h.shape[0], 1))])

    def _predict(self, Xs):
        Phi = self._features(Xs)
        mean = Phi @ self.w_mean_
        proj = Phi @ self._U
        var = (proj ** 2) @ (1.0 / self._d) + 1.0 / self.beta_
        return mean, np.sqrt(var * getattr(self, "variance_scale_", 1.0))

    def _sample_latent(self, Xs, n_samples, rng):
        Phi = self._features(Xs)
        # w = m_N + U diag(d^-1/2) eps has covariance U diag(1/d) U^T = S_N.
        eps = rng.standard_normal((n_samples, len(self._d)))
        w = self.w_mean_ + (eps / np.sqrt(self._d / self.variance_scale_)) @ self._U.T
        return w @ Phi.T
