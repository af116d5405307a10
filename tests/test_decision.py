"""The decision layer (advisor/decision.py): ties broken only by a paired test with
power, the calibration/optimization pair, and the NLL/CRPS disagreement statement.

The decision functions are checked on synthetic paired regret arrays (the backtest's
own output format), so the error rates can be measured over many seeded runs without
running a backtest."""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from advisor import decision
from advisor.backtest import paired_surrogate_test


def _backtest(rng, shifts, n_functions=4, n_starts=2, noise=0.08):
    """A simulated-campaign section as run_backtest writes it: the default setting's
    normalized-regret AUC per (stand-in, start) for each model.  Runs share a
    difficulty per stand-in and start (the pairing); each model adds its shift and its
    own noise (sd ``noise``)."""
    base = rng.uniform(0.1, 0.6, (n_functions, n_starts))
    results = []
    for name, shift in shifts.items():
        runs = [{"unit": f"f{f}", "seed_index": s,
                 "auc": float(base[f, s] + shift + noise * rng.standard_normal())}
                for f in range(n_functions) for s in range(n_starts)]
        results.append({"surrogate": name, "label": decision.DEFAULT_LABEL, "error": None,
                        "runs": runs})
    return {"simulated": {"error": None, "results": results}}


def _table(rows):
    """A calibration table: (name, crps, tied) in table order, all passing the guards."""
    return pd.DataFrame([{"surrogate": n, "status": "ok", "crps": c, "tied_with_leader": t,
                          "guard_coverage": True, "guard_order": True,
                          "variance_scale": 1.0} for n, c, t in rows])


def _old_rule_winner(bt, tied):
    """The former rule: the lowest median AUC in the tie group wins, whatever the
    evidence (what broke the forest/GP/DNGO tie towards DNGO on a real log)."""
    runs = decision.default_setting_runs(bt)
    return min(tied, key=lambda n: np.median(list(runs[n].values())))


def _decide(bt, table):
    leader = table["surrogate"].iloc[0]
    test = decision.optimization_test(bt, leader, decision.close_candidates(table, leader))
    return decision.tie_and_pair(table, test)


@pytest.mark.parametrize("models", [("gp", "dngo"), ("forest", "gp", "dngo")])
def test_equal_optimizers_rarely_break_a_tie(models):
    # Tied models that optimize equally well (same AUC distribution, 8 paired runs as in
    # quick mode).  One-sided Wilcoxon with Holm over the challengers has family-wise
    # level 0.05 (Holm 1979), so a tie is broken by the backtest in at most ~5% of
    # runs.  400 seeded runs: Monte-Carlo s.e. sqrt(.05 * .95 / 400) = 0.011, so the
    # 0.08 bound sits ~3 s.e. above the nominal level (measured with 1,000 runs: 3.3%
    # for two models, 3.5% for three; the exact test at n = 8 cannot use all of 0.05).
    # The former rule (lowest median AUC wins) reorders a tie whenever a challenger's
    # median is lower by chance: measured 49% (two models) and 67% (three).
    rng = np.random.default_rng(18)
    table = _table([(m, 1.0 + 0.01 * i, True) for i, m in enumerate(models)])
    cands = decision.close_candidates(table)
    assert cands == list(models[1:])
    runs, broken, old = 400, 0, 0
    for i in range(runs):
        bt = _backtest(rng, dict.fromkeys(models, 0.0))
        test = decision.optimization_test(bt, models[0], cands)
        broken += test["better"] is not None
        old += _old_rule_winner(bt, list(models)) != models[0]
        if i % 20 == 0 or test["better"] is not None:
            winner, _, pair = decision.tie_and_pair(table, test)
            assert winner == test["better"] and (winner is None) == (pair is None)
    assert broken / runs <= 0.08
    assert old / runs >= (0.4 if len(models) == 2 else 0.55)


