"""A GP on a monotone transform of the objective (warped GP, [SRG2004]).

The transform is chosen once from the training ``y`` (:meth:`OutputWarp.choose`: log
for positive right-skewed ``y``, else Yeo-Johnson [YJ2000] with lambda by maximum
likelihood) rather than learned jointly with the GP as in [SRG2004]; the GP is the
project's Matérn-5/2 GP on ``T(y)``.  ``predict`` returns the mean and sd of the
predictive distribution in ``y``'s own units; ``predict_dist`` returns the full
:class:`advisor.distributions.WarpedNormal` (log-density with the Jacobian, CDF,
quantiles, CRPS).  The tool works on ``y = sign * objective``; see ``OutputWarp.choose``
for why maximized objectives need no special case.

Two optional protocol members serve the backtest's cheap updates within a simulated
campaign (``advisor.backtest._pool``): :meth:`WarpedGP.with_fixed_hyperparameters` holds
the transform and the inner GP's hyperparameters of a fit (one Cholesky factorization),
:meth:`WarpedGP.warm_started` re-chooses the transform and starts the inner GP's
optimizer from the fit's hyperparameters.
"""

from __future__ import annotations

import numpy as np
from scipy import stats
from sklearn.base import clone

from ..distributions import OutputWarp, WarpedNormal, yeo_johnson_lambda
from .base import EstimatorMixin, check_fit_inputs
from .gp import MaternGP

__all__ = ["WarpedGP"]


