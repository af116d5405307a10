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
"""

from __future__ import annotations

import json
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


def main():
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