def test_a_clearly_better_optimizer_breaks_the_tie():
    # A tied challenger better by 0.2 AUC (paired difference sd 0.08 * sqrt(2) = 0.11,
    # an effect of 1.8 sd): the exact one-sided Wilcoxon at n = 8 rejects at 0.05 when
    # W- <= 5 (tables, e.g. scipy's exact distribution), which this effect gives in most
    # runs.  150 runs, s.e. <= 0.033.  At 0.1 AUC (0.9 sd) power is lower; the number
    # is reported beside the decision as power_at_0.1 by the backtest.
    rng = np.random.default_rng(19)
    table = _table([("gp", 1.0, True), ("dngo", 1.02, True)])
    hits = 0
    for _ in range(150):
        test = decision.optimization_test(_backtest(rng, {"gp": 0.0, "dngo": -0.2}), "gp",
                                          ["dngo"])
        hits += test["better"] == "dngo"
    assert hits / 150 >= 0.8   # measured 0.99 (300 runs); at a 0.1 gain 0.63
    winner, evidence, pair = _decide(_backtest(rng, {"gp": 0.0, "dngo": -0.2}), table)
    assert pair["calibration"] == "gp" and pair["optimization"] == "dngo" and pair["tied"]
    assert "Holm-adjusted p" in evidence


def test_the_paired_p_value_is_scipys_wilcoxon_and_holm_step_down():
    rng = np.random.default_rng(20)
    bt = _backtest(rng, {"gp": 0.0, "forest": -0.05, "dngo": 0.02})
    runs = decision.default_setting_runs(bt)
    test = paired_surrogate_test(runs, "gp", ["forest", "dngo"])
    keys = sorted(runs["gp"])
    raw = {}
    for n in ("forest", "dngo"):
        d = np.array([runs[n][k] - runs["gp"][k] for k in keys])
        raw[n] = stats.wilcoxon(d, alternative="less").pvalue
    got = {c["surrogate"]: c for c in test["comparisons"]}
    lo, hi = sorted(raw, key=raw.get)
    for n in raw:
        assert got[n]["p_value"] == pytest.approx(raw[n])
    # Holm with two p-values: the smaller times 2, the larger max(itself, that)
    assert got[lo]["p_holm"] == pytest.approx(min(1, 2 * raw[lo]))
    assert got[hi]["p_holm"] == pytest.approx(min(1, max(raw[hi], 2 * raw[lo])))


def test_the_exact_signed_rank_p_value_equals_scipys_permutation_and_exact_p():
    # Reference: scipy.stats.wilcoxon.  With ties or zeros and <= 13 runs scipy
    # enumerates all 2**n sign patterns (a PermutationMethod with more resamples than
    # patterns is exhaustive); without ties it uses the exact distribution at any n.
    # Our convolution must give the same p-value in both cases, and it must also
    # answer (exactly) beyond 13 runs with ties, where scipy falls back to the normal
    # approximation: there the two agree to the approximation's error.
    from advisor.backtest._decision import _one_sided_p

    # scipy's permutation path evaluates its statistic once per sign pattern (about
    # 4 s at 12 runs), so few cases: every n up to 10 twice, and 12 once (the quick
    # plan's within-class comparisons have 12 runs).
    rng = np.random.default_rng(31)
    for n in [n for n in range(2, 11) for _ in range(2)] + [12]:
        d = np.round(rng.normal(0.2, 1.0, n), 1)   # rounded: ties and zeros
        if np.all(d == 0):
            continue
        ref = stats.wilcoxon(d, alternative="less",
                             method=stats.PermutationMethod(n_resamples=20000)).pvalue
        assert _one_sided_p(d) == pytest.approx(ref, abs=1e-12)
    for n in (14, 24, 40):
        d = rng.normal(0.3, 1.0, n)
        ref = stats.wilcoxon(d, alternative="less", method="exact").pvalue
        assert _one_sided_p(d) == pytest.approx(ref, abs=1e-12)
    d = np.round(rng.normal(0.2, 1.0, 40), 1)
    assert _one_sided_p(d) == pytest.approx(
        stats.wilcoxon(d, alternative="less").pvalue, abs=0.01)
    assert _one_sided_p(np.zeros(5)) == 1.0


def test_a_close_untied_model_that_optimizes_better_is_named_as_the_pair():
    # forest is 5% worse by CRPS (inside the 10% margin) and not tied; dngo is 30% worse
    # (outside it) and optimizes even better, but is not a pair candidate.
    rng = np.random.default_rng(21)
    table = _table([("gp", 1.0, False), ("forest", 1.05, False), ("dngo", 1.3, False)])
    assert decision.close_candidates(table) == ["forest"]
    bt = _backtest(rng, {"gp": 0.0, "forest": -0.3, "dngo": -0.4})
    winner, _, pair = _decide(bt, table)
    assert winner is None                     # nothing tied: the table keeps its order
    assert pair["calibration"] == "gp" and pair["optimization"] == "forest"
    assert not pair["tied"] and pair["p_holm"] < 0.05
    assert pair["crps_gap_relative"] == pytest.approx(0.05)


