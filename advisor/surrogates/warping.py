"""A GP on a monotone transform of the objective (warped GP, [SRG2004]).

The transform is chosen once from the training ``y`` (:meth:`OutputWarp.choose`: log
for positive right-skewed ``y``, else Yeo-Johnson [YJ2000] with lambda by maximum
likelihood) rather than learned jointly with the GP as in [SRG2004]; the GP is the
project's Matérn-5/2 GP on ``T(y)``.  ``predict`` returns the mean and sd of the
predictive distribution in ``y``'s own units; ``predict_dist`` returns the full
:class:`advisor.distributions.WarpedNormal` (log-density with the Jacobian, CDF,
quantiles, CRPS).  The tool works on ``y = sign * objective``; see ``OutputWarp.choose``
for why maximized objectives need no special case.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

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

    Attributes
    ----------
    warp_ : OutputWarp
    gp_ : MaternGP fitted on ``T(y)``.
    info_ : dict with the transform used.
    """

    def __init__(self, seed=0, quick=False, *, warp="auto"):
        self.seed = seed
        self.quick = quick
        self.warp = warp

    def size_regimes(self):
        """Those of the GP it fits (for the cost projection's per-regime power laws)."""
        return MaternGP(seed=self.seed, quick=self.quick).size_regimes()

    def fit(self, X, y):
        X, y = check_fit_inputs(X, y)
        if self.warp == "auto":
            w = OutputWarp.choose(y)
        elif self.warp == "log":
            if np.any(y <= 0):
                raise ValueError("warp='log' needs y > 0; use warp='yeo-johnson'")
            w = OutputWarp("log")
        else:
            scale = float(np.std(y)) or 1.0
            w = OutputWarp("yeo-johnson", yeo_johnson_lambda(stats.yeojohnson(y / scale)[1]),
                           scale)
        self.warp_ = w
        self.gp_ = MaternGP(seed=self.seed, quick=self.quick).fit(X, w.forward(y))
        self.info_ = dict(self.gp_.info_)
        self.info_.update(transform=w.kind, **({"lambda": w.lmbda} if w.kind != "log" else {}))
        return self

    def predict_dist(self, X):
        mu, sd = self.gp_.predict(X)
        return WarpedNormal(mu, sd, self.warp_)

    def predict(self, X):
        return self.predict_dist(X).moments()
