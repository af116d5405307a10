"""The decision layer: how the calibration ranking, the backtest's paired tests and the
validation schemes combine into the recommendation, and how it is stated.

* **Ties** (ranking rule 5, :mod:`advisor.ranking`): within the group tied with the
  calibration leader, a model goes first only when the paired backtest test says it
  optimizes better (:func:`optimization_test`); otherwise mean CRPS keeps its order.
* **The pair**: when a model *close* to the calibration leader — tied with it (95% model
  confidence set) or with a mean held-out CRPS within :data:`PAIR_MARGIN` (10%) of the
  leader's — optimizes better by the same paired test, the recommendation names the
  pair: the leader for calibrated predictions, the other for the optimization loop.
  The table keeps the calibration order (calibration tracks optimization regret across
  model types but not within one: Foldager, Jordahn, Hansen & Andersen 2023).
* **The test** (both uses): each close model's runs with the default setting (EI,
  xi = 0.01), in the setting decision's unit (final regret over random search's since
  stop 29, :func:`runs_unit`; the normalized-regret AUC before and as the fallback),
  against the leader's over the same simulated campaigns
  (paired by stand-in and start; every surrogate gets the same starts and noise),
  one-sided Wilcoxon signed-rank (Wilcoxon 1945), Holm over the close models (Holm
  1979), level 0.05 (:func:`advisor.backtest.paired_surrogate_test`).  The pool replay
  never decides here (its runs start from each campaign's logged best region).
* **Score disagreement** (:func:`score_disagreement`): the leaders by NLL and by CRPS
  among the models passing the guard rails; when they differ, the NLL difference of the
  two is tested with the same sign-flip test over blocks as the model confidence set.
* **Schemes** (:func:`scheme_summary`): the primary scheme decides (forward chaining
  when the log has an order column); the others, scored in thorough mode only, are
  diagnostics.  On the real-log benchmark forward chaining had the lowest selection
  regret and averaging it with leave-one-campaign-out was worse
  (``benchmarks/results/real_logs_score_choice.json``); with the truth averaged over
  model seeds and logs replicated, leave-one-campaign-out alone, the two schemes'
  mean CRPS, and breaking forward chaining's tie group by leave-one-campaign-out scores
  were all worse than forward chaining alone (``benchmarks/results/real_logs_regret.json``,
  README "Real-log benchmark").

References
----------
Foldager, J., Jordahn, M., Hansen, L. K. & Andersen, M. R. (2023). On the role of model
uncertainties in Bayesian optimization. UAI 2023, PMLR 216, 592-601.
Wilcoxon, F. (1945). Biometrics Bulletin 1, 80-83.  Holm, S. (1979). Scand. J. Statist.
6, 65-70.
"""

from __future__ import annotations

import numpy as np

from .backtest import ALPHA, SURROGATE_TEST_NAME, paired_surrogate_test
from .ranking import MCS_LEVEL, model_confidence_set
from .scoring import point_scores

__all__ = ["PAIR_MARGIN", "DEFAULT_ACQUISITION", "DEFAULT_LABEL", "close_candidates",
           "default_setting_runs", "optimization_test", "tie_and_pair",
           "score_disagreement", "scheme_summary", "recommendation", "acquisition_strength"]

#: A model is *close* to the calibration leader when tied with it or when its mean
#: held-out CRPS is at most this fraction above the leader's (our choice; the same 10%
#: as the score-choice table's "within 10% of the best CRPS" rules).
PAIR_MARGIN = 0.10
#: Used until the backtest has chosen: EI with a small xi is the most common default in
#: practice (Lizotte 2008 found xi = 0.01 a robust choice).
DEFAULT_ACQUISITION = {"name": "ei", "params": {"xi": 0.01}}
DEFAULT_LABEL = "EI xi=0.01"


def _passing_rows(table) -> dict:
    """{surrogate: row dict} of the working models passing both guard rails, in order."""
    return {r["surrogate"]: r for r in table.to_dict("records")
            if r.get("status") == "ok" and bool(r.get("guard_coverage"))
            and bool(r.get("guard_order"))}


