"""Are the first batch's proposals better with the separation guard's median floor?

    python benchmarks/batch_floor.py            # writes benchmarks/results/batch_floor.json

Since stop 29 the separation guard of local penalization (``advisor.batching``) may not
force a batch member worth less than the median candidate; before, when the fitted
length scales were long, it forced members into the far corner of the shortest axes
(predicted yields of 17-31 g/l beside a first pick's 42 on the fermentation log).  This
scores both versions against the truth: each sample log's data sheet gives the response
it was generated from (``benchmarks/planning_groups.py``'s ``TRUTH``: the population
function, campaign shifts left out, minimization form in the objective's units), and
every batch (K = 5, quick, the product's ``propose_batch``) is scored by the mean of its
members' true values and by its best.  Grid: the three sample logs x the GP and the
campaign GP x EI xi=0.01 and UCB beta=4 x seeds 0-9, each with and without the floor
(``advisor.batching._GUARD_FLOOR``), paired by seed.  Reported per log, model and
setting: the mean paired difference (floor - no floor; negative = better with the
floor) of the batch mean and of the batch best, with one-sided Wilcoxon signed-rank
p-values for "better" (scipy), and the closest pair's distance as a share of a random
batch's.  Criterion, set before the run: the floor is kept if the batch mean is better
in most of the 12 cells and the batch best is not worse by a significant paired test in
any.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np
from scipy.stats import wilcoxon
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "benchmarks"))

import advisor  # noqa: E402
from advisor import batching  # noqa: E402
from advisor.planning import propose_batch  # noqa: E402
from planning_groups import TRUTH  # noqa: E402
from sample_log_args import SAMPLE_LOGS  # noqa: E402


def _p_less(d):
    d = np.asarray(d, float)
    if np.all(d == 0):
        return 1.0
    return float(wilcoxon(d, alternative="less", zero_method="wilcox").pvalue)


def main(seeds=range(10)):
    rows = []
    for log, kw in SAMPLE_LOGS.items():
        trials = advisor.load_trials(ROOT / "sample_logs" / f"{log}.csv", **kw)
        for model in ("gp", "campaign_gp"):
            for setting in ("ei:xi=0.01", "ucb:beta=4"):
                res = {True: [], False: []}
                for floor in (True, False):
                    batching._GUARD_FLOOR = floor
                    for seed in seeds:
                        with threadpool_limits(1):
                            props = propose_batch(trials, model, setting, 5, seed=seed,
                                                  quick=True)
                        v = np.asarray(TRUTH[log.split("_")[0]](props), float)
                        res[floor].append((float(v.mean()), float(v.min()),
                                           props.attrs["batch"]["diversity"]["ratio"]))
                batching._GUARD_FLOOR = True
                on, off = np.array(res[True]), np.array(res[False])
                d_mean, d_best = on[:, 0] - off[:, 0], on[:, 1] - off[:, 1]
                row = {"log": log, "model": model, "setting": setting,
                       "seeds": len(list(seeds)),
                       "batch_mean_floor": float(on[:, 0].mean()),
                       "batch_mean_no_floor": float(off[:, 0].mean()),
                       "mean_difference": float(d_mean.mean()),
                       "p_mean_better": _p_less(d_mean),
                       "p_mean_worse": _p_less(-d_mean),
                       "best_difference": float(d_best.mean()),
                       "p_best_better": _p_less(d_best),
                       "p_best_worse": _p_less(-d_best),
                       "diversity_floor": float(on[:, 2].mean()),
                       "diversity_no_floor": float(off[:, 2].mean())}
                rows.append(row)
                print(f"{log:20s} {model:12s} {setting:11s} mean {row['mean_difference']:+.3f} "
                      f"(p better {row['p_mean_better']:.3g}) best {row['best_difference']:+.3f} "
                      f"(p worse {row['p_best_worse']:.3g}) diversity "
                      f"{row['diversity_no_floor']:.2f} -> {row['diversity_floor']:.2f}",
                      flush=True)
    out = ROOT / "benchmarks" / "results" / "batch_floor.json"
    out.write_text(json.dumps({"k": 5, "quick": True, "rows": rows}, indent=1) + "\n")
    print("wrote", out)


if __name__ == "__main__":
    main()
