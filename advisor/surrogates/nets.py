"""Small torch building blocks shared by the neural surrogates.

* :func:`torch_threads` — the one place that sets torch's intra-op thread count;
* :func:`torch_generator` — an explicit, seeded ``torch.Generator`` (no global RNG);
* :class:`StackedMLP` — ``M`` independent multilayer perceptrons evaluated in one
  batched matrix product (an ensemble, or the retained samples of a sampler);
* :func:`mixture_moments` — mean and variance of a finite Gaussian mixture;
* :func:`holdout_split`, :func:`epoch_batches`, :func:`epochs_for` — data handling for
  mini-batch training with early stopping;
* :class:`LatentSamplerMixin` — ``sample_y`` in raw units from a model's
  ``_sample_latent`` on standardized data;
* :func:`inner_variance_scale`, :func:`campaign_offset_variance` and
  :class:`NewCampaignMixin` — the widening fitted on inner held-out rows, and the
  variance a campaign absent from training adds (a random campaign offset).

All randomness here comes from a ``torch.Generator`` or a numpy ``Generator`` passed in;
nothing reads or changes torch's global random state.
"""

from __future__ import annotations

import functools
import math
import os

import numpy as np
import torch

from .base import _with_return_std

__all__ = ["torch_threads", "torch_generator", "StackedMLP", "mixture_moments",
           "holdout_split", "epoch_batches", "epochs_for", "as_tensor",
           "LatentSamplerMixin", "THREADS_ENV", "train_with_early_stopping",
           "inner_variance_scale", "SCALE_PRIOR_DF", "campaign_offset_variance",
           "CAMPAIGN_PRIOR_DF", "NewCampaignMixin", "WarmStartMixin"]

#: Environment variable read by :func:`torch_threads`.
THREADS_ENV = "ADVISOR_TORCH_THREADS"

_DTYPE = torch.float32


def torch_threads() -> int:
    """Set torch's intra-op thread count from ``ADVISOR_TORCH_THREADS`` (default 1).

    The tool runs surrogate fits in parallel *processes*, so one thread per process is
    the right default; more threads per tiny network only add contention.  Called at
    the start of every neural fit and predict.

    Returns
    -------
    int
        The thread count now in force.
    """
    raw = os.environ.get(THREADS_ENV, "1")
    try:
        n = max(1, int(raw))
    except ValueError:
        raise ValueError(f"{THREADS_ENV}={raw!r} is not a whole number; "
                         f"set it to e.g. 1 or 2") from None
    if torch.get_num_threads() != n:
        torch.set_num_threads(n)
    return n


def torch_generator(seed) -> torch.Generator:
    """A CPU ``torch.Generator`` seeded from an int or a numpy Generator."""
    if isinstance(seed, np.random.Generator):
        seed = int(seed.integers(2**63 - 1))
    g = torch.Generator(device="cpu")
    g.manual_seed(int(seed) % (2**63 - 1))
    return g


def as_tensor(a) -> torch.Tensor:
    return torch.as_tensor(np.asarray(a, dtype=np.float32), dtype=_DTYPE)


_ACTIVATIONS = {"tanh": torch.tanh, "relu": torch.relu}


