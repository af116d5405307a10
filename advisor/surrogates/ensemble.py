"""Deep ensemble of Gaussian-likelihood networks (Lakshminarayanan et al. 2017)."""

from __future__ import annotations

import math

import numpy as np
import torch

from .base import ScaledSurrogate
from .nets import (LatentSamplerMixin, MixtureOfComponentsMixin, NewCampaignMixin, StackedMLP,
                   as_tensor, campaign_offset_variance, epochs_for, holdout_split, inner_variance_scale, mixture_moments,
                   torch_generator, torch_threads, train_with_early_stopping,
                   WarmStartMixin)

__all__ = ["DeepEnsemble", "gaussian_head"]

#: Variance floor in standardized units, added after the softplus ([LPB2017] Sec. 2.2
#: add 1e-6 for numerical stability; from memory).
_VAR_FLOOR = 1e-6

#: Budget of a warm-started fit (:meth:`DeepEnsemble.warm_started`): Adam steps from the
#: previous fit's weights, a tenth of the preset's, same patience (our choice, chosen
#: by measurement: ``tests/test_network_warm_start.py`` and ``benchmarks/assessment_cost.py``).
_WARM_FRACTION = 0.1
_WARM_MIN_EPOCHS = 5

_PRESETS = {
    True: dict(members=5, target_steps=400, min_epochs=20, max_epochs=300, patience=12,
               batch_size=128),
    False: dict(members=8, target_steps=3000, min_epochs=50, max_epochs=2000, patience=50,
                batch_size=64),
}


def gaussian_head(out: torch.Tensor):
    """Split a two-column network output into mean and variance.

    ``variance = softplus(raw) + 1e-6``, as in [LPB2017] Sec. 2.2.
    """
    return out[..., 0], torch.nn.functional.softplus(out[..., 1]) + _VAR_FLOOR


def _gaussian_nll(out, target):
    # Per-member mean of -log N(y | mu, var) without the constant ([LPB2017] Eq. 1).
    mu, var = gaussian_head(out)
    return (0.5 * (torch.log(var) + (target - mu) ** 2 / var)).mean(dim=-1)


