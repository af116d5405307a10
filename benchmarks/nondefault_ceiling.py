"""How often could the acquisition decision pick a true winner with *perfect* stand-ins?

    python benchmarks/nondefault_ceiling.py            # writes results/nondefault_ceiling.json

The product's acquisition decision (:func:`advisor.backtest.paired_decision`: one-sided
Wilcoxon signed-rank of every setting against the default EI xi = 0.01 over paired runs,
Holm over the grid, level 0.05) sees simulated campaigns on stand-in functions fitted to
the log.  This benchmark asks what it could see at best: if a stand-in *were* the real
function, its paired runs would be real next campaigns.  ``nondefault_wins.py truth``
stored such campaigns (the benchmark's own loop, every setting paired by start and noise;
``benchmarks/results/nondefault_wins.json``, sections ``truth`` and ``truth_40``).  Here
``n`` of them are resampled with replacement (a bootstrap of the real campaigns: the
empirical distribution stands for the true one, so the figures are plug-in estimates of
the power and inherit the truth's own sampling error) and decided by the product's
decision function, unchanged, ``B`` times per case, in two units:

* ``auc_30``: the area under the normalized best-so-far regret curve over 30 trials, the
  unit the product decides in (there normalized by the stand-in's range);
* ``final_30``: the final normalized regret (random search = 1), the unit the real
  outcome is judged in;
* ``auc_12``, ``final_12``: the same after 12 trials, the quick backtest's simulated
  campaign length (``plan_for(True).sim_max_budget``).

On the quick grid (the product's quick backtest: EI xi=0.01, PI xi=0.01, UCB beta=4,
Thompson) and the full grid (nine settings).  A *pick* is a non-default setting the
decision chooses; it is a *true* pick when the setting is among the case's true winners
(``truth``: one-sided Wilcoxon p < 0.05 against the default over the real campaigns),
otherwise a false pick.  The Monte-Carlo standard error of a rate r over B resamples is
sqrt(r (1 - r) / B), at most 0.029 for B = 300.

Cases: Levy-3 at noise 0.05 (20 real replicates, full grid; and 40 replicates of UCB
beta=1 and beta=4 only), Branin at noise 0.2 (20), and the controls Michalewicz-2 at noise
0.05 (20) and Branin at 0.05 (30), where no setting truly beats the default.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from advisor.backtest import paired_decision  # noqa: E402

SOURCE = ROOT / "benchmarks" / "results" / "nondefault_wins.json"
OUT = ROOT / "benchmarks" / "results" / "nondefault_ceiling.json"
DEFAULT = "EI xi=0.01"
#: the unit and the campaign length: 12 trials is the quick backtest's simulated budget
#: (``plan_for(True).sim_max_budget``), 30 the next campaign's
UNITS = ("auc_12", "final_12", "auc_30", "final_30")
QUICK = ("PI xi=0.01", "UCB beta=4", "Thompson")
BASELINES = ("random search", "grid search")
CASES = (("truth", "levy3@0.05"), ("truth_40", "levy3@0.05"), ("truth", "branin@0.2"),
         ("truth", "michalewicz2@0.05"), ("truth", "branin@0.05"))


def ceiling(values: dict, grid, winners, n: int, B: int, seed: int) -> dict:
    """Rates of true and false picks of :func:`paired_decision` over ``B`` bootstrap
    resamples of ``n`` paired real campaigns.

    ``values``: {setting label: [one value per replicate]} (the default included);
    ``grid``: the non-default labels the decision compares.
    """
    rng = np.random.default_rng(seed)
    reps = len(values[DEFAULT])
    true_picks = false_picks = 0
    for _ in range(B):
        idx = rng.integers(0, reps, size=n)
        runs = {lab: {k: float(values[lab][i]) for k, i in enumerate(idx)}
                for lab in (DEFAULT, *grid)}
        chosen = paired_decision(runs, DEFAULT)["chosen"]
        if chosen != DEFAULT:
            if chosen in winners:
                true_picks += 1
            else:
                false_picks += 1
    return {"n": int(n), "resamples": int(B), "true_pick_rate": true_picks / B,
            "false_pick_rate": false_picks / B}


def run(ns=(24, 48, 96), B=300, seed=0, source=SOURCE) -> dict:
    res = json.loads(Path(source).read_text())
    out = {"method": "bootstrap of the stored real campaigns, decided by "
                     "advisor.backtest.paired_decision (see the module docstring)",
           "seed": int(seed), "resamples": int(B), "cases": []}
    for section, case in CASES:
        c = res[section][case]
        winners = set(c["true_winners"])
        for unit in UNITS:
            vals = c["values"][unit]
            full = [s for s in vals if s not in (DEFAULT, *BASELINES)]
            for grid_name, grid in (("quick", [s for s in QUICK if s in vals]),
                                    ("full", full)):
                if not grid:
                    continue
                for n in ns:
                    out["cases"].append({
                        "section": section, "case": case, "replicates": int(c["reps"]),
                        "true_winners": sorted(winners), "unit": unit, "grid": grid_name,
                        "settings": list(grid),
                        **ceiling(vals, grid, winners, n, B, seed)})
    return out


def _write(result, path=OUT):
    fd, tmp = tempfile.mkstemp(dir=Path(path).parent, suffix=".tmp")
    with os.fdopen(fd, "w") as fh:
        json.dump(result, fh, indent=1)
    os.replace(tmp, path)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--resamples", type=int, default=300)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    res = run(B=args.resamples, seed=args.seed)
    _write(res)
    for r in res["cases"]:
        print(f"{r['section']:8s} {r['case']:18s} {r['unit']:8s} {r['grid']:5s} "
              f"n={r['n']:3d} true {r['true_pick_rate']:.2f} false {r['false_pick_rate']:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
