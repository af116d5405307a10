"""The model of trial failure: scores against scikit-learn, a known failure region
recovered, weighting that keeps proposals out of it, and nothing when nothing failed."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import brier_score_loss, log_loss

import advisor
from advisor import feasibility as F
from advisor.acquisition import AcquisitionSetting, acquisition_values
from advisor.surrogates import make_surrogate

#: The synthetic failure region: x1 above this fails with probability P_IN, elsewhere
#: with P_OUT (an invented process, like an interlock that trips; the numbers are ours).
EDGE, P_IN, P_OUT = 0.65, 0.97, 0.03


def _log_with_region(tmp_path, seed=0, n_per=60, n_campaigns=3):
    rng = np.random.default_rng(seed)
    rows = []
    for c in range(n_campaigns):
        for i in range(n_per):
            x = rng.random(4)
            p_fail = P_IN if x[0] > EDGE else P_OUT
            failed = rng.random() < p_fail
            y = (x[0] - 0.9) ** 2 + (x[1] - 0.5) ** 2 + 0.01 * rng.standard_normal()
            rows.append({"x1": x[0], "x2": x[1], "x3": x[2], "x4": x[3],
                         "campaign": f"C{c}", "run": i + 1,
                         "status": "failed" if failed else "ok",
                         "loss": np.nan if failed else y})
    path = tmp_path / f"region_{seed}.csv"
    pd.DataFrame(rows).to_csv(path, index=False)
    # The space is given, as a careful user gives it: inferred from the successful
    # trials alone, it would stop short of the failure region.
    space = tmp_path / "region.space.toml"
    space.write_text("".join(f"[parameters.{n}]\nkind = \"continuous\"\nlow = 0.0\n"
                             f"high = 1.0\n\n" for n in ("x1", "x2", "x3", "x4")))
    return advisor.load_trials(path, objective="loss", campaign="campaign", order="run",
                               status="status", success=["ok"],
                               params=["x1", "x2", "x3", "x4"], space=space)


def test_point_log_loss_and_brier_agree_with_sklearn():
    rng = np.random.default_rng(3)
    fail = (rng.random(200) < 0.3).astype(int)
    p = np.clip(rng.random(200), F._CLIP, 1 - F._CLIP)
    assert F._point_log_loss(fail, p).mean() == pytest.approx(
        log_loss(fail, p, labels=[0, 1]), rel=1e-12)
    # Brier = mean squared difference of probability and outcome (Brier 1950).
    assert np.mean((p - fail) ** 2) == pytest.approx(brier_score_loss(fail, p), rel=1e-12)


def test_reliability_error_closed_form():
    # Two bins of two: predicted means 0.1 and 0.7, observed shares 0 and 1:
    # (2*|0.1-0| + 2*|0.7-1|)/4 = 0.2 (by hand).
    assert F.reliability_error([0, 0, 1, 1], [0.1, 0.1, 0.6, 0.8], n_bins=2) == \
        pytest.approx(0.2)


def test_scores_reported_are_sklearn_scores(tmp_path):
    t = _log_with_region(tmp_path, seed=1, n_per=40)
    out = F.assess_feasibility(t, seed=0, quick=True)
    assert out["skipped"] is None
    for r in out["classifiers"]:
        assert np.isfinite(r["log_loss"]) and 0 <= r["brier"] <= 1
    consts = [r for r in out["classifiers"] if r["classifier"] == "constant"]
    assert len(consts) == 1


@pytest.fixture(scope="module")
def region(tmp_path_factory):
    """``region(seed)`` -> (the seeded log with the known region, its feasibility
    assessment): each is computed once and shared by the tests below (the assessment
    costs seconds; the tests only read it)."""
    folder = tmp_path_factory.mktemp("region")
    cache = {}

    def get(seed):
        if seed not in cache:
            t = _log_with_region(folder, seed=seed)
            cache[seed] = (t, F.assess_feasibility(t, seed=seed, quick=True))
        return cache[seed]
    return get


@pytest.mark.slow
def test_known_failure_region_is_recovered(region):
    # Over 4 seeded logs: the chosen classifier beats the constant rate, names x1 as
    # the parameter that drives failure, and its held-out reliability error is within
    # 0.10 (stated tolerance: with ~110 held-out trials in 5 bins, a perfectly
    # calibrated model's binned error is about 0.05 from sampling alone).
    hits = 0
    for seed in range(4):
        t, out = region(seed)
        chosen = next(r for r in out["classifiers"] if r["classifier"] == out["chosen"])
        ok = (out["beats_constant"] and out["parameters"][0]["name"] == "x1"
              and chosen["reliability_error"] <= 0.10)
        hits += ok
        # the map is over x1 and shows the region: P(fail) rises across EDGE
        m = out["map"]
        assert m is not None and m["parameters"][0] == "x1"
        pf = np.asarray(m["failure_probability"])
        pf1 = pf.mean(axis=tuple(range(1, pf.ndim)))
        x1 = np.asarray(m["values"][0])
        assert pf1[x1 > EDGE + 0.1].mean() > pf1[x1 < EDGE - 0.1].mean() + 0.3
    assert hits >= 3


@pytest.mark.slow
def test_weighting_keeps_picks_out_of_the_failure_region(region):
    # The objective's minimum (x1 = 0.9) lies inside the failure region (x1 > 0.65).
    # Unweighted EI sends most of its top candidates there; EI x P(success) with the
    # exclusion below MIN_SUCCESS keeps at most 20% of them there.  Stated shares over 3
    # seeded logs (measured: 100% unweighted, 0% weighted on each).
    inside_w, inside_u = [], []
    for seed in range(3):
        t, out = region(seed)
        model = out["_model"]
        gp = make_surrogate("gp", seed=0, quick=True).fit(t.features(), t.y)
        rng = np.random.default_rng(seed)
        cand = pd.DataFrame(rng.random((2000, 4)), columns=["x1", "x2", "x3", "x4"])
        X = t.space.encode(cand, "onehot")
        ei, _ = acquisition_values(gp, AcquisitionSetting("ei", {"xi": 0.01}), X,
                                   float(t.y.min()), rng, float(t.y.std()))
        ps = model.success_probability(cand)
        w = F.weight_acquisition("ei", ei, ps)
        top_u = np.argsort(-ei)[:20]
        top_w = np.argsort(-w)[:20]
        inside_u.append(np.mean(cand["x1"].to_numpy()[top_u] > EDGE))
        inside_w.append(np.mean(cand["x1"].to_numpy()[top_w] > EDGE))
    assert np.mean(inside_u) >= 0.6
    assert np.mean(inside_w) <= 0.2


def test_no_failures_no_section(tmp_path):
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"a": rng.random(30), "b": rng.random(30)})
    df["y"] = df["a"] + df["b"]
    df.to_csv(tmp_path / "clean.csv", index=False)
    t = advisor.load_trials(tmp_path / "clean.csv", objective="y")
    assert F.assess_feasibility(t, seed=0, quick=True) is None


def test_too_few_failures_skipped_with_rule(tmp_path):
    rng = np.random.default_rng(0)
    df = pd.DataFrame({"a": rng.random(40), "b": rng.random(40)})
    df["y"] = df["a"] + df["b"]
    df.loc[:2, "y"] = np.nan  # three failed trials
    df.to_csv(tmp_path / "few.csv", index=False)
    t = advisor.load_trials(tmp_path / "few.csv", objective="y")
    out = F.assess_feasibility(t, seed=0, quick=True)
    assert out["skipped"] and str(F.MIN_EACH) in out["rule"]
    assert out["chosen"] is None


def test_weighting_rules():
    p = np.array([1.0, 0.5, 0.2])
    v = np.array([2.0, 2.0, 2.0])
    # EI x P(success); the candidate below MIN_SUCCESS (0.5) is excluded
    assert np.allclose(F.weight_acquisition("ei", v, p), [2.0, 1.0, -np.inf])
    # ucb values are -LCB; with best = 1 and LCB = 0.5 the optimistic improvement is 0.5
    assert np.allclose(F.weight_acquisition("ucb", np.full(3, -0.5), p, best=1.0),
                       [0.5, 0.25, -np.inf])
    # no candidate reaches the threshold: plain weighting, nothing excluded
    assert np.allclose(F.weight_acquisition("ei", v, p * 0.1), v * p * 0.1)
    with pytest.raises(ValueError):
        F.weight_acquisition("thompson", v, p)


@pytest.mark.slow
def test_weighted_proposals_avoid_the_failure_region(region):
    # The proposals themselves (propose_batch with the chosen failure model), 3 logs x 5
    # proposals: without the weighting most fall inside the region; with it none lies
    # more than 0.05 beyond its edge (the band where the fitted classifier's P(success)
    # crosses the 0.5 cut) and at most 10% lie deep inside (x1 > 0.8).  Measured: 100%
    # inside unweighted; weighted, all 15 at x1 = 0.61-0.66, along the edge, which is
    # where the best feasible settings are (the objective's minimum is at x1 = 0.9).
    from advisor.planning import propose_batch

    inside_w, inside_u = [], []
    for seed in range(3):
        t, out = region(seed)
        model = out["_model"]
        for weighted, into in ((True, inside_w), (False, inside_u)):
            props = propose_batch(t, "gp", "ei:xi=0.01", 5, seed=seed, quick=True,
                                  success_probability=model.success_probability
                                  if weighted else None)
            into.extend(props["x1"].to_numpy(float))
            if weighted:
                assert np.all((props["p_success"] >= 0) & (props["p_success"] <= 1))
    inside_u, inside_w = np.asarray(inside_u), np.asarray(inside_w)
    assert np.mean(inside_u > EDGE) >= 0.6
    assert np.all(inside_w <= EDGE + 0.05)
    assert np.mean(inside_w > 0.8) <= 0.1


# -- the simulated campaigns of the backtest with failures --------------------------------
def _weighted_and_unweighted(t, model, seed):
    from advisor.acquisition import parse_settings
    from advisor.backtest import FailureModel, plan_for, run_backtest

    out = {}
    for weighted in (True, False):
        bt = run_backtest(t, ["gp"], parse_settings("ei:xi=0.01"), seed=seed, quick=True,
                          budget=12, plan=plan_for(True, replay=False, sim_functions=4,
                                                   sim_seeds=2),
                          failures=FailureModel(model, weighted=weighted))
        (res,) = bt["simulated"]["results"]
        assert res["error"] is None
        out[weighted] = (bt, res)
    return out


@pytest.mark.slow
def test_backtest_weighting_wastes_fewer_trials_in_the_failure_region(region):
    # Simulated campaigns on 3 seeded logs with the known region (x1 > 0.65 fails with
    # probability 0.97), 4 stand-ins x 2 starts each, 10 picks per run: the same runs
    # (same stand-ins, starts, failure outcomes by common random numbers) with EI and with
    # EI x P(success).  Stated test: one-sided Wilcoxon signed-rank on the 24 paired
    # differences of failed picks (scipy), weighted < unweighted at level 0.05.
    # Measured on this machine: failed picks 10 vs 22 of 80 on seed 0.
    from scipy.stats import wilcoxon

    w_fail, u_fail, w_auc, u_auc = [], [], [], []
    for seed in range(3):
        t, out = region(seed)
        model = out["_model"]
        out = _weighted_and_unweighted(t, model, seed)
        (bt_w, res_w), (bt_u, res_u) = out[True], out[False]
        # the failure outcomes and starts are the same in both (paired design)
        assert bt_w["simulated"]["failures"]["failed_share"] == \
            bt_u["simulated"]["failures"]["failed_share"]
        # each stand-in's region is where the log's failures are: x1 > 0.65 fails far
        # more often than x1 < 0.65 (our fixture's truth, not the code's output)
        assert 0.2 < np.mean(bt_w["simulated"]["failures"]["failed_share"]) < 0.5
        runs_w = sorted(res_w["runs"], key=lambda r: (r["unit"], r["seed_index"]))
        runs_u = sorted(res_u["runs"], key=lambda r: (r["unit"], r["seed_index"]))
        w_fail += [r["failed_picks"] for r in runs_w]
        u_fail += [r["failed_picks"] for r in runs_u]
        w_auc += [r["auc"] for r in runs_w]
        u_auc += [r["auc"] for r in runs_u]
    w_fail, u_fail = np.asarray(w_fail), np.asarray(u_fail)
    p = wilcoxon(w_fail, u_fail, alternative="less").pvalue
    print(f"failed picks weighted {w_fail.sum()} vs unweighted {u_fail.sum()} of "
          f"{10 * len(w_fail)}; Wilcoxon p = {p:.3g}; mean AUC {np.mean(w_auc):.3f} vs "
          f"{np.mean(u_auc):.3f}")
    assert w_fail.sum() < u_fail.sum()
    assert p < 0.05
    # and the weighting does not buy that with worse regret (regret over successful
    # trials only): the mean normalized-regret AUC is no worse by more than 0.02
    assert np.mean(w_auc) <= np.mean(u_auc) + 0.02


class _NeverFails:
    """A failure model under which no trial fails (P(success) = 1 everywhere)."""

    kind = "gp"

    def __init__(self, space):
        from sklearn.gaussian_process.kernels import Matern

        self.encoding_bounds = space.encoded_bounds("onehot")
        self._kernel = Matern(length_scale=np.full(len(self.encoding_bounds), 0.5), nu=2.5)

    def success_probability(self, frame):
        return np.ones(len(frame))

    def gp_kernel(self):
        return self._kernel


def test_backtest_hook_changes_nothing_when_nothing_fails(tmp_path):
    # With a failure model under which nothing fails, the simulated campaigns give the
    # same starts, picks and scores as the backtest without the hook (the weighting by a
    # constant P(success) keeps EI's and PI's order); only the added keys differ.
    from advisor.acquisition import parse_settings
    from advisor.backtest import FailureModel, plan_for, run_backtest

    rng = np.random.default_rng(4)
    df = pd.DataFrame({"a": rng.random(30), "b": rng.random(30)})
    df["y"] = (df["a"] - 0.3) ** 2 + df["b"] + 0.01 * rng.standard_normal(30)
    df.to_csv(tmp_path / "clean.csv", index=False)
    t = advisor.load_trials(tmp_path / "clean.csv", objective="y")
    kw = dict(seed=3, quick=True, budget=7,
              plan=plan_for(True, replay=False, sim_functions=2, sim_seeds=1,
                            sim_extra_candidates=40))
    settings = parse_settings("ei:xi=0.01;pi;random")
    plain = run_backtest(t, ["gp"], settings, **kw)
    hooked = run_backtest(t, ["gp"], settings, failures=FailureModel(_NeverFails(t.space)),
                          **kw)
    info = hooked["simulated"].pop("failures")
    assert info["failed_share"] == [0.0, 0.0]
    assert all(len(r["runs"]) == 2 for r in hooked["simulated"]["results"])
    for r in hooked["simulated"]["results"]:
        for run in r["runs"]:
            assert run.pop("failed_picks") == 0
    assert hooked == plain
