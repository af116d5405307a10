"""The model that knows nothing: the training mean and standard deviation everywhere.

Every candidate is compared with it, so a user sees whether any model beats ignoring
the settings.  Its predictive distribution at every point is
``N(mean(y), std(y, ddof=1)^2)``, the plug-in marginal of the training targets.
"""

from __future__ import annotations

import numpy as np

from .base import EstimatorMixin, check_fit_inputs

__all__ = ["MeanBaseline"]


class MeanBaseline(EstimatorMixin):
    """Predict ``mean(y)`` with standard deviation ``std(y, ddof=1)`` at every point.

    Parameters
    ----------
    seed, quick :
        Accepted for the common protocol; unused (the model has no randomness or budget).

    Attributes
    ----------
    mean_, std_ : float
        Training mean and sample standard deviation (ddof=1).
    noise_std_ : float
        Equal to ``std_``: all variation is treated as noise.
    info_ : dict
    """

    input_encoding = "onehot"

    def __init__(self, seed=0, quick=False):
        self.seed = seed
        self.quick = quick

    def fit(self, X, y):
        _, y = check_fit_inputs(X, y)
        self.mean_ = float(y.mean())
        sd = float(y.std(ddof=1))
        # constant targets: a tiny positive std keeps the protocol's std > 0 rule
        self.std_ = sd if sd > 0 else 1e-12 * max(1.0, abs(self.mean_))
        self.info_ = {"n_train": int(y.shape[0])}
        return self

    def predict(self, X):
        X = np.asarray(X, dtype=float)
        if X.ndim != 2:
            raise ValueError(f"X must be 2-D, got shape {X.shape}")
        k = X.shape[0]
        return np.full(k, self.mean_), np.full(k, self.std_)

    @property
    def noise_std_(self):
        return self.std_
