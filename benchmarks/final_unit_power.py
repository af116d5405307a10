"""How many simulated runs the final-regret unit needs: power against run count.

    python benchmarks/final_unit_power.py

On the three sample logs (invented data), the backtest alone of campaign_gp (quick plan
and quick acquisition grid, seed 0, without the failure models) is run once; each
setting's paired difference from the default (EI xi = 0.01) is taken in the real
outcome's unit, the final regret divided by random order's mean final regret on the same
stand-in (random search = 1, ``advisor.backtest._choice._final_over_random``).  The
product's power simulation (``advisor.backtest._decision.proportional_power`` since
stop 30: pairs resampled with their members swapped at random, the challenger's runs
made proportionally lower by 0.1 on average, exact one-sided signed-rank test at the
strictest Holm step, found in both stand-in classes) is then run with the runs repeated
1, 4 and 16 times, as if 1x, 4x and 16x as many runs had the same spread
(``power_at_0.1_by_runs``); ``shift_model_power_by_runs`` keeps the shift model it
replaced (``paired_power``: centred differences shifted by 0.1), which overstates the
power on runs tied at the optimum.  Writes
``benchmarks/results/final_unit_power.json``; about a minute on 2 cores.

    python benchmarks/final_unit_power.py --measure 24,96,384

measures instead of extrapolating (stop 29, when the decision moved to this unit and
``--backtest-runs`` came): the same backtest run with N paired runs per setting
(``sim_functions`` = ceil(N / 3) stand-ins of 3 starts, as ``assess(backtest_runs=N)``
makes them), decided by the product's own ``_decide``: its power for 0.1 in final regret
(``power_final_at_0.1``, since stop 30 the proportional model), the smallest gain found
with power 0.8 (``detectable_gain``, stop 30), the power for 0.1 of AUC, the chosen setting, the smallest adjusted p, the
paired runs and the wall seconds of the backtest with 2 worker processes (and the load
average at its end: on a shared machine the wall time depends on other work).  Written
under ``measured`` in the same file.
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

import numpy as np

import advisor
from advisor.acquisition import default_settings
from advisor.assessment._stages import _quick_model
from advisor.backtest import plan_for, run_backtest
from advisor.backtest._choice import _final_over_random
from advisor.backtest._decision import paired_power, proportional_power
from advisor.execution import Executor
from sample_log_args import SAMPLE_LOGS  # benchmarks/, on the path when run as a script

ROOT = Path(__file__).resolve().parent.parent
LOGS = SAMPLE_LOGS
DEFAULT = "EI xi=0.01"


def measure(ns, jobs=2):
    """The product's decision with N paired runs per setting, for each N in ``ns``."""
    from advisor.backtest._choice import _decide

    res = {}
    for name, kw in LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **kw)
        for n in ns:
            plan = plan_for(True, sim_functions=max(2, -(-n // 3)))
            t0 = time.perf_counter()
            out = run_backtest(trials, ["campaign_gp"], default_settings(True), seed=0,
                               quick=True, batch=1, executor=Executor(jobs=jobs),
                               make=_quick_model, plan=plan)
            dec = _decide(out, "campaign_gp", 0)
            row = {"runs_asked": n, "runs_per_setting": out["simulated"]["runs_per_setting"],
                   "paired_runs": max(c["runs"] for c in dec["comparisons"]),
                   "unit": dec["unit"], "chosen": dec["chosen"],
                   "min_p_holm": min(c["p_holm"] for c in dec["comparisons"]),
                   "mean_differences": {c["label"]: c["mean_difference"]
                                        for c in dec["comparisons"]},
                   "power_final_at_0.1": dec["power_final_at_0.1"],
                   "final_mean_level": dec.get("final_mean_level"),
                   "detectable_gain": dec.get("detectable_gain"),
                   "power_at_0.1": dec["power_at_0.1"],
                   "auc_mean_level": dec.get("auc_mean_level"),
                   "wall_seconds": time.perf_counter() - t0,
                   "load_average_end": os.getloadavg()[0]}
            res.setdefault(name, []).append(row)
            print(name, row, flush=True)
    path = ROOT / "benchmarks" / "results" / "final_unit_power.json"
    doc = json.loads(path.read_text()) if path.exists() else {}
    # rows for run counts not measured this time are kept (each row is one backtest)
    kept = (doc.get("measured") or {}).get("logs") or {}
    for name, rows in res.items():
        done = {r["runs_asked"] for r in rows}
        res[name] = sorted([r for r in kept.get(name, []) if r["runs_asked"] not in done]
                           + rows, key=lambda r: r["runs_asked"])
    doc["measured"] = {"seed": 0, "surrogate": "campaign_gp", "jobs": jobs,
                       "note": "the backtest alone, quick plan and grid, no failure models",
                       "logs": res}
    path.write_text(json.dumps(doc, indent=2) + "\n")
    print(f"wrote {path}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--measure", help="comma-separated run counts to measure")
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args(argv)
    if args.measure:
        measure([int(v) for v in args.measure.split(",")], jobs=args.jobs)
        return
    doc = {"seed": 0, "surrogate": "campaign_gp", "delta": 0.1, "logs": {}}
    for name, kw in LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **kw)
        out = run_backtest(trials, ["campaign_gp"], default_settings(True), seed=0,
                           quick=True, batch=1, executor=Executor(jobs=2),
                           make=_quick_model, plan=plan_for(True))
        fin = _final_over_random(out["simulated"], "campaign_gp")
        cls = {f["id"]: f["class"] for f in out["simulated"]["functions"]}
        base = fin[DEFAULT]
        diffs = [np.array([v[k] - base[k] for k in sorted(set(v) & set(base))])
                 for lab, v in fin.items() if lab != DEFAULT]
        sd = float(np.std(np.concatenate([d - d.mean() for d in diffs]), ddof=1))
        rng = np.random.default_rng(0)
        power, shift = {}, {}
        for mult in (1, 4, 16):
            # the runs repeated mult times under new keys: the same population, mult x
            # as many runs per replicate
            tiled = {lab: {(k, r): x for k, x in v.items() for r in range(mult)}
                     for lab, v in fin.items()}
            strata = {(k, r): cls[k[0]] for k in base for r in range(mult)}
            power[str(mult * len(diffs[0]))] = proportional_power(
                tiled, DEFAULT, rng, strata=strata)
            shift[str(mult * len(diffs[0]))] = paired_power(
                [np.tile(d, mult) for d in diffs], len(diffs), rng, n_classes=2)
        level = np.mean([x for v in fin.values() for x in v.values()])
        doc["logs"][name] = {"runs": len(diffs[0]), "sd_of_paired_differences": sd,
                             "power_at_0.1_by_runs": power,
                             "shift_model_power_by_runs": shift,
                             "final_mean_level": float(level),
                             "default_mean_final_over_random": float(np.mean(list(base.values())))}
        print(name, doc["logs"][name])
    out = ROOT / "benchmarks" / "results" / "final_unit_power.json"
    out.write_text(json.dumps(doc, indent=2) + "\n")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