def close_candidates(table, leader: str | None = None, margin: float = PAIR_MARGIN) -> list[str]:
    """Models passing the guard rails that are tied with ``leader`` (default: the
    table's first) or within ``margin`` of its mean CRPS, tied ones first, each group
    in table order; the leader itself excluded."""
    ok = _passing_rows(table)
    leader = leader or (table["surrogate"].iloc[0] if len(table) else None)
    if leader not in ok:
        return []
    base = float(ok[leader]["crps"])
    tied, near = [], []
    for n, r in ok.items():
        if n == leader:
            continue
        if bool(r.get("tied_with_leader")):
            tied.append(n)
        elif np.isfinite(r["crps"]) and r["crps"] <= base + margin * abs(base):
            near.append(n)
    return tied + near


def default_setting_runs(backtest: dict | None, unit: str = "auto") -> dict:
    """{surrogate: {(stand-in, start): value}} of the default setting in the simulated
    campaigns (empty when none ran).

    ``unit``: ``"final_over_random"`` (each run's final regret over random order's mean
    final regret on its stand-in, random search = 1: the unit the setting decision reads
    since stop 29, :func:`advisor.backtest._choice._decide`), ``"auc"`` (the
    normalized-regret AUC), or ``"auto"`` (the first when random order's final regrets
    are recorded and some is positive, else the AUC).  The unit used is in
    :func:`runs_unit`."""
    sec = (backtest or {}).get("simulated") or {}
    if sec.get("error"):
        return {}
    label = next((c["decision"]["default"] for c in
                  ((backtest or {}).get("per_surrogate") or {}).values()
                  if (c.get("decision") or {}).get("default")), DEFAULT_LABEL)
    if unit == "auto":
        unit = runs_unit(backtest)
    rnd = (sec.get("random") or {}).get("per_unit_mean_final_regret") or {}
    out = {}
    for r in sec.get("results") or []:
        if r.get("label") == label and not r.get("error") and r.get("runs"):
            if unit == "final_over_random":
                out[r["surrogate"]] = {
                    (run["unit"], run["seed_index"]): run["final_regret"] / rnd[run["unit"]]
                    for run in r["runs"] if run.get("final_regret") is not None
                    and rnd.get(run["unit"], 0) > 0}
            else:
                out[r["surrogate"]] = {(run["unit"], run["seed_index"]): run["auc"]
                                       for run in r["runs"]}
    return out


def runs_unit(backtest: dict | None) -> str:
    """The unit :func:`default_setting_runs` reads by default: ``"final_over_random"``
    when random order's mean final regret is recorded and positive on some stand-in,
    else ``"auc"``."""
    sec = (backtest or {}).get("simulated") or {}
    rnd = (sec.get("random") or {}).get("per_unit_mean_final_regret") or {}
    return "final_over_random" if any(v > 0 for v in rnd.values()) else "auc"


def optimization_test(backtest: dict | None, reference: str | None, candidates) -> dict | None:
    """The paired test of the close models against the calibration leader, or None when
    there is nothing to test (no simulated runs for the leader, or no close model).
    In the unit of the setting decision (:func:`runs_unit`): the issue asks for "the
    same paired test"."""
    unit = runs_unit(backtest)
    runs = default_setting_runs(backtest, unit)
    cands = [c for c in candidates if c != reference]
    if reference is None or reference not in runs or not cands:
        return None
    tested = [c for c in cands if c in runs]
    out = paired_surrogate_test(runs, reference, tested)
    out["experiment"] = "simulated"
    out["unit"] = unit
    out["metric"] = ("final regret over random search's with the default setting, "
                     "paired by run" if unit == "final_over_random" else
                     "normalized-regret AUC with the default setting, paired by run")
    out["not_backtested"] = [c for c in cands if c not in runs]
    return out


def _p_text(c: dict, alpha: float, unit: str = "auc") -> str:
    what = ("final-regret difference (random search = 1)" if unit == "final_over_random"
            else "AUC difference")
    return (f"mean {what} {c['mean_difference']:+.3f} over {c['runs']} paired "
            f"simulated runs, one-sided Wilcoxon, Holm-adjusted p = {c['p_holm']:.3g}"
            f" {'<' if c['p_holm'] < alpha else '>='} {alpha}")


