"""The planning stage tells a model with ``uses_groups`` each trial's campaign.

A synthetic log of four campaigns with large known offsets (-3, -1, +1, +3 times the
function's sd) over an additive function of three parameters, one inert:

    f(x1, x2, x3) = 2 x1 + cos(pi x2),   x ~ U(0, 1)^3,   y = f + offset_c + N(0, 0.1^2)

Closed-form Sobol indices of an additive function (Sobol' 2001; Saltelli et al. 2010,
Sec. 2): each term's variance over the total, first-order = total.  Var(2 x1) = 4/12,
Var(cos(pi x2)) = 1/2 (mean 0, mean square 1/2), so S1 = ST1 = 0.4, S2 = ST2 = 0.6 and
x3 has index 0.  Told the campaigns, the campaign GP learns the offsets; pooled (the
planning stage before, ``fit(X, y)``) they look like noise of variance 5 Var(f).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from threadpoolctl import threadpool_limits

from advisor import planning as P
from advisor.acquisition import AcquisitionSetting
from advisor.execution import task_seed
from advisor.logs import TrialTable
from advisor.planning import _proposals
from advisor.space import ParameterSpace
from advisor.surrogates import make_surrogate
from advisor.surrogates.base import latent_predictions
from advisor.surrogates.gp_campaign import CampaignGP

NOISE = 0.1
F_SD = math.sqrt(4 / 12 + 1 / 2)
OFFSETS = {"c1": -3 * F_SD, "c2": -F_SD, "c3": F_SD, "c4": 3 * F_SD}
TRUE_TOTAL = np.array([0.4, 0.6, 0.0])


@pytest.fixture(autouse=True)
def _one_blas_thread():
    with threadpool_limits(1):
        yield


def _f(X):
    return 2 * X[:, 0] + np.cos(np.pi * X[:, 1])


def _campaign_log(seed: int = 0, per_campaign: int = 20) -> TrialTable:
    rng = np.random.default_rng(seed)
    n = per_campaign * len(OFFSETS)
    X = rng.uniform(0, 1, (n, 3))
    camp = np.repeat(list(OFFSETS), per_campaign)
    y = _f(X) + np.array([OFFSETS[c] for c in camp]) + NOISE * rng.normal(size=n)
    frame = pd.DataFrame(X, columns=["x1", "x2", "x3"])
    frame["campaign"] = camp
    frame["y"] = y
    frame["_line"] = np.arange(n) + 2
    space = ParameterSpace.infer(frame, ["x1", "x2", "x3"])
    return TrialTable(frame=frame, ok=np.ones(n, bool), space=space, objective="y",
                      direction="minimize", campaign="campaign")


class _Pooled(CampaignGP):
    """The campaign GP as the planning stage called it before: never told campaigns."""

    uses_groups = False


def _make_pooled(name, seed=0, quick=False):
    return _Pooled(**make_surrogate(name, seed=seed, quick=quick).get_params())


@pytest.fixture(scope="module")
def trials():
    return _campaign_log()


def test_grouped_relevance_matches_closed_form(trials):
    with threadpool_limits(1):
        rel = P.parameter_relevance(trials, "campaign_gp", seed=0, quick=True)
    rows = {p["name"]: p for p in rel["parameters"]}
    total = np.array([rows[n]["total"] for n in ("x1", "x2", "x3")])
    # 0.05: Monte-Carlo error of 512 base rows plus the fit's error on 80 trials
    np.testing.assert_allclose(total, TRUE_TOTAL, atol=0.05)
    inert = rows["x3"]
    assert inert["total_interval"][1] < P.TOTAL_EFFECT_FREEZE
    # Permuting an inert input leaves the predictions' error unchanged
    assert abs(inert["permutation_importance"]) < 0.01
    assert inert["permutation_interval"][1] < P.PERMUTATION_FREEZE
    assert inert["freeze"] and not rows["x1"]["freeze"] and not rows["x2"]["freeze"]


def test_pooled_relevance_reads_the_function_worse(trials):
    """The same analysis without campaigns (as before): its total indices lie farther
    from the closed form than the grouped fit's."""
    with threadpool_limits(1):
        grouped = P.parameter_relevance(trials, "campaign_gp", seed=0, quick=True,
                                        n_refits=4)
        pooled = P.parameter_relevance(trials, "campaign_gp", seed=0, quick=True,
                                       n_refits=4, make=_make_pooled)
    err = {k: np.abs(np.array([p["total"] for p in r["parameters"]]) - TRUE_TOTAL).sum()
           for k, r in (("grouped", grouped), ("pooled", pooled))}
    assert err["grouped"] < err["pooled"]


