"""The network surrogates' warm start (``warm_started()``) and the backtest path that
uses it.

The backtest's scheduled re-fits within a simulated campaign start from the last fit
(:mod:`advisor.backtest._pool`); for the deep ensemble and DNGO that means continuing
Adam from the trained weights on the grown training set for a tenth of the steps, for
the SGHMC network a chain from the last draw a quarter as long.  These
checks compare it with the stale model (the previous fit, what the backtest used between
full fits) and with a full refit, on Branin (a published test function, closed form),
and with an external yardstick (scikit-learn's GP on the same rows).
"""

import math

import numpy as np
import pytest
from scipy.stats import norm
from sklearn.gaussian_process import GaussianProcessRegressor
from sklearn.gaussian_process.kernels import ConstantKernel, Matern, WhiteKernel

from advisor.acquisition import AcquisitionSetting
from advisor.backtest import plan_for, replay_pool
from advisor.backtest._pool import update_paths
from advisor.surrogates import make_surrogate


def branin(X):
    """Branin-Hoo on [-5, 10] x [0, 15] (Dixon & Szego 1978; Surjanovic & Bingham,
    Virtual Library of Simulation Experiments)."""
    x1, x2 = X[:, 0], X[:, 1]
    b, c, t = 5.1 / (4 * math.pi ** 2), 5 / math.pi, 1 / (8 * math.pi)
    return (x2 - b * x1 ** 2 + c * x1 - 6) ** 2 + 10 * (1 - t) * np.cos(x1) + 10


_LO, _HI = np.array([-5.0, 0.0]), np.array([10.0, 15.0])
_NOISE = 5.0  # about 2% of Branin's range on the box (our choice)


def _grown(seed, n0, k, n_test=400):
    """n0 rows in the left half of the box, then k rows in the right half; test rows in
    the right half (where only the new rows say anything)."""
    rng = np.random.default_rng(seed)
    u0 = rng.uniform(size=(n0, 2)) * [0.5, 1.0]
    u1 = rng.uniform(size=(k, 2)) * [0.5, 1.0] + [0.5, 0.0]
    ut = rng.uniform(size=(n_test, 2)) * [0.5, 1.0] + [0.5, 0.0]
    X = _LO + (_HI - _LO) * np.vstack([u0, u1])
    Xt = _LO + (_HI - _LO) * ut
    y = branin(X) + _NOISE * rng.standard_normal(len(X))
    yt = branin(Xt) + _NOISE * rng.standard_normal(n_test)
    return X, y, Xt, yt


def _nll(model, Xt, yt):
    mu, sd = model.predict(Xt)
    return float(-norm.logpdf(yt, mu, sd).mean())


@pytest.mark.slow
@pytest.mark.parametrize("name,seeds", [("ensemble", 16), ("dngo", 4), ("bnn", 3)])
def test_warm_start_learns_the_new_rows_about_as_well_as_a_full_refit(name, seeds):
    # The backtest's quick runs re-fit at 4-10 rows (below the networks' 15-row
    # threshold for a held-out slice), where a full fit is hundreds of Adam (SGHMC)
    # steps from a random start.  5 rows in the left half of the box, then 5 in the
    # right half, tested on the right half; the warm start's median held-out NLL over
    # the seeds beats the stale model's (the previous fit, what the backtest used
    # between full fits) and is within 1 nat of a full refit's (our margin).  Measured
    # medians (stale / warm / full, 4 seeds): ensemble 27.1 / 10.1 / 9.4 (per seed the
    # warm start was the worse of the two in 2 of 4: a median, not every seed), DNGO
    # 140 / 7.0 / 186, SGHMC network 5.77 / 5.51 / 5.31.  The ensemble's per-seed NLLs
    # spread widely (4.7-47), so a median of 4 moved with the machine: on an Intel Xeon
    # host (stop 31; the figures above are from an AMD EPYC one, same package versions,
    # torch's CPU kernels differ) its 4 seeds gave warm 14.2 against full 11.7, and 16
    # seeds 7.5 against 10.4 (12 seeds: 9.6 / 11.7), hence 16 seeds for it (about 12 s).
    # scikit-learn's GP on the
    # same rows is an external yardstick: a calibrated model does better than both
    # networks here (the check fails if the problem or its NLL were broken).  About 5
    # (ensemble, DNGO) and 10 (BNN) CPU s.
    stale, warm, full, gp = [], [], [], []
    n0, k = 5, 5
    for seed in range(seeds):
        X, y, Xt, yt = _grown(seed, n0, k)
        base = make_surrogate(name, seed=seed, quick=True).fit(X[:n0], y[:n0])
        w = base.warm_started().fit(X, y)
        assert w.info_["warm_start"] is True
        stale.append(_nll(base, Xt, yt))
        warm.append(_nll(w, Xt, yt))
        full.append(_nll(make_surrogate(name, seed=seed, quick=True).fit(X, y), Xt, yt))
        ref = GaussianProcessRegressor(
            ConstantKernel() * Matern(nu=2.5, length_scale=[1, 1])
            + WhiteKernel(noise_level_bounds=(1e-8, 1e5)), normalize_y=True,
            random_state=0).fit(X, y)
        mu, sd = ref.predict(Xt, return_std=True)
        gp.append(float(-norm.logpdf(yt, mu, sd).mean()))
    assert np.median(warm) < np.median(stale)
    assert np.median(warm) <= np.median(full) + 1.0
    assert np.median(gp) < min(np.median(warm), np.median(full))


