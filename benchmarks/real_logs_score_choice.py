"""Which cross-validated score, under which validation scheme, best picks the model with
the best true next-campaign NLL / CRPS?  Reads ``benchmarks/results/real_logs.json``
(run ``python -m benchmarks.real_logs`` first) and writes
``benchmarks/results/real_logs_score_choice.json`` plus the table it prints.

Rules compared (each picks one candidate from its cross-validated scores):

* ``nll``, ``crps``: the lowest mean held-out NLL / CRPS;
* ``rank_sum``: the lowest sum of its NLL rank and CRPS rank (ties → lower NLL);
* ``crps_nll_guard_d``: the lowest CRPS among the models whose NLL is within ``d`` nats
  per point of the best NLL (d = 0.1, 0.25, 0.5);
* ``nll_crps_guard_r``: the lowest NLL among the models whose CRPS is within a factor
  ``1 + r`` of the best CRPS (r = 0.05, 0.10);
* ``advisor``: the advisor's own recommendation (its default scheme and rule);
* ``always_<name>``: one fixed candidate everywhere (the reference a rule must beat).

Schemes: each single scheme in the results (``forward``, ``campaign``, ``kfold``), and
``forward+campaign`` = the mean of the two schemes' scores for each model (both are
honest about time order; k-fold is known to be optimistic on optimization logs).

Regret of a pick = its true score minus the best candidate's true score (NLL in nats
per point; CRPS divided by the past log's objective standard deviation).

Optimization outcome (a proxy that needs no new black-box evaluation): with
``--optimization``, every candidate is refitted on the past log exactly as for the truth
(same seeds) and its predictions on the new campaigns are kept as ``pool_regret`` (in
each new campaign, the normalized regret of the trial it predicts best) and
``spearman`` (its rank correlation with the objective within each new campaign); the
table then gives each rule's mean pool regret and Spearman.  Cached in
``benchmarks/results/real_logs_optimization_truth.json``.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

RESULTS = Path(__file__).resolve().parent / "results"


def _scores(cv: dict, scheme: str) -> dict:
    parts = scheme.split("+")
    if not all(p in cv for p in parts):
        return {}
    out = {}
    for n in cv[parts[0]]:
        vals = [cv[p].get(n, {}) for p in parts]
        if all(v.get("nll") is not None and v.get("crps") is not None for v in vals):
            out[n] = {"nll": float(np.mean([v["nll"] for v in vals])),
                      "crps": float(np.mean([v["crps"] for v in vals]))}
    return out


def _pick(rule: str, s: dict) -> str | None:
    if not s:
        return None
    nll = {n: v["nll"] for n, v in s.items()}
    crps = {n: v["crps"] for n, v in s.items()}
    if rule == "nll":
        return min(nll, key=nll.get)
    if rule == "crps":
        return min(crps, key=crps.get)
    if rule == "rank_sum":
        rn = {n: i for i, n in enumerate(sorted(nll, key=nll.get))}
        rc = {n: i for i, n in enumerate(sorted(crps, key=crps.get))}
        return min(s, key=lambda n: (rn[n] + rc[n], nll[n]))
    if rule.startswith("crps_nll_guard_"):
        d = float(rule.rsplit("_", 1)[1])
        best = min(nll.values())
        ok = [n for n in s if nll[n] <= best + d]
        return min(ok, key=crps.get)
    if rule.startswith("nll_crps_guard_"):
        r = float(rule.rsplit("_", 1)[1])
        best = min(crps.values())
        ok = [n for n in s if crps[n] <= best * (1 + r)]
        return min(ok, key=nll.get)
    raise ValueError(rule)


RULES = ["nll", "crps", "rank_sum", "crps_nll_guard_0.1", "crps_nll_guard_0.25",
         "crps_nll_guard_0.5", "nll_crps_guard_0.05", "nll_crps_guard_0.1"]
SCHEMES = ["forward", "campaign", "kfold", "forward+campaign"]


def regrets(result: dict, pick: str | None, truth_key: str = "truth") -> dict | None:
    truth = {n: v for n, v in (result.get(truth_key) or {}).items()
             if v.get("nll") is not None}
    if pick not in truth:
        return None
    sd = max(result.get("y_std", 1.0), 1e-12)
    ranked = sorted(truth, key=lambda n: truth[n]["nll"])
    return {"nll": truth[pick]["nll"] - min(v["nll"] for v in truth.values()),
            "crps": (truth[pick]["crps"] - min(v["crps"] for v in truth.values())) / sd,
            "top2": pick in ranked[:2],
            "pool_regret": truth[pick].get("pool_regret"),
            "spearman": truth[pick].get("spearman")}


def _mean_of(per, key):
    vals = [g[key] for *_, g in per if g.get(key) is not None]
    return float(np.mean(vals)) if vals else None


def tabulate(results: list[dict], truth_key: str = "truth") -> list[dict]:
    rows = []
    names = list(dict.fromkeys(n for res in results for n in res["candidates"]))
    combos = ([(sc, r) for sc in SCHEMES for r in RULES] + [("default", "advisor")]
              + [("none", f"always_{n}") for n in names])
    for scheme, rule in combos:
        per = []
        for res in results:
            if rule == "advisor":
                pick = res["pick"]
            elif rule.startswith("always_"):
                pick = rule[len("always_"):]
            else:
                pick = _pick(rule, _scores(res["cv"], scheme))
            g = regrets(res, pick, truth_key)
            if g is not None:
                per.append((res["problem"], res["seed"], pick, g))
        if not per:
            continue
        by_problem = {}
        for p, _, _, g in per:
            by_problem.setdefault(p, []).append(g["nll"])
        rows.append({"truth": truth_key, "scheme": scheme, "rule": rule, "cases": len(per),
                     "mean_regret_nll": float(np.mean([g["nll"] for *_, g in per])),
                     "se_regret_nll": float(np.std([g["nll"] for *_, g in per], ddof=1)
                                            / np.sqrt(len(per))) if len(per) > 1 else None,
                     "max_regret_nll": float(np.max([g["nll"] for *_, g in per])),
                     "mean_regret_crps_sd": float(np.mean([g["crps"] for *_, g in per])),
                     "top2_share": float(np.mean([g["top2"] for *_, g in per])),
                     "mean_pool_regret": _mean_of(per, "pool_regret"),
                     "mean_true_spearman": _mean_of(per, "spearman"),
                     "regret_nll_by_problem": {p: float(np.mean(v)) for p, v in by_problem.items()},
                     "picks": [f"{p}/{s}:{k}" for p, s, k, _ in per]})
    return rows


OPT_TRUTH = RESULTS / "real_logs_optimization_truth.json"


def optimization_truth(src: dict) -> dict:
    """Refit every candidate on each past log (the truth's seeds) and keep what its
    predictions on the new campaigns are worth to an optimizer (module docstring)."""
    import sys
    import tempfile
    from pathlib import Path as _P

    root = str(_P(__file__).resolve().parents[1])
    if root not in sys.path:
        sys.path.insert(0, root)
    from benchmarks.real_logs.campaigns import campaign_log
    from benchmarks.real_logs.measure import NEW, PAST, _load, _truth
    from benchmarks.real_logs.problems import PROBLEMS

    out = json.loads(OPT_TRUTH.read_text()) if OPT_TRUTH.exists() else {}
    # seed by seed, so that a partial run covers every problem
    for res in sorted(src["results"], key=lambda r: (r["seed"], r["problem"])):
        key = f"{res['problem']}/{res['seed']}/{res['n_per_campaign']}"
        if key in out:
            continue
        problem = PROBLEMS[res["problem"]]
        sign = 1.0 if problem.direction == "minimize" else -1.0
        past = campaign_log(res["problem"], PAST, res["n_per_campaign"])
        new = campaign_log(res["problem"], NEW, res["n_per_campaign"])
        with tempfile.TemporaryDirectory() as tmp:
            trials = _load(problem, past, _P(tmp))
            out[key] = _truth(trials, new, res["candidates"], res["seed"], sign)
        OPT_TRUTH.write_text(json.dumps(out, indent=1))
        print("optimization truth", key, flush=True)
    return out


def _merge_optimization(src: dict, opt: dict) -> float:
    """Add pool_regret / spearman to each result's truth; returns the largest NLL
    difference between the refit and the stored truth (0 when the refit reproduces)."""
    worst = 0.0
    for res in src["results"]:
        got = opt.get(f"{res['problem']}/{res['seed']}/{res['n_per_campaign']}") or {}
        for n, v in (res.get("truth") or {}).items():
            g = got.get(n) or {}
            if v.get("nll") is not None and g.get("nll") is not None:
                worst = max(worst, abs(v["nll"] - g["nll"]))
                v["pool_regret"], v["spearman"] = g.get("pool_regret"), g.get("spearman")
    return worst


def main():
    import sys

    src = json.loads((RESULTS / "real_logs.json").read_text())
    if "--optimization" in sys.argv or OPT_TRUTH.exists():
        opt = optimization_truth(src) if "--optimization" in sys.argv else \
            json.loads(OPT_TRUTH.read_text())
        diff = _merge_optimization(src, opt)
        print(f"optimization truth merged (refit vs stored truth NLL: largest difference "
              f"{diff:.2g} nats)")
    out = {"source": "real_logs.json", "n_per_campaign": src["n_per_campaign"],
           "seeds": src["seeds"], "truths": {}}
    for key, what in (("truth", "fitted on the past log, scored on the new campaigns"),
                      ("truth_within", "fitted on the past log + each new campaign's "
                                       "first half, scored on the second halves")):
        rows = tabulate(src["results"], key)
        if not rows:
            continue
        out["truths"][key] = {"description": what, "rules": rows}
        print(f"\n## {key}: {what}")
        print(f"{'scheme':17s} {'rule':22s} {'cases':>5s} {'NLL regret':>10s} {'±se':>5s} {'max':>6s} "
              f"{'CRPS/sd':>8s} {'top-2':>6s} {'pool reg':>8s} {'rho new':>7s}")
        for r in sorted(rows, key=lambda r: r["mean_regret_nll"]):
            pr, rho = r.get("mean_pool_regret"), r.get("mean_true_spearman")
            print(f"{r['scheme']:17s} {r['rule']:22s} {r['cases']:5d} "
                  f"{r['mean_regret_nll']:10.3f} {r['se_regret_nll'] or 0:5.2f} "
                  f"{r['max_regret_nll']:6.2f} "
                  f"{r['mean_regret_crps_sd']:8.3f} {r['top2_share']:6.2f} "
                  f"{'–' if pr is None else f'{pr:.3f}':>8s} "
                  f"{'–' if rho is None else f'{rho:.2f}':>7s}")
    out["truth_seed_spread"] = seed_spread(src["results"])
    print("\nspread of the true next-campaign NLL over model seeds (same logs), per problem:")
    for p, v in out["truth_seed_spread"].items():
        print(f"  {p:14s} mean sd {v['mean_sd']:.2f}  largest {v['largest']} ({v['max_sd']:.2f})")
    (RESULTS / "real_logs_score_choice.json").write_text(json.dumps(out, indent=1))


def seed_spread(results: list[dict]) -> dict:
    """How much each candidate's true NLL moves with its own training seed alone (the
    logs are the same for every seed): the noise floor under any rule's regret."""
    out = {}
    for p in dict.fromkeys(r["problem"] for r in results):
        rs = [r for r in results if r["problem"] == p]
        if len(rs) < 2:
            continue
        sds = {}
        for n in rs[0]["candidates"]:
            v = [r["truth"][n]["nll"] for r in rs if r["truth"].get(n, {}).get("nll") is not None]
            if len(v) > 1:
                sds[n] = float(np.std(v, ddof=1))
        if sds:
            big = max(sds, key=sds.get)
            out[p] = {"sd_by_model": sds, "mean_sd": float(np.mean(list(sds.values()))),
                      "largest": big, "max_sd": sds[big]}
    return out


if __name__ == "__main__":
    main()