def tie_and_pair(table, test: dict | None, acquisitions: dict | None = None):
    """From the calibration table (before any tie-break) and :func:`optimization_test`:
    ``(tie_winner, tie_evidence, pair)``.

    ``tie_winner``: the tied model that optimizes significantly better than the leader
    (lowest mean AUC difference among the significant tied ones), else None.
    ``tie_evidence``: the test result in words (for the ranking's statement).
    ``pair``: None, or the models to use for calibration and for optimization with the
    test that decided; ``acquisitions`` ({surrogate: setting label}) adds the
    optimization model's own backtested setting.
    """
    if not test or not test.get("comparisons"):
        return None, None, None
    alpha = test.get("alpha", ALPHA)
    leader = test["reference"]
    rows = {r["surrogate"]: r for r in table.to_dict("records")}
    tied = {n for n, r in rows.items() if bool(r.get("tied_with_leader", False))}
    sig = [c for c in test["comparisons"] if c["significant"]]
    sig_tied = [c for c in sig if c["surrogate"] in tied]
    winner = min(sig_tied, key=lambda c: c["mean_difference"]) if sig_tied else None
    best_any = min(sig, key=lambda c: c["mean_difference"]) if sig else None
    if winner is not None:
        evidence = (f"the paired backtest test says {winner['surrogate']} optimizes better "
                    f"than {leader} ({_p_text(winner, alpha, test.get('unit', 'auc'))})")
    else:
        tested = [c for c in test["comparisons"] if c["surrogate"] in tied]
        evidence = ("; ".join(f"{c['surrogate']} vs {leader}: Holm-adjusted p = "
                              f"{c['p_holm']:.3g}" for c in tested)
                    + f", level {alpha}") if tested else None
    chosen = winner or best_any
    pair = None
    if chosen is not None:
        name = chosen["surrogate"]
        base = float(rows[leader]["crps"])
        gap = float(rows[name]["crps"]) / base - 1.0 if base else float("nan")
        is_tied = name in tied
        pair = {"calibration": leader, "optimization": name,
                "optimization_acquisition": (acquisitions or {}).get(name, DEFAULT_LABEL),
                "tied": bool(is_tied), "crps_gap_relative": gap, "margin": PAIR_MARGIN,
                "test": test["test"], "unit": test.get("unit", "auc"), "level": alpha,
                "experiment": "simulated",
                "runs": chosen["runs"], "mean_difference": chosen["mean_difference"],
                "p_value": chosen["p_value"], "p_holm": chosen["p_holm"]}
        why = (f"{name} optimizes better than {leader} in the simulated campaigns "
               f"({_p_text(chosen, alpha, test.get('unit', 'auc'))}), and its calibration is "
               + ("statistically tied with the leader's (95% model confidence set), so it "
                  "is recommended and the leader stays the model for calibrated "
                  "predictions" if is_tied else
                  f"close to the leader's (mean CRPS {gap:+.0%}, within the "
                  f"{PAIR_MARGIN:.0%} margin): use {leader} for calibrated predictions "
                  f"and {name} in the optimization loop")
               + " (Foldager et al. 2023: calibration tracks regret across model types "
                 "but not within one)")
        pair["statement"] = why
    return (None if winner is None else winner["surrogate"]), evidence, pair


def score_disagreement(preds: dict, table, blocks, seed: int,
                       scoring_scales: dict | None = None, n_draws: int = 2000) -> dict | None:
    """Do the leaders by held-out NLL and by held-out CRPS differ?

    Among the models passing the guard rails, each scored as recommended (raw, or with
    its cross-fitted variance scale).  When the leaders differ, the per-point NLL
    difference of the two is tested with the two-model sign-flip test over the ranking's
    blocks (the model confidence set's test, :func:`advisor.ranking.model_confidence_set`):
    ``significant`` when the CRPS leader is worse by NLL at level 0.05.
    """
    rows = _passing_rows(table)
    names = [n for n in rows if n in preds]
    if len(names) < 2:
        return None
    scoring_scales = scoring_scales or {}
    nll = {}
    for n in names:
        vs = float(rows[n].get("variance_scale", 1.0))
        scale = scoring_scales.get(n, vs) if abs(vs - 1.0) > 1e-12 else 1.0
        nll[n] = point_scores(preds[n], scale)["nll"]
    crps = {n: float(rows[n]["crps"]) for n in names}
    by_crps = min(names, key=crps.get)
    by_nll = min(names, key=lambda n: float(np.mean(nll[n])))
    out = {"crps_leader": by_crps, "nll_leader": by_nll, "disagree": by_crps != by_nll,
           "nll_difference": float(np.mean(nll[by_crps]) - np.mean(nll[by_nll])),
           "crps_difference": float(crps[by_nll] - crps[by_crps]),
           "test": "sign-flip (wild cluster) test over the ranking's blocks of the "
                   "per-point NLL difference, one model pair",
           "level": MCS_LEVEL, "p_value": None, "significant": False}
    if out["disagree"]:
        rng = np.random.default_rng(seed)
        losses = np.vstack([nll[by_crps], nll[by_nll]])
        p = float(model_confidence_set(losses, blocks, n_draws, rng)[0])
        out["p_value"] = p
        out["significant"] = bool(p < MCS_LEVEL)
        out["statement"] = (
            f"NLL and CRPS disagree about the leader: {by_crps} has the lowest held-out "
            f"CRPS, {by_nll} the lowest NLL ({out['nll_difference']:.3g} nats per point "
            f"better; sign-flip p = {p:.3g}, "
            + ("significant" if out["significant"] else "not significant")
            + f" at {MCS_LEVEL}). The ranking follows CRPS (README, 'How the ranking is "
              "decided'); NLL punishes overconfident tails harder, CRPS errors in the "
              "mean, so a plateau or heavy tails in the objective can split them.")
    return out