class WarpedGP(EstimatorMixin):
    """Matérn GP on ``T(y)``; predictive distribution transformed back.

    Parameters
    ----------
    seed, quick : as for :class:`MaternGP`.
    warp : {"auto", "log", "yeo-johnson"}
        ``"auto"`` chooses from the data.
    transform : dict, optional
        A transform held as given, ``OutputWarp``'s arguments ``{"kind", "lmbda",
        "scale"}`` (:meth:`with_fixed_hyperparameters` sets it); ``warp`` then chooses
        only when the held transform cannot take the data (a held log and some
        ``y <= 0``: the fit is then a full one, transform chosen and ``gp``'s
        hyperparameters re-optimized, and ``info_["held_transform"]`` says so).
        None (default): chosen from the data by ``warp``.
    gp : MaternGP, optional
        Unfitted GP, cloned and fitted on ``T(y)`` (the copies of
        :meth:`with_fixed_hyperparameters` and :meth:`warm_started` set it).  None
        (default): ``MaternGP(seed=seed, quick=quick)``.
    gp_start_sd : float, optional
        With a transform chosen from the data: the sd of ``T(y)`` on the fit that
        ``gp``'s starting signal and noise variances come from (:meth:`warm_started`
        sets it); they are multiplied by ``var(T(y)) / gp_start_sd**2``, so that the
        start is the same in the GP's standardized units whatever transform is chosen.
        None (default): ``gp``'s values are used as given.

    Attributes
    ----------
    warp_ : OutputWarp
    gp_ : MaternGP fitted on ``T(y)``.
    info_ : dict with the transform used.
    """

    #: The backtest's scheduled re-optimizations are full fits, not warm starts from
    #: the last fit (``advisor.backtest._pool._warm_in_backtest``: a one-start warm
    #: re-fit stays in the basin of a fit on a handful of trials).
    warm_reoptimize = False

    def __init__(self, seed=0, quick=False, *, warp="auto", transform=None, gp=None,
                 gp_start_sd=None):
        self.seed = seed
        self.quick = quick
        self.warp = warp
        self.transform = transform
        self.gp = gp
        self.gp_start_sd = gp_start_sd

    def _gp_template(self):
        return MaternGP(seed=self.seed, quick=self.quick) if self.gp is None else self.gp

    def size_regimes(self):
        """Those of the GP it fits (for the cost projection's per-regime power laws)."""
        return self._gp_template().size_regimes()

    def _choose(self, y):
        if self.warp == "auto":
            return OutputWarp.choose(y)
        if self.warp == "log":
            if np.any(y <= 0):
                raise ValueError("warp='log' needs y > 0; use warp='yeo-johnson'")
            return OutputWarp("log")
        scale = float(np.std(y)) or 1.0
        return OutputWarp("yeo-johnson",
                          yeo_johnson_lambda(stats.yeojohnson(y / scale)[1]), scale)

    def fit(self, X, y):
        X, y = check_fit_inputs(X, y)
        gp, held = clone(self._gp_template()), None
        if self.transform is None:
            w = self._choose(y)
        else:
            w = OutputWarp(**self.transform)
            held = "held"
            if w.kind == "log" and np.any(y <= 0):
                # The held hyperparameters are in the units of log(y); under any other
                # transform they mean nothing, so both are learned afresh.
                w = self._choose(y)
                gp.set_params(optimize=True, length_scale=None, signal_variance=None,
                              noise_variance=None)
                held = ("dropped: the held log transform cannot take y <= 0; transform "
                        "chosen from the data and hyperparameters re-optimized")
        z = w.forward(y)
        if self.gp_start_sd is not None and held is None:
            gp.set_params(**self._rescaled_start(gp, z))
        self.warp_ = w
        self.gp_ = gp.fit(X, z)
        self.info_ = dict(self.gp_.info_)
        self.info_.update(transform=w.kind, **({"lambda": w.lmbda} if w.kind != "log" else {}))
        if held is not None:
            self.info_["held_transform"] = held
        return self

    def _rescaled_start(self, gp, z):
        """``gp``'s starting signal and noise variances times ``var(T(y)) /
        gp_start_sd**2`` (MaternGP standardizes ``T(y)`` by its sd, ddof 0, when
        ``normalize``; otherwise the raw units are its units)."""
        p = gp.get_params()
        if p.get("signal_variance") is None or p.get("noise_variance") is None:
            return {}
        sd = float(np.std(z)) if p.get("normalize", True) else 1.0
        r = (sd if sd > 1e-12 else 1.0) ** 2 / float(self.gp_start_sd) ** 2
        return {"signal_variance": p["signal_variance"] * r,
                "noise_variance": p["noise_variance"] * r}

    def with_fixed_hyperparameters(self) -> "WarpedGP":
        """An unfitted copy holding this fit's transform (kind, lambda, scale: not
        re-chosen from the new ``y``) and its GP's hyperparameters (raw units of
        ``T(y)``, :meth:`MaternGP.with_fixed_hyperparameters
        <advisor.surrogates.gp.MaternGP.with_fixed_hyperparameters>`); optional protocol
        member.  Fitting it conditions the model on new data with one Cholesky
        factorization, no optimizer; the backtest uses it for its cheap updates within a
        simulated campaign and for batch fantasies.  Both are held because the
        hyperparameters are in the units of ``T(y)``: re-choosing the transform would
        change the scale they were learned on.  Exception: a held log transform and new
        data with ``y <= 0`` (see ``transform``)."""
        w = self.warp_
        return type(self)(**dict(self.get_params(deep=False),
                                 transform={"kind": w.kind, "lmbda": w.lmbda,
                                            "scale": w.scale},
                                 gp=self.gp_.with_fixed_hyperparameters(),
                                 gp_start_sd=None))

    def warm_started(self) -> "WarpedGP":
        """An unfitted copy whose GP optimizer starts from this fit's hyperparameters,
        one start and no random restarts (:meth:`MaternGP.warm_started
        <advisor.surrogates.gp.MaternGP.warm_started>`); optional protocol member, used
        by the backtest's scheduled re-optimizations and the relevance intervals'
        half-sample refits.

        The transform is chosen afresh from the new data (by ``warp``), not held: this
        is a full re-optimization, and lambda is learned from ``y`` just as the
        hyperparameters are, so holding it would keep for a whole simulated campaign
        the transform chosen on its first few trials (a log chosen on positive trials
        could not even take a later ``y <= 0``).  Because ``T`` may change, the GP's
        signal and noise variances are carried over in standardized units
        (``gp_start_sd``), not in the raw units of the old ``T(y)``: on random 5- and
        10-row subsets of the moulding sample log the automatic choice was the log for
        35% and 54% of them and Yeo-Johnson for the rest, and the sd of ``T(y)`` spread
        over two orders of magnitude (0.11-9.4 for Yeo-Johnson on 5 rows, 10th-90th
        percentiles).  In the quick backtest on that log's stand-ins (seeds 0-2) the
        standardized start took 11.3-13.5 thousand likelihood evaluations per backtest
        against 12.7-15.3 thousand for the raw one.
        """
        return type(self)(**dict(self.get_params(deep=False), transform=None,
                                 gp=self.gp_.warm_started(),
                                 gp_start_sd=float(self.gp_.y_scale_)))

    def predict_dist(self, X):
        mu, sd = self.gp_.predict(X)
        return WarpedNormal(mu, sd, self.warp_)

    def predict(self, X):
        return self.predict_dist(X).moments()
