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


def test_backtest_breaks_a_tie():
    rng = np.random.default_rng(2)
    y, mu, fold = _preds(rng)
    preds = {"a": _entry(y, mu, 0.3, fold), "b": _entry(y, mu + 1e-6, 0.3, fold)}
    r = rank_surrogates(preds, {}, {"a": 1.0, "b": 1.0}, backtest_score={"a": 0.5, "b": 0.2})
    assert r.table["surrogate"].iloc[0] == "b"


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
