"""Plateau / bounded-objective detection (advisor/objective_shape.py)."""

import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

from advisor.objective_shape import objective_shape


def test_ceiling_plateau_detected_with_its_share():
    # The breast-cancer ceiling: an SVC predicting the majority class errs on the
    # minority share, 212/569 (scikit-learn's load_breast_cancer: 212 malignant, 357
    # benign; Wolberg et al. 1995 / the scikit-learn dataset docs).
    rng = np.random.default_rng(0)
    ceiling = 212 / 569
    y = np.concatenate([np.full(37, ceiling), rng.uniform(0.02, 0.1, 63)])
    out = objective_shape(y, objective="cv_error")
    assert out["plateau"]["trials"] == 37
    assert out["plateau"]["share"] == pytest.approx(0.37)
    assert out["plateau"]["value"] == pytest.approx(ceiling)
    assert out["plateau"]["position"] == "the highest value logged"
    assert out["bounds"]["low"] == 0.0 and out["bounds"]["high"] == 1.0
    assert any("plateau" in n for n in out["notes"])


def test_continuous_unbounded_objective_has_no_notes():
    # Continuous draws have no ties with probability one and take both signs.
    y = np.random.default_rng(1).standard_normal(200)
    out = objective_shape(y)
    assert out["plateau"] is None and out["bounds"] is None and out["notes"] == []


def test_yield_near_zero_flagged_as_bounded():
    rng = np.random.default_rng(2)
    y = np.concatenate([np.zeros(4), rng.uniform(0.0, 0.03, 30), rng.uniform(0.1, 0.8, 66)])
    out = objective_shape(y, objective="yield")
    assert [b["bound"] for b in out["near_bounds"]] == ["low"]
    assert any("bounded objective" in n for n in out["notes"])


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_mass_beyond_bounds_matches_normal_cdf(sign):
    # Held-out predictions centred on 0.02 with std 0.05, objective in [0, 1]: the mass
    # below 0 is Phi(-0.4) and above 1 is negligible (closed form of the normal CDF).
    y_raw = np.linspace(0.0, 0.9, 50)
    pred = pd.DataFrame({"surrogate": "m", "y": sign * y_raw,
                         "mean": sign * np.full(50, 0.02), "std": np.full(50, 0.05)})
    out = objective_shape(y_raw, predictions=pred, sign=sign)
    f = out["model_flags"]["m"]
    assert f["mass_outside_bounds"] == pytest.approx(norm.cdf(-0.4) + norm.sf(19.6), rel=1e-9)
    assert f["flag"] is True
    assert any("cannot represent" in n for n in out["notes"])


def test_model_inside_bounds_not_flagged():
    y_raw = np.linspace(0.2, 0.8, 50)
    pred = pd.DataFrame({"surrogate": "m", "y": y_raw, "mean": y_raw,
                         "std": np.full(50, 0.02)})
    out = objective_shape(y_raw, predictions=pred)
    # 0.2 is 10 std from 0: Phi(-10) ~ 8e-24, far below the 5% threshold.
    assert out["model_flags"]["m"]["flag"] is False


def test_ties_inside_the_range_of_a_discrete_measurement_are_not_a_plateau():
    # Error rates over 59 rows take few values; 12% ties in the middle are not a ceiling.
    y = np.concatenate([np.full(12, 3 / 59), np.arange(1, 45) / 59 / 100,
                        np.arange(1, 45) / 59 / 10 + 0.2])
    assert objective_shape(y)["plateau"] is None
