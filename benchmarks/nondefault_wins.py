"""Can the acquisition decision recommend a truly better non-default setting?

    python benchmarks/nondefault_wins.py incumbent   # the table's campaigns, plug-in incumbent
    python benchmarks/nondefault_wins.py truth --cases branin:0.05 --reps 30
    python benchmarks/nondefault_wins.py truth --reps 20 \
        --cases levy3:0.05,styblinski_tang2:0.05,michalewicz2:0.05
    python benchmarks/nondefault_wins.py truth --cases levy3:0.05 --reps 40 \
        --only "UCB beta=4;UCB beta=1" --section truth_40
    python benchmarks/nondefault_wins.py assess --cases levy3:0.05 \
        --log-seeds 0,1,2,3,4,5,6,7,8,9 --variants benchmark,b30
    python benchmarks/nondefault_wins.py unit --cases levy3:0.05,branin:0.2 \
        --log-seeds 0,1,2,3,4,5,6,7,8,9
    python benchmarks/nondefault_wins.py unit --classes gp_sum_ml --section unit_gp_sum_ml \
        --cases levy3:0.05,branin:0.2,michalewicz2:0.05,branin:0.05 --log-seeds 0,1,2
    python benchmarks/nondefault_wins.py standins    # the stand-in constructions vs truth
    python benchmarks/nondefault_wins.py summary     # the figures the README quotes

Writes (merges into) ``benchmarks/results/nondefault_wins.json``.

The next-campaign benchmark (``benchmarks/next_campaign.py``) shows the rule is not worse
than the default (EI, xi = 0.01); this one asks whether it ever picks a non-default that
truly wins.  Three parts, each a section of the results file:

* ``incumbent``: the table's real campaigns rerun with the product's incumbent (the
  lowest posterior mean at the evaluated points, :func:`advisor.acquisition.incumbent`)
  instead of the lowest noisy observation, same size as the table (10 replicates, 30
  trials), against the table's numbers.
* ``truth``: real next campaigns (the benchmark's own loop, ``next_campaign._run``)
  of every setting of the full grid against the default, ``--reps`` paired replicates;
  mean normalized-regret difference (setting - default; random search = 1) and the
  one-sided Wilcoxon p of "the setting's final regret is lower" (scipy, no multiplicity
  correction: this is the ground truth, one question per setting).  A case is a
  function and a noise level (times the function's standard deviation over its domain).
* ``assess``: for each case and past-log seed, the product's assessment of the past
  logs (as the benchmark runs it: quick, the quick grid, budget from the logs) and, as
  a diagnosis, the same with the full grid and the next campaign's budget (30 trials):
  per setting the simulated mean AUC difference (setting - default), the p-values
  overall and per stand-in class, the decision and ``power_at_0.1``.
* ``unit``: the backtest alone (as ``b30``) decided twice over the same simulated runs,
  on the range-normalized AUC the product uses and on final regret normalized by random
  order's on the same stand-in (the unit of ``truth``): would deciding in the real
  outcome's unit find the true winner?  ``--classes`` chooses the stand-in classes
  (``BacktestPlan.sim_classes``, e.g. the opt-in GP variants of
  ``advisor/backtest/_gp_standins.py``) and ``--section`` the results section (one per
  construction: ``unit`` is the default gp+forest, ``unit_gp_hyper``, ``unit_gp_sum``,
  ``unit_gp_sum_ml`` one class each); each log's row is saved as it finishes.
* ``power`` (in ``benchmarks/nondefault_power.py``, its own command line): ``unit``'s
  backtest with the quick grid and more runs per log, per stand-in construction.
* ``standins`` (no runs): :func:`standin_summary` of the unit-like sections against
  ``truth``, written to ``standins_summary``.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from scipy import stats
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from advisor import assess, load_trials  # noqa: E402
from advisor.acquisition import AcquisitionSetting, default_settings  # noqa: E402
from benchmarks import next_campaign as nc  # noqa: E402

OUT = ROOT / "benchmarks" / "results" / "nondefault_wins.json"
DEFAULT = nc.DEFAULT


def _p_less(a, b) -> float:
    d = np.asarray(a, float) - np.asarray(b, float)
    if np.all(d == 0):
        return 1.0
    return float(stats.wilcoxon(d, alternative="less").pvalue)


def _noise(name, level):
    return level / nc.NOISE * nc._noise_sd(name)


def real_campaigns(name, level, reps, settings, seed=0, incumbent_rule="plug-in",
                   budget=30, baselines=True) -> dict:
    """Final regrets of real next campaigns, normalized by random search's mean."""
    sd = _noise(name, level)
    reg = {s.label: [nc._run(name, s, r, budget, sd, seed, incumbent_rule=incumbent_rule)
                     for r in range(reps)] for s in settings}
    reg["random search"] = [nc._run(name, None, r, budget, sd, seed) for r in range(reps)]
    if baselines:
        reg["grid search"] = [nc._grid_run(name, r, budget, seed) for r in range(reps)]
    scale = float(np.mean(reg["random search"])) or 1.0
    return {k: list(np.asarray(v) / scale) for k, v in reg.items()}