class StackedMLP(torch.nn.Module):
    """``M`` independent fully connected networks evaluated together.

    Layer ``l`` of member ``m`` computes ``h @ W[l][m] + b[l][m]``; all members are
    run in one ``torch.baddbmm`` call, so an ensemble of five costs about what one
    network costs at this size.  All weights live in one parameter ``flat`` of shape
    (M, P), one row per member, and the layers are views into it.  We hand-write this
    instead of ``torch.func`` model stacking because (a) optimizers then update one
    tensor per step, which for networks this small is most of the cost, and (b)
    members are copied and restored row-wise for early stopping and for stacking
    sampler draws.

    Parameters
    ----------
    d_in, d_out : int
        Input and output widths.
    hidden : sequence of int
        Hidden-layer widths.
    members : int
        Number of independent networks ``M``.
    activation : {"tanh", "relu"}
    generator : torch.Generator
        Source of the initial weights: each member gets its own draw from
        ``U(-1/sqrt(fan_in), 1/sqrt(fan_in))`` (the default of ``torch.nn.Linear``).

    Notes
    -----
    ``forward`` takes ``(B, d_in)`` (the same inputs for every member) or
    ``(M, B, d_in)`` (each member its own batch) and returns ``(M, B, d_out)``.
    ``features`` returns the last hidden layer instead.
    """

    def __init__(self, d_in, d_out, hidden=(50, 50, 50), members=1, activation="tanh",
                 generator=None):
        super().__init__()
        if activation not in _ACTIVATIONS:
            raise ValueError(f"activation={activation!r}; use one of {sorted(_ACTIVATIONS)}")
        self.activation = activation
        self.members = int(members)
        self.widths = [int(d_in), *[int(h) for h in hidden], int(d_out)]
        self._slices, chunks, offset = [], [], 0
        for fan_in, fan_out in zip(self.widths[:-1], self.widths[1:]):
            bound = 1.0 / math.sqrt(fan_in)
            for shape in ((fan_in, fan_out), (1, fan_out)):
                size = shape[0] * shape[1]
                self._slices.append((offset, offset + size, shape))
                offset += size
                chunks.append((torch.rand(self.members, size, generator=generator) * 2 - 1)
                              * bound)
        self.flat = torch.nn.Parameter(torch.cat(chunks, dim=1))

    def _layers(self):
        m = self.members
        views = [self.flat[:, a:b].view(m, *shape) for a, b, shape in self._slices]
        return list(zip(views[0::2], views[1::2]))

    def _expand(self, x):
        if x.dim() == 2:
            return x.unsqueeze(0).expand(self.members, -1, -1)
        return x

    def _hidden(self, x, layers):
        act = _ACTIVATIONS[self.activation]
        h = self._expand(x)
        for w, b in layers[:-1]:
            h = act(torch.baddbmm(b, h, w))
        return h

    def features(self, x):
        return self._hidden(x, self._layers())

    def forward(self, x):
        layers = self._layers()
        w, b = layers[-1]
        return torch.baddbmm(b, self._hidden(x, layers), w)

    # -- member-wise state, for early stopping and for stacking sampler draws -------
    def state_copy(self) -> torch.Tensor:
        return self.flat.detach().clone()

    def load_members(self, saved: torch.Tensor, mask: torch.Tensor):
        """Copy members where ``mask`` (bool, shape (M,)) is true from ``saved``."""
        with torch.no_grad():
            self.flat[mask] = saved[mask]

    def store_members(self, saved: torch.Tensor, mask: torch.Tensor):
        """Copy the current members where ``mask`` is true into ``saved``."""
        with torch.no_grad():
            saved[mask] = self.flat.detach()[mask]

    @classmethod
    def from_draws(cls, template: "StackedMLP", draws: list[torch.Tensor]):
        """A stacked network whose members are saved parameter rows (each (1, P))."""
        net = cls(template.widths[0], template.widths[-1], template.widths[1:-1],
                  members=len(draws), activation=template.activation,
                  generator=torch_generator(0))
        with torch.no_grad():
            net.flat.copy_(torch.cat(draws, dim=0))
        return net