def test_grouped_learning_curve_beats_pooled(trials):
    """Same splits (same seed), CRPS at the largest training size: lower with the
    campaigns in every repeat, and near the floor of a perfect forecast, the CRPS of
    N(mu, sigma^2) for its own outcomes, sigma / sqrt(pi) (Gneiting & Raftery 2007,
    JASA 102, Eq. 21 at the true distribution)."""
    with threadpool_limits(1):
        grouped = P.learning_curve(trials, "campaign_gp", seed=0, quick=True)
        pooled = P.learning_curve(trials, "campaign_gp", seed=0, quick=True,
                                  make=_make_pooled)
    g = np.array(grouped["points"][-1]["crps"], dtype=float)
    p = np.array(pooled["points"][-1]["crps"], dtype=float)
    assert grouped["points"][-1]["n_train"] == pooled["points"][-1]["n_train"]
    assert np.all(g < p)
    floor = NOISE / math.sqrt(math.pi)
    # 2x the floor: the fitted function, noise and offsets are estimates from 64 trials
    assert np.mean(g) < 2 * floor
    # pooled, the offsets (variance 5 Var(f), 20x the noise's sd) are noise to it
    assert np.mean(p) > 10 * floor


class _Recorder:
    """A user model that records how it is called (no ``uses_groups``): least squares
    with the residual sd as its predictive sd."""

    calls: list = []

    def __init__(self, seed=0):
        self.seed = seed

    def _fit(self, X, y):
        A = np.c_[np.ones(len(X)), X]
        self.coef_ = np.linalg.lstsq(A, y, rcond=None)[0]
        self.sd_ = float(np.std(y - A @ self.coef_)) or 1.0
        return self

    def _predict(self, X):
        return np.c_[np.ones(len(X)), X] @ self.coef_, np.full(len(X), self.sd_)

    def fit(self, *args, **kwargs):
        type(self).calls.append(("fit", len(args), tuple(sorted(kwargs))))
        return self._fit(*args)

    def predict(self, *args, **kwargs):
        type(self).calls.append(("predict", len(args), tuple(sorted(kwargs))))
        return self._predict(*args)


class _GroupedRecorder(_Recorder):
    """The same model told campaigns: records the rows and labels it gets."""

    calls: list = []
    uses_groups = True

    def fit(self, X, y, groups=None):
        type(self).calls.append(("fit", np.array(X), groups))
        return self._fit(X, y)

    def predict(self, X, groups=None):
        type(self).calls.append(("predict", np.array(X), groups))
        return self._predict(X)


def _run_planning(trials, cls):
    cls.calls.clear()

    def make(name, seed=0, quick=False):
        return cls(seed=seed)

    P.parameter_relevance(trials, "rec", seed=0, quick=True, make=make, n_refits=3,
                          n_base=64)
    P.learning_curve(trials, "rec", seed=0, quick=True, make=make)
    P.propose_batch(trials, "rec", "ei:xi=0.01", 3, seed=0, quick=True, make=make,
                    n_pool=200)
    return list(cls.calls)


def test_model_without_uses_groups_is_called_as_before(trials):
    calls = _run_planning(trials, _Recorder)
    # every call as before the change: fit(X, y) and predict(X), nothing else
    assert set(calls) == {("fit", 2, ()), ("predict", 1, ())}


def test_model_with_uses_groups_gets_its_rows_campaigns(trials):
    """Every fit gets the campaigns of exactly its rows; predictions at logged rows
    (held-out folds, learning-curve test parts) get theirs, predictions at designed
    points and at the proposals' candidates get none."""
    calls = _run_planning(trials, _GroupedRecorder)
    X_all = trials.features("onehot")
    label = {tuple(r): g for r, g in zip(X_all, trials.groups)}
    fits = [c for c in calls if c[0] == "fit"]
    assert fits and all(g is not None for _, _, g in fits)
    for _, X, g in fits:
        assert list(g) == [label[tuple(r)] for r in X]
    with_groups = [c for c in calls if c[0] == "predict" and c[2] is not None]
    without = [c for c in calls if c[0] == "predict" and c[2] is None]
    assert with_groups and without
    for _, X, g in with_groups:
        assert len(g) == len(X)
        # a permuted row keeps its campaign but is no logged setting any more
        assert all(label[tuple(r)] == gi for r, gi in zip(X, g) if tuple(r) in label)
    assert any(all(tuple(r) in label for r in X) for _, X, _ in with_groups)
    # designed points (Sobol) and candidates are settings of no logged campaign
    assert any(tuple(r) not in label for _, X, _ in without for r in X)