_SCHEME_WORDS = {"forward": "forward chaining", "campaign": "leave-one-campaign-out",
                 "kfold": "shuffled k-fold"}


def scheme_summary(primary: str, by_scheme: dict, table) -> dict:
    """Which scheme decided, and each scheme's CRPS leader among the models that pass
    the guard rails (the other schemes are diagnostics; thorough mode only)."""
    ok = set(_passing_rows(table)) or set(table["surrogate"])
    leaders = {}
    for scheme, scores in (by_scheme or {}).items():
        vals = {n: m.get("crps") for n, m in scores.items() if n in ok
                and m.get("crps") is not None and np.isfinite(m.get("crps"))}
        if vals:
            leaders[scheme] = min(vals, key=vals.get)
    main = leaders.get(primary)
    others = {s: n for s, n in leaders.items() if s != primary}
    text = f"{_SCHEME_WORDS.get(primary, primary)} decided the ranking"
    if others:
        text += "; " + "; ".join(
            f"under {_SCHEME_WORDS.get(s, s)} the CRPS leader is {n}"
            + (" too" if n == main else f" (not {main})") for s, n in others.items())
        text += " (diagnostics: they do not enter the ranking)"
    else:
        text += " (the other schemes are scored in thorough mode only)"
    return {"deciding_scheme": primary, "leaders_by_scheme": leaders,
            "schemes_agree": bool(all(n == main for n in others.values())),
            "rule": "the primary scheme decides; on the real-log benchmark forward "
                    "chaining had the lowest selection regret, and leave-one-campaign-out, "
                    "the mean of the two schemes' CRPS, or leave-one-campaign-out inside "
                    "forward chaining's tie group picked worse "
                    "(benchmarks/results/real_logs_score_choice.json, "
                    "benchmarks/results/real_logs_regret.json)",
            "statement": text}


def acquisition_strength(decision: dict) -> tuple[str, str]:
    """Plain words for the paired test of the settings against the default.

    *clear*: a setting beats the default at the stated level (Holm-adjusted);
    *weak*: none does, but the best one-sided raw p-value is below the level (a hint
    the multiplicity correction does not let through); *none*: no setting comes near.
    With *weak* or *none* the default is recommended.
    """
    comps = decision.get("comparisons") or []
    alpha = decision.get("alpha", 0.05)
    if decision.get("beats_default"):
        return "clear", f"beats the default at Holm-adjusted level {alpha}"
    if comps and min(c["p_value"] for c in comps) < alpha:
        return "weak", ("a setting looks better than the default before the correction "
                        "for the number of settings, not after; the default stands")
    return "none", "no setting beats the default on these logs; the default stands"