def test_warm_start_on_rows_that_do_not_extend_the_fit_is_a_full_fit():
    # Only a grown training set (the old rows first, unchanged) is warm-started; any
    # other data gets exactly the fresh fit of the same seed.
    X, y, Xt, _ = _grown(0, 12, 6)
    base = make_surrogate("ensemble", seed=3, quick=True).fit(X[:12], y[:12])
    other = np.roll(np.arange(len(y)), 1)  # same rows, another order: not an extension
    w = base.warm_started().fit(X[other], y[other])
    fresh = make_surrogate("ensemble", seed=3, quick=True).fit(X[other], y[other])
    assert w.info_["warm_start"] is False
    np.testing.assert_array_equal(w.predict(Xt)[0], fresh.predict(Xt)[0])
    with pytest.raises(ValueError, match="fitted"):
        make_surrogate("ensemble", seed=0, quick=True).warm_started()


def test_warm_start_keeps_the_previous_held_out_rows_out():
    # 30 rows: 5 held out (max(round(0.15 * 30), 5)); 10 new rows add round(0.15 * 10)
    # = 2 held-out rows of their own, and the old 5 stay out (the networks trained on
    # the other 25; holding those out now would score the early stopping and the
    # variance scale on rows already learnt).
    X, y, _, _ = _grown(1, 30, 10)
    base = make_surrogate("ensemble", seed=0, quick=True).fit(X[:30], y[:30])
    assert base.info_["held_out_rows"] == 5
    w = base.warm_started().fit(X, y)
    assert w.info_["held_out_rows"] == 7
    assert set(base._val_idx) <= set(w._val_idx)
    assert set(w._val_idx) - set(base._val_idx) <= set(range(30, 40))


def test_backtest_takes_the_warm_path_for_the_ensemble_and_says_so():
    # The backtest reads the path from the model's protocol members, not its name:
    # the networks and the GP offer warm_started(), the forest nothing; the GP's class
    # keeps it out of the backtest's scheduled re-fits (warm_reoptimize = False).
    plan = plan_for(True)
    paths = {n: update_paths(make_surrogate(n, seed=0, quick=True), plan)
             for n in ("ensemble", "dngo", "bnn", "gp", "forest")}
    for n in ("ensemble", "dngo", "bnn"):
        assert paths[n]["scheduled_refit"] == "warm_started"
        assert paths[n]["between_refits"] == "kept"
    assert paths["gp"] == {"first_fit": "full", "scheduled_refit": "full",
                           "between_refits": "fixed_hyperparameters",
                           "reoptimize_on_doubling": True}
    assert paths["forest"]["scheduled_refit"] == "full"
    assert update_paths(make_surrogate("ensemble", seed=0, quick=True),
                        plan_for(True, reoptimize_every=None))["scheduled_refit"] == "full"

    # and a pool run does it: start of 5, 6 picks, every step refitted on schedule ->
    # the first fit full, the re-fit at 10 rows (doubled) warm-started from it
    import pandas as pd

    from advisor.space import Parameter, ParameterSpace

    rng = np.random.default_rng(2)
    U = rng.uniform(size=(40, 2))
    frame = pd.DataFrame(_LO + (_HI - _LO) * U, columns=["x1", "x2"])
    space = ParameterSpace([Parameter("x1", "continuous", -5.0, 10.0),
                            Parameter("x2", "continuous", 0.0, 15.0)])
    cache: dict = {}
    replay_pool(lambda name, seed=0, quick=True: make_surrogate(name, seed=seed, quick=True),
                "ensemble", AcquisitionSetting("ei", {"xi": 0.01}), space, frame,
                branin(frame.to_numpy()), list(range(5)), n_picks=6, quick=True,
                cache=cache, reoptimize_every=5)
    kinds = sorted(k[0] for k in cache)
    assert kinds == ["full", "warm"]
    warm = next(m for k, m in cache.items() if k[0] == "warm")
    assert warm.info_["warm_start"] is True and len(warm._train_y) == 10
