"""The neural process in the backtest: its cheap update, what it saves, and whether fewer
paired runs would do.

    python benchmarks/np_backtest_update.py task   # CPU s of one simulated-campaign task
    python benchmarks/np_backtest_update.py runs   # power at 0.1 with 24 vs 16 runs

``task``: one backtest task of the neural process (the four quick settings, a start of 2
trials, 10 picks, quick model, 200 rows of the 500-trial moulding log as the pool), 3
starts, CPU seconds of this process; ``current`` = the network held and conditioned on
the run's trials between retrains every ``reoptimize_every`` = 5 steps, ``previous`` =
the rule before (no held network: kept as it was, retrained also when the training set
doubles), obtained by removing ``with_fixed_hyperparameters`` and setting
``reoptimize_on_doubling`` back to True.

``runs``: the quick backtest of the 500-trial moulding log for campaign_gp,
neural_process and gp (the three models the tie group held in an earlier round), one
process; the decision and ``power_at_0.1`` on all 24 runs (8 stand-ins x 3 starts) and
on the 16 runs of the first 2 starts, which are exactly the runs an 8 x 2 plan makes
(starts, model seeds and noise are seeded per stand-in and start).

Results (printed; the measured figures are in ``results/np_backtest_update.json``).
"""

from __future__ import annotations

import copy
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "scripts"))
sys.path.insert(0, str(ROOT))


def _log():
    from make_sample_logs import moulding_warpage

    from advisor import load_trials

    path = os.path.join(tempfile.mkdtemp(), "moulding500.csv")
    moulding_warpage(seed=12, lots=4, per_lot=125).to_csv(path, index=False)
    return load_trials(path, objective="warpage_mm", campaign="lot", order="run")


def task(previous: bool) -> dict:
    from advisor.acquisition import default_settings
    from advisor.backtest._pool import _pool_task
    from advisor.surrogates import make_surrogate
    from advisor.surrogates.neural_process import NeuralProcess

    tr = _log()
    frame = tr.used[tr.params].iloc[:200].reset_index(drop=True)
    y = np.asarray(tr.y)[:200]
    settings = [s.to_dict() for s in default_settings(True)]
    if previous:
        del NeuralProcess.with_fixed_hyperparameters
        NeuralProcess.reoptimize_on_doubling = True
    cpu = []
    for s in range(3):
        init = sorted(np.random.default_rng(s).choice(200, 2, replace=False).tolist())
        t = time.process_time()
        _pool_task(make_surrogate, "neural_process", settings, tr.space, frame, y, init, 10,
                   1, "kriging_believer", 1, 7, [1, 2, 3, 4], True, 5)
        cpu.append(time.process_time() - t)
    return {"rule": "previous" if previous else "current", "cpu_seconds": cpu,
            "mean_cpu_seconds": float(np.mean(cpu))}


def runs() -> dict:
    from advisor.acquisition import default_settings
    from advisor.backtest import run_backtest
    from advisor.backtest._choice import _decide
    from advisor.execution import Executor

    tr = _log()
    t = time.process_time()
    bt = run_backtest(tr, ["campaign_gp", "neural_process", "gp"], default_settings(True),
                      seed=0, quick=True, executor=Executor(jobs=1))
    out = {"cpu_seconds": time.process_time() - t, "per_surrogate": {}}
    for keep in (3, 2):
        b2 = copy.deepcopy(bt)
        for r in b2["simulated"]["results"]:
            r["runs"] = [run for run in r["runs"] if run["seed_index"] < keep]
        for name in bt["surrogates"]:
            dec = _decide(b2, name, 0)
            out["per_surrogate"].setdefault(name, {})[f"runs_{8 * keep}"] = {
                "power_at_0.1": dec["power_at_0.1"], "chosen": dec["chosen"],
                "p_holm": {c["label"]: c["p_holm"] for c in dec["comparisons"]}}
    return out


if __name__ == "__main__":
    what = sys.argv[1] if len(sys.argv) > 1 else "task"
    if what == "task":
        res = task(previous=len(sys.argv) > 2 and sys.argv[2] == "previous")
    else:
        res = runs()
    print(json.dumps(res, indent=1))