def baseline_statement(vb: dict | None, trials: int | None) -> str | None:
    """The recommended setting against random and grid search, in one clause.

    Model-based search is worth its trouble only if it ends better than the classic
    designs would; the backtest tests that on the same runs
    (:func:`advisor.backtest.baseline_test`) instead of taking it for granted.
    """
    if not vb or not vb.get("comparisons"):
        return None
    where = f" within {trials} trials" if trials else ""
    parts, lost = [], []
    for name in ("random search", "grid search"):
        rows = {r["metric"]: r for r in vb["comparisons"] if r["baseline"] == name}
        if not rows:
            continue
        fin, auc = rows.get("final"), rows.get("auc")
        won = [m for m, r in (("AUC", auc), ("final regret", fin))
               if r is not None and r["significant"]]
        short = name.split()[0]
        ratio = "" if fin is None or fin.get("ratio_of_means") is None else (
            f"final regret {fin['ratio_of_means']:.2f}x {short}'s; ")
        ps = ", ".join(f"{m} {r['p_holm']:.2g}" for m, r in
                       (("AUC", auc), ("final", fin)) if r is not None)
        # "not shown to beat": a p above the level is absence of evidence, not
        # evidence of a tie (p-values near 0.05 move with any change to the runs).
        verdict = f"beats {name} in {' and '.join(won)}" if won else \
            f"is not shown to beat {name}"
        if not won:
            lost.append(name)
        parts.append(f"{verdict} ({ratio}adjusted p: {ps})")
    text = (f"on the same simulated runs {vb.get('setting')} " + "; ".join(parts)
            + f" (one-sided paired tests, Holm over {len(vb['comparisons'])}, level "
            f"{vb['alpha']})")
    if "random search" in lost:
        text += (f": on these stand-ins model-based search is not shown to pay{where}, "
                 "so a random or space-filling design is as well supported by this "
                 "evidence")
    return text


def beats_random_search(vb: dict | None) -> bool | None:
    """Did the recommended setting beat random search on the simulated runs, in either
    unit (:func:`advisor.backtest.baseline_test`)?  None when that test did not run."""
    if not vb or "random search" not in (vb.get("beats") or {}):
        return None
    return bool(any(vb["beats"]["random search"].values()))


#: The caveat the headline carries when the backtest does not show the recommended
#: setting beating random search (terminal and PDF; ``beats_random_search`` False).
RANDOM_CAVEAT = ("on the backtest's stand-ins this setting is not shown to beat random search "
                 f"(one-sided paired tests at level {ALPHA}), "
                 "so the logs do not show that model-based search pays here")


def _setting_dict(backtest_out, label):
    for st in backtest_out.get("settings") or []:
        if st.get("label") == label:
            return {"name": st["name"], "params": dict(st.get("params") or {})}
    return None


#: The real-outcome check of a kept default (``benchmarks/nondefault_wins.py``, part
#: ``assess``, variant ``benchmark``: the product's quick assessment of past logs of a
#: local optimizer; ``results/nondefault_wins.json``, ``summary``): on past logs of
#: problems where a setting truly beat the default in real next campaigns (Levy-3 at
#: noise 0.05, Branin at noise 0.2; one-sided Wilcoxon over 20-40 paired real
#: campaigns), how often the backtest picked a true winner (counting the logs where its
#: paired test ran: 20 of 20, Levy-3 and Branin log seeds 0-9, measured 2026-12-03 at
#: commit f87afd1: simulated runs as long as the next campaign, here 20 trials, and
#: the campaign GP updated at every step; re-measured at stop 28, commit 19a3978, with
#: the GPs' scheduled re-fits full instead of warm-started: 0 of 20 again, the f87afd1
#: rows kept as variant ``benchmark_warm_s27``), and the one-sided 95% upper bound of
#: that rate (exact binomial, Clopper & Pearson 1934).  The earlier record, 0 of 30
#: (bound 0.095) with 12-trial runs, is kept as variant ``benchmark_trials12``.
#: Re-measured at stop 29 (2026-12-03, commit 2badac8) with the decision in final regret
#: over random search's: 0 of 20 again (Levy-3 10, Branin 0.2 10; the true winner in the
#: quick grid had the right sign on 5 and 7 of the 10 logs); the AUC-decided rows are
#: kept as variant ``benchmark_auc_s28``.  On two controls with no true winner
#: (Branin 0.05, Michalewicz-2 0.05, 10 logs each) no false pick either (0 of 20).  Kept beside
#: the statement so the printed sentence carries its own measured outcome;
#: ``tests/test_decision.py`` checks it against the results file.
REAL_DETECTION = {"picked": 0, "logs": 20, "upper_95": 0.139,
                  "benchmark": "benchmarks/nondefault_wins.py (assess)"}
