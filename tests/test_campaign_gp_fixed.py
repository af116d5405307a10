"""The campaign GP's fixed-hyperparameter refit (the backtest's cheap update)."""

from __future__ import annotations

import numpy as np
import pytest

from advisor.backtest import plan_for
from advisor.backtest._pool import update_paths
from advisor.surrogates.gp_campaign import CampaignGP


def _branin(X):
    # Branin-Hoo on [-5, 10] x [0, 15] (Dixon & Szegő 1978; the form of Surjanovic &
    # Bingham 2013)
    x1, x2 = 15 * X[:, 0] - 5, 15 * X[:, 1]
    return ((x2 - 5.1 / (4 * np.pi ** 2) * x1 ** 2 + 5 / np.pi * x1 - 6) ** 2
            + 10 * (1 - 1 / (8 * np.pi)) * np.cos(x1) + 10)


def _log(rng, n, campaigns=3):
    X = rng.uniform(0, 1, (n, 2))
    g = np.repeat(np.arange(campaigns), n // campaigns + 1)[:n]
    y = _branin(X) + 5.0 * g + rng.normal(0, 1.0, n)
    return X, y, g


def test_refit_on_the_same_data_reproduces_the_full_fit_and_holds_its_hyperparameters():
    # Same hyperparameters and data give the same posterior (the GP posterior is a
    # closed form of them, Rasmussen & Williams 2006, Eqs. 2.42-2.45); on more data the
    # hyperparameters stay those of the full fit while the prediction moves.
    rng = np.random.default_rng(0)
    X, y, g = _log(rng, 45)
    full = CampaignGP(seed=0, quick=True).fit(X[:30], y[:30], g[:30])
    same = full.with_fixed_hyperparameters().fit(X[:30], y[:30], g[:30])
    Xt = rng.uniform(0, 1, (20, 2))
    for a, b in zip(full.predict(Xt, g[:20]), same.predict(Xt, g[:20])):
        np.testing.assert_allclose(a, b, rtol=1e-6, atol=1e-8)
    more = full.with_fixed_hyperparameters().fit(X, y, g)
    np.testing.assert_allclose(more.length_scales_, full.length_scales_, rtol=1e-9)
    assert more.noise_std_ == pytest.approx(full.noise_std_, rel=1e-9)
    assert more.between_campaign_sd_ == pytest.approx(full.between_campaign_sd_, rel=1e-9)
    assert not np.allclose(more.predict(Xt)[0], full.predict(Xt)[0])


def test_the_backtest_updates_the_campaign_gp_every_step():
    paths = update_paths(CampaignGP(seed=0, quick=True), plan_for(True))
    assert paths["between_refits"] == "fixed_hyperparameters"
