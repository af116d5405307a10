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
    "dngo", "ensemble", "neural_process", "forest",
    # known gap (issue 14), measured NLL against the baseline's 1.471 + 0.05: the GP
    # family fits by type-II maximum likelihood by default, which picks short length
    # scales and little noise on 40 rows of noise (gp 3.54, warped gp 3.06, campaign gp
    # 1.66); the length-scale prior that fixed it (hyperprior=True: 1.473, 1.473, 1.468)
    # cost regret in real next campaigns (advisor/surrogates/gp/__init__.py), so it is
    # off by default
    *[pytest.param(n, marks=pytest.mark.xfail(strict=True, reason="overconfident on "
                                              "pure noise"))
      for n in ("gp", "warped_gp", "campaign_gp")],
    # the BNN (1.486) since its weight precision is Gibbs-sampled only once the sampler's
    # preconditioner is frozen: before, the scale-adapting burn-in ran hot (the weights
    # at 2.2-2.4 times their prior variance, measured with the precision held at 1) and
    # the precision draws followed it down, 3 -> 0.09 (quick, NLL 1.731) and to ~0 over
    # the thorough chain (NLL 3.49)
    "bnn",
])
def test_pure_noise_nll_is_near_the_baseline(name):
    rng = np.random.default_rng(3)
    X, y = rng.uniform(size=(40, 6)), rng.standard_normal(40)
    Xt, yt = rng.uniform(size=(300, 6)), rng.standard_normal(300)
    base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
    model = make_surrogate(name, seed=0, quick=True).fit(X, y)
    assert _nll(model, Xt, yt) < base + 0.05


@pytest.mark.slow
@pytest.mark.parametrize("name, options, n_logs, bound", [
    ("gp", {"hyperprior": True}, 20, 4), ("forest", {}, 10, 3)])
def test_pure_noise_fallback_rate_over_seeds(name, options, n_logs, bound):
    # Seeded pure-noise logs as above: how many give a held-out NLL more than 0.05 above
    # the baseline's.  Measured: gp with its opt-in length-scale prior 2 of 20 (19 of 20
    # by type-II maximum likelihood, the default: see advisor/surrogates/gp/__init__.py
    # for why), forest 2 of 10 (3 of 20) (binomial Monte-Carlo se of a share p from m
    # logs: sqrt(p (1 - p) / m), 0.07 and 0.13); before the out-of-bag calibration the
    # forest was 17 of 20.  Bounds (our choice): about 2 se above the measured shares.
    # The forest runs 10 logs to keep the test to a few seconds.
    worse = 0
    for s in range(n_logs):
        rng = np.random.default_rng(100 + s)
        X, y = rng.uniform(size=(40, 6)), rng.standard_normal(40)
        Xt, yt = rng.uniform(size=(300, 6)), rng.standard_normal(300)
        base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
        model = make_surrogate(name, seed=0, quick=True, **options).fit(X, y)
        worse += _nll(model, Xt, yt) > base + 0.05
    assert worse <= bound


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
@pytest.mark.parametrize("name", ["gp", "campaign_gp", "warped_gp", "forest", "dngo", "bnn",
                                  "ensemble", "neural_process"])
def test_sixteen_inputs_three_matter_beats_the_baseline(name):
    rng = np.random.default_rng(0)
    X, Xt = rng.uniform(size=(150, 16)), rng.uniform(size=(300, 16))
    y = _hartmann3_in_16(X) + 0.05 * rng.standard_normal(150)
    yt = _hartmann3_in_16(Xt) + 0.05 * rng.standard_normal(300)
    base = _nll(make_surrogate("baseline").fit(X, y), Xt, yt)
    assert _nll(make_surrogate(name, seed=0, quick=True).fit(X, y), Xt, yt) < base


# -- the sample logs, under forward chaining and leave-one-campaign-out ---------------
_LOGS = {
    "moulding": dict(path="moulding_warpage.csv", objective="warpage_mm", campaign="lot",
                     order="run"),
    "fermentation": dict(path="fermentation_yield.csv", objective="yield_g_per_l",
                         direction="maximize", campaign="batch_series", order="run",
                         status="outcome", success=["ok"]),
    "forecast": dict(path="forecast_tuning.csv", objective="val_mape", campaign="search_round",
                     order="trial", space="forecast_tuning.space.toml"),
}
_BUILTIN_MODELS = ["gp", "campaign_gp", "warped_gp", "forest", "dngo", "bnn", "ensemble",
                   "neural_process"]
#: (log, scheme, model) cases where the model still loses to the baseline: known gaps,
#: kept visible.  Empty when every built-in model wins everywhere.
_KNOWN_LOSSES: set = set()
_FOLD_CACHE = {}


def _last_fold(log, scheme):
    """The log's trials, features per encoding and the last fold of the scheme (the
    largest training set under forward chaining; the last campaign left out)."""
    from pathlib import Path

    import advisor
    from advisor.validation import choose_scheme
    if (log, scheme) not in _FOLD_CACHE:
        kw = dict(_LOGS[log])
        root = Path(__file__).resolve().parent.parent / "sample_logs"
        path = root / kw.pop("path")
        if "space" in kw:
            kw["space"] = root / kw["space"]
        t = advisor.load_trials(path, **kw)
        groups = np.asarray(t.groups)
        ch = choose_scheme(scheme, order=t.order_values, groups=groups, n_rows=t.n_used, seed=0,
                           quick=True)
        X = t.features("onehot")
        train, test = list(ch.splitter.split(X, t.y, groups))[-1]
        _FOLD_CACHE[log, scheme] = (t, groups, train, test)
    return _FOLD_CACHE[log, scheme]


def _fold_nll(name, log, scheme):
    from advisor.assessment import _encoding_of, _fit_predict_task
    t, groups, train, test = _last_fold(log, scheme)
    X = t.features(_encoding_of(name))
    out = _fit_predict_task(name, 0, X, t.y, groups, train, test, seed=0, quick=True,
                            options={})
    assert out["error"] is None, out["error"]
    if "nll_pt" in out:      # a non-Gaussian predictive distribution (warped GP)
        return float(np.mean(out["nll_pt"]))
    return float(-norm.logpdf(t.y[test], out["mean"], out["std"]).mean())


def _log_cases():
    for log in _LOGS:
        for scheme in ("forward", "campaign"):
            for name in _BUILTIN_MODELS:
                marks = ([pytest.mark.xfail(strict=True, reason="known gap (issue 14)")]
                         if (log, scheme, name) in _KNOWN_LOSSES else [])
                yield pytest.param(log, scheme, name, marks=marks,
                                   id=f"{log}-{scheme}-{name}")


@pytest.mark.slow
@pytest.mark.parametrize("log, scheme, name", list(_log_cases()))
def test_sample_log_nll_beats_the_baseline(log, scheme, name):
    # One fold per (log, scheme) — the last — keeps this affordable; the full-fold table
    # is in the README ("Does every model know more than nothing?").  The baseline is
    # the knowing-nothing predictor of the same fold.
    assert _fold_nll(name, log, scheme) < _fold_nll("baseline", log, scheme)