#: The most this test could find there (``benchmarks/nondefault_ceiling.py``,
#: ``results/nondefault_ceiling.json``, measured 2026-12-03): the same true winners,
#: decided by :func:`advisor.backtest.paired_decision` on 24 paired runs that *are*
#: real next campaigns (a bootstrap of the stored ones, as if the stand-ins were the
#: real functions), in the unit the product decides in (final regret over random
#: search's, since stop 29; in the AUC unit it decided in before, 0.02 and 0.08-0.21)
#: and on the quick grid: the lowest and highest rate of picking a true winner over
#: the two cases, scored after 12 trials and after 30 (the next campaign's length, as
#: the quick backtest's runs now are).  ``tests/test_decision.py`` checks it against
#: the file.
PERFECT_STANDINS = {"runs": 24, "trials_12": (0.01, 0.24), "trials_30": (0.50, 0.58),
                    "benchmark": "benchmarks/nondefault_ceiling.py"}
#: What more runs buy (``benchmarks/final_unit_power.py --measure 1536``,
#: ``results/final_unit_power.json`` section ``measured``, stop 31, 2026-12-04): the
#: decision's own power for a gain of 0.1 in final regret over random search's with
#: 1,536 paired runs per setting, lowest and highest over the three sample logs
#: (campaign_gp, quick plan and grid, seed 0; about six minutes of backtest per model
#: on 2 cores).  Its real outcome (``benchmarks/nondefault_power.py --section
#: power_1536``, ``results/nondefault_wins.json``, stop 31): as many runs on the
#: benchmark's past logs whose next campaigns have a true winner in the quick grid
#: (Levy-3 at noise 0.05 and Branin at 0.2, log seeds 0-1; the product's stand-ins and
#: decision, GP surrogate): the power the decision states there (``real_power``, lowest
#: and highest) and how often it picked the true winner (``real_picks`` of
#: ``real_logs``).  ``tests/test_decision.py`` checks both against their files.
MORE_RUNS = {"runs": 1536, "power": (0.34, 0.98),
             "benchmark": "benchmarks/final_unit_power.py --measure 1536",
             "real_logs": 4, "real_picks": 0, "real_power": (0.48, 0.75),
             "real_benchmark": "benchmarks/nondefault_power.py --section power_1536"}


def _rate_range(pair) -> str:
    lo, hi = pair
    return f"{lo:.0%}" if lo == hi else f"{lo:.0%}-{hi:.0%}"


def _detectable_text(dg) -> str:
    """What gain the runs can see, from ``decision.detectable_gain``."""
    if not dg:
        return ""
    top = dg["largest_possible_gain"]
    if dg.get("gain") is None:
        return (f"; not even a setting that ended every run at the optimum (a gain of "
                f"{top:.2f}) would be found 80% of the time")
    return (f"; 80% of the time these runs find only a gain of {dg['gain']:.2f} or more "
            f"(at most {top:.2f} is possible)")


