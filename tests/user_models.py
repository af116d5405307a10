"""Small user-supplied surrogates for the tests (the `--surrogate module:Class` door).

BayesRidge wraps scikit-learn's BayesianRidge, whose `return_std` includes the noise
term (scikit-learn docs), so it satisfies the protocol without any code of ours.
"""

import numpy as np
from sklearn.linear_model import BayesianRidge


class BayesRidge:
    def __init__(self, seed=0):
        self.seed = seed

    def fit(self, X, y):
        self.model_ = BayesianRidge().fit(X, y)
        return self

    def predict(self, X):
        mean, std = self.model_.predict(X, return_std=True)
        return mean, std


class FlakyOnSmallFits(BayesRidge):
    """Raises whenever it is fitted on fewer than 75 trials (so: on some folds only)."""

    def fit(self, X, y):
        if len(X) < 75:
            raise RuntimeError("deliberate failure on a small fold")
        return super().fit(X, y)


class ReturnsNaN(BayesRidge):
    def predict(self, X):
        mean, std = super().predict(X)
        mean[0] = np.nan
        return mean, std


class NoPredict:
    def fit(self, X, y):
        return self
