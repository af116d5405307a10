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
    "dngo",
    # known gap (issue 14): these still fit noise on 40 rows; see the branch report
    pytest.param("bnn", marks=pytest.mark.xfail(reason="overconfident on pure noise")),
    pytest.param("ensemble", marks=pytest.mark.xfail(reason="overconfident on pure noise")),
])
def test_pure_noise_nll_is_near_the_baseline(name):
    rng = np.random.default_rng(3)
    X, y = rng.uniform(size=(40, 6)), rng.standard_normal(40)
    Xt, yt = rng.uniform(size=(300, 6)), rng.standard_normal(300)
    base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
    model = make_surrogate(name, seed=0, quick=True).fit(X, y)
    assert _nll(model, Xt, yt) < base + 0.05
