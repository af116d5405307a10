"""With uninformative data a Bayesian surrogate should fall back to its prior.

On pure-noise targets (y independent of x) the best predictive distribution is the
marginal of y; the "knowing nothing" baseline (training mean and sd) estimates it.  A
well-regularized model's held-out NLL must come within a small margin of the baseline's
instead of being confidently wrong.  Margin 0.05 nats/point: the NLL difference of two
predictors averaged over 300 held-out standard-normal points has a Monte-Carlo sd of
roughly 0.01-0.02 for predictors this close (from the seeded runs below), so 0.05 is
about 3 sd.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from advisor.surrogates import make_surrogate


def _nll(model, X, y):
    mu, sd = model.predict(X)
    return float(-norm.logpdf(y, mu, sd).mean())


@pytest.mark.slow
@pytest.mark.parametrize("name", [
    "dngo", "ensemble", "neural_process",
    # known gap (issue 14): the short SGHMC chain fits noise on 40 rows (its mean
    # varies with sd 0.68 where y is pure noise of sd 0.89; split-R-hat 1.7)
    pytest.param("bnn", marks=pytest.mark.xfail(strict=True,
                                                reason="overconfident on pure noise")),
])
def test_pure_noise_nll_is_near_the_baseline(name):
    rng = np.random.default_rng(3)
    X, y = rng.uniform(size=(40, 6)), rng.standard_normal(40)
    Xt, yt = rng.uniform(size=(300, 6)), rng.standard_normal(300)
    base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
    model = make_surrogate(name, seed=0, quick=True).fit(X, y)
    assert _nll(model, Xt, yt) < base + 0.05


# Hartmann-3 (Dixon & Szegő 1978, "The global optimization problem: an introduction",
# Towards Global Optimisation 2; constants as tabulated there) on the first 3 of 16
# inputs: 13 inputs do not matter.
_A = np.array([[3, 10, 30], [0.1, 10, 35], [3, 10, 30], [0.1, 10, 35]])
_C = np.array([1.0, 1.2, 3.0, 3.2])
_P = 1e-4 * np.array([[3689, 1170, 2673], [4699, 4387, 7470],
                      [1091, 8732, 5547], [381, 5743, 8828]])


def _hartmann3_in_16(X):
    return -np.sum(_C * np.exp(-np.sum(_A * (X[:, None, :3] - _P) ** 2, axis=2)), axis=1)


def test_hartmann3_minimum_is_the_published_value():
    # Dixon & Szegő (1978): minimum -3.86278 at (0.114614, 0.555649, 0.852547)
    x = np.r_[0.114614, 0.555649, 0.852547, np.full(13, 0.5)][None]
    assert _hartmann3_in_16(x)[0] == pytest.approx(-3.86278, abs=1e-4)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["dngo", "bnn", "ensemble", "forest"])
def test_sixteen_inputs_three_matter_beats_the_baseline(name):
    rng = np.random.default_rng(0)
    X, Xt = rng.uniform(size=(150, 16)), rng.uniform(size=(300, 16))
    y = _hartmann3_in_16(X) + 0.05 * rng.standard_normal(150)
    yt = _hartmann3_in_16(Xt) + 0.05 * rng.standard_normal(300)
    base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
    assert _nll(make_surrogate(name, seed=0, quick=True).fit(X, y), Xt, yt) < base