def _worst(name) -> float:
    f, d, _, _ = nc.FUNCTIONS[name]
    return float(f(np.random.default_rng(7).random((4096, d))).max())


def real_traces(name, level, reps, settings, seed=0, budget=30, horizons=(12, 30)) -> dict:
    """Real campaigns scored four ways, to compare with the backtest's metric: final
    regret after ``h`` trials (normalized by random search's mean there, as the table)
    and the normalized-regret AUC over the first ``h`` trials (the backtest's metric:
    the mean over trials of (best so far - f*) / (f_max - f*), f_max the largest of
    4096 uniform samples), for each horizon ``h``."""
    f, d, fstar, _ = nc.FUNCTIONS[name]
    sd = _noise(name, level)
    hi = _worst(name)
    raw = {s.label: [nc._run(name, s, r, budget, sd, seed, trace=True) for r in range(reps)]
           for s in settings}
    raw["random search"] = [nc._run(name, None, r, budget, sd, seed, trace=True)
                            for r in range(reps)]
    out = {}
    for h in horizons:
        fin = {k: np.array([np.minimum.accumulate(t)[h - 1] - fstar for t in v])
               for k, v in raw.items()}
        scale = float(fin["random search"].mean()) or 1.0
        out[f"final_{h}"] = {k: list(v / scale) for k, v in fin.items()}
        out[f"auc_{h}"] = {k: [float(np.mean((np.minimum.accumulate(t[:h]) - fstar)
                                             / (hi - fstar))) for t in v]
                           for k, v in raw.items()}
    return out


def _summary(norm) -> dict:
    base = np.asarray(norm[DEFAULT.label])
    out = {}
    for k, v in norm.items():
        v = np.asarray(v)
        out[k] = {"mean": float(v.mean()),
                  "minus_default": float((v - base).mean()),
                  "se_minus_default": float((v - base).std(ddof=1) / np.sqrt(len(v))),
                  "p_beats_default": _p_less(v, base) if k != DEFAULT.label else None}
    return out


def part_incumbent(reps=10, seed=0, progress=print) -> dict:
    old = json.loads((ROOT / "benchmarks" / "results" / "next_campaign.json").read_text())
    settings = default_settings(quick=False)
    out = {}
    for name in nc.TABLE_FUNCTIONS:
        t0 = time.process_time()
        norm = real_campaigns(name, nc.NOISE, reps, settings, seed)
        means = {k: float(np.mean(v)) for k, v in norm.items()}
        old_means = old["functions"][name]["mean_normalized_regret"]
        arms = [s.label for s in settings]
        best = min(arms, key=means.get)
        out[name] = {"mean_normalized_regret": means, "normalized_regret": norm,
                     "best_setting": best, "default": means[DEFAULT.label],
                     "old_mean_normalized_regret": old_means,
                     "old_best_setting": old["functions"][name]["best_setting"],
                     "p_default_new_vs_old": None, "cpu_seconds": time.process_time() - t0}
        d_old = np.asarray(old["functions"][name]["normalized_regret"][DEFAULT.label])
        # paired by replicate (same starts, candidates and noise); old normalized by the
        # old random-search mean, which the incumbent does not touch
        out[name]["p_default_new_vs_old"] = _p_less(norm[DEFAULT.label], d_old)
        progress(f"{name}: default {old_means[DEFAULT.label]:.3f} -> {means[DEFAULT.label]:.3f}; "
                 f"best {out[name]['old_best_setting']} -> {best} {means[best]:.3f}")
    return {"reps": reps, "budget": 30, "noise": nc.NOISE, "functions": out}


