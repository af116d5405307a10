"""The ranking rule on predictions whose quality is known by construction."""

import numpy as np
import pytest

from advisor.ranking import rank_surrogates


def _preds(rng, n=200, folds=5):
    mu = rng.normal(size=n)
    y = mu + rng.normal(0, 0.3, n)
    fold = np.arange(n) % folds
    return y, mu, fold


def _entry(y, mean, std, fold):
    return {"y": y, "mean": mean, "std": np.broadcast_to(std, y.shape).astype(float),
            "fold": fold}


def test_true_model_leads_and_failed_model_is_last():
    rng = np.random.default_rng(0)
    y, mu, fold = _preds(rng)
    preds = {
        "truth": _entry(y, mu, 0.3, fold),                       # the generating model
        "blurred": _entry(y, mu + rng.normal(0, 0.5, len(y)), 0.6, fold),
        "constant": _entry(y, np.full_like(y, y.mean()), y.std(), fold),
    }
    # Four campaigns x five folds = 20 blocks: with five blocks alone the sign-flip
    # test's smallest p-value is 2/2^5 = 0.0625 and "high" can never be said.
    for p in preds.values():
        p["campaign"] = (np.arange(len(y)) // 5) % 4
    r = rank_surrogates(preds, {"broken": ["ValueError: x"]},
                        {"truth": 1.0, "blurred": 1.0, "constant": 0.01, "broken": 1.0})
    names = r.table["surrogate"].tolist()
    assert names[0] == "truth" and names[-1] == "broken"
    assert r.leader == "truth"
    row = r.table.set_index("surrogate")
    # constant mean cannot order anything: it fails the ordering guard rail
    assert not row.loc["constant", "guard_order"]
    assert row.loc["blurred", "crps_diff_low"] > 0          # clearly worse, not tied
    assert row.loc["truth", "p_best"] > 0.9
    assert r.confidence == "high"
    assert any("ranked last" in s for s in r.reasons["broken"])


def test_identical_models_are_tied_and_confidence_is_not_high():
    rng = np.random.default_rng(1)
    y, mu, fold = _preds(rng)
    preds = {"a": _entry(y, mu, 0.3, fold), "b": _entry(y, mu + 1e-9, 0.3, fold)}
    r = rank_surrogates(preds, {}, {"a": 1.0, "b": 1.0})
    assert r.table["tied_with_leader"].all()
    assert r.confidence != "high"


def test_only_a_significant_paired_test_breaks_a_tie():
    # Rule 5: a backtest score alone (the former tie-breaker, which picked between
    # equal models at random, tests/test_decision.py) reorders nothing; a tied model
    # the paired test found better goes first, and a model outside the tie cannot.
    rng = np.random.default_rng(2)
    y, mu, fold = _preds(rng)
    preds = {"a": _entry(y, mu, 0.3, fold), "b": _entry(y, mu + 1e-6, 0.3, fold),
             "c": _entry(y, mu + rng.normal(0, 0.6, len(y)), 0.7, fold)}
    for p in preds.values():
        p["campaign"] = (np.arange(len(y)) // 5) % 4
    fit = {"a": 1.0, "b": 1.0, "c": 1.0}
    r = rank_surrogates(preds, {}, fit, backtest_score={"a": 0.5, "b": 0.2})
    assert r.table["surrogate"].iloc[0] == "a" and r.tie_winner is None
    assert "mean CRPS keeps its order" in r.statement
    r = rank_surrogates(preds, {}, fit, tie_winner="b", tie_evidence="p = 0.004 < 0.05")
    assert r.table["surrogate"].iloc[0] == "b" and r.tie_winner == "b"
    assert "p = 0.004" in r.statement and r.confidence == "low"
    assert not r.table.set_index("surrogate").loc["c", "tied_with_leader"]
    r = rank_surrogates(preds, {}, fit, tie_winner="c")
    assert r.table["surrogate"].iloc[0] == "a" and r.tie_winner is None


def test_overconfident_model_is_scaled_when_scale_rescues_coverage():
    rng = np.random.default_rng(3)
    y, mu, fold = _preds(rng)
    preds = {"sharp": _entry(y, mu, 0.1, fold)}   # true noise 0.3: 3x overconfident
    r = rank_surrogates(preds, {}, {"sharp": 1.0}, scales={"sharp": 3.0},
                        scaled_coverage={"sharp": 0.9})
    row = r.table.iloc[0]
    assert row["variance_scale"] == pytest.approx(3.0)
    assert row["guard_coverage"]
    assert any("scaled by 3.00" in s for s in r.reasons["sharp"])


def test_same_seed_same_ranking():
    rng = np.random.default_rng(4)
    y, mu, fold = _preds(rng)
    preds = {"a": _entry(y, mu, 0.3, fold), "b": _entry(y, mu + 0.05, 0.3, fold)}
    t1 = rank_surrogates(preds, {}, {"a": 1, "b": 1}, seed=7).table
    t2 = rank_surrogates(preds, {}, {"a": 1, "b": 1}, seed=7).table
    assert t1.equals(t2)


def _campaign_sim(rng, camp_sd, n_models=2, worse_sd=0.0):
    """96 held-out points, 4 campaigns x 4 folds x 6; each model has its own error per
    campaign x fold cell (sd ``camp_sd``), so errors are correlated within blocks.  The
    last model's mean carries extra noise of sd ``worse_sd`` (0: all models equal)."""
    C, F, k = 4, 4, 6
    camp = np.repeat(np.arange(C), F * k)
    fold = np.tile(np.repeat(np.arange(F), k), C)
    n = len(camp)
    f = rng.normal(size=n)
    y = f + rng.normal(0, 0.3, n)
    preds = {}
    for j in range(n_models):
        bias = rng.normal(0, camp_sd, (C, F))[camp, fold]
        extra = worse_sd if j == n_models - 1 else 0.0
        mu = f + bias + rng.normal(0, 0.3, n) + rng.normal(0, 1, n) * extra
        sd = np.sqrt(0.18 + camp_sd**2 + extra**2)
        preds[f"m{j}"] = {"y": y, "mean": mu, "std": np.full(n, sd), "fold": fold,
                          "campaign": camp}
    return preds


@pytest.mark.slow
@pytest.mark.parametrize("camp_sd", [0.0, 0.5])
@pytest.mark.parametrize("n_models", [2, 4])
def test_equal_models_rarely_called_untied(camp_sd, n_models):
    # 150 seeded runs: at a true rate of 5% the Monte-Carlo SE is 1.8 points, so the
    # 7% bound is about one SE above nominal (issue 13's check).  Without the block
    # structure (old paired point bootstrap) these runs gave 7-69%.
    rng = np.random.default_rng(13)
    runs, untied, high, moderate_or_high = 150, 0, 0, 0
    for r in range(runs):
        p = _campaign_sim(rng, camp_sd, n_models)
        rk = rank_surrogates(p, {}, {k: 1.0 for k in p}, seed=r)
        untied += bool((~rk.table["tied_with_leader"]).any())
        high += rk.confidence == "high"
        moderate_or_high += rk.confidence in ("high", "moderate")
    assert untied / runs <= 0.07
    # "high" is a false claim whenever models are equal: at most 5% + 1 MC SE.
    assert high / runs <= 0.07
    # "moderate" or better is claimed at its stated rate (README: at most ~20%);
    # 0.26 = 0.20 + 2 MC SE (SE 3.3 points at 20%).
    assert moderate_or_high / runs <= 0.26


@pytest.mark.slow
def test_better_model_is_detected():
    # Effect: the worse model's mean has extra noise of sd 0.6 (its CRPS is about 25%
    # higher), with strong campaign effects.  Detected = the better model leads and the
    # worse one is outside the 95% set; required in at least 80% of 100 runs
    # (MC SE 4 points at 80%).
    rng = np.random.default_rng(31)
    runs, hit = 100, 0
    for r in range(runs):
        p = _campaign_sim(rng, 0.3, 2, worse_sd=0.6)
        rk = rank_surrogates(p, {}, {k: 1.0 for k in p}, seed=r)
        row = rk.table.set_index("surrogate")
        hit += rk.leader == "m0" and not row.loc["m1", "tied_with_leader"]
    assert hit / runs >= 0.80


def test_mcs_two_models_matches_exact_sign_flip_test():
    # With two models and few blocks the T_max rule is the two-sided sign-flip test of
    # the block sums of the loss difference (Fisher 1935 randomization test); its exact
    # p-value is the share of all 2^g sign patterns at least as extreme.
    from itertools import product
    from advisor.ranking import model_confidence_set
    rng = np.random.default_rng(5)
    blocks = np.repeat(np.arange(8), 3)
    la = rng.normal(1.0, 0.2, 24)
    lb = la + rng.normal(0.05, 0.1, 24)
    pv = model_confidence_set(np.vstack([la, lb]), blocks, 20000, rng)
    diff = np.bincount(blocks, la - lb)
    obs = abs(diff.sum())
    exact = np.mean([abs((np.array(s) * diff).sum()) >= obs - 1e-12
                     for s in product([-1, 1], repeat=8)])
    assert pv.min() == pytest.approx(exact, abs=0.01)   # 20,000 draws: MC SE < 0.004
    assert pv.max() == 1.0


def test_own_point_scores_replace_the_gaussian_forms_and_get_no_scale():
    # A predictive that supplies its own per-point CRPS/PIT: here the Gaussian values
    # computed with scipy's normal CDF/PDF (Gneiting et al. 2005 Eq. 5), doubled for
    # CRPS, so the model must score exactly twice the closed form and get scale 1.
    from scipy import stats
    rng = np.random.default_rng(8)
    y, mu, fold = _preds(rng)
    z = (y - mu) / 0.3
    crps = 0.3 * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / np.sqrt(np.pi))
    own = _entry(y, mu, 0.3, fold) | {"crps_pt": 2 * crps, "pit": stats.norm.cdf(z),
                                      "nll_pt": stats.norm.logpdf(z) * -1}
    r = rank_surrogates({"own": own}, {}, {"own": 1.0}, scales={"own": 3.0},
                        scaled_coverage={"own": 0.9})
    row = r.table.iloc[0]
    assert row["crps"] == pytest.approx(2 * crps.mean())
    assert row["variance_scale"] == 1.0
    assert row["coverage_90"] == pytest.approx(np.mean(np.abs(z) <= stats.norm.ppf(0.95)))


def test_too_wide_passes_the_coverage_guard_too_narrow_fails():
    # Truth: y = mu + N(0, 0.3^2).  "wide" predicts N(mu, 1) with its own per-point
    # scores (a non-Gaussian-style predictive: no variance scale can narrow it); its 90%
    # interval covers P(|N(0, 0.3^2)| <= 1.645) = 1 - 4e-8 of the points (closed form,
    # scipy), above the 97% bound: too wide, which CRPS charges for, so it passes
    # (noted).  "narrow" predicts N(mu, 0.05^2): coverage 2 Phi(1.645 * 0.05 / 0.3) - 1
    # = 0.22, overconfident, and with no scale to rescue it fails the guard rail.
    from scipy import stats
    rng = np.random.default_rng(5)
    y, mu, fold = _preds(rng)
    wide = _entry(y, mu, 1.0, fold)
    z = y - mu
    wide.update(nll_pt=-stats.norm.logpdf(z, scale=1.0),
                crps_pt=z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z)
                - 1 / np.sqrt(np.pi),
                pit=stats.norm.cdf(z, scale=1.0))
    preds = {"truth": _entry(y, mu, 0.3, fold), "wide": wide,
             "narrow": _entry(y, mu, 0.05, fold)}
    assert 2 * stats.norm.cdf(1.645 * 0.05 / 0.3) - 1 < 0.80
    r = rank_surrogates(preds, {}, {"truth": 1.0, "wide": 1.0, "narrow": 1.0})
    t = r.table.set_index("surrogate")
    assert t.loc["wide", "coverage_90"] > 0.97
    assert t.loc["wide", "guard_coverage"] and t.loc["wide", "coverage_wide"]
    assert not t.loc["narrow", "guard_coverage"] and not t.loc["narrow", "coverage_wide"]
    assert t.loc["truth", "guard_coverage"] and not t.loc["truth", "coverage_wide"]
    assert any("wider than needed" in s for s in r.reasons["wide"])
    names = r.table["surrogate"].tolist()
    assert names[0] == "truth" and names.index("wide") < names.index("narrow")
