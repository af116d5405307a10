"""Run the real-log benchmark and print its table.

    python -m benchmarks.real_logs                 # full: 40 trials per campaign, seeds 0 1
    python -m benchmarks.real_logs --small         # the size `make test` runs (20, seed 0,
                                                   # truth averaged over 3 model seeds)

Writes ``benchmarks/results/real_logs.json`` (or ``real_logs_small.json``).
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np

from .measure import measure_problem
from .problems import PROBLEMS

RESULTS = Path(__file__).resolve().parents[1] / "results"


def run(n_per_campaign: int, seeds, schemes, problems=None, truth_seeds: int = 1) -> dict:
    rows = []
    for name in problems or PROBLEMS:
        for seed in seeds:
            t0 = time.perf_counter()
            m = measure_problem(name, n_per_campaign, seed, schemes=schemes,
                                within_campaign=bool(schemes), truth_seeds=truth_seeds)
            m["seconds"] = time.perf_counter() - t0
            rows.append(m)
            s = m["summary"]
            print(f"{name:14s} seed {seed}  pick {m['pick']:15s} best-NLL "
                  f"{s['true_best_nll']:15s} regret NLL {s['regret_nll']:6.3f} ± "
                  f"{s.get('regret_nll_se') or 0:5.3f}  CRPS/sd "
                  f"{s['regret_crps_rel']:6.3f}  top2 {s['pick_in_top2_nll']!s:5s} "
                  f"rho {s.get('spearman_nll', float('nan')):5.2f}  ({m['seconds']:.0f} s)",
                  flush=True)
    return {"n_per_campaign": n_per_campaign, "seeds": list(seeds),
            "truth_seeds": truth_seeds, "results": rows,
            "table": table(rows)}


def table(rows) -> list[dict]:
    """Per problem (averaged over seeds) and overall."""
    out = []
    names = list(dict.fromkeys(r["problem"] for r in rows))
    for name in names + ["mean"]:
        sel = [r["summary"] for r in rows if name == "mean" or r["problem"] == name]
        entry = {"problem": name}
        for key in ("regret_nll", "regret_crps", "regret_crps_rel", "spearman_nll",
                    "kendall_nll", "spearman_crps", "kendall_crps"):
            vals = [s[key] for s in sel if s.get(key) is not None]
            entry[key] = float(np.mean(vals)) if vals else None
        ses = [s.get("regret_nll_se") for s in sel]
        # Monte-Carlo error of the mean regret over the truth's model seeds
        entry["regret_nll_se"] = (float(np.sqrt(np.sum(np.square(ses))) / len(ses))
                                  if ses and all(v is not None for v in ses) else None)
        for key in ("pick_in_top2_nll", "pick_in_top2_crps", "pick_beats_baseline_nll"):
            entry[key] = float(np.mean([bool(s[key]) for s in sel]))
        if name != "mean":
            entry["picks"] = [r["pick"] for r in rows if r["problem"] == name]
            entry["true_best_nll"] = [r["summary"]["true_best_nll"] for r in rows
                                      if r["problem"] == name]
        out.append(entry)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--small", action="store_true")
    ap.add_argument("--trials", type=int, default=None, help="trials per campaign")
    ap.add_argument("--seeds", default=None, help="comma-separated seeds")
    ap.add_argument("--problems", default=None)
    ap.add_argument("--truth-seeds", type=int, default=None,
                    help="model seeds the truth is averaged over (default 3 with --small, "
                         "else 1)")
    args = ap.parse_args(argv)
    n = args.trials or (20 if args.small else 40)
    seeds = [int(s) for s in args.seeds.split(",")] if args.seeds else ([0] if args.small else [0, 1])
    schemes = () if args.small else ("campaign", "kfold")
    probs = args.problems.split(",") if args.problems else None
    k = args.truth_seeds or (3 if args.small else 1)
    out = run(n, seeds, schemes, probs, truth_seeds=k)
    path = RESULTS / ("real_logs_small.json" if args.small else "real_logs.json")
    path.write_text(json.dumps(out, indent=1, default=float))
    print("wrote", path)


if __name__ == "__main__":
    main()