def part_truth(cases, reps, seed=0, progress=print, only=None, section="truth") -> dict:
    settings = [s for s in default_settings(quick=False)
                if only is None or s.label == DEFAULT.label or s.label in only]
    labels = {s.label for s in settings}
    out = {}
    for name, level in cases:
        t0 = time.process_time()
        tr = real_traces(name, level, reps, settings, seed)
        summ = {m: _summary(v) for m, v in tr.items()}
        key = f"{name}@{level:g}"
        winners = sorted(k for k, v in summ["final_30"].items() if k in labels
                         and k != DEFAULT.label and v["minus_default"] <= -0.1
                         and v["p_beats_default"] < 0.05)
        out[key] = {"function": name, "noise": level, "reps": reps, "summary": summ,
                    "values": tr, "true_winners": winners,
                    "cpu_seconds": time.process_time() - t0}
        _merge(section, {key: out[key]}, key=True)  # each case as it finishes
        progress(f"{key} ({out[key]['cpu_seconds']:.0f} s cpu): default "
                 f"{summ['final_30'][DEFAULT.label]['mean']:.3f}; winners {winners}")
        for m in summ:
            progress(f"  {m}: " + ", ".join(
                f"{k} {v['minus_default']:+.3f} (p {v['p_beats_default']:.2g})"
                for k, v in summ[m].items() if k in labels and k != DEFAULT.label))
    return out


def _decision_row(dec, sim, recommended, leader) -> dict:
    rows = {}
    for c in dec.get("comparisons", []):
        rows[c["label"]] = {
            "mean_difference": c["mean_difference"], "p": c["p_value"],
            "p_holm": c["p_holm"], "significant": c["significant"],
            "by_class": {k: {"mean_difference": v["mean_difference"], "p": v["p_value"],
                             "p_holm": v["p_holm"], "runs": v["runs"]}
                         for k, v in (c.get("by_class") or {}).items()}}
    finals = {r["label"]: r["curve"]["median"][-1] for r in sim.get("results", [])
              if r["surrogate"] == leader and not r["error"] and r["curve"]["median"]}
    for lab, row in rows.items():  # the simulated runs' median final regret (range units)
        if lab in finals and dec.get("default") in finals:
            row["median_final_minus_default"] = finals[lab] - finals[dec["default"]]
    return {"surrogate": leader, "recommended": recommended,
            "chosen_by_test": dec.get("chosen"), "beats_default": dec.get("beats_default"),
            "power_at_0.1": dec.get("power_at_0.1"), "comparisons": rows,
            "simulated_budget": sim.get("budget"), "n_init": sim.get("n_init"),
            "sim_noise_std": sim.get("noise_std"),
            "sim_median_final": finals}


def _assess_row(trials, seed, backtest_runs=None) -> dict:
    """The product's assessment, as the benchmark runs it (``backtest_runs``: as
    ``--backtest-runs``, for the variants ``benchmark_r<N>``)."""
    with threadpool_limits(1):
        a = assess(trials, seed=seed, quick=True, jobs=1, plan=False,
                   backtest_runs=backtest_runs)
    rec = a.recommendation
    bt = a.backtest or {}
    dec = (bt.get("per_surrogate", {}).get(rec["surrogate"]) or {}).get("decision") or {}
    return _decision_row(dec, bt.get("simulated") or {},
                         AcquisitionSetting.from_dict(rec["acquisition"]).label,
                         rec["surrogate"])