class DeepEnsemble(WarmStartMixin, NewCampaignMixin, LatentSamplerMixin,
                   MixtureOfComponentsMixin,
                   ScaledSurrogate):
    """Uniform mixture of independently trained networks with a Gaussian output.

    Each of ``M`` networks outputs a mean ``mu_m(x)`` and a variance
    ``s_m^2(x) = softplus(.) + 1e-6`` and is trained on the Gaussian negative log
    likelihood ``1/2 log s_m^2 + (y - mu_m)^2 / (2 s_m^2)``.  The prediction is the
    uniform mixture, moment-matched ([LPB2017] Sec. 2.4):

    .. math::

        \\mu_*(x) = \\frac1M\\sum_m \\mu_m(x), \\qquad
        \\sigma_*^2(x) = \\frac1M\\sum_m \\left(s_m^2(x) + \\mu_m^2(x)\\right) - \\mu_*^2(x),

    computed by :func:`advisor.surrogates.nets.mixture_moments`.

    Parameters
    ----------
    seed : int
    quick : bool
        Quick: 5 members, about 400 Adam steps each in batches of 128, patience 12;
        otherwise 8 members, about 3000 steps in batches of 64, patience 50.
    members : int, optional
        Overrides the preset ensemble size.
    hidden : tuple of int, default (50, 50)
    activation : {"relu", "tanh"}, default "relu"
    lr : float, default 3e-3
    holdout : float, default 0.15
        Fraction of rows held out for early stopping (the same rows for all members).

    Notes
    -----
    Follows [LPB2017]: Gaussian likelihood head with softplus variance and a 1e-6
    floor, proper-scoring-rule training by NLL, random initialization and random
    shuffling per member, uniform mixture combined by its first two moments.

    Our choices: *no* adversarial training (the paper's optional Sec. 2.3, which they
    report helps a little); two hidden layers of 50 ReLU units (the paper's
    regression experiments use one hidden layer of 50); Adam with weight decay 1e-4;
    early stopping of each member on one shared held-out slice, which the paper does
    not use.  All members run as one batched network
    (:class:`~advisor.surrogates.nets.StackedMLP`); this is equivalent to separate
    training because Adam's update is element-wise.

    **Graceful degradation.**  Members are early-stopped on the held-out slice, and
    the mixture variance is multiplied by a scale ``s^2 >= 1`` fitted on that slice
    (:func:`advisor.surrogates.nets.inner_variance_scale`: sigma scaling, Laves et al.
    2020, with a conjugate prior), so where the members agree but are wrong on rows
    they did not see the prediction widens toward the prior spread
    (``info_["variance_scale"]``; on 40 rows of pure noise the held-out NLL went from
    1.56 to 1.46 nats against the baseline's 1.47).  ``sample_y`` is left unscaled
    (the between-member spread).  With campaign labels (``fit(X, y, groups)``, two or
    more campaigns) rows of a campaign absent from training get a between-campaign
    offset variance added (:func:`advisor.surrogates.nets.campaign_offset_variance`,
    ``info_["between_campaign_sd"]``), from the held-out rows' mean residual per
    campaign; the members saw the other rows of those campaigns, so the offsets are
    understated and the estimate leans on its prior (wide with few campaigns).

    ``sample_y`` returns joint draws ``mu_bar(x) + M^{-1/2} sum_m w_m (mu_m(x) -
    mu_bar(x))`` with ``w ~ N(0, I)``: a Gaussian whose covariance over points is the
    between-member covariance ``(1/M) sum_m (mu_m - mu_bar)(mu_m - mu_bar)^T``, the
    latent (epistemic) part of the mixture variance above.  We prefer this to picking
    one member per draw, which with five members gives only five distinct functions.

    References
    ----------
    .. [LPB2017] Lakshminarayanan, B., Pritzel, A. & Blundell, C. (2017). Simple and
       scalable predictive uncertainty estimation using deep ensembles. NeurIPS.
    """

    input_encoding = "onehot"

    def __init__(self, seed: int = 0, quick: bool = False, members: int | None = None,
                 hidden=(50, 50), activation: str = "relu", lr: float = 3e-3,
                 holdout: float = 0.15):
        super().__init__(seed=seed, quick=quick)
        self.members = members
        self.hidden = hidden
        self.activation = activation
        self.lr = lr
        self.holdout = holdout

    def warm_started(self) -> "DeepEnsemble":
        """An unfitted copy that continues training from this fit's weights (optional
        protocol member; the backtest's scheduled re-fits within a run use it).

        Fitting the copy on a training set whose first rows are this fit's (a campaign
        that has grown) keeps this fit's input and output standardization (so the
        networks compute the same function before the first step), keeps its held-out
        rows held out, holds out the same fraction of the new rows, and trains every
        member for a tenth of the preset's Adam steps (at least 5 epochs) with the
        same early stopping.  Continuing from the current weights when the data grow
        is common practice for networks in a sequential optimization loop (Snoek et al.
        2015, Scalable Bayesian optimization using deep neural networks, ICML, retrain
        their network as the data grow; that they warm-start is our reading, from
        memory).  Rows the previous fit trained on are never held out, so the early
        stopping and the variance scale see only unseen rows.  Any other training set
        (not an extension of this fit's) gets a full fit.  ``info_["warm_start"]`` says
        which was done.  The warm state is not a constructor argument:
        :func:`sklearn.base.clone` of the copy is a plain unfitted ensemble.
        """
        return WarmStartMixin.warm_started(self)

    def _warm_state(self) -> dict:
        return {"state": self.net_.state_copy(), "val": self._val_idx.copy()}

    def _fit(self, Xs, ys):
        torch_threads()
        preset = _PRESETS[bool(self.quick)]
        n_members = int(self.members or preset["members"])
        if n_members < 1:
            raise ValueError(f"members={n_members}; an ensemble needs at least one member")
        rng = np.random.default_rng(self.seed)
        gen = torch_generator(rng)
        X, y = as_tensor(Xs), as_tensor(ys)
        warm = getattr(self, "_warm_now", None)
        if warm is None:
            train, val = holdout_split(len(ys), self.holdout, rng)
            steps, min_epochs = preset["target_steps"], preset["min_epochs"]
        else:  # old held-out rows stay out; the new rows are split at the same fraction
            train, val = self._warm_split(len(ys), self.holdout, rng)
            steps = int(math.ceil(_WARM_FRACTION * preset["target_steps"]))
            min_epochs = _WARM_MIN_EPOCHS
        bs = min(preset["batch_size"], len(train))
        epochs = epochs_for(len(train), bs, steps, min_epochs, preset["max_epochs"])
        self.net_ = StackedMLP(Xs.shape[1], 2, self.hidden, n_members, self.activation, gen)
        if warm is not None:
            self.net_.load_members(warm["state"], torch.ones(n_members, dtype=torch.bool))
        self._val_idx = np.asarray(val, dtype=int)
        train_info = train_with_early_stopping(
            self.net_, _gaussian_nll, X, y, train, val, batch_size=bs, epochs=epochs,
            patience=preset["patience"], lr=self.lr, generator=gen, weight_decay=1e-4)
        self.variance_scale_, self.campaign_offset_var_ = 1.0, 0.0
        if len(val):
            mu_v, var_v = mixture_moments(*self.member_moments_s(Xs[val]))
            self.variance_scale_ = inner_variance_scale(ys[val], mu_v, np.sqrt(var_v))
            g = getattr(self, "_train_groups", None)
            if g is not None and len(self.groups_seen_) >= 2:
                self.campaign_offset_var_ = campaign_offset_variance(
                    ys[val], mu_v, np.sqrt(var_v * self.variance_scale_), g[val])
        _, var = self.member_moments_s(Xs)
        # noise_std_: root of the members' average predicted noise variance over the
        # training inputs (the model is heteroscedastic; this is a summary).
        self._noise_std_s = math.sqrt(float(var.mean()))
        self.info_ = {"members": n_members, "epochs_run": train_info["epochs_run"],
                      "early_stopping_epoch": train_info["best_epoch"],
                      "held_out_rows": int(len(val)), "adversarial_training": False,
                      "variance_scale": float(self.variance_scale_),
                      "warm_start": warm is not None,
                      **self._campaign_info()}

    def member_moments_s(self, Xs):
        """Each member's mean and variance on standardized inputs, shapes (M, n)."""
        torch_threads()
        with torch.no_grad():
            mu, var = gaussian_head(self.net_(as_tensor(Xs)))
        return mu.double().numpy(), var.double().numpy()

    def member_moments(self, X):
        """Each member's predictive mean and variance in raw units, shapes (M, n)."""
        return self._component_moments(X)

    def _component_moments_s(self, Xs):
        return self.member_moments_s(Xs)

    def _sample_latent(self, Xs, n_samples, rng):
        mu, _ = self.member_moments_s(Xs)
        centred = mu - mu.mean(axis=0)
        w = rng.standard_normal((n_samples, mu.shape[0]))
        return mu.mean(axis=0) + (w @ centred) / math.sqrt(mu.shape[0])