def _acquisition_statement(source: str, decision: dict, leader: str, backtest_out) -> str:
    """The acquisition evidence in one sentence, with its test and level."""
    if source != "backtest":
        if backtest_out is None:
            return ("EI xi=0.01 is a default: the acquisition backtest did not run, so "
                    "nothing was tested")
        return (f"EI xi=0.01 is a default: the backtest did not cover {leader} and the "
                "default without error, so nothing was tested")
    alpha = decision.get("alpha")
    power = decision.get("power_at_0.1")
    pfinal = decision.get("power_final_at_0.1")
    final_unit = decision.get("unit", "final_over_random") == "final_over_random"
    # What the power is for, in words.  The decision reads the final regret over random
    # search's (random search = 1, the unit real next campaigns are judged in); its
    # power for a 0.1 gain there is what the runs can see.  The power for 0.1 of AUC
    # (a large gain) is given beside it for comparison with the earlier releases.
    level = decision.get("final_mean_level")
    if final_unit and pfinal is None and level is not None and level <= 0.1:
        ptxt = (f"; the settings' runs end on average at {level:.2f} of random search's "
                "final regret, so no setting can gain 0.1 there")
    elif final_unit:
        ptxt = "" if pfinal is None else (
            f"; power to find a gain of 0.1 in final regret (random search = 1) "
            f"{pfinal:.2f}" + ("" if power is None else
                               f" (for a 0.1 AUC gain {power:.2f})")
            + ("" if pfinal >= 0.8 else
               f": smaller real gains can go unseen; more runs raise it, slowly (on the "
               f"sample logs {MORE_RUNS['runs']:,} runs per setting found it with power "
               f"{MORE_RUNS['power'][0]:.2f}-{MORE_RUNS['power'][1]:.2f}, but on "
               f"{MORE_RUNS['real_logs']} benchmark logs with a true winner as many "
               f"runs, at power {MORE_RUNS['real_power'][0]:.2f}-"
               f"{MORE_RUNS['real_power'][1]:.2f}, picked it {MORE_RUNS['real_picks']} "
               f"times: the stand-ins did not show its gain; --backtest-runs, README)"))
    elif power is None and decision.get("auc_mean_level") is not None:
        ptxt = (f"; the runs' mean AUC is {decision['auc_mean_level']:.2f}, so no setting "
                "can gain 0.1 of AUC there")
    else:
        ptxt = "" if power is None else (
            f"; power to find a 0.1 AUC gain {power:.2f}, a large gain" +
            ("" if pfinal is None else f", but {pfinal:.2f} for a gain of 0.1 in final "
                                       "regret (random search = 1)")
            + ": smaller real gains can go unseen")
    if final_unit and pfinal is not None and pfinal < 0.8:
        ptxt += _detectable_text(decision.get("detectable_gain"))
    unit = (" in final regret over random search's" if final_unit else " in AUC")
    rd = REAL_DETECTION
    ps = PERFECT_STANDINS
    real = (f"; on {rd['logs']} benchmark logs where another setting truly beat the "
            f"default in real campaigns, this backtest picked it {rd['picked']} times, and "
            f"with stand-ins equal to the real functions it would find such a gain on "
            f"{_rate_range(ps['trials_12'])} of logs with runs of 12 trials and "
            f"{_rate_range(ps['trials_30'])} with runs of 30, so a kept default is no "
            "proof that the default is best")
    n = max((c.get("runs", 0) for c in decision.get("comparisons") or []), default=0)
    trials = ((backtest_out or {}).get("simulated") or {}).get("budget")
    where = f"{n} paired {decision.get('experiment')} runs" + (
        f" of {trials} trials" if decision.get("experiment") == "simulated" and trials
        else "")
    if decision.get("beats_default"):
        cmp = next(c for c in decision["comparisons"] if c["label"] == decision["chosen"])
        return (f"{decision['chosen']} was chosen by the acquisition backtest: it beats the "
                f"default EI xi=0.01{unit} on {where} ({decision.get('test')}, adjusted p = "
                f"{cmp['p_holm']:.3g} < level {alpha}{ptxt})")
    best = min((c["p_holm"] for c in decision.get("comparisons") or []), default=None)
    return (f"EI xi=0.01 is the default, kept by the acquisition backtest: no setting beats "
            f"it{unit} on {where} ({decision.get('test')} at level {alpha}"
            + ("" if best is None else f"; smallest adjusted p = {best:.3g}")
            + f"{ptxt}); the logs give no reason to change it{real}")