def mixture_moments(means, variances, weights=None):
    """Mean and variance of a finite mixture of Gaussians, component by component.

    For components ``k`` with weights ``w_k`` (summing to one), means ``mu_k`` and
    variances ``s_k^2``, the law of total variance gives

    .. math::

        \\mu_* = \\sum_k w_k \\mu_k, \\qquad
        \\sigma_*^2 = \\sum_k w_k (s_k^2 + \\mu_k^2) - \\mu_*^2 .

    With uniform weights this is the combination rule of a deep ensemble
    [LPB2017]_ (Sec. 2.4) and of a mixture over posterior samples.

    Parameters
    ----------
    means, variances : array_like, shape (K, n)
        Component means and variances at ``n`` points (a 1-D input is one point).
    weights : array_like, shape (K,), optional
        Non-negative mixture weights; normalised here.  Uniform when omitted.

    Returns
    -------
    mean, variance : ndarray, shape (n,)

    References
    ----------
    .. [LPB2017] Lakshminarayanan, B., Pritzel, A. & Blundell, C. (2017). Simple and
       scalable predictive uncertainty estimation using deep ensembles. NeurIPS.
    """
    means = np.asarray(means, dtype=float)
    variances = np.asarray(variances, dtype=float)
    if means.ndim == 1:
        means, variances = means[:, None], variances[:, None]
    if means.shape != variances.shape:
        raise ValueError(f"means {means.shape} and variances {variances.shape} differ")
    k = means.shape[0]
    if weights is None:
        w = np.full(k, 1.0 / k)
    else:
        w = np.asarray(weights, dtype=float).ravel()
        if w.shape != (k,) or np.any(w < 0) or w.sum() <= 0:
            raise ValueError(f"weights must be {k} non-negative numbers with a positive sum")
        w = w / w.sum()
    mean = w @ means
    # Centre before squaring: sum w (s^2 + (mu - mean)^2) equals the formula above
    # but does not lose precision when the means are large and close together.
    var = w @ (variances + (means - mean) ** 2)
    return mean, var


def holdout_split(n: int, fraction: float, rng: np.random.Generator, min_holdout: int = 5,
                  min_train: int = 10):
    """Random (train, held-out) index arrays; no held-out rows when n is too small.

    Returns ``(train, val)``; ``val`` is empty when ``n < min_train + min_holdout``.
    """
    n_val = int(round(fraction * n))
    if n - max(n_val, min_holdout) < min_train or fraction <= 0:
        return np.arange(n), np.arange(0)
    n_val = max(n_val, min_holdout)
    perm = rng.permutation(n)
    return np.sort(perm[n_val:]), np.sort(perm[:n_val])


def epochs_for(n_train: int, batch_size: int, target_steps: int, min_epochs: int,
               max_epochs: int) -> int:
    """Epochs giving about ``target_steps`` optimizer steps, clipped to [min, max].

    A budget in steps rather than epochs keeps small data sets (one batch an epoch)
    from stopping after too few updates and large ones from running too long.
    """
    per_epoch = max(1, math.ceil(n_train / batch_size))
    return int(min(max_epochs, max(min_epochs, math.ceil(target_steps / per_epoch))))