def _entry(y, mean, std, fold):
    return {"y": y, "mean": mean, "std": np.broadcast_to(std, y.shape).astype(float),
            "fold": fold}


def test_nll_and_crps_disagreement_is_found_and_tested():
    # "sharp" predicts the mean exactly but with a small sd; 10% of the points are
    # gross outliers (a plateau-like jump): its CRPS stays low, its NLL explodes.
    # "wide" has a noisier mean and a wide sd.  The leaders are checked against the
    # scores computed here with scipy.
    rng = np.random.default_rng(23)
    n = 240
    mu = rng.normal(size=n)
    y = mu + rng.normal(0, 0.1, n)
    out = rng.random(n) < 0.1
    y[out] += 3.0
    fold = np.arange(n) % 4
    camp = (np.arange(n) // 4) % 6
    blocks = camp * 4 + fold
    preds = {"sharp": _entry(y, mu, 0.12, fold),
             "wide": _entry(y, mu + rng.normal(0, 0.6, n), 1.2, fold)}
    nll = {k: -stats.norm.logpdf(y, p["mean"], p["std"]).mean() for k, p in preds.items()}
    table = pd.DataFrame([{"surrogate": k, "status": "ok", "guard_coverage": True,
                           "guard_order": True, "variance_scale": 1.0,
                           "crps": float(np.mean(_crps(y, p["mean"], p["std"])))}
                          for k, p in preds.items()])
    crps_leader = table.loc[table["crps"].idxmin(), "surrogate"]
    nll_leader = min(nll, key=nll.get)
    assert crps_leader != nll_leader  # the construction works
    got = decision.score_disagreement(preds, table, blocks, seed=0)
    assert got["disagree"] and got["crps_leader"] == crps_leader
    assert got["nll_leader"] == nll_leader and got["significant"]
    assert got["nll_difference"] == pytest.approx(nll[crps_leader] - nll[nll_leader])
    assert "disagree" in got["statement"]
    same = decision.score_disagreement({"sharp": preds["sharp"]}, table.iloc[:1], blocks, 0)
    assert same is None


def _crps(y, m, s):
    # Gneiting & Raftery (2007) closed form of the Gaussian CRPS, with scipy's normal
    z = (y - m) / s
    return s * (z * (2 * stats.norm.cdf(z) - 1) + 2 * stats.norm.pdf(z) - 1 / np.sqrt(np.pi))


def test_the_report_states_the_pair_the_disagreement_and_the_acquisition_source():
    # The recommendation payload built from a real ranking, a pair and a disagreement,
    # and the sentences the PDF's first page prints from it.
    from types import SimpleNamespace

    from advisor.ranking import rank_surrogates
    from advisor.report.sections.recommendation import decision_texts, headline

    rng = np.random.default_rng(24)
    y = rng.normal(size=200)
    fold = np.arange(200) % 5
    preds = {"gp": _entry(y, y + rng.normal(0, 0.3, 200), 0.3, fold),
             "forest": _entry(y, y + rng.normal(0, 0.32, 200), 0.33, fold)}
    ranking = rank_surrogates(preds, {}, {"gp": 1.0, "forest": 1.0})
    table = ranking.table
    other = next(n for n in preds if n != ranking.leader)
    bt = _backtest(np.random.default_rng(25), {ranking.leader: 0.0, other: -0.3})
    assert decision.close_candidates(table) == [other]
    test = decision.optimization_test(bt, ranking.leader, decision.close_candidates(table))
    _, _, pair = decision.tie_and_pair(table, test)
    dis = {"disagree": True, "crps_leader": ranking.leader, "nll_leader": other,
           "statement": "NLL and CRPS disagree about the leader."}
    rec = decision.recommendation(ranking, None, test=test, pair=pair, disagreement=dis,
                                  schemes=decision.scheme_summary("forward", {}, table))
    assert rec["pair"]["optimization"] == other and rec["surrogate"] == ranking.leader
    assert rec["acquisition_source"] == "default"
    view = SimpleNamespace(d={"recommendation": rec, "validation": {
        "statement": "forward chaining decided the ranking"}})
    text = " ".join(decision_texts(view))
    assert "The pair." in text and "for the optimization loop" in text
    assert "Scores disagree." in text and "Forward chaining decided" in text
    assert "did not run" in text
    assert "did not test it" in headline(view)
    assert "chosen by the acquisition backtest" not in headline(view)


def test_kept_default_states_its_measured_real_outcome():
    # The figure the statement prints is the benchmark's record (section "assess" of
    # benchmarks/results/nondefault_wins.json, variant "benchmark" = the product's
    # quick assessment, on the cases its summary lists true winners for), and its upper bound is the exact
    # one-sided 95% Clopper-Pearson bound (Clopper & Pearson 1934) from scipy's beta.
    import json
    from pathlib import Path

    res = json.loads((Path(__file__).resolve().parents[1] / "benchmarks" / "results" /
                      "nondefault_wins.json").read_text())
    # logs where the backtest's paired test ran (a log whose recommended model was not
    # backtested states that nothing was tested, so it is not counted)
    logs = picked = 0
    for key, v in res["summary"].items():
        if not (key.endswith(" benchmark") and v["true_winners"]):
            continue
        for row in res["assess"][key[:-len(" benchmark")]]["benchmark"].values():
            if row["beats_default"] is not None:
                logs += 1
                picked += row["recommended"] in v["true_winners"]
    rd = decision.REAL_DETECTION
    assert (rd["logs"], rd["picked"]) == (logs, picked)
    bound = stats.beta.ppf(0.95, rd["picked"] + 1, rd["logs"] - rd["picked"])
    assert rd["upper_95"] == pytest.approx(bound, abs=5e-4)
    dec = {"alpha": 0.05, "power_at_0.1": 0.9, "experiment": "simulated",
           "test": "one-sided Wilcoxon signed-rank, Holm", "beats_default": False,
           "comparisons": [{"label": "UCB beta=4", "runs": 24, "p_value": 0.3,
                            "p_holm": 0.6}]}
    text = decision._acquisition_statement("backtest", dec, "gp",
                                           {"simulated": {"budget": 12}})
    assert "no reason to change it" in text
    assert f"on {rd['logs']} benchmark logs" in text and f"picked it {rd['picked']} times" in text
    assert "24 paired simulated runs of 12 trials" in text


def test_kept_default_states_what_perfect_standins_would_find():
    # The ceiling the statement prints is the record of benchmarks/nondefault_ceiling.py
    # (the stored real campaigns of the true-winner cases, resampled and decided by the
    # product's paired_decision): quick grid, 24 runs, the product's unit (final regret
    # over random search's), lowest and highest rate over the two cases, after 12 and
    # after 30 trials.
    import json
    from pathlib import Path

    res = json.loads((Path(__file__).resolve().parents[1] / "benchmarks" / "results" /
                      "nondefault_ceiling.json").read_text())
    ps = decision.PERFECT_STANDINS
    for trials in (12, 30):
        rates = [r["true_pick_rate"] for r in res["cases"]
                 if r["section"] == "truth" and r["true_winners"] and r["grid"] == "quick"
                 and r["n"] == ps["runs"] and r["unit"] == f"final_{trials}"]
        assert len(rates) == 2
        assert ps[f"trials_{trials}"] == pytest.approx((min(rates), max(rates)), abs=0.005)
    dec = {"alpha": 0.05, "power_at_0.1": 0.9, "experiment": "simulated",
           "test": "one-sided Wilcoxon signed-rank, Holm", "beats_default": False,
           "comparisons": [{"label": "UCB beta=4", "runs": 24, "p_value": 0.3,
                            "p_holm": 0.6}]}
    text = decision._acquisition_statement("backtest", dec, "gp", {})
    lo, hi = ps["trials_30"]
    assert f"{lo:.0%}-{hi:.0%} with runs of 30" in text
    # runs that end on average within 0.1 of the optimum: no power is claimed
    dec.update({"unit": "final_over_random", "power_final_at_0.1": None,
                "final_mean_level": 0.06})
    text = decision._acquisition_statement("backtest", dec, "gp", {})
    assert "end on average at 0.06 of random search's final regret" in text
    assert "power to find a gain of 0.1 in final regret" not in text


def test_the_pair_test_reads_the_setting_decisions_unit():
    # The same paired test as the setting decision, in its unit: a model that ends
    # lower (final regret over random search's, random = 1) with an identical AUC is
    # found better; without random order's final regrets the AUC is read (nothing to
    # find here).  8 stand-ins x 2 starts, a shift of 0.5 against paired noise sd 0.1.
    rng = np.random.default_rng(4)
    base = rng.uniform(0.5, 1.5, (8, 2))
    results = []
    for name, shift in (("gp", 0.0), ("dngo", -0.5)):
        runs = [{"unit": f"f{f}", "seed_index": s, "auc": 0.3,
                 "final_regret": float(base[f, s] + shift + 0.1 * rng.standard_normal())}
                for f in range(8) for s in range(2)]
        results.append({"surrogate": name, "label": decision.DEFAULT_LABEL, "error": None,
                        "runs": runs})
    bt = {"simulated": {"error": None, "results": results,
                        "random": {"per_unit_mean_final_regret": {f"f{f}": 1.0
                                                                  for f in range(8)}}}}
    test = decision.optimization_test(bt, "gp", ["dngo"])
    assert test["unit"] == "final_over_random" and test["better"] == "dngo"
    table = _table([("gp", 1.0, False), ("dngo", 1.0, True)])
    _, _, pair = decision.tie_and_pair(table, test)
    assert pair["unit"] == "final_over_random"
    assert "final-regret difference (random search = 1)" in pair["statement"]
    del bt["simulated"]["random"]
    auc = decision.optimization_test(bt, "gp", ["dngo"])
    assert auc["unit"] == "auc" and auc["better"] is None


def test_what_more_runs_buy_is_the_measured_record():
    # The figure the statement prints for "more runs raise it" is the record of
    # benchmarks/final_unit_power.py --measure (the product's own decision with that
    # many paired runs on each sample log): lowest and highest power for 0.1 over logs.
    import json
    from pathlib import Path

    res = json.loads((Path(__file__).resolve().parents[1] / "benchmarks" / "results" /
                      "final_unit_power.json").read_text())
    mr = decision.MORE_RUNS
    powers = [row["power_final_at_0.1"] for rows in res["measured"]["logs"].values()
              for row in rows if row["runs_asked"] == mr["runs"]]
    assert len(powers) == 3 and None not in powers
    assert mr["power"] == pytest.approx((min(powers), max(powers)), abs=0.005)
    dec = {"alpha": 0.05, "experiment": "simulated", "unit": "final_over_random",
           "test": "one-sided Wilcoxon signed-rank, Holm", "beats_default": False,
           "power_final_at_0.1": 0.01, "final_mean_level": 0.4,
           "comparisons": [{"label": "UCB beta=4", "runs": 24, "p_value": 0.3,
                            "p_holm": 0.6}]}
    text = decision._acquisition_statement("backtest", dec, "gp", {})
    assert (f"{mr['runs']:,} runs per setting found it with power "
            f"{mr['power'][0]:.2f}-{mr['power'][1]:.2f}") in text
    # ... and its real outcome: the record of benchmarks/nondefault_power.py's
    # power_1536 section (the product's stand-ins and decision with as many runs on the
    # benchmark's past logs whose next campaigns have a true winner in the quick grid,
    # the winners from its real campaigns, sections truth / truth_40)
    real = json.loads((Path(__file__).resolve().parents[1] / "benchmarks" / "results" /
                       "nondefault_wins.json").read_text())
    quick = {"EI xi=0.01", "PI xi=0.01", "UCB beta=4", "Thompson"}
    logs = picks = 0
    powers = []
    for key, rows in real["power_1536"]["gp+forest"].items():
        winners = set()
        for sec in ("truth", "truth_40"):
            winners |= set(real.get(sec, {}).get(key, {}).get("true_winners", []))
        winners &= quick
        if not winners:
            continue
        for row in rows.values():
            logs += 1
            picks += row["product"]["chosen"] in winners
            powers.append(row["product"]["power_final_at_0.1"])
            assert row["runs_per_setting"] == mr["runs"]
    assert (mr["real_logs"], mr["real_picks"]) == (logs, picks)
    assert mr["real_power"] == pytest.approx((min(powers), max(powers)), abs=0.005)
    assert (f"on {mr['real_logs']} benchmark logs with a true winner as many runs, at "
            f"power {mr['real_power'][0]:.2f}-{mr['real_power'][1]:.2f}, picked it "
            f"{mr['real_picks']} times") in text