@pytest.fixture(scope="module")
def grouped_fit(trials):
    return make_surrogate("campaign_gp", seed=0, quick=True).fit(
        trials.features("onehot"), trials.y, groups=trials.groups)


def test_difference_std_is_gaussian_conditioning(trials, grouped_fit):
    """``difference_std`` against plain Gaussian conditioning of the joint prior of the
    training rows and two settings of a new campaign (its own offset and slopes, shared
    by the two), the intercept given a wide N(0, B) prior instead of being integrated
    out ([RW2006] Sec. 2.7: Eq. 2.42 is the limit B -> infinity)."""
    m = grouped_fit
    rng = np.random.default_rng(2)
    X = trials.space.encode(trials.space.sample(20, rng), "onehot")
    x_ref = trials.features("onehot")[7]
    got = m.difference_std(X, x_ref)

    from advisor.surrogates.gp import matern52
    B = 1e5
    Xt, g = m.X_train_, m.groups_
    S = (g[:, None] == g[None, :]).astype(float)
    K = (matern52(Xt, Xt, m._ls, m._sf2) + S * (m._sc2 + (Xt * m._t2) @ Xt.T)
         + (m._sn2 + m.jitter_) * np.eye(len(Xt)) + B)
    want = []
    xr = (x_ref - m.x_mean_) / m.x_scale_
    for x in (X - m.x_mean_) / m.x_scale_:
        P2 = np.vstack([x, xr])
        Ktt = matern52(P2, P2, m._ls, m._sf2) + m._sc2 + (P2 * m._t2) @ P2.T + B
        Kx = matern52(Xt, P2, m._ls, m._sf2) + B
        C = Ktt - Kx.T @ np.linalg.solve(K, Kx)
        want.append(math.sqrt(max(C[0, 0] + C[1, 1] - 2 * C[0, 1], 0.0)) * m.y_scale_)
    # rtol 1e-3: the wide prior is the integrated intercept up to O(1/B)
    np.testing.assert_allclose(got, want, rtol=1e-3, atol=1e-6 * m.y_scale_)
    assert m.difference_std(x_ref[None, :], x_ref)[0] < 1e-6 * m.y_scale_


def test_proposals_leave_the_shared_level_out_of_the_acquisition(trials, grouped_fit):
    """The acquisition reads the sd of the difference to the incumbent within the next
    campaign: about what a model has that knows every offset (the same GP fitted on y
    minus the true offsets, one campaign), while the full new-campaign sd is dominated
    by the unknown level.  The proposals' 90% intervals keep the full sd."""
    X_log, y = trials.features("onehot"), trials.y
    model = grouped_fit
    view = _proposals._acquisition_view(model, X_log)
    assert view is not model
    X = trials.space.encode(trials.space.sample(200, np.random.default_rng(1)), "onehot")
    mean, _ = model.predict(X)
    v_mean, lat = latent_predictions(view, X)
    np.testing.assert_array_equal(v_mean, mean)
    _, lat_full = latent_predictions(model, X)
    known = np.array([OFFSETS[c] for c in trials.groups])
    oracle = make_surrogate("campaign_gp", seed=0, quick=True).fit(X_log, y - known)
    x_ref = view._x_ref
    ref = oracle.difference_std(X, x_ref)
    # factor 2 either way: two fits of 80 trials with their own hyperparameters
    assert 0.5 < np.median(lat / ref) < 2.0
    assert np.median(lat_full / ref) > 5
    # the reference is the incumbent's setting: the logged one of lowest mean
    np.testing.assert_array_equal(x_ref, X_log[np.argmin(model.predict(X_log)[0])])

    frame = P.propose_batch(trials, "campaign_gp", AcquisitionSetting("ei", {"xi": 0.01}),
                            3, seed=0, quick=True, n_pool=200)
    # the proposals' own fit, reproduced: the intervals are mean +- z_0.95 of the full
    # new-campaign sd (level included), not the acquisition's
    own = make_surrogate("campaign_gp", seed=task_seed(0, "propose", "fit", 0),
                         quick=True).fit(X_log, y, groups=trials.groups)
    m, s = own.predict(trials.space.encode(frame[trials.space.names], "onehot"))
    z = stats.norm.ppf(0.95)
    np.testing.assert_allclose(frame["predicted_mean"], m, rtol=1e-10)
    np.testing.assert_allclose(frame["predicted_high_90"] - frame["predicted_low_90"],
                               2 * z * s, rtol=1e-10)


