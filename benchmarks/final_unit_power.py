"""How many simulated runs the final-regret unit needs: power against run count.

    python benchmarks/final_unit_power.py

On the three sample logs (invented data), the backtest alone of campaign_gp (quick plan
and quick acquisition grid, seed 0, without the failure models) is run once; each
setting's paired difference from the default (EI xi = 0.01) is taken in the real
outcome's unit, the final regret divided by random order's mean final regret on the same
stand-in (random search = 1, ``advisor.backtest._choice._final_over_random``).  The
product's power simulation (``advisor.backtest._decision.paired_power``: resampled centred
differences shifted by 0.1, exact one-sided signed-rank test at the strictest Holm step,
found in both stand-in classes) is then run with the observed differences repeated 1, 4
and 16 times, as if 1x, 4x and 16x as many runs had the same spread.  Writes
``benchmarks/results/final_unit_power.json``; about a minute on 2 cores.

    python benchmarks/final_unit_power.py --measure 24,96,384

measures instead of extrapolating (stop 29, when the decision moved to this unit and
``--backtest-runs`` came): the same backtest run with N paired runs per setting
(``sim_functions`` = ceil(N / 3) stand-ins of 3 starts, as ``assess(backtest_runs=N)``
makes them), decided by the product's own ``_decide``: its power for 0.1 in final regret
(``power_final_at_0.1``) and of AUC, the chosen setting, the smallest adjusted p, the
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
from advisor.backtest._decision import paired_power
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
                   "power_at_0.1": dec["power_at_0.1"],
                   "wall_seconds": time.perf_counter() - t0,
                   "load_average_end": os.getloadavg()[0]}
            res.setdefault(name, []).append(row)
            print(name, row, flush=True)
    path = ROOT / "benchmarks" / "results" / "final_unit_power.json"
    doc = json.loads(path.read_text()) if path.exists() else {}
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
        base = fin[DEFAULT]
        diffs = [np.array([v[k] - base[k] for k in sorted(set(v) & set(base))])
                 for lab, v in fin.items() if lab != DEFAULT]
        sd = float(np.std(np.concatenate([d - d.mean() for d in diffs]), ddof=1))
        rng = np.random.default_rng(0)
        power = {}
        for mult in (1, 4, 16):
            power[str(mult * len(diffs[0]))] = paired_power(
                [np.tile(d, mult) for d in diffs], len(diffs), rng, n_classes=2)
        doc["logs"][name] = {"runs": len(diffs[0]), "sd_of_paired_differences": sd,
                             "power_at_0.1_by_runs": power,
                             "default_mean_final_over_random": float(np.mean(list(base.values())))}
        print(name, doc["logs"][name])
    out = ROOT / "benchmarks" / "results" / "final_unit_power.json"
    out.write_text(json.dumps(doc, indent=2) + "\n")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
