"""Warm-started or full re-optimizations of the GPs within the backtest's runs.

    python benchmarks/warm_refits.py

On the three sample logs (invented data) the backtest alone of campaign_gp and gp
(quick plan and quick acquisition grid, seed 0, without the failure models, one process)
runs twice on the same stand-ins, starts and noise: with the GPs' scheduled
re-optimizations warm-started from the last fit (``warm_started()``, one optimizer start;
as shipped until stop 28) and as full fits with the model's own starts (the GPs'
``warm_reoptimize = False``, shipped since).  Per log and model: the decision's chosen
setting, and the chosen setting against random search (final regret as a multiple of
random search's, raw and Holm-adjusted one-sided p of the placement test, AUC p), the
AUC power, and the CPU seconds of the call.  Writes
``benchmarks/results/warm_refits.json``; about 4 minutes on one core.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import advisor
import advisor.backtest._pool as pool
from advisor.acquisition import default_settings
from advisor.assessment._stages import _quick_model
from advisor.backtest import plan_for, run_backtest
from advisor.execution import Executor
from sample_log_args import SAMPLE_LOGS  # benchmarks/, on the path when run as a script

ROOT = Path(__file__).resolve().parent.parent
LOGS = SAMPLE_LOGS
MODELS = ("campaign_gp", "gp")


def _one(trials):
    c0 = time.process_time()
    out = run_backtest(trials, list(MODELS), default_settings(True), seed=0, quick=True,
                       batch=1, executor=Executor(jobs=1), make=_quick_model,
                       plan=plan_for(True))
    row = {"cpu_seconds": time.process_time() - c0,
           "updates_by_model": out.get("updates_by_model")}
    for m in MODELS:
        dec = out["per_surrogate"][m]["decision"]
        comps = (dec.get("versus_baselines") or {}).get("comparisons", [])
        rnd = {c["metric"]: c for c in comps if c["baseline"] == "random search"}
        row[m] = {"chosen": dec.get("chosen"),
                  "final_over_random": rnd["final"]["ratio_of_means"],
                  "p_final": rnd["final"]["p_value"], "p_holm_final": rnd["final"]["p_holm"],
                  "p_auc": rnd["auc"]["p_value"], "power_at_0.1": dec.get("power_at_0.1")}
    return row


def main():
    doc = {"seed": 0, "plan": "quick", "models": list(MODELS), "logs": {}}
    original = pool._warm_in_backtest
    for name, kw in LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{name}.csv", **kw)
        doc["logs"][name] = {}
        for way in ("warm", "full"):
            pool._warm_in_backtest = (lambda model: True) if way == "warm" else original
            try:
                doc["logs"][name][way] = row = _one(trials)
            finally:
                pool._warm_in_backtest = original
            print(f"{name:20s} {way:5s} cpu {row['cpu_seconds']:5.1f} s  " + "  ".join(
                f"{m} {row[m]['chosen']} {row[m]['final_over_random']:.3f}x p "
                f"{row[m]['p_final']:.2g}" for m in MODELS), flush=True)
    out = ROOT / "benchmarks" / "results" / "warm_refits.json"
    out.write_text(json.dumps(doc, indent=2) + "\n")
    print(f"wrote {out}")


if __name__ == "__main__":
    main()