def test_the_joint_grid_gives_what_the_sections_give_apart():
    # The assessment runs the relevance's full-data fit as one task of the learning
    # curve's grid (advisor.planning._joint); the sections must not change by it: the
    # same learning curve as learning_curve(), the same relevance as
    # parameter_relevance() fitting the model itself (same seed; the full fit here under
    # one BLAS thread, so equal to rounding).
    from pathlib import Path

    import advisor
    from advisor import planning
    from advisor.execution import Executor
    from advisor.planning._joint import fit_and_curve

    root = Path(__file__).resolve().parent.parent
    trials = advisor.load_trials(root / "sample_logs" / "moulding_warpage.csv",
                                 objective="warpage_mm", campaign="lot", order="run")
    ex = Executor(jobs=1)
    fitted, curve = fit_and_curve(trials, "campaign_gp", seed=3, quick=True, executor=ex)
    apart = planning.learning_curve(trials, "campaign_gp", seed=3, quick=True, executor=ex)
    assert curve == apart
    kw = dict(seed=3, quick=True, executor=ex, n_base=64, n_folds=2, n_repeats=2, n_refits=4)
    joint = planning.parameter_relevance(trials, "campaign_gp", fitted=fitted, **kw)
    own = planning.parameter_relevance(trials, "campaign_gp", **kw)
    for a, b in zip(joint["parameters"], own["parameters"]):
        assert a["name"] == b["name"]
        np.testing.assert_allclose(a["total"], b["total"], rtol=1e-6, atol=1e-9)
        np.testing.assert_allclose(a["total_interval"], b["total_interval"], rtol=1e-6,
                                   atol=1e-9)
    # and the relevance reads the model it is given (a fit on the first 60 trials reads
    # the parameters differently), so the joint grid's fit is the one used
    from advisor.planning._common import _fit_model
    model, encoding = fitted
    part = type(model)(**model.get_params())
    rows = slice(0, 60)
    _fit_model(part, trials.space.encode(trials.used.iloc[rows], encoding),
               trials.y[rows], trials.groups[rows])
    other = planning.parameter_relevance(trials, "campaign_gp", fitted=(part, encoding), **kw)
    assert any(abs(a["total"] - b["total"]) > 1e-3
               for a, b in zip(other["parameters"], own["parameters"]))


def test_proposals_use_the_fit_they_are_given():
    # The assessment passes the relevance's full-data fit to propose_batch (the plan
    # fits the leader once). Given the fit it would make itself (same seed), the batch is
    # identical; given another fit (on 60 trials), the predictions differ, so it is used.
    from pathlib import Path

    import advisor
    from advisor import planning
    from advisor.execution import task_seed
    from advisor.planning._common import _fit_all
    from advisor.surrogates import make_surrogate

    root = Path(__file__).resolve().parent.parent
    trials = advisor.load_trials(root / "sample_logs" / "moulding_warpage.csv",
                                 objective="warpage_mm", campaign="lot", order="run")
    kw = dict(seed=5, quick=True, n_pool=200)
    own = planning.propose_batch(trials, "gp", "ei", 3, **kw)
    same = _fit_all(make_surrogate, "gp", task_seed(5, "propose", "fit", 0), True, trials)
    given = planning.propose_batch(trials, "gp", "ei", 3, fitted=same, **kw)
    pd.testing.assert_frame_equal(own, given)
    model, encoding = same
    part = make_surrogate("gp", seed=0, quick=True)
    part.fit(trials.space.encode(trials.used.iloc[:60], encoding), trials.y[:60])
    other = planning.propose_batch(trials, "gp", "ei", 3, fitted=(part, encoding), **kw)
    assert not np.allclose(other["predicted_mean"].to_numpy(), own["predicted_mean"].to_numpy())