def _backtest_row(trials, seed, budget, n_init, surrogate="gp", **plan_changes) -> dict:
    """Diagnosis: the product's backtest alone (simulated campaigns, no replay), the
    full grid, the quick plan with the simulated budget and start size changed."""
    from advisor.assessment._stages import _quick_model
    from advisor.backtest import plan_for, run_backtest
    plan = plan_for(True, sim_max_budget=budget, n_init=n_init, replay=False,
                    **plan_changes)
    with threadpool_limits(1):
        out = run_backtest(trials, [surrogate], default_settings(quick=False), seed=seed,
                           quick=True, budget=budget, make=_quick_model, plan=plan)
    dec = out["per_surrogate"][surrogate].get("decision") or {}
    rec = dec.get("chosen") if dec.get("beats_default") else DEFAULT.label
    return _decision_row(dec, out.get("simulated") or {}, rec, surrogate)


def _past_logs(cases, log_seeds):
    """(case key, log seed, d, trials) for every case and past-log seed: the benchmark's
    past log (``next_campaign._past_log``) loaded as the product loads a file."""
    cfg = nc.CONFIGS["full"]
    for name, level in cases:
        sd = _noise(name, level)
        for s in log_seeds:
            log = nc._past_log(name, s, cfg["n_campaigns"], cfg["past_trials"], sd)
            with tempfile.TemporaryDirectory() as tmp:
                path = Path(tmp) / f"{name}.csv"
                log.to_csv(path, index=False)
                trials = load_trials(path, objective="y", campaign="campaign", order="step")
            yield f"{name}@{level:g}", s, nc.FUNCTIONS[name][1], trials


def part_assess(cases, log_seeds, variants=("benchmark",), progress=print) -> dict:
    """``variants``: ``benchmark`` (:func:`_assess_row`), ``benchmark_r<N>`` (the same
    with ``backtest_runs=N``), ``b30`` (backtest alone with
    the next campaign's budget, 30 trials, and start, d + 1 points), ``b12`` (the
    same at the quick plan's 12 trials and d + 1 starts)."""
    out = {}
    for key, s, d, trials in _past_logs(cases, log_seeds):
        for v in variants:
            t0 = time.process_time()
            if v == "benchmark":
                row = _assess_row(trials, s)
            elif v.startswith("benchmark_r"):   # e.g. benchmark_r384: --backtest-runs 384
                row = _assess_row(trials, s, backtest_runs=int(v[len("benchmark_r"):]))
            elif v == "b30":
                row = _backtest_row(trials, s, 30, d + 1)
            elif v == "b12":
                row = _backtest_row(trials, s, 12, d + 1)
            else:
                raise SystemExit(f"unknown variant {v}")
            row["cpu_seconds"] = time.process_time() - t0
            out.setdefault(key, {}).setdefault(v, {})[str(s)] = row
            progress(f"{key} seed {s} {v}: {row['recommended']} (power "
                     f"{row['power_at_0.1']}); " + ", ".join(
                         f"{k} {c['mean_difference']:+.3f} " + "/".join(
                             f"{cl}:{b['mean_difference']:+.3f},p{b['p']:.2g}"
                             for cl, b in c["by_class"].items())
                         for k, c in row["comparisons"].items())
                     + f"  [{row['cpu_seconds']:.0f} s cpu]", flush=True)
    return out


def _unit_decision(out, surrogate, metric) -> dict:
    """The paired decision on the simulated runs in one of two units: ``auc`` (what the
    product decides on) or ``final`` (each run's final regret divided by random order's
    mean final regret on the same stand-in: the real outcome's unit)."""
    from advisor.backtest import paired_decision

    sim = out["simulated"]
    cls = {f["id"]: f.get("class") for f in sim["functions"]}
    rnd = sim["random"]["per_unit_mean_final_regret"]
    values = {}
    for r in sim["results"]:
        if r["surrogate"] != surrogate or r["error"]:
            continue
        values[r["label"]] = {
            (run["unit"], run["seed_index"]):
                run["auc"] if metric == "auc" else
                (run["final_regret"] / rnd[run["unit"]] if rnd[run["unit"]] > 0 else 0.0)
            for run in r["runs"]}
    strata = {k: cls[k[0]] for v in values.values() for k in v}
    dec = paired_decision(values, DEFAULT.label, strata=strata)
    return {"chosen": dec["chosen"], "comparisons": {
        c["label"]: {"mean_difference": c["mean_difference"], "p": c["p_value"],
                     "p_holm": c["p_holm"],
                     "by_class": {k: {"mean_difference": b["mean_difference"],
                                      "p": b["p_value"]}
                                  for k, b in (c.get("by_class") or {}).items()}}
        for c in dec["comparisons"]}}


