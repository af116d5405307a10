"""Would another paired test find a gain of 0.1 in final regret with fewer runs?

    python benchmarks/test_choice_power.py            # pool of 384 runs per setting

The decision (``advisor.backtest._decision.paired_decision``) tests each setting against
the default by the one-sided Wilcoxon signed-rank test (Wilcoxon 1945), within every
stand-in class, at the strictest Holm step ``alpha / k``.  The claim the issue asks to
detect is a difference of 0.1 in *mean* final regret over random search's; the
signed-rank test targets a location shift of the paired differences, and on runs tied
at the optimum (zero-inflated) a mean difference comes mostly from the few runs that end
far from it.  This script compares, under the product's own power model
(``proportional_power``: pooled pairs of the non-default settings and the default,
members swapped at random under the null, the challenger's runs made proportionally
lower by 0.1 on average), three one-sided paired tests at the same design (every class,
``alpha / 3``, the quick grid's three challengers):

* ``wilcoxon``: the decision's own (``_one_sided_p_sim``: exact up to 50 non-zero
  differences, the normal approximation beyond, as scipy.stats.wilcoxon);
* ``mean_sign_flip``: the paired sign-flip permutation test of the mean difference
  (Fisher 1935; Good 2005, ch. 3; scipy.stats.permutation_test with
  ``permutation_type="samples"``, 2,000 resamples);
* ``sign``: the sign test (scipy.stats.binomtest on the non-zero differences).

Rows: the null (no gain: each test's false-rejection rate at ``alpha / 3`` per class),
a proportional gain of 0.1, and a setting that ends every run at the optimum, with 12,
48 and 192 pairs per class (24, 96 and 384 runs).  The pairs come from one backtest of
campaign_gp per sample log (quick plan and grid, seed 0, no failure models) with
``--pool`` runs per setting; resampling a pool of that size to more runs than it holds is
an extrapolation (stop 30 saw a 24-run pool overstate the power at 384 runs by 7x), so
the rows at sizes above the pool's are marked.  Writes
``benchmarks/results/test_choice_power.json``; about 5 minutes on 2 cores.

References: Wilcoxon, F. (1945), Biometrics Bulletin 1, 80-83; Fisher, R. A. (1935),
The Design of Experiments, sec. 21 (the paired randomization test); Good, P. (2005),
Permutation, Parametric and Bootstrap Tests of Hypotheses, 3rd ed., Springer (references
from memory).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
from scipy import stats

import advisor
from advisor.acquisition import default_settings
from advisor.assessment._stages import _quick_model
from advisor.backtest import plan_for, run_backtest
from advisor.backtest._choice import _final_over_random
from advisor.backtest._decision import _one_sided_p_sim
from advisor.execution import Executor
from sample_log_args import SAMPLE_LOGS  # benchmarks/, on the path when run as a script

ROOT = Path(__file__).resolve().parent.parent
DEFAULT = "EI xi=0.01"
LEVEL = 0.05 / 3


def _p_mean(d, rng):
    d = d[d != 0]
    if d.size == 0:
        return 1.0
    if d.size == 1:   # the two sign flips, exactly (scipy needs two observations)
        return 0.5 if d[0] < 0 else 1.0
    res = stats.permutation_test((d,), np.mean, permutation_type="samples",
                                 alternative="less", n_resamples=2000, vectorized=True,
                                 random_state=rng)
    return float(res.pvalue)


def _p_sign(d):
    d = d[d != 0]
    if d.size == 0:
        return 1.0
    return float(stats.binomtest(int(np.sum(d < 0)), d.size, 0.5,
                                 alternative="greater").pvalue)


def _pairs(bt):
    sim = bt["simulated"]
    cls = {f["id"]: f["class"] for f in sim["functions"]}
    final = _final_over_random(sim, "campaign_gp")
    groups, level = {}, []
    for lab, runs in final.items():
        if lab == DEFAULT:
            continue
        for k, a in runs.items():
            if k in final[DEFAULT]:
                groups.setdefault(cls[k[0]], []).append((a, final[DEFAULT][k]))
                level += [a, final[DEFAULT][k]]
    return {g: np.asarray(p) for g, p in groups.items()}, float(np.mean(level))


def _power(groups, m, kappa, reps, rng):
    hits = {"wilcoxon": 0, "mean_sign_flip": 0, "sign": 0}
    for _ in range(reps):
        ok = dict.fromkeys(hits, True)
        for p in groups.values():
            pick = p[rng.integers(0, len(p), size=m)]
            swap = rng.random(m) < 0.5
            ch = np.where(swap, pick[:, 1], pick[:, 0])
            de = np.where(swap, pick[:, 0], pick[:, 1])
            d = ch * (1.0 - kappa) - de
            ok["wilcoxon"] &= _one_sided_p_sim(d) < LEVEL
            ok["mean_sign_flip"] &= _p_mean(d, rng) < LEVEL
            ok["sign"] &= _p_sign(d) < LEVEL
        for t in hits:
            hits[t] += bool(ok[t])
    return {t: h / reps for t, h in hits.items()}


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--pool", type=int, default=384, help="runs per setting in the pool")
    ap.add_argument("--reps", type=int, default=300)
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(0)
    out = {"pool_runs": args.pool, "reps": args.reps, "level_per_class": LEVEL,
           "mc_standard_error_at_most": 0.5 / np.sqrt(args.reps), "logs": {}}
    for name, kw in SAMPLE_LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **kw)
        t0 = time.perf_counter()
        bt = run_backtest(trials, ["campaign_gp"], default_settings(True), seed=0,
                          quick=True, batch=1, executor=Executor(jobs=args.jobs),
                          make=_quick_model,
                          plan=plan_for(True, sim_functions=max(2, -(-args.pool // 3))))
        groups, mean = _pairs(bt)
        rows = []
        for runs in (24, 96, 384):
            m = runs // 2
            for scenario, kappa in (("null", 0.0), ("gain 0.1", 0.1 / mean),
                                    ("perfect", 1.0)):
                if kappa > 1.0:
                    continue
                row = {"runs": runs, "pairs_per_class": m, "scenario": scenario,
                       "extrapolated": runs > args.pool,
                       **_power(groups, m, kappa, args.reps, rng)}
                rows.append(row)
                print(name, row, flush=True)
        out["logs"][name] = {"mean_level": mean, "backtest_seconds":
                             time.perf_counter() - t0, "rows": rows}
    path = ROOT / "benchmarks" / "results" / "test_choice_power.json"
    path.write_text(json.dumps(out, indent=1) + "\n")
    print("wrote", path)


if __name__ == "__main__":
    main()