def epoch_batches(n: int, batch_size: int, generator: torch.Generator, members: int = 1):
    """Index batches for one epoch: a tensor (members, b) per batch, own shuffle each.

    The last, smaller batch is merged into the one before it so no step sees a
    handful of rows (noisy gradients) — our choice.
    """
    perms = torch.stack([torch.randperm(n, generator=generator) for _ in range(members)])
    n_batches = max(1, n // batch_size)
    if n_batches == 1:  # one batch of every row (the samplers' loops call this per step)
        return [perms]
    return [perms[:, a:b] for a, b in _batch_edges(n, n_batches)]


@functools.lru_cache(maxsize=256)
def _batch_edges(n: int, n_batches: int) -> tuple:
    edges = np.linspace(0, n, n_batches + 1).round().astype(int)
    return tuple((int(a), int(b)) for a, b in zip(edges[:-1], edges[1:]))


class LatentSamplerMixin:
    """``sample_y`` in raw units from ``_sample_latent(Xs, n_samples, rng)``.

    ``_sample_latent`` returns joint draws of the latent function on standardized
    inputs, shape ``(n_samples, len(Xs))``, in standardized output units.
    """

    def sample_y(self, X, n_samples: int, rng=None):
        """Joint draws of the latent function at ``X``, shape (n_samples, len(X)).

        Parameters
        ----------
        X : array_like, shape (n, d)
        n_samples : int
        rng : int or numpy.random.Generator, optional
        """
        rng = np.random.default_rng(rng)
        n_samples = int(n_samples)
        if n_samples < 1:
            raise ValueError(f"n_samples={n_samples}; ask for at least one draw")
        Xs = self._scale_x(X)
        f = np.asarray(self._sample_latent(Xs, n_samples, rng), dtype=float)
        return self.y_mean_ + self.y_scale_ * f


class MixtureOfComponentsMixin:
    """Predict the uniform mixture of a model's components (ensemble members, retained
    sampler draws), given ``_component_moments_s(Xs) -> (means, variances)`` of shape
    (K, n) on standardized data; :func:`mixture_moments` combines them."""

    def _component_moments(self, X):
        """Each component's mean and variance in raw units, shapes (K, n)."""
        mu, var = self._component_moments_s(self._scale_x(X))
        return self.y_mean_ + self.y_scale_ * mu, self.y_scale_ ** 2 * var

    def _predict(self, Xs):
        mu, var = self._component_moments_s(Xs)
        mean, total = mixture_moments(mu, var)
        # a model that fitted an inner-validated widening (inner_variance_scale) applies it
        return mean, np.sqrt(total * getattr(self, "variance_scale_", 1.0))


def train_with_early_stopping(net: StackedMLP, member_loss, X: torch.Tensor, y: torch.Tensor,
                              train_idx, val_idx, *, batch_size: int, epochs: int,
                              patience: int, lr: float, generator: torch.Generator,
                              weight_decay: float = 0.0) -> dict:
    """Adam on mini-batches; each member keeps its own best epoch on the held-out rows.

    Parameters
    ----------
    net : StackedMLP
    member_loss : callable
        ``member_loss(out, y) -> (M,)``: mean loss of each member, with ``out`` of shape
        (M, B, d_out) and ``y`` of shape (M, B).
    X, y : torch.Tensor, shapes (n, d) and (n,)
    train_idx, val_idx : array of int
        Rows to train on and rows for early stopping (may be empty: then the last
        epoch is kept).
    batch_size, epochs, patience, lr, weight_decay : training budget.
    generator : torch.Generator
        Shuffles; each member gets its own order.

    Returns
    -------
    dict
        ``epochs_run`` and per-member ``best_epoch`` (plain ints).

    Notes
    -----
    Members are trained on the sum of their losses: Adam's update is element-wise, so
    this is the same as training each member alone with the same settings.
    Early stopping on a held-out slice is common practice (e.g. Prechelt 1998).
    """
    m = net.members
    Xt, yt = X[train_idx], y[train_idx]
    has_val = len(val_idx) > 0
    if has_val:
        Xv, yv = X[val_idx], y[val_idx].unsqueeze(0).expand(m, -1)
    # The fused kernel updates all tensors in one call; with a handful of small
    # tensors the per-tensor loop otherwise dominates a step.
    opt = torch.optim.Adam(net.parameters(), lr=lr, weight_decay=weight_decay, fused=True)
    best = torch.full((m,), float("inf"))
    best_epoch = torch.zeros(m, dtype=torch.long)
    saved = net.state_copy()
    epoch = 0
    for epoch in range(1, epochs + 1):
        net.train()
        for idx in epoch_batches(len(train_idx), batch_size, generator, m):
            opt.zero_grad(set_to_none=True)
            loss = member_loss(net(Xt[idx]), yt[idx]).sum()
            loss.backward()
            opt.step()
        if not has_val:
            continue
        with torch.no_grad():
            val = member_loss(net(Xv), yv)
        improved = val < best
        best = torch.where(improved, val, best)
        best_epoch = torch.where(improved, torch.full_like(best_epoch, epoch), best_epoch)
        net.store_members(saved, improved)
        if bool(torch.all(epoch - best_epoch >= patience)):
            break
    if has_val:
        net.load_members(saved, torch.ones(m, dtype=torch.bool))
    return {"epochs_run": int(epoch),
            "best_epoch": [int(e) for e in best_epoch] if has_val else [int(epoch)] * m}


#: Prior degrees of freedom of the variance scale: the prior (no widening) counts as
#: much as this many held-out rows (our choice; see :func:`inner_variance_scale`).
SCALE_PRIOR_DF = 10.0


def inner_variance_scale(y, mean, std) -> float:
    """Widening factor for a predictive variance, fitted on inner held-out rows.

    A network can be overconfident on rows it was not trained on; one scale ``s^2``
    on its predictive variance, fitted on such rows, corrects that ("sigma scaling":
    Laves, Ihler, Fast, Kahrs & Ortmaier 2020, Well-calibrated regression uncertainty
    in medical imaging with deep learning, MIDL — the parametric form of the held-out
    recalibration of Kuleshov, Fenner & Ermon 2018, ICML).  Its maximum-likelihood
    value over ``m`` rows is ``mean(z^2)`` with ``z = (y - mean) / std``.  Because the
    inner held-out set can be a handful of rows, we take instead the conjugate
    estimate under a scaled-inverse-chi-square prior on ``s^2`` with ``nu_0`` =
    :data:`SCALE_PRIOR_DF` degrees of freedom centred on 1 (Gelman et al. 2013, BDA3
    Sec. 2.6, normal model with known mean): ``s_n^2 = (nu_0 + sum z^2) / (nu_0 + m)``,
    which moves from 1 (no evidence) to ``mean(z^2)`` as rows accumulate.  We keep
    only widening, ``max(s_n^2, 1)``: overconfidence moves the model toward the prior
    spread, while a scale below one would sharpen it on little evidence (our choice).

    Parameters
    ----------
    y, mean, std : array_like, shape (m,)
        Held-out targets and the model's predictive mean and standard deviation there
        (any common units).

    Returns
    -------
    float
        ``s^2 >= 1``, to multiply the predictive variance by (1 with no rows).
    """
    y, mean, std = (np.asarray(a, dtype=float).ravel() for a in (y, mean, std))
    z2 = ((y - mean) / std) ** 2
    if len(z2) == 0 or not np.all(np.isfinite(z2)):
        return 1.0
    s2 = (SCALE_PRIOR_DF + float(z2.sum())) / (SCALE_PRIOR_DF + len(z2))
    return max(s2, 1.0)


#: Prior degrees of freedom of the between-campaign offset variance (our choice: one
#: pseudo-campaign, weakly informative; see :func:`campaign_offset_variance`).
CAMPAIGN_PRIOR_DF = 1.0


def campaign_offset_variance(y, mean, std, groups) -> float:
    """Variance that a campaign absent from training adds to a prediction.

    Campaigns (material lots, batch series, search rounds) shift the objective by an
    offset ``b_c`` that the inputs do not explain.  Treating the offsets as a random
    effect, ``b_c ~ N(0, s_b^2)`` (the one-way hierarchical normal model, Gelman et al.
    2013, BDA3 Sec. 5.4-5.5), the prediction for a *new* campaign has the model's
    variance plus ``s_b^2`` — the same term ``s_c^2`` that a GP with a per-campaign
    offset adds for a new campaign.  We estimate ``s_b^2`` from held-out rows of the
    ``k`` training campaigns, each predicted without the rows of its own campaign where
    the model allows it (DNGO, the neural process): the mean residual ``r_c`` of
    campaign ``c`` over its ``n_c`` rows estimates ``b_c`` with sampling variance about
    ``v_bar / n_c`` (``v_bar`` = the mean predictive variance ``std^2``), so ``d_c =
    max(r_c^2 - v_bar / n_c, 0)`` (method of moments).  With a scaled-inverse-chi-square
    prior on ``s_b^2`` of ``nu_0`` = :data:`CAMPAIGN_PRIOR_DF` degrees of freedom and
    scale ``v_bar`` (a new campaign may be off by about the model's own predictive sd —
    our choice), the conditional posterior is scaled-inverse-chi-square with ``nu_n =
    nu_0 + k`` and ``nu_n s_n^2 = nu_0 v_bar + sum_c d_c`` (BDA3 Sec. 2.6), and we return
    its mean ``nu_n s_n^2 / (nu_n - 2)`` (BDA3 Appendix A).  With few campaigns the
    between-campaign spread is barely identified and this is wide (two campaigns:
    ``v_bar + sum d_c``); with many it approaches the offsets' mean square.  The
    estimate in the units of ``y``; 0 with fewer than two campaigns.

    This is our answer to "how much more uncertain is a new campaign", the
    parametric, campaign-level counterpart of held-out recalibration (Kuleshov,
    Fenner & Ermon 2018, ICML): rows of one campaign share its offset, so the evidence
    counts in campaigns, not in rows.

    Parameters
    ----------
    y, mean, std : array_like, shape (m,)
        Held-out targets and the model's predictive mean and sd there.
    groups : array_like, shape (m,)
        Campaign of each row.

    Returns
    -------
    float
        ``s_b^2 >= 0`` in squared units of ``y``.
    """
    y, mean, std = (np.asarray(a, dtype=float).ravel() for a in (y, mean, std))
    groups = np.asarray(groups, dtype=object).ravel()
    if not (len(y) == len(mean) == len(std) == len(groups)):
        raise ValueError("y, mean, std and groups must have the same length")
    if len(y) == 0 or not np.all(np.isfinite((y - mean) / std)):
        return 0.0
    labels = list(dict.fromkeys(groups.tolist()))
    k = len(labels)
    if k < 2:
        return 0.0
    v_bar = float(np.mean(std ** 2))
    d = 0.0
    for c in labels:
        r = (y - mean)[groups == c]
        d += max(float(r.mean()) ** 2 - v_bar / len(r), 0.0)
    nu_n = CAMPAIGN_PRIOR_DF + k
    return (CAMPAIGN_PRIOR_DF * v_bar + d) / (nu_n - 2.0)


class NewCampaignMixin:
    """``fit(X, y, groups)`` / ``predict(X, groups)`` for a :class:`ScaledSurrogate`
    whose ``_fit`` sets ``campaign_offset_var_`` (standardized units; see
    :func:`campaign_offset_variance`): rows of a campaign absent from training get
    that variance added, all others (and ``groups=None``) the model's own.  ``_fit``
    reads the training campaigns from ``self._train_groups`` (None without labels)."""

    uses_groups = True

    def fit(self, X, y, groups=None):
        """Fit on ``X``, ``y``; ``groups`` (campaign labels, optional) only serve the
        new-campaign variance."""
        n = np.asarray(y).shape[0]
        self._train_groups = (None if groups is None
                              else np.asarray(groups, dtype=object).ravel())
        if self._train_groups is not None and len(self._train_groups) != n:
            raise ValueError(f"groups has {len(self._train_groups)} entries for {n} rows")
        self.groups_seen_ = ([] if self._train_groups is None
                             else list(dict.fromkeys(self._train_groups.tolist())))
        return super().fit(X, y)

    @_with_return_std
    def predict(self, X, groups=None):
        """Predictive mean and sd; rows of a campaign absent from training get the
        between-campaign offset variance added."""
        mean, std = super().predict(X)
        extra = float(getattr(self, "campaign_offset_var_", 0.0))
        if groups is not None and extra > 0:
            seen = set(self.groups_seen_)
            new = np.array([g not in seen for g in np.asarray(groups, dtype=object).ravel()])
            if len(new) != len(std):
                raise ValueError(f"groups has {len(new)} entries for {len(std)} rows")
            std = np.where(new, np.sqrt(std ** 2 + extra * self.y_scale_ ** 2), std)
        return mean, std

    def _campaign_info(self):
        """Facts for ``info_``: the offset sd in the objective's units."""
        return {"between_campaign_sd": float(math.sqrt(self.campaign_offset_var_)
                                             * getattr(self, "y_scale_", 1.0))}


class WarmStartMixin:
    """``warm_started()`` for a network :class:`~advisor.surrogates.base.ScaledSurrogate`:
    an unfitted copy that, fitted on a training set whose first rows are this fit's
    (a campaign that has grown), keeps this fit's input and output standardization (so
    the network computes the same function before its first step) and hands
    ``_fit`` the model's own warm state (``self._warm_now``: the dict from
    ``_warm_state()`` plus ``"y"``, the old rows' objective); on any other training set
    ``_warm_now`` is None and the fit is the model's full fit.  Subclasses implement
    ``_warm_state() -> dict`` and use ``_warm_now`` in ``_fit``; list this mixin before
    :class:`NewCampaignMixin`.  The warm state is not a constructor argument, so
    :func:`sklearn.base.clone` of the copy is a plain unfitted model.
    """

    def warm_started(self):
        """An unfitted copy that continues from this fit (see the class docstring and
        the model's ``_fit``)."""
        from sklearn.base import clone

        if not hasattr(self, "_train_y"):
            raise ValueError(f"warm_started() needs a fitted {type(self).__name__}")
        new = clone(self)
        new._warm = dict(self._warm_state(), X=self._train_X.copy(), y=self._train_y.copy(),
                         scaling=(self.x_mean_, self.x_scale_, self.y_mean_, self.y_scale_))
        return new

    def _warm_prefix(self, X, y):
        warm = getattr(self, "_warm", None)
        if warm is None:
            return None
        X, y = np.asarray(X, dtype=float), np.asarray(y, dtype=float).ravel()
        n0 = len(warm["y"])
        if (X.ndim != 2 or X.shape[1] != warm["X"].shape[1] or len(y) < n0
                or not np.array_equal(X[:n0], warm["X"])
                or not np.array_equal(y[:n0], warm["y"])):
            return None
        return warm

    def fit(self, X, y, groups=None):
        """Fit on ``X``, ``y`` (``groups``: campaign labels, see
        :class:`NewCampaignMixin`)."""
        self._warm_now = self._warm_prefix(X, y)
        self._train_X = np.asarray(X, dtype=float).copy()
        self._train_y = np.asarray(y, dtype=float).ravel().copy()
        return super().fit(X, y, groups)

    def _warm_split(self, n: int, fraction: float, rng: np.random.Generator):
        """(train, held-out) rows of a warm fit with early stopping: the previous
        fit's held-out rows (``_warm_state()["val"]``) stay out, rows it trained on
        never go out, and ``round(fraction * new rows)`` of the new rows are held out
        (none while the previous fit had no held-out rows and ``n < 15``, the
        threshold of :func:`holdout_split`'s defaults)."""
        warm = self._warm_now
        new_rows = np.arange(len(warm["y"]), n)
        k = int(round(fraction * len(new_rows))) if len(warm["val"]) or n >= 15 else 0
        val = np.union1d(warm["val"], np.sort(rng.permutation(new_rows)[:k])).astype(int)
        return np.setdiff1d(np.arange(n), val), val

    def _scale_fit(self, X, y):
        warm = getattr(self, "_warm_now", None)
        if warm is None:
            return super()._scale_fit(X, y)
        from .base import check_fit_inputs

        X, y = check_fit_inputs(X, y)
        self.x_mean_, self.x_scale_, self.y_mean_, self.y_scale_ = warm["scaling"]
        return (X - self.x_mean_) / self.x_scale_, (y - self.y_mean_) / self.y_scale_
