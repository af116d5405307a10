"""How the backtest breaks calibration ties on real logs, and whether it should.

For each real black box (``benchmarks/real_logs``), the past log of three campaigns of
``--trials`` trials each (60 gives the 180-trial logs of issue 18's finding) is assessed
in quick mode *with* the acquisition backtest.  Recorded per problem: the group tied with
the calibration leader (95% model confidence set), each backtested model's score (median
normalized-regret AUC) and its default-setting runs (EI, xi = 0.01; paired by stand-in
and start), and the true next-campaign NLL / CRPS of every candidate (fitted on the past
log, scored on two fresh campaigns; as in ``benchmarks/real_logs/measure.py``).

From those it compares three tie rules within the tie group:

* ``backtest score`` (the former rule): among the tied models the backtest ran, the lowest
  median AUC wins the tie, whatever the evidence;
* ``paired test`` (the current rule): another tied model goes first only when the paired
  one-sided Wilcoxon test over the same simulated runs, Holm over the tied models, says it
  optimizes better at level 0.05 (:func:`advisor.backtest.paired_surrogate_test`);
  otherwise the calibration leader (lowest CRPS) stays first;
* ``simplest``: the first tied model in :data:`advisor.ranking.SIMPLICITY_ORDER`.

The evaluations come from the committed cache (``benchmarks/results/real_logs_cache.json``),
so only models are fitted.  Writes ``benchmarks/results/real_logs_tiebreak.json``.

    python benchmarks/real_logs_tiebreak.py [--trials 60] [--problems a,b] [--seed 0]
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

import advisor  # noqa: E402
from advisor.backtest import paired_surrogate_test  # noqa: E402
from advisor.ranking import SIMPLICITY_ORDER  # noqa: E402

from benchmarks.real_logs.campaigns import campaign_log  # noqa: E402
from benchmarks.real_logs.measure import NEW, PAST, _load, _truth  # noqa: E402
from benchmarks.real_logs.problems import PROBLEMS  # noqa: E402

RESULTS = ROOT / "benchmarks" / "results"
DEFAULT_LABEL = "EI xi=0.01"


def default_runs(bt: dict) -> dict:
    """{surrogate: {run key: AUC}} of the default setting in the simulated campaigns."""
    sec = (bt or {}).get("simulated") or {}
    out = {}
    for r in sec.get("results") or []:
        if r["label"] == DEFAULT_LABEL and not r["error"]:
            out[r["surrogate"]] = {f"{run['unit']}/{run['seed_index']}": run["auc"]
                                   for run in r["runs"]}
    return out


def measure(name: str, n: int, seed: int) -> dict:
    problem = PROBLEMS[name]
    past = campaign_log(name, PAST, n)
    new = campaign_log(name, NEW, n)
    sign = 1.0 if problem.direction == "minimize" else -1.0
    with tempfile.TemporaryDirectory() as tmp:
        trials = _load(problem, past, Path(tmp))
        t0 = time.perf_counter()
        a = advisor.assess(trials, seed=seed, quick=True, jobs=1, plan=False)
        seconds = time.perf_counter() - t0
        names = list(a.surrogates)
        truth = _truth(trials, new, names, seed, sign)
    t = a.ranking
    ok = t[(t["status"] == "ok") & t["guard_coverage"].astype(bool)
           & t["guard_order"].astype(bool)]
    tied = ok[ok["tied_with_leader"].astype(bool)]["surrogate"].tolist()
    crps = {r["surrogate"]: float(r["crps"]) for _, r in ok.iterrows()}
    bt = a.backtest or {}
    scores = {k: v.get("score") for k, v in (bt.get("per_surrogate") or {}).items()}
    runs = default_runs(bt)
    return {"problem": name, "seed": seed, "n_per_campaign": n, "trials": len(past),
            "seconds": seconds, "tied": tied, "crps": crps,
            "calibration_leader": min(tied, key=crps.get) if tied else None,
            "recommended": a.recommendation["surrogate"],
            "pair": a.recommendation.get("pair"),
            "backtest_score": scores, "default_runs": runs,
            "truth": truth, "y_std": float(np.std(trials.y))}


def rules(m: dict) -> dict:
    """The pick of each tie rule, and its true regret (NLL nats / CRPS over sd)."""
    tied = [n for n in m["tied"]]
    leader = m["calibration_leader"]
    if not tied:
        return {}
    out = {"calibration leader": leader}
    sc = {n: m["backtest_score"].get(n) for n in tied if m["backtest_score"].get(n) is not None}
    if len(sc) > 1:
        # the former rule applied to the tied models the backtest ran (it needed all of
        # the tie group backtested, which thorough mode does for up to three models)
        out["backtest score"] = min(sc, key=lambda n: (sc[n], m["crps"][n]))
    cands = [n for n in tied if n != leader and n in m["default_runs"]]
    if leader in m["default_runs"] and cands:
        test = paired_surrogate_test(m["default_runs"], leader, cands)
        out["paired test"] = test["better"] or leader
        out["paired test p_holm"] = {c["surrogate"]: c["p_holm"] for c in test["comparisons"]}
    else:
        out["paired test"] = leader
    rank = {n: i for i, n in enumerate(SIMPLICITY_ORDER)}
    out["simplest"] = min(tied, key=lambda n: (rank.get(n, len(rank)), m["crps"][n]))
    truth = {n: v for n, v in m["truth"].items() if v.get("nll") is not None}
    best_nll = min(v["nll"] for v in truth.values())
    best_crps = min(v["crps"] for v in truth.values())
    regret = {}
    for rule in ("calibration leader", "backtest score", "paired test", "simplest"):
        pick = out.get(rule)
        if pick in truth:
            regret[rule] = {"pick": pick, "nll": truth[pick]["nll"] - best_nll,
                            "crps_sd": (truth[pick]["crps"] - best_crps) / m["y_std"]}
    out["regret"] = regret
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=60)
    ap.add_argument("--problems", default=None)
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    path = RESULTS / "real_logs_tiebreak.json"
    old = json.loads(path.read_text()) if path.exists() else {"results": []}
    done = {(r["problem"], r["seed"], r["n_per_campaign"]) for r in old["results"]}
    rows = list(old["results"])
    for name in (args.problems.split(",") if args.problems else PROBLEMS):
        if (name, args.seed, args.trials) in done:
            continue
        m = measure(name, args.trials, args.seed)
        rows.append(m)
        path.write_text(json.dumps({"results": rows}, indent=1, default=float))
        print(f"{name:14s} tied {m['tied']} scores "
              f"{ {k: round(v, 3) for k, v in m['backtest_score'].items() if v is not None} } "
              f"recommended {m['recommended']} ({m['seconds']:.0f} s)", flush=True)
    for m in rows:
        m["rules"] = rules(m)
    summary = {}
    for rule in ("calibration leader", "backtest score", "paired test", "simplest"):
        vals = [m["rules"]["regret"][rule] for m in rows
                if rule in m["rules"].get("regret", {})]
        if vals:
            summary[rule] = {"cases": len(vals),
                             "mean_regret_nll": float(np.mean([v["nll"] for v in vals])),
                             "mean_regret_crps_sd": float(np.mean([v["crps_sd"] for v in vals])),
                             "picks": [f"{m['problem']}:{m['rules']['regret'][rule]['pick']}"
                                       for m in rows if rule in m["rules"].get("regret", {})]}
    path.write_text(json.dumps({"results": rows, "summary": summary}, indent=1, default=float))
    for rule, s in summary.items():
        print(f"{rule:20s} cases {s['cases']}  NLL regret {s['mean_regret_nll']:.3f}  "
              f"CRPS/sd {s['mean_regret_crps_sd']:.3f}  {s['picks']}")
    print("wrote", path)


if __name__ == "__main__":
    main()