def part_unit(cases, log_seeds, budget=30, progress=print, classes=None,
              section=None) -> dict:
    """Would deciding in the real outcome's unit find the true winner?  The backtest
    alone (GP, the full grid, ``budget`` trials from d + 1 starts, as ``b30``) on each
    past log, decided twice over the same runs: on range-normalized AUC and on final
    regret normalized by random order's on the same stand-in.  ``classes``: the
    stand-in classes (``BacktestPlan.sim_classes``; default the plan's); ``section``:
    when given, each log's row is merged into that results section as it finishes."""
    from advisor.assessment._stages import _quick_model
    from advisor.backtest import plan_for, run_backtest

    out = {}
    for key, s, d, trials in _past_logs(cases, log_seeds):
        plan = plan_for(True, sim_max_budget=budget, n_init=d + 1, replay=False,
                        **({} if not classes else {"sim_classes": tuple(classes)}))
        t0 = time.process_time()
        with threadpool_limits(1):
            bt = run_backtest(trials, ["gp"], default_settings(quick=False), seed=s,
                              quick=True, budget=budget, make=_quick_model,
                              plan=plan)
        row = {m: _unit_decision(bt, "gp", m) for m in ("auc", "final")}
        row["cpu_seconds"] = time.process_time() - t0
        out.setdefault(key, {})[str(s)] = row
        if section:  # each log as it finishes
            res = json.loads(OUT.read_text()) if OUT.exists() else {}
            res.setdefault(section, {}).setdefault(key, {})[str(s)] = row
            OUT.write_text(json.dumps(res, indent=1, default=float))
        progress(f"{key} seed {s}: auc -> {row['auc']['chosen']}, final -> "
                 f"{row['final']['chosen']}", flush=True)
    return out


def summary(res) -> dict:
    """The figures the README quotes: for every assessed case and variant, how often the
    rule picked a setting that truly wins (``truth``), and each true winner's simulated
    AUC difference per stand-in class, sign agreement and power."""
    out = {}
    for key, variants in res.get("assess", {}).items():
        # a true winner at 20 replicates (truth) or at 40 (truth_40, its own test)
        winners = set()
        for sec in ("truth", "truth_40"):
            winners |= set(res.get(sec, {}).get(key, {}).get("true_winners", []))
        for var, rows in variants.items():
            picked = [r["recommended"] for r in rows.values()]
            per = {}
            for w in sorted(winners):
                diffs = [r["comparisons"][w] for r in rows.values() if w in r["comparisons"]]
                if not diffs:
                    per[w] = "not in the backtested grid"
                    continue
                per[w] = {"seeds": len(diffs),
                          "mean_auc_difference": float(np.mean([c["mean_difference"]
                                                                for c in diffs])),
                          "negative_sign": int(sum(c["mean_difference"] < 0 for c in diffs)),
                          "by_class_negative_sign": {
                              cl: int(sum(c["by_class"][cl]["mean_difference"] < 0
                                          for c in diffs))
                              for cl in diffs[0]["by_class"]},
                          "by_class_min_p": {cl: float(min(c["by_class"][cl]["p"]
                                                           for c in diffs))
                                             for cl in diffs[0]["by_class"]}}
            out[f"{key} {var}"] = {
                "true_winners": sorted(winners), "seeds": len(picked),
                "picked_a_true_winner": int(sum(p in winners for p in picked)),
                "picked": picked,
                "power_at_0.1": [r["power_at_0.1"] for r in rows.values()],
                "winners_in_backtest": per}
    return out


