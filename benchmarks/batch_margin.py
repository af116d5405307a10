"""How much worse is a q = 4 batch campaign than the sequential one?  The measurement
behind the batch check's margin (benchmarks/next_campaign.py, tests/test_next_campaign.py).

    python benchmarks/batch_margin.py                      # seeds 0-4 x 64 replicates
    python benchmarks/batch_margin.py --seeds 5-7 --reps 24 --out /tmp/more.json
    python benchmarks/batch_margin.py --q 2 --seeds 1,4 --out /tmp/q2.json   # batch size 2
    python benchmarks/batch_margin.py --reuse benchmarks/results/batch_margin.json
        # rerun only the batch campaigns; sequential and random rows from that file

The campaign is the next-campaign benchmark's batch campaign (Hartmann-3, EI xi=0.01,
30 trials, local penalization with per-axis slopes, one fit per batch), run with
``next_campaign._run``: for each seed and replicate the batch, sequential and random
campaigns share their starts, candidates and noise (paired).  Replicates of different
seeds are independent (every random stream is ``task_seed(seed, ..., rep)``).

Reported (``benchmarks/results/batch_margin.json``): the paired difference batch -
sequential of normalized regret (each seed normalized by its own random-search mean, as
the benchmark does), its mean over all replicates with the Monte-Carlo standard error
(sd / sqrt(n)) and a 95% percentile-bootstrap interval; the share of campaigns that end
far from the optimum (normalized regret > 0.2, "stuck"); and, for a test that uses
``n`` replicates, the distribution over seeds of the one-sided 95% paired-bootstrap
upper bound the check compares with its margin, obtained by resampling ``n``-replicate
sets from the measured pairs; and how many batches had two members closer than 0.02 and
0.002 in the unit cube (``close_batches``; a random batch's closest pair has median 0.34).

``--reuse FILE`` reruns only the batch campaigns and takes the sequential and random
campaigns of the same seeds and replicates from FILE: those do not call the batch code,
and every campaign is seeded by ``task_seed``, so they are what a full run would give
(common practice for a paired A/B rerun of one arm; check that FILE was made by the same
benchmark code).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np
from threadpoolctl import threadpool_limits

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import next_campaign as nc  # noqa: E402
from advisor.batching import smallest_distance  # noqa: E402
from advisor.execution import task_seed  # noqa: E402

STUCK = 0.2
CLOSE = (0.02, 0.002)


def _recording_build_batch(closest: list):
    """``build_batch`` that also appends each batch's closest pair (unit cube)."""
    inner = nc.build_batch

    def build(model, setting, X, best, q, rng, **kw):
        b = inner(model, setting, X, best, q, rng, **kw)
        lo, hi = np.asarray(kw["bounds"], float).T
        closest.append(smallest_distance((np.asarray(X)[b.indices] - lo) / (hi - lo)))
        return b
    return inner, build


def measure(seeds, reps, progress=print, q=4, reuse=None) -> dict:
    bf = nc.CONFIGS["small"]["batch_function"]
    budget = nc.CONFIGS["small"]["batch_budget"]
    sd = nc._noise_sd(bf)
    old = None if reuse is None else {(r["seed"], r["rep"]): r for r in reuse["rows"]}
    rows, closest = [], []
    t0, c0 = time.perf_counter(), time.process_time()
    inner, nc.build_batch = _recording_build_batch(closest)
    try:
        with threadpool_limits(1):
            for seed in seeds:
                raw = {"sequential": [], "batch": [], "random search": []}
                for r in range(reps):
                    raw["batch"].append(nc._run(bf, nc.DEFAULT, r, budget, sd, seed, q=q))
                    if old is not None:
                        o = old[(seed, r)]
                        raw["sequential"].append(o["sequential"] * o["random_scale"])
                        raw["random search"].append(o["random search"] * o["random_scale"])
                        continue
                    raw["sequential"].append(nc._run(bf, nc.DEFAULT, r, budget, sd, seed))
                    raw["random search"].append(nc._run(bf, None, r, budget, sd, seed))
                s = float(np.mean(raw["random search"]))
                for r in range(reps):
                    rows.append({"seed": seed, "rep": r, "random_scale": s,
                                 **{k: v[r] / s for k, v in raw.items()}})
                progress(f"seed {seed}: {time.perf_counter() - t0:.0f} s wall, "
                         f"{time.process_time() - c0:.0f} s CPU")
    finally:
        nc.build_batch = inner
    return {"function": bf, "q": q, "budget": budget, "setting": nc.DEFAULT.label,
            "seeds": list(seeds), "reps_per_seed": reps, "rows": rows,
            "batch_closest_pairs": closest,
            "reused_sequential_and_random": reuse is not None,
            "wall_seconds": time.perf_counter() - t0,
            "cpu_seconds": time.process_time() - c0}