def recommendation(ranking, backtest_out, *, test=None, pair=None, disagreement=None,
                   schemes=None) -> dict:
    """The ``recommendation`` payload: the table's first model, its acquisition setting
    (the paired test against the default decides), and how the decision was reached."""
    table = ranking.table
    leader = ranking.leader
    extra = {"tie_break": None, "pair": pair, "optimization_test": test,
             "score_disagreement": disagreement,
             "deciding_scheme": (schemes or {}).get("deciding_scheme")}
    if leader is None:
        return {"surrogate": None, "acquisition": dict(DEFAULT_ACQUISITION),
                "acquisition_source": "default", "acquisition_statement":
                "no surrogate to run the acquisition with", "variance_scale": 1.0,
                "confidence": "none", "statement": ranking.statement,
                "runner_up": None, "reasons": [ranking.statement], **extra}
    row = table.set_index("surrogate").loc[leader]
    ok = table[table["status"] == "ok"]
    runner = ok["surrogate"].iloc[1] if len(ok) > 1 else None
    acq = dict(DEFAULT_ACQUISITION)
    source = "default"
    reasons = list(ranking.reasons.get(leader, []))
    choice = (backtest_out or {}).get("per_surrogate", {}).get(leader)
    decision = (choice or {}).get("decision") or {}
    if choice and choice.get("acquisition") and decision.get("chosen"):
        # the paired test against the default decides (advisor.backtest._decision)
        source = "backtest"
        if decision.get("beats_default"):
            acq = _setting_dict(backtest_out, decision["chosen"]) or acq
    statement = _acquisition_statement(source, decision, leader, backtest_out)
    reasons.append("acquisition: " + statement)
    vs_base = baseline_statement(decision.get("versus_baselines"),
                                 ((backtest_out or {}).get("simulated") or {}).get("budget")
                                 if decision.get("experiment") == "simulated" else None
                                 ) if source == "backtest" else None
    if vs_base:
        reasons.append("baselines: " + vs_base)
    acq_strength = acquisition_strength(decision) if source == "backtest" else None
    if acq_strength is not None:
        reasons.append(f"strength of the acquisition evidence: {acq_strength[0]} "
                       f"({acq_strength[1]})")
    tied = [n for n in ok["surrogate"] if n != leader and bool(
        table.set_index("surrogate").loc[n].get("tied_with_leader", False))
        and bool(table.set_index("surrogate").loc[n]["guard_coverage"])
        and bool(table.set_index("surrogate").loc[n]["guard_order"])]
    if tied:
        won = ranking.tie_winner is not None
        extra["tie_break"] = {
            "tied": [leader] + tied, "decided_by": "paired backtest test" if won
            else "mean CRPS", "winner": leader,
            "reason": (f"{leader} optimizes significantly better in the simulated "
                       "campaigns than the calibration leader" if won else
                       ("no tied model optimizes significantly better than the "
                        "calibration leader in the simulated campaigns"
                        if test is not None else
                        "the paired backtest test did not run for the tied models (no "
                        "backtest, or no simulated runs for the leader)")
                       + ", so mean CRPS keeps its order; a backtest score without a "
                         "significant paired test breaks no tie")}
        reasons.append("tie-break: " + extra["tie_break"]["reason"])
    if pair is not None:
        reasons.append("pair: " + pair["statement"])
    if disagreement and disagreement.get("disagree"):
        reasons.append(disagreement["statement"])
    if schemes:
        reasons.append("validation: " + schemes["statement"])
    test_out = None if source != "backtest" else {
        "test": decision.get("test"), "level": decision.get("alpha"),
        "experiment": decision.get("experiment"), "metric": decision.get("metric"),
        "unit": decision.get("unit"), "default": decision.get("default"), "beats_default": decision.get("beats_default"),
        "p_values": {c["label"]: c["p_value"] for c in decision.get("comparisons", [])},
        "p_holm": {c["label"]: c["p_holm"] for c in decision.get("comparisons", [])},
        "power_at_0.1": decision.get("power_at_0.1"),
        "power_final_at_0.1": decision.get("power_final_at_0.1"),
        "final_mean_level": decision.get("final_mean_level"),
        "auc_mean_level": decision.get("auc_mean_level"),
        "detectable_gain": decision.get("detectable_gain"),
        "versus_baselines": decision.get("versus_baselines"),
        "baseline_statement": vs_base,
        "real_detection": {**REAL_DETECTION, "perfect_standins": {
            k: (list(v) if isinstance(v, tuple) else v)
            for k, v in PERFECT_STANDINS.items()}},
        "more_runs": {k: (list(v) if isinstance(v, tuple) else v)
                      for k, v in MORE_RUNS.items()}}
    return {"surrogate": leader, "acquisition": acq, "acquisition_source": source,
            "beats_random_search": beats_random_search(
                decision.get("versus_baselines") if source == "backtest" else None),
            "acquisition_evidence": None if acq_strength is None else acq_strength[0],
            "acquisition_test": test_out, "acquisition_statement": statement,
            "acquisition_margins": None if not (choice and choice.get("acquisition")) else {
                "over_runner_up": choice.get("margin_over_runner_up"),
                "over_random": choice.get("margin_over_random"),
                "runner_up": (choice.get("runner_up") or {}).get("label")},
            "variance_scale": float(row["variance_scale"]),
            "confidence": ranking.confidence, "statement": ranking.statement,
            "runner_up": runner, "reasons": reasons,
            "cheaper_alternatives_by_fit_seconds": ranking.cheaper_by_fit_seconds,
            **extra}