def part_geometry(cases, log_seeds, classes, n_functions=8, radius=0.1,
                  progress=print) -> dict:
    """Where each stand-in construction puts its minimum, against the real function,
    on the same candidate set (200 fresh samples of the space the product infers from
    the log, the quick plan's): the unit-cube distance from the log's best trial to the function's minimizer over the
    set, and the gap between the best candidate within ``radius`` of the log's best
    trial and the set's minimum, as a fraction of the function's range on the set
    (0: the log already sits at the optimum's basin).  No campaigns run."""
    from advisor.assessment._stages import _quick_model
    from advisor.backtest import mixed_standins

    out = {}
    for key, s, d, trials in _past_logs(cases, log_seeds):
        name = key.split("@")[0]
        f = nc.FUNCTIONS[name][0]
        # the benchmark's functions take the unit cube, the logs' raw units
        used = trials.used[trials.params].to_numpy(float)
        best = used[int(np.argmin(trials.y))]
        row = {}
        for cls in ["real"] + list(classes):
            st = mixed_standins(trials, 1 if cls == "real" else n_functions, 200, s,
                                make=_quick_model, classes=("gp",) if cls == "real"
                                else (cls,), quick=True)
            F = st.frame.to_numpy(float)
            values = f(F)[None] if cls == "real" else st.values
            near = np.linalg.norm(F - best, axis=1) <= radius
            dist, gap = [], []
            for v in values:
                dist.append(float(np.linalg.norm(F[int(np.argmin(v))] - best)))
                rng_ = float(v.max() - v.min()) or 1.0
                gap.append(float((v[near].min() - v.min()) / rng_) if near.any()
                           else None)
            row[cls] = {"distance": float(np.mean(dist)),
                        "gap": float(np.mean([g for g in gap if g is not None]))
                        if any(g is not None for g in gap) else None}
        out.setdefault(key, {})[str(s)] = row
        progress(f"{key} seed {s}: " + ", ".join(
            f"{c} dist {v['distance']:.2f} gap {v['gap']}" for c, v in row.items()))
    agg = {}
    for key, rows in out.items():
        agg[key] = {c: {m: float(np.mean([r[c][m] for r in rows.values()
                                          if r[c][m] is not None]))
                        for m in ("distance", "gap")} for c in ["real"] + list(classes)}
    return {"radius": radius, "logs": out, "mean": agg}


def standin_summary(res, sections) -> dict:
    """Per ``unit``-like section (one stand-in construction each) and case: each
    setting's simulated difference from the default (mean over logs of the per-log mean
    over runs, and its se over logs) in both units beside the truth (``truth``'s final
    regret at 30 trials), the rank correlation of the eight simulated means with the
    truth's, how many logs give each true winner the right sign, and the decision's
    non-default picks in each unit (on a case with no true winner these are false
    picks).  For the mixed ``unit`` section each class is also summarized alone
    (``unit/gp``, ``unit/forest``: its runs' share of each log's comparison)."""
    out = {}
    for sec in sections:
        variants = [None] + (["gp", "forest"] if sec == "unit" else [])
        for cl in variants:
            name = sec if cl is None else f"{sec}/{cl}"
            for key, rows in res.get(sec, {}).items():
                truth = res.get("truth", {}).get(key)
                if not truth:
                    continue
                tr = truth["summary"]["final_30"]
                labels = [lab for lab in tr if lab not in
                          (DEFAULT.label, "random search", "grid search")]
                winners = set()
                for t in ("truth", "truth_40"):
                    winners |= set(res.get(t, {}).get(key, {}).get("true_winners", []))

                def diff(row, lab, unit):
                    c = row[unit]["comparisons"][lab]
                    return c["mean_difference"] if cl is None else \
                        c["by_class"][cl]["mean_difference"]

                per = {}
                for unit in ("final", "auc"):
                    per[unit] = {lab: np.array([diff(r, lab, unit) for r in rows.values()])
                                 for lab in labels}
                sim = {lab: float(v.mean()) for lab, v in per["final"].items()}
                rho = stats.spearmanr([sim[lab] for lab in labels],
                                      [tr[lab]["minus_default"] for lab in labels])[0]
                n = len(rows)
                out.setdefault(name, {})[key] = {
                    "logs": n, "true_winners": sorted(winners),
                    "settings": {lab: {
                        "truth_final_minus_default": tr[lab]["minus_default"],
                        "sim_final_minus_default": sim[lab],
                        "sim_final_se": float(per["final"][lab].std(ddof=1) / np.sqrt(n))
                        if n > 1 else None,
                        "sim_auc_minus_default": float(per["auc"][lab].mean())}
                        for lab in labels},
                    "spearman_sim_vs_truth": float(rho),
                    "right_sign_logs": {w: int((per["final"][w] < 0).sum())
                                        for w in sorted(winners)},
                    "picks_final": [r["final"]["chosen"] for r in rows.values()
                                    if r["final"]["chosen"] not in (None, DEFAULT.label)],
                    "picks_auc": [r["auc"]["chosen"] for r in rows.values()
                                  if r["auc"]["chosen"] not in (None, DEFAULT.label)],
                    "cpu_seconds_per_log": float(np.mean([r["cpu_seconds"]
                                                          for r in rows.values()]))}
    return out