def summarize(res, test_sizes=(24, 32, 48, 64, 96), draws=2000, seed=0) -> dict:
    bat = np.array([r["batch"] for r in res["rows"]])
    seq = np.array([r["sequential"] for r in res["rows"]])
    rnd = np.array([r["random search"] for r in res["rows"]])
    d = bat - seq
    n = len(d)
    rng = np.random.default_rng(seed)
    boot = d[rng.integers(0, n, (4000, n))].mean(1)
    out = {"n": n, "mean_batch": float(bat.mean()), "mean_sequential": float(seq.mean()),
           "mean_difference": float(d.mean()),
           "standard_error": float(d.std(ddof=1) / np.sqrt(n)),
           "bootstrap_95": [float(np.quantile(boot, 0.025)), float(np.quantile(boot, 0.975))],
           "sd_difference": float(d.std(ddof=1)),
           "stuck_share": {"batch": float(np.mean(bat > STUCK)),
                           "sequential": float(np.mean(seq > STUCK))},
           "close_batches": ({"batches": len(res["batch_closest_pairs"]),
                              **{f"below_{c}": int(np.sum(np.asarray(
                                  res["batch_closest_pairs"]) < c)) for c in CLOSE}}
                             if "batch_closest_pairs" in res else None),
           "per_seed": {}}
    for s in res["seeds"]:
        m = np.array([r["seed"] == s for r in res["rows"]])
        # the check's own figures when the test runs this seed with these replicates
        out["per_seed"][str(s)] = {"mean_batch": float(bat[m].mean()),
                                   "mean_sequential": float(seq[m].mean()),
                                   "mean_difference": float(d[m].mean()),
                                   "upper_95": nc._bootstrap_upper(
                                       d[m], task_seed(s, "boot", "batch")),
                                   "p_vs_random": nc._wilcoxon_less(bat[m], rnd[m])}
    # The check's bound with k replicates, over resampled k-replicate sets (the
    # measured pairs stand for the population; common practice).
    sizes = {}
    for k in test_sizes:
        ub = []
        for _ in range(draws // 10):
            sub = d[rng.integers(0, n, k)]
            ub.append(float(np.quantile(sub[rng.integers(0, k, (1000, k))].mean(1), 0.95)))
        ub = np.array(ub)
        sizes[str(k)] = {"median_upper_95": float(np.median(ub)),
                         "q90_upper_95": float(np.quantile(ub, 0.9)),
                         "q95_upper_95": float(np.quantile(ub, 0.95))}
    out["upper_95_by_replicates"] = sizes
    return out


def _seeds(text):
    if "-" in text:
        a, b = text.split("-")
        return list(range(int(a), int(b) + 1))
    return [int(s) for s in text.split(",")]


def main(argv=None):
    """Measure (or, with ``--summarize``, re-read ``--out``) and write the summary."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="0-4")
    ap.add_argument("--reps", type=int, default=64)
    ap.add_argument("--out", default=str(ROOT / "benchmarks" / "results" / "batch_margin.json"))
    ap.add_argument("--q", type=int, default=4, help="batch size (the check's is 4)")
    ap.add_argument("--reuse", default=None,
                    help="rerun only the batch campaigns; sequential and random rows "
                         "from this file (same seeds and replicates)")
    ap.add_argument("--summarize", action="store_true",
                    help="recompute the summary of the measurement in --out")
    args = ap.parse_args(argv)
    reuse = json.loads(Path(args.reuse).read_text()) if args.reuse else None
    res = (json.loads(Path(args.out).read_text()) if args.summarize
           else measure(_seeds(args.seeds), args.reps, q=args.q, reuse=reuse))
    res["summary"] = summarize(res)
    print(json.dumps(res["summary"], indent=1))
    Path(args.out).write_text(json.dumps(res, indent=1, default=float))


if __name__ == "__main__":
    main()