def _cases(text):
    out = []
    for item in text.split(","):
        n, lv = item.split(":")
        out.append((n, float(lv)))
    return out


def _merge(section, value, key=None):
    res = json.loads(OUT.read_text()) if OUT.exists() else {}
    if key is None:
        res[section] = value
    else:
        res.setdefault(section, {}).update(value)
    OUT.write_text(json.dumps(res, indent=1, default=float))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("part", choices=["incumbent", "truth", "assess", "unit", "summary",
                                     "standins", "geometry"])
    ap.add_argument("--cases", default="branin:0.05")
    ap.add_argument("--reps", type=int, default=30)
    ap.add_argument("--log-seeds", default="0")
    ap.add_argument("--variants", default="benchmark")
    ap.add_argument("--only", help="truth: settings besides the default, ';'-separated labels")
    ap.add_argument("--section", default=None,
                    help="results section to write (default: the part's name)")
    ap.add_argument("--sections", help="standins: the unit-like sections to summarize")
    ap.add_argument("--classes", help="unit: stand-in classes, comma-separated "
                                      "(default: the plan's, gp,forest)")
    args = ap.parse_args(argv)
    if args.part == "summary":
        res = json.loads(OUT.read_text())
        res["summary"] = summary(res)
        print(json.dumps(res["summary"], indent=1))
        OUT.write_text(json.dumps(res, indent=1, default=float))
    elif args.part == "standins":
        res = json.loads(OUT.read_text())
        secs = (args.sections or "unit,unit_gp_hyper,unit_gp_sum,unit_gp_sum_ml,unit_gp_trend"
                ).split(",")
        summ = standin_summary(res, secs)
        for name, cases in summ.items():
            for key, v in cases.items():
                print(f"{name} {key} ({v['logs']} logs): rho {v['spearman_sim_vs_truth']:+.2f}"
                      f", right sign {v['right_sign_logs']}, picks final {v['picks_final']}"
                      f" auc {v['picks_auc']}")
                print("   " + ", ".join(f"{k} {s['sim_final_minus_default']:+.2f}"
                                        f"/{s['truth_final_minus_default']:+.2f}"
                                        for k, s in v["settings"].items()))
        res["standins_summary"] = summ
        OUT.write_text(json.dumps(res, indent=1, default=float))
    elif args.part == "geometry":
        classes = (args.classes or "gp,forest,gp_hyper,gp_sum,gp_sum_ml").split(",")
        _merge(args.section or "standins_geometry",
               part_geometry(_cases(args.cases),
                             [int(s) for s in args.log_seeds.split(",")], classes))
    elif args.part == "incumbent":
        _merge("incumbent", part_incumbent())
    elif args.part == "unit":
        section = args.section or "unit"
        part_unit(_cases(args.cases), [int(s) for s in args.log_seeds.split(",")],
                  classes=None if not args.classes else args.classes.split(","),
                  section=section)
    elif args.part == "truth":
        part_truth(_cases(args.cases), args.reps, section=args.section or "truth",
                   only=None if not args.only else args.only.split(";"))
    else:
        res = part_assess(_cases(args.cases), [int(s) for s in args.log_seeds.split(",")],
                          args.variants.split(","))
        old = json.loads(OUT.read_text()).get("assess", {}) if OUT.exists() else {}
        for k, v in res.items():
            for var, rows in v.items():
                old.setdefault(k, {}).setdefault(var, {}).update(rows)
        _merge("assess", old)


if __name__ == "__main__":
    main()
